"""The metric records: one place that says, per metric, its name, its label (one spelling
everywhere), which direction is better, how it is computed from predictions (always with
scikit-learn's own function), what it needs from a model and which targets it can score.

Every other module asks a record; adding a metric is one entry in `METRICS`. Importing this
module imports no scikit-learn: the spec validates against the names cheaply, and the
scoring functions import scikit-learn when they are first called."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

__all__ = ["Metric", "METRICS", "get_metric", "metric_label", "TASK_DEFAULTS"]


@dataclass(frozen=True)
class Metric:
    """One metric: what it is called, which way is better and how to compute it."""

    name: str
    label: str
    better: str  # "lower" or "higher"
    function: str  # the function of sklearn.metrics that computes it
    scorer: str  # scikit-learn's scorer name (higher is better), for permutation importance
    unit: str  # "target" (the target's units), "unitless" or "fraction"
    description: str
    task: str = "regression"
    needs: str = "values"  # what it scores: "values" (a number per row), "probabilities"
    #                        (one per class and row) or "classes" (the most probable class)
    target_check: Callable[[object], str | None] | None = None
    compute: Callable | None = None  # classes: (y_true, probabilities, classes) -> float

    def _function(self):
        from sklearn import metrics

        return getattr(metrics, self.function)

    def score(self, y_true, y_pred) -> float:
        """The metric of one set of predictions."""
        return float(self._function()(y_true, y_pred))

    def score_columns(self, y_true, predictions) -> list[float]:
        """The metric of many cells' predictions (the columns of `predictions`) in one call of
        scikit-learn's function with multioutput="raw_values".

        Each column is reduced on its own, contiguous in memory (Fortran order), which gives
        bit for bit the value of a separate `score` call per cell (tests/test_path_engine.py
        checks this) at a fraction of the per-call cost."""
        import numpy as np

        P = np.asfortranarray(predictions, dtype=np.float64)
        Y = np.asfortranarray(np.repeat(np.asarray(y_true, dtype=np.float64)[:, None],
                                        P.shape[1], axis=1))
        values = self._function()(Y, P, multioutput="raw_values")
        return [float(v) for v in np.atleast_1d(values)]

    def score_classes(self, y_true, probabilities, classes) -> float:
        """The metric of one cell's class probabilities (columns in `classes` order); a
        metric of classes scores the most probable class of each row, as `predict` does."""
        return float(self.compute(y_true, probabilities, classes))

    def scorer_for(self, classes=()):
        """A scikit-learn scorer for permutation importance (higher is better): the named
        one for numbers; for classes one that scores the pipeline's class probabilities
        with this record's own computation, so it agrees with the stored scores."""
        if self.task != "classification":
            return self.scorer
        from sklearn.metrics import make_scorer

        labels = list(classes)
        return make_scorer(lambda y, p: self.compute(y, p, labels),
                           response_method="predict_proba",
                           greater_is_better=self.better == "higher")

    def target_problem(self, y) -> str | None:
        """Why this metric cannot score this target (None if it can)."""
        return self.target_check(y) if self.target_check is not None else None

    def unit_text(self, target: str) -> str:
        """The metric's units in words, e.g. 'units of yield_kg_m2'."""
        return {"target": f"units of {target}", "unitless": "unitless",
                "fraction": f"fraction of |{target}|"}[self.unit]

    def axis_label(self, target: str, *, prefix: str = "CV") -> str:
        """An axis label naming the metric and its units."""
        return f"{prefix} {self.label} ({self.unit_text(target)})".strip()

    @property
    def sign(self) -> float:
        """+1 when lower is better, −1 when higher is: sign × score sorts best first."""
        return 1.0 if self.better == "lower" else -1.0


def _no_zeros(y) -> str | None:
    import numpy as np

    zeros = int(np.count_nonzero(np.asarray(y, dtype=float) == 0.0))
    if zeros:
        return (f"has {zeros} rows equal to 0, where a percentage error is undefined "
                "(scikit-learn would divide by a tiny epsilon instead and report a huge "
                "number)")
    return None


def _log_loss(y, p, classes):
    from sklearn.metrics import log_loss

    return log_loss(y, p, labels=list(classes))


def _brier(y, p, classes):
    from sklearn.metrics import brier_score_loss

    return brier_score_loss(y, p, labels=list(classes), scale_by_half="auto")


def _roc_auc(y, p, classes):
    """ROC AUC; NaN (stored NULL, and named by the picks' notes) where the rows hold one
    class, without scikit-learn's warning on every such fold."""
    import warnings

    from sklearn.exceptions import UndefinedMetricWarning
    from sklearn.metrics import roc_auc_score

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UndefinedMetricWarning)
        if len(classes) == 2:
            return roc_auc_score(y, p[:, 1])
        return roc_auc_score(y, p, multi_class="ovr", average="macro", labels=list(classes))


def _most_probable(p, classes):
    import numpy as np

    return np.asarray(classes)[np.argmax(p, axis=1)]


def _accuracy(y, p, classes):
    from sklearn.metrics import accuracy_score

    return accuracy_score(y, _most_probable(p, classes))


def _balanced_accuracy(y, p, classes):
    """Mean recall over the classes the rows hold; rows lacking a class the model predicts
    (a fold of time or group folds) are scored so without scikit-learn's warning."""
    import warnings

    from sklearn.metrics import balanced_accuracy_score

    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="y_pred contains classes not in y_true")
        return balanced_accuracy_score(y, _most_probable(p, classes))


METRICS: dict[str, Metric] = {m.name: m for m in (
    Metric("rmse", "RMSE", "lower", "root_mean_squared_error",
           "neg_root_mean_squared_error", "target", "root mean squared error"),
    Metric("mae", "MAE", "lower", "mean_absolute_error", "neg_mean_absolute_error", "target",
           "mean absolute error"),
    Metric("r2", "R²", "higher", "r2_score", "r2", "unitless",
           "coefficient of determination"),
    Metric("mape", "MAPE", "lower", "mean_absolute_percentage_error",
           "neg_mean_absolute_percentage_error", "fraction",
           "mean absolute percentage error, as a fraction (0.05 = 5 %) of |target|",
           target_check=_no_zeros),
    Metric("log_loss", "log loss", "lower", "log_loss", "neg_log_loss", "unitless",
           "mean negative log-likelihood of the true class (natural log)",
           task="classification", needs="probabilities", compute=_log_loss),
    Metric("brier", "Brier score", "lower", "brier_score_loss", "neg_brier_score", "unitless",
           "mean squared distance between the class probabilities and the truth: with two "
           "classes that of the second class's probability (0 to 1), with more the sum over "
           "classes (0 to 2), as scikit-learn's brier_score_loss with scale_by_half='auto'",
           task="classification", needs="probabilities", compute=_brier),
    Metric("roc_auc", "ROC AUC", "higher", "roc_auc_score", "roc_auc", "unitless",
           "area under the ROC curve of the second class's probability; with three or more "
           "classes the macro average of one-vs-rest areas",
           task="classification", needs="probabilities", compute=_roc_auc),
    Metric("accuracy", "accuracy", "higher", "accuracy_score", "accuracy", "unitless",
           "share of rows whose most probable class is the true one",
           task="classification", needs="classes", compute=_accuracy),
    Metric("balanced_accuracy", "balanced accuracy", "higher", "balanced_accuracy_score",
           "balanced_accuracy", "unitless", "mean over classes of the share of that class's "
           "rows whose most probable class is the true one",
           task="classification", needs="classes", compute=_balanced_accuracy),
)}
"""Every metric foldwise scores, by name."""


def get_metric(name: str) -> Metric:
    """The record of a metric; a name foldwise does not know (say, from a store written by a
    newer foldwise) gets a neutral record so that reading never fails on it."""
    if name in METRICS:
        return METRICS[name]
    return Metric(name, name.upper(), "lower", "", "", "unitless", name)


def metric_label(name: str) -> str:
    """The one spelling of a metric's name in tables, sentences and figures."""
    return get_metric(name).label


TASK_DEFAULTS = {"regression": ["rmse", "mae", "r2"],
                 "classification": ["log_loss", "brier", "roc_auc", "accuracy"]}
"""The metrics a spec gets when it lists none, per task (the first decides picks)."""

"""The metric records: one place that says, per metric, its name, its label (one spelling
everywhere), which direction is better, how it is computed from predictions (always with
scikit-learn's own function), what it needs from a model and which targets it can score.

Every other module asks a record; adding a metric is one entry in `METRICS`. Importing this
module imports no scikit-learn: the spec validates against the names cheaply, and the
scoring functions import scikit-learn when they are first called."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

__all__ = ["Metric", "METRICS", "get_metric", "metric_label"]


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
    needs: str = "values"  # what a model must give: "values" (a number per row)
    target_check: Callable[[object], str | None] | None = None

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


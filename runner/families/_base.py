"""What every family shares: the column preprocessors, the plain one-fit-per-cell loop, and
the grouping that lets a family score a whole grid from one fit.

`fit_grouped` is the base behaviour; a family fills one hook, `evaluate(group, ...)`, which
fits once on already-transformed rows and returns every cell's predictions. Cells that share
all parameters but the family's path parameters form a group; a group of two or more cells
is scored by the hook, anything else by `fit_each`, so results never depend on the route
(the path evaluators in `paths.py` reproduce separate scikit-learn fits)."""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field
from typing import Callable, Sequence

import numpy as np
import scipy.sparse as sp
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import (FunctionTransformer, OneHotEncoder, OrdinalEncoder,
                                   StandardScaler)

from ._replay import answered, questions, stacked

__all__ = ["CellFit", "MedianImputer", "tree_preprocessor", "linear_preprocessor", "fit_each",
           "fit_grouped", "predict", "path_groups", "work_units", "prediction_columns",
           "needs_whole_model", "PLAIN"]

PLAIN = "plain"
"""`CellFit.how` of a cell fitted on its own."""


@dataclass
class CellFit:
    """One cell fitted on one set of rows: predictions for each evaluation set, or an error."""

    predictions: list[np.ndarray] = field(default_factory=list)
    fit_seconds: float = 0.0
    n_leaves: float | None = None
    n_warnings: int = 0
    error_kind: str | None = None
    error: str | None = None
    how: str = PLAIN  # "plain", or the path evaluator that scored it ("tree_path", ...)
    reading: dict | None = None  # what `read` took from the fitted model (see fit_each)
    model: object = None  # a group hook's exact model of this cell, until it is read
    make_model: Callable[[], object] | None = None  # builds that model when it is read


Read = Callable[[object, object], dict]
"""(fitted pipeline, fitting rows) -> what the explain step keeps of one cell's fit. A
reader whose attribute `whole_model` is False reads only the model's own importances
(`feature_importances_` or coefficients), so a family may hand it a stand-in that holds
just those and let the fitted parts go as it works."""


def needs_whole_model(read: Read | None) -> bool:
    """Whether `read` reads more of a fitted model than its own importances."""
    return read is not None and getattr(read, "whole_model", True)


def as_tree_input(X) -> np.ndarray:
    """Columns as scikit-learn's trees read them: float32, the type a tree casts its input
    to before fitting or predicting (so every split and prediction stays the same). Cast
    here, column blocks are stacked in float32: no float64 copy of the rows is made. A value
    beyond float32's range becomes infinite, which the tree then refuses, as it always did."""
    with np.errstate(over="ignore"):
        return np.asarray(X, dtype=np.float32)


def tree_preprocessor(numeric: list[str], categorical: list[str]) -> ColumnTransformer:
    """Numeric columns as they are (NaN kept: trees route it); categories as ordinal codes;
    both as float32 (`as_tree_input`)."""
    parts = [("num", FunctionTransformer(as_tree_input, feature_names_out="one-to-one"),
              list(numeric))]
    if categorical:
        parts.append(("cat", OrdinalEncoder(handle_unknown="use_encoded_value",
                                            unknown_value=np.nan, encoded_missing_value=np.nan,
                                            dtype=np.float32), list(categorical)))
    return ColumnTransformer(parts, remainder="drop", sparse_threshold=0.0)


LATER_BYTES = 2 ** 25
"""Fitting rows of at most this size, missing nothing, are kept by `MedianImputer` until
their medians are first asked for; larger ones have them found at once, so that a large
fit holds no second copy of its rows."""


class MedianImputer(SimpleImputer):
    """scikit-learn's imputer with strategy "median", fitted faster: each float64 column's
    two middle values are found by partition instead of by sorting a masked copy of every
    column, then halved the way SimpleImputer does ((low + high) / 2, so a sum beyond
    float64's range is infinite there too). The statistics are the same numbers (tested
    against SimpleImputer); any other strategy, marker or type is SimpleImputer's own.

    When the fitting rows miss nothing (and take at most `LATER_BYTES`), the medians are
    found when first asked for (`statistics_`, a row with a missing value, a copy or a
    pickle): rows that miss nothing pass through unchanged without them, which is what
    most fold fits of complete data ever do."""

    def _dense_fit(self, X, strategy, missing_values, fill_value):
        if strategy != "median" or not _is_nan(missing_values) or X.dtype != np.float64:
            return super()._dense_fit(X, strategy, missing_values, fill_value)
        missing = np.isnan(X)
        self._fit_indicator(missing)
        if self.copy and not self.add_indicator and X.nbytes <= LATER_BYTES \
                and not missing.any():
            return _Later(X)  # `X` is the imputer's own validated copy
        return _medians(X, missing, self.keep_empty_features)

    @property
    def statistics_(self):
        value = self.__dict__.get("_statistics")
        if value is None:
            raise AttributeError("statistics_")
        if isinstance(value, _Later):
            value = self.__dict__["_statistics"] = _medians(value.rows, None,
                                                            self.keep_empty_features)
        return value

    @statistics_.setter
    def statistics_(self, value):
        self.__dict__["_statistics"] = value

    def fit_transform(self, X, y=None, **fit_params):
        """Fitted on rows that miss nothing, those rows come back as `transform` would give
        them (a copy of the validated rows, same order in memory) without validating them
        a second time."""
        self.fit(X, y, **fit_params)
        later = self.__dict__.get("_statistics")
        if isinstance(later, _Later):
            return later.rows.copy(order="K")
        return self.transform(X)

    def transform(self, X):
        if not isinstance(self.__dict__.get("_statistics"), _Later) or sp.issparse(X):
            return super().transform(X)
        rows = self._validate_input(X, in_fit=False)  # refuses a wrong width, as before
        if np.isnan(rows).any():
            return super().transform(X)
        return rows  # every column has a median and nothing is missing: nothing to fill

    def __getstate__(self):
        if isinstance(self.__dict__.get("_statistics"), _Later):
            self.statistics_  # noqa: B018  (a pickle holds the medians, never the rows)
        return super().__getstate__()

    def __setstate__(self, state):
        if "statistics_" in state:  # pickled before the medians could wait
            state = {**state, "_statistics": state["statistics_"]}
            del state["statistics_"]
        super().__setstate__(state)


class _Later:
    """Fitting rows whose medians are not found yet."""

    __slots__ = ("rows",)

    def __init__(self, rows: np.ndarray):
        self.rows = rows


def _medians(X: np.ndarray, missing: np.ndarray | None, keep_empty: bool) -> np.ndarray:
    """Each column's median over its present values, as SimpleImputer finds it."""
    lows, highs = np.full(X.shape[1], np.nan), np.full(X.shape[1], np.nan)
    for j in range(X.shape[1]):
        present = X[~missing[:, j], j] if missing is not None and missing[:, j].any() \
            else X[:, j]
        if len(present):
            high = len(present) // 2
            low = high if len(present) % 2 else high - 1
            middle = np.partition(present, sorted({low, high}))
            lows[j], highs[j] = middle[low], middle[high]
    medians = (lows + highs) / 2  # one array sum: one overflow warning, as scikit-learn's
    medians[np.isnan(lows)] = 0.0 if keep_empty else np.nan
    return medians


def _is_nan(value) -> bool:
    return isinstance(value, float) and np.isnan(value)


def linear_preprocessor(numeric: list[str], categorical: list[str]) -> ColumnTransformer:
    """Median-impute and standardise numbers; impute the mode and one-hot encode categories."""
    parts = []
    if numeric:
        parts.append(("num", Pipeline([("impute", MedianImputer(strategy="median")),
                                       ("scale", StandardScaler())]), list(numeric)))
    if categorical:
        parts.append(("cat", Pipeline([
            ("impute", SimpleImputer(strategy="most_frequent")),
            ("onehot", OneHotEncoder(handle_unknown="ignore", sparse_output=False))]),
            list(categorical)))
    return ColumnTransformer(parts, remainder="drop", sparse_threshold=0.0)


def prediction_columns(pipeline, X) -> dict[str, np.ndarray]:
    """A fitted pipeline's predictions for the rows X as named columns: `predicted` for a
    regression pipeline; for a classifier `predicted_class` (the most probable class, as
    `predict` gives it) and `probability_<class>` for each class, in `classes_` order."""
    model = pipeline.steps[-1][1]
    if not hasattr(model, "classes_"):
        return {"predicted": np.asarray(pipeline.predict(X), dtype=np.float64)}
    proba = pipeline.predict_proba(X)
    out = {"predicted_class": model.classes_[np.argmax(proba, axis=1)]}
    for k, label in enumerate(model.classes_):
        out[f"probability_{label}"] = proba[:, k]
    return out


def count_warnings(caught) -> int:
    """The warnings that count against a fit: all but deprecation notices."""
    return sum(1 for w in caught if not issubclass(w.category, (DeprecationWarning, FutureWarning)))


def _record_error(result: CellFit, exc: Exception) -> None:
    result.error_kind = type(exc).__name__
    result.error = str(exc).splitlines()[0][:500] if str(exc) else type(exc).__name__
    result.predictions = []


def predict(estimator, X, task: str):
    """What a fitted pipeline says of rows: a value per row (regression), or the probability
    of each class per row, columns in `classes_` order (classification)."""
    return estimator.predict_proba(X) if task == "classification" else estimator.predict(X)


def _read(read: Read | None, result: CellFit, pipeline, X_fit) -> None:
    """Keep `read`'s reading of a fitted cell; a reading that fails is left out (the
    explain step then refits that cell and meets the error itself)."""
    if read is None:
        return
    try:
        result.reading = read(pipeline, X_fit)
    except Exception:
        result.reading = None


def fit_each(make_estimator: Callable, cells: list[dict], X_fit, y_fit, X_evals, *, seed: int,
             numeric: list[str], categorical: list[str],
             leaves: Callable | None = None, task: str = "regression",
             read: Read | None = None, replay: bool = False) -> list[CellFit]:
    """Fit every cell separately on the same rows and predict each evaluation set; with
    `read`, also keep its reading of each fitted pipeline (`CellFit.reading`). With
    `replay` (a model that predicts each row on its own), the rows the reader asks for are
    predicted in a few stacked calls and its reading answered from them (`_replayed`)."""
    out = []
    for params in cells:
        result = CellFit()
        start = time.perf_counter()
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                est = make_estimator(params, seed=seed, y_fit=y_fit, numeric=numeric,
                                     categorical=categorical, task=task)
                est.fit(X_fit, y_fit)
                result.fit_seconds = time.perf_counter() - start
                result.predictions = [predict(est, X, task) for X in X_evals]
            result.n_warnings = count_warnings(caught)
            if leaves is not None:
                result.n_leaves = leaves(est)
        except Exception as exc:  # a failed fit is data: recorded, the sweep goes on
            result.fit_seconds = time.perf_counter() - start
            _record_error(result, exc)
        else:
            _read(read, result, _replayed(read, est, X_fit, y_fit, task) if replay else est,
                  X_fit)
        out.append(result)
    return out


def _replayed(read: Read | None, pipeline, X_fit, y_fit, task: str):
    """`pipeline` with its model replaced by a stand-in that answers the rows `read` asks
    for from stacked predictions of them all (`_replay.py`); the pipeline itself when the
    reader reads no predictions, or its questions cannot be recorded or answered."""
    if not needs_whole_model(read):
        return pipeline
    prep, model = pipeline.named_steps["prep"], pipeline.named_steps["model"]
    asked = questions(read, prep, X_fit, y_fit, model.n_features_in_, task)
    if asked is None:
        return pipeline
    blocks, cut = stacked(asked)
    try:
        answers = cut([predict(model, block, task) for block in blocks])
    except Exception:  # the reader meets the same trouble on the pipeline, and says so
        return pipeline
    stand_in = answered(asked, answers, model.feature_importances_,
                        getattr(model, "classes_", None))
    return Pipeline([("prep", prep), ("model", stand_in)])


def path_groups(cells: Sequence[dict], path_params: Sequence[str],
                eligible: Callable[[dict], bool] | None = None
                ) -> tuple[list[list[int]], list[int]]:
    """Positions of cells that one fit can score together, and of those fitted on their own.

    Cells group when every parameter except `path_params` is equal (and `eligible` accepts
    them); a group needs two or more cells, i.e. a grid that varies a path parameter."""
    groups: dict[str, list[int]] = {}
    alone: list[int] = []
    for i, params in enumerate(cells):
        if eligible is not None and not eligible(params):
            alone.append(i)
            continue
        rest = {k: v for k, v in params.items() if k not in path_params}
        groups.setdefault(repr(sorted(rest.items())), []).append(i)
    together = []
    for members in groups.values():
        if len(members) >= 2:
            together.append(members)
        else:
            alone.extend(members)
    return together, sorted(alone)


def work_units(cells: Sequence[dict], path_params: Sequence[str], *, paths: bool,
               cost_alone: Callable[[dict], float], cost_group: Callable[[list[dict]], float],
               eligible: Callable[[dict], bool] | None = None
               ) -> list[tuple[list[int], float]]:
    """The indivisible pieces of work `fit_cells` would do on these cells, with a rough
    relative cost each (about one unpruned tree fit on the same rows = 1): a path group is
    one piece, every other cell its own. The engine uses them to cut and order tasks."""
    if not paths:
        return [([i], cost_alone(p)) for i, p in enumerate(cells)]
    together, alone = path_groups(cells, path_params, eligible)
    units = [([i], cost_alone(cells[i])) for i in alone]
    units += [(members, cost_group([cells[i] for i in members])) for members in together]
    return units


Evaluate = Callable[..., list[CellFit]]
"""(group params, Xt_fit, y_fit, Xt_evals, seed=..., task=...) -> one CellFit per cell,
predictions set (values, or class probabilities for classification); `CellFit.model` set to
the cell's own fitted model where the group's fit holds it exactly (a forest's first trees),
or `CellFit.make_model` to build it on demand (a pruned tree from the unpruned one), so it
can be read like a plain fit; built only to be read, one at a time."""


def fit_grouped(make_estimator: Callable, preprocessor: Callable, evaluate: Evaluate,
                how: Callable[[dict], str], path_params: Sequence[str], cells: list[dict],
                X_fit, y_fit, X_evals, *, seed: int, numeric: list[str],
                categorical: list[str], paths: bool = True, leaves: Callable | None = None,
                eligible: Callable[[dict], bool] | None = None,
                task: str = "regression", read: Read | None = None,
                replay: bool = False) -> list[CellFit]:
    """Score every cell: each group of path-sharing cells from one fit, the rest one by one
    (`fit_each`, with `replay` where the family's reader can be answered by replay).

    `how(params)` names the path evaluator a group runs, recorded in `CellFit.how` (also
    when the group's fit fails). The preprocessor is fitted once per call (it depends on no
    cell's parameters) exactly as a Pipeline fits it, and the evaluation sets are
    transformed with it once.

    `fit_seconds` of a grouped cell is an equal share of its group's time: the group's share
    of the preprocessing, its one fit and the derivation of all its cells' predictions. So
    summing `fit_seconds` over cells gives the compute time spent, whichever way they ran.
    `n_warnings` of a grouped cell counts the warnings its group's one fit raised, plus
    those of its own part when the evaluator can tell them apart (a ridge alpha's solve).
    With `read`, every plain fit is read, and a grouped cell where the hook hands back or
    builds its exact model (a forest's first trees, a pruned tree, a ridge alpha); other
    grouped cells (a lasso or elastic-net path's) have no reading (the explain step refits
    them)."""
    if not paths:
        return fit_each(make_estimator, cells, X_fit, y_fit, X_evals, seed=seed,
                        numeric=numeric, categorical=categorical, leaves=leaves, task=task,
                        read=read, replay=replay)
    together, alone = path_groups(cells, path_params, eligible)
    out: list[CellFit | None] = [None] * len(cells)
    if alone:
        plain = fit_each(make_estimator, [cells[i] for i in alone], X_fit, y_fit, X_evals,
                         seed=seed, numeric=numeric, categorical=categorical, leaves=leaves,
                         task=task, read=read, replay=replay)
        for i, fit in zip(alone, plain):
            out[i] = fit
    if together:
        start = time.perf_counter()
        prep_error, Xt_fit, Xt_evals = None, None, None
        try:
            prep = preprocessor(numeric, categorical)
            Xt_fit = prep.fit_transform(X_fit, y_fit)
            Xt_evals = [prep.transform(X) for X in X_evals]
        except Exception as exc:  # the same failure a Pipeline of any of these cells meets
            prep_error = exc
        prep_share = (time.perf_counter() - start) / len(together)
        # A hook whose models are let go as they are built (`lets_go`) hands back stand-ins
        # that hold the own importances only; a reader that needs more is answered from
        # predictions of the rows it asks for, made while the model was built (`_replay`).
        replay = getattr(evaluate, "lets_go", False) and needs_whole_model(read)
        # The transformed fitting rows are this call's own array (the preprocessor stacks
        # its parts into a new one): an evaluator that `takes_scratch` may overwrite them in
        # the last group, which reads them last, instead of working on a copy.
        scratch = getattr(evaluate, "takes_scratch", False) and Xt_fit is not X_fit
        for n, members in enumerate(together):
            group = [cells[i] for i in members]
            asked = questions(read, prep, X_fit, y_fit, Xt_fit.shape[1], task) \
                if replay and prep_error is None else None
            blocks, cut = stacked(asked or [])
            fits = _evaluate_group(evaluate, group, prep_error, prep_share, Xt_fit, y_fit,
                                   [*(Xt_evals or []), *blocks], seed, task,
                                   scratch=scratch and n == len(together) - 1)
            for i, fit in zip(members, fits):
                fit.how = how(group[0])
                model = fit.model if fit.model is not None or read is None else \
                    _made(fit.make_model)
                fit.make_model = None
                if asked is not None and model is not None:
                    model = answered(asked, cut(fit.predictions[len(Xt_evals):]),
                                     model.feature_importances_,
                                     getattr(model, "classes_", None))
                    del fit.predictions[len(Xt_evals):]
                if model is not None and fit.error is None and (asked is not None or
                                                                not replay):
                    _read(read, fit, Pipeline([("prep", prep), ("model", model)]), X_fit)
                fit.model = None  # the fitted model leaves no task
                out[i] = fit
    return out  # type: ignore[return-value]


def _made(make_model: Callable[[], object] | None):
    """The model `make_model` builds, or None when there is none or it cannot be built (the
    explain step then refits the cell and meets the trouble itself)."""
    if make_model is None:
        return None
    try:
        return make_model()
    except Exception:
        return None


def _evaluate_group(evaluate: Evaluate, group: list[dict], prep_error, prep_seconds: float,
                    Xt_fit, y_fit, Xt_evals, seed: int, task: str, *,
                    scratch: bool = False) -> list[CellFit]:
    start = time.perf_counter()
    n_warnings = 0
    try:
        if prep_error is not None:
            raise prep_error
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            own = {"scratch": True} if scratch else {}
            fits = evaluate(group, Xt_fit, y_fit, Xt_evals, seed=seed, task=task, **own)
        n_warnings = count_warnings(caught)
    except Exception as exc:  # the group's one fit failed: every cell of it is recorded failed
        fits = [CellFit() for _ in group]
        for fit in fits:
            _record_error(fit, exc)
    share = (prep_seconds + time.perf_counter() - start) / len(group)
    for fit in fits:
        fit.fit_seconds = share
        fit.n_warnings += n_warnings  # the group's shared work, beside a cell's own
    return fits

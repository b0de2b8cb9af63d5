"""What every family shares: the column preprocessors and the plain one-fit-per-cell loop
that a family's path evaluator may replace."""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, OrdinalEncoder, StandardScaler

__all__ = ["CellFit", "tree_preprocessor", "linear_preprocessor", "fit_each"]


@dataclass
class CellFit:
    """One cell fitted on one set of rows: predictions for each evaluation set, or an error."""

    predictions: list[np.ndarray] = field(default_factory=list)
    fit_seconds: float = 0.0
    n_leaves: float | None = None
    n_warnings: int = 0
    error_kind: str | None = None
    error: str | None = None
    how: str = "plain"


def tree_preprocessor(numeric: list[str], categorical: list[str]) -> ColumnTransformer:
    """Numeric columns as they are (NaN kept: trees route it); categories as ordinal codes."""
    parts = [("num", "passthrough", list(numeric))]
    if categorical:
        parts.append(("cat", OrdinalEncoder(handle_unknown="use_encoded_value",
                                            unknown_value=np.nan,
                                            encoded_missing_value=np.nan), list(categorical)))
    return ColumnTransformer(parts, remainder="drop", sparse_threshold=0.0)


def linear_preprocessor(numeric: list[str], categorical: list[str]) -> ColumnTransformer:
    """Median-impute and standardise numbers; impute the mode and one-hot encode categories."""
    parts = []
    if numeric:
        parts.append(("num", Pipeline([("impute", SimpleImputer(strategy="median")),
                                       ("scale", StandardScaler())]), list(numeric)))
    if categorical:
        parts.append(("cat", Pipeline([
            ("impute", SimpleImputer(strategy="most_frequent")),
            ("onehot", OneHotEncoder(handle_unknown="ignore", sparse_output=False))]),
            list(categorical)))
    return ColumnTransformer(parts, remainder="drop", sparse_threshold=0.0)


def fit_each(make_estimator: Callable, cells: list[dict], X_fit, y_fit, X_evals, *, seed: int,
             numeric: list[str], categorical: list[str],
             leaves: Callable | None = None) -> list[CellFit]:
    """Fit every cell separately on the same rows and predict each evaluation set."""
    out = []
    for params in cells:
        result = CellFit()
        start = time.perf_counter()
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                est = make_estimator(params, seed=seed, y_fit=y_fit, numeric=numeric,
                                     categorical=categorical)
                est.fit(X_fit, y_fit)
                result.fit_seconds = time.perf_counter() - start
                result.predictions = [est.predict(X) for X in X_evals]
            result.n_warnings = sum(1 for w in caught if not issubclass(
                w.category, (DeprecationWarning, FutureWarning)))
            if leaves is not None:
                result.n_leaves = leaves(est)
        except Exception as exc:  # a failed fit is data: recorded, the sweep goes on
            result.fit_seconds = time.perf_counter() - start
            result.error_kind = type(exc).__name__
            result.error = str(exc).splitlines()[0][:500] if str(exc) else type(exc).__name__
            result.predictions = []
        out.append(result)
    return out

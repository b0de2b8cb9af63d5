"""The `forest` family: a RandomForestRegressor on numbers and ordinal-coded categories."""

from __future__ import annotations

from sklearn.ensemble import RandomForestRegressor
from sklearn.pipeline import Pipeline

from ._base import fit_each, tree_preprocessor

__all__ = ["make_estimator", "fit_cells"]


def make_estimator(params: dict, *, seed: int, y_fit=None, numeric, categorical) -> Pipeline:
    """The pipeline for one cell; the forest runs single-threaded (folds run in parallel)."""
    bootstrap = params.get("bootstrap", True)
    forest = RandomForestRegressor(n_estimators=params.get("n_estimators", 100),
                                   max_features=params.get("max_features", 1.0),
                                   min_samples_leaf=params.get("min_samples_leaf", 1),
                                   max_depth=params.get("max_depth"),
                                   max_samples=params.get("max_samples") if bootstrap else None,
                                   bootstrap=bootstrap, random_state=seed, n_jobs=1)
    return Pipeline([("prep", tree_preprocessor(numeric, categorical)), ("model", forest)])


def fit_cells(cells, X_fit, y_fit, X_evals, *, seed, numeric, categorical):
    """Fit each cell on the fitting rows and predict every evaluation set."""
    return fit_each(make_estimator, cells, X_fit, y_fit, X_evals, seed=seed, numeric=numeric,
                    categorical=categorical)

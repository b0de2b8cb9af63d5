"""The `pruned_tree` family: one DecisionTreeRegressor pruned by cost complexity.

`ccp_alpha` is scikit-learn's absolute pruning strength. `ccp_fraction` states it as a
fraction of the root node's mean squared error on the fitting rows (the population
variance of y), so one grid suits any target scale: ccp_alpha = ccp_fraction * var(y_fit)."""

from __future__ import annotations

import numpy as np
from sklearn.pipeline import Pipeline
from sklearn.tree import DecisionTreeRegressor

from ._base import fit_each, tree_preprocessor

__all__ = ["make_estimator", "fit_cells", "resolve_alpha", "pruning_path_alphas"]


def resolve_alpha(params: dict, y_fit) -> float:
    """The absolute ccp_alpha of a cell on these fitting rows."""
    fraction = params.get("ccp_fraction")
    if fraction is not None:
        return float(fraction) * float(np.var(np.asarray(y_fit, dtype=float)))
    return float(params.get("ccp_alpha", 0.0))


def _tree(params: dict, *, seed: int, ccp_alpha: float) -> DecisionTreeRegressor:
    return DecisionTreeRegressor(ccp_alpha=ccp_alpha,
                                 min_samples_leaf=params.get("min_samples_leaf", 1),
                                 max_depth=params.get("max_depth"),
                                 max_features=params.get("max_features"),
                                 random_state=seed)


def make_estimator(params: dict, *, seed: int, y_fit, numeric, categorical) -> Pipeline:
    """The pipeline for one cell: ordinal-coded categories, then the pruned tree."""
    return Pipeline([("prep", tree_preprocessor(numeric, categorical)),
                     ("model", _tree(params, seed=seed, ccp_alpha=resolve_alpha(params, y_fit)))])


def _leaves(pipeline: Pipeline) -> float:
    return float(pipeline.named_steps["model"].get_n_leaves())


def fit_cells(cells, X_fit, y_fit, X_evals, *, seed, numeric, categorical):
    """Fit each cell on the fitting rows and predict every evaluation set."""
    return fit_each(make_estimator, cells, X_fit, y_fit, X_evals, seed=seed, numeric=numeric,
                    categorical=categorical, leaves=_leaves)


def pruning_path_alphas(params: dict, X, y, *, seed: int, numeric, categorical) -> np.ndarray:
    """The cost-complexity pruning path (effective alphas) of the unpruned tree on these rows."""
    prep = tree_preprocessor(numeric, categorical)
    Xt = prep.fit_transform(X, y)
    tree = _tree(params, seed=seed, ccp_alpha=0.0)
    return tree.cost_complexity_pruning_path(Xt, y).ccp_alphas

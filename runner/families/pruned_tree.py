"""The `pruned_tree` family: one decision tree pruned by cost complexity — a
DecisionTreeRegressor for numbers, a DecisionTreeClassifier for classes.

`ccp_alpha` is scikit-learn's absolute pruning strength. `ccp_fraction` states it as a
fraction of the root node's impurity on the fitting rows, so one grid suits any target:
for numbers the mean squared error (the population variance of y), ccp_alpha =
ccp_fraction * var(y_fit); for classes the criterion's impurity of the class shares
(weighted by class_weight): Gini 1 − Σ p², entropy −Σ p log2 p.

A grid over the pruning strength is scored from one unpruned fit per combination of the
other parameters: the weakest-link sequence replayed on that tree gives every alpha's
pruned tree, bit for bit the tree a refit with that ccp_alpha grows (`paths.py`)."""

from __future__ import annotations

import functools

import numpy as np
from sklearn.pipeline import Pipeline
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

from ._readers import impurity_importance as own_importance
from ._readers import tree_node_rows, tree_shape
from ._base import (CellFit, fit_grouped, prediction_columns, tree_preprocessor,
                    work_units)
from .paths import (forget_replay, pruned_tree, pruned_tree_leaves, pruned_tree_predictions,
                    pruning_alphas)

__all__ = ["make_estimator", "fit_cells", "fit_units", "own_importance", "prediction_columns",
           "tree_shape", "tree_node_rows", "resolve_alpha", "pruning_path_alphas", "model_size",
           "PATH_PARAMS"]

PATH_PARAMS = ("ccp_alpha", "ccp_fraction")


def root_impurity(params: dict, y_fit, task: str = "regression") -> float:
    """The impurity of the root node on these fitting rows (see the module docstring)."""
    if task == "regression":
        return float(np.var(np.asarray(y_fit, dtype=float)))
    _, counts = np.unique(np.asarray(y_fit), return_counts=True)
    weights = counts.astype(float)
    if params.get("class_weight") == "balanced":  # n / (K · n_c) each row of class c
        weights = weights * (counts.sum() / (len(counts) * counts))
    p = weights / weights.sum()
    if params.get("criterion", "gini") == "entropy":
        return float(-np.sum(p * np.log2(p)))
    return float(1.0 - np.sum(p * p))


def resolve_alpha(params: dict, y_fit, task: str = "regression") -> float:
    """The absolute ccp_alpha of a cell on these fitting rows."""
    fraction = params.get("ccp_fraction")
    if fraction is not None:
        return float(fraction) * root_impurity(params, y_fit, task)
    return float(params.get("ccp_alpha", 0.0))


def _tree(params: dict, *, seed: int, ccp_alpha: float, task: str = "regression"):
    common = dict(ccp_alpha=ccp_alpha, min_samples_leaf=params.get("min_samples_leaf", 1),
                  max_depth=params.get("max_depth"), max_features=params.get("max_features"),
                  random_state=seed)
    if task == "classification":
        weight = params.get("class_weight", "none")
        return DecisionTreeClassifier(criterion=params.get("criterion", "gini"),
                                      class_weight=None if weight == "none" else weight,
                                      **common)
    return DecisionTreeRegressor(**common)


def make_estimator(params: dict, *, seed: int, y_fit, numeric, categorical,
                   task: str = "regression") -> Pipeline:
    """The pipeline for one cell: ordinal-coded categories, then the pruned tree."""
    alpha = resolve_alpha(params, y_fit, task)
    return Pipeline([("prep", tree_preprocessor(numeric, categorical)),
                     ("model", _tree(params, seed=seed, ccp_alpha=alpha, task=task))])


def _leaves(pipeline: Pipeline) -> float:
    return float(pipeline.named_steps["model"].get_n_leaves())


def model_size(pipeline: Pipeline) -> int:
    """The fitted tree's size as a person reads it: its leaves."""
    return int(pipeline.named_steps["model"].get_n_leaves())


def _how(params: dict) -> str:
    return "tree_path"


def _pruning_path(group: list[dict], Xt_fit, y_fit, Xt_evals, *, seed: int,
                  task: str = "regression") -> list[CellFit]:
    """Every cell of the group from one unpruned tree (same other params, same seed); each
    cell's own pruned tree is built from it only if it is read (`pruned_tree`)."""
    tree = _tree(group[0], seed=seed, ccp_alpha=0.0, task=task).fit(Xt_fit, y_fit)
    alphas = [resolve_alpha(params, y_fit, task) for params in group]
    fits = [CellFit() for _ in group]
    leaves = None
    for X in Xt_evals:
        preds, leaves = pruned_tree_predictions(tree, X, alphas)
        for fit, p in zip(fits, preds):
            fit.predictions.append(p)
    if leaves is None:  # no evaluation set: leaf counts alone
        _, leaves = pruned_tree_predictions(tree, Xt_fit[:1], alphas)
    trees = _PrunedTrees(tree, alphas)
    for i, (fit, k) in enumerate(zip(fits, leaves)):
        fit.n_leaves = float(k)
        fit.make_model = functools.partial(trees.build, i)
    return fits


class _PrunedTrees:
    """The cells' own pruned trees of one path group, built only if read: the first asks
    every cell's leaves from the replay at once, which is then let go."""

    def __init__(self, tree, alphas: list[float]):
        self.tree, self.alphas, self.leaves = tree, alphas, None

    def build(self, i: int):
        if self.leaves is None:
            self.leaves = pruned_tree_leaves(self.tree, self.alphas)
            forget_replay(self.tree)  # a cell's tree is built from its leaves alone
        return pruned_tree(self.tree, self.alphas[i], self.leaves[i])


def fit_cells(cells, X_fit, y_fit, X_evals, *, seed, numeric, categorical, paths=True,
              task="regression", read=None):
    """Score every cell on the fitting rows: alpha grids from one unpruned fit, or (with
    `paths=False`, or a lone alpha) one fit per cell."""
    return fit_grouped(make_estimator, tree_preprocessor, _pruning_path, _how, PATH_PARAMS,
                       cells, X_fit, y_fit, X_evals, seed=seed, numeric=numeric,
                       categorical=categorical, paths=paths, leaves=_leaves, task=task,
                       read=read)


def fit_units(cells, *, paths=True):
    """Pieces of work and rough costs: a refit with ccp_alpha > 0 prunes (about 4 unpruned
    fits on large trees); a path group is one unpruned fit plus a replay."""
    def alone(params):
        return 1.0 if not (params.get("ccp_fraction") or params.get("ccp_alpha")) else 4.0

    return work_units(cells, PATH_PARAMS, paths=paths, cost_alone=alone,
                      cost_group=lambda group: 1.5 + 0.01 * len(group))


def pruning_path_alphas(params: dict, X, y, *, seed: int, numeric, categorical,
                        task: str = "regression") -> np.ndarray:
    """The cost-complexity pruning path (effective alphas) of the unpruned tree on these rows."""
    prep = tree_preprocessor(numeric, categorical)
    Xt = prep.fit_transform(X, y)
    return pruning_alphas(_tree(params, seed=seed, ccp_alpha=0.0, task=task).fit(Xt, y))

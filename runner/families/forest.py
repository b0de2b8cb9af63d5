"""The `forest` family: a random forest (RandomForestRegressor for numbers,
RandomForestClassifier for classes) on numbers and ordinal-coded categories.

A grid over `n_estimators` is scored from one forest per combination of the other
parameters: the largest forest is fitted once and its first k trees are the k-tree forest
with the same random_state (the trees' seeds are drawn in order), so their running mean
gives every smaller forest's predictions bit for bit (`paths.py`); for classes the running
mean of the trees' class probabilities, as the classifier's predict_proba averages them.
The forest is grown a few trees at a time and each batch let go once read, so a task holds
a few trees rather than the forest (on a large fold the forest is most of a worker's
memory); what the explain step reads of a refit is answered from predictions made of the
rows it asks for while the forest grew (`_replay.py`)."""

from __future__ import annotations

import numpy as np

from sklearn.ensemble import RandomForestClassifier, RandomForestRegressor
from sklearn.pipeline import Pipeline

from ._readers import impurity_importance as own_importance
from ._base import CellFit, fit_grouped, prediction_columns, tree_preprocessor, work_units
from .paths import forest_prefix_in_batches

__all__ = ["make_estimator", "fit_cells", "fit_units", "own_importance", "prediction_columns",
           "PATH_PARAMS"]

PATH_PARAMS = ("n_estimators",)


def _forest(params: dict, *, seed: int, n_estimators: int, task: str = "regression"):
    bootstrap = params.get("bootstrap", True)
    common = dict(n_estimators=n_estimators, max_features=params.get("max_features", 1.0),
                  min_samples_leaf=params.get("min_samples_leaf", 1),
                  max_depth=params.get("max_depth"),
                  max_samples=params.get("max_samples") if bootstrap else None,
                  bootstrap=bootstrap, random_state=seed, n_jobs=1)
    if task == "classification":
        weight = params.get("class_weight", "none")
        return RandomForestClassifier(criterion=params.get("criterion", "gini"),
                                      class_weight=None if weight == "none" else weight,
                                      **common)
    return RandomForestRegressor(**common)


def make_estimator(params: dict, *, seed: int, y_fit=None, numeric, categorical,
                   task: str = "regression") -> Pipeline:
    """The pipeline for one cell; the forest runs single-threaded (folds run in parallel)."""
    forest = _forest(params, seed=seed, n_estimators=params.get("n_estimators", 100),
                     task=task)
    return Pipeline([("prep", tree_preprocessor(numeric, categorical)), ("model", forest)])


def _how(params: dict) -> str:
    return "forest_prefix"


BATCH_BYTES = 64 * 2 ** 20
"""About how much of a task's memory the trees of one batch may take."""

_TREE_BYTES_PER_ROW = 100
"""A fully grown tree's size per fitting row, roughly: about 1.3 nodes per row for the
bootstrap's distinct rows, at 64 bytes a node plus its value (measured, common forests)."""


def trees_per_batch(n_rows: int, min_samples_leaf=1) -> int:
    """How many trees to grow at once so that they take about `BATCH_BYTES`: all of a
    small forest at once (no cost for batching), one at a time on very large folds. A leaf
    size given as a fraction of the rows is read as one row."""
    leaf = min_samples_leaf if isinstance(min_samples_leaf, int) and min_samples_leaf > 1 else 1
    per_tree = max(1, _TREE_BYTES_PER_ROW * n_rows // leaf)
    return max(1, BATCH_BYTES // per_tree)


class ForestImportances:
    """What a forest grown batch by batch keeps of one size once its trees are gone: the
    impurity importances of its first k trees, as the forest's own property gives them."""

    def __init__(self, importances: np.ndarray, classes=None):
        self.feature_importances_ = importances
        self.n_features_in_ = len(importances)
        if classes is not None:
            self.classes_ = classes


def _batched_path(group: list[dict], Xt_fit, y_fit, Xt_evals, *, seed: int,
                  task: str = "regression") -> list[CellFit]:
    """Every forest size of the group from one forest grown a batch of trees at a time
    (`forest_prefix_in_batches`); each cell's model is a stand-in that holds its own
    importances: a reader that needs more is answered by replay (`fit_grouped`)."""
    sizes = [int(params.get("n_estimators", 100)) for params in group]
    forest = _forest(group[0], seed=seed, n_estimators=max(sizes), task=task)
    predictions, importances = forest_prefix_in_batches(
        forest, Xt_fit, y_fit, Xt_evals, sizes,
        batch=trees_per_batch(len(y_fit), group[0].get("min_samples_leaf", 1)))
    classes = getattr(forest, "classes_", None)
    return [CellFit(predictions=[p[i] for p in predictions],
                    model=ForestImportances(importances[i], classes))
            for i in range(len(sizes))]


_batched_path.lets_go = True  # its models are stand-ins holding the own importances


def fit_cells(cells, X_fit, y_fit, X_evals, *, seed, numeric, categorical, paths=True,
              task="regression", read=None):
    """Score every cell on the fitting rows: size grids from one forest grown in batches,
    or (with `paths=False`, or a lone size) one fit per cell. A forest predicts each row on
    its own, so what a reader asks of a whole forest is answered by replay too."""
    return fit_grouped(make_estimator, tree_preprocessor, _batched_path, _how, PATH_PARAMS,
                       cells, X_fit, y_fit, X_evals, seed=seed, numeric=numeric,
                       categorical=categorical, paths=paths, task=task, read=read,
                       replay=True)


def fit_units(cells, *, paths=True):
    """Pieces of work and rough costs: trees grown (a forest tree ~ 0.3 unpruned trees)."""
    def size(params):
        return 0.3 * params.get("n_estimators", 100)

    return work_units(cells, PATH_PARAMS, paths=paths, cost_alone=size,
                      cost_group=lambda group: max(size(p) for p in group))

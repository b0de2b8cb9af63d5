"""What a worker reads of a fitted cell for the explain step, and the explain step's own
refits: everything here runs in worker processes, so it imports neither the store nor the
spec (a local worker then loads no DuckDB and no pydantic)."""

from __future__ import annotations

import functools

import numpy as np
import pandas as pd

from ..families import FAMILIES
from ..metrics import METRICS

__all__ = ["permutation_rows", "permutation_sample", "read_fold", "fold_reader", "read_refit",
           "keyed", "explain_call", "explain_task"]


def permutation_rows(pipeline, X_test, y_test, *, metric: str, repeats: int,
                     seed: int, rows: int, classes=()) -> dict[str, tuple[float, float]]:
    """Per original column, (mean, sd) of the score lost when the column is shuffled, on
    `rows` test rows drawn anew for each column (scikit-learn's `max_samples`; all of
    them when the split holds no more)."""
    from sklearn.inspection import permutation_importance

    from ..families._readers import shuffled_by_index

    model, X = shuffled_by_index(pipeline, X_test) or (pipeline, X_test)
    scoring = METRICS[metric].scorer_for(classes)
    result = permutation_importance(model, X, y_test, scoring=scoring,
                                    n_repeats=repeats, random_state=seed, n_jobs=1,
                                    max_samples=permutation_sample(rows, len(X_test)))
    return {str(col): (float(m), float(s)) for col, m, s in
            zip(X_test.columns, result.importances_mean, result.importances_std)}


def permutation_sample(rows: int, n_test: int) -> int:
    """The test rows each permutation draws: the spec's `explain.permutation.rows`, or
    every test row when the split holds no more."""
    return min(int(rows), n_test)


# -- readings: what the explain step keeps of one fitted cell ------------------------------
def read_fold(family: str, est, X_fit) -> dict[str, list]:
    """One cell fitted on one fold's fitting rows: its own importances (impurity or
    coefficient) and, for one tree, its shape; rows without their cell and fold keys."""
    fam = FAMILIES[family]
    values = fam.estimators.own_importance(est, X_fit, list(X_fit.columns))
    rows = {"fold_importances": [{"feature": f, "method": fam.importance, "value": v}
                                 for f, v in values.items()]}
    if fam.one_tree:
        rows["tree_folds"] = [fam.estimators.tree_shape(est)]
    return rows


def fold_reader(family: str):
    """`read_fold` for one family, marked as reading no more than the model's own
    importances where that is so (every family but a single tree, whose shape it reads):
    the family may then let the fitted parts go as it works (`needs_whole_model`)."""
    reader = functools.partial(read_fold, family)
    reader.whole_model = FAMILIES[family].one_tree
    return reader


def read_refit(family: str, est, X_train, *, X_test, y_test, metric: str,
               repeats: int, perm_seed: int, perm_rows: int, task: str = "regression",
               classes=()) -> dict[str, list]:
    """One cell fitted on all training rows: permutation and own importances, the test
    predictions, a tree's nodes, a linear model's coefficients and the model's size; rows
    without their cell key."""
    fam = FAMILIES[family]
    perm = permutation_rows(est, X_test, y_test, metric=metric, repeats=repeats,
                            seed=perm_seed, rows=perm_rows, classes=classes)
    own = fam.estimators.own_importance(est, X_train, list(X_train.columns))
    size = getattr(fam.estimators, "model_size", None)
    imp = [{"feature": f, "method": "permutation", "value": m, "spread": sd}
           for f, (m, sd) in perm.items()]
    imp += [{"feature": f, "method": fam.importance, "value": v} for f, v in own.items()]
    return {"importances": imp,
            "test_predictions": _prediction_frame(est, X_test, task),
            "tree_nodes": fam.estimators.tree_node_rows(est) if fam.one_tree else [],
            "coefficients": fam.estimators.coefficient_rows(est) if fam.coefficients else [],
            "explained": [{"n_terms": size(est) if size is not None else None}]}


def keyed(rows: dict, **key) -> dict:
    """A reading's rows with their keys (cell, and repeat and fold for a fold's rows);
    `explained` carries no key (it is the cell's mark). A table is a list of row dicts, or
    for the many rows of test predictions a DataFrame, which stays without the key: the
    rows are one cell's refit, whose id the explain step adds as it stores them, where a
    column repeating the id would take three times the predictions' own memory for as
    long as the sweep holds them (17 cells of 200 000 test rows: 104 MiB against 26)."""
    def with_key(table, table_rows):
        if table == "explained" or isinstance(table_rows, pd.DataFrame):
            return table_rows
        return [{**key, **r} for r in table_rows]

    return {t: with_key(t, table_rows) for t, table_rows in rows.items()}


# -- the explain step's refit tasks ------------------------------------------------------
def _fit(family: str, params: dict, X, y, *, seed: int, numeric, categorical, task):
    # the sweep has counted this fit's warnings already
    return FAMILIES[family].fit_pipeline(params, X, y, seed=seed, numeric=numeric,
                                         categorical=categorical, task=task)[0]


def explain_call(data: dict, task) -> tuple[tuple, dict]:
    """`explain_task` arguments for one refit (fold None) or fold task, cut from the data."""
    family, cell_id, params, f = task
    if f is None:
        return (("refit", family, cell_id, params, data["X_train"], data["y_train"],
                 data["X_test"], data["y_test"]),
                dict(**data["refit"], **data["common"]))
    return (("fold", family, cell_id, params, data["X_train"].iloc[f.fit],
             data["y_train"][f.fit]),
            dict(seed=f.seed, repeat=f.repeat, fold=f.fold, **data["common"]))


def explain_task(kind: str, *args, **kwargs):
    return (_refit_task if kind == "refit" else _fold_task)(*args, **kwargs)


def _fold_task(family, cell_id, params, X_fit, y_fit, *, seed, repeat, fold, numeric,
               categorical, task="regression", classes=()):
    """One chosen cell refitted on one fold's fitting rows: importances and tree shape."""
    try:
        est = _fit(family, params, X_fit, y_fit, seed=seed, numeric=numeric,
                   categorical=categorical, task=task)
        rows = read_fold(family, est, X_fit)
    except Exception as exc:  # recorded and reported; the sweep's scores stand
        return cell_id, {}, f"{cell_id} fold ({repeat}, {fold}): {type(exc).__name__}: {exc}"
    return cell_id, keyed(rows, cell_id=cell_id, repeat=repeat, fold=fold), None


def _refit_task(family, cell_id, params, X_train, y_train, X_test, y_test, *,
                seed, metric, repeats, perm_seed, perm_rows, numeric, categorical,
                task="regression", classes=()):
    """One chosen cell refitted on all training rows: importances, nodes, test predictions."""
    try:
        est = _fit(family, params, X_train, y_train, seed=seed, numeric=numeric,
                   categorical=categorical, task=task)
        rows = read_refit(family, est, X_train, X_test=X_test, y_test=y_test,
                          metric=metric, repeats=repeats,
                          perm_seed=perm_seed, perm_rows=perm_rows, task=task,
                          classes=classes)
    except Exception as exc:
        return cell_id, {}, f"{cell_id} refit: {type(exc).__name__}: {exc}"
    return cell_id, keyed(rows, cell_id=cell_id), None


def _prediction_frame(est, X_test, task: str) -> pd.DataFrame:
    """The refit's predictions of the test rows, in their order, held by column (a row per
    Python dict would take some 70 MB per cell of 200 000 test rows): the predicted value;
    for classes the most probable class and the probability of every class (classes_
    order). The rows and observed values, the same for every cell, are added when the
    cell is stored (`with_observed`)."""
    if task != "classification":
        return pd.DataFrame({"predicted": np.asarray(est.predict(X_test), dtype=np.float64)})
    proba = est.predict_proba(X_test)
    best = est.classes_[np.argmax(proba, axis=1)]
    return pd.DataFrame({"predicted_class": [str(b) for b in best],
                         "probabilities": np.asarray(proba, dtype=np.float64).tolist()})

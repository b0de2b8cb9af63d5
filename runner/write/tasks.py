"""What a local or cluster worker runs for a sweep: some cells of one model fitted on one fold
(or the refit) and scored. Everything here runs in worker processes, so it imports neither the
store nor the spec (a local worker then loads no DuckDB and no pydantic)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..families import load_family
from ..metrics import METRICS
from .readings import fold_reader, keyed, read_refit
from .resampling import REFIT, Fold

__all__ = ["run_task", "Task", "task_call"]


def run_task(family: str, cells: list[tuple[str, dict]], X_fit, y_fit, X_eval, y_eval, *,
             seed: int, repeat: int, fold: int, metrics: list[str], numeric, categorical,
             paths: bool = True, task: str = "regression", classes: list | None = None,
             explain: dict | None = None):
    """Fit some of a model's cells on one fold (or the refit) and return their score rows,
    failures and, with `explain`, what the explain step keeps of each fit (`_reader`)."""
    from sklearn import config_context

    module = load_family(family)
    read = _reader(family, explain, X_eval, y_eval, task, classes)
    fits = module.fit_cells([p for _, p in cells], X_fit, y_fit, [X_eval], seed=seed,
                            numeric=numeric, categorical=categorical, paths=paths, task=task,
                            read=read)
    scores, failures, readings = [], [], []
    good = []
    for (cid, _), fit in zip(cells, fits):
        if fit.error is None and task == "classification" and \
                np.shape(fit.predictions[0])[1] != len(classes):
            fit.error_kind, fit.error = "MissingClass", _missing_class(
                y_fit, classes, repeat, fold, np.shape(fit.predictions[0])[1])
        if fit.error is not None:
            failures.append({"cell_id": cid, "repeat": repeat, "fold": fold,
                             "kind": fit.error_kind, "message": fit.error})
        else:
            good.append((cid, fit))
            if fit.reading is not None:
                key = {"cell_id": cid} if fold == REFIT else {"cell_id": cid, "repeat": repeat,
                                                               "fold": fold}
                readings.append(((cid, None if fold == REFIT else (repeat, fold)),
                                 keyed(fit.reading, **key)))
    if good:
        # The metric arguments are ours and valid: skip scikit-learn's parameter checks
        # (only the argument validation is skipped; values are computed as always).
        with config_context(skip_parameter_validation=True):
            values = _score(good, y_eval, metrics, task, classes)
        for j, (cid, fit) in enumerate(good):
            for metric in metrics:
                scores.append({"cell_id": cid, "repeat": repeat, "fold": fold,
                               "metric": metric, "value": values[metric][j],
                               "fit_seconds": fit.fit_seconds, "n_train": len(y_fit),
                               "n_valid": len(y_eval), "seed": seed,
                               "n_leaves": fit.n_leaves, "how": fit.how,
                               "n_warnings": fit.n_warnings})
    return scores, failures, readings


def _missing_class(y_fit, classes, repeat: int, fold: int, n_given: int) -> str:
    """Which classes the fitting rows of this fold (or the refit) lack, in words."""
    where = ("the refit's training rows" if fold == REFIT
             else f"the fitting rows of fold {fold} of repeat {repeat}")
    present = set(np.unique(y_fit).tolist())
    missing = [repr(c) for c in classes if c not in present]
    if not missing:
        return (f"the model fitted on {where} gives probabilities for {n_given} classes, "
                f"not the target's {len(classes)}")
    return (f"{where} hold no row of class {', '.join(missing)}, so the model fitted there "
            "gives no probability for it")


def _reader(family: str, explain: dict | None, X_test, y_test, task: str, classes):
    """The explain step's reading of a fitted cell, or None: a fold's own importances and
    tree shape, or the refit's permutation importances, test predictions and the rest."""
    if explain is None:
        return None
    if explain["kind"] == "fold":
        return fold_reader(family)
    settings = {k: v for k, v in explain.items() if k != "kind"}
    return lambda est, X_train: read_refit(family, est, X_train, X_test=X_test,
                                           y_test=y_test, task=task, classes=classes,
                                           **settings)


def _score(good: list, y_eval, metrics: list[str], task: str, classes) -> dict[str, list]:
    """Every metric of every good cell's predictions: for numbers all cells in one call per
    metric; for classes cell by cell, from the class probabilities."""
    if task == "classification":
        return {m: [METRICS[m].score_classes(y_eval, fit.predictions[0], classes)
                    for _, fit in good] for m in metrics}
    P = np.empty((len(y_eval), len(good)), dtype=np.float64, order="F")
    for j, (_, fit) in enumerate(good):
        P[:, j] = fit.predictions[0]
    return {m: METRICS[m].score_columns(y_eval, P) for m in metrics}


@dataclass(frozen=True)
class Task:
    """Some cells of one model on one fold (or the refit: fold None), with a rough cost."""

    family: str
    cells: list[tuple[str, dict]]
    fold: Fold | None
    cost: float


def task_call(data: dict, task: Task) -> tuple[tuple, dict]:
    """`run_task` arguments for one task: its fold's rows cut from the shared data."""
    X_train, y_train, f = data["X_train"], data["y_train"], task.fold
    if f is not None:
        return ((task.family, task.cells, X_train.iloc[f.fit], y_train[f.fit],
                 X_train.iloc[f.valid], y_train[f.valid]),
                dict(seed=f.seed, repeat=f.repeat, fold=f.fold, **data["common"],
                     explain=data["explain_fold"]))
    return ((task.family, task.cells, X_train, y_train, data["X_test"], data["y_test"]),
            dict(seed=data["refit_seed"], repeat=REFIT, fold=REFIT, **data["common"],
                 explain=data["explain_refit"]))

"""The explain step: store what a sweep's chosen cells show when fitted on the documented
folds and on all training rows, so plots and reports are built from the store alone. What
the sweep's own fits already read (`read_fold`, `read_refit`: cells fitted as their own
model) is taken as it is; only the rest is refitted here, with the same results.

For every chosen cell (by default each model's best and one-SE picks; the spec's
`explain.cells` can ask for all cells or none) it writes:

- `importances`: one row per original column and method, from the refit on all training
  rows. `permutation` (every family): scikit-learn's `permutation_importance` on the test
  split, shuffling one original column at a time through the whole pipeline on
  `explain.permutation.rows` test rows drawn for each column (`max_samples`), scored with the
  sweep's first metric (the test rows are transformed once and shuffled there, column by
  column, which gives the same numbers: `shuffled_by_index`); value = mean loss of score
  over the shuffles (for rmse: how much the test RMSE rises), spread = sd over the
  shuffles. `impurity` (trees, forests): the fitted
  model's impurity-based importances (shares of the total squared-error reduction, summing
  to 1). `coefficient` (linear): the standard deviation over the fitting rows of the
  column's contribution to the prediction, in target units; for a numeric column that is
  the absolute standardised coefficient |w_j| (change per one SD of the column), for a
  categorical column it is the SD of its one-hot coefficients' sum, which does not depend on
  how the levels' coefficients are shifted. Spread of impurity and coefficient rows = sd of
  the same number over the per-fold refits.
- `fold_importances`: impurity or coefficient importances of each fold's refit.
- `tree_folds`: each pruned tree fold refit's leaves, depth, root split and used columns.
- `tree_nodes`: the refit tree's nodes (for drawing it); `test_predictions`: the refit's
  predictions on the test rows (for predicted-against-observed plots).
- `coefficients` (linear): the refit's signed coefficients, in the data's own units and
  per standard deviation, and the intercept (`families/linear.py`, `coefficient_rows`).
- `explained`: the cell's mark, with `n_terms`, the refit's size as a person reads it
  (a tree's leaves, a linear model's non-zero coefficients; null for a forest).

Fold refits use the plan's folds and seeds and the refit uses `refit_seed`, exactly as the
sweep did, so a refit predicts what the sweep scored."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from ..families import get_family
from .prepare import prepare
from .resampling import refit_seed
from .readings import explain_call, explain_task, permutation_sample
from .reuse import copy_explained
from ..store import Store

__all__ = ["explain_sweep", "ExplainResult", "chosen_cells"]


EXPLAIN_VERSION = "4"
"""Bumped whenever a change here would change stored explain rows; stops their reuse.
2: class targets (probability predictions) and the signed coefficients of linear cells.
3: the refit's size (leaves, non-zero coefficients) is stored in `explained.n_terms`.
4: permutation importance draws `explain.permutation.rows` test rows (default 5000), so a
   test split larger than that gives other numbers than before."""


@dataclass
class ExplainResult:
    """What the explain step wrote, and the fits it could not make."""

    cells: int = 0
    reused: int = 0
    rows: dict = field(default_factory=dict)
    problems: list = field(default_factory=list)
    refits: int = 0  # fits made here: cells whose readings the sweep's fits did not give
    permutation_rows: int | None = None  # test rows each permutation drew


def gather(bucket: dict[str, list], reading: dict) -> None:
    """Add one reading's tables to a cell's `bucket`: row dicts one by one, a DataFrame
    whole (`table_frame` puts them together)."""
    for table, table_rows in reading.items():
        got = bucket.setdefault(table, [])
        if isinstance(table_rows, pd.DataFrame):
            got.append(table_rows)
        else:
            got.extend(table_rows)


def table_frame(items: list) -> pd.DataFrame:
    """One table of a cell's bucket as a DataFrame: its row dicts and its frames, stacked."""
    frames = [i for i in items if isinstance(i, pd.DataFrame)]
    rows = [i for i in items if not isinstance(i, pd.DataFrame)]
    parts = ([pd.DataFrame(rows)] if rows else []) + frames
    return parts[0] if len(parts) == 1 else pd.concat(parts, ignore_index=True)


def with_observed(frame: pd.DataFrame, test_rows, y_test, task: str) -> pd.DataFrame:
    """One cell's test predictions as stored: each test row's number and observed value
    (or class) first, then the predictions."""
    rows = np.asarray(test_rows, dtype=np.int64)
    observed = {"observed": np.asarray(y_test, dtype=np.float64)} if task != "classification" \
        else {"observed_class": [str(o) for o in y_test]}
    if len(frame) != len(rows):
        raise ValueError(f"{len(frame)} test predictions for {len(rows)} test rows")
    return pd.concat([pd.DataFrame({"row": rows, **observed}),
                      frame.reset_index(drop=True)], axis=1)


# -- the step ------------------------------------------------------------------------------
def chosen_cells(store: Store, sweep_id: str, which: str = "picked") -> pd.DataFrame:
    """The cells to explain: each model's picks under both rules, every cell, or none."""
    if which == "none":
        return pd.DataFrame(columns=["cell_id", "model", "family", "params"])
    cells = store.query("select cell_id, model, family, params from cells where sweep_id = ? "
                        "order by position", [sweep_id])
    if which == "all":
        return cells
    from ..read.queries import picks

    picked = set(picks(store, sweep_id).table["cell_id"])
    return cells[cells["cell_id"].isin(picked)].reset_index(drop=True)


def _spreads(imp: pd.DataFrame, folds: pd.DataFrame) -> pd.DataFrame:
    """Fill the spread of impurity and coefficient rows with the sd over the fold refits."""
    if imp.empty or folds.empty:
        return imp
    # in fold order, so the sum behind the sd does not depend on which task finished first
    folds = folds.sort_values(["cell_id", "method", "feature", "repeat", "fold"])
    sd = folds.groupby(["cell_id", "method", "feature"])["value"].std(ddof=1).rename("_sd")
    imp = imp.join(sd, on=["cell_id", "method", "feature"])
    own = imp["method"] != "permutation"
    imp.loc[own, "spread"] = imp.loc[own, "_sd"]
    return imp.drop(columns="_sd")


def _settings(spec, n_test: int) -> str:
    """What besides the cell decides its explain rows; equal settings allow reuse. It is
    stored with each explained cell (`explained.settings`), and says among other things how
    many test rows each permutation drew (`permutation_rows`)."""
    perm = spec.explain.permutation
    return json.dumps({"metric": spec.metrics[0], "repeats": perm.repeats, "seed": perm.seed,
                       "permutation_rows": permutation_sample(perm.rows, n_test),
                       "version": EXPLAIN_VERSION}, sort_keys=True)


def explain_sweep(spec, store: Store, sweep_id: str, *, prepared=None, jobs: int | None = None,
                  cells: str | None = None, reuse: bool = True,
                  progress: Callable[[int, int], None] | None = None,
                  executor=None,
                  before_refits: Callable[[], None] | None = None,
                  readings: dict | None = None) -> ExplainResult:
    """Refit the sweep's chosen cells per fold and on all training rows; store what they show.

    `cells` overrides the spec's `explain.cells`; `prepared` reuses `prepare(spec)`.
    A cell explained before with the same settings (first metric, permutation repeats and
    seed) has its rows copied instead, unless `reuse` is False; that includes the cells an
    interrupted sweep finished. Each cell's rows are written in one transaction as soon as
    its refit and fold refits are back, so a sweep stopped during this step keeps every
    cell it finished. The refits run on `executor` (the sweep's: local processes or a Dask
    cluster), else on local processes. `before_refits` is called once, before the first
    refit is sent (the engine lets go of a store connection it held for copying).

    `readings` holds what the sweep's own fits already read (`read_fold`, `read_refit`),
    keyed (cell id, (repeat, fold)) or (cell id, None) for the refit; only the parts
    missing there are refitted, so a cell the sweep fitted exactly is explained without
    a single fit."""
    which = cells or spec.explain.cells
    chosen = chosen_cells(store, sweep_id, which)
    result = ExplainResult()
    if chosen.empty:
        return result
    store.ensure_schema()  # a store from an older foldwise gains the explain tables
    done = store.query("select cell_id from explained where sweep_id = ?", [sweep_id])
    chosen = chosen[~chosen["cell_id"].isin(done["cell_id"])]  # explaining twice adds nothing
    if chosen.empty:
        return result
    n_test = int(store.query("select n_test from sweeps where sweep_id = ?",
                             [sweep_id])["n_test"].iloc[0])
    settings = _settings(spec, n_test)
    result.permutation_rows = permutation_sample(spec.explain.permutation.rows, n_test)
    if reuse:
        copied = copy_explained(store, sweep_id, chosen["cell_id"].tolist(), settings)
        result.reused = len(copied)
        chosen = chosen[~chosen["cell_id"].isin(copied)]
        if chosen.empty:
            return result
    if prepared is None:
        prepared = prepare(spec)
    frame, plan = prepared.frame, prepared.plan
    perm = spec.explain.permutation
    data = dict(**prepared.split,
                refit=dict(seed=refit_seed(plan.seed), metric=spec.metrics[0],
                           repeats=perm.repeats, perm_seed=perm.seed, perm_rows=perm.rows),
                common=dict(numeric=frame.numeric, categorical=frame.categorical,
                            task=frame.task, classes=list(frame.classes)))
    readings = readings or {}

    def observed(predictions: pd.DataFrame) -> pd.DataFrame:
        return with_observed(predictions, plan.test_rows, prepared.split["y_test"],
                             frame.task)

    tasks, pending = [], {}
    per_cell: dict[str, dict[str, list]] = {}
    ready = []
    for c in chosen.itertuples(index=False):
        params = json.loads(c.params) if isinstance(c.params, str) else dict(c.params)
        cell = []
        for f in (None, *plan.folds):
            got = readings.get((c.cell_id, None if f is None else (f.repeat, f.fold)))
            if got is None:
                cell.append((c.family, c.cell_id, params, f))
                continue
            gather(per_cell.setdefault(c.cell_id, {}), got)
        if cell:
            tasks.append((-get_family(c.family).explain_cost * len(cell), cell))
            pending[c.cell_id] = len(cell)
        else:
            ready.append(c.cell_id)
    for cell_id in ready:  # read whole from the sweep's own fits: nothing to refit
        _store_cell(store, sweep_id, cell_id, per_cell.pop(cell_id), settings, result,
                    observed)
    # the costliest cells first, so workers finish together; a cell's tasks side by side,
    # so cells finish (and are stored) one after another rather than all at the end
    tasks = [t for _, cell in sorted(tasks, key=lambda pair: pair[0]) for t in cell]
    result.refits = len(tasks)
    if not tasks:
        return result
    failed: set[str] = set()
    done = 0
    if progress:
        progress(0, len(tasks))
    if executor is None:
        from .executors import LocalExecutor

        executor = LocalExecutor(jobs or spec.jobs or -1)
    if before_refits is not None:
        before_refits()
    for cell_id, rows, problem in executor.results(explain_task, data, tasks, explain_call):
        done += 1
        if progress:
            progress(done, len(tasks))
        pending[cell_id] -= 1
        if problem:
            result.problems.append(problem)
            failed.add(cell_id)
        else:
            gather(per_cell.setdefault(cell_id, {}), rows)
        if not pending[cell_id]:  # the cell's refit and fold refits are all back
            tables = per_cell.pop(cell_id, {})
            if cell_id not in failed:  # a cell is stored whole or not at all
                _store_cell(store, sweep_id, cell_id, tables, settings, result, observed)
    return result


def _store_cell(store: Store, sweep_id: str, cell_id: str, tables: dict[str, list],
                settings: str, result: ExplainResult,
                observed: Callable[[pd.DataFrame], pd.DataFrame]) -> None:
    """Write one explained cell's rows and its `explained` mark in one transaction, so a
    sweep stopped at any moment keeps every cell it finished, each of them whole;
    `observed` puts the test rows and observed values beside its test predictions."""
    mark = {"sweep_id": sweep_id, "cell_id": cell_id, "settings": settings,
            "reused_from": None, "n_terms": None}
    for row in tables.pop("explained", []):  # the refit's size
        mark.update(row)
    dfs = {t: table_frame(items).assign(sweep_id=sweep_id, cell_id=cell_id)
           for t, items in tables.items() if items}
    dfs["explained"] = pd.DataFrame([mark]).astype({"n_terms": "Int64"})
    if "test_predictions" in dfs:
        dfs["test_predictions"] = observed(dfs["test_predictions"])
    if "importances" in dfs:
        dfs["importances"] = _spreads(dfs["importances"], dfs.get("fold_importances",
                                                                  pd.DataFrame()))
    store.write_batch(dfs)
    result.cells += 1
    for t, df in dfs.items():
        result.rows[t] = result.rows.get(t, 0) + len(df)

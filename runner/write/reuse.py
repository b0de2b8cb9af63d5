"""Reuse: what earlier sweeps in the store already computed for this sweep's cells, copied
instead of refitted. One path for both kinds of result — the scores of a (cell, fold) and
the explain rows of a cell — through one store primitive (`Store.copy_rows`), so a copied
row always names the sweep that first computed it in `reused_from`."""

from __future__ import annotations

import pandas as pd

from ..store import Store
from .leakage import FINDING_COLUMNS, ordered
from .resampling import REFIT

__all__ = ["EXPLAIN_TABLES", "find_scores", "all_found", "copy_scores", "copy_explained",
           "find_findings"]

EXPLAIN_TABLES = ("importances", "fold_importances", "tree_folds", "tree_nodes",
                  "test_predictions")
"""The tables the explain step fills for a cell (besides its `explained` mark)."""


def find_scores(store: Store, prep, *, fresh: bool):
    """Where earlier sweeps hold finished score rows for these cells, as (folds, tests):
    one source sweep per (cell, repeat, fold) and per cell's refit; None if `fresh`."""
    if fresh:
        return None
    return store.finished_rows([c.cell_id for c in prep.cells], prep.spec.metrics)


def all_found(prep, found) -> bool:
    """True if every cell's every fold and refit is already stored."""
    if found is None:
        return False
    return all((c.cell_id, *key) in _keys(found) for c in prep.cells for key in prep.fold_keys())


def _keys(found) -> set:
    folds, tests = found
    keys = set(zip(folds.cell_id, folds["repeat"].astype(int), folds.fold.astype(int)))
    return keys | {(c, REFIT, REFIT) for c in tests.cell_id}


def copy_scores(store: Store, sweep_id: str, prep, found
                ) -> tuple[frozenset, list[str], tuple[int, int]]:
    """Copy what earlier sweeps finished for these cells into this sweep.

    Returns the (cell_id, repeat, fold) keys now present (refit = (-1, -1)), the ids of
    cells that need no fit at all, and the fold-score and test-score rows copied."""
    if found is None:
        return frozenset(), [], (0, 0)
    folds, tests = found
    metrics = prep.spec.metrics
    n_folds = store.copy_rows(sweep_id, folds, {"fold_scores": ("cell_id", "repeat", "fold")},
                              metrics=metrics)["fold_scores"]
    n_tests = store.copy_rows(sweep_id, tests, {"test_scores": ("cell_id",)},
                              metrics=metrics)["test_scores"]
    done = _keys(found)
    keys = prep.fold_keys()
    whole = [c.cell_id for c in prep.cells if all((c.cell_id, *k) in done for k in keys)]
    if whole:
        source = folds[folds.cell_id.isin(whole)].groupby("cell_id").sweep_id.min()
        store.set_reused(sweep_id, source.rename("reused_from").reset_index())
    return frozenset(done), whole, (n_folds, n_tests)


def copy_explained(store: Store, sweep_id: str, cell_ids: list[str], settings: str
                   ) -> list[str]:
    """Copy the explain rows of cells an earlier sweep (finished or not) explained with
    these settings into this one, marks included, in one transaction; return the cells."""
    # settings are compared here, not in SQL: a server cannot compare its JSON column to text
    found = store.query("""
        select cell_id, sweep_id, coalesce(reused_from, sweep_id) as origin,
               settings::varchar as settings from explained
        where sweep_id <> ? and list_contains(?::varchar[], cell_id)""", [sweep_id, cell_ids])
    found = found[found["settings"] == settings]
    if found.empty:
        return []
    found = found.sort_values(["cell_id", "sweep_id"]).drop_duplicates("cell_id")
    marks = pd.DataFrame({"sweep_id": sweep_id, "cell_id": found["cell_id"],
                          "settings": settings, "reused_from": found["origin"]})
    store.copy_rows(sweep_id, found[["cell_id", "sweep_id"]],
                    {t: ("cell_id",) for t in EXPLAIN_TABLES}, also={"explained": marks})
    return found["cell_id"].tolist()


def find_findings(store: Store, key: str) -> pd.DataFrame | None:
    """The findings an earlier sweep with this checks key recorded, so that a rerun with
    nothing to fit need not build the plan to check it again; None if no sweep has the key."""
    earlier = store.query("select sweep_id from sweeps where checks_key = ? "
                          "order by started_at desc, sweep_id desc limit 1", [key])
    if earlier.empty:
        return None
    return ordered(store.query(f"select {', '.join(FINDING_COLUMNS)} from findings "
                               "where sweep_id = ?", [str(earlier["sweep_id"].iloc[0])]))

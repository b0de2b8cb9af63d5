"""Reuse: what earlier sweeps in the store already computed for this sweep's cells, copied
instead of refitted. One path for both kinds of result — the scores of a (cell, fold) and
the explain rows of a cell — through one store primitive (`Store.copy_rows`), so a copied
row always names the sweep that first computed it in `reused_from`."""

from __future__ import annotations

import json

import pandas as pd

from ..store import Store
from .grid import CELLS, EVALUATION, SCORE_PACKAGES, VERSION_NAMES, cell_id, identity_versions
from .leakage import FINDING_COLUMNS, ordered
from .resampling import REFIT, plan_identity

__all__ = ["EXPLAIN_TABLES", "find_scores", "found_keys", "all_found", "copy_scores",
           "copy_explained", "version_note", "find_findings"]

EXPLAIN_TABLES = ("importances", "fold_importances", "tree_folds", "tree_nodes",
                  "test_predictions", "coefficients")
"""The tables the explain step fills for a cell (besides its `explained` mark)."""


def find_scores(store: Store, prep, *, fresh: bool):
    """Where earlier sweeps hold finished score rows for these cells, as (folds, tests):
    one source sweep per (cell, repeat, fold) and per cell's refit; None if `fresh`."""
    if fresh:
        return None
    return store.finished_rows([c.cell_id for c in prep.cells], prep.spec.metrics)


def all_found(prep, found) -> bool:
    """True if every cell's every fold and refit is already stored."""
    return found is not None and prep.all_keys() <= found_keys(found)


def found_keys(found) -> frozenset:
    """The (cell_id, repeat, fold) keys that `find_scores` found (refit = (-1, -1))."""
    return frozenset(_keys(found)) if found is not None else frozenset()


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
    if (n_folds, n_tests) != (len(folds) * len(metrics), len(tests) * len(metrics)):
        folds, tests = _arrived(store, sweep_id, metrics)  # a source sweep was removed
        found = folds, tests
    done = _keys(found)
    keys = prep.fold_keys()
    whole = [c.cell_id for c in prep.cells if all((c.cell_id, *k) in done for k in keys)]
    if whole:
        source = folds[folds.cell_id.isin(whole)].groupby("cell_id").sweep_id.min()
        store.set_reused(sweep_id, source.rename("reused_from").reset_index())
    return frozenset(done), whole, (n_folds, n_tests)


def _arrived(store: Store, sweep_id: str, metrics: list[str]):
    """What a copy really brought into this sweep, as (folds, tests) like `find_scores`:
    the whole (cell, fold)s and refits, each with the sweep that first computed it. Asked
    only when fewer rows arrived than were found, because a sweep they came from was
    removed in between; what did not arrive is then fitted like any missing result."""
    args = [sweep_id, metrics]
    folds = store.query("""
        select cell_id, "repeat", fold, min(reused_from) as sweep_id from fold_scores
        where sweep_id = $1 and list_contains($2::varchar[], metric)
        group by all having count(distinct metric) = len($2::varchar[])""", args)
    tests = store.query("""
        select cell_id, min(reused_from) as sweep_id from test_scores
        where sweep_id = $1 and list_contains($2::varchar[], metric)
        group by all having count(distinct metric) = len($2::varchar[])""", args)
    return folds, tests


def copy_explained(store: Store, sweep_id: str, cell_ids: list[str], settings: str
                   ) -> list[str]:
    """Copy the explain rows of cells an earlier sweep (finished or not) explained with
    these settings into this one, marks included, in one transaction; return the cells."""
    # settings are compared here, not in SQL: a server cannot compare its JSON column to text
    found = store.query("""
        select cell_id, sweep_id, coalesce(reused_from, sweep_id) as origin,
               settings::varchar as settings, n_terms from explained
        where sweep_id <> ? and list_contains(?::varchar[], cell_id)""", [sweep_id, cell_ids])
    found = found[found["settings"] == settings]
    if found.empty:
        return []
    found = found.sort_values(["cell_id", "sweep_id"]).drop_duplicates("cell_id")
    marks = pd.DataFrame({"sweep_id": sweep_id, "cell_id": found["cell_id"],
                          "settings": settings, "reused_from": found["origin"],
                          "n_terms": found["n_terms"].astype("Int64")})
    store.copy_rows(sweep_id, found[["cell_id", "sweep_id"]],
                    {t: ("cell_id",) for t in EXPLAIN_TABLES}, also={"explained": marks})
    return found["cell_id"].tolist()


def version_note(store: Store, prep, found) -> str | None:
    """A sentence if cells found nothing to reuse only because earlier sweeps of the same
    data and plan scored them with other versions of the packages that change scores, or
    under another evaluation version or cell id scheme of foldwise: each such cell's id,
    computed with an earlier sweep's versions, is in the store."""
    have = set() if found is None else set(found[0].cell_id) | set(found[1].cell_id)
    missing = [c for c in prep.cells if c.cell_id not in have]
    if not missing or not store.holds_tables():
        return None
    sweeps = store.query("select sweep_id, versions::varchar as versions from sweeps "
                         "where data_sha256 = ? order by started_at desc",
                         [prep.frame.sha256])
    ours, plan = identity_versions(), plan_identity(prep.spec, prep.frame.task)
    seen, hits = set(), []
    for stored in sweeps["versions"]:
        theirs = _identity_versions_of(stored)
        key = json.dumps(theirs, sort_keys=True)
        if theirs is None or theirs == ours or key in seen:
            continue
        seen.add(key)
        packages = {k: theirs[k] for k in SCORE_PACKAGES}
        problem = None if theirs[CELLS] == "1" else prep.problem
        ids = {cell_id(c.family, c.params, prep.frame.sha256, plan, model=c.model,
                       versions=packages, evaluation=theirs[EVALUATION],
                       problem=problem): c.cell_id
               for c in missing}
        found_ids = store.query("select distinct cell_id from fold_scores where "
                                "list_contains(?::varchar[], cell_id)", [list(ids)])
        cells = {ids[i] for i in found_ids["cell_id"]} - {c for _, c, _ in hits}
        if cells:
            hits.append((theirs, cells, len(cells)))
    if not hits:
        return None
    n = len(set().union(*(cells for _, cells, _ in hits)))
    theirs = hits[0][0]
    changed = [f"{k} {theirs[k]} (here {ours[k]})" for k in SCORE_PACKAGES
               if theirs[k] != ours[k]]
    changed += [f"{name} {theirs[k]} (here {ours[k]})" for k, name in VERSION_NAMES.items()
                if theirs[k] != ours[k]]
    return (f"note: {n} cell{'s were' if n != 1 else ' was'} not reused: earlier sweeps of "
            f"the same data file and plan were stored with {', '.join(changed)}. Each "
            f"cell's identity holds these versions, so {'these are' if n != 1 else 'it is'} "
            "fitted again.")


def _identity_versions_of(stored: str | None) -> dict | None:
    """From a sweep's recorded versions (a store's text: untrusted), the versions that enter
    a cell id, or None if the sweep did not record them all. A sweep from before the
    evaluation version was recorded was scored under version 2 (the first to record the
    packages); one from before the cell id scheme was recorded used scheme 1."""
    try:
        recorded = json.loads(stored or "{}")
    except ValueError:
        return None
    if not isinstance(recorded, dict):
        return None
    theirs = {k: recorded.get(k) for k in SCORE_PACKAGES}
    theirs[EVALUATION] = recorded.get(EVALUATION, "2")
    theirs[CELLS] = recorded.get(CELLS, "1")
    if not all(isinstance(v, str) and 0 < len(v) <= 40 for v in theirs.values()):
        return None
    return theirs


def find_findings(store: Store, key: str) -> pd.DataFrame | None:
    """The findings an earlier sweep with this checks key recorded, so that a rerun with
    nothing to fit need not build the plan to check it again; None if no sweep has the key."""
    earlier = store.query("select sweep_id from sweeps where checks_key = ? "
                          "order by started_at desc, sweep_id desc limit 1", [key])
    if earlier.empty:
        return None
    return ordered(store.query(f"select {', '.join(FINDING_COLUMNS)} from findings "
                               "where sweep_id = ?", [str(earlier["sweep_id"].iloc[0])]))

"""A removal killed with SIGKILL at random points leaves every chosen sweep whole or gone,
never half-removed, and every other sweep untouched — on a DuckDB file and on the
PostgreSQL team store.

The child process announces the moment its removal's transaction has begun (the test's own
wrapper around the store's transaction, in the child only); the kill then lands at a
random delay within the time a whole removal takes from there, measured first on a copy."""

from __future__ import annotations

import itertools
import random
import shutil
import signal
import subprocess
import sys
import time
from datetime import datetime
from pathlib import Path

import pytest

from runner.store import Store
from runner.store.tidy import SWEEP_TABLES
from runner.store.transfer import merge_store

from .store_builder import write_sweep

CHILD = """
import sys
from runner.store import Store
from runner.store.tidy import remove_sweeps

store = Store(sys.argv[1])
plain = Store._transaction

def announced(self, work, *, what):
    def begun(con):
        print("begun", flush=True)
        return work(con)
    return plain(self, begun, what=what)

Store._transaction = announced
remove_sweeps(store, sys.argv[2].split(","))
print("done", flush=True)
"""
TARGETS = [f"20260102-00000{i}-{i:04x}" for i in range(8)]
KEPT = ["20260101-000000-keep", "20260103-000000-keep"]
_names = itertools.count()


@pytest.fixture(scope="module")
def source(tmp_path_factory) -> Path:
    """A store of ten sweeps (8 to remove, 2 to keep), 3 models × 12 cells × 20 folds each,
    with failures for one cell: every table removal touches has rows."""
    path = tmp_path_factory.mktemp("kill") / "source.duckdb"
    rng = random.Random(5)
    for i, sid in enumerate([KEPT[0], *TARGETS, KEPT[1]]):
        models = {m: [[rng.uniform(1, 2) for _ in range(20)] for _ in range(12)]
                  for m in ("a", "b", "c")}
        write_sweep(path, models, k=5, repeats=4, sweep_id=sid, failures=["a-3"],
                    started_at=datetime(2026, 1, 1, 0, i))
    explain = {  # one row of each kind the explain step stores, per sweep
        "sweep_labels": "'purpose' as key, 'scratch' as value",
        "importances": "'a-0' as cell_id, 'x' as feature, 'impurity' as method, 1.0 as value",
        "fold_importances": "'a-0' as cell_id, 0 as repeat, 0 as fold, 'x' as feature",
        "tree_folds": "'a-0' as cell_id, 0 as repeat, 0 as fold, 3 as n_leaves",
        "tree_nodes": "'a-0' as cell_id, 0 as node, -1 as parent",
        "test_predictions": "'a-0' as cell_id, 0 as row, 1.0 as observed, 1.1 as predicted",
        "explained": "'a-0' as cell_id, '{}' as settings",
        "coefficients": "'a-0' as cell_id, 0 as position, 'x' as term, 0.5 as coefficient",
        "models": "'m-' || sweep_id as model_id, 'a-0' as cell_id"}
    with Store(path)._connect(read_only=False) as con:
        for table, columns in explain.items():
            con.execute(f"insert into {table} by name select sweep_id, {columns} from sweeps")
    return path


def _counts(store: Store) -> dict[tuple[str, str], int]:
    rows = store.query(" union all ".join(
        f"select '{t}' as t, sweep_id, count(*) as n from {t} group by sweep_id"
        for t in SWEEP_TABLES if t != "model_coefficients"))  # keyed by model, not sweep
    return {(r.t, r.sweep_id): int(r.n) for r in rows.itertuples(index=False)}


def _copy(kind: str, source: Path, folder: Path, pg) -> str:
    if kind == "file":
        target = folder / f"copy{next(_names)}.duckdb"
        shutil.copy(source, target)
        return str(target)
    url = pg.create_database(f"kill_{next(_names)}")
    merge_store(Store(url), source)
    return url


def _removal(where: str, kill_after: float | None) -> float:
    """Run a removal of TARGETS in a child; SIGKILL it `kill_after` seconds after its
    transaction began (None: let it finish). Returns the seconds from begun to done/kill."""
    proc = subprocess.Popen([sys.executable, "-c", CHILD, where, ",".join(TARGETS)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    line = proc.stdout.readline()
    start = time.monotonic()
    assert line.strip() == "begun", proc.communicate()[1]
    if kill_after is None:
        out, err = proc.communicate(timeout=120)
        assert proc.returncode == 0 and out.strip() == "done", err
    else:
        time.sleep(kill_after)
        proc.send_signal(signal.SIGKILL)
        proc.communicate(timeout=60)
    return time.monotonic() - start


@pytest.mark.parametrize("kind, trials", [("file", 5), ("server", 5)])
def test_a_killed_removal_leaves_each_sweep_whole_or_gone(kind, trials, source, tmp_path,
                                                          request):
    pg = request.getfixturevalue("pg") if kind == "server" else None
    before = _counts(Store(source))
    whole = {k: n for k, n in before.items() if k[1] in TARGETS}
    kept = {k: n for k, n in before.items() if k[1] in KEPT}
    # every table keyed by sweep holds rows (a model's coefficients are keyed by the model;
    # the leakage checks find nothing on this data)
    assert {t for t, _ in whole} == set(SWEEP_TABLES) - {"model_coefficients", "findings"}
    took = _removal(_copy(kind, source, tmp_path, pg), None)  # how long a whole one takes
    rng = random.Random(2026)
    outcomes = []
    for _ in range(trials):
        where = _copy(kind, source, tmp_path, pg)
        delay = rng.uniform(0, 1.2 * took)
        _removal(where, delay)
        after = _counts(Store(where))
        left = {k: n for k, n in after.items() if k[1] in TARGETS}
        assert left in (whole, {}), (delay, took, len(left))  # all of it, or none of it
        assert {k: n for k, n in after.items() if k[1] in KEPT} == kept
        outcomes.append(f"{delay:.3f}s: {'whole' if left else 'gone'}")
    print(f"{kind}: a removal takes {took:.3f}s; " + "; ".join(outcomes))

"""What a sweep holds in memory: the parent keeps its rows once (as the split the tasks
read), and a worker gives back the heap a long task freed before its next task."""

from __future__ import annotations

import gc
import time
import weakref

import numpy as np
import pandas as pd
import pytest

from runner.store import Store
from runner.write import executors
from runner.write.engine import run_sweep
from runner.write.prepare import _path_resolver, prepare

from .helpers import spec_from

MODELS = """
ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 10.0]}}
lasso: {family: linear, grid: {penalty: l1, alpha: [0.5, 5.0]}}
tree: {family: pruned_tree, grid: {ccp_fraction: {log: [0.001, 0.1], n: 3}}}
"""  # the lasso path's picks are refitted by the explain step; the rest is read


def _root(array: np.ndarray) -> np.ndarray:
    """The array that owns the memory `array` views."""
    while isinstance(array.base, np.ndarray):
        array = array.base
    return array


@pytest.fixture
def folder(diabetes_csv):
    return diabetes_csv.parent


def test_keeping_only_the_split_keeps_the_same_rows_and_refuses_the_full_table(folder):
    spec = spec_from(folder, MODELS)
    prep = prepare(spec)
    prep.findings()  # the leakage checks read the full table before it goes
    held = [weakref.ref(_root(prep.frame.X[c].to_numpy())) for c in prep.frame.X.columns]
    prep.keep_split_only()
    gc.collect()
    assert all(ref() is None for ref in held)  # the full table's memory is gone
    # Source: the data file as pandas reads it, cut at the plan's rows (the plan itself is
    # checked against scikit-learn's splitters in test_resampling.py).
    raw = pd.read_csv(folder / "diabetes.csv")
    plan = prep.plan
    features = [c for c in raw.columns if c != "progression"]
    np.testing.assert_array_equal(prep.split["X_train"].to_numpy(),
                                  raw[features].to_numpy()[plan.train_rows])
    np.testing.assert_array_equal(prep.split["X_test"].to_numpy(),
                                  raw[features].to_numpy()[plan.test_rows])
    np.testing.assert_array_equal(prep.split["y_train"],
                                  raw["progression"].to_numpy()[plan.train_rows])
    assert len(prep.frame.X) == 0 and list(prep.frame.X.columns) == features
    assert len(prep.frame.features) == len(features)
    with pytest.raises(RuntimeError, match="keep_split_only"):
        prep.findings()
    with pytest.raises(RuntimeError, match="keep_split_only"):
        _path_resolver(prep)("tree", {"min_samples_leaf": 1})


def test_a_sweep_after_letting_the_table_go_scores_as_one_that_kept_it(folder, monkeypatch):
    """The explain step and the scores read the split, never the full table."""
    spec = spec_from(folder, MODELS, explain="picked")
    kept = run_sweep(spec, store=Store(folder / "kept.duckdb"), jobs=1)
    monkeypatch.setattr("runner.write.prepare.Prepared.keep_split_only", lambda self: None)
    whole = run_sweep(spec_from(folder, MODELS, explain="picked"),
                      store=Store(folder / "whole.duckdb"), jobs=1)
    assert kept.n_fold_rows == whole.n_fold_rows > 0 and kept.explain_refits > 0
    query = "select cell_id, \"repeat\", fold, metric, value from fold_scores order by all"
    pd.testing.assert_frame_equal(Store(folder / "kept.duckdb").query(query),
                                  Store(folder / "whole.duckdb").query(query),
                                  check_exact=True)
    query = "select cell_id, method, feature, value from importances order by all"
    pd.testing.assert_frame_equal(Store(folder / "kept.duckdb").query(query),
                                  Store(folder / "whole.duckdb").query(query),
                                  check_exact=True)


def test_a_worker_gives_back_freed_memory_after_a_long_task_only(monkeypatch):
    trims: list[int] = []
    monkeypatch.setattr(executors, "_TRIM", lambda pad: trims.append(pad))
    monkeypatch.setattr(executors, "TRIM_AFTER_SECONDS", 0.05)
    parent = -1  # never this process: the watch is skipped only in the parent itself
    monkeypatch.setattr(executors, "_WATCHED", [parent])
    assert executors._watched(parent, lambda x: x + 1, 1) == 2
    assert trims == []  # a quick task: no walk over the heap
    assert executors._watched(parent, lambda: time.sleep(0.1) or "done") == "done"
    assert trims == [0]

    def fails():
        time.sleep(0.1)
        raise ValueError("fit failed")

    with pytest.raises(ValueError):
        executors._watched(parent, fails)
    assert trims == [0, 0]  # a long task that raised freed its memory too


def test_local_workers_load_neither_the_store_nor_the_spec_model(folder, tmp_path):
    """A sweep's local workers (its fits, and the explain step's refits) import what fitting
    needs and not DuckDB, pydantic or foldwise's store: each worker holds less memory and
    starts its first task sooner. Run in a fresh interpreter, whose workers are new."""
    import json
    import subprocess
    import sys

    from .helpers import write_spec

    spec = write_spec(folder, MODELS, explain="picked", name="workers.yaml")
    script = f"""
import json

from runner.store import Store
from runner.write.engine import run_sweep
from runner.write.executors import LocalExecutor
from runner.write.spec import load_spec

result = run_sweep(load_spec({str(spec)!r}), store=Store({str(tmp_path / 'w.duckdb')!r}),
                   jobs=2, force_jobs=True)
assert result.explain_refits > 0, result

def loaded():
    import sys
    names = ("duckdb", "pydantic", "yaml", "runner.store", "runner.write.spec",
             "runner.write.engine", "runner.write.explain", "runner.write.tasks",
             "runner.write.readings")
    return sorted(name for name in names if name in sys.modules)

with LocalExecutor(2) as workers:
    print(json.dumps(sorted(set(map(tuple, workers.results(
        loaded, {{}}, range(8), lambda data, item: ((), {{}})))))))
"""
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                         timeout=300)
    assert out.returncode == 0, out.stderr[-2000:]
    seen = [tuple(s) for s in json.loads(out.stdout.strip().splitlines()[-1])]
    assert ("runner.write.readings", "runner.write.tasks") in seen, seen  # a worker that fitted
    assert all(set(s) <= {"runner.write.readings", "runner.write.tasks"} for s in seen), seen

"""Never lose a finished cell: reuse on rerun, resume after SIGKILL, interrupted status,
two sweeps writing one store at once while a third process queries."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import duckdb
import pandas as pd
import pytest

from runner.write.engine import run_sweep
from runner.write.spec import parse_spec
from runner.store import Store

from .helpers import diabetes_frame, spec_from, write_spec

MODELS = """
ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 1.0, 10.0]}}
tree: {family: pruned_tree, grid: {ccp_alpha: [0.0, 50.0, 200.0], min_samples_leaf: [3]}}
forest: {family: forest, grid: {n_estimators: [15], max_features: [0.3, 0.6]}}
"""
N_CELLS, K, R, N_METRICS = 8, 3, 2, 3


def _scores(store: Store, sweep_id: str) -> pd.DataFrame:
    return store.query("""select c.model, c.params, f."repeat", f.fold, f.metric, f.value
                          from fold_scores f join cells c using (sweep_id, cell_id)
                          where f.sweep_id = ? order by all""", [sweep_id])


@pytest.fixture
def folder(tmp_path):
    diabetes_frame().to_csv(tmp_path / "diabetes.csv", index=False)
    return tmp_path


def test_unchanged_rerun_fits_nothing_and_reuses_every_cell(folder):
    spec = spec_from(folder, MODELS)
    store = Store(folder / "store.duckdb")
    first = run_sweep(spec, store=store, jobs=1)
    totals: list = []
    again = run_sweep(spec, store=store, jobs=1, progress=lambda done, total: totals.append(total))
    assert set(totals) <= {0}  # no task was scheduled
    assert again.n_reused == N_CELLS and again.n_fitted == 0
    pd.testing.assert_frame_equal(_scores(store, first.sweep_id), _scores(store, again.sweep_id))
    cells = store.query("select reused_from from cells where sweep_id = ?", [again.sweep_id])
    assert (cells.reused_from == first.sweep_id).all()
    rows = store.query("select count(*) n from fold_scores where sweep_id = ?", [again.sweep_id])
    assert rows.n[0] == N_CELLS * K * R * N_METRICS


def test_changing_one_grid_value_fits_only_new_cells(folder):
    store = Store(folder / "store.duckdb")
    run_sweep(spec_from(folder, MODELS), store=store, jobs=1)
    changed = spec_from(folder, MODELS.replace("[0.1, 1.0, 10.0]", "[0.1, 1.0, 30.0]"))
    result = run_sweep(changed, store=store, jobs=1)
    assert (result.n_reused, result.n_fitted) == (N_CELLS - 1, 1)
    fresh = run_sweep(changed, store=store, jobs=1, fresh=True)
    assert (fresh.n_reused, fresh.n_fitted) == (0, N_CELLS)
    pd.testing.assert_frame_equal(_scores(store, result.sweep_id), _scores(store, fresh.sweep_id))


def test_a_source_sweep_removed_before_its_rows_are_copied_is_fitted_again(folder,
                                                                          monkeypatch):
    """The fits start before the earlier rows are copied; whatever a removal in between
    takes away is fitted after them, with the same scores as a fresh sweep's (a fresh
    sweep's scores equal scikit-learn's own: tests/test_parity.py)."""
    import runner.write.engine as engine
    from runner.store.tidy import remove_sweeps

    store = Store(folder / "store.duckdb")
    first = run_sweep(spec_from(folder, MODELS), store=store, jobs=2)
    changed = spec_from(folder, MODELS.replace("[0.1, 1.0, 10.0]", "[0.1, 1.0, 30.0]"))
    copy = engine.copy_scores

    def removed_first(store_, sweep_id, prep, found):
        remove_sweeps(store_, [first.sweep_id])
        return copy(store_, sweep_id, prep, found)

    monkeypatch.setattr(engine, "copy_scores", removed_first)
    totals: list = []
    result = run_sweep(changed, store=store, jobs=2,
                       progress=lambda done, total: totals.append(total))
    assert (result.n_reused, result.n_fitted) == (0, N_CELLS)
    assert totals[0] > 0 and result.n_fold_rows == N_CELLS * K * R * N_METRICS
    monkeypatch.undo()
    fresh = run_sweep(changed, store=store, jobs=1, fresh=True)
    pd.testing.assert_frame_equal(_scores(store, result.sweep_id), _scores(store, fresh.sweep_id))


def test_a_new_evaluation_version_stops_reuse_and_run_says_so(folder, monkeypatch):
    # A store written by a foldwise whose evaluation version was 2 and whose cell ids left
    # out the problem (scheme 1), before sweeps recorded either: this foldwise's cell ids
    # differ, nothing is copied, and the run says why.
    import duckdb

    from runner.write import grid, prepare

    spec = spec_from(folder, MODELS)
    store = Store(folder / "store.duckdb")
    monkeypatch.setattr(grid, "EVAL_VERSION", "2")
    monkeypatch.setattr(prepare, "problem_identity", lambda frame, infinite, words=None: None)
    first = run_sweep(spec, store=store, jobs=1)
    monkeypatch.undo()
    with duckdb.connect(str(folder / "store.duckdb")) as con:  # as an older foldwise wrote it
        con.execute("update sweeps set versions = json_object('scikit-learn', "
                    "versions->>'scikit-learn', 'numpy', versions->>'numpy', 'scipy', "
                    "versions->>'scipy', 'pandas', versions->>'pandas') where sweep_id = ?",
                    [first.sweep_id])
    said: list[str] = []
    again = run_sweep(spec, store=store, jobs=1, on_message=said.append)
    assert (again.n_reused, again.n_fitted) == (0, N_CELLS)
    assert said == [f"note: {N_CELLS} cells were not reused: earlier sweeps of the same data "
                    f"file and plan were stored with foldwise's evaluation version 2 (here "
                    f"{grid.EVAL_VERSION}), foldwise's cell identity version 1 (here 2). Each "
                    "cell's identity holds these versions, so these are fitted again."]
    versions = store.query("select versions::varchar v from sweeps where sweep_id = ?",
                           [again.sweep_id]).v[0]
    assert json.loads(versions)["evaluation"] == grid.EVAL_VERSION == "4"
    assert json.loads(versions)["cells"] == grid.CELL_SCHEME == "2"
    third = run_sweep(spec, store=store, jobs=1, on_message=said.append)
    assert third.n_reused == N_CELLS and len(said) == 1


@pytest.mark.parametrize("change, lines", [
    ("target", "target: bp\n  drop: [progression]"),
    ("drop", "target: progression\n  drop: [s5, s6]"),
    ("categorical", "target: progression\n  categorical: [s1_band]"),
    ("infinite", "target: progression\n  infinite: missing"),
    ("missing_words", "target: progression\n  missing_words: ['NA']")])
def test_another_target_or_other_features_on_the_same_file_are_other_cells(folder, change,
                                                                         lines):
    # The same file, plan and grid, but another problem: nothing is copied, and the scores
    # are those a fresh store gets for the changed spec.
    df = diabetes_frame()
    df["s1_band"] = (df.s1 // 40).astype(int)
    df.to_csv(folder / "diabetes.csv", index=False)
    models = "ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 10.0]}}"
    store = Store(folder / "store.duckdb")
    first = run_sweep(spec_from(folder, models), store=store, jobs=1)
    path = write_spec(folder, models)
    path.write_text(path.read_text().replace("target: progression", lines))
    changed = parse_spec(path.read_text(), source=path)
    again = run_sweep(changed, store=store, jobs=1)
    assert (again.n_reused, again.n_fitted) == (0, 2)
    fresh = run_sweep(changed, store=Store(folder / "fresh.duckdb"), jobs=1)
    ours = _scores(store, again.sweep_id)
    pd.testing.assert_frame_equal(ours, _scores(Store(folder / "fresh.duckdb"), fresh.sweep_id))
    before = _scores(store, first.sweep_id)
    # no infinite value and no missing word in the file: reading them otherwise changes no
    # score
    assert before.value.equals(ours.value) == (change in ("infinite", "missing_words"))


def test_an_upgrade_of_a_scoring_package_stops_reuse_and_run_says_so(folder, monkeypatch):
    # The same spec and data after "upgrading" scikit-learn: every cell id changes, nothing
    # is copied, and the run says which versions differ.
    from runner.write import grid, prepare

    spec = spec_from(folder, MODELS)
    store = Store(folder / "store.duckdb")
    first = run_sweep(spec, store=store, jobs=1)
    real = grid.score_versions()
    upgraded = dict(real, **{"scikit-learn": "99.0"})
    for module in (grid, prepare):
        monkeypatch.setattr(module, "score_versions", lambda: upgraded)
    said: list[str] = []
    again = run_sweep(spec, store=store, jobs=1, on_message=said.append)
    assert (again.n_reused, again.n_fitted) == (0, N_CELLS)
    assert said == [f"note: {N_CELLS} cells were not reused: earlier sweeps of the same data "
                    f"file and plan were stored with scikit-learn {real['scikit-learn']} (here "
                    "99.0). Each cell's identity holds these versions, so these are fitted "
                    "again."]
    ids = store.query("select sweep_id, count(*) n from cells c where exists (select 1 from "
                      "cells d where d.cell_id = c.cell_id and d.sweep_id <> c.sweep_id) "
                      "group by sweep_id")
    assert ids.empty  # no cell id is shared by the two sweeps
    versions = store.query("select versions::varchar v from sweeps where sweep_id = ?",
                           [again.sweep_id]).v[0]
    assert json.loads(versions)["scikit-learn"] == "99.0"
    monkeypatch.undo()
    third = run_sweep(spec, store=store, jobs=1, on_message=said.append)
    assert third.n_reused == N_CELLS and len(said) == 1  # back on the first sweep's versions
    assert store.query("select distinct reused_from from cells where sweep_id = ?",
                       [third.sweep_id]).reused_from.tolist() == [first.sweep_id]


SWEEP_SCRIPT = """
import sys
from runner.write.engine import run_sweep
from runner.write.spec import load_spec
from runner.store import Store
run_sweep(load_spec(sys.argv[1]), store=Store(sys.argv[2]), jobs=1, batch_seconds=0.0)
"""


def _fold_rows(path: Path) -> int:
    for _ in range(200):
        try:
            with duckdb.connect(str(path), read_only=True) as con:
                return con.execute("select count(*) from fold_scores").fetchone()[0]
        except duckdb.Error:
            time.sleep(0.02)
    return -1


@pytest.mark.parametrize("kill_after_rows", [1, 50, 110])
def test_sigkill_then_rerun_completes_exactly(folder, kill_after_rows):
    spec_path = write_spec(folder, MODELS)
    store_path = folder / "killed.duckdb"
    proc = subprocess.Popen([sys.executable, "-c", SWEEP_SCRIPT, str(spec_path), str(store_path)])
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and proc.poll() is None:
        if store_path.exists() and _fold_rows(store_path) >= kill_after_rows:
            break
        time.sleep(0.01)
    finished_first = proc.poll() == 0  # a fast machine may finish before the kill lands
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    landed = _fold_rows(store_path) if store_path.exists() else 0
    store = Store(store_path)
    # The sweep may have recorded its end and been killed while exiting (a busy machine).
    ended = store.query("select status from sweeps").status.tolist() == ["finished"] \
        if store_path.exists() else False
    result = run_sweep(spec_from(folder, MODELS), store=store, jobs=1)
    status = store.query("select sweep_id, status from sweeps order by started_at")
    first = "finished" if finished_first or ended else "interrupted"
    assert status.status.tolist() == [first, "finished"], landed
    got = store.query("""select cell_id, "repeat", fold, metric, count(*) n from fold_scores
                         where sweep_id = ? group by all""", [result.sweep_id])
    assert len(got) == N_CELLS * K * R * N_METRICS and (got.n == 1).all()
    clean = Store(folder / "clean.duckdb")
    reference = run_sweep(spec_from(folder, MODELS), store=clean, jobs=1)
    pd.testing.assert_frame_equal(_scores(store, result.sweep_id),
                                  _scores(clean, reference.sweep_id))
    assert result.n_fitted + result.n_reused == N_CELLS
    assert 0 <= landed <= N_CELLS * K * R * N_METRICS


def test_two_sweeps_and_a_reader_share_one_store(folder):
    first = write_spec(folder, MODELS, name="a.yaml")
    second = write_spec(folder, MODELS.replace("[0.1, 1.0, 10.0]", "[0.2, 2.0]"), name="b.yaml")
    store_path = folder / "shared.duckdb"
    env = dict(os.environ)
    procs = [subprocess.Popen([sys.executable, "-m", "runner", "run", str(s), "--store",
                               str(store_path), "--jobs", "1", "--quiet", "--fresh"],
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
             for s in (first, second)]
    answers, slowest = 0, 0.0
    while any(p.poll() is None for p in procs):
        if store_path.exists():
            start = time.monotonic()
            out = subprocess.run([sys.executable, "-m", "runner", "sweeps", "--store",
                                  str(store_path), "--format", "json"], capture_output=True,
                                 text=True)
            slowest = max(slowest, time.monotonic() - start)
            assert out.returncode == 0, out.stderr
            answers += 1
        time.sleep(0.05)
    for p in procs:
        out, err = p.communicate()
        assert p.returncode == 0, err
    sweeps = json.loads(subprocess.run([sys.executable, "-m", "runner", "sweeps", "--store",
                                        str(store_path), "--format", "json"],
                                       capture_output=True, text=True).stdout)
    assert sorted(s["fold_rows"] for s in sweeps) == [7 * K * R * N_METRICS,
                                                      N_CELLS * K * R * N_METRICS]
    assert all(s["status"] == "finished" for s in sweeps)
    assert answers >= 1 and slowest < 10


SLOW_MODELS = """
ridge: {family: linear, grid: {penalty: l2, alpha: [1.0]}}
forest: {family: forest, grid: {n_estimators: [300], max_features: [0.3, 0.6, 1.0]}}
"""  # long enough (~20 s on one core) that Ctrl-C lands mid-sweep


def test_ctrl_c_keeps_finished_rows_and_exits_130(folder):
    spec_path = write_spec(folder, SLOW_MODELS)
    store_path = folder / "stopped.duckdb"
    # A test run started in the background of a script inherits SIGINT ignored, and so
    # would this child; give it the terminal's usual disposition.
    proc = subprocess.Popen([sys.executable, "-m", "runner", "run", str(spec_path), "--store",
                             str(store_path), "--jobs", "1", "--quiet"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and proc.poll() is None:
        if store_path.exists() and _fold_rows(store_path) >= 1:
            break
        time.sleep(0.2)  # poll gently: each look takes the file's lock from the sweep
    assert proc.poll() is None, "the sweep ended before any rows were seen"
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, (out, err)
    assert "interrupted" in err and "Traceback" not in err
    listing = subprocess.run([sys.executable, "-m", "runner", "sweeps", "--store",
                              str(store_path), "--format", "json"], capture_output=True, text=True)
    assert [s["status"] for s in json.loads(listing.stdout)] == ["interrupted"]
    kept = _fold_rows(store_path)
    assert 1 <= kept < 4 * K * R * N_METRICS

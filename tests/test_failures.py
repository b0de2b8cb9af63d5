"""A fit that raises is data: recorded per cell and fold, the sweep goes on, the cell is
never picked and summary says so. Warnings during fits are counted per row."""

from __future__ import annotations


import pytest
from click.testing import CliRunner

from runner.cli import main
from runner.write.engine import run_sweep
from runner.families import linear
from runner.read.queries import summary
from runner.store import Store

from .helpers import spec_from

MODELS = """
shaky: {family: linear, grid: {penalty: l2, alpha: [13.0]}}
ridge: {family: linear, grid: {penalty: l2, alpha: [1.0]}}
forest: {family: forest, grid: {n_estimators: [5], max_samples: [0.000001]}}
"""


@pytest.fixture
def failing_ridge(monkeypatch):
    """Make every fit of the alpha=13 cell raise, as a numerical failure would."""
    original = linear._regressor

    def regressor(params):
        if params.get("alpha") == 13.0:
            raise FloatingPointError("matrix is singular to working precision")
        return original(params)

    monkeypatch.setattr(linear, "_regressor", regressor)


def test_failed_cells_are_recorded_and_never_picked(tmp_path, diabetes_csv, failing_ridge):
    store = Store(tmp_path / "store.duckdb")
    result = run_sweep(spec_from(tmp_path, MODELS), store=store, jobs=1)  # in-process
    assert result.status == "finished"
    assert result.n_failed_fits == 3 * 2 + 1  # every fold and the refit
    failures = store.query("select c.model, f.kind, f.message from failures f "
                           "join cells c using (sweep_id, cell_id)")
    assert set(failures.model) == {"shaky"} and set(failures.kind) == {"FloatingPointError"}
    assert failures.message.str.contains("singular").all()
    result = summary(store)
    table = result.table
    assert "shaky" not in set(table.model) and result.unpicked == ("shaky",)
    assert table[table.model == "ridge"].failed_cells.iloc[0] == 0
    out = CliRunner().invoke(main, ["summary", "--store", str(tmp_path / "store.duckdb")])
    assert out.exit_code == 0 and "model 'shaky' has no cell to pick" in out.output


def test_warnings_are_counted(tmp_path, diabetes_csv, monkeypatch):
    # Every fit of the alpha=13 cell warns twice (a regressor that warns, so the count does
    # not hang on which warnings a scikit-learn version raises); the other cells never warn.
    import warnings

    from sklearn.linear_model import Ridge

    class Warns(Ridge):
        def fit(self, X, y, sample_weight=None):
            warnings.warn("first", UserWarning)
            warnings.warn("second", RuntimeWarning)
            return super().fit(X, y, sample_weight)

    original = linear._regressor
    monkeypatch.setattr(linear, "_regressor",
                        lambda params: Warns(alpha=13.0, solver="cholesky")
                        if params.get("alpha") == 13.0 else original(params))
    store = Store(tmp_path / "store.duckdb")
    run_sweep(spec_from(tmp_path, MODELS.replace("shaky", "other")), store=store, jobs=1)
    counts = store.query("select c.model, min(f.n_warnings) lo, max(f.n_warnings) hi "
                         "from fold_scores f join cells c using (sweep_id, cell_id) "
                         "group by c.model")
    lo = dict(zip(counts.model, counts.lo))
    hi = dict(zip(counts.model, counts.hi))
    assert lo["other"] == hi["other"] == 2 and hi["ridge"] == 0


# -- unfinished is not failed: what summary, pick and compare say mid-sweep ----------------
def _mid_sweep(path, *, status="running", pid=None, failures=(), done_slow=0):
    """Model `m` finished (2 cells); model `slow` has 2 cells of which `done_slow` folds of
    the first are scored and the rest not yet (k=2, repeats=2: 4 folds a cell)."""
    import os
    import socket

    from .store_builder import write_sweep

    scores = {"m": [[2.0, 2.2, 1.8, 2.0], [1.0, 1.2, 0.8, 1.0]],
              "slow": [[3.0, 3.1, 2.9, 3.0], [2.5, 2.6, 2.4, 2.5]]}
    missing = [("slow-0", i) for i in range(done_slow, 4)] + [("slow-1", i) for i in range(4)]
    return write_sweep(path, scores, k=2, repeats=2, drop=missing, failures=failures,
                       status=status, host=socket.gethostname(),
                       pid=os.getpid() if pid is None else pid)


def _dead_pid() -> int:
    import subprocess

    proc = subprocess.Popen(["true"])
    proc.wait()
    return proc.pid  # a process of this host that has exited


SID = "20260101-000000-aaaa"
RUNNING = (f"note: sweep {SID} is still running: 2 of 4 cells have all 4 folds scored, and "
           "the picks are made among those so far.")


@pytest.mark.parametrize("case, lines", [
    ("running", [RUNNING, "note: model 'slow' has no cell to pick yet: of its 2 cells, 2 are "
                          "not finished yet."]),
    ("interrupted", [
        f"note: sweep {SID} was interrupted: 2 of 4 cells have all 4 folds scored, and the "
        "picks are made among those; running the spec again completes only what is missing.",
        "note: model 'slow' has no cell to pick: of its 2 cells, 2 were not finished when the "
        "sweep was interrupted."]),
    ("running with a failure", [RUNNING, "note: model 'slow' has no cell to pick yet: of its "
                                "2 cells, 1 has a failed fit and 1 is not finished yet. "
                                f"`foldwise sql \"select * from failures where sweep_id = "
                                f"'{SID}'\"` shows the errors."]),
    ("finished with failures", [
        "note: model 'slow' has no cell to pick: of its 2 cells, 2 have a failed fit. "
        f"`foldwise sql \"select * from failures where sweep_id = '{SID}'\"` shows the "
        "errors."]),
])
def test_unfinished_cells_are_not_blamed_on_failed_fits(tmp_path, case, lines):
    path = tmp_path / "mid.duckdb"
    if case == "running":
        _mid_sweep(path, done_slow=2)
    elif case == "interrupted":
        _mid_sweep(path, status="running", pid=_dead_pid())  # killed: still marked running
    elif case == "running with a failure":
        _mid_sweep(path, failures=["slow-0"], done_slow=1)
    else:
        _mid_sweep(path, status="finished", failures=["slow-0", "slow-1"])
    for command in (["summary"], ["pick"], ["compare"]):
        out = CliRunner().invoke(main, [*command, "--store", str(path)])
        assert out.exit_code == 0, out.output
        assert out.stderr.splitlines() == lines, (command, out.stderr)
    if case in ("running", "interrupted"):
        assert "fail" not in out.stderr


def test_summary_with_nothing_to_pick_yet_still_names_its_sweep(tmp_path):
    from .store_builder import write_sweep

    path = tmp_path / "early.duckdb"
    write_sweep(path, {"slow": [[3.0, 3.1, 2.9, 3.0]]}, k=2, repeats=2,
                drop=[("slow-0", i) for i in range(1, 4)], status="running", host="elsewhere")
    result = summary(Store(path))
    assert result.table.empty and result.facts.sweep_id == SID and result.coverage.unpicked == (
        "slow",)
    out = CliRunner().invoke(main, ["summary", "--store", str(path)])
    assert out.exit_code == 0 and f"sweep {SID}: picked cell per model (one-SE rule)" in out.stdout
    assert out.stderr.splitlines() == [
        f"note: sweep {SID} is still running: none of its 1 cell has all 4 folds scored yet.",
        "note: model 'slow' has no cell to pick yet: of its 1 cell, 1 is not finished yet."]

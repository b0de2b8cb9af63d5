"""A fit that raises is data: recorded per cell and fold, the sweep goes on, the cell is
never picked and summary says so. Warnings during fits are counted per row."""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner

from runner.cli import main
from runner.engine import run_sweep
from runner.families import linear
from runner.queries import summary
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


def test_warnings_are_counted(tmp_path, diabetes_csv):
    # A bootstrap of 1 sample per tree makes scikit-learn warn on every forest fit.
    store = Store(tmp_path / "store.duckdb")
    run_sweep(spec_from(tmp_path, MODELS.replace("shaky", "other")), store=store, jobs=1)
    counts = store.query("select c.model, min(f.n_warnings) lo from fold_scores f "
                         "join cells c using (sweep_id, cell_id) group by c.model")
    lo = dict(zip(counts.model, counts.lo))
    assert lo["forest"] >= 1 and lo["ridge"] == 0

"""The public Python API: every name in runner.__all__ resolves, importing runner does not
pull in scikit-learn, and the table functions return DataFrames from a real sweep."""

from __future__ import annotations

import importlib
import subprocess
import sys

import pandas as pd

import runner

from .helpers import spec_from


def test_every_public_name_resolves():
    for name in runner.__all__:
        assert getattr(runner, name) is not None, name


def test_import_is_light():
    code = "import sys, runner; print('sklearn' in sys.modules, 'matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.stdout.strip() == "False False"


def test_tables_from_a_sweep(tmp_path, diabetes_csv):
    spec = spec_from(tmp_path, """
        ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 10.0]}}
        tree: {family: pruned_tree, grid: {ccp_alpha: [0.0, 200.0]}}
    """)
    store = runner.Store(tmp_path / "store.duckdb")
    runner.run_sweep(spec, store=store, jobs=1)
    # Importing the submodules must not shadow the API's names.
    importlib.import_module("runner.read.picks")
    importlib.import_module("runner.store")

    for result in (runner.summary(store), runner.pick_table(store), runner.compare_table(store),
                   runner.complexity_table(store, "tree")):
        assert isinstance(result.table, pd.DataFrame) and len(result.table) >= 1
    assert set(runner.summary(store).table.model) == {"ridge", "tree"}
    assert len(runner.complexity_table(store, "tree").table) == 2

"""Shared fixtures: scikit-learn's bundled diabetes data (Efron et al. 2004) written to CSV
files in a fresh folder."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from .helpers import diabetes_frame


@pytest.fixture
def diabetes_csv(tmp_path) -> Path:
    path = tmp_path / "diabetes.csv"
    diabetes_frame().to_csv(path, index=False)
    return path


@pytest.fixture
def diabetes_mixed_csv(tmp_path) -> Path:
    """Diabetes with `sex` as text and 8 % of two columns blanked (fixed rows)."""
    df = diabetes_frame()
    df["sex"] = df["sex"].map({1.0: "one", 2.0: "two"})
    rng = np.random.default_rng(0)
    for col in ("bmi", "s5"):
        df.loc[rng.random(len(df)) < 0.08, col] = np.nan
    path = tmp_path / "diabetes_mixed.csv"
    df.to_csv(path, index=False)
    return path


EXPLAINED_SPEC = """
name: explained
data: {path: diabetes_text.csv, target: progression, categorical: [sex]}
test: {fraction: 0.25, seed: 3}
folds: {k: 3, repeats: 2, seed: 17}
metrics: [rmse, mae, r2]
store: store.duckdb
explain: {cells: picked, permutation: {repeats: 3, seed: 7}}
models:
  ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 10.0, 300.0]}}
  tree: {family: pruned_tree, grid: {ccp_fraction: [0.002, 0.01, 0.05], min_samples_leaf: [5]}}
  forest: {family: forest, grid: {n_estimators: [25], max_features: [0.5], min_samples_leaf: [3]}}
"""


@pytest.fixture(scope="session")
def explained(tmp_path_factory):
    """One small sweep with the explain step, shared by the explain, plot and report tests:
    (spec, store, sweep_id). Diabetes with `sex` as text, so one-hot columns occur."""
    from runner.write.engine import run_sweep
    from runner.write.spec import load_spec
    from runner.store import Store

    folder = tmp_path_factory.mktemp("explained")
    df = diabetes_frame()
    df["sex"] = df["sex"].map({1.0: "one", 2.0: "two"})
    df.to_csv(folder / "diabetes_text.csv", index=False)
    (folder / "spec.yaml").write_text(EXPLAINED_SPEC)
    spec = load_spec(folder / "spec.yaml")
    result = run_sweep(spec, jobs=1)
    return spec, Store(result.store_path), result.sweep_id


@pytest.fixture(scope="session")
def pg():
    """A throwaway PostgreSQL server on loopback for the whole session (tests/pg_server.py).

    Fails, never skips, when no server is installed: .ci/run installs Debian's postgresql.
    Its password reaches foldwise only through PGPASSFILE, as a user's would."""
    import os

    from .pg_server import start_server

    try:
        server = start_server()
    except RuntimeError as exc:
        pytest.fail(str(exc))
    before = os.environ.get("PGPASSFILE")
    os.environ["PGPASSFILE"] = str(server.passfile)
    try:
        yield server
    finally:
        if before is None:
            os.environ.pop("PGPASSFILE", None)
        else:
            os.environ["PGPASSFILE"] = before
        server.stop()

"""Sweeps on a real Dask LocalCluster of two worker processes: the same scores, bit for
bit, as the local run of the same spec (the local run itself is checked against
scikit-learn's own cross-validation in test_parity.py); a worker killed mid-sweep costs
nothing but time; the data travel to the workers once."""

from __future__ import annotations

import os
import pickle
import signal
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from runner.write.engine import _plan_tasks, _shared_data, prepare, run_sweep
from runner.write.executors import DaskExecutor
from runner.store import Store

from .helpers import diabetes_frame, spec_from, write_spec

MODELS = """
ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 1.0, 10.0]}}
lasso: {family: linear, grid: {penalty: l1, alpha: [0.05, 0.5]}}
tree: {family: pruned_tree, grid: {ccp_alpha: [0.0, 50.0, 200.0], min_samples_leaf: [3]}}
forest: {family: forest, grid: {n_estimators: [40], max_features: [0.3, 0.6, 1.0]}}
"""
N_CELLS, K, R, N_METRICS = 11, 3, 2, 3
FOLD_ROWS = N_CELLS * K * R * N_METRICS


def _scores(store: Store, table: str) -> pd.DataFrame:
    keys = '"repeat", fold, ' if table == "fold_scores" else ""
    return store.query(f"""select c.model, c.params, {keys} t.metric, t.value, t.how
                           from {table} t join cells c using (sweep_id, cell_id)
                           order by all""")


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    path = tmp_path_factory.mktemp("cluster")
    diabetes_frame().to_csv(path / "diabetes.csv", index=False)
    return path


@pytest.fixture(scope="module")
def local_run(folder):
    """The reference: the same spec run by local worker processes."""
    store = Store(folder / "local.duckdb")
    run_sweep(spec_from(folder, MODELS, explain="picked"), store=store, jobs=2, fresh=True)
    return store


def test_local_cluster_gives_bit_identical_scores(folder, local_run):
    store = Store(folder / "dask.duckdb")
    with DaskExecutor("local:2") as executor:
        result = run_sweep(spec_from(folder, MODELS, explain="picked"), store=store,
                           executor=executor, fresh=True)
        # the sweep sent the four row tables; the explain step reused them and sent
        # nothing more (the test rows' numbers are put beside the predictions at home)
        assert executor.n_scatters == 1 and len(executor._sent) == 4
        assert result.explain_refits > 0
    assert result.status == "finished" and result.n_fold_rows == FOLD_ROWS
    for table in ("fold_scores", "test_scores"):
        mine, reference = _scores(store, table), _scores(local_run, table)
        assert len(mine) == len(reference) > 0
        assert np.array_equal(mine["value"].to_numpy(), reference["value"].to_numpy())
        pd.testing.assert_frame_equal(mine, reference, check_exact=True)
    # the explain step's refits ran on the cluster too, with the same results
    for table in ("fold_importances", "importances", "tree_folds", "test_predictions"):
        query = f"select * exclude (sweep_id) from {table} order by all"
        mine, reference = store.query(query), local_run.query(query)
        assert len(mine) == len(reference) > 0, table
        pd.testing.assert_frame_equal(mine, reference, check_exact=True, obj=table)


def test_worker_killed_mid_sweep_completes_without_duplicates(folder, local_run):
    spec = spec_from(folder, MODELS)
    store = Store(folder / "killed.duckdb")
    killed: list[int] = []
    with DaskExecutor("local:2") as executor:
        pids = sorted(executor.client.run(os.getpid).values())
        assert len(pids) == 2

        def kill_one_worker(done: int, total: int) -> None:
            if done == 1 and not killed:
                os.kill(pids[0], signal.SIGKILL)
                killed.append(pids[0])

        result = run_sweep(spec, store=store, executor=executor, progress=kill_one_worker,
                           fresh=True)
        executor.client.wait_for_workers(1, timeout=30)
        after = set(executor.client.run(os.getpid).values())
        assert executor.n_scatters == 1  # the data were sent once, not per task
    assert killed and killed[0] not in after  # that worker really died
    assert result.status == "finished" and result.n_fold_rows == FOLD_ROWS
    keys = store.query("""select count(*) n, count(distinct (cell_id, "repeat", fold, metric)) k
                          from fold_scores""")
    assert keys.n[0] == keys.k[0] == FOLD_ROWS  # every row once
    pd.testing.assert_frame_equal(_scores(store, "fold_scores"),
                                  _scores(local_run, "fold_scores"), check_exact=True)


def test_tasks_carry_fold_positions_not_rows(folder):
    """What is sent per task is a small fraction of the data scattered once."""
    prep = prepare(spec_from(folder, MODELS))
    tasks = _plan_tasks(prep, n_workers=2)
    data_bytes = len(pickle.dumps(_shared_data(prep, paths=True)))
    largest_task = max(len(pickle.dumps(t)) for t in tasks)
    assert largest_task * 5 < data_bytes, (largest_task, data_bytes)


@pytest.mark.parametrize("address, words", [
    ("local:0", "local:N"),
    ("somewhere:8786", "scheduler address"),
    ("tcp://127.0.0.1:9", "cannot reach the Dask scheduler"),
])
def test_bad_cluster_address_is_one_paragraph_and_writes_nothing(folder, address, words):
    spec = write_spec(folder, MODELS, name="bad_cluster.yaml")
    store = folder / "never.duckdb"
    out = subprocess.run([sys.executable, "-m", "runner", "run", str(spec), "--store",
                          str(store), "--cluster", address, "--quiet"],
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 2 and "Traceback" not in out.stderr
    assert words in out.stderr
    assert not store.exists()


def test_workers_with_other_package_versions_are_refused():
    """Scores are only bit-identical with the same packages; a worker that differs (here:
    this machine claims another scikit-learn) is refused before anything runs."""
    from runner.write.executors import ClusterError, package_versions

    claimed = {**package_versions(), "scikit-learn": "0.0-elsewhere"}
    with pytest.raises(ClusterError, match=r"scikit-learn .* this machine 0\.0-elsewhere"):
        with DaskExecutor("local:1", versions=claimed):
            pass


def test_workers_under_another_evaluation_version_are_refused():
    """A release that changes how foldwise computes a score bumps its evaluation version,
    not always its package number: a worker that computes under another one (here: this
    machine claims version 2) is refused before anything runs, by name."""
    from runner.write.executors import ClusterError, package_versions

    claimed = {**package_versions(), "evaluation": "2"}
    from runner.write.grid import EVAL_VERSION

    with pytest.raises(ClusterError, match=rf"has foldwise's evaluation version "
                                           rf"{EVAL_VERSION}, this machine 2; its scores "
                                           r"would differ"):
        with DaskExecutor("local:1", versions=claimed):
            pass


def test_grouped_and_time_plans_on_a_cluster_equal_the_local_run(folder):
    """Fold schemes reach the workers as fold positions like any plan: a grouped and a
    time-ordered sweep (invented clinic and day columns) give the local run's scores."""
    df = diabetes_frame()
    df["clinic"] = [f"c{i % 25:02d}" for i in range(len(df))]
    df["day"] = [i // 3 for i in range(len(df))]
    df.to_csv(folder / "clinics.csv", index=False)
    models = "tree: {family: pruned_tree, grid: {ccp_alpha: [0.0, 50.0], min_samples_leaf: [3]}}"
    specs = []
    for name, old, new in (
            ("grouped.yaml", "  seed: 17\n", "  seed: 17\n  groups: clinic\n"),
            ("timed.yaml", "  k: 3\n  repeats: 2\n", "  k: 3\n  order: day\n")):
        path = write_spec(folder, models, data="clinics.csv", name=name)
        drop = "day" if name == "grouped.yaml" else "clinic"
        path.write_text(path.read_text().replace(old, new).replace(
            "  target: progression\n", f"  target: progression\n  drop: [{drop}]\n"))
        specs.append(path)
    from runner.write.spec import load_spec

    local, remote = Store(folder / "schemes_local.duckdb"), Store(folder / "schemes_dask.duckdb")
    for path in specs:
        run_sweep(load_spec(path), store=local, jobs=1, fresh=True)
    with DaskExecutor("local:2") as executor:
        for path in specs:
            run_sweep(load_spec(path), store=remote, executor=executor, fresh=True)
    for table in ("fold_scores", "test_scores"):
        mine, reference = _scores(remote, table), _scores(local, table)
        assert len(mine) == len(reference) > 0
        pd.testing.assert_frame_equal(mine, reference, check_exact=True)

"""Sweep wall time on a Dask LocalCluster against the plain local run, same spec and folds.

The demo spec (specs/greenhouse.yaml: 42 cells, 5x2 folds, scores only, no explain step)
is run fresh into a scratch store four ways, interleaved: local with one process, local
with every core (the default `foldwise run`), `--cluster local:2` as a user runs it
(starting the cluster included) and on an already running two-worker LocalCluster (the
case of a long-lived cluster). Prints medians and ratios against the default local run,
and checks that every way stored the same fold scores bit for bit.

Run: python benchmarks/cluster.py [--runs 3]
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np

from runner.engine import run_sweep
from runner.executors import DaskExecutor
from runner.spec import load_spec
from runner.store import Store

ROOT = Path(__file__).resolve().parents[1]


def _scores(store: Store) -> np.ndarray:
    return store.query("""select f.value from fold_scores f join cells c using (sweep_id, cell_id)
                          order by c.model, c.params, f."repeat", f.fold, f.metric"""
                       )["value"].to_numpy()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3)
    args = parser.parse_args()
    spec = load_spec(ROOT / "specs" / "greenhouse.yaml")
    spec.explain.cells = "none"
    scratch = Path(tempfile.mkdtemp(prefix="foldwise-bench-cluster-"))
    times: dict[str, list[float]] = {}
    scores: dict[str, np.ndarray] = {}
    try:
        with DaskExecutor("local:2") as running:
            ways = {
                "local, 1 process": dict(jobs=1),
                "local, all cores (default)": dict(jobs=-1),
                "--cluster local:2 (with start-up)": dict(cluster="local:2"),
                "running LocalCluster, 2 workers": dict(executor=running),
            }
            for run in range(args.runs):
                for name, how in ways.items():
                    store = Store(scratch / f"{run}-{len(times.get(name, []))}-{hash(name)}.duckdb")
                    start = time.perf_counter()
                    run_sweep(spec, store=store, fresh=True, **how)
                    times.setdefault(name, []).append(time.perf_counter() - start)
                    scores.setdefault(name, _scores(store))
                    print(f"run {run + 1}: {name:36s} {times[name][-1]:6.1f} s", flush=True)
    finally:
        shutil.rmtree(scratch, ignore_errors=True)
    base = statistics.median(times["local, all cores (default)"])
    print(f"\n{'way':36s} {'median s':>9s} {'speed-up vs default local':>26s}")
    for name, values in times.items():
        median = statistics.median(values)
        print(f"{name:36s} {median:9.1f} {base / median:25.2f}x")
    same = all(np.array_equal(v, scores["local, 1 process"]) for v in scores.values())
    print(f"\nall ways stored identical fold scores: {same} "
          f"({len(scores['local, 1 process'])} values each)")


if __name__ == "__main__":
    main()

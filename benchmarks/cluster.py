"""Sweep wall time on Dask against the plain local run, same spec and folds, run as a user
runs it: one `foldwise run` process per sweep.

The demo spec (specs/greenhouse.yaml: 42 cells, 5x2 folds, scores only: the explain step is
switched off in a copy of the spec) is run fresh into a scratch store four ways,
interleaved: local with one process (`--jobs 1`), local with every core (the default),
`--cluster local:2` (starting and stopping two worker processes included), and
`--cluster tcp://...` against a scheduler and two single-threaded workers started
beforehand with Dask's own `dask scheduler` and `dask worker` commands (a long-lived
cluster). Prints medians and ratios against the default local run, and checks that every
way stored the same fold scores bit for bit.

Run: python benchmarks/cluster.py [--runs 3]
"""

from __future__ import annotations

import argparse
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from runner.store import Store

ROOT = Path(__file__).resolve().parents[1]


def _scores(store: Store) -> np.ndarray:
    return store.query("""select f.value from fold_scores f join cells c using (sweep_id, cell_id)
                          order by c.model, c.params, f."repeat", f.fold, f.metric"""
                       )["value"].to_numpy()


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _start_cluster(scratch: Path) -> tuple[str, list[subprocess.Popen]]:
    """`dask scheduler` and `dask worker --nworkers 2 --nthreads 1` on loopback."""
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    log = open(scratch / "dask.log", "w")
    procs = [subprocess.Popen(["dask", "scheduler", "--host", "127.0.0.1", "--port", str(port),
                               "--dashboard-address", ":0"], stdout=log, stderr=log)]
    time.sleep(2)
    procs.append(subprocess.Popen(["dask", "worker", address, "--nworkers", "2", "--nthreads",
                                   "1", "--dashboard-address", ":0"], stdout=log, stderr=log))
    from distributed import Client

    with Client(address, timeout=30) as client:
        client.wait_for_workers(2, timeout=60)
    return address, procs


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3)
    args = parser.parse_args()
    scratch = Path(tempfile.mkdtemp(prefix="foldwise-bench-cluster-"))
    text = (ROOT / "specs" / "greenhouse.yaml").read_text()
    text = text.replace("path: data/greenhouse.csv",
                        f"path: {ROOT / 'specs' / 'data' / 'greenhouse.csv'}")
    text = text.replace("models:\n", "explain: {cells: none}\nmodels:\n", 1)
    spec = scratch / "greenhouse.yaml"
    spec.write_text(text)
    address, procs = _start_cluster(scratch)
    ways = {"local, 1 process": ["--jobs", "1"], "local, all cores (default)": [],
            "--cluster local:2 (start-up included)": ["--cluster", "local:2"],
            "--cluster tcp:// (dask scheduler + 2 workers)": ["--cluster", address]}
    times: dict[str, list[float]] = {name: [] for name in ways}
    scores: dict[str, np.ndarray] = {}
    try:
        for run in range(args.runs):
            for i, (name, options) in enumerate(ways.items()):
                store = scratch / f"{run}-{i}.duckdb"
                start = time.perf_counter()
                subprocess.run([sys.executable, "-m", "runner", "run", str(spec), "--store",
                                str(store), "--fresh", "--quiet", *options], check=True)
                times[name].append(time.perf_counter() - start)
                scores.setdefault(name, _scores(Store(store)))
                print(f"run {run + 1}: {name:46s} {times[name][-1]:6.1f} s", flush=True)
    finally:
        for p in reversed(procs):
            p.terminate()
            p.wait(timeout=30)
        shutil.rmtree(scratch, ignore_errors=True)
    base = statistics.median(times["local, all cores (default)"])
    print(f"\n{'way':46s} {'median s':>9s} {'speed-up vs default local':>26s}")
    for name, values in times.items():
        median = statistics.median(values)
        print(f"{name:46s} {median:9.1f} {base / median:25.2f}x")
    reference = scores["local, 1 process"]
    same = all(np.array_equal(v, reference) for v in scores.values())
    print(f"\nall ways stored identical fold scores: {same} ({len(reference)} values each)")


if __name__ == "__main__":
    main()

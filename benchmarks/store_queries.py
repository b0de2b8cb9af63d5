"""Reading a big store: `summary`, `pick` and `compare` over 1 M fold-score rows.

The store is built through the store's own write API (begin_sweep, write_batch,
finish_sweep, the calls a sweep makes): 100 sweeps, each of 4 models x 84 cells scored on
5 x 2 folds with 3 metrics (10 080 fold-score rows a sweep), with test scores, in a DuckDB
file and, when a PostgreSQL server can be started (tests/pg_server.py), in a team store
too. Each read is what the command asks of the library for the latest sweep, on a fresh
Store object (as a command opens it); timed warm (after one untimed call), median of
several.

Run: python benchmarks/store_queries.py [--runs 5] [--sweeps 100] [--no-team]
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import sys
import tempfile
import time
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(Path(__file__).resolve().parent))
from _table import print_table  # noqa: E402
from runner.store import Store  # noqa: E402

GOAL = 0.3  # seconds, warm, on a DuckDB file (issue 18)
K, REPEATS = 5, 2
METRICS = {"rmse": "lower", "mae": "lower", "r2": "higher"}
MODELS = [("tree", "pruned_tree", "ccp_alpha"), ("ridge", "linear", "alpha"),
          ("lasso", "linear", "alpha"), ("forest", "forest", "n_estimators")]
CELLS_PER_MODEL = 84


def _sweep_rows(index: int, rng: np.random.Generator) -> tuple[dict, pd.DataFrame, dict]:
    """One sweep's row, cells, fold scores and test scores, with plausible numbers: each
    cell's error a smooth function of its grid position plus fold noise."""
    sweep_id = f"20261201-{index:06d}-{index % 65536:04x}"
    cells, folds, tests = [], [], []
    for m, (model, family, param) in enumerate(MODELS):
        grid = np.logspace(-4, 1, CELLS_PER_MODEL)
        for rank, value in enumerate(grid[::-1]):  # rank 0: the simplest (largest penalty)
            cid = f"{model}-{index:03d}-{rank:03d}"
            cells.append({"sweep_id": sweep_id, "cell_id": cid, "model": model,
                          "family": family, "params": json.dumps({param: float(value)}),
                          "complexity_rank": rank, "position": len(cells)})
            base = 2.0 + 0.1 * m + 0.5 * (np.log10(value) + 1.5) ** 2 / 10
            errors = base + 0.05 * rng.standard_normal((REPEATS, K))
            for r in range(REPEATS):
                for f in range(K):
                    e = float(errors[r, f])
                    for metric, v in (("rmse", e), ("mae", 0.8 * e), ("r2", 1 - e * e / 25)):
                        folds.append((sweep_id, cid, r, f, metric, v, 0.01, 800, 200, r * K + f,
                                      "plain"))
            for metric, v in (("rmse", base), ("mae", 0.8 * base), ("r2", 1 - base * base / 25)):
                tests.append((sweep_id, cid, metric, v, 0.02, 1000, 250, 7, "plain"))
    sweep = {"sweep_id": sweep_id, "name": "big", "target": "y", "n_train": 1000,
             "n_test": 250, "k": K, "repeats": REPEATS, "plan_seed": 0,
             "metrics": ",".join(METRICS), "pick_rule": "one_se", "scheme": "rows",
             "started_at": datetime(2026, 12, 1) + timedelta(minutes=index),
             "status": "running", "versions": {}}
    fold_df = pd.DataFrame(folds, columns=["sweep_id", "cell_id", "repeat", "fold", "metric",
                                           "value", "fit_seconds", "n_train", "n_valid",
                                           "seed", "how"])
    test_df = pd.DataFrame(tests, columns=["sweep_id", "cell_id", "metric", "value",
                                           "fit_seconds", "n_train", "n_test", "seed", "how"])
    return sweep, pd.DataFrame(cells), {"fold_scores": fold_df, "test_scores": test_df}


def build(store: Store, sweeps: int) -> tuple[float, int]:
    """Write `sweeps` sweeps as a run would (begin, rows, finish); (seconds, fold rows)."""
    store.ensure_schema()
    rng = np.random.default_rng(18)
    start = time.perf_counter()
    rows = 0
    for i in range(sweeps):
        sweep, cells, tables = _sweep_rows(i, rng)
        store.begin_sweep(sweep, cells, METRICS)
        store.write_batch(tables)
        store.finish_sweep(sweep["sweep_id"], "finished",
                           at=sweep["started_at"] + timedelta(seconds=30))
        rows += len(tables["fold_scores"])
    return time.perf_counter() - start, rows


def time_reads(location, runs: int) -> dict[str, float]:
    """Median seconds of summary, pick and compare for the latest sweep, each on a fresh
    Store object (as a command opens it), after one untimed call of each."""
    from runner.read.queries import compare, picks, summary

    reads = {"summary": lambda s: summary(s), "pick": lambda s: picks(s),
             "compare": lambda s: compare(s)}
    times: dict[str, list[float]] = {name: [] for name in reads}
    for r in range(runs + 1):
        for name, read in reads.items():
            start = time.perf_counter()
            result = read(Store(location))
            if r:
                times[name].append(time.perf_counter() - start)
            assert len(result.table) > 0, name
    return {name: statistics.median(t) for name, t in times.items()}


def _team_store(sweeps: int, runs: int) -> tuple[dict | None, str]:
    """The same reads on a throwaway PostgreSQL team store, or None and why not."""
    from tests.pg_server import start_server

    try:
        server = start_server()
    except (RuntimeError, OSError) as exc:
        return None, f"no team store figures: {exc}"
    os.environ["PGPASSFILE"] = str(server.passfile)
    try:
        url = server.create_database("queries")
        seconds, _ = build(Store(url), sweeps)
        return time_reads(url, runs), f"team store built in {seconds:.0f} s"
    finally:
        server.stop()


def measure(runs: int, sweeps: int = 100, team: bool = True) -> dict:
    folder = Path(tempfile.mkdtemp(prefix="foldwise-store-queries-"))
    try:
        path = folder / "big.duckdb"
        seconds, rows = build(Store(path), sweeps)
        got = {"file": time_reads(path, runs), "rows": rows, "build": seconds,
               "team": None, "team_note": "team store not asked for"}
        if team:
            got["team"], got["team_note"] = _team_store(sweeps, runs)
        return got
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def target_rows(runs: int) -> list[list]:
    """Rows for benchmarks/targets.py: target, goal, measured, verdict."""
    got = measure(max(runs, 3))
    out = []
    for name, sec in got["file"].items():
        team = got["team"]
        beside = f" (team store {team[name] * 1000:.0f} ms)" if team else ""
        out.append([f"{name} over {got['rows'] / 1e6:.1f} M fold rows, warm",
                    f"<= {GOAL * 1000:.0f} ms", f"{sec * 1000:.0f} ms{beside}",
                    "PASS" if sec <= GOAL else "short"])
    return out


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5, help="timed calls of each (median)")
    parser.add_argument("--sweeps", type=int, default=100, help="sweeps in the store")
    parser.add_argument("--no-team", action="store_true", help="skip the PostgreSQL store")
    args = parser.parse_args(argv)
    got = measure(args.runs, args.sweeps, team=not args.no_team)
    team = got["team"]
    print_table(f"reads of the latest sweep in a store of {got['rows']:,} fold-score rows "
                f"({args.sweeps} sweeps): median ms of {args.runs} warm calls",
                ["read", "DuckDB file ms", "team store ms", "goal (file)"],
                [[name, f"{sec * 1000:.0f}", f"{team[name] * 1000:.0f}" if team else "-",
                  f"<= {GOAL * 1000:.0f}"] for name, sec in got["file"].items()],
                [f"file built through the store's write API in {got['build']:.0f} s; "
                 f"{got['team_note']}; load average {os.getloadavg()[0]:.2f} on "
                 f"{os.cpu_count()} cores"])


if __name__ == "__main__":
    main()

"""What `foldwise sql` on a team store costs now that a query never runs where it could
write: the tables it reads are copied through a read-only attachment into a private
in-memory DuckDB instance (and, with --allow-files, into a snapshot file that a
Landlock-confined child process opens).

On a throwaway PostgreSQL server (tests/pg_server.py) it loads a team store of generated
sweeps through foldwise's own Store (250 cells x 5 repeats x 10 folds x 2 metrics = 25,000
fold rows a sweep), then times three queries, median of several runs, interleaved:

  attached   the query on a fresh DuckDB instance with the server attached read-only, as
             `foldwise sql` ran it before (unsafe: postgres_execute is reachable there)
  sandbox    `Store.user_query(sql)`: copy what the query reads, then answer
  files      `Store.user_query(sql, allow_files=True)`: snapshot file + confined child

Each timing includes connecting and attaching, as one `foldwise sql` command does.
Rows are generated (invented data for timing only).

Run: python benchmarks/sql_sandbox.py [--sweeps 40] [--runs 5] [--quick]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import time
from datetime import datetime, timedelta
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(Path(__file__).resolve().parent))
from _table import print_table  # noqa: E402
from runner.store.locations import postgres_extension  # noqa: E402
from runner.store import Store  # noqa: E402

CELLS, REPEATS, FOLDS, METRICS = 250, 5, 10, ["rmse", "r2"]
QUERIES = {
    "count sweeps": "select count(*) from sweeps",
    "mean by model": "select model, metric, avg(value) as mean from fold_scores "
                     "join cells using (sweep_id, cell_id) group by all order by all",
    "one sweep's summary": "select * from cell_summary where sweep_id = 'sweep-000' "
                           "order by cell_id, metric",
}


def load(store: Store, sweeps: int) -> float:
    """Write `sweeps` generated sweeps through the store; returns seconds taken."""
    began = time.perf_counter()
    store.ensure_schema()
    for s in range(sweeps):
        rng = np.random.default_rng(s)
        sweep_id = f"sweep-{s:03d}"
        cells = pd.DataFrame({
            "sweep_id": sweep_id, "cell_id": [f"cell-{c:04d}" for c in range(CELLS)],
            "model": [f"model-{c % 3}" for c in range(CELLS)],
            "family": [("pruned_tree", "linear", "forest")[c % 3] for c in range(CELLS)],
            "params": [json.dumps({"alpha": 10.0 ** (-c / 10)}) for c in range(CELLS)],
            "complexity_rank": np.arange(CELLS, dtype="int32"),
            "position": np.arange(CELLS, dtype="int32")})
        store.begin_sweep({"sweep_id": sweep_id, "name": "generated", "status": "finished",
                           "started_at": datetime(2026, 1, 1) + timedelta(hours=s),
                           "metrics": ",".join(METRICS), "k": FOLDS, "repeats": REPEATS,
                           "versions": {}}, cells, {"rmse": "lower", "r2": "higher"})
        cell, repeat, fold, metric = (a.ravel() for a in np.meshgrid(
            np.arange(CELLS), np.arange(REPEATS), np.arange(FOLDS), np.arange(len(METRICS)),
            indexing="ij"))
        n = cell.size
        folds = pd.DataFrame({
            "sweep_id": sweep_id, "cell_id": [f"cell-{c:04d}" for c in cell],
            "repeat": repeat.astype("int32"), "fold": fold.astype("int32"),
            "metric": np.array(METRICS)[metric], "value": rng.normal(1.0, 0.2, n),
            "fit_seconds": rng.exponential(0.05, n), "n_train": np.full(n, 800, "int32"),
            "n_valid": np.full(n, 200, "int32"), "seed": rng.integers(0, 2**31, n),
            "how": "path", "n_warnings": np.zeros(n, "int32")})
        store.write_batch({"fold_scores": folds})
    return time.perf_counter() - began


def attached(url: str, sql: str) -> pd.DataFrame:
    """The query run directly against the attached server, in a fresh instance."""
    con = duckdb.connect(config={"autoinstall_known_extensions": False,
                                 "autoload_known_extensions": False})
    try:
        con.execute(f"load '{postgres_extension()}'")
        con.execute(f"attach '{url}' as team (type postgres, read_only)")
        con.execute("use team")
        con.execute("create temp view cell_summary as " + _view_body())
        return con.execute(sql).df()
    finally:
        con.close()


def _view_body() -> str:
    from runner.store.schema import VIEW_SQL

    return VIEW_SQL.split(" as\n", 1)[1]


def timed(fn) -> tuple[float, object]:
    began = time.perf_counter()
    result = fn()
    return time.perf_counter() - began, result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sweeps", type=int, nargs="+", default=[4, 40],
                        help="store sizes to measure, in sweeps of 25,000 fold rows")
    parser.add_argument("--runs", type=int, default=5, help="runs per median")
    parser.add_argument("--quick", action="store_true", help="one small store, 2 runs")
    args = parser.parse_args()
    if args.quick:
        args.sweeps, args.runs = [2], 2

    from tests.pg_server import start_server

    server = start_server()
    os.environ["PGPASSFILE"] = str(server.passfile)
    try:
        print(f"duckdb {duckdb.__version__}, PostgreSQL on 127.0.0.1:{server.port}, "
              f"{os.cpu_count()} cores")
        rows = []
        for sweeps in args.sweeps:
            url = server.create_database(f"sandbox_{sweeps}")
            store = Store(url)
            seconds = load(store, sweeps)
            n_folds = sweeps * CELLS * REPEATS * FOLDS * len(METRICS)
            print(f"loaded {sweeps} sweeps ({n_folds:,} fold rows) in {seconds:.1f} s")
            for name, sql in QUERIES.items():
                times = {"attached": [], "sandbox": [], "files": []}
                answers = {}
                for _ in range(args.runs):
                    for way, fn in (("attached", lambda: attached(url, sql)),
                                    ("sandbox", lambda: store.user_query(sql)),
                                    ("files", lambda: store.user_query(sql,
                                                                       allow_files=True))):
                        took, answers[way] = timed(fn)
                        times[way].append(took)
                for way in ("sandbox", "files"):
                    pd.testing.assert_frame_equal(answers[way], answers["attached"],
                                                  check_exact=False, rtol=1e-12)
                med = {way: statistics.median(t) for way, t in times.items()}
                rows.append([f"{n_folds:,}", name, f"{med['attached']:.2f}",
                             f"{med['sandbox']:.2f}", f"{med['sandbox'] / med['attached']:.1f}x",
                             f"{med['files']:.2f}", f"{med['files'] / med['attached']:.1f}x"])
        print_table(f"`foldwise sql` on a team store, seconds (median of {args.runs})",
                    ["fold rows", "query", "attached", "sandbox", "ratio", "files", "ratio"],
                    rows, ["attached: the former, unsafe way (postgres_execute reachable)",
                           "sandbox: copy the tables the query reads, then answer",
                           "files: --allow-files, snapshot file + Landlock-confined child",
                           "every way answers the same rows (checked)"])
    finally:
        server.stop()


if __name__ == "__main__":
    main()

"""Two ways of keeping a team store on a PostgreSQL server, reached through DuckDB.

"attach" puts the store's tables in PostgreSQL itself (DuckDB's postgres extension, primary
keys enforced by PostgreSQL); "ducklake" keeps a DuckLake catalogue in PostgreSQL and the
rows in Parquet files in a local folder standing in for shared storage (no primary keys).
On a throwaway server (tests/pg_server.py) it measures, for each:

1. concurrent writes: P separate processes, each one sweep writing B batches of 200 fold
   rows, one transaction per batch, with a fresh connection + ATTACH per batch and with
   one connection held per process (what foldwise's store does on a server); wall time, rows per second, rows
   found against rows expected, and every conflict, retry or error;
2. the time to load 1,000,000 fold rows (one commit per sweep) and matching cell rows;
3. the summary query over one sweep and over all sweeps at 1 M rows, median of several
   runs, on a fresh connection (connect, load, attach, query) and on a warm one, with the
   same rows in a plain DuckDB file as the baseline; for DuckLake also the number of data
   files, and whether a load of 1000 small commits slows queries before and after
   ducklake_merge_adjacent_files.

Extensions are never downloaded: it loads the files shipped by the installed PyPI packages
duckdb_extension_postgres and duckdb_extension_ducklake.

Run: python benchmarks/team_store.py [--runs 5] [--batches 20] [--quick]
"""

from __future__ import annotations

import argparse
import importlib.util
import multiprocessing
import os
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(Path(__file__).resolve().parent))
from _table import print_table  # noqa: E402
from runner.store.locations import postgres_extension  # noqa: E402
CONFIG = {"autoinstall_known_extensions": False, "autoload_known_extensions": False}

CELLS_PER_SWEEP, REPEATS, FOLDS = 250, 5, 10  # 25,000 fold rows per sweep
METRICS = ["rmse", "r2"]
ROWS_PER_CELL = REPEATS * FOLDS * len(METRICS)  # 100
CELLS_PER_BATCH = 2  # a write batch: two cells' fold rows, 200 rows
MAX_RETRIES = 10

FOLD_TABLE = """create table fold_scores (
    sweep_id varchar, cell_id varchar, "repeat" integer, fold integer, metric varchar,
    value double, fit_seconds double, n_train integer, n_valid integer, seed bigint,
    n_leaves double, how varchar, n_warnings integer, reused_from varchar{key})"""
CELL_TABLE = """create table cells (
    sweep_id varchar, cell_id varchar, model varchar, family varchar, params json,
    complexity_rank integer, reused_from varchar{key})"""
FOLD_KEY = ', primary key (sweep_id, cell_id, "repeat", fold, metric)'
CELL_KEY = ", primary key (sweep_id, cell_id)"
KEY_COLUMNS = 'sweep_id, cell_id, "repeat", fold, metric'

SUMMARY = """select f.sweep_id, f.cell_id, c.model, f.metric, avg(f.value) mean,
       stddev_samp(f.value) sd, count(*) n
from fold_scores f join cells c using (sweep_id, cell_id) {where} group by all"""


# -- extensions and connections ------------------------------------------------------------

def _shipped_extension(package: str) -> Path:
    spec = importlib.util.find_spec(package)
    if spec is None:
        raise SystemExit(f"{package} is not installed (pip install -e '.[bench]')")
    return next(Path(spec.submodule_search_locations[0]).rglob("*.duckdb_extension"))


def extension_files() -> list[str]:
    """Paths to LOAD, postgres first (DuckLake on a postgres catalogue needs it); the
    postgres file as foldwise's own store loads it."""
    return [str(postgres_extension()), str(_shipped_extension("duckdb_extension_ducklake"))]


class Target:
    """One place to keep the store: how to open a connection to it with the tables in scope."""

    def __init__(self, name: str, attach: str | None, path: str | None = None,
                 extensions: list[str] | None = None, keys: bool = True):
        self.name, self.attach, self.path, self.keys = name, attach, path, keys
        self.extensions = extensions or []

    def connect(self) -> duckdb.DuckDBPyConnection:
        con = duckdb.connect(self.path or ":memory:", config=CONFIG)
        con.execute("set enable_progress_bar = false")
        if self.attach:
            for file in self.extensions:
                con.execute(f"LOAD '{file}'")
            con.execute(self.attach)
        return con

    def create_tables(self) -> None:
        with self.connect() as con:
            con.execute(FOLD_TABLE.format(key=FOLD_KEY if self.keys else ""))
            con.execute(CELL_TABLE.format(key=CELL_KEY if self.keys else ""))


def attach_target(server, database: str, extensions: list[str]) -> Target:
    server.create_database(database)
    url = f"postgresql://{server.user}@127.0.0.1:{server.port}/{database}"
    return Target("attach", f"ATTACH '{url}' AS team (TYPE postgres); USE team;",
                  extensions=extensions[:1])  # the postgres extension only


def ducklake_target(server, database: str, extensions: list[str], data_root: Path) -> Target:
    server.create_database(database)
    data = data_root / database
    data.mkdir(parents=True)
    catalogue = f"dbname={database} host=127.0.0.1 port={server.port} user={server.user}"
    return Target("ducklake", f"ATTACH 'ducklake:postgres:{catalogue}' AS team "
                              f"(DATA_PATH '{data}/'); USE team;",
                  extensions=extensions, keys=False)


# -- generated rows ------------------------------------------------------------------------

def sweep_name(index: int) -> str:
    return f"sweep-{index:03d}"


def fold_rows(sweep: int, first_cell: int, n_cells: int) -> pd.DataFrame:
    """Fold scores of cells [first_cell, first_cell + n_cells) of one sweep. Each cell's rows
    come from a numpy RNG seeded by (sweep, cell), so every option and every batching of
    the same cells receives identical rows."""
    cells = range(first_cell, first_cell + n_cells)
    draws = [_cell_draws(np.random.default_rng([sweep, c])) for c in cells]
    value, fit_seconds, seed, leaves, path = (np.concatenate(d) for d in zip(*draws))
    cell, repeat, fold, metric = (a.ravel() for a in np.meshgrid(
        np.array(cells), np.arange(REPEATS), np.arange(FOLDS), np.arange(len(METRICS)),
        indexing="ij"))
    n = cell.size
    return pd.DataFrame({
        "sweep_id": sweep_name(sweep),
        "cell_id": [f"cell-{c:04d}" for c in cell],
        "repeat": repeat.astype("int32"),
        "fold": fold.astype("int32"),
        "metric": np.array(METRICS)[metric],
        "value": value,
        "fit_seconds": fit_seconds,
        "n_train": np.full(n, 800, dtype="int32"),
        "n_valid": np.full(n, 200, dtype="int32"),
        "seed": seed,
        "n_leaves": np.where(cell % 2 == 0, leaves, np.nan),
        "how": np.where(path, "path", "fit"),
        "n_warnings": np.zeros(n, dtype="int32"),
        "reused_from": pd.Series([None] * n, dtype="string"),
    })


def _cell_draws(rng: np.random.Generator) -> tuple:
    return (rng.normal(1.0, 0.2, ROWS_PER_CELL), rng.exponential(0.05, ROWS_PER_CELL),
            rng.integers(0, 2**31, ROWS_PER_CELL),
            rng.integers(2, 200, ROWS_PER_CELL).astype(float), rng.random(ROWS_PER_CELL) < 0.1)


def cell_rows(sweep: int) -> pd.DataFrame:
    cells = np.arange(CELLS_PER_SWEEP)
    return pd.DataFrame({
        "sweep_id": sweep_name(sweep),
        "cell_id": [f"cell-{c:04d}" for c in cells],
        "model": [f"model-{c % 3}" for c in cells],
        "family": [("pruned_tree", "linear", "forest")[c % 3] for c in cells],
        "params": [f'{{"alpha": {10.0 ** (-c / 10):.6g}}}' for c in cells],
        "complexity_rank": cells.astype("int32"),
        "reused_from": pd.Series([None] * len(cells), dtype="string"),
    })


def insert(con, table: str, frame: pd.DataFrame) -> None:
    con.register("batch", frame)
    try:
        con.execute(f"insert into {table} by name select * from batch")
    finally:
        con.unregister("batch")


def key_conflicts(server) -> int:
    """Unique-key violations in the server's log so far. On DuckLake, two commits claiming
    the same snapshot id collide on ducklake_snapshot's key and DuckLake retries them
    itself (ducklake_max_retry_count, 10 by default), so clients never see most of them."""
    log = Path(server.folder) / "log"
    return log.read_text(errors="replace").count("duplicate key value violates unique")


def first_line(error: Exception) -> str:
    return f"{type(error).__name__}: {str(error).strip().splitlines()[0][:110]}"


# -- 1. concurrent writers -----------------------------------------------------------------

def write_one_sweep(target: Target, sweep: int, batches: int, fresh: bool, start, results):
    """One writer process: B batches, each one transaction, retried up to MAX_RETRIES times."""
    frames = [fold_rows(sweep, b * CELLS_PER_BATCH, CELLS_PER_BATCH) for b in range(batches)]
    retries, errors, failed = 0, [], 0
    start.wait()
    began = time.monotonic()
    held = None if fresh else target.connect()
    for frame in frames:
        for attempt in range(MAX_RETRIES + 1):
            con = None
            try:
                con = target.connect() if fresh else held
                con.execute("begin transaction")
                insert(con, "fold_scores", frame)
                con.execute("commit")
                break
            except duckdb.Error as error:
                errors.append(first_line(error))
                try:
                    con is not None and con.execute("rollback")
                except duckdb.Error:
                    pass
                if attempt == MAX_RETRIES:
                    failed += 1
                else:
                    retries += 1
                    time.sleep(0.05 * (attempt + 1))
            finally:
                if fresh and con is not None:
                    con.close()
    if held is not None:
        held.close()
    results.put({"sweep": sweep, "began": began, "ended": time.monotonic(),
                 "retries": retries, "errors": errors, "failed": failed})


def concurrent_writes(target: Target, writers: int, batches: int, fresh: bool) -> dict:
    """P spawned processes writing at once; rows found afterwards against rows expected."""
    target.create_tables()
    spawn = multiprocessing.get_context("spawn")
    start, results = spawn.Barrier(writers), spawn.Queue()
    processes = [spawn.Process(target=write_one_sweep,
                               args=(target, w, batches, fresh, start, results))
                 for w in range(writers)]
    for p in processes:
        p.start()
    reports = [results.get(timeout=600) for _ in processes]
    for p in processes:
        p.join()
    with target.connect() as con:
        found = con.execute("select count(*) from fold_scores").fetchone()[0]
        distinct = con.execute(f"select count(*) from (select distinct {KEY_COLUMNS} "
                               "from fold_scores)").fetchone()[0]
    seconds = max(r["ended"] for r in reports) - min(r["began"] for r in reports)
    expected = writers * batches * CELLS_PER_BATCH * ROWS_PER_CELL
    errors = [e for r in reports for e in r["errors"]]
    return {"seconds": seconds, "rows_per_second": expected / seconds, "expected": expected,
            "found": found, "distinct": distinct,
            "retries": sum(r["retries"] for r in reports),
            "failed": sum(r["failed"] for r in reports), "errors": errors,
            "exit_codes": [p.exitcode for p in processes]}


# -- 2 and 3. loading 1 M rows and querying them -------------------------------------------

def load(target: Target, sweeps: int, commits_per_sweep: int = 1) -> float:
    """Seconds to write every sweep's cells and fold rows, on one held connection, with
    `commits_per_sweep` transactions of fold rows per sweep."""
    target.create_tables()
    cells_per_commit = CELLS_PER_SWEEP // commits_per_sweep
    frames = [(cell_rows(s), [fold_rows(s, c, cells_per_commit)
                              for c in range(0, CELLS_PER_SWEEP, cells_per_commit)])
              for s in range(sweeps)]
    start = time.perf_counter()
    with target.connect() as con:
        for cells, folds in frames:
            insert(con, "cells", cells)
            for frame in folds:
                insert(con, "fold_scores", frame)
    return time.perf_counter() - start


def data_files(target: Target) -> int:
    with target.connect() as con:
        return con.execute("select count(*) from ducklake_list_files('team', 'fold_scores')"
                           ).fetchone()[0]


def merge_files(target: Target) -> float:
    start = time.perf_counter()
    with target.connect() as con:
        con.execute("call ducklake_merge_adjacent_files('team')")
    return time.perf_counter() - start


def summary_of(result: list[tuple]) -> tuple:
    """Rows, total n and rounded sums of the means and sds: equal if the answers agree."""
    return (len(result), sum(r[6] for r in result), round(sum(r[4] for r in result), 6),
            round(sum(r[5] for r in result), 6))


def time_queries(targets: list[Target], runs: int, sweep: str) -> dict:
    """Median seconds per (target, query, fresh|warm); the targets take turns in each run,
    in alternating order, so drift on a noisy machine falls on all of them alike."""
    queries = {"one sweep": SUMMARY.format(where=f"where f.sweep_id = '{sweep}'"),
               "all sweeps": SUMMARY.format(where="")}
    warm = {t.name: t.connect() for t in targets}
    answers = {}
    for t in targets:  # the untimed first run on each warm connection gives its answers
        answers[t.name] = {q: summary_of(warm[t.name].execute(sql).fetchall())
                           for q, sql in queries.items()}
    times = {(t.name, q, how): [] for t in targets for q in queries
             for how in ("open", "fresh", "warm")}
    for r in range(runs):
        for t in (targets if r % 2 == 0 else targets[::-1]):
            for q, sql in queries.items():
                start = time.perf_counter()
                with t.connect() as con:
                    opened = time.perf_counter()
                    con.execute(sql).fetchall()
                times[(t.name, q, "fresh")].append(time.perf_counter() - start)
                times[(t.name, q, "open")].append(opened - start)
                start = time.perf_counter()
                warm[t.name].execute(sql).fetchall()
                times[(t.name, q, "warm")].append(time.perf_counter() - start)
    for con in warm.values():
        con.close()
    return {"median": {k: statistics.median(v) for k, v in times.items()},
            "answers": answers}


# -- printing ------------------------------------------------------------------------------

def ms_and_ratio(seconds: float, baseline: float) -> str:
    return f"{seconds * 1000:.0f} ({seconds / baseline:.1f}x)"


# -- main ----------------------------------------------------------------------------------

def on_conflict_on_ducklake(target: Target) -> list[str]:
    """Whether an upsert is accepted on a DuckLake table (which has no keys)."""
    lines = []
    with target.connect() as con:
        con.execute("create table upsert_probe (k varchar, v double)")
        con.execute("insert into upsert_probe values ('a', 1)")
        for label, sql in [
                ("on conflict do nothing", "insert into upsert_probe values ('a', 2) "
                                           "on conflict do nothing"),
                ("on conflict (k) do update", "insert into upsert_probe values ('a', 3) "
                                              "on conflict (k) do update set v = excluded.v"),
                ("insert or replace", "insert or replace into upsert_probe values ('a', 4)")]:
            try:
                con.execute(sql)
                lines.append(f"accepted: {label}")
            except duckdb.Error as error:
                lines.append(f"refused:  {label} -> {first_line(error)}")
        try:
            con.execute("create table keyed_probe (k varchar primary key)")
            lines.append("accepted: create table with a primary key")
        except duckdb.Error as error:
            lines.append(f"refused:  create table with a primary key -> {first_line(error)}")
    return lines


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5, help="query runs per median")
    parser.add_argument("--batches", type=int, default=20, help="batches per writer")
    parser.add_argument("--writers", type=int, nargs="+", default=[3, 6])
    parser.add_argument("--sweeps", type=int, default=40,
                        help="sweeps loaded, 25,000 fold rows each")
    parser.add_argument("--small-commits", type=int, default=1000,
                        help="commits of the many-small-batch DuckLake load")
    parser.add_argument("--quick", action="store_true", help="a smoke run of about a minute")
    args = parser.parse_args()
    if args.quick:
        args.runs, args.batches, args.writers, args.sweeps, args.small_commits = 3, 3, [3], 4, 40

    from tests.pg_server import start_server

    began = time.perf_counter()
    extensions = extension_files()
    scratch = Path(tempfile.mkdtemp(prefix="foldwise-team-store-"))
    try:
        server = start_server()
    except BaseException:
        shutil.rmtree(scratch, ignore_errors=True)
        raise
    os.environ["PGPASSFILE"] = str(server.passfile)  # libpq in this and child processes
    try:
        print(f"duckdb {duckdb.__version__}, PostgreSQL on 127.0.0.1:{server.port}, "
              f"{os.cpu_count()} cores")
        probe = ducklake_target(server, "upsert_probe", extensions, scratch)
        print("\nUpserts on DuckLake:")
        for line in on_conflict_on_ducklake(probe):
            print(f"  {line}")

        # 1. concurrent writers
        rows, all_errors = [], []
        for writers in args.writers:
            for fresh in (True, False):
                for make in (attach_target, ducklake_target):
                    extra = (scratch,) if make is ducklake_target else ()
                    db = f"w{writers}_{'fresh' if fresh else 'held'}_{make.__name__[:4]}"
                    target = make(server, db, extensions, *extra)
                    conflicts_before = key_conflicts(server)
                    result = concurrent_writes(target, writers, args.batches, fresh)
                    conflicts = key_conflicts(server) - conflicts_before
                    rows.append([target.name, writers, "per batch" if fresh else "held",
                                 f"{result['seconds']:.2f}",
                                 f"{result['rows_per_second']:.0f}", result["expected"],
                                 result["found"], result["distinct"], conflicts,
                                 result["retries"], result["failed"]])
                    all_errors += [f"{target.name} P={writers}: {e}"
                                   for e in dict.fromkeys(result["errors"])]
                    if any(result["exit_codes"]):
                        all_errors.append(f"{target.name} P={writers}: exit codes "
                                          f"{result['exit_codes']}")
        batch_rows = CELLS_PER_BATCH * ROWS_PER_CELL
        print_table(
            f"1. Concurrent writers: P processes x {args.batches} batches x {batch_rows} rows, "
            "one transaction per batch",
            ["option", "P", "connection", "wall s", "rows/s", "expected", "found",
             "distinct", "conflicts", "retries", "failed"], rows,
            ["connection 'per batch': connect + LOAD + ATTACH for every batch; "
             "'held': one per process.",
             "conflicts: unique-key violations in PostgreSQL's log during the run (DuckLake: "
             "commits that lost the race for a snapshot id, retried inside DuckLake).",
             "retries: batches this script re-ran after an error reached it (up to 10 each); "
             "failed: gave up."]
            + [f"error seen: {e}" for e in all_errors[:12]]
            + ([f"... and {len(all_errors) - 12} more distinct errors"]
               if len(all_errors) > 12 else []))

        # 2 and 3. 1 M rows: load, then query
        n_rows = args.sweeps * CELLS_PER_SWEEP * ROWS_PER_CELL
        baseline = Target("duckdb file", None, path=str(scratch / "baseline.duckdb"))
        attach = attach_target(server, "million_attach", extensions)
        lake = ducklake_target(server, "million_lake", extensions, scratch)
        small = ducklake_target(server, "million_small", extensions, scratch)
        small.name = f"ducklake {args.small_commits} commits"
        commits_per_sweep = max(1, args.small_commits // args.sweeps)
        loads = {t.name: load(t, args.sweeps) for t in (baseline, attach, lake)}
        loads[small.name] = load(small, args.sweeps, commits_per_sweep)
        server.psql("vacuum analyze", "million_attach")
        files = {lake.name: data_files(lake), small.name: data_files(small)}

        targets = [baseline, attach, lake, small]
        timed = time_queries(targets, args.runs, sweep_name(args.sweeps // 2))
        merge_seconds = merge_files(small)
        merged = Target(f"{small.name}, merged", small.attach, extensions=extensions,
                        keys=False)
        files[merged.name] = data_files(merged)
        timed_merged = time_queries([baseline, merged], args.runs,
                                    sweep_name(args.sweeps // 2))
        answers = {**timed["answers"], **timed_merged["answers"]}
        agree = all(a == answers[baseline.name] for a in answers.values())

        rows = []
        for t, medians in [(t, timed["median"]) for t in targets] \
                + [(merged, timed_merged["median"])]:
            opened = statistics.median([medians[(t.name, q, "open")]
                                        for q in ("one sweep", "all sweeps")])
            rows.append([t.name, f"{loads[t.name]:.1f}" if t.name in loads else "-",
                         files.get(t.name, "-"), f"{opened * 1000:.0f}"]
                        + [ms_and_ratio(medians[(t.name, q, how)],
                                        medians[(baseline.name, q, how)])
                           for q in ("one sweep", "all sweeps") for how in ("fresh", "warm")])
        print_table(
            f"2-3. {n_rows:,} fold rows ({args.sweeps} sweeps x {CELLS_PER_SWEEP} cells x "
            f"{REPEATS} repeats x {FOLDS} folds x {len(METRICS)} metrics): load seconds, "
            f"summary query ms (ratio to the DuckDB file), median of {args.runs}",
            ["store", "load s", "files", "open ms", "one sweep fresh", "one sweep warm",
             "all sweeps fresh", "all sweeps warm"], rows,
            ["load: one commit per sweep (cells, then its fold rows), one held connection; "
             f"the small-commit load makes {commits_per_sweep} fold commits per sweep.",
             "open: connect + LOAD + ATTACH; fresh: open + query + close; warm: query on "
             "an open connection (after one untimed run).",
             f"ducklake_merge_adjacent_files on the small-commit lake: {merge_seconds:.1f} s; "
             "the merged lake was timed afterwards in a round of its own with the DuckDB "
             "file, and its ratios are to that round's DuckDB file.",
             f"all stores return the same answers: {agree}"])
        print(f"\nTotal run time {time.perf_counter() - began:.0f} s.")
    finally:
        server.stop()  # removes its data and password folders
        shutil.rmtree(scratch, ignore_errors=True)


if __name__ == "__main__":
    main()

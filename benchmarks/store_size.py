"""What a team's store weighs after 100 sweeps of the demo spec, on a DuckDB file and on
PostgreSQL, and what the weight grows with.

It runs specs/greenhouse.yaml once (every cell fitted, the explain step included), then
reruns it unchanged until the store holds --sweeps sweeps: each rerun fits nothing and
copies every row it reuses into the new sweep, as `foldwise run` does. That is the upper
end of a team's store (a rerun with new data or a new grid copies fewer rows and fits the
rest, writing as many). It measures:

  - the DuckDB file after 1, 10 and all sweeps (after a CHECKPOINT), and bytes per sweep;
  - the same sweeps merged into a throwaway PostgreSQL database (tests/pg_server.py):
    the database's size less an empty one's, and each table with its indexes;
  - what one sweep's rows are: rows per table, and the bytes of its spec text, cell params
    (JSON) and copied rows;
  - removing half the sweeps (`remove`), then exporting and merging into a new file.

Run: python benchmarks/store_size.py [--sweeps 100] [--jobs 2] [--quick]
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(Path(__file__).resolve().parent))
from _table import print_table  # noqa: E402
from runner.read.queries import sweeps as list_sweeps  # noqa: E402
from runner.store import TABLES, Store  # noqa: E402
from runner.store.tidy import remove_sweeps  # noqa: E402
from runner.store.transfer import export_store, merge_store  # noqa: E402
from runner.write.engine import run_sweep  # noqa: E402
from runner.write.spec import load_spec  # noqa: E402

MiB = 1024 * 1024


def file_size(path: Path) -> int:
    """The store file's bytes after a checkpoint (the write-ahead log folded in)."""
    import duckdb

    with duckdb.connect(str(path)) as con:
        con.execute("checkpoint")
    wal = Path(f"{path}.wal")
    return path.stat().st_size + (wal.stat().st_size if wal.exists() else 0)


def table_files(store: Store, folder: Path) -> dict[str, int]:
    """Each table copied alone into a fresh DuckDB file: its bytes there less those of a
    file holding the same table empty (DuckDB allocates 256 KiB blocks, so small tables
    round up to a block)."""
    import duckdb

    sizes = {}
    for table in TABLES:
        bytes_ = []
        for rows in ("", " limit 0"):
            target = folder / f"{table}.duckdb"
            with duckdb.connect(str(target)) as con:
                con.execute(f"attach '{store.path}' as src (read_only)")
                con.execute(f"create table {table} as select * from src.{table}{rows}")
                con.execute("detach src")
                con.execute("checkpoint")
            bytes_.append(target.stat().st_size)
            target.unlink()
        sizes[table] = bytes_[0] - bytes_[1]
    return sizes


def one_sweep(store: Store, sweep_id: str) -> dict:
    """Rows per table of one sweep, and the bytes of its spec text, params and copies."""
    counts = store.query("select " + ", ".join(
        f"(select count(*) from {t} where sweep_id = $1) as {t}" for t in TABLES
        if t != "metrics"), [sweep_id]).iloc[0].to_dict()
    text = store.query("""
        select length(spec_text) as spec_text,
               (select sum(length(params::varchar)) from cells where sweep_id = $1) as params,
               (select count(*) from fold_scores where sweep_id = $1
                and reused_from is not null) as copied_fold_rows
        from sweeps where sweep_id = $1""", [sweep_id]).iloc[0].to_dict()
    return {"rows": {k: int(v) for k, v in counts.items()},
            **{k: int(v or 0) for k, v in text.items()}}


def server_sizes(file_store: Store) -> tuple[int, dict[str, int], float, float]:
    """Merge the file's sweeps into a new PostgreSQL database: (bytes over an empty
    database, bytes per table with indexes, seconds the merge took, seconds removing half
    of the sweeps took)."""
    from tests.pg_server import start_server

    server = start_server()
    os.environ["PGPASSFILE"] = str(server.passfile)
    try:
        server.create_database("empty")
        empty = int(server.psql("select pg_database_size(current_database())", "empty"))
        url = server.create_database("sized")
        began = time.perf_counter()
        merge_store(Store(url), file_store.path)
        seconds = time.perf_counter() - began
        server.psql("vacuum analyze", "sized")
        total = int(server.psql("select pg_database_size(current_database())", "sized"))
        tables = {}
        for table in TABLES:
            tables[table] = int(server.psql(f"select pg_total_relation_size('{table}')",
                                            "sized"))
        ids = list_sweeps(Store(url)).table["sweep_id"].tolist()
        began = time.perf_counter()
        remove_sweeps(Store(url), ids[: len(ids) // 2])
        return total - empty, tables, seconds, time.perf_counter() - began
    finally:
        server.stop()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sweeps", type=int, default=100)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--quick", action="store_true", help="5 sweeps, for a smoke run")
    args = parser.parse_args()
    n = 5 if args.quick else args.sweeps
    work = Path(tempfile.mkdtemp(prefix="foldwise-size-"))
    try:
        shutil.copytree(REPO / "specs", work / "specs")
        spec = load_spec(work / "specs" / "greenhouse.yaml")
        store = Store(work / "team.duckdb")
        began = time.perf_counter()
        first = run_sweep(spec, store=store, jobs=args.jobs)
        fit_seconds = time.perf_counter() - began
        sizes = {1: file_size(store.path)}
        began = time.perf_counter()
        for i in range(2, n + 1):
            run_sweep(spec, store=store, jobs=args.jobs)
            if i in (10, n):
                sizes[i] = file_size(store.path)
        rerun_seconds = (time.perf_counter() - began) / max(1, n - 1)
        last = list_sweeps(store).table["sweep_id"].iloc[0]
        per_table = table_files(store, work)
        first_rows, copy_rows = one_sweep(store, first.sweep_id), one_sweep(store, last)
        server_total, server_tables, merge_seconds, server_remove = server_sizes(store)

        print(f"\n{n} sweeps of specs/greenhouse.yaml: the first fitted every cell in "
              f"{fit_seconds:.0f} s, each rerun copied everything in {rerun_seconds:.1f} s; "
              f"merging all into PostgreSQL took {merge_seconds:.0f} s")
        print_table("the DuckDB file as sweeps are added",
                    ["sweeps", "DuckDB file MiB", "MiB per sweep after the first"],
                    [[k, f"{v / MiB:.1f}", "" if k == 1 else
                      f"{(v - sizes[1]) / (k - 1) / MiB:.2f}"] for k, v in sizes.items()])
        print(f"\nPostgreSQL database (over an empty one): {server_total / MiB:.1f} MiB "
              f"for {n} sweeps, {server_total / n / MiB:.2f} MiB a sweep")
        rows = [[t, copy_rows["rows"].get(t, ""), f"{per_table[t] / MiB:.2f}",
                 f"{server_tables[t] / MiB:.2f}"] for t in TABLES]
        print_table(f"where the weight is ({n} sweeps)",
                    ["table", "rows a sweep", "DuckDB MiB (table alone)",
                     "PostgreSQL MiB (with indexes)"], rows)
        print(f"\none sweep: spec text {copy_rows['spec_text']:,} bytes, cell params (JSON) "
              f"{copy_rows['params']:,} bytes, {copy_rows['copied_fold_rows']:,} of "
              f"{copy_rows['rows']['fold_scores']:,} fold-score rows copied from the first "
              f"sweep (the first: {first_rows['rows']['fold_scores']:,} rows, none copied)")

        ids = list_sweeps(store).table["sweep_id"].tolist()
        removed = ids[: len(ids) // 2]
        began = time.perf_counter()
        remove_sweeps(store, removed)
        remove_seconds = time.perf_counter() - began
        after_remove = file_size(store.path)
        export_store(store, work / "export")
        compact = Store(work / "compact.duckdb")
        merge_store(compact, work / "export")
        print(f"\nremoving {len(removed)} sweeps took {remove_seconds:.1f} s on the file, "
              f"{server_remove:.1f} s on PostgreSQL; the file then "
              f"weighs {after_remove / MiB:.1f} MiB (DuckDB reuses the freed blocks, it "
              f"does not shrink the file); exported and merged into a new file: "
              f"{file_size(compact.path) / MiB:.1f} MiB")
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()

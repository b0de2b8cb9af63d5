"""Moving results between stores: `export_store` writes every table of a store as files
with a manifest, `merge_store` copies into a store every sweep another store (a file, a
server or an export folder) holds and it lacks, whole and in one transaction."""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

import duckdb
import pandas as pd

from ..errors import StoreError
from . import Store
from .schema import ADDED_IN, SCHEMA_VERSION, TABLES

__all__ = ["export_store", "merge_store", "MergeResult", "EXPORT_FORMATS", "EXPORT_MANIFEST"]

EXPORT_MANIFEST = "foldwise-export.json"
EXPORT_FORMATS = ("parquet", "csv")


@dataclass
class MergeResult:
    """What a merge copied: rows per table, and the sweeps it left out and why."""

    rows: dict[str, int]
    new_sweeps: list[str]
    present: list[str]
    running: list[str]


def export_store(store: Store, folder: str | Path, fmt: str = "parquet") -> dict[str, int]:
    """Write every table of the store as one file per table (parquet or csv) into `folder`,
    with a manifest that `merge_store` reads back. Returns rows written per table.

    Files are written to a temporary folder inside `folder` and moved in place at the end,
    so an interrupted export leaves no half-written table behind."""
    if fmt not in EXPORT_FORMATS:
        raise StoreError(f"unknown export format '{fmt}'; choose parquet or csv.")
    folder = Path(folder)
    store._require()
    if folder.exists() and not folder.is_dir():
        raise StoreError(f"{folder} exists and is not a folder; give a folder to export into.")
    clash = [name for name in [EXPORT_MANIFEST, *(f"{t}.{fmt}" for t in TABLES)]
             if (folder / name).exists()]
    if clash:
        raise StoreError(f"{folder} already holds an export ({clash[0]}); choose an empty or "
                         "new folder, so no earlier export is overwritten.")
    folder.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=".export-", dir=folder))
    options = "format parquet" if fmt == "parquet" else "format csv, header true"
    counts = {}
    store._check_version()  # refuses a non-store, upgrades an older one
    try:
        with store._connect(read_only=True) as con:
            for table in TABLES:
                target = staging / f"{table}.{fmt}"
                counts[table] = con.execute(f"copy (select * from {table} order by all) to "
                                            f"'{_sql_text(target)}' ({options})"
                                            ).fetchone()[0]
        manifest = {"schema_version": SCHEMA_VERSION, "format": fmt, "tables": counts,
                    "exported_from": store.location.kind}
        (staging / EXPORT_MANIFEST).write_text(json.dumps(manifest, indent=2) + "\n")
        for item in [*(f"{t}.{fmt}" for t in TABLES), EXPORT_MANIFEST]:
            os.replace(staging / item, folder / item)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return counts


def _export_sources(folder: Path) -> dict[str, str]:
    """SQL table expressions reading an export folder's files, after checking its manifest."""
    manifest_path = folder / EXPORT_MANIFEST
    try:
        manifest = json.loads(manifest_path.read_text())
        fmt, version = manifest["format"], int(manifest["schema_version"])
    except (OSError, ValueError, KeyError, TypeError):
        raise StoreError(f"{folder} is not a foldwise export (no readable {EXPORT_MANIFEST}); "
                         "create one with `foldwise export DIR`.") from None
    if version > SCHEMA_VERSION or fmt not in EXPORT_FORMATS:
        raise StoreError(f"export {folder} was written by a newer foldwise (schema version "
                         f"{version}, format {fmt}); upgrade foldwise to read it.")
    sources = {}
    for table in TABLES:
        path = folder / f"{table}.{fmt}"
        if not path.exists() and version < ADDED_IN.get(table, 0):
            continue  # an export from before the table existed
        if not path.exists():
            raise StoreError(f"export {folder} lacks {path.name}; export the store again.")
        reader = (f"read_parquet('{_sql_text(path)}')" if fmt == "parquet" else
                  f"read_csv('{_sql_text(path)}', header = true, all_varchar = true)")
        sources[table] = reader
    return sources


def merge_store(store: Store, other: str | Path) -> MergeResult:
    """Copy into `store` every sweep of `other` (a store file, a server URL or an export
    folder) that it does not hold yet, with all of that sweep's rows, in one transaction.

    Sweeps already present (by sweep id) are skipped whole; sweeps still marked running are
    left out, since their rows are not complete yet."""
    from .locations import locate

    store.ensure_schema()
    if isinstance(other, (str, Path)) and Path(str(other)).is_dir():
        sources, attach = _export_sources(Path(str(other))), None
    else:
        where = locate(other)
        if str(where) == str(store.location) or (
                where.kind == "file" and store.location.kind == "file"
                and where.exists() and store.location.exists()
                and Path(where.path).resolve() == Path(store.location.path).resolve()):
            raise StoreError(f"{other} is this store itself; name another store to merge.")
        if not where.exists():
            raise StoreError(f"no store or export folder at {other}. Give a store file, a "
                             "postgresql:// URL or a folder written by `foldwise export`.")
        attach = where
        sources = {t: f"_other.{t}" for t in TABLES}
    with store._connect(read_only=False) as con, _attached(con, attach, other):
        if attach is not None:  # a store from before a table existed lacks it
            present = {t for (t,) in con.execute(
                "select table_name from information_schema.tables where table_catalog = "
                "'_other'").fetchall()}
            sources = {t: s for t, s in sources.items() if t in present or t not in ADDED_IN}
        theirs = con.execute(f"select sweep_id, status from {sources['sweeps']}").df()
        mine = set(con.execute("select sweep_id from sweeps").df()["sweep_id"])
        present = sorted(s for s in theirs["sweep_id"] if s in mine)
        running = sorted(theirs.loc[(theirs["status"] == "running")
                                    & ~theirs["sweep_id"].isin(mine), "sweep_id"])
        new = sorted(set(theirs["sweep_id"]) - mine - set(running))
        rows = {t: 0 for t in TABLES}
        if new:
            con.register("_new_sweeps", pd.DataFrame({"sweep_id": new}))
            con.execute("begin")
            try:
                rows["metrics"] = con.execute(
                    f"insert into metrics by name select * from {sources['metrics']} m "
                    "where m.metric not in (select metric from metrics)").fetchone()[0]
                for table in TABLES:
                    if table == "metrics" or table not in sources:
                        continue
                    rows[table] = con.execute(
                        f"insert into {table} by name select * from {sources[table]} s "
                        "where s.sweep_id in (select sweep_id from _new_sweeps)"
                    ).fetchone()[0]
                con.execute("commit")
            except duckdb.Error as exc:
                con.execute("rollback")
                raise StoreError(f"merging {other} into {store.path} failed, nothing was "
                                 f"copied: {str(exc).splitlines()[0]}") from None
    return MergeResult({t: int(n) for t, n in rows.items()}, new, present, running)


@contextmanager
def _attached(con, where, other) -> Iterator[None]:
    """`where` (a store file or server) attached read-only as `_other` for the duration,
    after checking it is a foldwise store this foldwise can read; nothing for a folder."""
    if where is None:
        yield
        return
    try:
        where.attach_into(con, "_other")
    except duckdb.Error as exc:
        raise where.open_error(exc) from None
    try:
        found = con.execute("select count(*) from information_schema.tables where "
                            "table_catalog = '_other' and table_name = 'foldwise_meta'"
                            ).fetchone()[0]
        if not found:
            raise StoreError(f"{other} is not a foldwise store (no foldwise_meta table).")
        row = con.execute("select value from _other.foldwise_meta where key = "
                          "'schema_version'").fetchone()
        try:
            version = int(row[0])
        except (TypeError, ValueError):
            raise StoreError(f"{other} is damaged: its foldwise_meta table gives no numeric "
                             "schema_version. Merge from a sound copy of it.") from None
        if version > SCHEMA_VERSION:
            raise StoreError(f"store {other} was written by a newer foldwise (schema version "
                             f"{version}); upgrade foldwise to merge it.")
        yield
    finally:
        con.execute("detach _other")


def _sql_text(text) -> str:
    return str(text).replace("'", "''")

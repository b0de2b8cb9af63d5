"""Moving results between stores: `export_store` writes every table of a store as files
with a manifest, `merge_store` copies into a store every sweep another store (a file, a
server or an export folder) holds and it lacks, whole and in one transaction, and every
built model it lacks whose sweep it then holds."""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Iterator

import duckdb
import pandas as pd

from ..errors import StoreError
from ..read.filenames import make_folder, remove_made_folders
from . import Store, reaches_outside, refusing_outside
from .labels import Selection, resolve_ids
from .schema import MODEL_TABLES, SCHEMA_VERSION, SINCE, TABLES
from .shape import shape_problem

EMPTY_LABELS = ("(select null::varchar as sweep_id, null::varchar as key, "
                "null::varchar as value where false)")
"""sweep_labels as read from a store or export older than the table: no labels."""

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
    new_models: list[str] = field(default_factory=list)


def export_store(store: Store, folder: str | Path, fmt: str = "parquet",
                 selection: Selection | None = None) -> dict[str, int]:
    """Write every table of the store as one file per table (parquet or csv) into `folder`,
    with a manifest that `merge_store` reads back. Returns rows written per table. With a
    `selection` (sweep ids, labels, ...), only those sweeps' rows are written (and every
    metric's direction, and the models built on them); a selection that names no sweep is
    refused.

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
    store._check_version()  # refuses a non-store, upgrades an older one
    made = make_folder(folder, f"export {folder}", "Give a folder whose path holds folders only.")
    staging = Path(tempfile.mkdtemp(prefix=".export-", dir=folder))
    options = "format parquet" if fmt == "parquet" else "format csv, header true"
    counts = {}
    try:
        with store._connect(read_only=True, reach=[staging]) as con:
            chosen = None
            if selection is not None and not selection.empty:
                where, params = selection.where("s")
                chosen = [r[0] for r in con.execute(
                    f"select s.sweep_id from sweeps s where {where} order by s.sweep_id",
                    params).fetchall()]
                if not chosen:
                    selection.check_names(
                        [n for (n,) in con.execute("select distinct name from sweeps")
                         .fetchall()],
                        con.execute("select distinct key, value from sweep_labels").fetchall(),
                        f"in store {store.path}")
                    raise StoreError(f"no sweep in store {store.path} matches "
                                     f"{selection.describe()}; nothing was exported. "
                                     "`foldwise sweeps` lists them with their labels.")
            for table in TABLES:
                target = staging / f"{table}.{fmt}"
                only = "" if chosen is None or table == "metrics" else (
                    " where model_id in (select model_id from models "
                    "where list_contains($1::varchar[], sweep_id))"
                    if table == "model_coefficients" else
                    " where list_contains($1::varchar[], sweep_id)")
                counts[table] = con.execute(f"copy (select * from {table}{only} order by all) "
                                            f"to '{_sql_text(target)}' ({options})",
                                            [chosen] if only else []).fetchone()[0]
        manifest = {"schema_version": SCHEMA_VERSION, "format": fmt, "tables": counts,
                    "exported_from": store.location.kind}
        if chosen is not None:
            manifest.update(sweeps=chosen, selection=selection.describe())
        (staging / EXPORT_MANIFEST).write_text(json.dumps(manifest, indent=2) + "\n")
        for item in [*(f"{t}.{fmt}" for t in TABLES), EXPORT_MANIFEST]:
            os.replace(staging / item, folder / item)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        remove_made_folders(made)
        raise
    shutil.rmtree(staging, ignore_errors=True)
    return counts


def _export_sources(folder: Path) -> dict[str, str | None]:
    """SQL table expressions reading an export folder's files, after checking its manifest;
    None for a table the export's foldwise did not have yet."""
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
        if not path.exists() and SINCE.get(table, 0) > version:
            sources[table] = None
            continue
        if not path.exists():
            raise StoreError(f"export {folder} lacks {path.name}; export the store again.")
        reader = (f"read_parquet('{_sql_text(path)}')" if fmt == "parquet" else
                  f"read_csv('{_sql_text(path)}', header = true, all_varchar = true)")
        sources[table] = reader
    return sources


def merge_store(store: Store, other: str | Path,
                selection: Selection | None = None) -> MergeResult:
    """Copy into `store` every sweep of `other` (a store file, a server URL or an export
    folder) that it does not hold yet, with all of that sweep's rows, in one transaction;
    with a `selection` (sweep ids or unique prefixes as `other` knows them, labels, ...),
    only the sweeps of `other` it names.

    Sweeps already present (by sweep id) are skipped whole; sweeps still marked running are
    left out, since their rows are not complete yet. Built models (`foldwise build`) this
    store lacks are copied by model id when their sweep is here (already, or by this merge),
    so a model built later on a sweep merged before still arrives."""
    from .locations import locate

    new_file = not store.location.exists()  # made only once `other` is found fit to merge
    if not new_file:
        store.ensure_schema()
    if isinstance(other, (str, Path)) and Path(str(other)).is_dir():
        sources, attach = _export_sources(Path(str(other))), None
        reach = [Path(str(other))]
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
        reach = where.reach() if where.kind == "file" else None
    if new_file:
        _check_source(other, attach, sources, selection, reach)
        store.ensure_schema()
    with store._connect(read_only=False, reach=reach) as con, _attached(con, attach, other), \
            refusing_outside(other):
        sources = _readable(con, sources, attach)
        theirs = con.execute(f"select sweep_id, status, started_at from {sources['sweeps']} s"
                             + _chosen(con, sources, selection, other)).df()
        mine = set(con.execute("select sweep_id from sweeps").df()["sweep_id"])
        present = sorted(s for s in theirs["sweep_id"] if s in mine)
        running = sorted(theirs.loc[(theirs["status"] == "running")
                                    & ~theirs["sweep_id"].isin(mine), "sweep_id"])
        left_out = mine | set(running)
        new = list(theirs.loc[~theirs["sweep_id"].isin(left_out)]
                   .sort_values(["started_at", "sweep_id"])["sweep_id"].drop_duplicates())
        rows = {t: 0 for t in TABLES}
        con.register("_new_sweeps", pd.DataFrame({"sweep_id": new}, dtype=object))
        con.execute("begin")
        try:
            if new:
                rows["metrics"] = con.execute(
                    f"insert into metrics by name select * from {sources['metrics']} m "
                    "where m.metric not in (select metric from metrics)").fetchone()[0]
            for table in TABLES:
                if not new or table == "metrics" or table in MODEL_TABLES \
                        or sources[table] is None:
                    continue
                rows[table] = con.execute(
                    f"insert into {table} by name select * from {sources[table]} s "
                    "where s.sweep_id in (select sweep_id from _new_sweeps)"
                ).fetchone()[0]
            models = _merge_models(con, sources, rows)
            con.execute("commit")
        except duckdb.Error as exc:
            con.execute("rollback")
            if reaches_outside(exc):
                raise
            raise StoreError(f"merging {other} into {store.path} failed, nothing was "
                             f"copied: {str(exc).splitlines()[0]}") from None
    return MergeResult({t: int(n) for t, n in rows.items()}, new, present, running, models)


def _readable(con, sources: dict, attach) -> dict:
    """`sources` without the tables an older store lacks (None), sweep_labels as none."""
    if attach is not None:  # an older store lacks the tables added since
        theirs_tables = {t for (t,) in con.execute(
            "select table_name from information_schema.tables "
            "where table_catalog = '_other'").fetchall()}
        sources = {t: s if t in theirs_tables else None for t, s in sources.items()}
    if sources["sweep_labels"] is None:  # an older store: no labels, but readable
        sources = {**sources, "sweep_labels": EMPTY_LABELS}
    return sources


def _check_source(other, attach, sources: dict, selection: Selection | None, reach) -> None:
    """Raise what `other` would refuse the merge for (not a foldwise store, too new, a
    table it cannot give, no sweep chosen) on a connection of its own that reaches only
    `reach` (None: anywhere), before a new store file is made for it."""
    from .locations import confine

    con = duckdb.connect()
    try:
        if reach is not None:
            confine(con, reach)
        with _attached(con, attach, other), refusing_outside(other):
            sources = _readable(con, sources, attach)
            for source in filter(None, sources.values()):
                con.execute(f"select * from {source} s limit 0")
            _chosen(con, sources, selection, other)
    finally:
        con.close()


def _merge_models(con, sources: dict, rows: dict) -> list[str]:
    """Copy the built models this store lacks (by model id) whose sweep it holds by now,
    with their coefficients; return their ids."""
    if sources["models"] is None:
        return []
    ids = con.execute(f"""select s.model_id from {sources['models']} s
        where s.model_id not in (select model_id from models)
          and s.sweep_id in (select sweep_id from sweeps) order by 1""").fetchall()
    ids = [str(i) for (i,) in ids]
    if not ids:
        return []
    con.register("_new_models", pd.DataFrame({"model_id": ids}, dtype=object))
    for table in MODEL_TABLES:
        if sources[table] is not None:
            rows[table] = con.execute(
                f"insert into {table} by name select * from {sources[table]} s "
                "where s.model_id in (select model_id from _new_models)").fetchone()[0]
    return ids


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
        problem = None if where.shared else (
            f"its schema_version is {version}, and foldwise numbers its schemas from 1"
            if version < 1
            else shape_problem(con, "_other", version))
        if problem:
            raise StoreError(f"store {other} cannot be merged: {problem}. foldwise copies only "
                             "the tables its sweeps write, so nothing was copied. The store "
                             "may have been altered: ask whoever passed it on for a sound copy.")
        yield
    finally:
        con.execute("detach _other")


def _sql_text(text) -> str:
    return str(text).replace("'", "''")


def _chosen(con, sources: dict, selection: Selection | None, other) -> str:
    """A where clause keeping the sweeps of `other` that `selection` names (ids resolved
    against other's own sweeps first); their ids travel as a registered table, never as
    SQL text."""
    if selection is None or selection.empty:
        return ""
    if selection.ids:
        known = [r[0] for r in con.execute(f"select sweep_id from {sources['sweeps']}").fetchall()]
        folder = Path(str(other)).is_dir()
        listed = (f"its {EXPORT_MANIFEST} lists them" if folder
                  else f"`foldwise sweeps --store {other}` lists them")
        where = f"in {other}, the {'export' if folder else 'store'} merged from"
        selection = replace(selection, ids=tuple(resolve_ids(known, selection.ids,
                                                             where=where, listed=listed)))
    where, params = selection.where("s", sources["sweep_labels"])
    found = [r[0] for r in con.execute(f"select s.sweep_id from {sources['sweeps']} s "
                                       f"where {where}", params).fetchall()]
    if not found:
        selection.check_names(
            [n for (n,) in con.execute(f"select distinct name from {sources['sweeps']}")
             .fetchall()],
            con.execute(f"select distinct key, value from {sources['sweep_labels']}")
            .fetchall(), f"of {other}")
        raise StoreError(f"no sweep of {other} matches {selection.describe()}; nothing was "
                         "merged.")
    con.register("_chosen_sweeps", pd.DataFrame({"sweep_id": found}))
    return " where s.sweep_id in (select sweep_id from _chosen_sweeps)"

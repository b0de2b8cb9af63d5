"""The store: the only module that speaks SQL to DuckDB. It takes plain rows and DataFrames
and knows nothing of scikit-learn.

One class, two locations (`locations.py`): a DuckDB file, or a PostgreSQL database a team
shares, attached through DuckDB so that the same SQL serves both. A user's own query runs
apart, read-only by construction (`sandbox.py`); export and merge are in `transfer.py`. Every operation opens a
short-lived connection and closes it, so a sweep never holds a file's lock for long: two
sweeps can write to one store in turn and another terminal can query while a sweep runs.
Each batch is one transaction: it lands whole or not at all."""

from __future__ import annotations

import contextlib
import json
import time
from contextlib import contextmanager
from datetime import datetime
from pathlib import Path
from typing import TYPE_CHECKING, Callable, Iterator

import duckdb

if TYPE_CHECKING:  # pandas is imported where rows become frames: a listing starts faster
    import pandas as pd

from ..errors import StoreError
from ..names import not_found
from .locations import FileLocation, ServerLocation, locate
from .schema import (DEFAULT_STORE, SCHEMA_VERSION, TABLE_SQL, TABLES, UPGRADE_COLUMNS,
                     VIEW_SQL)

__all__ = ["Store", "SCHEMA_VERSION", "DEFAULT_STORE", "TABLES", "VIEW_SQL", "Notices"]

_ONE_THREAD = {"threads": 1}
"""The settings of a connection to a file that writes a few rows (see `Store._connect`)."""
_CONFLICT_WORDS = ("could not serialize", "deadlock detected", "concurrent update",
                   # two sweeps starting together both add a metric's direction; the
                   # second's `insert or ignore` sees the first's row once it runs again
                   'violates unique constraint "metrics_pkey"')


def _is_conflict(exc: Exception) -> bool:
    """A server aborted the transaction for a concurrent one; running it again is safe."""
    return any(w in str(exc) for w in _CONFLICT_WORDS)


class Notices:
    """Passes each kind of notice on once, however many stores (or retries) share it: a
    run that waits for a busy file says so once, not once per write."""

    def __init__(self, tell: Callable[[str], None]):
        self.tell = tell
        self.said: set[str] = set()

    def __call__(self, message: str, kind: str | None = None) -> None:
        key = kind or message
        if key not in self.said:
            self.said.add(key)
            self.tell(message)


class Store:
    """Sweeps, cells and scores in a DuckDB file or a team's PostgreSQL database."""

    def __init__(self, path: str | Path | FileLocation | ServerLocation = DEFAULT_STORE, *,
                 wait_seconds: float = 120.0, on_wait: Callable[[str], None] | None = None):
        self.location = locate(path)
        self.path = self.location.path
        self.wait_seconds = wait_seconds
        self.on_wait = on_wait if on_wait is None or isinstance(on_wait, Notices) \
            else Notices(on_wait)
        self._held = None  # the connection `session()` holds, if any
        self._schema_checked = False
        self._schema_ensured = False  # ensure_schema found (or made) this foldwise's tables
        self._looked = False  # an existing file was found to be no foreign database
        self._privileges_checked = False

    # -- connections -------------------------------------------------------------------
    @contextmanager
    def _connect(self, *, read_only: bool, config: dict | None = None,
                 writing: bool | None = None, small: bool = False, reach=()
                 ) -> Iterator[duckdb.DuckDBPyConnection]:
        """A short-lived connection; `writing` (default: not read_only) says whether it
        serves a write, which waits for a busy file however long it takes. A `small` one
        (a few rows to write) opens a file with one thread: DuckDB starts and stops its
        threads with each connection, which costs more than such a write. On a file it
        reaches no other file but those of `reach` (see `FileLocation.connect`)."""
        if self._held is not None and not config and not reach:
            yield self._held
            return
        if small and not config and not self.location.shared:
            config = _ONE_THREAD
        con = self.patiently(lambda: self.location.connect(read_only=read_only, config=config,
                                                           reach=reach),
                             writing=not read_only if writing is None else writing)
        if self.location.shared:
            _summary_view(con)
        try:
            with refusing_outside(self.path):
                yield con
        finally:
            con.close()

    def patiently(self, open_: Callable, *, writing: bool):
        """`open_()`, retried while the store file is busy: a writer waits as long as it
        takes (a sweep never fails for a reader), a reader up to `wait_seconds`. The notice
        naming who holds the file is given once per store (and per `on_wait`)."""
        deadline = None if writing else time.monotonic() + self.wait_seconds
        delay = 0.05
        while True:
            try:
                return open_()
            except duckdb.Error as exc:
                if not self.location.is_busy(exc):
                    raise self.location.open_error(exc) from None
                if deadline is not None and time.monotonic() >= deadline:
                    raise StoreError(self.location.busy_message(
                        exc, writing=writing, limit=self.wait_seconds, gave_up=True)) from None
                if self.on_wait:
                    self.on_wait(self.location.busy_message(exc, writing=writing,
                                                            limit=self.wait_seconds), "busy")
                time.sleep(delay)
                delay = min(delay * 1.5, 0.5)

    @contextmanager
    def session(self, *, schema: bool = False) -> Iterator["Store"]:
        """Hold one read-write connection for a burst of small operations, then let go.

        Other processes wait meanwhile, so keep it to quick work such as a rerun that only
        copies stored rows; each operation still commits on its own. Inside a session (or
        a `reading`), it is that session. With `schema`, the tables are made sure of first
        (`ensure_schema`): on a file, through the held connection once a look that cannot
        write has found no foreign database there; on a server, before it, since racing
        first sweeps each look again on a fresh connection."""
        if schema and (self._held is not None or self.location.shared):
            self.ensure_schema()
        if self._held is not None:
            yield self
            return
        if schema and not self._schema_ensured:
            self.check_writable()
            self._refuse_foreign_unchanged()
        with self._connect(read_only=False) as con:
            self._held = con
            try:
                if schema:
                    self.ensure_schema()
                yield self
            finally:
                self._held = None

    @contextmanager
    def reading(self) -> Iterator["Store"]:
        """Hold one read-only connection for a burst of queries (a diff or a history asks
        dozens), then let go; on a file, writers wait meanwhile, so keep it short. Inside
        it, nothing may be written."""
        if self._held is not None:
            yield self
            return
        self._require()
        self._check_version()
        with self._connect(read_only=True) as con:
            self._held = con
            try:
                yield self
            finally:
                self._held = None

    def check_writable(self) -> None:
        """Raise a StoreError unless this store can be created or written here."""
        self.location.check_writable()

    def ensure_schema(self) -> None:
        """Create tables and views if missing; refuse a store from a newer foldwise, a
        database that holds tables but is no foldwise store (before writing anything into
        it), and on a server a role that may not write sweeps.

        On a server several first sweeps may race to create the tables; PostgreSQL lets
        one win and the others look again on a fresh connection, which then sees them.
        Once it has succeeded, a Store does not look again (a sweep and its explain step
        ask in turn)."""
        if self._schema_ensured:
            return
        self.check_writable()
        self._refuse_foreign_unchanged()
        attempts = 20 if self.location.shared else 1
        for attempt in range(attempts):
            if self.location.shared:
                self.location.forget_catalog()
            with self._connect(read_only=False, small=True) as con:
                found = self._schema_version(con)
                if found is None:
                    self._refuse_foreign(con)
                if found is not None and found > SCHEMA_VERSION:
                    raise self._newer_error(found)
                if found == SCHEMA_VERSION:
                    self._check_privileges(con)
                    if not self.location.shared:
                        _renew_summary_view(con)
                    self._schema_ensured = True
                    return
                try:
                    self._create_schema(con, found)
                    self._schema_ensured = True
                    return
                except duckdb.Error as exc:
                    con.execute("rollback")
                    if "permission denied" in str(exc) or attempt + 1 == attempts:
                        raise self._creation_error(exc) from None
            time.sleep(0.1 + 0.1 * attempt)

    def check_can_record(self) -> None:
        """Raise the StoreError `run` would raise before its first write here: a place that
        cannot be written, a file that is not DuckDB, a database that is not a foldwise
        store. Looks as a reader does, through a connection that cannot write (`check`)."""
        self.check_writable()
        self._refuse_foreign_unchanged(writing=False)

    def _refuse_foreign_unchanged(self, *, writing: bool = True) -> None:
        """On a file that exists, look through a read-only connection first, so that a file
        that is no foldwise store is refused unchanged (once per Store). Inside a session
        the file is open for writing already, and the schema check refuses it instead.
        `writing`: wait for a busy file as a writer does (however long) or a reader."""
        if self._looked or self._held is not None or self.location.shared \
                or not self.location.exists():
            return
        with self._connect(read_only=True, writing=writing, small=True) as con:
            found = self._schema_version(con)
            if found is None:
                self._refuse_foreign(con)
            elif found > SCHEMA_VERSION:
                raise self._newer_error(found)
        self._looked = True

    def _newer_error(self, found: int) -> StoreError:
        return StoreError(f"store {self.path} was written by a newer foldwise (schema version "
                          f"{found}; this foldwise knows {SCHEMA_VERSION}). Upgrade foldwise "
                          "or use another store.")

    def _create_schema(self, con, found: int | None) -> None:
        con.execute("begin")
        if found == 1:  # spec order was the file's insertion order; make it explicit
            con.execute("alter table cells add column position integer")
            con.execute("update cells set position = rowid")
        con.execute(TABLE_SQL)
        for table, column in UPGRADE_COLUMNS:  # columns added to tables since first made
            con.execute(f"alter table {table} add column if not exists {column}")
        if not self.location.shared:  # a server's view lives in each connection
            con.execute(VIEW_SQL)
        con.execute("insert or replace into foldwise_meta values ('schema_version', ?)",
                    [str(SCHEMA_VERSION)])
        con.execute("commit")

    def _creation_error(self, exc: Exception) -> StoreError:
        first = str(exc).strip().splitlines()[0]
        if "permission denied" in first:
            return StoreError(f"cannot create the tables of team store {self.path}: {first}. "
                              "The first sweep into a team store (and an upgrade) must be run "
                              "by a role that may create tables in the database's schema, "
                              "such as the owner; README 'Working as a team' has the roles.")
        return StoreError(f"cannot create the tables of store {self.path}: {first}")

    def _schema_version(self, con) -> int | None:
        """The store's schema version; None when there is no foldwise_meta table.

        Asked by name, not from the table list: on a server the list a connection holds can
        be one taken before another sweep's tables were committed, with only the tables this
        connection has since looked up by name added to it."""
        try:
            row = con.execute("select value from foldwise_meta where key = 'schema_version'"
                              ).fetchone()
        except duckdb.CatalogException:
            return None
        if row is None:
            return None
        try:
            version = int(row[0])
        except (TypeError, ValueError):
            raise StoreError(f"store {self.path} is damaged: its foldwise_meta table gives "
                             f"schema_version {str(row[0])[:40]!r}, not a number. Restore "
                             "the store from a copy, or point --store at another store."
                             ) from None
        if version < 1:
            raise StoreError(f"store {self.path} is damaged: its foldwise_meta table gives "
                             f"schema_version {version}, and foldwise numbers its schemas "
                             "from 1; nothing was read and nothing was written. Restore the "
                             "store from a copy, or point --store at another store.")
        return version

    def _tables_here(self, con) -> list[str]:
        """Tables and views of this database (on a server: of its current schema)."""
        where = "table_schema = current_schema()" if self.location.shared else "true"
        return [t for (t,) in con.execute(
            "select table_name from information_schema.tables where table_catalog = "
            f"current_database() and {where} order by table_name").fetchall()]

    def _refuse_foreign(self, con) -> None:
        """Refuse a database without foldwise's marker unless it holds no table at all."""
        tables = self._tables_here(con)
        if tables:
            shown = ", ".join(tables[:5]) + (", ..." if len(tables) > 5 else "")
            raise StoreError(f"{self.path} is a database but not a foldwise store: it holds "
                             f"{len(tables)} table(s) ({shown}) and no foldwise_meta table. "
                             "foldwise writes only into its own stores or an empty database, "
                             "so nothing was written; give --store (or the spec's `store`) "
                             "a new path.")

    _WRITES = [(t, "INSERT") for t in TABLES] + [("sweeps", "UPDATE"), ("cells", "UPDATE")]

    def _check_privileges(self, con) -> None:
        """On a server, refuse before anything is written if this role may not write sweeps
        (INSERT on every table, UPDATE on sweeps and cells); checked once per store."""
        if not self.location.shared or self._privileges_checked:
            return
        self.require_writer(doing="write sweeps into it", con=con,
                            needs="`run` and `merge` need INSERT on every foldwise table and "
                                  "UPDATE on sweeps and cells", changed="written")

    def require_writer(self, *, doing: str, needs: str, changed: str, con=None) -> None:
        """On a server, refuse before anything changes if this role may not write rows
        (INSERT on every table, UPDATE on sweeps and cells), saying what the command does."""
        self.require_privileges(self._WRITES, doing=doing, needs=needs, con=con,
                                grant="foldwise_writer", changed=changed)
        self._privileges_checked = True

    def require_privileges(self, wanted: list[tuple[str, str]], *, doing: str, needs: str,
                           grant: str, changed: str, con=None) -> None:
        """On a server, raise a StoreError naming what this role lacks of `wanted`
        ((table, privilege) pairs) before anything changes; nothing to check on a file."""
        if not self.location.shared:
            return
        if con is None:
            with self._connect(read_only=True) as con:
                return self.require_privileges(wanted, doing=doing, needs=needs, grant=grant,
                                               changed=changed, con=con)
        pairs = ", ".join(f"('{t}', '{p}')" for t, p in wanted)
        missing = con.execute(f"""select * from postgres_query('{self.location.alias}', $$
            select current_user::text as role, w.p as privilege, w.t as table_name
            from (values {pairs}) as w(t, p)
            where not has_table_privilege(quote_ident(current_schema()) || '.' ||
                                          quote_ident(w.t), w.p)
            order by 2, 3 $$)""").fetchall()
        if not missing:
            return
        role = missing[0][0]
        lacks = []
        for privilege in dict.fromkeys(p for _, p, _ in missing):
            tables = [t for _, p, t in missing if p == privilege]
            asked = {t for t, p in wanted if p == privilege}
            every = len(asked) > 2 and set(tables) == asked
            lacks.append(f"{privilege} on " + ("every foldwise table" if every
                                                else ", ".join(tables)))
        raise StoreError(f"role {role} may read team store {self.path} but not {doing}: it "
                         f"lacks {'; '.join(lacks)}. {needs}; ask the database's owner to "
                         f"grant them (README 'Working as a team': grant {grant} to {role}), "
                         f"or use a role that has them. Nothing was {changed}.")

    # -- writing ---------------------------------------------------------------------------
    def _transaction(self, work: Callable, *, what: str, small: bool = False):
        """Run `work(con)` in one transaction and return its result (`small`: see
        `_connect`).

        On a server, a transaction that PostgreSQL aborts because a concurrent one touched
        the same rows (a serialization failure or deadlock) is run again, a few times."""
        attempts = 8 if self.location.shared else 1
        for attempt in range(attempts):
            with self._connect(read_only=False, small=small) as con:
                con.execute("begin")
                try:
                    result = work(con)
                    con.execute("commit")
                    return result
                except duckdb.Error as exc:
                    with contextlib.suppress(duckdb.Error):
                        con.execute("rollback")
                    if attempt + 1 < attempts and _is_conflict(exc):
                        time.sleep(0.05 * 2 ** attempt)
                        continue
                    raise StoreError(f"{what} in store {self.path} failed: "
                                     f"{str(exc).splitlines()[0]}") from None
                except BaseException:  # a refusal or Ctrl-C inside `work`: nothing stays
                    with contextlib.suppress(duckdb.Error):
                        con.execute("rollback")
                    raise

    def write_batch(self, tables: dict[str, pd.DataFrame]) -> None:
        """Insert several tables' rows in one transaction (all land or none)."""
        tables = {t: df for t, df in tables.items() if df is not None and len(df)}
        if not tables:
            return

        def work(con):
            for i, (table, df) in enumerate(tables.items()):
                name = f"_batch_{i}"
                con.register(name, df)
                con.execute(f"insert into {table} by name select * from {name}")
                con.unregister(name)

        self._transaction(work, what="writing", small=True)

    def begin_sweep(self, sweep: dict, cells: pd.DataFrame, metrics: dict[str, str],
                    labels: dict[str, str] | None = None,
                    findings: pd.DataFrame | None = None) -> None:
        """Record a new sweep (status 'running'), its cells, the metric directions, its
        labels (checked by `labels.check_labels` first) and the findings of its leakage
        checks, in one transaction."""
        import pandas as pd

        row = dict(sweep)
        row["versions"] = json.dumps(row.get("versions", {}), sort_keys=True)
        if isinstance(row.get("plan"), dict):
            row["plan"] = json.dumps(row["plan"], sort_keys=True)
        metric_df = pd.DataFrame({"metric": list(metrics), "better": list(metrics.values())})
        label_df = pd.DataFrame({"sweep_id": row["sweep_id"], "key": list(labels or {}),
                                 "value": list((labels or {}).values())},
                                columns=["sweep_id", "key", "value"])

        def work(con):
            con.register("_sweep", pd.DataFrame([row]))
            con.execute("insert into sweeps by name select * from _sweep")
            con.register("_metrics", metric_df)
            con.execute("insert or ignore into metrics select metric, better from _metrics")
            con.register("_cells", cells)
            con.execute("insert into cells by name select * from _cells")
            if len(label_df):
                con.register("_labels", label_df)
                con.execute("insert into sweep_labels by name select * from _labels")
            if findings is not None and len(findings):
                con.register("_findings", findings.assign(sweep_id=row["sweep_id"]))
                con.execute("insert into findings by name select * from _findings")

        self._transaction(work, what="recording the sweep", small=True)

    def finish_sweep(self, sweep_id: str, status: str, at: datetime | None = None) -> None:
        """Mark a sweep finished, failed or interrupted, with the time (`at`, by the clock
        that took its start, else the store's)."""
        if at is None:
            self._transaction(lambda con: con.execute(
                "update sweeps set status = ?, finished_at = current_timestamp::timestamp "
                "where sweep_id = ?", [status, sweep_id]), what="finishing the sweep",
                small=True)
            return
        self._transaction(lambda con: con.execute(
            "update sweeps set status = ?, finished_at = ? where sweep_id = ?",
            [status, at, sweep_id]), what="finishing the sweep", small=True)

    def mark_interrupted(self, host: str, alive: Callable[[int], bool]) -> list[str]:
        """Mark this host's 'running' sweeps whose process is gone as 'interrupted'.

        A sweep killed without a clean exit cannot say so itself; the next writer does."""
        def work(con):
            rows = con.execute("select sweep_id, pid from sweeps where status = 'running' "
                               "and host = ?", [host]).fetchall()
            dead = [sid for sid, pid in rows if pid is None or not alive(int(pid))]
            for sid in dead:
                con.execute("update sweeps set status = 'interrupted' where sweep_id = ?", [sid])
            return dead

        return self._transaction(work, what="marking interrupted sweeps", small=True)

    def finished_rows(self, cell_ids: list[str], metrics: list[str]
                      ) -> tuple[pd.DataFrame, pd.DataFrame]:
        """Where earlier sweeps hold complete results for these cells.

        Returns (folds, tests): one row per (cell_id, repeat, fold) and per cell_id with the
        sweep_id of one earlier sweep that stored every asked metric for it."""
        import pandas as pd

        if not cell_ids or not self._has_schema():
            empty = pd.DataFrame(columns=["cell_id", "repeat", "fold", "sweep_id"])
            return empty, pd.DataFrame(columns=["cell_id", "sweep_id"])
        ids = pd.DataFrame({"cell_id": list(dict.fromkeys(cell_ids))})
        with self._connect(read_only=True) as con:
            con.register("_ids", ids)
            folds = con.execute("""
                select cell_id, "repeat", fold, min(sweep_id) as sweep_id from (
                    select f.cell_id, f."repeat", f.fold, f.sweep_id
                    from fold_scores f join _ids using (cell_id)
                    where f.metric in (select unnest($1::varchar[]))
                    group by all having count(distinct f.metric) = len($1::varchar[]))
                group by all""", [metrics]).df()
            tests = con.execute("""
                select cell_id, min(sweep_id) as sweep_id from (
                    select t.cell_id, t.sweep_id from test_scores t join _ids using (cell_id)
                    where t.metric in (select unnest($1::varchar[]))
                    group by all having count(distinct t.metric) = len($1::varchar[]))
                group by all""", [metrics]).df()
        return folds, tests

    def copy_rows(self, sweep_id: str, sources: pd.DataFrame, tables: dict[str, tuple],
                  *, metrics: list[str] | None = None,
                  also: dict[str, pd.DataFrame] | None = None) -> dict[str, int]:
        """Copy earlier sweeps' rows into `sweep_id`, all in one transaction: for each of
        foldwise's `tables` (name -> key columns besides sweep_id), the rows whose sweep_id
        and keys match a row of `sources`, limited to `metrics` where a table has them; a
        copied row's `reused_from` (where the table has one) names the sweep that first
        computed it. `also` rows are inserted in the same transaction. Returns rows copied
        per table. The one way reuse copies anything, scores and explained cells alike."""
        if sources.empty:
            return {t: 0 for t in tables}

        def work(con):
            con.register("_sources", sources)
            counts = {}
            for table, keys in tables.items():
                columns = set(con.execute(f"select * from {table} limit 0").df().columns)
                origin = ("exclude (sweep_id, reused_from), $1 as sweep_id, coalesce("
                          "t.reused_from, t.sweep_id) as reused_from"
                          if "reused_from" in columns else "exclude (sweep_id), $1 as sweep_id")
                on = " and ".join(f't."{k}" = s."{k}"' for k in ("sweep_id", *keys))
                limited = metrics is not None and "metric" in columns
                where = "where t.metric in (select unnest($2::varchar[]))" if limited else ""
                counts[table] = int(con.execute(
                    f"insert into {table} by name select t.* {origin} from {table} t "
                    f"join _sources s on {on} {where}",
                    [sweep_id, metrics] if limited else [sweep_id]).fetchone()[0])
            for table, df in (also or {}).items():
                if len(df):
                    con.register("_also", df)
                    con.execute(f"insert into {table} by name select * from _also")
                    con.unregister("_also")
            return counts

        return self._transaction(work, what="copying earlier results")

    def set_reused(self, sweep_id: str, reused: pd.DataFrame) -> None:
        """Record which cells of a sweep were wholly reused, and from where."""
        def work(con):
            con.register("_reused", reused)
            con.execute("""update cells set reused_from = r.reused_from from _reused r
                           where cells.sweep_id = ? and cells.cell_id = r.cell_id""", [sweep_id])
            con.execute("update sweeps set n_reused = ? where sweep_id = ?",
                        [len(reused), sweep_id])

        self._transaction(work, what="recording reused cells")

    # -- reading ---------------------------------------------------------------------------
    def holds_tables(self) -> bool:
        """True if the store exists and holds foldwise's tables (nothing is created)."""
        return self._has_schema()

    def _has_schema(self) -> bool:
        if not self.location.exists():
            return False
        with self._connect(read_only=True) as con:
            return self._schema_version(con) is not None

    def _require(self) -> None:
        if not self.location.exists():
            raise StoreError(f"no store at {self.path}. Run a sweep first (`foldwise run "
                             "SPEC`), or point --store (or $FOLDWISE_STORE) at an existing "
                             "store: a spec's `store:` is read by `run` and `check` only.")

    def query(self, sql: str, params: list | None = None) -> pd.DataFrame:
        """Run a read-only query of foldwise's own and return a DataFrame."""
        self._require()
        self._check_version()
        with self._connect(read_only=True) as con:
            return con.execute(sql, params or []).df()

    def rows(self, sql: str, params: list | None = None) -> tuple[list[str], list[tuple]]:
        """Run a read-only query of foldwise's own and return its column names and rows as
        Python values, without pandas (for the listings that must start fast). DuckDB loads
        pandas to bind any Python parameter, so a listing without `params` never loads it."""
        self._require()
        self._check_version()
        with self._connect(read_only=True) as con:
            cursor = con.execute(sql, params or [])
            return [d[0] for d in cursor.description], cursor.fetchall()

    def _check_version(self) -> None:
        """Refuse a database that is not a foldwise store, or one from a newer foldwise;
        upgrade one from an older foldwise first. Once per Store, not per query."""
        if self._schema_checked:
            return
        with self._connect(read_only=True) as con:
            found = self._schema_version(con)
            if found is not None and found <= SCHEMA_VERSION and not self.location.shared:
                self._refuse_misshapen(con, found)
        if found is None and self.location.shared:  # tables made since this process looked
            self.location.forget_catalog()
            with self._connect(read_only=True) as con:
                found = self._schema_version(con)
                if found is None:
                    raise self.no_schema_error(con)
        if found is None:
            raise StoreError(f"{self.path} is not a foldwise store (no foldwise_meta table). "
                             "Run a sweep into it first (`foldwise run SPEC --store ...`), or "
                             "point --store at a foldwise store.")
        if found > SCHEMA_VERSION:
            raise self._newer_error(found)
        if found < SCHEMA_VERSION:
            try:
                self.ensure_schema()
            except StoreError as exc:
                raise StoreError(f"store {self.path} was written by an older foldwise (schema "
                                 f"version {found}) and could not be upgraded: {exc}") from None
        self._schema_checked = True

    def _refuse_misshapen(self, con, version: int) -> None:
        """Refuse a store file whose catalog is not one foldwise made (`shape.py`), before
        any of its rows is read or an upgrade writes."""
        from .shape import shape_problem

        catalog = con.execute("select current_database()").fetchone()[0]
        problem = shape_problem(con, catalog, version)
        if problem:
            raise StoreError(f"store {self.path} cannot be read: {problem}. foldwise reads only "
                             "the tables its sweeps write, so nothing was read and nothing was "
                             "written. The store may have been altered: ask whoever passed it "
                             "on for a sound copy, or point --store at another store.")

    def no_schema_error(self, con) -> StoreError:
        """Why a database without foldwise_meta cannot be read, in one paragraph."""
        if self.location.shared and not self._tables_here(con):
            return StoreError(f"team store {self.path} holds no foldwise tables yet: the store "
                              "is being created by a first sweep (try again in a moment), or "
                              "no sweep has run into it (`foldwise run SPEC --store ...`).")
        return StoreError(f"{self.path} is not a foldwise store (no foldwise_meta table). Run "
                          "a sweep into it first (`foldwise run SPEC --store ...`), or point "
                          "--store at a foldwise store.")

    def user_query(self, sql: str, *, allow_files: bool = False,
                   answer_bytes: int | None = None,
                   work_bytes: int | None = None) -> pd.DataFrame:
        """Answer one query of the user's, read-only by construction (runner/sandbox.py):
        anything that would change the store, or with `allow_files` any file, is refused or
        cannot happen; so is an answer past `answer_bytes` (default `sandbox.ANSWER_BYTES`)
        and a query needing more working memory than `work_bytes` (`sandbox.WORK_BYTES`)."""
        from .sandbox import ANSWER_BYTES, WORK_BYTES, run_user_query

        self._require()
        return run_user_query(self, sql, allow_files=allow_files,
                              answer_bytes=ANSWER_BYTES if answer_bytes is None else answer_bytes,
                              work_bytes=WORK_BYTES if work_bytes is None else work_bytes)

    def latest_sweep_id(self) -> str:
        """The most recently started sweep."""
        df = self.query("select sweep_id from sweeps order by started_at desc, sweep_id desc "
                        "limit 1")
        if df.empty:
            raise StoreError(f"store {self.path} holds no sweeps yet. Run `foldwise run SPEC`.")
        return str(df.iloc[0, 0])

    def resolve_sweep(self, sweep_id: str | None, *, option: str = "--sweep") -> str:
        """The given sweep id (a unique prefix is enough), or the latest one; a refusal
        names the `option` it came from, the store's newest sweeps and the closest id."""
        if sweep_id is None:
            return self.latest_sweep_id()
        found = [] if not sweep_id else [str(x) for x in self.query(
            "select sweep_id from sweeps where starts_with(sweep_id, ?)", [sweep_id])["sweep_id"]]
        if sweep_id in found:  # an exact id wins over longer ids that begin with it
            return sweep_id
        if len(found) == 1:
            return found[0]
        if not found:
            newest = self.query("select sweep_id, count(*) over () as n from sweeps order by "
                                f"started_at desc, sweep_id desc limit {_SWEEPS_NAMED}")
            raise StoreError(not_found(option, sweep_id, f"no sweep id (nor the start of one) "
                                       f"in store {self.path}", newest["sweep_id"],
                                       total=int(newest["n"].iloc[0]) if len(newest) else 0,
                                       known_as="its sweeps, newest first",
                                       then="`foldwise sweeps` lists them."))
        raise StoreError(f"sweep id prefix '{sweep_id}' matches {len(found)} sweeps; give more "
                         "characters.")


_SWEEPS_NAMED = 10_000
"""The newest sweeps a refusal of an unknown id looks through for the closest one."""


def reaches_outside(exc: Exception) -> bool:
    """The error of a query that tried a file, the network or an extension it may not."""
    return isinstance(exc, duckdb.Error) and "disabled" in str(exc) \
        and "configuration" in str(exc)


@contextmanager
def refusing_outside(path) -> Iterator[None]:
    """Turn the error of a query that tried a file, the network or an extension its
    connection may not reach (a view or macro of store `path`) into one paragraph."""
    try:
        yield
    except duckdb.Error as exc:
        if not reaches_outside(exc):
            raise
        first = str(exc).strip().splitlines()[0]
        if Path(str(path)).is_dir():  # an export folder: one of its files is a link
            raise StoreError(f"export {path} holds a table file that is a link to a file "
                             f"outside the folder ({first}); foldwise reads only the export's "
                             "own files, so nothing was read from there and nothing was "
                             "written. Export the store again, or ask whoever passed it on "
                             "for a sound copy.") from None
        raise StoreError(f"store {path} holds a view or macro that reaches outside the "
                         f"store ({first}); foldwise reads only a store's own tables, so "
                         "nothing was read from there and nothing was written. The store may "
                         "have been altered: ask whoever passed it on for a sound copy, or "
                         "list its views with foldwise sql \"select view_name, sql from "
                         "duckdb_views() where not internal\".") from None


def _renew_summary_view(con) -> None:
    """A file store's summary view that is not the one this foldwise makes is made again:
    an older one (before its SE and n counted only defined scores, or before it carried
    the cells' complexity tier), or one redefined by another hand."""
    from .shape import summary_view_sql

    stored = con.execute("select sql from duckdb_views() where view_name = 'cell_summary' "
                         "and not temporary").fetchone()
    if stored is None or stored[0] != summary_view_sql():
        con.execute(VIEW_SQL)


def _summary_view(con) -> None:
    """The summary view, made for this connection only (a server keeps no DuckDB views)."""
    try:
        con.execute(VIEW_SQL.replace("create or replace view", "create or replace temp view"))
    except (duckdb.CatalogException, duckdb.BinderException):
        pass  # no tables yet, or tables an upgrade has yet to give their newer columns

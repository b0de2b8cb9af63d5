"""`foldwise sql`: one query of the user's, read-only by construction rather than by filter.

- A store file: the query runs on a connection opened read-only, with file access and
  extension installing and loading off, and the configuration then locked, so no
  statement can write the store, reach another file, load code or undo those settings.
- A team store: the query never meets the PostgreSQL extension, so postgres_execute,
  postgres_query and postgres_scan do not exist for it. A foldwise-owned DuckDB instance
  attaches the server read-only, in a read-only server session, copies the tables the
  query names into a fresh in-memory instance and closes; the fresh one, locked as above,
  answers.
- `--allow-files`: the query runs in a child process (`python -m runner.store.sandbox`) that
  Linux Landlock confines to reading (runner/landlock.py) before it opens DuckDB, on the
  store file or on a snapshot of the team store in the child's private folder; the result
  comes back as Arrow IPC on its stdout.

Every instance a query meets may take at most `--work-mb` of working memory (sorts, hash
tables, a team store's copy) and spills nothing to disk, so a colleague's query or store
cannot make the reader's process grow without bound, nor write a temporary file.

`check_statement` first refuses anything but one SELECT or a plain EXPLAIN, saying why;
safety does not depend on it."""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
from contextlib import closing, contextmanager
from pathlib import Path

import duckdb

from . import landlock
from ..errors import QueryError

__all__ = ["run_user_query", "check_statement", "tables_named", "locked", "confined_connection",
           "child_environment", "working", "LOCKED_SETTINGS", "ANSWER_BYTES", "WORK_BYTES"]

LOCKED_SETTINGS = {
    "autoinstall_known_extensions": False, "autoload_known_extensions": False,
    "allow_community_extensions": False, "allow_unsigned_extensions": False,
    "allow_persistent_secrets": False, "python_enable_replacements": False,
    "enable_external_access": False}
"""Settings of every instance a user's query meets; `locked` then freezes them."""

ANSWER_BYTES = 256 * 2**20
"""The most a query's answer may hold (as Arrow data) before it is refused: it is held in
memory to be printed."""
WORK_BYTES = 1024 * 2**20
"""The most working memory DuckDB may take for a query (a sort, a hash table, a team store's
copy) before the query is refused: a blocking query is computed whole before its first
row, so the answer's bound alone does not hold it."""
_BATCH_ROWS = 2048  # DuckDB's vector: the answer is checked after every one
_BUSY = 75  # the child's exit code when a writer holds the store file
_ANALYZE = {"analyze", "analyse"}
_NAMED_IN_STRINGS = {"query", "query_table"}  # table functions that name tables in a string
_CHILD_ENV = ("PATH", "HOME", "LANG", "LANGUAGE", "LC_ALL", "LC_CTYPE", "LC_NUMERIC", "TZ",
              "PYTHONPATH", "VIRTUAL_ENV")
_NO_LANDLOCK = (
    "--allow-files needs Linux Landlock with ABI {need} or later (Linux 6.7 and newer, with "
    "Landlock enabled at boot), which confines the query's process to reading files; this "
    "system offers {abi}, so the query was not run. Run it without --allow-files (it can "
    "read every table of the store), or copy the file's rows into a DuckDB database of your "
    "own and query them there.")
_NARROW = ("Narrow it with WHERE, LIMIT or an aggregate, or write whole tables to files with "
           "`foldwise export`.")
_TOO_LARGE = ("the query's answer holds more than {limit:g} MiB (already {rows:,} rows), more "
              "than `foldwise sql` holds in memory to print. " + _NARROW)
_TOO_LONG_TEXT = "maximum total string size"  # Arrow's, for one chunk (2,048 rows)
_TOO_LONG = (f"one chunk of the query's answer ({_BATCH_ROWS:,} rows) holds more than 2 GiB of "
             "text, more than `foldwise sql` holds in memory to print. " + _NARROW)
_MESSAGE_BYTES = 64 * 1024  # the most of the child's stderr read back
_NO_SPILL = {"temp_directory": "", "max_temp_directory_size": "0B"}
_OUT_OF_MEMORY = "Out of Memory Error"  # DuckDB's, past its memory_limit
_NO_ROOM = ("the query needs more than {limit:.4g} MiB of working memory, the most `foldwise "
            "sql` lets DuckDB take (--work-mb); nothing was written. Raise --work-mb, or "
            "narrow the query: fewer rows or columns (WHERE, a narrower SELECT), LIMIT before "
            "ORDER BY (in a subquery), fewer distinct groups.")
_NO_ROOM_TO_COPY = ("copying the tables the query reads from team store {store} takes more "
                    "than {limit:.4g} MiB of memory (--work-mb): on a team store the query "
                    "answers from a private copy of the tables it names; nothing was written. "
                    "Raise --work-mb, or name fewer tables in the query.")


def run_user_query(store, sql: str, *, allow_files: bool = False,
                   answer_bytes: int = ANSWER_BYTES, work_bytes: int = WORK_BYTES):
    """Answer one query against `store` (a runner.store.Store) as a DataFrame, or raise a
    QueryError (or StoreError) saying why not; an answer of more than `answer_bytes` (as
    Arrow data) is refused once that much has been read, and a query needing more than
    `work_bytes` of working memory when DuckDB runs out of it."""
    inner = check_statement(sql)
    if allow_files:
        return _in_child(store, sql, inner, answer_bytes, work_bytes)
    if store.location.shared:
        with _snapshot(store, inner, work_bytes=work_bytes) as con:
            return _answer(con, sql, answer_bytes, work_bytes)
    with closing(store.patiently(lambda: _opened(store, work_bytes), writing=False)) as con:
        return _answer(con, sql, answer_bytes, work_bytes)


def working(work_bytes: int) -> dict:
    """DuckDB settings that hold a query's working memory to `work_bytes` and spill nothing
    to disk (no temporary folder, none of its size), so a reader writes no file."""
    return {"memory_limit": f"{max(1, int(work_bytes))}B", **_NO_SPILL}


def _opened(store, work_bytes: int):
    """The store file opened read-only, file access and extensions off; a limit too small
    for DuckDB to open it at all is refused as a query past it is."""
    try:
        return store.location.connect(read_only=True,
                                      config={**LOCKED_SETTINGS, **working(work_bytes)})
    except duckdb.OutOfMemoryException:
        raise _no_room(work_bytes) from None


def _no_room(work_bytes: int) -> QueryError:
    return QueryError(_NO_ROOM.format(limit=work_bytes / 2**20))


# -- the friendly first check --------------------------------------------------------------
_parsing = []  # one locked, empty in-memory instance per process, for parsing only


@contextmanager
def _parser():
    if not _parsing:
        _parsing.append(locked(duckdb.connect(config={**LOCKED_SETTINGS, **_NO_SPILL})))
    con = _parsing[0].cursor()
    try:
        yield con
    finally:
        con.close()


def _statements(con, text: str) -> list:
    try:
        return con.extract_statements(text)
    except duckdb.Error as exc:
        raise QueryError(f"the query does not parse: {_first_line(exc)}") from None


def check_statement(sql: str) -> str:
    """Refuse anything but one SELECT (WITH, DESCRIBE, SUMMARIZE, ...) or a plain EXPLAIN of
    one, in one paragraph; return the SELECT (for an EXPLAIN, the statement it explains)."""
    with _parser() as con:
        statements = _statements(con, sql)
        if len(statements) != 1:
            raise QueryError(f"give exactly one query, got {len(statements)} statements.")
        kind, inner = statements[0].type.name, sql
        if kind == "EXPLAIN":
            inner = _explained(sql)
            kinds = [s.type.name for s in _statements(con, inner)]
            kind = kinds[0] if len(kinds) == 1 else f"{len(kinds)}-statement"
    if kind != "SELECT":
        article = "an" if kind[0] in "AEIOU8" or kind.startswith(("11-", "18-")) else "a"
        raise QueryError(f"only read queries (SELECT, WITH, DESCRIBE, SUMMARIZE, EXPLAIN) are "
                         f"allowed; refused {article} {kind} statement. The store is changed "
                         "only by foldwise's own commands.")
    return inner


def _explained(sql: str) -> str:
    """The statement an EXPLAIN explains; refuses EXPLAIN ANALYZE, which runs it."""
    starts = [pos for pos, _ in duckdb.tokenize(sql)]
    words = [re.match(r"\w+|\S", sql[pos:]).group(0).lower() for pos in starts]
    i = 1
    if len(words) > 1 and words[1] == "(":
        i = words.index(")", 1) + 1 if ")" in words[1:] else len(words)
    if words[:1] != ["explain"] or _ANALYZE & set(words[1:i + 1]):
        raise QueryError("EXPLAIN ANALYZE runs the statement it explains, so it is refused; "
                         "plain EXPLAIN shows the plan without running anything.")
    if i >= len(starts):
        raise QueryError("the EXPLAIN names no statement to explain.")
    return sql[starts[i]:]


def tables_named(sql: str) -> set[str]:
    """The store tables a SELECT reads (the view cell_summary reads fold_scores and cells);
    every table where that cannot be told from the query itself."""
    known = _all_tables()
    names = _names_in_tree(sql)
    if names is None:
        with _parser() as con:
            try:
                names = set(con.get_table_names(sql))
            except duckdb.Error:  # binding needs what is not there (USING, files): take all
                return known
    names = {n.lower() for n in names}
    if "cell_summary" in names:
        names |= {"fold_scores", "cells"}
    return names & known


def _names_in_tree(sql: str) -> set[str] | None:
    """Base-table names in the query's syntax tree, or None when the tree cannot say."""
    with _parser() as con:
        try:
            tree = json.loads(con.execute("select json_serialize_sql(?)", [sql]).fetchone()[0])
        except duckdb.Error:
            return None
    if tree.get("error"):
        return None
    names: set[str] = set()
    stack = [tree]
    while stack:
        node = stack.pop()
        if isinstance(node, dict):
            if node.get("type") == "BASE_TABLE":
                names.add(str(node.get("table_name", "")))
            if str(node.get("function_name", "")).lower() in _NAMED_IN_STRINGS:
                return None
            stack.extend(node.values())
        elif isinstance(node, list):
            stack.extend(node)
    return names


# -- running it ----------------------------------------------------------------------------
def locked(con):
    """Freeze a connection's settings: no statement can change them afterwards. Its result
    buffer is cut to about one chunk first: DuckDB sizes that buffer without the chunk's
    strings, so by default a query of long strings ran gigabytes ahead of its reader. Its
    progress bar goes off too: DuckDB prints it to stdout after 2 s, and in the
    --allow-files child that is where the answer's Arrow stream goes."""
    con.execute("set streaming_buffer_size = '1KB'")
    con.execute("set enable_progress_bar = false")
    con.execute("set lock_configuration = true")
    return con


def _answer(con, sql: str, limit: int, work_bytes: int):
    locked(con)
    try:
        return _frame(_read(con.execute(sql), limit, work_bytes))
    except duckdb.Error as exc:
        raise _failure(exc, files=False, work_bytes=work_bytes) from None


def _read(result, limit: int, work_bytes: int):
    """A query's answer as an Arrow table, read a batch at a time and refused once it holds
    more than `limit` bytes. The reader is closed even then: an open one keeps its query
    alive, and the next connection to the same file from this process waits forever."""
    import pyarrow as pa

    with result.to_arrow_reader(_BATCH_ROWS) as reader:
        return pa.Table.from_batches(list(_bounded(_chunks(reader, work_bytes=work_bytes),
                                                   limit)), schema=reader.schema)


def _chunks(reader, *, files: bool = False, work_bytes: int = WORK_BYTES):
    """A DuckDB reader's batches. A query that fails part-way reaches the reader as an
    OSError: it is refused like one that fails at once, and one chunk of text past Arrow's
    2 GiB like an answer too large."""
    batches = iter(reader)
    while True:
        try:
            yield next(batches)
        except StopIteration:
            return
        except OSError as exc:
            raise QueryError(_TOO_LONG) if _TOO_LONG_TEXT in str(exc) \
                else _failure(exc, files=files, work_bytes=work_bytes) from None


def _bounded(batches, limit: int):
    """The batches, refused in one paragraph as soon as they hold more than `limit` bytes
    together."""
    held = rows = 0
    for batch in batches:
        held += batch.nbytes
        rows += batch.num_rows
        if held > limit:
            raise QueryError(_TOO_LARGE.format(limit=limit / 2**20, rows=rows))
        yield batch


def _first_line(exc: Exception) -> str:
    text = str(exc).strip()
    return text.splitlines()[0].split(" Please try installing")[0] if text else type(exc).__name__


def _failure(exc: Exception, *, files: bool, work_bytes: int) -> QueryError:
    first = _first_line(exc)
    if isinstance(exc, duckdb.OutOfMemoryException) or first.startswith(_OUT_OF_MEMORY):
        return _no_room(work_bytes)
    if not files and "disabled by configuration" in first and "access" in first:
        return QueryError(f"the query reaches outside the store ({first}). `foldwise sql` reads "
                          "files only when asked: add --allow-files to let the query read "
                          "files (it can never write, create or delete one).")
    if files and "Permission denied" in first:
        return QueryError(f"the query failed: {first}. With --allow-files a query may read "
                          "files but never write, create or delete one, nor reach the network.")
    return QueryError(f"the query failed: {first}")


@contextmanager
def _snapshot(store, sql: str, path: Path | None = None, *,
              work_bytes: int = WORK_BYTES):
    """A fresh DuckDB instance (in memory, or a file at `path`) holding a copy of the team
    store, made through a read-only attachment that is closed before the instance is
    handed out: the rows of the tables `sql` reads, the columns of every other table (so
    DESCRIBE and the catalog answer as on a file), and the cell_summary view. The copy
    counts against `work_bytes`, as the query does after it."""
    from .schema import VIEW_SQL

    wanted = tables_named(sql)
    target = duckdb.connect(str(path) if path else ":memory:",
                            config={**LOCKED_SETTINGS, **working(work_bytes)})
    try:
        source = store.location.read_only_instance()
        try:
            present = set(store._tables_here(source))
            if "foldwise_meta" not in present:
                raise store.no_schema_error(source)
            for table in sorted(present & {*wanted, *_all_tables()}):
                rows = "" if table in wanted else " limit 0"
                target.register("_rows", source.execute(f'select * from "{table}"{rows}')
                                .to_arrow_reader())
                target.execute(f'create table "{table}" as select * from _rows')
                target.unregister("_rows")
        except duckdb.OutOfMemoryException:
            raise QueryError(_NO_ROOM_TO_COPY.format(store=store.path,
                                                     limit=work_bytes / 2**20)) from None
        except duckdb.Error as exc:
            raise QueryError(f"reading team store {store.path} failed: "
                             f"{_first_line(exc)}") from None
        finally:
            source.close()
        if {"fold_scores", "cells"} <= present:
            target.execute(VIEW_SQL)
        yield target
    finally:
        target.close()


def _all_tables() -> set[str]:
    from .schema import TABLES

    return {*TABLES, "foldwise_meta"}


def _in_child(store, sql: str, inner: str, limit: int, work_bytes: int):
    """Run the query in a Landlock-confined child process and read back its result."""
    abi = landlock.abi_version()
    if abi < landlock.MIN_ABI:
        raise QueryError(_NO_LANDLOCK.format(need=landlock.MIN_ABI,
                                             abi=f"ABI {abi}" if abi else "no Landlock"))
    folder = Path(tempfile.mkdtemp(prefix="foldwise-sql-"))
    try:
        if store.location.shared:
            target = folder / "snapshot.duckdb"
            with _snapshot(store, inner, target, work_bytes=work_bytes):
                pass
        else:
            target = Path(store.location.path).resolve()
        request = json.dumps({"store": str(target), "folder": str(folder), "query": sql,
                              "limit": limit, "work": work_bytes})
        code, answer, message = store.patiently(
            lambda: _spawn(request.encode(), folder, limit), writing=False)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    if code == 0 and answer is not None:
        return _frame(answer)
    if code == 2 and message and "Traceback" not in message:
        raise QueryError(message)
    last = message.splitlines()[-1] if message else "no message"
    raise QueryError(f"the query's process ended with exit code {code} ({last}); "
                     "nothing was changed. Please report this with the query you ran.")


def child_environment(folder: Path) -> dict[str, str]:
    """The child's environment: a few plain variables, never a password or a key."""
    env = {k: os.environ[k] for k in _CHILD_ENV if k in os.environ}
    env["TMPDIR"] = str(folder)
    return env


def _spawn(request: bytes, folder: Path, limit: int):
    """Run the child, reading its answer as it streams in, bounded as a direct query's is
    (a whole captured copy would be joined into a second one): its exit code, the answer
    (None when it wrote none whole) and what it said on stderr."""
    with tempfile.TemporaryFile() as said, subprocess.Popen(
            [sys.executable, "-m", "runner.store.sandbox"], stdin=subprocess.PIPE,
            stdout=subprocess.PIPE, stderr=said, env=child_environment(folder)) as child:
        try:
            child.stdin.write(request)
            child.stdin.close()
        except BrokenPipeError:
            pass
        try:
            answer = _received(child.stdout, limit)
        except QueryError:
            child.kill()
            raise
        code = child.wait()
        said.seek(0)
        message = said.read(_MESSAGE_BYTES).decode(errors="replace").strip()
    if code == _BUSY:
        raise duckdb.IOException(message)
    return code, answer, message


def _received(pipe, limit: int):
    """The child's Arrow IPC stream as a table, or None when it is missing or cut short (the
    child's exit code and message then say why)."""
    import pyarrow as pa

    try:
        with pa.ipc.open_stream(pipe) as reader:
            return pa.Table.from_batches(list(_bounded(reader, limit)), schema=reader.schema)
    except (pa.ArrowInvalid, OSError):
        return None


def _frame(table):
    """An answer as Arrow data turned into a DataFrame by DuckDB, as `.df()` would, so output
    looks the same with or without --allow-files. It spills nothing either; what it holds
    is the answer, already bounded by `answer_bytes`."""
    names = table.column_names  # may repeat (select 1 as a, 2 as a); Arrow scans need unique
    aliases = ", ".join(f'c{i} as "{name.replace(chr(34), chr(34) * 2)}"'
                        for i, name in enumerate(names))
    con = duckdb.connect(config={**LOCKED_SETTINGS, **_NO_SPILL})
    try:
        con.register("_result", table.rename_columns([f"c{i}" for i in range(len(names))]))
        return con.execute(f"select {aliases or '*'} from _result").df()
    finally:
        con.close()


def confined_connection(store: str, folder: str, work_bytes: int = WORK_BYTES):
    """The child's connection: the store opened read-only, files readable (the process is
    confined to reading already), extensions, downloads and secrets only inside `folder`,
    working memory held to `work_bytes` with nothing spilled, and every setting locked."""
    private = Path(folder)
    con = duckdb.connect(store, read_only=True, config={
        **LOCKED_SETTINGS, **working(work_bytes), "enable_external_access": True,
        "extension_directory": str(private / "ext"),
        "secret_directory": str(private / "secrets"),
        "custom_extension_repository": str(private / "none"),
        "autoinstall_extension_repository": str(private / "none")})
    try:
        con.execute("set allowed_directories = ['/']")
        con.execute("set enable_external_access = false")
        return locked(con)
    except BaseException:
        con.close()
        raise


def main() -> int:
    """The child: confine this process, open the store read-only, run the one query and
    write its result to stdout as an Arrow IPC stream; a refusal goes to stderr, exit 2."""
    request = json.loads(sys.stdin.buffer.read())
    try:
        landlock.restrict_to_reading(request["folder"])
    except landlock.LandlockUnavailable as exc:
        return _refuse(f"--allow-files could not confine the query's process ({exc}); the "
                       "query was not run.")
    work_bytes = int(request["work"])
    try:
        check_statement(request["query"])
        con = confined_connection(request["store"], request["folder"], work_bytes)
    except QueryError as exc:
        return _refuse(str(exc))
    except duckdb.OutOfMemoryException:
        return _refuse(str(_no_room(work_bytes)))
    except duckdb.Error as exc:
        if isinstance(exc, duckdb.IOException) and "lock" in str(exc):
            print(str(exc), file=sys.stderr)
            return _BUSY
        return _refuse(f"cannot open the store read-only: {_first_line(exc)}")
    try:
        import pyarrow as pa

        with (con.execute(request["query"]).to_arrow_reader(_BATCH_ROWS) as reader,
              pa.ipc.new_stream(sys.stdout.buffer, reader.schema) as stream):
            for batch in _bounded(_chunks(reader, files=True, work_bytes=work_bytes),
                                  int(request["limit"])):
                stream.write_batch(batch)
    except QueryError as exc:
        return _refuse(str(exc))
    except duckdb.Error as exc:
        return _refuse(str(_failure(exc, files=True, work_bytes=work_bytes)))
    finally:
        con.close()
    return 0


def _refuse(message: str) -> int:
    print(message, file=sys.stderr)
    return 2


if __name__ == "__main__":
    sys.exit(main())

"""Runs many attempts in one process confined exactly as the child of `foldwise sql
--allow-files` confines itself (runner.store.landlock, then runner.store.sandbox.confined_connection),
so the corpus need not start a process per attempt.

    python -m tests.attacks.confined < request.json > outcomes.json

The request gives the store, the private folder, the attempts and the ways to run each:
"checked" (the statement check first, as the child does), "unchecked" (straight onto the
confined connection) and "open" (a read-only DuckDB connection with file access fully on
and nothing locked: only Landlock stands in the way). Each outcome is null when the
attempt was answered, else the first line of its error."""

from __future__ import annotations

import json
import sys

import duckdb

from runner.store import landlock, sandbox
from runner.errors import QueryError


def _connection(store: str, folder: str, way: str):
    if way == "open":  # only DuckDB's own folders moved where writing is allowed
        return duckdb.connect(store, read_only=True, config={
            "extension_directory": f"{folder}/ext", "secret_directory": f"{folder}/secrets",
            "temp_directory": f"{folder}/spill"})
    return sandbox.confined_connection(store, folder)


def run_each(connect, sqls: list[str], *, check: bool = False) -> list[str | None]:
    """Run each statement on a connection from `connect()`, opening a fresh one after any
    statement that was answered (it may have changed the connection's state); returns None
    for an answered statement, else the first line of its error."""
    outcomes, con = [], None
    try:
        for sql in sqls:
            try:
                if check:
                    sandbox.check_statement(sql)
                con = con or connect()
                con.execute(sql).fetchall()
            except (QueryError, duckdb.Error) as exc:
                outcomes.append((str(exc).strip().splitlines() or [type(exc).__name__])[0])
                continue
            outcomes.append(None)
            con.close()
            con = None
    finally:
        if con is not None:
            con.close()
    return outcomes


def main() -> None:
    request = json.load(sys.stdin)
    landlock.restrict_to_reading(request["folder"])
    store, folder, sqls = request["store"], request["folder"], request["attempts"]
    by_way = {way: run_each(lambda: _connection(store, folder, way), sqls,
                            check=way == "checked") for way in request["ways"]}
    json.dump([{way: by_way[way][i] for way in by_way} for i in range(len(sqls))], sys.stdout)


if __name__ == "__main__":
    main()

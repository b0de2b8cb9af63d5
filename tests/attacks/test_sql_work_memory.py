"""`foldwise sql --work-mb`: every connection a user's query meets (a store file, a team
store's private copy, the --allow-files child's) holds DuckDB's working memory to the bound
and spills nothing to disk; the query cannot raise the bound, and one that needs more is
refused in one paragraph with exit code 2, writing nothing anywhere."""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

import duckdb
import pytest
from click.testing import CliRunner

from runner.cli import main
from runner.errors import QueryError
from runner.store import Store, sandbox
from runner.store.transfer import merge_store

from ..store_builder import write_sweep

REPO = Path(__file__).resolve().parents[2]
SETTINGS = ("select current_setting('memory_limit') as memory, current_setting('temp_directory')"
            " as spill, current_setting('max_temp_directory_size') as spill_size")
# 60,000 distinct strings of 1 KiB (~60 MiB): past a 16 MiB bound, well inside the default
STRINGS = "select md5(range::varchar) || repeat('x', 1024) as s from range(60000)"
BLOCKING = {"order by": f"select count(*) as n from ({STRINGS} order by s)",
            "group by": f"select count(*) as n from (select s from ({STRINGS}) group by s)"}
# 400,000 short strings sorted under 32 MiB: DuckDB answers it only by spilling to disk
SPILLING = ("select count(*) as n from (select md5(range::varchar) || repeat('x', 16) as s "
            "from range(400000) order by s)")
RAISING = ["set memory_limit = '10GB'", "reset memory_limit", "pragma memory_limit = '10GB'",
           "set temp_directory = '/tmp'", "set max_temp_directory_size = '10GB'"]
FLAGS = pytest.mark.parametrize("flag", [[], ["--allow-files"]], ids=["plain", "allow-files"])
WHERE = pytest.mark.parametrize("where", ["file", "server"])


@pytest.fixture(scope="module")
def file_store(tmp_path_factory):
    path = tmp_path_factory.mktemp("work_memory") / "store.duckdb"
    write_sweep(path, {"ridge": [[3.0, 3.5, 2.5, 3.25]], "tree": [[4.0, 3.0, 3.5, 4.5]]},
                k=2, repeats=2)
    return Store(path)


@pytest.fixture(scope="module")
def server_store(pg, file_store):
    url = pg.create_database("work_memory")
    merge_store(Store(url), file_store.path)
    return Store(url)


def _cli(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def _json(out) -> list[dict]:
    assert out.exit_code == 0, out.output
    return json.loads(out.output)


@WHERE
@FLAGS
def test_the_bound_reaches_the_connection_the_query_runs_on(request, where, flag):
    """--work-mb becomes DuckDB's memory_limit (1024 MiB unless given) with no temporary
    folder and none of its size, on every kind of connection."""
    store = request.getfixturevalue(f"{where}_store")
    given = _json(_cli("sql", SETTINGS, "--store", store.path, *flag, "--work-mb", 48,
                       "--format", "json"))
    assert given == [{"memory": "48.0 MiB", "spill": "", "spill_size": "0 bytes"}]
    default = _json(_cli("sql", SETTINGS, "--store", store.path, *flag, "--format", "json"))
    assert default == [{"memory": "1.0 GiB", "spill": "", "spill_size": "0 bytes"}]
    assert sandbox.WORK_BYTES == 1024 * 2**20


def _connections(store: Store, server: Store, folder: Path):
    """Each kind of connection a query gets, made with a 48 MiB bound and locked."""
    work = 48 * 2**20
    yield "file", sandbox.locked(sandbox._opened(store, work))
    with sandbox._snapshot(server, "select * from sweeps", work_bytes=work) as copy:
        yield "server", sandbox.locked(copy.cursor())
    yield "child", sandbox.confined_connection(str(store.path), str(folder), work)


def test_the_query_cannot_raise_or_move_the_bound(file_store, server_store, tmp_path):
    """Past the statement check (which refuses SET anyway), straight onto each connection:
    every SET, RESET or PRAGMA of the bound or of spilling is refused, and it holds."""
    for kind, con in _connections(file_store, server_store, tmp_path):
        try:
            for statement in RAISING:
                with pytest.raises(duckdb.InvalidInputException,
                                   match="Cannot change configuration option"):
                    con.execute(statement)
            assert con.execute(SETTINGS).fetchall() == [("48.0 MiB", "", "0 bytes")], kind
        finally:
            con.close()


@WHERE
@FLAGS
@pytest.mark.parametrize("query", BLOCKING, ids=list(BLOCKING))
def test_a_blocking_query_past_the_bound_is_refused_in_one_paragraph(request, where, flag,
                                                                      query):
    """60,000 distinct strings of 1 KiB sorted or grouped under a 16 MiB bound: refused
    before any row, in words naming the bound and what to do; under the default the same
    query answers."""
    store = request.getfixturevalue(f"{where}_store")
    out = _cli("sql", BLOCKING[query], "--store", store.path, *flag, "--work-mb", 16)
    assert out.exit_code == 2, out.output
    assert out.output == ("Error: the query needs more than 16 MiB of working memory, the "
                          "most `foldwise sql` lets DuckDB take (--work-mb); nothing was "
                          "written. Raise --work-mb, or narrow the query: fewer rows or "
                          "columns (WHERE, a narrower SELECT), LIMIT before ORDER BY (in a "
                          "subquery), fewer distinct groups.\n"), out.output
    answered = _json(_cli("sql", BLOCKING[query], "--store", store.path, *flag,
                          "--format", "json"))
    assert answered == [{"n": 60000}]


def _state(folder: Path) -> dict:
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


@WHERE
@FLAGS
def test_a_query_past_the_bound_spills_nothing(request, tmp_path, where, flag):
    """A sort that fits in 32 MiB only by writing temporary files (DuckDB's default: beside
    the store file, in .tmp of the working folder for a team store's copy, in the child's
    folder) is refused, run in a separate process whose working folder and TMPDIR are an
    empty folder; that folder stays empty and the store's folder as it was."""
    store = request.getfixturevalue(f"{where}_store")
    here = tmp_path / "here"
    here.mkdir()
    beside = Path(store.path).parent if where == "file" else None
    before = _state(beside) if beside else None
    env = {**os.environ, "TMPDIR": str(here), "PYTHONPATH": str(REPO)}
    out = subprocess.run([sys.executable, "-m", "runner", "sql", SPILLING, "--store",
                          str(store.path), *flag, "--work-mb", "32"],
                         capture_output=True, text=True, cwd=here, env=env)
    assert out.returncode == 2, out.stdout + out.stderr
    assert out.stderr.startswith("Error: the query needs more than 32 MiB of working memory")
    assert "Traceback" not in out.stderr and out.stdout == ""
    assert list(here.rglob("*")) == []
    if beside:
        assert _state(beside) == before


def test_a_bound_too_small_to_open_the_store_is_refused_in_one_paragraph(file_store):
    """DuckDB pins blocks of 256 KiB to open a file: a bound below that is refused as a
    query past it is, not as a store that cannot be opened."""
    for flag in ([], ["--allow-files"]):
        out = _cli("sql", "select 1 as one", "--store", file_store.path, *flag,
                   "--work-mb", 0.1)
        assert out.exit_code == 2 and out.output.count("\n") == 1, out.output
        assert out.output.startswith("Error: the query needs more than 0.1 MiB of working "
                                     "memory"), out.output


def test_a_team_store_copy_past_the_bound_is_refused_in_one_paragraph(server_store):
    """On a team store the query answers from a copy in memory, which counts too."""
    with pytest.raises(QueryError) as err:
        server_store.user_query("select * from fold_scores", work_bytes=2**20)
    assert str(err.value).startswith(
        f"copying the tables the query reads from team store {server_store.path} takes more "
        "than 1 MiB of memory (--work-mb)"), err.value
    assert err.value.exit_code == 2


def test_the_work_bound_named_in_help_is_the_one_applied():
    out = _cli("sql", "--help")
    assert f"[default: {sandbox.WORK_BYTES // 2**20}]" in " ".join(out.output.split())

"""Every attempt in sql_attempts.yaml against `foldwise sql`: on a DuckDB store file and a
team store on the throwaway PostgreSQL server, with and without --allow-files. Each must be
refused in one paragraph with exit code 2 and leave every table's row count, the store
file's bytes, the server's large objects and the folders around untouched.

Two kinds of check: the public path (the statement check first, as users meet it), and the
same attempts with the check skipped, to show that nothing could change even if an attempt
got past it (read-only by construction)."""

from __future__ import annotations

import hashlib
import json
import os
import re
import subprocess
import sys
import threading
from dataclasses import dataclass, field
from pathlib import Path

import duckdb
import pytest
import yaml
from click.testing import CliRunner

from runner.store import sandbox
from runner.cli import main
from runner.errors import FoldwiseError
from runner.store.locations import postgres_extension
from runner.store import Store
from runner.store.transfer import merge_store

from ..store_builder import write_sweep
from .confined import run_each

ATTEMPTS_FILE = Path(__file__).with_name("sql_attempts.yaml")
PROBE = [  # the outside probe's attempts, which must stay in the corpus verbatim
    "explain analyze call postgres_execute('{db}', 'commit; delete from fold_scores')",
    "explain analyze call postgres_execute('{db}', 'commit; drop table metrics')",
    "select * from postgres_query('{db}', 'select lo_create(0)')",
    "select * from postgres_query('{db}', 'select pg_read_file(''postgresql.conf'')')",
    "explain analyze copy (select 'x') to '{store}' (format csv)",
    "explain analyze install httpfs"]


@dataclass(frozen=True)
class Attempt:
    sql: str
    reads: bool = False
    may_run: bool = False

    def __str__(self) -> str:
        return self.sql


def _load() -> list[Attempt]:
    attempts = []
    for entry in yaml.safe_load(ATTEMPTS_FILE.read_text()):
        kind = {"reads": entry.get("reads", False), "may_run": entry.get("may_run", False)}
        attempts.append(Attempt(entry["sql"], **kind))
        if entry.get("explain"):
            attempts += [Attempt(f"explain analyze {entry['sql']}"),
                         Attempt(f"explain {entry['sql']}")]
    return list(dict.fromkeys(attempts))  # a derived attempt may repeat a verbatim one


ATTEMPTS = _load()


@dataclass
class Case:
    """A store under attack: its placeholders and a snapshot of everything that must hold."""

    store: Store
    values: dict
    tmp: Path
    canary: Path
    server_state: object = None
    extra: dict = field(default_factory=dict)
    baseline: dict = field(default_factory=dict)

    def __post_init__(self):
        self.baseline = self.state()  # as built; every attempt must leave it so

    def sql(self, attempt: Attempt) -> str:
        return attempt.sql.format(**self.values)

    def state(self) -> dict:
        found = {"canary": _digest(self.canary), "tmp": sorted(os.listdir(self.tmp))}
        if self.server_state is not None:
            found["server"] = self.server_state()
        else:
            found["file"] = _file_state(Path(self.store.path))
        return found


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _file_state(path: Path) -> dict:
    """Bytes and row counts of every table of a store file, and the files beside it."""
    con = duckdb.connect(str(path), read_only=True)
    try:
        names = [t for (t,) in con.execute(
            "select table_name from information_schema.tables order by all").fetchall()]
        counts = dict(con.execute(" union all ".join(
            f"select '{t}', count(*) from \"{t}\"" for t in names)).fetchall())
    finally:
        con.close()
    return {"sha256": _digest(path), "rows": counts, "beside": sorted(os.listdir(path.parent))}


def _values(tmp: Path, *, db: str, url: str, store: Path, passfile: Path) -> dict:
    return {"db": db, "url": url, "store": str(store), "tmp": str(tmp),
            "passfile": str(passfile), "extension": str(postgres_extension())}


@pytest.fixture(scope="module")
def file_case(tmp_path_factory):
    folder = tmp_path_factory.mktemp("attacked")
    path = folder / "store.duckdb"
    write_sweep(path, {"ridge": [[3.0, 3.5, 2.5, 3.25], [2.0, 2.5, 2.25, 2.75]],
                       "tree": [[4.0, 3.0, 3.5, 4.5]]}, k=2, repeats=2,
                failures=["tree-0"])
    tmp = tmp_path_factory.mktemp("must_stay_empty")
    passfile = folder / "pgpass"
    passfile.write_text("127.0.0.1:5432:*:nobody:not-a-secret\n")
    values = _values(tmp, db="store", url="postgresql://nobody@127.0.0.1:1/none",
                     store=path, passfile=passfile)
    return Case(Store(path), values, tmp, canary=path)


@pytest.fixture(scope="module")
def server_case(pg, file_case, tmp_path_factory):
    url = pg.create_database("attacked")
    merge_store(Store(url), file_case.store.path)
    folder = tmp_path_factory.mktemp("server_attacked")
    canary = folder / "canary.duckdb"
    canary.write_bytes(b"nothing may write here\n")
    tmp = tmp_path_factory.mktemp("server_must_stay_empty")

    def server_state():  # read with PostgreSQL's own client, in one round trip
        return pg.psql("""select (select string_agg(format('%s=%s', table_name,
                              (xpath('/row/n/text()', query_to_xml(format(
                                  'select count(*) as n from %I', table_name), false, true,
                                  '')))[1]::text), ',' order by table_name)
                              from information_schema.tables where table_schema = 'public')
                          || ' large_objects=' || (select count(*) from pg_largeobject_metadata)
                       """, "attacked")

    values = _values(tmp, db="team", url=url, store=canary, passfile=pg.passfile)
    return Case(Store(url), values, tmp, canary, server_state, {"pg": pg, "url": url})


def _assert_refused(exc: FoldwiseError, attempt: Attempt) -> None:
    text = str(exc)
    assert exc.exit_code == 2, text
    assert "\n" not in text and "Traceback" not in text and len(text) < 900, text
    if attempt.reads:
        assert "--allow-files" in text, text


def _attack(case: Case, attempt: Attempt, *, allow_files: bool = False) -> None:
    try:
        case.store.user_query(case.sql(attempt), allow_files=allow_files)
    except FoldwiseError as exc:
        _assert_refused(exc, attempt)
    else:
        assert attempt.may_run, f"answered: {attempt}"
    assert case.state() == case.baseline, attempt


def test_the_corpus_holds_the_probe_attempts_and_at_least_sixty():
    assert len(ATTEMPTS) >= 60, len(ATTEMPTS)
    sqls = [a.sql for a in ATTEMPTS]
    for attempt in PROBE:
        assert attempt in sqls, attempt


@pytest.mark.parametrize("attempt", ATTEMPTS, ids=str)
def test_a_store_file_refuses(file_case, attempt):
    _attack(file_case, attempt)


@pytest.mark.parametrize("attempt", ATTEMPTS, ids=str)
def test_a_team_store_refuses(server_case, attempt):
    _attack(server_case, attempt)


def test_a_store_file_changes_nothing_even_past_the_check(file_case):
    """Every attempt straight onto the connection a query gets, no statement check."""
    sqls = [file_case.sql(a) for a in ATTEMPTS]
    outcomes = run_each(lambda: sandbox.locked(duckdb.connect(
        str(file_case.store.path), read_only=True, config=sandbox.LOCKED_SETTINGS)), sqls)
    assert file_case.state() == file_case.baseline
    assert dict(zip(sqls, outcomes))["checkpoint"] is None  # a no-op on a read-only file


def test_a_team_store_changes_nothing_even_past_the_check(server_case):
    """Every attempt straight onto the in-memory copy a query gets, no statement check:
    the copy is the query's own, and the PostgreSQL functions are not there."""
    case = server_case
    sqls = [case.sql(a) for a in ATTEMPTS]
    with sandbox._snapshot(case.store, "select * from query_table('every table')") as copy:
        outcomes = dict(zip(sqls, run_each(lambda: sandbox.locked(copy.cursor()), sqls)))
    assert case.state() == case.baseline
    for attempt in PROBE[:4]:
        message = outcomes[case.sql(Attempt(attempt))]
        assert "postgres_" in message and "not in the catalog" in message, message


def _confined(store: Path, folder: Path, attempts: list[str], ways: list[str]) -> list[dict]:
    request = {"store": str(store), "folder": str(folder), "attempts": attempts, "ways": ways}
    out = subprocess.run([sys.executable, "-m", "tests.attacks.confined"],
                         input=json.dumps(request), capture_output=True, text=True,
                         cwd=Path(__file__).resolve().parents[2])
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout)


@pytest.mark.parametrize("where", ["file", "server"])
def test_allow_files_refuses_and_changes_nothing(request, tmp_path, where):
    """With --allow-files the child checks the statement and runs it in a Landlock-confined
    process on the store (a file) or on a snapshot file of the team store; here all the
    attempts run in one such process, checked and unchecked."""
    case = request.getfixturevalue(f"{where}_case")
    private = tmp_path / "private"
    private.mkdir()
    target = Path(case.store.path)
    if where == "server":
        target = private / "snapshot.duckdb"
        with sandbox._snapshot(case.store, "select * from query_table('all')", target):
            pass
    snapshot_before = _digest(target)
    sqls = [case.sql(a) for a in ATTEMPTS]
    outcomes = _confined(target, private, sqls, ["checked", "unchecked"])
    assert case.state() == case.baseline and _digest(target) == snapshot_before
    for attempt, outcome in zip(ATTEMPTS, outcomes):
        if not (attempt.reads or attempt.may_run):
            assert outcome["checked"] is not None, attempt
    reads = {a.sql: o for a, o in zip(ATTEMPTS, outcomes) if a.reads}
    assert reads["select * from read_csv('/etc/passwd')"]["checked"] is None


def test_landlock_alone_blocks_writes(file_case, tmp_path):
    """A DuckDB connection with file access fully on and nothing locked (only its own
    folders moved into the private one), in the confined process: the kernel still
    refuses every write outside the private folder, and INSTALL gets no extension, while
    reading a real file works."""
    private = tmp_path / "private"
    private.mkdir()
    case = file_case
    attempts = {
        "copy to the store": f"copy (select 'x') to '{case.store.path}' (format csv)",
        "copy to /tmp": f"copy (select 'x') to '{case.tmp}/x.csv' (format csv)",
        "attach a new file": f"attach '{case.tmp}/new.duckdb' as n (read_only false)",
        "install": "install httpfs",
        "read a file": f"select count(*) from read_csv('{case.values['passfile']}', "
                       "header = false, sep = '|')",
        "write the private folder": f"copy (select 1) to '{private}/ok.csv'",
    }
    outcomes = dict(zip(attempts, _confined(case.store.path, private, list(attempts.values()),
                                            ["open"])))
    assert case.state() == case.baseline
    for name in ("copy to the store", "copy to /tmp", "attach a new file"):
        assert "Permission denied" in outcomes[name]["open"], outcomes[name]
    assert "Failed to download" in outcomes["install"]["open"], outcomes["install"]
    assert not list((private / "ext").rglob("*.duckdb_extension"))
    assert outcomes["read a file"]["open"] is None
    assert outcomes["write the private folder"]["open"] is None


# -- through the command line ----------------------------------------------------------------
def _cli(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


@pytest.mark.parametrize("where", ["file", "server"])
@pytest.mark.parametrize("flag", [[], ["--allow-files"]], ids=["plain", "allow-files"])
def test_the_probe_attempts_through_the_command(request, where, flag):
    case = request.getfixturevalue(f"{where}_case")
    for attempt in PROBE:
        out = _cli("sql", case.sql(Attempt(attempt)), "--store", case.store.path, *flag)
        assert out.exit_code == 2, (attempt, out.output)
        assert out.output.startswith("Error: ") and out.output.count("\n") == 1, out.output
    assert case.state() == case.baseline


@pytest.mark.parametrize("where", ["file", "server"])
def test_allow_files_reads_a_file_through_the_command(request, tmp_path, where):
    """A real child process (python -m runner.store.sandbox) reads a CSV and joins it to the
    store; the answer is the same table a query without files gives."""
    case = request.getfixturevalue(f"{where}_case")
    (tmp_path / "labels.csv").write_text("model,label\nridge,linear\ntree,pruned\n")
    query = ("select c.model, l.label, count(*) as n from fold_scores f "
             "join cells c using (sweep_id, cell_id) "
             f"join read_csv('{tmp_path / 'labels.csv'}') l using (model) "
             "group by all order by all")
    out = subprocess.run([sys.executable, "-m", "runner", "sql", query, "--store",
                          str(case.store.path), "--allow-files", "--format", "json"],
                         capture_output=True, text=True,
                         env=case.extra["pg"].env() if where == "server" else None)
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout) == [{"model": "ridge", "label": "linear", "n": 8},
                                      {"model": "tree", "label": "pruned", "n": 4}]
    assert case.state() == case.baseline
    out = subprocess.run([sys.executable, "-m", "runner", "sql", query, "--store",
                          str(case.store.path)], capture_output=True, text=True,
                         env=case.extra["pg"].env() if where == "server" else None)
    assert out.returncode == 2 and "--allow-files" in out.stderr, out.stderr


def _cli_within(seconds: float, *args):
    """`_cli`, failing the test instead of hanging it when the command does not end."""
    done = []

    def run():
        try:
            done.append(_cli(*args))
        except BaseException as exc:  # raised again here, in the test's own thread
            done.append(exc)

    worker = threading.Thread(target=run, daemon=True)
    worker.start()
    worker.join(seconds)
    assert done, f"`foldwise {' '.join(map(str, args))}` still runs after {seconds:g} s"
    if isinstance(done[0], BaseException):
        raise done[0]
    return done[0]


@pytest.mark.parametrize("where", ["file", "server"])
@pytest.mark.parametrize("flag", [[], ["--allow-files"]], ids=["plain", "allow-files"])
def test_an_answer_too_large_to_hold_is_refused_in_one_paragraph(request, where, flag):
    """An answer past --answer-mb (1 MiB here; 10^6 BIGINTs are 7.6 MiB) is refused once
    that much is read, within one chunk of 2,048 rows; the next query from the same process
    still answers (an unclosed reader made the next connection to the file wait forever)."""
    case = request.getfixturevalue(f"{where}_case")
    out = _cli_within(120, "sql", "select range from range(1000000)", "--store",
                      case.store.path, *flag, "--answer-mb", 1)
    assert out.exit_code == 2, out.output
    assert out.output.startswith("Error: ") and out.output.count("\n") == 1, out.output
    assert "the query's answer holds more than 1 MiB (already " in out.output
    assert "Narrow it with WHERE, LIMIT or an aggregate" in out.output
    rows = int(re.search(r"already ([\d,]+) rows", out.output)[1].replace(",", ""))
    assert 2**20 // 9 < rows <= 2**20 // 8 + 2048, rows  # 8 bytes a row and a validity bit
    out = _cli_within(120, "sql", "select count(*) as n from range(1000000)", "--store",
                      case.store.path, *flag, "--format", "csv", "--answer-mb", 1)
    assert out.exit_code == 0 and out.output == "n\n1000000\n", out.output
    out = _cli_within(120, "sql", "select range from range(120000)", "--store",
                      case.store.path, *flag, "--format", "csv", "--answer-mb", 1)
    assert out.exit_code == 0 and out.output.count("\n") == 120001, out.output[-200:]
    assert out.output.endswith("\n119999\n"), out.output[-200:]
    assert case.state() == case.baseline


@pytest.mark.parametrize("where", ["file", "server"])
@pytest.mark.parametrize("flag", [[], ["--allow-files"]], ids=["plain", "allow-files"])
def test_a_query_failing_part_way_is_refused_in_one_paragraph(request, where, flag):
    """An error raised after the first chunks were read reaches foldwise through the Arrow
    reader, not as a DuckDB error; it is refused all the same."""
    case = request.getfixturevalue(f"{where}_case")
    out = _cli_within(120, "sql", "select case when range = 100000 then error('stop here') "
                      "else range end as v from range(200000)", "--store", case.store.path,
                      *flag)
    assert out.exit_code == 2, out.output
    # DuckDB's other threads stop when one fails; on a busy machine their stop can be the
    # error the reader reports first, in place of the query's own
    assert out.output in ("Error: the query failed: Invalid Input Error: stop here\n",
                          "Error: the query failed: INTERRUPT Error: Interrupted!\n"), out.output
    assert case.state() == case.baseline


_MEASURE = """
import json, re, resource, sys
from pathlib import Path
from runner.errors import QueryError
from runner.store import Store, sandbox


def peak_kib(children=False):  # VmHWM starts afresh at exec; ru_maxrss keeps the parent's
    if children:  # the largest child's, which starts at this process's size when forked
        return resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return int(re.search(r"VmHWM:\\s+(\\d+)", Path("/proc/self/status").read_text())[1])


store, query, files = Store(sys.argv[1]), sys.argv[2], sys.argv[3] != "plain"
store.user_query("select 1", allow_files=files)
before = peak_kib(sys.argv[3] == "files")
if sys.argv[3] == "parent":
    sandbox._frame = lambda table: table.num_rows  # what the parent holds, not a DataFrame
try:
    answer = store.user_query(query, allow_files=files, answer_bytes=int(sys.argv[4]) * 2**20)
except QueryError as exc:
    answer = str(exc)
print(json.dumps([answer, (peak_kib(sys.argv[3] == "files") - before) / 1024]))
"""


def _measured(store, query: str, who: str, limit_mib: int):
    """Run `query` in a fresh process (`who`: plain; files, measuring the confined child;
    parent, measuring the parent of one): (its answer or refusal, MiB its peak RSS grew)."""
    out = subprocess.run([sys.executable, "-c", _MEASURE, str(store.path), query, who,
                          str(limit_mib)], capture_output=True, text=True,
                         cwd=Path(__file__).resolve().parents[2])
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout)


@pytest.mark.parametrize("flag", ["plain", "files"])
def test_long_strings_are_not_computed_far_ahead_of_the_bound(file_case, flag):
    """100,000 strings of 4 KiB (400 MiB) with an 8 MiB bound: the query's process grows by
    little more than the bound. DuckDB sizes its result buffer without the strings, so by
    default it ran about 30 chunks of 8 MiB ahead of the reader (~250 MiB measured)."""
    message, grown_mib = _measured(file_case.store, "select repeat('x', 4096) as s from "
                                   "range(100000)", flag, 8)
    assert message.startswith("the query's answer holds more than 8 MiB"), message
    assert grown_mib < 100, grown_mib


def test_the_allow_files_answer_is_held_once_by_the_parent(file_case):
    """16,000 strings of 4 KiB (62.5 MiB) from the confined child: the parent reads the
    stream as it comes and grows by about the answer once (a captured stdout was joined
    into a second copy: 123 MiB measured)."""
    rows, grown_mib = _measured(file_case.store, "select repeat('x', 4096) as s from "
                                "range(16000)", "parent", 100)
    assert rows == 16000
    assert grown_mib < 62.5 * 1.5, grown_mib


def test_a_chunk_of_text_past_arrows_limit_is_refused_as_too_large():
    """DuckDB computes a chunk (2,048 rows) whole; one of more than 2 GiB of text fails in
    its Arrow conversion with this OSError (DuckDB 1.5.5's text, seen for select repeat('x',
    1<<20) from range(100000), which also peaks at 4.2 GiB, so it is not run here)."""
    def failing():
        yield from ()
        raise OSError("Invalid Input Error: Arrow Appender: The maximum total string size for "
                      "regular string buffers is 2147483647 but the offset of 2147483648 "
                      "exceeds this.\n* SET arrow_large_buffer_size=true to use large string "
                      "buffers")

    with pytest.raises(FoldwiseError) as err:
        list(sandbox._chunks(failing()))
    assert str(err.value).startswith("one chunk of the query's answer (2,048 rows) holds "
                                     "more than 2 GiB of text"), err.value
    assert "Narrow it with WHERE, LIMIT or an aggregate" in str(err.value)


@pytest.mark.parametrize("flag", [[], ["--allow-files"]], ids=["plain", "allow-files"])
def test_no_progress_bar_reaches_stdout(file_case, flag):
    out = _cli("sql", "select current_setting('enable_progress_bar') as bar", "--store",
               file_case.store.path, *flag, "--format", "csv")
    assert out.exit_code == 0 and out.output == "bar\nFalse\n", out.output


def test_a_query_of_some_seconds_answers_whole_from_the_child(file_case):
    """DuckDB printed its progress bar to stdout once a query ran 2 s; in the --allow-files
    child that went into the Arrow stream, and the answer was lost ("ended with exit code
    0"). A sum over 3·10⁸ hashes (about 3 s here) checked against the same query on a
    plain DuckDB."""
    query = "select sum(hash(range) % 7)::bigint as total from range(300000000)"
    con = duckdb.connect()
    try:
        expected = con.execute("set enable_progress_bar = false; " + query).fetchone()[0]
    finally:
        con.close()
    out = _cli("sql", query, "--store", file_case.store.path, "--allow-files",
               "--format", "csv")
    assert out.exit_code == 0 and out.output == f"total\n{expected}\n", out.output


def test_the_answer_bound_named_in_help_is_the_one_applied():
    out = _cli("sql", "--help")
    assert f"[default: {sandbox.ANSWER_BYTES // 2**20}]" in " ".join(out.output.split())


def test_allow_files_without_landlock_is_refused_in_one_paragraph(file_case, monkeypatch):
    from runner.store import landlock

    monkeypatch.setattr(landlock, "abi_version", lambda: 3)
    out = _cli("sql", "select 1", "--store", file_case.store.path, "--allow-files")
    assert out.exit_code == 2 and out.output.count("\n") == 1, out.output
    assert "Landlock with ABI 4 or later" in out.output and "offers ABI 3" in out.output
    assert "Run it without --allow-files" in out.output
    assert _cli("sql", "select 1 as one", "--store", file_case.store.path).exit_code == 0


def test_the_confined_child_sees_no_secrets_in_its_environment(monkeypatch, tmp_path):
    """The child gets a short list of plain variables (PATH, HOME, locale, ...), so even a
    query that may read files finds no password or key in its environment."""
    monkeypatch.setenv("PGPASSWORD", "hunter2-sentinel")
    monkeypatch.setenv("PGPASSFILE", "/somewhere/pgpass-sentinel")
    monkeypatch.setenv("AWS_SECRET_ACCESS_KEY", "aws-sentinel")
    env = sandbox.child_environment(tmp_path)
    assert env["PATH"] == os.environ["PATH"] and env["TMPDIR"] == str(tmp_path)
    assert not {"PGPASSWORD", "PGPASSFILE", "AWS_SECRET_ACCESS_KEY"} & set(env)
    assert "sentinel" not in json.dumps(env)


CONFINED_PROBE = """
import json, os, socket, sys
from runner.store.landlock import restrict_to_reading
folder, port, outside = sys.argv[1], int(sys.argv[2]), sys.argv[3]
abi = restrict_to_reading(folder)

def attempt(action):
    try:
        action()
    except OSError as exc:
        return type(exc).__name__
    return None

print(json.dumps({
    "abi": abi,
    "connect": attempt(lambda: socket.create_connection(("127.0.0.1", port), timeout=2)),
    "bind": attempt(lambda: socket.socket().bind(("127.0.0.1", 0))),
    "write outside": attempt(lambda: open(outside, "a")),
    "make outside": attempt(lambda: os.mkdir(outside + ".d")),
    "write inside": attempt(lambda: open(os.path.join(folder, "x"), "w").write("x")),
    "read": attempt(lambda: open("/etc/hostname").read()),
    "signal": attempt(lambda: os.kill(os.getppid(), 0)),
}))
"""


def test_landlock_denies_tcp_signals_and_writes_outside_the_folder(tmp_path):
    """The kernel side of --allow-files, seen from plain Python in a confined process: no
    TCP connection (a listener here receives none) or bound port, no write or new folder
    outside the private one, no signal to processes outside; reading still works."""
    import socket

    listener = socket.socket()
    listener.bind(("127.0.0.1", 0))
    listener.listen()
    listener.settimeout(0.5)
    private = tmp_path / "private"
    private.mkdir()
    outside = tmp_path / "outside.txt"
    outside.write_text("unchanged")
    out = subprocess.run([sys.executable, "-c", CONFINED_PROBE, str(private),
                          str(listener.getsockname()[1]), str(outside)],
                         capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    found = json.loads(out.stdout)
    with pytest.raises(socket.timeout):
        listener.accept()
    listener.close()
    assert found["abi"] >= 4
    assert found["connect"] == found["bind"] == "PermissionError"
    assert found["write outside"] == found["make outside"] == "PermissionError"
    assert found["write inside"] is None and found["read"] is None
    if found["abi"] >= 6:
        assert found["signal"] == "PermissionError"
    assert outside.read_text() == "unchanged" and not (tmp_path / "outside.txt.d").exists()

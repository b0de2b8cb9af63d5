"""What the store refuses and how it waits: a database that is not a foldwise store is
never written into, a damaged schema marker is one clear error, a writer waits for a
reader as long as it takes (saying once who holds the file), and a reader gives up after
its limit naming the writer. A store passed on by someone else reaches no other file
through its views or macros."""

from __future__ import annotations

import hashlib
import io
import json
import subprocess
import sys
import textwrap
import time
import unicodedata
from pathlib import Path

import duckdb
import pytest
from click.testing import CliRunner

from runner.cli import main
from runner.errors import StoreError
from runner.store import SCHEMA_VERSION, Store

from .helpers import write_spec
from .store_builder import write_sweep

MODELS = """
ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 10.0]}}
"""


def _cli(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _foreign(path: Path, sql: str) -> Path:
    con = duckdb.connect(str(path))
    con.execute(sql)
    con.close()
    return path


@pytest.mark.parametrize("tables", [
    "create table invoices (id integer, total decimal(10, 2)); "
    "insert into invoices values (1, 19.99), (2, 5.00)",
    "create table sweeps (id integer, route varchar); insert into sweeps values (1, 'north quay')",
], ids=["invoices", "own sweeps table"])
def test_a_database_that_is_not_a_store_is_never_written(tmp_path, diabetes_csv, tables):
    spec = write_spec(tmp_path, MODELS)
    target = _foreign(tmp_path / "theirs.duckdb", tables)
    before = _digest(target)
    for args in (["run", spec, "--jobs", "1", "--quiet"], ["merge", tmp_path / "none.duckdb"]):
        if args[0] == "merge":
            write_sweep(tmp_path / "none.duckdb", {"ridge": [[1.0, 2.0]]}, k=2, repeats=1)
        out = _cli(*args, "--store", target)
        assert out.exit_code == 2, out.output
        assert out.output.startswith("Error: ") and out.output.count("\n") == 1, out.output
        assert "not a foldwise store" in out.output and "nothing was written" in out.output
        assert _digest(target) == before
    con = duckdb.connect(str(target), read_only=True)
    names = [t for (t,) in con.execute("select table_name from information_schema.tables")
             .fetchall()]
    con.close()
    assert len(names) == 1


@pytest.mark.parametrize("kind", ["foreign database", "text file", "newer store"])
def test_check_refuses_the_store_run_would_refuse_and_leaves_it_as_it_was(tmp_path,
                                                                           diabetes_csv, kind):
    """`check --store` gives run's own refusal (same paragraph, exit 2) for a DuckDB file
    that is not a foldwise store, for a file that is not DuckDB and for a store a newer
    foldwise wrote, and leaves the file's bytes and modification time as they were."""
    spec = write_spec(tmp_path, MODELS)
    if kind == "text file":
        target = tmp_path / "notes.duckdb"
        target.write_text("bay 4: glazing replaced on the north side\n" * 20)
        words = "it is not a DuckDB database file"
    elif kind == "newer store":
        target = write_sweep(tmp_path / "later.duckdb", {"ridge": [[1.0, 2.0]]}, k=2,
                             repeats=1).path
        con = duckdb.connect(str(target))
        con.execute("update foldwise_meta set value = ? where key = 'schema_version'",
                    [str(SCHEMA_VERSION + 1)])
        con.close()
        words = (f"was written by a newer foldwise (schema version {SCHEMA_VERSION + 1}; "
                 f"this foldwise knows {SCHEMA_VERSION})")
    else:
        target = _foreign(tmp_path / "theirs.duckdb", "create table invoices (id integer)")
        words = "is a database but not a foldwise store: it holds 1 table(s) (invoices)"
    before = (target.read_bytes(), target.stat().st_mtime_ns)
    answers = {}
    for command in ("check", "run"):
        out = _cli(command, spec, "--store", target, *(("--quiet",) if command == "run" else ()))
        assert out.exit_code == 2, out.output
        assert out.output.startswith("Error: ") and out.output.count("\n") == 1, out.output
        assert words in out.output and str(target) in out.output
        assert (target.read_bytes(), target.stat().st_mtime_ns) == before
        answers[command] = out.output
    assert answers["check"] == answers["run"]
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(
        ["diabetes.csv", "spec.yaml", target.name])


def test_an_empty_database_becomes_a_store(tmp_path):
    empty = tmp_path / "empty.duckdb"
    duckdb.connect(str(empty)).close()
    store = Store(empty)
    store.ensure_schema()
    assert store.query("select value from foldwise_meta").value.tolist() == [str(SCHEMA_VERSION)]


def test_a_schema_version_that_is_not_a_number_is_one_clear_error(tmp_path):
    path = tmp_path / "store.duckdb"
    write_sweep(path, {"ridge": [[1.0, 2.0]]}, k=2, repeats=1)
    with duckdb.connect(str(path)) as con:
        con.execute("update foldwise_meta set value = 'two' where key = 'schema_version'")
    before = _digest(path)
    for args in (["summary"], ["sql", "select 1"], ["sweeps"]):
        out = _cli(*args, "--store", path)
        if args[0] == "sql":  # a user's query does not read the marker
            assert out.exit_code == 0, out.output
            continue
        assert out.exit_code == 2, out.output
        assert "schema_version 'two', not a number" in out.output
        assert out.output.count("\n") == 1
    with pytest.raises(StoreError, match="not a number"):
        Store(path).ensure_schema()
    assert _digest(path) == before


HOLDER = """
import sys, time, duckdb
path, mode, seconds, hold = sys.argv[1], sys.argv[2], float(sys.argv[3]), float(sys.argv[4])
end = time.monotonic() + seconds
while time.monotonic() < end:
    try:
        con = duckdb.connect(path, read_only=mode == "read")
    except duckdb.IOException:  # the other side has it this moment
        time.sleep(0.05)
        continue
    print("holding", flush=True)
    time.sleep(hold)
    con.close()
    time.sleep(0.05)
"""


def _hold(path: Path, mode: str, seconds: float, *, each: float = 0.9) -> subprocess.Popen:
    """Another process holding the file for reading or writing, letting go briefly every
    `each` seconds until `seconds` have passed."""
    proc = subprocess.Popen([sys.executable, "-c", textwrap.dedent(HOLDER), str(path), mode,
                             str(seconds), str(each)], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "holding"
    return proc


def test_a_writer_waits_for_a_reader_however_long_and_says_so_once(tmp_path):
    path = tmp_path / "store.duckdb"
    write_sweep(path, {"ridge": [[1.0, 2.0]]}, k=2, repeats=1)
    told = []
    store = Store(path, wait_seconds=0.2, on_wait=told.append)
    reader = _hold(path, "read", 2.5)
    start = time.monotonic()
    for i in range(4):  # each write meets the reader again: still one notice
        store.finish_sweep("20260101-000000-aaaa", f"finished-{i}")
        time.sleep(0.3)
    reader.wait(timeout=30)
    assert time.monotonic() - start > 0.9  # it waited, well past its reader limit of 0.2 s
    assert store.query("select status from sweeps").status.tolist() == ["finished-3"]
    assert len(told) == 1, told
    assert f"process {reader.pid}" in told[0] and "for reading" in told[0], told[0]
    assert "however long that takes" in told[0]


def test_a_reader_gives_up_after_its_limit_naming_the_writer(tmp_path):
    path = tmp_path / "store.duckdb"
    write_sweep(path, {"ridge": [[1.0, 2.0]]}, k=2, repeats=1)
    writer = _hold(path, "write", 60.0, each=60.0)  # without a break
    try:
        store = Store(path, wait_seconds=0.5)
        for read in (lambda: store.query("select count(*) from sweeps"),
                     lambda: store.user_query("select count(*) from sweeps"),
                     lambda: store.user_query("select 1", allow_files=True)):
            with pytest.raises(StoreError) as err:
                read()
            text = str(err.value)
            assert "still busy after 0.5 s" in text, text
            assert f"process {writer.pid}" in text and "for writing" in text, text
    finally:
        writer.kill()
        writer.wait()


def test_a_run_meeting_a_reader_finishes_and_says_busy_once(tmp_path, diabetes_csv):
    spec = write_spec(tmp_path, MODELS)
    path = tmp_path / "store.duckdb"
    first = subprocess.run([sys.executable, "-m", "runner", "run", str(spec), "--store",
                            str(path), "--jobs", "1", "--quiet"], capture_output=True,
                           text=True)
    assert first.returncode == 0, first.stderr
    reader = _hold(path, "read", 8.0)  # longer than the run takes to start, even when slow
    out = subprocess.run([sys.executable, "-m", "runner", "run", str(spec), "--store",
                          str(path), "--jobs", "1", "--quiet", "--fresh"], capture_output=True,
                         text=True)
    reader.wait(timeout=30)
    assert out.returncode == 0, out.stderr
    assert out.stderr.count("is busy") == 1, out.stderr
    statuses = Store(path).query("select status from sweeps").status.tolist()
    assert statuses == ["finished", "finished"]


@pytest.mark.parametrize("existing", [False, True])
def test_a_sweep_opens_its_store_file_twice(tmp_path, diabetes_csv, monkeypatch, existing):
    """A sweep with the explain step off and its results in one batch opens the file twice
    for writing: its tables and first writes, then its last batch and its end (another
    process can open the file between them and while the fits run). An existing store is
    first looked at once through a read-only connection (refused unchanged if foreign)."""
    from runner.store.locations import FileLocation
    from runner.write.engine import run_sweep
    from runner.write.spec import load_spec

    spec = load_spec(write_spec(diabetes_csv.parent, "ridge: {family: linear, grid: "
                                "{penalty: l2, alpha: [0.1, 1.0, 10.0]}}"))
    store = tmp_path / "s.duckdb"
    if existing:
        run_sweep(spec, store=Store(store), jobs=1, fresh=True)
    opened = []
    real = FileLocation.connect
    monkeypatch.setattr(FileLocation, "connect", lambda self, *, read_only, **kw: (
        opened.append(read_only) or real(self, read_only=read_only, **kw)))
    result = run_sweep(spec, store=Store(store), jobs=1, fresh=True, batch_seconds=3600)
    folds = spec.folds.k * spec.folds.repeats
    assert result.status == "finished" and result.n_fold_rows == 3 * folds * len(spec.metrics)
    assert opened.count(False) == 2
    assert opened.count(True) == (1 if existing else 0), opened


def _tampered(path: Path, secret: Path) -> Path:
    """A store whose `sweeps` is a view that reads another file into every sweep's name, as
    a store passed on by someone else might be."""
    write_sweep(path, {"ridge": [[1.0, 2.0]]}, k=2, repeats=1)
    with duckdb.connect(str(path)) as con:
        con.execute("alter table sweeps rename to sweeps_kept")
        con.execute("create view sweeps as select * replace ((select string_agg(content, '') "
                    f"from read_text('{secret}')) as name) from sweeps_kept")
    return path


@pytest.mark.parametrize("args", [["sweeps"], ["summary"], ["pick"], ["compare"],
                                  ["export", "OUT"], ["merge", "TAMPERED"],
                                  ["history", "--model", "ridge"]],
                         ids=lambda a: a[0])
def test_a_store_whose_views_read_other_files_is_refused_unread(tmp_path, args):
    secret = tmp_path / "secret.txt"
    secret.write_text("hunter2-from-the-key-file\n")
    tampered = _tampered(tmp_path / "tampered.duckdb", secret)
    own = tmp_path / "own.duckdb"
    write_sweep(own, {"ridge": [[1.0, 2.0]]}, k=2, repeats=1, sweep_id="20250101-000000-bbbb")
    store = own if args[0] == "merge" else tampered
    befores = {p: _digest(p) for p in (tampered, own)}
    args = [{"OUT": tmp_path / "out", "TAMPERED": tampered}.get(a, a) for a in args]
    out = _cli(*args, "--store", store)
    assert "hunter2" not in out.output
    assert out.exit_code == 2, out.output
    assert out.output.startswith("Error: ") and out.output.count("\n") == 1, out.output
    assert "its sweeps is a view, not a table" in out.output and str(tampered) in out.output
    assert {p: _digest(p) for p in (tampered, own)} == befores
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())


def test_a_store_connection_downloads_and_loads_no_extension(tmp_path):
    path = tmp_path / "store.duckdb"
    write_sweep(path, {"ridge": [[1.0, 2.0]]}, k=2, repeats=1)
    settings = Store(path).query(
        "select current_setting('autoinstall_known_extensions') as install, "
        "current_setting('autoload_known_extensions') as load, "
        "current_setting('enable_external_access') as files")
    assert settings.iloc[0].tolist() == [False, False, False]


def test_a_team_store_merges_no_file_a_tampered_store_reads(pg, tmp_path):
    secret = tmp_path / "secret.txt"
    secret.write_text("hunter2-from-the-key-file\n")
    tampered = _tampered(tmp_path / "tampered.duckdb", secret)
    url = pg.create_database("tampered_merge")
    out = _cli("merge", tampered, "--store", url)
    assert out.exit_code == 2, out.output
    assert "hunter2" not in out.output and "its sweeps is a view, not a table" in out.output
    assert str(tampered) in out.output and out.output.count("\n") == 1, out.output
    assert Store(url).query("select count(*) as n from sweeps").n.tolist() == [0]


CONTROL = "\x1b[2J\x1b]0;taken\x07\r\x08"
"""Terminal control a store passed on by someone else may hold in its words: clear the
screen, retitle the window, ring the bell, overwrite the line."""


@pytest.mark.parametrize("args", [["summary"], ["pick"], ["compare"], ["path", "--model", "X"],
                                  ["sql", "select model, params from cells"], ["sweeps"],
                                  ["history", "--model", "X"]], ids=lambda a: a[0])
def test_stored_words_reach_the_terminal_without_control_characters(tmp_path, args):
    path = tmp_path / "store.duckdb"
    label = f"ri{CONTROL}dge"
    write_sweep(path, {label: [[1.0, 2.0, 1.5, 2.5], [1.2, 2.2, 1.4, 2.4]],
                       "tree": [[3.0, 3.5, 3.25, 3.75]]}, k=2, repeats=2)
    with duckdb.connect(str(path)) as con:
        con.execute("update sweeps set name = ?, note = ?, data_sha256 = 'd', spec_sha256 = 's'",
                    [f"sp{CONTROL}ec", f"no{CONTROL}te"])
        con.execute("update cells set params = ?", [json.dumps({f"al{CONTROL}pha": 1.0})])
    out = _cli(*[label if a == "X" else a for a in args], "--store", path)
    assert out.exit_code == 0, out.output
    assert not {"\x1b", "\x07", "\r", "\x08"} & set(out.output), repr(out.output)
    assert "taken" in out.output  # the words stay, their control characters gone


def test_a_sweep_id_prefix_is_matched_as_typed_not_as_a_pattern(tmp_path):
    store = write_sweep(tmp_path / "store.duckdb", {"ridge": [[1.0, 2.0]]}, k=2, repeats=1,
                        sweep_id="20260101-000000-aaaa")
    write_sweep(tmp_path / "store.duckdb", {"ridge": [[1.0, 2.0]]}, k=2, repeats=1,
                sweep_id="20260102-000000-bbbb")
    assert store.resolve_sweep("20260102") == "20260102-000000-bbbb"
    for typed in ("%", "2026010_-000000-b", "%bbbb", "_"):
        with pytest.raises(StoreError, match="no sweep"):
            store.resolve_sweep(typed)
    with pytest.raises(StoreError, match="matches 2 sweeps"):
        store.resolve_sweep("2026")


def test_an_exact_sweep_id_wins_over_longer_ids_it_begins_and_an_empty_one_names_none(tmp_path):
    from datetime import datetime

    path = tmp_path / "s.duckdb"
    for day, sid in ((1, "run%1"), (2, "run%1-b"), (3, "run_12")):
        store = write_sweep(path, {"m": [[1.0, 2.0]]}, k=2, repeats=1, sweep_id=sid,
                            started_at=datetime(2026, 1, day))
    assert store.resolve_sweep("run%1") == "run%1"
    assert store.resolve_sweep("run%1-") == "run%1-b"
    assert store.resolve_sweep("run_") == "run_12"
    with pytest.raises(StoreError, match="sweep id prefix 'run' matches 3 sweeps"):
        store.resolve_sweep("run")
    with pytest.raises(StoreError, match="--sweep '' is no sweep id \\(nor the start of one\\) in store"):
        store.resolve_sweep("")


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_csv_on_a_terminal_carries_no_control_characters_and_a_file_the_exact_text():
    """Stored words in a CSV answer (`--format csv`, any command, `sql` too): a terminal
    gets their control characters as spaces, a file or pipe the exact text."""
    import pandas as pd

    from runner.output import emit

    df = pd.DataFrame({f"ev{CONTROL}il": [f"ri{CONTROL}dge", "tree"], "n": [1, 2]})
    screen, file = _Terminal(), io.StringIO()
    emit(df, "csv", file=screen)
    emit(df, "csv", file=file)
    assert pd.read_csv(io.StringIO(file.getvalue())).equals(df)  # exact, CR and all
    plain = io.StringIO()
    emit(pd.DataFrame({"model": ["ridge", "tree"], "n": [1, 2]}), "csv", file=plain)
    assert plain.getvalue() == "model,n\nridge,1\ntree,2\n"  # no CR: quoted as before
    shown = screen.getvalue()
    assert shown == "".join(" " if unicodedata.category(c) == "Cc" and c != "\n" else c
                            for c in file.getvalue())
    assert shown.startswith('"ev [2J ]0;taken   il","n"\n') and '"tree",2\n' in shown, shown
    assert not {c for c in shown if unicodedata.category(c) == "Cc"} - {"\n"}


def test_a_summary_view_redefined_to_look_renewed_is_made_again_on_write(tmp_path):
    """A cell_summary that holds the words an older check looked for, but answers
    something else, is replaced by foldwise's own when a writer opens the store."""
    path = tmp_path / "store.duckdb"
    write_sweep(path, {"ridge": [[1.0, 2.0]]}, k=2, repeats=1)
    with duckdb.connect(str(path)) as con:
        con.execute("""create or replace view cell_summary as select 42.0 as mean,
                       'count(f."value") AS n' as complexity_tier""")
    Store(path).ensure_schema()
    got = Store(path).user_query("select cell_id, metric, mean, n from cell_summary")
    assert got.to_dict("records") == [{"cell_id": "ridge-0", "metric": "rmse",
                                       "mean": 1.5, "n": 2}]  # the mean of 1.0 and 2.0

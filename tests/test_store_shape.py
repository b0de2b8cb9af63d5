"""A colleague's store, catalog by catalog: a real sweep's store whose tables were changed
with a plain DuckDB connection (a table dropped or made a view, a column dropped or retyped
or computed, a primary key dropped so rows repeat, a macro that shadows a SQL function, a
schema version foldwise never wrote). Every read command, and a merge into a new file,
refuses it in one paragraph naming the store and the table, reads nothing of it (a macro
or a view would have changed or multiplied the answer) and leaves its bytes as they were."""

from __future__ import annotations

import hashlib
import shutil

import duckdb
import pytest
from click.testing import CliRunner

from runner.cli import main

from .store_mutations import build_base, commands

_KEYLESS = ("create table _copy as select * from {t}; drop view if exists cell_summary; "
            "drop table {t}; alter table _copy rename to {t}")
_COLUMNS = ('sweep_id varchar, cell_id varchar, "repeat" integer, fold integer, metric '
            "varchar, stored double, value double generated always as (stored / 1000), "
            "fit_seconds double, n_train integer, n_valid integer, seed bigint, n_leaves "
            "double, how varchar, n_warnings integer, reused_from varchar")

CHANGES = {
    "a table dropped": ("drop view cell_summary; drop table fold_scores",
                        "cannot be read: it lacks the table fold_scores."),
    "a column dropped": ("alter table sweeps drop column k",
                         "cannot be read: its table sweeps lacks the column k."),
    "a column of text": ("alter table fold_scores alter value type varchar; "
                         "update fold_scores set value = 'about 4' where fold = 0",
                         "cannot be read: its table fold_scores, column value is of type "
                         "VARCHAR, where foldwise stores DOUBLE."),
    "a view for a table": ("alter table sweeps rename to _kept; create view sweeps as "
                           "select s.* from _kept s, range(3)",
                           "cannot be read: its sweeps is a view, not a table: a view runs a "
                           "query of its own"),
    "a key dropped, rows twice": (_KEYLESS.format(t="fold_scores")
                                  + "; insert into fold_scores select * from fold_scores",
                                  "cannot be read: its table fold_scores has lost its primary "
                                  "key (sweep_id, cell_id, repeat, fold, metric), so it may "
                                  "hold a row twice."),
    "a direction twice": (_KEYLESS.format(t="metrics") + "; insert into metrics select metric, "
                          "'higher' from metrics where better = 'lower'",
                          "cannot be read: its table metrics has lost its primary key (metric)"),
    "a macro for avg": ("create macro avg(x) as 42",
                        "cannot be read: it holds 1 macro(s) (avg), which foldwise never "
                        "makes"),
    "a computed column": ("create table _scores (" + _COLUMNS + "); insert into _scores by "
                          "name select * exclude (value), value * 1000 as stored from "
                          "fold_scores; " + _KEYLESS.format(t="fold_scores").split("; ", 1)[1]
                          .replace("_copy", "_scores"),
                          "cannot be read: its table fold_scores, column value computes or "
                          "fills its values from an expression"),
    "schema version 0": ("update foldwise_meta set value = '0'",
                         "is damaged: its foldwise_meta table gives schema_version 0, and "
                         "foldwise numbers its schemas from 1;"),
}
"""Per name: the SQL that changes a copy of the store, and the words of every refusal
(after 'Error: store <copy> ')."""


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    folder = tmp_path_factory.mktemp("base")
    store = build_base(folder, "regression")
    return folder, store, commands(folder, store, folder / "out")


def _digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _changed(base, tmp_path, sql: str | None):
    """A copy of the base store with `sql` run on it, and every read command and a merge
    into a new file, aimed at the copy; the copy's store file."""
    folder, store, argvs = base
    into = tmp_path / "theirs.duckdb"
    shutil.copyfile(store, into)
    if sql:
        with duckdb.connect(str(into)) as con:
            con.execute(sql)
    runs = {name: [a.replace(str(store), str(into)).replace(str(folder / "out"),
                                                            str(tmp_path / "out"))
                   for a in argv] for name, argv in argvs.items()
            if name not in ("plot calibration", "plot roc")}  # figures of class sweeps
    runs["merge"] = ["merge", str(into), "--store", str(tmp_path / "out" / "mine.duckdb")]
    runs["build"] = ["build", "--model", "tree", "--out", str(tmp_path / "out" / "b.skops"),
                     "--store", str(into), "--data", str(folder / "d.csv")]
    return into, runs


def test_the_unchanged_store_answers_every_command(base, tmp_path):
    """The control: the same commands on a plain copy answer (the figures but one are left
    to the other tests: each takes a second or more)."""
    into, runs = _changed(base, tmp_path, None)
    for name, argv in runs.items():
        if name.startswith(("plot", "report")) and name != "plot models":
            continue
        out = CliRunner().invoke(main, argv)
        assert out.exit_code == 0, (name, out.output)


@pytest.mark.parametrize("change", list(CHANGES))
def test_a_store_whose_catalog_foldwise_did_not_make_is_refused_unread(base, tmp_path,
                                                                       change):
    sql, words = CHANGES[change]
    into, runs = _changed(base, tmp_path, sql)
    before = _digest(into)
    for name, argv in runs.items():
        out = CliRunner().invoke(main, argv)
        assert out.exit_code == 2, (name, out.output)
        assert out.output.count("\n") == 1, (name, out.output)
        said = "cannot be merged" if name == "merge" else "cannot be read"
        expected = words.replace("cannot be read", said)
        if name == "merge" and change == "schema version 0":
            expected = "cannot be merged: its schema_version is 0, and foldwise numbers"
        assert out.output.startswith(f"Error: store {into} {expected}"), (name, out.output)
        assert _digest(into) == before, name
    made = sorted(p.name for p in (tmp_path / "out").rglob("*")) \
        if (tmp_path / "out").exists() else []
    assert made in ([], ["plots"]), made  # nothing written, not even a half export


def test_a_store_named_with_a_quote_is_checked_and_read(base, tmp_path):
    """The check names the store's catalog (its file name) inside its SQL."""
    _, store, _ = base
    into = tmp_path / "it's.duckdb"
    shutil.copyfile(store, into)
    out = CliRunner().invoke(main, ["summary", "--store", str(into)])
    assert out.exit_code == 0 and "picked cell" in out.output, out.output

"""Moving results between stores: export every table as files, merge them (or another
store) back, and get every table equal; what is already there is skipped by sweep id."""

from __future__ import annotations

import subprocess
import sys

import duckdb
import pandas as pd
import pytest
from click.testing import CliRunner

from runner.cli import main
from runner.errors import StoreError
from runner.store import TABLES, Store
from runner.store.schema import SCHEMA_VERSION, UPGRADE_COLUMNS
from runner.store.transfer import export_store, merge_store


def _table(store: Store, table: str) -> pd.DataFrame:
    return store.query(f"select * from {table} order by all")


@pytest.mark.parametrize("fmt", ["parquet", "csv"])
def test_export_then_merge_into_an_empty_store_gives_every_table_equal(explained, tmp_path,
                                                                        fmt):
    _, store, _ = explained
    counts = export_store(store, tmp_path / "out", fmt)
    assert counts["fold_scores"] > 0 and counts["tree_folds"] > 0 and counts["importances"] > 0
    tiers = _table(store, "cells")["complexity_tier"]
    assert tiers.notna().all() and (tiers >= 0).all()  # carried below with every column
    assert (_table(store, "sweeps")["n_features"] > 0).all()
    target = Store(tmp_path / "back.duckdb")
    result = merge_store(target, tmp_path / "out")
    assert result.rows == counts
    for table in TABLES:
        pd.testing.assert_frame_equal(_table(target, table), _table(store, table),
                                      check_exact=True, obj=table)
    again = merge_store(target, tmp_path / "out")
    assert again.new_sweeps == [] and sum(again.rows.values()) == 0
    assert again.present == result.new_sweeps


def test_cli_export_and_merge_round_trip(explained, tmp_path):
    _, store, _ = explained
    run = lambda *a: subprocess.run([sys.executable, "-m", "runner", *a], capture_output=True,
                                    text=True)
    out = run("export", str(tmp_path / "csv"), "--format", "csv", "--store", str(store.path))
    assert out.returncode == 0, out.stderr
    assert sorted(p.name for p in (tmp_path / "csv").iterdir()) == sorted(
        [f"{t}.csv" for t in TABLES] + ["foldwise-export.json"])
    out = run("merge", str(tmp_path / "csv"), "--store", str(tmp_path / "m.duckdb"))
    assert out.returncode == 0 and "merged 1 sweep(s)" in out.stdout, out.stderr
    again = run("export", str(tmp_path / "csv"), "--format", "csv", "--store", str(store.path))
    assert again.returncode == 2 and "already holds an export" in again.stderr


def test_export_into_a_path_through_a_file_is_refused_in_words(explained, tmp_path):
    _, store, _ = explained
    (tmp_path / "plain.txt").write_text("x")
    out = CliRunner().invoke(main, ["export", str(tmp_path / "plain.txt" / "exports"),
                                    "--store", str(store.path)])
    assert out.exit_code == 2 and "Traceback" not in out.output, out.output
    assert "a part of its folder is a file" in out.output
    assert str(tmp_path / "plain.txt") in out.output
    assert (tmp_path / "plain.txt").read_text() == "x"
    assert [p.name for p in tmp_path.iterdir()] == ["plain.txt"]


def test_merge_leaves_out_running_sweeps_and_refuses_itself(explained, tmp_path):
    _, store, sweep_id = explained
    other = Store(tmp_path / "other.duckdb")
    merge_store(other, store.path)
    with duckdb.connect(str(other.path)) as con:
        con.execute("update sweeps set status = 'running'")
    target = Store(tmp_path / "target.duckdb")
    result = merge_store(target, other.path)
    assert result.running == [sweep_id] and result.new_sweeps == []
    assert _table(target, "fold_scores").empty
    with pytest.raises(StoreError, match="this store itself"):
        merge_store(target, target.path)


def test_merge_of_a_file_that_is_no_store_changes_nothing(explained, tmp_path):
    _, store, _ = explained
    target = Store(tmp_path / "target.duckdb")
    merge_store(target, store.path)
    junk = tmp_path / "junk.duckdb"
    with duckdb.connect(str(junk)) as con:
        con.execute("create table t as select 1 as x")
    out = subprocess.run([sys.executable, "-m", "runner", "merge", str(junk), "--store",
                          str(target.path)], capture_output=True, text=True)
    assert out.returncode == 2 and "not a foldwise store" in out.stderr
    assert "Traceback" not in out.stderr
    assert len(_table(target, "fold_scores")) == len(_table(store, "fold_scores"))


@pytest.mark.parametrize("name", ["waste.csv", "waste.duckdb"])
def test_merge_of_a_data_file_says_it_is_no_duckdb_file(explained, tmp_path, name):
    _, store, _ = explained
    target = Store(tmp_path / "target.duckdb")
    merge_store(target, store.path)
    before = target.path.read_bytes()
    data = tmp_path / name
    data.write_text("branch,waste_kg\nb01,12.5\nb02,9.0\n")
    out = subprocess.run([sys.executable, "-m", "runner", "merge", str(data), "--store",
                          str(target.path)], capture_output=True, text=True)
    assert out.returncode == 2 and out.stderr == (
        f"Error: cannot open store {data}: it is not a DuckDB database file (a foldwise "
        "store file is one), so it was not opened. Choose a store file, a postgresql:// URL "
        "or, to merge, a folder written by `foldwise export`.\n")
    assert target.path.read_bytes() == before


def test_a_refused_merge_into_a_new_store_file_leaves_no_file(explained, tmp_path):
    from runner.store.labels import Selection

    _, store, _ = explained
    junk = tmp_path / "junk.duckdb"
    with duckdb.connect(str(junk)) as con:
        con.execute("create table t as select 1 as x")
    (tmp_path / "not_an_export").mkdir()
    export_store(store, tmp_path / "export")
    nothing = Selection(labels=(("purpose", "no-such-value"),))
    for other, selection, words in (
            (tmp_path / "nowhere.duckdb", None, "no store or export folder at"),
            (tmp_path / "not_an_export", None, "is not a foldwise export"),
            (junk, None, "is not a foldwise store"),
            (store.path, nothing, "--label 'purpose' is a label key of no sweep of "),
            (tmp_path / "export", nothing, "--label 'purpose' is a label key of no sweep of ")):
        target = tmp_path / "new.duckdb"
        with pytest.raises(StoreError, match=words):
            merge_store(Store(target), other, nothing if selection else None)
        assert not target.exists() and not (tmp_path / "new.duckdb.wal").exists(), other


def test_merge_of_an_unknown_sweep_names_the_other_store_and_how_to_list_it(explained,
                                                                          tmp_path):
    _, store, _ = explained
    target = tmp_path / "target.duckdb"
    export_store(store, tmp_path / "export")
    held = sorted(store.query("select sweep_id from sweeps").sweep_id, reverse=True)
    assert len(held) <= 8  # all listed
    for other, listed in ((store.path, f"`foldwise sweeps --store {store.path}` lists them."),
                          (tmp_path / "export", "its foldwise-export.json lists them.")):
        kind = "store" if other == store.path else "export"
        out = CliRunner().invoke(main, ["merge", str(other), "--sweep", "zzz", "--store",
                                        str(target)])
        assert out.exit_code == 2 and out.output == (
            f"Error: --sweep 'zzz' is no sweep id (nor the start of one) in {other}, the "
            f"{kind} merged from; its sweeps, newest first: {', '.join(held)}. {listed}\n")


def test_a_store_of_schema_version_1_is_upgraded_keeping_spec_order(explained, tmp_path):
    _, store, sweep_id = explained
    old = Store(tmp_path / "old.duckdb")
    merge_store(old, store.path)
    order = old.query("select cell_id from cells order by position")["cell_id"].tolist()
    with duckdb.connect(str(old.path)) as con:  # what a version-1 store looked like
        con.execute("create table cells_v1 as select * exclude (position) from cells "
                    "order by position")
        con.execute("drop view cell_summary")
        con.execute("drop table cells")
        con.execute("alter table cells_v1 rename to cells")
        con.execute("alter table cells add primary key (sweep_id, cell_id)")  # as v1 had
        con.execute("update foldwise_meta set value = '1' where key = 'schema_version'")
    upgraded = Store(old.path)
    assert upgraded.query("select cell_id from cells order by position")["cell_id"].tolist() \
        == order
    assert upgraded.query("select value from foldwise_meta")["value"].tolist() == [
        str(SCHEMA_VERSION)]


def test_a_store_of_schema_version_2_gains_the_class_columns(explained, tmp_path):
    from runner.read.queries import summary

    _, store, sweep_id = explained
    old = Store(tmp_path / "old.duckdb")
    merge_store(old, store.path)
    before = summary(old, sweep_id).table
    with duckdb.connect(str(old.path)) as con:  # what a version-2 store looked like
        con.execute("drop view cell_summary")
        for table, column in UPGRADE_COLUMNS:
            con.execute(f"alter table {table} drop column {column.split()[0]}")
        con.execute("update foldwise_meta set value = '2' where key = 'schema_version'")
    upgraded = Store(old.path)
    after = summary(upgraded, sweep_id)
    assert after.facts.task == "regression" and after.facts.classes == ()
    pd.testing.assert_frame_equal(after.table, before)
    columns = upgraded.query("select table_name, column_name from information_schema.columns")
    for table, column in UPGRADE_COLUMNS:
        assert column.split()[0] in set(columns[columns.table_name == table].column_name)
    sizes = upgraded.query("select n_terms from explained where sweep_id = ?", [sweep_id])
    assert len(sizes) > 0 and sizes["n_terms"].isna().all()  # known only to newer sweeps
    upgraded.ensure_schema()  # the upgrade step is idempotent
    merge_store(upgraded, store.path)


def _as_version_2(path):
    """Turn a store file back into what schema version 2 looked like: no plan columns on
    sweeps, no findings table."""
    with duckdb.connect(str(path)) as con:
        con.execute("drop view cell_summary")
        con.execute("drop table findings")
        for column in ("scheme", "plan_column", "plan", "checks_key", "n_features"):
            con.execute(f"alter table sweeps drop column {column}")
        con.execute("update foldwise_meta set value = '2' where key = 'schema_version'")


def test_a_store_of_schema_version_2_is_upgraded_and_merges(explained, tmp_path):
    _, store, sweep_id = explained
    old = Store(tmp_path / "old.duckdb")
    merge_store(old, store.path)
    _as_version_2(old.path)
    fresh = Store(tmp_path / "fresh.duckdb")
    result = merge_store(fresh, old.path)  # a version-2 store lacks findings: the rest merges
    assert result.new_sweeps == [sweep_id] and result.rows["findings"] == 0
    assert len(_table(fresh, "fold_scores")) == len(_table(store, "fold_scores"))
    upgraded = Store(old.path)
    assert upgraded.query("select scheme, plan_column, checks_key, n_features from sweeps"
                          ).isna().all(axis=None)
    assert upgraded.query("select count(*) as n from findings")["n"].tolist() == [0]
    assert upgraded.query("select value from foldwise_meta")["value"].tolist() == \
        [str(SCHEMA_VERSION)]
    with duckdb.connect(str(old.path)) as con:  # the upgrade step runs again harmlessly
        con.execute("update foldwise_meta set value = '2' where key = 'schema_version'")
    again = Store(old.path)
    assert len(again.query("select * from sweeps")) == 1
    assert again.query("select value from foldwise_meta")["value"].tolist() == \
        [str(SCHEMA_VERSION)]


def test_export_under_a_file_or_from_no_store_is_refused_leaving_no_folder(tmp_path):
    from click.testing import CliRunner

    from runner.cli import main

    from .store_builder import write_sweep

    store = tmp_path / "store.duckdb"
    write_sweep(store, {"ridge": [[1.0, 2.0]]}, k=2, repeats=1)
    (tmp_path / "notes.txt").write_text("kept\n")
    foreign = tmp_path / "foreign.duckdb"
    duckdb.connect(str(foreign)).execute("create table t as select 1 as a").close()
    for folder, source, words in [
            (tmp_path / "notes.txt" / "out", store, "a part of its folder is a file"),
            (tmp_path / "new" / "out", foreign, "is not a foldwise store"),
            (tmp_path / "chosen", store, "nothing was exported")]:
        args = ["export", str(folder), "--store", str(source)]
        if folder.name == "chosen":
            args += ["--status", "failed"]  # filters of what exists, matching nothing
        out = CliRunner().invoke(main, args, catch_exceptions=False)
        assert out.exit_code == 2, out.output
        assert out.output.startswith("Error: ") and out.output.count("\n") == 1, out.output
        assert words in out.output, out.output
    assert sorted(p.name for p in tmp_path.iterdir()) == ["foreign.duckdb", "notes.txt",
                                                          "store.duckdb"]
    assert (tmp_path / "notes.txt").read_text() == "kept\n"


def test_an_export_whose_table_file_links_outside_is_refused_unread(explained, tmp_path):
    """A table file of an export folder made a link to a file elsewhere (here a CSV that
    looks like a sweeps table): merge reads nothing through it and writes nothing."""
    _, store, _ = explained
    folder = tmp_path / "export"
    export_store(store, folder, fmt="csv")
    outside = tmp_path / "outside.csv"
    outside.write_text("sweep_id,name\nsecret-line,zzz\n")
    (folder / "sweeps.csv").unlink()
    (folder / "sweeps.csv").symlink_to(outside)
    mine = tmp_path / "mine.duckdb"
    out = CliRunner().invoke(main, ["merge", str(folder), "--store", str(mine)])
    assert out.exit_code == 2 and out.output.count("\n") == 1, out.output
    assert out.output.startswith(f"Error: export {folder} holds a table file that is a link "
                                 "to a file outside the folder"), out.output
    assert "secret-line" not in out.output and not mine.exists()

"""The record of past sweeps — notes and labels, `diff`, a model's history, removal, and
sharing part of a store — each on a DuckDB file and on the PostgreSQL team store (the
session's throwaway server), with the same answers on both."""

from __future__ import annotations

import itertools
import json
import math
import os
import shutil
import socket

import duckdb
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import stats

from runner.cli import main
from runner.errors import QueryError, StoreError
from runner.read.past import diff_sweeps, model_history
from runner.read.queries import picks, summary, sweeps
from runner.read.views import params_text
from runner.store import TABLES, Store
from runner.store.labels import Selection, set_labels
from runner.store.tidy import remove_sweeps
from runner.store.transfer import export_store, merge_store
from runner.write.engine import run_sweep
from runner.write.spec import load_spec

from .helpers import diabetes_frame, spec_from, write_spec

MODELS = """
ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 1.0, 10.0]}}
tree: {family: pruned_tree, grid: {ccp_alpha: [0.0, 50.0, 200.0], min_samples_leaf: [3]}}
"""
CHANGED = MODELS.replace("[0.1, 1.0, 10.0]", "[0.1, 1.0, 30.0]")
OLD_LINE = "ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 1.0, 10.0]}}"
NEW_LINE = "ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 1.0, 30.0]}}"
_names = itertools.count()


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    """Two sweeps of spec 'small' differing in one ridge alpha, labelled and noted:
    (folder, store, first sweep id, second sweep id)."""
    folder = tmp_path_factory.mktemp("past")
    diabetes_frame().to_csv(folder / "diabetes.csv", index=False)
    store = Store(folder / "base.duckdb")
    first = run_sweep(spec_from(folder, MODELS, name="a.yaml"), store=store, jobs=1,
                      labels={"purpose": "baseline", "data": "2026-11"}, note="first grid")
    second = run_sweep(spec_from(folder, CHANGED, name="b.yaml"), store=store, jobs=1,
                       labels={"purpose": "tuned"})
    return folder, store, first.sweep_id, second.sweep_id


@pytest.fixture(params=["file", "server"])
def store(request, base, tmp_path):
    """A store of the given kind holding the base sweeps (its own copy, free to change)."""
    if request.param == "file":
        shutil.copy(base[1].path, tmp_path / "copy.duckdb")
        return Store(tmp_path / "copy.duckdb")
    pg = request.getfixturevalue("pg")
    copy = Store(pg.create_database(f"past_{next(_names)}"))
    merge_store(copy, base[1].path)
    return copy


def _prefix(sweep_id: str, other: str) -> str:
    """The shortest prefix of `sweep_id` that `other` does not share (ids of sweeps started
    in the same second can share their first random characters too)."""
    n = next(i for i in range(1, len(sweep_id) + 1) if not other.startswith(sweep_id[:i]))
    return sweep_id[:n]


def invoke(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def _rows(store: Store, table: str, sweep_id: str | None = None) -> pd.DataFrame:
    where = "" if sweep_id is None else f" where sweep_id = '{sweep_id}'"
    return store.query(f"select * from {table}{where} order by all")


# -- notes and labels ----------------------------------------------------------------------
def test_run_records_labels_and_note_as_rows(store, base):
    _, _, first, second = base
    labels = store.query("select sweep_id, key, value from sweep_labels order by all")
    assert labels.values.tolist() == sorted([[first, "data", "2026-11"],
                                             [first, "purpose", "baseline"],
                                             [second, "purpose", "tuned"]])
    notes = store.query("select sweep_id, coalesce(note, '(null)') as note from sweeps")
    assert notes.set_index("sweep_id")["note"].to_dict() == {first: "first grid",
                                                              second: "(null)"}
    listed = sweeps(store).table.set_index("sweep_id")
    assert json.loads(listed.loc[first, "labels"]) == {"data": "2026-11", "purpose": "baseline"}


def test_label_command_adds_changes_drops_and_renotes(store, base):
    _, _, first, second = base
    out = invoke("label", "purpose=rerun", "owner=ana", "--drop", "data", "--note",
                 "grid too coarse", "--sweep", _prefix(first, second), "--store", store.path)
    assert out.exit_code == 0, out.output
    assert "owner=ana, purpose=rerun" in out.output and "grid too coarse" in out.output
    rows = store.query("select key, value from sweep_labels where sweep_id = ? order by key",
                       [first])
    assert rows.values.tolist() == [["owner", "ana"], ["purpose", "rerun"]]
    set_labels(store, first, note="")
    assert store.query("select note is null as gone from sweeps where sweep_id = ?",
                       [first]).gone[0]
    assert len(_rows(store, "sweep_labels", second)) == 1  # the other sweep untouched
    again = invoke("label", "--drop", "data", "--drop", "owner", "--sweep", first,
                   "--store", store.path)  # 'data' went above: said, not silently done
    assert again.exit_code == 0, again.output
    assert f"note: sweep {first} had no label 'data'; nothing to drop." in again.output
    assert "no label 'owner'" not in again.output
    assert store.query("select key from sweep_labels where sweep_id = ?",
                       [first])["key"].tolist() == ["purpose"]


@pytest.mark.parametrize("bad, words", [
    ("purpose", "has no '='; write a label as KEY=VALUE, e.g. purpose=baseline.\n"),
    ("bad key=x", "not a plain name"), ("k=", "empty value"),
    ("k=a\x1b[31mb", "control character")])
def test_bad_labels_are_refused_and_nothing_changes(base, tmp_path, bad, words):
    shutil.copy(base[1].path, tmp_path / "s.duckdb")
    before = (tmp_path / "s.duckdb").read_bytes()
    out = CliRunner().invoke(main, ["label", bad, "--store", str(tmp_path / "s.duckdb")])
    assert out.exit_code == 2 and words in out.output and "Traceback" not in out.output
    assert (tmp_path / "s.duckdb").read_bytes() == before


def test_a_run_label_with_an_empty_value_points_to_label_drop_and_records_nothing(base,
                                                                                   tmp_path):
    folder = base[0]
    spec = write_spec(folder, MODELS, name="empty_label.yaml")
    out = CliRunner().invoke(main, ["run", str(spec), "--label", "purpose=", "--store",
                                    str(tmp_path / "s.duckdb")])
    assert out.exit_code == 2 and out.output == (
        "Error: label purpose has an empty value; give one (purpose=VALUE). To take a label "
        "off a sweep: foldwise label --drop purpose.\n")
    assert not (tmp_path / "s.duckdb").exists()


def test_sweeps_filters_by_label_name_status_and_age(store, base):
    _, _, first, second = base
    pick = lambda **kw: sweeps(store, Selection.of(**kw)).table["sweep_id"].tolist()
    assert pick(labels=["purpose=baseline"]) == [first]
    assert pick(labels=["purpose"]) == [second, first]
    assert pick(labels=["purpose", "data=2026-11"]) == [first]
    with pytest.raises(StoreError, match="^--label 'purpose=nothing' is a label of no sweep in "
                       r"store .*; its labels of key purpose: purpose=baseline, purpose=tuned\."):
        pick(labels=["purpose=nothing"])
    with pytest.raises(StoreError, match="^--label 'purpse' is a label key of no sweep in store "
                       r".*; its label keys: data, purpose\. Did you mean 'purpose'\?$"):
        pick(labels=["purpse"])
    assert pick(labels=["purpose=baseline"], status="interrupted") == []  # both exist
    assert pick(name="small", status="finished") == [second, first]
    assert pick(status="interrupted") == [] and pick(older_than="1d") == []
    out = invoke("sweeps", "--label", "purpose=tuned", "--format", "json", "--store", store.path)
    (row,) = json.loads(out.output)
    assert row["sweep_id"] == second and row["labels"] == {"purpose": "tuned"}


@pytest.mark.parametrize("command", [["sweeps"], ["remove", "--yes"], ["export", "OUT"]])
def test_a_label_filter_with_an_empty_value_says_how_to_match_any_value(base, tmp_path,
                                                                       command):
    shutil.copy(base[1].path, tmp_path / "s.duckdb")
    before = (tmp_path / "s.duckdb").read_bytes()
    command = [str(tmp_path / "out") if c == "OUT" else c for c in command]
    out = CliRunner().invoke(main, [*command, "--label", "purpose=", "--store",
                                    str(tmp_path / "s.duckdb")])
    assert out.exit_code == 2 and "--drop" not in out.output, out.output
    assert out.output == ("Error: label filter 'purpose=' has an empty value; give --label "
                          "purpose to match any value of it, or --label purpose=VALUE to "
                          "match one.\n")
    assert (tmp_path / "s.duckdb").read_bytes() == before and not (tmp_path / "out").exists()


def test_listing_sweeps_leaves_pandas_unloaded_and_shows_every_sweep(base, tmp_path):
    """`foldwise sweeps` answers from plain rows: a fresh process lists both sweeps with their
    labels and note, and never imports pandas (a third of its start-up otherwise)."""
    import subprocess
    import sys

    _, store, first, second = base
    code = ("import sys; from runner.cli import main\n"
            "try:\n    main(['sweeps', '--store', sys.argv[1]])\n"
            "except SystemExit as done:\n    assert not done.code, done.code\n"
            "print('pandas loaded:', 'pandas' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code, str(store.path)], capture_output=True,
                         text=True, env={**os.environ, "COLUMNS": "250"}, check=True).stdout
    assert out.rstrip().endswith("pandas loaded: False")
    lines = [line for line in out.splitlines() if first in line or second in line]
    assert [second in lines[0], first in lines[1]] == [True, True]
    assert "purpose=tuned" in lines[0] and "first grid" in lines[1]
    assert "data=2026-11, purpose=baseline" in lines[1]
    listed = sweeps(store)
    assert listed.table["sweep_id"].tolist() == [second, first]
    assert [r["labels"] for r in listed.records()] == [
        '{"purpose": "tuned"}', '{"data": "2026-11", "purpose": "baseline"}']


def test_an_unchanged_rerun_with_if_changed_records_nothing(store, base):
    folder, _, _, second = base
    before = sweeps(store).table["sweep_id"].tolist()
    same = run_sweep(spec_from(folder, CHANGED, name="b.yaml"), store=store, jobs=1,
                     if_changed=True)
    assert (same.status, same.sweep_id, same.n_fold_rows) == ("unchanged", second, 108)
    assert sweeps(store).table["sweep_id"].tolist() == before
    other = run_sweep(spec_from(folder, MODELS, name="a.yaml"), store=store, jobs=1,
                      if_changed=True, labels={"purpose": "check"}, note="rerun")
    assert other.status == "finished" and other.n_reused == 6  # the latest ran the other grid
    assert store.query("select key, value, note from sweep_labels join sweeps using "
                       "(sweep_id) where sweep_id = ?", [other.sweep_id]).values.tolist() == [
        ["purpose", "check", "rerun"]]
    assert sweeps(store).table["sweep_id"].tolist() == [other.sweep_id, *before]
    out = invoke("run", folder / "a.yaml", "--if-changed", "--quiet", "--label", "x=y",
                 "--store", store.path)
    assert out.output.startswith(f"nothing recorded: sweep {other.sweep_id}, the latest")
    assert "the labels and note given were not recorded" in out.output
    assert len(sweeps(store).table) == 3


# -- diff ----------------------------------------------------------------------------------
def _reference_pair(store, first, second, cell_a, cell_b):
    """The corrected resampled t-test (Nadeau & Bengio 2003) of b − a, with numpy and
    scipy's t distribution as the reference."""
    q = ('select "repeat", fold, value, n_valid, n_train from fold_scores where sweep_id = ? '
         "and cell_id = ? and metric = 'rmse'")
    a, b = (store.query(q, [s, c]).set_index(["repeat", "fold"]) for s, c in
            ((first, cell_a), (second, cell_b)))
    d = (b["value"] - a["value"]).to_numpy()
    n = len(d)
    ratio = float((a["n_valid"] / a["n_train"]).mean())
    se = math.sqrt((1 / n + ratio) * d.var(ddof=1))
    t = d.mean() / se
    return n, d.mean(), se, 2 * stats.t.sf(abs(t), n - 1)


def test_diff_shows_the_one_changed_line_same_data_and_paired_changes(store, base):
    _, _, first, second = base
    result = diff_sweeps(store)  # default: the latest two of the spec
    assert (result.a["sweep_id"], result.b["sweep_id"]) == (first, second)
    changed = [x for x in result.spec_diff if x[:1] in "+-" and x[:3] not in ("---", "+++")]
    assert changed == [f"-  {OLD_LINE}", f"+  {NEW_LINE}"]
    assert result.data_same and result.plan_same and result.paired
    assert result.versions == {} and result.labels == {"data": ("2026-11", None),
                                                       "purpose": ("baseline", "tuned")}
    table = result.table.set_index("model")
    assert list(table.index) == ["ridge", "tree"]
    tree = table.loc["tree"]  # its cells are shared: the same pick, identical fold scores
    assert tree["same_cell"] and tree["folds"] == 6 and tree["mean_diff"] == 0
    assert tree["ties"] == 6 and math.isnan(tree["p_value"])  # nothing to test
    ridge = table.loc["ridge"]
    n, mean, se, p = _reference_pair(store, first, second, ridge["cell_a"], ridge["cell_b"])
    assert ridge["folds"] == n == 6
    assert ridge["mean_diff"] == pytest.approx(mean, rel=1e-9, abs=1e-12)
    assert ridge["se"] == pytest.approx(se, rel=1e-9)
    assert ridge["p_value"] == pytest.approx(p, rel=1e-9)
    assert ridge["cv_change"] == pytest.approx(ridge["mean_b"] - ridge["mean_a"], abs=1e-9)
    picked = {s: picks(store, s, rule="one_se").table.set_index("model") for s in (first, second)}
    assert ridge["cell_a"] == picked[first].loc["ridge", "cell_id"]
    assert ridge["cell_b"] == picked[second].loc["ridge", "cell_id"]
    out = invoke("diff", "--store", store.path)
    assert out.exit_code == 0, out.output
    lines = out.output.splitlines()
    assert f"  -  {OLD_LINE}" in lines and f"  +  {NEW_LINE}" in lines
    assert sum(1 for x in lines if x.startswith(("  -", "  +"))) == 4  # header pair + the line
    assert any(x.startswith("data: same") for x in lines)
    assert f"folds: paired on identical folds ({result.shared_cells} shared cells)" in lines
    assert ("tree: the same cell, with identical fold scores in both sweeps; nothing to "
            "test.") in out.output


def test_diff_of_one_sweep_and_of_two_named_sweeps(store, base):
    _, _, first, second = base
    one = diff_sweeps(store, second)
    two = diff_sweeps(store, _prefix(second, first), _prefix(first, second))  # B is older
    assert one.a["sweep_id"] == first and two.a["sweep_id"] == second
    assert two.table.set_index("model")["mean_diff"]["ridge"] == pytest.approx(
        -one.table.set_index("model")["mean_diff"]["ridge"], abs=1e-12)
    with pytest.raises(QueryError, match="first sweep of spec 'small'"):
        diff_sweeps(store, first)


def _holm_by_hand(p_values):
    """Holm (1979), "A simple sequentially rejective multiple test procedure", Scand. J.
    Statist. 6, 65-70: the i-th smallest of m p-values times (m - i + 1), made
    non-decreasing, at most 1."""
    m = len(p_values)
    order = sorted(range(m), key=lambda j: p_values[j])
    adjusted, running = [0.0] * m, 0.0
    for i, j in enumerate(order, start=1):
        running = max(running, p_values[j] * (m - i + 1))
        adjusted[j] = min(1.0, running)
    return adjusted


def test_diff_adjusts_p_over_the_models_tested_only(base, tmp_path):
    # ridge and lasso change their picks; the tree picks the same cell with the same fold
    # scores, so it is not tested and does not count among Holm's m hypotheses
    folder = base[0]
    store = Store(tmp_path / "s.duckdb")
    lasso = "lasso: {family: linear, grid: {penalty: l1, alpha: [0.01, 0.1, 1.0]}}\n"
    first = run_sweep(spec_from(folder, MODELS + lasso, name="h1.yaml"), store=store, jobs=1)
    changed = (MODELS + lasso).replace("[0.1, 1.0, 10.0]", "[300.0]").replace(
        "[0.01, 0.1, 1.0]", "[6.0]")
    second = run_sweep(spec_from(folder, changed, name="h2.yaml"), store=store, jobs=1)
    table = diff_sweeps(store, first.sweep_id, second.sweep_id).table.set_index("model")
    tree = table.loc["tree"]
    assert tree["same_cell"] and tree["ties"] == tree["folds"] == 6
    assert tree["mean_diff"] == 0 and tree["se"] == 0
    assert math.isnan(tree["p_value"]) and math.isnan(tree["p_holm"])
    p = [table.loc[m, "p_value"] for m in ("ridge", "lasso")]
    for m in ("ridge", "lasso"):
        n, _, _, reference_p = _reference_pair(store, first.sweep_id, second.sweep_id,
                                               table.loc[m, "cell_a"], table.loc[m, "cell_b"])
        assert table.loc[m, "p_value"] == pytest.approx(reference_p, rel=1e-9)
    assert max(p) * 2 < 1  # the adjustment is not capped: m = 2 and m = 3 differ
    assert [table.loc[m, "p_holm"] for m in ("ridge", "lasso")] == pytest.approx(
        _holm_by_hand(p), rel=1e-12)
    out = invoke("diff", first.sweep_id, second.sweep_id, "--store", store.path)
    assert out.exit_code == 0, out.output
    assert "note: one test per model whose fold scores changed (2 tests;" in out.output
    assert ("  tree: the same cell, with identical fold scores in both sweeps; nothing to "
            "test.") in out.output.splitlines()


def test_diff_names_the_sweep_where_a_shared_model_has_no_complete_cell(store):
    import dataclasses

    from runner.read.past_views import diff_view

    result = diff_sweeps(store)
    table = result.table.copy()
    table.loc[table["model"] == "ridge", ["cell_a", "params_a"]] = None  # none complete in A
    sentences = diff_view(dataclasses.replace(result, table=table)).sentences
    assert "ridge: no picked cell in sweep A (none complete)." in sentences


@pytest.fixture(scope="module")
def varied(base, tmp_path_factory):
    """A file store with the base sweeps and two more of spec 'small': one on another fold
    seed (the plan changed), then one on fewer rows (the data changed):
    (store, plan sweep id, data sweep id)."""
    folder = base[0]
    store = Store(tmp_path_factory.mktemp("varied") / "s.duckdb")
    shutil.copy(base[1].path, store.path)
    path = write_spec(folder, MODELS, name="c.yaml")
    path.write_text(path.read_text().replace("seed: 17", "seed: 18"))
    plan_run = run_sweep(load_spec(path), store=store, jobs=1)
    diabetes_frame().iloc[:400].to_csv(folder / "fewer.csv", index=False)
    data_run = run_sweep(spec_from(folder, MODELS, name="d.yaml", data="fewer.csv"),
                         store=store, jobs=1)
    return store, plan_run.sweep_id, data_run.sweep_id


def test_diff_is_honest_when_the_folds_differ(base, varied):
    first = base[2]
    store, plan_sweep, data_sweep = varied
    diff = diff_sweeps(store, first, plan_sweep)
    assert diff.data_same and diff.plan_same is False and not diff.paired
    assert diff.not_paired == "not paired: the folds differ (the plan changed)"
    assert diff.table["p_value"].isna().all() and diff.table["cv_change"].notna().all()
    diff = diff_sweeps(store, first, data_sweep)
    assert not diff.data_same and diff.not_paired.endswith("(the data changed)")
    out = invoke("diff", first, data_sweep, "--store", store.path)
    assert "data: changed" in out.output and "not paired: the folds differ" in out.output
    assert "training / test rows 331 / 111 → 300 / 100" in out.output


def test_diff_says_when_the_same_file_is_split_otherwise(base, tmp_path):
    # Same data file, another test fraction: 'data: same' beside only B's row counts read
    # as if the training and test rows were unchanged
    folder, base_store, first, _ = base
    shutil.copy(base_store.path, tmp_path / "s.duckdb")
    store = Store(tmp_path / "s.duckdb")
    path = write_spec(folder, MODELS, name="split.yaml")
    path.write_text(path.read_text().replace("fraction: 0.25", "fraction: 0.3"))
    other = run_sweep(load_spec(path), store=store, jobs=1).sweep_id
    out = invoke("diff", first, other, "--store", store.path)
    assert "data: same file (SHA-256 " in out.output
    assert "split otherwise: training / test rows 331 / 111 → 309 / 133" in out.output
    assert "not paired: the folds differ (the plan changed)" in out.output
    plain = invoke("diff", first, base[3], "--store", store.path)
    assert "; 331 / 111 training / test rows)" in plain.output  # same file, same split


# -- a model's history ---------------------------------------------------------------------
def test_history_picks_what_pick_picks_in_every_sweep(store, base):
    _, _, first, second = base
    for rule in (None, "best"):
        result = model_history(store, "ridge", rule=rule)
        assert result.table["sweep_id"].tolist() == [first, second]
        for row in result.table.itertuples(index=False):
            chosen = picks(store, row.sweep_id, rule=rule or "one_se").table.set_index("model")
            assert row.cell_id == chosen.loc["ridge", "cell_id"]
            assert row.mean == pytest.approx(chosen.loc["ridge", "mean"], rel=1e-12)
            assert row.se == pytest.approx(chosen.loc["ridge", "se"], rel=1e-12)
            assert row.test == pytest.approx(chosen.loc["ridge", "test"], rel=1e-12)
    family = model_history(store, family="pruned_tree")
    assert family.models == ("tree",) and family.table["spec_changed"].tolist() == [False, True]
    out = invoke("history", "--model", "ridge", "--format", "csv", "--store", store.path)
    assert out.exit_code == 0 and out.output.count("\n") == 3
    with pytest.raises(QueryError,
                       match="--model 'lasso' is no model of any sweep of spec 'small'"):
        model_history(store, "lasso")


def test_history_of_a_model_only_some_sweeps_hold_says_how_many_lack_it(base, tmp_path):
    folder = base[0]
    store = Store(tmp_path / "s.duckdb")
    shutil.copy(base[1].path, store.path)
    lasso = "lasso: {family: linear, grid: {penalty: l1, alpha: [0.1, 1.0]}}\n"
    last = run_sweep(spec_from(folder, MODELS + lasso, name="e.yaml"), store=store, jobs=1)
    result = model_history(store, "lasso")
    assert result.table["sweep_id"].tolist() == [last.sweep_id] and result.n_sweeps == 3
    out = invoke("history", "--model", "lasso", "--store", store.path)
    assert out.exit_code == 0, out.output
    said = ("lasso is in 1 of the 3 sweeps of spec 'small'; the 2 without it are not "
            "listed.")
    assert said in " ".join(out.output.split())
    out = invoke("history", "--family", "linear", "--store", store.path)
    assert said in " ".join(out.output.split()) and "ridge is in" not in out.output
    out = invoke("history", "--model", "ridge", "--store", store.path)
    assert " is in " not in out.output


def test_history_of_a_model_only_another_spec_holds_names_that_spec(base, tmp_path):
    folder = base[0]
    store = Store(tmp_path / "s.duckdb")
    shutil.copy(base[1].path, store.path)
    path = write_spec(folder, "tree: {family: pruned_tree, grid: {ccp_alpha: [0.0]}}",
                      name="other.yaml")
    path.write_text(path.read_text().replace("name: small", "name: other spec"))
    run_sweep(load_spec(path), store=store, jobs=1)
    out = invoke("history", "--model", "ridge", "--store", store.path)
    assert out.exit_code == 2 and out.output == (
        "Error: --model 'ridge' is no model of any sweep of spec 'other spec'; its models: "
        "tree. "
        "Spec 'small' holds it: give --name small.\n")
    with pytest.raises(QueryError, match="its families: pruned_tree. Spec 'small' holds it"):
        model_history(store, family="linear")
    out = invoke("history", "--model", "ridge", "--name", "small", "--store", store.path)
    assert out.exit_code == 0, out.output


def test_history_of_a_model_under_another_family_names_its_family(base):
    store = base[1]
    out = invoke("history", "--model", "tree", "--family", "linear", "--store", store.path)
    assert out.exit_code == 2 and "Traceback" not in out.output, out.output
    assert out.output == ("Error: model 'tree' of spec 'small' is of family 'pruned_tree', "
                          "not 'linear'; ask for the model or for a family, not both.\n")
    with pytest.raises(QueryError, match="^--family 'forst' is no family of any sweep of spec "
                                         "'small'; its families: linear, pruned_tree.$"):
        model_history(store, family="forst")


@pytest.fixture(scope="module")
def defaults_picked(base, tmp_path_factory):
    """Two sweeps of spec 'small' in a store of their own: the first scores rmse alone and
    sweeps ridge at alpha 1.0000001, the second scores mae and rmse and sweeps ridge at
    1.0 (the default); both sweep one tree of every default: (store, first id, second id)."""
    folder = base[0]
    store = Store(tmp_path_factory.mktemp("defaults") / "s.duckdb")
    models = ("ridge: {family: linear, grid: {penalty: l2, alpha: [1.0000001]}}\n"
              "tree: {family: pruned_tree, grid: {ccp_alpha: [0.0], min_samples_leaf: [1]}}\n")
    ids = []
    for name, alpha, metrics in (("e1.yaml", "1.0000001", "[rmse]"),
                                 ("e2.yaml", "1.0", "[mae, rmse]")):
        path = write_spec(folder, models.replace("1.0000001", alpha), name=name)
        path.write_text(path.read_text().replace("[rmse, mae, r2]", metrics))
        ids.append(run_sweep(load_spec(path), store=store, jobs=1).sweep_id)
    return store, *ids


def test_history_of_a_sweep_without_the_metric_shows_no_complete_cell(defaults_picked):
    # the first sweep has no mae score (the latest sweep's first metric), so nothing is
    # picked there (the command crashed with a TypeError on that row)
    store, first, second = defaults_picked
    out = invoke("history", "--model", "ridge", "--store", store.path)
    assert out.exit_code == 0, out.output
    row = next(x for x in out.output.splitlines() if first in x)
    assert "(no complete cell)" in row


def test_history_shows_every_parameter_of_the_pick_and_agrees_with_pick_changed(
        defaults_picked):
    # a pick of every default read '(defaults)', and alpha 1.0000001 then the default 1.0
    # read alike once rounded: every parameter is shown now, floats in full, so two rows
    # read alike exactly when 'pick' is not marked
    store, first, second = defaults_picked
    shown = {}
    for model in ("ridge", "tree"):
        out = invoke("history", "--model", model, "--metric", "rmse", "--store", store.path)
        assert out.exit_code == 0, out.output
        shown[model] = [next(x for x in out.output.splitlines() if s in x)
                        for s in (first, second)]
    assert "alpha=1.0000001, penalty=l2" in shown["ridge"][0]
    assert "alpha=1.0, penalty=l2" in shown["ridge"][1]
    assert "pick" in shown["ridge"][1]
    every = "ccp_alpha=0.0, max_depth=None, max_features=None, min_samples_leaf=1"
    assert every in shown["tree"][0] and every in shown["tree"][1]
    assert "pick" not in shown["tree"][1] and "(defaults)" not in "".join(shown["tree"])
    history = model_history(store, metric="rmse")
    texts = {(r.sweep_id, r.model): params_text(r.params, exact=True)
             for r in history.table.itertuples(index=False)}
    for r in history.table.itertuples(index=False):
        if r.sweep_id == second:
            assert r.pick_changed == (texts[first, r.model] != texts[second, r.model])
    assert history.table["pick_changed"].tolist().count(True) == 1


def test_history_figure_marks_where_the_data_and_the_spec_changed(varied, tmp_path):
    from runner.read.history_figures import history_figure

    store = varied[0]
    result = model_history(store, "ridge")
    assert result.table["data_changed"].tolist() == [False, False, False, True]
    assert result.table["spec_changed"].tolist() == [False, True, True, True]
    # "pick changed" means another grid point, not another cell id (a new plan or new
    # data give the same grid point a new id)
    params = [json.dumps(json.loads(p), sort_keys=True) for p in result.table["params"]]
    assert result.table["pick_changed"].tolist() == [False] + [
        a != b for a, b in zip(params, params[1:])]
    assert result.table["cell_id"].nunique() == 4
    fig = history_figure(store, model="ridge")
    marks = [line.get_gid() for line in fig.axes[0].get_lines() if line.get_gid()]
    assert marks == ["spec_changed", "spec_changed", "data_changed"]
    out = invoke("plot", "history", "--model", "ridge", "--store", store.path, "--out-dir",
                 tmp_path / "plots", "--image", "png")
    assert out.exit_code == 0 and out.output.strip().endswith("-history-small-ridge.png")


# -- removal -------------------------------------------------------------------------------
def test_removal_asks_first_and_keeps_sweeps_that_reused_rows(store, base):
    _, _, first, second = base
    reused = store.query("select count(*) n from cells where sweep_id = ? and reused_from = ?",
                         [second, first]).n[0]
    assert reused == 5  # the second sweep copied 5 of its 6 cells from the first
    before = {t: _rows(store, t, second) for t in TABLES
              if t not in ("metrics", "model_coefficients")}
    shown = summary(store, second).table
    out = invoke("remove", first, "--dry-run", "--store", store.path)
    assert "would remove 1 sweep" in out.output and "dry run: nothing removed." in out.output
    assert "rows per table: sweeps 1, sweep_labels 2, cells 6, fold_scores 108" in " ".join(
        out.output.split())
    out = CliRunner().invoke(main, ["remove", first, "--store", str(store.path)], input="n\n")
    assert "nothing removed." in out.output
    out = CliRunner().invoke(main, ["remove", first, "--store", str(store.path)], input="")
    assert out.exit_code == 2 and "Traceback" not in out.output and "Aborted" not in out.output
    assert out.stderr.endswith(
        "Error: the input ended before 'Remove 1 sweep(s)?' was answered, so nothing was "
        "removed; pass --yes to remove without asking (for scripts), or --dry-run to only "
        "list them.\n")
    assert len(_rows(store, "fold_scores", first)) == 108
    out = invoke("remove", first, "--yes", "--store", store.path)
    assert out.exit_code == 0 and "removed 1 sweep(s) and " in out.output
    for table in before:
        assert _rows(store, table, first).empty, table
        pd.testing.assert_frame_equal(_rows(store, table, second), before[table], obj=table)
    pd.testing.assert_frame_equal(summary(store, second).table, shown)
    assert sweeps(store).table["sweep_id"].tolist() == [second]


def test_removal_by_status_spares_running_sweeps(store, base):
    _, _, first, second = base
    with store._connect(read_only=False) as con:  # a dead run here, a live one elsewhere
        con.execute("update sweeps set status = 'running', host = ?, pid = 2147483000 "
                    "where sweep_id = ?", [socket.gethostname(), first])
        con.execute("update sweeps set status = 'running', host = 'elsewhere', pid = 1 "
                    "where sweep_id = ?", [second])
    with pytest.raises(StoreError, match=f"sweep {second} is still running"):
        remove_sweeps(store, [first, second], alive=lambda pid: False)
    assert len(_rows(store, "fold_scores")) == 216  # refused whole: nothing went
    out = invoke("remove", "--status", "interrupted", "--yes", "--store", store.path)
    assert out.exit_code == 0, out.output
    assert sweeps(store).table["sweep_id"].tolist() == [second]


def test_a_rerun_whose_source_is_removed_meanwhile_fits_what_vanished(base, tmp_path,
                                                                         monkeypatch):
    """The rows a rerun found are removed before it copies them: it fits those cells
    instead, and its scores equal the removed sweep's (same folds and seeds)."""
    import runner.write.engine as engine

    folder, _, first, _ = base
    shutil.copy(base[1].path, tmp_path / "s.duckdb")
    store = Store(tmp_path / "s.duckdb")
    expected = store.query("""select c.model, c.params, f."repeat", f.fold, f.metric, f.value
                              from fold_scores f join cells c using (sweep_id, cell_id)
                              where sweep_id = ? order by all""", [first])
    found_then_removed = engine.find_scores

    def meanwhile(store_, prep, *, fresh):
        found = found_then_removed(store_, prep, fresh=fresh)
        remove_sweeps(store_, [s for s in sweeps(store_).table["sweep_id"]])
        return found

    monkeypatch.setattr(engine, "find_scores", meanwhile)
    again = run_sweep(spec_from(folder, MODELS), store=store, jobs=1)
    assert (again.n_reused, again.n_fitted, again.n_fold_rows) == (0, 6, 108)
    got = store.query("""select c.model, c.params, f."repeat", f.fold, f.metric, f.value
                         from fold_scores f join cells c using (sweep_id, cell_id)
                         where sweep_id = ? order by all""", [again.sweep_id])
    pd.testing.assert_frame_equal(got, expected, check_exact=False, rtol=1e-12)


# -- sharing a part ------------------------------------------------------------------------
def test_labels_and_notes_survive_export_and_merge_row_for_row(store, base, tmp_path):
    export_store(store, tmp_path / "all")
    target = Store(tmp_path / "back.duckdb")
    merge_store(target, tmp_path / "all")
    for table in ("sweeps", "sweep_labels"):
        pd.testing.assert_frame_equal(_rows(target, table), _rows(store, table), obj=table)


def test_export_and_merge_take_only_the_chosen_sweeps(store, base, tmp_path):
    _, _, first, second = base
    counts = export_store(store, tmp_path / "part", "csv",
                          Selection.of(labels=["purpose=tuned"]))
    assert counts["sweeps"] == 1 and counts["fold_scores"] == 108
    manifest = json.loads((tmp_path / "part" / "foldwise-export.json").read_text())
    assert manifest["sweeps"] == [second]
    target = Store(tmp_path / "part.duckdb")
    merged = merge_store(target, tmp_path / "part")
    assert merged.new_sweeps == [second]
    for table in ("sweeps", "sweep_labels", "fold_scores", "cells"):
        pd.testing.assert_frame_equal(_rows(target, table), _rows(store, table, second),
                                      obj=table)
    picked = Store(tmp_path / "picked.duckdb")
    out = invoke("merge", store.path, "--sweep", _prefix(first, second), "--store",
                 picked.path)
    assert out.exit_code == 0 and "merged 1 sweep(s)" in out.output
    assert sweeps(picked).table["sweep_id"].tolist() == [first]
    with pytest.raises(StoreError, match="--label 'purpose=nothing' is a label of no sweep of "):
        merge_store(picked, store.path, Selection.of(labels=["purpose=nothing"]))


def test_a_store_of_schema_version_2_is_merged_and_diffed(base, tmp_path):
    """What a version-2 store held: no labels table, no note or plan column."""
    import duckdb

    _, store, first, second = base
    old = tmp_path / "v2.duckdb"
    shutil.copy(store.path, old)
    with duckdb.connect(str(old)) as con:
        con.execute("drop table sweep_labels")
        con.execute("alter table sweeps drop column note")
        con.execute("alter table sweeps drop column plan")
        con.execute("update foldwise_meta set value = '2' where key = 'schema_version'")
    target = Store(tmp_path / "new.duckdb")
    assert merge_store(target, old).new_sweeps == [first, second]
    assert _rows(target, "sweep_labels").empty
    diff = diff_sweeps(target)
    assert diff.plan_same is True and diff.paired and diff.shared_cells == 5


def test_diff_of_sweeps_that_do_not_share_every_model(base, tmp_path):
    # B drops the tree: the diff still prints, the tree's B side a dash, and ridge (in both,
    # on the same folds) keeps its paired change; the table, CSV and JSON say which models
    # only one sweep holds.
    folder = base[0]
    store = Store(tmp_path / "s.duckdb")
    shutil.copy(base[1].path, store.path)
    only_ridge = CHANGED.split("\n")[1]
    dropped = run_sweep(spec_from(folder, only_ridge, name="b.yaml"), store=store, jobs=1)
    out = invoke("diff", base[3], dropped.sweep_id, "--store", store.path)
    assert out.exit_code == 0, out.output
    tree_line = next(line for line in out.output.splitlines() if line.startswith("│ tree"))
    assert "—" in tree_line
    diff = diff_sweeps(store, base[3], dropped.sweep_id).table.set_index("model")
    assert diff["mean_diff"]["ridge"] == pytest.approx(0.0, abs=1e-12)
    # the dash is explained: a line names the models only one sweep holds, and so does a
    # sentence per model and a field of every row in CSV and JSON
    assert (f"models only in sweep A ({base[3]}), not in B, so not compared (shown with a "
            "dash on the B side): tree") in out.output.splitlines()
    assert "  tree: only in sweep A, not in sweep B; not compared." in out.output.splitlines()
    assert "only in sweep B" not in out.output
    assert diff["in_sweeps"].to_dict() == {"ridge": "both", "tree": "A only"}
    back = invoke("diff", dropped.sweep_id, base[3], "--store", store.path, "--format", "json")
    assert back.exit_code == 0
    rows = json.loads(back.stdout)
    assert {r["model"]: r["in_sweeps"] for r in rows} == {"ridge": "both", "tree": "B only"}
    assert (f"models only in sweep B ({base[3]}), not in A, so not compared (shown with a "
            "dash on the A side): tree") in back.stderr.splitlines()


def test_a_sweep_that_recorded_no_data_hash_claims_neither_same_nor_changed_data(base, tmp_path):
    # a store from an older foldwise or a colleague may hold NULL where the data's SHA-256
    # belongs; history crashed on it, and diff of two such sweeps called the data the same
    # and paired their folds
    shutil.copy(base[1].path, tmp_path / "copy.duckdb")
    store = Store(tmp_path / "copy.duckdb")
    _, _, first, second = base
    with duckdb.connect(str(store.path)) as con:
        con.execute("update sweeps set data_sha256 = null")
    for fmt in ("table", "csv", "json"):
        out = invoke("history", "--model", "ridge", "--store", store.path, "--format", fmt)
        assert out.exit_code == 0, out.output
    text = invoke("history", "--model", "ridge", "--store", store.path).output
    assert "unknown" in next(x for x in text.splitlines() if second in x)
    assert "data changed" not in text
    result = model_history(store, "ridge")
    assert result.table["data_changed"].tolist() == [False, None]  # the first has no sweep before it
    diff = diff_sweeps(store, first, second)
    assert diff.data_same is None and not diff.paired
    out = invoke("diff", first, second, "--store", store.path)
    assert out.exit_code == 0, out.output
    assert "data: not recorded" in out.output and "data: same" not in out.output


def test_history_figure_writes_each_new_pick_so_that_no_two_picks_read_alike(varied):
    from matplotlib.text import Annotation

    from runner.read.history_figures import history_figure, pick_label

    store = varied[0]
    table = model_history(store, "ridge").table
    fig = history_figure(store, model="ridge")
    written = [t.get_text() for t in fig.axes[0].get_children() if isinstance(t, Annotation)]
    assert len(written) == 1 + int(table["pick_changed"].sum())
    assert all(w.startswith("→ ") for w in written[1:]) and "…" not in "".join(written)
    # values in full, defaults kept: picks 1e-7 apart, or a default against none, differ
    assert pick_label({"alpha": 0.1234567}) != pick_label({"alpha": 0.1234568})
    assert pick_label({"alpha": 0.1234568}, {"alpha": 0.1234567}) == "→ alpha=0.1234568"
    assert pick_label({"alpha": 1.0, "fit_intercept": True}, {"alpha": 1.0}) == \
        "→ fit_intercept=True"
    long = {f"param_{i}": 0.123456789 for i in range(6)}
    assert pick_label(long).replace("\n", " ") == ", ".join(
        f"param_{i}=0.123456789" for i in range(6))


def test_diff_names_each_picked_cell_by_every_param_on_which_the_two_differ(tmp_path):
    from runner.read.past_views import diff_view

    from .store_builder import write_sweep

    path = tmp_path / "s.duckdb"
    scores = [[1.0, 2.0, 1.5, 1.2]]
    write_sweep(path, {"tree": scores}, k=2, repeats=2, sweep_id="20260101-000000-aaaa")
    store = write_sweep(path, {"tree": scores}, k=2, repeats=2,
                        sweep_id="20260102-000000-bbbb")
    with duckdb.connect(str(path)) as con:  # one cell per grid: nothing varies in either
        con.execute("update cells set params = ? where sweep_id = '20260101-000000-aaaa'",
                    [json.dumps({"ccp_alpha": 0.1234567, "min_samples_leaf": 3})])
        con.execute("update cells set params = ? where sweep_id = '20260102-000000-bbbb'",
                    [json.dumps({"ccp_alpha": 0.1234568, "min_samples_leaf": 5})])
    shown = diff_view(diff_sweeps(store, "20260101", "20260102")).table
    assert shown["A cell"].tolist() == ["ccp_alpha=0.1234567, min_samples_leaf=3"]
    assert shown["B cell"].tolist() == ["ccp_alpha=0.1234568, min_samples_leaf=5"]


def test_a_sweep_stored_without_its_fold_count_is_refused_in_words_or_picks_nothing(tmp_path):
    # NULL k (a store from another hand): diff, summary and history crashed on int() of NA;
    # a read of that sweep now says why it cannot, history shows no complete cell for it,
    # and sweeps a dash
    from datetime import datetime

    from .store_builder import write_sweep

    path = tmp_path / "s.duckdb"
    for day, sid in ((1, "20260101-000000-aaaa"), (2, "20260102-000000-bbbb")):
        write_sweep(path, {"m": [[1.0, 2.0, 3.0, 4.0], [1.5, 2.0, 3.0, 4.0]]}, k=2, repeats=2,
                    sweep_id=sid, started_at=datetime(2026, 1, day))
    with duckdb.connect(str(path)) as con:
        con.execute("update sweeps set k = NULL where sweep_id = '20260101-000000-aaaa'")
    for args in (["diff"], ["summary", "--sweep", "20260101"], ["pick", "--sweep", "20260101"]):
        out = invoke(*args, "--store", path)
        assert out.exit_code == 2 and "Traceback" not in out.output
        assert out.output.startswith(
            f"Error: sweep 20260101-000000-aaaa in store {path} has no usable fold count or "
            "metrics recorded (k=missing, repeats=2, metrics=rmse)")
    out = invoke("history", "--model", "m", "--store", path)
    assert out.exit_code == 0, out.output
    row = next(x for x in out.output.splitlines() if "20260101-000000-aaaa" in x)
    assert "(no complete cell)" in row
    out = invoke("sweeps", "--store", path)
    assert "— × 2" in next(x for x in out.output.splitlines() if "20260101-000000-aaaa" in x)

"""A colleague's store, value by value: every read command on a store whose column holds a
value its type allows but no sweep writes (NULL, NaN, a huge number, control characters,
broken JSON, a row gone or repeated) answers or refuses in one paragraph, never with a
traceback, exit 1, a hang or terminal control characters (tests/store_mutations.py)."""

from __future__ import annotations

import shutil
import unicodedata

import pytest
from click.testing import CliRunner

from runner.cli import main

from .store_mutations import INTERVALS, Case, build_base, commands, judge, mutate, reads

TASKS = ("regression", "classification")


@pytest.fixture(scope="module")
def bases(tmp_path_factory):
    """Per task, built when first asked: (folder, store file, {command name: argv},
    {command name: what it reads})."""
    class Bases(dict):
        def __missing__(self, task):
            folder = tmp_path_factory.mktemp(task)
            store = build_base(folder, task)
            argvs = commands(folder, store, folder / "out")
            self[task] = folder, store, argvs, {name: reads(argv)
                                                for name, argv in argvs.items()}
            return self[task]

    return Bases()


def _copy(bases, task: str, case: Case, tmp_path):
    """The mutated copy's store and its commands (out files under tmp_path)."""
    folder, store, argvs, _ = bases[task]
    into = tmp_path / "s.duckdb"
    assert mutate(store, into, case), case.name
    return into, {name: [a.replace(str(folder / "out"), str(tmp_path / "out"))
                         .replace(str(store), str(into)) for a in argv]
                  for name, argv in argvs.items()}


def _run(argv):
    return CliRunner().invoke(main, argv)


def _plain(text: str) -> bool:
    return not any(unicodedata.category(c) == "Cc" and c != "\n" for c in text)


def test_an_error_quoting_stored_labels_prints_them_without_control_characters(bases, tmp_path):
    _, argvs = _copy(bases, "regression", Case("cells", "model", "control"), tmp_path)
    out = _run(argvs["path tree"])
    assert out.exit_code == 2 and out.output.count("\n") == 1, out.output
    assert out.output.startswith("Error: --model 'tree' is no model") and _plain(out.output), \
        out.output
    assert "[2J" in out.output  # the label's words stay, its control characters gone


def test_tick_labels_from_stored_words_are_drawn_without_control_characters(bases, tmp_path):
    _, argvs = _copy(bases, "regression", Case("cells", "family", "control"), tmp_path)
    out = _run([("svg" if a == "png" else a) for a in argvs["plot models"]])
    assert out.exit_code == 0 and _plain(out.output), out.output
    assert "Glyph" not in out.output and out.output.count("\n") == 1, out.output
    svg = next((tmp_path / "out" / "plots").glob("*.svg")).read_text()
    assert "\x1b" not in svg and "[2J" in svg


@pytest.mark.parametrize("column, mutation", [("model", "null"), ("model", "empty"),
                                              ("complexity_rank", "null"), ("params", "null"),
                                              ("params", "broken"), ("params", "list"),
                                              ("params", "text")])
@pytest.mark.parametrize("command", ["summary", "path tree", "history", "plot complexity"])
def test_a_cell_without_model_rank_or_params_object_is_refused_naming_the_column(
        bases, tmp_path, column, mutation, command):
    into, argvs = _copy(bases, "regression", Case("cells", column, mutation), tmp_path)
    out = _run(argvs[command])
    assert out.exit_code == 2 and out.output.count("\n") == 1, out.output
    assert out.output.startswith(f"Error: store {into}: table cells, column {column} ")
    assert "foldwise remove" in out.output



@pytest.mark.parametrize("mutation", ["null", "negative", "huge"])
@pytest.mark.parametrize("command", ["pick", "path tree", "history", "plot complexity"])
def test_any_complexity_tier_a_store_holds_is_read(bases, tmp_path, mutation, command):
    """A tier is only an order among a model's cells: NULL (an older store) orders them by
    rank, one value in every cell makes them equally simple; either way the commands answer,
    and the one-SE pick is one of the cells within one SE."""
    into, argvs = _copy(bases, "regression", Case("cells", "complexity_tier", mutation),
                        tmp_path)
    out = _run(argvs[command])
    assert out.exit_code == 0 and "Error" not in out.output, out.output
    if command == "pick":
        from runner.read.queries import cell_stats
        from runner.store import Store

        table = cell_stats(Store(into)).table
        assert table["one_se"].sum() == table["model"].nunique()
        assert table.loc[table["one_se"], "within_one_se"].all()


@pytest.mark.parametrize("mutation", ["null", "negative", "zero", "huge"])
def test_any_feature_count_a_store_holds_is_read(bases, tmp_path, mutation):
    """A count that is not a whole number of at least 1 is unknown: the picks' edge notes
    are then those of an older store; a huge one is only a number to compare with."""
    _, argvs = _copy(bases, "regression", Case("sweeps", "n_features", mutation), tmp_path)
    for command in ("pick", "summary", "report"):
        out = _run(argvs[command])
        assert out.exit_code == 0 and "Error" not in out.output, (command, out.output)


@pytest.mark.parametrize("value", [float("nan"), float("inf"), float("-inf"), 1e308, -1e101])
@pytest.mark.parametrize("command", ["summary", "pick", "compare", "path tree", "diff",
                                     "history", "plot models"])
def test_a_fold_score_that_is_not_finite_is_read_as_undefined(bases, tmp_path, value,
                                                               command):
    """NaN, an infinity or a finite score beyond ±1e100 (whose square DuckDB's standard
    deviation cannot hold) in one fold score: that cell's score is undefined on a fold (as
    a NULL is), and the rest of the sweep reads as before."""
    import duckdb

    folder, store, argvs, _ = bases["regression"]
    into = tmp_path / "s.duckdb"
    shutil.copyfile(store, into)
    with duckdb.connect(str(into)) as con:
        con.execute("update fold_scores set value = ? where fold = 0 and metric = 'rmse' and "
                    "cell_id = (select max(cell_id) from cells where model = 'tree')", [value])
    out = _run([a.replace(str(store), str(into)).replace(str(folder / "out"),
                                                          str(tmp_path / "out"))
                for a in argvs[command]])
    assert out.exit_code == 0 and _plain(out.output), out.output
    assert "RMSE" in out.output or command == "plot models", out.output
    if command == "path tree":  # why, in the words of a score of numbers (not a class's)
        assert ("RMSE is undefined on some folds of 1 cell (the store holds no finite value "
                "within ±1e100 there): their CV mean is over the 1 folds of 2 where it is "
                "defined.") in " ".join(out.output.split()), out.output


@pytest.mark.parametrize("column, mutation", [("n_train", "null"), ("n_train", "zero"),
                                              ("n_train", "negative"), ("n_valid", "zero")])
@pytest.mark.parametrize("command, extra", [("compare", []),
                                            ("pick", ["--se", "corrected"]),
                                            ("history", ["--se", "corrected"]),
                                            ("pick", [])])
def test_fold_counts_that_are_not_positive_refuse_only_the_corrected_variance(
        bases, tmp_path, column, mutation, command, extra):
    """The corrected SE and t-test need n_valid/n_train per fold; the plain SE does not."""
    _, argvs = _copy(bases, "regression", Case("fold_scores", column, mutation), tmp_path)
    out = _run(argvs[command] + extra)
    if command == "pick" and not extra:
        assert out.exit_code == 0 and "plain SE" in out.output, out.output
        return
    assert out.exit_code == 2 and out.output.count("\n") == 1, out.output
    assert "table fold_scores, columns n_train and n_valid hold a count that is missing or " \
           "not positive" in out.output


@pytest.mark.parametrize("column, mutation", [("n_train", "null"), ("n_valid", "zero"),
                                              ("n_train", "negative")])
def test_diff_with_fold_counts_that_are_not_positive_shows_all_but_the_paired_test(
        bases, tmp_path, column, mutation):
    """The paired test needs n_valid/n_train per fold; the spec, data, plan, labels and each
    sweep's picks with their plain CV means do not, so diff shows them (exit 0) and says in
    one line why the folds are not paired and what to do. With --se corrected the picks
    need the counts too: what changed is still shown and the scores' absence said."""
    import json

    import duckdb

    folder, store, argvs, _ = bases["regression"]
    whole = _run(argvs["diff"] + ["--format", "json"])  # the unchanged store's picks
    assert whole.exit_code == 0 and json.loads(whole.stdout)[0]["p_value"] is not None
    into, argvs = _copy(bases, "regression", Case("fold_scores", column, mutation), tmp_path)
    with duckdb.connect(str(into), read_only=True) as con:
        first = con.execute("select min(sweep_id) from sweeps").fetchone()[0]
    out = _run(argvs["diff"])
    assert out.exit_code == 0 and _plain(out.output), out.output
    for line in ("spec: same text", "data: same (SHA-256 ", "plan: same",
                 "labels: team (none) → north"):
        assert line in out.output, out.output
    (why,) = [x for x in out.output.splitlines() if x.startswith("folds: ")]
    assert why == (f"folds: not paired: the folds are the same rows, but sweep {first}'s "
                   "fold rows (table fold_scores) hold an n_train or n_valid that is missing "
                   "or not positive, which the paired test needs; the CV means are compared "
                   "unpaired. Rerun its spec to pair them.")
    assert "ridge: CV RMSE " in out.output and "(not paired)." in out.output
    shown = _run(argvs["diff"] + ["--format", "json"])
    assert shown.exit_code == 0, shown.output
    got, before = json.loads(shown.stdout), json.loads(whole.stdout)
    assert [r["model"] for r in got] == [r["model"] for r in before] == ["ridge", "tree",
                                                                         "forest"]
    for r, b in zip(got, before):  # the plain picks and means, unchanged; no test
        assert (r["cell_a"], r["cell_b"]) == (b["cell_a"], b["cell_b"])
        assert (r["mean_a"], r["mean_b"]) == (b["mean_a"], b["mean_b"])
        assert r["p_value"] is r["folds"] is r["se"] is None
    corrected = _run(argvs["diff"] + ["--se", "corrected"])
    assert corrected.exit_code == 0 and "spec: same text" in corrected.output
    assert (f"scores: not compared: sweep {first}'s fold rows (table fold_scores) hold an "
            "n_train or n_valid that is missing or not positive, which the corrected SE of "
            "--se corrected needs to pick; use --se plain, or rerun its spec (or `foldwise "
            "remove` it).") in corrected.output.splitlines()
    as_json = _run(argvs["diff"] + ["--se", "corrected", "--format", "json"])
    assert as_json.exit_code == 0 and json.loads(as_json.stdout) == []


@pytest.mark.parametrize("mutation", ["null", "empty", "long", "control"])
@pytest.mark.parametrize("command", ["history", "plot history", "summary", "pick"])
def test_a_metric_whose_direction_is_not_lower_or_higher_is_refused(bases, tmp_path,
                                                                    mutation, command):
    _, argvs = _copy(bases, "regression", Case("metrics", "better", mutation), tmp_path)
    out = _run(argvs[command])
    assert out.exit_code == 2 and out.output.count("\n") == 1 and _plain(out.output), out.output
    assert "table metrics, column better of metric 'rmse' is " in out.output


@pytest.mark.parametrize("command", ["summary", "pick", "compare", "history", "diff"])
def test_more_folds_than_a_store_counts_is_refused_naming_k_and_repeats(bases, tmp_path,
                                                                       command):
    _, argvs = _copy(bases, "regression", Case("sweeps", "repeats", "huge"), tmp_path)
    out = _run(argvs[command])
    assert out.exit_code == 2 and out.output.count("\n") == 1, out.output
    assert "table sweeps, columns k and repeats record 2 x 2,147,483,647 folds" in out.output


@pytest.mark.parametrize("column, mutation", [("rule", "null"), ("artefact_bytes", "null"),
                                              ("artefact_bytes", "negative")])
def test_a_built_models_missing_rule_or_size_is_listed_as_unknown(bases, tmp_path, column,
                                                                   mutation):
    _, argvs = _copy(bases, "regression", Case("models", column, mutation), tmp_path)
    out = _run(argvs["models"])
    assert out.exit_code == 0 and "built models" in out.output, out.output
    assert out.output.count("unknown") == 2, out.output  # both built models


def test_a_finding_whose_allowed_is_missing_is_reported_as_not_allowed(bases, tmp_path):
    _, argvs = _copy(bases, "regression", Case("findings", "allowed", "null"), tmp_path)
    out = _run(argvs["report"])
    assert out.exit_code == 0, out.output
    html = (tmp_path / "out" / "r.html").read_text()
    assert "id_column" in html and "(allowed)" not in html


@pytest.mark.parametrize("column, mutation", [("feature", "long"), ("method", "null"),
                                              ("value", "nan"), ("feature", "null"),
                                              ("spread", "negative")])
@pytest.mark.parametrize("command", ["plot importance", "report"])
def test_repeated_or_missing_importances_are_drawn_once_each(bases, tmp_path, column,
                                                             mutation, command):
    """Every feature of a cell made the same (so repeated), no method, or NaN values: the
    importance figure and the report still draw, one bar per cell and feature, or the
    figure refuses in words where nothing is left to rank."""
    _, argvs = _copy(bases, "regression", Case("importances", column, mutation), tmp_path)
    out = _run(argvs[command])
    if command == "plot importance" and column == "method":  # none of the method asked for
        assert out.exit_code == 2 and "no stored permutation importances" in out.output
        return
    if command == "plot importance" and column == "value":  # every value NaN: nothing ranks
        assert out.exit_code == 2 and "permutation importances of sweep" in out.output
        assert "are undefined" in out.output and _plain(out.output), out.output
        return
    assert out.exit_code == 0 and _plain(out.output), out.output
    assert len(list((tmp_path / "out").rglob("*.*"))) == 1  # the report or the PNG


@pytest.mark.parametrize("mutation", ["empty", "control", "null"])
@pytest.mark.parametrize("command", ["plot roc", "report"])
def test_a_sweep_task_no_foldwise_writes_is_refused_and_a_missing_one_inferred(
        bases, tmp_path, mutation, command):
    """An older store records no task: its listed classes make it a class sweep."""
    _, argvs = _copy(bases, "classification", Case("sweeps", "task", mutation), tmp_path)
    out = _run(argvs[command])
    if mutation == "null":  # inferred a class sweep: its roc figure and report draw
        assert out.exit_code == 0, out.output
        return
    assert out.exit_code == 2 and out.output.count("\n") == 1 and _plain(out.output), out.output
    assert "table sweeps, column task is " in out.output


@pytest.mark.parametrize("column, mutation, fault", [
    ("node", "zero", "column node does not number the nodes 0 to n - 1"),
    ("left_child", "huge", "columns left_child and right_child name a node that is not a child"),
    ("left_child", "zero", "columns left_child and right_child name a node that is not a child"),
    ("right_child", "null", "column right_child is empty for a node"),
    ("parent", "negative", "column parent does not name the node whose child it is"),
    ("n_samples", "zero", "column n_samples holds a count below one"),
    ("value", "-inf", "column value is not a finite number for a node")])
def test_stored_nodes_that_are_not_one_tree_are_refused_and_the_report_goes_on(
        bases, tmp_path, column, mutation, fault):
    _, argvs = _copy(bases, "regression", Case("tree_nodes", column, mutation), tmp_path)
    out = _run(argvs["plot tree"])
    assert out.exit_code == 2 and out.output.count("\n") == 1, out.output
    assert f"table tree_nodes, {fault} in the tree of cell " in out.output
    if column in ("node", "value"):  # the report shows the same check's words (2 s a run)
        report = _run(argvs["report"])
        assert report.exit_code == 0, report.output
        assert fault in (tmp_path / "out" / "r.html").read_text()


def test_every_read_command_answers_or_refuses_on_every_hostile_column(bases, tmp_path):
    """The sweeping guard: each table's columns and rows changed in turn (store_mutations.
    matrix) and a command that reads it run on the copy; every run must answer or refuse
    in one paragraph."""
    from .store_mutations import columns, matrix

    plan = {task: (bases[task][1], bases[task][3]) for task in TASKS}
    kinds = {task: {(t, c): k for t, c, k in columns(bases[task][1])} for task in TASKS}
    runs = matrix(plan)
    failed = []
    for n, (task, case, name) in enumerate(runs):
        folder = tmp_path / str(n)
        folder.mkdir()
        _, store, argvs, _ = bases[task]
        into = folder / "s.duckdb"
        if not mutate(store, into, case, kinds[task]):  # a keyed table repeats no row
            case = Case(case.table, None, "delete")
            mutate(store, into, case, kinds[task])
        argv = [a.replace(str(bases[task][0] / "out"), str(folder / "out"))
                .replace(str(store), str(into)) for a in argvs[name]]
        fault = judge(argv)
        if fault:
            failed.append(f"{task} {case.name} `{name}`: {fault}")
    tables = {case.table for _, case, _ in runs}
    assert len(tables) == 18 and len(runs) > 190, (len(tables), len(runs))
    assert not failed, "\n".join(failed)


@pytest.mark.parametrize("task, column, mutation, command", [
    ("regression", "observed", "null", "plot predictions"),
    ("regression", "observed", "inf", "plot predictions"),
    ("regression", "predicted", "nan", "plot predictions"),
    ("classification", "probabilities", "nan", "plot roc"),
    ("classification", "probabilities", "empty", "plot calibration"),
    ("classification", "probabilities", "null", "plot roc"),
    ("classification", "observed_class", "null", "plot roc")])
def test_test_predictions_that_cannot_be_drawn_are_refused_naming_the_column(
        bases, tmp_path, task, column, mutation, command):
    _, argvs = _copy(bases, task, Case("test_predictions", column, mutation), tmp_path)
    out = _run(argvs[command])
    assert out.exit_code == 2 and out.output.count("\n") == 1, out.output
    assert f"table test_predictions, column {column} " in out.output
    if mutation in ("null", "empty") and column != "observed_class":  # one report per task
        report = _run(argvs["report"])  # and figure kind is enough (2 s a run)
        assert report.exit_code == 0, report.output


@pytest.mark.parametrize("column", ["n_leaves", "depth", "features_used"])
def test_a_fold_tree_without_size_or_used_columns_is_reported(bases, tmp_path, column):
    _, argvs = _copy(bases, "regression", Case("tree_folds", column, "null"), tmp_path)
    out = _run(argvs["report"])
    assert out.exit_code == 0, out.output
    html = (tmp_path / "out" / "r.html").read_text()
    assert "fold trees split first on" in html
    assert column != "n_leaves" or "leaves range unknown–unknown" in html


@pytest.mark.parametrize("change", [
    "alter table cells alter params type varchar; update cells set params = '{x'",
    "update cells set complexity_rank = null"])
@pytest.mark.parametrize("command", ["history", "plot history"])
def test_history_refuses_an_earlier_sweeps_unusable_cells_naming_that_sweep(
        bases, tmp_path, change, command):
    """Only the earlier sweep of the spec is changed: history reads its cells too."""
    import duckdb

    folder, store, argvs, _ = bases["regression"]
    into = tmp_path / "s.duckdb"
    shutil.copyfile(store, into)
    with duckdb.connect(str(into)) as con:
        first = con.execute("select min(sweep_id) from sweeps").fetchone()[0]
        con.execute(f"{change} where sweep_id = ?", [first])
    out = _run([a.replace(str(store), str(into)).replace(str(folder / "out"),
                                                          str(tmp_path / "out"))
                for a in argvs[command]])
    assert out.exit_code == 2 and out.output.count("\n") == 1, out.output
    assert "table cells, column " in out.output and f"in sweep {first}," in out.output


def _null_scores(bases, task: str, tmp_path, metric: str, model: str, folds: tuple[int, ...]):
    """A copy whose `metric` is NULL (undefined, as ROC AUC is on a fold lacking a class) on
    `folds` of every cell of `model`; the copy's store and its commands."""
    import duckdb

    folder, store, argvs, _ = bases[task]
    into = tmp_path / "s.duckdb"
    shutil.copyfile(store, into)
    with duckdb.connect(str(into)) as con:
        con.execute("update fold_scores set value = null where metric = ? and list_contains("
                    "?::integer[], fold) and cell_id in (select cell_id from cells where "
                    "model = ?)", [metric, list(folds), model])
    return into, {name: [a.replace(str(store), str(into))
                         .replace(str(folder / "out"), str(tmp_path / "out")) for a in argv]
                  for name, argv in argvs.items()}


@pytest.mark.parametrize("folds, n, sentence", [
    ((0,), 1, "logit and tree both have a ROC AUC on 1 fold only: too few to test"),
    ((0, 1), 0, "ROC AUC is undefined on every fold of logit or tree: nothing to compare")])
def test_a_pair_with_roc_auc_on_fewer_than_two_common_folds_is_shown_not_tested(
        bases, tmp_path, folds, n, sentence):
    """The sweep has 2 folds; the tree's ROC AUC is made undefined on one or both. The pair
    is listed over the folds where both have it, with its difference on that one fold (the
    two stored scores' difference, read here straight from the copy), and no test."""
    import json

    import duckdb

    into, argvs = _null_scores(bases, "classification", tmp_path, "roc_auc", "tree", folds)
    argv = argvs["compare"] + ["--metric", "roc_auc"]
    out = _run(argv)
    assert out.exit_code == 0 and out.output.count("Error") == 0, out.output
    assert sentence in out.output and "p ≈" not in out.output, out.output
    (row,) = [line for line in out.output.splitlines() if "logit − tree" in line]
    assert "±" not in row  # one fold gives no SE: the mean alone, no dangling '±'
    assert row.split("│")[2].strip() == str(n)
    shown = _run(argv + ["--format", "json"])
    assert shown.exit_code == 0, shown.output
    (pair,) = json.loads(shown.stdout)
    assert (pair["model_a"], pair["model_b"], pair["folds"]) == ("logit", "tree", n)
    assert pair["se"] is pair["t"] is pair["p_value"] is pair["p_holm"] is None
    with duckdb.connect(str(into), read_only=True) as con:
        d = con.execute(
            "select a.value - b.value from fold_scores a join fold_scores b using "
            "(sweep_id, \"repeat\", fold, metric) where a.cell_id = ? and b.cell_id = ? and "
            "metric = 'roc_auc' and a.value is not null and b.value is not null and "
            "sweep_id = (select max(sweep_id) from sweeps)",  # the latest, which compare reads
            [pair["cell_a"], pair["cell_b"]]).fetchall()
    assert len(d) == n
    if n:
        assert pair["mean_diff"] == pytest.approx(d[0][0], rel=1e-12)
        assert (pair["wins_a"], pair["wins_b"]) == ((1, 0) if d[0][0] > 0 else (0, 1))
    else:
        assert pair["mean_diff"] is None and pair["wins_a"] == pair["wins_b"] == 0


def test_holm_counts_the_pairs_with_too_few_folds_as_untested_not_as_ties(bases, tmp_path):
    """Three models, the tree's MAE made undefined on one of 2 folds: of the 3 pairs only
    ridge–forest has 2 common folds, so 1 test is made, and the note says why the other two
    were not (it called them pairs with the same score on every fold)."""
    _, argvs = _null_scores(bases, "regression", tmp_path, "mae", "tree", (0,))
    out = _run(argvs["compare"] + ["--metric", "mae"])
    assert out.exit_code == 0, out.output
    text = " ".join(out.output.split())
    assert "ridge and tree both have a MAE on 1 fold only: too few to test" in text
    assert "tree and forest both have a MAE on 1 fold only: too few to test" in text
    assert ("note: 1 pairwise test was made (2 pairs with a score on fewer than 2 common "
            "folds had too few to test);") in text
    assert "same score on every fold" not in text
    assert "MAE is undefined on some folds (the store holds no finite value within ±1e100 there)" in text
    import json

    shown = _run(argvs["compare"] + ["--metric", "mae", "--format", "json"])
    assert {(p["model_a"], p["model_b"]): p["df"] for p in json.loads(shown.stdout)} == {
        ("ridge", "tree"): None, ("ridge", "forest"): 1, ("tree", "forest"): None}
    assert '"df": 1,' in shown.stdout  # a whole number, not 1.0


@pytest.mark.parametrize("name", list(INTERVALS))
def test_prediction_intervals_skip_residuals_that_are_not_finite_or_refuse_in_a_paragraph(
        bases, tmp_path, name):
    """A built model's held-out residuals (its card in the store) changed as no build writes
    them: `predict --interval` answers, skipping those that are not finite numbers with a
    note, or refuses in one paragraph and writes nothing; `card` always answers."""
    import json
    import math

    import duckdb
    import numpy as np
    import pandas as pd

    from .store_mutations import mutate_interval

    change, refusal = INTERVALS[name]
    folder, store, argvs, _ = bases["regression"]
    into = tmp_path / "s.duckdb"
    mutate_interval(store, into, change)
    argv = [a.replace(str(store), str(into)).replace(str(folder / "out"), str(tmp_path))
            for a in argvs["predict 0"]] + ["--interval", "0.8"]
    out = _run(argv)
    written = tmp_path / "p0.csv"
    card = _run([a.replace(str(store), str(into)) for a in argvs["card 0"]])
    assert card.exit_code == 0 and "intervals" in card.output, card.output
    if refusal:
        assert out.exit_code == 2 and out.output.count("\n") == 1, out.output
        assert out.output.startswith("Error: ") and refusal in out.output, out.output
        assert not written.exists()
        return
    assert out.exit_code == 0 and " skipped; " in out.output, out.output
    with duckdb.connect(str(into), read_only=True) as con:
        (text,) = con.execute("select card from models where model_id = ?",
                              [argv[1]]).fetchone()
    listed = json.loads(text)["interval"]["scores"]
    def finite(x) -> bool:
        try:
            return x is not None and math.isfinite(float(x))
        except OverflowError:  # an integer beyond float range
            return False

    kept = np.array([x for x in listed if finite(x)])
    assert f"split conformal on the other {len(kept)}." in " ".join(out.output.split())
    # split conformal (Lei, G'Sell, Rinaldo, Tibshirani & Wasserman 2018, JASA): the
    # ceil((m + 1)·0.8)-th smallest of the m residuals, numpy's inverted-CDF quantile at
    # that rank over m
    m = len(kept)
    q = np.quantile(kept, math.ceil((m + 1) * 0.8) / m, method="inverted_cdf")
    got = pd.read_csv(written)
    np.testing.assert_allclose(got["upper"] - got["predicted"], q, rtol=1e-12)
    np.testing.assert_allclose(got["predicted"] - got["lower"], q, rtol=1e-12)


def test_a_card_holding_nan_is_fetched_and_shown_as_standard_json(bases, tmp_path):
    """NaN and infinities in a stored card (its residuals here): `fetch` wrote no card (a
    traceback) and `card --format json` printed NaN, which no standard JSON reader takes;
    both now give them as null, a missing number, and keep every other value."""
    import json

    import duckdb

    from .store_mutations import mutate_interval

    change, _ = INTERVALS["NaN and infinite residuals"]
    folder, store, argvs, _ = bases["regression"]
    into = tmp_path / "s.duckdb"
    mutate_interval(store, into, change)
    with duckdb.connect(str(into), read_only=True) as con:
        (stored,) = con.execute("select card from models where model_id = ?",
                                [argvs["card 0"][1]]).fetchone()
    stored = json.loads(stored)["interval"]["scores"]

    def strict(text: str) -> dict:
        return json.loads(text, parse_constant=lambda word: pytest.fail(f"{word} in JSON"))

    fetched = _run([a.replace(str(store), str(into)).replace(str(folder / "out"), str(tmp_path))
                    for a in argvs["fetch 0"]])
    assert fetched.exit_code == 0, fetched.output
    shown = _run([a.replace(str(store), str(into)) for a in argvs["card 0"]]
                 + ["--format", "json"])
    assert shown.exit_code == 0, shown.output
    for card in (strict((tmp_path / "m0.card.json").read_text()), strict(shown.stdout)):
        assert card["interval"]["scores"] == [None, None, None, *stored[3:]]

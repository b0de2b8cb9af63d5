"""The plan's size by arithmetic, its limits and how to lift them, the cap on worker
processes, and the data checks that keep a sweep from succeeding wrongly."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from runner.write.budget import BYTES_PER_ROW, check_limits, plan_size
from runner.cli import main
from runner.write.data import MAX_MAGNITUDE, load_frame
from runner.write.engine import prepare, resolve_jobs
from runner.errors import DataError, SpecError
from runner.write.spec import load_spec

from .helpers import spec_from, write_spec

ROOT = Path(__file__).resolve().parents[1]
CORPUS = Path(__file__).parent / "bad_inputs"


def invoke(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def test_arithmetic_size_matches_the_expanded_grid():
    spec = load_spec(ROOT / "specs" / "greenhouse.yaml")
    size = plan_size(spec)
    assert size.cells == len(prepare(spec).cells) == 42
    # rows: 42 cells x 10 folds x 3 metrics, and x 3 metrics on the test split
    assert (size.folds, size.fold_rows, size.test_rows) == (10, 1260, 126)
    # fits: ols 1, ridge 1 SVD, lasso 1 path, tree 1 unpruned tree, forest 4 (n_estimators
    # takes one value, so no two forest cells share a fit): 8 a fold, x (10 folds + 1 refit)
    assert [m.fits_per_fold for m in size.models] == [1, 1, 1, 1, 4]
    assert (size.fits, size.fits_each) == (88, 462)
    assert size.store_bytes == (1260 + 126) * BYTES_PER_ROW
    assert size.estimate() == ("88 fits (462 with --no-paths), 1,260 fold-score rows, 126 "
                               "test-score rows, store about 166.3 KB (explain step not "
                               "counted)")


GRIDS = [  # (models block, cells, fits per fold, cells an upper bound?)
    # least squares has no alpha: one cell, one fit; the 11 ridge alphas share one SVD
    ("m: {family: linear, grid: {penalty: [none, l2], alpha: {log: [0.01, 100], n: 11}}}",
     12, 2, False),
    # l1_ratio cannot matter to ridge: its two values make the same ridge cells, beside
    # 2 x 2 elastic-net cells on one path per l1_ratio
    ("m: {family: linear, grid: {penalty: [l2, elasticnet], alpha: [0.1, 1.0], "
     "l1_ratio: [0.2, 0.8]}}", 6, 3, False),
    # one unpruned tree per leaf size scores all its pruning alphas
    ("t: {family: pruned_tree, grid: {ccp_alpha: {path: 30}, min_samples_leaf: [5, 10, 20]}}",
     90, 3, True),
    ("f: {family: forest, grid: {n_estimators: [50, 100, 200], max_features: [0.5, 1.0]}}",
     6, 2, False),
    ("t: {family: pruned_tree, grid: {min_samples_leaf: [1, 5, 10]}}", 3, 3, False),
]


@pytest.mark.parametrize("models,cells,per_fold,bound", GRIDS)
def test_fits_count_one_fit_per_path_group(tmp_path, models, cells, per_fold, bound):
    (model,) = plan_size(spec_from(tmp_path, models)).models
    assert (model.cells, model.fits_per_fold, model.bound) == (cells, per_fold, bound)


@pytest.mark.parametrize("models", [g[0] for g in GRIDS if not g[3]])
def test_fits_per_fold_are_the_engines_work_units(tmp_path, diabetes_csv, models):
    # The count made before the data are read is the fits the engine makes on each fold.
    from runner.families import load_family

    spec = spec_from(tmp_path, models)
    (model,) = plan_size(spec).models
    cells = prepare(spec).cells
    units = load_family(cells[0].family).fit_units([c.params for c in cells])
    assert (len(cells), len(units)) == (model.cells, model.fits_per_fold)


def test_int_range_counts_distinct_rounded_values(tmp_path):
    spec = spec_from(tmp_path, "t: {family: pruned_tree, grid: {min_samples_leaf: "
                               "{linear: [1, 10], n: 1000000}, max_depth: [2, 3]}}")
    assert plan_size(spec).cells == 10 * 2  # 1..10 after rounding, no million-value array


def test_check_prints_the_estimate_and_limits(tmp_path, diabetes_csv):
    spec = write_spec(tmp_path, "ridge: {family: linear, grid: {penalty: l2, alpha: "
                                "{log: [0.1, 100], n: 7}}}")
    out = invoke("check", spec)
    assert out.exit_code == 0, out.output
    # 7 alphas from one SVD a fold: 1 x (3 folds x 2 repeats + 1) = 7 fits (49 one by one);
    # 7 cells x 6 folds x 3 metrics = 126 fold rows; 21 test rows
    assert ("estimate     7 fits (49 with --no-paths), 126 fold-score rows, 21 test-score "
            "rows, store about") in out.output
    assert "│ ridge │ linear │     7 │             1 │    7 │" in out.output
    assert "limits       cells 10,000, folds 500, fits 250,000, data 1024 MiB" in out.output


def test_spec_limits_raise_a_ceiling(tmp_path):
    grid = "ridge: {family: linear, grid: {penalty: l2, alpha: {log: [0.1, 100], n: 20000}}}"
    with pytest.raises(SpecError, match=r"20,000 cells .*\(limits\.cells\)"):
        check_limits(spec_from(tmp_path, grid))
    raised = spec_from(tmp_path, grid, extra="limits: {cells: 20000, fits: 200000}\n")
    assert check_limits(raised).cells == 20000
    assert check_limits(spec_from(tmp_path, grid), lifted=True).fits_each == 20000 * 7


def test_fits_limit_counts_the_fits_of_the_chosen_way(tmp_path):
    # 5 000 ridge alphas: 7 fits from one SVD a fold, 35 000 one cell at a time
    grid = "ridge: {family: linear, grid: {penalty: l2, alpha: {log: [0.1, 100], n: 5000}}}"
    spec = spec_from(tmp_path, grid, extra="limits: {fits: 10000}\n")
    assert check_limits(spec).fits == 7
    with pytest.raises(SpecError, match=r"35,000 fits = 5,000 cells x \(6 folds \+ 1 refit\), "
                                        r"with --no-paths, more than the limit of 10,000"):
        check_limits(spec, paths=False)


def test_lift_limits_flag_lets_a_large_plan_through(tmp_path):
    case = CORPUS / "80_fits_over_limit"
    (tmp_path / "_data").mkdir()
    for f in (CORPUS / "_data").iterdir():
        (tmp_path / "_data" / f.name).write_bytes(f.read_bytes())
    (tmp_path / "case").mkdir()
    spec = tmp_path / "case" / "spec.yaml"
    spec.write_text((case / "spec.yaml").read_text())
    assert invoke("check", spec).exit_code == 2
    out = invoke("check", spec, "--lift-limits")
    assert out.exit_code == 0, out.output
    assert "2,505,000 fits" in out.output and "lifted (--lift-limits)" in out.output


def test_plan_memory_limit(tmp_path, diabetes_csv):
    spec = spec_from(tmp_path, "m: {family: linear}", extra="limits: {plan_mb: 0.001}\n")
    with pytest.raises(DataError, match=r"limits\.plan_mb"):
        prepare(spec)
    assert len(prepare(spec, lift_limits=True).cells) == 1


def test_data_size_limit_and_lifting_it(tmp_path, diabetes_csv):
    spec = spec_from(tmp_path, "m: {family: linear}", extra="limits: {data_mb: 0.01}\n")
    size = diabetes_csv.stat().st_size
    with pytest.raises(DataError, match=f"has {size:,} bytes, more than the limit of 10,485 "):
        prepare(spec)
    assert len(prepare(spec, lift_limits=True).frame.y) == 442


def test_jobs_are_capped_at_the_cores(monkeypatch):
    import joblib

    monkeypatch.setattr(joblib, "cpu_count", lambda *a, **k: 2)
    assert resolve_jobs(None) == (-1, None) and resolve_jobs(-1) == (-1, None)
    assert resolve_jobs(2) == (2, None)
    n, note = resolve_jobs(6)
    assert n == 2 and note == ("note: 6 workers asked for, but 2 cores are available here; "
                               "starting 2 (--force-jobs starts 6 anyway).")
    assert resolve_jobs(6, force=True) == (6, None)


def test_run_says_once_that_jobs_were_capped(tmp_path, diabetes_csv):
    import joblib

    spec = write_spec(tmp_path, "ridge: {family: linear, grid: {penalty: l2, alpha: [1.0]}}")
    cores = joblib.cpu_count()
    out = invoke("run", spec, "--jobs", cores + 4, "--quiet")
    assert out.exit_code == 0, out.output
    note = (f"note: {cores + 4} workers asked for, but {cores} cores are available here; "
            f"starting {cores}")
    assert out.output.count(note) == 1


def _frame(tmp_path, df: pd.DataFrame, data_fields: str = "", suffix: str = ".csv"):
    path = tmp_path / f"d{suffix}"
    df.to_csv(path, index=False) if suffix == ".csv" else df.to_parquet(path)
    spec = tmp_path / "spec.yaml"
    spec.write_text(f"name: t\ndata: {{path: {path.name}, target: progression{data_fields}}}\n"
                    "test: {fraction: 0.25}\nmodels: {m: {family: linear}}\n")
    return load_frame(load_spec(spec))


def _data(n=20):
    rng = np.random.default_rng(0)  # invented rows, for these checks only
    return pd.DataFrame({"a": rng.normal(size=n), "b": rng.normal(size=n),
                         "progression": rng.normal(size=n)})


def test_infinite_features_can_be_read_as_missing(tmp_path):
    df = _data()
    df.loc[4, "a"] = np.inf
    df.loc[7, "a"] = -np.inf
    with pytest.raises(DataError, match=r"'a' has 2 infinite value\(s\), the first \(inf\) at "
                                         r"line 6 of"):
        _frame(tmp_path, df)
    frame = _frame(tmp_path, df, ", infinite: missing")
    assert np.flatnonzero(frame.X["a"].isna()).tolist() == [4, 7]
    assert np.isfinite(frame.X["b"]).all()


def test_parquet_rows_are_named_by_row_number(tmp_path):
    df = _data()
    df.loc[2, "b"] = -1e200
    with pytest.raises(DataError, match=r"'b' has 1 value\(s\) beyond ±1e\+100, the first "
                                         r"\(-1e\+200\) at row 3 of .*d\.parquet"):
        _frame(tmp_path, df, suffix=".parquet")


def test_large_but_safe_values_are_kept(tmp_path):
    df = _data()
    df["a"] *= MAX_MAGNITUDE / 10
    df["progression"] *= 1e90
    frame = _frame(tmp_path, df)
    assert frame.X["a"].abs().max() <= MAX_MAGNITUDE and frame.y.std() > 1e89


def test_text_with_commas_is_not_mistaken_for_grouped_numbers(tmp_path):
    df = _data()
    df["place"] = ["Lyon, FR", "Porto, PT"] * 10      # text with commas: a category
    df["code"] = ["1,234", "abc"] * 10                 # not all numbers: a category
    frame = _frame(tmp_path, df)
    assert {"place", "code"} <= set(frame.categorical)
    df = _data()
    df["count"] = ["1,234", "56"] * 10
    with pytest.raises(DataError, match="'count' .* thousands separators"):
        _frame(tmp_path, df)
    frame = _frame(tmp_path, df, ", categorical: [count]")  # the user says so
    assert "count" in frame.categorical


@pytest.mark.parametrize("values, word, example, fixed", [
    (["0,94", "12,5", "3"], "a decimal comma", "'0,94'", "'0.94'"),
    (["1234,5", "7"], "a decimal comma", "'1234,5'", "'1234.5'"),
    (["1,234", "0,5"], "a decimal comma", "'0,5'", "'0.5'"),   # 0,5 cannot be thousands
    (["1,234", "56"], "thousands separators", "'1,234'", "'1234'"),
])
def test_numbers_written_with_commas_are_refused_with_the_fix(tmp_path, values, word,
                                                              example, fixed):
    # Spreadsheets in many locales write "0,94" for 0.94; read as text it would silently
    # become a category of hundreds of levels
    df = _data()
    df["dose"] = (values * 20)[:len(df)]
    with pytest.raises(DataError) as info:
        _frame(tmp_path, df)
    message = str(info.value)
    assert f"feature column 'dose' of {tmp_path / 'd.csv'} holds numbers written with " \
           f"{word} (such as {example})" in message and f"({fixed})" in message
    frame = _frame(tmp_path, df, ", categorical: [dose]")  # the user says so
    assert "dose" in frame.categorical


@pytest.mark.parametrize("column, what, advice", [
    ("a", "feature column 'a'", "leave those fields empty or list them in "
     "`data.missing_words` (with any other word the file writes for missing, such as 'NA': "
     "the list replaces pandas' own); if they are mistakes, fix them; list the column in "
     "`data.categorical` only if it really is a category."),
    ("progression", "target column 'progression'", "drop those rows (a target must be "
     "filled); if they are mistakes, fix them; set `task: classification` only if it really "
     "holds classes."),
])
def test_numbers_with_a_few_placeholders_are_refused_naming_them(tmp_path, column, what,
                                                                 advice):
    # a '?' or 'n.a.' for missing turns a measured column into text: before, a feature
    # silently became a category of every value, and a target hundreds of classes
    df = _data(60)
    df[column] = df[column].round(3).astype(object)
    df.loc[[4, 9], column] = "?"
    df.loc[30, column] = "n.a."
    with pytest.raises(DataError) as info:
        _frame(tmp_path, df)
    assert str(info.value) == (
        f"{what} of {tmp_path / 'd.csv'} holds numbers but for 3 value(s) that are not, such "
        f"as '?', 'n.a.' (the first at line 6 of {tmp_path / 'd.csv'}), so the whole column "
        f"would be read as text, a category. If they stand for missing values, {advice}")
    if column == "a":  # as the advice says: the column is numbers, those 3 rows missing
        frame = _frame(tmp_path, df, ", missing_words: ['?', 'n.a.']")
        assert "a" in frame.numeric and frame.X["a"].isna().sum() == 3


def test_codes_with_a_text_code_and_mostly_text_columns_stay_categories(tmp_path):
    df = _data(60)
    df["grade"] = (["1", "2", "3", "U"] * 15)  # few distinct numbers: codes, not measurements
    df["note"] = [str(v) if i % 3 else "see file" for i, v in enumerate(df["a"].round(3))]
    frame = _frame(tmp_path, df)  # a third of 'note' is text: a text column, as it was
    assert {"grade", "note"} <= set(frame.categorical)


def test_two_test_rows_are_enough(tmp_path, diabetes_csv):
    from runner.write.resampling import make_plan

    spec = spec_from(tmp_path, "m: {family: linear}")
    spec = spec.model_copy(update={"test": spec.test.model_copy(update={"fraction": 2 / 442})})
    spec._source = tmp_path / "spec.yaml"
    assert make_plan(spec, load_frame(spec)).n_test == 2


def test_a_logistic_grid_counts_one_fit_per_cell_and_the_fits_limit_holds(tmp_path):
    # Logistic regression has no one-fit route for an alpha grid: 30 alphas on 3 x 2 folds
    # and a refit are 30 x 7 = 210 fits, which a limit of 50 refuses once the class target
    # is read; the count equals the engine's work units on each fold.
    from .helpers import diabetes_frame

    df = diabetes_frame()
    df["band"] = np.where(df.progression > df.progression.median(), "high", "low")
    df.drop(columns="progression").to_csv(tmp_path / "bands.csv", index=False)
    models = "logit: {family: linear, grid: {penalty: l2, alpha: {log: [1.0e-5, 1], n: 30}}}"
    path = write_spec(tmp_path, models, data="bands.csv", extra="limits: {fits: 50}\n")
    path.write_text(path.read_text().replace("target: progression", "target: band")
                    .replace("metrics: [rmse, mae, r2]", "metrics: [log_loss]"))
    spec = load_spec(path)
    assert plan_size(spec).fits == 7  # before the data are read: counted as for regression
    size = plan_size(spec, "classification")
    assert (size.models[0].fits_per_fold, size.fits) == (30, 210)
    with pytest.raises(SpecError, match=r"210 fits .*more than the limit of 50"):
        prepare(spec)
    out = invoke("check", path)
    assert out.exit_code == 2 and "210 fits" in out.output and "Traceback" not in out.output
    # on two workers each fold's 30 separate fits can be cut into several tasks; a path
    # group would be one indivisible task per fold (and the refit)
    from runner.write.engine import _plan_tasks

    tasks = _plan_tasks(prepare(load_spec(path), lift_limits=True), n_workers=2)
    assert sum(len(t.cells) for t in tasks) == 210 and len(tasks) > 7

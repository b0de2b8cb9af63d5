"""The leakage checks: each fires on a small made-up case (the columns added to the diabetes
data below are invented for these tests) and stays silent on the demo's clean columns;
findings are stored with the sweep, printed by `check` and `run`, listed in the report,
and an error stops the sweep unless the spec allows it."""

from __future__ import annotations

import itertools
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from sklearn.tree import DecisionTreeRegressor

from runner.cli import main
from runner.errors import DataError
from runner.store import Store
from runner.write.data import load_frame
from runner.write.engine import run_sweep
from runner.write.leakage import best_split_r2, id_like, run_checks
from runner.write.resampling import make_plan
from runner.write.spec import load_spec

from .helpers import diabetes_frame, write_spec

ROOT = Path(__file__).resolve().parents[1]
RIDGE = "ridge: {family: linear, grid: {penalty: l2, alpha: [1.0]}}"


def _findings(folder: Path, df: pd.DataFrame, *, extra: str = "", models: str = RIDGE):
    """(spec, findings) of the small spec on `df` with `extra` YAML appended."""
    df.to_csv(folder / "made_up.csv", index=False)
    path = write_spec(folder, models, data="made_up.csv", extra=extra)
    spec = load_spec(path)
    frame = load_frame(spec)
    return spec, run_checks(spec, frame, make_plan(spec, frame))


def _edited_spec(folder: Path, df: pd.DataFrame, csv: str, *edits: tuple[str, str]
                 ) -> tuple[Path, str]:
    """(path, text) of the small spec on `df` (written as `csv`), each (old, new) of
    `edits` replaced in its text."""
    df.to_csv(folder / csv, index=False)
    path = write_spec(folder, RIDGE, data=csv)
    text = path.read_text()
    for old, new in edits:
        text = text.replace(old, new)
    path.write_text(text)
    return path, text


def _planned(path: Path):
    """(spec, frame, plan) of the spec file at `path`."""
    spec = load_spec(path)
    frame = load_frame(spec)
    return spec, frame, make_plan(spec, frame)


def _kinds(findings) -> list[tuple[str, str | None]]:
    return sorted((f.kind, f.column) for f in findings)


def test_the_diabetes_columns_are_clean(tmp_path):
    assert _findings(tmp_path, diabetes_frame())[1] == []


def test_identifiers_as_features(tmp_path):
    df = diabetes_frame()
    n = len(df)
    df["row_number"] = np.arange(1, n + 1)  # a serial number
    df["order_no"] = np.random.default_rng(1).permutation(10**6)[:n]  # whole, unique, id-like name
    df["code_text"] = [f"r{i:04d}" for i in range(n)]  # unique text
    df["weight_g"] = np.random.default_rng(2).permutation(10**6)[:n]  # whole, unique, a measurement
    _, found = _findings(tmp_path, df)
    ids = [f for f in found if f.kind == "id_column"]
    assert sorted(f.column for f in ids) == ["code_text", "order_no", "row_number"]
    assert all(f.value == 1.0 and "data.drop" in f.message for f in ids)


@pytest.mark.parametrize("name, expected", [
    ("plant_id", True), ("PlantID", True), ("plantId", True), ("batch_no", True),
    ("zip_code", True), ("bay", False), ("valid", False), ("humidity", False),
    ("number_of_leaves", False), ("num_rooms", False)])
def test_id_like_names(name, expected):
    assert id_like(name) is expected


def test_levels_mostly_unseen_across_folds(tmp_path):
    df = diabetes_frame()
    days = pd.date_range("2024-01-01", periods=len(df), freq="D")
    df["visit"] = [str(d.date()) for d in days]  # dates as text, one row each
    _, found = _findings(tmp_path, df)
    (hit,) = [f for f in found if f.kind == "unseen_levels"]
    assert hit.column == "visit" and hit.value == 1.0
    assert "100% of a fold's validation rows carry a level" in hit.message
    assert "dates or identifiers written as text" in hit.message
    assert ("id_column", "visit") in _kinds(found)


@pytest.mark.parametrize("role, folds", [
    ("groups", "  seed: 17\n  groups: clinic\n"),
    ("order", "  k: 3\n  order: clinic\n"),
])
def test_a_plan_column_listed_as_categorical_is_named_as_the_plan_column(tmp_path, role, folds):
    # Its levels are unseen by every fold's fitting rows by the plan's own design; the
    # finding says so and what to do, not "dates or identifiers written as text?"
    df = diabetes_frame()
    df["clinic"] = np.arange(len(df)) // 10  # 45 clinics of 10 visits, numbered in time order
    edits = [("  target: progression\n", "  target: progression\n  categorical: [clinic]\n")]
    if role == "groups":
        edits.append(("  seed: 17\n", folds))
    else:
        edits.append(("  k: 3\n  repeats: 2\n", folds))
    path, _ = _edited_spec(tmp_path, df, "clinics.csv", *edits)
    spec, frame, plan = _planned(path)
    (hit,) = [f for f in run_checks(spec, frame, plan) if f.kind == "unseen_levels"]
    assert hit.column == "clinic" and hit.value == 1.0
    assert f"it is the folds.{role} column, so every fold validates on " \
           f"{'groups' if role == 'groups' else 'times'} its fitting rows never saw" in hit.message
    assert "Remove it from data.categorical: it still cuts the folds." in hit.message
    assert "dates or identifiers" not in hit.message


def test_levels_only_in_the_test_rows_warn_and_the_sweep_runs(tmp_path):
    """What was refused before (a level only in the test rows) is now a finding: the models
    treat the level as missing, and the sweep goes on."""
    df = diabetes_frame().iloc[:120].copy()
    df["site"] = "north"
    df["holdout"] = np.arange(120) % 4 == 0
    df.loc[[0, 4], "site"] = "island"  # both rows are test rows
    df.to_csv(tmp_path / "sites.csv", index=False)
    path = write_spec(tmp_path, RIDGE, data="sites.csv")
    path.write_text(path.read_text().replace("  fraction: 0.25\n  seed: 3\n",
                                             "  column: holdout\n"))
    result = CliRunner().invoke(main, ["run", str(path), "--jobs", "1", "--quiet"])
    assert result.exit_code == 0, result.output
    assert ("warning (unseen_levels): categorical feature 'site' has levels only in the test "
            "rows ('island': 2 row(s), 6.7% of them)") in result.output
    stored = Store(tmp_path / "store.duckdb").query("select kind, column_name, value "
                                                    "from findings")
    assert stored.to_dict("records") == [{"kind": "unseen_levels", "column_name": "site",
                                          "value": pytest.approx(2 / 30)}]


def test_words_read_as_missing_in_a_text_feature_are_a_finding(tmp_path):
    """'None' as a level ('no treatment') is one of the words pandas' CSV reader takes for a
    missing value by default (pandas.read_csv, na_values): the models would never see it."""
    df = diabetes_frame().iloc[:150].copy()
    df["treatment"] = np.where(np.arange(150) % 3 == 0, "None", np.where(
        np.arange(150) % 3 == 1, "diet", "drug"))
    df.loc[[1, 2], "treatment"] = np.nan  # empty fields: missing values, not counted
    df["dose"] = np.where(np.arange(150) % 5 == 0, np.nan, 1.0)  # 'NA' in a number column
    df.to_csv(tmp_path / "treated.csv", index=False, na_rep="")
    lines = (tmp_path / "treated.csv").read_text().splitlines()
    head = lines[0].split(",")
    dose = head.index("dose")
    for i in range(1, len(lines), 5):  # the number column's missing values written NA
        cells = lines[i].split(",")
        cells[dose] = "NA"
        lines[i] = ",".join(cells)
    (tmp_path / "treated.csv").write_text("\n".join(lines) + "\n")
    path = write_spec(tmp_path, RIDGE, data="treated.csv")
    spec = load_spec(path)
    frame = load_frame(spec)
    found = [f for f in run_checks(spec, frame, make_plan(spec, frame))
             if f.kind == "missing_words"]
    # the reference count: the file read by pandas with no missing-value words at all
    raw = pd.read_csv(tmp_path / "treated.csv", dtype=str, keep_default_na=False)
    assert [(f.column, f.value) for f in found] == [
        ("treatment", float((raw["treatment"] == "None").sum()))] == [("treatment", 50.0)]
    assert "'None' (50 rows) that were read as missing values, beside its 2 other words" \
        in found[0].message
    assert frame.X["dose"].isna().sum() == 30  # NA in numbers: missing, as it should be

    allowed = tmp_path / "allowed.yaml"
    allowed.write_text(path.read_text() + "checks: {allow: [missing_words]}\n")
    result = CliRunner().invoke(main, ["check", str(allowed)])
    assert result.exit_code == 0, result.output
    assert "warning (allowed) (missing_words): text feature 'treatment'" in result.output


def test_a_class_written_as_a_missing_word_is_named_in_the_refusal(tmp_path):
    # a class target whose class 'None' pandas reads as missing (pandas.read_csv, na_values)
    df = diabetes_frame().iloc[:90].copy()
    df["outcome"] = np.where(np.arange(90) % 3 == 0, "None", "better")
    df.loc[[1], "outcome"] = ""  # an empty field: missing, and not a word
    df.to_csv(tmp_path / "outcomes.csv", index=False)
    path = write_spec(tmp_path, RIDGE, data="outcomes.csv")
    path.write_text(path.read_text().replace("target: progression", "target: outcome"))
    result = CliRunner().invoke(main, ["check", str(path)])
    assert result.exit_code == 2 and result.output.count("\n") == 1, result.output
    assert "has 31 missing values (first at file lines 2, 3, 5, 8, 11)" in result.output
    assert "The file writes 'None' (30 rows) there, which pandas reads as a missing value " \
        "by default; if that is a class, list in `data.missing_words` only the words that " \
        "do mean missing" in result.output
    # listed by the spec: the refusal says so; an empty list keeps the class 'None', and
    # only the empty field is missing
    for words, said in [("['None']", "has 31 missing values (first at file lines 2, 3, 5, 8, "
                         "11). Drop those rows before the sweep: a row without a class can be "
                         "neither fitted nor scored. The file writes 'None' (30 rows) there, "
                         "which `data.missing_words` lists as missing; if that is a class, "
                         "remove it from that list.\n"),
                        ("[]", "has 1 missing values (first at file lines 3). Drop those rows "
                         "before the sweep: a row without a class can be neither fitted nor "
                         "scored.\n")]:
        path.write_text(path.read_text().replace("target: outcome", "target: outcome\n"
                                                 f"  missing_words: {words}", 1))
        result = CliRunner().invoke(main, ["check", str(path)])
        assert result.exit_code == 2 and result.output.endswith(said), result.output
        path.write_text(path.read_text().replace(f"\n  missing_words: {words}", "", 1))


def test_duplicate_rows_across_the_test_split(tmp_path):
    df = diabetes_frame()
    twice = pd.concat([df, df.iloc[:40]], ignore_index=True)  # 40 rows twice
    spec, found = _findings(tmp_path, twice)
    (hit,) = [f for f in found if f.kind == "duplicate_rows"]
    plan = make_plan(spec, load_frame(spec))
    # independent count: copies of one row with one copy in the test rows, one in training
    is_test = np.isin(np.arange(len(twice)), plan.test_rows)
    expected = sum(int(is_test[i] != is_test[442 + i]) for i in range(40))
    assert hit.value == expected > 0
    assert f"{expected} of {plan.n_test} test rows" in hit.message


def test_few_discrete_columns_repeat_by_nature_and_are_not_flagged(tmp_path):
    rng = np.random.default_rng(3)
    df = pd.DataFrame({"a": rng.integers(0, 3, 400), "b": rng.choice(["x", "y"], 400)})
    df["progression"] = df["a"] * 2.0 + rng.normal(size=400)
    assert not [f for f in _findings(tmp_path, df)[1] if f.kind == "duplicate_rows"]


def test_features_that_give_the_target_away(tmp_path):
    df = diabetes_frame()
    rng = np.random.default_rng(4)
    df["copy"] = df["progression"] * 2.0 + 1.0  # r = 1
    # a step: the target is two tight clusters that one split of `switch` separates
    switch = rng.normal(size=len(df))
    df["progression"] = np.where(switch > 0, 300.0, 100.0) + rng.normal(0, 1.0, len(df))
    df["copy"] = df["progression"] * 2.0 + 1.0
    df["switch"] = switch
    df["band"] = np.where(switch > 0, "upper", "lower")
    _, found = _findings(tmp_path, df)
    hits = {f.column: f for f in found if f.kind == "target_proxy"}
    assert set(hits) == {"copy", "switch", "band"}
    assert "|r| = 1.0000" in hits["copy"].message
    r = abs(np.corrcoef(switch, df["progression"])[0, 1])
    assert r < 0.99 and "one split R² = 0.99" in hits["switch"].message


def test_threads_weigh_the_columns_to_the_same_findings(tmp_path):
    df = diabetes_frame()
    df["copy"] = df["progression"] * 2.0 + 1.0
    df["band"] = np.where(df["progression"] > df["progression"].median(), "upper", "lower")
    df.loc[::7, "bmi"] = np.nan
    spec, alone = _findings(tmp_path, df)
    frame = load_frame(spec)
    shared = run_checks(spec, frame, make_plan(spec, frame), threads=3)
    assert {f.column for f in alone if f.kind == "target_proxy"} == {"copy"}
    assert shared == alone  # same findings, same values, same order



@pytest.mark.parametrize("cores,jobs,local_workers,expected", [
    (2, 2, 2, 1),   # both cores fitting: the checks take this thread only
    (8, 3, 3, 5),   # the cores the workers leave idle
    (8, -1, 8, 1),
    (8, 3, 0, 3),   # fits elsewhere (a cluster) or none: as many as the workers
    (2, 4, 0, 2),
])
def test_checks_beside_local_fits_take_the_idle_cores(monkeypatch, cores, jobs,
                                                       local_workers, expected):
    import joblib

    from runner.write.engine import _check_threads

    monkeypatch.setattr(joblib, "cpu_count", lambda *a, **k: cores)
    monkeypatch.setattr(joblib, "effective_n_jobs",
                        lambda n: cores if n == -1 else n)
    assert _check_threads(jobs, local_workers) == expected

def test_best_split_equals_a_depth_one_tree():
    # reference: scikit-learn's DecisionTreeRegressor(max_depth=1), R² on its own rows
    df = diabetes_frame()
    y = df["progression"].to_numpy(float)
    for col in ("bmi", "s5", "age", "sex"):
        x = df[col].to_numpy(float)
        tree = DecisionTreeRegressor(max_depth=1).fit(x[:, None], y)
        assert best_split_r2(x, y) == pytest.approx(tree.score(x[:, None], y), abs=1e-9), col


def test_best_split_of_a_category_equals_every_partition_tried():
    # reference: brute force over all two-way partitions of the levels (from memory: for
    # squared error the best one is found among the levels ordered by mean, Breiman 1984)
    rng = np.random.default_rng(6)
    levels = np.array(list("abcdef"))
    x = levels[rng.integers(0, 6, 300)]
    y = rng.normal(size=300) + (x == "c") * 2.0 - (x == "e") * 1.5 + (x == "a") * 0.7
    total = np.sum((y - y.mean()) ** 2)
    best = 0.0
    for size in range(1, 6):
        for left in itertools.combinations(levels, size):
            mask = np.isin(x, left)
            fit = np.where(mask, y[mask].mean(), y[~mask].mean())
            best = max(best, 1 - np.sum((y - fit) ** 2) / total)
    assert best_split_r2(x, y, categorical=True) == pytest.approx(best, abs=1e-12)


def test_group_keys_under_row_folds(tmp_path):
    df = diabetes_frame()
    rng = np.random.default_rng(7)
    df["patient_id"] = rng.integers(0, 110, len(df))  # about 4 rows per patient
    df["batch"] = [f"b{v}" for v in rng.integers(0, 110, len(df))]  # text, 110 levels
    df["sex_code"] = df["sex"]  # id-like name but 2 values: a category, not a group key
    df["colour_code"] = [f"c{v}" for v in rng.integers(0, 8, len(df))]  # 8 values: likewise
    spec, found = _findings(tmp_path, df, extra="")
    keys = {f.column: f for f in found if f.kind == "group_key"}
    assert set(keys) == {"patient_id", "batch"}
    assert "set folds.groups: patient_id" in keys["patient_id"].message
    assert keys["patient_id"].value > 0.5
    # dropped columns count too: a patient id in data.drop is still a group key
    path = tmp_path / "spec.yaml"
    path.write_text(path.read_text().replace("  target: progression\n",
                                             "  target: progression\n  drop: [patient_id]\n"))
    spec = load_spec(path)
    frame = load_frame(spec)
    assert "patient_id" in {f.column for f in run_checks(spec, frame, make_plan(spec, frame))
                            if f.kind == "group_key"}
    # grouped folds are what the check asks for: then it is silent
    path.write_text(path.read_text().replace("  seed: 17\n", "  seed: 17\n  groups: patient_id\n"))
    spec = load_spec(path)
    frame = load_frame(spec)
    assert not [f for f in run_checks(spec, frame, make_plan(spec, frame))
                if f.kind == "group_key" and f.column == "patient_id"]


def test_a_test_split_by_other_groups_than_the_folds_is_an_overlap(tmp_path):
    # Folds by plant, test split by batch, and batches cut across plants: the held-out
    # batches' plants also have training rows, so the test score is not on new plants.
    df = diabetes_frame()
    df["plant"] = np.arange(len(df)) // 6
    df["batch"] = np.arange(len(df)) % 10
    path, text = _edited_spec(tmp_path, df, "plants.csv",
                              ("  seed: 3\n", "  seed: 3\n  groups: batch\n"),
                              ("  seed: 17\n", "  seed: 17\n  groups: plant\n"))
    spec, frame, plan = _planned(path)
    tested = np.unique(df.plant.to_numpy()[plan.test_rows])
    shared = np.intersect1d(tested, df.plant.to_numpy()[plan.train_rows])
    hits = [f for f in run_checks(spec, frame, plan) if f.kind == "split_overlap"]
    assert len(shared) > 0 and [(h.column, h.value) for h in hits] == [("plant", len(shared))]
    assert "(test.groups batch)" in hits[0].message
    assert "Leave test.groups unset" in hits[0].message
    # the same groups on both: whole plants held out, silent
    path.write_text(text.replace("  groups: batch\n", "  groups: plant\n"))
    assert not [f for f in run_checks(*_planned(path)) if f.kind == "split_overlap"]


@pytest.mark.parametrize("jobs", [1, 2])  # 2: the refusal stops fits already running
def test_a_test_column_breaking_a_time_plan_is_an_error_unless_allowed(tmp_path, jobs):
    df = diabetes_frame()
    df["day"] = np.arange(len(df))
    df["holdout"] = np.arange(len(df)) % 5 == 0  # test rows spread over the whole period
    path, text = _edited_spec(tmp_path, df, "days.csv",
                              ("  fraction: 0.25\n  seed: 3\n", "  column: holdout\n"),
                              ("  k: 3\n  repeats: 2\n", "  k: 3\n  order: day\n"))
    spec, frame, plan = _planned(path)
    (hit,) = run_checks(spec, frame, plan)
    assert (hit.kind, hit.severity, hit.refused, hit.value) == ("split_overlap", "error", True,
                                                               89.0)
    result = CliRunner().invoke(main, ["check", str(path)])
    assert result.exit_code == 2 and "do not come after every training row" in result.output
    with pytest.raises(DataError, match="split_overlap to checks.allow"):
        run_sweep(spec, jobs=jobs)
    assert not (tmp_path / "store.duckdb").exists()
    path.write_text(text + "checks: {allow: [split_overlap]}\n")
    result = CliRunner().invoke(main, ["run", str(path), "--jobs", str(jobs), "--quiet"])
    assert result.exit_code == 0, result.output
    assert "error (allowed) (split_overlap): 89 of 89 test rows" in result.output
    stored = Store(tmp_path / "store.duckdb").query("select severity, allowed from findings")
    assert stored.to_dict("records") == [{"severity": "error", "allowed": True}]


def test_silent_on_the_demo_and_loud_on_its_row_folds_twin():
    demo = load_spec(ROOT / "specs" / "greenhouse.yaml")
    frame = load_frame(demo)
    assert "bay_id" not in frame.features
    assert run_checks(demo, frame, make_plan(demo, frame)) == []
    twin = load_spec(ROOT / "specs" / "greenhouse_row_folds.yaml")
    frame = load_frame(twin)
    (hit,) = run_checks(twin, frame, make_plan(twin, frame))
    assert (hit.kind, hit.column, hit.value) == ("group_key", "bay_id", 1.0)
    assert "250 values, 12.0 rows each" in hit.message


def test_findings_are_printed_stored_and_reported(tmp_path):
    df = diabetes_frame()
    df["patient_id"] = np.random.default_rng(7).integers(0, 110, len(df))
    df.to_csv(tmp_path / "patients.csv", index=False)
    path = write_spec(tmp_path, RIDGE, data="patients.csv")
    check = CliRunner().invoke(main, ["check", str(path)])
    assert check.exit_code == 0, check.output
    assert "leakage checks: 1 finding\n  warning (group_key): column 'patient_id'" in check.output
    run = CliRunner().invoke(main, ["run", str(path), "--jobs", "1", "--quiet"])
    assert run.exit_code == 0 and "warning (group_key): column 'patient_id'" in run.output
    store = Store(tmp_path / "store.duckdb")
    rows = store.query("select kind, severity, column_name, allowed from findings")
    assert rows.to_dict("records") == [{"kind": "group_key", "severity": "warning",
                                        "column_name": "patient_id", "allowed": False}]
    from runner.read.report import render_report

    html = render_report(store)
    assert 'id="checks"' in html and "leakage checks: 1 finding" not in html
    assert "group_key" in html and "looks like a group key" in html

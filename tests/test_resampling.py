"""The plan equals the README's recipe built with scikit-learn's own splitters."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st

from runner.write.data import load_frame
from runner.errors import DataError
from runner.write.resampling import fold_seed, make_plan, plan_counts, plan_identity

from .helpers import documented_plan, spec_from


def test_plan_matches_documented_recipe(tmp_path, diabetes_csv):
    spec = spec_from(tmp_path, "m: {family: linear}")
    frame = load_frame(spec)
    plan = make_plan(spec, frame)
    train, test, folds = documented_plan(442, test_fraction=0.25, test_seed=3, k=3, repeats=2,
                                         seed=17)
    assert np.array_equal(plan.train_rows, train) and np.array_equal(plan.test_rows, test)
    assert len(plan.folds) == 6
    for f, (rep, k, fit, valid) in zip(plan.folds, folds):
        assert (f.repeat, f.fold) == (rep, k)
        assert np.array_equal(f.fit, fit) and np.array_equal(f.valid, valid)
        assert f.seed == int(np.random.SeedSequence([17, rep, k]).generate_state(1)[0])


def test_identity_and_counts_without_the_plan(tmp_path, diabetes_csv):
    # The reuse fast path identifies cells and counts rows without scikit-learn's splitters;
    # it must agree with the plan they build (train_test_split holds out ceil(f x n) rows).
    for fraction in (0.25, 0.1, 0.333):
        spec = spec_from(tmp_path, "m: {family: linear}")
        spec.test.fraction = fraction
        frame = load_frame(spec)
        plan = make_plan(spec, frame)
        assert plan_identity(spec) == plan.identity
        assert plan_counts(spec, frame) == (plan.n_train, plan.n_test)


def test_plan_is_identical_on_reload(tmp_path, diabetes_csv):
    spec = spec_from(tmp_path, "m: {family: linear}")
    a = make_plan(spec, load_frame(spec))
    b = make_plan(spec, load_frame(spec))
    assert a.identity == b.identity and len(a.folds) == len(b.folds) == 6
    assert all(np.array_equal(x.valid, y.valid) and x.seed == y.seed for x, y in zip(a.folds, b.folds))


@settings(max_examples=50, deadline=None)
@given(st.integers(0, 2**31), st.integers(0, 50), st.integers(0, 50))
def test_fold_seeds_distinct_and_deterministic(seed, repeat, fold):
    s = fold_seed(seed, repeat, fold)
    # the README's recipe ("Rebuilding the folds yourself"), with numpy's SeedSequence alone
    assert s == int(np.random.SeedSequence([seed, repeat, fold]).generate_state(1)[0])
    assert 0 <= s < 2**32
    assert s != fold_seed(seed, repeat, fold + 1)


def test_boolean_column_and_separate_file(tmp_path, diabetes_csv):
    df = pd.read_csv(diabetes_csv)
    df["holdout"] = np.arange(len(df)) % 4 == 0
    df.to_csv(tmp_path / "marked.csv", index=False)
    spec = spec_from(tmp_path, "m: {family: linear}", data="marked.csv")
    spec.test.fraction, spec.test.column = None, "holdout"
    frame = load_frame(spec)
    assert "holdout" not in frame.features
    plan = make_plan(spec, frame)
    assert np.array_equal(plan.test_rows, np.arange(0, 442, 4))

    df.iloc[:300].drop(columns="holdout").to_csv(tmp_path / "a.csv", index=False)
    df.iloc[300:].drop(columns="holdout").to_csv(tmp_path / "b.csv", index=False)
    spec = spec_from(tmp_path, "m: {family: linear}", data="a.csv")
    spec.test.fraction, spec.test.file = None, "b.csv"
    plan = make_plan(spec, load_frame(spec))
    assert np.array_equal(plan.train_rows, np.arange(300))
    assert np.array_equal(plan.test_rows, np.arange(300, 442))


def test_too_few_rows_for_folds(tmp_path, diabetes_csv):
    pd.read_csv(diabetes_csv).iloc[:12].to_csv(tmp_path / "tiny.csv", index=False)
    spec = spec_from(tmp_path, "m: {family: linear}", data="tiny.csv")
    spec.folds.k = 5
    with pytest.raises(DataError, match="training rows for 5 folds"):
        make_plan(spec, load_frame(spec))


@pytest.mark.parametrize("counts, fraction", [
    ((20, 19, 1), 0.2), ((20, 19, 1), 0.5), ((20, 18, 2), 0.05), ((20, 18, 2), 0.95),
    ((20, 18, 2), 0.2), ((3, 3, 3), 0.3), ((3, 3, 3), 0.7), ((2, 2), 0.5), ((50, 2), 0.01)])
def test_a_stratified_test_split_is_refused_exactly_when_scikit_learn_cannot_make_it(
        counts, fraction):
    # reference: scikit-learn's train_test_split(stratify=y), which raises on classes it
    # cannot split; a fraction the message offers must split
    import re

    from sklearn.model_selection import train_test_split

    from runner.write.resampling import _strata_problem

    y = np.repeat(np.arange(len(counts)), counts)

    def splits(f):
        try:
            train_test_split(np.arange(len(y)), test_size=f, random_state=0, stratify=y)
            return True
        except ValueError:
            return False

    problem = _strata_problem(y, fraction, 3)
    assert (problem is None) == splits(fraction), problem
    if problem and min(counts) < 2:
        assert "class 2 has a single row" in problem and "whatever the fraction" in problem
        assert "Drop that class's rows or merge it into a similar class" in problem
        assert "test.fraction`" not in problem
    elif problem:
        bound = float(re.search(r"Set `test.fraction` to at (?:least|most) ([\d.]+)",
                                problem)[1])
        assert splits(bound)


def test_a_class_of_one_row_with_a_test_fraction_is_refused_with_what_works(tmp_path):
    from click.testing import CliRunner

    from runner.cli import main

    rng = np.random.default_rng(0)
    y = np.array(["a", "b"] * 20, dtype=object)
    y[5] = "rare"
    pd.DataFrame({"x": rng.normal(size=40), "y": y}).to_csv(tmp_path / "c.csv", index=False)
    (tmp_path / "spec.yaml").write_text("""
name: rare
data: {path: c.csv, target: y}
test: {fraction: 0.2}
folds: {k: 2}
metrics: [log_loss]
store: store.duckdb
models:
  logit: {family: linear, grid: {penalty: l2, alpha: [1.0]}}
""")
    for command in ("check", "run"):
        out = CliRunner().invoke(main, [command, str(tmp_path / "spec.yaml")])
        message = " ".join(out.output.split())
        assert out.exit_code == 2 and "Traceback" not in out.output, out.output
        assert f"test split cannot be made from {tmp_path / 'c.csv'} (target 'y')" in message
        assert "class 'rare' has a single row" in message
        assert "Drop that class's rows or merge it into a similar class" in message
        assert "the stratified folds need 2 of them among the training rows" in message
        assert not (tmp_path / "store.duckdb").exists()


@pytest.mark.parametrize("rare, k, advice", [(1, 2, "Drop or merge rare classes"),
                                             (3, 5, "Lower `folds.k` to at most 3, merge")])
def test_too_few_rows_of_a_class_for_stratified_folds_gets_advice_that_works(rare, k, advice):
    # reference: scikit-learn's StratifiedKFold, which cannot put a class in every fold
    # with fewer rows than folds (k=2 is the fewest folds, so one row cannot be helped)
    from sklearn.model_selection import StratifiedKFold

    from runner.write.resampling import SCHEMES, Cut

    y = np.repeat([0, 1], [20, rare])
    problem = SCHEMES["rows"].problem(Cut(y, None, k, 1, 0, stratify=True), None)
    assert f"class 1 has {rare} training row(s), fewer than the {k} folds" in problem
    assert advice in problem
    if rare >= 2:
        folds = StratifiedKFold(n_splits=rare).split(np.zeros(len(y)), y)
        assert all((y[fit] == 1).any() and (y[valid] == 1).any() for fit, valid in folds)


@pytest.mark.parametrize("k", [2, 3, 5])
def test_a_class_held_by_one_group_is_refused_for_every_k_with_advice_that_works(k):
    # reference: scikit-learn's StratifiedGroupKFold: whatever k, the fold validating the
    # class's only group fits without it; spread over two groups, every fold fits on it
    from sklearn.model_selection import StratifiedGroupKFold

    from runner.write.resampling import SCHEMES, Cut

    y = np.array(["a", "b"] * 30 + ["rare"] * 6, dtype=object)
    groups = np.r_[np.arange(60) % 12, [99] * 6]
    folds = StratifiedGroupKFold(n_splits=k, shuffle=True, random_state=0).split(
        np.zeros(len(y)), y, groups)
    assert any(not (y[fit] == "rare").any() for fit, _ in folds)
    problem = SCHEMES["groups"].problem(Cut(y, groups, k, 1, 0, stratify=True), "visit")
    assert problem.startswith("class 'rare' lies in a single group of column 'visit'")
    assert "whatever `folds.k`" in problem and "Lower `folds.k`" not in problem
    spread = np.r_[groups[:60], [98] * 3 + [99] * 3]
    assert SCHEMES["groups"].problem(Cut(y, spread, k, 1, 0, stratify=True), "visit") is None
    assert SCHEMES["groups"].problem(Cut(y, groups, k, 1, 0, stratify=False), "visit") is None


@pytest.mark.parametrize("first_alarm, k, gap, advice", [
    (15, 5, 0, "lower `folds.k` to at most 4, or start"),
    (15, 4, 3, "lower `folds.k` to at most 3, or start the data"),
    (33, 5, 0, "and no fewer folds reach it: start the data where every class has occurred"),
    (33, 3, 2, "and no fewer folds reach it with gap 2: lower `folds.gap`, start the data"),
])
def test_a_class_the_first_time_fold_lacks_gets_advice_that_works(tmp_path, first_alarm, k,
                                                                  gap, advice):
    # reference: scikit-learn's TimeSeriesSplit over the 80 training weeks: the advised k
    # (or gap) puts the class in the first fold's fitting weeks; one fold more does not
    from click.testing import CliRunner
    from sklearn.model_selection import TimeSeriesSplit

    from runner.cli import main

    week = np.repeat(np.arange(100), 3)
    state = np.where(np.arange(300) % 3 == 0, "warm", "ok").astype(object)
    state[(week >= first_alarm) & (np.arange(300) % 3 == 1)] = "alarm"
    rng = np.random.default_rng(0)
    pd.DataFrame({"week": week, "x": rng.normal(size=300), "state": state}).to_csv(
        tmp_path / "s.csv", index=False)
    (tmp_path / "spec.yaml").write_text(f"""
name: weeks
data: {{path: s.csv, target: state}}
test: {{fraction: 0.2}}
folds: {{k: {k}, order: week, gap: {gap}}}
metrics: [log_loss]
store: store.duckdb
models:
  logit: {{family: linear, grid: {{penalty: l2, alpha: [1.0]}}}}
""")
    out = CliRunner().invoke(main, ["check", str(tmp_path / "spec.yaml")])
    message = " ".join(out.output.split())
    assert out.exit_code == 2 and "Traceback" not in out.output, out.output
    assert f"Class 'alarm' first occurs at week = {first_alarm} (value {first_alarm + 1} of" \
           in message
    assert advice in message
    train_weeks = np.arange(80 - gap)
    first_fit = next(iter(TimeSeriesSplit(n_splits=k, gap=gap).split(train_weeks)))[0]
    assert first_fit.max() < first_alarm
    if "to at most" in message:
        better = int(message.split("lower `folds.k` to at most ")[1].split(",")[0])
        for n_splits in range(2, better + 1):
            splits = TimeSeriesSplit(n_splits=n_splits, gap=gap).split(train_weeks)
            assert next(iter(splits))[0].max() >= first_alarm
        for n_splits in range(better + 1, k + 1):
            splits = TimeSeriesSplit(n_splits=n_splits, gap=gap).split(train_weeks)
            assert next(iter(splits))[0].max() < first_alarm
    else:
        for n_splits in range(2, k + 1):
            splits = TimeSeriesSplit(n_splits=n_splits, gap=gap).split(train_weeks)
            assert next(iter(splits))[0].max() < first_alarm
    assert not (tmp_path / "store.duckdb").exists()


@pytest.mark.parametrize("side", ["test", "training"])
def test_a_class_in_one_group_is_refused_wherever_the_grouped_test_split_puts_it(tmp_path,
                                                                               side):
    # reference: scikit-learn's GroupShuffleSplit, the README's grouped test split, says
    # which group lands on which side; either way no split or k can fit on the class
    from click.testing import CliRunner
    from sklearn.model_selection import GroupShuffleSplit

    from runner.cli import main

    rng = np.random.default_rng(1)
    site = np.repeat([f"s{i:02d}" for i in range(20)], 6)
    y = np.where(rng.random(120) < 0.5, "a", "b").astype(object)
    test = next(GroupShuffleSplit(n_splits=1, test_size=0.2, random_state=4).split(
        np.arange(120), groups=site))[1]
    chosen = site[test[0]] if side == "test" else \
        next(g for g in site if g not in set(site[test]))
    y[site == chosen] = "rare"
    pd.DataFrame({"site": site, "x": rng.normal(size=120), "y": y}).to_csv(
        tmp_path / "g.csv", index=False)
    (tmp_path / "spec.yaml").write_text("""
name: sites
data: {path: g.csv, target: y}
test: {fraction: 0.2, seed: 4}
folds: {k: 3, groups: site}
metrics: [log_loss]
store: store.duckdb
models:
  logit: {family: linear, grid: {penalty: l2, alpha: [1.0]}}
""")
    out = CliRunner().invoke(main, ["check", str(tmp_path / "spec.yaml")])
    message = " ".join(out.output.split())
    assert out.exit_code == 2 and "Traceback" not in out.output, out.output
    assert "lies in a single group of column 'site'" in message
    assert "Drop or merge that class, or group by a column the class spreads over" in message
    if side == "test":
        assert f"(folds.groups), '{chosen}', which the test split holds out whole" in message
    assert "Move some of its rows into training" not in message
    assert not (tmp_path / "store.duckdb").exists()


def test_a_class_the_stratified_test_split_leaves_out_is_refused_with_a_fraction_that_works():
    # reference: scikit-learn's train_test_split(stratify=y) on 400 small class mixes: where
    # a class gets no test row (its share of the test rows rounds to none), the plan refuses
    # it, and the fraction it advises (1/m, m the smallest class's rows) gives every class a
    # test row under the same seed; where every class has one, nothing is refused.
    from sklearn.model_selection import train_test_split

    from runner.write.resampling import _check_classes_tested

    class Frame:
        source, target = "d.csv", "y"

    rng = np.random.default_rng(11)
    refused = 0
    for _ in range(400):
        counts = [int(rng.integers(2, 8))] + rng.integers(2, 60, size=rng.integers(1, 4)).tolist()
        y = np.repeat(np.arange(len(counts)), counts)
        fraction, seed = float(rng.choice([0.05, 0.1, 0.15, 0.2, 0.3])), int(rng.integers(99))
        n_test = int(np.ceil(fraction * len(y)))
        if n_test < len(counts) or len(y) - n_test < len(counts):
            continue  # `_strata_problem` refuses these before any split
        test = train_test_split(np.arange(len(y)), test_size=fraction, random_state=seed,
                                stratify=y)[1]
        left_out = set(range(len(counts))) - set(y[test].tolist())
        if not left_out:
            _check_classes_tested(Frame, y, test, fraction)
            continue
        refused += 1
        with pytest.raises(DataError) as caught:
            _check_classes_tested(Frame, y, test, fraction)
        message = str(caught.value)
        assert f"class{'es' if len(left_out) > 1 else ''} " in message
        assert all(f"{c} ({counts[c]} rows)" in message for c in left_out)
        advised = float(message.split("Set `test.fraction` to at least ")[1].split(" ")[0])
        assert advised >= 1 / min(counts) and advised >= fraction
        test = train_test_split(np.arange(len(y)), test_size=advised, random_state=seed,
                                stratify=y)[1]
        assert set(y[test].tolist()) == set(range(len(counts)))
    assert refused > 50

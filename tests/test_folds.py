"""Grouped and time-ordered plans: the folds equal scikit-learn's splitters on the README's
recipes (reference library: scikit-learn 1.9 GroupKFold, GroupShuffleSplit, TimeSeriesSplit,
cross_validate), no group is ever on both sides, time folds only look ahead, a sweep stores
enough to rebuild its plan, and a changed plan never reuses rows.

The group and day columns added to the diabetes data are invented for these tests: 40
clinics drawn at random per row, and a visit day 0..119 with several rows per day."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.model_selection import cross_validate
from sklearn.pipeline import make_pipeline
from sklearn.linear_model import Ridge
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeRegressor
from sklearn import metrics as skm

from runner.store import Store
from runner.write import prepare as prepare_module
from runner.write.data import load_frame
from runner.write.engine import run_sweep
from runner.write.resampling import (fold_seed, make_plan, plan_counts, plan_identity,
                                     refit_seed)
from runner.write.spec import load_spec

from .helpers import (diabetes_frame, documented_group_plan, documented_plan,
                      documented_time_plan,
                      spec_from, write_spec)

MODELS = """
ridge: {family: linear, grid: {penalty: l2, alpha: [1.0, 30.0]}}
tree: {family: pruned_tree, grid: {ccp_alpha: [0.0, 150.0], min_samples_leaf: [5]}}
"""
SCHEMES = {
    "rows": "folds: {k: 3, repeats: 2, seed: 17}\n",
    "groups": "folds: {k: 3, repeats: 2, seed: 17, groups: clinic}\n",
    "test_groups": "test: {fraction: 0.25, seed: 3, groups: clinic}\n",
    "time": "folds: {k: 4, order: day, gap: 2, seed: 17}\n",
}


def _frame() -> pd.DataFrame:
    df = diabetes_frame()
    rng = np.random.default_rng(5)
    df["clinic"] = [f"c{v:02d}" for v in rng.integers(0, 40, len(df))]
    df["day"] = rng.integers(0, 120, len(df))
    return df


def _spec(folder, scheme: str):
    """The small spec with the scheme's `folds:` or `test:` block, on the clinics data."""
    path = folder / "clinics.csv"
    if not path.exists():
        _frame().to_csv(path, index=False)
    text = SCHEMES[scheme]
    spec_path = write_spec(folder, MODELS, data="clinics.csv", name=f"{scheme}.yaml",
                           explain="picked" if scheme == "groups" else "none")
    raw = _replace_block(spec_path.read_text(), text.split(":", 1)[0], text)
    drop = {"rows": "clinic, day", "time": "clinic"}.get(scheme, "day")
    raw = raw.replace("  target: progression\n", f"  target: progression\n  drop: [{drop}]\n")
    spec_path.write_text(raw)
    return load_spec(spec_path)


def _replace_block(raw: str, block: str, text: str) -> str:
    """Swap the spec's `folds:` or `test:` block (a key and its indented lines) for `text`."""
    lines, out, skipping = raw.splitlines(keepends=True), [], False
    for line in lines:
        if line.startswith(f"{block}:"):
            out.append(text)
            skipping = True
            continue
        if skipping and line.startswith("  "):
            continue
        skipping = False
        out.append(line)
    return "".join(out)


def _recipe(scheme: str, df: pd.DataFrame):
    if scheme == "rows":
        return documented_plan(len(df), test_fraction=0.25, test_seed=3, k=3, repeats=2,
                               seed=17)
    if scheme == "groups":
        return documented_group_plan(df["clinic"].to_numpy(), test_fraction=0.25, test_seed=3,
                                     k=3, repeats=2, seed=17)
    if scheme == "test_groups":
        return documented_group_plan(df["clinic"].to_numpy(), test_fraction=0.25, test_seed=3,
                                     k=3, repeats=2, seed=17, folds_by_groups=False)
    return documented_time_plan(df["day"].to_numpy(), test_fraction=0.25, k=4, gap=2)


@pytest.mark.parametrize("scheme", SCHEMES)
def test_plan_equals_the_documented_recipe(tmp_path, scheme):
    spec = _spec(tmp_path, scheme)
    plan = make_plan(spec, load_frame(spec))
    train, test, folds = _recipe(scheme, _frame())
    assert np.array_equal(plan.train_rows, train) and np.array_equal(plan.test_rows, test)
    assert len(plan.folds) == len(folds) == (4 if scheme == "time" else 6)
    for f, (rep, k, fit, valid) in zip(plan.folds, folds):
        assert (f.repeat, f.fold) == (rep, k)
        assert np.array_equal(f.fit, fit) and np.array_equal(f.valid, valid)
        assert f.seed == fold_seed(17, rep, k)
    assert plan.identity == plan_identity(spec)
    assert plan_counts(spec, load_frame(spec)) == (plan.n_train, plan.n_test)


def test_group_and_time_identities_extend_the_row_identity(tmp_path):
    rows = spec_from(tmp_path, MODELS)
    # a row plan's identity is what it always was, so its cell ids and stored rows stay valid
    assert plan_identity(rows) == {"test": {"fraction": 0.25, "seed": 3}, "k": 3,
                                   "repeats": 2, "seed": 17}
    assert plan_identity(_spec(tmp_path, "groups")) == {
        "test": {"fraction": 0.25, "seed": 3, "groups": "clinic"}, "k": 3, "repeats": 2,
        "seed": 17, "scheme": "groups", "groups": "clinic"}
    assert plan_identity(_spec(tmp_path, "time")) == {
        "test": {"fraction": 0.25, "order": "day"}, "k": 4, "repeats": 1, "seed": 17,
        "scheme": "time", "order": "day", "gap": 2}


@pytest.mark.parametrize("fraction", [0.1, 0.25, 0.333, 0.5])
@pytest.mark.parametrize("seed", [0, 3, 2**32 - 1])
def test_group_counts_by_arithmetic_equal_the_splitter(tmp_path, fraction, seed):
    # plan_counts replays GroupShuffleSplit's arithmetic so that a rerun with nothing to fit
    # need not import scikit-learn; it must agree with the splitter itself.
    spec = _spec(tmp_path, "groups")
    spec.test.fraction, spec.test.seed = fraction, seed
    frame = load_frame(spec)
    plan = make_plan(spec, frame)
    assert plan_counts(spec, frame) == (plan.n_train, plan.n_test)


@pytest.fixture(scope="module")
def sweeps(tmp_path_factory):
    """One sweep per scheme into one store: (spec, sweep id) by scheme, and the store."""
    folder = tmp_path_factory.mktemp("schemes")
    store = Store(folder / "store.duckdb")
    done = {}
    for scheme in SCHEMES:
        spec = _spec(folder, scheme)
        done[scheme] = (spec, run_sweep(spec, store=store, jobs=1).sweep_id)
    return done, store


def _reference(make, X, y, recipe):
    train_rows, test_rows, folds = recipe
    Xtr, ytr = X.iloc[train_rows], y[train_rows]
    rows = []
    for rep, f, fit, valid in folds:
        s = fold_seed(17, rep, f)
        res = cross_validate(make(s), Xtr, ytr, cv=[(fit, valid)],
                             scoring="neg_root_mean_squared_error")
        rows.append((rep, f, -res["test_score"][0], len(fit), len(valid)))
    pred = make(refit_seed(17)).fit(Xtr, ytr).predict(X.iloc[test_rows])
    return rows, skm.root_mean_squared_error(y[test_rows], pred)


@pytest.mark.parametrize("scheme", SCHEMES)
@pytest.mark.parametrize("model", ["ridge", "tree"])
def test_scores_equal_cross_validate_on_the_recipe(sweeps, scheme, model):
    done, store = sweeps
    spec, sid = done[scheme]
    df = _frame()
    X = df.drop(columns=["progression", "clinic", "day"])
    y = df["progression"].to_numpy(float)
    make = {"ridge": lambda s: make_pipeline(StandardScaler(), Ridge(alpha=1.0)),
            "tree": lambda s: DecisionTreeRegressor(ccp_alpha=150.0, min_samples_leaf=5,
                                                    random_state=s)}[model]
    ref, test = _reference(make, X, y, _recipe(scheme, df))
    cell = {"ridge": "alpha", "tree": "ccp_alpha"}[model]
    value = {"ridge": 1.0, "tree": 150.0}[model]
    got = store.query(f"""select f."repeat", f.fold, f.value, f.n_train, f.n_valid, f.how
                          from fold_scores f join cells c using (sweep_id, cell_id)
                          where f.sweep_id = ? and c.model = ? and f.metric = 'rmse'
                            and json_extract(c.params, '$.{cell}')::double = ?
                          order by 1, 2""", [sid, model, value])
    # the cells were scored through their path (one fit per fold for the whole grid)
    assert set(got["how"]) == {{"ridge": "ridge_gram", "tree": "tree_path"}[model]}
    assert len(got) == len(ref)
    for row, (rep, f, score, n_fit, n_valid) in zip(got.itertuples(index=False), ref):
        assert (row.repeat, row.fold, row.n_train, row.n_valid) == (rep, f, n_fit, n_valid)
        assert row.value == pytest.approx(score, abs=1e-9)
    stored = store.query(f"""select t.value from test_scores t join cells c
                             using (sweep_id, cell_id)
                             where t.sweep_id = ? and c.model = ? and t.metric = 'rmse'
                               and json_extract(c.params, '$.{cell}')::double = ?""",
                         [sid, model, value])["value"].iloc[0]
    assert stored == pytest.approx(test, abs=1e-9)


def test_no_group_on_both_sides_of_any_split(sweeps):
    done, store = sweeps
    spec, sid = done["groups"]
    plan = make_plan(spec, load_frame(spec))
    clinic = _frame()["clinic"].to_numpy()
    train = clinic[plan.train_rows]
    assert not set(clinic[plan.test_rows]) & set(train)
    for f in plan.folds:
        assert not set(train[f.fit]) & set(train[f.valid]), (f.repeat, f.fold)
        assert len(f.fit) + len(f.valid) == plan.n_train
    # every stored fold is one of these folds: same sizes, and the repeats differ
    stored = store.query("select distinct \"repeat\", fold, n_train, n_valid from fold_scores "
                         "where sweep_id = ? order by 1, 2", [sid])
    assert [tuple(r) for r in stored.itertuples(index=False)] == \
        [(f.repeat, f.fold, len(f.fit), len(f.valid)) for f in plan.folds]
    first, second = plan.folds[0].valid, plan.folds[3].valid
    assert not np.array_equal(np.sort(train[first]), np.sort(train[second]))
    # the explain step refits on the same grouped folds
    refits = store.query("select distinct \"repeat\", fold from fold_importances "
                         "where sweep_id = ? order by 1, 2", [sid])
    assert [tuple(r) for r in refits.itertuples(index=False)] == \
        [(f.repeat, f.fold) for f in plan.folds]


def test_time_folds_only_look_ahead(sweeps):
    done, _ = sweeps
    spec, _ = done["time"]
    plan = make_plan(spec, load_frame(spec))
    day = _frame()["day"].to_numpy()
    times = np.unique(day)
    train = day[plan.train_rows]
    for f in plan.folds:  # every validation row after every fitting row, `gap` days between
        last_fit, first_valid = train[f.fit].max(), train[f.valid].min()
        between = np.sum((times > last_fit) & (times < first_valid))
        assert last_fit < first_valid and between == 2, (f.fold, last_fit, first_valid)
    assert plan.folds[0].fit.size < plan.folds[-1].fit.size  # an expanding window
    last_train, first_test = train.max(), day[plan.test_rows].min()
    assert np.sum((times > last_train) & (times < first_test)) == 2


def test_a_sweep_stores_enough_to_rebuild_its_plan(sweeps):
    done, store = sweeps
    for scheme, (spec, sid) in done.items():
        row = store.query("select scheme, plan_column, plan, data_sha256, k, repeats, "
                          "plan_seed from sweeps where sweep_id = ?", [sid]).iloc[0]
        plan = json.loads(row["plan"])
        assert plan == plan_identity(spec)
        expected = {"rows": ("rows", None), "groups": ("groups", "clinic"),
                    "test_groups": ("rows", None), "time": ("time", "day")}[scheme]
        column = row["plan_column"] if isinstance(row["plan_column"], str) else None
        assert (row["scheme"], column) == expected
        assert row["data_sha256"] == load_frame(spec).sha256


def test_changing_the_plan_never_reuses_rows(sweeps, tmp_path):
    done, store = sweeps
    ids = {scheme: set(store.query("select cell_id from cells where sweep_id = ?",
                                   [sid])["cell_id"]) for scheme, (_, sid) in done.items()}
    for a, b in [("rows", "groups"), ("rows", "test_groups"), ("rows", "time"),
                 ("groups", "test_groups"), ("groups", "time"), ("test_groups", "time")]:
        assert not ids[a] & ids[b], (a, b)
    reused = store.query("select count(*) as n from cells where reused_from is not null")
    assert reused["n"].iloc[0] == 0


def test_a_rerun_reuses_scores_and_findings_without_the_plan(sweeps, monkeypatch):
    done, store = sweeps
    spec, sid = done["groups"]

    def no_plan(*args, **kwargs):
        raise AssertionError("a rerun with nothing to fit built the plan")

    monkeypatch.setattr(prepare_module, "make_plan", no_plan)
    said = []
    again = run_sweep(spec, store=store, jobs=1, on_message=said.append)
    assert again.n_reused == again.n_cells and again.n_fitted == 0
    first = store.query("select kind, column_name, message from findings where sweep_id = ? "
                        "order by kind", [sid])
    second = store.query("select kind, column_name, message from findings where sweep_id = ? "
                         "order by kind", [again.sweep_id])
    pd.testing.assert_frame_equal(first, second)
    counts = store.query("select n_train, n_test from sweeps where sweep_id in (?, ?)",
                         [sid, again.sweep_id])
    assert counts.drop_duplicates().shape[0] == 1


GROUP_EFFECT_MODELS = "tree: {family: pruned_tree, grid: {ccp_alpha: [0.0], min_samples_leaf: [2]}}"


def _group_effect_data(path: Path) -> None:
    """Invented data with strong group effects: 200 groups of 10 rows; the target is 2·x1
    plus the group's own effect (sd 3) plus noise (sd 1), and two columns constant within a
    group (no effect) let a tree recognise a group it has seen."""
    rng = np.random.default_rng(0)
    groups = np.repeat(np.arange(200), 10)
    n = len(groups)
    x1 = rng.normal(size=n)
    pd.DataFrame({
        "x1": x1, "x2": rng.normal(size=n),
        "tag": rng.uniform(0, 100, 200)[groups], "tag2": rng.uniform(0, 1, 200)[groups],
        "unit": [f"u{g:03d}" for g in groups],
        "y": 2 * x1 + rng.normal(0, 3, 200)[groups] + rng.normal(0, 1, n),
    }).to_csv(path, index=False)


def _group_effect_spec(folder: Path, folds: str):
    text = f"""
name: group-effect
data: {{path: units.csv, target: y}}
test: {{fraction: 0.3, seed: 3, groups: unit}}
folds: {folds}
metrics: [rmse]
store: store.duckdb
explain: {{cells: none}}
checks: {{allow: [group_key]}}
models:
  {GROUP_EFFECT_MODELS}
"""
    (folder / "spec.yaml").write_text(text)
    return load_spec(folder / "spec.yaml")


def test_row_folds_are_optimistic_on_grouped_data_and_group_folds_are_not(tmp_path):
    _group_effect_data(tmp_path / "units.csv")
    store = Store(tmp_path / "store.duckdb")
    scores = {}
    for name, folds in (("rows", "{k: 5, repeats: 2, seed: 1}"),
                        ("groups", "{k: 5, repeats: 2, seed: 1, groups: unit}")):
        sid = run_sweep(_group_effect_spec(tmp_path, folds), store=store, jobs=1).sweep_id
        row = store.query("""select s.mean, s.se, t.value as test from cell_summary s
                             join test_scores t using (sweep_id, cell_id, metric)
                             where s.sweep_id = ?""", [sid]).iloc[0]
        scores[name] = (row["mean"], row["se"], row["test"])
    (cv_rows, se_rows, test), (cv_groups, se_groups, test_groups) = scores["rows"], scores["groups"]
    assert test_groups == test  # the same test split of whole units, the same refit
    optimism_rows, optimism_groups = test - cv_rows, test - cv_groups
    # row folds: the CV RMSE is clearly below what the test split of new units shows
    assert optimism_rows > 0.15 * test and optimism_rows > 5 * se_rows
    # grouped folds: within a small share of it, much nearer than the row folds' estimate
    # (measured: rows 3.60 ± 0.10 and groups 4.56 ± 0.14 against a test RMSE of 4.45)
    assert abs(optimism_groups) < 0.1 * test and abs(optimism_groups) < optimism_rows / 2
    assert cv_groups - cv_rows > 3 * (se_rows + se_groups)


def test_picks_and_compare_work_on_every_plan_and_time_folds_carry_their_caveat(sweeps):
    from click.testing import CliRunner

    from runner import compare_table, pick_table
    from runner.cli import main
    from runner.read.report import render_report

    done, store = sweeps
    for scheme, (_, sid) in done.items():
        picks = pick_table(store, sid, rule="one_se").table
        assert sorted(picks["model"]) == ["ridge", "tree"] and picks["mean"].notna().all()
        pairs = compare_table(store, sid).table
        assert len(pairs) == 1 and pairs["folds"].iloc[0] == (4 if scheme == "time" else 6)
        out = CliRunner().invoke(main, ["compare", "--store", str(store.path), "--sweep", sid])
        assert out.exit_code == 0, out.output
        assert ("these folds follow time order, so they are not exchangeable" in out.output) \
            == (scheme == "time")
    html = render_report(store, done["time"][1])
    assert "Time-ordered folds: these folds follow time order" in html
    assert "4 time-ordered folds by day (expanding window, gap 2)" in html
    # time order draws these folds; the plan's seed reaches only the fits
    assert "gap 2), fits seeded " in html and "gap 2), seed " not in html


@pytest.mark.parametrize("scheme", ["time", "groups"])
def test_compare_on_unequal_folds_equals_the_corrected_t_test_worked_by_hand(sweeps, scheme):
    # Nadeau & Bengio (2003), Machine Learning 52:239-281, in the repeated k-fold form of
    # Bouckaert & Frank (2004) (citations from memory): var = (1/n + n_valid/n_train)·s²,
    # s² the sample variance (ddof 1) of the n paired differences, t = mean/sqrt(var) on
    # n - 1 df, p two-sided from Student's t (scipy.stats.t). Time folds fit on 1/5 to 4/5
    # of the values and grouped folds on unequal clinics, so n_valid/n_train differs by
    # fold: it enters as its mean over the folds, taken here from scikit-learn's splitters
    # (the README recipe), not from the store. Holm (1979) with one pair leaves p as it is.
    from scipy import stats

    from runner import compare_table

    done, store = sweeps
    _, sid = done[scheme]
    pair = compare_table(store, sid).table.iloc[0]
    raw = store.query("""select cell_id, "repeat", fold, value from fold_scores
                         where sweep_id = ? and metric = 'rmse'""", [sid])
    wide = raw.pivot_table(index=["repeat", "fold"], columns="cell_id", values="value")
    d = (wide[pair["cell_a"]] - wide[pair["cell_b"]]).to_numpy()
    _, _, folds = _recipe(scheme, _frame())
    sizes = [(len(fit), len(valid)) for _, _, fit, valid in folds]
    ratio = float(np.mean([v / f for f, v in sizes]))
    assert len({f for f, _ in sizes}) > 1  # the folds do differ in size
    n = len(d)
    se = np.sqrt((1 / n + ratio) * np.var(d, ddof=1))
    t = d.mean() / se
    assert (pair["folds"], pair["df"]) == (n, n - 1) == ((4, 3) if scheme == "time" else (6, 5))
    assert pair["mean_diff"] == pytest.approx(d.mean(), rel=1e-12)
    assert pair["se"] == pytest.approx(se, rel=1e-12)
    assert pair["t"] == pytest.approx(t, rel=1e-12)
    assert pair["p_value"] == pytest.approx(2 * stats.t.sf(abs(t), n - 1), rel=1e-9)
    assert pair["p_holm"] == pair["p_value"]


def _readme_recipes() -> list[str]:
    """The python blocks of README's "Rebuilding the folds yourself": the start, rows,
    groups, time, and the loop every scheme ends with."""
    text = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    section = text.split("## Rebuilding the folds yourself", 1)[1].split("\n## ", 1)[0]
    blocks = [b.split("```", 1)[0] for b in section.split("```python\n")[1:]]
    assert len(blocks) == 5
    return blocks


@pytest.mark.parametrize("scheme", SCHEMES)
def test_the_readme_recipes_rebuild_every_plan(tmp_path, scheme):
    start, rows, groups, time, loop = _readme_recipes()
    spec = _spec(tmp_path, scheme)
    plan = make_plan(spec, load_frame(spec))
    row_folds = rows.strip().splitlines()[-1]  # `splits = RepeatedKFold(...)` alone
    steps = {"rows": [rows], "groups": [groups], "time": [time],
             "test_groups": [groups, row_folds]}[scheme]
    assert row_folds.startswith("splits = RepeatedKFold(")
    names = {"path": tmp_path / "clinics.csv", "fraction": 0.25, "test_seed": 3,
             "k": spec.folds.k, "repeats": spec.folds.repeats, "seed": 17, "gap": 2,
             "column": "day" if scheme == "time" else "clinic"}
    exec("\n".join([start, *steps, loop]), names)
    assert np.array_equal(names["test_rows"], plan.test_rows)
    assert np.array_equal(names["train_rows"], plan.train_rows)
    assert len(names["folds"]) == len(plan.folds)
    for (repeat, fold, fit, valid, seed), f in zip(names["folds"], plan.folds):
        assert (repeat, fold, seed) == (f.repeat, f.fold, f.seed)
        assert np.array_equal(fit, f.fit) and np.array_equal(valid, f.valid)


def test_the_plan_column_is_a_feature_only_when_listed_as_categorical(tmp_path):
    spec = _spec(tmp_path, "groups")
    frame = load_frame(spec)
    assert "clinic" not in frame.features and "clinic" in frame.others.columns
    path = tmp_path / "groups.yaml"
    path.write_text(path.read_text().replace("  drop: [day]\n",
                                             "  drop: [day]\n  categorical: [clinic]\n"))
    frame = load_frame(load_spec(path))
    assert "clinic" in frame.categorical
    # still the plan's column: the folds are the same
    assert plan_identity(load_spec(path)) == plan_identity(spec)


def test_dates_as_text_order_rows_as_their_day_numbers_do(tmp_path):
    spec = _spec(tmp_path, "time")
    df = _frame()
    df["day"] = [str((pd.Timestamp("2024-03-01") + pd.Timedelta(days=int(d))).date())
                 for d in df["day"]]
    df.to_csv(tmp_path / "dated.csv", index=False)
    path = tmp_path / "time.yaml"
    path.write_text(path.read_text().replace("clinics.csv", "dated.csv"))
    dated = load_spec(path)
    by_day, by_date = make_plan(spec, load_frame(spec)), make_plan(dated, load_frame(dated))
    assert np.array_equal(by_day.test_rows, by_date.test_rows)
    for a, b in zip(by_day.folds, by_date.folds):
        assert np.array_equal(a.fit, b.fit) and np.array_equal(a.valid, b.valid)


@pytest.mark.parametrize("k, gap", [(2, 0), (3, 2), (3, 3), (3, 4), (4, 9), (5, 1), (2, 5)])
def test_time_folds_are_refused_exactly_when_the_splitter_cannot_cut_and_the_counts_named_work(
        k, gap):
    # reference: scikit-learn's TimeSeriesSplit itself, which raises on counts it cannot cut;
    # those counts do not come in order (k=3, gap=3 cuts 7 values but not 8 or 9)
    import re

    from sklearn.model_selection import TimeSeriesSplit

    from runner.write.resampling import Cut, SCHEMES

    def cuts(n, gap=gap):
        try:
            splits = list(TimeSeriesSplit(n_splits=k, gap=gap).split(np.arange(n)))
        except ValueError:
            return False
        return all(len(fit) and len(valid) for fit, valid in splits)

    scheme = SCHEMES["time"]
    for n in range(1, gap * (k + 1) + 3 * (k + 1)):
        problem = scheme.problem(Cut(np.zeros(n), np.arange(n), k, 1, 0, gap), "day")
        assert (problem is None) == cuts(n), (n, problem)
        if problem is None:
            continue
        assert f"hold {n} distinct value(s) of column 'day' (folds.order)" in problem
        always = int(re.search(r"Any count of (\d+) or more values works", problem)[1])
        assert all(cuts(m) for m in range(always, always + 3 * (k + 1))), (n, problem)
        assert not cuts(always - 1) or always == k + 1
        smaller_gap = re.search(r"a gap of at most (\d+) works", problem)
        if smaller_gap:
            assert cuts(n, int(smaller_gap[1])) and not cuts(n, int(smaller_gap[1]) + 1)


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_the_data_fingerprint_is_the_sha256_of_the_bytes_read(tmp_path, suffix):
    """A file of several read chunks (over 2 MiB) is hashed beside its parse: the stored
    fingerprint equals hashlib's SHA-256 of the file's bytes (reference: Python's hashlib)
    and the table equals pandas' own reading of the same file (reference: pandas)."""
    import hashlib

    from runner.write.data import _read

    rng = np.random.default_rng(5)
    df = pd.DataFrame(rng.normal(size=(40_000, 4)), columns=["a", "b", "c", "y"])
    path = tmp_path / f"data{suffix}"
    df.to_csv(path, index=False) if suffix == ".csv" else df.to_parquet(path)
    assert path.stat().st_size > 2 * 2**20 or suffix == ".parquet"
    table, sha = _read(path, "data file", None)
    assert sha == hashlib.sha256(path.read_bytes()).hexdigest()
    plain = pd.read_csv(path) if suffix == ".csv" else pd.read_parquet(path)
    pd.testing.assert_frame_equal(table, plain)


@pytest.mark.parametrize("scheme", ["time", "groups"])
def test_folds_whose_fitting_rows_lack_a_class_are_refused_before_any_fit(tmp_path, scheme):
    # 'late' occurs only from day 15 on (and only at site 0): the first time-ordered folds
    # fit on days before it, and the site fold that validates on site 0 fits without it.
    # Every fit of such a fold would fail; `check` says so first.
    from click.testing import CliRunner

    from runner.cli import main

    rng = np.random.default_rng(2)
    day = np.repeat(np.arange(60), 4)
    site = np.tile(np.arange(4), 60) + 4 * (np.arange(240) % 8 >= 4)
    late = (day >= 15) & (site == 0) if scheme == "groups" else day >= 15
    y = np.where(late & (rng.random(240) < 0.6), "late", "early")
    pd.DataFrame({"day": day, "site": site, "held": site == 7,
                  "x": rng.normal(size=240) + (y == "late"),
                  "y": y}).sample(frac=1, random_state=0).to_csv(tmp_path / "d.csv",
                                                                 index=False)
    folds, test = (("{k: 4, order: day, gap: 2}", "{fraction: 0.2}") if scheme == "time"
                   else ("{k: 7, repeats: 1, seed: 3, groups: site}", "{column: held}"))
    (tmp_path / "spec.yaml").write_text(f"""
name: lacking
data: {{path: d.csv, target: y, drop: [day, site]}}
test: {test}
folds: {folds}
metrics: [log_loss, accuracy]
store: store.duckdb
models:
  tree: {{family: pruned_tree, grid: {{ccp_alpha: [0.0, 0.01]}}}}
""")
    out = CliRunner().invoke(main, ["check", str(tmp_path / "spec.yaml")])
    assert out.exit_code == 2, out.output
    assert "Traceback" not in out.output
    message = " ".join(out.output.split())
    if scheme == "time":
        assert "of the time folds" in message
        assert "hold no row of class 'late' of target 'y'" in message
    else:  # one group holds the class: named before the folds are drawn, whatever k
        assert "class 'late' lies in a single group of column 'site'" in message
    assert not (tmp_path / "store.duckdb").exists()

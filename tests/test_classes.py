"""Class targets: stored fold and test scores equal scikit-learn's own estimators, stratified
splitters and scorers on the documented folds and seeds (reference: scikit-learn 1.9
`train_test_split(stratify=...)`, `RepeatedStratifiedKFold`, `cross_validate` with its
named scorers), binary and multiclass, with missing values and a text category; path
grids equal one fit per cell bit for bit; the picks, compare, figures and report work."""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pytest
from sklearn import metrics as skm
from sklearn.compose import ColumnTransformer
from sklearn.ensemble import RandomForestClassifier
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import RepeatedStratifiedKFold, cross_validate, train_test_split
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import OneHotEncoder, OrdinalEncoder, StandardScaler
from sklearn.tree import DecisionTreeClassifier

from runner.read.class_figures import calibration_bins, roc_points
from runner.read.queries import compare, picks, summary
from runner.store import Store
from runner.write.engine import run_sweep
from runner.write.resampling import fold_seed, refit_seed
from runner.write.spec import parse_spec

K, R, SEED, TEST_SEED, FRACTION = 3, 2, 17, 3, 0.25
MODELS = """
  logit: {family: linear, grid: {penalty: l2, alpha: [0.001, 0.05]}}
  plain: {family: linear, grid: {penalty: none}}
  tree: {family: pruned_tree, grid: {ccp_alpha: [0.0, 0.01, 0.03], min_samples_leaf: [4]}}
  frac: {family: pruned_tree, grid: {ccp_fraction: [0.02], criterion: entropy}}
  forest: {family: forest, grid: {n_estimators: [8, 20], max_features: [0.5],
                                  class_weight: balanced}}
"""
SCORERS = {"binary": {"log_loss": "neg_log_loss", "brier": "neg_brier_score",
                      "roc_auc": "roc_auc", "accuracy": "accuracy",
                      "balanced_accuracy": "balanced_accuracy"},
           "multiclass": {"log_loss": "neg_log_loss", "brier": "neg_brier_score",
                          "roc_auc": "roc_auc_ovr", "accuracy": "accuracy",
                          "balanced_accuracy": "balanced_accuracy"}}
SIGN = {"log_loss": -1.0, "brier": -1.0, "roc_auc": 1.0, "accuracy": 1.0,
        "balanced_accuracy": 1.0}


def _data(kind: str) -> pd.DataFrame:
    """scikit-learn's bundled wine (3 classes) or breast-cancer (2) data, a few columns,
    a text column made from one of them and 6 % of two columns blanked (fixed rows)."""
    from sklearn.datasets import load_breast_cancer, load_wine

    data = (load_wine if kind == "multiclass" else load_breast_cancer)(as_frame=True)
    df = data.frame.iloc[:, [0, 1, 2, 3, 6, 9]].copy()
    df.columns = ["a", "b", "c", "d", "e", "f"]
    df["kind"] = np.where(df["f"] > df["f"].median(), "high", "low")
    rng = np.random.default_rng(0)
    for col in ("a", "c"):
        df.loc[rng.random(len(df)) < 0.06, col] = np.nan
    names = {0: "x", 1: "y", 2: "z"}
    df["label"] = data.frame["target"].map(names)
    return df


@pytest.fixture(scope="module", params=["binary", "multiclass"])
def sweep(request, tmp_path_factory):
    folder = tmp_path_factory.mktemp(request.param)
    df = _data(request.param)
    df.to_csv(folder / "d.csv", index=False)
    metrics = list(SCORERS[request.param])
    (folder / "spec.yaml").write_text(
        f"name: {request.param}\ndata: {{path: d.csv, target: label}}\n"
        f"test: {{fraction: {FRACTION}, seed: {TEST_SEED}}}\n"
        f"folds: {{k: {K}, repeats: {R}, seed: {SEED}}}\nmetrics: {json.dumps(metrics)}\n"
        f"store: store.duckdb\nexplain: {{cells: none}}\nmodels:{MODELS}")
    spec = parse_spec((folder / "spec.yaml").read_text(), source=folder / "spec.yaml")
    result = run_sweep(spec, jobs=2)
    return request.param, df, Store(result.store_path), result.sweep_id


def _scorers(kind: str) -> dict:
    """scikit-learn's named scorers; the binary Brier scorer told which class is positive
    (the second, as scikit-learn orders classes), since the labels are text."""
    scorers = {m: skm.get_scorer(s) for m, s in SCORERS[kind].items()}
    if kind == "binary":
        scorers["brier"] = skm.make_scorer(skm.brier_score_loss, response_method="predict_proba",
                                           greater_is_better=False, pos_label="y")
    return scorers


def _reference(make, df: pd.DataFrame, kind: str):
    """Fold scores by cross_validate on the documented stratified plan, and test scores."""
    X, y = df.drop(columns="label"), df["label"].to_numpy(dtype=object)
    n = len(y)
    test_rows = np.sort(train_test_split(np.arange(n), test_size=FRACTION,
                                         random_state=TEST_SEED, stratify=y)[1])
    train_rows = np.setdiff1d(np.arange(n), test_rows)
    Xtr, ytr = X.iloc[train_rows], y[train_rows]
    splits = RepeatedStratifiedKFold(n_splits=K, n_repeats=R, random_state=SEED).split(
        train_rows, ytr)
    rows = []
    for i, (fit, valid) in enumerate(splits):
        rep, f = divmod(i, K)
        seed = fold_seed(SEED, rep, f)
        res = cross_validate(make(seed, len(fit)), Xtr, ytr, cv=[(fit, valid)],
                             scoring=_scorers(kind))
        rows += [(rep, f, m, SIGN[m] * res[f"test_{m}"][0]) for m in SCORERS[kind]]
    est = make(refit_seed(SEED), len(train_rows)).fit(Xtr, ytr)
    scorers = _scorers(kind)
    test = {m: SIGN[m] * sc(est, X.iloc[test_rows], y[test_rows]) for m, sc in scorers.items()}
    return pd.DataFrame(rows, columns=["repeat", "fold", "metric", "ref"]), test


def _prep(kind_of_model: str):
    num = ["a", "b", "c", "d", "e", "f"]
    if kind_of_model == "linear":
        return ColumnTransformer([
            ("num", make_pipeline(SimpleImputer(strategy="median"), StandardScaler()), num),
            ("cat", make_pipeline(SimpleImputer(strategy="most_frequent"),
                                  OneHotEncoder(handle_unknown="ignore", sparse_output=False)),
             ["kind"])])
    return ColumnTransformer([
        ("num", "passthrough", num),
        ("cat", OrdinalEncoder(handle_unknown="use_encoded_value", unknown_value=np.nan),
         ["kind"])])


def _root_entropy(y_fit) -> float:
    _, counts = np.unique(y_fit, return_counts=True)
    p = counts / counts.sum()
    return float(-np.sum(p * np.log2(p)))


REFERENCES = {
    # C = 1 / (alpha x fitting rows): the documented mapping of alpha to scikit-learn's C
    ("logit", 0.001): lambda s, n: Pipeline([("prep", _prep("linear")), ("model", LogisticRegression(
        C=1 / (0.001 * n), solver="newton-cholesky", tol=1e-8))]),
    ("logit", 0.05): lambda s, n: Pipeline([("prep", _prep("linear")), ("model", LogisticRegression(
        C=1 / (0.05 * n), solver="newton-cholesky", tol=1e-8))]),
    ("plain", None): lambda s, n: Pipeline([("prep", _prep("linear")), ("model", LogisticRegression(
        C=np.inf, solver="newton-cholesky", tol=1e-8))]),
    ("tree", 0.0): lambda s, n: Pipeline([("prep", _prep("tree")), ("model", DecisionTreeClassifier(
        ccp_alpha=0.0, min_samples_leaf=4, random_state=s))]),
    ("tree", 0.03): lambda s, n: Pipeline([("prep", _prep("tree")), ("model", DecisionTreeClassifier(
        ccp_alpha=0.03, min_samples_leaf=4, random_state=s))]),
    ("forest", 20): lambda s, n: Pipeline([("prep", _prep("tree")), ("model", RandomForestClassifier(
        n_estimators=20, max_features=0.5, class_weight="balanced", random_state=s, n_jobs=1))]),
}


def _stored(store: Store, sweep_id: str, model: str, key, value):
    folds = store.query("""select c.params, f."repeat", f.fold, f.metric, f.value from
        fold_scores f join cells c using (sweep_id, cell_id)
        where f.sweep_id = ? and c.model = ?""", [sweep_id, model])
    tests = store.query("""select c.params, t.metric, t.value from test_scores t
        join cells c using (sweep_id, cell_id) where t.sweep_id = ? and c.model = ?""",
                        [sweep_id, model])
    keep = (lambda p: True) if key is None else (lambda p: json.loads(p)[key] == value)
    return folds[folds.params.map(keep)], tests[tests.params.map(keep)]


@pytest.mark.parametrize("model, value, key", [("logit", 0.001, "alpha"),
                                               ("logit", 0.05, "alpha"), ("plain", None, None),
                                               ("tree", 0.0, "ccp_alpha"),
                                               ("tree", 0.03, "ccp_alpha"),
                                               ("forest", 20, "n_estimators")])
def test_scores_equal_scikit_learn(sweep, model, value, key):
    kind, df, store, sid = sweep
    ref, test = _reference(REFERENCES[(model, value)], df, kind)
    folds, tests = _stored(store, sid, model, key, value)
    merged = folds.merge(ref, on=["repeat", "fold", "metric"])
    assert len(merged) == len(ref) == K * R * 5
    np.testing.assert_allclose(merged["value"], merged["ref"], rtol=0, atol=1e-9)
    for metric, expected in test.items():
        assert tests[tests.metric == metric].value.iloc[0] == pytest.approx(expected, abs=1e-9)


def test_ccp_fraction_is_a_share_of_the_root_impurity(sweep):
    # entropy criterion: ccp_alpha = 0.02 x the fitting rows' class entropy in bits
    kind, df, store, sid = sweep
    X, y = df.drop(columns="label"), df["label"].to_numpy(dtype=object)
    test_rows = np.sort(train_test_split(np.arange(len(y)), test_size=FRACTION,
                                         random_state=TEST_SEED, stratify=y)[1])
    train_rows = np.setdiff1d(np.arange(len(y)), test_rows)
    est = Pipeline([("prep", _prep("tree")), ("model", DecisionTreeClassifier(
        criterion="entropy", ccp_alpha=0.02 * _root_entropy(y[train_rows]),
        random_state=refit_seed(SEED)))]).fit(X.iloc[train_rows], y[train_rows])
    _, tests = _stored(store, sid, "frac", None, None)
    got = tests.set_index("metric")["value"]
    assert got["accuracy"] == pytest.approx(
        skm.accuracy_score(y[test_rows], est.predict(X.iloc[test_rows])), abs=1e-12)


def test_paths_equal_one_fit_per_cell(sweep, tmp_path):
    """Bit-identical: the tree's pruning replay and the forest's prefix against --no-paths."""
    kind, df, store, sid = sweep
    df.to_csv(tmp_path / "d.csv", index=False)
    text = store.query("select spec_text from sweeps where sweep_id = ?", [sid]).iloc[0, 0]
    (tmp_path / "spec.yaml").write_text(text)
    spec = parse_spec(text, source=tmp_path / "spec.yaml")
    plain = run_sweep(spec, jobs=2, paths=False)
    q = ("select c.model, c.params, f.\"repeat\", f.fold, f.metric, f.value, f.how "
         "from fold_scores f join cells c using (sweep_id, cell_id) where f.sweep_id = ? "
         "and c.model in ('tree', 'forest') order by all")
    routed = store.query(q, [sid])
    again = Store(plain.store_path).query(q, [plain.sweep_id])
    assert set(routed["how"]) == {"tree_path", "forest_prefix"} and set(again["how"]) == {"plain"}
    assert routed["value"].tolist() == again["value"].tolist()  # exactly, not approximately


def test_picks_and_compare_follow_each_metrics_direction(sweep):
    kind, _, store, sid = sweep
    result = summary(store, sid)
    assert result.facts.task == "classification"
    assert len(result.facts.classes) == (3 if kind == "multiclass" else 2)
    assert set(result.table["model"]) == {"logit", "plain", "tree", "frac", "forest"}
    # log loss: lower is better, so the best cell has the smallest mean of its model
    stats = store.query("""select c.model, c.cell_id, avg(f.value) m from fold_scores f
        join cells c using (sweep_id, cell_id) where f.sweep_id = ? and f.metric = 'log_loss'
        group by all""", [sid])
    best = picks(store, sid, rule="best").table.set_index("model")["cell_id"]
    for model, g in stats.groupby("model"):
        assert best[model] == g.sort_values("m")["cell_id"].iloc[0]
    pairs = compare(store, sid, metric="accuracy")
    assert pairs.better == "higher" and len(pairs.table) == 10


def test_roc_and_calibration_against_scikit_learn():
    # Reference: sklearn.metrics.roc_auc_score and sklearn.calibration.calibration_curve
    from sklearn.calibration import calibration_curve

    rng = np.random.default_rng(4)
    y = rng.random(300) < 0.4
    scores = np.round(np.clip(0.35 * y + rng.normal(0.4, 0.2, 300), 0, 1), 2)  # ties too
    _, _, area = roc_points(scores, y)
    assert area == pytest.approx(skm.roc_auc_score(y, scores), abs=1e-12)
    bins = calibration_bins(scores, y)
    true, mean = calibration_curve(y, scores, n_bins=10, strategy="uniform")
    assert bins["accuracy"].tolist() == pytest.approx(true.tolist(), abs=1e-12)
    assert bins["confidence"].tolist() == pytest.approx(mean.tolist(), abs=1e-12)


def test_figures_and_report_of_a_class_sweep(tmp_path):
    from click.testing import CliRunner

    from runner.cli import main
    from runner.demo_grades import make_grades

    make_grades(240, seed=2).to_csv(tmp_path / "g.csv", index=False)
    (tmp_path / "spec.yaml").write_text(
        "name: g\ndata: {path: g.csv, target: grade}\ntest: {fraction: 0.25, seed: 1}\n"
        "folds: {k: 3, repeats: 1, seed: 2}\nstore: s.duckdb\n"
        "explain: {permutation: {repeats: 2}}\nmodels:\n"
        "  logit: {family: linear, grid: {penalty: l2, alpha: [0.01, 0.1]}}\n"
        "  tree: {family: pruned_tree, grid: {ccp_fraction: [0.01, 0.05]}}\n")
    runner_ = CliRunner()
    out = runner_.invoke(main, ["run", str(tmp_path / "spec.yaml"), "--jobs", "1"])
    assert out.exit_code == 0, out.output
    assert "CV log loss (mean ± SE)" in out.stdout and "CV ROC AUC (mean ± SE)" in out.stdout
    store = str(tmp_path / "s.duckdb")
    for kind in ("calibration", "roc", "tree", "models", "importance"):
        made = runner_.invoke(main, ["plot", kind, "--store", store, "--out-dir",
                                     str(tmp_path / "p"), "--image", "png"])
        assert made.exit_code == 0, (kind, made.output)
    # every panel's number to the same three decimals, so panels compare at a glance
    from runner.read.figures import make_figure

    fig = make_figure("calibration", Store(store))
    gaps = [ax.get_title(loc="left") for ax in fig.axes if ax.get_visible()]
    assert len(gaps) == 2 and all(re.fullmatch(r"\w+: mean gap \d\.\d{3}", g) for g in gaps), gaps
    areas = [t.get_text() for ax in make_figure("roc", Store(store)).axes if ax.get_legend()
             for t in ax.get_legend().get_texts()]
    assert len(areas) == 6 and all(re.fullmatch(r"\w+ \(area \d\.\d{3}\)", a) for a in areas), areas
    refused = runner_.invoke(main, ["plot", "predictions", "--store", store])
    assert refused.exit_code == 2 and "foldwise plot calibration" in refused.output
    report = runner_.invoke(main, ["report", "--store", store, "--out", str(tmp_path / "r.html")])
    assert report.exit_code == 0, report.output
    html = (tmp_path / "r.html").read_text()
    assert "calibration and ranking" in html and "Figure not available" not in html
    probabilities = Store(store).query("select probabilities, observed_class from "
                                       "test_predictions")
    assert all(abs(sum(p) - 1.0) < 1e-9 and len(p) == 3 for p in probabilities["probabilities"])
    assert set(probabilities["observed_class"]) == {"A", "B", "C"}


def test_logistic_coefficients_equal_the_published_spector_mazzeo_estimates(tmp_path):
    """Published logit estimates for Spector & Mazzeo (1980) (tests/data/spector_published.json,
    reproduced with statsmodels' Logit on its `spector` data): an unpenalised logistic
    model swept, then built on all 32 rows, stores coefficients in the data's units that
    agree to at least 5 significant digits, and its log-likelihood."""
    from pathlib import Path

    from click.testing import CliRunner

    from runner.cli import main

    folder = Path(__file__).parent / "data"
    published = json.loads((folder / "spector_published.json").read_text())
    (tmp_path / "spector.csv").write_bytes((folder / "spector.csv").read_bytes())
    (tmp_path / "spec.yaml").write_text(
        "name: spector\ndata: {path: spector.csv, target: grade}\ntask: classification\n"
        "test: {fraction: 0.25, seed: 1}\nfolds: {k: 3, repeats: 1, seed: 1}\n"
        "store: s.duckdb\nexplain: {cells: none}\n"
        "models:\n  logit: {family: linear, grid: {penalty: none}}\n")
    store = str(tmp_path / "s.duckdb")
    ran = CliRunner().invoke(main, ["run", str(tmp_path / "spec.yaml"), "-q", "--jobs", "1"])
    assert ran.exit_code == 0, ran.output
    built = CliRunner().invoke(main, ["build", "--all-rows", "--out", str(tmp_path / "m.skops"),
                                      "--store", store])
    assert built.exit_code == 0, built.output
    model_id = Store(store).query("select model_id from models")["model_id"][0]
    out = CliRunner().invoke(main, ["coefficients", "--model-id", model_id, "--format", "json",
                                    "--store", store])
    rows = json.loads(out.output)
    assert {r["class_label"] for r in rows} == {"1"}  # the log-odds of grade 1 against 0
    got = {("const" if r["term"] == "(intercept)" else r["term"]): r["coefficient"]
           for r in rows}
    for name, value in published["coefficients"].items():
        assert got[name] == pytest.approx(value, rel=5e-6), name
    from runner.model.keep import load_model

    df = pd.read_csv(folder / "spector.csv")
    model = load_model(str(tmp_path / "m.skops"))
    p = model.pipeline.predict_proba(df[["gpa", "tuce", "psi"]])[:, 1]
    y = df["grade"].to_numpy()
    loglik = float(np.sum(y * np.log(p) + (1 - y) * np.log(1 - p)))
    assert loglik == pytest.approx(published["log_likelihood"], abs=5e-5)


def test_a_built_class_model_predicts_the_stored_probabilities_bit_for_bit(tmp_path):
    from click.testing import CliRunner

    from runner.cli import main
    from runner.demo_grades import make_grades

    df = make_grades(240, seed=8)
    df.to_csv(tmp_path / "g.csv", index=False)
    (tmp_path / "spec.yaml").write_text(
        "name: g\ndata: {path: g.csv, target: grade}\ntest: {fraction: 0.25, seed: 1}\n"
        "folds: {k: 3, repeats: 1, seed: 2}\nstore: s.duckdb\n"
        "explain: {permutation: {repeats: 1}}\nmodels:\n"
        "  forest: {family: forest, grid: {n_estimators: [10, 20]}}\n")
    runner_ = CliRunner()
    assert runner_.invoke(main, ["run", str(tmp_path / "spec.yaml"), "-q", "--jobs", "1"]
                          ).exit_code == 0
    store = str(tmp_path / "s.duckdb")
    built = runner_.invoke(main, ["build", "--out", str(tmp_path / "f.skops"), "--store", store])
    assert built.exit_code == 0, built.output
    stored = Store(store).query("""select p."row", p.predicted_class, p.probabilities
        from test_predictions p join models m using (sweep_id, cell_id) order by p."row" """)
    df.iloc[stored["row"]].drop(columns="grade").to_csv(tmp_path / "new.csv", index=False)
    out = runner_.invoke(main, ["predict", str(tmp_path / "f.skops"), str(tmp_path / "new.csv"),
                                "--out", str(tmp_path / "p.csv")])
    assert out.exit_code == 0, out.output
    got = pd.read_csv(tmp_path / "p.csv")
    assert got["predicted_class"].tolist() == stored["predicted_class"].tolist()
    for k, label in enumerate(["A", "B", "C"]):
        assert got[f"probability_{label}"].tolist() == [p[k] for p in stored["probabilities"]]
    # its card says why it offers no interval: not that it was built on every row
    (model_id,) = Store(store).query("select model_id from models")["model_id"]
    import json

    from runner.read.model_views import card_view

    card = runner_.invoke(main, ["card", model_id, "--store", store, "--format", "json"])
    assert card.exit_code == 0, card.output
    table = card_view(json.loads(card.output)).table
    assert table.set_index("")["value"]["intervals"] == (
        "none: intervals are for numeric targets; the class probabilities say how sure")


def test_grouped_class_folds_are_scikit_learns_stratified_group_folds(tmp_path):
    """A class target with folds.groups: the test split is scikit-learn's GroupShuffleSplit
    and each repeat's folds its StratifiedGroupKFold(shuffle=True) with one RandomState
    handed from repeat to repeat (reference: scikit-learn 1.9 model_selection, the recipe in
    README 'Rebuilding the folds yourself'); no group on both sides; the plan says so."""
    from sklearn.model_selection import GroupShuffleSplit, StratifiedGroupKFold

    from runner.write.prepare import load_checked
    from runner.write.resampling import make_plan

    df = _data("multiclass")
    df["lot"] = [f"L{i // 3:03d}" for i in range(len(df))]
    df.to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "spec.yaml").write_text(
        "name: g\ndata: {path: d.csv, target: label}\n"
        f"test: {{fraction: {FRACTION}, seed: {TEST_SEED}}}\n"
        f"folds: {{k: {K}, repeats: {R}, seed: {SEED}, groups: lot}}\n"
        "store: store.duckdb\nmodels:\n  tree: {family: pruned_tree}\n")
    spec = parse_spec((tmp_path / "spec.yaml").read_text(), source=tmp_path / "spec.yaml")
    frame = load_checked(spec)
    plan = make_plan(spec, frame)
    y, groups = df["label"].to_numpy(dtype=object), df["lot"].to_numpy(dtype=object)
    split = GroupShuffleSplit(n_splits=1, test_size=FRACTION, random_state=TEST_SEED)
    test_rows = np.sort(next(split.split(np.arange(len(y)), groups=groups))[1])
    train_rows = np.setdiff1d(np.arange(len(y)), test_rows)
    rng = np.random.RandomState(SEED)
    expected = [s for _ in range(R) for s in StratifiedGroupKFold(
        n_splits=K, shuffle=True, random_state=rng).split(train_rows, y[train_rows],
                                                          groups=groups[train_rows])]
    assert np.array_equal(plan.test_rows, test_rows)
    assert np.array_equal(plan.train_rows, train_rows)
    assert len(plan.folds) == len(expected) == K * R
    for fold, (fit, valid) in zip(plan.folds, expected):
        assert np.array_equal(fold.fit, fit) and np.array_equal(fold.valid, valid)
        g = groups[train_rows]
        assert not set(g[fold.fit]) & set(g[fold.valid])
    assert plan.identity["stratified"] is True and plan.identity["scheme"] == "groups"
    result = run_sweep(spec, jobs=1)
    record = Store(result.store_path).query("select plan from sweeps")["plan"][0]
    assert json.loads(record)["stratified"] is True


def test_a_feature_that_gives_a_class_away_is_found(tmp_path):
    """The target-proxy check reads a class target as one 0/1 indicator per class: a column
    that is a copy of the class is found, the data's own columns are not."""
    df = _data("multiclass")
    df["copy"] = df["label"].map({"x": 1.0, "y": 5.0, "z": 9.0})
    df.to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "spec.yaml").write_text(
        "name: p\ndata: {path: d.csv, target: label}\ntest: {fraction: 0.25, seed: 1}\n"
        "folds: {k: 3, seed: 2}\nstore: store.duckdb\nmodels:\n  tree: {family: pruned_tree}\n")
    from runner.write.engine import check_spec

    spec = parse_spec((tmp_path / "spec.yaml").read_text(), source=tmp_path / "spec.yaml")
    _, _, findings = check_spec(spec)
    proxies = findings[findings["kind"] == "target_proxy"]
    assert proxies["column_name"].tolist() == ["copy"]
    assert proxies["value"].iloc[0] == pytest.approx(1.0)


def _sites_spec(tmp_path, metrics: str, models: str, *, repeats: int = 2):
    """One class only in 4 of 40 sites, folds by site: ROC AUC is undefined on the
    validation folds that hold a single class."""
    rng = np.random.default_rng(5)
    site = np.repeat(np.arange(40), 8)
    y = np.where((site < 4) & (rng.random(len(site)) < 0.5), "pos", "neg")
    df = pd.DataFrame({"site": site, "x": rng.normal(size=len(site)) + (y == "pos"),
                       "w": rng.normal(size=len(site)), "y": y})
    df.to_csv(tmp_path / "sites.csv", index=False)
    path = tmp_path / "spec.yaml"
    path.write_text(f"""
name: sites
data: {{path: sites.csv, target: y, drop: [site]}}
test: {{fraction: 0.2, seed: 1}}
folds: {{k: 5, repeats: {repeats}, seed: 7, groups: site}}
metrics: {metrics}
store: store.duckdb
explain: {{cells: none}}
models:
{models}
""")
    return parse_spec(path.read_text(), source=path)


def test_a_score_undefined_on_some_folds_is_named_and_its_se_counts_defined_folds(tmp_path):
    # One class only in 4 of 40 sites, folds by site: most validation folds hold a single
    # class, where scikit-learn's roc_auc_score is undefined (it raises); the store keeps
    # NULL there. SE over the defined folds is the sample sd / sqrt(their count)
    # (the standard error of a mean, recomputed with numpy).
    from runner.read.queries import coverage, sweep_facts
    from runner.read.views import coverage_notes

    spec = _sites_spec(tmp_path, "[roc_auc, log_loss]",
                       "  logit: {family: linear, grid: {penalty: l2, alpha: [0.001, 0.1]}}",
                       repeats=1)
    store = Store(tmp_path / "store.duckdb")
    import warnings

    from sklearn.exceptions import UndefinedMetricWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = run_sweep(spec, store=store, jobs=1)
    assert not [w for w in caught if issubclass(w.category, UndefinedMetricWarning)]
    rows = store.query("select cell_id, value from fold_scores where sweep_id = ? and "
                       "metric = 'roc_auc'", [result.sweep_id])
    undefined = rows.value.isna().groupby(rows.cell_id).sum()
    assert (undefined > 0).all() and (undefined < 5).all()
    view = store.query("select cell_id, se, n from cell_summary where sweep_id = ? and "
                       "metric = 'roc_auc'", [result.sweep_id]).set_index("cell_id")
    for cell, values in rows.dropna().groupby("cell_id").value:
        assert view.n[cell] == len(values) == 5 - undefined[cell]
        assert view.se[cell] == pytest.approx(np.std(values, ddof=1) / np.sqrt(len(values)),
                                              rel=1e-12)
    facts = sweep_facts(store, result.sweep_id)
    notes = coverage_notes(coverage(store, facts), result.sweep_id, 5)
    assert notes[-1].startswith("note: model 'logit' has no cell to pick: of its 2 cells, 2 have a "
                                "score undefined on some folds. A metric such as ROC AUC is "
                                "undefined on a fold whose validation rows hold a single "
                                "class")
    # a store whose view was made before (its SE and n counted every fold row) gets the
    # view made again the next time it is opened for writing
    import duckdb

    with duckdb.connect(str(tmp_path / "store.duckdb")) as con:
        con.execute("create or replace view cell_summary as select f.sweep_id, f.cell_id, "
                    "f.metric, stddev_samp(f.value) / sqrt(count(*)) as se, count(*) as n "
                    "from fold_scores f group by all")
    assert run_sweep(spec, store=Store(tmp_path / "store.duckdb"), jobs=1).n_reused == 2
    renewed = Store(tmp_path / "store.duckdb").query(
        "select cell_id, n from cell_summary where sweep_id = ? and metric = 'roc_auc'",
        [result.sweep_id]).set_index("cell_id")
    assert (renewed.n == view.n[renewed.index]).all()


def test_a_fold_fitting_without_a_class_names_the_class_and_the_fold():
    # The plan refuses such folds before any fit; a worker handed one anyway says which
    # class its fitting rows lack and which fold it is, rather than 'a class is missing'.
    from runner.write.tasks import run_task

    rng = np.random.default_rng(3)
    X = pd.DataFrame({"x": rng.normal(size=30), "w": rng.normal(size=30)})
    y_fit = np.array(["a", "b"] * 10)
    y_eval = np.array(["a", "b", "c"] * 3 + ["a"])
    scores, failures, _ = run_task(
        "linear", [("c1", {"penalty": "l2", "alpha": 0.01})], X.iloc[:20], y_fit,
        X.iloc[20:], y_eval, seed=1, repeat=1, fold=2, metrics=["log_loss"],
        numeric=["x", "w"], categorical=[], task="classification", classes=["a", "b", "c"])
    assert scores == []
    (failure,) = failures
    assert (failure["kind"], failure["repeat"], failure["fold"]) == ("MissingClass", 1, 2)
    assert failure["message"] == ("the fitting rows of fold 2 of repeat 1 hold no row of "
                                  "class 'c', so the model fitted there gives no probability "
                                  "for it")


def test_a_pair_is_compared_on_the_folds_where_both_scores_are_defined(tmp_path):
    # Nadeau & Bengio (2003) corrected resampled t-test (citation from memory), written out
    # with numpy and scipy.stats.t over the paired folds where both ROC AUCs are defined:
    # n = those folds, var (1/n + mean n_valid/n_train) · var(d, ddof=1), t on n − 1 df.
    # Counting the undefined folds in n gave a smaller SE and more degrees of freedom.
    from scipy import stats

    from runner.read.views import compare_view, summary_view

    spec = _sites_spec(tmp_path, "[log_loss, roc_auc]",
                       "  logit: {family: linear, grid: {penalty: l2, alpha: [0.01]}}\n"
                       "  tree: {family: pruned_tree, grid: {ccp_fraction: [0.01]}}")
    store = Store(tmp_path / "store.duckdb")
    result = run_sweep(spec, store=store, jobs=1)
    rows = store.query("""
        select c.model, f."repeat", f.fold, f.value, f.n_valid, f.n_train from fold_scores f
        join cells c using (sweep_id, cell_id)
        where f.sweep_id = ? and f.metric = 'roc_auc'""", [result.sweep_id])
    wide = rows.pivot_table(index=["repeat", "fold"], columns="model", values="value",
                            dropna=False)
    sizes = rows[rows.model == "logit"].set_index(["repeat", "fold"])
    both = wide.dropna()
    assert 2 <= len(both) < len(wide) == 10
    d = (both["logit"] - both["tree"]).to_numpy()
    n = len(d)
    ratio = (sizes.n_valid / sizes.n_train)[both.index].mean()
    se = np.sqrt((1 / n + ratio) * np.var(d, ddof=1))
    pair = compare(store, result.sweep_id, metric="roc_auc").table.iloc[0]
    assert pair["folds"] == n
    assert pair["mean_diff"] == pytest.approx(d.mean(), rel=1e-12)
    assert pair["se"] == pytest.approx(se, rel=1e-12)
    assert pair["df"] == n - 1
    assert pair["p_value"] == pytest.approx(2 * stats.t.sf(abs(d.mean() / se), n - 1),
                                            rel=1e-9)
    shown = compare_view(compare(store, result.sweep_id, metric="roc_auc"))
    assert any("ROC AUC is undefined on some folds" in c for c in shown.caveats)
    # the summary keeps the metric and says over how many folds its mean is taken
    table = summary(store, result.sweep_id).table.set_index("model")
    assert table.loc["logit", "n_roc_auc"] == wide["logit"].notna().sum() < 10
    assert table.loc["logit", "cv_roc_auc"] == pytest.approx(wide["logit"].mean(), rel=1e-12)
    from runner.read.queries import complexity_table
    from runner.read.views import complexity_view

    path = complexity_view(complexity_table(store, "logit", result.sweep_id, metric="roc_auc"))
    assert path.sentences[-1] == (
        "ROC AUC is undefined on some folds of 1 cell (their validation rows lack a class it "
        f"needs): their CV mean is over the {wide['logit'].notna().sum()} folds of 10 where "
        "it is defined.")
    notes = summary_view(summary(store, result.sweep_id)).notes
    assert (f"note: logit's CV ROC AUC is the mean of the {wide['logit'].notna().sum()} "
            "folds of 10 where it is defined; on the others it is undefined (their "
            "validation rows lack a class it needs).") in notes


def test_a_score_undefined_everywhere_is_shown_and_not_called_a_tie(tmp_path):
    # Time-ordered folds and test split: a class seen only in the first rows is in no
    # validation fold and no test row, so ROC AUC is undefined on every fold and on the test
    # split. The summary shows the metric (it dropped the column and then crashed on it),
    # and compare says there is nothing to compare (it said the two models tie).
    from runner.read.views import compare_view, summary_view

    rng = np.random.default_rng(0)
    n = 300
    y = np.where(rng.random(n) < 0.5, "a", "b").astype(object)
    y[:60:4] = "gone"
    df = pd.DataFrame({"x": rng.normal(size=n), "w": rng.normal(size=n), "t": np.arange(n),
                       "y": y})
    df.to_csv(tmp_path / "d.csv", index=False)
    path = tmp_path / "spec.yaml"
    path.write_text("name: t\ndata: {path: d.csv, target: y}\ntest: {fraction: 0.2}\n"
                    "folds: {k: 3, order: t}\nmetrics: [log_loss, roc_auc]\n"
                    "store: store.duckdb\nmodels:\n"
                    "  logit: {family: linear}\n  tree: {family: pruned_tree}\n")
    store = Store(tmp_path / "store.duckdb")
    result = run_sweep(parse_spec(path.read_text(), source=path), store=store, jobs=1)
    table = summary(store, result.sweep_id).table
    assert table["n_roc_auc"].tolist() == [0, 0]
    assert table["test_roc_auc"].isna().all() and table["tested_roc_auc"].all()
    view = summary_view(summary(store, result.sweep_id))
    assert "test ROC AUC" in view.table.columns
    assert ("note: logit's test ROC AUC is undefined: the test rows lack a class it needs."
            in view.notes)
    shown = compare_view(compare(store, result.sweep_id, metric="roc_auc"))
    assert shown.sentences == ("ROC AUC is undefined on every fold of logit or tree: nothing "
                               "to compare",)
    # the ROC figure draws the classes the test rows hold and names the one they lack (it
    # refused to draw at all)
    from runner.read.class_figures import roc_figure

    fig = roc_figure(store, result.sweep_id)
    titles = [ax.get_title(loc="left") for ax in fig.axes if ax.get_visible()]
    assert titles == ["class a against the rest", "class b against the rest"]
    assert "no curve for gone: no test rows of it" in " ".join(
        fig._suptitle.get_text().split())


def test_l1_and_elastic_net_logistic_scores_equal_scikit_learns_saga_bit_for_bit(tmp_path):
    """Reference: scikit-learn 1.9 LogisticRegression(solver="saga", C=1/(alpha*n_fit),
    l1_ratio, tol=1e-4, max_iter=1000, random_state=the fold's seed) in cross_validate on
    RepeatedStratifiedKFold, and sklearn.metrics on the test split: the README's recipe,
    equal to the last bit (saga stops at max_iter here, so that number matters)."""
    df = _data("multiclass")
    df.to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "spec.yaml").write_text(
        "name: s\ndata: {path: d.csv, target: label}\n"
        f"test: {{fraction: {FRACTION}, seed: {TEST_SEED}}}\n"
        f"folds: {{k: {K}, repeats: 1, seed: {SEED}}}\nmetrics: [log_loss, accuracy]\n"
        "store: store.duckdb\nexplain: {cells: none}\nmodels:\n"
        "  l1: {family: linear, grid: {penalty: l1, alpha: [0.003]}}\n"
        "  enet: {family: linear, grid: {penalty: elasticnet, alpha: [0.003], l1_ratio: [0.5]}}\n")
    spec = parse_spec((tmp_path / "spec.yaml").read_text(), source=tmp_path / "spec.yaml")
    store = Store(run_sweep(spec, jobs=1).store_path)
    df = pd.read_csv(tmp_path / "d.csv")  # the numbers as read back, as the sweep read them
    X, y = df.drop(columns="label"), df["label"].to_numpy(dtype=object)
    test_rows = np.sort(train_test_split(np.arange(len(y)), test_size=FRACTION,
                                         random_state=TEST_SEED, stratify=y)[1])
    train_rows = np.setdiff1d(np.arange(len(y)), test_rows)
    Xtr, ytr = X.iloc[train_rows], y[train_rows]
    for model, l1_ratio in (("l1", 1.0), ("enet", 0.5)):
        def make(seed, n_fit):
            return Pipeline([("prep", _prep("linear")), ("model", LogisticRegression(
                C=1 / (0.003 * n_fit), l1_ratio=l1_ratio, solver="saga", tol=1e-4,
                max_iter=1000, random_state=seed))])
        folds, tests = _stored(store, store.query("select sweep_id from sweeps")["sweep_id"][0],
                               model, None, None)
        splits = RepeatedStratifiedKFold(n_splits=K, n_repeats=1, random_state=SEED).split(
            train_rows, ytr)
        for f, (fit, valid) in enumerate(splits):
            est = make(fold_seed(SEED, 0, f), len(fit)).fit(Xtr.iloc[fit], ytr[fit])
            got = folds[folds.fold == f].set_index("metric")["value"]
            assert got["log_loss"] == skm.log_loss(ytr[valid],
                                                   est.predict_proba(Xtr.iloc[valid])), (model, f)
            assert got["accuracy"] == skm.accuracy_score(ytr[valid],
                                                         est.predict(Xtr.iloc[valid])), (model, f)
        est = make(refit_seed(SEED), len(train_rows)).fit(Xtr, ytr)
        got = tests.set_index("metric")["value"]
        assert got["log_loss"] == skm.log_loss(y[test_rows], est.predict_proba(X.iloc[test_rows]))


def _early_class_frame() -> pd.DataFrame:
    """240 rows over days 0-59 of classes a and b, and c only before day 30."""
    rng = np.random.default_rng(2)
    n = 240
    day = np.sort(rng.integers(0, 60, n))
    x = rng.normal(size=n)
    label = np.where(x > 0.4, "b", "a")
    label[(day < 30) & (rng.random(n) < 0.3)] = "c"
    return pd.DataFrame({"day": day, "x": x, "w": rng.normal(size=n), "label": label})


def _write_early_class_spec(tmp_path, metrics: str, explain: str, more_models: str = ""):
    """d.csv of `_early_class_frame` and spec.yaml over it: time-ordered folds by day, the
    last fifth of the days as the test split, a ridge-penalised logistic model."""
    _early_class_frame().to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "spec.yaml").write_text(
        "name: t\ndata: {path: d.csv, target: label}\ntest: {fraction: 0.2}\n"
        f"folds: {{k: 3, order: day}}\nmetrics: {metrics}\nstore: s.duckdb\n"
        f"explain: {explain}\nmodels:\n"
        "  logit: {family: linear, grid: {penalty: l2, alpha: [0.01]}}\n" + more_models)


def test_a_score_undefined_on_the_test_split_is_shown_as_such_not_a_crash(tmp_path):
    # Time-ordered folds of three classes, the third only in the early days: the test
    # split (the last days) holds two classes, so its one-vs-rest ROC AUC is undefined for
    # every cell (scikit-learn's roc_auc_score gives NaN with a warning when a class of
    # `labels` is absent from y_true), stored NULL. `run` must still print its summary.
    from click.testing import CliRunner

    from runner.cli import main

    _write_early_class_spec(tmp_path, "[log_loss, roc_auc]", "{cells: none}",
                            "  tree: {family: pruned_tree, grid: {ccp_alpha: [0.01]}}\n")
    out = CliRunner().invoke(main, ["run", str(tmp_path / "spec.yaml"), "--jobs", "1"])
    assert out.exit_code == 0, out.output
    tests = Store(tmp_path / "s.duckdb").query("select metric, value from test_scores")
    assert tests[tests.metric == "roc_auc"].value.isna().all()
    assert (tests[tests.metric == "log_loss"].value > 0).all()
    assert "test ROC AUC" in out.stdout and "CV ROC AUC (mean ± SE)" in out.stdout
    got = CliRunner().invoke(main, ["summary", "--store", str(tmp_path / "s.duckdb"),
                                    "--format", "json"])
    assert got.exit_code == 0, got.output
    rows = json.loads(got.stdout)
    assert [r["test_roc_auc"] for r in rows] == [None, None]
    assert all(0.5 < r["cv_roc_auc"] <= 1 for r in rows)
    # the sweep is finished: its picks build, and the card says the undefined score is
    # undefined (JSON null), beside the defined ones, stored and rebuilt
    built = CliRunner().invoke(main, ["build", "--model", "logit", "--out",
                                      str(tmp_path / "m.skops"), "--store",
                                      str(tmp_path / "s.duckdb")])
    assert built.exit_code == 0, built.output
    scores = json.loads((tmp_path / "m.card.json").read_text())["scores"]
    assert scores["test"]["roc_auc"] is None and scores["test_rebuilt"]["roc_auc"] is None
    stored = tests.set_index("metric").value
    assert scores["test"]["log_loss"] == scores["test_rebuilt"]["log_loss"] > 0
    assert scores["test"]["log_loss"] in stored[stored.index == "log_loss"].tolist()
    shown = CliRunner().invoke(main, ["card", str(tmp_path / "m.skops")])
    assert shown.exit_code == 0, shown.output


def test_roc_figure_draws_the_classes_the_test_split_holds(tmp_path):
    # The same data with test predictions stored: class c has no test rows, so its panel is
    # left out and said so; a and b each against the rest keep their curves, whose areas
    # equal scikit-learn's roc_auc_score on the stored probabilities.
    from runner.read.class_figures import roc_figure

    _write_early_class_spec(tmp_path, "[log_loss]", "{permutation: {repeats: 1}}")
    spec = parse_spec((tmp_path / "spec.yaml").read_text(), source=tmp_path / "spec.yaml")
    store = Store(run_sweep(spec, jobs=1).store_path)
    fig = roc_figure(store)
    panels = [ax for ax in fig.axes if ax.get_visible()]
    assert [ax.get_title(loc="left") for ax in panels] == ["class a against the rest",
                                                          "class b against the rest"]
    assert "no curve for c: no test rows of it" in fig._suptitle.get_text().replace(
        "\n", " ")
    stored = store.query("select observed_class, probabilities from test_predictions")
    proba = np.vstack(stored["probabilities"].to_numpy())
    for k, ax in enumerate(panels):
        area = skm.roc_auc_score(stored["observed_class"] == "ab"[k], proba[:, k])
        legend = ax.get_legend().get_texts()[0].get_text()
        assert legend == f"logit (area {area:.3f})", (legend, area)


def test_a_first_metric_undefined_on_the_test_split_leaves_a_report(tmp_path):
    # Picks by ROC AUC (defined on every validation fold: class c runs to day 44), whose
    # test split (the last days) lacks class c: scikit-learn's one-vs-rest ROC AUC is then
    # undefined (NaN), so are the permutation importances measured in it (stored NULL).
    # The report still builds, impurity importances still rank, and the permutation
    # figure says why it has nothing to draw.
    from click.testing import CliRunner

    from runner.cli import main
    from runner.read.explained import importance_table

    rng = np.random.default_rng(2)
    n = 300
    day = np.sort(rng.integers(0, 60, n))
    x = rng.normal(size=n)
    label = np.where(x > 0.4, "b", "a")
    label[(day < 45) & (rng.random(n) < 0.3)] = "c"
    pd.DataFrame({"day": day, "x": x, "w": rng.normal(size=n), "label": label}).to_csv(
        tmp_path / "d.csv", index=False)
    (tmp_path / "spec.yaml").write_text(
        "name: t\ndata: {path: d.csv, target: label}\ntest: {fraction: 0.2}\n"
        "folds: {k: 3, order: day}\nmetrics: [roc_auc, log_loss]\nstore: s.duckdb\n"
        "explain: {permutation: {repeats: 1}}\nmodels:\n"
        "  tree: {family: pruned_tree, grid: {ccp_alpha: [0.0, 0.01]}}\n")
    runner_ = CliRunner()
    assert runner_.invoke(main, ["run", str(tmp_path / "spec.yaml"), "-q", "--jobs", "1"]
                          ).exit_code == 0
    store = Store(tmp_path / "s.duckdb")
    assert store.query("select count(value) from importances where method = 'permutation'"
                       ).iloc[0, 0] == 0
    table = importance_table(store).table
    assert set(table["method"]) == {"impurity"} and table["rank"].min() == 1
    report = runner_.invoke(main, ["report", "--store", str(store.path), "--out",
                                   str(tmp_path / "r.html")])
    assert report.exit_code == 0, report.output
    html = " ".join((tmp_path / "r.html").read_text().split())
    assert "its test-split ROC AUC is undefined (the test rows lack a class)" in html
    assert "and on the test split" not in html
    plot = runner_.invoke(main, ["plot", "importance", "--store", str(store.path),
                                 "--out-dir", str(tmp_path / "p")])
    assert plot.exit_code == 2
    assert "permutation importances of sweep" in plot.output
    assert "which is undefined there" in " ".join(plot.output.split())


def test_time_ordered_class_folds_are_time_series_splits_and_score_as_scikit_learn(tmp_path):
    """A class target with folds.order: the folds are the README's time recipe
    (scikit-learn's TimeSeriesSplit(k, gap) over the order column's distinct values), not
    stratified, and every stored fold and test score of a forest and a logistic cell
    equals scikit-learn's on those rows to the last bit (reference: scikit-learn 1.9
    RandomForestClassifier / LogisticRegression and sklearn.metrics)."""
    from .helpers import documented_time_plan

    frame = _early_class_frame()
    frame["label"] = np.where(frame["label"] == "c", "a", frame["label"])  # two classes
    frame.to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "spec.yaml").write_text(
        "name: t\ndata: {path: d.csv, target: label}\ntest: {fraction: 0.2}\n"
        "folds: {k: 4, order: day, gap: 2, seed: 5}\nmetrics: [log_loss, brier, accuracy]\n"
        "store: s.duckdb\nexplain: {cells: none}\nmodels:\n"
        "  logit: {family: linear, grid: {penalty: l2, alpha: [0.01]}}\n"
        "  forest: {family: forest, grid: {n_estimators: [15], min_samples_leaf: [3]}}\n")
    spec = parse_spec((tmp_path / "spec.yaml").read_text(), source=tmp_path / "spec.yaml")
    store = Store(run_sweep(spec, jobs=1).store_path)
    df = pd.read_csv(tmp_path / "d.csv")
    X, y = df[["x", "w"]], df["label"].to_numpy(dtype=object)
    train_rows, test_rows, folds = documented_time_plan(df["day"].to_numpy(), test_fraction=0.2,
                                                        k=4, gap=2)
    plan = json.loads(store.query("select plan from sweeps")["plan"][0])
    assert plan["scheme"] == "time" and not plan.get("stratified")
    stored = store.query("""select c.model, f.fold, f.metric, f.value, f.n_train, f.n_valid
        from fold_scores f join cells c using (sweep_id, cell_id)""")
    tests = store.query("""select c.model, t.metric, t.value from test_scores t
        join cells c using (sweep_id, cell_id)""").set_index(["model", "metric"])["value"]
    make = {"logit": lambda s, n: make_pipeline(StandardScaler(), LogisticRegression(
                C=1 / (0.01 * n), solver="newton-cholesky", tol=1e-8)),
            "forest": lambda s, n: RandomForestClassifier(n_estimators=15, min_samples_leaf=3,
                                                          max_features="sqrt", random_state=s,
                                                          n_jobs=1)}
    Xtr, ytr = X.iloc[train_rows], y[train_rows]

    def scores(est, rows_X, rows_y):
        p = est.predict_proba(rows_X)
        return {"log_loss": skm.log_loss(rows_y, p, labels=["a", "b"]),
                "brier": skm.brier_score_loss(rows_y, p, labels=["a", "b"],
                                              scale_by_half="auto"),
                "accuracy": skm.accuracy_score(rows_y, np.array(["a", "b"])[p.argmax(1)])}
    for model, build in make.items():
        for _, f, fit, valid in folds:
            est = build(fold_seed(5, 0, f), len(fit)).fit(Xtr.iloc[fit], ytr[fit])
            got = stored[(stored.model == model) & (stored.fold == f)].set_index("metric")
            assert (got.n_train == len(fit)).all() and (got.n_valid == len(valid)).all()
            for metric, value in scores(est, Xtr.iloc[valid], ytr[valid]).items():
                assert got.value[metric] == value, (model, f, metric)
        est = build(refit_seed(5), len(train_rows)).fit(Xtr, ytr)
        for metric, value in scores(est, X.iloc[test_rows], y[test_rows]).items():
            assert tests[(model, metric)] == value, (model, metric)

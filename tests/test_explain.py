"""The explain step: stored importances equal scikit-learn's own numbers on the same refit
cells (source: scikit-learn's permutation_importance, coef_ and feature_importances_), and
the fold refits reproduce what the sweep scored."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time

import numpy as np
import pandas as pd
import pytest
from sklearn.inspection import permutation_importance

from runner.write.engine import prepare
from runner.errors import SpecError
from runner.write.explain import explain_sweep
from runner.families._readers import output_sources
from runner.families import load_family
from runner.write.resampling import refit_seed
from runner.write.spec import load_spec as spec_from_path
from runner.write.spec import parse_spec

from .helpers import spec_from


def _refit(spec, cell):
    """A cell's pipeline fitted on all training rows with the documented refit seed."""
    prep = prepare(spec)
    f, plan = prep.frame, prep.plan
    X, y = f.X.iloc[plan.train_rows], f.y[plan.train_rows]
    est = load_family(cell["family"]).make_estimator(
        json.loads(cell["params"]), seed=refit_seed(plan.seed), y_fit=y, numeric=f.numeric,
        categorical=f.categorical)
    return est.fit(X, y), prep


def _cells(store, sweep_id, family=None):
    df = store.query("select c.cell_id, c.model, c.family, c.params from cells c where "
                     "c.sweep_id = ? and c.cell_id in (select cell_id from importances where "
                     "sweep_id = ?) order by c.rowid", [sweep_id, sweep_id])
    return [r for r in df.to_dict("records") if family is None or r["family"] == family]


def _stored(store, sweep_id, cell_id, method):
    return store.query("select feature, value, spread from importances where sweep_id = ? and "
                       "cell_id = ? and method = ?", [sweep_id, cell_id, method]
                       ).set_index("feature")


def test_picked_cells_of_every_model_are_explained(explained):
    spec, store, sid = explained
    from runner.read.queries import picks

    assert {c["cell_id"] for c in _cells(store, sid)} == set(picks(store, sid).table["cell_id"])
    assert {c["family"] for c in _cells(store, sid)} == {"linear", "pruned_tree", "forest"}


def test_permutation_rows_equal_scikit_learn(explained):
    # Source: sklearn.inspection.permutation_importance on the same refit pipeline, test
    # rows, scorer, repeats (3) and seed (7) as the spec asks.
    spec, store, sid = explained
    for cell in _cells(store, sid):
        est, prep = _refit(spec, cell)
        f, plan = prep.frame, prep.plan
        ref = permutation_importance(est, f.X.iloc[plan.test_rows], f.y[plan.test_rows],
                                     scoring="neg_root_mean_squared_error", n_repeats=3,
                                     random_state=7)
        got = _stored(store, sid, cell["cell_id"], "permutation").loc[list(f.X.columns)]
        np.testing.assert_allclose(got["value"], ref.importances_mean, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(got["spread"], ref.importances_std, rtol=1e-12, atol=1e-12)


def test_coefficient_importance_equals_pipeline_coefficients(explained):
    # Source: the fitted pipeline's own coef_ (standardised scale): |w_j| for numbers; for
    # the one-hot `sex`, the population SD of X_onehot @ w over the training rows.
    spec, store, sid = explained
    (cell, *_) = _cells(store, sid, "linear")
    est, prep = _refit(spec, cell)
    f, plan = prep.frame, prep.plan
    coefs = est.named_steps["model"].coef_
    names = list(est.named_steps["prep"].get_feature_names_out())
    got = _stored(store, sid, cell["cell_id"], "coefficient")
    for col in f.numeric:
        assert got.loc[col, "value"] == pytest.approx(abs(coefs[names.index(f"num__{col}")]),
                                                      rel=1e-12)
    onehot = [i for i, n in enumerate(names) if n.startswith("cat__sex_")]
    Xt = est.named_steps["prep"].transform(f.X.iloc[plan.train_rows])
    assert len(onehot) == 2
    assert got.loc["sex", "value"] == pytest.approx(np.std(Xt[:, onehot] @ coefs[onehot]),
                                                    rel=1e-12)
    # spread = sd over the fold refits of the same number
    folds = store.query("select feature, value from fold_importances where sweep_id = ? and "
                        "cell_id = ?", [sid, cell["cell_id"]])
    assert folds.groupby("feature").size().eq(6).all()
    sd = folds.groupby("feature")["value"].std(ddof=1)
    np.testing.assert_allclose(got.loc[sd.index, "spread"], sd, rtol=1e-12)



def test_coefficient_importance_transforms_the_rows_only_for_categories(monkeypatch):
    # Source: the fitted pipeline's own coef_: on numbers alone each column's importance is
    # |w_j| and the fitting rows are not transformed; a category's needs them, once.
    from runner.families._readers import coefficient_importance

    rng = np.random.default_rng(2)
    X = pd.DataFrame(rng.normal(size=(200, 3)), columns=["a", "b", "c"])
    y = X.to_numpy() @ np.array([2.0, -1.0, 0.5]) + rng.normal(size=200)
    family = load_family("linear")
    calls = []
    for categorical in ([], ["kind"]):
        data = X.assign(kind=rng.choice(["p", "q", "r"], 200)) if categorical else X
        est = family.make_estimator({"penalty": "l2", "alpha": 1.0}, seed=0, y_fit=y,
                                    numeric=["a", "b", "c"], categorical=categorical)
        est.fit(data, y)
        prep = est.named_steps["prep"]
        monkeypatch.setattr(prep, "transform", lambda rows, _t=prep.transform: (
            calls.append(len(rows)), _t(rows))[1])
        got = coefficient_importance(est, data, list(data.columns))
        coefs = est.named_steps["model"].coef_
        assert [got[c] for c in "abc"] == [abs(w) for w in coefs[:3]]
        assert calls == ([200] if categorical else [])
        if categorical:
            Xt = prep.transform(data)
            assert got["kind"] == pytest.approx(np.std(Xt[:, 3:] @ coefs[3:]), rel=1e-12)

def test_impurity_importance_equals_feature_importances(explained):
    # Source: the fitted tree's and forest's feature_importances_, one column per feature
    # (ordinal-coded categories), summed back to the original columns.
    spec, store, sid = explained
    for cell in _cells(store, sid, "pruned_tree") + _cells(store, sid, "forest"):
        est, prep = _refit(spec, cell)
        sources = output_sources(est.named_steps["prep"])
        ref = pd.Series(est.named_steps["model"].feature_importances_, index=sources)
        got = _stored(store, sid, cell["cell_id"], "impurity")
        np.testing.assert_allclose(got.loc[ref.index, "value"], ref, rtol=1e-12)
        assert got["value"].sum() == pytest.approx(1.0)


def test_fold_refits_reproduce_the_sweeps_trees(explained):
    spec, store, sid = explained
    both = store.query("""
        select t.cell_id, t."repeat", t.fold, t.n_leaves, f.n_leaves as swept
        from tree_folds t join fold_scores f on f.sweep_id = t.sweep_id and
             f.cell_id = t.cell_id and f."repeat" = t."repeat" and f.fold = t.fold
        where t.sweep_id = ? and f.metric = 'rmse'""", [sid])
    assert len(both) == 6 * len(_cells(store, sid, "pruned_tree")) > 0
    assert (both["n_leaves"] == both["swept"]).all()


def test_stored_predictions_reproduce_test_scores(explained):
    spec, store, sid = explained
    df = store.query("""
        select p.cell_id, sqrt(avg((p.predicted - p.observed) ^ 2)) as rmse, t.value,
               count(*) as n, any_value(t.n_test) as n_test
        from test_predictions p join test_scores t on t.sweep_id = p.sweep_id and
             t.cell_id = p.cell_id and t.metric = 'rmse'
        where p.sweep_id = ? group by p.cell_id, t.value""", [sid])
    assert len(df) == len(_cells(store, sid))
    np.testing.assert_allclose(df["rmse"], df["value"], rtol=1e-9)
    assert (df["n"] == df["n_test"]).all()


def test_tree_nodes_describe_the_refit_tree(explained):
    spec, store, sid = explained
    for cell in _cells(store, sid, "pruned_tree"):
        est, prep = _refit(spec, cell)
        nodes = store.query("select * from tree_nodes where sweep_id = ? and cell_id = ? "
                            "order by node", [sid, cell["cell_id"]])
        tree = est.named_steps["model"]
        assert len(nodes) == tree.tree_.node_count
        assert (nodes["left_child"] < 0).sum() == tree.get_n_leaves()
        assert nodes.loc[0, "n_samples"] == prep.plan.n_train and nodes.loc[0, "parent"] == -1
        inner = nodes[nodes["left_child"] >= 0]
        assert inner["rule"].notna().all() and nodes["depth"].max() == tree.get_depth()


def test_explain_none_then_all(tmp_path, diabetes_csv):
    spec = spec_from(tmp_path, "ridge: {family: linear, grid: {penalty: l2, alpha: [1.0, 100.0]}}",
                     extra="explain: {cells: none}\n")
    from runner.write.engine import run_sweep
    from runner.store import Store

    result = run_sweep(spec, jobs=1)
    store = Store(result.store_path)
    assert store.query("select count(*) from importances").iloc[0, 0] == 0
    done = explain_sweep(spec, store, result.sweep_id, cells="all", jobs=1)
    assert done.cells == 2 and not done.problems
    per_cell = store.query("select cell_id, count(*) as n from importances group by cell_id")
    assert len(per_cell) == 2 and (per_cell["n"] == 2 * 10).all()  # 10 columns x 2 methods


@pytest.mark.parametrize("explain, message", [
    ("{cells: some}", "explain.cells"),
    ("{permutation: {repeats: 0}}", "explain.permutation.repeats"),
    ("{cell: all}", "unknown field 'cell'"),
])
def test_explain_field_is_validated(explain, message):
    text = ("name: x\ndata: {path: d.csv, target: y}\ntest: {fraction: 0.2}\n"
            f"explain: {explain}\nmodels: {{m: {{family: linear}}}}\n")
    with pytest.raises(SpecError, match=message.replace(".", r"\.")):
        parse_spec(text)


def test_rerun_copies_explain_rows_instead_of_refitting(tmp_path, diabetes_csv):
    from runner.write.engine import run_sweep
    from runner.store import Store

    spec = spec_from(tmp_path, "ridge: {family: linear, grid: {penalty: l2, alpha: [1.0, 100.0]}}",
                     explain="picked")
    store = Store(tmp_path / "store.duckdb")
    first = run_sweep(spec, store=store, jobs=1)
    again = run_sweep(spec, store=store, jobs=1)
    # in the order the sweeps ran (two sweeps of one second have ids in no set order)
    marks = store.query("select e.sweep_id, coalesce(e.reused_from, '') as source "
                        "from explained e join sweeps s using (sweep_id) "
                        "order by s.started_at, e.cell_id")
    assert len(marks) == 4  # best and one-SE picks of both sweeps (ridge: 2 cells)
    assert marks["source"].tolist() == ["", "", first.sweep_id, first.sweep_id]
    rows = store.query("select sweep_id, cell_id, feature, method, value, spread "
                       "from importances order by all")
    a, b = (rows[rows.sweep_id == s].drop(columns="sweep_id").reset_index(drop=True)
            for s in (first.sweep_id, again.sweep_id))
    pd.testing.assert_frame_equal(a, b)
    assert explain_sweep(spec, store, again.sweep_id, jobs=1).cells == 0  # already done
    fresh = run_sweep(spec, store=store, jobs=1, fresh=True)
    marks = store.query("select reused_from from explained where sweep_id = ?", [fresh.sweep_id])
    assert len(marks) == 2 and marks["reused_from"].isna().all()


def test_each_cell_is_stored_as_soon_as_its_refits_are_back(tmp_path, diabetes_csv):
    from runner.write.engine import run_sweep
    from runner.store import Store

    spec = spec_from(tmp_path, "ridge: {family: linear, grid: {penalty: l2, "
                     "alpha: [1.0, 100.0, 1000.0]}}")
    result = run_sweep(spec, jobs=1)
    seen: list[int] = [0]
    stored: list[int] = []

    class Recording(Store):
        def write_batch(self, tables):
            if "explained" in tables:
                stored.append(seen[-1])
            super().write_batch(tables)

    done = explain_sweep(spec, Recording(result.store_path), result.sweep_id, cells="all",
                         jobs=1, progress=lambda n, total: seen.append(n))
    # one transaction per cell, each right after its 7th task (refit + 6 fold refits)
    assert done.cells == 3 and stored == [7, 14, 21] and seen[-1] == 21


KILL_MODELS = """
ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 10.0]}}
tree: {family: pruned_tree, grid: {ccp_alpha: [0.0, 50.0], min_samples_leaf: [3]}}
forest: {family: forest, grid: {n_estimators: [100], max_features: [0.3, 0.6]}}
"""  # `explain: all` -> 6 cells; the forests go first and take over a second each
N_FEATURES, N_FOLDS = 10, 6

SWEEP_SCRIPT = """
import sys
import time
from runner.write import engine, explain
engine._READINGS_CAP = 0  # the sweep reads nothing: the explain step refits every cell
store_cell = explain._store_cell
def store_and_pause(*args, **kwargs):  # the kill lands between two stored cells
    store_cell(*args, **kwargs)
    time.sleep(1.0)
explain._store_cell = store_and_pause
from runner.write.engine import run_sweep
from runner.write.spec import load_spec
from runner.store import Store
run_sweep(load_spec(sys.argv[1]), store=Store(sys.argv[2]), jobs=1, batch_seconds=0.0)
"""


def _count_explained(path) -> int:
    import duckdb

    for _ in range(200):  # the sweep holds the file's lock now and then
        try:
            with duckdb.connect(str(path), read_only=True) as con:
                return con.execute("select count(*) from explained").fetchone()[0]
        except duckdb.Error:
            time.sleep(0.02)
    return -1


def _explain_rows(store, sweep_id) -> dict:
    from runner.write.reuse import EXPLAIN_TABLES

    out = {}
    for table in EXPLAIN_TABLES:
        lists = ", features_used::varchar as features_used" if table == "tree_folds" else ""
        exclude = "sweep_id, features_used" if lists else "sweep_id"
        out[table] = store.query(f"select * exclude ({exclude}){lists} from {table} "
                                 "where sweep_id = ? order by all", [sweep_id])
    return out


def test_sigkill_during_explain_keeps_finished_cells_whole_and_the_rerun_reuses_them(tmp_path):
    from runner.write.engine import run_sweep
    from runner.store import Store

    from .helpers import diabetes_frame, write_spec

    diabetes_frame().to_csv(tmp_path / "diabetes.csv", index=False)
    spec_path = write_spec(tmp_path, KILL_MODELS,
                           extra="explain: {cells: all, permutation: {repeats: 2, seed: 5}}\n")
    store_path = tmp_path / "killed.duckdb"
    proc = subprocess.Popen([sys.executable, "-c", SWEEP_SCRIPT, str(spec_path),
                             str(store_path)])
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and proc.poll() is None:
        if store_path.exists() and _count_explained(store_path) >= 1:
            break
        time.sleep(0.05)
    proc.send_signal(signal.SIGKILL)
    assert proc.wait() == -signal.SIGKILL, "the sweep ended before the kill"
    store = Store(store_path)
    (killed,) = store.query("select sweep_id from sweeps")["sweep_id"]
    kept = set(store.query("select cell_id from explained where sweep_id = ?",
                           [killed])["cell_id"])
    assert 1 <= len(kept) < 6  # the kill landed inside the explain step
    n_test = int(store.query("select n_test from sweeps").iloc[0, 0])
    cells = store.query("select cell_id, family from cells where sweep_id = ?", [killed])
    rows = _explain_rows(store, killed)
    for cell_id, family in zip(cells["cell_id"], cells["family"]):
        n = {t: int((df["cell_id"] == cell_id).sum()) for t, df in rows.items()}
        if cell_id not in kept:  # nothing of an unfinished cell
            assert not any(n.values()), (cell_id, n)
            continue
        assert n["importances"] == 2 * N_FEATURES  # permutation + the family's own method
        assert n["fold_importances"] == N_FOLDS * N_FEATURES
        assert n["test_predictions"] == n_test
        assert n["tree_folds"] == (N_FOLDS if family == "pruned_tree" else 0)
        assert (n["tree_nodes"] > 0) == (family == "pruned_tree")

    again = run_sweep(spec_from_path(spec_path), store=store, jobs=1)
    status = store.query("select sweep_id, status from sweeps order by started_at")
    assert status["status"].tolist() == ["interrupted", "finished"]
    marks = store.query("select cell_id, reused_from from explained where sweep_id = ?",
                        [again.sweep_id])
    assert len(marks) == 6
    reused = marks.set_index("cell_id")["reused_from"]
    assert set(reused[reused.notna()].index) == kept and (reused.dropna() == killed).all()

    clean = Store(tmp_path / "clean.duckdb")
    reference = run_sweep(spec_from_path(spec_path), store=clean, jobs=1)
    got, want = _explain_rows(store, again.sweep_id), _explain_rows(clean, reference.sweep_id)
    for table in want:  # every explain table but `explained` (reused_from differs)
        pd.testing.assert_frame_equal(got[table], want[table], check_exact=True, obj=table)


@pytest.mark.parametrize("family", ["forest", "pruned_tree", "linear"])
@pytest.mark.parametrize("task", ["regression", "classification"])
@pytest.mark.parametrize("extra", [False, True])
def test_permutation_rows_equal_scikit_learn_through_the_whole_pipeline(family, task, extra):
    # Source: sklearn.inspection.permutation_importance on the whole fitted pipeline, same
    # rows, scorer, repeats, seed and max_samples: every number equal, though the rows are
    # transformed once. The columns here come in another order than the preprocessor's,
    # one category level and gaps appear in the test rows only, and with `extra` the rows
    # hold a column that is not a feature (its importance is then the baseline on all rows
    # minus the score on the drawn ones, not 0).
    from sklearn.datasets import make_friedman1

    from runner.metrics import METRICS
    from runner.write.readings import permutation_rows

    X, y = make_friedman1(n_samples=300, n_features=5, noise=0.5, random_state=3)
    frame = pd.DataFrame(X[:, :4], columns=["a", "b", "c", "d"])
    frame.loc[::19, "b"] = np.nan
    frame.insert(0, "site", np.array(["north", "south", "east"])[np.arange(300) % 3])
    frame.loc[250::4, "site"] = "west"
    frame.loc[260::9, "site"] = None
    if extra:
        frame["batch_note"] = np.arange(300) % 7
    if task == "classification":
        y = np.where(y > np.median(y), "high", "low")
    classes = sorted(set(y)) if task == "classification" else ()
    metric = "log_loss" if task == "classification" else "rmse"
    X_fit, y_fit, X_test, y_test = frame[:220], y[:220], frame[220:], y[220:]
    params = {"forest": {"n_estimators": 8}, "pruned_tree": {},
              "linear": {"penalty": "l2", "alpha": 1.0}}[family]
    est = load_family(family).make_estimator(params, seed=2, y_fit=y_fit,
                                             numeric=["a", "b", "c", "d"],
                                             categorical=["site"], task=task)
    est.fit(X_fit, y_fit)
    ref = permutation_importance(est, X_test, y_test, scoring=METRICS[metric].scorer_for(classes),
                                 n_repeats=4, random_state=9, n_jobs=1, max_samples=50)
    transforms = []
    prep = est.named_steps["prep"]
    transform = prep.transform
    prep.transform = lambda rows: transforms.append(len(rows)) or transform(rows)
    got = permutation_rows(est, X_test, y_test, metric=metric, repeats=4, seed=9, rows=50,
                           classes=classes)
    assert list(got) == list(X_test.columns)
    assert [got[c] for c in X_test.columns] == [
        (float(m), float(s)) for m, s in zip(ref.importances_mean, ref.importances_std)]
    assert got["site"][0] != 0.0
    assert transforms == [len(X_test)]  # not once more for each of the 4 x 5 (6) shuffles

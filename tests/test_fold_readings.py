"""The explain step reads the sweep's own fits instead of refitting them: a fold's readings
equal scikit-learn's own refit of the same estimator on the same fold rows and seed, bit for
bit; a sweep explained from readings stores what one explained by refits stores; the
permutation draws `explain.permutation.rows` test rows exactly as scikit-learn's
`permutation_importance(max_samples=...)` does."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn.inspection import permutation_importance

from runner.families import load_family
from runner.families._readers import output_sources
from runner.read.explained import importance_table
from runner.store import Store
from runner.write import engine
from runner.write.engine import prepare, run_sweep
from runner.write.tasks import Task, run_task, task_call
from runner.write.resampling import REFIT, refit_seed

from runner.write.spec import parse_spec

from .helpers import spec_from, write_spec

MODELS = """
ols: {family: linear, grid: {penalty: none}}
ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 30.0]}}
tree: {family: pruned_tree, grid: {ccp_fraction: [0.01], min_samples_leaf: [5, 20]}}
paths: {family: pruned_tree, grid: {ccp_fraction: [0.002, 0.02], min_samples_leaf: [5]}}
forest: {family: forest, grid: {n_estimators: [4, 9], max_features: [0.5], min_samples_leaf: [3]}}
"""

TABLES = ("importances", "fold_importances", "tree_folds", "tree_nodes", "test_predictions",
          "coefficients")


def _own_reference(family, est, X_fit):
    """Per original column, the importance read straight from scikit-learn's fitted model:
    feature_importances_ (trees, forests) or |coef_| of a standardised number (linear)."""
    model, prep = est.named_steps["model"], est.named_steps["prep"]
    if family == "linear":
        names = list(prep.get_feature_names_out())
        return {c: abs(model.coef_[names.index(f"num__{c}")]) for c in X_fit.columns}
    return dict(zip(output_sources(prep), model.feature_importances_))


def test_fold_readings_equal_scikit_learn_refits_exactly(tmp_path, diabetes_csv):
    # Source: scikit-learn's own refit of each cell's estimator (RandomForestRegressor of k
    # trees, DecisionTreeRegressor, LinearRegression) on the same fold rows and seed.
    spec = spec_from(tmp_path, MODELS)
    prep = prepare(spec)
    X_train, y_train = prep.split["X_train"], prep.split["y_train"]
    fold = prep.plan.folds[1]
    X_fit, y_fit = X_train.iloc[fold.fit], y_train[fold.fit]
    checked = set()
    for model in ("ols", "ridge", "tree", "paths", "forest"):  # one task per model, as swept
        family = next(c.family for c in prep.cells if c.model == model)
        cells = [(c.cell_id, c.params) for c in prep.cells if c.model == model]
        _, _, readings = run_task(
            family, cells, X_fit, y_fit, X_train.iloc[fold.valid], y_train[fold.valid],
            seed=fold.seed, repeat=fold.repeat, fold=fold.fold, metrics=["rmse"],
            numeric=prep.frame.numeric, categorical=prep.frame.categorical,
            explain={"kind": "fold"})
        got = dict(readings)
        for cell_id, params in cells:
            key = (cell_id, (fold.repeat, fold.fold))
            est = load_family(family).make_estimator(
                params, seed=fold.seed, y_fit=y_fit, numeric=prep.frame.numeric,
                categorical=prep.frame.categorical).fit(X_fit, y_fit)
            ref = _own_reference(family, est, X_fit)
            rows = got[key]
            values = {r["feature"]: r["value"] for r in rows["fold_importances"]}
            for col, v in ref.items():
                assert values[col] == v, (cell_id, col)  # exact, not approximate
            if family == "pruned_tree":
                (shape,) = rows["tree_folds"]
                tree = est.named_steps["model"]
                assert shape["n_leaves"] == tree.get_n_leaves()
                assert shape["depth"] == tree.get_depth()
            checked.add((family, params.get("n_estimators") or params.get("alpha"),
                         model == "paths"))
    # both forest sizes come from one fit of 9 trees, and both read exactly; so do both
    # fractions of the `paths` tree, pruned from one unpruned fit, and both ridge alphas,
    # read from one SVD of the fold's design
    assert {("forest", 4, False), ("forest", 9, False), ("linear", None, False),
            ("linear", 0.1, False), ("linear", 30.0, False),
            ("pruned_tree", None, False), ("pruned_tree", None, True)} <= checked
    assert sum(1 for c in checked if c[2]) == 1 and len(
        [c for c in prep.cells if c.model == "paths"]) == 2


def _explain_rows(store, sweep_id):
    out = {}
    for t in TABLES:
        df = store.query(f"select * exclude (sweep_id) from {t} where sweep_id = ?",
                         [sweep_id])
        out[t] = df.sort_values(list(df.columns[:4])).reset_index(drop=True)
    return out


def test_a_sweep_explained_from_readings_stores_what_refits_store(tmp_path, diabetes_csv,
                                                                  monkeypatch):
    # Source: the same sweep with the readings switched off, explained by refits alone.
    spec = spec_from(tmp_path, MODELS, explain="all")
    store = Store(tmp_path / "store.duckdb")
    read = run_sweep(spec, store=store, jobs=1)
    monkeypatch.setattr(engine, "_READINGS_CAP", 0)
    refit = run_sweep(spec, store=store, jobs=1, fresh=True)
    n_cells, n_folds = 9, 6
    assert refit.explain_refits == n_cells * (n_folds + 1)
    # every cell read: the ridge alphas from their SVD path, the `paths` tree's fractions
    # pruned from their unpruned tree, the forest sizes from one forest
    assert read.explain_refits == 0
    assert read.explain_seconds > 0
    a, b = _explain_rows(store, read.sweep_id), _explain_rows(store, refit.sweep_id)
    for t in TABLES:
        assert len(a[t]) > 0
        pd.testing.assert_frame_equal(a[t], b[t], check_exact=True, obj=t)


PERM_SPEC_EXTRA = "explain: {cells: all, permutation: {repeats: 4, seed: 5, rows: 150}}\n"


def test_permutation_draws_the_asked_rows_as_scikit_learn_does(tmp_path, diabetes_csv):
    # Source: sklearn.inspection.permutation_importance(max_samples=150) on the same refit
    # pipeline, test rows (a test split of 0.5: 221 rows), scorer, repeats and seed.
    path = write_spec(tmp_path, "forest: {family: forest, grid: {n_estimators: [5, 10], "
                      "min_samples_leaf: [4]}}\nols: {family: linear, grid: {penalty: none}}",
                      extra=PERM_SPEC_EXTRA, explain="")
    path.write_text(path.read_text().replace("fraction: 0.25", "fraction: 0.5"))
    spec = parse_spec(path.read_text(), source=path)
    result = run_sweep(spec, jobs=1)
    store = Store(result.store_path)
    prep = prepare(spec)
    f, plan = prep.frame, prep.plan
    assert plan.n_test == 221
    X, y = f.X.iloc[plan.train_rows], f.y[plan.train_rows]
    cells = store.query("select cell_id, family, params from cells where sweep_id = ?",
                        [result.sweep_id])
    assert result.explain_refits == 0  # every cell was read from the sweep's own fits
    for cell in cells.itertuples():
        est = load_family(cell.family).make_estimator(
            json.loads(cell.params), seed=refit_seed(plan.seed), y_fit=y,
            numeric=f.numeric, categorical=f.categorical).fit(X, y)
        ref = permutation_importance(est, f.X.iloc[plan.test_rows], f.y[plan.test_rows],
                                     scoring="neg_root_mean_squared_error", n_repeats=4,
                                     random_state=5, max_samples=150)
        got = store.query("select feature, value, spread from importances where sweep_id = ?"
                          " and cell_id = ? and method = 'permutation'",
                          [result.sweep_id, cell.cell_id]).set_index("feature")
        got = got.loc[list(f.X.columns)]
        np.testing.assert_allclose(got["value"], ref.importances_mean, rtol=0, atol=1e-12)
        np.testing.assert_allclose(got["spread"], ref.importances_std, rtol=0, atol=1e-12)
    settings = store.query("select distinct settings from explained where sweep_id = ?",
                           [result.sweep_id])["settings"]
    assert [json.loads(s)["permutation_rows"] for s in settings] == [150]
    assert result.permutation_rows == 150
    assert importance_table(store, result.sweep_id).permutation_rows == 150


def test_a_test_split_smaller_than_rows_is_used_whole(tmp_path, diabetes_csv):
    spec = spec_from(tmp_path, "ols: {family: linear, grid: {penalty: none}}",
                     explain="picked")
    result = run_sweep(spec, jobs=1)
    settings = Store(result.store_path).query("select settings from explained")["settings"]
    assert json.loads(settings.iloc[0])["permutation_rows"] == 111  # 25 % of 442 rows
    assert importance_table(Store(result.store_path)).permutation_rows == 111


@pytest.mark.parametrize("settings", ["[1, 2]", '{"permutation_rows": "many"}',
                                      '{"permutation_rows": true}'])
def test_stored_settings_that_are_not_a_count_give_no_count(tmp_path, diabetes_csv, settings):
    """explained.settings is text from a store someone else may have written: it is parsed,
    never trusted, and a value that is not a count is left out rather than failing the read."""
    import duckdb

    spec = spec_from(tmp_path, "ols: {family: linear, grid: {penalty: none}}",
                     explain="picked")
    path = run_sweep(spec, jobs=1).store_path
    with duckdb.connect(str(path)) as con:
        con.execute("update explained set settings = ?", [settings])
    read = importance_table(Store(path))
    assert read.permutation_rows is None and len(read.table) > 0


@pytest.mark.parametrize("rows", [99, 1_000_001, "many"])
def test_permutation_rows_are_bounded(rows):
    from runner.errors import SpecError

    text = ("name: x\ndata: {path: d.csv, target: y}\ntest: {fraction: 0.2}\n"
            f"explain: {{permutation: {{rows: {rows}}}}}\nmodels: {{m: {{family: linear}}}}\n")
    with pytest.raises(SpecError, match=r"explain\.permutation\.rows"):
        parse_spec(text)


def test_refit_readings_are_keyed_for_the_explain_step(tmp_path, diabetes_csv):
    spec = spec_from(tmp_path, "ols: {family: linear, grid: {penalty: none}}",
                     explain="picked")
    prep = prepare(spec)
    data = engine._shared_data(prep, paths=True)
    task = Task("linear", [(prep.cells[0].cell_id, prep.cells[0].params)], None, 1.0)
    args, kwargs = task_call(data, task)
    _, _, readings = run_task(*args, **kwargs)
    ((key, rows),) = readings
    assert key == (prep.cells[0].cell_id, None) and kwargs["repeat"] == REFIT
    assert len(rows["test_predictions"]) == prep.plan.n_test
    # the predictions wait by column, without a column repeating the cell's id (the explain
    # step adds it as it stores them: tests/test_explain.py matches them to their scores)
    assert list(rows["test_predictions"].columns) == ["predicted"]
    assert {r["cell_id"] for r in rows["importances"]} == {prep.cells[0].cell_id}
    assert rows["explained"] == [{"n_terms": len(prep.frame.features)}]


def test_local_workers_read_mapped_data_and_score_the_same(tmp_path, diabetes_csv,
                                                           monkeypatch):
    # Source: the same sweep in one process (jobs=1), its rows cut and sent in this process.
    import glob
    import tempfile

    from runner.write import executors

    spec = spec_from(tmp_path, MODELS, explain="picked")
    store = Store(tmp_path / "store.duckdb")
    one = run_sweep(spec, store=store, jobs=1)
    monkeypatch.setattr(executors, "SHARE_BYTES", 0)  # every data set goes through a file
    before = set(glob.glob(f"{tempfile.gettempdir()}/foldwise-shared-*"))
    two = run_sweep(spec, store=store, jobs=2, force_jobs=True, fresh=True)
    assert set(glob.glob(f"{tempfile.gettempdir()}/foldwise-shared-*")) == before  # removed
    for table in ("fold_scores", "test_scores", "importances", "fold_importances"):
        cols = "* exclude (sweep_id, fit_seconds)" if "scores" in table else \
            "* exclude (sweep_id)"
        a, b = (store.query(f"select {cols} from {table} where sweep_id = ? order by all",
                            [s]) for s in (one.sweep_id, two.sweep_id))
        assert len(a) > 0
        pd.testing.assert_frame_equal(a, b, check_exact=True, obj=table)


def _row_total(scale, i, X, y):
    return scale * (float(X.iloc[i].sum()) + float(y[i]))


def _row_call(data, i):
    return (data["scale"], i, data["X"], data["y"]), {}


def test_tables_shared_once_serve_every_call_and_this_process(monkeypatch):
    # Source: the same sums computed here with numpy on the original tables.
    import os

    from runner.write import executors

    monkeypatch.setattr(executors, "SHARE_BYTES", 0)  # every table goes through a file
    written = []
    plain = executors._SharedFile.__init__

    def counted(self, data):
        written.append(sorted(data))
        plain(self, data)

    monkeypatch.setattr(executors._SharedFile, "__init__", counted)
    X = pd.DataFrame(np.arange(60.0).reshape(20, 3), columns=["a", "b", "c"])
    y = np.linspace(0.0, 1.0, 20)
    with executors.LocalExecutor(2) as executor:
        shared = executor.share({"X": X, "y": y})
        assert isinstance(shared["y"], np.memmap)  # this process maps them too
        pd.testing.assert_frame_equal(shared["X"], X)
        for scale in (1.0, 2.0):
            got = sorted(executor.results(_row_total, {**shared, "scale": scale}, [0, 7, 19],
                                          _row_call))
            assert got == sorted(scale * (X.iloc[i].sum() + y[i]) for i in (0, 7, 19))
        folders = [f.folder for f in executor._files]
        assert all(os.path.exists(f) for f in folders)
    assert written == [["X", "y"], ["scale"], ["scale"]]  # the tables once, each call's rest
    assert not any(os.path.exists(f) for f in folders)  # gone with the executor

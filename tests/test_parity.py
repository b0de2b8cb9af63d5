"""Stored fold and test scores equal scikit-learn's own cross_validate and metrics on the
documented folds and seeds (reference: scikit-learn 1.9 `cross_validate`, `sklearn.metrics`)."""

from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn import metrics as skm
from sklearn.compose import ColumnTransformer
from sklearn.ensemble import RandomForestRegressor
from sklearn.impute import SimpleImputer
from sklearn.linear_model import Lasso, LinearRegression, Ridge
from sklearn.model_selection import cross_validate
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import OneHotEncoder, OrdinalEncoder, StandardScaler
from sklearn.tree import DecisionTreeRegressor

from runner.write.engine import run_sweep
from runner.write.resampling import fold_seed, refit_seed
from runner.store import Store

from .helpers import diabetes_frame, documented_plan, spec_from

SCORING = {"rmse": "neg_root_mean_squared_error", "mae": "neg_mean_absolute_error", "r2": "r2"}
SIGN = {"rmse": -1.0, "mae": -1.0, "r2": 1.0}


def _stored(store: Store):
    folds = store.query("select c.params, c.model, f.repeat, f.fold, f.metric, f.value, f.seed "
                        "from fold_scores f join cells c using (sweep_id, cell_id)")
    tests = store.query("select c.params, c.model, t.metric, t.value "
                        "from test_scores t join cells c using (sweep_id, cell_id)")
    return folds, tests


def _reference(make, X, y, *, fraction=0.25, tseed=3, k=3, r=2, seed=17):
    """Fold scores by cross_validate per fold (seeds differ per fold) and the test scores."""
    train_rows, test_rows, folds = documented_plan(len(y), test_fraction=fraction,
                                                   test_seed=tseed, k=k, repeats=r, seed=seed)
    Xtr, ytr = X.iloc[train_rows], y[train_rows]
    rows = []
    for rep, f, fit, valid in folds:
        s = fold_seed(seed, rep, f)
        res = cross_validate(make(s, ytr[fit]), Xtr, ytr, cv=[(fit, valid)], scoring=SCORING)
        for m in SCORING:
            rows.append((rep, f, m, SIGN[m] * res[f"test_{m}"][0], s))
    est = make(refit_seed(seed), ytr).fit(Xtr, ytr)
    pred = est.predict(X.iloc[test_rows])
    yt = y[test_rows]
    test = {"rmse": skm.root_mean_squared_error(yt, pred),
            "mae": skm.mean_absolute_error(yt, pred), "r2": skm.r2_score(yt, pred)}
    return pd.DataFrame(rows, columns=["repeat", "fold", "metric", "ref", "seed"]), test


def _assert_cell(folds, tests, model, params_match, ref_folds, ref_test, tol=1e-9):
    mine = folds[(folds.model == model) & folds.params.map(lambda p: params_match(json.loads(p)))]
    assert len(mine) == len(ref_folds) == 3 * 2 * 3
    merged = mine.merge(ref_folds, on=["repeat", "fold", "metric"])
    assert len(merged) == len(ref_folds)
    assert (merged.seed_x == merged.seed_y).all()
    np.testing.assert_allclose(merged.value, merged.ref, rtol=0, atol=tol)
    mt = tests[(tests.model == model) & tests.params.map(lambda p: params_match(json.loads(p)))]
    for m, v in ref_test.items():
        assert mt[mt.metric == m].value.iloc[0] == pytest.approx(v, abs=tol)


@pytest.fixture(scope="module")
def numeric_sweep(tmp_path_factory):
    folder = tmp_path_factory.mktemp("parity")
    df = diabetes_frame()
    df.to_csv(folder / "diabetes.csv", index=False)
    spec = spec_from(folder, """
        ols: {family: linear, grid: {penalty: none}}
        ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 10.0]}}
        lasso: {family: linear, grid: {penalty: l1, alpha: [0.5]}}
        tree: {family: pruned_tree, grid: {ccp_alpha: [0.0, 150.0], min_samples_leaf: [5]}}
        frac: {family: pruned_tree, grid: {ccp_fraction: [0.01]}}
        forest: {family: forest, grid: {n_estimators: [20], max_features: [0.5]}}
    """)
    store = Store(folder / "store.duckdb")
    run_sweep(spec, store=store, jobs=2)
    X = df.drop(columns="progression")
    y = df["progression"].to_numpy(float)
    return _stored(store), X, y


def test_ols_parity(numeric_sweep):
    (folds, tests), X, y = numeric_sweep
    ref, test = _reference(lambda s, yf: make_pipeline(StandardScaler(), LinearRegression()), X, y)
    _assert_cell(folds, tests, "ols", lambda p: True, ref, test)


@pytest.mark.parametrize("alpha", [0.1, 10.0])
def test_ridge_parity(numeric_sweep, alpha):
    (folds, tests), X, y = numeric_sweep
    ref, test = _reference(lambda s, yf: make_pipeline(StandardScaler(), Ridge(alpha=alpha)), X, y)
    _assert_cell(folds, tests, "ridge", lambda p: p.get("alpha") == alpha, ref, test)


def test_lasso_parity(numeric_sweep):
    # Coordinate descent stops at tol=1e-4 of the duality gap; a path may stop at another
    # point inside that tolerance, so this check is 1e-6 relative to the target's scale.
    (folds, tests), X, y = numeric_sweep
    ref, test = _reference(lambda s, yf: make_pipeline(StandardScaler(), Lasso(alpha=0.5)), X, y)
    _assert_cell(folds, tests, "lasso", lambda p: True, ref, test, tol=1e-6 * np.std(y))


@pytest.mark.parametrize("alpha", [0.0, 150.0])
def test_tree_parity(numeric_sweep, alpha):
    (folds, tests), X, y = numeric_sweep
    ref, test = _reference(lambda s, yf: DecisionTreeRegressor(
        ccp_alpha=alpha, min_samples_leaf=5, random_state=s), X, y)
    _assert_cell(folds, tests, "tree", lambda p: p.get("ccp_alpha") == alpha, ref, test)


def test_ccp_fraction_parity(numeric_sweep):
    # ccp_alpha = fraction x population variance of the fitting rows' target.
    (folds, tests), X, y = numeric_sweep
    ref, test = _reference(lambda s, yf: DecisionTreeRegressor(
        ccp_alpha=0.01 * np.var(yf), random_state=s), X, y)
    _assert_cell(folds, tests, "frac", lambda p: True, ref, test)


def test_forest_parity(numeric_sweep):
    (folds, tests), X, y = numeric_sweep
    ref, test = _reference(lambda s, yf: RandomForestRegressor(
        n_estimators=20, max_features=0.5, random_state=s, n_jobs=1), X, y)
    _assert_cell(folds, tests, "forest", lambda p: True, ref, test)


def test_mixed_columns_parity(tmp_path, diabetes_mixed_csv):
    """Text categories and missing values: the same preprocessing written with scikit-learn."""
    spec = spec_from(tmp_path, """
        ridge: {family: linear, grid: {penalty: l2, alpha: [1.0]}}
        tree: {family: pruned_tree, grid: {ccp_alpha: [20.0]}}
    """, data=diabetes_mixed_csv.name)
    store = Store(tmp_path / "store.duckdb")
    run_sweep(spec, store=store, jobs=1)
    folds, tests = _stored(store)
    df = pd.read_csv(diabetes_mixed_csv)
    X, y = df.drop(columns="progression"), df["progression"].to_numpy(float)
    X["sex"] = X["sex"].astype(object)
    num = [c for c in X.columns if c != "sex"]
    lin = lambda s, yf: Pipeline([  # noqa: E731
        ("prep", ColumnTransformer([
            ("num", make_pipeline(SimpleImputer(strategy="median"), StandardScaler()), num),
            ("cat", make_pipeline(SimpleImputer(strategy="most_frequent"),
                                  OneHotEncoder(handle_unknown="ignore", sparse_output=False)),
             ["sex"])])),
        ("model", Ridge(alpha=1.0))])
    ref, test = _reference(lin, X, y)
    _assert_cell(folds, tests, "ridge", lambda p: True, ref, test)
    tree = lambda s, yf: Pipeline([  # noqa: E731
        ("prep", ColumnTransformer([
            ("num", "passthrough", num),
            ("cat", OrdinalEncoder(handle_unknown="use_encoded_value", unknown_value=np.nan),
             ["sex"])])),
        ("model", DecisionTreeRegressor(ccp_alpha=20.0, random_state=s))])
    ref, test = _reference(tree, X, y)
    _assert_cell(folds, tests, "tree", lambda p: True, ref, test)


@pytest.mark.filterwarnings("ignore:Skipping features without any observed values")
@pytest.mark.parametrize("n_rows", [1, 2, 7, 1000, 1001])
@pytest.mark.parametrize("keep_empty", [False, True])
def test_median_imputer_equals_simple_imputer(n_rows, keep_empty):
    """The linear families' faster median imputer gives scikit-learn's SimpleImputer(
    strategy="median") statistics and filled rows bit for bit (reference: scikit-learn 1.9
    `SimpleImputer`), on columns with no, some and only missing values, ties, values whose
    sum overflows, and an even or odd count of present values."""
    from runner.families._base import MedianImputer

    rng = np.random.default_rng(n_rows)
    X = np.column_stack([
        rng.normal(size=n_rows),                                   # nothing missing
        np.where(rng.random(n_rows) < 0.3, np.nan, rng.normal(size=n_rows)),
        np.full(n_rows, np.nan),                                   # every value missing
        rng.integers(0, 3, n_rows).astype(float),                  # ties
        np.where(rng.random(n_rows) < 0.2, np.nan, rng.exponential(size=n_rows)),
        np.where(np.arange(n_rows) % 3 == 0, np.nan,
                 rng.choice([-1.0, 1.0], n_rows) * rng.uniform(1.0e308, 1.7e308, n_rows)),
    ])
    fitted = []
    for kind in (SimpleImputer, MedianImputer):  # the warnings count towards a fit's n_warnings
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            model = kind(strategy="median", keep_empty_features=keep_empty).fit(X)
        fitted.append((model, sorted(w.category.__name__ for w in caught)))
    (ref, ref_warned), (mine, warned) = fitted
    assert warned == ref_warned
    np.testing.assert_array_equal(mine.statistics_, ref.statistics_)
    new = np.where(rng.random(X.shape) < 0.5, np.nan, 1.0)
    np.testing.assert_array_equal(mine.transform(new), ref.transform(new))
    assert mine.get_feature_names_out().tolist() == ref.get_feature_names_out().tolist()


@pytest.mark.parametrize("n_rows", [1, 2, 1000, 1001])
def test_median_imputer_finds_medians_of_complete_rows_only_when_asked(n_rows, monkeypatch):
    """Fitted on rows that miss nothing, the imputer passes complete rows through (and
    returns its fitting rows from fit_transform) without finding a median, and gives
    scikit-learn's SimpleImputer(strategy="median") numbers (reference: scikit-learn 1.9
    `SimpleImputer`) once a row misses a value, once `statistics_` is read, and after a
    pickle, which holds the medians and not the rows."""
    import pickle

    from runner.families import _base

    found, real = [], _base._medians
    monkeypatch.setattr(_base, "_medians", lambda *a: found.append(1) or real(*a))
    rng = np.random.default_rng(n_rows)
    X = np.column_stack([rng.normal(size=n_rows), rng.integers(0, 3, n_rows).astype(float),
                         rng.exponential(size=n_rows)])
    ref = SimpleImputer(strategy="median").fit(X)
    for rows in (X, np.asfortranarray(X)):  # fitted and filled in one call, either layout
        both = [kind(strategy="median").fit_transform(rows)
                for kind in (SimpleImputer, _base.MedianImputer)]
        np.testing.assert_array_equal(*both)
        assert both[0].flags.f_contiguous == both[1].flags.f_contiguous
    assert found == []
    complete = rng.normal(size=(5, 3))
    for ask in ("gap", "statistics", "pickle"):
        mine = _base.MedianImputer(strategy="median").fit(X)
        np.testing.assert_array_equal(mine.transform(complete), ref.transform(complete))
        assert found == []
        if ask == "gap":
            gaps = complete.copy()
            gaps[[0, 3], [1, 2]] = np.nan
            np.testing.assert_array_equal(mine.transform(gaps), ref.transform(gaps))
        elif ask == "statistics":
            np.testing.assert_array_equal(mine.statistics_, ref.statistics_)
        else:
            state = pickle.loads(pickle.dumps(mine)).__dict__
            assert not any(isinstance(v, _base._Later) for v in state.values())
            np.testing.assert_array_equal(state["_statistics"], ref.statistics_)
        assert found == [1]
        np.testing.assert_array_equal(mine.statistics_, ref.statistics_)
        assert found == [1]  # found once, then kept
        found.clear()
    monkeypatch.setattr(_base, "LATER_BYTES", X.nbytes - 1)  # rows too large to keep
    _base.MedianImputer(strategy="median").fit(X)
    assert found == [1]


def test_median_imputer_leaves_other_types_to_simple_imputer():
    """float32 rows and markers other than NaN take SimpleImputer's own route (reference:
    scikit-learn 1.9 `SimpleImputer`): same statistics, same type."""
    from runner.families._base import MedianImputer

    X32 = np.array([[1.0, np.nan], [3.0, 2.0], [2.0, np.nan], [8.0, 5.0]], dtype=np.float32)
    for kwargs, X in [({}, X32), ({"missing_values": -1.0}, np.where(np.isnan(X32), -1, X32))]:
        ref = SimpleImputer(strategy="median", **kwargs).fit(X)
        mine = MedianImputer(strategy="median", **kwargs).fit(X)
        assert mine.statistics_.dtype == ref.statistics_.dtype
        np.testing.assert_array_equal(mine.statistics_, ref.statistics_)

"""Whole grids from one fit, end to end: a sweep scored through the path evaluators stores
the same fold and test scores as the same sweep with every cell fitted on its own, and each
score row records which way it was computed."""

from __future__ import annotations


import numpy as np
import pandas as pd
import pytest

from runner.write.engine import run_sweep
from runner.families import load_family
from runner.families._base import path_groups
from runner.store import Store

from .helpers import nearly_collinear_frame, spec_from

# Every family with a grid that varies a path parameter, plus cells that must stay plain.
MODELS = """
tree_fraction:
  family: pruned_tree
  grid:
    ccp_fraction: {log: [0.0005, 0.2], n: 9}
    min_samples_leaf: [1, 6]
tree_path:
  family: pruned_tree
  grid:
    ccp_alpha: {path: 7}
    max_features: [0.5]
tree_lone:
  family: pruned_tree
  grid:
    ccp_fraction: [0.013]
forest:
  family: forest
  grid:
    n_estimators: [2, 5, 9]
    max_features: [0.5, 1.0]
    max_samples: [0.7]
forest_whole:
  family: forest
  grid:
    n_estimators: [3, 4]
    bootstrap: [false]
    max_features: [0.6]
ridge:
  family: linear
  grid:
    penalty: l2
    alpha: {log: [0.001, 1000], n: 8}
lasso:
  family: linear
  grid:
    penalty: l1
    alpha: {log: [0.01, 3], n: 7}
enet:
  family: linear
  grid:
    penalty: elasticnet
    alpha: [0.03, 0.3, 1.0]
    l1_ratio: [0.3, 0.8]
ols:
  family: linear
  grid:
    penalty: none
"""


EXPECTED_HOW = {"tree_fraction": "tree_path", "tree_path": "tree_path", "tree_lone": "plain",
                "forest": "forest_prefix", "forest_whole": "forest_prefix",
                "ridge": "ridge_gram", "lasso": "enet_path", "enet": "enet_path",
                "ols": "plain"}


def _sweep(tmp_path, data, *, paths: bool) -> pd.DataFrame:
    spec = spec_from(tmp_path, MODELS, data=data.name)
    store = Store(tmp_path / f"paths_{paths}.duckdb")
    result = run_sweep(spec, store=store, jobs=1, paths=paths)
    assert result.status == "finished" and result.n_failed_fits == 0
    folds = store.query("""
        select c.model, f.cell_id, f."repeat", f.fold, f.metric, f.value, f.n_leaves, f.how,
               f.fit_seconds
        from fold_scores f join cells c using (sweep_id, cell_id)""")
    tests = store.query("""
        select c.model, t.cell_id, -1 as "repeat", -1 as fold, t.metric, t.value, t.n_leaves,
               t.how, t.fit_seconds
        from test_scores t join cells c using (sweep_id, cell_id)""")
    return pd.concat([folds, tests]).sort_values(
        ["model", "cell_id", "repeat", "fold", "metric"]).reset_index(drop=True)


@pytest.fixture(scope="module")
def both(tmp_path_factory):
    """The same sweep (data with NaNs and a text column) with and without paths."""
    from .helpers import diabetes_frame

    tmp = tmp_path_factory.mktemp("paths")
    df = diabetes_frame()
    df["sex"] = df["sex"].map({1.0: "one", 2.0: "two"})
    rng = np.random.default_rng(0)
    for col in ("bmi", "s5", "sex"):
        df.loc[rng.random(len(df)) < 0.08, col] = np.nan
    data = tmp / "diabetes_mixed.csv"
    df.to_csv(data, index=False)
    with_paths = _sweep(tmp, data, paths=True)
    plain = _sweep(tmp, data, paths=False)
    assert len(with_paths) == len(plain) > 0
    key = ["model", "cell_id", "repeat", "fold", "metric"]
    assert with_paths[key].equals(plain[key])
    return with_paths, plain


def test_every_row_records_how_it_was_scored(both):
    with_paths, plain = both
    how = with_paths.groupby("model")["how"].unique().map(list).to_dict()
    assert how == {m: [h] for m, h in EXPECTED_HOW.items()}
    assert set(plain["how"]) == {"plain"}
    # fit time of grouped cells is an equal share of the group's time: positive everywhere
    assert (with_paths["fit_seconds"] > 0).all()


@pytest.mark.parametrize("model", ["tree_fraction", "tree_path", "tree_lone", "forest",
                                   "forest_whole"])
def test_tree_and_forest_scores_are_identical(both, model):
    with_paths, plain = both
    a, b = with_paths[with_paths.model == model], plain[plain.model == model]
    # reference: scikit-learn's own estimators refitted per cell (DecisionTreeRegressor
    # with each ccp_alpha; RandomForestRegressor with each n_estimators, same random_state)
    assert (a["value"].to_numpy() == b["value"].to_numpy()).all()
    assert (a["n_leaves"].fillna(-1).to_numpy() == b["n_leaves"].fillna(-1).to_numpy()).all()


def test_pruned_tree_leaves_are_stored_per_cell_and_fold(both):
    with_paths, _ = both
    tree = with_paths[with_paths.model == "tree_fraction"]
    assert tree["n_leaves"].notna().all()
    # larger ccp_fraction never gives more leaves on the same fold
    per_fold = tree[tree.metric == "rmse"].groupby(["repeat", "fold"])
    assert all(g["n_leaves"].nunique() > 1 for _, g in per_fold)


def test_ridge_scores_match_to_the_last_bit(both):
    with_paths, plain = both
    a, b = with_paths[with_paths.model == "ridge"], plain[plain.model == "ridge"]
    # reference: scikit-learn's own Ridge(solver="cholesky") refitted per cell
    assert len(a) == len(b) > 0
    assert np.array_equal(a["value"].to_numpy(), b["value"].to_numpy())


@pytest.mark.parametrize("model", ["lasso", "enet"])
def test_lasso_and_elastic_net_scores_match_within_solver_tolerance(both, model):
    with_paths, plain = both
    a, b = with_paths[with_paths.model == model], plain[plain.model == model]
    # reference: scikit-learn's own Lasso / ElasticNet (tol=1e-4, max_iter=1000) refitted
    # per cell. Both stop at the same duality-gap tolerance from different starting points
    # (the path warm-starts), so predictions agree within 10 * tol * sd(y) (the bound
    # tests/test_paths.py states). rmse and mae move no more than the predictions do;
    # r2 = 1 - rmse^2 / var(y_valid) moves at most 2 * rmse * d_rmse / var(y_valid).
    bound = 10 * 1e-4 * 77.0  # sd of the diabetes target is 77.1
    va = a.pivot_table(index=["cell_id", "repeat", "fold"], columns="metric", values="value")
    vb = b.pivot_table(index=["cell_id", "repeat", "fold"], columns="metric", values="value")
    assert (va.index == vb.index).all()
    assert np.max(np.abs(va["rmse"] - vb["rmse"])) <= bound
    assert np.max(np.abs(va["mae"] - vb["mae"])) <= bound
    var_valid = vb["rmse"] ** 2 / (1 - vb["r2"])
    r2_bound = 2 * np.maximum(va["rmse"], vb["rmse"]) * bound / var_valid
    assert (np.abs(va["r2"] - vb["r2"]) <= r2_bound).all()
    # and most cells agree far more closely than the bound
    assert np.median(np.abs(va["rmse"] - vb["rmse"])) <= bound / 100


def test_least_squares_is_unchanged(both):
    with_paths, plain = both
    a, b = with_paths[with_paths.model == "ols"], plain[plain.model == "ols"]
    # reference: scikit-learn's own LinearRegression, fitted the same way both times
    assert (a["value"].to_numpy() == b["value"].to_numpy()).all()


# -- scoring many cells at once ----------------------------------------------------------

SCORE_SHAPES = [(2, 1), (3, 5), (127, 2), (128, 40), (129, 7), (1000, 3), (4097, 40)]


@pytest.mark.parametrize("n,c", SCORE_SHAPES)
@pytest.mark.parametrize("metric", ["rmse", "mae", "r2", "mape"])
def test_scoring_columns_equals_one_call_per_cell(n, c, metric):
    from sklearn import metrics

    from runner.metrics import METRICS

    own = {"rmse": metrics.root_mean_squared_error, "mae": metrics.mean_absolute_error,
           "r2": metrics.r2_score, "mape": metrics.mean_absolute_percentage_error}[metric]

    def score_columns(y, P):
        return METRICS[metric].score_columns(y, P)

    def score(y, p):
        return float(own(y, p))

    rng = np.random.default_rng(n * 100 + c)
    y = rng.normal(size=n) * 30 + 100
    P = y[:, None] + rng.normal(size=(n, c)) * rng.uniform(0.01, 20, size=c)
    P[:, 0] = y  # a perfect cell
    # reference: scikit-learn's own metric functions called once per cell
    assert score_columns(y, P) == [score(y, P[:, j]) for j in range(c)]
    flat = np.full(n, 3.0)  # constant target: r2's zero denominator
    assert score_columns(flat, P) == [score(flat, P[:, j]) for j in range(c)]


# -- grouping ----------------------------------------------------------------------------

GROUPS = [
    # (cells, path params, groups scored together, cells fitted alone)
    ([{"a": 1, "k": 1}, {"a": 2, "k": 1}, {"a": 3, "k": 2}], ("a",), [[0, 1]], [2]),
    ([{"a": 1}, {"a": 2}, {"a": 3}], ("a",), [[0, 1, 2]], []),
    ([{"a": 1}], ("a",), [], [0]),
    ([{"a": 1, "k": 1}, {"a": 1, "k": 2}], ("a",), [], [0, 1]),
    ([{"b": 1, "k": 1}, {"a": 2, "k": 1}], ("a", "b"), [[0, 1]], []),
]


@pytest.mark.parametrize("cells,names,together,alone", GROUPS)
def test_path_groups(cells, names, together, alone):
    assert path_groups(cells, names) == (together, alone)


def test_ineligible_cells_stay_plain():
    cells = [{"penalty": "none"}, {"penalty": "l2", "alpha": 1.0},
             {"penalty": "l2", "alpha": 2.0}]
    assert path_groups(cells, ("alpha",), lambda p: p["penalty"] != "none") == ([[1, 2]], [0])


def test_a_failing_group_fails_every_cell_as_plain_fits_do():
    rng = np.random.default_rng(1)
    X = pd.DataFrame(rng.normal(size=(60, 3)), columns=["a", "b", "c"])
    y = X["a"].to_numpy() + rng.normal(size=60)
    cells = [{"ccp_alpha": a, "min_samples_leaf": 0} for a in (0.0, 0.1)]  # invalid leaf size
    module = load_family("pruned_tree")
    kw = dict(seed=0, numeric=["a", "b", "c"], categorical=[])
    grouped = module.fit_cells(cells, X, y, [X], paths=True, **kw)
    alone = module.fit_cells(cells, X, y, [X], paths=False, **kw)
    # reference: scikit-learn's own DecisionTreeRegressor refitted per cell (same error)
    assert [(f.error_kind, f.error) for f in grouped] == [(f.error_kind, f.error) for f in alone]
    assert all(f.error_kind == "InvalidParameterError" and f.predictions == [] for f in grouped)
    assert [f.how for f in grouped] == ["tree_path", "tree_path"]


def test_a_ridge_path_counts_each_alpha_s_warnings_as_its_own_fit_does():
    # Reference: the same cells fitted one by one (scikit-learn's Ridge(solver="cholesky")
    # in foldwise's pipeline): only the tiny alpha's solve warns of an ill-conditioned
    # matrix (two nearly equal columns), so only its row counts a warning either way.
    X, y = nearly_collinear_frame()
    cells = [{"penalty": "l2", "alpha": a} for a in (1e-14, 1e-9, 1e-3, 1.0)]
    module = load_family("linear")
    kw = dict(seed=0, numeric=list("abc"), categorical=[])
    grouped = module.fit_cells(cells, X, y, [X], paths=True, **kw)
    alone = module.fit_cells(cells, X, y, [X], paths=False, **kw)
    assert [f.how for f in grouped] == ["ridge_gram"] * 4
    assert [f.n_warnings for f in grouped] == [f.n_warnings for f in alone] == [1, 0, 0, 0]
    for a, b in zip(grouped, alone):
        assert np.array_equal(a.predictions[0], b.predictions[0])


def test_only_the_last_alpha_group_centres_the_rows_in_place():
    # Three path groups share one transformed design; the last may centre it in place
    # (`takes_scratch`). Each group's numbers equal those of the group fitted on its own,
    # bit for bit, and the caller's rows are left as they were.
    rng = np.random.default_rng(3)
    X = pd.DataFrame(rng.normal(size=(300, 5)) * 3 + 1, columns=list("abcde"))
    y = X.to_numpy() @ np.array([1.0, -2.0, 0.5, 0.0, 3.0]) + rng.normal(size=300)
    kept = X.copy()
    cells = [{"penalty": "l2", "alpha": a} for a in (0.1, 10.0)] + \
        [{"penalty": "l1", "alpha": a} for a in (0.01, 0.1)] + \
        [{"penalty": "elasticnet", "l1_ratio": 0.5, "alpha": a} for a in (0.01, 0.1)]
    module = load_family("linear")
    kw = dict(seed=0, numeric=list("abcde"), categorical=[])
    together = module.fit_cells(cells, X, y, [X], paths=True, **kw)
    pd.testing.assert_frame_equal(X, kept)
    for start in (0, 2, 4):
        alone = module.fit_cells(cells[start:start + 2], X, y, [X], paths=True, **kw)
        for a, b in zip(together[start:start + 2], alone):
            assert np.array_equal(a.predictions[0], b.predictions[0])
    assert [f.how for f in together] == ["ridge_gram"] * 2 + ["enet_path"] * 4

# -- task planning -------------------------------------------------------------------------

@pytest.mark.parametrize("paths", [True, False])
@pytest.mark.parametrize("n_workers", [1, 2, 8])
def test_tasks_cover_every_cell_once_per_fold_and_keep_groups_whole(tmp_path, paths,
                                                                     n_workers):
    from runner.write.engine import _plan_tasks, prepare

    from .helpers import diabetes_frame

    diabetes_frame().to_csv(tmp_path / "diabetes.csv", index=False)
    prep = prepare(spec_from(tmp_path, MODELS))
    tasks = _plan_tasks(prep, paths=paths, n_workers=n_workers)
    seen: dict = {}
    for task in tasks:
        key = (task.fold.repeat, task.fold.fold) if task.fold is not None else (-1, -1)
        for cell_id, _ in task.cells:
            seen.setdefault(key, []).append(cell_id)
        models = {c.model for c in prep.cells if c.cell_id in {cid for cid, _ in task.cells}}
        assert len(models) == 1  # a task holds one model's cells
    assert len(seen) == len(prep.plan.folds) + 1
    for ids in seen.values():
        assert sorted(ids) == sorted(c.cell_id for c in prep.cells)
    assert [t.cost for t in tasks] == sorted((t.cost for t in tasks), reverse=True)
    if paths:  # every path group sits whole in one task of each fold
        by_id = {c.cell_id: c for c in prep.cells}
        for task in tasks:
            model = by_id[task.cells[0][0]].model
            family = load_family(by_id[task.cells[0][0]].family)
            all_cells = [c for c in prep.cells if c.model == model]
            inside = {cid for cid, _ in task.cells}
            for members, _ in family.fit_units([c.params for c in all_cells], paths=True):
                ids = {all_cells[i].cell_id for i in members}
                assert ids <= inside or not ids & inside
    if n_workers == 1:  # nothing to balance: one task per (model, fold)
        assert len(tasks) == len({c.model for c in prep.cells}) * (len(prep.plan.folds) + 1)

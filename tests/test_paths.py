"""Tests for runner.families.paths: whole-grid evaluators against separate refits."""

import pickle

import numpy as np
import pytest
from sklearn.datasets import make_friedman1
from sklearn.ensemble import RandomForestClassifier, RandomForestRegressor
from sklearn.linear_model import ElasticNet, Lasso, Ridge
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

from runner.families.paths import (
    _steps_for,
    elastic_net_path_coefs,
    forest_prefix_in_batches,
    pruned_tree,
    pruned_tree_predictions,
    pruning_alphas,
    ridge_model,
    ridge_path_coefs,
)


def _linear_predictions(coefs, intercepts, X_eval):
    return np.stack([np.asarray(X_eval, dtype=np.float64) @ c + b
                     for c, b in zip(coefs, intercepts)])


def ridge_path_predictions(X_train, y_train, X_eval, alphas):
    return _linear_predictions(*ridge_path_coefs(X_train, y_train, alphas)[:2], X_eval)


def elastic_net_path_predictions(X_train, y_train, X_eval, alphas, **kw):
    return _linear_predictions(*elastic_net_path_coefs(X_train, y_train, alphas, **kw), X_eval)


def _friedman(n=700, p=8, seed=0):
    X, y = make_friedman1(n_samples=n, n_features=p, noise=1.0, random_state=seed)
    return X, y


def _with_missing(X, frac=0.1, seed=1):
    X = X.copy()
    X[np.random.default_rng(seed).random(X.shape) < frac] = np.nan
    return X


def _alpha_grid(path, n_pick=30):
    """Path alphas, midpoints between neighbours, 0.0 and values past the last one."""
    idx = np.unique(np.linspace(0, path.size - 1, min(n_pick, path.size)).astype(int))
    idx = np.unique(np.concatenate([idx, np.arange(max(path.size - 5, 0), path.size)]))
    mids = (path[idx[idx + 1 < path.size]] + path[idx[idx + 1 < path.size] + 1]) / 2
    beyond = [path[-1] * 1.0000001, path[-1] * 2, path[-1] * 1e6 + 1.0]
    grid = np.concatenate([path[idx], mids, [0.0], beyond])
    return np.random.default_rng(0).permutation(grid)  # any order is allowed


# (name, estimator params, X transform, y transform)
TREE_CASES = [
    ("default", {"random_state": 0}, None, None),
    ("min_samples_leaf=5", {"random_state": 0, "min_samples_leaf": 5}, None, None),
    ("max_depth=6", {"random_state": 0, "max_depth": 6}, None, None),
    ("max_features=0.5", {"random_state": 7, "max_features": 0.5}, None, None),
    ("max_leaf_nodes=40", {"random_state": 0, "max_leaf_nodes": 40}, None, None),
    ("10% missing", {"random_state": 0}, _with_missing, None),
    ("integer targets", {"random_state": 0}, None, np.round),
    ("absolute_error", {"random_state": 0, "criterion": "absolute_error",
                        "min_samples_leaf": 3}, None, None),
]


@pytest.mark.parametrize("name,params,xf,yf", TREE_CASES, ids=[c[0] for c in TREE_CASES])
def test_pruned_tree_matches_refits(name, params, xf, yf):
    n = 300 if params.get("criterion") == "absolute_error" else 700
    X, y = _friedman(n=n + 300)
    if xf is not None:
        X = xf(X)
    if yf is not None:
        y = yf(y)
    X_tr, y_tr, X_ev = X[:n], y[:n], X[n:]
    tree = DecisionTreeRegressor(**params).fit(X_tr, y_tr)
    path = tree.cost_complexity_pruning_path(X_tr, y_tr).ccp_alphas

    # reference: scikit-learn's own DecisionTreeRegressor.cost_complexity_pruning_path
    assert np.array_equal(pruning_alphas(tree), path)

    grid = _alpha_grid(path)
    X_all = np.vstack([X_tr, X_ev])
    preds, n_leaves = pruned_tree_predictions(tree, X_all, grid)
    assert preds.shape == (grid.size, X_all.shape[0])
    for a, p, k in zip(grid, preds, n_leaves):
        # reference: scikit-learn's own DecisionTreeRegressor refitted with ccp_alpha
        ref = DecisionTreeRegressor(**params, ccp_alpha=a).fit(X_tr, y_tr)
        assert np.array_equal(p, ref.predict(X_all)), (name, a)
        assert k == ref.get_n_leaves(), (name, a)
        # the estimator built from the unpruned tree is the refit itself, byte for byte
        assert pickle.dumps(pruned_tree(tree, a)) == pickle.dumps(ref), (name, a)
    assert pickle.dumps(tree) != pickle.dumps(pruned_tree(tree, path[-1]))


CLASS_CASES = [
    {"random_state": 0, "min_samples_leaf": 2},
    {"random_state": 3, "criterion": "entropy", "class_weight": "balanced",
     "max_features": 0.6},
]


@pytest.mark.parametrize("params", CLASS_CASES)
def test_a_pruned_classification_tree_is_the_refit_itself(params):
    X, y = _friedman(n=900)
    X = _with_missing(X, 0.05)
    labels = np.digitize(y, np.quantile(y, [0.3, 0.7]))  # three classes
    tree = DecisionTreeClassifier(**params).fit(X, labels)
    path = tree.cost_complexity_pruning_path(X, labels).ccp_alphas
    grid = _alpha_grid(path, n_pick=12)
    probabilities, _ = pruned_tree_predictions(tree, X, grid)
    for a, proba in zip(grid, probabilities):
        # reference: scikit-learn's own DecisionTreeClassifier refitted with ccp_alpha
        ref = DecisionTreeClassifier(**params, ccp_alpha=a).fit(X, labels)
        got = pruned_tree(tree, a)
        assert pickle.dumps(got) == pickle.dumps(ref), a
        assert np.array_equal(got.predict_proba(X), ref.predict_proba(X))
        # the path's probabilities, read off the unpruned tree: the refit's bit for bit
        assert np.array_equal(proba, ref.predict_proba(X)), a


@pytest.mark.parametrize("leaf_block", [8192, 97])
def test_weakest_link_rounds_match_the_library_on_a_large_tree(leaf_block, monkeypatch):
    """Thousands of leaves: the rounds replay many prunings at once, so the order of every
    pruning, the running branch risks and ties must all come out as in the library; also
    when the leaves' risks are summed in many blocks (`_LEAF_BLOCK`)."""
    from runner.families import paths

    monkeypatch.setattr(paths, "_LEAF_BLOCK", leaf_block)
    X, y = _friedman(n=6000, p=10, seed=4)
    X_tr, y_tr, X_ev = X[:5000], np.round(y[:5000], 1), X[5000:]  # rounding makes ties
    tree = DecisionTreeRegressor(random_state=3).fit(X_tr, y_tr)
    assert tree.get_n_leaves() > 2000
    path = tree.cost_complexity_pruning_path(X_tr, y_tr).ccp_alphas
    # reference: scikit-learn's own cost_complexity_pruning_path (every effective alpha)
    assert np.array_equal(pruning_alphas(tree), path)

    picks = np.unique(np.linspace(1, path.size - 1, 24).astype(int))
    grid = np.concatenate([path[picks], (path[picks[:-1]] + path[picks[:-1] + 1]) / 2])
    preds, n_leaves = pruned_tree_predictions(tree, X_ev, grid)
    for a, p, k in zip(grid, preds, n_leaves):
        # reference: scikit-learn's own ccp_alpha refits (DecisionTreeRegressor(ccp_alpha=a))
        ref = DecisionTreeRegressor(random_state=3, ccp_alpha=a).fit(X_tr, y_tr)
        assert np.array_equal(p, ref.predict(X_ev)), a
        assert k == ref.get_n_leaves(), a


def test_a_tree_replay_is_shared_by_evaluation_sets_and_goes_with_its_tree(monkeypatch):
    import gc
    import weakref

    from runner.families import paths

    rounds = []
    real = paths._weakest_link_rounds
    monkeypatch.setattr(paths, "_weakest_link_rounds",
                        lambda t, anc: rounds.append(t) or real(t, anc))
    X, y = _friedman(n=800, p=6, seed=2)
    tree = DecisionTreeRegressor(random_state=0).fit(X[:600], y[:600])
    alphas = [0.0, 0.01, 0.1]
    first, _ = pruned_tree_predictions(tree, X[600:700], alphas)
    second, _ = pruned_tree_predictions(tree, X[700:], alphas)
    assert len(rounds) == 1  # one replay for both evaluation sets
    # reference: scikit-learn's own ccp_alpha refit, on the second set
    ref = DecisionTreeRegressor(random_state=0, ccp_alpha=0.1).fit(X[:600], y[:600])
    assert np.array_equal(second[2], ref.predict(X[700:]))
    tree.fit(X[200:], y[200:])  # a new tree: a new replay
    pruned_tree_predictions(tree, X[:100], alphas)
    assert len(rounds) == 2
    held = weakref.ref(tree._foldwise_replay[1][3])  # the ancestor matrix
    rounds.clear()
    del tree
    gc.collect()
    assert held() is None  # nothing outlives the tree


def test_pruned_tree_zero_alpha_is_unpruned_and_constant_target():
    X, y = _friedman(n=200)
    tree = DecisionTreeRegressor(random_state=0).fit(X, y)
    preds, n_leaves = pruned_tree_predictions(tree, X, [0.0])
    # reference: scikit-learn's own DecisionTreeRegressor (ccp_alpha=0 is no pruning)
    assert np.array_equal(preds[0], tree.predict(X))
    assert n_leaves[0] == tree.get_n_leaves()

    flat = DecisionTreeRegressor(random_state=0).fit(X, np.full(200, 3.5))
    preds, n_leaves = pruned_tree_predictions(flat, X, [0.0, 1.0])
    # reference: scikit-learn's own DecisionTreeRegressor on a single-leaf tree
    assert np.array_equal(preds, np.full((2, 200), 3.5)) and list(n_leaves) == [1, 1]
    assert np.array_equal(pruning_alphas(flat), flat.cost_complexity_pruning_path(
        X, np.full(200, 3.5)).ccp_alphas)


def test_steps_follow_first_exceedance_rule():
    # reference: the stop rule in sklearn/tree/_tree.pyx (_AlphaPruner.stop_pruning:
    # stop at the first step whose effective alpha exceeds ccp_alpha; ccp_alpha == 0
    # skips pruning in DecisionTreeRegressor._prune_tree)
    seq = np.array([0.0, 0.1, 0.3, 0.2, 0.5])
    got = _steps_for(seq, np.array([0.0, 1e-300, 0.1, 0.25, 0.3, 0.4, 0.5, 9.0]))
    assert list(got) == [0, 1, 2, 2, 4, 4, 5, 5]


def test_pruned_tree_rejects_bad_input():
    X, y = _friedman(n=100)
    pruned = DecisionTreeRegressor(random_state=0, ccp_alpha=0.01).fit(X, y)
    with pytest.raises(ValueError):
        pruned_tree_predictions(pruned, X, [0.1])
    tree = DecisionTreeRegressor(random_state=0).fit(X, y)
    with pytest.raises(ValueError):
        pruned_tree_predictions(tree, X, [-1.0])
    with pytest.raises(ValueError):
        pruned_tree(pruned, 0.1)
    with pytest.raises(ValueError):
        pruned_tree(tree, float("nan"))


FOREST_CASES = [
    {"bootstrap": True},
    {"bootstrap": False, "max_features": 0.5},
    {"bootstrap": True, "max_samples": 0.5},
]


@pytest.mark.parametrize("params", FOREST_CASES)
def test_forest_grown_in_batches_matches_smaller_forests(params):
    """Predictions for two evaluation sets and impurity importances of every size, from a
    forest grown 3 trees at a time (sizes falling inside, at the end of and across
    batches); reference: scikit-learn's own RandomForestRegressor with n_estimators=k,
    compared bit for bit, missing values included."""
    X, y = _friedman(n=500)
    X = _with_missing(X, frac=0.05)
    X_tr, y_tr, X_ev = X[:350], y[:350], X[350:]
    sizes = [10, 5, 20, 5, 1, 3, 7]
    forest = RandomForestRegressor(n_estimators=20, random_state=3, n_jobs=1,
                                   min_samples_leaf=2, **params)
    (on_eval, on_fit), importances = forest_prefix_in_batches(forest, X_tr, y_tr,
                                                              [X_ev, X_tr], sizes, batch=3)
    assert all(tree is None for tree in forest.estimators_)  # every batch was let go
    for i, k in enumerate(sizes):
        ref = RandomForestRegressor(n_estimators=k, random_state=3, n_jobs=1,
                                    min_samples_leaf=2, **params).fit(X_tr, y_tr)
        assert np.array_equal(on_eval[i], ref.predict(X_ev)), k
        assert np.array_equal(on_fit[i], ref.predict(X_tr)), k
        assert np.array_equal(importances[i], ref.feature_importances_), k


def test_classifier_grown_in_batches_matches_smaller_forests_without_extra_warnings():
    """Class probabilities and importances as scikit-learn's RandomForestClassifier with
    n_estimators=k gives them (bit for bit), with per-tree class weights; the warm
    start's caution on class weights is not passed on (the rows never change)."""
    import warnings

    X, y = _friedman(n=600)
    labels = np.digitize(y, np.quantile(y, [0.5, 0.85]))
    X_tr, y_tr, X_ev = X[:450], labels[:450], X[450:]
    common = dict(random_state=5, n_jobs=1, class_weight="balanced_subsample")
    sizes = [4, 9, 16]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        (probabilities,), importances = forest_prefix_in_batches(
            RandomForestClassifier(n_estimators=16, **common), X_tr, y_tr, [X_ev], sizes,
            batch=5)
    assert caught == []
    for i, k in enumerate(sizes):
        ref = RandomForestClassifier(n_estimators=k, **common).fit(X_tr, y_tr)
        assert np.array_equal(probabilities[i], ref.predict_proba(X_ev)), k
        assert np.array_equal(importances[i], ref.feature_importances_), k


def test_trees_per_batch_grows_a_small_forest_at_once_and_a_large_fold_tree_by_tree():
    """A pickled fully grown tree on 20 000 rows takes about 91 bytes per row (measured
    with scikit-learn 1.9), so the 64 MiB batch holds ~670 such trees, and one tree of a
    10^6-row fold (~91 MB) is a batch on its own."""
    import pickle

    from runner.families.forest import BATCH_BYTES, trees_per_batch

    X, y = _friedman(n=20_000)
    tree = RandomForestRegressor(n_estimators=1, random_state=0).fit(X, y).estimators_[0]
    per_row = len(pickle.dumps(tree)) / len(y)
    assert 60 < per_row <= 100  # the rough size trees_per_batch assumes covers it
    assert trees_per_batch(20_000) * 20_000 * per_row <= BATCH_BYTES
    assert trees_per_batch(1_600) >= 400
    assert trees_per_batch(1_000_000) == 1
    assert trees_per_batch(100_000) == 6  # 64 MiB / (100 B x 10^5 rows)
    assert trees_per_batch(100_000, min_samples_leaf=5) == 33  # leaves of 5: a fifth


def test_forest_grown_in_batches_rejects_out_of_range_sizes():
    X, y = _friedman(n=100)
    with pytest.raises(ValueError):
        forest_prefix_in_batches(RandomForestRegressor(n_estimators=3, random_state=0), X, y,
                                 [X], [4])


def _linear_data(seed=0):
    X, y = _friedman(n=600, p=10, seed=seed)
    X = (X - X.mean(axis=0)) / X.std(axis=0)
    return X[:400], y[:400], X[400:]


@pytest.mark.parametrize("layout", ["C", "F"])
def test_ridge_path_is_ridge_defaults_to_the_last_bit(layout):
    # Source: scikit-learn's own Ridge(alpha) with its default solver ("auto", which is
    # Cholesky on dense rows) and Ridge(alpha, solver="cholesky"), fitted one alpha at a
    # time on the same rows in the same memory layout: coefficients, intercepts and
    # predictions equal bit for bit.
    X_tr, y_tr, X_ev = _linear_data()
    X_tr = np.array(X_tr, order=layout)
    alphas = np.logspace(-3, 3, 10)
    preds = ridge_path_predictions(X_tr, y_tr, X_ev, alphas)
    coefs, intercepts, solvers, _ = ridge_path_coefs(X_tr, y_tr, alphas)
    assert solvers == ["cholesky"] * len(alphas)
    for a, p, c, b in zip(alphas, preds, coefs, intercepts):
        for ref in (Ridge(alpha=a).fit(X_tr, y_tr), Ridge(alpha=a, solver="cholesky").fit(
                X_tr, y_tr)):
            assert ref.solver_ == "cholesky"
            assert np.array_equal(c, ref.coef_) and b == ref.intercept_, a
            assert np.array_equal(p, ref.predict(X_ev)), a


def test_ridge_model_from_the_path_is_the_refit_byte_for_byte():
    # Source: scikit-learn's own Ridge(alpha, solver="cholesky").fit on the same rows; its
    # pickle (every fitted number, attribute and their order) equals the one built from the
    # path. (12, 1) includes alpha 0: least squares through the same solve.
    rng = np.random.default_rng(4)
    for n, p in [(400, 10), (37, 3), (1200, 25), (12, 1)]:
        X = rng.standard_normal((n, p)) * rng.uniform(0.1, 20.0, p) + rng.uniform(-5, 5, p)
        y = X @ rng.standard_normal(p) + rng.standard_normal(n) * 3.0
        alphas = [0.0, 1e-3, 0.7, 25.0, 1e5]
        coefs, intercepts, solvers, _ = ridge_path_coefs(X, y, alphas)
        for a, c, b, solver in zip(alphas, coefs, intercepts, solvers):
            ref = Ridge(alpha=a, solver="cholesky").fit(X, y)
            assert pickle.dumps(ridge_model(a, c, b, solver)) == pickle.dumps(ref), (n, p, a)


def test_ridge_on_a_singular_matrix_takes_the_svd_route_as_the_fit_does():
    # Source: scikit-learn's own Ridge(alpha, solver="cholesky"), which falls back to its SVD
    # solver when the Cholesky factorisation fails (solver_ says "svd"). Two equal columns
    # make XᵀX singular; an alpha far below its rounding leaves it singular, a larger one
    # does not. Pickles equal, so the solver each alpha took is the fit's own.
    x = np.arange(1.0, 9.0)[:, None]
    X = np.hstack([x, x, (np.arange(8.0) % 3)[:, None]])
    y = np.arange(8.0) ** 1.5
    alphas = [1e-300, 1e-10, 1e-20, 2.0]
    coefs, intercepts, solvers, _ = ridge_path_coefs(X, y, alphas)
    assert solvers == ["svd", "cholesky", "svd", "cholesky"]
    for a, c, b, solver in zip(alphas, coefs, intercepts, solvers):
        ref = Ridge(alpha=a, solver="cholesky").fit(X, y)
        assert ref.solver_ == solver
        assert pickle.dumps(ridge_model(a, c, b, solver)) == pickle.dumps(ref), a


def test_ridge_path_warnings_belong_to_the_alpha_that_raised_them():
    # Source: scikit-learn's own Ridge(alpha, solver="cholesky") fitted alone on the same
    # rows, whose solve warns of an ill-conditioned matrix for the tiny alpha only (two
    # nearly equal columns); the path gives each alpha the warnings of its own solve, and
    # lets none escape to the caller.
    import warnings

    from runner.families._base import linear_preprocessor

    from .helpers import nearly_collinear_frame

    frame, y = nearly_collinear_frame()
    X = linear_preprocessor(list("abc"), []).fit_transform(frame)  # the rows a path gets
    alphas = [1e-14, 1e-9, 1e-3, 1.0]
    alone = []
    for a in alphas:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            Ridge(alpha=a, solver="cholesky").fit(X, y)
        alone.append([w.category for w in caught])
    assert alone[0] and not any(alone[1:])  # the case holds on this scikit-learn
    with warnings.catch_warnings(record=True) as escaped:
        warnings.simplefilter("always")
        path = ridge_path_coefs(X, y, alphas)
    assert escaped == []
    assert [[w.category for w in caught] for caught in path.warned] == alone


def test_ridge_with_more_columns_than_rows_is_each_alpha_fit():
    # Source: scikit-learn's own Ridge(alpha, solver="cholesky"), which solves the dual
    # problem when columns outnumber rows; the path hands each alpha to that fit.
    rng = np.random.default_rng(5)
    X, y = rng.standard_normal((15, 40)), rng.standard_normal(15)
    alphas = [0.01, 1.0, 30.0]
    coefs, intercepts, solvers, _ = ridge_path_coefs(X, y, alphas)
    for a, c, b, solver in zip(alphas, coefs, intercepts, solvers):
        ref = Ridge(alpha=a, solver="cholesky").fit(X, y)
        assert pickle.dumps(ridge_model(a, c, b, solver)) == pickle.dumps(ref), a


def _traced_peak(work) -> int:
    """Bytes allocated at the peak of `work()` above what was allocated before it (numpy
    reports its arrays to tracemalloc)."""
    import tracemalloc

    tracemalloc.start()
    try:
        before = tracemalloc.get_traced_memory()[0]
        work()
        return tracemalloc.get_traced_memory()[1] - before
    finally:
        tracemalloc.stop()


def test_ridge_on_scratch_rows_is_the_same_fit_with_one_copy_less():
    # Source: scikit-learn's own Ridge(alpha, solver="cholesky").fit on the same rows (pickles
    # equal). Centring the caller's scratch rows in place instead of a copy changes no bit,
    # leaves other callers' rows alone, and spares one copy of the design at the peak.
    rng = np.random.default_rng(8)
    X = rng.standard_normal((3000, 12)) * rng.uniform(0.1, 9.0, 12) + rng.uniform(-4, 4, 12)
    y = X @ rng.standard_normal(12) + rng.standard_normal(3000)
    alphas = [0.0, 0.3, 40.0]
    kept = X.copy()
    plain = ridge_path_coefs(X, y, alphas)
    assert np.array_equal(X, kept)
    scratch = kept.copy()
    coefs, intercepts, solvers, _ = ridge_path_coefs(scratch, y, alphas, scratch=True)
    assert np.array_equal(coefs, plain[0]) and np.array_equal(intercepts, plain[1])
    assert np.array_equal(scratch, kept - kept.mean(axis=0))  # the rows were the scratch
    for a, c, b, solver in zip(alphas, coefs, intercepts, solvers):
        ref = Ridge(alpha=a, solver="cholesky").fit(kept, y)
        assert pickle.dumps(ridge_model(a, c, b, solver)) == pickle.dumps(ref), a
    copied = _traced_peak(lambda: ridge_path_coefs(X, y, alphas))
    in_place = _traced_peak(lambda: ridge_path_coefs(X.copy(), y, alphas, scratch=True))
    # in_place counts the scratch copy made for it: the same peak means one copy less
    assert in_place <= copied + 0.1 * X.nbytes


@pytest.mark.parametrize("layout", ["C", "F"])
def test_elastic_net_path_copies_the_design_at_most_once(layout):
    # The coordinate-descent path reads our own centred copy without copying it again; on
    # scratch rows in Fortran order it works in place. The numbers are those of the copy.
    rng = np.random.default_rng(9)
    X = np.array(rng.standard_normal((4000, 10)) + rng.uniform(-3, 3, 10), order=layout)
    y = X @ rng.standard_normal(10) + rng.standard_normal(4000)
    alphas = np.logspace(-3, 0, 6)
    kept = X.copy(order="K")
    coefs, intercepts = elastic_net_path_coefs(X, y, alphas)
    assert np.array_equal(X, kept)  # neither the centring nor the path touched them
    again = elastic_net_path_coefs(kept.copy(order="K"), y, alphas, scratch=True)
    assert np.array_equal(again[0], coefs) and np.array_equal(again[1], intercepts)
    assert _traced_peak(lambda: elastic_net_path_coefs(X, y, alphas)) <= 1.5 * X.nbytes
    if layout == "F":
        assert _traced_peak(lambda: elastic_net_path_coefs(
            X.copy(order="F"), y, alphas, scratch=True)) <= 1.5 * X.nbytes
    for a, c in zip(alphas, coefs):
        # reference: scikit-learn's own Lasso, within the solver's tolerance
        ref = Lasso(alpha=a).fit(kept, y)
        assert np.max(np.abs(c - ref.coef_)) <= 1e-3 * y.std(), a


@pytest.mark.parametrize("l1_ratio", [1.0, 0.5])
@pytest.mark.parametrize("tol,bound", [(1e-4, 1e-3), (1e-6, 1e-5)])
def test_elastic_net_matches_per_alpha_fits(l1_ratio, tol, bound):
    # Stated bound: max |path prediction - per-alpha prediction| <= 10 * tol * std(y)
    # (measured about 0.1 * tol * std(y) on this data).
    X_tr, y_tr, X_ev = _linear_data(seed=2)
    alphas = np.random.default_rng(5).permutation(np.logspace(-4, 1, 10))
    alphas = np.append(alphas, alphas[2])  # a duplicate, out of order
    preds = elastic_net_path_predictions(
        X_tr, y_tr, X_ev, alphas, l1_ratio=l1_ratio, tol=tol, max_iter=10_000
    )
    coefs, _ = elastic_net_path_coefs(
        X_tr, y_tr, alphas, l1_ratio=l1_ratio, tol=tol, max_iter=10_000
    )
    assert preds.shape == (alphas.size, X_ev.shape[0])
    assert np.array_equal(preds[2], preds[-1])
    scale = y_tr.std()
    for a, p, c in zip(alphas, preds, coefs):
        if l1_ratio == 1.0:
            # reference: scikit-learn's own Lasso
            ref = Lasso(alpha=a, tol=tol, max_iter=10_000).fit(X_tr, y_tr)
        else:
            # reference: scikit-learn's own ElasticNet
            ref = ElasticNet(alpha=a, l1_ratio=l1_ratio, tol=tol, max_iter=10_000).fit(
                X_tr, y_tr
            )
        assert np.max(np.abs(p - ref.predict(X_ev))) <= bound * scale, a
        assert np.max(np.abs(c - ref.coef_)) <= bound * scale, a

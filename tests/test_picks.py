"""Pick rules: the one-standard-error rule as a pure function and as SQL over a store, the
complexity order of each family, the ccp_fraction conversion, an end-to-end check against
scikit-learn's own cross_validate on the diabetes data, and the `pick` / `path` commands."""

from __future__ import annotations

import json
import math

import duckdb
import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.cli import main
from runner.errors import QueryError
from runner.write.grid import expand_model
from runner.read.picks import best_index, one_se_index, one_se_threshold, standard_error
from runner.read.queries import complexity_table as read_complexity
from runner.read.queries import picks as read_picks
from runner.read.queries import summary as read_summary
from runner.read.views import complexity_view
from runner.write.spec import ModelSpec

from .store_builder import write_sweep



def picks(store, **kw):
    return read_picks(store, **kw).table


def complexity_table(store, model, **kw):
    return read_complexity(store, model, **kw).table


def summary(store, **kw):
    return read_summary(store, **kw).table


# -- the rule on plain numbers ------------------------------------------------------------


def test_one_se_rule_hand_worked_table():
    # Hastie, Tibshirani & Friedman, The Elements of Statistical Learning, 2nd ed., §7.10,
    # quoted from memory: "choose the most parsimonious model whose error is no more than one
    # standard error above the error of the best model". Means in complexity order, SE of the
    # best cell.
    means = [27.0, 26.0, 25.2, 25.9]
    assert best_index(means, "lower") == 2
    assert one_se_threshold(25.2, 1.157584, "lower") == pytest.approx(26.357584, abs=1e-12)
    assert one_se_index(means, 1.157584, "lower") == 1


@pytest.mark.parametrize("means, se, better, best, one_se", [
    ([3.0, 2.0, 2.0], 0.0, "lower", 1, 1),            # tied best: the simpler one
    ([5.0, 5.0, 5.0], 0.1, "lower", 0, 0),            # all equal: the simplest
    ([4.2], 0.3, "lower", 0, 0),                      # a single cell
    ([2.5, 2.0], 0.5, "lower", 1, 0),                 # exactly on the threshold counts
    ([2.5 + 1e-9, 2.0], 0.5, "lower", 1, 1),          # just above it does not
    ([2.4, 2.0, 2.3], 0.0, "lower", 1, 1),            # zero SE: the best itself
    ([0.50, 0.595, 0.61, 0.60], 0.02, "higher", 2, 1),  # r2: threshold 0.59
    ([0.50, 0.58, 0.61, 0.60], 0.02, "higher", 2, 2),   # 0.58 < 0.59: not within
    ([0.7, 0.7, 0.6], 0.05, "higher", 0, 0),          # higher-is-better tie
])
def test_one_se_rule_edge_cases(means, se, better, best, one_se):
    assert best_index(means, better) == best
    assert one_se_index(means, se, better) == one_se


@pytest.mark.parametrize("means, tiers, se, better, one_se", [
    ([2.3, 2.1, 2.0], [0, 0, 1], 0.4, "lower", 1),     # tier 0: the better of its two
    ([2.3, 2.1, 2.0], None, 0.4, "lower", 0),          # no tiers: the rank order, as before
    ([2.3, 2.1, 2.0], [0, 1, 2], 0.4, "lower", 0),     # a tier per cell: the rank order
    ([2.5, 2.1, 2.0], [0, 0, 1], 0.4, "lower", 1),     # the better of tier 0 is within
    ([2.5, 2.45, 2.0], [0, 0, 1], 0.4, "lower", 2),    # tier 0 is not within: tier 1
    ([2.2, 2.2, 2.0], [0, 0, 1], 0.4, "lower", 0),     # equal means in a tier: the first
    ([0.55, 0.58, 0.60], [0, 0, 1], 0.05, "higher", 1),  # r2: the higher of tier 0
    ([0.58, 0.50, 0.60], [0, 0, 1], 0.05, "higher", 0),  # 0.50 is not within, 0.58 is
])
def test_one_se_rule_among_equally_simple_cells_takes_the_better_mean(means, tiers, se,
                                                                      better, one_se):
    # Among cells of one complexity tier the one-SE rule cannot say which is simpler; the
    # better mean goes first, so the pick never trades score for text order.
    assert one_se_index(means, se, better, tiers) == one_se


@pytest.mark.parametrize("call, message", [
    (lambda: best_index([], "lower"), "means is empty"),
    (lambda: best_index([1.0], "smaller"), "better must be 'lower' or 'higher'"),
    (lambda: one_se_index([1.0], 0.1, "up"), "better must be 'lower' or 'higher'"),
    (lambda: standard_error([1.0]), "at least 2 fold scores"),
    (lambda: standard_error([1.0, 2.0], kind="corrected"), "needs valid_ratio"),
])
def test_rule_refuses_bad_input(call, message):
    with pytest.raises(ValueError, match=message):
        call()


@settings(max_examples=150, deadline=None)
@given(st.lists(st.floats(-1e3, 1e3), min_size=1, max_size=12), st.floats(0, 50),
       st.sampled_from(["lower", "higher"]))
def test_one_se_pick_is_the_first_cell_within_the_threshold(means, se, better):
    b = best_index(means, better)
    i = one_se_index(means, se, better)
    sign = 1 if better == "lower" else -1
    assert i <= b
    assert sign * (means[i] - means[b]) <= se + 1e-9 * max(1, abs(means[b]))
    for j in range(i):
        assert sign * (means[j] - means[b]) > se - 1e-9


def test_standard_error_forms():
    x = [4.0, 5.5, 3.2, 6.1, 5.0, 4.4]
    sd = float(np.std(x, ddof=1))
    assert standard_error(x) == pytest.approx(sd / math.sqrt(6), rel=1e-12)
    # Nadeau & Bengio (2003): corrected variance (1/n + n_valid/n_train)·s².
    assert standard_error(x, kind="corrected", valid_ratio=0.25) == pytest.approx(
        math.sqrt((1 / 6 + 0.25) * sd**2), rel=1e-12)


# -- complexity order per family (runner/grid.py) ----------------------------------------


def _ranked(family: str, grid: dict, simpler: dict | None = None, keys=()) -> list[tuple]:
    model = ModelSpec.model_validate({"family": family, "grid": grid, "simpler": simpler or {}})
    cells = expand_model("m", model, data_sha256="x", plan_identity={}, n_features=10)
    assert [c.complexity_rank for c in cells] == list(range(len(cells)))
    return [tuple(c.params.get(k) for k in keys) for c in cells]


def test_pruned_tree_order():
    # larger ccp_alpha simpler, then larger min_samples_leaf, then smaller max_depth.
    got = _ranked("pruned_tree", {"ccp_alpha": [0.0, 0.5], "min_samples_leaf": [1, 5],
                                  "max_depth": [None, 3]},
                  keys=("ccp_alpha", "min_samples_leaf", "max_depth"))
    assert got == [(0.5, 5, 3), (0.5, 5, None), (0.5, 1, 3), (0.5, 1, None),
                   (0.0, 5, 3), (0.0, 5, None), (0.0, 1, 3), (0.0, 1, None)]
    frac = _ranked("pruned_tree", {"ccp_fraction": [0.001, 0.05, 0.01]}, keys=("ccp_fraction",))
    assert frac == [(0.05,), (0.01,), (0.001,)]


def test_linear_order():
    # any penalty is simpler than none; larger alpha is simpler.
    got = _ranked("linear", {"penalty": ["none", "l2"], "alpha": [0.1, 10.0]},
                  keys=("penalty", "alpha"))
    assert got == [("l2", 10.0), ("l2", 0.1), ("none", None)]


def test_forest_order():
    # larger min_samples_leaf, smaller max_features, smaller max_depth; fewer trees last.
    got = _ranked("forest", {"min_samples_leaf": [1, 5], "max_features": [0.5, 1.0],
                             "max_depth": [None, 4], "n_estimators": [50, 100]},
                  keys=("min_samples_leaf", "max_features", "max_depth", "n_estimators"))
    expected = sorted(got, key=lambda p: (-p[0], p[1], math.inf if p[2] is None else p[2], p[3]))
    assert got == expected
    assert got[0] == (5, 0.5, 4, 50) and got[-1] == (1, 1.0, None, 100)


def test_spec_can_reverse_a_direction():
    got = _ranked("pruned_tree", {"ccp_alpha": [0.0, 0.5, 1.0]}, {"ccp_alpha": "lower"},
                  keys=("ccp_alpha",))
    assert got == [(0.0,), (0.5,), (1.0,)]


@pytest.mark.parametrize("family, grid, simpler, tiers", [
    # l1_ratio orders nothing: each alpha's two cells are equally simple
    ("linear", {"penalty": ["elasticnet"], "alpha": [0.1, 1.0], "l1_ratio": [0.2, 0.8]}, {},
     [0, 0, 1, 1]),
    # given a direction it orders cells within an alpha: every cell its own tier
    ("linear", {"penalty": ["elasticnet"], "alpha": [0.1, 1.0], "l1_ratio": [0.2, 0.8]},
     {"l1_ratio": "higher"}, [0, 1, 2, 3]),
    # the classification tree's criterion orders nothing
    ("pruned_tree", {"ccp_alpha": [0.0, 0.5], "criterion": ["gini", "entropy"]}, {},
     [0, 0, 1, 1]),
    # bootstrap orders nothing; fewer trees comes first, so it is a tier of its own
    ("forest", {"n_estimators": [10, 20], "bootstrap": [True, False]}, {}, [0, 0, 1, 1]),
])
def test_equally_simple_cells_share_a_complexity_tier(family, grid, simpler, tiers):
    model = ModelSpec.model_validate({"family": family, "grid": grid, "simpler": simpler})
    cells = expand_model("m", model, data_sha256="x", plan_identity={}, n_features=10,
                         task="classification" if "criterion" in grid else "regression")
    assert [c.complexity_rank for c in cells] == list(range(len(cells)))
    assert [c.complexity_tier for c in cells] == tiers


def test_ccp_fraction_is_a_share_of_the_target_variance():
    # ccp_alpha = ccp_fraction × var(y) (population variance, the root node's MSE); on the
    # diabetes data (Efron et al. 2004), all 442 rows, defaults otherwise, scikit-learn 1.9:
    # 0.01 → 14 leaves, 0.02 → 6, 0.05 → 4.
    from sklearn.datasets import load_diabetes

    from runner.families.pruned_tree import make_estimator, resolve_alpha

    X, y = load_diabetes(return_X_y=True, as_frame=True)
    assert resolve_alpha({"ccp_fraction": 0.01}, y) == pytest.approx(0.01 * np.var(y), rel=1e-12)
    leaves = []
    for fraction in (0.01, 0.02, 0.05):
        est = make_estimator({"ccp_fraction": fraction}, seed=0, y_fit=y,
                             numeric=list(X.columns), categorical=[])
        leaves.append(int(est.fit(X, y).named_steps["model"].get_n_leaves()))
    assert leaves == [14, 6, 4]


# -- the rule as SQL over a store ---------------------------------------------------------


def _random_models(seed: int, k: int, r: int, better: str) -> dict[str, list[list[float]]]:
    rng = np.random.default_rng(seed)
    models = {}
    for label in ("a", "b", "c"):
        n_cells = int(rng.integers(1, 7))
        bend = int(rng.integers(0, n_cells))
        cells = []
        for rank in range(n_cells):
            base = 5.0 - 0.2 * min(rank, bend) + 0.05 * max(0, rank - bend)
            if better == "higher":
                base = 1.0 - base / 10
            cells.append(list(base + rng.normal(0, 0.25 if better == "lower" else 0.02, k * r)))
        models[label] = cells
    return models


def _random_tiers(seed: int, models: dict) -> dict[str, list[int]]:
    """Non-decreasing tiers per model, runs of one to three cells sharing one."""
    rng = np.random.default_rng(seed + 100)
    return {label: np.cumsum([0] + [int(rng.integers(0, 3) == 0) for _ in cells[1:]]).tolist()
            for label, cells in models.items()}


def _expected(models, rule, se_kind, better, ratio, tiers=None):
    out = {}
    for label, cells in models.items():
        means = [float(np.mean(c)) for c in cells]
        b = best_index(means, better)
        if rule == "best":
            out[label] = b
            continue
        se = standard_error(cells[b], kind=se_kind, valid_ratio=ratio)
        out[label] = one_se_index(means, se, better, None if tiers is None else tiers[label])
    return out


@pytest.mark.parametrize("seed", range(3))
@pytest.mark.parametrize("better", ["lower", "higher"])
@pytest.mark.parametrize("tiered", [False, True])
def test_stored_pick_equals_the_pure_rule(tmp_path, seed, better, tiered):
    k, r = 5, 2
    models = _random_models(seed, k, r, better)
    tiers = _random_tiers(seed, models) if tiered else None
    metric = "rmse" if better == "lower" else "r2"
    store = write_sweep(tmp_path / "s.duckdb", models, k=k, repeats=r, metric=metric,
                        better=better, n_train=80, n_valid=20, tiers=tiers)
    for se_kind in ("plain", "corrected"):
        df = picks(store, se=se_kind)
        for rule in ("best", "one_se"):
            got = df[df["rule"] == rule].set_index("model")["complexity_rank"].to_dict()
            assert got == _expected(models, rule, se_kind, better, 20 / 80, tiers), (
                rule, se_kind)


def test_stored_pick_se_and_threshold(tmp_path):
    scores = [[5.0, 5.2, 4.9, 5.1, 5.3, 5.0], [4.8, 4.9, 4.7, 5.0, 4.8, 4.9]]
    store = write_sweep(tmp_path / "s.duckdb", {"m": scores}, k=3, repeats=2,
                        n_train=[8, 8, 9, 8, 8, 9], n_valid=[4, 4, 3, 4, 4, 3])
    best = picks(store, rule="best").iloc[0]
    assert best["mean"] == pytest.approx(np.mean(scores[1]), rel=1e-12)
    assert best["se"] == pytest.approx(np.std(scores[1], ddof=1) / math.sqrt(6), rel=1e-12)
    ratio = np.mean([4 / 8, 4 / 8, 3 / 9, 4 / 8, 4 / 8, 3 / 9])  # mean of n_valid/n_train
    corrected = picks(store, rule="best", se="corrected").iloc[0]
    assert corrected["se"] == pytest.approx(
        math.sqrt((1 / 6 + ratio) * np.var(scores[1], ddof=1)), rel=1e-12)
    assert corrected["threshold"] == pytest.approx(corrected["mean"] + corrected["se"])


def test_one_se_for_a_score_where_higher_is_better_worked_by_hand(tmp_path):
    # The one-SE rule (Breiman et al. 1984; Hastie, Tibshirani & Friedman, ESL 2nd ed.
    # §7.10, from memory) mirrored for a score where higher is better: the simplest cell
    # whose mean is at least best − SE, SE that of the best cell's k·r fold scores, sd
    # (ddof 1) / sqrt(k·r); --se corrected: sqrt((1/(k·r) + n_valid/n_train)·sd²) (Nadeau &
    # Bengio 2003). Worked with numpy: best 0.61 (rank 2), plain SE 0.00966, bar 0.6003:
    # rank 1 (0.605) is within, rank 0 (0.597) is not; the corrected SE 0.01528 lowers the
    # bar to 0.5947 and takes rank 0. (best + SE, the bar of a loss, would take rank 0.)
    cells = [[0.58, 0.61, 0.60, 0.59, 0.605, 0.597], [0.60, 0.61, 0.595, 0.615, 0.60, 0.61],
             [0.58, 0.64, 0.60, 0.62, 0.59, 0.63], [0.59, 0.61, 0.60, 0.60, 0.61, 0.59]]
    store = write_sweep(tmp_path / "s.duckdb", {"m": cells}, k=3, repeats=2, metric="r2",
                        better="higher", n_train=80, n_valid=20)
    means = np.mean(cells, axis=1)
    best = int(np.argmax(means))
    sd = np.std(cells[best], ddof=1)
    for kind, se, expected in (("plain", sd / math.sqrt(6), 1),
                               ("corrected", math.sqrt((1 / 6 + 20 / 80) * sd**2), 0)):
        bar = means[best] - se
        assert int(np.flatnonzero(means >= bar)[0]) == expected
        got = picks(store, se=kind).set_index("rule")
        assert got.loc["best", "complexity_rank"] == best == 2
        assert got.loc["one_se", "complexity_rank"] == expected, kind
        assert got.loc["one_se", "best_se"] == pytest.approx(se, rel=1e-12)
        assert got.loc["one_se", "threshold"] == pytest.approx(bar, rel=1e-12)


def test_corrected_se_of_a_cell_with_an_undefined_fold_takes_the_defined_folds_ratio(tmp_path):
    # A score undefined on one fold (ROC AUC where a validation fold holds one class): the
    # corrected SE of the mean of the n defined scores is sqrt((1/n + r)·sd²) with r the
    # mean n_valid/n_train over those n folds (Nadeau & Bengio 2003; as compare pairs only
    # the folds where both scores are defined). Worked with numpy: n = 5 folds of sizes
    # 8/4, 8/4, 8/4, 8/4, 9/3; the undefined fold (9/3) must not enter r.
    scores = [[5.0, 5.2, math.nan, 5.1, 5.3, 4.9], [4.0, 4.1, 4.2, 4.0, 4.1, 4.3]]
    store = write_sweep(tmp_path / "s.duckdb", {"m": scores}, k=3, repeats=2,
                        n_train=[8, 8, 9, 8, 8, 9], n_valid=[4, 4, 3, 4, 4, 3])
    defined = [v for v in scores[0] if not math.isnan(v)]
    ratio = np.mean([4 / 8, 4 / 8, 4 / 8, 4 / 8, 3 / 9])
    row = complexity_table(store, "m", se="corrected").iloc[0]
    assert (row["n"], row["excluded"]) == (5, "undefined score")
    assert row["se"] == pytest.approx(math.sqrt((1 / 5 + ratio) * np.var(defined, ddof=1)),
                                      rel=1e-12)


def test_failed_and_incomplete_cells_are_never_picked(tmp_path):
    cells = [[3.0] * 4, [2.0, 2.1, 1.9, 2.0], [1.0, 1.1, 0.9, 1.0], [1.5, 1.4, 1.6, 1.5]]
    store = write_sweep(tmp_path / "s.duckdb", {"m": cells, "solo": [[1.0, 1.0, 1.0, 1.0]]},
                        k=2, repeats=2, failures=["m-2", "solo-0"], drop=[("m-3", 1)])
    df = picks(store)
    assert df["model"].unique().tolist() == ["m"]
    assert df.set_index("rule")["cell_id"].to_dict() == {"best": "m-1", "one_se": "m-1"}
    assert read_picks(store).unpicked == ("solo",)
    assert df["eligible"].iloc[0] == 2 and df["cells"].iloc[0] == 4
    table = complexity_table(store, "m")
    assert table["excluded"].tolist() == ["", "", "failed fits", "incomplete"]


def test_pick_options_and_errors(tmp_path):
    store = write_sweep(tmp_path / "s.duckdb", {"lin": [[2.0, 2.2, 1.8, 2.0]] * 1,
                                                "tree": [[3.0, 3.1, 2.9, 3.0]]}, k=2, repeats=2)
    only = picks(store, rule="one_se", model="tree")
    assert only[["model", "rule"]].values.tolist() == [["tree", "one_se"]]
    with pytest.raises(QueryError, match=r"--model 'tre' is no model .* Did you mean 'tree'\?"):
        picks(store, model="tre")
    with pytest.raises(QueryError, match=r"rule must be one of best, one_se, got rule='worst'"):
        picks(store, rule="worst")
    with pytest.raises(QueryError, match=r"se must be one of plain, corrected"):
        picks(store, se="naive")


def test_summary_shows_the_sweeps_rule(tmp_path):
    cells = [[5.0, 5.2, 4.8, 5.0], [4.9, 5.1, 4.9, 4.9], [4.8, 5.3, 4.5, 4.8]]
    store = write_sweep(tmp_path / "s.duckdb", {"m": cells}, k=2, repeats=2, pick_rule="one_se")
    df = summary(store)
    assert read_summary(store).rule == "one_se" and df["rule"].tolist() == ["one_se"]
    assert {"model", "family", "cells", "cell_id", "params", "cv_rmse", "se_rmse",
            "test_rmse"} <= set(df.columns)
    assert df["cell_id"].tolist() == ["m-0"]
    assert summary(store, rule="best")["cell_id"].tolist() == ["m-2"]


def test_complexity_table_marks_and_order(tmp_path):
    cells = [[5.0, 5.2, 4.8, 5.0], [4.9, 5.1, 4.9, 4.9], [4.8, 5.3, 4.5, 4.8], [6, 6, 6, 6]]
    store = write_sweep(tmp_path / "s.duckdb", {"t": cells}, k=2, repeats=2,
                        family="pruned_tree")
    df = complexity_table(store, "t")
    assert df["complexity_rank"].tolist() == [0, 1, 2, 3]
    assert df["pick"].tolist() == ["one_se", "", "best", ""]
    assert df["within_one_se"].tolist() == [True, True, True, False]
    assert df["mean_leaves"].tolist() == [2.0, 3.0, 4.0, 5.0]
    assert read_complexity(store, "t").threshold == pytest.approx(
        4.85 + np.std(cells[2], ddof=1) / 2)


# -- end to end on the diabetes data --------------------------------------------------------

DIABETES_SPEC = """
name: diabetes-picks
data:
  path: diabetes.csv
  target: target
test:
  fraction: 0.2
  seed: 5
folds:
  k: 5
  repeats: 2
  seed: 7
metrics: [rmse, r2]
pick: one_se
models:
  tree:
    family: pruned_tree
    grid:
      ccp_alpha: [30.0, 100.0, 200.0, 300.0, 500.0, 900.0]
  ridge:
    family: linear
    grid:
      penalty: l2
      alpha: [3.0, 10.0, 30.0, 100.0, 300.0]
"""


@pytest.fixture(scope="module")
def diabetes_sweep(tmp_path_factory):
    """A small sweep on scikit-learn's diabetes data (Efron et al. 2004), run once."""
    from sklearn.datasets import load_diabetes

    from runner.write.engine import run_sweep
    from runner.write.spec import parse_spec
    from runner.store import Store

    folder = tmp_path_factory.mktemp("diabetes")
    load_diabetes(as_frame=True).frame.to_csv(folder / "diabetes.csv", index=False)
    spec = parse_spec(DIABETES_SPEC, source=folder / "spec.yaml")
    store = Store(folder / "s.duckdb")
    run_sweep(spec, store=store, jobs=1)
    return folder, store


def _sklearn_fold_scores(folder) -> tuple[dict, float]:
    """RMSE per cell and fold from scikit-learn's cross_validate on the documented folds:
    test rows = train_test_split(arange(n), test_size=0.2, random_state=5)[1]; training rows
    = the rest in file order; RepeatedKFold(5, 2, random_state=7) over them; estimator seed
    per fold = fold_seed(7, repeat, fold)."""
    from sklearn.linear_model import Ridge
    from sklearn.model_selection import RepeatedKFold, cross_validate, train_test_split
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler
    from sklearn.tree import DecisionTreeRegressor

    from runner.write.resampling import fold_seed

    df = pd.read_csv(folder / "diabetes.csv")
    y = df.pop("target").to_numpy()
    n = len(y)
    test_rows = train_test_split(np.arange(n), test_size=0.2, random_state=5)[1]
    train = np.setdiff1d(np.arange(n), test_rows)
    X_tr, y_tr = df.iloc[train], y[train]
    splits = list(RepeatedKFold(n_splits=5, n_repeats=2, random_state=7).split(train))
    makers = {("tree", a): (lambda s, a=a: DecisionTreeRegressor(ccp_alpha=a, random_state=s))
              for a in (30.0, 100.0, 200.0, 300.0, 500.0, 900.0)}
    makers.update({("ridge", a): (lambda s, a=a: make_pipeline(StandardScaler(), Ridge(alpha=a)))
                   for a in (3.0, 10.0, 30.0, 100.0, 300.0)})
    scores = {key: [] for key in makers}
    for i, (fit, valid) in enumerate(splits):
        seed = fold_seed(7, i // 5, i % 5)
        for key, make in makers.items():
            cv = cross_validate(make(seed), X_tr, y_tr, cv=[(fit, valid)],
                                scoring="neg_root_mean_squared_error")
            scores[key].append(-float(cv["test_score"][0]))
    ratio = float(np.mean([len(v) / len(f) for f, v in splits]))
    return scores, ratio


@pytest.mark.parametrize("se_kind", ["plain", "corrected"])
def test_diabetes_pick_matches_sklearn_cross_validate(diabetes_sweep, se_kind):
    folder, store = diabetes_sweep
    scores, ratio = _sklearn_fold_scores(folder)
    stored = picks(store, se=se_kind)
    for model in ("tree", "ridge"):
        # complexity order: larger alpha is simpler for both families.
        keys = sorted((k for k in scores if k[0] == model), key=lambda k: -k[1])
        means = [float(np.mean(scores[k])) for k in keys]
        b = best_index(means, "lower")
        se = standard_error(scores[keys[b]], kind=se_kind, valid_ratio=ratio)
        expected = {"best": keys[b][1], "one_se": keys[one_se_index(means, se, "lower")][1]}
        rows = stored[stored["model"] == model].set_index("rule")
        for rule, alpha in expected.items():
            params = json.loads(rows.loc[rule, "params"])
            key = "alpha" if model == "ridge" else "ccp_alpha"
            assert params[key] == alpha, (model, rule)
            assert rows.loc[rule, "mean"] == pytest.approx(np.mean(scores[(model, alpha)]),
                                                           rel=1e-9)
        assert rows.loc["best", "se"] == pytest.approx(se, rel=1e-9)
        if model == "ridge":  # here the rule matters: a stronger penalty is within one SE
            assert expected["one_se"] > expected["best"]


# -- equally simple cells: elastic net with two l1_ratio values per alpha ------------------

NET_MODELS = """
net:
  family: linear
  grid: {penalty: elasticnet, alpha: [0.1, 0.5, 0.7], l1_ratio: [0.2, 0.8]}
"""


@pytest.fixture(scope="module")
def net_sweep(tmp_path_factory):
    """Elastic net on the diabetes data (Efron et al. 2004): l1_ratio does not order
    complexity, so each alpha's two cells are equally simple; at alpha 0.7 both are within
    one SE and l1_ratio 0.8, second in the parameters' text order, scores better."""
    from runner.write.engine import run_sweep
    from runner.write.spec import load_spec
    from runner.store import Store

    from .helpers import diabetes_frame, write_spec

    folder = tmp_path_factory.mktemp("net")
    diabetes_frame().to_csv(folder / "diabetes.csv", index=False)
    result = run_sweep(load_spec(write_spec(folder, NET_MODELS)), jobs=1)
    return Store(result.store_path), result.sweep_id


def _one_se_from_fold_rows(store, sweep_id) -> tuple[str, str]:
    """The one-SE cell recomputed from the stored fold rows with pandas alone, and the cell
    the parameters' text order would take (the lowest rank within one SE).

    The one-SE rule (Breiman et al. 1984, §3.4.3; Hastie, Tibshirani & Friedman, ESL §7.10):
    the simplest cell whose mean is within one SE (sd / sqrt(n)) of the best. Larger alpha is
    simpler; l1_ratio does not order complexity, so among the cells of the largest alpha
    within one SE the better mean goes first."""
    rows = store.query("""select c.cell_id, c.params, c.complexity_rank, f.value
                          from fold_scores f join cells c using (sweep_id, cell_id)
                          where f.sweep_id = ? and f.metric = 'rmse'""", [sweep_id])
    cells = rows.groupby(["cell_id", "params", "complexity_rank"])["value"].agg(
        ["mean", "std", "count"]).reset_index()
    cells["alpha"] = [json.loads(p)["alpha"] for p in cells["params"]]
    best = cells.loc[cells["mean"].idxmin()]
    within = cells[cells["mean"] <= best["mean"] + best["std"] / math.sqrt(best["count"])]
    simplest = within[within["alpha"] == within["alpha"].max()]
    return (simplest.loc[simplest["mean"].idxmin(), "cell_id"],
            within.loc[within["complexity_rank"].idxmin(), "cell_id"])


def test_one_se_pick_among_equally_simple_cells_is_the_better_scorer(net_sweep):
    from runner.read.past import model_history

    store, sweep_id = net_sweep
    expected, by_text = _one_se_from_fold_rows(store, sweep_id)
    assert expected != by_text  # the case at issue: text order alone would pick the other
    tiers = store.query("select complexity_rank, complexity_tier from cells "
                        "order by complexity_rank")
    assert tiers["complexity_tier"].tolist() == [0, 0, 1, 1, 2, 2]
    got = picks(store, rule="one_se")
    assert got["cell_id"].tolist() == [expected]
    assert json.loads(got["params"].iloc[0]) == {"alpha": 0.7, "l1_ratio": 0.8,
                                                 "penalty": "elasticnet"}
    marked = complexity_table(store, "net")
    assert marked.loc[marked["pick"].str.contains("one_se"), "cell_id"].tolist() == [expected]
    history = model_history(store, "net", rule="one_se").table
    assert history["cell_id"].tolist() == [expected]
    view = complexity_view(read_complexity(store, "net"))
    assert view.table["tier"].tolist() == ["0", "0", "1", "1", "2", "2"]
    assert any("simplest tier within one SE" in n for n in view.sentences)
    assert marked["complexity_tier"].tolist() == [0, 0, 1, 1, 2, 2]


def test_a_store_without_tiers_keeps_its_pick_by_rank(net_sweep, tmp_path):
    from runner.read.past import model_history
    from runner.store import Store
    from runner.store.transfer import merge_store

    store, sweep_id = net_sweep
    _, by_text = _one_se_from_fold_rows(store, sweep_id)
    for how in ("null", "one null", "schema 3"):
        old = Store(tmp_path / f"{how}.duckdb")
        merge_store(old, store.path)
        with duckdb.connect(str(old.path)) as con:  # cells as an older foldwise wrote them
            if how != "schema 3":  # one cell without a tier: the model's cells go by rank
                con.execute("update cells set complexity_tier = null"
                            + (" where complexity_rank = 5" if how == "one null" else ""))
            else:
                con.execute("drop view cell_summary")
                con.execute("alter table cells drop column complexity_tier")
                con.execute("update foldwise_meta set value = '3' "
                            "where key = 'schema_version'")
        old = Store(old.path)
        assert picks(old, rule="one_se")["cell_id"].tolist() == [by_text], how
        assert model_history(old, "net", rule="one_se").table["cell_id"].tolist() == [by_text]
        out = CliRunner().invoke(main, ["pick", "--rule", "one_se", "--store", str(old.path)])
        assert out.exit_code == 0, out.output
        assert "Error" not in out.output and "Traceback" not in out.output
        assert old.query("select count(complexity_tier) as n from cells")["n"].tolist() == [
            5 if how == "one null" else 0]
        view = complexity_view(read_complexity(old, "net"))
        assert "tier" not in view.table.columns and not any("tier" in n for n in view.sentences)


def test_the_summary_view_carries_the_tier_and_an_older_view_is_made_again(net_sweep,
                                                                          tmp_path):
    import shutil

    store, _ = net_sweep
    copy = tmp_path / "copy.duckdb"
    shutil.copy(store.path, copy)
    with duckdb.connect(str(copy)) as con:  # the view as made before it carried the tier
        con.execute("""create or replace view cell_summary as
            select f.sweep_id, f.cell_id, c.model, c.complexity_rank, f.metric,
                   avg(f.value) as mean, count(f.value) as n
            from fold_scores f join cells c using (sweep_id, cell_id) group by all""")
    from runner.store import Store

    Store(copy).ensure_schema()  # what every write (a sweep, a merge, a build) does first
    for path in (store.path, copy):
        view = duckdb.connect(str(path), read_only=True).execute(
            """select distinct v.cell_id, v.complexity_tier, c.complexity_tier as stored
               from cell_summary v join cells c using (sweep_id, cell_id)
               order by v.cell_id""").df()
        assert len(view) == 6 and (view["complexity_tier"] == view["stored"]).all(), path
        assert sorted(view["complexity_tier"]) == [0, 0, 1, 1, 2, 2]


def test_the_same_fold_scores_in_another_row_order_tie_and_the_simpler_cell_wins(tmp_path):
    """Two cells hold the same six fold scores on different folds (as a merge or export may
    reorder rows): their means are equal in exact arithmetic (math.fsum), but DuckDB's avg
    sums them in row order and the simpler cell's comes out one unit in the last place
    worse. The best and the one-SE pick must both go to the simpler cell."""
    scores = [58.954122, 59.203875, 62.704228, 61.073296, 61.776864, 56.730857]
    moved = [scores[i] for i in (1, 5, 4, 2, 3, 0)]
    assert math.fsum(scores) == math.fsum(moved)
    for rule in ("best", "one_se"):
        store = write_sweep(tmp_path / f"{rule}.duckdb", {"m": [scores, moved]}, k=3,
                            repeats=2, pick_rule=rule, tiers={"m": [0, 0]})
        means = store.query("select avg(value) as mean from fold_scores group by cell_id "
                            "order by cell_id")["mean"].tolist()
        assert means[0] > means[1]  # the case at issue: the simpler cell's sum came out larger
        assert read_picks(store, rule=rule).table["cell_id"].tolist() == ["m-0"], rule
    assert best_index(means, "lower") == 0 and best_index([-m for m in means], "higher") == 0
    assert one_se_index(means, 1.0, "lower", [0, 0]) == 0
    assert best_index([1.0, 0.999], "lower") == 1  # a real difference still counts


# -- the commands -------------------------------------------------------------------------


def _json(result):
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def test_pick_command_json_matches_the_api(diabetes_sweep):
    _, store = diabetes_sweep
    runner = CliRunner()
    got = _json(runner.invoke(main, ["pick", "--store", str(store.path), "--format", "json"]))
    api = picks(store)
    assert [(r["model"], r["rule"], r["cell_id"]) for r in got] == list(
        zip(api["model"], api["rule"], api["cell_id"]))
    assert [r["mean"] for r in got] == pytest.approx(api["mean"].tolist(), rel=1e-12)
    one = _json(runner.invoke(main, ["pick", "--store", str(store.path), "--format", "json",
                                     "--rule", "one_se", "--model", "tree", "--se",
                                     "corrected"]))
    api = picks(store, rule="one_se", model="tree", se="corrected")
    assert [r["cell_id"] for r in one] == api["cell_id"].tolist()
    assert one[0]["se"] == pytest.approx(api["se"].iloc[0], rel=1e-12)


def test_pick_command_table_and_errors(diabetes_sweep):
    _, store = diabetes_sweep
    runner = CliRunner()
    result = runner.invoke(main, ["pick", "--store", str(store.path)])
    assert result.exit_code == 0, result.output
    assert "best cell" in result.stdout and "one-SE cell" in result.stdout
    assert "the sweep's rule is one-SE" in result.stdout
    bad = runner.invoke(main, ["pick", "--store", str(store.path), "--model", "tre"])
    assert bad.exit_code == 2
    assert "--model 'tre' is no model" in bad.stderr and "Did you mean 'tree'?" in bad.stderr


def test_path_command_json_matches_the_api(diabetes_sweep):
    _, store = diabetes_sweep
    runner = CliRunner()
    got = _json(runner.invoke(main, ["path", "--model", "tree", "--store", str(store.path),
                                     "--format", "json"]))
    api = complexity_table(store, "tree")
    assert [r["ccp_alpha"] for r in got] == [900.0, 500.0, 300.0, 200.0, 100.0, 30.0]
    assert [r["pick"] for r in got] == api["pick"].tolist()
    assert [r["mean_leaves"] for r in got] == pytest.approx(api["mean_leaves"].tolist())
    table = runner.invoke(main, ["path", "--model", "tree", "--store", str(store.path)])
    assert table.exit_code == 0, table.output
    words = " ".join(table.stdout.split())
    assert "one-SE threshold: CV RMSE ≤" in words and "leaves" in words


@pytest.mark.parametrize("command", ["pick", "compare", "path"])
def test_commands_have_help(command):
    result = CliRunner().invoke(main, [command, "--help"])
    assert result.exit_code == 0 and "Usage:" in result.output


# -- picks on the edge of their grid -------------------------------------------------------
def _cells(name, values, **fixed):
    return [{name: v, **fixed} for v in values]


FRACTIONS = [  # (n_features, max_features tried, picked, expected edges); scikit-learn draws
    # max(1, int(max_features * n_features)) columns per split (its documented rule)
    (5, [0.1, 0.5], 0.1, []),  # one column: nothing lower draws fewer
    (20, [0.1, 0.5], 0.1, [("max_features", "low", 0.1)]),  # two columns
    (None, [0.1, 0.5], 0.1, [("max_features", "low", 0.1)]),  # count unknown: as before
    (1, [0.5, 0.99], 0.99, []),  # the one column there is: all of them
    (100, [0.5, 0.99], 0.99, [("max_features", "high", 0.99)]),  # 99 of 100
]


@pytest.mark.parametrize("n_features,tried,picked,expected", FRACTIONS)
def test_grid_edges_of_a_fraction_count_the_columns_it_draws(n_features, tried, picked,
                                                             expected):
    from runner.read.picks import grid_edges

    cells = _cells("max_features", tried)
    assert grid_edges("forest", cells, {"max_features": picked},
                      n_features=n_features) == expected


EDGES = [  # (family, cells, picked, mean leaves, expected edges)
    ("linear", _cells("alpha", [0.001, 0.01, 3.0], penalty="l1"),
     {"alpha": 0.001, "penalty": "l1"}, None, [("alpha", "low", 0.001)]),
    ("linear", _cells("alpha", [0.01, 1.0, 1000.0], penalty="l2"),
     {"alpha": 1000.0, "penalty": "l2"}, None, [("alpha", "high", 1000.0)]),
    ("linear", _cells("alpha", [0.01, 1.0, 1000.0], penalty="l2"),
     {"alpha": 1.0, "penalty": "l2"}, None, []),
    # min_samples_leaf 1 and a fraction of 1.0 are bounds: nothing lies beyond them
    ("forest", [{"min_samples_leaf": m, "max_features": f} for m in (1, 5) for f in (0.33, 1.0)],
     {"min_samples_leaf": 1, "max_features": 1.0}, None, []),
    ("forest", [{"min_samples_leaf": m, "max_features": f} for m in (1, 5) for f in (0.33, 1.0)],
     {"min_samples_leaf": 5, "max_features": 0.33}, None,
     [("max_features", "low", 0.33), ("min_samples_leaf", "high", 5)]),
    # ccp_alpha 0 is a bound; the largest alpha of a one-leaf tree cannot get simpler
    ("pruned_tree", _cells("ccp_alpha", [0.0, 10.0, 400.0]), {"ccp_alpha": 0.0}, 40.0, []),
    ("pruned_tree", _cells("ccp_alpha", [0.0, 10.0, 400.0]), {"ccp_alpha": 400.0}, 1.0, []),
    ("pruned_tree", _cells("ccp_alpha", [0.0, 10.0, 400.0]), {"ccp_alpha": 400.0}, 3.0,
     [("ccp_alpha", "high", 400.0)]),
    # null max_depth is unlimited, so 5 is not the deepest value tried
    ("pruned_tree", _cells("max_depth", [3, 5, None]), {"max_depth": 5}, 9.0, []),
    ("pruned_tree", _cells("max_depth", [3, 5, None]), {"max_depth": 3}, 6.0,
     [("max_depth", "low", 3)]),
    ("pruned_tree", _cells("min_samples_leaf", [5]), {"min_samples_leaf": 5}, 6.0, []),
]


@pytest.mark.parametrize("family,cells,picked,leaves,expected", EDGES)
def test_grid_edges(family, cells, picked, leaves, expected):
    from runner.read.picks import grid_edges

    assert grid_edges(family, cells, picked, leaves) == expected


def test_edge_picks_are_said_in_run_pick_and_the_report(tmp_path, diabetes_csv):
    # Ridge alphas of 1000 and more all shrink too much on this data: the smallest scores
    # best and is also the simplest within one SE, so both picks sit on the low edge.
    import html

    from click.testing import CliRunner

    from runner.cli import main
    from runner.read.report import render_report
    from runner.store import Store

    from .helpers import write_spec

    spec = write_spec(tmp_path, "ridge: {family: linear, grid: {penalty: l2, alpha: "
                                "[1000.0, 3000.0, 10000.0]}}")
    run = CliRunner().invoke(main, ["run", str(spec), "--jobs", "1"])
    assert run.exit_code == 0, run.output
    best = ("note: ridge's best cell sits on the edge of its grid: alpha = 1000 is the "
            "smallest value tried, so the best alpha may lie below it; extend the grid of "
            "alpha below 1000.")
    one_se = ("note: ridge's one-SE cell sits on the edge of its grid: alpha = 1000 is the "
              "smallest value tried, so the best cell, and the one-SE cell with it, may lie "
              "beyond it; extend the grid of alpha below 1000.")
    assert best in run.stderr and one_se in run.stderr
    store = tmp_path / "store.duckdb"
    out = CliRunner().invoke(main, ["pick", "--store", str(store)])
    assert best in out.stderr and one_se in out.stderr
    page = html.unescape(render_report(Store(store)))
    assert best.removeprefix("note: ") in page and "Picks on the edge of their grid" in page


def _forest_sweep(folder, fractions):
    """A finished sweep of a forest over `fractions` of max_features, on a generated frame of
    four numeric columns and one text column (60 rows); returns the store file."""
    rng = np.random.default_rng(5)
    df = pd.DataFrame(rng.normal(size=(60, 4)), columns=["a", "b", "c", "d"])
    df["site"] = rng.choice(["north", "south", "west"], size=60)
    df["y"] = 2 * df["a"] - df["b"] + (df["site"] == "west") + rng.normal(scale=0.3, size=60)
    df.to_csv(folder / "d.csv", index=False)
    (folder / "spec.yaml").write_text(
        "name: fractions\ndata: {path: d.csv, target: y, categorical: [site]}\n"
        "test: {fraction: 0.25, seed: 1}\nfolds: {k: 3, repeats: 1, seed: 2}\n"
        "store: s.duckdb\nexplain: {cells: none}\nmodels:\n"
        f"  forest: {{family: forest, grid: {{n_estimators: [5], max_features: {fractions}}}}}\n")
    out = CliRunner().invoke(main, ["run", str(folder / "spec.yaml"), "--jobs", "1", "-q"])
    assert out.exit_code == 0, out.output
    return folder / "s.duckdb"


def _max_features_edges(store):
    from runner.store import Store

    edges = read_picks(Store(store)).edges
    return edges[edges["param"] == "max_features"][["rule", "side", "value"]].values.tolist()


def test_a_fraction_of_max_features_that_draws_one_column_is_not_said_to_be_on_an_edge(
        tmp_path):
    from runner.families.forest import make_estimator
    from runner.read.picks import columns_drawn
    from runner.store import Store
    from runner.write.data import load_frame
    from runner.write.spec import parse_spec

    # 0.1 and 0.15 of 5 columns both draw max(1, int(0.5)) = max(1, int(0.75)) = 1 column
    # (scikit-learn's rule for a fractional max_features), so the two forests are the same,
    # the tie goes to the simpler 0.1, and nothing lower could draw fewer columns.
    one = _forest_sweep(tmp_path, [0.1, 0.15])
    assert _max_features_edges(one) == []
    # 0.4 and 0.45 both draw int(2.0) = int(2.25) = 2 columns: going lower would draw 1.
    (tmp_path / "two").mkdir()
    two = _forest_sweep(tmp_path / "two", [0.4, 0.45])
    assert _max_features_edges(two) == [["best", "low", 0.4], ["one_se", "low", 0.4]]
    out = CliRunner().invoke(main, ["pick", "--store", str(two)])
    assert "extend the grid of max_features below 0.4" in out.stderr
    assert "max_features" not in CliRunner().invoke(main, ["pick", "--store", str(one)]).stderr

    # The stored count is the forest's own n_features_in_: the text column is one ordinal
    # column (one-hot it would be three), checked against scikit-learn's fitted forest.
    spec = parse_spec((tmp_path / "spec.yaml").read_text(), source=tmp_path / "spec.yaml")
    frame = load_frame(spec)
    forest = make_estimator({"n_estimators": 5, "max_features": 0.1}, seed=0,
                            numeric=frame.numeric, categorical=frame.categorical)
    forest.fit(frame.X, frame.y)
    facts = read_picks(Store(one)).facts
    assert facts.n_features == forest.steps[-1][1].n_features_in_ == 5
    assert forest.steps[-1][1].estimators_[0].max_features_ == columns_drawn(0.1, 5) == 1

    # A store of schema 4 records no count: read, it gains the column empty, and the note is
    # given as before.
    with duckdb.connect(str(one)) as con:
        con.execute("alter table sweeps drop column n_features")
        con.execute("update foldwise_meta set value = '4' where key = 'schema_version'")
    assert _max_features_edges(one) == [["best", "low", 0.1], ["one_se", "low", 0.1]]

"""Stability numbers on hand-made inputs (each expected value worked by hand beside it), the
Spearman correlation against scipy.stats.spearmanr (source: scipy), and the per-cell summary
over a store built row by row."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy.stats import spearmanr

from runner.read.explained import stability_table
from runner.read.stability import (NO_SPLIT, jaccard, leaves_spread, mean_pairwise_jaccard,
                              mean_pairwise_spearman, root_agreement, spearman,
)

from .store_builder import write_sweep


@pytest.mark.parametrize("roots, expected", [
    (["a", "a", "b", "a"], ("a", 0.75)),          # 3 of 4 folds
    (["b", "a", "b", "a"], ("a", 0.5)),           # tie: alphabetical first
    ([None, None, "x"], (NO_SPLIT, 2 / 3)),       # single-leaf trees count as one root
    (["x"], ("x", 1.0)),
])
def test_root_agreement(roots, expected):
    feature, share = root_agreement(roots)
    assert (feature, share) == (expected[0], pytest.approx(expected[1]))


def test_root_agreement_of_nothing():
    feature, share = root_agreement([])
    assert feature is None and math.isnan(share)


@pytest.mark.parametrize("a, b, expected", [
    ({"x", "y"}, {"y", "z"}, 1 / 3),   # {y} / {x, y, z}
    ({"x"}, {"x"}, 1.0),
    ({"x"}, {"y"}, 0.0),
    (set(), set(), 1.0),               # two single-leaf trees use the same (no) columns
])
def test_jaccard(a, b, expected):
    assert jaccard(a, b) == pytest.approx(expected)


def test_mean_pairwise_jaccard():
    # pairs: (ab, ab) = 1, (ab, a) = 1/2, (ab, a) = 1/2 -> mean 2/3
    assert mean_pairwise_jaccard([{"a", "b"}, {"a", "b"}, {"a"}]) == pytest.approx(2 / 3)
    assert math.isnan(mean_pairwise_jaccard([{"a"}]))


@pytest.mark.parametrize("a, b, expected", [
    ([1, 2, 3], [10, 20, 30], 1.0),
    ([1, 2, 3], [3, 2, 1], -1.0),
    ([1, 2, 3, 4], [1, 3, 2, 4], 0.8),   # d = (0, 1, 1, 0): 1 - 6·2 / (4·15) = 0.8
])
def test_spearman_by_hand(a, b, expected):
    assert spearman(a, b) == pytest.approx(expected)


def test_spearman_with_ties_equals_scipy():
    rng = np.random.default_rng(4)
    for _ in range(20):
        a, b = rng.integers(0, 4, 9).astype(float), rng.integers(0, 4, 9).astype(float)
        if np.ptp(a) == 0 or np.ptp(b) == 0:
            continue
        assert spearman(a, b) == pytest.approx(spearmanr(a, b).statistic, abs=1e-12)


def test_spearman_of_a_constant_is_undefined():
    assert math.isnan(spearman([0, 0, 0], [1, 2, 3]))


def test_mean_pairwise_spearman():
    # pairs: (v1, v2) = 1, (v1, v3) = -1, (v2, v3) = -1 -> mean -1/3 over 3 pairs
    value, pairs = mean_pairwise_spearman([[1, 2, 3], [1, 2, 3], [3, 2, 1]])
    assert (value, pairs) == (pytest.approx(-1 / 3), 3)
    value, pairs = mean_pairwise_spearman([[1, 2, 3], [0, 0, 0], [1, 2, 3]])
    assert (value, pairs) == (pytest.approx(1.0), 1)   # pairs with the constant are left out


def test_leaves_spread():
    assert leaves_spread([3, 5, 7]) == {"mean": 5.0, "sd": 2.0, "min": 3.0, "max": 7.0}


def test_stability_summary_on_a_built_store(tmp_path):
    store = write_sweep(tmp_path / "s.duckdb", {"tree": [[1.0, 2.0, 3.0, 4.0]],
                                                "forest": [[1.0, 1.5, 2.0, 2.5]]},
                        k=2, repeats=2, family="pruned_tree")
    sid = "20260101-000000-aaaa"
    folds = [(0, 0), (0, 1), (1, 0), (1, 1)]
    roots = ["x1", "x1", "x2", "x1"]
    used = [["x1", "x2"], ["x1"], ["x1", "x2"], ["x1", "x3"]]
    leaves = [4, 6, 5, 9]
    trees = pd.DataFrame([{"sweep_id": sid, "cell_id": "tree-0", "repeat": r, "fold": f,
                           "n_leaves": n, "depth": 3, "root_feature": root,
                           "root_threshold": 0.5, "root_rule": f"{root} ≤ 0.5",
                           "features_used": u}
                          for (r, f), root, u, n in zip(folds, roots, used, leaves)])
    imp = [{"sweep_id": sid, "cell_id": cid, "repeat": r, "fold": f, "feature": feat,
            "method": "impurity", "value": v}
           for cid, per_fold in (("tree-0", [[3, 2, 1], [3, 2, 1], [1, 2, 3], [3, 2, 1]]),
                                 ("forest-0", [[3, 2, 1], [3, 1, 2], [3, 2, 1], [3, 2, 1]]))
           for (r, f), values in zip(folds, per_fold)
           for feat, v in zip(("x1", "x2", "x3"), values)]
    store.write_batch({"tree_folds": trees, "fold_importances": pd.DataFrame(imp)})
    out = stability_table(store, sid).table.set_index("cell_id")
    tree = out.loc["tree-0"]
    assert tree["root_feature"] == "x1" and tree["root_share"] == pytest.approx(0.75)
    # Jaccard pairs: 12-1 1/2, 12-12 1, 12-13 1/3, 1-12 1/2, 1-13 1/2, 12-13 1/3 -> 19/6 / 6
    assert tree["jaccard"] == pytest.approx(19 / 36)
    assert (tree["leaves_mean"], tree["leaves_min"], tree["leaves_max"]) == (6.0, 4.0, 9.0)
    assert tree["leaves_sd"] == pytest.approx(np.std(leaves, ddof=1))
    # ranks: three folds (3,2,1) and one (1,2,3): 3 pairs at +1, 3 pairs at -1 -> 0
    assert tree["rank_agreement"] == pytest.approx(0.0) and tree["rank_pairs"] == 6
    # forest: (3,1,2) against (3,2,1) has rho = 0.5 (d = 0, 1, 1); 3 such pairs, 3 at 1
    forest = out.loc["forest-0"]
    assert forest["rank_agreement"] == pytest.approx(0.75)
    assert pd.isna(forest["root_feature"]) and forest["folds"] == 4

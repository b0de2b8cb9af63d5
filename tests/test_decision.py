"""The report's decision: models ranked by their picked cells, and which pick a person could
read whole, judged by its size (a tree's leaves, a linear model's non-zero coefficients)
against the family's limit, with the reason said."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from runner.families import READABLE_COEFFICIENTS, READABLE_LEAVES, get_family
from runner.read.results import Comparison, Coverage, Picks, SweepFacts
from runner.read.verdict import decision

FACTS = SweepFacts(sweep_id="s", name="n", target="y", metrics=("rmse",),
                   better={"rmse": "lower"}, k=5, repeats=2, rule="one_se")
COVERAGE = Coverage("finished", pd.DataFrame(columns=["model", "cells", "complete", "failed",
                                                      "unfinished", "non_finite"]))


def _picks(rows) -> Picks:
    """rows: (model, family, mean, n_terms, mean_leaves, params)."""
    table = pd.DataFrame([{"model": m, "family": f, "rule": "one_se", "cell_id": f"{m}-c",
                           "params": json.dumps(params), "complexity_rank": 0, "mean": mean,
                           "se": 0.05, "test": mean, "n_terms": terms, "mean_leaves": leaves}
                          for m, f, mean, terms, leaves, params in rows])
    return Picks(FACTS, ("one_se",), "plain", table, COVERAGE, {})


def _pairs(first: str, others: list[str], gap: float = 1.0) -> Comparison:
    table = pd.DataFrame([{"model_a": first, "model_b": o, "mean_diff": -gap, "se": 0.1,
                           "p_value": 0.001, "p_holm": 0.002, "wins_a": 10, "wins_b": 0,
                           "folds": 10} for o in others])
    return Comparison(FACTS, "one_se", "plain", "rmse", table, COVERAGE)


def _readable(d) -> str:
    (sentence,) = [s for s in d.sentences if "read" in s and "whole" in s]
    return sentence


def test_a_large_tree_is_not_called_readable_and_the_linear_model_is():
    # The case that misled: a forest first, an 83-leaf tree second, least squares third.
    chosen = _picks([("forest", "forest", 3.7, None, None, {"n_estimators": 100}),
                     ("tree", "pruned_tree", 4.76, 83, 82.6, {}),
                     ("ols", "linear", 5.21, 22, None, {})])
    d = decision(chosen, _pairs("forest", ["tree", "ols"]))
    said = _readable(d)
    assert said.startswith("If a person must be able to read the model, the best pick small "
                           "enough to read whole is ols: 22 non-zero coefficients (up to 30 "
                           "count as readable in linear models), at a cost of 1.00 ± 0.10 in "
                           "CV RMSE.")
    assert ("forest is a forest of 100 trees, never read whole; tree has 83 leaves, more than "
            "the 16 that count as readable in trees") in said
    assert [r["size"] for r in d.rows] == ["100 trees", "83 leaves", "22 non-zero coefficients"]


def test_the_first_pick_is_said_readable_when_it_is_small():
    chosen = _picks([("lasso", "linear", 5.0, 7, None, {}),
                     ("tree", "pruned_tree", 5.5, None, 12.4, {})])
    said = _readable(decision(chosen, _pairs("lasso", ["tree"])))
    assert said == ("lasso is also small enough for a person to read whole: 7 non-zero "
                    "coefficients (up to 30 count as readable in linear models).")


def test_a_tree_size_comes_from_its_refit_else_from_its_folds():
    # No explain rows: the tree's mean leaves over folds decide (12.4 -> 12 leaves).
    chosen = _picks([("forest", "forest", 3.0, None, None, {"n_estimators": 50}),
                     ("tree", "pruned_tree", 3.4, None, 12.4, {}),
                     ("ridge", "linear", 3.9, None, None, {})])
    d = decision(chosen, _pairs("forest", ["tree", "ridge"]))
    assert "the best pick small enough to read whole is tree: 12 leaves" in _readable(d)
    assert [r["size"] for r in d.rows] == ["50 trees", "12 leaves", "not stored"]


def test_no_pick_readable_says_why_and_what_to_do():
    chosen = _picks([("forest", "forest", 3.0, None, None, {"n_estimators": 50}),
                     ("tree", "pruned_tree", 3.4, 40, 41.0, {}),
                     ("ridge", "linear", 3.9, None, None, {})])
    said = _readable(decision(chosen, _pairs("forest", ["tree", "ridge"])))
    assert said == ("No pick is small enough for a person to read whole: forest is a forest "
                    "of 50 trees, never read whole; tree has 40 leaves, more than the 16 that "
                    "count as readable in trees; the size of ridge is not stored (not "
                    "explained). If one must be read, choose a simpler cell from `foldwise "
                    "path`.")


@pytest.mark.parametrize("family,limit", [("pruned_tree", READABLE_LEAVES),
                                          ("linear", READABLE_COEFFICIENTS)])
def test_readable_limits(family, limit):
    fam = get_family(family)
    assert (fam.readable(limit), fam.readable(limit + 1), fam.readable(None)) == (True, False,
                                                                                  None)
    assert get_family("forest").readable(3) is False


def test_the_words_of_the_table_are_our_own():
    d = decision(_picks([("a", "linear", 1.0, 3, None, {}), ("b", "linear", 2.0, 4, None, {})]),
                 _pairs("a", ["b"]))
    assert d.first == "a" and [r["place"] for r in d.rows] == [1, 2]
    assert d.heads == {"gap": "CV RMSE above first (mean ± SE)",
                       "wins": "folds where first does better", "p": "paired test (p)"}
    text = " ".join(d.sentences + list(d.heads.values()))
    assert "leader" not in text and " lead " not in text and "runner-up" not in text


def test_explain_stores_the_refit_size(explained):
    # The refit's size as scikit-learn reports it: a tree's leaves (counted from the stored
    # nodes), a linear model's non-zero coefficients (the same pipeline refit here).
    from sklearn.pipeline import Pipeline

    from runner.families import load_family
    from runner.write.prepare import prepare
    from runner.write.resampling import refit_seed

    spec, store, sid = explained
    sizes = store.query("""select c.model, c.family, c.params, x.n_terms from explained x
                           join cells c using (sweep_id, cell_id) where x.sweep_id = ?""", [sid])
    prep = prepare(spec)
    split = prep.split
    for r in sizes.itertuples(index=False):
        if r.family == "forest":
            assert pd.isna(r.n_terms)
            continue
        est = load_family(r.family).make_estimator(
            json.loads(r.params), seed=refit_seed(prep.plan.seed), y_fit=split["y_train"],
            numeric=prep.frame.numeric, categorical=prep.frame.categorical)
        assert isinstance(est, Pipeline)
        est.fit(split["X_train"], split["y_train"])
        model = est.named_steps["model"]
        expected = (model.get_n_leaves() if r.family == "pruned_tree"
                    else np.count_nonzero(model.coef_))
        assert int(r.n_terms) == int(expected), r.model


def test_a_second_place_with_the_same_score_on_every_fold_is_said_so(tmp_path):
    from runner.read.queries import compare, picks

    from .store_builder import write_sweep

    a = [5.0, 5.1, 4.9, 5.0, 5.2, 4.8]
    store = write_sweep(tmp_path / "s.duckdb", {"a": [a], "b": [list(a)],
                                                "c": [[x + 1 for x in a]]}, k=3, repeats=2)
    said = " ".join(decision(picks(store, rule="one_se"), compare(store)).sentences)
    assert "(the same score on every fold, nothing to test)" in said, said
    assert "not clearly separated" in said and "()" not in said and "( ," not in said


def test_the_ranking_gaps_and_paired_tests_for_a_score_where_higher_is_better(tmp_path):
    # R² (higher is better), three models in spec order c, b, a: the ranking is by CV mean,
    # highest first; each gap is first − other (how much lower), with the corrected SE of
    # the paired differences (Nadeau & Bengio 2003: (1/(k·r) + n_valid/n_train)·var(d,
    # ddof 1)), the folds where the first scores higher, and the two-sided p (scipy.stats.t,
    # k·r − 1 df) adjusted by Holm (1979) over the three pairs, worked by hand below.
    # Numbers are worded by views.py's rules (mean_se, p_text).
    from scipy import stats

    from runner.read.queries import compare, picks
    from runner.read.views import mean_se, p_text

    from .store_builder import write_sweep

    scores = {"c": [0.56, 0.58, 0.56, 0.59, 0.55, 0.59],
              "b": [0.55, 0.60, 0.57, 0.58, 0.56, 0.60],
              "a": [0.60, 0.62, 0.58, 0.61, 0.63, 0.59]}
    store = write_sweep(tmp_path / "s.duckdb", {m: [s] for m, s in scores.items()}, k=3,
                        repeats=2, metric="r2", better="higher", pick_rule="best",
                        n_train=80, n_valid=20)
    tests = {}
    for x, y in (("c", "b"), ("c", "a"), ("b", "a")):
        d = np.subtract(scores[x], scores[y])
        se = np.sqrt((1 / 6 + 20 / 80) * np.var(d, ddof=1))
        tests[frozenset((x, y))] = (d.mean(), se, 2 * stats.t.sf(abs(d.mean() / se), 5))
    raw = sorted((p, pair) for pair, (_, _, p) in tests.items())
    holm, running = {}, 0.0
    for i, (p, pair) in enumerate(raw):
        running = max(running, min(1.0, (3 - i) * p))
        holm[pair] = running
    got = decision(picks(store, rule="best"), compare(store))
    assert [r["model"] for r in got.rows] == ["a", "b", "c"] and got.first == "a"
    for r in got.rows[1:]:
        pair = frozenset(("a", r["model"]))
        mean_diff, se, _ = tests[pair]
        gap = np.mean(np.subtract(scores["a"], scores[r["model"]]))
        assert gap > 0 and abs(mean_diff) == pytest.approx(gap, rel=1e-12)
        wins = int(np.sum(np.array(scores["a"]) > np.array(scores[r["model"]])))
        assert (r["gap"], r["wins"], r["p"]) == (mean_se(gap, se), f"{wins} of 6",
                                                 p_text(holm[pair]))
    assert got.rows[1]["wins"] == "5 of 6" and holm[frozenset("ab")] > 0.05
    assert p_text(holm[frozenset("ab")]) != p_text(tests[frozenset("ab")][2])  # Holm shows
    assert "The margin is within the noise" in " ".join(got.sentences)

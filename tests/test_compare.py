"""Paired comparison: the corrected resampled t-test against a scipy reference, the pairing
of stored fold scores, the plain-words line, and the `compare` command."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import example, given, settings
from hypothesis import strategies as st
from scipy import stats

from runner.cli import main
from runner.read.compare import APPROXIMATE_NOTE, corrected_t_test, holm, t_from_moments
from runner.errors import QueryError
from runner.read.queries import compare as read_compare
from runner.read.views import compare_view, pair_sentence as in_words, pair_sentences

from .store_builder import write_sweep

D = [0.8, 1.1, -0.2, 0.5, 0.9, 1.3, 0.1, 0.7, -0.4, 0.6]


def test_corrected_t_test_reference():
    # Nadeau & Bengio (2003), Machine Learning 52:239–281 (citation from memory);
    # Bouckaert & Frank (2004): variance (1/(k·r) + n_valid/n_train)·var(d, ddof=1), t on
    # k·r − 1 df. k=5, r=2, n_train=80, n_valid=20: t = 0.54 / sqrt(0.35 · 0.304888…) = 81/49.
    test = corrected_t_test(D, n_train=80, n_valid=20)
    assert test.mean == pytest.approx(0.54, rel=1e-12)
    assert test.t == pytest.approx(81 / 49, rel=1e-12)
    assert test.t == pytest.approx(1.6530612245, abs=1e-10)
    assert test.df == 9
    assert test.se == pytest.approx(math.sqrt((1 / 10 + 20 / 80) * np.var(D, ddof=1)), rel=1e-12)
    # p from scipy.stats.t, two-sided.
    assert test.p == pytest.approx(2 * stats.t.sf(81 / 49, 9), rel=1e-12)
    assert test.p == pytest.approx(0.1327086019, abs=1e-10)


def test_correction_widens_the_naive_paired_t_test():
    # Without the n_valid/n_train term the test is the ordinary paired t-test (scipy).
    naive = stats.ttest_1samp(D, 0.0)
    uncorrected = t_from_moments(float(np.mean(D)), float(np.var(D, ddof=1)), 10, 0.0)
    assert uncorrected.t == pytest.approx(naive.statistic, rel=1e-12)
    assert uncorrected.p == pytest.approx(naive.pvalue, rel=1e-10)
    assert corrected_t_test(D, n_train=80, n_valid=20).p > naive.pvalue


def test_per_fold_sizes_are_averaged_as_a_ratio():
    n_train = [80, 81, 80, 81, 80, 80, 81, 80, 81, 80]
    n_valid = [21, 20, 21, 20, 21, 21, 20, 21, 20, 21]
    ratio = float(np.mean(np.array(n_valid) / np.array(n_train)))
    test = corrected_t_test(D, n_train=n_train, n_valid=n_valid)
    assert test.t == pytest.approx(np.mean(D) / math.sqrt((0.1 + ratio) * np.var(D, ddof=1)))


@pytest.mark.parametrize("diffs, t, p", [
    ([0.0, 0.0, 0.0], 0.0, 1.0),            # identical scores: no difference at all
    ([0.5, 0.5, 0.5], math.inf, 0.0),       # a constant gap: certain
    ([-0.5, -0.5], -math.inf, 0.0),
])
def test_zero_variance(diffs, t, p):
    test = corrected_t_test(diffs, n_train=8, n_valid=2)
    assert (test.t, test.p) == (t, p)


def test_holm_worked_example():
    # Holm's step-down rule worked by hand: sorted p 0.005, 0.01, 0.03, 0.04 times 4, 3, 2, 1
    # = 0.02, 0.03, 0.06, 0.04, made non-decreasing: 0.02, 0.03, 0.06, 0.06.
    assert holm([0.01, 0.04, 0.03, 0.005]) == pytest.approx([0.03, 0.06, 0.06, 0.02])
    assert holm([0.5, 0.9]) == [1.0, 1.0]
    got = holm([0.2, float("nan")])
    assert got[0] == 0.2 and math.isnan(got[1])


def _holm_rejects(p_values, alpha):
    """Holm's (1979) sequentially rejective procedure as he states it: order the p-values,
    reject while p_(j) <= alpha / (m - j + 1) (j from 1), and stop at the first that is not."""
    m, rejected = len(p_values), set()
    for j, (p, i) in enumerate(sorted((p, i) for i, p in enumerate(p_values))):
        if (m - j) * p > alpha:  # p_(j) > alpha / (m - j + 1), j counted from 1
            break
        rejected.add(i)
    return rejected


@settings(max_examples=300, deadline=None)
@given(st.lists(st.one_of(st.floats(1e-6, 0.12), st.floats(0.12, 1.0)), min_size=1,
                max_size=6), st.sampled_from([0.01, 0.05, 0.1]))
@example([0.04, 0.045], 0.05)  # 2 × 0.04 > 0.05: the procedure stops, rejecting neither
def test_holm_adjusted_p_rejects_what_the_step_down_procedure_rejects(p_values, alpha):
    # Holm (1979), Scand. J. Statist. 6:65-70 (from memory): an adjusted p at most alpha
    # rejects exactly the hypotheses the step-down procedure rejects at level alpha.
    adjusted = holm(p_values)
    assert {i for i, q in enumerate(adjusted) if q <= alpha} == _holm_rejects(p_values, alpha)
    assert all(p <= q <= 1.0 for p, q in zip(p_values, adjusted))


def test_needs_two_folds():
    with pytest.raises(ValueError, match="at least 2 paired folds, got 1"):
        corrected_t_test([1.0], n_train=8, n_valid=2)


def test_in_words():
    assert in_words("linear", "forest", metric="rmse", better="lower", mean_diff=1.8, se=0.6,
                    p=0.0123, wins_a=3, wins_b=27, n=30) == (
        "forest beats linear on 27 of 30 folds; mean RMSE difference −1.80 ± 0.60 (p ≈ 0.012)")
    assert in_words("a", "b", metric="r2", better="higher", mean_diff=0.031, se=0.0042,
                    p=0.0002, wins_a=10, wins_b=0, n=10) == (
        "a beats b on 10 of 10 folds; mean R² difference 0.0310 ± 0.0042 (p < 0.001)")
    assert in_words("ols", "ridge", metric="rmse", better="lower", mean_diff=-0.012, se=0.020,
                    p=0.58, wins_a=6, wins_b=4, n=10) == (
        "no clear difference between ols and ridge: ols is better on 6 of 10 folds, mean RMSE "
        "difference −0.012 ± 0.020 (p ≈ 0.58)")
    assert in_words("a", "b", metric="rmse", better="lower", mean_diff=-1.0, se=0.2, p=0.01,
                    wins_a=9, wins_b=1, n=10, p_holm=0.06).startswith("no clear difference")
    assert in_words("a", "b", metric="rmse", better="lower", mean_diff=0.0, se=0.0, p=1.0,
                    wins_a=0, wins_b=0, n=4) == "a and b score the same on every one of 4 folds: nothing to test"
    assert in_words("a", "b", metric="rmse", better="lower", mean_diff=0.0, se=0.1, p=1.0,
                    wins_a=2, wins_b=2, n=4) == "a and b tie on average; a wins 2 and b wins 2 of 4 folds"


# -- pairing stored fold scores -------------------------------------------------------------

A = [5.0, 5.4, 4.8, 5.1, 5.3, 4.9]
B = [4.6, 5.0, 4.9, 4.7, 4.8, 4.5]
C = [6.0, 6.2, 5.8, 6.1, 6.3, 5.9]


@pytest.fixture
def three_models(tmp_path):
    return write_sweep(tmp_path / "s.duckdb", {"a": [A], "b": [B], "c": [C]}, k=3, repeats=2,
                       n_train=[8, 8, 9, 8, 8, 9], n_valid=[4, 4, 3, 4, 4, 3],
                       tests={"a": [5.2], "b": [4.4], "c": [6.5]}, pick_rule="best")


def compare(store, **kw):
    """The comparison's table."""
    return read_compare(store, **kw).table


def test_compare_pairs_identical_folds(three_models):
    result = read_compare(three_models)
    df = result.table
    assert list(zip(df["model_a"], df["model_b"])) == [("a", "b"), ("a", "c"), ("b", "c")]
    ratio = float(np.mean([4 / 8, 4 / 8, 3 / 9, 4 / 8, 4 / 8, 3 / 9]))
    for row, (x, y) in zip(df.itertuples(), [(A, B), (A, C), (B, C)]):
        d = np.subtract(x, y)
        # Nadeau & Bengio (2003): SE = sqrt((1/(k·r) + n_valid/n_train)·var(d, ddof=1)),
        # written out here rather than taken from foldwise's own t_from_moments
        se = math.sqrt((1 / 6 + ratio) * d.var(ddof=1))
        assert row.folds == 6 and row.df == 5
        assert row.mean_diff == pytest.approx(d.mean(), rel=1e-12)
        assert row.se == pytest.approx(se, rel=1e-12)
        assert row.t == pytest.approx(d.mean() / se, rel=1e-12)
        # p: two-sided, Student's t on k·r − 1 = 5 df (scipy.stats.t)
        assert row.p_value == pytest.approx(2 * stats.t.sf(abs(d.mean() / se), 5), rel=1e-9)
        assert (row.wins_a, row.wins_b, row.ties) == (int((d < 0).sum()), int((d > 0).sum()),
                                                      int((d == 0).sum()))
    first = df.iloc[0]
    assert first["test_diff"] == pytest.approx(5.2 - 4.4)
    # p ≈ 0.11 on 6 folds: worded as no clear difference, not as a win
    assert pair_sentences(result)[0].startswith(
        "no clear difference between b and a: b is better on 5 of 6 folds, mean RMSE "
        "difference −")
    # Holm (1979) over the three pairs, recomputed here by hand from the raw p-values
    raw = df["p_value"].tolist()
    order = np.argsort(raw)
    expected = np.empty(3)
    running = 0.0
    for rank, i in enumerate(order):
        running = max(running, min(1.0, (3 - rank) * raw[i]))
        expected[i] = running
    assert df["p_holm"].tolist() == pytest.approx(expected.tolist(), rel=1e-12)
    assert compare_view(result).caveats[0] == f"note: {APPROXIMATE_NOTE}" and result.rule == "best"


def test_compare_uses_the_picked_cells(tmp_path):
    # model m: the one-SE cell (rank 0) differs from the best (rank 1).
    m = [[5.0, 5.1, 4.9, 5.0], [4.9, 5.2, 4.7, 4.9]]
    n = [[6.0, 6.0, 6.1, 5.9]]
    store = write_sweep(tmp_path / "s.duckdb", {"m": m, "n": n}, k=2, repeats=2)
    one_se = compare(store)  # the sweep's rule: one_se
    best = compare(store, rule="best")
    assert (one_se["cell_a"].iloc[0], best["cell_a"].iloc[0]) == ("m-0", "m-1")
    assert one_se["mean_diff"].iloc[0] == pytest.approx(np.mean(np.subtract(m[0], n[0])))
    assert best["mean_diff"].iloc[0] == pytest.approx(np.mean(np.subtract(m[1], n[0])))


def test_compare_higher_is_better(tmp_path):
    store = write_sweep(tmp_path / "s.duckdb", {"x": [[0.6, 0.62, 0.58, 0.61]],
                                                "y": [[0.5, 0.63, 0.52, 0.55]]},
                        k=2, repeats=2, metric="r2", better="higher")
    result = read_compare(store)
    row = result.table.iloc[0]
    assert (row.wins_a, row.wins_b) == (3, 1)
    assert pair_sentences(result)[0].startswith(
        "no clear difference between x and y: x is better on 3 of 4 folds, mean R² difference 0.")


def test_compare_errors_and_single_model(tmp_path):
    store = write_sweep(tmp_path / "s.duckdb", {"only": [[1.0, 1.1, 0.9, 1.0]]}, k=2, repeats=2)
    assert compare(store).empty
    with pytest.raises(QueryError, match=r"--metric 'mae' is no metric of sweep .*; its metrics: rmse\."):
        compare(store, metric="mae")
    with pytest.raises(QueryError, match="rule must be one of best, one_se"):
        compare(store, rule="median")


def test_compare_command(three_models):
    runner = CliRunner()
    path = str(three_models.path)
    got = runner.invoke(main, ["compare", "--store", path, "--format", "json"])
    assert got.exit_code == 0, got.output
    result = read_compare(three_models)
    api = result.table
    rows = json.loads(got.stdout)
    assert [(r["model_a"], r["model_b"]) for r in rows] == list(zip(api["model_a"], api["model_b"]))
    assert [r["p_value"] for r in rows] == pytest.approx(api["p_value"].tolist(), rel=1e-12)
    assert "approximate" in got.stderr
    table = runner.invoke(main, ["compare", "--store", path])
    assert table.exit_code == 0, table.output
    for line in pair_sentences(result):
        assert line in table.stdout
    assert "note: p-values from resampled folds are approximate" in table.stdout
    bad = runner.invoke(main, ["compare", "--store", path, "--metric", "mae"])
    assert bad.exit_code == 2 and "--metric 'mae' is no metric of sweep" in bad.stderr


def test_holm_in_compare_counts_only_the_pairs_it_can_test(tmp_path):
    # a and b score the same on every fold (their differences are all zero: no t-test), so
    # Holm's m is the two pairs tested, a–c and b–c; Holm 1979 worked by hand for m = 2:
    # sorted p1 ≤ p2 become 2·p1 and max(2·p1, p2)
    a = [5.0, 5.1, 4.9, 5.0, 5.2, 4.8]
    c = [5.3, 5.2, 5.1, 5.4, 5.2, 5.1]
    store = write_sweep(tmp_path / "s.duckdb", {"a": [a], "b": [list(a)], "c": [c]},
                        k=3, repeats=2)
    df = read_compare(store).table.set_index(["model_a", "model_b"])
    assert math.isnan(df.loc[("a", "b"), "p_value"]) and math.isnan(df.loc[("a", "b"), "p_holm"])
    assert df.loc[("a", "b"), "ties"] == 6 and df.loc[("a", "b"), "mean_diff"] == 0.0
    p = corrected_t_test(np.subtract(a, c), n_train=80, n_valid=20).p
    assert df.loc[("a", "c"), "p_value"] == pytest.approx(p, rel=1e-12)
    assert df.loc[("a", "c"), "p_holm"] == pytest.approx(min(1.0, 2 * p), rel=1e-12)
    assert df.loc[("b", "c"), "p_holm"] == pytest.approx(min(1.0, 2 * p), rel=1e-12)
    out = CliRunner().invoke(main, ["compare", "--store", str(store.path)])
    assert out.exit_code == 0, out.output
    assert "a and b score the same on every one of 6 folds: nothing to test" in out.output
    assert "2 pairwise tests were made (1 pair with the same score on every fold had " \
        "nothing to test)" in " ".join(out.output.split())

"""Paired comparison of models: the picked cells of every pair of models, fold by fold on
identical folds, with the corrected resampled t-test, wins per side and the test-split
difference, plus one line in plain words per pair.

Fold scores from repeated k-fold share training rows, so they are not independent and the
naive paired t-test is far too confident. The corrected variance of the mean difference is
(1/(k·r) + n_valid/n_train)·var(d), with t = mean(d)/sqrt(that) on k·r − 1 degrees of
freedom (Nadeau & Bengio 2003; Bouckaert & Frank 2004)."""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass
from typing import Sequence

import pandas as pd

from .errors import QueryError
from .metrics import metric_label
from .picks import check_rule, check_se, corrected_variance, picks, sweep_facts
from .store import Store

__all__ = ["TTest", "corrected_t_test", "t_from_moments", "two_sided_p", "compare",
           "APPROXIMATE_NOTE", "in_words"]

APPROXIMATE_NOTE = ("p-values from resampled folds are approximate: the folds share training "
                    "rows, so their scores are not independent. The corrected t-test widens "
                    "the SE to allow for this, but only roughly; read p as a guide, not a proof.")


@dataclass(frozen=True)
class TTest:
    """The corrected resampled t-test of one set of paired differences."""

    mean: float
    se: float
    t: float
    df: int
    p: float


def two_sided_p(t: float, df: int) -> float:
    """Two-sided p-value of Student's t with `df` degrees of freedom."""
    from scipy.special import stdtr  # Student's t CDF; lighter to import than scipy.stats

    if math.isnan(t):
        return math.nan
    return float(2.0 * stdtr(df, -abs(t)))


def t_from_moments(mean: float, var: float, n: int, valid_ratio: float) -> TTest:
    """The test from the mean and sample variance (ddof=1) of n differences."""
    if n < 2:
        raise ValueError(f"a paired t-test needs at least 2 paired folds, got n={n}")
    se = math.sqrt(corrected_variance(var, n, valid_ratio))
    if se == 0.0:
        t = 0.0 if mean == 0.0 else math.copysign(math.inf, mean)
    else:
        t = mean / se
    p = 1.0 if t == 0.0 else (0.0 if math.isinf(t) else two_sided_p(t, n - 1))
    return TTest(mean=mean, se=se, t=t, df=n - 1, p=p)


def corrected_t_test(diffs: Sequence[float], *, n_train, n_valid) -> TTest:
    """The corrected resampled t-test of paired fold differences d = score_a − score_b.

    n_train and n_valid are the rows fitted and scored per fold (scalars, or one per fold:
    their ratio is averaged over folds)."""
    d = [float(x) for x in diffs]
    n = len(d)
    if n < 2:
        raise ValueError(f"a paired t-test needs at least 2 paired folds, got {n}")
    mean = sum(d) / n
    var = sum((x - mean) ** 2 for x in d) / (n - 1)
    if isinstance(n_train, numbers.Real) and isinstance(n_valid, numbers.Real):
        ratio = n_valid / n_train
    else:
        pairs = list(zip(_as_list(n_valid, n), _as_list(n_train, n)))
        ratio = sum(v / t for v, t in pairs) / len(pairs)
    return t_from_moments(mean, var, n, ratio)


def _as_list(x, n: int) -> list[float]:
    return [float(x)] * n if isinstance(x, numbers.Real) else [float(v) for v in x]


def _signed(x: float, decimals: int) -> str:
    text = f"{abs(x):.{decimals}f}"
    return ("−" if x < 0 and float(text) != 0 else "") + text


def _decimals(se: float) -> int:
    """Decimals that show the SE to two significant digits."""
    if not se or not math.isfinite(se):
        return 3
    return max(0, 1 - math.floor(math.log10(abs(se))))


def in_words(model_a: str, model_b: str, *, metric: str, better: str, mean_diff: float,
             se: float, p: float, wins_a: int, wins_b: int, n: int) -> str:
    """One plain sentence about a pair, e.g. 'forest beats ols on 10 of 10 folds; ...'."""
    dec = _decimals(se)
    if mean_diff == 0 or math.isnan(mean_diff):
        return (f"{model_a} and {model_b} tie on average; {model_a} wins {wins_a} and "
                f"{model_b} wins {wins_b} of {n} folds")
    a_better = (mean_diff < 0) == (better == "lower")
    winner, loser = (model_a, model_b) if a_better else (model_b, model_a)
    wins = wins_a if a_better else wins_b
    diff = mean_diff if a_better else -mean_diff
    p_text = "p < 0.001" if p < 0.001 else f"p ≈ {p:.2g}"
    return (f"{winner} beats {loser} on {wins} of {n} folds; mean {metric_label(metric)} "
            f"difference {_signed(diff, dec)} ± {se:.{dec}f} ({p_text})")


_PAIRS_SQL = """
    with picked as (
        select unnest($1::varchar[]) as model, unnest($2::varchar[]) as cell_id,
               unnest($3::integer[]) as place),
    fold_rows as (
        select p.model, p.place, p.cell_id, f."repeat", f.fold, f.value,
               f.n_valid::double / f.n_train as ratio
        from fold_scores f join picked p using (cell_id)
        where f.sweep_id = $4 and f.metric = $5),
    pairs as (
        select a.model as model_a, b.model as model_b, a.place as place_a, b.place as place_b,
               a.cell_id as cell_a, b.cell_id as cell_b, a.value - b.value as d, a.ratio
        from fold_rows a
        join fold_rows b on a."repeat" = b."repeat" and a.fold = b.fold and a.place < b.place)
    select p.model_a, p.model_b, p.cell_a, p.cell_b, count(*) as folds,
           avg(p.d) as mean_diff, var_samp(p.d) as var_diff, avg(p.ratio) as valid_ratio,
           count(*) filter (where case when $6 = 'lower' then p.d < 0 else p.d > 0 end)
               as wins_a,
           count(*) filter (where case when $6 = 'lower' then p.d > 0 else p.d < 0 end)
               as wins_b,
           count(*) filter (where p.d = 0) as ties,
           any_value(ta.value) as test_a, any_value(tb.value) as test_b
    from pairs p
    left join test_scores ta on ta.sweep_id = $4 and ta.cell_id = p.cell_a and ta.metric = $5
    left join test_scores tb on tb.sweep_id = $4 and tb.cell_id = p.cell_b and tb.metric = $5
    group by p.model_a, p.model_b, p.cell_a, p.cell_b, p.place_a, p.place_b
    order by p.place_a, p.place_b
"""

_COLUMNS = ["model_a", "model_b", "cell_a", "cell_b", "metric", "folds", "mean_diff", "se",
            "t", "df", "p_value", "wins_a", "wins_b", "ties", "test_a", "test_b", "test_diff",
            "in_words"]


def compare(store: Store, sweep_id: str | None = None, *, rule: str | None = None,
            se: str = "plain", metric: str | None = None) -> pd.DataFrame:
    """Every pair of models (spec order, a before b), their picked cells compared fold by fold.

    `rule` picks each model's cell (default: the sweep's rule) and `se` is the SE that rule
    uses; the comparison itself always uses the corrected variance. Differences are a − b on
    `metric` (default: the sweep's first metric)."""
    check_rule(rule)
    check_se(se)
    facts = sweep_facts(store, sweep_id)
    rule = rule or facts["rule"]
    metric = metric or facts["metric"]
    if metric not in facts["metrics"]:
        raise QueryError(f"metric must be one of this sweep's metrics "
                         f"({', '.join(facts['metrics'])}), got metric={metric!r}.")
    better = store.query("select better from metrics where metric = $1", [metric])
    better = str(better.iloc[0, 0]) if len(better) else "lower"
    chosen = picks(store, facts["sweep_id"], rule=rule, se=se)
    out = pd.DataFrame(columns=_COLUMNS)
    if len(chosen) >= 2:
        raw = store.query(_PAIRS_SQL, [chosen["model"].tolist(), chosen["cell_id"].tolist(),
                                       list(range(len(chosen))), facts["sweep_id"], metric,
                                       better])
        rows = []
        for r in raw.itertuples(index=False):
            n = int(r.folds)
            test = t_from_moments(float(r.mean_diff), float(r.var_diff), n, float(r.valid_ratio))
            rows.append({
                "model_a": r.model_a, "model_b": r.model_b, "cell_a": r.cell_a,
                "cell_b": r.cell_b, "metric": metric, "folds": n, "mean_diff": test.mean,
                "se": test.se, "t": test.t, "df": test.df, "p_value": test.p,
                "wins_a": int(r.wins_a), "wins_b": int(r.wins_b), "ties": int(r.ties),
                "test_a": r.test_a, "test_b": r.test_b, "test_diff": r.test_a - r.test_b,
                "in_words": in_words(r.model_a, r.model_b, metric=metric, better=better,
                                     mean_diff=test.mean, se=test.se, p=test.p,
                                     wins_a=int(r.wins_a), wins_b=int(r.wins_b), n=n)})
        out = pd.DataFrame(rows, columns=_COLUMNS)
    out.attrs.update(sweep_id=facts["sweep_id"], rule=rule, se=se, metric=metric,
                     better=better, n_folds=facts["n_folds"], note=APPROXIMATE_NOTE,
                     unpicked=chosen.attrs.get("unpicked", []))
    return out

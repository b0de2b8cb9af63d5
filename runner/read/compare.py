"""The corrected resampled t-test of paired fold differences, on plain numbers; the SQL in
`queries.compare` pairs the picked cells of every two models fold by fold and applies it.

Fold scores from repeated k-fold share training rows, so they are not independent and the
naive paired t-test is far too confident. The corrected variance of the mean difference is
(1/(k·r) + n_valid/n_train)·var(d), with t = mean(d)/sqrt(that) on k·r − 1 degrees of
freedom (Nadeau & Bengio 2003; Bouckaert & Frank 2004)."""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass
from typing import Sequence

from .picks import corrected_variance

__all__ = ["TTest", "corrected_t_test", "t_from_moments", "two_sided_p", "holm",
           "APPROXIMATE_NOTE"]

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


def holm(p_values: Sequence[float]) -> list[float]:
    """Holm's step-down adjustment of p-values for several tests made together (Holm 1979):
    the i-th smallest p times (m − i + 1), kept non-decreasing and at most 1; NaN stays NaN."""
    known = [(p, i) for i, p in enumerate(p_values) if not math.isnan(p)]
    m = len(known)
    out = [math.nan] * len(p_values)
    running = 0.0
    for rank, (p, i) in enumerate(sorted(known)):
        running = max(running, min(1.0, (m - rank) * p))
        out[i] = running
    return out

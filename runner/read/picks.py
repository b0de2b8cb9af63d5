"""Pick rules on plain numbers: which cell of each model to keep.

`best` takes the best mean CV score; `one_se` takes the simplest cell (lowest complexity
tier; among equally simple cells the best mean, then the lowest rank) whose mean is within
one standard error of the best. The functions here state each rule; the SQL in
`queries.picks` applies the same rule to a stored sweep (tests check that the two agree)."""

from __future__ import annotations

import math
from typing import Sequence

from ..errors import QueryError
from ..families import get_family

__all__ = ["RULES", "SE_KINDS", "TOLERANCE", "best_index", "one_se_index", "one_se_threshold",
           "corrected_variance", "standard_error", "check_rule", "check_se", "grid_edges",
           "columns_drawn"]

RULES = ("best", "one_se")
SE_KINDS = ("plain", "corrected")
TOLERANCE = 1e-12
"""Relative slack at the one-SE threshold, so a mean equal to it in exact arithmetic counts,
and between means, so equal ones tie however their rows were ordered when summed."""


# -- the rules on plain numbers ------------------------------------------------------------
def _check_better(better: str) -> None:
    if better not in ("lower", "higher"):
        raise ValueError(f"better must be 'lower' or 'higher', got better={better!r}")


def best_index(means: Sequence[float], better: str) -> int:
    """Position of the best mean; among means equal to it within TOLERANCE (the same fold
    scores summed in another row order differ in the last bits) the first, the simplest."""
    _check_better(better)
    if not len(means):
        raise ValueError("means is empty; a pick needs at least one cell")
    return _first_of_best(range(len(means)), means, 1.0 if better == "lower" else -1.0)


def _first_of_best(positions, means: Sequence[float], sign: float) -> int:
    """The first of `positions` whose signed mean is within TOLERANCE of their best."""
    positions = list(positions)
    top = min(sign * float(means[i]) for i in positions)
    return next(i for i in positions if sign * float(means[i]) <= top + _slack(top))


def one_se_threshold(best_mean: float, se_best: float, better: str) -> float:
    """The bar a mean must reach: best + SE when lower is better, best − SE when higher is."""
    _check_better(better)
    return best_mean + se_best if better == "lower" else best_mean - se_best


def _slack(best_mean: float) -> float:
    return TOLERANCE * max(1.0, abs(best_mean))


def one_se_index(means: Sequence[float], se_best: float, better: str,
                 tiers: Sequence[int] | None = None) -> int:
    """The simplest cell within one SE of the best; `means` run simplest first (by rank).

    Lower is better: the cells with means[i] <= best + se_best; higher is better: those with
    means[i] >= best − se_best. Of these the lowest of `tiers` (equally simple cells share
    one; None: every cell its own, the rank order), then the best mean (equal within
    TOLERANCE), then the first."""
    best = float(means[best_index(means, better)])
    bar = one_se_threshold(best, float(se_best), better)
    slack = _slack(best)
    sign = 1.0 if better == "lower" else -1.0
    within = [i for i, m in enumerate(means)
              if ((m <= bar + slack) if better == "lower" else (m >= bar - slack))]
    tier_of = (lambda i: i) if tiers is None else (lambda i: tiers[i])
    simplest = min(tier_of(i) for i in within)
    return _first_of_best([i for i in within if tier_of(i) == simplest], means, sign)


def corrected_variance(var: float, n: int, valid_ratio: float) -> float:
    """The corrected resampled variance of a mean over n fold scores: (1/n + n_valid/n_train)·var."""
    return (1.0 / n + valid_ratio) * var


def standard_error(values: Sequence[float], *, kind: str = "plain",
                   valid_ratio: float | None = None) -> float:
    """SE of the mean of fold scores: sd/sqrt(n), or the square root of the corrected variance."""
    check_se(kind)
    n = len(values)
    if n < 2:
        raise ValueError(f"a standard error needs at least 2 fold scores, got {n}")
    mean = sum(values) / n
    var = sum((v - mean) ** 2 for v in values) / (n - 1)
    if kind == "plain":
        return math.sqrt(var / n)
    if valid_ratio is None:
        raise ValueError("kind='corrected' needs valid_ratio (mean n_valid / n_train)")
    return math.sqrt(corrected_variance(var, n, valid_ratio))


def check_rule(rule: str | None, *, allow_none: bool = True) -> None:
    """Refuse an unknown pick rule, naming the valid ones."""
    if rule is None and allow_none:
        return
    if rule not in RULES:
        raise QueryError(f"rule must be one of {', '.join(RULES)}, got rule={rule!r}.")


def check_se(kind: str) -> None:
    """Refuse an unknown kind of standard error."""
    if kind not in SE_KINDS:
        raise QueryError(f"se must be one of {', '.join(SE_KINDS)}, got se={kind!r}.")


# -- picks on the edge of their grid -------------------------------------------------------
def _numeric(value, kind: str) -> bool:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return False
    return kind != "max_features" or isinstance(value, float)  # fractions, not counts


def _beyond(param, value, side: str) -> bool:
    """Whether the grid could go further than `value` on `side` (a bound stops it)."""
    if side == "low":
        return param.minimum is None or value > param.minimum
    top = 1.0 if param.kind == "max_features" else param.maximum
    return top is None or value < top


def columns_drawn(fraction: float, n_features: int) -> int:
    """The columns a forest draws at each split for a fractional max_features, by
    scikit-learn's rule max(1, int(max_features * n_features_in_))."""
    return max(1, int(fraction * n_features))


def _drawn_at_end(value: float, side: str, n_features: int | None) -> bool:
    """Whether a fraction of `n_features` columns already draws one column (low side) or
    every column (high side), so that going further on `side` draws the same columns."""
    if n_features is None:
        return False
    drawn = columns_drawn(value, n_features)
    return drawn <= 1 if side == "low" else drawn >= n_features


def grid_edges(family: str, cells: Sequence[dict], picked: dict,
               leaves: float | None = None, *,
               n_features: int | None = None) -> list[tuple[str, str, float]]:
    """The parameters whose picked value is the lowest or highest of the model's grid where
    the grid could go further: [(name, 'low' or 'high', value)].

    Only numbers that vary among the model's cells count. An edge that is also the
    parameter's bound (alpha or ccp_alpha 0, min_samples_leaf 1, a fraction of 1) cannot be
    extended; nor can the high side of a grid holding null where null means unlimited or
    all (max_depth, max_features); nor the simpler side of a one-leaf tree; nor a fraction
    of max_features that already draws one column of `n_features` (low side) or all of them
    (high side), where the sweep recorded how many feature columns the models were given."""
    fam = get_family(family)
    out = []
    for name, value in sorted(picked.items()):
        param = fam.params.get(name)
        if param is None or param.kind not in ("float", "int", "max_features") \
                or not _numeric(value, param.kind):
            continue
        seen = [c.get(name) for c in cells if name in c]
        values = sorted({v for v in seen if _numeric(v, param.kind)})
        if len(values) < 2:
            continue
        side = "low" if value == values[0] else "high" if value == values[-1] else None
        if side is None or not _beyond(param, value, side):
            continue
        if side == "high" and any(v is None for v in seen):
            continue
        if param.kind == "max_features" and _drawn_at_end(value, side, n_features):
            continue
        simpler_side = {"higher": "high", "lower": "low"}.get(param.simpler or "")
        if fam.one_tree and leaves is not None and leaves <= 1 and side == simpler_side:
            continue
        out.append((name, side, value))
    return out

"""Stability of the chosen cells across folds: how much a fitted model changes when its
training rows are redrawn. Pure functions state each number on plain inputs; `summarise`
applies them to a sweep's per-fold tree shapes and importances (read by
`explained.stability_table`).

Per cell, over its k·r fold refits:
- root share: the share of folds whose tree splits first on the most common root column;
- Jaccard: the mean, over all pairs of folds, of |A ∩ B| / |A ∪ B| for the sets of columns
  the two trees split on (1 = always the same columns);
- leaves: mean, sd (ddof 1), min and max of the number of leaves;
- rank agreement (every family): the mean, over all pairs of folds, of the Spearman
  correlation of the per-fold importances (impurity for trees and forests, coefficient for
  linear models); pairs where either fold's importances are all equal have no rank order and
  are left out (`rank_pairs` counts the pairs used)."""

from __future__ import annotations

import itertools
import math
from collections import Counter
from typing import Iterable, Sequence

import numpy as np
import pandas as pd


__all__ = ["NO_SPLIT", "root_agreement", "jaccard", "mean_pairwise_jaccard", "spearman",
           "mean_pairwise_spearman", "leaves_spread", "summarise", "COLUMNS"]

NO_SPLIT = "(no split)"
"""The root 'column' of a tree pruned back to a single leaf."""


def root_agreement(roots: Sequence[str | None]) -> tuple[str | None, float]:
    """The most common root column (ties: alphabetical first) and the share of folds using it."""
    if not len(roots):
        return None, math.nan
    counts = Counter(NO_SPLIT if r is None else r for r in roots)
    most = max(counts.values())
    top = min(k for k, v in counts.items() if v == most)
    return top, counts[top] / len(roots)


def jaccard(a: Iterable, b: Iterable) -> float:
    """|A ∩ B| / |A ∪ B|; two empty sets are identical (1.0)."""
    a, b = set(a), set(b)
    union = a | b
    return 1.0 if not union else len(a & b) / len(union)


def mean_pairwise_jaccard(sets: Sequence[Iterable]) -> float:
    """Mean Jaccard similarity over all unordered pairs; NaN with fewer than two sets."""
    pairs = [jaccard(a, b) for a, b in itertools.combinations(list(sets), 2)]
    return float(np.mean(pairs)) if pairs else math.nan


def _ranks(x: np.ndarray) -> np.ndarray:
    """Ranks 1..n, ties sharing the mean of their positions."""
    order = np.argsort(x, kind="mergesort")
    ranks = np.empty(len(x), dtype=float)
    sorted_x = x[order]
    i = 0
    while i < len(x):
        j = i
        while j + 1 < len(x) and sorted_x[j + 1] == sorted_x[i]:
            j += 1
        ranks[order[i:j + 1]] = (i + j) / 2.0 + 1.0
        i = j + 1
    return ranks


def spearman(a: Sequence[float], b: Sequence[float]) -> float:
    """Spearman's rank correlation (Pearson on mid-ranks); NaN when either side is constant."""
    x, y = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    if len(x) != len(y):
        raise ValueError(f"a and b must have equal length, got {len(x)} and {len(y)}")
    if len(x) < 2 or np.all(x == x[0]) or np.all(y == y[0]):
        return math.nan
    rx, ry = _ranks(x) - (len(x) + 1) / 2.0, _ranks(y) - (len(y) + 1) / 2.0
    return float(np.sum(rx * ry) / math.sqrt(np.sum(rx * rx) * np.sum(ry * ry)))


def mean_pairwise_spearman(vectors: Sequence[Sequence[float]]) -> tuple[float, int]:
    """Mean Spearman correlation over all pairs of vectors with a rank order, and that count."""
    values = [spearman(a, b) for a, b in itertools.combinations(list(vectors), 2)]
    defined = [v for v in values if not math.isnan(v)]
    return (float(np.mean(defined)) if defined else math.nan), len(defined)


def leaves_spread(leaves: Sequence[float]) -> dict[str, float]:
    """Mean, sd (ddof 1), min and max of the leaf counts."""
    x = np.asarray(leaves, dtype=float)
    if not len(x):
        return {"mean": math.nan, "sd": math.nan, "min": math.nan, "max": math.nan}
    return {"mean": float(x.mean()), "sd": float(x.std(ddof=1)) if len(x) > 1 else math.nan,
            "min": float(x.min()), "max": float(x.max())}


COLUMNS = ["model", "family", "cell_id", "picked", "folds", "rank_method", "rank_agreement",
            "rank_pairs", "root_feature", "root_share", "jaccard", "leaves_mean", "leaves_sd",
            "leaves_min", "leaves_max", "depth_mean"]


def summarise(imp: pd.DataFrame, trees: pd.DataFrame, marks: dict) -> pd.DataFrame:
    """One row per explained cell from its per-fold importances (`imp`: model, family,
    cell_id, repeat, fold, method, feature, value, cell_row) and, for single trees, its
    per-fold shapes (`trees`): rank agreement for every family; root share, Jaccard
    similarity of used columns and leaf spread where a cell has tree shapes."""
    rows = []
    for cell_id, g in imp.sort_values(["cell_row", "repeat", "fold"]).groupby("cell_id",
                                                                               sort=False):
        wide = g.pivot_table(index=["repeat", "fold"], columns="feature", values="value")
        agreement, pairs = mean_pairwise_spearman(wide.to_numpy())
        row = {"model": g["model"].iloc[0], "family": g["family"].iloc[0], "cell_id": cell_id,
               "picked": marks.get(cell_id, ""), "folds": len(wide),
               "rank_method": g["method"].iloc[0], "rank_agreement": agreement,
               "rank_pairs": pairs}
        t = trees[trees["cell_id"] == cell_id]
        if len(t):
            root, share = root_agreement(list(t["root_feature"]))
            spread = leaves_spread(t["n_leaves"].tolist())
            row.update(root_feature=root, root_share=share,
                       jaccard=mean_pairwise_jaccard([list(s) for s in t["features_used"]]),
                       leaves_mean=spread["mean"], leaves_sd=spread["sd"],
                       leaves_min=spread["min"], leaves_max=spread["max"],
                       depth_mean=float(t["depth"].mean()))
        rows.append(row)
    return pd.DataFrame(rows, columns=COLUMNS)

"""Figures of a class target's test predictions, from the store's stored probabilities:
`calibration` (when a model says it is p sure, is it right that often?) and `roc` (how well
does each model rank the rows of a class above the others?). The curves are computed here
with numpy from the stored probabilities, so the read side needs no scikit-learn (tests
check them against scikit-learn's own calibration and ROC functions)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from ..errors import QueryError
from .placing import side_label
from .plots import (INK, MUTED, PALETTE, _figure, _headline, _nothing_stored, _picked,
                    _style, label_open_bottoms, look_of, model_colours, model_looks)
from .explained import prediction_table
from ..store import Store
from .views import fixed, rule_label

__all__ = ["calibration_bins", "roc_points", "calibration_figure", "roc_figure"]

BINS = 10
"""Equal-width bins of the predicted probability on the calibration figure."""


def calibration_bins(confidence, correct, bins: int = BINS) -> pd.DataFrame:
    """Rows binned by the probability a model gave its own prediction (equal-width bins of
    [0, 1]; a value on an edge belongs to the lower bin): per non-empty bin the mean
    probability, the share of rows it got right and the row count."""
    confidence = np.asarray(confidence, dtype=float)
    correct = np.asarray(correct, dtype=float)
    which = np.searchsorted(np.linspace(0.0, 1.0, bins + 1)[1:-1], confidence)
    rows = []
    for b in range(bins):
        inside = which == b
        if inside.any():
            rows.append({"bin": b, "confidence": float(confidence[inside].mean()),
                         "accuracy": float(correct[inside].mean()), "rows": int(inside.sum())})
    return pd.DataFrame(rows, columns=["bin", "confidence", "accuracy", "rows"])


def roc_points(scores, positive) -> tuple[np.ndarray, np.ndarray, float]:
    """The ROC curve of scores against a 0/1 truth: (false-positive rates, true-positive
    rates, area under the curve by the trapezoid rule), one point per distinct score."""
    scores = np.asarray(scores, dtype=float)
    positive = np.asarray(positive, dtype=bool)
    order = np.argsort(-scores, kind="mergesort")
    s, p = scores[order], positive[order]
    last = np.r_[np.flatnonzero(np.diff(s)), len(s) - 1]  # end of each run of equal scores
    tp, fp = np.cumsum(p)[last], np.cumsum(~p)[last]
    n_pos, n_neg = int(p.sum()), int((~p).sum())
    if not n_pos or not n_neg:
        raise QueryError("a ROC curve needs rows of the class and of the other classes.")
    tpr = np.r_[0.0, tp / n_pos]
    fpr = np.r_[0.0, fp / n_neg]
    return fpr, tpr, float(np.trapezoid(tpr, fpr))


def _class_predictions(store: Store, sweep_id, rule):
    result = _picked(store, sweep_id, rule)
    facts = result.facts
    if facts.task != "classification":
        raise QueryError(f"sweep {facts.sweep_id} predicts numbers ({facts.target}); the "
                         "calibration and roc figures are for class targets. Use `foldwise "
                         "plot predictions`.")
    preds = prediction_table(store, facts.sweep_id)
    preds = preds[preds["cell_id"].isin(result.table["cell_id"])]
    if preds.empty:
        raise _nothing_stored(f"test predictions for the {rule_label(result.rules[0])} cells",
                              facts.sweep_id)
    models = [m for m in result.table["model"] if m in set(preds["model"])]
    return result, preds, models


def calibration_figure(store: Store, sweep_id: str | None = None, *, rule: str | None = None):
    """Per model's picked cell, on the test split: the share of rows whose most probable class
    was right against the probability given to it, in bins (dot area: rows in the bin)."""
    result, preds, models = _class_predictions(store, sweep_id, rule)
    facts, colours = result.facts, model_colours(store, result.facts.sweep_id)
    cols = min(len(models), 3)
    rows = math.ceil(len(models) / cols)
    with _style():
        fig = _figure(3.0 * cols + 0.6, 3.0 * rows + 0.9)
        axes = fig.subplots(rows, cols, sharex=True, sharey=True, squeeze=False).ravel()
        for ax, model in zip(axes, models):
            g = preds[preds["model"] == model]
            proba = np.vstack(g["probabilities"].to_numpy())
            right = (g["predicted_class"] == g["observed_class"]).to_numpy()
            bins = calibration_bins(proba.max(axis=1), right)
            ax.plot([0, 1], [0, 1], color=MUTED, linewidth=0.8, linestyle=(0, (4, 3)),
                    zorder=1)
            colour = colours.get(model, PALETTE[0])
            ax.plot(bins["confidence"], bins["accuracy"], color=colour, linewidth=1.2,
                    zorder=2)
            ax.scatter(bins["confidence"], bins["accuracy"], s=12 + 180 * bins["rows"] /
                       max(1, bins["rows"].max()), color=colour, edgecolor="white",
                       linewidth=0.6, zorder=3)
            gap = float(np.sum(bins["rows"] * (bins["accuracy"] - bins["confidence"]).abs())
                        / bins["rows"].sum())
            ax.set_title(f"{model}: mean gap {fixed(gap, 3)}", loc="left", fontsize=9)
            ax.set_xlim(0, 1.02)
            ax.set_ylim(0, 1.02)
            ax.set_aspect("equal")
        for ax in axes[len(models):]:
            ax.set_visible(False)
        label_open_bottoms(axes, len(models), cols)
        fig.supxlabel("probability given to the predicted class (binned)", fontsize=9)
        headline = _headline(
            fig, "When a model is p sure, is it right that often?",
            f"{rule_label(result.rules[0])} cell of each model refit on all training "
            f"rows, {len(preds) // max(1, len(models))} test rows of {facts.target}; "
            "dashed: perfectly calibrated; dot area: rows in the bin")
        side_label(fig, headline, "share of those rows predicted right")
    return fig


def roc_figure(store: Store, sweep_id: str | None = None, *, rule: str | None = None):
    """ROC curves of each model's picked cell on the test split: for two classes that of
    the second class; for more, one panel per class against the rest."""
    result, preds, models = _class_predictions(store, sweep_id, rule)
    facts, looks = result.facts, model_looks(store, result.facts.sweep_id)
    classes = list(facts.classes)
    wanted = classes[1:] if len(classes) == 2 else classes
    observed = set(preds["observed_class"].astype(str))
    shown = [c for c in wanted if str(c) in observed and len(observed - {str(c)})]
    absent = [str(c) for c in wanted if str(c) not in observed]
    if not shown:
        raise QueryError(f"sweep {facts.sweep_id}: the test rows of {facts.target} hold "
                         f"{'only class ' + next(iter(observed)) if observed else 'no rows'}"
                         ", and a ROC curve needs rows of a class and of the others. Make a "
                         "test split that holds every class (see README, the stratified "
                         "test split).")
    cols = min(len(shown), 3)
    rows = math.ceil(len(shown) / cols)
    with _style():
        fig = _figure(3.1 * cols + 0.6, 3.1 * rows + 1.0)
        axes = fig.subplots(rows, cols, sharex=True, sharey=True, squeeze=False).ravel()
        for ax, label in zip(axes, shown):
            k = classes.index(label)
            ax.plot([0, 1], [0, 1], color=MUTED, linewidth=0.8, linestyle=(0, (4, 3)))
            for model in models:
                g = preds[preds["model"] == model]
                scores = np.vstack(g["probabilities"].to_numpy())[:, k]
                fpr, tpr, area = roc_points(scores, g["observed_class"] == str(label))
                look = looks.get(model, look_of(0))
                ax.plot(fpr, tpr, color=look.colour, linestyle=look.dash,
                        marker=look.marker, markevery=0.12, markersize=4,
                        markeredgecolor="white", markeredgewidth=0.4, linewidth=1.3,
                        label=f"{model} (area {fixed(area, 3)})", gid=f"roc {model}")
            ax.set_title(f"class {label} against the rest" if len(classes) > 2
                         else f"class {label}", loc="left", fontsize=9)
            ax.set_aspect("equal")
            ax.legend(loc="lower right", fontsize=7, labelcolor=INK)
        for ax in axes[len(shown):]:
            ax.set_visible(False)
        label_open_bottoms(axes, len(shown), cols)
        fig.supxlabel("share of other rows ranked above the threshold", fontsize=9)
        headline = _headline(
            fig, "How well does each model rank a class's rows above the others?",
            f"{rule_label(result.rules[0])} cell of each model refit on all training "
            f"rows, test split of {facts.target}; dashed: no better than chance"
            + (f"; no curve for {', '.join(absent)}: no test rows of "
               f"{'it' if len(absent) == 1 else 'them'}" if absent else ""))
        side_label(fig, headline, "share of the class's rows ranked above the threshold")
    return fig

"""The one view layer: reading results (`results.py`) become display tables, titles and
sentences here, for the terminal and the HTML report alike, so that every label and every
rounding rule exists once. Nothing here queries the store."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

from .compare import APPROXIMATE_NOTE
from ..families import get_family
from ..metrics import get_metric, metric_label
from .results import Comparison, ComplexityTable, Coverage, Findings, Picks, Summary

if TYPE_CHECKING:  # imported where a frame is built: `foldwise sweeps` starts without it
    import pandas as pd

__all__ = ["View", "TextTable", "number", "mean_se", "params_text", "p_text", "value_text", "rule_label",
           "cell_text", "pair_sentence", "pair_sentences", "summary_view", "picks_view",
           "compare_view", "complexity_view", "coverage_notes",
           "stability_sentences", "columns_view", "importance_matrix", "METHODS",
           "time_text", "reuse_text", "TIME_MEANING", "edge_notes",
           "finding_lines", "findings_view", "plan_sentence", "ORDERED_FOLDS_NOTE",
           "is_missing", "count_text", "cv_head", "test_head", "CLEAR_P"]


@dataclass(frozen=True)
class TextTable:
    """Columns of text as plain tuples, for a view that must not wait for pandas to load
    (the sweep listing); shown as a DataFrame of text would be."""

    columns: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]

    def __len__(self) -> int:
        return len(self.rows)

    def itertuples(self, index: bool = False):
        return iter(self.rows)


@dataclass(frozen=True)
class View:
    """A table ready to show: a title, columns of text, which columns hold numbers (they are
    right-aligned) and the sentences that go with it."""

    title: str
    table: pd.DataFrame | TextTable
    numeric: tuple[str, ...] = ()
    sentences: tuple[str, ...] = ()  # printed under the table
    caveats: tuple[str, ...] = ()  # under the table too; on stderr beside CSV or JSON
    notes: tuple[str, ...] = ()  # what limits the result, always on stderr
    preface: tuple[str, ...] = ()  # printed above the table; on stderr beside CSV or JSON


# -- numbers and params as text --------------------------------------------------------------
MINUS = "\u2212"
"""Shown numbers use the typographic minus sign, in tables and sentences alike."""


def is_missing(value) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value))


def _minus(text: str) -> str:
    return MINUS + text[1:] if text.startswith("-") else text


def number(value, digits: int = 4) -> str:
    """A number shown alone: `digits` significant digits, or '' when missing."""
    if is_missing(value):
        return ""
    if isinstance(value, (int,)) and not isinstance(value, bool):
        return _minus(str(value))
    try:
        x = float(value)
    except (TypeError, ValueError):
        return str(value)
    text = f"{x:.{digits}g}"
    return _minus(text) if float(text) != 0 else text.lstrip("-")


def decimals_for(se) -> int | None:
    """Decimal places that show an SE to two significant digits (None: no usable SE)."""
    if is_missing(se) or not math.isfinite(float(se)) or float(se) == 0:
        return None
    return max(0, 1 - math.floor(math.log10(abs(float(se)))))


def fixed(value, places: int) -> str:
    """A number to a fixed number of decimal places, with the one minus sign."""
    text = f"{float(value):.{places}f}"
    return _minus(text) if float(text) != 0 else text.lstrip("-")


def mean_se(mean, se, digits: int = 4) -> str:
    """'mean ± se': the SE to two significant digits and the mean to the same decimal
    place (common practice), or `digits` significant digits when there is no usable SE."""
    if is_missing(mean):
        return ""
    if is_missing(se):  # one fold has no SE: the mean alone, not a dangling '±'
        return number(mean, digits)
    places = decimals_for(se)
    if places is None or not math.isfinite(float(mean)):
        return f"{number(mean, digits)} ± {number(se, 2)}"
    return f"{fixed(mean, places)} ± {fixed(se, places)}"


def beside(value, se, digits: int = 4) -> str:
    """A score shown beside a CV 'mean ± SE' (such as the test score): to the same decimal
    places as that mean, so a column's decimals line up and trailing zeros stay; `digits`
    significant digits where the row has no usable SE."""
    if is_missing(value):
        return ""
    places = decimals_for(se)
    if places is None or not math.isfinite(float(value)):
        return number(value, digits)
    return fixed(value, places)


def p_text(p) -> str:
    """A p-value as it is shown everywhere: 'p < 0.001' or 'p ≈ 0.012'."""
    if p is None or (isinstance(p, float) and math.isnan(p)):
        return ""
    return "p < 0.001" if p < 0.001 else f"p ≈ {p:.2g}"


def params_text(params, *, hide: dict | None = None, exact: bool = False) -> str:
    """A cell's params as 'name=value, ...', keys sorted, floats to 6 significant digits
    (always with a point, so 1.0 as a fraction never reads as the count 1), or with `exact`
    in full, so that two different values never read alike; entries equal to `hide` (e.g.
    the family defaults) are left out."""
    if isinstance(params, str):
        params = json.loads(params)
    parts = []
    for k in sorted(params):
        v = params[k]
        if hide and k in hide and hide[k] == v and type(hide[k]) is type(v):
            continue
        if isinstance(v, float):
            v = repr(v) if exact else f"{v:.6g}"
            if not any(ch in v for ch in ".en"):
                v += ".0"
        parts.append(f"{k}={v}")
    return ", ".join(parts) or "(defaults)"


def value_text(value) -> str:
    """One parameter value in a table cell."""
    if value is None or (isinstance(value, float) and value != value):
        return "none"
    if isinstance(value, float):
        return f"{value:.6g}"
    return str(value)


def rule_label(rule: str) -> str:
    """'one_se' -> 'one-SE'; several rules joined with 'and'."""
    return " and ".join({"one_se": "one-SE"}.get(r, r) for r in rule.split()) or "explained"


def cell_text(params, keep, leaves=None) -> str:
    """A cell as the params that vary in its model's grid, plus its mean leaves if a tree."""
    values = json.loads(params) if isinstance(params, str) else dict(params)
    kept = {k: v for k, v in values.items() if k in keep}
    text = params_text(kept) if kept else "(single cell)"
    if leaves is not None and leaves == leaves:
        text += f" ({leaves:.3g} leaves)"
    return text


# -- a sweep's time and reuse ---------------------------------------------------------------
TIME_MEANING = "from reading the data to the last write"
"""What a sweep's seconds measure, wherever they are shown (`run`, `sweeps`, the report)."""


def time_text(seconds, fit_seconds=None) -> str:
    """'38.6 s from reading the data to the last write; its fits took 52.1 s of worker
    time' (worker seconds summed over processes, fits this sweep made itself)."""
    if is_missing(seconds):
        return "not finished"
    text = f"{float(seconds):.1f} s {TIME_MEANING}"
    if fit_seconds is not None and not is_missing(fit_seconds) and fit_seconds > 0:
        text += f"; its own fits took {float(fit_seconds):.1f} s of worker time"
    return text


def reuse_text(cells: int, reused: int, sources=()) -> str:
    """'42 cells, all reused from sweep X: nothing was fitted', '42 cells, 30 of them reused
    from ...', or '42 cells, all computed in this sweep'."""
    where = " from earlier sweeps"
    if sources:
        shown = ", ".join(list(sources)[:3]) + (", ..." if len(sources) > 3 else "")
        where = f" from sweep{'s' if len(sources) > 1 else ''} {shown}"
    if cells and reused == cells:
        return f"{count_text(cells, 'cell', 'cells')}, all reused{where}: nothing was fitted"
    if reused:
        return f"{count_text(cells, 'cell', 'cells')}, {reused} of them reused{where}"
    return f"{count_text(cells, 'cell', 'cells')}, all computed in this sweep"


# -- sentences -----------------------------------------------------------------------------
CLEAR_P = 0.05
"""A paired difference is worded as clear when its p-value (Holm-adjusted when several
pairs are compared) is below this (common practice); above it, as no clear difference."""


def pair_sentence(model_a: str, model_b: str, *, metric: str, better: str, mean_diff: float,
                  se: float, p: float, wins_a: int, wins_b: int, n: int,
                  p_holm: float | None = None) -> str:
    """One plain sentence about a pair, worded by the evidence: 'forest beats ols on 10 of 10
    folds; ...' when the difference is clear, 'no clear difference between ...' when not."""
    label = metric_label(metric)
    places = decimals_for(se)
    places = 3 if places is None else places
    judged = p if p_holm is None else p_holm
    p_part = p_text(p) + ("" if p_holm is None else f"; Holm-adjusted {p_text(p_holm)}")
    if not n:
        return (f"{label} is undefined on every fold of {model_a} or {model_b}: nothing to "
                "compare")
    if n == 1:
        return (f"{model_a} and {model_b} both have a {label} on 1 fold only: too few to "
                "test")
    if wins_a == wins_b == 0 and mean_diff == 0:
        return (f"{model_a} and {model_b} score the same on every one of {n} folds: nothing "
                "to test")
    if mean_diff == 0 or math.isnan(mean_diff):
        return (f"{model_a} and {model_b} tie on average; {model_a} wins {wins_a} and "
                f"{model_b} wins {wins_b} of {n} folds")
    a_better = (mean_diff < 0) == (better == "lower")
    winner, loser = (model_a, model_b) if a_better else (model_b, model_a)
    wins = wins_a if a_better else wins_b
    diff = mean_diff if a_better else -mean_diff
    if judged is not None and judged < CLEAR_P:
        return (f"{winner} beats {loser} on {wins} of {n} folds; mean {label} difference "
                f"{fixed(diff, places)} ± {fixed(se, places)} ({p_part})")
    return (f"no clear difference between {winner} and {loser}: {winner} is better on {wins} "
            f"of {n} folds, mean {label} difference {fixed(diff, places)} ± "
            f"{fixed(se, places)} ({p_part})")


def pair_sentences(comparison: Comparison) -> list[str]:
    """One sentence per compared pair (Holm-adjusted p when there are several pairs)."""
    several = len(comparison.table) > 1
    return [pair_sentence(r.model_a, r.model_b, metric=comparison.metric,
                          better=comparison.better, mean_diff=r.mean_diff, se=r.se,
                          p=r.p_value, wins_a=r.wins_a, wins_b=r.wins_b, n=r.folds,
                          p_holm=r.p_holm if several else None)
            for r in comparison.table.itertuples(index=False)]


def count_text(n: int, one: str, many: str) -> str:
    return f"{n} {one if n == 1 else many}"


def coverage_notes(coverage: Coverage, sweep_id: str, n_folds: int) -> tuple[str, ...]:
    """Plain sentences on what limits a sweep's picks: a sweep still running or stopped
    early (its picks are among the cells finished so far), and for each model without a
    pick whether its cells are unfinished, have failed fits or a non-finite score.
    Unfinished is not failed: a cell not scored yet is said to be so."""
    status, counts = coverage.status, coverage.table
    notes = []
    if status != "finished":
        done, total = int(counts["complete"].sum()), int(counts["cells"].sum())
        now = {"running": "is still running", "interrupted": "was interrupted"}.get(
            status, "stopped with an error")
        then = (" so far." if status == "running" else
                "; running the spec again completes only what is missing.")
        if done:
            notes.append(f"sweep {sweep_id} {now}: {done} of {total} cells have all "
                         f"{n_folds} folds scored, and the picks are made among those{then}")
        else:
            notes.append(f"sweep {sweep_id} {now}: none of its "
                         f"{count_text(total, 'cell', 'cells')} has all {n_folds} folds scored"
                         f"{then.replace(' so far', ' yet')}")
    unfinished = {
        "running": ("is not finished yet", "are not finished yet"),
        "interrupted": ("was not finished when the sweep was interrupted",
                        "were not finished when the sweep was interrupted"),
        "failed": ("was not finished when the sweep stopped with an error",
                   "were not finished when the sweep stopped with an error"),
    }.get(status, ("lacks fold scores", "lack fold scores"))
    for r in counts[counts["complete"] == 0].itertuples(index=False):
        parts = []
        if r.failed:
            parts.append(count_text(r.failed, "has a failed fit", "have a failed fit"))
        if r.unfinished:
            parts.append(count_text(r.unfinished, *unfinished))
        if r.undefined:
            parts.append(count_text(r.undefined, "has a score undefined on some folds",
                                    "have a score undefined on some folds"))
        if r.non_finite:
            parts.append(count_text(r.non_finite, "has a non-finite mean score",
                                "have a non-finite mean score"))
        text = (f"model '{r.model}' has no cell to pick{' yet' if status == 'running' else ''}"
                f": of its {count_text(r.cells, 'cell', 'cells')}, {' and '.join(parts)}.")
        if r.undefined:
            text += (" A metric such as ROC AUC is undefined on a fold whose validation rows "
                     "hold a single class; choose folds that give every fold each class "
                     "(fewer folds, or other groups) or pick by another metric.")
        if r.failed:
            text += (f" `foldwise sql \"select * from failures where sweep_id = '{sweep_id}'\"` "
                     "shows the errors.")
        notes.append(text)
    return tuple(f"note: {n}" for n in notes)


def edge_notes(edges: pd.DataFrame) -> tuple[str, ...]:
    """One sentence per picked cell on the edge of its grid, saying which way to extend it:
    past the edge, a best cell may score better still, and a one-SE cell on its simpler
    edge may have a simpler cell within one SE."""
    out = []
    if edges is None or edges.empty:
        return ()
    for r in edges.itertuples(index=False):
        param = get_family(r.family).params.get(r.param)
        low = r.side == "low"
        way = "below" if low else "above"
        simpler = param is not None and param.simpler == ("lower" if low else "higher")
        if r.rule == "best":
            why = f"the best {r.param} may lie {way} it"
        elif simpler:
            why = "a simpler cell may still be within one SE"
        else:
            why = "the best cell, and the one-SE cell with it, may lie beyond it"
        out.append(f"note: {r.model}'s {rule_label(r.rule)} cell sits on the edge of its grid: "
                   f"{r.param} = {value_text(r.value)} is the {'smallest' if low else 'largest'} "
                   f"value tried, so {why}; extend the grid of {r.param} {way} "
                   f"{value_text(r.value)}.")
    return tuple(out)


# -- tables --------------------------------------------------------------------------------
def cv_head(metric: str) -> str:
    return f"CV {metric_label(metric)} (mean ± SE)"


def test_head(metric: str) -> str:
    return f"test {metric_label(metric)}"


def summary_view(result: Summary) -> View:
    """Per model: the picked cell (the params its grid varies), CV mean ± SE and test score
    of every metric."""
    import pandas as pd

    df, facts = result.table, result.facts
    shown = pd.DataFrame({"model": df["model"], "family": df["family"],
                          "cells": df["cells"].map(number) if len(df) else []})
    numeric = ["cells"]
    if "failed_cells" in df and df["failed_cells"].any():
        shown["failed cells"] = df["failed_cells"].map(number)
        numeric.append("failed cells")
    shown["picked cell"] = [cell_text(p, result.varying.get(m, []))
                            for p, m in zip(df["params"], df["model"])]
    for m in facts.metrics:
        if f"cv_{m}" not in df:
            continue
        shown[cv_head(m)] = [mean_se(a, b) for a, b in zip(df[f"cv_{m}"], df[f"se_{m}"])]
        shown[test_head(m)] = [beside(t, e) for t, e in zip(df[f"test_{m}"], df[f"se_{m}"])]
        numeric += [cv_head(m), test_head(m)]
    title = (f"sweep {facts.sweep_id}: picked cell per model ({rule_label(result.rule)} "
             f"rule) by CV {metric_label(facts.metric)}")
    return View(title, shown.reset_index(drop=True), tuple(numeric),
                notes=coverage_notes(result.coverage, facts.sweep_id, facts.n_folds)
                + undefined_notes(df, facts) + edge_notes(result.edges))


LACKING = "their validation rows lack a class it needs"
"""Why a fold's score is undefined, in every view that says so (ROC AUC needs every class)."""


def undefined_why(metric: str) -> str:
    """Why a metric is undefined on a fold: a class score lacks a class; a score of numbers
    is always defined, so only a store edited by another hand holds one that is not."""
    if get_metric(metric).task == "classification":
        return LACKING
    return "the store holds no finite value within ±1e100 there"


def undefined_notes(df: pd.DataFrame, facts) -> tuple[str, ...]:
    """Where a picked cell's metric is undefined (e.g. ROC AUC on rows of a single class):
    on some folds, so its CV mean is over fewer folds than the plan's, or on the test split."""
    out = []
    for m in facts.metrics:
        if f"n_{m}" not in df:
            continue
        label = metric_label(m)
        for model, n, test, tested in zip(df["model"], df[f"n_{m}"], df[f"test_{m}"],
                                          df[f"tested_{m}"]):
            if not is_missing(n) and 0 < n < facts.n_folds:
                out.append(f"note: {model}'s CV {label} is the mean of the {int(n)} folds "
                           f"of {facts.n_folds} where it is defined; on the others it is "
                           f"undefined ({undefined_why(m)}).")
            elif not is_missing(n) and n == 0:
                out.append(f"note: {model}'s CV {label} is undefined on every fold "
                           f"({undefined_why(m)}).")
            if not is_missing(tested) and bool(tested) and is_missing(test):
                out.append(f"note: {model}'s test {label} is undefined: the test rows lack "
                           "a class it needs.")
    return tuple(out)


def picks_view(result: Picks) -> View:
    """Per model, each rule's cell side by side: cell, rank, CV mean ± SE, test score."""
    import pandas as pd

    facts, df = result.facts, result.table
    m = facts.metric
    both = len(result.rules) > 1
    rows, numeric = [], []
    for _, group in df.groupby("model", sort=False):
        row = {"model": group["model"].iloc[0], "family": group["family"].iloc[0]}
        for r in group.itertuples(index=False):
            prefix = f"{rule_label(r.rule)} " if both else ""
            if not both:
                row["rule"] = rule_label(r.rule)
            cols = {f"{prefix}cell": cell_text(r.params, result.varying.get(r.model, []),
                                               r.mean_leaves),
                    f"{prefix}rank": number(int(r.complexity_rank)),
                    f"{prefix}{cv_head(m)}": mean_se(r.mean, r.se),
                    f"{prefix}{test_head(m)}": beside(r.test, r.se)}
            row.update(cols)
            numeric += list(cols)[1:]
        if result.rules == ("one_se",):
            row["cells within one SE"] = (f"{group['n_within'].iloc[0]} of "
                                          f"{group['eligible'].iloc[0]}")
        rows.append(row)
    title = (f"sweep {facts.sweep_id}: picks by CV {metric_label(m)} ({facts.better_of()} is "
             f"better, {result.se} SE; rank 0 = simplest; the sweep's rule is "
             f"{rule_label(facts.rule)})")
    return View(title, pd.DataFrame(rows), tuple(dict.fromkeys(numeric)),
                notes=coverage_notes(result.coverage, facts.sweep_id, facts.n_folds)
                + edge_notes(result.edges))


def compare_view(result: Comparison) -> View:
    """Every pair of picked cells: mean difference ± corrected SE, t, p, folds won, test."""
    import pandas as pd

    df, m = result.table, result.metric
    shown = pd.DataFrame({
        "pair (a − b)": [f"{a} − {b}" for a, b in zip(df["model_a"], df["model_b"])],
        "folds": df["folds"].map(number),
        f"CV {metric_label(m)} a − b (mean ± SE)": [mean_se(d, e) for d, e in
                                                    zip(df["mean_diff"], df["se"])],
        "t": df["t"].map(number), "p": df["p_value"].map(p_text),
        "Holm p": df["p_holm"].map(p_text),
        "folds won a : b": [f"{a} : {b}" for a, b in zip(df["wins_a"], df["wins_b"])],
        f"test {metric_label(m)} a − b": [beside(d, e) for d, e in
                                          zip(df["test_diff"], df["se"])]})
    n = result.facts.n_folds
    title = (f"sweep {result.facts.sweep_id}: {rule_label(result.rule)} cells paired on {n} "
             f"folds, CV {metric_label(m)} ({result.better} is better); corrected resampled "
             f"t-test, df = {n - 1}")
    numeric = [c for c in shown.columns if c != "pair (a − b)"]
    caveats = (f"note: {APPROXIMATE_NOTE}",) if len(df) else ()
    if len(df) and result.facts.ordered:
        caveats += (f"note: {ORDERED_FOLDS_NOTE}",)
    if len(df) and (df["folds"] < result.facts.n_folds).any():
        caveats += (f"note: {metric_label(result.metric)} is undefined on some folds "
                    f"({undefined_why(result.metric)}); each pair is compared on the folds where both of its "
                    "models have it, the 'folds' column.",)
    tested = int(df["p_value"].notna().sum())
    if len(df) > 1:
        few = int((df["folds"] < 2).sum())
        why = [f"{count_text(few, 'pair', 'pairs')} with a score on fewer than 2 common "
               "folds had too few to test"] if few else []
        if tested + few < len(df):
            why.append(f"{count_text(len(df) - tested - few, 'pair', 'pairs')} with the same "
                       "score on every fold had nothing to test")
        untested = f" ({'; '.join(why)})" if why else ""
        caveats += (f"note: {count_text(tested, 'pairwise test was', 'pairwise tests were')} "
                    f"made{untested}; 'Holm p' adjusts each p for all of them (Holm 1979), and "
                    f"a difference is called clear only when that is below {CLEAR_P:g}.",)
    return View(title, shown, tuple(numeric), sentences=tuple(pair_sentences(result)),
                caveats=caveats, notes=coverage_notes(result.coverage, result.facts.sweep_id,
                                                     result.facts.n_folds))


def _status(pick: str, within: bool, excluded: str) -> str:
    """A cell's standing in its model: its picks, else 'within one SE', else why it cannot
    be picked."""
    if pick:
        return ", ".join({"best": "best", "one_se": "one-SE pick"}[r] for r in pick.split())
    if excluded:
        return f"not pickable: {excluded}"
    return "within one SE" if within else ""


def _se_count(x: float) -> str:
    """How many SEs, to two significant digits and never in exponent form ('240', not
    '2.4e+02')."""
    text = number(x, 2)
    return _minus(f"{float(text.replace('−', '-')):.0f}") if "e" in text else text


def complexity_view(result: ComplexityTable) -> View:
    """One model's cells simplest first: each cell's standing (picks, within one SE of the
    best, or why it cannot be picked), rank, the params shown, mean leaves, CV mean ± SE,
    its distance from the best in metric units and in the best cell's SEs, and test score."""
    import pandas as pd

    df, m, facts = result.table, result.metric, result.facts
    sign = 1.0 if facts.better_of(m) == "lower" else -1.0
    best = df[df["pick"].str.split().map(lambda r: "best" in r)]
    best_mean = float(best["mean"].iloc[0]) if len(best) and m == facts.metric else None
    se_best = (abs(result.threshold - best_mean) if best_mean is not None
               and result.threshold is not None else None)
    shown = pd.DataFrame({"standing": [_status(p, w, e) for p, w, e in
                                       zip(df["pick"], df["within_one_se"], df["excluded"])],
                          "rank": df["complexity_rank"].map(number)})
    numeric = ["rank"]
    tiers = df["complexity_tier"]
    if tiers.notna().all() and tiers.nunique() < len(tiers):  # equally simple cells
        shown["tier"] = tiers.map(lambda t: number(int(t)))
        numeric.append("tier")
    for name in result.shown_params:
        shown[name] = df[name].map(value_text)
    if df["mean_leaves"].notna().any():
        shown["leaves"] = [value_text(round(v, 1)) if v == v else "" for v in df["mean_leaves"]]
        numeric.append("leaves")
    shown[cv_head(m)] = [mean_se(x, e) for x, e in zip(df["mean"], df["se"])]
    numeric.append(cv_head(m))
    if best_mean is not None:
        head = f"{'above' if sign > 0 else 'below'} best"
        places = decimals_for(se_best)
        shown[head] = ["" if v != v else
                       (fixed(sign * (v - best_mean), places) if places is not None
                        else number(sign * (v - best_mean)))
                       + (f" = {_se_count(sign * (v - best_mean) / se_best)} SE"
                          if se_best else "")
                       for v in df["mean"]]
        numeric.append(head)
    shown[test_head(m)] = [beside(t, e) for t, e in zip(df["test"], df["se"])]
    numeric.append(test_head(m))
    bar = result.threshold
    op = "≤" if facts.better_of() == "lower" else "≥"
    bar_text = (f"; one-SE threshold: CV {metric_label(facts.metric)} {op} {number(bar)} "
                "is within one SE of the best" if bar is not None else "")
    family = get_family(result.family).name
    title = (f"{result.model} ({family}), simplest first: sweep {facts.sweep_id}, CV "
             f"{metric_label(m)}, {result.se} SE{bar_text}")
    notes = ()
    if result.fixed_params:
        notes = ("other params at their defaults: " + ", ".join(
            f"{k}={value_text(v)}" for k, v in result.fixed_params.items()),)
    if "tier" in shown:
        notes += ("cells of one tier are equally simple: the one-SE pick is the best scoring "
                  "cell of the simplest tier within one SE.",)
    short, none = df["n"][(df["n"] < facts.n_folds) & (df["n"] > 0)], (df["n"] == 0).sum()
    why = undefined_why(m)
    if len(short):
        span = (f"{int(short.min())}" if short.min() == short.max()
                else f"{int(short.min())} to {int(short.max())}")
        notes += (f"{metric_label(m)} is undefined on some folds of "
                  f"{count_text(len(short), 'cell', 'cells')} ({why}): their CV mean is over "
                  f"the {span} folds of {facts.n_folds} where it is defined.",)
    if none:
        notes += (f"{metric_label(m)} is undefined on every fold of "
                  f"{count_text(int(none), 'cell', 'cells')} ({why}).",)
    return View(title, shown, tuple(numeric), sentences=notes)


# -- the plan and the leakage checks ---------------------------------------------------------
ORDERED_FOLDS_NOTE = (
    "these folds follow time order, so they are not exchangeable draws: later folds fit on "
    "more rows and score other periods. The SE is the spread of the fold scores over time, "
    "not a sampling error, and the corrected t-test assumes exchangeable folds, so its p is "
    "a rough guide at best; look at the fold-by-fold differences (plot models) as well.")
"""What the SE and the paired comparison mean when the folds are ordered in time."""


def finding_lines(findings: pd.DataFrame | Findings) -> tuple[str, ...]:
    """One line per finding of the leakage checks: 'warning (group_key): ...'."""
    findings = findings.table if isinstance(findings, Findings) else findings
    return tuple(f"{r.severity}{' (allowed)' if _allowed(r.allowed) else ''} ({r.kind}): "
                 f"{r.message}" for r in findings.itertuples(index=False))


def _allowed(value) -> bool:
    """A finding's stored `allowed`: only a true value counts (a store may hold NULL)."""
    return not is_missing(value) and str(value) == "True"


def findings_view(findings: pd.DataFrame | Findings) -> View:
    """The leakage checks' findings as a table: severity, check, column and what it means."""
    import pandas as pd

    findings = findings.table if isinstance(findings, Findings) else findings
    n = len(findings)
    title = (f"leakage checks: {count_text(n, 'finding', 'findings')}" if n else
             "leakage checks: nothing found")
    shown = pd.DataFrame({
        "severity": [f"{s} (allowed)" if _allowed(a) else s
                     for s, a in zip(findings["severity"], findings["allowed"])],
        "check": findings["kind"], "column": findings["column_name"].fillna(""),
        "finding": findings["message"]})
    return View(title, shown)


def plan_sentence(record: dict) -> str:
    """A sweep's plan in one sentence, from its stored record (scheme, column, plan)."""
    plan = record.get("plan")
    plan = json.loads(plan) if isinstance(plan, str) else (plan or {})
    scheme = record.get("scheme") or "rows"
    k, repeats = record.get("k"), record.get("repeats")
    folds = {"groups": f"{k} folds × {repeats} repeats over whole groups of "
                       f"{record.get('plan_column')}",
             "time": f"{k} time-ordered folds by {record.get('plan_column')} (expanding "
                     f"window, gap {plan.get('gap', 0)})"}.get(
        scheme, f"{k} folds × {repeats} repeats over rows")
    test = plan.get("test", {})
    if "file" in test:
        held = f"the rows of test file {test['file']}"
    elif "column" in test:
        held = f"the rows marked by column {test['column']}"
    elif "order" in test:
        held = f"the last {test.get('fraction', 0):g} of the values of {test['order']}"
    elif "groups" in test:
        held = f"{test['fraction']:g} of the groups of {test['groups']} (seed {test['seed']})"
    else:
        held = f"{test['fraction']:g} of the rows (seed {test['seed']})" if test else \
            "held-out rows"
    strata = ", stratified by class" if plan.get("stratified") else ""
    seed = f"seed {record.get('plan_seed')}"
    if scheme == "time":  # the order draws the folds; the seed only reaches the fits
        seed = f"fits seeded {record.get('plan_seed')}"
    return f"{folds}{strata}, {seed}; test split: {held}"


# -- the report's own tables -----------------------------------------------------------------
METHODS = {
    "permutation": "rise in the test {metric} when one column is shuffled{drawn} (mean over "
                   "shuffles; spread = sd over shuffles)",
    "impurity": "share of the tree's squared-error reduction made by splits on the column "
                "(sums to 1; spread = sd over fold refits)",
    "coefficient": "SD of the column's contribution to the prediction, target units: "
                   "|standardised coefficient| for numbers, SD of the one-hot part for "
                   "categories (spread = sd over fold refits)",
}
"""What each importance method's value means, for tables and reports."""


def _whole(value) -> str:
    """A whole number as text; 'unknown' where a store held none."""
    return "unknown" if is_missing(value) else str(int(value))


def stability_sentences(stab: pd.DataFrame) -> list[str]:
    """One sentence per explained cell on how its fitted model changes across folds."""
    out = []
    for r in stab.itertuples(index=False):
        if r.root_feature is not None and r.root_feature == r.root_feature:
            out.append(f"{r.model} ({rule_label(r.picked)} cell): {r.root_share:.0%} of "
                       f"{r.folds} fold trees split first on {r.root_feature}; two fold trees "
                       f"share on average {r.jaccard:.2f} of their columns (Jaccard); leaves "
                       f"range {_whole(r.leaves_min)}–{_whole(r.leaves_max)}; importance ranks "
                       f"agree at mean Spearman ρ = {number(r.rank_agreement, 2)}.")
        else:
            out.append(f"{r.model} ({rule_label(r.picked)} cell): importance ranks across "
                       f"{r.folds} fold {get_family(r.family).plural} agree at mean Spearman "
                       f"ρ = {number(r.rank_agreement, 2)}.")
    return out


def columns_view(df: pd.DataFrame, columns: dict[str, str]) -> pd.DataFrame:
    """Chosen columns of a table, renamed, every value as text (numbers to 4 digits)."""
    import pandas as pd

    out = pd.DataFrame({head: [number(v) if isinstance(v, float) else
                               ("" if v is None else str(v)) for v in df[col]]
                        for col, head in columns.items()})
    return out


STABILITY_COLUMNS = {"model": "model", "picked": "pick", "folds": "folds",
                     "rank_method": "ranked by", "rank_agreement": "rank agreement (ρ)",
                     "root_feature": "most common root", "root_share": "root share",
                     "jaccard": "column Jaccard", "leaves_mean": "leaves mean",
                     "leaves_sd": "leaves SD", "leaves_min": "min", "leaves_max": "max"}
TREE_FOLD_COLUMNS = {"model": "model", "repeat": "repeat", "fold": "fold",
                     "n_leaves": "leaves", "depth": "depth", "root_rule": "root split",
                     "columns used": "columns used"}


def importance_matrix(importances, cells: pd.DataFrame) -> dict[str, pd.DataFrame]:
    """Per method: columns down, models across, value ± spread of each given cell."""
    import pandas as pd

    out = {}
    imp = importances.table
    imp = imp[imp["cell_id"].isin(cells["cell_id"])]
    for method in [m for m in METHODS if m in set(imp["method"])]:
        g = imp[imp["method"] == method]
        models = [m for m in cells["model"] if m in set(g["model"])]
        order = g.groupby("feature")["rank"].mean().sort_values().index
        rows = []
        for feature in order:
            row = [feature]
            for m in models:
                hit = g[(g["model"] == m) & (g["feature"] == feature)]
                row.append(mean_se(hit["value"].iloc[0], hit["spread"].iloc[0])
                           if len(hit) and hit["spread"].notna().iloc[0]
                           else number(hit["value"].iloc[0]) if len(hit) else "")
            rows.append(row)
        out[method] = pd.DataFrame(rows, columns=["column"] + models)
    return out

"""Figures of a stored sweep, as matplotlib Figures built from store queries only.

Five kinds, each answering one question: `complexity` (where does one model's CV error stop
improving, and which cells do the picks take?), `models` (how do the models' picked cells
compare fold by fold?), `importance` (which columns does each model rely on?),
`predictions` (how close are the test predictions?) and `tree` (how does the picked
pruned tree split the rows?). Figures are made without pyplot, so no GUI backend is touched;
files are written with Agg (PNG) and the SVG backend. Colours follow the Okabe–Ito
palette, which stays distinct under the common colour-vision deficiencies."""

from __future__ import annotations

import io
import math
import textwrap
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import QueryError
from ..families import get_family
from .filenames import inside, safe_component
from ..metrics import get_metric, metric_label
from .picks import check_rule
from .queries import (complexity_table, importance_table, model_order, picked_fold_scores,
                      picks, prediction_table, sweep_facts, tree_node_table)
from .results import ComplexityTable, Picks
from ..store import Store
from .views import number, params_text, rule_label

__all__ = ["PALETTE", "complexity_figure", "models_figure", "importance_figure",
           "predictions_figure", "tree_figure", "history_figure", "save_figure", "figure_svg",
           "model_colours"]

PALETTE = ["#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442",
           "#000000"]
"""Okabe–Ito colours, ordered so the first few differ most on a white page."""

INK, MUTED, FAINT = "#1f2328", "#6e7781", "#d0d7de"
PICK_BEST, PICK_ONE_SE = "#D55E00", "#000000"

_STYLE = {"font.size": 9, "axes.titlesize": 10, "axes.labelsize": 9, "axes.edgecolor": MUTED,
          "axes.labelcolor": INK, "axes.spines.top": False, "axes.spines.right": False,
          "axes.grid": True, "axes.grid.axis": "y", "grid.color": "#eaeef2",
          "grid.linewidth": 0.8, "xtick.color": MUTED, "ytick.color": MUTED,
          "text.color": INK, "legend.frameon": False, "legend.fontsize": 8,
          "figure.facecolor": "white", "axes.facecolor": "white", "svg.fonttype": "none"}


@contextmanager
def _style():
    import matplotlib

    with matplotlib.rc_context(_STYLE):
        yield


def _figure(width: float, height: float):
    from matplotlib.figure import Figure

    return Figure(figsize=(width, height), layout="constrained")


def model_colours(store: Store, sweep_id: str) -> dict[str, str]:
    """One palette colour per model, in spec order (the same in every figure)."""
    return {m: PALETTE[i % len(PALETTE)] for i, m in enumerate(model_order(store, sweep_id))}


def _nothing_stored(what: str, sweep_id: str) -> QueryError:
    return QueryError(f"sweep {sweep_id} has no stored {what}: it ran with `explain: {{cells: "
                      "none}}` or before foldwise stored them. Run the spec again to get them.")


def _headline(fig, question: str, detail: str) -> None:
    """The figure's title: the question it answers, then what is shown."""
    width = int(fig.get_figwidth() * 12)  # characters that fit at this font size
    fig.suptitle(f"{question}\n{textwrap.fill(detail, width)}", x=0.01, ha="left",
                 fontsize=9.5, linespacing=1.5, gid="headline")


# -- (a) CV error against complexity -------------------------------------------------------
def _x_axis(result: ComplexityTable):
    """x values, axis label, log scale?, reversed? and tick labels for a complexity curve."""
    table, varying = result.table, result.varying_params
    if table["mean_leaves"].notna().all():  # a family that grows one tree: its size
        x = table["mean_leaves"].to_numpy(float)
        return x, "leaves of the fitted tree (mean over folds, log scale)", True, False, None
    if len(varying) == 1:
        name = varying[0]
        values = table[name]
        if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values):
            x = values.to_numpy(float)
            log = x.min() > 0 and x.max() / x.min() > 20
            param = get_family(result.family).params.get(name)
            simpler = param.simpler if param is not None else None
            label = f"{name}{' (log scale)' if log else ''}"
            return x, label, log, simpler == "higher", None
    ticks = ([params_text(dict(zip(varying, vals))).replace(", ", "\n")
              for vals in table[varying].itertuples(index=False)] if varying
             else ["single cell"] * len(table))
    x = table["complexity_rank"].to_numpy(float)
    return x, "cell (complexity rank, simplest left)", False, False, ticks


def complexity_figure(store: Store, model: str, sweep_id: str | None = None, *,
                      se: str = "plain"):
    """One model's CV error against complexity: mean ± SE per cell, the best and one-SE
    cells marked and the one-SE threshold drawn (line gid 'one_se_threshold')."""
    result = complexity_table(store, model, sweep_id, se=se)
    table, facts = result.table, result.facts
    sid, metric, family = facts.sweep_id, result.metric, result.family
    colour = model_colours(store, sid).get(model, PALETTE[0])
    x, xlabel, log, reverse, ticks = _x_axis(result)
    order = np.argsort(x)
    with _style():
        fig = _figure(7.2, 4.2)
        ax = fig.add_subplot()
        joined = "-" if ticks is None else "none"  # no line through an unordered grid
        ax.errorbar(x[order], table["mean"].to_numpy()[order], yerr=table["se"].to_numpy()[order],
                    color=colour, marker="o", markersize=4, linewidth=1.4, capsize=2.5,
                    linestyle=joined, label=f"CV mean ± 1 SE ({facts.n_folds} folds)", zorder=3)
        if table["test"].notna().any():
            ax.plot(x[order], table["test"].to_numpy()[order], color=MUTED,
                    linestyle=":" if ticks is None else "none", linewidth=1, marker=".",
                    markersize=4, label="test split (shown, never used to pick)", zorder=2)
        threshold = result.threshold
        best = table[table["pick"].str.contains("best")]
        if threshold is not None and len(best):
            best_mean = float(best["mean"].iloc[0])
            ax.axhspan(min(best_mean, threshold), max(best_mean, threshold), color=colour,
                       alpha=0.10, linewidth=0, zorder=1)
            op = "+" if facts.better_of() == "lower" else "−"
            line = ax.axhline(threshold, color=INK, linestyle="--", linewidth=1,
                              label=f"one-SE threshold: best {op} 1 SE = {threshold:.4g}",
                              zorder=2)
            line.set_gid("one_se_threshold")
        for rule, marker, size, col, text in (("best", "*", 15, PICK_BEST, "best"),
                                              ("one_se", "D", 7, PICK_ONE_SE, "one-SE pick")):
            hit = table["pick"].str.split().map(lambda r, rule=rule: rule in r)
            if hit.any():
                i = int(np.flatnonzero(hit.to_numpy())[0])
                ax.plot([x[i]], [table["mean"].iloc[i]], linestyle="none", marker=marker,
                        markersize=size, markerfacecolor="white" if rule == "one_se" else col,
                        markeredgecolor=col, markeredgewidth=1.6, zorder=4,
                        label=f"{text}: {number(table['mean'].iloc[i])}", gid=f"pick_{rule}")
        if log:
            ax.set_xscale("log")
        if reverse:
            ax.invert_xaxis()
        if ticks is not None:
            ax.set_xticks(x, ticks, fontsize=8)
            ax.set_xlim(x.min() - 0.5, x.max() + 0.5)
        ax.set_xlabel(f"{xlabel}\n← simpler        more complex →", color=INK)
        ax.set_ylabel(get_metric(metric).axis_label(facts.target))
        _headline(fig, f"{model}: where does CV {metric_label(metric)} stop "
                  "improving as the model grows?",
                  f"family {family}; every grid cell on the same {facts.n_folds} folds; "
                  f"{result.se} SE")
        fig.legend(loc="outside lower center", ncols=3)
    return fig


# -- (b) models side by side ---------------------------------------------------------------
def _picked(store: Store, sweep_id: str | None, rule: str | None) -> Picks:
    """Each model's cell under `rule` (default: the sweep's rule)."""
    check_rule(rule)
    facts = sweep_facts(store, sweep_id)
    return picks(store, facts.sweep_id, rule=rule or facts.rule)


def models_figure(store: Store, sweep_id: str | None = None, *, rule: str | None = None):
    """Each model's picked cell: fold scores as points (grey lines join the same fold),
    mean ± SE, and the test score."""
    result = _picked(store, sweep_id, rule)
    chosen, facts = result.table, result.facts
    sid, metric = facts.sweep_id, facts.metric
    folds = picked_fold_scores(store, sid, metric, chosen["cell_id"].tolist())
    colours = model_colours(store, sid)
    models = chosen["model"].tolist()
    with _style():
        fig = _figure(max(5.0, 1.35 * len(models) + 2.2), 4.4)
        ax = fig.add_subplot()
        wide = folds.pivot_table(index=["repeat", "fold"], columns="model", values="value")
        n = len(wide)
        offsets = np.linspace(-0.18, 0.18, n) if n > 1 else np.zeros(1)
        for j in range(n):  # paired: the same fold across models
            ax.plot(np.arange(len(models)) + offsets[j], wide.iloc[j].reindex(models).to_numpy(),
                    color=FAINT, linewidth=0.7, zorder=1)
        for i, r in enumerate(chosen.itertuples(index=False)):
            col = colours.get(r.model, PALETTE[0])
            vals = wide[r.model].to_numpy() if r.model in wide else np.array([])
            ax.scatter(i + offsets[:len(vals)], vals, s=14, color=col, alpha=0.75,
                       edgecolor="white", linewidth=0.4, zorder=2,
                       label="fold scores" if i == 0 else None)
            ax.errorbar([i + 0.36], [r.mean], yerr=[r.se], color=col, marker="_",
                        markersize=16, markeredgewidth=2.2, elinewidth=2.2, capsize=4,
                        zorder=3, label="CV mean ± 1 SE" if i == 0 else None)
            if r.test == r.test and r.test is not None:
                ax.plot([i + 0.36], [r.test], linestyle="none", marker="D", markersize=6,
                        markerfacecolor="white", markeredgecolor=INK, markeredgewidth=1.3,
                        zorder=4, label="test split score" if i == 0 else None)
        ax.set_xticks(range(len(models)), [f"{m}\n{f}" for m, f in zip(models, chosen["family"])])
        ax.set_xlim(-0.6, len(models) - 0.4)
        ax.set_ylabel(get_metric(metric).axis_label(facts.target, prefix=""))
        better = facts.better_of()
        _headline(fig, "Which model predicts best?",
                  f"{metric_label(metric)} of each model's {rule_label(result.rules[0])} cell on the "
                  f"same {n} folds ({better} is better); grey lines join one fold's scores")
        fig.legend(loc="outside lower center", ncols=3)
    return fig


# -- (c) importance ------------------------------------------------------------------------
_METHOD_AXIS = {"permutation": "rise in test {metric} when the column is shuffled ({unit})",
                "impurity": "share of squared-error reduction (sums to 1)",
                "coefficient": "SD of the column's part of the prediction ({unit})"}


def importance_figure(store: Store, sweep_id: str | None = None, *,
                      method: str = "permutation", rule: str | None = None,
                      top: int | None = None):
    """Bars of each picked cell's importances (one panel per model), whiskers = spread."""
    if method not in _METHOD_AXIS:
        raise QueryError(f"method must be one of {', '.join(_METHOD_AXIS)}, got {method!r}.")
    result = _picked(store, sweep_id, rule)
    chosen, facts, rule = result.table, result.facts, rule_label(result.rules[0])
    sid, metric, target = facts.sweep_id, facts.metric, facts.target
    imp = importance_table(store, sid, method=method).table
    imp = imp[imp["cell_id"].isin(chosen["cell_id"])]
    if imp.empty:
        raise _nothing_stored(f"{method} importances for the {rule} cells", sid)
    models = [m for m in chosen["model"] if m in set(imp["model"])]
    order = (imp.groupby("feature")["rank"].mean().sort_values(ascending=False).index.tolist())
    if top:
        order = order[-top:]
    colours = model_colours(store, sid)
    unit = (get_metric(metric).unit_text(target) if method == "permutation"
            else f"units of {target}")
    with _style():
        fig = _figure(max(6.0, 2.3 * len(models) + 1.6), 1.3 + 0.24 * len(order))
        axes = fig.subplots(1, len(models), sharey=True, sharex=method == "permutation",
                            squeeze=False)[0]
        for ax, model in zip(axes, models):
            g = imp[imp["model"] == model].set_index("feature").reindex(order)
            y = np.arange(len(order))
            spread = g["spread"].fillna(0).to_numpy()
            ax.barh(y, g["value"].to_numpy(), xerr=spread, color=colours.get(model, PALETTE[0]),
                    height=0.7, error_kw={"ecolor": INK, "elinewidth": 0.8, "capsize": 1.5})
            ax.axvline(0, color=MUTED, linewidth=0.8)
            ax.set_yticks(y, order)
            ax.grid(axis="x", color="#eaeef2")
            ax.grid(axis="y", visible=False)
            ax.set_title(model, loc="left", fontweight="bold")
        fig.supxlabel(_METHOD_AXIS[method].format(metric=metric_label(metric),
                                                   unit=unit), fontsize=9)
        _headline(fig, "Which columns does each model rely on?",
                  f"{method} importance of each model's {rule} cell, refit on "
                  "all training rows; whiskers: spread")
    return fig


# -- (d) predicted against observed --------------------------------------------------------
def predictions_figure(store: Store, sweep_id: str | None = None, *, rule: str | None = None):
    """Predicted against observed on the test split, one panel per model's picked cell."""
    result = _picked(store, sweep_id, rule)
    chosen, facts, rule = result.table, result.facts, rule_label(result.rules[0])
    sid, target = facts.sweep_id, facts.target
    if facts.task == "classification":
        raise QueryError(f"sweep {sid} predicts the classes of {target}; for their test "
                         "predictions draw `foldwise plot calibration` or `foldwise plot roc`.")
    preds = prediction_table(store, sid)
    preds = preds[preds["cell_id"].isin(chosen["cell_id"])]
    if preds.empty:
        raise _nothing_stored(f"test predictions for the {rule} cells", sid)
    colours = model_colours(store, sid)
    models = [m for m in chosen["model"] if m in set(preds["model"])]
    lo = float(min(preds["observed"].min(), preds["predicted"].min()))
    hi = float(max(preds["observed"].max(), preds["predicted"].max()))
    pad = 0.03 * (hi - lo)
    cols = min(len(models), 5)
    rows = math.ceil(len(models) / cols)
    with _style():
        fig = _figure(2.6 * cols + 0.6, 2.7 * rows + 0.8)
        axes = fig.subplots(rows, cols, sharex=True, sharey=True, squeeze=False).ravel()
        for ax, model in zip(axes, models):
            g = preds[preds["model"] == model]
            rmse = float(np.sqrt(np.mean((g["predicted"] - g["observed"]) ** 2)))
            ax.plot([lo - pad, hi + pad], [lo - pad, hi + pad], color=MUTED, linewidth=0.9,
                    linestyle="--", zorder=1)
            ax.scatter(g["observed"], g["predicted"], s=6, alpha=0.45, linewidth=0,
                       color=colours.get(model, PALETTE[0]), zorder=2, rasterized=True)
            ax.set_xlim(lo - pad, hi + pad)
            ax.set_ylim(lo - pad, hi + pad)
            ax.set_aspect("equal")
            ax.grid(axis="x", color="#eaeef2")
            ax.set_title(f"{model}: test RMSE {rmse:.3g}", loc="left", fontsize=9)
        for ax in axes[len(models):]:
            ax.set_visible(False)
        fig.supxlabel(f"observed {target}", fontsize=9)
        fig.supylabel(f"predicted {target}", fontsize=9)
        _headline(fig, "How close are the test-split predictions?",
                  f"{rule} cell of each model, refit on all training rows; "
                  "dashed line: prediction = observation")
    return fig


# -- (e) the picked pruned tree ------------------------------------------------------------
def _layout(nodes: pd.DataFrame, depth: int) -> dict[int, tuple[float, int, bool]]:
    """x (leaf order), depth and 'collapsed' for every drawn node of the tree."""
    by_id = nodes.set_index("node")
    pos: dict[int, tuple[float, int, bool]] = {}
    next_leaf = [0.0]

    def place(node: int, d: int) -> float:
        row = by_id.loc[node]
        if row["left_child"] < 0 or d >= depth:
            x = next_leaf[0]
            next_leaf[0] += 1.0
            pos[node] = (x, d, row["left_child"] >= 0)
            return x
        x = (place(int(row["left_child"]), d + 1) + place(int(row["right_child"]), d + 1)) / 2
        pos[node] = (x, d, False)
        return x

    place(0, 0)
    return pos


def _leaves_under(nodes: pd.DataFrame, node: int) -> int:
    by_id = nodes.set_index("node")
    stack, count = [node], 0
    while stack:
        row = by_id.loc[stack.pop()]
        if row["left_child"] < 0:
            count += 1
        else:
            stack += [int(row["left_child"]), int(row["right_child"])]
    return count


def tree_figure(store: Store, sweep_id: str | None = None, *, rule: str | None = None,
                model: str | None = None, depth: int = 3):
    """The picked pruned tree (refit on all training rows), its first `depth` levels drawn
    and deeper branches summarised; leaves shaded by their mean prediction."""
    from matplotlib import colormaps
    from matplotlib.colors import Normalize

    result = _picked(store, sweep_id, rule)
    chosen, sid, target = result.table, result.facts.sweep_id, result.facts.target
    trees = chosen[chosen["family"].map(lambda f: get_family(f).one_tree)]
    if model is not None:
        trees = trees[trees["model"] == model]
    if trees.empty:
        raise QueryError(f"sweep {sid} has no picked single-tree cell"
                         f"{' for model ' + repr(model) if model else ''} to draw.")
    pick = trees.iloc[0]
    nodes = tree_node_table(store, sid, pick["cell_id"])
    if nodes.empty:
        raise _nothing_stored(f"tree for cell {pick['cell_id']}", sid)
    pos = _layout(nodes, depth)
    n_drawn = int(max(x for x, _, _ in pos.values())) + 1  # drawn leaves, one x step each
    by_id = nodes.set_index("node")
    norm = Normalize(float(nodes["value"].min()), float(nodes["value"].max()))
    cmap = colormaps["cividis"]
    total_leaves = int((nodes["left_child"] < 0).sum())
    with _style():
        fig = _figure(min(20.0, max(7.0, 1.3 * n_drawn + 0.6)), 1.2 + 1.0 * (depth + 1))
        ax = fig.add_subplot()
        ax.set_axis_off()
        for node, (x, d, _) in pos.items():
            parent = int(by_id.loc[node, "parent"])
            if parent >= 0 and parent in pos:
                px, pd_, _ = pos[parent]
                ax.plot([px, x], [-pd_, -d], color=FAINT, linewidth=1.2, zorder=1)
                left = int(by_id.loc[parent, "left_child"]) == node
                ax.text((px + x) / 2, -(pd_ + d) / 2, "yes" if left else "no", fontsize=7,
                        color=MUTED, ha="center", va="center",
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none"})
        for node, (x, d, collapsed) in pos.items():
            row = by_id.loc[node]
            leaf = row["left_child"] < 0
            mean = (f"{row['label']} {row['value']:.0%}, n {int(row['n_samples'])}"
                    if isinstance(row.get("label"), str)
                    else f"mean {row['value']:.3g}, n {int(row['n_samples'])}")
            if leaf or collapsed:
                text = mean if leaf else f"… {_leaves_under(nodes, node)} leaves\n{mean}"
                face = cmap(norm(row["value"]))
                ink = "white" if norm(row["value"]) < 0.55 else INK
            else:
                rule = textwrap.fill(f"{row['rule']}?", 30, break_long_words=False)
                text, face, ink = f"{rule}\n{mean}", "#f6f8fa", INK
            ax.text(x, -d, text, ha="center", va="center", fontsize=8, color=ink, zorder=3,
                    bbox={"boxstyle": "round,pad=0.35", "fc": face, "ec": MUTED, "lw": 0.6})
        xs = [p[0] for p in pos.values()]
        ax.set_xlim(min(xs) - 0.7, max(xs) + 0.7)
        ax.set_ylim(-max(p[1] for p in pos.values()) - 0.35, 0.35)
        shown = "the whole tree" if all(not c for *_, c in pos.values()) else (
            f"first {depth} levels; '…' boxes summarise deeper branches")
        _headline(fig, f"How does {pick['model']} split the rows?",
                  f"{rule_label(pick['rule'])} cell refit on all training rows, {total_leaves} leaves "
                  f"({shown}); 'yes' follows the condition; shade and 'mean': mean {target}")
    return fig


# -- (f) a model's pick across sweeps ------------------------------------------------------
def history_figure(store: Store, sweep_id: str | None = None, *, model: str | None = None,
                   name: str | None = None, rule: str | None = None, se: str = "plain"):
    """Each model's (or one model's) picked cell across the sweeps of one spec, oldest
    left: CV mean ± SE joined by a line, the test score as a hollow diamond; a dashed rule
    where the data changed, a dotted one where only the spec did, and for one model the
    new cell written where the pick changed (lines gid 'data_changed', 'spec_changed')."""
    from .past import model_history

    if name is None and sweep_id is not None:
        name = sweep_facts(store, sweep_id).name
    result = model_history(store, model, name=name, rule=rule, se=se)
    table = result.table
    facts = sweep_facts(store, table["sweep_id"].iloc[-1])
    sweeps = list(dict.fromkeys(table["sweep_id"]))
    where = {sid: i for i, sid in enumerate(sweeps)}
    order = model_order(store, facts.sweep_id)
    colours = {m: PALETTE[(order.index(m) if m in order else len(order) + i) % len(PALETTE)]
               for i, m in enumerate(result.models)}
    firsts = table.drop_duplicates("sweep_id")
    with _style():
        fig = _figure(min(16.0, max(6.5, 0.5 * len(sweeps) + 2.8)), 4.6)
        ax = fig.add_subplot()
        for r in firsts.itertuples(index=False):
            x = where[r.sweep_id] - 0.5
            if r.data_changed or r.spec_changed:
                kind = "data" if r.data_changed else "spec"
                ax.axvline(x, color=MUTED if kind == "data" else FAINT, linewidth=1,
                           linestyle="--" if kind == "data" else ":", zorder=1,
                           gid=f"{kind}_changed")
                ax.text(x, 1.0, f" {kind} changed", transform=ax.get_xaxis_transform(),
                        rotation=90, va="top", ha="right", fontsize=7, color=MUTED)
        for i, m in enumerate(result.models):
            rows = table[(table["model"] == m) & table["mean"].notna()]
            x = rows["sweep_id"].map(where).to_numpy(float) + (i - (len(result.models) - 1)
                                                                / 2) * 0.08
            col = colours[m]
            ax.errorbar(x, rows["mean"], yerr=rows["se"], color=col, marker="o", markersize=4.5,
                        linewidth=1.4, capsize=2.5, zorder=3, label=f"{m}: CV mean ± 1 SE")
            if rows["test"].notna().any():
                ax.plot(x, rows["test"], linestyle="none", marker="D", markersize=5,
                        markerfacecolor="white", markeredgecolor=col, markeredgewidth=1.2,
                        zorder=4, label=f"{m}: test split")
            if len(result.models) == 1:
                for xi, r in zip(x, rows.itertuples(index=False)):
                    if r.pick_changed or xi == x[0]:
                        ax.annotate(textwrap.shorten(params_text(r.params, hide=get_family(
                            r.family).defaults), 40, placeholder="…"), (xi, r.mean),
                            xytext=(0, 9), textcoords="offset points", ha="center",
                            fontsize=7, color=INK)
        ticks = [f"{pd.Timestamp(t):%Y-%m-%d}\n{pd.Timestamp(t):%H:%M} ·{safe_component(s)[-4:]}"
                 for t, s in zip(firsts["started_at"], firsts["sweep_id"])]
        step = max(1, math.ceil(len(sweeps) / 16))
        ax.set_xticks(range(0, len(sweeps), step), ticks[::step], fontsize=7.5)
        ax.set_xlim(-0.6, len(sweeps) - 0.4)
        ax.set_xlabel("sweeps of the spec, oldest left (start time · end of sweep id)")
        ax.set_ylabel(get_metric(result.metric).axis_label(facts.target))
        who = result.models[0] if len(result.models) == 1 else "each model"
        rule_text = "each sweep's rule" if result.rule is None else \
            f"the {rule_label(result.rule)} rule"
        _headline(fig, f"How has {who}'s pick moved across the sweeps of '{result.name}'?",
                  f"cell picked under {rule_text} in each of {len(sweeps)} sweeps; "
                  f"{metric_label(result.metric)} ({result.better} is better), {result.se} SE")
        fig.legend(loc="outside lower center", ncols=min(4, 2 * len(result.models)))
    return fig


# -- files ---------------------------------------------------------------------------------
def save_figure(fig, stem: Path, formats=("png", "svg"), *, dpi: int = 150) -> list[Path]:
    """Write the figure as `stem.<format>` for each format (the format is appended, so a
    dot in the stem stays); return the paths. Each file must resolve inside stem's folder."""
    stem = Path(stem)
    stem.parent.mkdir(parents=True, exist_ok=True)
    paths = []
    with _style():
        for fmt in formats:
            path = inside(stem.parent, f"{stem.name}.{fmt}")
            fig.savefig(path, format=fmt, dpi=dpi, metadata=_metadata(fmt))
            paths.append(path)
    return paths


def _metadata(fmt: str) -> dict:
    """No creation dates in files, so the same store gives the same bytes."""
    return {"Date": None} if fmt == "svg" else {"Software": None} if fmt == "png" else {}


def figure_svg(fig, *, salt: str = "fig") -> str:
    """The figure as an inline <svg> element (text kept as text; ids unique per salt)."""
    import matplotlib

    buffer = io.StringIO()
    with _style(), matplotlib.rc_context({"svg.hashsalt": salt}):
        fig.savefig(buffer, format="svg", metadata={"Date": None})
    text = buffer.getvalue()
    return text[text.index("<svg"):]

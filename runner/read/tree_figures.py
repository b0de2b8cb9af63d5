"""The tree figure: the picked pruned tree drawn from left to right, each branch labelled
with the rows it takes and each end's mean as a bar. Drawn in the look of `plots.py`."""

from __future__ import annotations

import textwrap

import numpy as np
import pandas as pd

from ..errors import QueryError
from ..families import get_family
from ..names import not_found
from .explained import tree_node_table
from .plots import (FAINT, GRID, INK, MUTED, PALETTE, _figure, _headline, _nothing_stored,
                    _picked, _style)
from ..store import Store
from .views import rule_label

__all__ = ["tree_figure"]


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


def _other_side(rule: str) -> str:
    """The condition of the right branch, from the left branch's rule."""
    if " ≤ " in rule:
        return rule.replace(" ≤ ", " > ", 1)
    return "otherwise"


def _node_text(row) -> str:
    """A node's prediction: 'mean 3.2', or for classes 'pass 83%' (its most likely class
    and that class's share of its rows)."""
    if isinstance(row.get("label"), str):
        return f"{row['label']} {row['value']:.0%}"
    return f"mean {row['value']:.3g}"


def _wrapped(text: str, width: int = 32) -> str:
    return textwrap.fill(text, width, break_long_words=False, break_on_hyphens=False)


def tree_figure(store: Store, sweep_id: str | None = None, *, rule: str | None = None,
                model: str | None = None, depth: int = 3):
    """The picked pruned tree (refit on all training rows), drawn from left to right: each
    split's condition written on the branch it sends rows down, a branch's width following
    the rows that take it, and on the right each leaf's mean as a bar from the mean of all
    rows (blue above it, orange below). The first `depth` levels are drawn; deeper branches
    end in one bar for their rows."""
    from matplotlib.patches import ConnectionPatch

    result = _picked(store, sweep_id, rule)
    chosen, sid, target = result.table, result.facts.sweep_id, result.facts.target
    trees = chosen[chosen["family"].map(lambda f: get_family(f).one_tree)]
    if model is not None and model not in set(trees["model"]):
        raise QueryError(not_found("--model", model, f"no single-tree model of sweep {sid}",
                                   list(dict.fromkeys(trees["model"])),
                                   known_as="its single-tree models"))
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
    by_id = nodes.set_index("node")
    root_rows, root_mean = int(by_id.loc[0, "n_samples"]), float(by_id.loc[0, "value"])
    n_rows = int(max(x for x, _, _ in pos.values())) + 1
    deepest = max(d for _, d, _ in pos.values())
    ends = [n for n, (_, _, c) in pos.items() if c or by_id.loc[n, "left_child"] < 0]
    total_leaves = int((nodes["left_child"] < 0).sum())
    above, below = PALETTE[0], PALETTE[1]
    classes = "label" in nodes and nodes["label"].map(lambda v: isinstance(v, str)).any()
    class_colour = {c: PALETTE[i % len(PALETTE)] for i, c in
                    enumerate(sorted(nodes["label"].dropna().unique()))} if classes else {}

    def width(node: int) -> float:
        return 0.8 + 9.0 * int(by_id.loc[node, "n_samples"]) / root_rows

    with _style():
        fig = _figure(10.0, 1.5 + 0.5 * n_rows)
        tree_ax, bar_ax = fig.subplots(1, 2, sharey=True, width_ratios=[2.4, 1.0])
        tree_ax.set_axis_off()
        reach = deepest + 0.35  # where every end's branch meets its bar
        for node, (y, d, _) in pos.items():
            parent = int(by_id.loc[node, "parent"])
            if parent < 0 or parent not in pos:
                continue
            py, pdepth, _ = pos[parent]
            left = int(by_id.loc[parent, "left_child"]) == node
            condition = by_id.loc[parent, "rule"] if left else _other_side(
                str(by_id.loc[parent, "rule"]))
            end_x = reach if node in ends else d
            tree_ax.plot([pdepth, pdepth, end_x], [-py, -y, -y], color=FAINT,
                         linewidth=width(node), solid_capstyle="butt",
                         solid_joinstyle="miter", zorder=1)
            tree_ax.text(pdepth + 0.06, -y + 0.1, _wrapped(str(condition)), fontsize=7.5,
                         color=INK, ha="left", va="bottom", linespacing=1.1, zorder=3)
        for node, (y, d, collapsed) in pos.items():
            if node in ends:
                continue
            row = by_id.loc[node]
            tree_ax.plot([d], [-y], marker="o", markersize=4.5, color=INK, zorder=4)
            tree_ax.text(d - 0.04, -y - 0.14, f"{int(row['n_samples']):,} rows\n"
                         f"{_node_text(row)}", fontsize=7, color=MUTED, ha="right",
                         va="top", zorder=3)
        tree_ax.set_xlim(-0.55, reach)
        ys, means, labels, colours = [], [], [], []
        for node in ends:
            y, _, collapsed = pos[node]
            row = by_id.loc[node]
            ys.append(-y)
            means.append(float(row["value"]))
            more = f" · {_leaves_under(nodes, node)} leaves" if collapsed else ""
            if classes:
                labels.append(f"{_node_text(row)} · {int(row['n_samples']):,} rows{more}")
                colours.append(class_colour[row["label"]])
            else:
                labels.append(f"{row['value']:.3g} · {int(row['n_samples']):,} rows{more}")
                colours.append(above if row["value"] >= root_mean else below)
        means = np.array(means)
        if classes:  # shares of each end's most likely class, drawn from zero
            root_mean = 0.0
        bar_ax.barh(ys, means - root_mean, left=root_mean, height=0.55, color=colours,
                    zorder=2)
        if not classes:
            bar_ax.axvline(root_mean, color=INK, linewidth=1.0, zorder=3)
        lo, hi = min(means.min(), root_mean), max(means.max(), root_mean)
        if classes:
            hi = 1.0
        pad = 0.08 * max(hi - lo, 1e-9)
        bar_ax.set_xlim(lo - pad, hi + pad)
        for y in ys:  # each end's branch runs on to its bar
            fig.add_artist(ConnectionPatch((reach, y), (lo - pad, y), "data",
                                           "data", axesA=tree_ax, axesB=bar_ax, color=FAINT,
                                           linewidth=0.8, linestyle=(0, (1, 2))))
        bar_ax.set_yticks(ys, labels, fontsize=7.5, color=INK)
        bar_ax.yaxis.tick_right()
        bar_ax.set_ylim(-n_rows + 0.4, 0.75)
        bar_ax.grid(axis="y", visible=False)
        bar_ax.grid(axis="x", color=GRID)
        bar_ax.spines["left"].set_visible(False)
        bar_ax.tick_params(axis="y", length=0, labelright=True, labelleft=False)
        bar_ax.set_xlabel(f"share of the rows at each end in its most likely {target}"
                          if classes else f"mean {target} of the rows at each end; line: all "
                          f"{root_rows:,} rows ({root_mean:.3g})", fontsize=8)
        shown = "the whole tree" if all(not c for *_, c in pos.values()) else (
            f"first {depth} levels; a branch cut there ends in one bar for its rows")
        _headline(fig, f"How does {pick['model']} split the rows?",
                  f"{rule_label(pick['rule'])} cell refit on all training rows, "
                  f"{total_leaves} leaves ({shown}); read left to right, each branch "
                  "labelled with the rows it takes, its width following their number")
    return fig

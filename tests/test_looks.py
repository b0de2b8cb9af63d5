"""foldwise's own looks, held in place: the pruned tree drawn left to right with conditions on
its branches and leaf means as bars from the mean of all rows; the complexity curve with a
band for "within one SE of the best" and the picks in ink; our own neutrals; a grid of
prediction panels; one x scale for importance panels; plain numbers on log axes."""

from __future__ import annotations

import re
from pathlib import Path

import matplotlib.colors as mcolors
import pytest

from runner.read.explained import tree_node_table
from runner.read.plots import (NEUTRALS, PALETTE, complexity_figure, importance_figure,
                               panel_grid, predictions_figure, tree_figure)
from runner.read.queries import complexity_table, picks
from runner.read.report import render_report
from runner.read.views import complexity_view, decimals_for

ROOT = Path(__file__).resolve().parents[1]
OLD_GREYS = ["#1f2328", "#57606a", "#6e7781", "#d0d7de", "#eaeef2", "#f6f8fa"]
"""A grey scale the report and figures used to borrow; foldwise has its own (NEUTRALS)."""


def _texts(fig) -> list[str]:
    return [t.get_text() for ax in fig.axes for t in ax.texts]


def test_the_tree_reads_left_to_right_with_conditions_on_branches(explained):
    _, store, sid = explained
    fig = tree_figure(store, sid, depth=2)
    tree_ax, bar_ax = fig.axes
    texts = _texts(fig)
    assert "yes" not in texts and "no" not in texts
    conditions = [t for t in texts if " ≤ " in t or " > " in t or " in {" in t
                  or t == "otherwise"]
    assert len(conditions) >= 4  # both branches of the root and of its children
    pick = picks(store, sid, rule="one_se", model="tree").table.iloc[0]
    nodes = tree_node_table(store, sid, pick["cell_id"]).set_index("node")
    root_mean = nodes.loc[0, "value"]
    # every drawn end is a bar from the mean of all rows to the end's own mean
    bars = bar_ax.patches
    ends = [n for n in nodes.index if nodes.loc[n, "depth"] == 2
            or (nodes.loc[n, "left_child"] < 0 and nodes.loc[n, "depth"] < 2)]
    assert len(bars) == len(ends)
    assert sorted(b.get_x() + b.get_width() for b in bars) == pytest.approx(
        sorted(nodes.loc[ends, "value"]))
    assert [b.get_x() for b in bars] == pytest.approx([root_mean] * len(bars))
    # branches get wider with the rows they carry: the root's two branches are the widest
    widths = sorted((ln.get_linewidth() for ln in tree_ax.get_lines()
                     if len(ln.get_xdata()) == 3), reverse=True)
    root_rows = nodes.loc[0, "n_samples"]
    children = nodes.loc[[nodes.loc[0, "left_child"], nodes.loc[0, "right_child"]], "n_samples"]
    assert widths[:2] == pytest.approx(sorted(0.8 + 9.0 * children / root_rows, reverse=True))


def test_complexity_figure_band_picks_in_ink_and_plain_log_ticks(explained):
    _, store, sid = explained
    fig = complexity_figure(store, "ridge", sid)
    (ax,) = fig.axes
    assert not [ln for ln in ax.get_lines() if ln.get_linestyle() == "--"]  # no dashed bar
    table = complexity_table(store, "ridge", sid)
    best = table.table[table.table["pick"].str.contains("best")]["mean"].iloc[0]
    (band,) = [p for p in ax.patches if p.get_label() == "within one SE of the best"]
    extent = band.get_extents().transformed(ax.transData.inverted())
    assert sorted([extent.y0, extent.y1]) == pytest.approx(sorted([best, table.threshold]))
    palette = {mcolors.to_hex(c) for c in PALETTE}
    for gid in ("pick_best", "pick_one_se"):
        (mark,) = [ln for ln in ax.get_lines() if ln.get_gid() == gid]
        assert mcolors.to_hex(mark.get_markeredgecolor()) == NEUTRALS["ink"]
        assert mcolors.to_hex(mark.get_markeredgecolor()) not in palette
    fig.canvas.draw()
    labels = [t.get_text() for t in ax.get_xticklabels() if t.get_text()]
    assert labels and all(re.fullmatch(r"[0-9.]+", t) for t in labels), labels


def test_path_table_says_each_cells_standing_and_its_distance_from_the_best(explained):
    _, store, sid = explained
    result = complexity_table(store, "tree", sid)
    view = complexity_view(result)
    assert list(view.table.columns)[:2] == ["standing", "rank"]
    assert "within 1 SE" not in view.table.columns and "pick" not in view.table.columns
    df = result.table
    for shown, pick, within in zip(view.table["standing"], df["pick"], df["within_one_se"]):
        if "best" in pick:
            assert "best" in shown
        elif "one_se" in pick:
            assert shown == "one-SE pick"
        else:
            assert (shown == "within one SE") == bool(within)
    best = df[df["pick"].str.contains("best")]["mean"].iloc[0]
    se_best = result.threshold - best
    places = decimals_for(se_best)  # the gap is shown to the SE's second significant digit
    for text, mean in zip(view.table["above best"], df["mean"]):
        gap, in_se = re.fullmatch(r"(\S+) = (\S+) SE", text).groups()
        assert float(gap) == pytest.approx(mean - best, abs=0.51 * 10.0 ** -places)
        assert float(in_se) == pytest.approx((mean - best) / se_best, rel=0.05, abs=0.005)


def test_predictions_are_a_grid_and_importance_panels_share_one_scale(explained):
    _, store, sid = explained
    fig = predictions_figure(store, sid)
    shown = [ax for ax in fig.axes if ax.get_visible()]
    assert len(shown) == 3 and fig.get_figwidth() / fig.get_figheight() < 3
    assert [panel_grid(n) for n in (1, 2, 3, 4, 5, 6, 7, 9)] == [
        (1, 1), (1, 2), (1, 3), (2, 2), (2, 3), (2, 3), (3, 3), (3, 3)]
    fig = importance_figure(store, sid, method="impurity")
    limits = {ax.get_xlim() for ax in fig.axes}
    assert len(fig.axes) == 2 and len(limits) == 1


def test_the_old_grey_scale_is_gone_from_report_and_code(explained):
    _, store, sid = explained
    page = render_report(store, sid).lower()
    assert not [g for g in OLD_GREYS if g in page]
    for neutral in NEUTRALS.values():
        assert neutral in page
    sources = [p for p in (ROOT / "runner").rglob("*") if p.suffix in (".py", ".j2")]
    found = {str(p.relative_to(ROOT)): g for p in sources for g in OLD_GREYS
             if g in p.read_text(encoding="utf-8").lower()}
    assert not found
    assert "leader" not in page

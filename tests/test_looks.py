"""foldwise's own looks, held in place: the pruned tree drawn left to right with conditions on
its branches and leaf means as bars from the mean of all rows; the complexity curve with a
band for "within one SE of the best" and the picks in ink; our own neutrals; a grid of
prediction panels; one x scale for importance panels; plain numbers on log axes."""

from __future__ import annotations

import re
from pathlib import Path

import matplotlib.colors as mcolors
import numpy as np
import pandas as pd
import pytest

from runner.read.explained import tree_node_table
from runner.read.plots import (NEUTRALS, PALETTE, complexity_figure, importance_figure,
                               models_figure,
                               panel_grid, predictions_figure)
from runner.read.queries import complexity_table, picks
from runner.read.report import render_report
from runner.read.tree_figures import tree_figure
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


def _extents(fig, texts):
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    return [t.get_window_extent(renderer) for t in texts]


@pytest.mark.parametrize("model", ["ridge", "tree", "forest"])
def test_complexity_names_run_into_no_other_text_nor_an_se_bar(explained, model):
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    _, store, sid = explained
    fig = complexity_figure(store, model, sid)
    FigureCanvasAgg(fig)
    (ax,) = fig.axes
    (label,) = [t for t in ax.texts if t.get_text().startswith("one-SE threshold")]
    names = [t for t in ax.texts if t is not label]
    boxes = _extents(fig, names + [label])
    assert names and all(box.width > 0 for box in boxes)
    for i, a in enumerate(boxes):
        for b in boxes[i + 1:]:
            assert not a.overlaps(b), [t.get_text() for t in names + [label]]
    # an unordered grid draws each cell's SE as a vertical bar: no name may sit across it
    bars = [seg for c in ax.collections if c.get_gid() is None and hasattr(c, "get_segments")
            for seg in c.get_segments()]
    for seg in bars:
        x_pixel = ax.transData.transform(seg[0])[0]
        for box in boxes[:-1]:
            assert not box.x0 <= x_pixel <= box.x1


def test_legends_explain_marks_in_ink_never_in_a_models_colour(explained):
    import matplotlib.colors as mc
    from matplotlib.collections import Collection
    from matplotlib.lines import Line2D

    _, store, sid = explained
    palette = {mc.to_hex(c) for c in PALETTE}
    fig = models_figure(store, sid)
    (legend,) = fig.legends
    colours = set()
    for mark in legend.findobj(lambda a: isinstance(a, (Line2D, Collection))):
        if isinstance(mark, Collection):
            colours |= {mc.to_hex(c) for c in mark.get_facecolor()}
        else:
            colours |= {mc.to_hex(mark.get_color()), mc.to_hex(mark.get_markeredgecolor())}
    assert colours and not colours & palette, colours


@pytest.mark.parametrize("method", ["impurity", "coefficient"])
def test_importance_whiskers_of_a_share_or_an_sd_stop_at_zero(explained, method):
    _, store, sid = explained
    fig = importance_figure(store, sid, method=method)
    lows = [seg[:, 0].min() for ax in fig.axes for c in ax.collections
            for seg in c.get_segments()]
    assert lows and min(lows) >= 0
    assert all(ax.get_xlim()[0] > -0.05 * ax.get_xlim()[1] for ax in fig.axes)


def test_a_panel_above_an_empty_slot_numbers_its_x_axis():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from runner.read.plots import label_open_bottoms

    fig = Figure(figsize=(9, 6))
    FigureCanvasAgg(fig)
    axes = fig.subplots(2, 3, sharex=True, sharey=True, squeeze=False).ravel()
    for ax in axes[:5]:
        ax.plot([0, 10], [0, 10])
    axes[5].set_visible(False)
    label_open_bottoms(axes, 5, 3)
    fig.canvas.draw()
    numbered = [any(t.get_visible() and t.get_text() for t in ax.get_xticklabels())
                for ax in axes[:5]]
    assert numbered == [False, False, True, True, True]


def test_prediction_panels_give_the_test_rmse_to_four_digits(explained):
    _, store, sid = explained
    fig = predictions_figure(store, sid)
    titles = [ax.get_title(loc="left") for ax in fig.axes if ax.get_visible()]
    shown = [re.fullmatch(r"\w+: test RMSE (\S+)", t).group(1) for t in titles]
    assert shown and all(len(s.replace(".", "").lstrip("0")) == 4 for s in shown), shown


def test_history_legend_fits_the_figure_and_counts_sweeps_in_words(explained):
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    from runner.read.history_figures import history_figure

    _, store, sid = explained
    fig = history_figure(store, sid)
    FigureCanvasAgg(fig)
    (legend,) = fig.legends
    fig.canvas.draw()
    box, page = legend.get_window_extent(), fig.bbox
    assert page.x0 <= box.x0 and box.x1 <= page.x1 and page.y0 <= box.y0
    labels = [t.get_text() for t in legend.get_texts()]
    assert labels[:3] == ["ridge", "tree", "forest"] and "test split" in labels
    assert " 1 sweeps" not in fig._suptitle.get_text()


@pytest.mark.parametrize("marked_x, side", [([1.0, 2.0], 1.0), ([8.0, 9.5], 0.0),
                                            ([3.0, 9.0], 0.0), ([0.5, 6.0], 1.0)])
def test_the_threshold_label_goes_to_the_end_farther_from_the_picks(marked_x, side):
    from matplotlib.figure import Figure

    from runner.read.plots import _clear_side

    ax = Figure().add_subplot()
    ax.set_xlim(0, 10)
    assert _clear_side(ax, marked_x, [0, 1], 0.0) == side
    ax.invert_xaxis()  # a reversed axis (larger alpha simpler, drawn left) swaps the ends
    assert _clear_side(ax, marked_x, [0, 1], 0.0) == 1.0 - side


def _svg_points(d: str) -> np.ndarray:
    """The points of an SVG path's data (every coordinate pair, in order)."""
    numbers = [float(v) for v in re.findall(r"-?[0-9.]+", d)]
    return np.array(numbers).reshape(-1, 2)


def test_neighbouring_models_differ_by_shape_and_pattern_not_by_colour_alone():
    from matplotlib.markers import MarkerStyle

    from runner.read.looks import PALETTE, look_of, look_svg

    looks = [look_of(i) for i in range(72)]
    assert len({lk.marker for lk in looks[:6]}) == 6 and len({lk.dash for lk in looks[:6]}) == 6
    assert len({(lk.marker, lk.dash) for lk in looks[:36]}) == 36  # in greyscale too
    assert len(set(looks)) == 72 and [lk.colour for lk in looks[:8]] == PALETTE
    for look in looks[:6]:
        svg = look_svg(look)
        assert f'data-marker="{look.marker}"' in svg and f'stroke="{look.colour}"' in svg
        # the point is matplotlib's own outline of the marker (MarkerStyle's path), 8 px
        # across, centred on the swatch (20, 7), y pointing down
        style = MarkerStyle(look.marker)
        outline = style.get_path().transformed(style.get_transform()).vertices
        d = re.search(r'<path d="([^"]+)"', svg).group(1)
        drawn = _svg_points(d)
        expected = np.column_stack([20 + 8 * outline[:, 0], 7 - 8 * outline[:, 1]])
        expected = expected[:len(drawn)]  # a closing vertex is Z, not a point
        assert np.allclose(drawn, expected, atol=0.006)
        # the pattern is matplotlib's, scaled by the line's width of 1.6 as matplotlib does
        dash = re.search(r'data-dash="([^"]+)"', svg).group(1)
        assert dash == ("solid" if look.dash == "solid" else
                        " ".join(f"{v * 1.6:g}" for v in look.dash[1]))
        assert ("stroke-dasharray" in svg) == (look.dash != "solid")


def test_the_report_shows_each_models_shape_and_pattern_beside_its_name(explained):
    from runner.read.looks import look_of

    _, store, sid = explained
    page = render_report(store, sid)
    assert "Colours of the models" not in page and "chips" not in page
    assert "Each model wears one colour, point shape and line pattern in every figure" in page
    legend = page[page.index('<span class="looks">'):]
    legend = legend[:legend.index("</p>")]
    shown = re.findall(r'<span><svg class="look"[^>]* data-marker="([^"]+)" '
                       r'data-dash="([^"]+)"><title>([^<]+)</title>.*?</svg> (\w+)</span>',
                       legend)
    assert [name for *_, name in shown] == ["ridge", "tree", "forest"]
    assert [m for m, *_ in shown] == ["o", "s", "^"]
    assert len({dash for _, dash, *_ in shown}) == 3
    assert [words for _, _, words, _ in shown] == [look_of(i).words for i in range(3)]
    assert shown[0][2] == "round points, solid line"


def test_roc_curves_of_several_models_differ_by_shape_and_pattern(tmp_path):
    """Every model's curve is drawn in one panel: each wears its own point shape and line
    pattern as well as its colour, and so does its legend entry."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    from runner.read.class_figures import roc_figure
    from runner.read.looks import look_of
    from runner.store import Store
    from runner.write.engine import run_sweep
    from runner.write.spec import parse_spec

    rng = np.random.default_rng(4)
    x = rng.normal(size=(150, 2))
    df = pd.DataFrame({"a": x[:, 0], "b": x[:, 1],
                       "y": np.where(x[:, 0] + 0.5 * rng.normal(size=150) > 0, "up", "down")})
    df.to_csv(tmp_path / "d.csv", index=False)
    path = tmp_path / "spec.yaml"
    path.write_text("name: r\ndata: {path: d.csv, target: y}\ntest: {fraction: 0.3, seed: 1}\n"
                    "folds: {k: 3, seed: 2}\nmetrics: [log_loss]\nstore: s.duckdb\n"
                    "models:\n  logit: {family: linear}\n  tree: {family: pruned_tree}\n"
                    "  forest: {family: forest, grid: {n_estimators: [10]}}\n")
    store = Store(run_sweep(parse_spec(path.read_text(), source=path), jobs=1).store_path)
    fig = roc_figure(store)
    FigureCanvasAgg(fig).draw()
    (ax,) = [a for a in fig.axes if a.get_visible()]
    curves = {ln.get_gid()[len("roc "):]: ln for ln in ax.get_lines()
              if str(ln.get_gid()).startswith("roc ")}
    assert list(curves) == ["logit", "tree", "forest"]
    drawn = [(ln.get_marker(), ln.get_linestyle(), mcolors.to_hex(ln.get_color()))
             for ln in curves.values()]
    assert [m for m, *_ in drawn] == [look_of(i).marker for i in range(3)] == ["o", "s", "^"]
    assert [s for _, s, _ in drawn] == ["-", "--", "--"]  # solid, then two patterns
    assert [curves[m]._unscaled_dash_pattern for m in ("tree", "forest")] == [
        look_of(1).dash, look_of(2).dash]
    legend = {t.get_text().split(" (")[0]: h for t, h in
              zip(ax.get_legend().get_texts(), ax.get_legend().legend_handles)}
    assert [legend[m].get_marker() for m in curves] == ["o", "s", "^"]

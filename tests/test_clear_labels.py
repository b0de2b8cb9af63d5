"""Words and marks on the figures stay clear of each other: measured as drawn, in display
pixels (fig.canvas.draw(), then each artist's window extent), on the demos' greenhouse and
grades data and on hand-made cells taken from the demo sweeps or built to corner a case."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from runner.read.plots import complexity_figure, fill_by_clause
from runner.read.queries import complexity_table

LINEAR_SPEC = """
name: greenhouse-linear
data:
  path: greenhouse.csv
  target: yield_kg_m2
  drop: [bay_row]
  categorical: [cultivar, glazing, irrigation]
test: {fraction: 0.2, seed: 11}
folds: {k: 5, repeats: 2, seed: 2026, groups: bay_id}
metrics: [rmse]
pick: one_se
store: store.duckdb
explain: {cells: none}
models:
  ridge: {family: linear, grid: {penalty: l2, alpha: {log: [0.01, 1000], n: 11}}}
  lasso: {family: linear, grid: {penalty: l1, alpha: {log: [0.001, 3], n: 10}}}
"""
"""The ridge and lasso grids, folds and test split of specs/greenhouse.yaml: there the test
score of each one-SE cell lies just above its CV mean, where the pick's name used to go."""


@pytest.fixture(scope="module")
def linear(tmp_path_factory):
    """(store, sweep id) of the demo's ridge and lasso grids on the shipped greenhouse data."""
    from runner.store import Store
    from runner.write.engine import run_sweep
    from runner.write.spec import load_spec

    folder = tmp_path_factory.mktemp("linear")
    data = Path(__file__).resolve().parents[1] / "specs" / "data" / "greenhouse.csv"
    (folder / "greenhouse.csv").write_bytes(data.read_bytes())
    (folder / "spec.yaml").write_text(LINEAR_SPEC)
    result = run_sweep(load_spec(folder / "spec.yaml"), jobs=1)
    return Store(result.store_path), result.sweep_id


def _drawn(fig):
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    fig.canvas.draw()
    return fig.canvas.get_renderer()


def _mark_box(ax, line, x, y):
    """The pixels a marker of `line` drawn at (x, y) covers: its size and edge, in points."""
    from matplotlib.transforms import Bbox

    half = (line.get_markersize() + line.get_markeredgewidth()) / 2 * ax.figure.dpi / 72
    cx, cy = ax.transData.transform((x, y))
    return Bbox.from_extents(cx - half, cy - half, cx + half, cy + half)


def _bar_box(ax, x, low, high):
    """A cell's ±1 SE span at its x, one pixel wide."""
    from matplotlib.transforms import Bbox

    (x0, y0), (_, y1) = ax.transData.transform([(x, low), (x, high)])
    return Bbox.from_extents(x0 - 0.5, y0, x0 + 0.5, y1)


@pytest.mark.parametrize("model", ["ridge", "lasso"])
def test_the_one_se_name_clears_its_cells_test_cross_and_se_bar(linear, model):
    store, sid = linear
    table = complexity_table(store, model, sid).table
    i = int(np.flatnonzero(table["pick"].str.contains("one_se"))[0])
    assert "best" not in table["pick"].iloc[i]
    mean, se, test = (float(table[c].iloc[i]) for c in ("mean", "se", "test"))
    assert mean < test < mean + 0.25  # the case drawn: the cross just above the CV mean
    fig = complexity_figure(store, model, sid)
    (ax,) = fig.axes
    renderer = _drawn(fig)
    (name,) = [t for t in ax.texts if t.get_text().startswith("one-SE pick")]
    (crosses,) = [ln for ln in ax.get_lines() if ln.get_label().startswith("test split")]
    (ring,) = [ln for ln in ax.get_lines() if ln.get_gid() == "pick_one_se"]
    x = float(ring.get_xdata()[0])
    assert crosses.get_xdata()[i] == x and crosses.get_ydata()[i] == test
    text = name.get_window_extent(renderer)
    assert text.width > 0 and text.height > 0
    assert not text.overlaps(_mark_box(ax, crosses, x, test))
    assert not text.overlaps(_bar_box(ax, x, mean - se, mean + se))
    assert not text.overlaps(_mark_box(ax, ring, x, mean))


def _everything_else(ax, label, *, keep_threshold=False):
    """Pixel boxes of every marker (lines' and scatters') and every other text in `ax`, and
    the pixel paths of its drawn lines and SE bars, leaving out `label` (and the threshold
    line unless `keep_threshold`)."""
    from matplotlib.collections import LineCollection, PathCollection

    boxes, paths = [], []
    for line in ax.get_lines():
        if line.get_gid() == "one_se_threshold" and not keep_threshold:
            continue
        if line.get_marker() not in ("None", "", " ", None):
            boxes += [_mark_box(ax, line, x, y) for x, y in line.get_xydata()
                      if np.isfinite(y)]
        if line.get_linestyle() not in ("None", "", " "):
            paths.append(line.get_transform().transform_path(line.get_path()))
    for c in ax.collections:
        if isinstance(c, PathCollection):
            half = (np.sqrt(c.get_sizes().max()) + c.get_linewidths().max()) / 2
            half *= ax.figure.dpi / 72
            for cx, cy in ax.transData.transform(c.get_offsets()):
                boxes.append(_box(cx - half, cy - half, cx + half, cy + half))
        elif isinstance(c, LineCollection):
            paths += [c.get_transform().transform_path(p) for p in c.get_paths()]
    boxes += [t.get_window_extent() for t in ax.texts if t is not label]
    return boxes, paths


def _assert_pick_names_clear(fig) -> None:
    """Both pick names are drawn, and neither covers a box or is crossed by a line."""
    (ax,) = fig.axes
    _drawn(fig)
    names = [t for t in ax.texts if t.get_gid() == "pick_name"]
    assert sorted(t.get_text().split("\n")[0] for t in names) == ["best", "one-SE pick"]
    for name in names:
        box = name.get_window_extent()
        boxes, paths = _everything_else(ax, name, keep_threshold=True)
        assert not [b for b in boxes if box.overlaps(b)], name.get_text()
        assert not [p for p in paths if p.intersects_bbox(box, filled=False)], name.get_text()


def _box(x0, y0, x1, y1):
    from matplotlib.transforms import Bbox

    return Bbox.from_extents(x0, y0, x1, y1)


def _threshold_name_is_clear(fig):
    (ax,) = fig.axes
    _drawn(fig)
    (label,) = [t for t in ax.texts if t.get_gid() == "one_se_threshold_label"]
    box = label.get_window_extent()
    assert box.width > 0 and ax.bbox.x0 <= box.x0 and box.x1 <= ax.bbox.x1
    boxes, paths = _everything_else(ax, label)
    assert len(boxes) > 10 and paths
    covered = [b for b in boxes if box.overlaps(b)]
    crossed = [p for p in paths if p.intersects_bbox(box, filled=False)]
    assert not covered and not crossed, (box, covered, len(crossed))


@pytest.mark.parametrize("model", ["ridge", "lasso"])
def test_the_threshold_name_clears_every_mark_line_and_name(linear, model):
    # lasso: test crosses lie just above the threshold at the end away from the picks
    store, sid = linear
    _threshold_name_is_clear(complexity_figure(store, model, sid))


def _figure_of(monkeypatch, family, grid, mean, se, test, pick, *, metric="rmse",
               target="yield_kg_m2"):
    """The complexity figure of cells given as numbers (`grid`: each shown parameter's
    value per cell, simplest cell first), drawn by complexity_figure as from a store."""
    import json

    import pandas as pd

    import runner.read.plots as plots
    from runner.read.results import ComplexityTable, SweepFacts

    n = len(mean)
    table = pd.DataFrame({"complexity_rank": range(n)})
    for name, values in grid.items():
        table[name] = pd.Series(values, dtype=object)
    table = table.assign(
        cell_id=[f"c{i}" for i in range(n)],
        params=[json.dumps({k: v[i] for k, v in grid.items()}) for i in range(n)],
        metric=metric, mean=mean, se=se, n=10, mean_leaves=np.nan, test=test, pick=pick,
        excluded="")
    best = table["pick"].str.contains("best")
    threshold = float(table["mean"][best].iloc[0] + table["se"][best].iloc[0])
    table["within_one_se"] = table["mean"] <= threshold
    facts = SweepFacts("s", "demo", target, (metric,), {metric: "lower"}, 5, 2, "one_se")
    result = ComplexityTable(facts, "m", family, metric, "plain", table, threshold,
                             tuple(grid))
    monkeypatch.setattr(plots, "complexity_table", lambda *a, **k: result)
    monkeypatch.setattr(plots, "model_looks", lambda *a: {})
    return complexity_figure(None, "m", "s")


def _forest_figure(monkeypatch, leaf, share, mean, se, test, pick, **facts):
    """Four forest cells (an unordered grid, so each cell's SE is a vertical bar)."""
    from matplotlib.collections import LineCollection

    fig = _figure_of(monkeypatch, "forest", {"min_samples_leaf": leaf, "max_features": share},
                     mean, se, test, pick, **facts)
    bars = [c for c in fig.axes[0].collections if isinstance(c, LineCollection)]
    assert len(bars) == 1 and len(bars[0].get_segments()) == 4  # drawn as SE bars
    return fig


def test_the_threshold_name_clears_an_unordered_grids_se_bars(monkeypatch):
    # the demo forest's four cells (specs/greenhouse.yaml, CV RMSE over 5 x 2 grouped folds):
    # the first cell's SE bar crosses the threshold at the end away from the picks
    fig = _forest_figure(monkeypatch, [5, 5, 1, 1], [0.33, 1.0, 0.33, 1.0],
                         [5.785305, 5.589417, 5.721007, 5.579729],
                         [0.141305, 0.110003, 0.156187, 0.112894],
                         [5.396898, 5.557469, 5.318886, 5.505793], ["", "one_se", "", "best"])
    _threshold_name_is_clear(fig)


def test_a_picks_name_beside_its_mark_clears_the_threshold_line(monkeypatch):
    # the demo's class forest (specs/grades.yaml, CV log loss over 5 x 2 folds): the one-SE
    # cell's mean lies just under the threshold, whose line ran through its name
    fig = _forest_figure(monkeypatch, [10, 10, 3, 3], ["sqrt", 0.5, "sqrt", 0.5],
                         [0.678466, 0.660312, 0.651151, 0.641906],
                         [0.008994, 0.009864, 0.009577, 0.010919],
                         [0.620912, 0.610878, 0.596056, 0.587468], ["", "", "one_se", "best"],
                         metric="log_loss", target="grade")
    _assert_pick_names_clear(fig)


@pytest.fixture(scope="module", params=["three", "two"])
def graded(request, tmp_path_factory):
    """(store, sweep id) of a small class sweep of the shipped grades demo data: all three
    grades, or grades A and B only (one ROC panel, the narrowest figure)."""
    import pandas as pd

    from runner.store import Store
    from runner.write.engine import run_sweep
    from runner.write.spec import load_spec

    folder = tmp_path_factory.mktemp(request.param)
    data = pd.read_csv(Path(__file__).resolve().parents[1] / "specs" / "data" / "grades.csv")
    if request.param == "two":
        data = data[data["grade"] != "C"]
    data.to_csv(folder / "grades.csv", index=False)
    (folder / "spec.yaml").write_text(
        "name: grades\ndata: {path: grades.csv, target: grade, drop: [scale_battery_pct]}\n"
        "test: {fraction: 0.2, seed: 11}\nfolds: {k: 3, repeats: 1, seed: 2026}\n"
        "metrics: [log_loss]\nstore: store.duckdb\nexplain: {cells: picked}\nmodels:\n"
        "  logistic: {family: linear, grid: {penalty: l2, alpha: [0.001, 0.01]}}\n")
    result = run_sweep(load_spec(folder / "spec.yaml"), jobs=1)
    return Store(result.store_path), result.sweep_id


@pytest.mark.parametrize("kind", ["roc", "calibration"])
def test_the_class_figures_side_label_stays_below_the_headline_on_the_page(graded, kind):
    from runner.read.figures import make_figure

    store, sid = graded
    fig = make_figure(kind, store, sid)
    _drawn(fig)
    side, headline = fig._supylabel, fig._suptitle
    assert side.get_text() and headline.get_gid() == "headline"
    box, top = side.get_window_extent(), headline.get_window_extent()
    assert box.height > 0 and fig.bbox.y0 <= box.y0
    assert box.y1 < top.y0, (side.get_text(), box, top)
    assert fig.bbox.x0 <= top.x0 and top.x1 <= fig.bbox.x1, (headline.get_text(), top)


def test_the_test_mark_sits_beside_the_cv_mean_and_its_se_bar(tmp_path):
    # a test score equal to the CV mean (the demo forest's differ by 0.03 RMSE) used to
    # hide the mean's tick under the diamond
    from runner.read.plots import models_figure

    from .store_builder import write_sweep

    scores = {"ridge": [[6.2, 6.5, 6.9, 6.4, 6.6, 6.3, 6.8, 6.5, 6.4, 6.7]],
              "forest": [[5.4, 5.7, 5.5, 5.8, 5.6, 5.3, 5.9, 5.6, 5.5, 5.6]]}
    store = write_sweep(tmp_path / "s.duckdb", scores, k=5, repeats=2)
    fig = models_figure(store)
    (ax,) = fig.axes
    _drawn(fig)
    tests = [ln for ln in ax.get_lines() if ln.get_marker() == "D"]
    bars = ax.containers  # one per model: the mean's tick, the caps, the SE bar
    assert len(tests) == 2 and len(bars) == 2
    for test, (mean, caps, (bar,)) in zip(tests, bars):
        ((cx, cy),) = test.get_transform().transform(test.get_xydata())
        ((mx, my),) = mean.get_transform().transform(mean.get_xydata())
        assert cy == pytest.approx(my)  # drawn at the CV mean's height, as stored
        half = (test.get_markersize() + test.get_markeredgewidth()) / 2 * fig.dpi / 72
        diamond = _box(cx - half, cy - half, cx + half, cy + half)
        for tick in (mean, *caps):
            ((tx, ty),) = tick.get_transform().transform(tick.get_xydata())
            reach = (tick.get_markersize() + tick.get_markeredgewidth()) / 2 * fig.dpi / 72
            assert not diamond.overlaps(_box(tx - reach, ty - reach, tx + reach, ty + reach))
        for path in bar.get_paths():
            assert not path.transformed(bar.get_transform()).intersects_bbox(diamond,
                                                                              filled=False)


def test_a_picks_name_above_its_cell_goes_past_the_threshold_line(monkeypatch):
    # a one-SE cell with a small SE under a best cell with a large one: the top of its SE
    # bar ends 0.12 under the threshold, so a name just above the bar sat across the line
    fig = _figure_of(monkeypatch, "linear", {"alpha": [1000.0, 100.0, 10.0, 1.0, 0.1]},
                     [7.2, 6.45, 6.42, 6.40, 6.41], [0.15, 0.03, 0.1, 0.2, 0.2],
                     [7.1, 6.40, 6.5, 6.45, 6.46], ["", "one_se", "", "best", ""])
    _assert_pick_names_clear(fig)


def test_every_test_mark_beside_a_mean_lies_inside_the_axes(tmp_path):
    # drawn in an offset transform, the diamonds must still widen the y range to reach them
    from runner.read.plots import models_figure

    from .store_builder import write_sweep

    scores = {"ridge": [[6.2, 6.5, 6.9, 6.4, 6.6, 6.3, 6.8, 6.5, 6.4, 6.7]],
              "forest": [[5.4, 5.7, 5.5, 5.8, 5.6, 5.3, 5.9, 5.6, 5.5, 5.6]]}
    store = write_sweep(tmp_path / "s.duckdb", scores, k=5, repeats=2,
                        tests={"ridge": [7.6], "forest": [4.6]})
    fig = models_figure(store)
    (ax,) = fig.axes
    _drawn(fig)
    tests = [ln for ln in ax.get_lines() if ln.get_marker() == "D"]
    assert [float(ln.get_ydata()[0]) for ln in tests] == [7.6, 4.6]
    for line in tests:
        ((cx, cy),) = line.get_transform().transform(line.get_xydata())
        assert ax.bbox.x0 < cx < ax.bbox.x1 and ax.bbox.y0 < cy < ax.bbox.y1


@pytest.mark.parametrize("first", [True, False])
def test_a_picks_name_at_an_end_cell_stays_inside_the_axes(monkeypatch, first):
    # the simplest (or the most complex) cell is best and the one-SE pick: its name,
    # centred on it, ran out of the axes over the tick numbers
    means = [6.4, 6.6, 6.9, 7.3] if first else [7.3, 6.9, 6.6, 6.4]
    fig = _figure_of(monkeypatch, "linear", {"alpha": [1000.0, 100.0, 10.0, 1.0]},
                     means, [0.1, 0.1, 0.1, 0.1], [m + 0.3 for m in means],
                     ["best one_se", "", "", ""] if first else ["", "", "", "best one_se"])
    (ax,) = fig.axes
    _drawn(fig)
    (name,) = [t for t in ax.texts if t.get_gid() == "pick_name"]
    assert name.get_text() == "best and one-SE pick\n6.4"
    box = name.get_window_extent()
    assert ax.bbox.x0 <= box.x0 and box.x1 <= ax.bbox.x1, (box, ax.bbox)
    boxes, paths = _everything_else(ax, name, keep_threshold=True)
    assert not [b for b in boxes if box.overlaps(b)]
    assert not [p for p in paths if p.intersects_bbox(box, filled=False)]


def test_placing_words_draws_no_missing_glyph_for_a_hostile_label(tmp_path):
    # the layout pass that places the words comes before the file is drawn: a control
    # character in a stored label must be gone by then too, or matplotlib warns of a glyph
    import warnings

    from .store_builder import write_sweep

    label = "bell\x07"
    cells = [[6.2, 6.5, 6.9, 6.4, 6.6], [6.0, 6.2, 6.3, 6.1, 6.4], [6.1, 6.3, 6.2, 6.0, 6.5]]
    store = write_sweep(tmp_path / "s.duckdb", {label: cells}, k=5, repeats=1)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fig = complexity_figure(store, label)
        _drawn(fig)
    (ax,) = fig.axes
    assert [t for t in ax.texts if t.get_gid() == "pick_name"]
    assert fig._suptitle.get_text().startswith("bell : where does CV RMSE")


@pytest.mark.parametrize("width", [60, 90, 100, 105, 110])
def test_a_headline_breaks_between_its_clauses_where_they_fit(width):
    # the calibration figure's detail line over three panels: it used to break inside
    # 'dashed: perfectly calibrated' or 'dot area: rows in the bin'
    detail = ("one-SE cell of each model refit on all training rows, 300 test rows of grade; "
              "dashed: perfectly calibrated; dot area: rows in the bin")
    lines = fill_by_clause(detail, width).splitlines()
    for phrase in ("dashed: perfectly calibrated", "dot area: rows in the bin"):
        assert any(phrase in line for line in lines), lines
    assert all(len(line) <= width + 1 for line in lines), lines  # + its ';'
    assert " ".join(lines) == detail  # nothing lost or added but the breaks

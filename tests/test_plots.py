"""Figures: every kind renders to a PNG of the size asked for, and what a figure draws is what
the store holds (the one-SE threshold line is the pick's threshold)."""

from __future__ import annotations

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

from runner.cli import main
from runner.errors import QueryError
from runner.read.queries import complexity_table, picks
from runner.read.figures import KINDS, make_figure
from runner.read.plots import complexity_figure, models_figure, save_figure

OPTIONS = {"complexity": {"model": "tree"}, "models": {}, "importance": {},
           "predictions": {}, "tree": {"depth": 2}, "history": {"model": "ridge"}}
CLASS_KINDS = {"calibration", "roc"}  # drawn from a class sweep (tests/test_classes.py)


def test_every_kind_is_tried():
    assert set(OPTIONS) | CLASS_KINDS == set(KINDS)


@pytest.mark.parametrize("kind", sorted(OPTIONS))
def test_every_kind_renders_a_png_of_its_size(explained, tmp_path, kind):
    _, store, sid = explained
    fig = make_figure(kind, store, sid, **OPTIONS[kind])
    (png, svg) = save_figure(fig, tmp_path / kind, ("png", "svg"), dpi=80)
    width, height = fig.get_size_inches() * 80
    with Image.open(png) as im:
        assert im.size == (round(width), round(height))
        pixels = np.asarray(im.convert("L"), dtype=float)
    assert pixels.std() > 5  # not a blank page
    assert svg.read_text().lstrip().startswith("<?xml") and svg.stat().st_size > 2000


@pytest.mark.parametrize("model", ["ridge", "tree"])
def test_one_se_threshold_line_is_the_picks_threshold(explained, model):
    _, store, sid = explained
    fig = complexity_figure(store, model, sid)
    (ax,) = fig.axes
    (line,) = [ln for ln in ax.get_lines() if ln.get_gid() == "one_se_threshold"]
    threshold = picks(store, sid, rule="one_se", model=model).table["threshold"].iloc[0]
    assert set(line.get_ydata()) == {threshold}
    table = complexity_table(store, model, sid).table
    for rule in ("best", "one_se"):
        (mark,) = [ln for ln in ax.get_lines() if ln.get_gid() == f"pick_{rule}"]
        picked = table[table["pick"].str.split().map(lambda r, rule=rule: rule in r)]
        assert mark.get_ydata()[0] == picked["mean"].iloc[0]


def test_models_figure_draws_every_fold_score(explained):
    _, store, sid = explained
    fig = models_figure(store, sid, rule="best")
    points = np.concatenate([ln.get_ydata() for ln in fig.axes[0].get_lines()
                             if str(ln.get_gid()).startswith("folds ")])
    chosen = picks(store, sid, rule="best").table
    stored = store.query("select value from fold_scores where sweep_id = ? and metric = 'rmse' "
                         "and list_contains(?::varchar[], cell_id)",
                         [sid, chosen["cell_id"].tolist()])["value"]
    assert sorted(points) == pytest.approx(sorted(stored))


def test_unknown_kind_and_missing_rows_are_refused(explained, tmp_path):
    _, store, sid = explained
    with pytest.raises(QueryError, match="unknown plot kind 'pie'"):
        make_figure("pie", store, sid)
    with pytest.raises(QueryError, match="method must be one of"):
        make_figure("importance", store, sid, method="gain")


def test_plot_out_dir_under_a_file_is_refused_in_one_paragraph(explained, tmp_path):
    _, store, _ = explained
    (tmp_path / "notes.txt").write_text("kept\n")
    out = CliRunner().invoke(main, ["plot", "complexity", "--store", str(store.path),
                                    "--out-dir", str(tmp_path / "notes.txt" / "figures")],
                             catch_exceptions=False)
    assert out.exit_code == 2, out.output
    assert out.output.startswith("Error: ") and out.output.count("\n") == 1, out.output
    assert "a part of its folder is a file" in out.output, out.output
    assert (tmp_path / "notes.txt").read_text() == "kept\n"


def test_plot_command_writes_files_and_prints_paths(explained, tmp_path):
    _, store, sid = explained
    out = CliRunner().invoke(main, ["plot", "complexity", "--store", str(store.path),
                                    "--out-dir", str(tmp_path), "--image", "png"])
    assert out.exit_code == 0, out.output
    paths = out.output.split()
    assert [p.rsplit("-", 1)[-1] for p in paths] == ["ridge.png", "tree.png", "forest.png"]
    assert all((tmp_path / p.rsplit("/", 1)[-1]).stat().st_size > 0 for p in paths)
    out = CliRunner().invoke(main, ["plot", "models", "--model", "tree", "--store",
                                    str(store.path)])
    assert out.exit_code == 2 and "--model is only for the complexity, tree and history" in out.output


def _plot(store, out_dir, *args):
    return CliRunner().invoke(main, ["plot", *args, "--store", str(store.path), "--out-dir",
                                     str(out_dir)])


def test_plot_replaces_only_its_own_images_and_all_or_none(explained, tmp_path, monkeypatch):
    # An earlier figure is replaced; a file foldwise did not draw (the store, say) is
    # refused before any figure is written, so the figures of one call are all new or
    # all as they were; a folder part that is a file is said in words. Exit 2 each time.
    import runner.read.figures as figures

    _, store, sid = explained
    first = _plot(store, tmp_path, "complexity", "--image", "png")
    assert first.exit_code == 0, first.output
    again = _plot(store, tmp_path, "complexity", "--image", "png")
    assert again.exit_code == 0 and again.output == first.output
    ridge = tmp_path / f"{sid}-complexity-ridge.png"
    forest = tmp_path / f"{sid}-complexity-forest.png"
    older = ridge.read_bytes()[:80] + b"an earlier figure"
    ridge.write_bytes(older)
    forest.write_bytes(store.path.read_bytes())
    out = _plot(store, tmp_path, "complexity", "--image", "png")
    assert out.exit_code == 2 and "Traceback" not in out.output
    assert f"{forest} exists and is not a foldwise image, so it is not replaced" in out.output
    assert ridge.read_bytes() == older and forest.read_bytes() == store.path.read_bytes()
    forest.unlink()
    calls = []

    def failing(*args, **kwargs):
        calls.append(args)
        if len(calls) == 2:
            raise RuntimeError("drawing failed")
        return make_figure(*args, **kwargs)

    monkeypatch.setattr(figures, "make_figure", failing)
    with pytest.raises(RuntimeError, match="drawing failed"):
        figures.write_plots("complexity", store, tmp_path, sid, formats=("png",))
    assert ridge.read_bytes() == older and not forest.exists()
    (tmp_path / "plain.txt").write_text("x")
    out = _plot(store, tmp_path / "plain.txt" / "plots", "models")
    assert out.exit_code == 2 and "a part of its folder is a file" in out.output
    assert (tmp_path / "plain.txt").read_text() == "x"
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".figure-")]


def _marker_of(collection) -> str:
    """The marker a scatter drew, read back from its path (matplotlib keeps the shape's
    path, transformed, not its name)."""
    from matplotlib.markers import MarkerStyle

    drawn = collection.get_paths()[0].vertices
    for name in ("o", "s", "^", "v", "p", "h", "D", "*", "x"):
        style = MarkerStyle(name)
        shape = style.get_path().transformed(style.get_transform()).vertices
        if shape.shape == drawn.shape and np.allclose(shape, drawn):
            return name
    raise AssertionError("a scatter of no known marker")


def test_ten_models_each_wear_a_look_of_their_own_in_the_models_and_complexity_figures(
        tmp_path):
    """The palette holds 8 colours and 6 point shapes: every model's shape steps on with its
    colour, so no two neighbours share one, and models 9 and 10 (the colours of models 1
    and 2) differ from those by shape; only the first model's line is solid. Read back from
    the artists matplotlib drew."""
    import matplotlib.colors as mc
    from matplotlib.collections import PathCollection

    from runner.read.plots import PALETTE

    from .store_builder import write_sweep

    rng = np.random.default_rng(0)
    names = [f"model{i}" for i in range(10)]
    store = write_sweep(tmp_path / "s.duckdb",
                        {m: [list(5 + 0.1 * i + rng.normal(0, 0.2, 4)),
                             list(5.3 + 0.1 * i + rng.normal(0, 0.2, 4))]
                         for i, m in enumerate(names)}, k=2, repeats=2)
    fig = models_figure(store)
    folds = {ln.get_gid()[len("folds "):]: ln for ln in fig.axes[0].get_lines()
             if str(ln.get_gid()).startswith("folds ")}
    seen = [(mc.to_hex(folds[m].get_markerfacecolor()), folds[m].get_marker())
            for m in names]
    assert len(set(seen)) == 10, seen
    assert [c for c, _ in seen] == [mc.to_hex(c) for c in PALETTE + PALETTE[:2]]
    assert [k for _, k in seen] == ["o", "s", "^", "v", "p", "h", "o", "s", "^", "v"]
    (png,) = save_figure(fig, tmp_path / "models", ("png",), dpi=80)
    with Image.open(png) as im:
        assert np.asarray(im.convert("L"), dtype=float).std() > 5
    looks = []
    for m in names:
        ax = complexity_figure(store, m).axes[0]
        (mean,) = [ln for ln in ax.get_lines() if ln.get_label().startswith("CV mean")]
        marks = {_marker_of(c) for c in ax.collections
                 if type(c) is PathCollection and len(c.get_offsets())}
        marks.discard("*")  # the best pick's star, drawn in ink
        (mark,) = marks
        looks.append((mc.to_hex(mean.get_color()), mark, mean.get_linestyle()))
    assert len({(c, k) for c, k, _ in looks}) == 10, looks
    assert [d for _, _, d in looks] == ["-"] + ["--"] * 9  # solid, then dash patterns
    (png,) = save_figure(ax.figure, tmp_path / "complexity", ("png",), dpi=80)
    with Image.open(png) as im:
        assert im.size == tuple(round(v * 80) for v in ax.figure.get_size_inches())

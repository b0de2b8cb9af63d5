"""Where words go on a drawn figure: measured in pixels after a layout pass, so a name or
a label covers no mark, line or other text (a fixed offset in points could not know how
close the data sit once the axes are laid out)."""

from __future__ import annotations

import math
import textwrap

import numpy as np

__all__ = ["covered", "drawn_marks", "lay_out", "printable", "settle", "side_label"]


_UNDRAWN = {i: " " for i in [*range(0, 32), *range(127, 160)] if chr(i) != "\n"}


def printable(fig) -> None:
    """Every text of `fig` without control characters (line breaks kept): a stored label
    holding one drew a missing glyph and made an SVG that is not well-formed XML."""
    from matplotlib.text import Text

    for text in fig.findobj(Text):
        shown = text.get_text()
        if shown.translate(_UNDRAWN) != shown:
            text.set_text(shown.translate(_UNDRAWN))
    for ax in fig.axes:  # tick labels given as words are drawn afresh from their formatter
        for axis in (ax.xaxis, ax.yaxis):
            labels = [t.get_text() for t in axis.get_ticklabels()]
            if any(label.translate(_UNDRAWN) != label for label in labels):
                axis.set_ticks(axis.get_ticklocs(), [label.translate(_UNDRAWN)
                                                     for label in labels])


def lay_out(fig) -> None:
    """Lay `fig` out as it will be drawn, its texts made printable first (as drawing to a
    file makes them), so pixel positions read after it are those of the file."""
    printable(fig)
    fig.draw_without_rendering()


def drawn_marks(ax, skip=()) -> tuple[list, list]:
    """What a label in a drawn `ax` must not cover, in pixels: a box per marker (of lines
    and scatters) and per text, and the path of every line and line collection."""
    from matplotlib.collections import LineCollection, PathCollection
    from matplotlib.transforms import Bbox

    boxes, paths, to_pixels = [], [], ax.figure.dpi / 72

    def around(points, half):
        return [Bbox.from_extents(px - half, py - half, px + half, py + half)
                for px, py in points if math.isfinite(px) and math.isfinite(py)]

    for ln in ax.get_lines():
        if ln in skip or not ln.get_visible():
            continue
        if ln.get_marker() not in (None, "None", "", " "):
            half = (ln.get_markersize() + ln.get_markeredgewidth()) / 2 * to_pixels
            boxes += around(ln.get_transform().transform(ln.get_xydata()), half)
        if ln.get_linestyle() not in ("None", "", " "):
            paths.append(ln.get_transform().transform_path(ln.get_path()))
    for c in ax.collections:
        if isinstance(c, PathCollection) and len(c.get_offsets()):
            half = (math.sqrt(float(np.max(c.get_sizes()))) +
                    float(np.max(c.get_linewidths(), initial=0))) / 2 * to_pixels
            boxes += around(c.get_offset_transform().transform(c.get_offsets()), half)
        elif isinstance(c, LineCollection):
            paths += [c.get_transform().transform_path(p) for p in c.get_paths()]
    boxes += [t.get_window_extent() for t in ax.texts if t not in skip and t.get_text()]
    return boxes, paths


def covered(box, boxes, paths) -> int:
    """How many of the marks' `boxes` and `paths` (as drawn_marks gives them) `box` covers."""
    return (sum(box.overlaps(b) for b in boxes) +
            sum(p.intersects_bbox(box, filled=False) for p in paths))


def settle(ax, text, places, skip=()) -> None:
    """Put the annotation `text` at the first of `places` ((xy, offset in points, ha, va))
    where it stays inside the laid-out `ax` and covers nothing drawn there but the `skip`
    artists, else where it covers fewest (running out of the axes counts as one)."""
    marks = drawn_marks(ax, skip=(text, *skip))
    frame = ax.bbox

    def put(place):
        text.xy, text.xyann = place[0], place[1]
        text.set_ha(place[2])
        text.set_va(place[3])
        return text.get_window_extent()

    def cost(place) -> int:
        box = put(place)
        out = not (frame.x0 <= box.x0 and box.x1 <= frame.x1 and frame.y0 <= box.y0
                   and box.y1 <= frame.y1)
        return covered(box, *marks) + out

    put(min(places, key=cost))


def side_label(fig, headline, text: str) -> None:
    """The figure's y label, centred on its height and wrapped into as few lines of even
    length as keep it below the `headline`: one line of a long label on a short figure ran
    into it."""
    label = fig.supylabel(text, fontsize=9)
    gap = 4 * fig.dpi / 72
    for lines in range(2, 6):
        lay_out(fig)
        box, top = label.get_window_extent(), headline.get_window_extent()
        if box.y1 + gap <= top.y0:
            return
        width = math.ceil(len(text) / lines)
        while len(textwrap.wrap(text, width, break_long_words=False)) > lines:
            width += 1
        label.set_text(textwrap.fill(text, width, break_long_words=False))

"""How each model is drawn: a colour, a point shape and a line pattern, all three different
for neighbouring models, so a figure reads in greyscale and a legend needs no colour; and
the small inline SVG that shows one look beside a model's name in the report.

Colours follow the Okabe–Ito palette, which stays distinct under the common colour-vision
deficiencies."""

from __future__ import annotations

from dataclasses import dataclass
from html import escape

__all__ = ["PALETTE", "MARKERS", "DASHES", "Look", "look_of", "look_svg"]

PALETTE = ["#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442",
           "#000000"]
"""Okabe–Ito colours, ordered so the first few differ most on a white page."""

MARKERS = ("o", "s", "^", "v", "p", "h")
"""Point shapes (never the star, ring, diamond or cross that mark picks and test scores)."""

DASHES = ("solid", (0, (5, 2)), (0, (1.5, 1.5)), (0, (6, 2, 1.5, 2)), (0, (3, 3)),
          (0, (8, 2, 1.5, 2, 1.5, 2)))
"""Line patterns, in matplotlib's (offset, on-off sequence) form, lengths in line widths."""

_SHAPE_WORDS = {"o": "round", "s": "square", "^": "upward triangle",
                "v": "downward triangle", "p": "pentagon", "h": "hexagon"}
_DASH_WORDS = ("solid", "dashed", "dotted", "dash-dot", "short-dashed", "dash-dot-dot")


@dataclass(frozen=True)
class Look:
    """How one model is drawn in every figure: its colour, point shape and line pattern."""

    colour: str
    marker: str
    dash: object

    @property
    def words(self) -> str:
        """The shape and pattern in words, for a reader who cannot see them."""
        pattern = _DASH_WORDS[DASHES.index(self.dash)] if self.dash in DASHES else "patterned"
        return f"{_SHAPE_WORDS.get(self.marker, 'marked')} points, {pattern} line"


def look_of(position: int) -> Look:
    """The look of the model at this place in spec order. The shape and the pattern step on
    with every model, the pattern one further after each round of shapes: the first 36
    models differ by shape and pattern alone (greyscale), the first 72 by the three."""
    return Look(PALETTE[position % len(PALETTE)], MARKERS[position % len(MARKERS)],
                DASHES[(position + position // len(MARKERS)) % len(DASHES)])


def _dash_array(dash, width: float) -> str | None:
    """An SVG stroke-dasharray for a pattern drawn `width` wide (matplotlib scales a
    pattern by the line's width), or None for a solid line."""
    if dash == "solid":
        return None
    _, sequence = dash
    return " ".join(f"{v * width:g}" for v in sequence)


def _marker_path(marker: str, size: float, x: float, y: float) -> str:
    """matplotlib's own outline of `marker`, `size` pixels across, centred at (x, y), as
    SVG path data (y pointing down)."""
    from matplotlib.markers import MarkerStyle
    from matplotlib.path import Path

    style = MarkerStyle(marker)
    path = style.get_path().transformed(style.get_transform())
    letters = {Path.MOVETO: "M", Path.LINETO: "L", Path.CURVE3: "Q", Path.CURVE4: "C"}
    parts = []
    for points, code in path.iter_segments(simplify=False, curves=True):
        if code == Path.CLOSEPOLY:
            parts.append("Z")
            continue
        xy = " ".join(f"{x + px * size:.2f} {y - py * size:.2f}"
                      for px, py in zip(points[::2], points[1::2]))
        parts.append(f"{letters[code]}{xy}")
    return " ".join(parts)


def look_svg(look: Look, *, width: int = 40, height: int = 14) -> str:
    """A small inline <svg> of one look: a stretch of line in its pattern with a point of
    its shape in the middle, both in its colour; its shape and pattern as its title."""
    middle, line = height / 2, 1.6
    dashes = _dash_array(look.dash, line)
    dash_attr = f' stroke-dasharray="{dashes}"' if dashes else ""
    return (f'<svg class="look" width="{width}" height="{height}" viewBox="0 0 {width} '
            f'{height}" role="img" data-marker="{escape(look.marker)}" '
            f'data-dash="{escape(dashes or "solid")}"><title>{escape(look.words)}</title>'
            f'<line x1="1" y1="{middle}" x2="{width - 1}" y2="{middle}" stroke="{look.colour}" '
            f'stroke-width="{line}"{dash_attr}/>'
            f'<path d="{_marker_path(look.marker, 8.0, width / 2, middle)}" '
            f'fill="{look.colour}" stroke="white" stroke-width="0.6"/></svg>')

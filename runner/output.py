"""Output for the terminal, the same for every command: a result's exact table as CSV or
JSON, or its display view (`views.py`) as a readable table."""

from __future__ import annotations

import json
import sys
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pandas as pd

    from .read.views import View


__all__ = ["emit", "FORMATS"]

FORMATS = ("table", "csv", "json")


JSON_COLUMNS = ("params", "versions", "settings", "card", "labels", "plan", "params_a",
                "params_b")
"""Columns that hold JSON text in the store; JSON output gives them as objects."""


def _plain(name: str, value):
    """One value as JSON: floats exactly (shortest round-trip text), NaN and ±inf as null,
    times in ISO 8601, stored JSON text as an object."""
    import math

    import numpy as np
    import pandas as pd

    if isinstance(value, (list, tuple, np.ndarray)):
        return [_plain(name, v) for v in value]
    if value is None or value is pd.NaT:
        return None
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    if hasattr(value, "isoformat"):
        return value.isoformat()
    if name in JSON_COLUMNS and isinstance(value, str) and value[:1] in "{[":
        try:
            return json.loads(value)
        except ValueError:
            return value
    return value


def _jsonable(df: pd.DataFrame) -> list[dict]:
    return [{str(k): _plain(str(k), v) for k, v in row.items()}
            for row in df.to_dict("records")]


_ON_SCREEN = {i: " " for i in [*range(0, 32), *range(127, 160)] if i != ord("\n")}
"""Control characters but the line break, made spaces in CSV shown on a terminal (JSON
escapes them itself)."""


def _quoting(df: pd.DataFrame) -> int:
    """The csv module's quoting for `df`: minimal, unless a word holds a carriage return,
    which minimal quoting leaves bare (a reader then ends the row there): every word is
    quoted then."""
    import csv

    words = [*map(str, df.columns), *(v for c in df.columns if df[c].dtype == object
                                      for v in df[c] if isinstance(v, str))]
    return csv.QUOTE_NONNUMERIC if any("\r" in w for w in words) else csv.QUOTE_MINIMAL


def _on_terminal(out) -> bool:
    return hasattr(out, "isatty") and out.isatty()


def _width(out) -> int:
    """The terminal's width on a terminal (cells wrap inside their column when narrow);
    else $COLUMNS if set, else room for the whole table (a file gets unwrapped lines)."""
    import os
    import shutil

    if _on_terminal(out):
        return shutil.get_terminal_size().columns
    return int(os.environ.get("COLUMNS", "0") or 0) or 10_000


def emit(df: pd.DataFrame, fmt: str, *, view: View | None = None, title: str | None = None,
         file=None) -> None:
    """Print `df` as csv/json exactly (csv on a terminal with its control characters made
    spaces), or `view` (default: df itself) as a table; with a view, the table format never
    reads `df` (it may be None)."""
    out = file or sys.stdout
    if fmt == "csv" and _on_terminal(out):  # a store's words must not drive the terminal
        out.write(df.to_csv(index=False, quoting=_quoting(df)).translate(_ON_SCREEN))
        return
    if fmt == "csv":  # a file or a pipe gets the exact text
        df.to_csv(out, index=False, quoting=_quoting(df))
        return
    if fmt == "json":
        out.write(json.dumps(_jsonable(df), indent=2) + "\n")
        return
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    from .read.past_views import plain_text
    from .read.views import number

    if view is not None:
        shown, right = view.table, set(view.numeric)
    else:
        import pandas as pd

        shown = df
        right = {c for c in shown.columns if pd.api.types.is_numeric_dtype(shown[c])}
    title = view.title if view is not None else title
    table = Table(title=Text(plain_text(title)) if title else None, show_lines=False,
                  header_style="bold")
    for col in shown.columns:
        table.add_column(Text(plain_text(col)), justify="right" if col in right else "left",
                         overflow="fold")
    for row in shown.itertuples(index=False):  # stored words: never markup nor control
        table.add_row(*[Text(number(v) if isinstance(v, float) else plain_text(v))
                        for v in row])
    if view is not None:
        for line in view.preface:
            out.write(f"{plain_text(line)}\n")
    Console(file=out, width=_width(out)).print(table)
    if view is not None:
        for line in view.sentences:
            out.write(f"  {plain_text(line)}\n")
        for line in view.caveats:
            out.write(f"{plain_text(line)}\n")

"""Output of DataFrames for the CLI: a readable table, CSV or JSON, the same for every
command; plus the compact text forms of params and `mean ± se`."""

from __future__ import annotations


import json
import math
import sys
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pandas as pd


__all__ = ["emit", "FORMATS", "params_text", "mean_se", "number"]

FORMATS = ("table", "csv", "json")


def number(value, digits: int = 4) -> str:
    """A number with `digits` significant digits, or '' when missing."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    if isinstance(value, (int,)) and not isinstance(value, bool):
        return str(value)
    try:
        return f"{float(value):.{digits}g}"
    except (TypeError, ValueError):
        return str(value)


def mean_se(mean, se, digits: int = 4) -> str:
    """'mean ± se' for a table cell."""
    if mean is None or (isinstance(mean, float) and math.isnan(mean)):
        return ""
    return f"{number(mean, digits)} ± {number(se, 2)}"


def params_text(params, *, hide: dict | None = None) -> str:
    """A cell's params as 'name=value, ...', keys sorted, floats to 6 significant digits
    (always with a point, so 1.0 as a fraction never reads as the count 1); entries equal
    to `hide` (e.g. the family defaults) are left out."""
    if isinstance(params, str):
        params = json.loads(params)
    parts = []
    for k in sorted(params):
        v = params[k]
        if hide and k in hide and hide[k] == v and type(hide[k]) is type(v):
            continue
        if isinstance(v, float):
            v = f"{v:.6g}"
            if not any(ch in v for ch in ".en"):
                v += ".0"
        parts.append(f"{k}={v}")
    return ", ".join(parts) or "(defaults)"


def _jsonable(df: pd.DataFrame) -> list[dict]:
    return json.loads(df.to_json(orient="records", date_format="iso", double_precision=15))


def emit(df: pd.DataFrame, fmt: str, *, title: str | None = None, display: pd.DataFrame | None = None,
         file=None) -> None:
    """Print `df` as csv/json exactly, or `display` (default: df) as a table."""
    out = file or sys.stdout
    if fmt == "csv":
        df.to_csv(out, index=False)
        return
    if fmt == "json":
        out.write(json.dumps(_jsonable(df), indent=2) + "\n")
        return
    import pandas as pd
    from rich.console import Console
    from rich.table import Table

    shown = display if display is not None else df
    table = Table(title=title, show_lines=False, header_style="bold")
    for col in shown.columns:
        numeric = pd.api.types.is_numeric_dtype(shown[col])
        table.add_column(str(col), justify="right" if numeric else "left", overflow="fold")
    for row in shown.itertuples(index=False):
        table.add_row(*[number(v) if isinstance(v, float) else ("" if v is None else str(v))
                        for v in row])
    Console(file=out, width=max(100, min(200, 20 * len(shown.columns)))).print(table)

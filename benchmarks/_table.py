"""Printing benchmark results: a compact fixed-width table (no imports of foldwise, so
scripts that spawn many light processes can use it)."""

from __future__ import annotations


def print_table(title: str, header: list[str], rows: list[list], notes: list[str] = ()) -> None:
    """A compact fixed-width table, then numbered notes."""
    cells = [header] + [[str(c) for c in row] for row in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(header))]
    line = "  ".join("-" * w for w in widths)
    print(f"\n{title}")
    print("  ".join(h.ljust(w) for h, w in zip(header, widths)))
    print(line)
    for row in cells[1:]:
        print("  ".join(c.rjust(w) if i else c.ljust(w)
                        for i, (c, w) in enumerate(zip(row, widths))))
    for note in notes:
        print(f"  {note}")

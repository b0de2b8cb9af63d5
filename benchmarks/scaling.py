"""How a sweep grows with the rows: the explain_cost case (20 numeric columns and a target;
ridge 5 alphas, pruned tree 10 fractions, forest 25/50 trees; k = 3; the default explain
step; 2 workers) at 10^3, 10^4, 10^5 rows, and 10^6 with --million.

    python benchmarks/scaling.py [--million] [--sizes 1000 10000 ...]

Per size it prints wall time, peak memory of the process tree (sum of RSS, and of PSS,
which counts a page shared by several processes once), the rows written to the store and
the store's size, and the growth exponent of time between sizes (log-log slope). The
results are kept in benchmarks/scaling.json and drawn in benchmarks/scaling.png.
`target_rows(runs)` gives the 10^6-row memory target from the kept results (or "not run")."""

from __future__ import annotations

import argparse
import json
import math
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from _table import print_table  # noqa: E402
from explain_cost import run_case  # noqa: E402

RESULTS = HERE / "scaling.json"
FIGURE = HERE / "scaling.png"
MEMORY_GOAL = 4.0  # peak memory of the process tree at 10^6 rows, in data sizes
COLUMNS = 21


def data_bytes(rows: int) -> int:
    """The data as numbers in memory: rows x 21 columns of float64."""
    return rows * COLUMNS * 8


def measure(sizes: list[int], folder: Path | None = None, keep=None) -> list[dict]:
    """One sweep per size, each in a fresh process and store; `keep(results)` after each
    size, so a long run that is stopped keeps the sizes it finished."""
    folder = Path(folder or tempfile.mkdtemp(prefix="foldwise-scaling-"))
    out = []
    for rows in sizes:
        where = folder / str(rows)
        where.mkdir(exist_ok=True)
        got = run_case(where, rows, "picked", count_rows=True)
        got.update(rows=rows, data_bytes=data_bytes(rows))
        out.append(got)
        if keep is not None:
            keep(out)
    return out


def save(results: list[dict]) -> None:
    """Keep the results (scaling.json) and draw them (scaling.png)."""
    import os

    RESULTS.write_text(json.dumps({"when": time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime()),
                                   "load": os.getloadavg(), "results": results}, indent=1))
    plot(results)


def slopes(results: list[dict], key: str = "wall") -> list[float]:
    """The log-log slope of `key` between neighbouring sizes (1 = linear growth)."""
    return [math.log(b[key] / a[key]) / math.log(b["rows"] / a["rows"])
            for a, b in zip(results, results[1:])]


def plot(results: list[dict], path: Path = FIGURE) -> None:
    """Time and peak memory against rows, both axes logarithmic; a dotted line marks
    linear growth from the smallest size."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    rows = [r["rows"] for r in results]
    fig, (left, right) = plt.subplots(1, 2, figsize=(9, 3.8))
    left.plot(rows, [r["wall"] for r in results], "o-", color="#2a6f4e", label="wall time")
    left.plot(rows, [results[0]["wall"] * n / rows[0] for n in rows], ":", color="#888888",
              label="linear from the smallest")
    left.set(xscale="log", yscale="log", xlabel="rows", ylabel="seconds",
             title="time of one sweep")
    mib = 2 ** 20
    right.plot(rows, [r["peak_pss"] / mib for r in results], "s-", color="#7a3b69",
               label="peak PSS, process tree")
    right.plot(rows, [r["peak_rss"] / mib for r in results], "^--", color="#c08a2b",
               label="peak RSS, process tree")
    right.plot(rows, [MEMORY_GOAL * r["data_bytes"] / mib for r in results], ":",
               color="#888888", label=f"{MEMORY_GOAL:g} x data")
    right.set(xscale="log", yscale="log", xlabel="rows", ylabel="MiB",
              title="peak memory")
    for ax in (left, right):
        ax.grid(True, which="major", linewidth=0.4, alpha=0.5)
        ax.legend(fontsize=8, frameon=False)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def _kept() -> list[dict]:
    return json.loads(RESULTS.read_text())["results"] if RESULTS.exists() else []


def target_rows(runs: int = 1) -> list[tuple[str, str, str, str]]:
    """The 10^6-row memory target as (target, goal, measured, PASS/short) rows, from the
    results kept by the last `scaling.py --million` (a 10^6 sweep takes many minutes, so it
    is not rerun here; `runs` is accepted for a uniform call)."""
    million = [r for r in _kept() if r["rows"] == 10 ** 6]
    goal = f"<= {MEMORY_GOAL:g} x data ({MEMORY_GOAL * data_bytes(10 ** 6) / 2 ** 20:.0f} MiB)"
    name = "peak memory of a 10^6-row sweep, --jobs 2 (PSS of the process tree)"
    if not million:
        return [(name, goal, "not run", "not run")]
    r = million[-1]
    ratio = r["peak_pss"] / r["data_bytes"]
    return [(name, goal, f"{r['peak_pss'] / 2 ** 20:.0f} MiB = {ratio:.1f} x data "
             f"(RSS sum {r['peak_rss'] / 2 ** 20:.0f} MiB)",
             "PASS" if ratio <= MEMORY_GOAL else "short")]


def _extrapolated(results: list[dict]) -> list[str]:
    """A note estimating 10^6 rows from the last growth, when 10^6 was not run."""
    if len(results) < 2 or results[-1]["rows"] >= 10 ** 6:
        return []
    last, slope = results[-1], slopes(results)[-1]
    wall = last["wall"] * (10 ** 6 / last["rows"]) ** slope
    return [f"10^6 rows not run: EXTRAPOLATED from the last growth ({slope:.2f}), about "
            f"{wall / 60:.0f} min (an estimate, not a measurement)"]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--million", action="store_true", help="also run 10^6 rows")
    parser.add_argument("--sizes", type=int, nargs="*", default=None)
    args = parser.parse_args()
    sizes = args.sizes or [10 ** 3, 10 ** 4, 10 ** 5] + ([10 ** 6] if args.million else [])
    results = measure(sizes, keep=save)
    mib = 2 ** 20
    growth = [""] + [f"{s:.2f}" for s in slopes(results)]
    print_table("one sweep per size (2 workers, default explain step)",
                ["rows", "wall s", "growth", "peak PSS MiB", "peak RSS MiB", "data MiB",
                 "PSS / data", "rows written", "store MiB"],
                [[f"{r['rows']:,}", f"{r['wall']:.1f}", g, f"{r['peak_pss'] / mib:.0f}",
                  f"{r['peak_rss'] / mib:.0f}", f"{r['data_bytes'] / mib:.1f}",
                  f"{r['peak_pss'] / r['data_bytes']:.1f}", f"{r['rows_written']:,}",
                  f"{r['store_bytes'] / mib:.1f}"] for r, g in zip(results, growth)],
                ["growth: log-log slope of wall time from the size above (1 = linear)",
                 f"figure: {FIGURE.name}; results: {RESULTS.name}"] + _extrapolated(results))
    print_table("targets", ["target", "goal", "measured", "verdict"],
                [list(r) for r in target_rows()])


if __name__ == "__main__":
    main()

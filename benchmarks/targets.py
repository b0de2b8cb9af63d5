"""Every speed target in one table: target, goal, measured, PASS or short.

Each benchmark module may offer `target_rows(runs)` (and a `quick` keyword if it has a
small mode) returning rows of [target, goal, measured, verdict]; this script asks a fixed
list of modules, skipping any not written yet, and prints their rows together with the
machine they ran on.

Run: python benchmarks/targets.py [--runs 3] [--quick] [--only startup sweep_cost ...]
"""

from __future__ import annotations

import argparse
import importlib
import inspect
import os
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
from _table import print_table  # noqa: E402

MODULES = ["startup", "sweep_cost", "store_queries", "paths", "explain_cost", "scaling"]


def _machine() -> str:
    load = os.getloadavg()
    busy = "busy" if load[0] > 0.5 * (os.cpu_count() or 1) else "quiet"
    return (f"{os.cpu_count()} cores (nproc), load average {load[0]:.2f} / {load[1]:.2f} / "
            f"{load[2]:.2f} ({busy})")


def collect(names: list[str], runs: int, quick: bool) -> tuple[list[list], list[str]]:
    """Every named module's rows, and notes on modules skipped or slow."""
    rows, notes = [], []
    for name in names:
        try:
            module = importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name != name:
                raise
            notes.append(f"{name}: no such benchmark yet, skipped")
            continue
        rows_of = getattr(module, "target_rows", None)
        if rows_of is None:
            notes.append(f"{name}: has no target_rows, skipped")
            continue
        kwargs = {"quick": True} if quick and "quick" in inspect.signature(rows_of).parameters \
            else {}
        start = time.perf_counter()
        got = rows_of(runs, **kwargs)
        print(f"  {name}: {len(got)} rows in {time.perf_counter() - start:.0f} s", flush=True)
        rows += got
    return rows, notes


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3, help="runs per measurement (median)")
    parser.add_argument("--quick", action="store_true",
                        help="one run each, small data where a module offers it")
    parser.add_argument("--only", nargs="*", choices=MODULES, help="these modules alone")
    args = parser.parse_args(argv)
    runs = 1 if args.quick else args.runs
    begin = time.perf_counter()
    machine_before = _machine()
    rows, notes = collect(args.only or MODULES, runs, args.quick)
    short = sum(1 for r in rows if r[3] == "short")
    print_table(f"speed targets: {sum(1 for r in rows if r[3] == 'PASS')} PASS, {short} short"
                f"{' (quick: not the measured sizes)' if args.quick else ''}",
                ["target", "goal", "measured", ""], rows,
                notes + [f"machine: {machine_before} at the start; {_machine()} at the end",
                         f"runs per median: {runs}; wall time "
                         f"{time.perf_counter() - begin:.0f} s"])


if __name__ == "__main__":
    main()

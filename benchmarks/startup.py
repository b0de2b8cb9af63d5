"""Start-up: wall time of `foldwise --help` and of `foldwise sweeps` on an empty store, each
a fresh process, median of several runs, with `python -c pass` beside them as the floor
this interpreter (and its site packages) sets.

Run: python benchmarks/startup.py [--runs 7]
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(Path(__file__).resolve().parent))
from _table import print_table  # noqa: E402

GOAL = 0.5  # seconds of wall time, issue 18


def _wall(args: list[str], runs: int) -> float:
    """Median wall seconds of `python args...` run from the repository, output discarded."""
    env = dict(os.environ, PYTHONPATH=str(REPO))
    times = []
    for _ in range(runs):
        start = time.perf_counter()
        done = subprocess.run([sys.executable, *args], cwd=REPO, env=env,
                              stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        times.append(time.perf_counter() - start)
        if done.returncode != 0:
            raise SystemExit(f"{args} failed: {done.stderr.decode()[-500:]}")
    return statistics.median(times)


def _empty_store(folder: str) -> str:
    """A store with foldwise's tables and no sweep, made in another process (so this one
    stays free of the imports it measures)."""
    path = os.path.join(folder, "empty.duckdb")
    subprocess.run([sys.executable, "-c", "import sys; from runner.store import Store; "
                    "Store(sys.argv[1]).ensure_schema()", path], cwd=REPO, check=True,
                   env=dict(os.environ, PYTHONPATH=str(REPO)))
    return path


def measure(runs: int) -> dict[str, float]:
    """Median wall seconds: the interpreter alone, `--help`, and `sweeps` on an empty store."""
    with tempfile.TemporaryDirectory(prefix="foldwise-startup-") as folder:
        store = _empty_store(folder)
        return {"python -c pass": _wall(["-c", "pass"], runs),
                "foldwise --help": _wall(["-m", "runner", "--help"], runs),
                "foldwise sweeps (empty store)": _wall(["-m", "runner", "sweeps", "--store",
                                                        store], runs)}


def target_rows(runs: int) -> list[list]:
    """Rows for benchmarks/targets.py: target, goal, measured, verdict."""
    got = measure(max(runs, 5))
    return [[f"start-up: {name}", f"<= {GOAL} s", f"{got[name]:.2f} s",
             "PASS" if got[name] <= GOAL else "short"]
            for name in ("foldwise --help", "foldwise sweeps (empty store)")] + [
        ["start-up: python -c pass (floor)", "-", f"{got['python -c pass']:.2f} s", "-"]]


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=7, help="processes per command (median)")
    args = parser.parse_args(argv)
    got = measure(args.runs)
    print_table(f"start-up, median wall time of {args.runs} fresh processes",
                ["command", "seconds", "goal"],
                [[name, f"{sec:.3f}", "-" if name.startswith("python") else f"<= {GOAL}"]
                 for name, sec in got.items()],
                [f"python: {sys.executable}; load average {os.getloadavg()[0]:.2f} "
                 f"on {os.cpu_count()} cores"])


if __name__ == "__main__":
    main()

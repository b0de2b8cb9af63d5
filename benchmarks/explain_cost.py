"""What the explain step costs: the 10^5-row case run with the default explain step and with
`explain: {cells: none}`, and the demo end to end, each in a fresh process and store.

    python benchmarks/explain_cost.py [--runs N] [--rows N] [--skip-demo]

The case: N rows (default 100 000) of 20 numeric columns and a target (invented here, seeded),
ridge (5 alphas), pruned tree (10 ccp_fraction values) and forest (25 and 50 trees), k = 3,
a test split of 0.2, 2 workers. Each sweep runs in its own process, watched from outside:
wall time, the explain step's time (SweepResult.explain_seconds), and the peak of the memory
of the whole process tree (sum of RSS, and of PSS, which counts a page shared by several
processes once). `target_rows(runs)` gives the issue's targets as rows for a summary."""

from __future__ import annotations

import argparse
import json
import os
import re
import statistics
import subprocess
import sys
import tempfile
import textwrap
import threading
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from _table import print_table  # noqa: E402

DEMO_GOAL_S = 25.0
SHARE_GOAL = 0.25

CASE_SPEC = """
name: explain-cost-{rows}
data: {{path: data.csv, target: y}}
test: {{fraction: 0.2, seed: 11}}
folds: {{k: 3, repeats: 1, seed: 2026}}
metrics: [rmse, mae, r2]
jobs: {jobs}
explain: {{cells: {cells}}}
limits: {{data_mb: 4096, plan_mb: 8192}}
models:
  ridge: {{family: linear, grid: {{penalty: l2, alpha: {{log: [0.01, 100], n: 5}}}}}}
  tree: {{family: pruned_tree, grid: {{ccp_fraction: {{log: [0.0001, 0.01], n: 10}}, min_samples_leaf: [5]}}}}
  forest: {{family: forest, grid: {{n_estimators: [25, 50], max_features: [0.33]}}}}
"""


def write_data(folder: Path, rows: int, *, seed: int = 5) -> Path:
    """`rows` rows of 20 numeric columns and a target y: linear, interaction and step
    effects plus noise, so every family has something to find. Written once per size."""
    path = folder / "data.csv"
    if path.exists():
        return path
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(rows, 20))
    y = (X[:, :5] @ np.array([3.0, -2.0, 1.5, 1.0, 0.5]) + 2.0 * X[:, 5] * X[:, 6]
         + 3.0 * (X[:, 7] > 0.5) + rng.normal(scale=2.0, size=rows))
    header = ",".join([f"x{i:02d}" for i in range(20)] + ["y"])
    np.savetxt(path, np.column_stack([X, y]), delimiter=",", header=header, comments="",
               fmt="%.6g")
    return path


def write_spec(folder: Path, rows: int, *, cells: str, jobs: int = 2) -> Path:
    path = folder / f"spec-{cells}.yaml"
    path.write_text(CASE_SPEC.format(rows=rows, cells=cells, jobs=jobs))
    return path


_SWEEP = textwrap.dedent("""
    import json, sys
    from runner.write.engine import run_sweep
    from runner.write.spec import load_spec
    from runner.store import Store
    r = run_sweep(load_spec(sys.argv[1]), store=Store(sys.argv[2]), fresh=True)
    print(json.dumps({"seconds": r.seconds, "explain_seconds": r.explain_seconds,
                      "explain_refits": r.explain_refits, "fold_rows": r.n_fold_rows,
                      "test_rows": r.n_test_rows, "status": r.status}))
""")


def _tree_memory(pid: int) -> tuple[int, int]:
    """(sum of RSS, sum of PSS) in bytes over a process and its descendants."""
    import psutil

    try:
        procs = [psutil.Process(pid)]
        procs += procs[0].children(recursive=True)
    except psutil.NoSuchProcess:
        return 0, 0
    rss = pss = 0
    for p in procs:
        try:
            info = p.memory_full_info()
        except (psutil.NoSuchProcess, psutil.AccessDenied):
            continue
        rss += info.rss
        pss += getattr(info, "pss", info.rss)
    return rss, pss


def watched(cmd: list[str], *, interval: float = 0.25) -> dict:
    """Run `cmd` (cwd: the repository, PYTHONPATH to it) and watch its process tree: wall
    time, peak summed RSS and PSS, and its last stdout line read as JSON if it is."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, cwd=ROOT, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    peak = [0, 0]
    done = threading.Event()

    def watch():
        while not done.is_set():
            rss, pss = _tree_memory(proc.pid)
            peak[0], peak[1] = max(peak[0], rss), max(peak[1], pss)
            done.wait(interval)

    thread = threading.Thread(target=watch, daemon=True)
    thread.start()
    out, err = proc.communicate()
    wall = time.perf_counter() - start
    done.set()
    thread.join()
    if proc.returncode:
        raise RuntimeError(f"{cmd} failed ({proc.returncode}): {err[-2000:]}")
    last = out.strip().splitlines()[-1] if out.strip() else ""
    try:
        facts = json.loads(last)
    except ValueError:
        facts = {}
    got = {"wall": wall, "peak_rss": peak[0], "peak_pss": peak[1], "stdout": out, **facts}
    print(f"  {' '.join(cmd[-3:])[-60:]}: {json.dumps({k: v for k, v in got.items() if k != 'stdout'})}",
          file=sys.stderr, flush=True)
    return got


def stored_rows(store: Path) -> int:
    """Rows of every table of a store (one sweep in it): what the sweep wrote."""
    import duckdb

    with duckdb.connect(str(store), read_only=True) as con:
        tables = [t for (t,) in con.execute("select table_name from information_schema.tables"
                                            " where table_type = 'BASE TABLE'").fetchall()]
        return sum(con.execute(f'select count(*) from "{t}"').fetchone()[0] for t in tables)


def run_case(folder: Path, rows: int, cells: str, *, jobs: int = 2,
             count_rows: bool = False) -> dict:
    """One sweep of the case in a fresh process and store; what `watched` measures, plus
    the store's size (and with `count_rows` its rows) after the sweep."""
    write_data(folder, rows)
    spec = write_spec(folder, rows, cells=cells, jobs=jobs)
    store = folder / f"store-{cells}-{time.monotonic_ns()}.duckdb"
    got = watched([sys.executable, "-c", _SWEEP, str(spec), str(store)])
    got.pop("stdout")
    got["store_bytes"] = store.stat().st_size + sum(
        p.stat().st_size for p in store.parent.glob(store.name + ".wal"))
    got["csv_bytes"] = (folder / "data.csv").stat().st_size
    if count_rows:
        got["rows_written"] = stored_rows(store)
    store.unlink()
    return got


def run_demo(folder: Path) -> dict:
    """The demo as README runs it (`python -m runner run specs/greenhouse.yaml`), into a
    fresh store: wall time of the whole command, start-up included."""
    store = folder / f"demo-{time.monotonic_ns()}.duckdb"
    got = watched([sys.executable, "-m", "runner", "run", "specs/greenhouse.yaml",
                   "--store", str(store), "--fresh"])
    said = re.search(r"finished in ([0-9.]+) s", got.pop("stdout"))
    got["seconds"] = float(said.group(1)) if said else float("nan")
    store.unlink(missing_ok=True)
    return got


def measure(runs: int = 1, rows: int = 100_000, demo: bool = True,
            folder: Path | None = None) -> dict:
    """Medians over `runs` of: the case with the default explain step and with none
    (interleaved), and the demo."""
    folder = Path(folder or tempfile.mkdtemp(prefix="foldwise-explain-cost-"))
    with_, without, demos = [], [], []
    for r in range(runs):
        order = ("picked", "none") if r % 2 == 0 else ("none", "picked")
        for cells in order:
            (with_ if cells == "picked" else without).append(run_case(folder, rows, cells))
        if demo:
            demos.append(run_demo(folder))

    def med(results, key):
        return statistics.median(x[key] for x in results) if results else None


    out = {"rows": rows, "runs": runs, "with_s": med(with_, "wall"),
           "with_sweep_s": med(with_, "seconds"), "explain_s": med(with_, "explain_seconds"),
           "explain_refits": med(with_, "explain_refits"),
           "none_s": med(without, "wall"), "none_sweep_s": med(without, "seconds"),
           "with_rss": med(with_, "peak_rss"), "with_pss": med(with_, "peak_pss"),
           "none_rss": med(without, "peak_rss"), "none_pss": med(without, "peak_pss"),
           "demo_s": med(demos, "wall"), "demo_sweep_s": med(demos, "seconds"),
           "load": os.getloadavg()}
    out["shares"] = [1.0 - b["wall"] / a["wall"] for a, b in zip(with_, without)]
    out["share"] = statistics.median(out["shares"])  # of each interleaved pair's share
    return out


def target_rows(runs: int = 1, measured: dict | None = None) -> list[tuple[str, str, str, str]]:
    """The issue's explain targets as (target, goal, measured, PASS/short) rows."""
    m = measured or measure(runs)
    rows = [("explain step share of the 10^5-row run",
             f"<= {SHARE_GOAL:.0%}",
             f"{m['share']:.1%} (median of {len(m['shares'])} pairs; medians "
             f"{m['with_s']:.1f} s vs {m['none_s']:.1f} s with cells: none)",
             "PASS" if m["share"] <= SHARE_GOAL else "short")]
    if m.get("demo_s") is not None:
        rows.append(("demo end to end (2 cores)", f"<= {DEMO_GOAL_S:g} s",
                     f"{m['demo_s']:.1f} s", "PASS" if m["demo_s"] <= DEMO_GOAL_S else "short"))
    return rows


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=1)
    parser.add_argument("--rows", type=int, default=100_000)
    parser.add_argument("--skip-demo", action="store_true")
    args = parser.parse_args()
    m = measure(args.runs, args.rows, demo=not args.skip_demo)
    mib = 2 ** 20
    print_table(
        f"explain step cost, {m['rows']:,} rows x 20 columns, medians of {m['runs']} "
        f"(load before: {m['load'][0]:.2f})",
        ["run", "wall s", "sweep s", "explain s", "explain refits", "peak RSS MiB",
         "peak PSS MiB"],
        [["default explain", f"{m['with_s']:.1f}", f"{m['with_sweep_s']:.1f}",
          f"{m['explain_s']:.1f}", m["explain_refits"], f"{m['with_rss'] / mib:.0f}",
          f"{m['with_pss'] / mib:.0f}"],
         ["explain: {cells: none}", f"{m['none_s']:.1f}", f"{m['none_sweep_s']:.1f}", "0",
          "0", f"{m['none_rss'] / mib:.0f}", f"{m['none_pss'] / mib:.0f}"]],
        [f"explain share of the run: 1 - none/default, median over the interleaved pairs = "
         f"{m['share']:.1%} (pairs: {', '.join(f'{x:.1%}' for x in m['shares'])})",
         "wall: the whole process (start-up, data, fits, explain, writes); sweep: foldwise's "
         "own measure, from reading the data to the last write",
         "memory: peak over the process tree, sampled every 0.25 s"])
    print_table("targets", ["target", "goal", "measured", "verdict"],
                [list(r) for r in target_rows(measured=m)])


if __name__ == "__main__":
    main()

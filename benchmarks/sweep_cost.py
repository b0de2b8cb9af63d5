"""What a path sweep costs beyond the unpruned fits it needs.

A 40-alpha pruned-tree grid on 24 000 x 20 generated rows (make_friedman1), 2 folds, one
repeat, one worker, explain off. The sweep's own time (the duration foldwise records: from
reading the data to the last write) is set against the three plain unpruned
DecisionTreeRegressor fits it cannot avoid - one per fold and the refit on all training
rows, on the same rows and seeds - timed in the same process, interleaved, medians of
several runs. Then `foldwise run` as a command in a fresh process: its wall time minus the
sweep's recorded time is what start-up, the final summary and exit add.

Run: python benchmarks/sweep_cost.py [--runs 3]
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(Path(__file__).resolve().parent))
from _table import print_table  # noqa: E402

ROWS, FEATURES, ALPHAS = 24_000, 20, 40
RATIO_GOAL, ON_TOP_GOAL = 2.0, 1.0

SPEC = f"""
name: sweep-cost
data: {{path: data.csv, target: y}}
test: {{fraction: 0.2, seed: 11}}
folds: {{k: 2, repeats: 1, seed: 2026}}
metrics: [rmse, mae, r2]
jobs: 1
explain: {{cells: none}}
models:
  tree:
    family: pruned_tree
    grid:
      ccp_alpha: {{log: [1.0e-5, 1.0], n: {ALPHAS}}}
"""


def _write_case(folder: Path) -> Path:
    import pandas as pd
    from sklearn.datasets import make_friedman1

    X, y = make_friedman1(n_samples=ROWS, n_features=FEATURES, noise=1.0, random_state=0)
    df = pd.DataFrame(X, columns=[f"x{i:02d}" for i in range(FEATURES)])
    df["y"] = y
    df.to_csv(folder / "data.csv", index=False)
    (folder / "spec.yaml").write_text(SPEC)
    return folder / "spec.yaml"


class Sweep:
    """The case in one folder: the sweep in this process, its plain fits, the command."""

    def __init__(self, folder: Path):
        from runner.write.engine import prepare
        from runner.write.spec import load_spec

        self.folder = folder
        self.spec_path = _write_case(folder)
        self.spec = load_spec(self.spec_path)
        prep = prepare(self.spec)
        self.plan = prep.plan
        self.X_train = prep.frame.X.iloc[prep.plan.train_rows]
        self.y_train = prep.frame.y[prep.plan.train_rows]
        self.runs = 0

    def _store(self):
        from runner.store import Store

        self.runs += 1
        return Store(self.folder / f"run{self.runs}.duckdb")

    def sweep_seconds(self) -> float:
        """The duration the sweep records (its own time), run in this process."""
        from runner.write.engine import run_sweep

        result = run_sweep(self.spec, store=self._store(), jobs=1)
        assert result.status == "finished" and result.n_failed_fits == 0, result
        assert result.n_cells == ALPHAS, result
        return result.seconds

    def unpruned_fit_seconds(self) -> float:
        """The three unpruned fits the sweep needs: each fold's fitting rows, then all
        training rows, seeded as foldwise seeds them."""
        from sklearn.tree import DecisionTreeRegressor
        from runner.write.resampling import refit_seed

        jobs = [(self.X_train.iloc[f.fit], self.y_train[f.fit], f.seed) for f in self.plan.folds]
        jobs.append((self.X_train, self.y_train, refit_seed(self.plan.seed)))
        start = time.perf_counter()
        for X, y, seed in jobs:
            DecisionTreeRegressor(random_state=seed).fit(X, y)
        return time.perf_counter() - start

    def command_seconds(self) -> tuple[float, float]:
        """(wall time of `foldwise run SPEC --jobs 1` in a fresh process, the duration that
        sweep records)."""
        store = self._store()
        env = dict(os.environ, PYTHONPATH=str(REPO))
        start = time.perf_counter()
        subprocess.run([sys.executable, "-m", "runner", "run", str(self.spec_path), "--store",
                        str(store.path), "--jobs", "1"], cwd=self.folder, env=env, check=True,
                       stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        wall = time.perf_counter() - start
        recorded = store.query("select epoch(finished_at - started_at) from sweeps")
        return wall, float(recorded.iloc[0, 0])


def measure(runs: int) -> dict[str, float]:
    """Medians over `runs` interleaved runs of the sweep and its unpruned fits, and of the
    command's wall time and what it adds beyond the sweep."""
    folder = Path(tempfile.mkdtemp(prefix="foldwise-sweep-cost-"))
    try:
        case = Sweep(folder)
        case.sweep_seconds()  # warm: first imports and caches
        sweep, fits, walls, on_top = [], [], [], []
        for r in range(runs):
            if r % 2:
                fits.append(case.unpruned_fit_seconds())
                sweep.append(case.sweep_seconds())
            else:
                sweep.append(case.sweep_seconds())
                fits.append(case.unpruned_fit_seconds())
            wall, recorded = case.command_seconds()
            walls.append(wall)
            on_top.append(wall - recorded)
        m = statistics.median
        return {"sweep": m(sweep), "fits": m(fits), "ratio": m(sweep) / m(fits),
                "command": m(walls), "on_top": m(on_top), "all_sweeps": sweep,
                "all_fits": fits}
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def target_rows(runs: int) -> list[list]:
    """Rows for benchmarks/targets.py: target, goal, measured, verdict."""
    got = measure(runs)
    return [
        ["path sweep / its 3 unpruned fits", f"<= {RATIO_GOAL}x",
         f"{got['ratio']:.2f}x ({got['sweep']:.2f} / {got['fits']:.2f} s)",
         "PASS" if got["ratio"] <= RATIO_GOAL else "short"],
        ["foldwise run: start-up + summary on top", f"<= {ON_TOP_GOAL} s",
         f"{got['on_top']:.2f} s", "PASS" if got["on_top"] <= ON_TOP_GOAL else "short"]]


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3, help="runs of each (median)")
    args = parser.parse_args(argv)
    got = measure(args.runs)
    print_table(f"a {ALPHAS}-alpha tree sweep, {ROWS} x {FEATURES} rows, k=2, one repeat, "
                f"--jobs 1: medians of {args.runs} runs",
                ["measure", "seconds", "goal"],
                [["sweep's own time (recorded)", f"{got['sweep']:.2f}", ""],
                 ["3 unpruned fits (2 folds + refit)", f"{got['fits']:.2f}", ""],
                 ["ratio", f"{got['ratio']:.2f}x", f"<= {RATIO_GOAL}x"],
                 ["`foldwise run` wall time", f"{got['command']:.2f}", ""],
                 ["of which outside the sweep", f"{got['on_top']:.2f}", f"<= {ON_TOP_GOAL}"]],
                [f"runs: sweep {[round(t, 2) for t in got['all_sweeps']]} s, fits "
                 f"{[round(t, 2) for t in got['all_fits']]} s; load average "
                 f"{os.getloadavg()[0]:.2f} on {os.cpu_count()} cores"])


if __name__ == "__main__":
    main()

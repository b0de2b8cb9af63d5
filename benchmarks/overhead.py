"""The engine's overhead on cheap cells: 200 ridge cells on 500 training rows, 5x2 folds.

foldwise runs end to end through `run_sweep` (CSV load, plan, joblib tasks, scoring, the
refit of every cell with test scores, DuckDB writes); the plain way is GridSearchCV with
the same pipeline (the column transformer foldwise builds: median imputer and standard
scaler on the numeric columns) and estimator (Ridge(solver="cholesky"), as foldwise's
per-cell fits use),
the same grid and RepeatedKFold folds, the same n_jobs, three metrics and refit=True.
`--no-paths` (every cell fitted on its own) is the overhead proper; with paths the 200
alphas come from one Gram matrix per fold. Medians of interleaved runs, and their ratios.

Run: python benchmarks/overhead.py [--runs 3]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from sklearn.compose import ColumnTransformer
from sklearn.datasets import make_friedman1
from sklearn.impute import SimpleImputer
from sklearn.linear_model import Ridge
from sklearn.model_selection import GridSearchCV
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _bench import (JOBS, K, REPEATS, SCORING, Case, grid_scores, interleaved,  # noqa: E402
                    max_difference, median, print_table, warm_workers)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3, help="runs per contender (median)")
    args = parser.parse_args(argv)
    begin = time.perf_counter()
    X, y = make_friedman1(n_samples=625, n_features=10, noise=1.0, random_state=3)
    case = Case("overhead", X, y, """
        ridge:
          family: linear
          grid:
            penalty: l2
            alpha: {log: [1.0e-4, 1.0e4], n: 200}
        """)
    alphas = case.values("alpha")
    numeric = Pipeline([("impute", SimpleImputer(strategy="median")),
                        ("scale", StandardScaler())])
    prep = ColumnTransformer([("num", numeric, list(case.X_train.columns))],
                             remainder="drop", sparse_threshold=0.0)
    pipe = Pipeline([("prep", prep), ("model", Ridge(solver="cholesky"))])
    last = {}

    def plain():
        start = time.perf_counter()
        search = GridSearchCV(pipe, {"model__alpha": alphas}, cv=case.cv, scoring=SCORING,
                              refit="rmse", n_jobs=JOBS).fit(case.X_train, case.y_train)
        last["plain"] = grid_scores(search, "model__alpha")
        return time.perf_counter() - start

    def runner(paths):
        def run():
            seconds, sweep_id, store = case.run_foldwise(paths=paths)
            last[paths] = case.fold_scores(store, sweep_id)
            return seconds
        return run

    warm_workers()
    times = interleaved({"plain": plain, "no_paths": runner(False), "paths": runner(True)},
                        args.runs)
    base = median(times["plain"])
    rows = [["GridSearchCV (plain)", f"{base:.2f}", "1.00x", "-", "-"]]
    for name, paths, target in (("no_paths", False, "<= 1.3x"), ("paths", True, "-")):
        m = median(times[name])
        diff = max_difference(last[paths], last["plain"], "alpha")
        rows.append([f"foldwise run{'' if paths else ' --no-paths'}", f"{m:.2f}",
                     f"{m / base:.2f}x", f"{diff:.2g}", target])
    print_table(f"engine overhead: {len(alphas)} ridge cells, {len(case.y_train)} training rows, "
                f"{K}x{REPEATS} folds, n_jobs={JOBS}, medians of {args.runs} interleaved runs",
                ["contender", "median s", "time / plain", "max |d score|", "target"], rows,
                ["runs (s): " + "; ".join(f"{k} {[round(t, 2) for t in v]}"
                                           for k, v in times.items()),
                 f"foldwise also refits all {len(alphas)} cells on the training rows and "
                 "scores the test split (GridSearchCV refits the best cell only), and writes "
                 f"{len(alphas) * (K * REPEATS + 1) * 3} score rows to DuckDB"])
    print(f"\n  benchmark wall time {time.perf_counter() - begin:.0f} s")


if __name__ == "__main__":
    main()

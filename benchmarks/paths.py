"""Whole grids from one fit, against the plain scikit-learn way, on identical folds.

For each case the plain way is what a user writes by hand: GridSearchCV with the same
estimator, the same grid and the same RepeatedKFold folds, the same n_jobs, scoring rmse,
mae and r2 and refitting the best cell. foldwise runs the same grid through `run_sweep`
end to end (reading the CSV, every fold, the refit of every cell on all training rows
scored on the test split, and the store writes). Both run in this process, interleaved,
and the table shows medians of several runs, their ratio, the ratio's bound where the work
itself sets one (tree: foldwise's unpruned fits alone, packed on the workers; forest: the
trees each side grows, refits included) and the largest absolute difference between the
two sides' fold scores.

Run: python benchmarks/paths.py [--runs 3] [--quick]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from sklearn.datasets import make_friedman1
from sklearn.ensemble import RandomForestRegressor
from sklearn.impute import SimpleImputer
from sklearn.linear_model import Lasso, Ridge
from sklearn.model_selection import GridSearchCV
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeRegressor

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _bench import (JOBS, K, REPEATS, SCORING, Case, grid_scores, interleaved,  # noqa: E402
                    max_difference, median, print_table, warm_workers)

from runner.write.tasks import run_task  # noqa: E402
from runner.families import load_family  # noqa: E402
from runner.write.resampling import refit_seed  # noqa: E402

CHECK_SPLITS = [0, K]  # the first fold of each of the first two repeats


def _search(estimator, grid, cv, *, refit="rmse"):
    return GridSearchCV(estimator, grid, cv=cv, scoring=SCORING, refit=refit, n_jobs=JOBS)


def _seeded_searches(case: Case, make, grid: dict, splits: list[int], *, refit: bool):
    """GridSearchCV per fold with the fold's own random_state (foldwise's seeds), so random
    estimators can be compared score for score; returns (seconds, plain score rows)."""
    import pandas as pd

    folds = list(case.cv.split(case.X_train))
    start = time.perf_counter()
    frames = []
    for s in splits:
        search = _search(make(case.plan.folds[s].seed), grid, [folds[s]], refit=False)
        search.fit(case.X_train, case.y_train)
        frames.append(grid_scores(search, next(iter(grid)), [s]))
    cv_seconds = time.perf_counter() - start
    refit_seconds = 0.0
    if refit:  # what refit=True adds: the best cell once on all training rows
        scores = pd.concat(frames)
        rmse = scores[scores.metric == "rmse"].groupby("value_of")["plain"].mean()
        best = {next(iter(grid)): rmse.idxmin()}
        start = time.perf_counter()
        make(refit_seed(case.plan.seed)).set_params(**best).fit(case.X_train, case.y_train)
        refit_seconds = time.perf_counter() - start
    return cv_seconds, refit_seconds, pd.concat(frames)


def _fit_seconds(make_fitted, runs: int = 3) -> float:
    """Median wall seconds of `make_fitted()` (one fit), in this process."""
    times = []
    for _ in range(runs):
        start = time.perf_counter()
        make_fitted()
        times.append(time.perf_counter() - start)
    return median(times)


def packed_seconds(tasks: list[float], workers: int) -> float:
    """The wall time of these task lengths on `workers`, longest first to the least loaded
    worker: the least a run made of these tasks can take there."""
    loads = [0.0] * workers
    for t in sorted(tasks, reverse=True):
        loads[loads.index(min(loads))] += t
    return max(loads)


# -- the four cases -------------------------------------------------------------------------

def _foldwise_contender(case: Case, param: str, reference, diffs: list):
    """The timed foldwise run of a case; each run's fold scores are compared with
    `reference()` (the plain way's scores) and the largest difference kept in `diffs`."""
    def foldwise():
        seconds, sweep_id, store = case.run_foldwise()
        diffs.append(max_difference(case.fold_scores(store, sweep_id), reference(), param))
        return seconds

    return foldwise


def tree_case(runs: int, quick: bool):
    n = 6000 if quick else 25000
    X, y = make_friedman1(n_samples=n, n_features=20, noise=1.0, random_state=0)
    case = Case("tree", X, y, """
        tree:
          family: pruned_tree
          grid:
            ccp_alpha: {log: [1.0e-5, 1.0], n: 40}
        """)
    alphas = sorted(case.values("ccp_alpha"))
    subset = alphas[2::5]  # 8 of the 40, spread over the grid
    scale = (len(alphas) / len(subset)) * (K * REPEATS / len(CHECK_SPLITS))

    def make(seed):
        return DecisionTreeRegressor(random_state=seed)

    diffs = []

    def plain():
        cv_s, refit_s, scores = _seeded_searches(case, make, {"ccp_alpha": subset},
                                                 CHECK_SPLITS, refit=True)
        plain.scores = scores
        return cv_s * scale + refit_s

    foldwise = _foldwise_contender(case, "ccp_alpha", lambda: plain.scores, diffs)
    times = interleaved({"plain": plain, "foldwise": foldwise}, runs)
    # foldwise's floor: its 10 unpruned fold fits and the refit's, packed on the workers
    fold = case.plan.folds[0]
    fold_fit = _fit_seconds(lambda: make(fold.seed).fit(case.X_train.iloc[fold.fit],
                                                        case.y_train[fold.fit]))
    refit_fit = _fit_seconds(lambda: make(refit_seed(case.plan.seed)).fit(case.X_train,
                                                                          case.y_train))
    floor = packed_seconds([fold_fit] * len(case.plan.folds) + [refit_fit], JOBS)
    bound = median(times["plain"]) / floor
    note = (f"tree: bound = plain / {floor:.2f} s, foldwise's {len(case.plan.folds)} unpruned "
            f"fold fits ({fold_fit:.3f} s) and its refit ({refit_fit:.3f} s) packed on "
            f"{JOBS} workers, as if the run were nothing else; plain timed on {len(CHECK_SPLITS)} of {K * REPEATS} folds x {len(subset)} "
            f"of {len(alphas)} alphas (one GridSearchCV per fold, seeded as foldwise's fold) "
            f"and scaled x{scale:g}, plus one measured refit of the best alpha; "
            f"{len(X)} rows x {X.shape[1]}, fits on {len(case.plan.folds[0].fit)} rows")
    return ("pruned tree, 40 ccp_alpha", len(alphas), times, max(diffs), ">= 100x, diff 0",
            note, case, bound)


def tree_path_share(case: Case, runs: int) -> tuple[float, float, float]:
    """Seconds per fold: the whole path task (fit, pruning replay, scoring) and the one
    unpruned fit inside it; in this process, one fold, median of `runs`."""
    fold = case.plan.folds[0]
    cells = [(c.cell_id, c.params) for c in case.cells]
    X_fit, y_fit = case.X_train.iloc[fold.fit], case.y_train[fold.fit]
    X_val, y_val = case.X_train.iloc[fold.valid], case.y_train[fold.valid]
    module = load_family("pruned_tree")
    task, fit = [], []
    for _ in range(runs):
        start = time.perf_counter()
        run_task("pruned_tree", cells, X_fit, y_fit, X_val, y_val, seed=fold.seed, repeat=0,
                 fold=0, metrics=["rmse", "mae", "r2"], numeric=list(case.X_train.columns),
                 categorical=[], paths=True)
        task.append(time.perf_counter() - start)
        start = time.perf_counter()
        module.make_estimator({"ccp_alpha": 0.0}, seed=fold.seed, y_fit=y_fit,
                              numeric=list(case.X_train.columns), categorical=[]
                              ).fit(X_fit, y_fit)
        fit.append(time.perf_counter() - start)
    t, f = median(task), median(fit)
    return t, f, (t - f) / t


def forest_case(runs: int, quick: bool):
    n = 1000 if quick else 2500
    X, y = make_friedman1(n_samples=n, n_features=10, noise=1.0, random_state=1)
    case = Case("forest", X, y, """
        forest:
          family: forest
          grid:
            n_estimators: [50, 100, 200, 400]
            max_features: [0.33]
        """)
    sizes = sorted(case.values("n_estimators"))

    def make(seed):
        return RandomForestRegressor(max_features=0.33, random_state=seed, n_jobs=1)

    # Score check: one GridSearchCV per fold seeded as foldwise's fold (untimed).
    _, _, check = _seeded_searches(case, make, {"n_estimators": sizes}, CHECK_SPLITS,
                                   refit=False)
    diffs = []

    def plain():
        start = time.perf_counter()
        search = _search(make(refit_seed(case.plan.seed)), {"n_estimators": sizes},
                         case.cv).fit(case.X_train, case.y_train)
        plain.best = search.best_params_["n_estimators"]
        return time.perf_counter() - start

    foldwise = _foldwise_contender(case, "n_estimators", lambda: check, diffs)
    times = interleaved({"plain": plain, "foldwise": foldwise}, runs)
    # Trees grown, each side's refit weighted by what a tree on all training rows costs
    # against one on a fold's rows (measured): plain refits its best size, foldwise grows
    # the largest once for every size's test score.
    fold, largest, n_folds = case.plan.folds[0], max(sizes), len(case.plan.folds)
    on_fold = _fit_seconds(lambda: make(fold.seed).set_params(n_estimators=largest).fit(
        case.X_train.iloc[fold.fit], case.y_train[fold.fit]))
    on_train = _fit_seconds(lambda: make(fold.seed).set_params(n_estimators=largest).fit(
        case.X_train, case.y_train))
    weight = on_train / on_fold
    bound = ((n_folds * sum(sizes) + plain.best * weight)
             / (n_folds * largest + largest * weight))
    note = (f"forest: plain = one GridSearchCV over all {K * REPEATS} folds (random_state "
            f"fixed); scores checked against a GridSearchCV per fold seeded as foldwise's "
            f"fold on {len(CHECK_SPLITS)} folds; {len(X)} rows x {X.shape[1]}, "
            f"max_features 0.33; trees grown {sum(sizes)} vs {largest} per fold, refits "
            f"{plain.best} (plain's best) vs {largest}, a tree on the training rows costing "
            f"{weight:.2f}x one on a fold's: bound {bound:.3f}x (1.875x without refits)")
    return ("forest, n_estimators 50..400", len(sizes), times, max(diffs), ">= 1.8x, diff 0",
            note, case, bound)


def _linear_case(name: str, estimator, model_yaml: str, param: str, runs: int, quick: bool,
                 target: str, label: str, n_features: int = 30):
    n = 5000 if quick else 25000
    X, y = make_friedman1(n_samples=n, n_features=n_features, noise=1.0, random_state=2)
    case = Case(name, X, y, model_yaml)
    values = case.values(param)
    pipe = Pipeline([("impute", SimpleImputer(strategy="median")),
                     ("scale", StandardScaler()), ("model", estimator)])
    key = f"model__{param}"
    diffs = []

    def plain():
        start = time.perf_counter()
        search = _search(pipe, {key: values}, case.cv).fit(case.X_train, case.y_train)
        plain.scores = grid_scores(search, key)
        return time.perf_counter() - start

    foldwise = _foldwise_contender(case, param, lambda: plain.scores, diffs)
    times = interleaved({"plain": plain, "foldwise": foldwise}, runs)
    note = (f"{name}: {len(X)} rows x {X.shape[1]}; plain = Pipeline(median imputer, "
            f"standard scaler, {type(estimator).__name__}() defaults) in one GridSearchCV")
    return (label, len(values), times, max(diffs), target, note, case, None)


def ridge_case(runs: int, quick: bool):
    return _linear_case("ridge", Ridge(), """
        ridge:
          family: linear
          grid:
            penalty: l2
            alpha: {log: [1.0e-3, 1.0e4], n: 40}
        """, "alpha", runs, quick, ">= 25x, diff 0", "ridge, 40 alpha")


def lasso_case(runs: int, quick: bool):
    return _linear_case("lasso", Lasso(), """
        lasso:
          family: linear
          grid:
            penalty: l1
            alpha: {log: [1.0e-4, 1.0], n: 40}
        """, "alpha", runs, quick, ">= 20x, diff <= tol", "lasso, 40 alpha")


CASES = {"tree": tree_case, "forest": forest_case, "ridge": ridge_case, "lasso": lasso_case}
GOALS = {"tree": 100.0, "forest": 1.8, "ridge": 25.0, "lasso": 20.0}  # x GridSearchCV
TASK_GOAL, OUTSIDE_GOAL = 1.25, 0.25  # tree path task / its unpruned fit; share outside it


def target_rows(runs: int, quick: bool = False) -> list[list]:
    """Rows for benchmarks/targets.py: each case's ratio to GridSearchCV, and the tree path
    task against its one unpruned fit."""
    warm_workers()
    rows = []
    for name, fn in CASES.items():
        label, _, times, diff, _, _, case, bound = fn(runs, quick)
        ratio = median(times["plain"]) / median(times["foldwise"])
        bound = f" (bound {bound:.2f}x)" if bound else ""
        rows.append([f"{label}: x GridSearchCV", f">= {GOALS[name]:g}x{bound}",
                     f"{ratio:.2f}x (max |d| {diff:.2g})",
                     "PASS" if ratio >= GOALS[name] else "short"])
        if name == "tree":
            task, fit, outside = tree_path_share(case, max(runs, 3))
            rows.append(["tree path task / its unpruned fit", f"<= {TASK_GOAL}x",
                         f"{task / fit:.2f}x ({task:.3f} / {fit:.3f} s)",
                         "PASS" if task / fit <= TASK_GOAL else "short"])
            rows.append(["tree path task: share outside the fit", f"<= {OUTSIDE_GOAL:.0%}",
                         f"{outside:.0%}", "PASS" if outside <= OUTSIDE_GOAL else "short"])
    return rows


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3, help="runs per contender (median)")
    parser.add_argument("--quick", action="store_true", help="small data, for a smoke test")
    parser.add_argument("--only", choices=["tree", "forest", "ridge", "lasso"], nargs="*")
    args = parser.parse_args(argv)
    begin = time.perf_counter()
    warm_workers()
    rows, notes, share = [], [], None
    for name, fn in CASES.items():
        if args.only and name not in args.only:
            continue
        label, n_cells, times, diff, target, note, case, bound = fn(args.runs, args.quick)
        p, f = median(times["plain"]), median(times["foldwise"])
        rows.append([label, f"{n_cells} x {K * REPEATS}", f"{p:.2f}", f"{f:.2f}",
                     f"{p / f:.2f}x", f"{bound:.2f}x" if bound else "-", f"{diff:.2g}",
                     target])
        notes.append(note)
        print(f"  {name}: plain {[round(t, 2) for t in times['plain']]} s, "
              f"foldwise {[round(t, 2) for t in times['foldwise']]} s", flush=True)
        if name == "tree":
            share = tree_path_share(case, args.runs)
    print_table(f"whole grids from one fit: medians of {args.runs} interleaved runs, "
                f"n_jobs={JOBS}, {K}x{REPEATS} folds",
                ["case", "cells x folds", "plain s", "foldwise s", "ratio", "bound",
                 "max |d score|", "target"], rows,
                notes + ["foldwise times include the CSV load, the refit of every cell on all "
                         "training rows with test scores, and the DuckDB writes"])
    if share:
        t, f, frac = share
        print(f"\n  tree path, one fold in this process: task {t:.3f} s, of which the one "
              f"unpruned fit {f:.3f} s; {frac:.0%} of the task is outside that fit "
              "(preprocessing, pruning replay for 40 alphas, predictions, 3 metrics x 40)")
    print(f"\n  benchmark wall time {time.perf_counter() - begin:.0f} s")


if __name__ == "__main__":
    main()

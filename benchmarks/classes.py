"""Class targets: whole grids from one fit against the plain scikit-learn way, on identical
stratified folds.

The plain way is GridSearchCV with the same estimator, the same grid and the same
RepeatedStratifiedKFold folds, n_jobs=2, scoring log loss and accuracy and refitting the
best cell. foldwise runs the same grid end to end through `run_sweep` (the CSV read, every
fold, the refit of every cell scored on the test split, the store writes). Interleaved
runs; the table shows medians, their ratio and the largest absolute difference between
the two sides' fold log losses (the tree is compared at equal random_state, so on the one
seed both sides share: the first fold).

Run: python benchmarks/classes.py [--runs 3] [--quick]
"""

from __future__ import annotations

import argparse
import atexit
import json
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.datasets import make_classification
from sklearn.ensemble import RandomForestClassifier
from sklearn.model_selection import GridSearchCV, RepeatedStratifiedKFold
from sklearn.tree import DecisionTreeClassifier

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _table import print_table  # noqa: E402

from runner.store import Store  # noqa: E402
from runner.write.engine import prepare, run_sweep  # noqa: E402
from runner.write.spec import parse_spec  # noqa: E402

JOBS, K, REPEATS, SEED = 2, 5, 2, 2026
SCORING = {"log_loss": "neg_log_loss", "accuracy": "accuracy"}
SPEC = """name: {name}
data: {{path: data.csv, target: y}}
test: {{fraction: 0.2, seed: 11}}
folds: {{k: {k}, repeats: {r}, seed: {seed}}}
metrics: [log_loss, accuracy]
jobs: {jobs}
explain: {{cells: none}}
models:
  m: {model}
"""


def _case(name: str, n: int, model: str):
    folder = Path(tempfile.mkdtemp(prefix=f"foldwise-classes-{name}-"))
    atexit.register(shutil.rmtree, folder, ignore_errors=True)
    X, y = make_classification(n_samples=n, n_features=20, n_informative=8, n_classes=3,
                               n_clusters_per_class=2, flip_y=0.05, random_state=3)
    df = pd.DataFrame(X, columns=[f"x{i:02d}" for i in range(20)])
    df["y"] = np.array(["a", "b", "c"])[y]
    df.to_csv(folder / "data.csv", index=False)
    text = SPEC.format(name=name, k=K, r=REPEATS, seed=SEED, jobs=JOBS, model=model)
    (folder / "spec.yaml").write_text(text)
    spec = parse_spec(text, source=folder / "spec.yaml")
    prep = prepare(spec)
    X_train = prep.frame.X.iloc[prep.plan.train_rows]
    y_train = prep.frame.y[prep.plan.train_rows]
    cv = RepeatedStratifiedKFold(n_splits=K, n_repeats=REPEATS, random_state=SEED)
    for f, (fit, valid) in zip(prep.plan.folds, cv.split(X_train, y_train)):
        assert np.array_equal(f.fit, fit) and np.array_equal(f.valid, valid)
    return folder, spec, prep, X_train, y_train, cv


def _foldwise(folder, spec, runs_done):
    store = Store(folder / f"run{len(runs_done)}.duckdb")
    start = time.perf_counter()
    result = run_sweep(spec, store=store, jobs=JOBS)
    runs_done.append(result.sweep_id)
    return time.perf_counter() - start, store, result.sweep_id


def _plain(estimator, grid, X, y, cv):
    start = time.perf_counter()
    search = GridSearchCV(estimator, grid, cv=cv, scoring=SCORING, refit="log_loss",
                          n_jobs=JOBS).fit(X, y)
    return time.perf_counter() - start, search


def _difference(store, sweep_id, search, key, split: int) -> float:
    """Max |foldwise − plain| fold log loss over the grid, on one split."""
    got = store.query("""select c.params, f.value from fold_scores f join cells c
        using (sweep_id, cell_id) where sweep_id = ? and metric = 'log_loss'
        and f."repeat" * ? + f.fold = ?""", [sweep_id, K, split])
    mine = {json.loads(p)[key]: v for p, v in zip(got["params"], got["value"])}
    res = search.cv_results_
    return max(abs(mine[p[key]] + res[f"split{split}_test_log_loss"][i])
               for i, p in enumerate(res["params"]))


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--quick", action="store_true", help="smaller data, one run")
    args = parser.parse_args(argv)
    n, runs = (3000, 1) if args.quick else (12000, args.runs)
    alphas = [float(a) for a in np.geomspace(1e-4, 0.02, 20)]
    cases = {
        "classification tree, 20 ccp_alpha": (
            f"{{family: pruned_tree, grid: {{ccp_alpha: {alphas}, min_samples_leaf: [5]}}}}",
            lambda seed: DecisionTreeClassifier(min_samples_leaf=5, random_state=seed),
            "ccp_alpha", alphas),
        "classification forest, n_estimators 25…200": (
            "{family: forest, grid: {n_estimators: [25, 50, 100, 200], max_features: [sqrt]}}",
            lambda seed: RandomForestClassifier(max_features="sqrt", random_state=seed,
                                                n_jobs=1),
            "n_estimators", [25, 50, 100, 200]),
    }
    rows = []
    for label, (model, make, key, values) in cases.items():
        folder, spec, prep, X, y, cv = _case(key, n, model)
        mine, theirs, diffs, done = [], [], [], []
        first_seed = prep.plan.folds[0].seed
        for r in range(runs):
            order = [0, 1] if r % 2 == 0 else [1, 0]
            for who in order:
                if who == 0:
                    seconds, store, sid = _foldwise(folder, spec, done)
                    mine.append(seconds)
                else:
                    seconds, search = _plain(make(first_seed), {key: values}, X, y, cv)
                    theirs.append(seconds)
            # the plain search uses one random_state for every split; compare the first split,
            # where foldwise's fold seed is that same random_state
            diffs.append(_difference(store, sid, search, key, 0))
        a, b = statistics.median(theirs), statistics.median(mine)
        rows.append([label, f"{len(values)} × {K * REPEATS}", f"{a:.2f}", f"{b:.2f}",
                     f"{a / b:.2f}×", f"{max(diffs):.1e}"])
    print_table("Class targets: whole grids from one fit against GridSearchCV",
                ["case", "cells × folds", "GridSearchCV s", "foldwise s", "ratio",
                 "max |Δ log loss| (first fold)"], rows,
                [f"{n} rows × 20 columns, 3 classes, n_jobs={JOBS}, median of {runs} "
                 "interleaved runs; foldwise's time includes the CSV read, the refit of every "
                 "cell on all training rows scored on the test split and the store writes."])


if __name__ == "__main__":
    main()

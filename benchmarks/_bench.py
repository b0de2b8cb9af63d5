"""Shared benchmark helpers: write a data set and a one-model spec, run foldwise on it, read
its fold scores back, and time two contenders interleaved (median of several runs)."""

from __future__ import annotations

import atexit
import shutil
import statistics
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.model_selection import RepeatedKFold

from _table import print_table  # noqa: F401  (re-exported for the benchmarks)
from runner.write.engine import prepare, run_sweep
from runner.write.spec import parse_spec
from runner.store import Store

JOBS = 2
K, REPEATS, FOLD_SEED = 5, 2, 2026
METRICS = ["rmse", "mae", "r2"]
SCORING = {"rmse": "neg_root_mean_squared_error", "mae": "neg_mean_absolute_error",
           "r2": "r2"}
_SIGN = {"rmse": -1.0, "mae": -1.0, "r2": 1.0}  # GridSearchCV stores negated errors

_SPEC = """
name: {name}
data: {{path: {data}, target: y}}
test: {{fraction: 0.2, seed: 11}}
folds: {{k: {k}, repeats: {repeats}, seed: {seed}}}
metrics: [rmse, mae, r2]
jobs: {jobs}
explain: {{cells: none}}   # scores only: no importances or refits for explanation
models:
{models}
"""


class Case:
    """One data set and one model, written where foldwise can read them."""

    def __init__(self, name: str, X: np.ndarray, y: np.ndarray, model_yaml: str,
                 folder: Path | None = None):
        self.name = name
        if folder is None:  # a scratch folder, removed when the benchmark ends
            folder = tempfile.mkdtemp(prefix=f"foldwise-bench-{name}-")
            atexit.register(shutil.rmtree, folder, ignore_errors=True)
        self.folder = Path(folder)
        cols = [f"x{i:02d}" for i in range(X.shape[1])]
        df = pd.DataFrame(X, columns=cols)
        df["y"] = y
        df.to_csv(self.folder / "data.csv", index=False)
        text = _SPEC.format(name=name, data="data.csv", k=K, repeats=REPEATS, seed=FOLD_SEED,
                            jobs=JOBS, models=textwrap.indent(textwrap.dedent(model_yaml), "  "))
        (self.folder / "spec.yaml").write_text(text)
        self.spec = parse_spec(text, source=self.folder / "spec.yaml")
        prep = prepare(self.spec)
        self.cells = prep.cells
        self.plan = prep.plan
        self.X_train = prep.frame.X.iloc[prep.plan.train_rows]
        self.y_train = prep.frame.y[prep.plan.train_rows]
        self.cv = RepeatedKFold(n_splits=K, n_repeats=REPEATS, random_state=FOLD_SEED)
        for f, (fit, valid) in zip(self.plan.folds, self.cv.split(self.X_train)):
            assert np.array_equal(f.fit, fit) and np.array_equal(f.valid, valid)
        self._runs = 0

    def values(self, param: str) -> list:
        """The grid's concrete values of one parameter, in cell order (as foldwise made them)."""
        return list(dict.fromkeys(c.params[param] for c in self.cells))

    def run_foldwise(self, *, paths: bool = True) -> tuple[float, str, Store]:
        """Wall time of a whole sweep into a fresh store (data load, fits, refits, writes)."""
        self._runs += 1
        store = Store(self.folder / f"run{self._runs}.duckdb")
        start = time.perf_counter()
        result = run_sweep(self.spec, store=store, jobs=JOBS, paths=paths)
        seconds = time.perf_counter() - start
        assert result.status == "finished" and result.n_failed_fits == 0, result
        return seconds, result.sweep_id, store

    def fold_scores(self, store: Store, sweep_id: str) -> pd.DataFrame:
        """Stored fold scores keyed by (param value, split index, metric)."""
        return store.query("""
            select c.params, f."repeat" * ? + f.fold as split, f.metric, f.value, f.how
            from fold_scores f join cells c using (sweep_id, cell_id)
            where sweep_id = ?""", [K, sweep_id])


def grid_scores(search, key: str, splits: list[int] | None = None) -> pd.DataFrame:
    """A fitted GridSearchCV's fold scores as (value of `key`, split, metric, plain) rows;
    `splits` renames its split numbers to foldwise's (repeat * k + fold)."""
    res = search.cv_results_
    rows = []
    for i, params in enumerate(res["params"]):
        for s in range(search.n_splits_):
            for m in METRICS:
                rows.append({"value_of": params[key], "split": splits[s] if splits else s,
                             "metric": m, "plain": _SIGN[m] * res[f"split{s}_test_{m}"][i]})
    return pd.DataFrame(rows)


def max_difference(foldwise: pd.DataFrame, plain: pd.DataFrame, param: str) -> float:
    """Max |foldwise - plain| over the fold scores both hold."""
    import json

    fw = foldwise.assign(value_of=[json.loads(p)[param] for p in foldwise["params"]])
    both = plain.merge(fw, on=["value_of", "split", "metric"], how="left")
    assert both["value"].notna().all(), "some plain scores have no foldwise counterpart"
    return float(np.max(np.abs(both["value"] - both["plain"])))


def interleaved(contenders: dict, runs: int) -> dict[str, list[float]]:
    """Run each contender `runs` times, alternating which goes first; seconds per run."""
    times: dict[str, list[float]] = {name: [] for name in contenders}
    names = list(contenders)
    for r in range(runs):
        for name in (names if r % 2 == 0 else names[::-1]):
            times[name].append(contenders[name]())
    return times


def median(values: list[float]) -> float:
    return statistics.median(values)


def _import_everything(_) -> None:
    import runner.write.engine  # noqa: F401
    import runner.families.forest  # noqa: F401
    import runner.families.linear  # noqa: F401
    import runner.families.pruned_tree  # noqa: F401
    import sklearn.model_selection  # noqa: F401

    time.sleep(0.5)  # long enough for every worker to get one


def warm_workers() -> None:
    """Start the joblib workers and import both contenders' modules in each, so that no
    contender pays for process start-up or first imports."""
    from joblib import Parallel, delayed

    Parallel(n_jobs=JOBS)(delayed(_import_everything)(i) for i in range(2 * JOBS))

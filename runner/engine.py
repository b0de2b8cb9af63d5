"""The evaluation engine: from a validated spec to stored fold and test scores.

It loads the data, builds the plan, expands the grid, then runs one task per (model,
repeat, fold) plus one refit task per model on a joblib backend. Each task fits the model's
cells on the fold's fitting rows, scores the validation rows with every metric and hands
back plain rows, which are written to the store in batches as tasks finish."""

from __future__ import annotations

import getpass
import platform
import secrets
import socket
import time
from dataclasses import dataclass
from datetime import datetime
from typing import Callable

import numpy as np
import pandas as pd

from . import __version__
from .data import Frame, load_frame
from .errors import FoldwiseError
from .families import FAMILIES, load_family
from .grid import Cell, count_cells, expand_spec, spread_along_path
from .resampling import REFIT, Plan, make_plan, refit_seed
from .spec import METRICS, Spec
from .store import DEFAULT_STORE, Store

__all__ = ["run_sweep", "check_spec", "prepare", "SweepResult", "Prepared", "score",
           "SweepInterrupted"]

Progress = Callable[[int, int], None]


class SweepInterrupted(FoldwiseError):
    """The user stopped the sweep; finished tasks are kept."""

    exit_code = 130


def score(metric: str, y_true, y_pred) -> float:
    """One metric with scikit-learn's own function."""
    from sklearn import metrics as m

    if metric == "rmse":
        return float(m.root_mean_squared_error(y_true, y_pred))
    if metric == "mae":
        return float(m.mean_absolute_error(y_true, y_pred))
    if metric == "r2":
        return float(m.r2_score(y_true, y_pred))
    raise ValueError(f"unknown metric {metric!r}")


@dataclass
class Prepared:
    """Everything a sweep needs before the first fit: data, plan and cells."""

    spec: Spec
    frame: Frame
    plan: Plan
    cells: list[Cell]


@dataclass
class SweepResult:
    """What a finished (or interrupted) sweep wrote."""

    sweep_id: str
    store_path: str
    status: str
    n_cells: int
    n_fold_rows: int
    n_test_rows: int
    n_failed_fits: int
    seconds: float


def _path_resolver(spec: Spec, frame: Frame, plan: Plan):
    family = load_family("pruned_tree")
    X = frame.X.iloc[plan.train_rows]
    y = frame.y[plan.train_rows]

    def resolve(label: str, combo: dict, n: int) -> list[float]:
        alphas = family.pruning_path_alphas(combo, X, y, seed=refit_seed(plan.seed),
                                            numeric=frame.numeric,
                                            categorical=frame.categorical)
        return spread_along_path(alphas, n)

    return resolve


def prepare(spec: Spec) -> Prepared:
    """Load and check the data, build the plan and expand every model's grid."""
    frame = load_frame(spec)
    plan = make_plan(spec, frame)
    cells = expand_spec(spec, data_sha256=frame.sha256, plan_identity=plan.identity,
                        resolve_path=_path_resolver(spec, frame, plan),
                        n_features=len(frame.features))
    return Prepared(spec, frame, plan, cells)


def check_spec(spec: Spec) -> tuple[pd.DataFrame, dict]:
    """The plan of a sweep without fitting anything: cells and fits per model, plus facts."""
    frame = load_frame(spec)
    plan = make_plan(spec, frame)
    n_folds = plan.k * plan.repeats
    rows = []
    for label, model in spec.models.items():
        n, bound = count_cells(model)
        rows.append({"model": label, "family": model.family,
                     "cells": f"≤{n}" if bound else str(n), "folds": n_folds,
                     "fits": f"≤{n * (n_folds + 1)}" if bound else str(n * (n_folds + 1))})
    facts = {"data": str(frame.source), "rows": len(frame.y), "train rows": plan.n_train,
             "test rows": plan.n_test, "features": len(frame.features),
             "categorical": ", ".join(frame.categorical) or "none",
             "folds": f"{plan.k} folds x {plan.repeats} repeats (seed {plan.seed})",
             "metrics": ", ".join(spec.metrics), "store": str(store_path(spec))}
    return pd.DataFrame(rows), facts


def store_path(spec: Spec, override=None):
    """The store a sweep writes to: --store, else the spec's `store`, else results/."""
    if override is not None:
        return override
    if spec.store is not None:
        return spec.resolve(spec.store)
    return DEFAULT_STORE


def _versions() -> dict:
    import duckdb
    import sklearn

    return {"python": platform.python_version(), "scikit-learn": sklearn.__version__,
            "duckdb": duckdb.__version__, "pandas": pd.__version__, "numpy": np.__version__,
            "foldwise": __version__}


def _run_task(family: str, cells: list[tuple[str, dict]], X_fit, y_fit, X_eval, y_eval, *,
              seed: int, repeat: int, fold: int, metrics: list[str], numeric, categorical):
    """Fit a model's cells on one fold (or the refit) and return its score rows."""
    module = load_family(family)
    fits = module.fit_cells([p for _, p in cells], X_fit, y_fit, [X_eval], seed=seed,
                            numeric=numeric, categorical=categorical)
    scores, failures = [], []
    for (cid, _), fit in zip(cells, fits):
        if fit.error is not None:
            failures.append({"cell_id": cid, "repeat": repeat, "fold": fold,
                             "kind": fit.error_kind, "message": fit.error})
            continue
        pred = fit.predictions[0]
        for metric in metrics:
            scores.append({"cell_id": cid, "repeat": repeat, "fold": fold, "metric": metric,
                           "value": score(metric, y_eval, pred), "fit_seconds": fit.fit_seconds,
                           "n_train": len(y_fit), "n_valid": len(y_eval), "seed": seed,
                           "n_leaves": fit.n_leaves})
    return scores, failures


def _tasks(prep: Prepared):
    """(model, repeat, fold) tasks for every fold, then one refit task per model."""
    frame, plan, spec = prep.frame, prep.plan, prep.spec
    X_train = frame.X.iloc[plan.train_rows]
    y_train = frame.y[plan.train_rows]
    by_model: dict[str, list[Cell]] = {}
    for cell in prep.cells:
        by_model.setdefault(cell.model, []).append(cell)
    common = dict(metrics=spec.metrics, numeric=frame.numeric, categorical=frame.categorical)
    for label, cells in by_model.items():
        family = cells[0].family
        pairs = [(c.cell_id, c.params) for c in cells]
        for f in plan.folds:
            yield (family, pairs, X_train.iloc[f.fit], y_train[f.fit], X_train.iloc[f.valid],
                   y_train[f.valid], dict(seed=f.seed, repeat=f.repeat, fold=f.fold, **common))
        yield (family, pairs, X_train, y_train, frame.X.iloc[plan.test_rows],
               frame.y[plan.test_rows],
               dict(seed=refit_seed(plan.seed), repeat=REFIT, fold=REFIT, **common))


def _new_sweep_id() -> str:
    return datetime.now().strftime("%Y%m%d-%H%M%S-") + secrets.token_hex(2)


def run_sweep(spec: Spec, *, store: Store | None = None, jobs: int | None = None,
              progress: Progress | None = None,
              on_message: Callable[[str], None] | None = None) -> SweepResult:
    """Score every cell of the spec on every fold and on the test split, into the store."""
    from joblib import Parallel, delayed

    start = time.perf_counter()
    prep = prepare(spec)
    store = store or Store(store_path(spec), on_wait=on_message)
    store.ensure_schema()
    sweep_id = _new_sweep_id()
    plan = prep.plan
    cells_df = pd.DataFrame([{"sweep_id": sweep_id, "cell_id": c.cell_id, "model": c.model,
                              "family": c.family, "params": c.params_json,
                              "complexity_rank": c.complexity_rank} for c in prep.cells])
    store.begin_sweep({
        "sweep_id": sweep_id, "name": spec.name,
        "spec_path": str(spec.source) if spec.source else None, "spec_text": spec.text,
        "spec_sha256": spec.sha256, "data_path": str(prep.frame.source),
        "data_sha256": prep.frame.sha256, "target": prep.frame.target,
        "n_train": plan.n_train, "n_test": plan.n_test, "k": plan.k, "repeats": plan.repeats,
        "plan_seed": plan.seed, "metrics": ",".join(spec.metrics), "pick_rule": spec.pick,
        "started_at": datetime.now(), "finished_at": None, "status": "running",
        "versions": _versions(), "host": socket.gethostname(), "user_name": _user()},
        cells_df, {m: METRICS[m] for m in spec.metrics})

    tasks = list(_tasks(prep))
    total = len(tasks)
    counts = {"fold": 0, "test": 0, "failed": 0}
    buffer: list = []
    last_flush = time.monotonic()

    def flush():
        nonlocal buffer, last_flush
        if not buffer:
            return
        fold_rows, test_rows, fail_rows = [], [], []
        for scores, failures in buffer:
            for row in scores:
                row["sweep_id"] = sweep_id
                (test_rows if row["repeat"] == REFIT else fold_rows).append(row)
            for row in failures:
                row["sweep_id"] = sweep_id
                fail_rows.append(row)
        test_df = pd.DataFrame(test_rows)
        if len(test_df):
            test_df = test_df.rename(columns={"n_valid": "n_test"}).drop(columns=["repeat", "fold"])
        store.write_batch({"fold_scores": pd.DataFrame(fold_rows), "test_scores": test_df,
                           "failures": pd.DataFrame(fail_rows)})
        counts["fold"] += len(fold_rows)
        counts["test"] += len(test_rows)
        counts["failed"] += len(fail_rows)
        buffer = []
        last_flush = time.monotonic()

    n_jobs = jobs or spec.jobs or -1
    status = "finished"
    try:
        runner = Parallel(n_jobs=n_jobs, return_as="generator_unordered")
        done = 0
        if progress:
            progress(0, total)
        for result in runner(delayed(_run_task)(*t[:6], **t[6]) for t in tasks):
            buffer.append(result)
            done += 1
            if progress:
                progress(done, total)
            if time.monotonic() - last_flush > 1.0 or len(buffer) >= 50:
                flush()
        flush()
    except KeyboardInterrupt:
        status = "interrupted"
        flush()
        store.finish_sweep(sweep_id, status)
        raise SweepInterrupted(f"sweep {sweep_id} interrupted; {done} of {total} tasks kept "
                               f"in {store.path}.") from None
    except BaseException:
        store.finish_sweep(sweep_id, "failed")
        raise
    store.finish_sweep(sweep_id, status)
    return SweepResult(sweep_id, str(store.path), status, len(prep.cells), counts["fold"],
                       counts["test"], counts["failed"], time.perf_counter() - start)


def _user() -> str:
    try:
        return getpass.getuser()
    except Exception:
        return "unknown"



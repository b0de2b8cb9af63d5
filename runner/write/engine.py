"""The evaluation engine: from a validated spec to stored fold and test scores.

It loads the data, builds the plan, expands the grid, then runs one task per (model,
repeat, fold) plus one refit task per model on a joblib backend. Each task fits the model's
cells on the fold's fitting rows, scores the validation rows with every metric and hands
back plain rows, which are written to the store in batches as tasks finish. When a few
large tasks would leave workers idle, a (model, fold) is cut into several tasks along
its work units (a path group is never cut), and the largest tasks are dispatched first.

Within a task the family decides how each cell is fitted: where the model's grid varies a
path parameter (a tree's pruning strength, a forest's size, a linear model's alpha), the
cells that share every other parameter are scored from one fit (`families/paths.py`), with
the same results as one fit per cell; otherwise, or with `paths=False`, each cell is fitted
on its own. Every score row records the route in `how` ("plain", "tree_path",
"forest_prefix", "ridge_gram", "enet_path"). A grouped cell's `fit_seconds` is an equal
share of its group's time (see `families._base.fit_grouped`)."""

from __future__ import annotations

import contextlib
import getpass
import itertools
import json
import math
import os
import platform
import secrets
import socket
import time
from collections import Counter
from dataclasses import dataclass
from datetime import datetime
from typing import Callable

import pandas as pd

from .. import __version__
from .budget import check_limits, check_plan_memory, data_limit_bytes
from ..errors import FoldwiseError
from .explain import explain_sweep
from .executors import (DaskExecutor, LocalExecutor, Running, give_back_freed_memory,
                        make_executor)
from ..families import FAMILIES, load_family
from .grid import Cell
from ..metrics import METRICS
from .prepare import Prepared, load_checked, prepare
from ..read.queries import process_alive, unchanged_sweep
from ..read.views import finding_lines, plan_sentence
from .leakage import refuse
from .resampling import REFIT, plan_counts, refit_seed, resolve_scheme
from .reuse import (all_found, copy_scores, find_findings, find_scores, found_keys,
                    version_note)
from .spec import Spec
from .tasks import Task, run_task, task_call
from ..store import DEFAULT_STORE, Store
from ..store.labels import check_labels, check_note

__all__ = ["run_sweep", "check_spec", "prepare", "SweepResult", "Prepared", "SweepInterrupted",
           "SweepFailed", "resolve_jobs"]

Progress = Callable[[int, int], None]


class SweepInterrupted(FoldwiseError):
    """The user stopped the sweep; finished tasks are kept."""

    exit_code = 130


class SweepFailed(FoldwiseError):
    """Every fit of the sweep failed: there is no score to summarise or pick."""

    exit_code = 1


def resolve_jobs(requested: int | None, *, force: bool = False) -> tuple[int, str | None]:
    """Local worker processes for a sweep, and a note if the request was capped.

    None or 0 means every core (-1); a request above the cores available here (joblib's
    count, which follows CPU affinity and container quotas) is capped to them unless
    `force`, since more workers than cores only add memory and switching."""
    if not requested or requested == -1:
        return -1, None
    from joblib import cpu_count

    cores = cpu_count()
    if requested <= cores or force:
        return requested, None
    return cores, (f"note: {requested} workers asked for, but {cores} cores are available "
                   f"here; starting {cores} (--force-jobs starts {requested} anyway).")


def _check_threads(n_jobs: int, local_workers: int = 0) -> int:
    """Threads for this process's leakage checks. Beside `local_workers` fitting on this
    machine, the cores they leave idle and at least one: more only slow the fits down, and
    each extra thread keeps part of what its work freed (glibc gives every thread its own
    heap), about 100 MiB for the whole sweep at 10^6 rows. Otherwise as many as the
    sweep's workers, at most the cores here."""
    from joblib import cpu_count, effective_n_jobs

    if local_workers:
        return max(1, cpu_count() - local_workers)
    return min(effective_n_jobs(n_jobs), cpu_count())


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
    n_reused: int = 0  # cells whose every row was copied from earlier sweeps
    n_fitted: int = 0  # cells with at least one fold or refit computed by this sweep
    explain_seconds: float = 0.0  # of `seconds`, the explain step's share
    explain_refits: int = 0  # fits the explain step made (parts the sweep's fits lacked)
    permutation_rows: int | None = None  # test rows each column's shuffles drew


def check_spec(spec: Spec, *, lift_limits: bool = False, store: str | None = None
               ) -> tuple[pd.DataFrame, dict, pd.DataFrame]:
    """The plan of a sweep without fitting anything: cells and fits per model, facts
    (among them the plan, the store it would write to, as `store_path` with `store` as
    --store, and the cost estimate) and the leakage checks' findings. The size is checked
    against the limits first, by arithmetic, so a plan too large is refused before the
    data are read; a finding that is an error (and not allowed) is refused."""
    size = check_limits(spec, lifted=lift_limits)
    frame = load_checked(spec, max_bytes=data_limit_bytes(spec, lifted=lift_limits))
    check_plan_memory(spec, plan_counts(spec, frame)[0], lifted=lift_limits)
    # the task is known now, and with it the metrics and which grids one fit sweeps
    size = check_limits(spec, lifted=lift_limits, task=frame.task)
    prep = Prepared(spec, frame)
    plan = prep.plan
    findings = prep.findings()
    refuse(findings, f"spec {spec.source or spec.name}")
    Store(store_path(spec, store)).check_can_record()
    rows = []
    for m in size.models:
        rows.append({"model": m.label, "family": m.family,
                     "cells": f"{'≤' if m.bound else ''}{m.cells:,}",
                     "fits per fold": f"{m.fits_per_fold:,}",
                     "fits": f"{m.fits_per_fold * (size.folds + 1):,}"})
    limits = spec.limits
    facts = {"data": str(frame.source), "rows": len(frame.y), "train rows": plan.n_train,
             "test rows": plan.n_test, "features": len(frame.features),
             "categorical": ", ".join(frame.categorical) or "none",
             "task": frame.task + (f" ({len(frame.classes)} classes: "
                                   f"{', '.join(map(str, frame.classes[:8]))}"
                                   f"{', ...' if len(frame.classes) > 8 else ''})"
                                   if frame.classes else ""),
             "plan": plan_sentence(plan_record(spec, prep.identity)),
             "metrics": ", ".join(spec.metrics), "store": str(store_path(spec, store)),
             "estimate": size.estimate(),
             "limits": "lifted (--lift-limits)" if lift_limits else
             (f"cells {limits.cells:,}, folds {limits.folds:,}, fits {limits.fits:,}, data "
              f"{limits.data_mb:g} MiB (raise in the spec's `limits`)")}
    return pd.DataFrame(rows), facts, findings


def plan_record(spec: Spec, identity: dict) -> dict:
    """The plan as a sweep records it: the scheme, the column it reads, the plan's identity
    (test split, folds, seeds; what enters the cell ids), k, repeats and seed."""
    scheme = resolve_scheme(spec)
    return {"scheme": scheme.name,
            "plan_column": getattr(spec.folds, scheme.column) if scheme.column else None,
            "plan": identity, "k": spec.folds.k, "repeats": spec.folds.repeats,
            "plan_seed": spec.folds.seed}


def store_path(spec: Spec, override=None):
    """The store a sweep writes to: --store, else the spec's `store`, else results/."""
    if override is not None:
        return override
    if spec.store is not None:
        from ..store.locations import is_server_url

        return spec.store if is_server_url(spec.store) else spec.resolve(spec.store)
    return DEFAULT_STORE


def _versions() -> dict:
    """What a sweep records of its software: every version that enters a cell id, with
    Python, DuckDB and foldwise."""
    import duckdb

    from .grid import identity_versions

    return {"python": platform.python_version(), **identity_versions(),
            "duckdb": duckdb.__version__, "foldwise": __version__}


_TASKS_PER_WORKER = 8
"""Cut tasks so that the sweep has at least about this many per worker (when it can)."""


def _pack(units: list[tuple[list[int], float]], pieces: int) -> list[tuple[float, list[int]]]:
    """(cost, cell positions) of `pieces` bins of similar cost (largest unit first into the
    lightest bin); a unit - one cell or one path group - is never split."""
    bins: list[list] = [[0.0, []] for _ in range(pieces)]
    for members, cost in sorted(units, key=lambda u: -u[1]):
        lightest = min(bins, key=lambda b: b[0])
        lightest[0] += cost
        lightest[1].extend(members)
    return [(cost, sorted(members)) for cost, members in bins if members]


def _plan_tasks(prep: Prepared, *, paths: bool = True, n_workers: int = 1,
                done: frozenset = frozenset()) -> list[Task]:
    """One task per (model, repeat, fold) plus one refit per model, largest first.

    A (model, fold) whose share of the work is large next to what each worker should get
    is cut into several tasks along its work units (path groups stay whole), so that a
    sweep with few models still keeps every worker busy to the end; with cost estimates
    from the families, the largest tasks are dispatched first."""
    plan = prep.plan
    by_model: dict[str, list[Cell]] = {}
    for cell in prep.cells:
        by_model.setdefault(cell.model, []).append(cell)
    base = []
    for all_cells in by_model.values():
        family = all_cells[0].family
        for fold in (*plan.folds, None):
            key = (fold.repeat, fold.fold) if fold is not None else (REFIT, REFIT)
            cells = [c for c in all_cells if (c.cell_id, *key) not in done]
            if not cells:
                continue
            units = load_family(family).fit_units(
                [c.params for c in cells],
                paths=paths and prep.frame.task in FAMILIES[family].path_tasks)
            per_row = sum(cost for _, cost in units)
            rows = len(fold.fit) if fold is not None else plan.n_train
            base.append((family, cells, units, fold, per_row * rows, rows))
    total = sum(b[4] for b in base)
    target = total / (_TASKS_PER_WORKER * n_workers) if n_workers > 1 else 0.0
    tasks = []
    for family, cells, units, fold, cost, rows in base:
        pieces = min(len(units), max(1, math.ceil(cost / target - 1e-9))) if target > 0 else 1
        for unit_cost, chunk in _pack(units, pieces):
            tasks.append(Task(family, [(cells[i].cell_id, cells[i].params) for i in chunk],
                               fold, unit_cost * rows))
    tasks.sort(key=lambda t: -t.cost)  # stable: equal costs keep spec and fold order
    return tasks


_READINGS_CAP = 4_000_000
"""The most numbers the sweep keeps in memory for the explain step, per kind (the folds'
importances, the refits' test predictions); a sweep larger than that leaves those readings
to the explain step's own refits of the chosen cells."""


def _readings_plan(prep: Prepared) -> tuple[bool, bool]:
    """Whether the fold tasks and the refit tasks read their fits for the explain step.

    The folds' readings (own importances, a tree's shape) cost little next to the fits
    and spare the explain step every fold refit; the refit's readings add a permutation
    importance per cell the sweep fits exactly, about the cost of one more refit of it
    for a forest, to spare the refit of the chosen ones. Neither is kept when the spec
    explains no cell, nor beyond `_READINGS_CAP` numbers (decided by arithmetic)."""
    if prep.spec.explain.cells == "none":
        return False, False
    n_cells, n_features = len(prep.cells), len(prep.frame.features)
    folds = n_cells * len(prep.plan.folds) * (n_features + 4) <= _READINGS_CAP
    refit = n_cells * (prep.plan.n_test + 3 * n_features) <= _READINGS_CAP
    return folds, refit


def _shared_data(prep: Prepared, *, paths: bool) -> dict:
    """What every task reads: the training and test rows, the settings of every fit and
    what the fold and refit tasks read for the explain step (`_readings_plan`)."""
    frame, spec = prep.frame, prep.spec
    folds, refit = _readings_plan(prep)
    perm = spec.explain.permutation
    return dict(**prep.split, refit_seed=refit_seed(prep.plan.seed),
                common=dict(metrics=spec.metrics, numeric=frame.numeric,
                            categorical=frame.categorical, paths=paths, task=frame.task,
                            classes=frame.classes),
                explain_fold={"kind": "fold"} if folds else None,
                explain_refit=dict(kind="refit", metric=spec.metrics[0], repeats=perm.repeats,
                                   perm_seed=perm.seed, perm_rows=perm.rows)
                if refit else None)


def _new_sweep_id() -> str:
    return datetime.now().strftime("%Y%m%d-%H%M%S-") + secrets.token_hex(2)


def run_sweep(spec: Spec, *, store: Store | None = None, jobs: int | None = None,
              progress: Progress | None = None,
              on_message: Callable[[str], None] | None = None,
              paths: bool = True, fresh: bool = False,
              batch_seconds: float = 1.0, cluster: str | None = None,
              executor: LocalExecutor | DaskExecutor | None = None,
              lift_limits: bool = False, force_jobs: bool = False,
              note: str | None = None, labels: dict[str, str] | None = None,
              if_changed: bool = False) -> SweepResult:
    """Score every cell of the spec on every fold and on the test split, into the store.

    Results an earlier sweep already holds for the same cell id (same family, params, data
    and plan) and fold are copied, not refitted, unless `fresh`. `paths=False` fits every
    cell on its own instead of scoring path grids from one fit (same results; for
    checking, so it also copies nothing). Finished tasks are written at least every
    `batch_seconds`. The tasks run in local worker processes (`jobs`), or on a Dask
    cluster: `cluster` is a scheduler address (tcp://HOST:PORT) or local:N, or pass an
    open `executor`; either way this process writes every row.

    The plan's size is checked against the spec's `limits` before anything is read
    (`lift_limits` skips that), and more local workers than cores are capped to the cores
    unless `force_jobs` (a note says so through `on_message`). A sweep whose every fit
    failed is stored as 'failed' and raises SweepFailed.

    `note` and `labels` (key -> value) are recorded with the sweep. With `if_changed`, a
    rerun that would only copy what the latest sweep of this name already holds (same spec
    text, same data, every cell stored) records nothing and returns that sweep with status
    'unchanged'."""
    start, started_at = time.perf_counter(), datetime.now()  # the sweep's time starts here
    labels, note = check_labels(labels or {}), check_note(note)
    prep = prepare(spec, lift_limits=lift_limits, paths=paths)
    store = store or Store(store_path(spec), on_wait=on_message)
    # A --no-paths sweep is a check of the path evaluators: it refits every cell, never
    # copying rows that an earlier sweep may have scored through a path.
    fresh = fresh or not paths
    found = find_scores(store, prep, fresh=fresh)
    quick = all_found(prep, found)
    if quick and if_changed:
        same = unchanged_sweep(store, spec.name, spec.sha256, prep.frame.sha256)
        if same is not None:
            return SweepResult(same["sweep_id"], str(store.path), "unchanged", len(prep.cells),
                               int(same["fold_rows"]), int(same["test_rows"]), 0,
                               time.perf_counter() - start, n_reused=len(prep.cells))
    if not quick and not fresh and on_message is not None:
        versions_changed = version_note(store, prep, found)
        if versions_changed:
            on_message(versions_changed)
    n_jobs, capped = resolve_jobs(jobs or spec.jobs, force=force_jobs or bool(cluster))
    hold = contextlib.ExitStack()
    with hold:
        if capped and on_message and executor is None:
            on_message(capped)
        if executor is None:  # reach the cluster before anything is written; none if quick
            executor = LocalExecutor(n_jobs) if quick else hold.enter_context(
                make_executor(cluster, n_jobs))
        # The fits start now and run while this process checks the data and opens the
        # sweep; nothing of theirs is written until the checks have passed (a refusal
        # stops them). What the copy below fails to bring is fitted after them.
        expected = found_keys(found)
        tasks = [] if quick else _plan_tasks(prep, paths=paths, n_workers=executor.n_workers,
                                             done=expected)
        if tasks:  # from here this process holds the rows as its workers do: once, mapped
            prep.use_split(executor.share(prep.split))
        data = _shared_data(prep, paths=paths) if tasks else {}
        running = hold.enter_context(contextlib.closing(executor.results(
            run_task, data, tasks, task_call) if tasks else Running(iter(()))))
        findings = find_findings(store, prep.checks_key) if quick else None
        if findings is None:  # builds and checks the plan before anything is written
            fitting_here = executor.n_workers if tasks and executor.name == "local" else 0
            findings = prep.findings(threads=_check_threads(n_jobs, fitting_here))
        refuse(findings, f"spec {spec.source or spec.name}")
        if on_message:
            for line in finding_lines(findings):
                on_message(line)
        if quick:  # only copying to do: one connection for it all, instead of dozens
            hold.enter_context(store.session(schema=True))
        host = socket.gethostname()
        sweep_id = _new_sweep_id()
        n_train, n_test = plan_counts(spec, prep.frame)
        cells_df = pd.DataFrame([{"sweep_id": sweep_id, "cell_id": c.cell_id, "model": c.model,
                                  "family": c.family, "params": c.params_json,
                                  "complexity_rank": c.complexity_rank,
                                  "complexity_tier": c.complexity_tier, "position": i}
                                 for i, c in enumerate(prep.cells)])
        record = {
            "sweep_id": sweep_id, "name": spec.name,
            "spec_path": str(spec.source) if spec.source else None, "spec_text": spec.text,
            "spec_sha256": spec.sha256, "data_path": str(prep.frame.source),
            "data_sha256": prep.frame.sha256, "target": prep.frame.target,
            "n_train": n_train, "n_test": n_test, "n_features": len(prep.frame.features),
            **plan_record(spec, prep.identity),
            "checks_key": prep.checks_key, "metrics": ",".join(spec.metrics),
            "pick_rule": spec.pick, "task": prep.frame.task,
            "classes": json.dumps([_label(c) for c in prep.frame.classes]),
            "started_at": started_at, "finished_at": None, "status": "running",
            "versions": _versions(), "host": host, "user_name": _user(), "pid": os.getpid(),
            "note": note or None}
        with store.session(schema=True):  # the tables and the sweep's first writes
            store.mark_interrupted(host, process_alive)
            store.begin_sweep(record, cells_df, {m: METRICS[m].better for m in spec.metrics},
                              labels, findings)
            done, reused, copied = copy_scores(store, sweep_id, prep, found)
        missed = expected - done  # sources removed since they were found: fit those too
        later = _plan_tasks(prep, paths=paths, n_workers=executor.n_workers,
                            done=prep.all_keys() - missed) if missed else []
        total = len(tasks) + len(later)
        counts = {"fold": copied[0], "test": copied[1], "failed": 0}
        why: Counter = Counter()  # (error kind, first line of its message) -> fits
        buffer: list = []
        readings: dict = {}  # (cell id, fold key) -> explain rows read from the fits
        last_flush = time.monotonic()

        def flush():
            nonlocal buffer, last_flush
            if not buffer:
                return
            fold_rows, test_rows, fail_rows = [], [], []
            for scores, failures, read in buffer:
                readings.update(read)
                for row in scores:
                    row["sweep_id"] = sweep_id
                    (test_rows if row["repeat"] == REFIT else fold_rows).append(row)
                for row in failures:
                    row["sweep_id"] = sweep_id
                    fail_rows.append(row)
                    why[(row["kind"], str(row["message"]).strip().split("\n")[0][:200])] += 1
            test_df = pd.DataFrame(test_rows)
            if len(test_df):
                test_df = test_df.rename(columns={"n_valid": "n_test"}).drop(
                    columns=["repeat", "fold"])
            store.write_batch({"fold_scores": pd.DataFrame(fold_rows), "test_scores": test_df,
                               "failures": pd.DataFrame(fail_rows)})
            counts["fold"] += len(fold_rows)
            counts["test"] += len(test_rows)
            counts["failed"] += len(fail_rows)
            buffer = []
            last_flush = time.monotonic()

        status = "finished"
        # The last batch, the explain step's reads and writes and the sweep's end share one
        # connection, let go before the explain step sends any refit.
        tail = hold.enter_context(contextlib.ExitStack())
        try:
            done = 0
            if progress:
                progress(0, total)
            if later:
                data = data or _shared_data(prep, paths=paths)
                running = itertools.chain(running, hold.enter_context(contextlib.closing(
                    executor.results(run_task, data, later, task_call))))
            if tasks or later:
                prep.keep_split_only()
                give_back_freed_memory()
            for result in running:
                buffer.append(result)
                done += 1
                if progress:
                    progress(done, total)
                if time.monotonic() - last_flush >= batch_seconds or len(buffer) >= 50:
                    flush()
            tail.enter_context(store.session())
            flush()
            if counts["fold"] == 0 and counts["failed"]:
                raise SweepFailed(_all_failed(sweep_id, counts["failed"], why, store.path))
            explain_start = time.perf_counter()
            explained = explain_sweep(spec, store, sweep_id, prepared=prep, jobs=n_jobs,
                                      reuse=not fresh, executor=executor, readings=readings,
                                      before_refits=hold.close if quick else tail.close)
            explain_seconds = time.perf_counter() - explain_start
        except KeyboardInterrupt:
            status = "interrupted"
            flush()
            store.finish_sweep(sweep_id, status, _ended(started_at, start))
            raise SweepInterrupted(f"sweep {sweep_id} interrupted; {done} of {total} tasks kept "
                                   f"in {store.path}.") from None
        except BaseException:
            store.finish_sweep(sweep_id, "failed", _ended(started_at, start))
            raise
        ended = _ended(started_at, start)
        store.finish_sweep(sweep_id, status, ended)
        return SweepResult(sweep_id, str(store.path), status, len(prep.cells), counts["fold"],
                           counts["test"], counts["failed"], (ended - started_at).total_seconds(),
                           n_reused=len(reused), n_fitted=len(prep.cells) - len(reused),
                           explain_seconds=explain_seconds, explain_refits=explained.refits,
                           permutation_rows=explained.permutation_rows)


def _ended(started_at: datetime, start: float) -> datetime:
    """Now, as the start's wall-clock time plus the monotonic time since, so that the stored
    duration equals the one `run` prints (and a clock change meanwhile moves neither)."""
    from datetime import timedelta

    return started_at + timedelta(seconds=time.perf_counter() - start)


def _all_failed(sweep_id: str, n: int, why: Counter, where) -> str:
    """One paragraph for a sweep without a single fold score: why, and where to look."""
    (kind, message), times = why.most_common(1)[0]
    return (f"sweep {sweep_id} failed: all {n:,} fits raised an error, so there is no score "
            f"to summarise or pick. The most common ({times:,} fits): {kind}: "
            f"{message.rstrip('. ')}. "
            f"The sweep is kept in {where} with status 'failed' and every error in the "
            f"failures table: foldwise sql \"select kind, message, count(*) from failures "
            f"where sweep_id = '{sweep_id}' group by all\". Fix the data or the grid it "
            "points to and run again.")


def _label(value):
    """A class label as JSON keeps it (a number stays a number, a flag a flag)."""
    return value.item() if hasattr(value, "item") else value


def _user() -> str:
    try:
        return getpass.getuser()
    except Exception:
        return "unknown"



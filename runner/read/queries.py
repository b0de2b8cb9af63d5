"""Reading a sweep: every query the read side asks of the store, answered as the frozen
results of `results.py`. The SQL of reading lives here; the rules it applies on plain
numbers live in `picks.py` (best, one-SE) and `compare.py` (the corrected t-test).

Picks are SQL over the fold scores: `best` takes the best mean CV score, `one_se` the
simplest cell (lowest complexity tier; among equally simple cells the best mean) whose mean
is within one standard error of the best (Breiman et al. 1984; Hastie, Tibshirani &
Friedman, ESL §7.10). A cell with a failed fit or fewer fold scores than k·r is never
picked."""

from __future__ import annotations

import functools
import math
import json
import os
import socket
from dataclasses import replace
from typing import TYPE_CHECKING

from .compare import TTest, holm, t_from_moments
from ..errors import QueryError, StoreError
from ..families import get_family
from ..names import not_found
from .picks import RULES, TOLERANCE, check_rule, check_se, grid_edges
from .results import (CellStats, Comparison, ComplexityTable, Findings, Picks, Summary,
                      SweepFacts, SweepList)
from ..store import Store
from ..store.labels import Selection

if TYPE_CHECKING:  # imported where a frame is built: `foldwise sweeps` starts without it
    import pandas as pd

__all__ = ["sweeps", "sweep_facts", "summary", "cell_stats", "picks", "complexity_table",
           "compare", "model_order", "picked_fold_scores", "varying_params", "sweep_record",
           "sweep_status", "coverage", "process_alive", "sweep_labels", "unchanged_sweep",
           "findings", "json_object", "check_cells", "require_fold_sizes",
           "fold_size_fault", "FOLD_SCORES",
           "CELL_SUMMARY"]


def _one_connection(read):
    """Answer every query of one read on a single read-only connection (opening one per
    query cost more than the queries on a large store); nested reads share it."""
    @functools.wraps(read)
    def on_one(store: Store, *args, **kwargs):
        with store.reading():
            return read(store, *args, **kwargs)

    return on_one


# -- sweeps ------------------------------------------------------------------------------
@_one_connection
def sweeps(store: Store, selection: Selection | None = None, *,
           strict: bool = True) -> SweepList:
    """One row per sweep, newest first, with its size, how it ended, labels and note;
    only the sweeps `selection` names when it is given. With `strict`, none found for a
    spec name or label that no sweep carries is refused (`check_selection`).

    A sweep still marked 'running' whose process on this host is gone shows as
    'interrupted' (the next `foldwise run` also records it so)."""
    selection = selection or Selection()
    where, params = selection.where("s", running_as_interrupted=True)
    columns, rows = store.rows(f"""
        select s.sweep_id, s.name, s.status, s.started_at,
               round(epoch(s.finished_at - s.started_at), 1) as seconds,
               s.n_train, s.n_test, coalesce(s.scheme, 'rows') as scheme, s.k, s.repeats,
               (select count(*) from cells c where c.sweep_id = s.sweep_id) as cells,
               (select count(*) from fold_scores f where f.sweep_id = s.sweep_id) as fold_rows,
               s.data_sha256[1:12] as data, s.note, s.host, s.pid,
               (select list({{'key': l.key, 'value': l.value}} order by l.key)
                from sweep_labels l where l.sweep_id = s.sweep_id) as label_pairs
        from sweeps s where {where} order by s.started_at desc, s.sweep_id desc""", params)
    listed = [dict(zip(columns, row)) for row in rows]
    if not listed and strict:
        check_selection(store, selection)
    for row in listed:
        if row["status"] == "running" and not _alive_here(row):
            row["status"] = "interrupted"
        row["labels"] = json.dumps({pair["key"]: pair["value"]
                                    for pair in row["label_pairs"] or []}, sort_keys=True)
    if selection.status:
        listed = [row for row in listed if row["status"] == selection.status]
    shown = [c for c in columns if c not in ("host", "pid", "label_pairs")]
    shown.insert(shown.index("note"), "labels")
    return SweepList(selection.describe(), tuple(shown),
                     tuple(tuple(row[c] for c in shown) for row in listed))


def check_selection(store: Store, selection: Selection) -> None:
    """Refuse a selection's spec name or label that no sweep of the store carries (a
    mistyped filter, not one that matched nothing), naming the closest."""
    if selection.name is None and not selection.labels:
        return
    selection.check_names([n for (n,) in store.rows("select distinct name from sweeps")[1]],
                          store.rows("select distinct key, value from sweep_labels")[1],
                          f"in store {store.path}")


def sweep_labels(store: Store, sweep_ids: list[str]) -> dict[str, dict[str, str]]:
    """The labels of these sweeps: sweep id -> {key: value}."""
    _, rows = store.rows("select sweep_id, key, value from sweep_labels where "
                         "list_contains(?::varchar[], sweep_id) order by sweep_id, key",
                         [list(sweep_ids)])
    out: dict[str, dict[str, str]] = {}
    for sid, key, value in rows:
        out.setdefault(sid, {})[key] = value
    return out


def unchanged_sweep(store: Store, name: str, spec_sha256: str, data_sha256: str) -> dict | None:
    """The latest sweep of this spec name if it finished with this very spec text and data
    (with its fold- and test-score row counts), else None."""
    if not store.location.exists():
        return None
    df = store.query("""
        select s.sweep_id, s.status, s.spec_sha256, s.data_sha256,
               (select count(*) from fold_scores f where f.sweep_id = s.sweep_id) as fold_rows,
               (select count(*) from test_scores t where t.sweep_id = s.sweep_id) as test_rows
        from sweeps s where s.name = ? order by s.started_at desc, s.sweep_id desc limit 1""",
                     [name])
    if df.empty:
        return None
    row = df.iloc[0].to_dict()
    same = (row["status"], row["spec_sha256"], row["data_sha256"]) == (
        "finished", spec_sha256, data_sha256)
    return row if same else None


def _alive_here(row) -> bool:
    """Whether a running sweep's process may still be alive (always, on another host)."""
    pid = row["pid"]
    if row["host"] != socket.gethostname():
        return True
    return pid is not None and pid == pid and process_alive(int(pid))


def process_alive(pid: int) -> bool:
    """True if a process with this id exists on this host."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def sweep_facts(store: Store, sweep_id: str | None = None) -> SweepFacts:
    """The resolved sweep with its metrics and their directions, folds, rule and target."""
    sweep_id = store.resolve_sweep(sweep_id)
    row = store.query("""select name, target, metrics, k, repeats, pick_rule, task,
                                classes::varchar as classes,
                                coalesce(scheme, 'rows') as scheme, n_features
                         from sweeps where sweep_id = ?""", [sweep_id]).iloc[0]
    _check_recorded(store, sweep_id, row)
    check_cells(store, [sweep_id])
    metrics = tuple(str(row["metrics"]).split(","))
    better = store.query("select metric, better from metrics where list_contains(?, metric)",
                         [list(metrics)])
    ways = dict(zip(better["metric"], better["better"]))
    for metric, way in ((m, ways[m]) for m in metrics if m in ways):
        if way not in ("lower", "higher"):
            shown = repr(way[:40]) if isinstance(way, str) and way else "empty"
            raise StoreError(f"store {store.path}: table metrics, column better of metric "
                             f"'{metric}' is {shown}, "
                             "not 'lower' or 'higher', so no pick can be made by it; the "
                             "store was damaged or written by another program: rerun the "
                             "spec into a fresh store.")
    return SweepFacts(sweep_id=sweep_id, name=str(row["name"]), target=str(row["target"]),
                      metrics=metrics, better=ways,
                      k=int(row["k"]), repeats=int(row["repeats"]),
                      rule=str(row["pick_rule"] or "best"),
                      task=_task(store, sweep_id, row), classes=_classes(row["classes"]),
                      scheme=str(row["scheme"]), n_features=_count(row["n_features"]))


def _task(store: Store, sweep_id: str, row) -> str:
    """The sweep's task: an older store records none (regression, unless it lists classes);
    a value no foldwise writes is refused."""
    task = row["task"]
    if not isinstance(task, str):
        return "classification" if _classes(row["classes"]) else "regression"
    if task not in ("regression", "classification"):
        raise StoreError(f"sweep {sweep_id} in store {store.path}: table sweeps, column task "
                         f"is {repr(task[:40]) if task else 'empty'}, not 'regression' or "
                         "'classification', so its scores cannot be read; the store was "
                         "damaged or written by another program: remove the sweep "
                         "(`foldwise remove`) or rerun its spec.")
    return task


_MOST_FOLDS = 2**31 - 1
"""The most folds a sweep can record: fold scores count them in 32-bit integers."""


def _count(value) -> int | None:
    """A stored whole number of at least 1, or None (NULL, NaN, text, zero, a fraction)."""
    try:
        n = int(value)
    except (TypeError, ValueError):
        return None
    return n if n >= 1 and n == value else None


def _check_recorded(store: Store, sweep_id: str, row) -> None:
    """Refuse a sweep row that lacks what every read needs (folds and metrics): a store
    from another hand may hold NULL or nonsense there."""
    metrics = row["metrics"] if isinstance(row["metrics"], str) and row["metrics"] else None
    k, repeats = _count(row["k"]), _count(row["repeats"])
    if k is not None and repeats is not None and k * repeats > _MOST_FOLDS:
        raise StoreError(f"sweep {sweep_id} in store {store.path}: table sweeps, columns k "
                         f"and repeats record {k:,} x {repeats:,} folds, more than a store "
                         f"counts ({_MOST_FOLDS:,}), so its scores cannot be read; the store "
                         "was damaged or written by another program: remove the sweep "
                         "(`foldwise remove`) or rerun its spec.")
    if k is None or repeats is None or metrics is None:
        shown = ", ".join(f"{name}={'missing' if value is None else value}" for name, value in (
            ("k", _count(row["k"])), ("repeats", _count(row["repeats"])), ("metrics", metrics)))
        raise StoreError(f"sweep {sweep_id} in store {store.path} has no usable fold count or "
                         f"metrics recorded ({shown}), so its scores cannot be read; the "
                         "store was damaged or written by another program: remove the sweep "
                         "(`foldwise remove`) or rerun its spec.")


_CELL_FAULTS = """
    select sweep_id, cell_id, case
        when cell_id is null or cell_id = '' then 'cell_id'
        when model is null or model = '' then 'model'
        when complexity_rank is null then 'complexity_rank'
        when params is null or not json_valid(params::varchar)
             or json_type(params::varchar) <> 'OBJECT' then 'params' end as fault
    from cells where list_contains(?::varchar[], sweep_id) and fault is not null
    order by sweep_id, position limit 1"""
"""The first cell of these sweeps that lacks what every read of its cells needs."""


def check_cells(store: Store, sweep_ids: list[str]) -> None:
    """Refuse sweeps with a cell no read can place (no id, model or complexity rank) or
    whose params are not a JSON object: a store from another hand may hold them."""
    bad = store.query(_CELL_FAULTS, [list(sweep_ids)])
    if bad.empty:
        return
    sweep_id, cell, column = bad.iloc[0][["sweep_id", "cell_id", "fault"]]
    which = f" of cell '{cell}'" if column != "cell_id" else ""
    what = "is not a JSON object" if column == "params" else "is empty"
    raise StoreError(f"store {store.path}: table cells, column {column}{which} {what} in "
                     f"sweep {sweep_id}, so its cells cannot be read; the store was damaged "
                     "or written by another program: remove the sweep (`foldwise remove "
                     f"{sweep_id}`) or rerun its spec.")


def json_object(text) -> dict:
    """A JSON object stored as text (from the store: checked, never evaluated); {} when the
    text is missing, malformed or not an object."""
    try:
        value = json.loads(text) if isinstance(text, str) else {}
    except ValueError:
        return {}
    return value if isinstance(value, dict) else {}


def _classes(text) -> tuple:
    """A sweep's stored class labels (JSON text from the store: checked, never evaluated)."""
    if not isinstance(text, str):
        return ()
    try:
        labels = json.loads(text)
    except ValueError:
        return ()
    return tuple(labels) if isinstance(labels, list) else ()


@_one_connection
def sweep_record(store: Store, sweep_id: str) -> dict:
    """The sweep's stored row, with counts of what it holds: rows, cells wholly reused
    (`reused`) and the sweeps they came from (`reused_from`), and the worker seconds of
    the fits this sweep made itself (`fit_seconds`: one metric's rows, reused rows left
    out)."""
    sweep = store.query("select * from sweeps where sweep_id = ?", [sweep_id]).iloc[0].to_dict()
    first = str(sweep["metrics"]).split(",")[0]
    counts = store.query("""
        select (select count(*) from cells where sweep_id = $1) as cells,
               (select count(*) from cells where sweep_id = $1 and reused_from is not null)
                   as reused,
               (select count(*) from fold_scores where sweep_id = $1) as fold_rows,
               (select count(*) from test_scores where sweep_id = $1) as test_rows,
               (select count(*) from failures where sweep_id = $1) as failures,
               (select count(*) from explained where sweep_id = $1) as explained,
               coalesce((select sum(fit_seconds) from fold_scores where sweep_id = $1
                         and metric = $2 and reused_from is null), 0)
               + coalesce((select sum(fit_seconds) from test_scores where sweep_id = $1
                           and metric = $2 and reused_from is null), 0) as fit_seconds
        """, [sweep_id, first]).iloc[0].to_dict()
    sources = store.query("select distinct reused_from from cells where sweep_id = ? and "
                          "reused_from is not null order by reused_from", [sweep_id])
    counts = {k: float(v) if k == "fit_seconds" else int(v) for k, v in counts.items()}
    counts["reused_from"] = sources["reused_from"].tolist()
    return {**sweep, "counts": counts}


@_one_connection
def findings(store: Store, sweep_id: str | None = None) -> Findings:
    """What the sweep's leakage checks found, errors first, then by check and column."""
    facts = sweep_facts(store, sweep_id)
    table = store.query("""select kind, severity, column_name, value, message, allowed
                           from findings where sweep_id = ?
                           order by severity = 'warning', kind, column_name""",
                        [facts.sweep_id])
    return Findings(facts, table)


def model_order(store: Store, sweep_id: str) -> list[str]:
    """The sweep's models in spec order."""
    return store.query("select model from cells where sweep_id = ? group by model "
                       "order by min(position)", [sweep_id])["model"].tolist()


def varying_params(store: Store, sweep_id: str) -> dict[str, list[str]]:
    """Per model of a sweep, the names of the params that take more than one value."""
    cells = store.query("select model, params from cells where sweep_id = ? order by position",
                        [sweep_id])
    seen: dict[str, dict[str, set]] = {}
    for model, params in zip(cells["model"], cells["params"]):
        for name, value in json.loads(params).items():
            seen.setdefault(model, {}).setdefault(name, set()).add(json.dumps(value))
    return {m: sorted(n for n, vals in names.items() if len(vals) > 1)
            for m, names in seen.items()}


def _check_model(store: Store, sweep_id: str, model: str | None) -> None:
    if model is None:
        return
    known = model_order(store, sweep_id)
    if model not in known:
        raise QueryError(not_found("--model", model, f"no model of sweep {sweep_id}", known,
                                   known_as="its models"))


def _check_metric(facts: SweepFacts, metric: str | None) -> str:
    metric = metric or facts.metric
    if metric not in facts.metrics:
        raise QueryError(not_found("--metric", metric, f"no metric of sweep {facts.sweep_id}",
                                   facts.metrics, known_as="its metrics"))
    return metric


def sweep_status(store: Store, sweep_id: str) -> str:
    """How a sweep stands: 'running', 'finished', 'failed' or 'interrupted' (a sweep still
    marked running whose process on this host has gone counts as interrupted)."""
    row = store.query("select status, host, pid from sweeps where sweep_id = ?",
                      [sweep_id]).iloc[0]
    return "interrupted" if row["status"] == "running" and not _alive_here(row) else \
        str(row["status"])


# -- fold scores as read ------------------------------------------------------------------
FOLD_SCORES = """(
    select sweep_id, cell_id, "repeat", fold, metric,
           case when isfinite(value) and abs(value) <= 1e100 then value end as value,
           case when n_train > 0 and n_valid > 0 then n_valid::double / n_train end
               as valid_ratio,
           case when isfinite(n_leaves) then n_leaves end as n_leaves
    from fold_scores)"""
"""The fold scores every read takes, in place of the table: a score that is not a finite
number, or beyond ±1e100 (no fitted model's score comes near; DuckDB's standard deviation
fails where squares pass float range), is undefined (like a NULL one), and the validation
share n_valid/n_train is NULL unless both counts are positive (a store from another hand may hold NaN, infinities or
negative counts, on which DuckDB's standard deviation and the corrected SE fail)."""

CELL_SUMMARY = f"""(
    select sweep_id, cell_id, metric, avg(value) as mean,
           stddev_samp(value) / sqrt(count(value)) as se, count(value) as n
    from {FOLD_SCORES} group by sweep_id, cell_id, metric)"""
"""Per cell and metric: the CV mean, its plain SE and the count of defined fold scores
(the store's own cell_summary view, over the checked fold scores)."""


def fold_size_fault(store: Store, sweep_ids: list[str]) -> str | None:
    """The first of these sweeps whose fold rows lack the positive n_train and n_valid that
    the corrected variance (1/n + n_valid/n_train)·var needs, or None: a store from another
    hand may hold NULL, zero or negative counts."""
    bad = store.query("""select sweep_id from fold_scores
                         where list_contains(?::varchar[], sweep_id)
                           and not coalesce(n_train > 0 and n_valid > 0, false)
                         order by sweep_id limit 1""", [list(sweep_ids)])
    return None if bad.empty else str(bad.iloc[0]["sweep_id"])


def require_fold_sizes(store: Store, sweep_ids: list[str]) -> None:
    """Refuse sweeps whose fold rows lack the positive counts the corrected variance needs
    (`fold_size_fault`): a test on them would print nothing sensible."""
    bad = fold_size_fault(store, sweep_ids)
    if bad is not None:
        raise StoreError(f"store {store.path}: table fold_scores, columns n_train and "
                         f"n_valid hold a count that is missing or not positive in sweep "
                         f"{bad}, so the corrected SE and the paired "
                         "t-test, which need the share of rows each fold scored, cannot be "
                         "computed; the store was damaged or written by another program: "
                         "use --se plain where the command has it, remove the sweep "
                         "(`foldwise remove`) or rerun its spec.")


# -- picks ---------------------------------------------------------------------------------
# Common table expressions shared by every pick query. Parameters: $1 sweep id, $2 metric,
# $3 se kind ('plain' or 'corrected'), $4 model or null (all), $5 relative tolerance.
# judged = every cell with mean/SE (the corrected SE over the folds where the score is
# defined, as compare pairs them) and why it is excluded; bars = the best cell and the
# one-SE threshold per model; within = eligible cells inside it; chosen = the lowest tier
# (the rank where an eligible cell of the model has none: an older store), then the best
# mean, then the lowest rank. Means within the relative tolerance $5 of the best (or of the
# tier's best) are equal: the same fold scores summed in another row order (a merged or
# exported store) differ in the last bits, and the simpler cell must win either way.
_CELLS_SQL = f"""
    plan as (select k::bigint * repeats as n_folds from sweeps where sweep_id = $1),
    stats as (
        select c.model, c.family, c.cell_id, c.params, c.complexity_rank, c.complexity_tier,
               min(c.position) as cell_row, count(f.value) as n, count(f.fold) as n_rows,
               avg(f.value) as mean,
               stddev_samp(f.value) as sd,
               avg(f.valid_ratio) filter (where f.value is not null) as valid_ratio,
               avg(f.n_leaves) as mean_leaves
        from cells c
        left join {FOLD_SCORES} f
          on f.sweep_id = c.sweep_id and f.cell_id = c.cell_id and f.metric = $2
        where c.sweep_id = $1 and ($4::varchar is null or c.model = $4)
        group by c.model, c.family, c.cell_id, c.params, c.complexity_rank,
                 c.complexity_tier),
    judged as (
        select s.*, p.n_folds,
               case when s.n = 0 then null
                    when $3 = 'corrected'
                    then sqrt((1.0 / s.n + s.valid_ratio) * s.sd * s.sd)
                    else s.sd / sqrt(s.n) end as se,
               case when exists (select 1 from failures x
                                 where x.sweep_id = $1 and x.cell_id = s.cell_id)
                    then 'failed fits'
                    when s.n < s.n_rows then 'undefined score'
                    when s.n < p.n_folds then 'incomplete'
                    when not isfinite(s.mean) then 'non-finite score'
               end as excluded,
               min(s.cell_row) over (partition by s.model) as model_row
        from stats s, plan p),
    signed as (
        select j.*, m.better,
               case when m.better = 'lower' then j.mean else -j.mean end as loss,
               case when count(j.complexity_tier) over w = count(*) over w
                    then j.complexity_tier else j.complexity_rank end as tier
        from judged j join metrics m on m.metric = $2
        where j.excluded is null
        window w as (partition by j.model)),
    ranked as (
        select s.*, row_number() over (
                   partition by s.model
                   order by s.loss > s.top + $5 * greatest(1.0, abs(s.top)),
                            s.complexity_rank) as place
        from (select *, min(loss) over (partition by model) as top from signed) s),
    bars as (
        select model, better, cell_id as best_cell, mean as best_mean, se as best_se,
               case when better = 'lower' then mean + se else mean - se end as threshold,
               $5 * greatest(1.0, abs(mean)) as slack
        from ranked where place = 1),
    within as (
        select r.model, r.cell_id, r.complexity_rank, r.tier, r.loss
        from ranked r join bars b using (model)
        where case when b.better = 'lower' then r.mean <= b.threshold + b.slack
                   else r.mean >= b.threshold - b.slack end),
    chosen as (
        select model, cell_id as one_se_cell, n_within
        from (select model, cell_id, count(*) over (partition by model) as n_within,
                     row_number() over (
                         partition by model
                         order by tier, loss > tier_top + $5 * greatest(1.0, abs(tier_top)),
                                  complexity_rank) as place
              from (select *, min(loss) over (partition by model, tier) as tier_top
                    from within))
        where place = 1),
    eligible as (
        select model, count(*) filter (where excluded is null) as eligible, count(*) as cells
        from judged group by model)
"""


@_one_connection
def cell_stats(store: Store, sweep_id: str | None = None, *, se: str = "plain",
               model: str | None = None, metric: str | None = None) -> CellStats:
    """Every cell with mean, SE, n, leaves, test score, why it is excluded, and marks
    (within_one_se, best, one_se, all on the sweep's first metric); simplest first."""
    check_se(se)
    facts = sweep_facts(store, sweep_id)
    _check_model(store, facts.sweep_id, model)
    metric = _check_metric(facts, metric)
    if se == "corrected":
        require_fold_sizes(store, [facts.sweep_id])
    args = [facts.sweep_id, facts.metric, se, model, TOLERANCE]
    df = store.query(f"""with {_CELLS_SQL}
        select j.model, j.family, j.complexity_rank, j.complexity_tier, j.cell_id, j.params,
               j.n, j.mean, j.sd,
               j.se, j.valid_ratio, j.mean_leaves, t.value as test, j.excluded,
               w.cell_id is not null as within_one_se,
               coalesce(j.cell_id = b.best_cell, false) as best,
               coalesce(j.cell_id = c.one_se_cell, false) as one_se, b.threshold
        from judged j
        left join within w using (model, cell_id)
        left join bars b using (model)
        left join chosen c using (model)
        left join test_scores t on t.sweep_id = $1 and t.cell_id = j.cell_id and t.metric = $2
        order by j.model_row, j.complexity_rank""", args)
    thresholds = df.dropna(subset=["threshold"]).groupby("model", sort=False)["threshold"].first()
    df = df.drop(columns=["threshold"])
    if metric != facts.metric:
        # Marks stay on the sweep's first metric; the shown scores come from `metric`.
        shown = store.query(f"""with {_CELLS_SQL}
            select j.cell_id, j.n, j.mean, j.sd, j.se, j.valid_ratio, j.mean_leaves,
                   t.value as test
            from judged j
            left join test_scores t on t.sweep_id = $1 and t.cell_id = j.cell_id
                                   and t.metric = $2""", [args[0], metric, *args[2:]])
        cols = ["n", "mean", "sd", "se", "valid_ratio", "mean_leaves", "test"]
        df[cols] = shown.set_index("cell_id").loc[df["cell_id"], cols].to_numpy()
    return CellStats(facts, metric, se, df, thresholds.to_dict())


@_one_connection
def picks(store: Store, sweep_id: str | None = None, *, rule: str | None = None,
          se: str = "plain", model: str | None = None) -> Picks:
    """The picked cell of each model: one row per model and rule (both rules when rule is None).

    Cells with a failed fit or fewer fold scores than k·r are never picked. `n_terms` is
    the size of the cell's refit where the explain step stored it (leaves of a tree,
    non-zero coefficients of a linear model), `mean_leaves` a tree's mean over folds."""
    check_rule(rule)
    check_se(se)
    facts = sweep_facts(store, sweep_id)
    _check_model(store, facts.sweep_id, model)
    if se == "corrected":
        require_fold_sizes(store, [facts.sweep_id])
    rules = list(RULES) if rule is None else [rule]
    args = [facts.sweep_id, facts.metric, se, model, TOLERANCE]
    df = store.query(f"""with {_CELLS_SQL},
        picked as (
            select model, 'best' as rule, best_cell as cell_id from bars
            union all
            select model, 'one_se' as rule, one_se_cell as cell_id from chosen)
        select p.model, j.family, p.rule, p.cell_id, j.params, j.complexity_rank,
               b.better, $2 as metric, j.mean, j.se, j.sd, j.n, b.best_mean, b.best_se,
               b.threshold, c.n_within, t.value as test, j.mean_leaves, x.n_terms, e.cells,
               e.eligible, j.model_row
        from picked p
        join judged j using (model, cell_id)
        join bars b using (model)
        join chosen c using (model)
        join eligible e using (model)
        left join test_scores t on t.sweep_id = $1 and t.cell_id = p.cell_id and t.metric = $2
        left join explained x on x.sweep_id = $1 and x.cell_id = p.cell_id
        where list_contains($6::varchar[], p.rule)
        order by j.model_row, p.rule""", [*args, rules])
    df = df.drop(columns=["model_row"]).reset_index(drop=True)
    return Picks(facts, tuple(rules), se, df, coverage(store, facts, model=model),
                 varying_params(store, facts.sweep_id), _edges(store, facts, df))


def _edges(store: Store, facts: SweepFacts, picked: pd.DataFrame) -> pd.DataFrame:
    """Each picked cell's parameters on the edge of its model's grid (`picks.grid_edges`)."""
    import pandas as pd

    cells = store.query("select model, params from cells where sweep_id = ?",
                        [facts.sweep_id])
    grids: dict[str, list[dict]] = {}
    for model, params in zip(cells["model"], cells["params"]):
        grids.setdefault(model, []).append(json.loads(params))
    rows = []
    for r in picked.itertuples(index=False):
        leaves = None if pd.isna(r.mean_leaves) else float(r.mean_leaves)
        for name, side, value in grid_edges(r.family, grids.get(r.model, []),
                                            json.loads(r.params), leaves,
                                            n_features=facts.n_features):
            rows.append({"model": r.model, "family": r.family, "rule": r.rule, "param": name,
                         "side": side, "value": value})
    return pd.DataFrame(rows, columns=["model", "family", "rule", "param", "side", "value"])


def coverage(store: Store, facts: SweepFacts, *, model: str | None = None):
    """Per model (or one model): its cells, and how many are complete, have a failed fit,
    are unfinished or have a non-finite mean; with the sweep's status."""
    from .results import Coverage

    counts = store.query(f"""with {_CELLS_SQL}
        select model, count(*) as cells,
               count(*) filter (where excluded is null) as complete,
               count(*) filter (where excluded = 'failed fits') as failed,
               count(*) filter (where excluded = 'incomplete') as unfinished,
               count(*) filter (where excluded = 'undefined score') as undefined,
               count(*) filter (where excluded = 'non-finite score') as non_finite
        from judged group by model order by min(model_row)""",
                         [facts.sweep_id, facts.metric, "plain", model, TOLERANCE])
    return Coverage(sweep_status(store, facts.sweep_id), counts)


@_one_connection
def summary(store: Store, sweep_id: str | None = None, *,
            rule: str | None = None) -> Summary:
    """Per model: its picked cell (the sweep's pick rule unless `rule` is given), mean ± SE
    per metric, test scores.

    One row per model in spec order; columns `cv_<metric>`, `se_<metric>`, `n_<metric>`
    (the folds where the metric is defined), `test_<metric>` (missing where undefined or
    not yet scored), `tested_<metric>` (a test row is stored), plus `rule` and
    `failed_cells` (cells with a failed fit: never picked, see picks)."""
    import pandas as pd

    check_rule(rule)
    facts = sweep_facts(store, sweep_id)
    rule = rule or facts.rule
    both = picks(store, facts.sweep_id)  # both rules: a best on the edge matters too
    chosen = both.table[both.table["rule"] == rule]
    long = store.query(f"""
        with picked as (select unnest(?::varchar[]) as cell_id),
        sizes as (select c.model, c.family, count(*) as cells, min(c.position) as first_row,
                         count(*) filter (where exists (
                             select 1 from failures f
                             where f.sweep_id = c.sweep_id and f.cell_id = c.cell_id))
                             as failed_cells
                  from cells c where c.sweep_id = ? group by c.model, c.family)
        select c.model, z.family, z.cells, z.failed_cells, c.cell_id, c.params, s.metric,
               s.mean, s.se, s.n,
               t.value as test, t.metric is not null as tested, z.first_row
        from picked p
        join cells c on c.sweep_id = ? and c.cell_id = p.cell_id
        join sizes z using (model)
        join {CELL_SUMMARY} s on s.sweep_id = c.sweep_id and s.cell_id = c.cell_id
        left join test_scores t
          on t.sweep_id = c.sweep_id and t.cell_id = c.cell_id and t.metric = s.metric
        order by z.first_row, s.metric""",
                       [chosen["cell_id"].tolist(), facts.sweep_id, facts.sweep_id])
    if long.empty:  # nothing picked (e.g. every fit failed): an empty table, facts intact
        table = pd.DataFrame(columns=["model", "family", "cells", "failed_cells", "cell_id",
                                      "params", "rule"] + [f"{part}_{m}" for m in facts.metrics
                                                           for part in ("cv", "se", "n", "test",
                                                                        "tested")])
        return Summary(facts, rule, table, both.coverage, both.varying)
    wide = long.pivot_table(index=["first_row", "model", "family", "cells", "failed_cells",
                                   "cell_id", "params"],
                            columns="metric", values=["mean", "se", "n", "test", "tested"],
                            aggfunc="first")
    out = wide.reset_index().sort_values("first_row")
    prefix = {"mean": "cv_", "se": "se_", "n": "n_", "test": "test_", "tested": "tested_"}
    out.columns = [name if not metric else prefix[name] + metric
                   for name, metric in (c if isinstance(c, tuple) else (c, "")
                                        for c in out.columns)]
    ordered = ["model", "family", "cells", "failed_cells", "cell_id", "params"]
    stored = set(long["metric"])  # a metric undefined everywhere still has its rows
    for m in facts.metrics:
        if m in stored:
            ordered += [f"cv_{m}", f"se_{m}", f"n_{m}", f"test_{m}", f"tested_{m}"]
    out = out.reindex(columns=ordered).reset_index(drop=True)
    out.insert(6, "rule", rule)
    return Summary(facts, rule, out, both.coverage, both.varying, both.edges)


# -- the complexity table ------------------------------------------------------------------
def _shown_params(family: str, params_list: list[dict]) -> list[str]:
    """Names of the params worth a column: those that vary across cells or differ from the
    family default somewhere; in the family's complexity order, then by name."""
    fam = get_family(family)
    defaults = fam.defaults
    names = sorted({k for p in params_list for k in p})
    shown = []
    for name in names:
        seen = {json.dumps(p.get(name), sort_keys=True) for p in params_list}
        default = json.dumps(defaults.get(name), sort_keys=True)
        if len(seen) > 1 or seen != {default}:
            shown.append(name)
    order = list(fam.complexity_order)
    return sorted(shown, key=lambda n: (order.index(n) if n in order else len(order), n))


@_one_connection
def complexity_table(store: Store, model: str, sweep_id: str | None = None, *,
                     se: str = "plain", metric: str | None = None) -> ComplexityTable:
    """Every cell of `model` in complexity order (rank 0 = simplest).

    Columns: complexity_rank, complexity_tier (equally simple cells share one; missing in
    an older store), one column per shown param, cell_id, params, metric, mean, se,
    n, mean_leaves, test, within_one_se, pick ('best', 'one_se', 'best one_se' or ''),
    excluded (why a cell cannot be picked). Marks follow the sweep's first metric;
    `metric` chooses which metric's scores are shown."""
    import pandas as pd

    stats = cell_stats(store, sweep_id, se=se, model=model, metric=metric)
    table = stats.table
    params = [json.loads(p) for p in table["params"]]
    family = str(table["family"].iloc[0]) if len(table) else ""
    names = _shown_params(family, params)
    out = pd.DataFrame({"complexity_rank": table["complexity_rank"].astype(int),
                        "complexity_tier": table["complexity_tier"].astype("Int64")})
    for name in names:
        out[name] = pd.Series([p.get(name) for p in params], dtype=object)
    out["cell_id"] = table["cell_id"]
    out["params"] = table["params"]
    out["metric"] = stats.metric
    for col in ("mean", "se", "n", "mean_leaves", "test"):
        out[col] = table[col]
    out["within_one_se"] = table["within_one_se"]
    out["pick"] = [" ".join(r for r, flag in (("best", b), ("one_se", o)) if flag)
                   for b, o in zip(table["best"], table["one_se"])]
    out["excluded"] = table["excluded"].fillna("")
    fixed = {name: params[0].get(name) for name in sorted({k for p in params for k in p})
             if name not in names} if params else {}
    return ComplexityTable(stats.facts, model, family, stats.metric, se,
                           out.reset_index(drop=True), stats.thresholds.get(model),
                           tuple(names), fixed)


# -- paired comparisons --------------------------------------------------------------------
_PAIRS_SQL = f"""
    with picked as (
        select unnest($1::varchar[]) as model, unnest($2::varchar[]) as cell_id,
               unnest($3::integer[]) as place),
    fold_rows as (
        select p.model, p.place, p.cell_id, f."repeat", f.fold, f.value,
               f.valid_ratio as ratio
        from {FOLD_SCORES} f join picked p using (cell_id)
        where f.sweep_id = $4 and f.metric = $5),
    pairs as (
        select a.model as model_a, b.model as model_b, a.place as place_a, b.place as place_b,
               a.cell_id as cell_a, b.cell_id as cell_b, a.value - b.value as d, a.ratio
        from fold_rows a
        join fold_rows b on a."repeat" = b."repeat" and a.fold = b.fold and a.place < b.place)
    select p.model_a, p.model_b, p.cell_a, p.cell_b, count(p.d) as folds,
           avg(p.d) as mean_diff, var_samp(p.d) as var_diff,
           avg(p.ratio) filter (where p.d is not null) as valid_ratio,
           count(*) filter (where case when $6 = 'lower' then p.d < 0 else p.d > 0 end)
               as wins_a,
           count(*) filter (where case when $6 = 'lower' then p.d > 0 else p.d < 0 end)
               as wins_b,
           count(*) filter (where p.d = 0) as ties,
           any_value(ta.value) as test_a, any_value(tb.value) as test_b
    from pairs p
    left join test_scores ta on ta.sweep_id = $4 and ta.cell_id = p.cell_a and ta.metric = $5
    left join test_scores tb on tb.sweep_id = $4 and tb.cell_id = p.cell_b and tb.metric = $5
    group by p.model_a, p.model_b, p.cell_a, p.cell_b, p.place_a, p.place_b
    order by p.place_a, p.place_b
"""

_PAIR_COLUMNS = ["model_a", "model_b", "cell_a", "cell_b", "metric", "folds", "mean_diff",
                 "se", "t", "df", "p_value", "p_holm", "wins_a", "wins_b", "ties", "test_a",
                 "test_b", "test_diff"]


@_one_connection
def compare(store: Store, sweep_id: str | None = None, *, rule: str | None = None,
            se: str = "plain", metric: str | None = None) -> Comparison:
    """Every pair of models (spec order, a before b), their picked cells compared fold by fold.

    `rule` picks each model's cell (default: the sweep's rule) and `se` is the SE that rule
    uses; the comparison itself always uses the corrected variance. Differences are a − b on
    `metric` (default: the sweep's first metric); `p_holm` adjusts each pair's p for the
    number of pairs tested (Holm 1979). A pair with the same score on every fold has no
    test: no p, and it does not count among them."""
    import pandas as pd

    check_rule(rule)
    check_se(se)
    facts = sweep_facts(store, sweep_id)
    rule = rule or facts.rule
    metric = _check_metric(facts, metric)
    require_fold_sizes(store, [facts.sweep_id])  # the t-test's corrected variance
    chosen = picks(store, facts.sweep_id, rule=rule, se=se)
    rows = []
    if len(chosen.table) >= 2:
        raw = store.query(_PAIRS_SQL, [chosen.table["model"].tolist(),
                                       chosen.table["cell_id"].tolist(),
                                       list(range(len(chosen.table))), facts.sweep_id, metric,
                                       facts.better_of(metric)])
        for r in raw.itertuples(index=False):
            n = int(r.folds)  # where the metric is defined for both (ROC AUC may not be)
            if n < 2:
                mean = float(r.mean_diff) if n else math.nan
                test = TTest(mean=mean, se=math.nan, t=math.nan, df=math.nan, p=math.nan)
            else:
                test = t_from_moments(float(r.mean_diff), float(r.var_diff), n,
                                      float(r.valid_ratio))
            if n and int(r.ties) == n:  # the same score on every fold: nothing to test
                test = replace(test, t=math.nan, p=math.nan)
            rows.append({
                "model_a": r.model_a, "model_b": r.model_b, "cell_a": r.cell_a,
                "cell_b": r.cell_b, "metric": metric, "folds": n, "mean_diff": test.mean,
                "se": test.se, "t": test.t, "df": test.df, "p_value": test.p,
                "wins_a": int(r.wins_a), "wins_b": int(r.wins_b), "ties": int(r.ties),
                "test_a": r.test_a, "test_b": r.test_b, "test_diff": r.test_a - r.test_b})
    for row, adjusted in zip(rows, holm([r["p_value"] for r in rows])):
        row["p_holm"] = adjusted
    table = pd.DataFrame(rows, columns=_PAIR_COLUMNS)
    # degrees of freedom are whole numbers, or None for a pair not tested (csv/json say so)
    table["df"] = pd.Series([None if v != v else int(v) for v in table["df"]], dtype=object)
    return Comparison(facts, rule, se, metric, table, chosen.coverage)


def picked_fold_scores(store: Store, sweep_id: str, metric: str,
                       cell_ids: list[str]) -> pd.DataFrame:
    """Every fold score of these cells on one metric, with the model."""
    return store.query(f"""
        select c.model, f."repeat", f.fold, f.value from {FOLD_SCORES} f
        join cells c on c.sweep_id = f.sweep_id and c.cell_id = f.cell_id
        where f.sweep_id = ? and f.metric = ? and list_contains(?::varchar[], f.cell_id)""",
                       [sweep_id, metric, cell_ids])

"""Queries over the store, answered as pandas DataFrames: the sweeps it holds and the
summary grouped by model. All of it is SQL run through `Store.query`."""

from __future__ import annotations

import os
import socket

import pandas as pd

from .store import Store

__all__ = ["sweeps", "summary", "cell_table", "sweep_status", "process_alive"]


def sweeps(store: Store) -> pd.DataFrame:
    """One row per sweep, newest first, with its size and how it ended.

    A sweep still marked 'running' whose process on this host is gone shows as
    'interrupted' (the next `foldwise run` also records it so)."""
    df = store.query("""
        select s.sweep_id, s.name, s.status, s.started_at,
               round(epoch(s.finished_at - s.started_at), 1) as seconds,
               s.n_train, s.n_test, s.k, s.repeats,
               (select count(*) from cells c where c.sweep_id = s.sweep_id) as cells,
               (select count(*) from fold_scores f where f.sweep_id = s.sweep_id) as fold_rows,
               s.data_sha256[1:12] as data, s.host, s.pid
        from sweeps s order by s.started_at desc, s.sweep_id desc""")
    df["status"] = [_status(*row) for row in zip(df["status"], df["host"], df["pid"])]
    return df.drop(columns=["host", "pid"])


def _status(status, host, pid) -> str:
    """The stored status, except that a 'running' sweep whose process on this host is gone
    is 'interrupted' (on another host there is no telling, so it stays 'running')."""
    if status == "running" and host == socket.gethostname() and (
            pd.isna(pid) or not process_alive(int(pid))):
        return "interrupted"
    return str(status)


def sweep_status(store: Store, sweep_id: str) -> str:
    """How a sweep stands: 'running', 'finished', 'failed' or 'interrupted' (a sweep still
    marked running whose process on this host has gone counts as interrupted)."""
    row = store.query("select status, host, pid from sweeps where sweep_id = ?",
                      [sweep_id]).iloc[0]
    return _status(row["status"], row["host"], row["pid"])


def process_alive(pid: int) -> bool:
    """True if a process with this id exists on this host."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _sweep_metrics(store: Store, sweep_id: str) -> list[str]:
    row = store.query("select metrics from sweeps where sweep_id = ?", [sweep_id])
    return str(row.iloc[0, 0]).split(",")


def _sweep_rule(store: Store, sweep_id: str) -> str:
    row = store.query("select pick_rule from sweeps where sweep_id = ?", [sweep_id])
    return str(row.iloc[0, 0] or "best")


def cell_table(store: Store, sweep_id: str) -> pd.DataFrame:
    """Every cell of a sweep with CV mean, sd, se and n per metric, and its test scores (long)."""
    return store.query("""
        select s.model, s.family, s.cell_id, s.params, s.complexity_rank, s.metric,
               s.mean, s.sd, s.se, s.n, s.mean_leaves, t.value as test
        from cell_summary s
        left join test_scores t
          on t.sweep_id = s.sweep_id and t.cell_id = s.cell_id and t.metric = s.metric
        where s.sweep_id = ?
        order by s.model, s.complexity_rank, s.metric""", [sweep_id])


def summary(store: Store, sweep_id: str | None = None, *,
            rule: str | None = None) -> pd.DataFrame:
    """Per model: its picked cell (the sweep's pick rule unless `rule` is given), mean ± SE
    per metric, test scores.

    One row per model in spec order; columns `cv_<metric>`, `se_<metric>`, `test_<metric>`,
    plus `rule` and `failed_cells` (cells with a failed fit: never picked, see picks)."""
    from .picks import picks

    sweep_id = store.resolve_sweep(sweep_id)
    metrics = _sweep_metrics(store, sweep_id)
    primary = metrics[0]
    chosen = picks(store, sweep_id, rule=rule or _sweep_rule(store, sweep_id))
    rule = chosen.attrs["rules"][0]
    long = store.query("""
        with picked as (select unnest(?::varchar[]) as cell_id),
        sizes as (select c.model, c.family, count(*) as cells, min(c.position) as first_row,
                         count(*) filter (where exists (
                             select 1 from failures f
                             where f.sweep_id = c.sweep_id and f.cell_id = c.cell_id))
                             as failed_cells
                  from cells c where c.sweep_id = ? group by c.model, c.family)
        select c.model, z.family, z.cells, z.failed_cells, c.cell_id, c.params, s.metric,
               s.mean, s.se, s.n,
               t.value as test, z.first_row
        from picked p
        join cells c on c.sweep_id = ? and c.cell_id = p.cell_id
        join sizes z using (model)
        join cell_summary s on s.sweep_id = c.sweep_id and s.cell_id = c.cell_id
        left join test_scores t
          on t.sweep_id = c.sweep_id and t.cell_id = c.cell_id and t.metric = s.metric
        order by z.first_row, s.metric""", [chosen["cell_id"].tolist(), sweep_id, sweep_id])
    facts = dict(sweep_id=sweep_id, primary_metric=primary, metrics=metrics, rule=rule,
                 unpicked=chosen.attrs.get("unpicked", []))
    ordered = ["model", "family", "cells", "failed_cells", "cell_id", "params", "rule"]
    for m in metrics:
        ordered += [f"cv_{m}", f"se_{m}", f"test_{m}"]
    if long.empty:  # no model has a cell to pick (yet): the facts still say which sweep
        empty = pd.DataFrame(columns=ordered)
        empty.attrs.update(facts)
        return empty
    wide = long.pivot_table(index=["first_row", "model", "family", "cells", "failed_cells",
                                   "cell_id", "params"],
                            columns="metric", values=["mean", "se", "test"], aggfunc="first")
    out = wide.reset_index().sort_values("first_row")
    flat = {}
    for col in out.columns:
        name, metric = col if isinstance(col, tuple) else (col, "")
        if not metric:
            flat[col] = name
        else:
            flat[col] = {"mean": "cv_", "se": "se_", "test": "test_"}[name] + metric
    out.columns = [flat[c] for c in out.columns]
    out = out[[c for c in ordered if c in out.columns]].reset_index(drop=True)
    out.insert(6, "rule", rule)
    out.attrs.update(facts)
    return out

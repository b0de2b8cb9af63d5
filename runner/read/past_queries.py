"""The SQL of the record of past sweeps: what `diff` compares, a model's cells across the
sweeps of a spec, and what a removal takes. `past.py` applies the rules to these rows."""

from __future__ import annotations

import pandas as pd

from .queries import FOLD_SCORES, _alive_here, sweep_labels
from ..store import Store

__all__ = ["sweep_records", "sweep_status_of", "previous_sweep", "latest_of_name",
           "spec_names", "shared_cells", "paired_changes", "history_cells", "sweep_rows"]


def sweep_records(store: Store, sweep_ids: list[str]) -> dict[str, dict]:
    """What `diff` compares of these sweeps: spec text, data, plan, versions, rule, note."""
    df = store.query("""
        select sweep_id, name, status, started_at, spec_text, spec_sha256, data_path,
               data_sha256, n_train, n_test, k, repeats, plan_seed, plan::varchar as plan,
               versions::varchar as versions, metrics, pick_rule, note, host, pid
        from sweeps where list_contains(?::varchar[], sweep_id)""", [list(sweep_ids)])
    labels = sweep_labels(store, sweep_ids)
    out = {}
    for row in df.to_dict("records"):
        row["status"] = sweep_status_of(row)
        row["labels"] = labels.get(row["sweep_id"], {})
        out[row["sweep_id"]] = row
    return out


def sweep_status_of(row: dict) -> str:
    """A stored sweep row's status, a dead 'running' one on this host as 'interrupted'."""
    return "interrupted" if row["status"] == "running" and not _alive_here(row) else \
        str(row["status"])


def previous_sweep(store: Store, sweep_id: str) -> str | None:
    """The latest sweep of the same spec name started before this one, or None."""
    df = store.query("""
        select p.sweep_id from sweeps s join sweeps p on p.name = s.name
        where s.sweep_id = ? and p.sweep_id <> s.sweep_id
          and (p.started_at < s.started_at
               or (p.started_at = s.started_at and p.sweep_id < s.sweep_id))
        order by p.started_at desc, p.sweep_id desc limit 1""", [sweep_id])
    return None if df.empty else str(df.iloc[0, 0])


def latest_of_name(store: Store, name: str) -> str | None:
    """The latest sweep of this spec name, or None."""
    df = store.query("select sweep_id from sweeps where name = ? order by started_at desc, "
                     "sweep_id desc limit 1", [name])
    return None if df.empty else str(df.iloc[0, 0])


def sweeps_of_name(store: Store, name: str) -> int:
    """How many sweeps of this spec name the store holds."""
    return int(store.query("select count(*) as n from sweeps where name = ?",
                           [name])["n"].iloc[0])


def spec_names(store: Store) -> list[str]:
    """Every spec name the store's sweeps carry, sorted."""
    return store.query("select distinct name from sweeps order by name")["name"].tolist()


def shared_cells(store: Store, sweep_a: str, sweep_b: str) -> int:
    """Cells (by id: the same model, params, data, plan and evaluation) both sweeps hold."""
    return int(store.query("""
        select count(*) as n from cells a join cells b using (cell_id)
        where a.sweep_id = ? and b.sweep_id = ?""", [sweep_a, sweep_b]).n[0])


def paired_changes(store: Store, sweep_a: str, sweep_b: str, models: list[str],
                   cells_a: list[str], cells_b: list[str], metric: str,
                   better: str) -> pd.DataFrame:
    """Per model, its cell in sweep A against its cell in sweep B on the same repeat and
    fold: differences b − a on `metric` (count, mean, sample variance, folds each side
    won, ties). Only meaningful when the two sweeps' folds are the same rows."""
    return store.query(f"""
        with picked as (select unnest($1::varchar[]) as model, unnest($2::varchar[]) as cell_a,
                               unnest($3::varchar[]) as cell_b),
        pairs as (
            select p.model, fb.value - fa.value as d, fa.valid_ratio as ratio
            from picked p
            join {FOLD_SCORES} fa on fa.sweep_id = $4 and fa.cell_id = p.cell_a
                                  and fa.metric = $6
            join {FOLD_SCORES} fb on fb.sweep_id = $5 and fb.cell_id = p.cell_b and fb.metric = $6
                               and fb."repeat" = fa."repeat" and fb.fold = fa.fold)
        select model, count(*) as folds, avg(d) as mean_diff, var_samp(d) as var_diff,
               avg(ratio) as valid_ratio,
               count(*) filter (where case when $7 = 'lower' then d < 0 else d > 0 end) as wins_b,
               count(*) filter (where case when $7 = 'lower' then d > 0 else d < 0 end) as wins_a,
               count(*) filter (where d = 0) as ties
        from pairs group by model""",
                       [models, cells_a, cells_b, sweep_a, sweep_b, metric, better])


def history_cells(store: Store, name: str, metric: str, *, models: list[str] | None = None,
                  family: str | None = None) -> pd.DataFrame:
    """Every cell of the chosen models (by label, or every model of a family) in every
    sweep of spec `name`, oldest sweep first: its fold-score count, mean, sample SD, mean
    n_valid/n_train on `metric`, test score, whether a fit failed, and the sweep's facts."""
    return store.query(f"""
        select s.sweep_id, s.started_at, s.status, s.host, s.pid, s.data_sha256,
               s.spec_sha256, s.k::bigint * s.repeats as n_folds, s.pick_rule, c.model, c.family,
               c.cell_id, c.params, c.complexity_rank, c.complexity_tier, c.position,
               count(f.value) as n,
               avg(f.value) as mean, stddev_samp(f.value) as sd,
               avg(f.valid_ratio) as valid_ratio,
               any_value(t.value) as test,
               exists (select 1 from failures x where x.sweep_id = c.sweep_id
                       and x.cell_id = c.cell_id) as failed
        from sweeps s
        join cells c on c.sweep_id = s.sweep_id
        left join {FOLD_SCORES} f on f.sweep_id = c.sweep_id and f.cell_id = c.cell_id
                                and f.metric = $2
        left join test_scores t on t.sweep_id = c.sweep_id and t.cell_id = c.cell_id
                                and t.metric = $2
        where s.name = $1 and ($3::varchar[] is null or list_contains($3::varchar[], c.model))
          and ($4::varchar is null or c.family = $4)
        group by all
        order by s.started_at, s.sweep_id, c.position""", [name, metric, models, family])


def specs_holding(store: Store, model: str | None, family: str | None) -> list[str]:
    """The spec names whose sweeps hold a cell of this model label (or family)."""
    return store.query("""select distinct s.name from sweeps s join cells c using (sweep_id)
        where ($1::varchar is null or c.model = $1) and ($2::varchar is null or c.family = $2)
        order by 1""", [model, family])["name"].tolist()


def sweep_rows(store: Store, sweep_ids: list[str]) -> dict[str, int]:
    """Rows each table holds for these sweeps (what removing them takes away)."""
    from ..store import TABLES

    tables = [t for t in TABLES if t != "metrics"]
    mine = {t: "list_contains($1::varchar[], sweep_id)" for t in tables}
    mine["model_coefficients"] = ("model_id in (select model_id from models "
                                  "where list_contains($1::varchar[], sweep_id))")
    counts = store.query("select " + ", ".join(
        f"(select count(*) from {t} where {mine[t]}) as {t}" for t in tables),
        [list(sweep_ids)])
    return {t: int(counts[t].iloc[0]) for t in tables}

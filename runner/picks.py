"""Pick rules: which cell of each model to keep, by SQL over the store's fold scores, and
the complexity table that shows each model's cells with the picks marked.

`best` takes the best mean CV score; `one_se` takes the simplest cell (lowest complexity
rank) whose mean is within one standard error of the best. The pure functions here state
each rule on plain numbers; the SQL in `picks` applies the same rule to a stored sweep."""

from __future__ import annotations

import json
import math
from typing import Sequence

import pandas as pd

from .errors import QueryError
from .families import FAMILIES, nearest
from .store import Store

__all__ = ["RULES", "SE_KINDS", "TOLERANCE", "best_index", "one_se_index", "one_se_threshold",
           "corrected_variance", "standard_error", "picks", "cell_stats", "sweep_facts",
           "check_rule", "check_se", "complexity_table", "shown_params", "varying_params",
           "pick_notes"]

RULES = ("best", "one_se")
SE_KINDS = ("plain", "corrected")
TOLERANCE = 1e-12
"""Relative slack at the one-SE threshold, so a mean equal to it in exact arithmetic counts."""


# -- the rules on plain numbers ------------------------------------------------------------
def _check_better(better: str) -> None:
    if better not in ("lower", "higher"):
        raise ValueError(f"better must be 'lower' or 'higher', got better={better!r}")


def best_index(means: Sequence[float], better: str) -> int:
    """Position of the best mean; among equal means the first (the simplest)."""
    _check_better(better)
    if not len(means):
        raise ValueError("means is empty; a pick needs at least one cell")
    sign = 1.0 if better == "lower" else -1.0
    return min(range(len(means)), key=lambda i: (sign * float(means[i]), i))


def one_se_threshold(best_mean: float, se_best: float, better: str) -> float:
    """The bar a mean must reach: best + SE when lower is better, best − SE when higher is."""
    _check_better(better)
    return best_mean + se_best if better == "lower" else best_mean - se_best


def _slack(best_mean: float) -> float:
    return TOLERANCE * max(1.0, abs(best_mean))


def one_se_index(means: Sequence[float], se_best: float, better: str) -> int:
    """The simplest cell within one SE of the best; `means` run simplest first.

    Lower is better: the first i with means[i] <= best + se_best; higher is better: the
    first i with means[i] >= best − se_best."""
    best = float(means[best_index(means, better)])
    bar = one_se_threshold(best, float(se_best), better)
    slack = _slack(best)
    for i, m in enumerate(means):
        if (m <= bar + slack) if better == "lower" else (m >= bar - slack):
            return i
    raise AssertionError("unreachable: the best cell is always within its own bar")


def corrected_variance(var: float, n: int, valid_ratio: float) -> float:
    """The corrected resampled variance of a mean over n fold scores: (1/n + n_valid/n_train)·var."""
    return (1.0 / n + valid_ratio) * var


def standard_error(values: Sequence[float], *, kind: str = "plain",
                   valid_ratio: float | None = None) -> float:
    """SE of the mean of fold scores: sd/sqrt(n), or the square root of the corrected variance."""
    check_se(kind)
    n = len(values)
    if n < 2:
        raise ValueError(f"a standard error needs at least 2 fold scores, got {n}")
    mean = sum(values) / n
    var = sum((v - mean) ** 2 for v in values) / (n - 1)
    if kind == "plain":
        return math.sqrt(var / n)
    if valid_ratio is None:
        raise ValueError("kind='corrected' needs valid_ratio (mean n_valid / n_train)")
    return math.sqrt(corrected_variance(var, n, valid_ratio))


def check_rule(rule: str | None, *, allow_none: bool = True) -> None:
    """Refuse an unknown pick rule, naming the valid ones."""
    if rule is None and allow_none:
        return
    if rule not in RULES:
        raise QueryError(f"rule must be one of {', '.join(RULES)}, got rule={rule!r}.")


def check_se(kind: str) -> None:
    """Refuse an unknown kind of standard error."""
    if kind not in SE_KINDS:
        raise QueryError(f"se must be one of {', '.join(SE_KINDS)}, got se={kind!r}.")


# -- the rules over the store ------------------------------------------------------------
def sweep_facts(store: Store, sweep_id: str | None) -> dict:
    """The resolved sweep id with its metrics, primary metric direction, folds and rule."""
    sweep_id = store.resolve_sweep(sweep_id)
    row = store.query("""
        select s.metrics, s.k, s.repeats, s.pick_rule, m.better
        from sweeps s left join metrics m on m.metric = split_part(s.metrics, ',', 1)
        where s.sweep_id = $1""", [sweep_id]).iloc[0]
    metrics = str(row["metrics"]).split(",")
    return {"sweep_id": sweep_id, "metrics": metrics, "metric": metrics[0],
            "better": row["better"] or "lower", "n_folds": int(row["k"] * row["repeats"]),
            "rule": row["pick_rule"] or "best"}


def _check_model(store: Store, sweep_id: str, model: str | None) -> None:
    if model is None:
        return
    known = store.query("select distinct model from cells where sweep_id = $1 order by model",
                        [sweep_id])["model"].tolist()
    if model not in known:
        raise QueryError(f"no model '{model}' in sweep {sweep_id}; its models: "
                         f"{', '.join(known)}.{nearest(model, known)}")


# Common table expressions shared by every pick query. Parameters: $1 sweep id, $2 metric,
# $3 se kind ('plain' or 'corrected'), $4 model or null (all), $5 relative tolerance.
# judged = every cell with mean/SE and why it is excluded; bars = the best cell and the
# one-SE threshold per model; within = eligible cells inside it; chosen = the simplest of those.
_CELLS_SQL = """
    plan as (select k * repeats as n_folds from sweeps where sweep_id = $1),
    stats as (
        select c.model, c.family, c.cell_id, c.params, c.complexity_rank,
               min(c.position) as cell_row, count(f.value) as n, avg(f.value) as mean,
               stddev_samp(f.value) as sd, avg(f.n_valid::double / f.n_train) as valid_ratio,
               avg(f.n_leaves) as mean_leaves
        from cells c
        left join fold_scores f
          on f.sweep_id = c.sweep_id and f.cell_id = c.cell_id and f.metric = $2
        where c.sweep_id = $1 and ($4::varchar is null or c.model = $4)
        group by c.model, c.family, c.cell_id, c.params, c.complexity_rank),
    judged as (
        select s.*, p.n_folds,
               case when s.n = 0 then null
                    when $3 = 'corrected'
                    then sqrt((1.0 / s.n + s.valid_ratio) * s.sd * s.sd)
                    else s.sd / sqrt(s.n) end as se,
               case when exists (select 1 from failures x
                                 where x.sweep_id = $1 and x.cell_id = s.cell_id)
                    then 'failed fits'
                    when s.n < p.n_folds then 'incomplete'
                    when not isfinite(s.mean) then 'non-finite score'
               end as excluded,
               min(s.cell_row) over (partition by s.model) as model_row
        from stats s, plan p),
    ranked as (
        select j.*, m.better, row_number() over (
                   partition by j.model
                   order by case when m.better = 'lower' then j.mean else -j.mean end,
                            j.complexity_rank) as place
        from judged j join metrics m on m.metric = $2
        where j.excluded is null),
    bars as (
        select model, better, cell_id as best_cell, mean as best_mean, se as best_se,
               case when better = 'lower' then mean + se else mean - se end as threshold,
               $5 * greatest(1.0, abs(mean)) as slack
        from ranked where place = 1),
    within as (
        select r.model, r.cell_id, r.complexity_rank
        from ranked r join bars b using (model)
        where case when b.better = 'lower' then r.mean <= b.threshold + b.slack
                   else r.mean >= b.threshold - b.slack end),
    chosen as (
        select model, arg_min(cell_id, complexity_rank) as one_se_cell, count(*) as n_within
        from within group by model),
    eligible as (
        select model, count(*) filter (where excluded is null) as eligible, count(*) as cells
        from judged group by model)
"""


def cell_stats(store: Store, sweep_id: str | None = None, *, se: str = "plain",
               model: str | None = None, metric: str | None = None) -> pd.DataFrame:
    """Every cell with mean, SE, n, leaves, test score, why it is excluded, and marks
    (within_one_se, best, one_se, all on the sweep's first metric); simplest first."""
    check_se(se)
    facts = sweep_facts(store, sweep_id)
    _check_model(store, facts["sweep_id"], model)
    metric = metric or facts["metric"]
    if metric not in facts["metrics"]:
        raise QueryError(f"metric must be one of this sweep's metrics ({', '.join(facts['metrics'])}),"
                         f" got metric={metric!r}.")
    args = [facts["sweep_id"], facts["metric"], se, model, TOLERANCE]
    df = store.query(f"""with {_CELLS_SQL}
        select j.model, j.family, j.complexity_rank, j.cell_id, j.params, j.n, j.mean, j.sd,
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
    better = facts["better"]
    if metric != facts["metric"]:
        # Marks stay on the sweep's first metric; the shown scores come from `metric`.
        shown = store.query(f"""with {_CELLS_SQL}
            select j.cell_id, j.n, j.mean, j.sd, j.se, j.valid_ratio, j.mean_leaves,
                   t.value as test, m.better
            from judged j left join metrics m on m.metric = $2
            left join test_scores t on t.sweep_id = $1 and t.cell_id = j.cell_id
                                   and t.metric = $2""", [args[0], metric, *args[2:]])
        better = str(shown["better"].iloc[0]) if len(shown) else better
        cols = ["n", "mean", "sd", "se", "valid_ratio", "mean_leaves", "test"]
        df[cols] = shown.set_index("cell_id").loc[df["cell_id"], cols].to_numpy()
    df.attrs.update(facts, metric=metric, better=better, pick_metric=facts["metric"],
                    pick_better=facts["better"], se=se, thresholds=thresholds.to_dict())
    return df


def picks(store: Store, sweep_id: str | None = None, *, rule: str | None = None,
          se: str = "plain", model: str | None = None) -> pd.DataFrame:
    """The picked cell of each model: one row per model and rule (both rules when rule is None).

    Cells with a failed fit or fewer fold scores than k·r are never picked."""
    check_rule(rule)
    check_se(se)
    facts = sweep_facts(store, sweep_id)
    _check_model(store, facts["sweep_id"], model)
    rules = list(RULES) if rule is None else [rule]
    df = store.query(f"""with {_CELLS_SQL},
        picked as (
            select model, 'best' as rule, best_cell as cell_id from bars
            union all
            select model, 'one_se' as rule, one_se_cell as cell_id from chosen)
        select p.model, j.family, p.rule, p.cell_id, j.params, j.complexity_rank,
               b.better, $2 as metric, j.mean, j.se, j.sd, j.n, b.best_mean, b.best_se,
               b.threshold, c.n_within, t.value as test, j.mean_leaves, e.cells, e.eligible,
               j.model_row, coalesce((select list(model order by model) from eligible
                                      where eligible = 0), []::varchar[]) as unpicked
        from picked p
        join judged j using (model, cell_id)
        join bars b using (model)
        join chosen c using (model)
        join eligible e using (model)
        left join test_scores t on t.sweep_id = $1 and t.cell_id = p.cell_id and t.metric = $2
        where list_contains($6::varchar[], p.rule)
        order by j.model_row, p.rule""",
                     [facts["sweep_id"], facts["metric"], se, model, TOLERANCE, rules])
    if len(df):
        unpicked = list(df["unpicked"].iloc[0])
    else:
        unpicked = store.query(f"""with {_CELLS_SQL}
            select model from eligible where eligible = 0 order by model""",
                               [facts["sweep_id"], facts["metric"], se, model, TOLERANCE]
                               )["model"].tolist()
    df = df.drop(columns=["model_row", "unpicked"]).reset_index(drop=True)
    df.attrs.update(facts, default_rule=facts["rule"], rules=rules, se=se, unpicked=unpicked)
    return df


# -- what the picks could not use, in words ----------------------------------------------
def _count(n: int, one: str, many: str) -> str:
    return f"{n} {one if n == 1 else many}"


def pick_notes(store: Store, sweep_id: str | None = None, *,
               model: str | None = None) -> list[str]:
    """Plain sentences on what limits a sweep's picks: a sweep still running or stopped
    early (its picks are among the cells finished so far), and for each model without a
    pick whether its cells are unfinished, have failed fits or a non-finite score.

    Unfinished is not failed: a cell that simply has not been scored yet is said to be so,
    and the sweep's status says why (still running, interrupted, or failed). `model`
    limits the notes to one model's cells."""
    from .queries import sweep_status

    facts = sweep_facts(store, sweep_id)
    sid, n_folds = facts["sweep_id"], facts["n_folds"]
    status = sweep_status(store, sid)
    counts = store.query(f"""with {_CELLS_SQL}
        select model, count(*) as cells,
               count(*) filter (where excluded is null) as complete,
               count(*) filter (where excluded = 'failed fits') as failed,
               count(*) filter (where excluded = 'incomplete') as unfinished,
               count(*) filter (where excluded = 'non-finite score') as non_finite
        from judged group by model order by min(model_row)""",
                         [sid, facts["metric"], "plain", model, TOLERANCE])
    notes = []
    if status != "finished":
        done, total = int(counts["complete"].sum()), int(counts["cells"].sum())
        now = {"running": "is still running", "interrupted": "was interrupted"}.get(
            status, "stopped with an error")
        then = (" so far." if status == "running" else
                "; running the spec again completes only what is missing.")
        if done:
            notes.append(f"sweep {sid} {now}: {done} of {total} cells have all {n_folds} "
                         f"folds scored, and the picks are made among those{then}")
        else:
            notes.append(f"sweep {sid} {now}: none of its {_count(total, 'cell', 'cells')} "
                         f"has all {n_folds} folds scored{then.replace(' so far', ' yet')}")
    unfinished = {
        "running": ("is not finished yet", "are not finished yet"),
        "interrupted": ("was not finished when the sweep was interrupted",
                        "were not finished when the sweep was interrupted"),
        "failed": ("was not finished when the sweep stopped with an error",
                   "were not finished when the sweep stopped with an error"),
    }.get(status, ("lacks fold scores", "lack fold scores"))
    for r in counts[counts["complete"] == 0].itertuples(index=False):
        parts = []
        if r.failed:
            parts.append(_count(r.failed, "has a failed fit", "have a failed fit"))
        if r.unfinished:
            parts.append(_count(r.unfinished, *unfinished))
        if r.non_finite:
            parts.append(_count(r.non_finite, "has a non-finite mean score",
                                "have a non-finite mean score"))
        text = (f"model '{r.model}' has no cell to pick{' yet' if status == 'running' else ''}"
                f": of its {_count(r.cells, 'cell', 'cells')}, {' and '.join(parts)}.")
        if r.failed:
            text += (f" `foldwise sql \"select * from failures where sweep_id = '{sid}'\"` "
                     "shows the errors.")
        notes.append(text)
    return notes


# -- the complexity table ------------------------------------------------------------------
def shown_params(family: str, params_list: list[dict]) -> list[str]:
    """Names of the params worth a column: those that vary across cells or differ from the
    family default somewhere; in the family's complexity order, then by name."""
    fam = FAMILIES.get(family)
    defaults = {n: p.default for n, p in fam.params.items()} if fam else {}
    names = sorted({k for p in params_list for k in p})
    shown = []
    for name in names:
        seen = {json.dumps(p.get(name), sort_keys=True) for p in params_list}
        default = json.dumps(defaults.get(name), sort_keys=True)
        if len(seen) > 1 or seen != {default}:
            shown.append(name)
    order = list(fam.complexity_order) if fam else []
    return sorted(shown, key=lambda n: (order.index(n) if n in order else len(order), n))


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


def complexity_table(store: Store, model: str, sweep_id: str | None = None, *,
                     se: str = "plain", metric: str | None = None) -> pd.DataFrame:
    """Every cell of `model` in complexity order (rank 0 = simplest).

    Columns: complexity_rank, one column per shown param, cell_id, params, metric, mean, se,
    n, mean_leaves, test, within_one_se, pick ('best', 'one_se', 'best one_se' or ''),
    excluded (why a cell cannot be picked). Marks follow the sweep's first metric;
    `metric` chooses which metric's scores are shown."""
    stats = cell_stats(store, sweep_id, se=se, model=model, metric=metric)
    attrs = dict(stats.attrs)
    params = [json.loads(p) for p in stats["params"]]
    family = str(stats["family"].iloc[0]) if len(stats) else ""
    names = shown_params(family, params)
    out = pd.DataFrame({"complexity_rank": stats["complexity_rank"].astype(int)})
    for name in names:
        out[name] = pd.Series([p.get(name) for p in params], dtype=object)
    out["cell_id"] = stats["cell_id"]
    out["params"] = stats["params"]
    out["metric"] = attrs["metric"]
    for col in ("mean", "se", "n", "mean_leaves", "test"):
        out[col] = stats[col]
    threshold = attrs["thresholds"].get(model)
    out["within_one_se"] = stats["within_one_se"]
    out["pick"] = [" ".join(r for r, flag in (("best", b), ("one_se", o)) if flag)
                   for b, o in zip(stats["best"], stats["one_se"])]
    out["excluded"] = stats["excluded"].fillna("")
    fixed = {}
    for name in sorted({k for p in params for k in p}) if params else []:
        if name not in names:
            fixed[name] = params[0].get(name)
    attrs.update(model=model, family=family, threshold=threshold, shown_params=names,
                 fixed_params=fixed)
    attrs.pop("thresholds", None)
    out.attrs.update(attrs)
    return out.reset_index(drop=True)


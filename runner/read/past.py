"""The record of past sweeps, read: what changed between two sweeps (`diff_sweeps`) and how
one model's pick moved across every sweep of a spec (`model_history`).

The SQL is in `past_queries.py` and `queries.py`, and the rules on plain numbers in
`picks.py` (best, one-SE) and `compare.py` (the corrected resampled t-test); this module
joins them and decides one thing of its own: when two sweeps' fold scores may be paired.
They may when both sweeps scored the same data file (same SHA-256) under the same plan (test
split, k, repeats and seed), since only then is fold (repeat, fold) the same rows in both.
The plan is recorded with every sweep since schema version 3; for older sweeps, a cell id
that both sweeps hold proves it, as a cell id hashes the data, the plan and the evaluation
version."""

from __future__ import annotations

import difflib
import json
import math
import shlex

import pandas as pd

from ..errors import QueryError
from ..names import not_found
from ..write.spec_yaml import stated_missing_words
from .compare import holm, t_from_moments
from .picks import RULES, best_index, check_rule, check_se, one_se_index
from .past_queries import (history_cells, latest_of_name, paired_changes, previous_sweep,
                           shared_cells, spec_names, specs_holding, sweep_records,
                           sweep_status_of, sweeps_of_name)
from .queries import (check_cells, fold_size_fault, json_object, picks, require_fold_sizes,
                      sweep_facts, sweep_labels, varying_params)
from .results import ModelHistory, SweepDiff
from .views import is_missing
from ..store import Store

__all__ = ["diff_sweeps", "model_history", "MAX_DIFF_TEXT"]

MAX_DIFF_TEXT = 1_000_000
"""Spec texts longer than this (characters) are not diffed line by line, only told apart."""

_DIFF_COLUMNS = ["model", "family", "in_sweeps", "cell_a", "params_a", "cell_b", "params_b", "same_cell",
                 "mean_a", "se_a", "test_a", "mean_b", "se_b", "test_b", "cv_change",
                 "test_change", "folds", "mean_diff", "se", "t", "df", "p_value", "p_holm",
                 "wins_a", "wins_b", "ties"]


# -- two sweeps ----------------------------------------------------------------------------
def diff_sweeps(store: Store, sweep_a: str | None = None, sweep_b: str | None = None, *,
                se: str = "plain") -> SweepDiff:
    """What changed from sweep A to sweep B (ids or unique prefixes).

    Given both, A then B; given one, that sweep as B against the sweep of the same spec
    name started just before it; given none, the latest sweep against its predecessor.
    Each sweep's cells are picked under that sweep's own rule (with `se` for one-SE)."""
    check_se(se)
    with store.reading():
        return _diff(store, sweep_a, sweep_b, se)


def _diff(store: Store, sweep_a: str | None, sweep_b: str | None, se: str) -> SweepDiff:
    a, b = _the_two(store, sweep_a, sweep_b)
    records = sweep_records(store, [a, b])
    ra, rb = records[a], records[b]
    shared = shared_cells(store, a, b)
    data_same = known_same(ra["data_sha256"], rb["data_sha256"])
    plan_same = _plan_same(ra, rb, shared)
    paired, why = _pairing(ra, rb, data_same, plan_same)
    fa, fb = sweep_facts(store, a), sweep_facts(store, b)
    metric = fb.metric if fa.metric == fb.metric else None
    needs_sizes = se == "corrected" or (paired and metric is not None)
    bad = fold_size_fault(store, [a, b]) if needs_sizes else None
    refused = ""
    if bad is not None and se == "corrected":  # no pick without the corrected SE
        refused = (f"not compared: sweep {bad}'s fold rows (table fold_scores) hold an "
                   f"n_train or n_valid that is missing or not positive, which the corrected "
                   f"SE of --se corrected needs to pick; use --se plain, or rerun its spec "
                   f"(or `foldwise remove` it).")
        table = pd.DataFrame(columns=_DIFF_COLUMNS)
    else:
        pa = picks(store, a, rule=fa.rule, se=se).table.set_index("model")
        pb = picks(store, b, rule=fb.rule, se=se).table.set_index("model")
        in_a, in_b = _models(store, a), _models(store, b)
        table = pd.DataFrame([_model_row(m, pa, pb, _in_sweeps(m, in_a, in_b))
                              for m in dict.fromkeys([*in_b, *in_a])], columns=_DIFF_COLUMNS)
    if paired and bad is not None and not refused:
        paired, why = False, (
            f"not paired: the folds are the same rows, but sweep {bad}'s fold rows (table "
            "fold_scores) hold an n_train or n_valid that is missing or not positive, which "
            "the paired test needs; the CV means are compared unpaired. Rerun its spec to "
            "pair them.")
    if paired and metric is not None and not refused:
        table = _with_pairs(store, table, a, b, metric, fb.better_of(metric))
    varying = {}
    for sid in (a, b):
        for model, names in varying_params(store, sid).items():
            varying[model] = sorted({*varying.get(model, []), *names})
    return SweepDiff(ra, rb, _spec_diff(ra, rb), data_same, plan_same,
                     _changed(json_object(ra["versions"]), json_object(rb["versions"])),
                     _changed(ra["labels"], rb["labels"]), metric, fb.better_of(), se,
                     paired, why, shared, table, varying, refused, _read_words(ra, rb))


def _read_words(ra: dict, rb: dict) -> tuple | None:
    """(a, b) the words each sweep's spec read as missing (`data.missing_words`; None: pandas'
    default list) when they differ: the same file read otherwise. None when they agree or a
    stored spec text cannot say."""
    try:
        a, b = (stated_missing_words(str(r["spec_text"] or "")) for r in (ra, rb))
    except ValueError:
        return None
    return None if a == b else (a, b)


def _the_two(store: Store, sweep_a: str | None, sweep_b: str | None) -> tuple[str, str]:
    if sweep_a is not None and sweep_b is not None:
        a = store.resolve_sweep(sweep_a, option="SWEEP_A")
        b = store.resolve_sweep(sweep_b, option="SWEEP_B")
    else:
        b = store.resolve_sweep(sweep_a, option="SWEEP_A")
        a = previous_sweep(store, b)
        if a is None:
            name = sweep_facts(store, b).name
            raise QueryError(f"sweep {b} is the first sweep of spec '{name}' in store "
                             f"{store.path}, so there is no earlier one to compare it with; "
                             "give two sweep ids (`foldwise diff A B`; `foldwise sweeps` "
                             "lists them).")
    if a == b:
        raise QueryError(f"both sweeps are {a}; give two different sweeps.")
    return a, b


def _changed(a: dict, b: dict) -> dict:
    return {k: (a.get(k), b.get(k)) for k in sorted({*a, *b}) if a.get(k) != b.get(k)}


def _spec_diff(ra: dict, rb: dict) -> tuple[str, ...]:
    """The unified diff of the two spec texts ('' lines of no difference: empty)."""
    ta, tb = str(ra["spec_text"] or ""), str(rb["spec_text"] or "")
    if ta == tb:
        return ()
    if max(len(ta), len(tb)) > MAX_DIFF_TEXT:
        return (f"(spec texts of {len(ta):,} and {len(tb):,} characters differ; too long to "
                "show line by line)",)
    return tuple(difflib.unified_diff(ta.splitlines(), tb.splitlines(),
                                      f"sweep {ra['sweep_id']}", f"sweep {rb['sweep_id']}",
                                      lineterm=""))


def _plan_same(ra: dict, rb: dict, shared: int) -> bool | None:
    if ra["plan"] is not None and rb["plan"] is not None:
        return json_object(ra["plan"]) == json_object(rb["plan"])
    return True if shared else None


def _hash_changed(prev, here, column: str) -> bool | None:
    """Whether `column` changed since the sweep before; None when either recorded none."""
    if prev is None:
        return False
    same = known_same(prev[column], here[column])
    return None if same is None else not same


def known_same(x, y) -> bool | None:
    """Whether two stored hashes agree; None when either sweep recorded none (a store from
    an older foldwise or a colleague), so nothing is claimed either way."""
    if is_missing(x) or is_missing(y):
        return None
    return x == y


def _pairing(ra: dict, rb: dict, data_same: bool | None,
             plan_same: bool | None) -> tuple[bool, str]:
    if data_same is None:
        return False, ("not paired: the folds may differ (a sweep recorded no hash of its "
                       "data, so it cannot be told whether the data changed)")
    if not data_same:
        return False, "not paired: the folds differ (the data changed)"
    if plan_same is False:
        return False, "not paired: the folds differ (the plan changed)"
    if plan_same is None:
        older = ra["sweep_id"] if ra["plan"] is None else rb["sweep_id"]
        return False, (f"not paired: the folds may differ (sweep {older} was recorded "
                       "without its plan, and the two sweeps share no cell)")
    return True, ""


def _models(store: Store, sweep_id: str) -> list[str]:
    from .queries import model_order

    return model_order(store, sweep_id)


def _in_sweeps(model: str, in_a: list[str], in_b: list[str]) -> str:
    """Which of the two sweeps hold this model: 'both', 'A only' or 'B only'."""
    return "both" if model in in_a and model in in_b else ("A only" if model in in_a
                                                            else "B only")


def _model_row(model: str, pa: pd.DataFrame, pb: pd.DataFrame, in_sweeps: str) -> dict:
    row = {"model": model, "in_sweeps": in_sweeps}
    for side, p in (("a", pa), ("b", pb)):
        hit = p.loc[model] if model in p.index else None
        if hit is not None:
            row["family"] = hit["family"]
        row[f"cell_{side}"] = None if hit is None else hit["cell_id"]
        row[f"params_{side}"] = None if hit is None else hit["params"]
        for col in ("mean", "se", "test"):
            row[f"{col}_{side}"] = math.nan if hit is None else float(hit[col])
    row["same_cell"] = row["cell_a"] is not None and row["cell_a"] == row["cell_b"]
    row["cv_change"] = row["mean_b"] - row["mean_a"]
    row["test_change"] = row["test_b"] - row["test_a"]
    return row


def _with_pairs(store: Store, table: pd.DataFrame, a: str, b: str, metric: str,
                better: str) -> pd.DataFrame:
    """The corrected resampled t-test of b − a per model whose cell both sweeps pick and
    whose fold scores differ somewhere; Holm's adjustment over those tests alone."""
    both = table.dropna(subset=["cell_a", "cell_b"])
    if both.empty:
        return table
    require_fold_sizes(store, [a, b])
    raw = paired_changes(store, a, b, both["model"].tolist(), both["cell_a"].tolist(),
                         both["cell_b"].tolist(), metric, better).set_index("model")
    table = table.set_index("model")
    for model, r in raw.iterrows():
        n = int(r["folds"])
        table.loc[model, ["folds", "wins_a", "wins_b", "ties"]] = [
            n, int(r["wins_a"]), int(r["wins_b"]), int(r["ties"])]
        if n >= 2 and int(r["ties"]) == n:  # the same score on every fold: nothing to test
            table.loc[model, ["mean_diff", "se"]] = [0.0, 0.0]
        elif n >= 2:
            test = t_from_moments(float(r["mean_diff"]), float(r["var_diff"]), n,
                                  float(r["valid_ratio"]))
            table.loc[model, ["mean_diff", "se", "t", "df", "p_value"]] = [
                test.mean, test.se, test.t, test.df, test.p]
    tested = table["p_value"].notna()  # Holm's m: the models tested, no others
    table.loc[tested, "p_holm"] = holm(table.loc[tested, "p_value"].astype(float).tolist())
    for col in ("folds", "df", "wins_a", "wins_b", "ties"):  # counts: whole numbers or None
        table[col] = pd.Series([None if v != v else int(v) for v in table[col]],
                               index=table.index, dtype=object)
    return table.reset_index()


# -- one model across sweeps -----------------------------------------------------------------
def model_history(store: Store, model: str | None = None, *, name: str | None = None,
                  family: str | None = None, rule: str | None = None, se: str = "plain",
                  metric: str | None = None) -> ModelHistory:
    """One model label (or every model of `family`, or with neither every model) across
    every sweep of spec `name` (default: the latest sweep's), oldest first: per sweep the
    cell picked under `rule` (default: each sweep's own), its CV mean ± SE and test score
    on `metric` (default: the latest sweep's first metric), which picks too."""
    check_rule(rule)
    check_se(se)
    with store.reading():
        return _history(store, model, name, family, rule, se, metric)


def _history(store: Store, model, name, family, rule, se, metric) -> ModelHistory:
    latest = _latest_of(store, name)
    facts = sweep_facts(store, latest)
    name = facts.name
    metric = metric or facts.metric
    if metric not in facts.metrics:
        raise QueryError(not_found("--metric", metric, f"no metric of the latest '{name}' "
                                   f"sweep ({facts.sweep_id})", facts.metrics,
                                   known_as="its metrics"))
    cells = history_cells(store, name, metric, models=[model] if model else None,
                          family=family)
    if cells.empty:
        others = [n for n in specs_holding(store, model, family) if n != name]
        raise QueryError(_no_history(history_cells(store, name, metric), name, model, family)
                         + _elsewhere(others))
    better = facts.better_of(metric)
    order = list(dict.fromkeys(cells.sort_values("position", kind="stable")["model"]))
    rows, before = [], {}
    sweeps = list(dict.fromkeys(cells["sweep_id"]))
    check_cells(store, sweeps)  # the earlier sweeps' cells too
    if se == "corrected":
        require_fold_sizes(store, sweeps)
    first_rows = cells.drop_duplicates("sweep_id").set_index("sweep_id")
    labels = sweep_labels(store, sweeps)
    for i, sid in enumerate(sweeps):
        prev = first_rows.loc[sweeps[i - 1]] if i else None
        here = first_rows.loc[sid]
        for model_here in order:
            group = cells[(cells["sweep_id"] == sid) & (cells["model"] == model_here)]
            if group.empty:
                continue
            row = _history_row(group, rule or here["pick_rule"] or "best", se, better)
            row.update(sweep_id=sid, started_at=here["started_at"],
                       status=sweep_status_of(here.to_dict()),
                       data=None if is_missing(here["data_sha256"]) else here["data_sha256"][:12],
                       data_changed=_hash_changed(prev, here, "data_sha256"),
                       spec_changed=_hash_changed(prev, here, "spec_sha256"),
                       labels=json.dumps(labels.get(sid, {}), sort_keys=True))
            # the same grid point picked again is no change, though a new plan or new data
            # give it another cell id
            picked = _params_key(row["params"])
            row["pick_changed"] = model_here in before and picked != before[model_here]
            before[model_here] = picked
            rows.append(row)
    columns = ["sweep_id", "started_at", "status", "model", "family", "rule", "cell_id",
               "params", "complexity_rank", "n", "mean", "se", "test", "data", "data_changed",
               "spec_changed", "pick_changed", "labels"]
    n_sweeps = sweeps_of_name(store, name)
    return ModelHistory(name, tuple(order), metric, better, se, rule,
                        pd.DataFrame(rows, columns=columns), n_sweeps)


def _no_history(every: pd.DataFrame, name: str, model, family) -> str:
    """Why no cell matched: a model of another family, or an unknown model or family,
    with what the spec's sweeps do hold."""
    families = dict(zip(every["model"], every["family"]))
    if model in families:
        return (f"model '{model}' of spec '{name}' is of family '{families[model]}', not "
                f"'{family}'; ask for the model or for a family, not both.")
    if model:
        return not_found("--model", model, f"no model of any sweep of spec '{name}'",
                         sorted(families), known_as="its models")
    return not_found("--family", family, f"no family of any sweep of spec '{name}'",
                     sorted(set(families.values())), known_as="its families")


def _elsewhere(names: list[str]) -> str:
    """Where else the model (or family) is: the other specs holding it, for --name."""
    if not names:
        return ""
    if len(names) == 1:
        return f" Spec '{names[0]}' holds it: give --name {shlex.quote(names[0])}."
    return f" Specs {', '.join(repr(n) for n in names)} hold it: give --name with one of them."


def _latest_of(store: Store, name: str | None) -> str:
    if name is None:
        return store.latest_sweep_id()
    latest = latest_of_name(store, name)
    if latest is None:
        raise QueryError(not_found("--name", name, "the spec name of no sweep in store "
                                   f"{store.path}", spec_names(store),
                                   known_as="its spec names"))
    return latest


def _history_row(group: pd.DataFrame, rule: str, se: str, better: str) -> dict:
    """The picked cell of one model in one sweep, by the rules of `picks.py` (the same cell
    `picks` chooses in SQL): complete cells only, simplest first."""
    rule = rule if rule in RULES else "best"
    row = {"model": group["model"].iloc[0], "family": group["family"].iloc[0], "rule": rule,
           "cell_id": None, "params": None, "complexity_rank": None, "n": None,
           "mean": math.nan, "se": math.nan, "test": math.nan}
    if pd.isna(group["n_folds"].iloc[0]):  # a store without k or repeats: no cell is complete
        return row
    n_folds = int(group["n_folds"].iloc[0])
    ok = group[~group["failed"] & (group["n"] == n_folds)
               & group["mean"].map(lambda v: v is not None and math.isfinite(v))]
    if ok.empty:
        return row
    ok = ok.sort_values(["complexity_rank", "position"], kind="stable").reset_index(drop=True)
    ses = [_se(r, se) for r in ok.itertuples(index=False)]
    means = ok["mean"].astype(float).tolist()
    best = best_index(means, better)
    tiers = None if ok["complexity_tier"].isna().any() else ok["complexity_tier"].tolist()
    pick = best if rule == "best" else one_se_index(means, ses[best], better, tiers)
    chosen = ok.iloc[pick]
    row.update(cell_id=chosen["cell_id"], params=chosen["params"],
               complexity_rank=int(chosen["complexity_rank"]), n=int(chosen["n"]),
               mean=float(chosen["mean"]), se=ses[pick], test=float(chosen["test"])
               if chosen["test"] is not None else math.nan)
    return row


def _se(r, kind: str) -> float:
    from .picks import corrected_variance

    if kind == "corrected":
        return math.sqrt(corrected_variance(float(r.sd) ** 2, int(r.n), float(r.valid_ratio)))
    return float(r.sd) / math.sqrt(int(r.n))


def _params_key(params) -> str | None:
    """A picked cell's parameters as one comparable text (None: nothing picked)."""
    if params is None or params != params:
        return None
    return json.dumps(json.loads(params) if isinstance(params, str) else params,
                      sort_keys=True)

"""The HTML report: one self-contained file (inline SVG figures, inline CSS, no scripts, no
network) built from the store alone, so anyone with the store can rebuild it.

It leads with the decision (which model, by how much, how sure, and what it relies on),
then gives the evidence: summary, picks, paired comparisons, complexity curves and tables,
importances, stability across folds, test predictions, the sweep's facts and the cautions."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pandas as pd

from .compare import compare
from .errors import FoldwiseError
from .explain import METHODS, importance_table, tree_fold_table
from .filenames import inside, safe_component
from .output import mean_se, number, params_text
from .picks import complexity_table, picks, sweep_facts, varying_params
from .plots import (complexity_figure, figure_svg, importance_figure, metric_label,
                    model_colours, models_figure, predictions_figure, tree_figure)
from .queries import summary
from .stability import stability_summary
from .store import Store

__all__ = ["report_context", "render_report", "write_report", "report_path", "decision",
           "CAUTIONS"]

CAUTIONS = [
    "Cross-validated scores are estimates with their own noise, not guarantees. The standard "
    "errors treat overlapping folds as independent and so understate the uncertainty; the "
    "paired p-values are corrected for this only roughly.",
    "The test split is honest only if nothing was chosen by it. This report shows test scores "
    "beside the picks, but the picks use cross-validation alone; if you now change the grid "
    "because of a test score, the test split stops being a fair check.",
    "Check for leakage before trusting any score: columns that would not be known when the "
    "model is used, rows duplicated across the split, identifiers that stand in for the "
    "target.",
    "Check for drift: these scores hold for data like the data tuned on. A change of season, "
    "site, sensor or population can make every number here optimistic.",
    "Importances describe what these fitted models use, not what causes the target. "
    "Correlated columns share importance (shuffling one leaves its partner to carry the "
    "signal), and impurity importance favours columns with many distinct values.",
    "Models that inform decisions about people or money must follow your organisation's "
    "model-risk, fairness and data-protection rules. The spec text and data fingerprint below "
    "support that audit; they do not replace it.",
]

_READABLE = ("linear", "pruned_tree")


def _fmt(value, digits: int = 4) -> str:
    return number(value, digits)


def _p_text(p) -> str:
    if p is None or (isinstance(p, float) and math.isnan(p)):
        return ""
    return "p < 0.001" if p < 0.001 else f"p ≈ {p:.2g}"


class _Snapshot(Store):
    """The same store, answering a repeated query from memory while one report is built
    (a report asks for the same picks many times; each store query opens the file)."""

    def __init__(self, store: Store):
        super().__init__(store.path, wait_seconds=store.wait_seconds, on_wait=store.on_wait)
        self._answers: dict = {}

    def query(self, sql: str, params: list | None = None) -> pd.DataFrame:
        key = (sql, json.dumps(params, default=str))
        if key not in self._answers:
            self._answers[key] = super().query(sql, params)
        return self._answers[key].copy()


def _cell(params, varying: list[str]) -> str:
    """A cell as the params that vary in its model's grid."""
    shown = {k: v for k, v in json.loads(params).items() if k in varying}
    return params_text(shown) if shown else "single cell"


def _rule_label(picked: str) -> str:
    """'best one_se' -> 'best and one-SE'."""
    return " and ".join(r.replace("one_se", "one-SE") for r in picked.split()) or "explained"


def _svg(make, salt: str, *args, **kwargs):
    """(inline svg, None) or (None, why not) for one figure."""
    try:
        fig = make(*args, **kwargs)
    except FoldwiseError as exc:
        return None, str(exc)
    return figure_svg(fig, salt=salt), None


def decision(store: Store, sweep_id: str, *, rule: str | None = None) -> dict:
    """The ranking of models by their picked cells and the plain sentences drawn from it."""
    facts = sweep_facts(store, sweep_id)
    rule = rule or facts["rule"]
    chosen = picks(store, facts["sweep_id"], rule=rule)
    metric, better = facts["metric"], facts["better"]
    name = metric.upper() if metric != "r2" else "R²"
    if chosen.empty:
        return {"rows": [], "sentences": ["No model has a cell with every fold scored; "
                                          "nothing can be recommended."], "leader": None}
    sign = 1.0 if better == "lower" else -1.0
    ranked = chosen.assign(_key=sign * chosen["mean"]).sort_values("_key").reset_index(drop=True)
    leader = ranked.iloc[0]
    pairs = compare(store, facts["sweep_id"], rule=rule)
    varying = varying_params(store, facts["sweep_id"])
    rows, gaps = [], {}
    for r in ranked.itertuples(index=False):
        gap = se = p = wins = None
        if r.model != leader["model"]:
            hit = pairs[((pairs.model_a == leader["model"]) & (pairs.model_b == r.model)) |
                        ((pairs.model_b == leader["model"]) & (pairs.model_a == r.model))]
            if len(hit):
                h = hit.iloc[0]
                d_other = -h.mean_diff if h.model_a == leader["model"] else h.mean_diff
                gap, se, p = sign * d_other, h.se, h.p_value
                wins = int(h.wins_a if h.model_a == leader["model"] else h.wins_b)
                gaps[r.model] = (gap, se, p, wins, int(h.folds))
        rows.append({"model": r.model, "family": r.family,
                     "cell": _cell(r.params, varying.get(r.model, [])),
                     "cv": mean_se(r.mean, r.se), "test": _fmt(r.test),
                     "gap": "leader" if gap is None else mean_se(gap, se),
                     "wins": "" if wins is None else f"{wins} of {gaps[r.model][4]}",
                     "p": _p_text(p), "leader": r.model == leader["model"]})
    n = facts["n_folds"]
    lm = leader["model"]
    said = [f"{lm} (a {leader['family']} model) has the best cross-validated {name} of the "
            f"{rule} picks: {mean_se(leader['mean'], leader['se'])} over {n} folds "
            f"({better} is better), and {_fmt(leader['test'])} on the test split."]
    if len(ranked) > 1:
        ru = ranked.iloc[1]["model"]
        if ru in gaps:
            gap, se, p, wins, folds = gaps[ru]
            clear = p < 0.05 and gap > 0
            said.append(f"The runner-up, {ru}, is {_fmt(gap, 3)} ± {_fmt(se, 2)} worse in CV "
                        f"{name}; "
                        f"{lm} wins {wins} of {folds} paired folds ({_p_text(p)}). " +
                        ("The lead is clear on these folds." if clear else
                         f"The lead is within the noise of these folds: {lm} and {ru} are "
                         "not clearly separated, so prefer whichever is simpler to run and "
                         "explain."))
    if leader["family"] not in _READABLE:
        readable = ranked[ranked["family"].isin(_READABLE)]
        if len(readable) and readable.iloc[0]["model"] in gaps:
            rm = readable.iloc[0]
            gap, se, *_ = gaps[rm["model"]]
            said.append(f"If a person must be able to read the model, the best readable one is "
                        f"{rm['model']} ({rm['family']}), at a cost of {_fmt(gap, 3)} ± "
                        f"{_fmt(se, 2)} in CV {name}.")
    tests = chosen.dropna(subset=["test"])
    if len(tests) > 1:
        top = tests.loc[(sign * tests["test"]).idxmin(), "model"]
        said.append(f"The test split agrees: {lm} also scores best there." if top == lm else
                    f"The test split ranks {top} first, not {lm}; one split is a noisy check, "
                    "so weigh the paired folds above more heavily.")
    imp = importance_table(store, facts["sweep_id"], method="permutation")
    imp = imp[imp["cell_id"] == leader["cell_id"]].sort_values("rank")
    if len(imp):
        top3 = ", ".join(imp["feature"].head(3))
        said.append(f"{lm} relies most on {top3} (permutation importance on the test split).")
    return {"rows": rows, "sentences": said, "leader": lm, "rule": rule, "metric": name}


def _stability_sentences(stab: pd.DataFrame) -> list[str]:
    out = []
    for r in stab.itertuples(index=False):
        if r.family == "pruned_tree" and r.root_feature is not None:
            out.append(f"{r.model} ({_rule_label(r.picked)} cell): {r.root_share:.0%} of "
                       f"{r.folds} fold trees split first on {r.root_feature}; two fold trees "
                       f"share on average {r.jaccard:.2f} of their columns (Jaccard); leaves "
                       f"range {int(r.leaves_min)}–{int(r.leaves_max)}; importance ranks "
                       f"agree at mean Spearman ρ = {_fmt(r.rank_agreement, 2)}.")
        elif r.family == "forest":
            out.append(f"{r.model} ({_rule_label(r.picked)} cell): importance ranks across "
                       f"{r.folds} fold forests agree at mean Spearman ρ = "
                       f"{_fmt(r.rank_agreement, 2)}.")
    return out


def _table(df: pd.DataFrame, columns: dict[str, str]) -> dict:
    """A table for the template: header names and rows of display strings."""
    rows = []
    for rec in df.to_dict("records"):
        rows.append([_fmt(rec[c]) if isinstance(rec[c], float) else
                     ("" if rec[c] is None else str(rec[c])) for c in columns])
    return {"head": list(columns.values()), "rows": rows}


def _importance_matrix(imp: pd.DataFrame, cells: pd.DataFrame) -> dict:
    """Features down, models across: value ± spread of each picked cell, per method."""
    out = {}
    imp = imp[imp["cell_id"].isin(cells["cell_id"])]
    for method in [m for m in METHODS if m in set(imp["method"])]:
        g = imp[imp["method"] == method]
        models = [m for m in cells["model"] if m in set(g["model"])]
        order = g.groupby("feature")["rank"].mean().sort_values().index
        rows = []
        for feature in order:
            row = [feature]
            for m in models:
                hit = g[(g["model"] == m) & (g["feature"] == feature)]
                row.append(mean_se(hit["value"].iloc[0], hit["spread"].iloc[0])
                           if len(hit) and hit["spread"].notna().iloc[0]
                           else _fmt(hit["value"].iloc[0]) if len(hit) else "")
            rows.append(row)
        out[method] = {"head": ["column"] + models, "rows": rows}
    return out


def report_context(store: Store, sweep_id: str | None = None, *, se: str = "plain") -> dict:
    """Everything the template shows, as display-ready values (figures as inline SVG)."""
    store = store if isinstance(store, _Snapshot) else _Snapshot(store)
    facts = sweep_facts(store, sweep_id)
    sid, metric = facts["sweep_id"], facts["metric"]
    sweep = store.query("select * from sweeps where sweep_id = ?", [sid]).iloc[0].to_dict()
    versions = json.loads(sweep["versions"]) if sweep.get("versions") else {}
    counts = store.query("""
        select (select count(*) from cells where sweep_id = $1) as cells,
               (select count(*) from fold_scores where sweep_id = $1) as fold_rows,
               (select count(*) from test_scores where sweep_id = $1) as test_rows,
               (select count(*) from failures where sweep_id = $1) as failures
        """, [sid]).iloc[0].to_dict()
    counts["explained"] = importance_table(store, sid)["cell_id"].nunique()
    colours = model_colours(store, sid)
    models = list(colours)
    summ = summary(store, sid)
    summary_cols = {"model": "model", "family": "family", "cells": "cells", "rule": "rule"}
    for m in facts["metrics"]:
        summ[f"cv {m}"] = [mean_se(a, b) for a, b in zip(summ[f"cv_{m}"], summ[f"se_{m}"])]
        summary_cols.update({f"cv {m}": f"CV {m} (mean ± SE)", f"test_{m}": f"test {m}"})
    all_picks = picks(store, sid, se=se)
    varying = varying_params(store, sid)
    all_picks["cell"] = [_cell(p, varying.get(m, []))
                         for p, m in zip(all_picks["params"], all_picks["model"])]
    all_picks["cv"] = [mean_se(a, b) for a, b in zip(all_picks["mean"], all_picks["se"])]
    all_picks["leaves"] = [_fmt(v, 3) if v == v and v is not None else ""
                           for v in all_picks["mean_leaves"]]
    pairs = compare(store, sid, se=se)
    pairs["diff"] = [mean_se(a, b) for a, b in zip(pairs["mean_diff"], pairs["se"])]
    pairs["pair"] = [f"{a} − {b}" for a, b in zip(pairs["model_a"], pairs["model_b"])]
    pairs["won"] = [f"{a} : {b}" for a, b in zip(pairs["wins_a"], pairs["wins_b"])]
    pairs["p"] = [_p_text(p) for p in pairs["p_value"]]
    complexity = []
    for i, model in enumerate(models):
        table = complexity_table(store, model, sid, se=se)
        shown = [n for n in table.attrs["shown_params"]
                 if table[n].map(json.dumps).nunique() > 1]
        table["cv"] = [mean_se(a, b) for a, b in zip(table["mean"], table["se"])]
        table["within"] = ["yes" if w else "" for w in table["within_one_se"]]
        cols = {"complexity_rank": "rank", **{n: n for n in shown}, "cv": f"CV {metric}",
                "mean_leaves": "leaves", "test": f"test {metric}", "within": "within 1 SE",
                "pick": "pick"}
        if table["mean_leaves"].isna().all():
            cols.pop("mean_leaves")
        svg, why = (_svg(complexity_figure, f"cx{i}", store, model, sid, se=se)
                    if len(table) > 1 else (None, "a single cell: no curve to draw"))
        complexity.append({"model": model, "family": table.attrs["family"], "svg": svg,
                           "why": why, "table": _table(table, cols),
                           "threshold": _fmt(table.attrs.get("threshold"))})
    rule_picks = picks(store, sid, rule=facts["rule"], se=se)
    imp = importance_table(store, sid)
    stab = stability_summary(store, sid)
    stab_cols = {"model": "model", "picked": "pick", "folds": "folds",
                 "rank_method": "ranked by", "rank_agreement": "rank agreement (ρ)",
                 "root_feature": "most common root", "root_share": "root share",
                 "jaccard": "column Jaccard", "leaves_mean": "leaves mean",
                 "leaves_sd": "leaves SD", "leaves_min": "min", "leaves_max": "max"}
    trees = tree_fold_table(store, sid)
    if len(trees):
        trees["columns used"] = [", ".join(v) for v in trees["features_used"]]
    figures = {}
    for key, make, kw in (("models", models_figure, {}), ("importance", importance_figure, {}),
                          ("predictions", predictions_figure, {}), ("tree", tree_figure, {})):
        figures[key] = dict(zip(("svg", "why"), _svg(make, key, store, sid, **kw)))
    started, finished = sweep.get("started_at"), sweep.get("finished_at")
    seconds = None
    if started is not None and finished is not None and not pd.isna(finished):
        seconds = (finished - started).total_seconds()
    for key in ("started_at", "finished_at"):
        if sweep.get(key) is not None and not pd.isna(sweep[key]):
            sweep[key] = pd.Timestamp(sweep[key]).strftime("%Y-%m-%d %H:%M:%S")
    return {
        "sweep": sweep, "sid": sid, "facts": facts, "counts": counts,
        "versions": ", ".join(f"{k} {v}" for k, v in sorted(versions.items())),
        "seconds": _fmt(seconds, 3) if seconds is not None else "",
        "metric_label": metric_label(metric, sweep["target"]),
        "models": [{"name": m, "colour": colours[m]} for m in models],
        "decision": decision(store, sid),
        "stability_sentences": _stability_sentences(stab),
        "summary": _table(summ, summary_cols),
        "picks": _table(all_picks, {"model": "model", "rule": "rule", "cell": "cell",
                                    "complexity_rank": "rank", "cv": f"CV {metric}",
                                    "leaves": "leaves", "test": f"test {metric}",
                                    "n_within": "cells within 1 SE"}),
        "compare": _table(pairs, {"pair": "pair (a − b)", "folds": "folds",
                                  "diff": f"CV {metric} a − b (mean ± SE)", "t": "t",
                                  "p": "p", "won": "folds won a : b",
                                  "test_diff": f"test {metric} a − b"}),
        "compare_words": list(pairs["in_words"]), "compare_note": pairs.attrs.get("note", ""),
        "compare_rule": pairs.attrs.get("rule"),
        "complexity": complexity,
        "importance": _importance_matrix(imp, rule_picks),
        "methods": {k: v.format(metric=metric.upper()) for k, v in METHODS.items()},
        "stability": _table(stab, stab_cols) if len(stab) else None,
        "tree_folds": _table(trees, {"model": "model", "repeat": "repeat", "fold": "fold",
                                     "n_leaves": "leaves", "depth": "depth",
                                     "root_rule": "root split", "columns used": "columns used"})
        if len(trees) else None,
        "figures": figures, "cautions": CAUTIONS,
    }


def render_report(store: Store, sweep_id: str | None = None, *, se: str = "plain") -> str:
    """The report as one HTML string."""
    from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape

    env = Environment(loader=PackageLoader("runner", "templates"),
                      autoescape=select_autoescape(["html", "j2"]), undefined=StrictUndefined,
                      trim_blocks=True, lstrip_blocks=True)
    return env.get_template("report.html.j2").render(**report_context(store, sweep_id, se=se))


def report_path(sweep_id: str, folder: str | Path = "results") -> Path:
    """The default report file of a sweep, `<folder>/report-<sweep id>.html`; the sweep id
    comes from the store, so it is made a safe file-name component kept inside `folder`."""
    return inside(folder, f"report-{safe_component(sweep_id)}.html")


def write_report(store: Store, out: str | Path, sweep_id: str | None = None, *,
                 se: str = "plain") -> Path:
    """Write the report to `out` (folders created); return the path."""
    out = Path(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(render_report(store, sweep_id, se=se), encoding="utf-8")
    return out

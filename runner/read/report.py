"""The HTML report: one self-contained file (inline SVG figures, inline CSS, no scripts, no
network) built from the store alone, so anyone with the store can rebuild it.

It leads with the decision (which model, by how much, how sure, and what it relies on),
then gives the evidence: summary, picks, paired comparisons, complexity curves and tables,
importances, stability across folds, test predictions, the sweep's facts and the cautions."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from ..errors import FoldwiseError
from .filenames import (check_replaceable, inside, make_folder, safe_component,
                        write_whole)
from ..metrics import get_metric, metric_label
from .class_figures import calibration_figure, roc_figure
from .plots import (NEUTRALS, complexity_figure, figure_svg, importance_figure, look_svg,
                    model_looks, models_figure, predictions_figure)
from .explained import importance_table, stability_table, tree_fold_table
from .queries import (compare, complexity_table, findings, picks, summary, sweep_facts,
                      sweep_record)
from ..store import Store
from .tree_figures import tree_figure
from .verdict import decision
from .views import (METHODS, ORDERED_FOLDS_NOTE, STABILITY_COLUMNS, TREE_FOLD_COLUMNS, View,
                    columns_view, compare_view, complexity_view, edge_notes, findings_view,
                    importance_matrix, picks_view, plan_sentence, reuse_text,
                    stability_sentences, summary_view, time_text)

__all__ = ["report_context", "render_report", "write_report", "report_path", "CAUTIONS"]

CAUTIONS = [
    "Cross-validated scores are estimates with their own noise, not guarantees. The standard "
    "errors treat overlapping folds as independent and so understate the uncertainty; the "
    "paired p-values are corrected for this only roughly.",
    "The test split is honest only if nothing was chosen by it. This report shows test scores "
    "beside the picks, but the picks use cross-validation alone; if you now change the grid "
    "because of a test score, the test split stops being a fair check.",
    "Check for leakage before trusting any score: columns that would not be known when the "
    "model is used, rows duplicated across the split, identifiers that stand in for the "
    "target. The leakage checks above catch some of these, not all; and when rows come in "
    "groups (plants, bays, patients, sites) or in time order, only folds that keep a group "
    "whole, or fit on the past alone, say how the model will do on new ones.",
    "Check for drift: these scores hold for data like the data tuned on. A change of season, "
    "site, sensor or population can make every number here optimistic.",
    "Importances describe what these fitted models use, not what causes the target. "
    "Correlated columns share importance (shuffling one leaves its partner to carry the "
    "signal), and impurity importance favours columns with many distinct values.",
    "Models that inform decisions about people or money must follow your organisation's "
    "model-risk, fairness and data-protection rules. The spec text and data fingerprint under "
    "Sweep facts, above, support that audit; they do not replace it.",
]


class _Snapshot(Store):
    """The same store, answering a repeated query from memory while one report is built
    (a report asks for the same picks many times; each store query opens the file)."""

    def __init__(self, store: Store):
        super().__init__(store.path, wait_seconds=store.wait_seconds, on_wait=store.on_wait)
        self._answers: dict = {}

    def query(self, sql: str, params: list | None = None) -> pd.DataFrame:
        import json

        key = (sql, json.dumps(params, default=str))
        if key not in self._answers:
            self._answers[key] = super().query(sql, params)
        return self._answers[key].copy()


def _svg(make, salt: str, *args, **kwargs):
    """(inline svg, None) or (None, why not) for one figure."""
    try:
        fig = make(*args, **kwargs)
    except FoldwiseError as exc:
        return None, str(exc)
    return figure_svg(fig, salt=salt), None


def _html(view_or_table) -> dict:
    """A display table for the template: header names and rows of text."""
    table = view_or_table.table if isinstance(view_or_table, View) else view_or_table
    return {"head": [str(c) for c in table.columns],
            "rows": [["" if v is None else str(v) for v in row]
                     for row in table.itertuples(index=False)]}


def report_context(store: Store, sweep_id: str | None = None, *, se: str = "plain") -> dict:
    """Everything the template shows, as display-ready values (figures as inline SVG)."""
    store = store if isinstance(store, _Snapshot) else _Snapshot(store)
    facts = sweep_facts(store, sweep_id)
    sid, metric = facts.sweep_id, facts.metric
    sweep = sweep_record(store, sid)
    counts = sweep.pop("counts")
    versions = __import__("json").loads(sweep["versions"]) if sweep.get("versions") else {}
    looks = model_looks(store, sid)
    rule_picks = picks(store, sid, rule=facts.rule, se=se)
    pairs = compare(store, sid, se=se)
    imp = importance_table(store, sid)
    complexity = []
    for i, model in enumerate(looks):
        table = complexity_table(store, model, sid, se=se)
        svg, why = (_svg(complexity_figure, f"cx{i}", store, model, sid, se=se)
                    if len(table.table) > 1 else (None, "a single cell: no curve to draw"))
        view = complexity_view(table)
        complexity.append({"model": model, "family": table.family, "svg": svg, "why": why,
                           "title": view.title, "table": _html(view),
                           "notes": list(view.sentences)})
    stab = stability_table(store, sid).table
    trees = tree_fold_table(store, sid)
    if len(trees):
        trees["columns used"] = [", ".join(v) for v in trees["features_used"]]
    figures = {}
    classes = facts.task == "classification"
    for key, make in (("models", models_figure), ("importance", importance_figure),
                      ("predictions", calibration_figure if classes else predictions_figure),
                      ("roc", roc_figure if classes else None), ("tree", tree_figure)):
        figures[key] = (dict(zip(("svg", "why"), _svg(make, key, store, sid))) if make
                        else {"svg": None, "why": None})
    started, finished = sweep.get("started_at"), sweep.get("finished_at")
    seconds = None
    if started is not None and finished is not None and not pd.isna(finished):
        seconds = (finished - started).total_seconds()
    for key in ("started_at", "finished_at"):
        if sweep.get(key) is not None and not pd.isna(sweep[key]):
            sweep[key] = pd.Timestamp(sweep[key]).strftime("%Y-%m-%d %H:%M:%S")
    compare_shown = compare_view(pairs)
    checks_shown = findings_view(findings(store, sid))
    summary_shown = summary_view(summary(store, sid))
    both_picks = picks(store, sid, se=se)
    picks_shown = picks_view(both_picks)
    return {
        "sweep": sweep, "sid": sid, "facts": facts, "counts": counts,
        "versions": ", ".join(f"{k} {v}" for k, v in sorted(versions.items())),
        "seconds": f"{seconds:.1f} s" if seconds is not None else "",
        "time": time_text(seconds, counts["fit_seconds"]),
        "reuse": reuse_text(counts["cells"], counts["reused"], counts["reused_from"]),
        "metric_label": get_metric(metric).axis_label(facts.target),
        "models": [{"name": m, "look": look_svg(look)} for m, look in looks.items()],
        "decision": decision(rule_picks, pairs, imp),
        "stability_sentences": stability_sentences(stab),
        "summary": _html(summary_shown), "summary_title": summary_shown.title,
        "picks": _html(picks_shown), "picks_title": picks_shown.title,
        "edges": [n.removeprefix("note: ") for n in edge_notes(both_picks.edges)],
        "compare": _html(compare_shown), "compare_title": compare_shown.title,
        "compare_words": list(compare_shown.sentences),
        "compare_note": " ".join(c.removeprefix("note: ") for c in compare_shown.caveats),
        "compare_rule": pairs.rule,
        "complexity": complexity,
        "importance": {k: _html(v) for k, v in importance_matrix(imp, rule_picks.table).items()},
        "methods": {k: v.format(metric=metric_label(metric), drawn=(
            f" over {imp.permutation_rows:,} test rows" if imp.permutation_rows else ""))
            for k, v in METHODS.items()},
        "stability": _html(columns_view(stab, STABILITY_COLUMNS)) if len(stab) else None,
        "tree_folds": _html(columns_view(trees, TREE_FOLD_COLUMNS)) if len(trees) else None,
        "figures": figures, "cautions": CAUTIONS, "neutrals": NEUTRALS,
        "plan": plan_sentence(sweep),
        "checks": _html(checks_shown), "checks_title": checks_shown.title,
        "ordered_note": ("Time-ordered folds: " + ORDERED_FOLDS_NOTE) if facts.ordered else "",
    }


def render_report(store: Store, sweep_id: str | None = None, *, se: str = "plain") -> str:
    """The report as one HTML string."""
    from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape

    env = Environment(loader=PackageLoader("runner.read", "templates"),
                      autoescape=select_autoescape(["html", "j2"]), undefined=StrictUndefined,
                      trim_blocks=True, lstrip_blocks=True)
    return env.get_template("report.html.j2").render(**report_context(store, sweep_id, se=se))


def report_path(sweep_id: str, folder: str | Path = "results") -> Path:
    """The default report file of a sweep, `<folder>/report-<sweep id>.html`; the sweep id
    comes from the store, so it is made a safe file-name component kept inside `folder`."""
    return inside(folder, f"report-{safe_component(sweep_id)}.html")


REPORT_MARK = b"<title>foldwise report: "
"""What the head of a page this module wrote holds: only such a page is replaced."""


def write_report(store: Store, out: str | Path, sweep_id: str | None = None, *,
                 se: str = "plain") -> Path:
    """Write the report to `out` (folders created); return the path. An existing `out` is
    replaced only if it is an earlier report, and the page appears whole or not at all."""
    out = Path(out)
    check_replaceable(out, REPORT_MARK, "report",
                      f"Name a new file with --out, e.g. {out / 'report.html'}."
                      if out.is_dir() else "Name a new file with --out.")
    make_folder(out.parent, f"report {out}", "Name another place with --out.")
    page = render_report(store, sweep_id, se=se)
    write_whole([(out, page.encode("utf-8"))], ".report-")
    return out

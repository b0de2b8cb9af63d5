"""The record of past sweeps as the terminal and the report show it: lists of sweeps with
their labels and notes, what a removal takes, the diff of two sweeps and a model's history.
The rules of numbers and labels are those of `views.py`."""

from __future__ import annotations

import json
from datetime import datetime

from .compare import APPROXIMATE_NOTE
from ..metrics import metric_label
from .results import ModelHistory, SweepDiff, SweepList
from .views import (CLEAR_P, TIME_MEANING, TextTable, View, beside, count_text, cv_head,
                    decimals_for, fixed, is_missing, mean_se, number, p_text, params_text, rule_label,
                    test_head)

__all__ = ["plain_text", "labels_text", "sweeps_view", "removal_view", "diff_view",
           "history_view"]


# -- the record of past sweeps ---------------------------------------------------------------
_UNSHOWN = {i: " " for i in [*range(0, 32), *range(127, 160)]}


def plain_text(text, limit: int | None = None) -> str:
    """Text from a store (a label, a note, a spec line) safe to print: control characters
    (escapes, line breaks) become spaces, and with `limit` it is cut to that many
    characters with '…'."""
    if is_missing(text):
        return ""
    text = str(text).translate(_UNSHOWN)
    return text if limit is None or len(text) <= limit else text[:limit - 1] + "…"


def labels_text(labels) -> str:
    """Labels (a dict or its JSON text) as 'key=value, ...', keys sorted."""
    if isinstance(labels, str):
        labels = json.loads(labels) if labels else {}
    return ", ".join(f"{plain_text(k)}={plain_text(v, 60)}" for k, v in sorted(labels.items()))


def _when(value) -> str:
    """A stored time to the minute; '' when there is none (None, NaN or NaT)."""
    if is_missing(value) or value != value:
        return ""
    when = value if hasattr(value, "strftime") else datetime.fromisoformat(str(value))
    return f"{when:%Y-%m-%d %H:%M}"


SWEEP_COLUMNS = ("sweep", "spec", "status", "started", "seconds", "rows (train / test)",
                 "folds", "cells", "fold rows", "data", "labels", "note")


def _or_dash(value) -> str:
    return "—" if is_missing(value) else str(value)


def sweeps_view(result: SweepList, title: str | None = None) -> View:
    """One line per sweep: id, spec name, status, start, rows, folds, size, labels, note."""
    rows = result.records()
    shown = TextTable(SWEEP_COLUMNS, tuple((
        r["sweep_id"], plain_text(r["name"]), r["status"], _when(r["started_at"]),
        number(r["seconds"]), f"{_or_dash(r['n_train'])} / {_or_dash(r['n_test'])}",
        f"{_or_dash(r['k'])} × {_or_dash(r['repeats'])}", number(r["cells"]), number(r["fold_rows"]),
        r["data"] or "", labels_text(r["labels"]), plain_text(r["note"], 60))
        for r in rows))
    sentences = (f"seconds: {TIME_MEANING}.",)
    if title is None:
        title = (f"sweeps, newest first ({len(rows)})" if result.selection == "every sweep" else
                 f"sweeps with {plain_text(result.selection)}, newest first ({len(rows)})")
    return View(title, shown, ("seconds", "cells", "fold rows"), sentences)


def removal_view(result: SweepList, rows: dict[str, int], *, done: bool = False) -> View:
    """The sweeps a removal takes (or took), and the rows per table that go with them."""
    n = len(result.rows)
    verb = "removed" if done else "would remove"
    held = ("rows per table: " + ", ".join(f"{t} {number(v)}" for t, v in rows.items() if v)
            if any(rows.values()) else "no rows")
    view = sweeps_view(result, f"{verb} {count_text(n, 'sweep', 'sweeps')} "
                               f"({plain_text(result.selection)})")
    return View(view.title, view.table, view.numeric,
                sentences=(f"{verb}, all in one transaction: {held}.",))


def _sides(params_a, params_b, varying) -> tuple[str, str]:
    """Each sweep's picked cell (a dash where the model is not in that sweep: None, or the
    NaN an outer join leaves) by the params its grid varies and every param on which the
    two cells differ, in full where the short forms would read alike."""
    cells = [None if is_missing(p) else (json.loads(p) if isinstance(p, str) else dict(p))
             for p in (params_a, params_b)]
    keep = set(varying)
    exact = set()
    if cells[0] is not None and cells[1] is not None:
        for k in {*cells[0], *cells[1]}:
            x, y = cells[0].get(k, _ABSENT), cells[1].get(k, _ABSENT)
            if x != y or type(x) is not type(y):
                keep.add(k)
                if params_text({k: x}) == params_text({k: y}):
                    exact.add(k)
    return tuple("—" if c is None else _cell_words(c, keep, exact) for c in cells)


_ABSENT = object()


def _cell_words(cell: dict, keep: set, exact: set) -> str:
    kept = sorted(k for k in cell if k in keep)
    return ", ".join(params_text({k: cell[k]}, exact=k in exact) for k in kept) or \
        "(single cell)"


def _words_text(words: list | None) -> str:
    """A sweep's missing words as the diff shows them."""
    if words is None:
        return "pandas' default list"
    return "[" + ", ".join(plain_text(repr(w)) for w in words) + "] and empty fields"


def diff_view(result: SweepDiff) -> View:
    """What changed from sweep A to sweep B: the spec diff, data, plan, versions and labels
    above; per model each sweep's picked cell, CV mean ± SE, paired change and test score."""
    import pandas as pd

    a, b, df = result.a, result.b, result.table
    m = result.metric
    lines = [f"A = sweep {a['sweep_id']} ({_when(a['started_at'])}, {a['status']}); "
             f"B = sweep {b['sweep_id']} ({_when(b['started_at'])}, {b['status']}); "
             f"spec '{plain_text(b['name'])}'" + ("" if a["name"] == b["name"] else
                                                  f" (A: '{plain_text(a['name'])}')")]
    if result.spec_diff:
        lines += ["spec: changed"] + [f"  {plain_text(x)}" for x in result.spec_diff]
    else:
        lines.append("spec: same text")
    rows_a, rows_b = f"{a['n_train']} / {a['n_test']}", f"{b['n_train']} / {b['n_test']}"
    if result.data_same is None:
        lines.append(f"data: not recorded for sweep "
                     f"{a['sweep_id'] if is_missing(a['data_sha256']) else b['sweep_id']} "
                     f"(no SHA-256 stored), so it cannot be told whether it changed; training "
                     f"/ test rows {rows_a} → {rows_b}")
    elif result.data_same and rows_a == rows_b:
        lines.append(f"data: same (SHA-256 {str(b['data_sha256'])[:12]}; {rows_b} training / "
                     "test rows)")
    elif result.data_same:
        lines.append(f"data: same file (SHA-256 {str(b['data_sha256'])[:12]}), split otherwise: "
                     f"training / test rows {rows_a} → {rows_b}")
    else:
        lines.append(f"data: changed (SHA-256 {str(a['data_sha256'])[:12]} → "
                     f"{str(b['data_sha256'])[:12]}; training / test rows {rows_a} → {rows_b})")
    if result.read_words is not None:
        lines.append("data read: missing words " + " → ".join(
            _words_text(w) for w in result.read_words)
            + " (data.missing_words), so the cells differ")
    lines.append({True: "plan: same", False: "plan: changed",
                  None: "plan: not recorded for the older sweep"}[result.plan_same])
    lines.append("versions: same" if not result.versions else "versions: changed: " + ", ".join(
        f"{plain_text(k)} {plain_text(x)} → {plain_text(y)}"
        for k, (x, y) in result.versions.items()))
    if result.labels:
        lines.append("labels: " + ", ".join(
            f"{plain_text(k)} {plain_text(x) if x is not None else '(none)'} → "
            f"{plain_text(y) if y is not None else '(none)'}" for k, (x, y) in result.labels.items()))
    if (a["note"] or None) != (b["note"] or None):
        lines.append(f"note: A {plain_text(a['note'], 80) or '(none)'!s}; "
                     f"B {plain_text(b['note'], 80) or '(none)'}")
    lines.append(f"folds: paired on identical folds ({result.shared_cells} shared cells)"
                 if result.paired else f"folds: {result.not_paired}")
    lines += _one_sided_lines(df, a["sweep_id"], b["sweep_id"])
    if result.not_compared:
        lines.append(f"scores: {result.not_compared}")
    elif m is None:
        lines.append("the sweeps pick by different metrics, so their scores are not "
                     "compared; each sweep's picks are shown.")
    label = metric_label(m or "rmse") if m else "score"
    paired = result.paired and m is not None
    sides = [_sides(pa, pb, result.varying.get(x, []))
             for pa, pb, x in zip(df["params_a"], df["params_b"], df["model"])]
    shown = pd.DataFrame({
        "model": df["model"],
        "A cell": [a for a, _ in sides],
        "B cell": [b for _, b in sides],
        f"A CV {label}": [mean_se(x, e) for x, e in zip(df["mean_a"], df["se_a"])],
        f"B CV {label}": [mean_se(x, e) for x, e in zip(df["mean_b"], df["se_b"])]})
    numeric = [f"A CV {label}", f"B CV {label}"]
    if paired:
        shown["B − A paired (mean ± SE)"] = [mean_se(x, e) for x, e in
                                              zip(df["mean_diff"], df["se"])]
        shown["p"] = df["p_value"].map(p_text)
        shown["Holm p"] = df["p_holm"].map(p_text)
        shown["folds won A : B"] = ["" if is_missing(x) else f"{int(x)} : {int(y)}"
                                    for x, y in zip(df["wins_a"], df["wins_b"])]
        numeric += ["B − A paired (mean ± SE)", "p", "Holm p", "folds won A : B"]
    else:
        shown["B − A"] = df["cv_change"].map(number)
        numeric.append("B − A")
    shown[f"test {label} A → B"] = [f"{number(x)} → {number(y)}" if not (is_missing(x) and is_missing(y))
                                    else "" for x, y in zip(df["test_a"], df["test_b"])]
    numeric.append(f"test {label} A → B")
    title = (f"picked cell per model, each under its sweep's rule, by CV {label} "
             f"({result.better} is better; {result.se} SE)")
    sentences = tuple(_diff_sentence(r, label, result.better, paired)
                      for r in df.itertuples(index=False))
    caveats = (f"note: {APPROXIMATE_NOTE}",) if paired and df["p_value"].notna().any() else ()
    tests = int(df["p_value"].notna().sum())
    if paired and tests > 1:
        caveats += (f"note: one test per model whose fold scores changed ({tests} tests; "
                    "models the same on every fold, or in one sweep only, are not tested); "
                    "'Holm p' adjusts each p for those tests (Holm 1979), and a change is "
                    f"called clear only below {CLEAR_P:g}.",)
    return View(title, shown, tuple(numeric), sentences=sentences, caveats=caveats,
                preface=tuple(lines))


def _one_sided_lines(df, sweep_a: str, sweep_b: str) -> list[str]:
    """'models: only in sweep A (id): lasso' lines, so that a dash is not read as no change."""
    lines = []
    for side, sweep, other in (("A", sweep_a, "B"), ("B", sweep_b, "A")):
        only = df.loc[df["in_sweeps"] == f"{side} only", "model"].tolist()
        if only:
            lines.append(f"models only in sweep {side} ({sweep}), not in {other}, so not "
                         f"compared (shown with a dash on the {other} side): "
                         f"{', '.join(map(plain_text, only))}")
    return lines


def _diff_sentence(r, label: str, better: str, paired: bool) -> str:
    if r.in_sweeps != "both":
        side, other = ("A", "B") if r.in_sweeps == "A only" else ("B", "A")
        return f"{r.model}: only in sweep {side}, not in sweep {other}; not compared."
    if is_missing(r.cell_a) or is_missing(r.cell_b):
        where = "A" if is_missing(r.cell_a) else "B"
        return f"{r.model}: no picked cell in sweep {where} (none complete)."
    if paired and not is_missing(r.mean_diff):
        if r.mean_diff == 0 and r.se == 0:
            what = "the same cell" if r.same_cell else "another cell in B"
            return (f"{r.model}: {what}, with identical fold scores in both sweeps; nothing "
                    "to test.")
        p = r.p_holm if not is_missing(r.p_holm) else r.p_value
        b_better = (r.mean_diff < 0) == (better == "lower")
        places = decimals_for(r.se)
        change = (f"mean {label} change B − A {fixed(r.mean_diff, places)} ± "
                  f"{fixed(r.se, places)}" if places is not None else
                  f"mean {label} change B − A {number(r.mean_diff)}")
        won = int(r.wins_b if b_better else r.wins_a)
        side, other = ("B", "A") if b_better else ("A", "B")
        same = " (the same cell)" if r.same_cell else ""
        if not is_missing(p) and p < CLEAR_P:
            return (f"{r.model}: {side}'s pick{same} is better than {other}'s on {won} of "
                    f"{int(r.folds)} paired folds; {change} ({p_text(r.p_value)}).")
        return (f"{r.model}: no clear change{same}: {side} is better on {won} of "
                f"{int(r.folds)} paired folds; {change} ({p_text(r.p_value)}).")
    return (f"{r.model}: CV {label} {mean_se(r.mean_a, r.se_a)} → {mean_se(r.mean_b, r.se_b)}"
            f"{' (not paired)' if not paired else ''}.")


def history_view(result: ModelHistory) -> View:
    """Per sweep (oldest first) and model: the picked cell with every parameter it holds
    (defaults too, floats in full, as 'pick changed' compares them), CV mean ± SE, test
    score, and marks where the data, the spec or the pick changed."""
    import pandas as pd

    df, m = result.table, result.metric
    several = len(result.models) > 1
    shown = pd.DataFrame({"sweep": df["sweep_id"], "started": df["started_at"].map(_when),
                          "status": df["status"]})
    if several:
        shown["model"] = df["model"]
    shown["rule"] = df["rule"].map(rule_label)
    shown["picked cell"] = ["(no complete cell)" if is_missing(p) else params_text(p, exact=True)
                            for p in df["params"]]
    shown[cv_head(m)] = [mean_se(x, e) for x, e in zip(df["mean"], df["se"])]
    shown[test_head(m)] = [beside(t, e) for t, e in zip(df["test"], df["se"])]
    shown["data"] = ["unknown" if is_missing(d) else f"{d} (changed)" if c is True else d
                     for d, c in zip(df["data"], df["data_changed"])]
    shown["changed"] = [", ".join(w for w, flag in (("spec", s), ("pick", p)) if flag is True)
                        for s, p in zip(df["spec_changed"], df["pick_changed"])]
    shown["labels"] = df["labels"].map(labels_text)
    who = ", ".join(result.models) if several else result.models[0]
    rule = "each sweep's rule" if result.rule is None else f"{rule_label(result.rule)} rule"
    n = df["sweep_id"].nunique()
    title = (f"{who} across {count_text(n, 'sweep', 'sweeps')} of spec '{plain_text(result.name)}', "
             f"oldest first: picked cell ({rule}) by CV {metric_label(m)} "
             f"({result.better} is better, {result.se} SE)")
    said = []
    for model in result.models:
        held = df.loc[df["model"] == model, "sweep_id"].nunique()
        if result.n_sweeps and held < result.n_sweeps:
            said.append(f"{model} is in {held} of the {result.n_sweeps} sweeps of spec "
                        f"'{plain_text(result.name)}'; the {result.n_sweeps - held} without "
                        "it are not listed.")
    changed = df.loc[df["data_changed"].eq(True), "sweep_id"].drop_duplicates().tolist()
    if changed:
        said.append(f"the data changed before sweep{'s' if len(changed) > 1 else ''} "
                    f"{', '.join(changed)}.")
    return View(title, shown, (cv_head(m), test_head(m)), sentences=tuple(said))

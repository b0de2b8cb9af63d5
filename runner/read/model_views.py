"""Built models as the terminal and the report show them: the store's models, a model's
card, its coefficients, and what `build` and `predict` did. The rules of numbers and labels
are those of `views.py`."""

from __future__ import annotations

import math

import pandas as pd

from ..metrics import metric_label
from .results import Coefficients
from .views import View, is_missing, mean_se, number, params_text, rule_label

__all__ = ["models_view", "card_view", "coefficients_view", "built_sentences",
           "prediction_sentences"]


# -- built models ----------------------------------------------------------------------------
def _size(n) -> str:
    try:
        n = float(n)
    except (TypeError, ValueError):  # a store may hold NULL
        return "unknown"
    if not 0 <= n < math.inf:
        return "unknown"
    for unit in ("bytes", "KiB", "MiB", "GiB"):
        if n < 1024 or unit == "GiB":
            return f"{n:.0f} {unit}" if unit == "bytes" else f"{n:.1f} {unit}"
        n /= 1024
    return ""


def models_view(df: pd.DataFrame, sweep_id: str | None = None) -> View:
    """The store's built models, newest first (those of `sweep_id` if given). None found
    is not "none yet": `remove` takes a sweep's built models with it, and the store keeps
    no trace of them, so the note says both ways it can come about."""
    table = pd.DataFrame({
        "model id": df["model_id"], "sweep": df["sweep_id"], "model": df["model"],
        "family": df["family"], "rule": [("named cell" if r == "cell" else rule_label(r))
                                         if isinstance(r, str) else "unknown"
                                         for r in df["rule"]],
        "cell": [str(c)[:12] for c in df["cell_id"]],
        "rows": [f"{n:,} ({u})" for n, u in zip(df["n_rows"], df["rows_used"])],
        "built": [str(t)[:19] for t in df["created_at"]], "by": df["user_name"],
        "size": [_size(b) for b in df["artefact_bytes"]]})
    if len(df):
        notes = ()
    elif sweep_id is not None:
        notes = (f"note: the store holds no built model of sweep {sweep_id}: none was built "
                 "from it, or they were removed; `foldwise build --sweep "
                 f"{sweep_id} --model LABEL` builds one from its pick.",)
    else:
        notes = ("note: the store holds no built models: none was built, or `foldwise "
                 "remove` took them with their sweeps (the files `build` wrote stay where "
                 "they are); `foldwise build --model LABEL` builds one from a sweep's pick.",)
    return View("built models", table, notes=notes)


def _intervals_text(card: dict) -> str:
    """What the card's residuals allow `predict --interval`: intervals on how many, or why
    none."""
    from ..errors import ModelError
    from ..model.card import read_residuals

    if card.get("task") == "classification":
        return "none: intervals are for numeric targets; the class probabilities say how sure"
    try:
        residuals = read_residuals(card.get("interval", "absent"), "this model")
    except ModelError as exc:
        rows = card.get("rows")
        if isinstance(rows, dict) and rows.get("used") == "all":
            return "none: no held-out rows (built on every row)"
        if card.get("interval", "absent") in (None, "absent"):
            return ("none: this card keeps no held-out residuals (build the model again to get "
                    "them)")
        why = getattr(exc, "why", None)  # a record no build writes, or none finite
        return f"none: the card has an interval record that {why}" if why else f"none: {exc}"
    skipped = f", {residuals.skipped:,} not finite and skipped" if residuals.skipped else ""
    return (f"split conformal on {residuals.n:,} held-out residuals{skipped} "
            "(predict --interval LEVEL)")


def card_view(card: dict) -> View:
    """A model card as a two-column table, one fact a row."""
    cell, rows, data, scores = card["cell"], card["rows"], card["data"], card["scores"]
    feats = card["features"]
    cats = [f for f in feats if f["type"] == "categorical"]
    facts = [
        ("model id", card["model_id"]),
        ("built", f"{card['created_at']} by {card['user']} on {card['host']}"),
        ("task", card["task"]),
        ("sweep", f"{card['sweep']['sweep_id']} ({card['sweep']['name']})"),
        ("model", f"{cell['model']}: {cell['family']}, {cell['estimator']}"),
        ("cell", f"{cell['cell_id']} — {params_text(cell['params'])}"),
        ("chosen by", "cell named by id" if card["rule"] == "cell" else
         f"{rule_label(card['rule'])} rule"),
        ("rows", f"{rows['n']:,}: {rows['which']}"),
        ("data", f"{data['path']}"),
        ("missing words", "pandas' default list" if data.get("missing_words") is None else
         ", ".join(repr(str(w)) for w in data["missing_words"]) + " and empty fields"),
        ("data SHA-256", data["sha256"] + ("" if not data["accepted_other_data"] else
                                           f" (the sweep's: {data['sweep_sha256']})")),
        ("spec SHA-256", card["sweep"]["spec_sha256"]),
        ("target", card["target"]["name"]),
        ("input columns", f"{len(feats)}: {len(feats) - len(cats)} numeric, "
                          f"{len(cats)} categorical"),
    ]
    for f in cats:
        shown = ", ".join(f["categories"][:8]) + (", ..." if len(f["categories"]) > 8 else "")
        facts.append((f"  {f['name']}", f"{len(f['categories'])} categories: {shown}"))
    for metric, cv in scores["cv"].items():
        test = scores["test"].get(metric)
        facts.append((f"CV {metric_label(metric)}", mean_se(cv["mean"], cv["se"])
                      + f" over {cv['folds']} folds"))
        if test is not None:
            facts.append((f"test {metric_label(metric)}", number(test)
                          + ("" if scores["test_describes_this_model"] else
                             " (of the refit on training rows; not of this model)")))
    facts.append(("predicts", ", ".join(card["prediction_columns"])))
    facts.append(("intervals", _intervals_text(card)))
    facts.append(("artefact", f"{card['artefact']['format']}, "
                              f"{_size(card['artefact']['bytes'])}, SHA-256 "
                              f"{card['artefact']['sha256']}"))
    facts.append(("versions", ", ".join(f"{k} {v}" for k, v in card["versions"].items())))
    table = pd.DataFrame(facts, columns=["", "value"])
    sentences = tuple(s for s in [scores.get("note")] if s)
    return View(f"model card {card['model_id']}", table, sentences=sentences)


def coefficients_view(result: Coefficients) -> View:
    """Signed coefficients per term: in the data's units and per standard deviation."""
    df = result.table
    table = pd.DataFrame({
        "model": df["model"], "pick": [rule_label(p) if p and p != "cell" else p
                                       for p in df["picked"]],
        "term": df["term"], "coefficient": [number(v, 6) for v in df["coefficient"]],
        "per SD": [number(v, 6) if not (is_missing(s) and not is_missing(f)) else ""
                   for v, s, f in zip(df["standardised"], df["scale"], df["feature"])],
        "mean": [number(v) for v in df["mean"]], "SD": [number(v) for v in df["scale"]]})
    if df["class_label"].notna().any():
        table.insert(2, "class", df["class_label"].fillna(""))
    what = f"model {result.model_id}" if result.model_id else f"sweep {result.sweep_id}"
    notes = () if len(df) else (f"note: {what} has no stored coefficients: they are kept "
                                "for explained and built linear models.",)
    return View(f"coefficients of {what}", table,
                numeric=("coefficient", "per SD", "mean", "SD"),
                sentences=("coefficient: change in the target per unit of the column (a "
                           "category level: its indicator's coefficient); per SD: per "
                           "standard deviation of the column in the fitting rows (the "
                           "intercept: the prediction at every column's mean).",)
                if len(df) else (),
                notes=notes)


def built_sentences(built) -> list[str]:
    """What a build made, in a few lines."""
    card = built.card
    cell, rows = card["cell"], card["rows"]
    chosen = "the named cell" if card["rule"] == "cell" else \
        f"the {rule_label(card['rule'])} cell"
    first = card["metrics"][0]
    test = card["scores"]["test"].get(first)
    lines = [f"built {built.model_id}: model '{cell['model']}' ({cell['family']}), {chosen} "
             f"{cell['cell_id'][:12]} of sweep {card['sweep']['sweep_id']}, on {rows['n']:,} "
             f"{'rows (training and test)' if rows['used'] == 'all' else 'training rows'}.",
             f"  {built.artefact} ({_size(built.n_bytes)}, SHA-256 {built.sha256[:16]}…) and "
             f"its card {built.card_file}; also kept in the store."]
    if test is not None and card["scores"]["test_describes_this_model"]:
        lines.append(f"  test {metric_label(first)} {number(test)}: the sweep's refit, "
                     "rebuilt here.")
    return lines + list(built.notes)


def prediction_sentences(result) -> list[str]:
    """What a prediction run wrote and met: counts, ignored columns, unseen categories."""
    lines = [f"predicted {result.rows:,} rows in {result.chunks} chunk(s), "
             f"{result.seconds:.1f} s -> {result.out} (columns: {', '.join(result.columns)})"]
    if result.interval is not None:
        lines.append(f"lower and upper: a {result.interval:g} split-conformal interval, "
                     f"prediction ± {number(result.halfwidth)} (the model's residuals on "
                     "the sweep's test rows; coverage holds on average over rows like them)")
    if result.ignored:
        more = ", ..." if len(result.ignored) > 10 else ""
        lines.append(f"ignored {len(result.ignored)} column(s) the model does not use: "
                     f"{', '.join(result.ignored[:10])}{more}")
    for col, seen in result.unseen.items():
        lines.append(f"unseen categories: {seen['rows']:,} row(s) of '{col}' hold categories "
                     f"the model never saw (e.g. {', '.join(map(repr, seen['examples']))}); "
                     f"{result.unseen_handling}.")
    if result.missing:
        shown = ", ".join(f"{c} {n:,}" for c, n in list(result.missing.items())[:8])
        lines.append(f"missing values (filled or routed as in the sweep): {shown}")
    return lines + list(result.notes)

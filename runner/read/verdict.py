"""The report's decision: the models' picked cells ranked by CV score, how far each is from
the first on the same folds, which pick a person could read whole (by its size against
its family's limit) and what the first relies on. Its numbers are shown by the rules of
`views.py`; this module only chooses what to say."""

from __future__ import annotations

import json
from dataclasses import dataclass, field

import pandas as pd

from ..families import get_family
from ..metrics import metric_label
from .results import Comparison, Picks
from .views import CLEAR_P, beside, cell_text, mean_se, p_text, rule_label

__all__ = ["Decision", "decision"]


@dataclass(frozen=True)
class Decision:
    """The models ranked by their picked cells, and the plain sentences drawn from that;
    `first` is the model in first place."""

    rule: str
    metric: str
    rows: list
    sentences: list
    first: str | None
    heads: dict = field(default_factory=dict)  # column labels, worded for the direction


def _size(r) -> float | None:
    """A picked cell's size: its refit's (explain step), else a tree's mean leaves over the
    folds, else the family's size parameter (a forest's trees). `r` is a picks row."""
    row = r.to_dict() if isinstance(r, pd.Series) else r._asdict()
    for name in ("n_terms", "mean_leaves"):
        value = row.get(name)
        if value is not None and not pd.isna(value):
            return float(value)
    fam = get_family(row["family"])
    if fam.size_param:
        params = row["params"]
        value = (json.loads(params) if isinstance(params, str) else params).get(fam.size_param)
        return None if value is None else float(value)
    return None


def _size_text(family: str, size) -> str:
    return get_family(family).size_text(size) or "not stored"


def _readable_sentence(ranked: pd.DataFrame, gaps: dict, name: str) -> str | None:
    """Which picked model a person could read whole, judged by its size (leaves of a tree,
    non-zero coefficients of a linear model) against its family's limit, and why the
    better-placed picks are not."""
    def limit(fam) -> str:
        return f"up to {fam.readable_size} count as readable in {fam.plural}"

    first = ranked.iloc[0]
    verdicts = [get_family(r.family).readable(_size(r)) for r in ranked.itertuples()]
    if verdicts[0]:
        fam = get_family(first["family"])
        return (f"{first['model']} is also small enough for a person to read whole: "
                f"{fam.size_text(_size(first))} ({limit(fam)}).")
    readable = [i for i, ok in enumerate(verdicts) if ok]
    before = ranked.iloc[:readable[0]] if readable else ranked
    reasons, unknown = [], []
    for i, r in enumerate(before.itertuples()):
        fam, size = get_family(r.family), _size(r)
        if verdicts[i] is None:
            unknown.append(r.model)
        elif fam.readable_size is None:
            reasons.append(f"{r.model} is a {fam.name}" +
                           (f" of {fam.size_text(size)}" if size else "") + ", never read whole")
        else:
            reasons.append(f"{r.model} has {fam.size_text(size)}, more than the "
                           f"{fam.readable_size} that count as readable in {fam.plural}")
    if unknown:
        reasons.append(f"the size of {_and(unknown)} is not stored (not explained)")
    why = "; ".join(reasons)
    if not readable:
        return (f"No pick is small enough for a person to read whole: {why}. If one must "
                "be read, choose a simpler cell from `foldwise path`.")
    r = ranked.iloc[readable[0]]
    fam = get_family(r["family"])
    cost = ""
    if r["model"] in gaps:
        gap, se, *_ = gaps[r["model"]]
        cost = f", at a cost of {mean_se(gap, se)} in CV {name}"
    return (f"If a person must be able to read the model, the best pick small enough to read "
            f"whole is {r['model']}: {fam.size_text(_size(r))} ({limit(fam)}){cost}. Ranked "
            f"above it but not readable whole: {why}.")


def _and(names: list[str]) -> str:
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def decision(chosen: Picks, pairs: Comparison, importances=None) -> Decision:
    """Rank the models' picked cells (under one rule) and say what the paired folds show,
    which pick a person could read whole, and what the first relies on."""
    facts, table = chosen.facts, chosen.table
    rule, better, name = rule_label(chosen.rules[0]), facts.better_of(), metric_label(facts.metric)
    several = len(pairs.table) > 1
    heads = {"gap": f"CV {name} {'above' if better == 'lower' else 'below'} first "
                    "(mean ± SE)",
             "wins": "folds where first does better",
             "p": "paired test (Holm p)" if several else "paired test (p)"}
    if table.empty:
        return Decision(rule, name, [], ["No model has a cell with every fold scored; nothing "
                                         "can be recommended."], None, heads)
    sign = 1.0 if better == "lower" else -1.0
    ranked = table.assign(_key=sign * table["mean"]).sort_values("_key").reset_index(drop=True)
    top = ranked.iloc[0]
    lm = top["model"]
    p = pairs.table
    rows, gaps = [], {}
    for place, r in enumerate(ranked.itertuples(index=False), start=1):
        gap = se = pv = wins = None
        if r.model != lm:
            hit = p[((p.model_a == lm) & (p.model_b == r.model)) |
                    ((p.model_b == lm) & (p.model_a == r.model))]
            if len(hit):
                h = hit.iloc[0]
                d_other = -h.mean_diff if h.model_a == lm else h.mean_diff
                gap, se = sign * d_other, h.se
                pv = h.p_holm if several else h.p_value
                wins = int(h.wins_a if h.model_a == lm else h.wins_b)
                gaps[r.model] = (gap, se, pv, wins, int(h.folds))
        rows.append({"place": place, "model": r.model, "family": r.family,
                     "cell": cell_text(r.params, chosen.varying.get(r.model, [])),
                     "size": _size_text(r.family, _size(r)),
                     "cv": mean_se(r.mean, r.se), "test": beside(r.test, r.se),
                     "gap": "" if gap is None else mean_se(gap, se),
                     "wins": "" if wins is None else f"{wins} of {gaps[r.model][4]}",
                     "p": p_text(pv), "first": r.model == lm})
    test_text = beside(top["test"], top["se"])  # empty where undefined (ROC AUC, a class absent)
    said = [f"{lm} (a {top['family']} model) has the best cross-validated {name} of the "
            f"{rule} picks: {mean_se(top['mean'], top['se'])} over {facts.n_folds} folds "
            f"({better} is better)" + (f", and {test_text} on the test split." if test_text
                                       else f"; its test-split {name} is undefined (the test "
                                       "rows lack a class).")]
    if len(ranked) > 1:
        second = ranked.iloc[1]["model"]
        if second in gaps:
            gap, se, pv, wins, folds = gaps[second]
            clear = pv is not None and pv < CLEAR_P and gap > 0
            p_part = ("the same score on every fold, nothing to test" if not p_text(pv) else
                      p_text(pv) + (", Holm-adjusted" if several else ""))
            said.append(f"In second place, {second} is {mean_se(gap, se)} "
                        f"{'higher' if better == 'lower' else 'lower'} in CV {name}; {lm} does "
                        f"better on {wins} of {folds} paired folds ({p_part}). " +
                        ("The margin is clear on these folds." if clear else
                         f"The margin is within the noise of these folds: {lm} and {second} "
                         "are not clearly separated, so prefer whichever is simpler to run "
                         "and explain."))
    readable = _readable_sentence(ranked, gaps, name)
    if readable:
        said.append(readable)
    tests = table.dropna(subset=["test"])
    if len(tests) > 1:
        best_test = tests.loc[(sign * tests["test"]).idxmin(), "model"]
        said.append(f"The test split agrees: {lm} also scores best there." if best_test == lm
                    else f"The test split ranks {best_test} first, not {lm}; one split is a "
                    "noisy check, so weigh the paired folds above more heavily.")
    if importances is not None:
        imp = importances.table
        imp = imp[(imp["cell_id"] == top["cell_id"]) & (imp["method"] == "permutation")]
        if len(imp):
            top3 = ", ".join(imp.sort_values("rank")["feature"].head(3))
            said.append(f"{lm} relies most on {top3} (permutation importance on the test "
                        "split).")
    return Decision(rule, name, rows, said, lm, heads)

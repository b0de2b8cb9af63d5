"""The history figure: each model's (or one model's) picked cell across the sweeps of one
spec, with where the data or the spec changed and, for one model, each new pick written as
what changed. Drawn in the look of `plots.py`."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd

from ..metrics import get_metric, metric_label
from .filenames import safe_component
from .plots import FAINT, INK, MUTED, _figure, _headline, _style, look_of
from .queries import model_order, sweep_facts
from ..store import Store
from .views import params_text, rule_label

__all__ = ["history_figure", "pick_label"]


def pick_label(params, before=None, width: int = 30) -> str:
    """A picked cell written on the history figure: every parameter in full the first
    time, then only those that differ from the cell written `before`, so two picks that
    differ never read alike; wrapped between parameters, never cut."""
    now = json.loads(params) if isinstance(params, str) else dict(params)
    if before is None:
        parts = params_text(now, exact=True).split(", ")
    else:
        old = json.loads(before) if isinstance(before, str) else dict(before)
        changed = {k: v for k, v in now.items()
                   if k not in old or old[k] != v or type(old[k]) is not type(v)}
        parts = (params_text(changed, exact=True).split(", ") if changed else []) + [
            f"{k} unset" for k in sorted(set(old) - set(now))]
        parts = ["→ " + (parts[0] if parts else "the same grid point")] + parts[1:]
    lines, line = [], ""
    for part in parts:
        if line and len(line) + 2 + len(part) > width:
            lines.append(line + ",")
            line = part
        else:
            line = f"{line}, {part}" if line else part
    return "\n".join([*lines, line])


def history_figure(store: Store, sweep_id: str | None = None, *, model: str | None = None,
                   name: str | None = None, rule: str | None = None, se: str = "plain"):
    """Each model's (or one model's) picked cell across the sweeps of one spec, oldest
    left: CV mean ± SE joined by a line, the test score as a hollow diamond; a dashed rule
    where the data changed, a dotted one where only the spec did, and for one model the
    new cell written where the pick changed (lines gid 'data_changed', 'spec_changed')."""
    from .past import model_history

    if name is None and sweep_id is not None:
        name = sweep_facts(store, sweep_id).name
    result = model_history(store, model, name=name, rule=rule, se=se)
    table = result.table
    facts = sweep_facts(store, table["sweep_id"].iloc[-1])
    sweeps = list(dict.fromkeys(table["sweep_id"]))
    where = {sid: i for i, sid in enumerate(sweeps)}
    order = model_order(store, facts.sweep_id)
    looks = {m: look_of(order.index(m) if m in order else len(order) + i)
             for i, m in enumerate(result.models)}
    firsts = table.drop_duplicates("sweep_id")
    with _style():
        fig = _figure(min(16.0, max(6.5, 0.5 * len(sweeps) + 2.8)), 4.6)
        ax = fig.add_subplot()
        for r in firsts.itertuples(index=False):
            x = where[r.sweep_id] - 0.5
            if r.data_changed is True or r.spec_changed is True:
                kind = "data" if r.data_changed is True else "spec"
                ax.axvline(x, color=MUTED if kind == "data" else FAINT, linewidth=1,
                           linestyle="--" if kind == "data" else ":", zorder=1,
                           gid=f"{kind}_changed")
                ax.text(x, 1.0, f" {kind} changed", transform=ax.get_xaxis_transform(),
                        rotation=90, va="top", ha="right", fontsize=7, color=MUTED)
        for i, m in enumerate(result.models):
            rows = table[(table["model"] == m) & table["mean"].notna()]
            x = rows["sweep_id"].map(where).to_numpy(float) + (i - (len(result.models) - 1)
                                                                / 2) * 0.08
            col = looks[m].colour
            ax.errorbar(x, rows["mean"], yerr=rows["se"], color=col, marker=looks[m].marker,
                        markersize=4.5, linewidth=1.4, linestyle=looks[m].dash, capsize=2.5,
                        zorder=3)
            if rows["test"].notna().any():
                ax.plot(x, rows["test"], linestyle="none", marker="D", markersize=5,
                        markerfacecolor="white", markeredgecolor=col, markeredgewidth=1.2,
                        zorder=4)
            if len(result.models) == 1:
                shown = None
                for xi, r in zip(x, rows.itertuples(index=False)):
                    if r.pick_changed or shown is None:
                        top = np.nanmax([r.mean + (r.se if r.se == r.se else 0), r.test])
                        ax.annotate(pick_label(r.params, shown), (xi, top),
                                    xytext=(0, 6), textcoords="offset points", ha="center",
                                    va="bottom", fontsize=7, color=INK, zorder=5,
                                    gid="pick_name",
                                    bbox={"boxstyle": "square,pad=0.15", "facecolor": "white",
                                          "edgecolor": "none", "alpha": 0.85})
                        shown = r.params
        ticks = [f"{pd.Timestamp(t):%Y-%m-%d}\n{pd.Timestamp(t):%H:%M} · {safe_component(s)[-4:]}"
                 for t, s in zip(firsts["started_at"], firsts["sweep_id"])]
        step = max(1, math.ceil(len(sweeps) / 16))
        ax.set_xticks(range(0, len(sweeps), step), ticks[::step], fontsize=7.5)
        ax.set_xlim(-0.6, len(sweeps) - 0.4)
        ax.set_xlabel("sweeps of the spec, oldest left (start time · end of sweep id)")
        ax.set_ylabel(get_metric(result.metric).axis_label(facts.target))
        who = result.models[0] if len(result.models) == 1 else "each model"
        rule_text = "each sweep's rule" if result.rule is None else \
            f"the {rule_label(result.rule)} rule"
        _headline(fig, f"How has {who}'s pick moved across the sweeps of '{result.name}'?",
                  f"cell picked under {rule_text} in "
                  f"{'the one sweep' if len(sweeps) == 1 else f'each of {len(sweeps)} sweeps'}; "
                  f"{metric_label(result.metric)} ({result.better} is better), {result.se} SE")
        handles = _history_legend(looks, result.models, table["test"].notna().any())
        fig.legend(handles=handles, loc="outside lower center",
                   ncols=max(1, min(len(handles), int(fig.get_figwidth() / 1.3))))
    return fig


def _history_legend(looks: dict, models: list[str], tests: bool) -> list:
    """One entry per model in its look, then the two kinds of mark in ink: short enough
    to fit under the narrowest history figure."""
    from matplotlib.lines import Line2D

    handles = [Line2D([], [], color=looks[m].colour, marker=looks[m].marker, markersize=4.5,
                      linewidth=1.4, linestyle=looks[m].dash, label=m) for m in models]
    handles.append(Line2D([], [], color=MUTED, marker="o", markersize=4.5, linestyle="none",
                          label="CV mean, bar ± 1 SE"))
    if tests:
        handles.append(Line2D([], [], linestyle="none", marker="D", markersize=5,
                              markerfacecolor="white", markeredgecolor=INK,
                              markeredgewidth=1.2, label="test split"))
    return handles

"""Figures of a stored sweep, as matplotlib Figures built from store queries only.

Six kinds, each answering one question: `complexity` (where does one model's CV error stop
improving, and which cells do the picks take?), `models` (how do the models' picked cells
compare fold by fold?), `importance` (which columns does each model rely on?),
`predictions` (how close are the test predictions?), `tree` (how does the picked
pruned tree split the rows?; drawn in tree_figures.py) and `history` (how has each pick
moved across sweeps?; drawn in history_figures.py). Figures are made without pyplot, so no
GUI backend is touched; files are written with Agg (PNG) and the SVG backend. Each model
wears one look (looks.py: colour, point shape and line pattern) in every figure."""

from __future__ import annotations

import io
import math
import textwrap
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from ..errors import QueryError
from ..families import get_family
from .looks import DASHES, MARKERS, PALETTE, Look, look_of, look_svg
from .filenames import check_folder, check_replaceable, inside, make_folder, write_whole
from ..metrics import get_metric, metric_label
from .picks import check_rule
from .placing import lay_out, printable, settle, side_label
from .explained import importance_table, prediction_table
from .queries import complexity_table, model_order, picked_fold_scores, picks, sweep_facts
from .results import ComplexityTable, Picks
from ..store import Store
from .views import number, params_text, rule_label

__all__ = ["PALETTE", "NEUTRALS", "complexity_figure", "models_figure", "importance_figure",
           "predictions_figure", "save_figure", "figure_svg",
           "model_colours", "model_looks", "look_of", "look_svg", "Look", "MARKERS", "DASHES",
           "IMAGE_MARKS", "image_paths", "figure_bytes", "write_images"]

NEUTRALS = {"ink": "#272b28", "muted": "#646b65", "rule": "#cdd3cd", "grid": "#e4e8e3",
            "wash": "#f2f4f1", "paper": "#fbfcfa"}
"""foldwise's own neutrals, a faintly green grey from ink to paper, shared by the figures
and the report: text, secondary text, lines and borders, grid lines, washes, page."""

INK, MUTED, FAINT, GRID = (NEUTRALS[k] for k in ("ink", "muted", "rule", "grid"))
PICK_MARK = INK
"""The picks are marked in ink, by shape (best: a star; one-SE: a ring), never in a
model's colour."""

_STYLE = {"font.size": 9, "axes.titlesize": 10, "axes.labelsize": 9, "axes.edgecolor": MUTED,
          "axes.labelcolor": INK, "axes.spines.top": False, "axes.spines.right": False,
          "axes.grid": True, "axes.grid.axis": "y", "grid.color": GRID,
          "grid.linewidth": 0.8, "xtick.color": MUTED, "ytick.color": MUTED,
          "text.color": INK, "legend.frameon": False, "legend.fontsize": 8,
          "figure.facecolor": "white", "axes.facecolor": "white", "svg.fonttype": "none"}


@contextmanager
def _style():
    import matplotlib

    with matplotlib.rc_context(_STYLE):
        yield


def _figure(width: float, height: float):
    from matplotlib.figure import Figure

    return Figure(figsize=(width, height), layout="constrained")


def model_looks(store: Store, sweep_id: str) -> dict[str, Look]:
    """One look per model, in spec order (the same in every figure)."""
    return {m: look_of(i) for i, m in enumerate(model_order(store, sweep_id))}


def model_colours(store: Store, sweep_id: str) -> dict[str, str]:
    """One palette colour per model, in spec order (the same in every figure)."""
    return {m: look.colour for m, look in model_looks(store, sweep_id).items()}


def _nothing_stored(what: str, sweep_id: str) -> QueryError:
    return QueryError(f"sweep {sweep_id} has no stored {what}: it ran with `explain: {{cells: "
                      "none}` or before foldwise stored them. Run the spec again with "
                      "`explain: {cells: picked}` (the default) to get them.")


def fill_by_clause(text: str, width: int) -> str:
    """`text` in lines of about `width` characters, broken between its '; '-separated
    clauses where they fit, so that a short phrase is not split over two lines."""
    lines: list[str] = []
    for clause in text.split("; "):
        if lines and len(lines[-1]) + 2 + len(clause) <= width:
            lines[-1] += "; " + clause
            continue
        if lines:
            lines[-1] += ";"
        lines.extend(textwrap.wrap(clause, width) or [""])
    return "\n".join(lines)


def _headline(fig, question: str, detail: str):
    """The figure's title: the question it answers, then what is shown."""
    width = int(fig.get_figwidth() * 12)  # characters that fit at this font size
    return fig.suptitle(f"{textwrap.fill(question, width)}\n{fill_by_clause(detail, width)}",
                        x=0.01, ha="left", fontsize=9.5, linespacing=1.5, gid="headline")


# -- (a) CV error against complexity -------------------------------------------------------
def _x_axis(result: ComplexityTable):
    """x values, axis label, log scale?, reversed? and tick labels for a complexity curve."""
    table, varying = result.table, result.varying_params
    if table["mean_leaves"].notna().all():  # a family that grows one tree: its size
        x = table["mean_leaves"].to_numpy(float)
        return x, "leaves of the fitted tree (mean over folds, log scale)", True, False, None
    if len(varying) == 1:
        name = varying[0]
        values = table[name]
        if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values):
            x = values.to_numpy(float)
            log = x.min() > 0 and x.max() / x.min() > 20
            param = get_family(result.family).params.get(name)
            simpler = param.simpler if param is not None else None
            label = f"{name}{' (log scale)' if log else ''}"
            return x, label, log, simpler == "higher", None
    ticks = ([params_text(dict(zip(varying, vals))).replace(", ", "\n")
              for vals in table[varying].itertuples(index=False)] if varying
             else ["single cell"] * len(table))
    x = table["complexity_rank"].to_numpy(float)
    return x, "cell (complexity rank, simplest left)", False, False, ticks


def _tick(value: float) -> str:
    """A log axis's tick as a plain number: 0.01, 2, 100, 3000 (not 2×10⁰)."""
    return f"{value:g}" if 1e-4 <= abs(value) < 1e6 else f"{value:.0e}"


def _plain_log_ticks(axis, lo: float, hi: float) -> None:
    """Plain numbers on a log axis; across fewer than two decades also the 2s and 5s."""
    from matplotlib.ticker import FuncFormatter, NullFormatter

    axis.set_major_formatter(FuncFormatter(lambda v, _: _tick(v)))
    if hi / lo < 100:
        axis.set_minor_formatter(FuncFormatter(
            lambda v, _: _tick(v) if f"{v:.0e}"[0] in "25" else ""))
    else:
        axis.set_minor_formatter(NullFormatter())


def _mark_picks(ax, x, table, better: str, threshold: float | None, *,
                beside: bool = False) -> dict[int, tuple]:
    """The best cell (an ink star) and the one-SE cell (an ink ring), each named (lines gid
    'pick_best' and 'pick_one_se', names gid 'pick_name'); per marked row its name and the
    places it may take, best first, for `settle` once the figure is laid out. A name goes
    above or below its cell (the two picks on opposite sides, else the other side), past
    the end of the cell's SE bar and past its test cross and the threshold line when they
    lie on that side, centred on it or running right or left from beside it, inside the
    axes. `beside` writes it right of the mark, clear of a vertical SE bar through it:
    level with the mark, else just below or just above."""
    marks = {"best": ("*", 13, INK, "best"), "one_se": ("o", 11, "none", "one-SE pick")}
    placed = {}
    for rule, (marker, size, face, text) in marks.items():
        hit = table["pick"].str.split().map(lambda r, rule=rule: rule in r).to_numpy()
        if not hit.any():
            continue
        i = int(np.flatnonzero(hit)[0])
        y = float(table["mean"].iloc[i])
        ax.plot([x[i]], [y], linestyle="none", marker=marker, markersize=size,
                markerfacecolor=face, markeredgecolor=PICK_MARK,
                markeredgewidth=1.8 if rule == "one_se" else 0.8, zorder=5, gid=f"pick_{rule}")
        placed.setdefault(i, []).append(text)
    named = {}
    for i, texts in placed.items():
        y = float(table["mean"].iloc[i])
        se, test = (float(table[c].iloc[i]) for c in ("se", "test"))

        def past(sign: int, y=y, se=se, test=test, i=i):
            """9 points past the farthest of this cell's marks on one side (clear of the
            ring's and the star's half size too), centred on the cell or running right or
            left from just beside it."""
            ends = [y + sign * (se if math.isfinite(se) else 0.0)] + [
                v for v in (test, threshold) if v is not None and math.isfinite(v)
                and (v - y) * sign > 0]
            end = max(ends) if sign > 0 else min(ends)
            va = "bottom" if sign > 0 else "top"
            return [((x[i], end), (dx, 9 * sign), ha, va)
                    for dx, ha in ((0, "center"), (-6, "left"), (6, "right"))]

        if beside:
            places = [((x[i], y), (12, dy), "left", va)
                      for dy, va in ((0, "center"), (-4, "top"), (4, "bottom"))]
        else:
            down = (better == "lower") == (len(placed) == 1 or texts[0] == "best")
            places = past(-1 if down else 1) + past(1 if down else -1)
        xy, offset, ha, va = places[0]
        name = ax.annotate(" and ".join(texts) + f"\n{number(y)}", xy, xytext=offset,
                           textcoords="offset points", ha=ha, va=va, fontsize=8, color=INK,
                           zorder=6, gid="pick_name")
        name.set_in_layout(False)  # it settles inside the axes: the layout never moves
        named[i] = (name, places)
    return named


def _clear_side(ax, x, rows: list[int], y: float) -> float:
    """0 (left) or 1 (right): the end of the x axis farther from the marked cells, where the
    threshold's label cannot run into their names."""
    ax.get_xlim()  # settle autoscaling before reading positions
    to_axes = ax.transAxes.inverted()
    fractions = [to_axes.transform(ax.transData.transform((x[i], y)))[0] for i in rows]
    if not fractions:
        return 0.0
    return 0.0 if min(fractions) >= 1 - max(fractions) else 1.0


def _name_threshold(ax, line, threshold: float, better: str, side: float) -> None:
    """The one-SE threshold's value written along its line, at the first of these places
    that covers no mark, line or name (else where it covers fewest): outside the band at
    the end `side`, outside at the other end, inside the band at `side`, inside at the
    other end. `ax` is laid out already, so its pixels are final."""
    op = "+" if better == "lower" else "−"
    up = 1 if better == "lower" else -1
    places = [((end, threshold), (4 - 8 * end, 3 * sign * up), "right" if end else "left",
               "bottom" if sign * up > 0 else "top")
              for sign in (1, -1) for end in (side, 1.0 - side)]
    label = ax.annotate(f"one-SE threshold: best {op} 1 SE = {number(threshold)}",
                        (side, threshold), xycoords=("axes fraction", "data"),
                        xytext=(0, 0), textcoords="offset points", fontsize=7.5, color=MUTED,
                        gid="one_se_threshold_label")
    label.set_in_layout(False)  # every place is inside the axes: the layout never moves
    settle(ax, label, places, skip=(line,))


def complexity_figure(store: Store, model: str, sweep_id: str | None = None, *,
                      se: str = "plain"):
    """One model's CV error against complexity: the mean of every cell on a line with a
    ±1 SE ribbon, the cells within one SE of the best shaded as a band (its edge, the
    one-SE threshold, is the line gid 'one_se_threshold'), the picks marked in ink and
    named, and the test scores as small crosses."""
    result = complexity_table(store, model, sweep_id, se=se)
    table, facts = result.table, result.facts
    sid, metric, family = facts.sweep_id, result.metric, result.family
    look = model_looks(store, sid).get(model, look_of(0))
    colour = look.colour
    x, xlabel, log, reverse, ticks = _x_axis(result)
    order = np.argsort(x)
    mean, err = table["mean"].to_numpy(float), table["se"].to_numpy(float)
    better = facts.better_of()
    with _style():
        fig = _figure(7.25, 4.5)  # quarter inches: whole pixels at any common dpi
        ax = fig.add_subplot()
        threshold = result.threshold
        best = table[table["pick"].str.contains("best")]
        inside = np.zeros(len(table), dtype=bool)
        if threshold is not None and len(best):
            best_mean = float(best["mean"].iloc[0])
            lo, hi = sorted((best_mean, threshold))
            ax.axhspan(lo, hi, color=colour, alpha=0.24, linewidth=0, zorder=1,
                       label="within one SE of the best")
            line = ax.axhline(threshold, color=colour, linewidth=1.0, zorder=2)
            line.set_gid("one_se_threshold")
            inside = table["within_one_se"].to_numpy(bool)
        if ticks is None:
            ax.fill_between(x[order], (mean - err)[order], (mean + err)[order], color=colour,
                            alpha=0.22, linewidth=0, zorder=2)
            ax.plot(x[order], mean[order], color=colour, linewidth=1.6, zorder=3,
                    linestyle=look.dash, label=f"CV mean, ±1 SE shaded ({facts.n_folds} folds)")
        else:  # no line through an unordered grid: a mean and its SE per cell
            bars = ax.errorbar(x, mean, yerr=err, color=colour, linestyle="none",
                               elinewidth=1.2, capsize=0, zorder=3,
                               label=f"CV mean ± 1 SE ({facts.n_folds} folds)")
            bars.lines[2][0].set_linestyle(look.dash)
        ax.scatter(x[inside], mean[inside], s=22, color=colour, edgecolor="white",
                   linewidth=0.6, zorder=4, marker=look.marker)
        ax.scatter(x[~inside], mean[~inside], s=20, facecolor="white", edgecolor=colour,
                   linewidth=1.1, zorder=4, marker=look.marker)
        if table["test"].notna().any():
            ax.plot(x, table["test"].to_numpy(float), linestyle="none", marker="x",
                    markersize=4, markeredgewidth=1.0, color=MUTED, zorder=3,
                    label="test split (not used to pick)")
        named = _mark_picks(ax, x, table, better, threshold if len(best) else None,
                            beside=ticks is not None)
        if log:
            ax.set_xscale("log")
            _plain_log_ticks(ax.xaxis, float(x.min()), float(x.max()))
        if reverse:
            ax.invert_xaxis()
        if ticks is not None:
            ax.set_xticks(x, ticks, fontsize=8)
            ax.set_xlim(x.min() - 0.5, x.max() + 0.5)
        ax.margins(y=0.2)  # room for the picks' names
        ax.set_xlabel(f"{xlabel}\n← simpler        more complex →", color=INK)
        ax.set_ylabel(get_metric(metric).axis_label(facts.target))
        _headline(fig, f"{model}: where does CV {metric_label(metric)} stop "
                  "improving as the model grows?",
                  f"{family}, {facts.n_folds} folds per cell, {result.se} SE; filled "
                  "points: within one SE of the best")
        fig.legend(loc="outside lower center", ncols=3)
        lay_out(fig)  # once: from here pixels are final
        for name, places in named.values():
            settle(ax, name, places)
        if threshold is not None and len(best):
            _name_threshold(ax, line, threshold, better, _clear_side(ax, x, list(named),
                                                                     threshold))
    return fig


# -- (b) models side by side ---------------------------------------------------------------
def _picked(store: Store, sweep_id: str | None, rule: str | None) -> Picks:
    """Each model's cell under `rule` (default: the sweep's rule)."""
    check_rule(rule)
    facts = sweep_facts(store, sweep_id)
    return picks(store, facts.sweep_id, rule=rule or facts.rule)


def models_figure(store: Store, sweep_id: str | None = None, *, rule: str | None = None):
    """Each model's picked cell: fold scores as points (grey lines join the same fold),
    mean ± SE, and the test score just right of the mean's tick, so neither hides the other."""
    result = _picked(store, sweep_id, rule)
    chosen, facts = result.table, result.facts
    sid, metric = facts.sweep_id, facts.metric
    folds = picked_fold_scores(store, sid, metric, chosen["cell_id"].tolist())
    looks = model_looks(store, sid)
    models = chosen["model"].tolist()
    from matplotlib.transforms import offset_copy

    with _style():
        fig = _figure(max(5.0, 1.35 * len(models) + 2.2), 4.4)
        ax = fig.add_subplot()
        wide = folds.pivot_table(index=["repeat", "fold"], columns="model", values="value")
        n = len(wide)
        offsets = np.linspace(-0.18, 0.18, n) if n > 1 else np.zeros(1)
        beside = offset_copy(ax.transData, fig, x=14, units="points")  # clear of the tick
        for j in range(n):  # paired: the same fold across models
            ax.plot(np.arange(len(models)) + offsets[j], wide.iloc[j].reindex(models).to_numpy(),
                    color=FAINT, linewidth=0.7, zorder=1)
        for i, r in enumerate(chosen.itertuples(index=False)):
            look = looks.get(r.model, look_of(i))
            col = look.colour
            vals = wide[r.model].to_numpy() if r.model in wide else np.array([])
            ax.plot(i + offsets[:len(vals)], vals, linestyle="none", marker=look.marker,
                    markersize=math.sqrt(14), markerfacecolor=col, markeredgecolor="white",
                    markeredgewidth=0.4, alpha=0.75, zorder=2, gid=f"folds {r.model}",
                    label="fold scores" if i == 0 else None)
            bars = ax.errorbar([i + 0.36], [r.mean], yerr=[r.se], color=col, marker="_",
                               markersize=16, markeredgewidth=2.2, elinewidth=2.2, capsize=4,
                               zorder=3, label="CV mean ± 1 SE" if i == 0 else None)
            bars.lines[2][0].set_linestyle(look.dash)
            if r.test == r.test and r.test is not None:
                ax.plot([i + 0.36], [r.test], linestyle="none", marker="D", markersize=6,
                        markerfacecolor="white", markeredgecolor=INK, markeredgewidth=1.3,
                        zorder=4, label="test split score" if i == 0 else None,
                        transform=beside)
                ax.update_datalim([(i + 0.36, r.test)])  # autoscaling skips offset marks
        ax.autoscale_view()
        ax.set_xticks(range(len(models)), [f"{m}\n{f}" for m, f in zip(models, chosen["family"])])
        ax.set_xlim(-0.6, len(models) - 0.4)
        ax.set_ylabel(get_metric(metric).axis_label(facts.target, prefix=""))
        better = facts.better_of()
        _in_ink(fig.legend(loc="outside lower center", ncols=3))
        _headline(fig, "Which model predicts best?",
                  f"{metric_label(metric)} of each model's {rule_label(result.rules[0])} cell on the "
                  f"same {n} folds ({better} is better); grey lines join one fold's scores")
    return fig


def _in_ink(legend) -> None:
    """Draw a legend's marks in muted ink (a diamond's edge in ink): the legend explains the
    kinds of mark, so none of them may wear one model's colour."""
    from matplotlib.collections import Collection
    from matplotlib.lines import Line2D

    for mark in legend.findobj(lambda a: isinstance(a, (Line2D, Collection))):
        if isinstance(mark, Collection):
            mark.set_facecolor(MUTED)
            mark.set_edgecolor(MUTED)
        else:
            mark.set_color(MUTED)
            mark.set_markeredgecolor(INK if mark.get_marker() == "D" else MUTED)
            mark.set_markerfacecolor("white" if mark.get_marker() == "D" else MUTED)


# -- (c) importance ------------------------------------------------------------------------
_METHOD_AXIS = {"permutation": "rise in test {metric} when the column is shuffled ({unit})",
                "impurity": "share of squared-error reduction (sums to 1)",
                "coefficient": "SD of the column's part of the prediction ({unit})"}


def importance_figure(store: Store, sweep_id: str | None = None, *,
                      method: str = "permutation", rule: str | None = None,
                      top: int | None = None):
    """Bars of each picked cell's importances (one panel per model), whiskers = spread."""
    if method not in _METHOD_AXIS:
        raise QueryError(f"method must be one of {', '.join(_METHOD_AXIS)}, got {method!r}.")
    result = _picked(store, sweep_id, rule)
    chosen, facts, rule = result.table, result.facts, rule_label(result.rules[0])
    sid, metric, target = facts.sweep_id, facts.metric, facts.target
    stored = importance_table(store, sid, method=method)
    imp = stored.table[stored.table["cell_id"].isin(chosen["cell_id"])]
    if imp.empty and set(stored.undefined_cells) & set(chosen["cell_id"]):
        raise QueryError(f"the {method} importances of sweep {sid}'s {rule} cells are "
                         f"undefined: they are drops in {metric_label(metric)} on the test "
                         "split, which is undefined there (for ROC AUC: the test rows lack a "
                         "class). `foldwise plot importance --method impurity` (trees) or "
                         "`--method coefficient` (linear models) shows the fitted models'.")
    if imp.empty:
        raise _nothing_stored(f"{method} importances for the {rule} cells", sid)
    models = [m for m in chosen["model"] if m in set(imp["model"])]
    order = (imp.groupby("feature")["rank"].mean().sort_values(ascending=False).index.tolist())
    if top:
        order = order[-top:]
    colours = model_colours(store, sid)
    unit = (get_metric(metric).unit_text(target) if method == "permutation"
            else f"units of {target}")
    with _style():
        fig = _figure(max(6.0, 2.3 * len(models) + 1.6), 1.3 + 0.24 * len(order))
        # one x scale for every panel: the same method's values compare across models
        axes = fig.subplots(1, len(models), sharey=True, sharex=True, squeeze=False)[0]
        for ax, model in zip(axes, models):
            g = imp[imp["model"] == model].set_index("feature").reindex(order)
            y = np.arange(len(order))
            value, spread = g["value"].to_numpy(), g["spread"].fillna(0).to_numpy()
            ax.barh(y, value, xerr=_whiskers(value, spread, method), color=colours.get(model, PALETTE[0]),
                    height=0.7, error_kw={"ecolor": INK, "elinewidth": 0.8, "capsize": 1.5})
            ax.axvline(0, color=MUTED, linewidth=0.8)
            ax.set_yticks(y, order)
            ax.grid(axis="x", color=GRID)
            ax.grid(axis="y", visible=False)
            ax.set_title(model, loc="left", fontweight="bold")
        fig.supxlabel(_METHOD_AXIS[method].format(metric=metric_label(metric),
                                                   unit=unit), fontsize=9)
        _headline(fig, "Which columns does each model rely on?",
                  f"{method} importance of each model's {rule} cell, refit on "
                  "all training rows; whiskers: spread")
    return fig


def _whiskers(value, spread, method: str):
    """± spread, except that a share of impurity reduction or an SD cannot fall below 0: the
    whisker toward zero stops there (shuffling can lower a score, so permutation keeps ±)."""
    if method == "permutation":
        return spread
    return np.vstack([np.minimum(spread, np.clip(np.nan_to_num(value), 0, None)), spread])


# -- (d) predicted against observed --------------------------------------------------------
def panel_grid(n: int) -> tuple[int, int]:
    """(rows, columns) of n square panels: one row up to three, then as square as it gets
    (4: 2 x 2, 5 or 6: 2 x 3, 7 to 9: 3 x 3)."""
    cols = n if n <= 3 else math.ceil(math.sqrt(n))
    return math.ceil(n / cols), cols


def label_open_bottoms(axes, shown: int, cols: int) -> None:
    """Numbers under every panel with no panel below it: shared x axes number only the last
    row, so a panel above an empty slot of that row would have an unnumbered axis."""
    for i in range(max(0, shown - cols), shown):
        axes[i].xaxis.set_tick_params(labelbottom=True)


def predictions_figure(store: Store, sweep_id: str | None = None, *, rule: str | None = None):
    """Predicted against observed on the test split, one panel per model's picked cell."""
    result = _picked(store, sweep_id, rule)
    chosen, facts, rule = result.table, result.facts, rule_label(result.rules[0])
    sid, target = facts.sweep_id, facts.target
    if facts.task == "classification":
        raise QueryError(f"sweep {sid} predicts the classes of {target}; for their test "
                         "predictions draw `foldwise plot calibration` or `foldwise plot roc`.")
    preds = prediction_table(store, sid)
    preds = preds[preds["cell_id"].isin(chosen["cell_id"])]
    if preds.empty:
        raise _nothing_stored(f"test predictions for the {rule} cells", sid)
    colours = model_colours(store, sid)
    models = [m for m in chosen["model"] if m in set(preds["model"])]
    lo = float(min(preds["observed"].min(), preds["predicted"].min()))
    hi = float(max(preds["observed"].max(), preds["predicted"].max()))
    pad = 0.03 * (hi - lo)
    rows, cols = panel_grid(len(models))
    with _style():
        fig = _figure(3.0 * cols + 0.75, 3.0 * rows + 1.0)
        axes = fig.subplots(rows, cols, sharex=True, sharey=True, squeeze=False).ravel()
        for ax, model in zip(axes, models):
            g = preds[preds["model"] == model]
            rmse = float(np.sqrt(np.mean((g["predicted"] - g["observed"]) ** 2)))
            ax.plot([lo - pad, hi + pad], [lo - pad, hi + pad], color=MUTED, linewidth=0.9,
                    linestyle="--", zorder=1)
            ax.scatter(g["observed"], g["predicted"], s=6, alpha=0.45, linewidth=0,
                       color=colours.get(model, PALETTE[0]), zorder=2, rasterized=True)
            ax.set_xlim(lo - pad, hi + pad)
            ax.set_ylim(lo - pad, hi + pad)
            ax.set_aspect("equal")
            ax.grid(axis="x", color=GRID)
            ax.set_title(f"{model}: test RMSE {number(rmse)}", loc="left", fontsize=9)
        for ax in axes[len(models):]:
            ax.set_visible(False)
        label_open_bottoms(axes, len(models), cols)
        fig.supxlabel(f"observed {target}", fontsize=9)
        headline = _headline(fig, "How close are the test-split predictions?",
                             f"{rule} cell of each model, refit on all training rows; "
                             "dashed line: prediction = observation")
        side_label(fig, headline, f"predicted {target}")
    return fig


# -- files ---------------------------------------------------------------------------------
IMAGE_MARKS = {"png": b"tEXtSoftware\x00foldwise figure",
               "svg": b"<dc:title>foldwise figure</dc:title>"}
"""What an image file this module wrote holds near its start, by format (PNG's Software
text, SVG's creator): only such a file is replaced."""


def image_paths(stem: Path, formats=("png", "svg")) -> list[Path]:
    """`stem.<format>` for each format (the format is appended, so a dot in the stem stays),
    each checked before anything is drawn: inside stem's folder, no file in the folder's
    path, and new or an earlier foldwise image of its format."""
    stem = Path(stem)
    hint = "Remove or rename it, or name another folder with --out-dir."
    check_folder(stem.parent, f"image {stem}.*", hint)
    paths = []
    for fmt in formats:
        if fmt not in IMAGE_MARKS:
            raise QueryError(f"unknown image format {fmt!r}; formats: "
                             f"{', '.join(IMAGE_MARKS)}.")
        path = inside(stem.parent, f"{stem.name}.{fmt}")
        check_replaceable(path, IMAGE_MARKS[fmt], "image", hint)
        paths.append(path)
    return paths


def figure_bytes(fig, paths: list[Path], *, dpi: int = 150) -> list[tuple[Path, bytes]]:
    """(path, the figure drawn in the path's format) for each path; nothing is written."""
    files = []
    printable(fig)
    with _style():
        for path in paths:
            fmt = path.suffix[1:]
            buffer = io.BytesIO()
            fig.savefig(buffer, format=fmt, dpi=dpi, metadata=_metadata(fmt))
            files.append((path, buffer.getvalue()))
    return files


def write_images(files: list[tuple[Path, bytes]]) -> list[Path]:
    """Write drawn images (`figure_bytes`), folders created, all whole or none."""
    for folder in dict.fromkeys(path.parent for path, _ in files):
        make_folder(folder, f"images in {folder}", "Name another folder with --out-dir.")
    return write_whole(files, ".figure-")


def save_figure(fig, stem: Path, formats=("png", "svg"), *, dpi: int = 150) -> list[Path]:
    """Write the figure as `stem.<format>` for each format (`image_paths`), all files whole
    or none; return the paths."""
    return write_images(figure_bytes(fig, image_paths(stem, formats), dpi=dpi))


def _metadata(fmt: str) -> dict:
    """No creation dates in files, so the same store gives the same bytes; the mark that
    says foldwise wrote them."""
    return {"Date": None, "Creator": "foldwise figure"} if fmt == "svg" else \
        {"Software": "foldwise figure"}


def figure_svg(fig, *, salt: str = "fig") -> str:
    """The figure as an inline <svg> element (text kept as text; ids unique per salt)."""
    import matplotlib

    buffer = io.StringIO()
    printable(fig)
    with _style(), matplotlib.rc_context({"svg.hashsalt": salt}):
        fig.savefig(buffer, format="svg", metadata={"Date": None})
    text = buffer.getvalue()
    return text[text.index("<svg"):]

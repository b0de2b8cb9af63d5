"""Every kind of figure by name, and drawing one kind into files: the one entry point the
CLI (`foldwise plot`), the Python API (`runner.figure`) and the report share."""

from __future__ import annotations

from pathlib import Path

from ..errors import QueryError
from ..store import Store
from .class_figures import calibration_figure, roc_figure
from .filenames import safe_component, safe_names
from .history_figures import history_figure
from .plots import (complexity_figure, figure_bytes, image_paths,
                    importance_figure, models_figure, predictions_figure, write_images)
from .queries import model_order, sweep_facts
from .tree_figures import tree_figure

__all__ = ["KINDS", "make_figure", "write_plots"]


KINDS = {"complexity": complexity_figure, "models": models_figure,
         "importance": importance_figure, "predictions": predictions_figure,
         "tree": tree_figure, "calibration": calibration_figure, "roc": roc_figure,
         "history": history_figure}
"""Every figure kind by name."""


def make_figure(kind: str, store: Store, sweep_id: str | None = None, **options):
    """The figure of one kind; options go to its function (e.g. model=, rule=, method=)."""
    if kind not in KINDS:
        raise QueryError(f"unknown plot kind {kind!r}; kinds: {', '.join(KINDS)}.")
    return KINDS[kind](store, sweep_id=sweep_id, **options)


def write_plots(kind: str, store: Store, out_dir: str | Path, sweep_id: str | None = None, *,
                model: str | None = None, name: str | None = None, rule: str | None = None,
                method: str = "permutation", depth: int = 3, se: str = "plain",
                formats=("png", "svg")) -> list[Path]:
    """Draw one kind of figure of a sweep into `out_dir` and return the files written:
    `<sweep id>-<kind>[-<model or method>].<format>`, one figure per model for
    `complexity` unless `model` is given; `history` adds the spec name (then the model).

    The sweep id and model labels come from the store, which others may have written, so
    each becomes a safe file-name component (runner/filenames.py) and every file must
    resolve inside `out_dir`. Labels are named from all of the sweep's models at once,
    so a model's file name is the same whether or not `model` is given. Every file is
    checked before any figure is drawn, and all are drawn before any is written: an
    earlier image is replaced only with the whole new set."""
    if kind not in KINDS:
        raise QueryError(f"unknown plot kind {kind!r}; kinds: {', '.join(KINDS)}.")
    sid = sweep_facts(store, sweep_id).sweep_id  # its cells checked
    if kind == "complexity":
        every = model_order(store, sid)
        models = [model] if model is not None else every
        names = safe_names([*every, *models])
        jobs = [(dict(model=m, se=se), f"{kind}-{names[m]}") for m in models]
    elif kind == "tree":
        jobs = [(dict(rule=rule, model=model, depth=depth), kind)]
    elif kind == "history":
        name = name or sweep_facts(store, sid).name
        stem = safe_names([name, *([model] if model else [])])
        jobs = [(dict(model=model, name=name, rule=rule, se=se),
                 f"{kind}-{stem[name]}" + (f"-{stem[model]}" if model else ""))]
    elif kind == "importance":
        jobs = [(dict(rule=rule, method=method), f"{kind}-{safe_component(method)}")]
    else:
        jobs = [(dict(rule=rule), kind)]
    folder = Path(out_dir)
    targets = [image_paths(folder / f"{safe_component(sid)}-{name}", formats)
               for _, name in jobs]
    files: list[tuple[Path, bytes]] = []
    for (options, _), paths in zip(jobs, targets):
        files += figure_bytes(make_figure(kind, store, sid, **options), paths)
    return write_images(files)

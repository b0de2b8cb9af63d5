"""What the foldwise commands share: the store, format, sweep, SE and selection options,
opening the store, printing a result and the progress bar. Its own module so that
`cli.py` and the command modules of `runner/commands/` import it without a cycle."""

from __future__ import annotations

import sys

import click

from ..output import FORMATS, emit


STORE_ENV = "FOLDWISE_STORE"


class Choice(click.Choice):
    """click's choice whose refusal also names the closest choice, as every refusal of a
    name foldwise does (runner/names.py)."""

    def get_invalid_choice_message(self, value, ctx) -> str:
        from ..names import nearest

        return super().get_invalid_choice_message(value, ctx) + nearest(str(value),
                                                                         self.choices)


def _store_option(f):
    return click.option("--store", "store_path", type=str, envvar=STORE_ENV, default=None,
                        help="DuckDB store file, or a team store's postgresql://USER@HOST/DB "
                             f"[default: results/foldwise.duckdb, or ${STORE_ENV}].")(f)


def _spec_store_option(f):
    """--store of the commands that read a spec (check, run): the spec's `store` comes
    before the default (engine.store_path)."""
    return click.option("--store", "store_path", type=str, envvar=STORE_ENV, default=None,
                        help="DuckDB store file, or a team store's postgresql://USER@HOST/DB "
                             f"[default: ${STORE_ENV}, else the spec's `store`, else "
                             "results/foldwise.duckdb].")(f)


def _format_option(f):
    return click.option("--format", "fmt", type=Choice(FORMATS), default="table",
                        show_default=True, help="Output as a table, CSV or JSON.")(f)


def _open_store(store_path):
    from ..store import DEFAULT_STORE, Store

    return Store(store_path or DEFAULT_STORE,
                 on_wait=lambda msg: click.echo(msg, err=True))


def _lift_option(f):
    return click.option("--lift-limits", is_flag=True,
                        help="Ignore the spec's `limits` (cells, folds, fits, data size); "
                             "for plans you know the machine can take.")(f)


class _ProgressBar:
    """A rich progress bar on stderr, shown from the first task on (not while validating)."""

    def __init__(self, title: str):
        self.title = title
        self._bar = None

    def __call__(self, done: int, total: int) -> None:
        if self._bar is None:
            from rich.console import Console
            from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn,
                                       TimeElapsedColumn, TimeRemainingColumn)

            self._bar = Progress(TextColumn(f"[bold]{self.title}"), BarColumn(),
                                 MofNCompleteColumn(), TextColumn("tasks"), TimeElapsedColumn(),
                                 TimeRemainingColumn(), transient=True,
                                 console=Console(file=sys.stderr))
            self._bar.start()
            self._task = self._bar.add_task("sweep", total=total)
        self._bar.update(self._task, completed=done, total=total)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.stop()


def _show(result, view, fmt) -> None:
    """Print a result: its view as a table, or its exact table as CSV or JSON; remarks go
    to stderr, so that CSV and JSON stay clean. A table shows only the view, so the exact
    table (which may be built on demand) is not asked for."""
    from ..read.past_views import plain_text

    emit(None if fmt == "table" else result.table, fmt, view=view)
    for note in (view.notes if fmt == "table" else
                 view.preface + view.caveats + view.notes):
        click.echo(plain_text(note), err=True)


_STATUSES = ("finished", "failed", "interrupted", "running")


def _selection_options(f):
    """--label, --name, --status and --older-than: which sweeps a command means."""
    for option in reversed([
            click.option("--label", "labels", multiple=True, metavar="KEY[=VALUE]",
                         help="Only sweeps with this label (any value if no =VALUE); "
                              "repeat: all must hold."),
            click.option("--name", default=None, help="Only sweeps of this spec name."),
            click.option("--status", type=Choice(_STATUSES), default=None,
                         help="Only sweeps that ended so (a dead running sweep is "
                              "interrupted)."),
            click.option("--older-than", metavar="AGE", default=None,
                         help="Only sweeps started longer ago than AGE: 12h, 30d, 6w.")]):
        f = option(f)
    return f


def _selection(ids=(), labels=(), name=None, status=None, older_than=None):
    from ..store.labels import Selection

    return Selection.of(ids=ids, labels=labels, name=name, status=status,
                        older_than=older_than)


def _sweeps_option(f):
    return click.option("--sweep", "sweep_ids", multiple=True, metavar="ID",
                        help="Only this sweep (id or unique prefix); repeatable.")(f)


_RULES = ("best", "one_se")


_SE_KINDS = ("plain", "corrected")


def _sweep_option(f):
    return click.option("--sweep", "sweep_id", default=None,
                        help="Sweep id or unique prefix [default: latest].")(f)


def _se_option(f):
    return click.option("--se", type=Choice(_SE_KINDS), default="plain", show_default=True,
                        help="SE for the one-SE rule: plain = sd/sqrt(k·r); corrected = "
                             "sqrt((1/(k·r) + n_valid/n_train)·sd²).")(f)

"""The `foldwise` command: thin click commands over the library. Each opens the store,
makes one library call and prints the result; library errors become one readable paragraph
and the error's exit code (2 for spec, data and usage errors)."""

from __future__ import annotations

import json
import sys

import click

from .errors import FoldwiseError
from .output import FORMATS, emit

STORE_ENV = "FOLDWISE_STORE"


class _Group(click.Group):
    """Turns foldwise errors into a message and an exit code, never a traceback."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except FoldwiseError as exc:
            click.echo(f"Error: {exc}", err=True)
            ctx.exit(exc.exit_code)
        except Exception as exc:
            if not type(exc).__module__.startswith(("duckdb", "_duckdb")):
                raise
            first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            click.echo(f"Error: the store answered with an error foldwise did not expect: "
                       f"{first}. Rows already written are kept. Please report this with "
                       "the command you ran.", err=True)
            ctx.exit(1)
        except KeyboardInterrupt:
            click.echo("Error: interrupted. Rows already written are kept; the next "
                       "`foldwise run` of the spec marks the sweep interrupted and completes "
                       "only what is missing.", err=True)
            ctx.exit(130)


def _store_option(f):
    return click.option("--store", "store_path", type=str, envvar=STORE_ENV, default=None,
                        help="DuckDB store file, or a team store's postgresql://USER@HOST/DB "
                             f"[default: results/foldwise.duckdb, or ${STORE_ENV}].")(f)


def _format_option(f):
    return click.option("--format", "fmt", type=click.Choice(FORMATS), default="table",
                        show_default=True, help="Output as a table, CSV or JSON.")(f)


def _open_store(store_path):
    from .store import DEFAULT_STORE, Store

    return Store(store_path or DEFAULT_STORE,
                 on_wait=lambda msg: click.echo(msg, err=True))


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="foldwise", prog_name="foldwise")
def main():
    """Tune and compare regression models by repeated cross-validation.

    Write one YAML spec; `foldwise run` scores every grid cell on identical folds and on the
    test split and keeps every fold score in a DuckDB store; the other commands query it.

    \b
      foldwise check specs/greenhouse.yaml
      foldwise run specs/greenhouse.yaml
      foldwise summary
    """


def _lift_option(f):
    return click.option("--lift-limits", is_flag=True,
                        help="Ignore the spec's `limits` (cells, folds, fits, data size); "
                             "for plans you know the machine can take.")(f)


@main.command()
@click.argument("spec_file", type=click.Path(dir_okay=False))
@_lift_option
def check(spec_file, lift_limits):
    """Validate a spec and print its plan and cost estimate; fits nothing, writes nothing.

    \b
      foldwise check specs/greenhouse.yaml
    """
    from .write.spec import load_spec

    spec = load_spec(spec_file)  # before the engine's imports: a hostile spec costs little
    from .write.engine import check_spec

    from .read.views import finding_lines, findings_view

    plan, facts, findings = check_spec(spec, lift_limits=lift_limits)
    click.echo(f"spec {spec_file} is valid: sweep '{spec.name}'")
    for key, value in facts.items():
        click.echo(f"  {key:<12} {value}")
    from .read.views import View

    emit(plan, "table", view=View(
        "cells and fits per model", plan, numeric=("cells", "fits per fold", "fits"),
        sentences=("Cells that differ only in a path parameter share one fit per fold; "
                   "fits = fits per fold x (folds + 1 refit).",)))
    click.echo(findings_view(findings).title)
    for line in finding_lines(findings):
        click.echo(f"  {line}")


@main.command()
@click.argument("spec_file", type=click.Path(dir_okay=False))
@_store_option
@click.option("--jobs", "-j", type=click.IntRange(min=-1), default=None,
              help="Parallel worker processes [default: the spec's `jobs`, else all cores; "
                   "more than the cores available is capped to them].")
@click.option("--force-jobs", is_flag=True,
              help="Start as many workers as --jobs says even beyond the cores available.")
@click.option("--quiet", "-q", is_flag=True, help="No progress bar and no summary.")
@click.option("--paths/--no-paths", default=True, show_default=True,
              help="Score path grids (pruning alphas, forest sizes, linear alphas) from one "
                   "fit per fold; --no-paths fits every cell on its own, for checking.")
@click.option("--fresh", is_flag=True,
              help="Refit every cell even if the store already holds its results.")
@click.option("--cluster", metavar="ADDRESS", envvar="FOLDWISE_CLUSTER", default=None,
              help="Run the tasks on a Dask cluster: a scheduler's tcp://HOST:PORT, or "
                   "local:N to start N worker processes here [default: local processes].")
@_lift_option
@click.option("--note", default=None, help="A free-text note on what this sweep is for.")
@click.option("--label", "labels", multiple=True, metavar="KEY=VALUE",
              help="A label for the sweep, e.g. data=2026-11; repeat for more.")
@click.option("--if-changed", is_flag=True,
              help="Record nothing if the latest sweep of this spec name finished with the "
                   "same spec text and data (every cell stored); say so and show it.")
def run(spec_file, store_path, jobs, force_jobs, quiet, paths, fresh, cluster, lift_limits,
        note, labels, if_changed):
    """Run a sweep: score every cell on every fold and on the test split.

    \b
      foldwise run specs/greenhouse.yaml
      foldwise run specs/greenhouse.yaml --jobs 2 --store results/team.duckdb
      foldwise run specs/greenhouse.yaml --no-paths
      foldwise run specs/greenhouse.yaml --fresh
      foldwise run specs/greenhouse.yaml --cluster tcp://scheduler:8786
      foldwise run specs/greenhouse.yaml --store postgresql://ana@db.internal/results
      foldwise run specs/greenhouse.yaml --label data=2026-11 --note "new sensor feed"

    Cells whose results the store already holds (same family, params, data and plan) are
    copied into the new sweep instead of refitted, so a rerun after a crash or a grid change
    fits only what is missing. A plan larger than the spec's `limits` is refused before
    anything is read (`foldwise check` prints its size); --lift-limits runs it anyway.
    """
    from .write.spec import load_spec

    def say(message: str) -> None:
        click.echo(message, err=True)

    from .store.labels import check_note, parse_labels

    labels, note = parse_labels(labels), check_note(note)
    spec = load_spec(spec_file)  # before the engine's imports: a hostile spec costs little
    from .write.engine import run_sweep, store_path as spec_store
    from .store import Store

    store = Store(spec_store(spec, store_path), on_wait=say)
    bar = None if quiet else _ProgressBar(spec.name)
    try:
        result = run_sweep(spec, store=store, jobs=jobs, progress=bar, paths=paths, fresh=fresh,
                           cluster=cluster, on_message=say, lift_limits=lift_limits,
                           force_jobs=force_jobs, note=note, labels=labels,
                           if_changed=if_changed)
    finally:
        if bar is not None:
            bar.close()
    if result.status == "unchanged":
        click.echo(f"nothing recorded: sweep {result.sweep_id}, the latest of spec "
                   f"'{spec.name}', finished with the same spec text and data, and the store "
                   "holds every cell (drop --if-changed to record a new sweep anyway).")
        if labels or note is not None:
            click.echo(f"the labels and note given were not recorded; `foldwise label --sweep "
                       f"{result.sweep_id} ...` puts them on that sweep.", err=True)
        if not quiet:
            _print_summary(store, result.sweep_id, "table")
        return
    from .read.views import reuse_text, time_text

    click.echo(f"sweep {result.sweep_id} {result.status} in {time_text(result.seconds)}: "
               f"{reuse_text(result.n_cells, result.n_reused)}; "
               f"{result.n_fold_rows} fold-score rows, {result.n_test_rows} test-score rows "
               f"-> {result.store_path}")
    if result.permutation_rows:
        click.echo(f"permutation importance shuffled each column over "
                   f"{result.permutation_rows:,} test rows (at most explain.permutation.rows)")
    if result.n_failed_fits:
        click.echo(f"warning: {result.n_failed_fits} fits failed; see "
                   "`foldwise sql \"select * from failures\"`.", err=True)
    if not quiet:
        _print_summary(store, result.sweep_id, "table")


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
    to stderr, so that CSV and JSON stay clean."""
    emit(result.table, fmt, view=view)
    for note in (view.notes if fmt == "table" else
                 view.preface + view.caveats + view.notes):
        click.echo(note, err=True)


def _print_summary(store, sweep_id, fmt):
    from .read.queries import summary as read_summary
    from .read.views import summary_view

    result = read_summary(store, sweep_id)
    _show(result, summary_view(result), fmt)


@main.command()
@_store_option
@click.option("--sweep", "sweep_id", default=None, help="Sweep id or unique prefix [default: latest].")
@_format_option
def summary(store_path, sweep_id, fmt):
    """Summarise a sweep by model: each model's picked cell, CV mean ± SE and test scores.

    \b
      foldwise summary
      foldwise summary --sweep 20261202 --format csv
    """
    _print_summary(_open_store(store_path), sweep_id, fmt)


_STATUSES = ("finished", "failed", "interrupted", "running")


def _selection_options(f):
    """--label, --name, --status and --older-than: which sweeps a command means."""
    for option in reversed([
            click.option("--label", "labels", multiple=True, metavar="KEY[=VALUE]",
                         help="Only sweeps with this label (any value if no =VALUE); "
                              "repeat: all must hold."),
            click.option("--name", default=None, help="Only sweeps of this spec name."),
            click.option("--status", type=click.Choice(_STATUSES), default=None,
                         help="Only sweeps that ended so (a dead running sweep is "
                              "interrupted)."),
            click.option("--older-than", metavar="AGE", default=None,
                         help="Only sweeps started longer ago than AGE: 12h, 30d, 6w.")]):
        f = option(f)
    return f


def _selection(ids=(), labels=(), name=None, status=None, older_than=None):
    from .store.labels import Selection

    return Selection.of(ids=ids, labels=labels, name=name, status=status,
                        older_than=older_than)


@main.command()
@_store_option
@_selection_options
@_format_option
def sweeps(store_path, labels, name, status, older_than, fmt):
    """List the sweeps in the store, newest first, with their labels and notes.

    \b
      foldwise sweeps
      foldwise sweeps --label purpose=baseline --name greenhouse-yield
      foldwise sweeps --status interrupted --older-than 30d
    """
    from .read.queries import sweeps as read_sweeps
    from .read.past_views import sweeps_view

    result = read_sweeps(_open_store(store_path), _selection((), labels, name, status,
                                                             older_than))
    _show(result, sweeps_view(result), fmt)


@main.command()
@click.argument("labels", nargs=-1, metavar="[KEY=VALUE]...")
@_store_option
@click.option("--sweep", "sweep_id", default=None,
              help="Sweep id or unique prefix [default: latest].")
@click.option("--drop", multiple=True, metavar="KEY", help="Remove this label; repeatable.")
@click.option("--note", default=None, help="Replace the sweep's note ('' clears it).")
@_format_option
def label(labels, store_path, sweep_id, drop, note, fmt):
    """Add or change a sweep's labels and note (all at once); with none given, show them.

    \b
      foldwise label purpose=baseline data=2026-11
      foldwise label --sweep 20261202 --drop purpose --note "grid too coarse; see the next"
      foldwise label --sweep 20261202
    """
    from .read.queries import sweeps as read_sweeps
    from .read.past_views import sweeps_view
    from .store.labels import Selection, parse_labels, set_labels

    store = _open_store(store_path)
    sid = store.resolve_sweep(sweep_id)
    if labels or drop or note is not None:
        set_labels(store, sid, parse_labels(labels), drop=drop, note=note)
    result = read_sweeps(store, Selection(ids=(sid,)))
    _show(result, sweeps_view(result, f"sweep {sid}"), fmt)


@main.command()
@click.argument("query")
@_store_option
@_format_option
@click.option("--allow-files", is_flag=True,
              help="Let the query read files (read_csv, read_parquet), never write one; "
                   "runs it in a process Linux Landlock confines to reading.")
def sql(query, store_path, fmt, allow_files):
    """Run one read-only SQL query against the store; it cannot change anything.

    One SELECT (or WITH, DESCRIBE, SUMMARIZE, plain EXPLAIN). Tables: sweeps, sweep_labels,
    cells, fold_scores, test_scores, failures, importances, metrics, fold_importances,
    tree_folds, tree_nodes, test_predictions, explained, coefficients, models,
    model_coefficients, findings; view: cell_summary.

    \b
      foldwise sql "select model, metric, avg(value) from fold_scores join cells using (sweep_id, cell_id) group by all"
      foldwise sql "select * from cell_summary join read_csv('notes.csv') using (model)" --allow-files
    """
    emit(_open_store(store_path).user_query(query, allow_files=allow_files), fmt)


# -- moving results between stores ---------------------------------------------------------
def _sweeps_option(f):
    return click.option("--sweep", "sweep_ids", multiple=True, metavar="ID",
                        help="Only this sweep (id or unique prefix); repeatable.")(f)


@main.command()
@click.argument("other")
@_store_option
@_sweeps_option
@_selection_options
def merge(other, store_path, sweep_ids, labels, name, status, older_than):
    """Copy every sweep of another store into this one, skipping sweeps it already holds.

    OTHER is a store file, a team store's postgresql:// URL, or a folder written by
    `foldwise export`. Each sweep comes whole (cells, fold and test scores, explain rows),
    all in one transaction; sweeps still running there are left for a later merge.

    \b
      foldwise merge ~/laptop-results.duckdb --store postgresql://ana@db.internal/results
      foldwise merge shared/exports/2026-12
      foldwise merge ~/laptop-results.duckdb --label purpose=baseline

    --sweep, --label, --name, --status and --older-than choose among OTHER's sweeps.
    """
    from .store.transfer import merge_store

    store = _open_store(store_path)
    result = merge_store(store, other, _selection(sweep_ids, labels, name, status, older_than))
    copied = {t: n for t, n in result.rows.items() if n}
    click.echo(f"merged {len(result.new_sweeps)} sweep(s) from {other} into {store.path}"
               + (": " + ", ".join(f"{n} {t}" for t, n in copied.items()) if copied else "")
               + ".")
    if result.present:
        click.echo(f"skipped {len(result.present)} sweep(s) already in this store.")
    if result.running:
        click.echo(f"left out {len(result.running)} sweep(s) still marked running there "
                   f"({', '.join(result.running)}); merge again once they finish.", err=True)


@main.command()
@click.argument("folder", type=click.Path(file_okay=False))
@click.option("--format", "fmt", type=click.Choice(["parquet", "csv"]), default="parquet",
              show_default=True, help="One file per table in this format.")
@_store_option
@_sweeps_option
@_selection_options
def export(folder, fmt, store_path, sweep_ids, labels, name, status, older_than):
    """Write every table of the store into FOLDER, one file per table, with a manifest;
    `foldwise merge FOLDER` reads it back into any store. --sweep, --label, --name,
    --status and --older-than write only the sweeps they name.

    \b
      foldwise export shared/exports/2026-12
      foldwise export out/ --format csv
      foldwise export shared/baseline --label purpose=baseline
    """
    from .store.transfer import export_store

    store = _open_store(store_path)
    ids = [store.resolve_sweep(s) for s in sweep_ids]
    counts = export_store(store, folder, fmt, _selection(ids, labels, name, status,
                                                         older_than))
    click.echo(f"exported {sum(counts.values())} rows in {len(counts)} tables to {folder} "
               f"({fmt}).")


# -- picks, comparisons and the complexity table -------------------------------------------
_RULES = ("best", "one_se")
_SE_KINDS = ("plain", "corrected")


def _sweep_option(f):
    return click.option("--sweep", "sweep_id", default=None,
                        help="Sweep id or unique prefix [default: latest].")(f)


def _se_option(f):
    return click.option("--se", type=click.Choice(_SE_KINDS), default="plain", show_default=True,
                        help="SE for the one-SE rule: plain = sd/sqrt(k·r); corrected = "
                             "sqrt((1/(k·r) + n_valid/n_train)·sd²).")(f)


@main.command()
@_store_option
@_sweep_option
@click.option("--rule", type=click.Choice(_RULES), default=None,
              help="Show one rule only [default: best and one_se side by side].")
@click.option("--model", default=None, help="Only this model.")
@_se_option
@_format_option
def pick(store_path, sweep_id, rule, model, se, fmt):
    """Show each model's picked cell: the best one and the simplest within one SE of it.

    \b
      foldwise pick
      foldwise pick --rule one_se --model tree
      foldwise pick --se corrected --format json
    """
    from .read.queries import picks
    from .read.views import picks_view

    result = picks(_open_store(store_path), sweep_id, rule=rule, se=se, model=model)
    _show(result, picks_view(result), fmt)


@main.command()
@_store_option
@_sweep_option
@click.option("--rule", type=click.Choice(_RULES), default=None,
              help="Which cell of each model to compare [default: the sweep's rule].")
@click.option("--metric", default=None,
              help="Compare on this metric [default: the sweep's first metric].")
@_se_option
@_format_option
def compare(store_path, sweep_id, rule, metric, se, fmt):
    """Compare every pair of models on identical folds, with the corrected resampled t-test.

    \b
      foldwise compare
      foldwise compare --rule best --metric mae --format csv
    """
    from .read.queries import compare as read_compare
    from .read.views import compare_view

    result = read_compare(_open_store(store_path), sweep_id, rule=rule, se=se, metric=metric)
    _show(result, compare_view(result), fmt)


@main.command()
@click.option("--model", required=True, help="The model whose cells to list.")
@_store_option
@_sweep_option
@click.option("--metric", default=None,
              help="Show this metric's scores [default: the sweep's first; marks always "
                   "follow the first].")
@_se_option
@_format_option
def path(model, store_path, sweep_id, metric, se, fmt):
    """List one model's cells in complexity order, simplest first, marking the picks.

    \b
      foldwise path --model tree
      foldwise path --model forest --metric r2 --format csv
    """
    from .read.queries import complexity_table
    from .read.views import complexity_view

    result = complexity_table(_open_store(store_path), model, sweep_id, se=se, metric=metric)
    _show(result, complexity_view(result), fmt)


# -- the record of past sweeps --------------------------------------------------------------
@main.command()
@click.argument("sweep_a", required=False)
@click.argument("sweep_b", required=False)
@_store_option
@_se_option
@_format_option
def diff(sweep_a, sweep_b, store_path, se, fmt):
    """Show what changed between two sweeps: spec text, data, plan, versions, labels, and
    per model the picked cell and its scores, paired fold by fold when the folds are the
    same rows.

    With no sweep given, the latest sweep against the one of its spec name before it; with
    one, that sweep against its predecessor; with two, the change from A to B.

    \b
      foldwise diff
      foldwise diff 20261202-0931
      foldwise diff 20261101 20261202 --format csv
    """
    from .read.past import diff_sweeps
    from .read.past_views import diff_view

    result = diff_sweeps(_open_store(store_path), sweep_a, sweep_b, se=se)
    _show(result, diff_view(result), fmt)


@main.command()
@click.option("--model", default=None, help="The model label to follow.")
@click.option("--family", default=None,
              help="Follow every model of this family instead (linear, pruned_tree, forest).")
@click.option("--name", default=None,
              help="The spec name whose sweeps to read [default: the latest sweep's].")
@click.option("--rule", type=click.Choice(_RULES), default=None,
              help="Pick rule in every sweep [default: each sweep's own].")
@click.option("--metric", default=None,
              help="Pick and show by this metric [default: the latest sweep's first].")
@_store_option
@_se_option
@_format_option
def history(model, family, name, rule, metric, store_path, se, fmt):
    """Follow one model's pick across every sweep of a spec, oldest first: the picked cell,
    CV mean ± SE and test score, and where the data, spec or pick changed.
    `foldwise plot history --model M` draws it.

    \b
      foldwise history --model tree
      foldwise history --family linear --name greenhouse-yield --format csv
    """
    from .read.past import model_history
    from .read.past_views import history_view

    if model is None and family is None:
        raise click.UsageError("give --model LABEL or --family FAMILY.")
    result = model_history(_open_store(store_path), model, name=name, family=family,
                           rule=rule, se=se, metric=metric)
    _show(result, history_view(result), fmt)


@main.command()
@click.argument("sweep_ids", nargs=-1, metavar="[SWEEP]...")
@_store_option
@_selection_options
@click.option("--dry-run", is_flag=True, help="Show what would be removed and stop.")
@click.option("--yes", "-y", is_flag=True, help="Remove without asking (for scripts).")
def remove(sweep_ids, store_path, labels, name, status, older_than, dry_run, yes):
    """Remove sweeps and every row they hold, all in one transaction: the sweeps named, or
    those every filter given matches. Shows them first and asks before removing.

    \b
      foldwise remove 20261202-0931
      foldwise remove --status interrupted --dry-run
      foldwise remove --label purpose=scratch --older-than 30d --yes

    Rows a later sweep reused are its own copies, so removing the sweep that first computed
    them leaves every other sweep whole. A sweep still running is never removed.
    """
    from .read.past_queries import sweep_rows
    from .read.queries import process_alive, sweeps as read_sweeps
    from .read.past_views import removal_view
    from .store.tidy import check_rights, remove_sweeps

    chosen = _selection(sweep_ids, labels, name, status, older_than)
    if chosen.empty:
        raise click.UsageError("name the sweeps to remove, or give --label, --name, --status "
                               "or --older-than; `foldwise sweeps` lists them.")
    store = _open_store(store_path)
    check_rights(store)
    if sweep_ids:
        chosen = _selection([store.resolve_sweep(x) for x in sweep_ids], labels, name,
                            status, older_than)
    found = read_sweeps(store, chosen)
    if found.table.empty:
        click.echo(f"no sweep matches {chosen.describe()}; nothing removed.")
        return
    ids = found.table["sweep_id"].tolist()
    emit(found.table, "table", view=removal_view(found, sweep_rows(store, ids)))
    if dry_run:
        click.echo("dry run: nothing removed.")
        return
    if not yes and not click.confirm(f"Remove {len(ids)} sweep(s)?", default=False, err=True):
        click.echo("nothing removed.")
        return
    removed = remove_sweeps(store, ids, alive=process_alive)
    click.echo(f"removed {len(ids)} sweep(s) and {sum(removed.values())} rows from "
               f"{store.path}.")


# -- figures and the report ----------------------------------------------------------------
_PLOT_KINDS = ("complexity", "models", "importance", "predictions", "tree", "calibration",
               "roc", "history")
_IMPORTANCE_METHODS = ("permutation", "impurity", "coefficient")


@main.command()
@click.argument("kind", type=click.Choice(_PLOT_KINDS))
@_store_option
@_sweep_option
@click.option("--model", default=None,
              help="complexity: only this model [default: one figure per model]; tree: this "
                   "pruned_tree model [default: the first]; history: this model [default: "
                   "every model].")
@click.option("--name", default=None,
              help="history: the spec name whose sweeps to draw [default: the latest "
                   "sweep's].")
@click.option("--rule", type=click.Choice(_RULES), default=None,
              help="Which picked cell stands for each model [default: the sweep's rule].")
@click.option("--method", type=click.Choice(_IMPORTANCE_METHODS), default="permutation",
              show_default=True, help="importance: which importance to draw.")
@click.option("--depth", type=click.IntRange(1, 12), default=3, show_default=True,
              help="tree: levels drawn before deeper branches are summarised.")
@_se_option
@click.option("--out-dir", type=click.Path(file_okay=False), default="results/plots",
              show_default=True, help="Folder for the image files (created if missing).")
@click.option("--image", "images", type=click.Choice(("png", "svg")), multiple=True,
              help="Image format; repeat for both [default: png and svg].")
def plot(kind, store_path, sweep_id, model, name, rule, method, depth, se, out_dir, images):
    """Draw one kind of figure of a sweep to PNG and SVG files and print their paths.

    Kinds: complexity (CV error against complexity, picks and one-SE threshold), models
    (fold scores of each model's picked cell), importance, predictions (test split, a
    numeric target), calibration and roc (test split, a class target), tree (the picked
    pruned tree) and history (each model's pick across the sweeps of a spec).

    \b
      foldwise plot models
      foldwise plot complexity --model tree --image png
      foldwise plot importance --method impurity --out-dir figures
    """
    from .read.figures import write_plots

    if model is not None and kind not in ("complexity", "tree", "history"):
        raise click.UsageError("--model is only for the complexity, tree and history kinds.")
    if name is not None and kind != "history":
        raise click.UsageError("--name is only for the history kind.")
    for path in write_plots(kind, _open_store(store_path), out_dir, sweep_id, model=model,
                            name=name, rule=rule, method=method, depth=depth, se=se,
                            formats=images or ("png", "svg")):
        click.echo(str(path))


@main.command()
@_store_option
@_sweep_option
@click.option("--out", "out_path", type=click.Path(dir_okay=False), default=None,
              help="The HTML file to write [default: results/report-<sweep id>.html].")
@_se_option
def report(store_path, sweep_id, out_path, se):
    """Write a self-contained HTML report of a sweep: decision, picks, comparisons,
    complexity curves, importance, stability, test predictions and cautions.

    One file with inline figures and styles, no scripts and no network access.

    \b
      foldwise report
      foldwise report --sweep 20261202 --out report.html
    """
    from .read.report import report_path, write_report

    store = _open_store(store_path)
    sid = store.resolve_sweep(sweep_id)
    path = write_report(store, out_path or report_path(sid), sid, se=se)
    click.echo(f"{path} ({path.stat().st_size / 1024:.0f} KiB)")


# -- built models ----------------------------------------------------------------------------
@main.command()
@_store_option
@_sweep_option
@click.option("--model", default=None, help="The model label whose pick to build [default: "
              "the sweep's only model].")
@click.option("--rule", type=click.Choice(_RULES), default=None,
              help="Which of the model's picks [default: the spec's `pick`].")
@click.option("--cell", default=None, help="Build this cell (id or unique prefix) instead "
              "of a pick.")
@click.option("--all-rows", is_flag=True, help="Fit on every row, training and test (the "
              "card says no held-out score describes the model) [default: training rows].")
@click.option("--data", "data_path", type=click.Path(dir_okay=False), default=None,
              help="Where the sweep's data file is now [default: where the sweep read it].")
@click.option("--accept-data", is_flag=True, help="Build even if the data's SHA-256 differs "
              "from the sweep's (the card records both).")
@click.option("--out", type=click.Path(dir_okay=False), default=None,
              help="The .skops file to write; its card goes beside it "
                   "[default: results/models/<model id>.skops].")
@_lift_option
def build(store_path, sweep_id, model, rule, cell, all_rows, data_path, accept_data, out,
          lift_limits):
    """Fit a sweep's picked cell as one model and keep it: a .skops file, its card, and a
    row of the store's models table.

    \b
      foldwise build --model tree
      foldwise build --model forest --rule best --out models/forest.skops
      foldwise build --cell 3f9a2c --all-rows
    """
    from .model.build import build_model
    from .read.model_views import built_sentences

    built = build_model(_open_store(store_path), sweep_id=sweep_id, model=model, rule=rule,
                        cell=cell, all_rows=all_rows, data=data_path, accept_data=accept_data,
                        out=out, lift_limits=lift_limits)
    for line in built_sentences(built):
        click.echo(line, err=line.startswith("note:"))


@main.command()
@click.argument("model_ref", metavar="MODEL")
@click.argument("data_file")
@click.option("--out", required=True, help="The predictions file to write (.csv or .parquet).")
@click.option("--keep", multiple=True, metavar="COLUMN",
              help="An input column to copy to the output (e.g. an id); repeat for more.")
@click.option("--overwrite", is_flag=True, help="Replace --out if it exists.")
@click.option("--unseen", type=click.Choice(["refuse", "allow"]), default="refuse",
              show_default=True, help="Categories the model never saw: refuse the file, or "
              "predict them as the model's pipeline does (counted and reported).")
@click.option("--interval", type=click.FloatRange(0, 1, min_open=True, max_open=True),
              default=None, metavar="LEVEL", help="Add lower and upper columns: a split-"
              "conformal prediction interval at this level (e.g. 0.9) from the model's "
              "residuals on the sweep's test rows.")
@click.option("--chunk-rows", type=click.IntRange(min=1), default=100_000, show_default=True,
              help="Rows read and predicted at a time.")
@click.option("--quiet", "-q", is_flag=True, help="No progress bar.")
@_store_option
def predict(model_ref, data_file, out, keep, overwrite, unseen, interval, chunk_rows, quiet,
            store_path):
    """Predict the rows of a CSV or Parquet file with a built model.

    MODEL is a .skops file (its card beside it) or a model id from `foldwise models`. The
    file's columns are checked against the model's card; nothing is written on an error.

    \b
      foldwise predict results/models/model-20261202-101010-ab12.skops new.csv --out pred.csv
      foldwise predict model-20261202-101010-ab12 new.parquet --out pred.parquet --keep bay_id
    """
    from .model.keep import load_model
    from .model.predict import predict_file
    from .read.model_views import prediction_sentences

    model = load_model(model_ref, _open_store(store_path))
    for note in model.notes:
        click.echo(note, err=True)
    bar = None if quiet or not sys.stderr.isatty() else _ProgressBar("predicting")
    try:
        result = predict_file(model, data_file, out, keep=keep, chunk_rows=chunk_rows,
                              overwrite=overwrite, unseen=unseen, interval=interval,
                              progress=bar)
    finally:
        if bar is not None:
            bar.close()
    for line in prediction_sentences(result):
        click.echo(line, err=line.startswith("note:"))


@main.command()
@_store_option
@_sweep_option
@_format_option
def models(store_path, sweep_id, fmt):
    """List the built models the store keeps, newest first.

    \b
      foldwise models
      foldwise models --sweep 20261202 --format csv
    """
    from .read.explained import built_models
    from .read.model_views import models_view

    df = built_models(_open_store(store_path), sweep_id)
    _show(_Plain(df), models_view(df), fmt)


class _Plain:
    """A bare table in the shape `_show` takes."""

    def __init__(self, table):
        self.table = table


@main.command()
@click.argument("model_ref", metavar="MODEL")
@_store_option
@click.option("--format", "fmt", type=click.Choice(["table", "json"]), default="table",
              show_default=True, help="Readable, or the card's JSON as stored.")
def card(model_ref, store_path, fmt):
    """Show a built model's card: where it came from, its inputs, scores and versions.

    MODEL is a .skops file or a model id. Reads the card only; loads no model.

    \b
      foldwise card model-20261202-101010-ab12
      foldwise card results/models/tree.skops --format json
    """
    from .model.keep import read_model
    from .read.model_views import card_view

    _, the_card, _ = read_model(model_ref, _open_store(store_path))
    if fmt == "json":
        click.echo(json.dumps(the_card, indent=2))
    else:
        view = card_view(the_card)
        emit(view.table, "table", view=view)


@main.command()
@click.argument("model_id")
@_store_option
@click.option("--out", type=click.Path(dir_okay=False), default=None,
              help="The .skops file to write; the card goes beside it "
                   "[default: results/models/<model id>.skops].")
def fetch(model_id, store_path, out):
    """Write a stored model's artefact and card to files, after checking its SHA-256.

    \b
      foldwise fetch model-20261202-101010-ab12 --out models/tree.skops
    """
    from .model.keep import fetch_model

    artefact, card_file = fetch_model(_open_store(store_path), model_id, out)
    click.echo(f"{artefact} and {card_file}")


@main.command()
@_store_option
@_sweep_option
@click.option("--model-id", default=None, help="A built model's coefficients instead of the "
              "sweep's explained linear cells.")
@_format_option
def coefficients(store_path, sweep_id, model_id, fmt):
    """Show signed coefficients of linear models: in the data's units and per SD.

    \b
      foldwise coefficients
      foldwise coefficients --model-id model-20261202-101010-ab12 --format csv
    """
    from .read.explained import coefficient_table
    from .read.model_views import coefficients_view

    result = coefficient_table(_open_store(store_path), sweep_id, model_id=model_id)
    _show(result, coefficients_view(result), fmt)


@main.command()
def schema():
    """Print the JSON Schema of a spec, for editors that check YAML.

    \b
      foldwise schema > foldwise-spec.schema.json
    """
    from .write.spec import spec_json_schema

    click.echo(json.dumps(spec_json_schema(), indent=2))


if __name__ == "__main__":  # pragma: no cover
    main()

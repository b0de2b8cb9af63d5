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
    emit(plan, "table", title="cells and fits per model (fits include one refit per cell)")
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
def run(spec_file, store_path, jobs, force_jobs, quiet, paths, fresh, cluster, lift_limits):
    """Run a sweep: score every cell on every fold and on the test split.

    \b
      foldwise run specs/greenhouse.yaml
      foldwise run specs/greenhouse.yaml --jobs 2 --store results/team.duckdb
      foldwise run specs/greenhouse.yaml --no-paths
      foldwise run specs/greenhouse.yaml --fresh
      foldwise run specs/greenhouse.yaml --cluster tcp://scheduler:8786
      foldwise run specs/greenhouse.yaml --store postgresql://ana@db.internal/results

    Cells whose results the store already holds (same family, params, data and plan) are
    copied into the new sweep instead of refitted, so a rerun after a crash or a grid change
    fits only what is missing. A plan larger than the spec's `limits` is refused before
    anything is read (`foldwise check` prints its size); --lift-limits runs it anyway.
    """
    from .write.spec import load_spec

    def say(message: str) -> None:
        click.echo(message, err=True)

    spec = load_spec(spec_file)  # before the engine's imports: a hostile spec costs little
    from .write.engine import run_sweep, store_path as spec_store
    from .store import Store

    store = Store(spec_store(spec, store_path), on_wait=say)
    bar = None if quiet else _ProgressBar(spec.name)
    try:
        result = run_sweep(spec, store=store, jobs=jobs, progress=bar, paths=paths, fresh=fresh,
                           cluster=cluster, on_message=say, lift_limits=lift_limits,
                           force_jobs=force_jobs)
    finally:
        if bar is not None:
            bar.close()
    reused = f" ({result.n_reused} reused from earlier sweeps)" if result.n_reused else ""
    click.echo(f"sweep {result.sweep_id} {result.status} in {result.seconds:.1f} s: "
               f"{result.n_cells} cells{reused}, {result.n_fold_rows} fold-score rows, "
               f"{result.n_test_rows} test-score rows -> {result.store_path}")
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
    for note in (view.notes if fmt == "table" else view.caveats + view.notes):
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


@main.command()
@_store_option
@_format_option
def sweeps(store_path, fmt):
    """List the sweeps in the store, newest first.

    \b
      foldwise sweeps
    """
    from .read.queries import sweeps as sweeps_df

    emit(sweeps_df(_open_store(store_path)), fmt, title="sweeps")


@main.command()
@click.argument("query")
@_store_option
@_format_option
@click.option("--allow-files", is_flag=True,
              help="Let the query read files (read_csv, read_parquet), never write one; "
                   "runs it in a process Linux Landlock confines to reading.")
def sql(query, store_path, fmt, allow_files):
    """Run one read-only SQL query against the store; it cannot change anything.

    One SELECT (or WITH, DESCRIBE, SUMMARIZE, plain EXPLAIN). Tables: sweeps, cells,
    fold_scores, test_scores, failures, importances, metrics, fold_importances, tree_folds,
    tree_nodes, test_predictions, explained, findings; view: cell_summary.

    \b
      foldwise sql "select model, metric, avg(value) from fold_scores join cells using (sweep_id, cell_id) group by all"
      foldwise sql "select * from cell_summary join read_csv('notes.csv') using (model)" --allow-files
    """
    emit(_open_store(store_path).user_query(query, allow_files=allow_files), fmt)


# -- moving results between stores ---------------------------------------------------------
@main.command()
@click.argument("other")
@_store_option
def merge(other, store_path):
    """Copy every sweep of another store into this one, skipping sweeps it already holds.

    OTHER is a store file, a team store's postgresql:// URL, or a folder written by
    `foldwise export`. Each sweep comes whole (cells, fold and test scores, explain rows),
    all in one transaction; sweeps still running there are left for a later merge.

    \b
      foldwise merge ~/laptop-results.duckdb --store postgresql://ana@db.internal/results
      foldwise merge shared/exports/2026-12
    """
    from .store.transfer import merge_store

    store = _open_store(store_path)
    result = merge_store(store, other)
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
def export(folder, fmt, store_path):
    """Write every table of the store into FOLDER, one file per table, with a manifest;
    `foldwise merge FOLDER` reads it back into any store.

    \b
      foldwise export shared/exports/2026-12
      foldwise export out/ --format csv
    """
    from .store.transfer import export_store

    counts = export_store(_open_store(store_path), folder, fmt)
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


# -- figures and the report ----------------------------------------------------------------
_PLOT_KINDS = ("complexity", "models", "importance", "predictions", "tree")
_IMPORTANCE_METHODS = ("permutation", "impurity", "coefficient")


@main.command()
@click.argument("kind", type=click.Choice(_PLOT_KINDS))
@_store_option
@_sweep_option
@click.option("--model", default=None,
              help="complexity: only this model [default: one figure per model]; tree: this "
                   "pruned_tree model [default: the first].")
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
def plot(kind, store_path, sweep_id, model, rule, method, depth, se, out_dir, images):
    """Draw one kind of figure of a sweep to PNG and SVG files and print their paths.

    Kinds: complexity (CV error against complexity, picks and one-SE threshold), models
    (fold scores of each model's picked cell), importance, predictions (test split) and
    tree (the picked pruned tree).

    \b
      foldwise plot models
      foldwise plot complexity --model tree --image png
      foldwise plot importance --method impurity --out-dir figures
    """
    from .read.plots import write_plots

    if model is not None and kind not in ("complexity", "tree"):
        raise click.UsageError("--model is only for the complexity and tree kinds.")
    for path in write_plots(kind, _open_store(store_path), out_dir, sweep_id, model=model,
                            rule=rule, method=method, depth=depth, se=se,
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

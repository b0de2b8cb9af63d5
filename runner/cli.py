"""The `foldwise` command: thin click commands over the library. Each opens the store,
makes one library call and prints the result; library errors become one readable paragraph
and the error's exit code (2 for spec, data and usage errors). Here: the `main` group and
the commands of a sweep; the record and built-model commands are in `runner/commands/`."""

from __future__ import annotations

import atexit
import gc
import json
import os

import click

from .commands import models as _models, record as _record
from .commands.options import (_RULES, Choice, _ProgressBar, _format_option, _lift_option,
                               _open_store, _se_option, _show, _spec_store_option,
                               _store_option, _sweep_option)
from .errors import FoldwiseError
from .output import emit


class _Group(click.Group):
    """Turns foldwise errors into a message and an exit code, never a traceback."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except FoldwiseError as exc:
            click.echo(f"Error: {_error_text(exc)}", err=True)
            ctx.exit(exc.exit_code)
        except Exception as exc:
            if not type(exc).__module__.startswith(("duckdb", "_duckdb")):
                raise
            text = _error_text(exc).strip()
            first = text.splitlines()[0] if text else type(exc).__name__
            click.echo(f"Error: the store answered with an error foldwise did not expect: "
                       f"{first}. Rows already written are kept. Please report this with "
                       "the command you ran.", err=True)
            ctx.exit(1)
        except KeyboardInterrupt:
            click.echo("Error: interrupted. Rows already written are kept; the next "
                       "`foldwise run` of the spec marks the sweep interrupted and completes "
                       "only what is missing.", err=True)
            ctx.exit(130)



def _error_text(exc: Exception) -> str:
    """An error's message safe to print: it may quote a store's words, so every control
    character but the line break becomes a space."""
    from .read.past_views import plain_text

    return "\n".join(plain_text(line) for line in str(exc).split("\n"))


def _shown_store(path) -> str:
    """A store file's path with '..' folded away (specs/../results/x reads results/x); a
    server URL as given."""
    from .store.locations import is_server_url

    text = str(path)
    return text if is_server_url(text) else os.path.normpath(text)

@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="foldwise", prog_name="foldwise")
def main():
    """Tune and compare models for a numeric or class target by repeated cross-validation.

    Write one YAML spec; `foldwise run` scores every grid cell on identical folds and on the
    test split and keeps every fold score in a DuckDB store; the other commands query it.

    \b
      foldwise check specs/greenhouse.yaml
      foldwise run specs/greenhouse.yaml
      foldwise summary
    """


@main.command()
@click.argument("spec_file", type=click.Path(dir_okay=False))
@_spec_store_option
@_lift_option
def check(spec_file, store_path, lift_limits):
    """Validate a spec and print its plan and cost estimate; fits nothing, writes nothing.
    --store (or $FOLDWISE_STORE) names the store `run` would write to, as it does for run;
    a file `run` would refuse (not DuckDB, or a database that is no foldwise store) is
    refused here too, unchanged.

    \b
      foldwise check specs/greenhouse.yaml
    """
    from .write.spec import load_spec

    spec = load_spec(spec_file)  # before the engine's imports: a hostile spec costs little
    from .write.engine import check_spec

    from .read.views import finding_lines, findings_view

    plan, facts, findings = check_spec(spec, lift_limits=lift_limits, store=store_path)
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
@_spec_store_option
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
               f"-> {_shown_store(result.store_path)}")
    if result.permutation_rows:
        click.echo(f"permutation importance shuffled each column over "
                   f"{result.permutation_rows:,} test rows (at most explain.permutation.rows)")
    if result.n_failed_fits:
        click.echo(f"warning: {result.n_failed_fits} fits failed; see "
                   "`foldwise sql \"select * from failures\"`.", err=True)
    if not quiet:
        _print_summary(store, result.sweep_id, "table")


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
@click.argument("query")
@_store_option
@_format_option
@click.option("--allow-files", is_flag=True,
              help="Let the query read files (read_csv, read_parquet), never write one; "
                   "runs it in a process Linux Landlock confines to reading.")
@click.option("--answer-mb", type=click.FloatRange(0, min_open=True), default=None,
              help="The largest answer held to print, in MiB of column data; a larger one is "
                   "refused once that much is read [default: 256].")
@click.option("--work-mb", type=click.FloatRange(0, min_open=True), default=None,
              help="The most working memory the query may take, in MiB (sorts, groups, joins; "
                   "on a team store also the copy it answers from); nothing spills to disk, "
                   "so a query needing more is refused [default: 1024].")
def sql(query, store_path, fmt, allow_files, answer_mb, work_mb):
    """Run one read-only SQL query against the store; it cannot change anything.

    One SELECT (or WITH, DESCRIBE, SUMMARIZE, plain EXPLAIN). Tables: sweeps, sweep_labels,
    cells, fold_scores, test_scores, failures, importances, metrics, fold_importances,
    tree_folds, tree_nodes, test_predictions, explained, coefficients, models,
    model_coefficients, findings; view: cell_summary.

    \b
      foldwise sql "select model, metric, avg(value) from fold_scores join cells using (sweep_id, cell_id) group by all"
      foldwise sql "select * from cell_summary join read_csv('notes.csv') using (model)" --allow-files
    """
    limit = None if answer_mb is None else max(1, int(answer_mb * 2**20))
    work = None if work_mb is None else max(1, int(work_mb * 2**20))
    emit(_open_store(store_path).user_query(query, allow_files=allow_files,
                                            answer_bytes=limit, work_bytes=work), fmt)


@main.command()
@_store_option
@_sweep_option
@click.option("--rule", type=Choice(_RULES), default=None,
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
@click.option("--rule", type=Choice(_RULES), default=None,
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
_PLOT_KINDS = ("complexity", "models", "importance", "predictions", "tree", "calibration",
               "roc", "history")


_IMPORTANCE_METHODS = ("permutation", "impurity", "coefficient")


@main.command()
@click.argument("kind", type=Choice(_PLOT_KINDS), metavar="KIND")
@_store_option
@_sweep_option
@click.option("--model", default=None,
              help="complexity: only this model [default: one figure per model]; tree: this "
                   "pruned_tree model [default: the first]; history: this model [default: "
                   "every model].")
@click.option("--name", default=None,
              help="history: the spec name whose sweeps to draw [default: the latest "
                   "sweep's].")
@click.option("--rule", type=Choice(_RULES), default=None,
              help="Which picked cell stands for each model [default: the sweep's rule].")
@click.option("--method", type=Choice(_IMPORTANCE_METHODS), default="permutation",
              show_default=True, help="importance: which importance to draw.")
@click.option("--depth", type=click.IntRange(1, 12), default=3, show_default=True,
              help="tree: levels drawn before deeper branches are summarised.")
@_se_option
@click.option("--out-dir", type=click.Path(file_okay=False), default="results/plots",
              show_default=True, help="Folder for the image files (created if missing).")
@click.option("--image", "images", type=Choice(("png", "svg")), multiple=True,
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


@main.command()
def schema():
    """Print the JSON Schema of a spec, for editors that check YAML.

    \b
      foldwise schema > foldwise-spec.schema.json
    """
    from .write.spec import spec_json_schema

    click.echo(json.dumps(spec_json_schema(), indent=2))


for _command in (*_record.COMMANDS, *_models.COMMANDS):
    main.add_command(_command)


def command_line() -> None:
    """The `foldwise` console command: `main`, with a quick exit.

    At exit Python clears every module it imported (scikit-learn, SciPy, pandas) and its
    collector walks their objects again and again: about 0.35 s of a sweep's command on 2
    cores. By then the command has closed its stores and files, so the objects alive are
    frozen out of the collector (`gc.freeze`); they are still freed, and atexit handlers
    still run."""
    atexit.register(gc.freeze)
    main(prog_name="foldwise")


if __name__ == "__main__":  # pragma: no cover
    command_line()

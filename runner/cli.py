"""The `foldwise` command: thin click commands over the library. Each opens the store,
makes one library call and prints the result; library errors become one readable paragraph
and the error's exit code (2 for spec, data and usage errors)."""

from __future__ import annotations

import json
import sys

import click

from .errors import FoldwiseError
from .output import FORMATS, emit, mean_se, params_text

STORE_ENV = "FOLDWISE_STORE"


class _Group(click.Group):
    """Turns foldwise errors into a message and an exit code, never a traceback."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except FoldwiseError as exc:
            click.echo(f"Error: {exc}", err=True)
            ctx.exit(exc.exit_code)


def _store_option(f):
    return click.option("--store", "store_path", type=click.Path(dir_okay=False),
                        envvar=STORE_ENV, default=None,
                        help="DuckDB store file [default: results/foldwise.duckdb, or "
                             f"${STORE_ENV}].")(f)


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


@main.command()
@click.argument("spec_file", type=click.Path(dir_okay=False))
def check(spec_file):
    """Validate a spec and print its plan; fits nothing, writes nothing.

    \b
      foldwise check specs/greenhouse.yaml
    """
    from .engine import check_spec
    from .spec import load_spec

    spec = load_spec(spec_file)
    plan, facts = check_spec(spec)
    click.echo(f"spec {spec_file} is valid: sweep '{spec.name}'")
    for key, value in facts.items():
        click.echo(f"  {key:<12} {value}")
    emit(plan, "table", title="cells and fits per model (fits include one refit per cell)")


@main.command()
@click.argument("spec_file", type=click.Path(dir_okay=False))
@_store_option
@click.option("--jobs", "-j", type=click.IntRange(min=-1), default=None,
              help="Parallel worker processes [default: the spec's `jobs`, else all cores].")
@click.option("--quiet", "-q", is_flag=True, help="No progress bar and no summary.")
def run(spec_file, store_path, jobs, quiet):
    """Run a sweep: score every cell on every fold and on the test split.

    \b
      foldwise run specs/greenhouse.yaml
      foldwise run specs/greenhouse.yaml --jobs 2 --store results/team.duckdb
    """
    from .engine import run_sweep, store_path as spec_store
    from .spec import load_spec
    from .store import Store

    spec = load_spec(spec_file)
    store = Store(spec_store(spec, store_path), on_wait=lambda m: click.echo(m, err=True))
    if quiet:
        result = run_sweep(spec, store=store, jobs=jobs)
    else:
        from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn,
                                   TimeElapsedColumn, TimeRemainingColumn)

        columns = (TextColumn(f"[bold]{spec.name}"), BarColumn(), MofNCompleteColumn(),
                   TextColumn("tasks"), TimeElapsedColumn(), TimeRemainingColumn())
        with Progress(*columns, transient=True,
                      console=_stderr_console()) as bar:
            task = bar.add_task("sweep", total=None)

            def progress(done, total):
                bar.update(task, completed=done, total=total)

            result = run_sweep(spec, store=store, jobs=jobs, progress=progress)
    click.echo(f"sweep {result.sweep_id} {result.status} in {result.seconds:.1f} s: "
               f"{result.n_cells} cells, {result.n_fold_rows} fold-score rows, "
               f"{result.n_test_rows} test-score rows -> {result.store_path}")
    if result.n_failed_fits:
        click.echo(f"warning: {result.n_failed_fits} fits failed; see "
                   "`foldwise sql \"select * from failures\"`.", err=True)
    if not quiet:
        _print_summary(store, result.sweep_id, "table")


def _stderr_console():
    from rich.console import Console

    return Console(file=sys.stderr)


def _defaults(family: str) -> dict:
    from .families import FAMILIES

    fam = FAMILIES.get(family)
    return {n: p.default for n, p in fam.params.items()} if fam else {}


def _print_summary(store, sweep_id, fmt):
    from .queries import summary as summary_df

    df = summary_df(store, sweep_id)
    metrics = df.attrs.get("metrics", [])
    display = df[["model", "family", "cells"]].copy()
    display["best cell"] = [params_text(p, hide=_defaults(f)) for p, f in zip(df["params"], df["family"])]
    for m in metrics:
        display[f"CV {m} (mean ± SE)"] = [mean_se(a, b) for a, b in zip(df[f"cv_{m}"], df[f"se_{m}"])]
        display[f"test {m}"] = df[f"test_{m}"]
    title = (f"sweep {df.attrs.get('sweep_id')}: best cell per model by CV "
             f"{df.attrs.get('primary_metric')}")
    emit(df, fmt, title=title, display=display)


@main.command()
@_store_option
@click.option("--sweep", "sweep_id", default=None, help="Sweep id or unique prefix [default: latest].")
@_format_option
def summary(store_path, sweep_id, fmt):
    """Summarise a sweep by model: each model's best cell, CV mean ± SE and test scores.

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
    from .queries import sweeps as sweeps_df

    emit(sweeps_df(_open_store(store_path)), fmt, title="sweeps")


@main.command()
@click.argument("query")
@_store_option
@_format_option
@click.option("--allow-files", is_flag=True,
              help="Let the query read files outside the store (read_csv, read_parquet).")
def sql(query, store_path, fmt, allow_files):
    """Run one read-only SQL query against the store.

    Tables: sweeps, cells, fold_scores, test_scores, failures, importances, metrics;
    view: cell_summary.

    \b
      foldwise sql "select model, metric, avg(value) from fold_scores join cells using (sweep_id, cell_id) group by all"
    """
    emit(_open_store(store_path).user_query(query, allow_files=allow_files), fmt)


@main.command()
def schema():
    """Print the JSON Schema of a spec, for editors that check YAML.

    \b
      foldwise schema > foldwise-spec.schema.json
    """
    from .spec import spec_json_schema

    click.echo(json.dumps(spec_json_schema(), indent=2))


if __name__ == "__main__":  # pragma: no cover
    main()

"""The commands over the record of sweeps: list, label, merge, export, diff, history and
remove. Registered on `runner.cli.main`; kept apart so that `cli.py` stays thin."""

from __future__ import annotations

import click

from ..output import emit
from .options import (_RULES, Choice, _format_option, _open_store, _se_option, _selection,
                      _selection_options, _show, _store_option, _sweeps_option)


@click.command()
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
    from ..read.queries import sweeps as read_sweeps
    from ..read.past_views import sweeps_view

    result = read_sweeps(_open_store(store_path), _selection((), labels, name, status,
                                                             older_than))
    _show(result, sweeps_view(result), fmt)


@click.command()
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
    from ..read.queries import sweeps as read_sweeps
    from ..read.past_views import sweeps_view
    from ..store.labels import Selection, parse_labels, set_labels

    from ..names import nearest
    from ..read.past_views import plain_text
    from ..read.queries import sweep_labels

    store = _open_store(store_path)
    sid = store.resolve_sweep(sweep_id)
    held = sweep_labels(store, [sid]).get(sid, {})
    absent = [k for k in drop if k not in held]
    if labels or drop or note is not None:
        set_labels(store, sid, parse_labels(labels), drop=drop, note=note)
    for key in absent:
        click.echo(f"note: sweep {sid} had no label '{plain_text(key)}'; nothing to drop."
                   + plain_text(nearest(key, held)), err=True)
    result = read_sweeps(store, Selection(ids=(sid,)))
    _show(result, sweeps_view(result, f"sweep {sid}"), fmt)


@click.command()
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
    from ..store.transfer import merge_store

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


@click.command()
@click.argument("folder", type=click.Path(file_okay=False))
@click.option("--format", "fmt", type=Choice(["parquet", "csv"]), default="parquet",
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
    from ..store.transfer import export_store

    store = _open_store(store_path)
    ids = [store.resolve_sweep(s) for s in sweep_ids]
    counts = export_store(store, folder, fmt, _selection(ids, labels, name, status,
                                                         older_than))
    click.echo(f"exported {sum(counts.values())} rows in {len(counts)} tables to {folder} "
               f"({fmt}).")


@click.command()
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
    from ..read.past import diff_sweeps
    from ..read.past_views import diff_view

    result = diff_sweeps(_open_store(store_path), sweep_a, sweep_b, se=se)
    _show(result, diff_view(result), fmt)


@click.command()
@click.option("--model", default=None, help="The model label to follow.")
@click.option("--family", default=None,
              help="Follow every model of this family instead (linear, pruned_tree, forest).")
@click.option("--name", default=None,
              help="The spec name whose sweeps to read [default: the latest sweep's].")
@click.option("--rule", type=Choice(_RULES), default=None,
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
    from ..read.past import model_history
    from ..read.past_views import history_view

    if model is None and family is None:
        raise click.UsageError("give --model LABEL or --family FAMILY.")
    result = model_history(_open_store(store_path), model, name=name, family=family,
                           rule=rule, se=se, metric=metric)
    _show(result, history_view(result), fmt)


@click.command()
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
    from ..read.past_queries import sweep_rows
    from ..errors import StoreError
    from ..read.queries import check_selection, process_alive, sweeps as read_sweeps
    from ..read.past_views import plain_text, removal_view
    from ..store.tidy import check_rights, remove_sweeps

    chosen = _selection(sweep_ids, labels, name, status, older_than)
    if chosen.empty:
        raise click.UsageError("name the sweeps to remove, or give --label, --name, --status "
                               "or --older-than; `foldwise sweeps` lists them.")
    store = _open_store(store_path)
    check_rights(store)
    if sweep_ids:
        chosen = _selection([store.resolve_sweep(x, option="SWEEP") for x in sweep_ids],
                            labels, name, status, older_than)
    found = read_sweeps(store, chosen, strict=False)
    if found.table.empty:  # a script's filters may name what is all gone: no error, a note
        try:
            check_selection(store, chosen)
        except StoreError as exc:
            click.echo(f"note: {plain_text(str(exc))}", err=True)
        click.echo(f"no sweep matches {chosen.describe()}; nothing removed.")
        return
    ids = found.table["sweep_id"].tolist()
    emit(found.table, "table", view=removal_view(found, sweep_rows(store, ids)))
    if dry_run:
        click.echo("dry run: nothing removed.")
        return
    if not yes and not _confirmed(f"Remove {len(ids)} sweep(s)?"):
        click.echo("nothing removed.")
        return
    removed = remove_sweeps(store, ids, alive=process_alive)
    built = removed.get("models", 0)
    click.echo(f"removed {len(ids)} sweep(s) and {sum(removed.values())} rows from "
               f"{store.path}" + (f", among them {built} built model(s) (the files `build` "
                                  "wrote stay where they are)" if built else "") + ".")


def _confirmed(question: str) -> bool:
    """The user's answer; input that ends unanswered (a script without --yes) is refused
    in words, and Ctrl-C at the question stops as an interrupt does (exit 130)."""
    try:
        return click.confirm(question, default=False, err=True)
    except click.Abort as exc:
        if isinstance(exc.__context__, EOFError):
            raise click.UsageError(f"the input ended before '{question}' was answered, so "
                                   "nothing was removed; pass --yes to remove without "
                                   "asking (for scripts), or --dry-run to only list them."
                                   ) from None
        click.echo("\nnothing removed.", err=True)
        click.get_current_context().exit(130)


COMMANDS = (sweeps, label, merge, export, diff, history, remove)

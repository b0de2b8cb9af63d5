"""The commands over built models: build, predict, models, card, fetch and coefficients.
Registered on `runner.cli.main`; kept apart so that `cli.py` stays thin."""

from __future__ import annotations

import sys

import click

from ..output import emit
from .options import (_RULES, Choice, _ProgressBar, _format_option, _lift_option, _open_store,
                      _show, _store_option, _sweep_option)


@click.command()
@_store_option
@_sweep_option
@click.option("--model", default=None, help="The model label whose pick to build [default: "
              "the sweep's only model].")
@click.option("--rule", type=Choice(_RULES), default=None,
              help="Which of the model's picks [default: the spec's `pick`].")
@click.option("--cell", default=None, help="Build this cell (id or unique prefix) instead "
              "of a pick.")
@click.option("--all-rows", is_flag=True, help="Fit on every row, training and test (the "
              "card says no held-out score describes the model) [default: training rows].")
@click.option("--data", "data_path", type=click.Path(dir_okay=False), default=None,
              help="Where the sweep's data file is now [default: where the sweep read it, "
                   "if inside the current folder or the store's folder].")
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
    from ..model.build import build_model
    from ..read.model_views import built_sentences

    built = build_model(_open_store(store_path), sweep_id=sweep_id, model=model, rule=rule,
                        cell=cell, all_rows=all_rows, data=data_path, accept_data=accept_data,
                        out=out, lift_limits=lift_limits)
    for line in built_sentences(built):
        click.echo(line, err=line.startswith("note:"))


@click.command()
@click.argument("model_ref", metavar="MODEL")
@click.argument("data_file")
@click.option("--out", required=True, help="The predictions file to write (.csv or .parquet).")
@click.option("--keep", multiple=True, metavar="COLUMN",
              help="An input column to copy to the output (e.g. an id); repeat for more.")
@click.option("--overwrite", is_flag=True, help="Replace --out if it exists.")
@click.option("--unseen", type=Choice(["refuse", "allow"]), default="refuse",
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
    from ..model.keep import load_model
    from ..model.predict import predict_file
    from ..read.model_views import prediction_sentences

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


@click.command()
@_store_option
@click.option("--sweep", "sweep_id", default=None,
              help="Only the models built on this sweep (id or unique prefix) "
              "[default: every sweep].")
@_format_option
def models(store_path, sweep_id, fmt):
    """List the built models the store keeps, newest first.

    \b
      foldwise models
      foldwise models --sweep 20261202 --format csv
    """
    from ..read.explained import built_models
    from ..read.model_views import models_view

    store = _open_store(store_path)
    sid = None if sweep_id is None else store.resolve_sweep(sweep_id)
    df = built_models(store, sid)
    _show(_Plain(df), models_view(df, sid), fmt)


class _Plain:
    """A bare table in the shape `_show` takes."""

    def __init__(self, table):
        self.table = table


@click.command()
@click.argument("model_ref", metavar="MODEL")
@_store_option
@click.option("--format", "fmt", type=Choice(["table", "json"]), default="table",
              show_default=True, help="Readable, or the card's JSON as stored.")
def card(model_ref, store_path, fmt):
    """Show a built model's card: where it came from, its inputs, scores and versions.

    MODEL is a .skops file or a model id. Reads the card only; loads no model.

    \b
      foldwise card model-20261202-101010-ab12
      foldwise card results/models/tree.skops --format json
    """
    from ..model.card import card_json
    from ..model.keep import read_model
    from ..read.model_views import card_view

    _, the_card, _ = read_model(model_ref, _open_store(store_path))
    if fmt == "json":
        click.echo(card_json(the_card), nl=False)
    else:
        view = card_view(the_card)
        emit(view.table, "table", view=view)


@click.command()
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
    from ..model.keep import fetch_model

    artefact, card_file = fetch_model(_open_store(store_path), model_id, out)
    click.echo(f"{artefact} and {card_file}")


@click.command()
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
    from ..read.explained import coefficient_table
    from ..read.model_views import coefficients_view

    result = coefficient_table(_open_store(store_path), sweep_id, model_id=model_id)
    _show(result, coefficients_view(result), fmt)


COMMANDS = (build, predict, models, card, fetch, coefficients)

"""Building a model: a sweep's picked (or named) cell fitted as one pipeline on the sweep's
own training rows — or on every row — from the sweep's own spec, data and seed, saved as a
skops artefact with its card, in a file and in the store.

On the training rows (the default) the build is the sweep's refit: same rows, same
preprocessing, same estimator and the refit's seed, so the test score the store holds
describes exactly this model; the build checks that by scoring the test rows again and
records both in the card. On every row (`all_rows`), the test rows are fitted too and no
held-out score describes the model; the card says so."""

from __future__ import annotations

import getpass
import hashlib
import json
import os
import secrets
import socket
import stat
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataError, ModelError, OutputError, SpecError
from ..families import FAMILIES
from ..metrics import METRICS
from ..read.filenames import (check_folder, discard_staged, make_folder, move_into_place,
                              stage_files)
from ..store import Store
from .artefact import FORMAT, dump_pipeline, sha256_of
from .card import CARD_FORMAT, CARD_VERSION, card_json, card_path_for, conformal_scores, \
    feature_schema, versions_here

__all__ = ["build_model", "BuiltModel", "MODELS_FOLDER", "write_model_files"]

MODELS_FOLDER = Path("results") / "models"
"""Where built models' files go unless --out says otherwise."""

_TEST_AGREEMENT = 1e-9
"""Relative difference up to which a rebuilt test score counts as the stored one."""


@dataclass
class BuiltModel:
    """A model just built: its id, card, files, and what the build noticed."""

    model_id: str
    card: dict
    artefact: Path
    card_file: Path
    sha256: str
    n_bytes: int
    coefficients: pd.DataFrame | None = None
    notes: list[str] = field(default_factory=list)


# -- which cell ----------------------------------------------------------------------------
def _choose_cell(store: Store, sweep_id: str, *, model: str | None, rule: str | None,
                 cell: str | None, default_rule: str) -> tuple[dict, str]:
    """The cell to build and the rule that chose it ('best', 'one_se' or 'cell')."""
    from ..read.explained import cell_record
    from ..read.queries import model_order, picks

    if cell is not None:
        if rule is not None:
            raise ModelError("give either --cell or --rule, not both: a cell id names the "
                             "cell itself.")
        row = cell_record(store, sweep_id, cell)
        if model is not None and row["model"] != model:
            raise ModelError(f"cell {row['cell_id']} belongs to model '{row['model']}', not "
                             f"'{model}'. Leave out --model or give one of its cells.")
        return row, "cell"
    models = model_order(store, sweep_id)
    if model is None:
        if len(models) != 1:
            raise ModelError(f"sweep {sweep_id} has {len(models)} models "
                             f"({', '.join(models)}); say which to build with --model "
                             "(or name a cell with --cell).")
        model = models[0]
    rule = rule or default_rule
    chosen = picks(store, sweep_id, rule=rule, model=model).table
    if chosen.empty:
        raise ModelError(f"model '{model}' of sweep {sweep_id} has no cell that can be "
                         "built: none has every fold scored without a failed fit. "
                         "`foldwise path --model " + model + "` shows why.")
    return cell_record(store, sweep_id, str(chosen["cell_id"].iloc[0])), rule


def _check_finished(store: Store, sweep_id: str, row: dict) -> pd.DataFrame:
    """The cell's scores; refuses a cell with a failed fit, a missing fold or no refit."""
    from ..read.explained import cell_scores
    from ..read.queries import cell_stats

    stats = cell_stats(store, sweep_id, model=row["model"]).table
    mine = stats[stats["cell_id"] == row["cell_id"]]
    why = mine["excluded"].iloc[0] if len(mine) else "incomplete"
    if isinstance(why, str) and why:
        detail = {"failed fits": "some of its fits failed (see the failures table)",
                  "incomplete": "not every fold of it is scored yet (the sweep is running "
                                "or was interrupted)",
                  "undefined score": "its score is undefined on some folds",
                  "non-finite score": "its mean score is not finite"}.get(why, why)
        raise ModelError(f"cell {row['cell_id']} of model '{row['model']}' cannot be built: "
                         f"{detail}. Build a finished cell, e.g. the model's pick "
                         "(`foldwise pick`).")
    scores = cell_scores(store, sweep_id, row["cell_id"])
    if not scores["has_test"].all():
        raise ModelError(f"cell {row['cell_id']} of model '{row['model']}' cannot be built: "
                         "its refit on the training rows has no test score yet (the sweep is "
                         "running or was interrupted). Run the spec again to finish it.")
    return scores


# -- which data ----------------------------------------------------------------------------
def _sweep_spec(record: dict, data: str | Path | None):
    """The sweep's own spec, reading `data` (default: the data file the sweep read)."""
    from ..write.spec import parse_spec

    source = Path(str(record["spec_path"])) if _text(record.get("spec_path")) else None
    try:
        spec = parse_spec(str(record["spec_text"]), source=source)
    except SpecError as exc:
        raise ModelError(f"the spec stored with sweep {record['sweep_id']} does not validate "
                         f"in this foldwise, so the sweep cannot be rebuilt: {exc}") from None
    if data is not None:  # the user's own path: from where they stand, not the spec's folder
        path = Path(data).expanduser().absolute()
    elif _text(record["data_path"]):
        path = Path(str(record["data_path"]))
    else:
        raise DataError(f"store holds no data path for sweep {record['sweep_id']}, so its "
                        "data file is unknown. Give the sweep's data file with --data.")
    return spec.model_copy(update={"data": spec.data.model_copy(update={"path": str(path)})})


def _text(value) -> bool:
    """Whether a stored value is text worth using (not NULL, NaN or empty)."""
    return isinstance(value, str) and value != ""


def _allowed_folders(store: Store, data: str | Path | None) -> list[Path]:
    """Where a file a stored sweep names may be read from: the folder foldwise runs in, the
    store file's folder and the folder of the user's --data, each with what lies below."""
    folders = [Path.cwd()]
    if not store.location.shared:
        folders.append(Path(store.path).absolute().parent)
    if data is not None:
        folders.append(Path(data).expanduser().absolute().parent)
    return [f.resolve() for f in folders]


def _check_stored_files(spec, record: dict, store: Store, data: str | Path | None) -> None:
    """Refuse, before any is opened, a data or test file the stored sweep names (a store is
    another's text) that is not a readable regular file inside the allowed folders: a
    store must not make foldwise open a device or a pipe, or hash a file elsewhere and
    print its SHA-256. The user's own --data is theirs to name and is not confined."""
    from ..read.past_views import plain_text

    named = [("test file", spec.resolve(spec.test.file))] if spec.test.file is not None else []
    if data is None:
        named.insert(0, ("data file", spec.resolve(spec.data.path)))
    folders = _allowed_folders(store, data)
    for role, path in named:
        shown, sid = plain_text(str(path)), record["sweep_id"]
        fix = ("Give the sweep's data file with --data" if role == "data file" else
               "Run foldwise from a folder that holds it, or give the data file with --data "
               "from the folder that holds both")
        try:
            real = path.resolve()
            info = real.stat()
        except (OSError, RuntimeError):
            raise DataError(f"the {role} of sweep {sid}, {shown}, does not exist here. "
                            f"{fix}.") from None
        if not any(real.is_relative_to(f) for f in folders):
            raise DataError(f"the {role} sweep {sid} names in store {store.path}, {shown}, "
                            f"lies outside the folders foldwise reads a stored path from (the "
                            f"current folder, the store's folder, the folder of --data): a "
                            f"store is others' text, so its paths are not followed elsewhere. "
                            f"{fix}.")
        if not stat.S_ISREG(info.st_mode) or not os.access(real, os.R_OK):
            what = "cannot be read" if stat.S_ISREG(info.st_mode) else \
                "is not a regular file (a folder, device, pipe or socket)"
            raise DataError(f"the {role} of sweep {sid}, {shown}, {what}; foldwise reads "
                            f"CSV or Parquet files only. {fix}.")


def _fingerprint(spec, max_bytes: int | None) -> str:
    """The data's SHA-256 as a sweep records it (with a test file: of both files' hashes)."""
    from ..write.data import file_sha256

    sha = file_sha256(spec.resolve(spec.data.path), max_bytes=max_bytes)
    if spec.test.file is not None:
        test_sha = file_sha256(spec.resolve(spec.test.file), max_bytes=max_bytes)
        sha = hashlib.sha256((sha + test_sha).encode()).hexdigest()
    return sha


def _check_data(spec, record: dict, *, accept: bool, max_bytes: int | None,
                named_by: Path | None) -> str:
    """Compare the data's fingerprint with the sweep's before a row is parsed. A path a
    store names (`named_by`, not the user's --data) is untrusted: nothing but a CSV or
    Parquet file of it is read, not even hashed."""
    from ..write.data import data_kind

    path = spec.resolve(spec.data.path)
    hint = ("Give the data file with --data." if named_by is None else
            f"Store {named_by} names it as the data of sweep {record['sweep_id']}; give the "
            "sweep's data file with --data.")
    data_kind(path, "data file", hint)
    if spec.test.file is not None:
        data_kind(spec.resolve(spec.test.file), "test file", hint)
    if not path.exists():
        raise DataError(f"data file {path} does not exist. Give the sweep's data file with "
                        "--data.")
    sha = _fingerprint(spec, max_bytes)
    if not _text(record["data_sha256"]) and not accept:
        raise DataError(f"store holds no SHA-256 for the data of sweep {record['sweep_id']}, "
                        f"so data file {path} cannot be shown to hold the rows the sweep "
                        "scored. Pass --accept-data to build on it anyway (the card records "
                        "that the sweep's hash is unknown).")
    if sha != record["data_sha256"] and not accept:
        raise DataError(f"data file {path} has SHA-256 {sha}, but sweep {record['sweep_id']} "
                        f"was run on data with SHA-256 {record['data_sha256']}: these are not "
                        "the rows the sweep scored. Give the sweep's data file with --data, "
                        "or pass --accept-data to build on these rows anyway (the card "
                        "records both hashes).")
    return sha


# -- the build -----------------------------------------------------------------------------
def _new_model_id() -> str:
    return "model-" + datetime.now().strftime("%Y%m%d-%H%M%S-") + secrets.token_hex(2)


def _user() -> str:
    try:
        return getpass.getuser()
    except Exception:
        return "unknown"


def _metric_values(y, pipeline, X, metrics, classes) -> dict[str, float]:
    """The test scores of a rebuilt pipeline, computed as the sweep computed them."""
    if classes:
        proba = pipeline.predict_proba(X)
        return {m: METRICS[m].score_classes(y, proba, classes) for m in metrics
                if m in METRICS}
    predicted = pipeline.predict(X)
    return {m: METRICS[m].score(y, predicted) for m in metrics if m in METRICS}


def _target_facts(name: str, y, task: str) -> dict:
    """What the card says of the target the model was fitted on."""
    if task == "classification":
        labels, counts = np.unique(y, return_counts=True)
        return {"name": name, "rows_per_class": {str(c): int(n)
                                                 for c, n in zip(labels, counts)}}
    return {"name": name, "min": float(np.min(y)), "max": float(np.max(y)),
            "mean": float(np.mean(y))}


def _plain(value):
    """An estimator parameter as JSON: numbers and text as they are, anything else named."""
    if value is None or isinstance(value, (bool, int, str)):
        return value
    if isinstance(value, float):
        return value if np.isfinite(value) else str(value)
    if isinstance(value, (np.integer, np.floating)):
        return _plain(value.item())
    return type(value).__name__


def _score(value) -> float | None:
    """A score for the card: None (JSON null) where it is undefined, e.g. a test split's
    ROC AUC when its rows lack a class."""
    return float(value) if value is not None and np.isfinite(value) else None


def _scores(record_scores: pd.DataFrame, rebuilt: dict | None, all_rows: bool) -> dict:
    cv = {str(r.metric): {"mean": _score(r.mean), "se": _score(r.se), "folds": int(r.n)}
          for r in record_scores.itertuples(index=False)}
    test = {str(r.metric): _score(r.test) for r in record_scores.itertuples(index=False)}
    out = {"cv": cv, "test": test, "test_describes_this_model": not all_rows}
    if rebuilt is not None:
        out["test_rebuilt"] = {m: _score(v) for m, v in rebuilt.items()}
    if all_rows:
        out["note"] = ("cv and test are the sweep's scores of this cell; this model was "
                       "fitted on the test rows too, so no held-out score describes it.")
    return out


def build_model(store: Store, *, sweep_id: str | None = None, model: str | None = None,
                rule: str | None = None, cell: str | None = None, all_rows: bool = False,
                data: str | Path | None = None, accept_data: bool = False,
                out: str | Path | None = None, lift_limits: bool = False) -> BuiltModel:
    """Fit a sweep's picked cell (`model` + `rule`, default the spec's pick) or a named
    `cell` as one pipeline, and keep it: a skops artefact and its card in `out` (default
    results/models/<model id>.skops) and a row of the store's `models` table.

    The rows are the sweep's training rows, or with `all_rows` every row. The data file
    (`data`, default the one the sweep read) must have the sweep's SHA-256 unless
    `accept_data`. Failed or unfinished cells are refused."""
    from ..read.queries import sweep_facts, sweep_record
    from ..write.budget import data_limit_bytes
    from ..write.prepare import load_checked
    from ..write.resampling import make_plan, refit_seed

    store._require()
    if out is not None:
        _check_model_out(Path(out))
    with store.session():  # a dozen small reads on one connection
        facts = sweep_facts(store, sweep_id)
        sid = facts.sweep_id
        row, rule_used = _choose_cell(store, sid, model=model, rule=rule, cell=cell,
                                      default_rule=facts.rule)
        scores = _check_finished(store, sid, row)
        record = sweep_record(store, sid)
    store.require_writer(doing="keep a built model in it", changed="built",
                         needs="`build` keeps the model in the store's tables and needs what "
                               "`run` needs: INSERT on every foldwise table and UPDATE on "
                               "sweeps and cells")
    family = FAMILIES.get(str(row["family"]))
    if family is None:
        raise ModelError(f"cell {row['cell_id']} is of family '{row['family']}', which this "
                         "foldwise cannot fit. Upgrade foldwise.")
    spec = _sweep_spec(record, data)
    _check_stored_files(spec, record, store, data)
    limit = data_limit_bytes(spec, lifted=lift_limits)
    sha = _check_data(spec, record, accept=accept_data, max_bytes=limit,
                      named_by=None if data is not None else store.path)
    frame = load_checked(spec, max_bytes=limit)
    plan = make_plan(spec, frame)
    rows = np.arange(len(frame.y)) if all_rows else plan.train_rows
    X, y = frame.X.iloc[rows], frame.y[rows]
    params = json.loads(row["params"]) if isinstance(row["params"], str) else row["params"]
    seed = refit_seed(plan.seed)
    pipeline, warned = family.fit_pipeline(params, X, y, seed=seed, numeric=frame.numeric,
                                           categorical=frame.categorical, task=frame.task)
    notes: list[str] = []
    rebuilt, interval = None, None
    if not all_rows:
        X_test, y_test = frame.X.iloc[plan.test_rows], frame.y[plan.test_rows]
        rebuilt = _metric_values(y_test, pipeline, X_test, facts.metrics, frame.classes)
        if frame.task == "regression":  # intervals are for numbers
            interval = conformal_scores(y_test, pipeline.predict(X_test))
        stored = dict(zip(scores["metric"], scores["test"]))
        off = [m for m, v in rebuilt.items()
               if abs(v - stored[m]) > _TEST_AGREEMENT * max(1.0, abs(stored[m]))]
        if off:
            notes.append(f"note: the rebuilt model's test {', '.join(off)} differ from the "
                         "stored ones (the sweep scored this cell through a path evaluator, "
                         "equal within its solver tolerance); the card keeps both.")
    if sha != record["data_sha256"]:
        notes.append(f"note: built on data with SHA-256 {sha[:12]}…, not the sweep's "
                     + (f"{record['data_sha256'][:12]}…" if _text(record["data_sha256"])
                        else "(unknown)") + " (--accept-data); the card says so.")
    created = datetime.now()
    model_id = _new_model_id()
    estimator = pipeline.named_steps["model"]
    card = {
        "format": CARD_FORMAT,
        "card_version": CARD_VERSION if spec.data.missing_words is not None else 1,
        "model_id": model_id,
        "created_at": created.isoformat(timespec="seconds"), "user": _user(),
        "host": socket.gethostname(), "task": frame.task,
        "classes": [_plain(c) for c in frame.classes] or None,
        "sweep": {"sweep_id": sid, "name": facts.name, "spec_path": record.get("spec_path"),
                  "spec_sha256": record["spec_sha256"], "status": record["status"]},
        "cell": {"cell_id": row["cell_id"], "model": row["model"], "family": family.name,
                 "params": params, "complexity_rank": int(row["complexity_rank"]),
                 "estimator": type(estimator).__name__,
                 "estimator_params": {k: _plain(v) for k, v in
                                      sorted(estimator.get_params(deep=False).items())}},
        "rule": rule_used,
        "rows": {"used": "all" if all_rows else "training", "n": int(len(rows)),
                 "n_training": int(plan.n_train), "n_test": int(plan.n_test),
                 "test_split": plan.test_form, "seed": seed,
                 "positions_sha256": hashlib.sha256(
                     np.asarray(rows, dtype="<i8").tobytes()).hexdigest(),
                 "which": ("every row of the data (training and test)" if all_rows else
                           "the sweep's training rows; its test rows were held out")},
        "data": {"path": str(spec.resolve(spec.data.path)), "sha256": sha,
                 "sweep_sha256": record["data_sha256"],
                 "accepted_other_data": sha != record["data_sha256"],
                 "infinite": spec.data.infinite,
                 "missing_words": spec.data.missing_words},
        "target": _target_facts(frame.target, y, frame.task),
        "features": feature_schema(X, frame.numeric, frame.categorical),
        "metrics": list(facts.metrics),
        "scores": _scores(scores, rebuilt, all_rows),
        "prediction_columns": list(family.prediction_columns(pipeline, X.iloc[:1])),
        "interval": interval,
        "fit_warnings": warned[:20],
        "versions": versions_here(),
    }
    blob = dump_pipeline(pipeline)
    digest = sha256_of(blob)
    card["artefact"] = {"format": FORMAT, "sha256": digest, "bytes": len(blob)}
    coefficients = None
    if family.coefficients:
        coefficients = pd.DataFrame(family.estimators.coefficient_rows(pipeline))
        card["coefficients"] = coefficients.replace({np.nan: None}).to_dict("records")
    artefact = Path(out) if out is not None else MODELS_FOLDER / f"{model_id}.skops"
    staged = stage_files(_model_files(artefact, blob, card), ".building-")
    try:
        store.ensure_schema()
        store.write_batch({
            "models": pd.DataFrame([{
                "model_id": model_id, "sweep_id": sid, "cell_id": row["cell_id"],
                "model": row["model"], "family": family.name, "rule": rule_used,
                "rows_used": card["rows"]["used"], "n_rows": int(len(rows)),
                "created_at": created, "user_name": card["user"], "host": card["host"],
                "card": card_json(card), "artefact": blob, "artefact_sha256": digest,
                "artefact_bytes": len(blob)}]),
            "model_coefficients": None if coefficients is None else
            coefficients.assign(model_id=model_id)})
    except BaseException:
        discard_staged(staged)
        raise
    artefact, card_file = _place(staged, f"The model is in store {store.path} as {model_id}: "
                                 f"write its files elsewhere with `foldwise fetch {model_id} "
                                 "--out OTHER.skops`.")
    return BuiltModel(model_id, card, artefact, card_file, digest, len(blob), coefficients,
                      notes)


def write_model_files(artefact: Path, blob: bytes, card: dict) -> tuple[Path, Path]:
    """Write an artefact and its card beside it, both or neither, never over a file."""
    staged = stage_files(_model_files(Path(artefact), blob, card), ".building-")
    return _place(staged, "Choose another --out.")


def _place(staged, hint: str) -> tuple[Path, Path]:
    """(artefact, card) moved into place from `stage_files`; a file that appeared at
    either path since the check is kept, and nothing of this model is left there."""
    try:
        card_file, artefact = move_into_place(staged, keep_existing=True)
    except FileExistsError:
        discard_staged(staged)
        raise OutputError(f"a file appeared at {staged[1][1]} or its card "
                          f"{staged[0][1].name} while the model was written; it is kept. "
                          f"{hint}") from None
    except BaseException:
        discard_staged(staged)
        raise
    return artefact, card_file


def _check_model_out(artefact: Path) -> list[Path]:
    """The artefact and its card's paths, after checking the artefact's name, that neither
    file exists and that no part of their folder is a file; nothing is made."""
    if artefact.suffix != ".skops":
        raise OutputError(f"--out {artefact} must end in .skops (the card is written beside "
                          f"it as {card_path_for(artefact).name}).")
    check_folder(artefact.parent, str(artefact), "Choose another --out.")
    targets = [artefact, card_path_for(artefact)]
    for t in targets:
        if t.exists():
            raise OutputError(f"{t} already exists; foldwise does not overwrite a model's "
                              "files. Choose another --out, or remove it first.")
    return targets


def _model_files(artefact: Path, blob: bytes, card: dict) -> list[tuple[Path, bytes]]:
    """(path, bytes) of the card and its artefact, after checking those places are free;
    their folder is made. The card comes first, so an artefact is never without its card."""
    artefact_file, card_file = _check_model_out(artefact)
    make_folder(artefact.parent, str(artefact), "Choose another --out.")
    return [(card_file, card_json(card).encode()), (artefact_file, blob)]

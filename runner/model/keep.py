"""Getting a built model back: from its files (the .skops artefact and the card beside it)
or from a store's `models` table by id, always through the artefact gates (SHA-256, the
types a foldwise pipeline holds, skops without pickle), with the card's versions compared
to this machine's."""

from __future__ import annotations

import os
import stat
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import ModelError
from ..families import FAMILIES, Family
from .artefact import load_pipeline, sha256_of
from .card import card_path_for, check_card, read_card_file, version_notes

__all__ = ["LoadedModel", "load_model", "read_model", "fetch_model", "MAX_ARTEFACT_BYTES"]

MAX_ARTEFACT_BYTES = 4 * 2**30
"""The largest artefact file read (a 500-tree forest on a million rows is ~1 GiB)."""


@dataclass
class LoadedModel:
    """A built model ready to predict: its fitted pipeline, its card, where it came from,
    and notes on version differences."""

    pipeline: object
    card: dict
    source: str
    notes: list[str] = field(default_factory=list)

    @property
    def family(self) -> Family:
        return FAMILIES[self.card["cell"]["family"]]

    @property
    def model_id(self) -> str:
        return str(self.card.get("model_id", ""))


def _read_artefact(path: Path) -> bytes:
    """An artefact file's bytes: a regular file within the size limit."""
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as exc:
        raise ModelError(f"model file {path} cannot be opened: {exc.strerror}.") from None
    with os.fdopen(fd, "rb") as fh:
        info = os.fstat(fh.fileno())
        if not stat.S_ISREG(info.st_mode):
            raise ModelError(f"model file {path} is not a regular file.")
        if info.st_size > MAX_ARTEFACT_BYTES:
            raise ModelError(f"model file {path} has {info.st_size:,} bytes, more than "
                             f"foldwise loads ({MAX_ARTEFACT_BYTES:,}).")
        return fh.read()


def read_model(source: str | Path, store=None, *, option: str = "MODEL"
               ) -> tuple[bytes, dict, str]:
    """(artefact bytes, card, where) of a model file or a store's model id — nothing loaded
    yet. A path that exists is a file; anything else is looked up in `store` (an unknown
    id refused naming `option`). The bytes must match the SHA-256 the store row (for an
    id) records as well as the card's."""
    path = Path(str(source))
    if path.suffix == ".skops" or path.exists():
        if not path.exists():
            raise ModelError(f"model file {path} does not exist. Give a .skops file written "
                             "by `foldwise build` or `foldwise fetch`, or a model id from "
                             "`foldwise models`.")
        if path.is_dir():
            raise ModelError(f"{path} is a folder; give a model's .skops file.")
        card = read_card_file(card_path_for(path))
        return _read_artefact(path), card, f"model file {path}"
    if store is None:
        raise ModelError(f"{source} is neither a model file nor, without a store, a model "
                         "id.")
    from ..read.explained import model_record

    row = model_record(store, str(source), option=option)
    where = f"model {row['model_id']} of store {store.path}"
    import json

    try:
        card = check_card(json.loads(row["card"]) if isinstance(row["card"], str)
                          else row["card"], f"the card of {where}")
    except ValueError:
        raise ModelError(f"the card of {where} is not JSON; the row is damaged.") from None
    blob = row["artefact"]
    got = sha256_of(blob)
    if got != str(row["artefact_sha256"]) or got != card["artefact"]["sha256"]:
        raise ModelError(f"{where}: the artefact's SHA-256 is {got}, but its row records "
                         f"{row['artefact_sha256']} (and its card "
                         f"{card['artefact']['sha256']}). The stored bytes were changed "
                         "after the model was built, so it is refused and nothing was "
                         "loaded. Build the model again.")
    return blob, card, where


def load_model(source: str | Path, store=None) -> LoadedModel:
    """A built model from a .skops file (with its card beside it) or a store's model id,
    checked and loaded without pickle; `notes` say where versions differ from the card's."""
    blob, card, where = read_model(source, store)
    pipeline = load_pipeline(blob, expected_sha256=card["artefact"]["sha256"],
                             family=str(card["cell"]["family"]), where=where,
                             built_with=card.get("versions"))
    return LoadedModel(pipeline, card, where, version_notes(card.get("versions") or {}))


def fetch_model(store, model_id: str, out: str | Path | None = None) -> tuple[Path, Path]:
    """Write a stored model's artefact and card to files (default
    results/models/<model id>.skops), after checking its SHA-256; loads nothing."""
    from ..read.filenames import safe_component
    from .build import MODELS_FOLDER, write_model_files

    blob, card, _ = read_model(model_id, store, option="MODEL_ID")
    target = Path(out) if out is not None else \
        MODELS_FOLDER / f"{safe_component(str(card.get('model_id', model_id)))}.skops"
    return write_model_files(target, blob, card)

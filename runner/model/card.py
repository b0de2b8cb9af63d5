"""The model card: the JSON record kept beside every built model (in its `.card.json` file
and in the store's `models` row) that says exactly what the model is and where it came
from — sweep, cell, rule, rows, data and spec fingerprints, the input columns it expects
with their types and the categories it saw, its scores, and the versions that built it.

`predict` checks new data against the card's columns; loading compares the card's versions
with this machine's. The card is plain data: nothing here fits or loads a model."""

from __future__ import annotations

import json
import math
import platform
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

from ..errors import ModelError

__all__ = ["CARD_FORMAT", "CARD_VERSION", "versions_here", "version_notes", "feature_schema",
           "card_path_for", "read_card_file", "card_json", "check_card", "VERSIONED",
           "conformal_scores", "interval_halfwidth"]

CARD_FORMAT = "foldwise model card"
CARD_VERSION = 1
VERSIONED = ("foldwise", "scikit-learn", "numpy", "scipy", "pandas", "skops", "python")
"""The versions a card records; those that decide a model's arithmetic are compared on load."""
_DECIDING = ("scikit-learn", "numpy", "scipy", "skops")
_MAX_CARD_BYTES = 16 * 2**20


def versions_here() -> dict[str, str]:
    """The versions of what builds and loads models on this machine."""
    out = {"python": platform.python_version()}
    for name in VERSIONED:
        if name == "python":
            continue
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "not installed"
    return out


def version_notes(built_with: dict) -> list[str]:
    """One sentence per deciding package whose version here differs from the card's."""
    here = versions_here()
    notes = []
    for name in _DECIDING:
        then, now = built_with.get(name), here.get(name)
        if then is not None and then != now:
            notes.append(f"note: this model was built with {name} {then}; this machine has "
                         f"{now}. Its predictions may differ from the stored ones; build it "
                         "again here (`foldwise build`) if they must match.")
    return notes


def _finite(value) -> float | None:
    value = float(value)
    return value if math.isfinite(value) else None


def feature_schema(X, numeric: list[str], categorical: list[str]) -> list[dict]:
    """The input columns a model expects, in order: numeric with the range and missing
    count of the fitting rows, categorical with every category seen there."""
    import pandas as pd

    out = []
    for name in X.columns:
        s = X[name]
        missing = int(s.isna().sum())
        if name in numeric:
            out.append({"name": str(name), "type": "numeric", "missing": missing,
                        "min": _finite(s.min()), "max": _finite(s.max())})
        else:
            levels = sorted(str(v) for v in pd.unique(s.dropna()))
            out.append({"name": str(name), "type": "categorical", "missing": missing,
                        "categories": levels})
    return out


CONFORMAL = "split-conformal on the sweep's test rows"
"""How a card's prediction interval is made (Papadopoulos et al. 2002; Lei, G'Sell,
Rinaldo, Tibshirani & Wasserman 2018, JASA 113, "Distribution-free predictive inference
for regression", split conformal with absolute residuals)."""
_MAX_SCORES = 100_000


def conformal_scores(y_test, predicted) -> dict:
    """The card's interval record: the built model's absolute residuals on the test rows,
    which it never fitted, sorted (the conformity scores of split conformal)."""
    import numpy as np

    scores = np.sort(np.abs(np.asarray(y_test, float) - np.asarray(predicted, float)))
    if len(scores) > _MAX_SCORES:  # a rank-preserving thinning keeps the card small
        keep = np.unique(np.linspace(0, len(scores) - 1, _MAX_SCORES).round().astype(int))
        return {"method": CONFORMAL, "n": int(len(scores)), "ranks": (keep + 1).tolist(),
                "scores": scores[keep].tolist()}
    return {"method": CONFORMAL, "n": int(len(scores)), "scores": scores.tolist()}


def interval_halfwidth(record: dict | str | None, level: float, where: str) -> float:
    """q such that [prediction - q, prediction + q] covers a new row's target with
    probability at least `level` when rows are exchangeable: the ceil((n + 1) level)-th
    smallest of the n test residuals (split conformal)."""
    import math

    if record == "absent":
        raise ModelError(f"{where} was built by a foldwise that kept no residuals for "
                         "prediction intervals; build it again to get intervals.")
    if not record:
        raise ModelError(f"{where} has no held-out residuals for a prediction interval: it "
                         "was built on every row (--all-rows). Build it on the training "
                         "rows to get intervals.")
    n = int(record["n"])
    k = math.ceil((n + 1) * level)
    if k > n:
        raise ModelError(f"a {level:g} interval needs at least {math.ceil(level / (1 - level))}"
                         f" held-out rows; {where} was calibrated on {n}. Ask for a lower "
                         "level.")
    ranks = record.get("ranks")
    if ranks is None:
        return float(record["scores"][k - 1])
    import bisect

    return float(record["scores"][min(bisect.bisect_left(ranks, k), len(ranks) - 1)])


def card_path_for(artefact: Path) -> Path:
    """Where the card of an artefact file lives: beside it, `<name>.card.json`."""
    artefact = Path(artefact)
    return artefact.with_name(artefact.stem + ".card.json")


def card_json(card: dict) -> str:
    return json.dumps(card, indent=2, sort_keys=False, allow_nan=False) + "\n"


def check_card(card, where: str) -> dict:
    """The card if it has what loading and predicting need, else a ModelError."""
    if not isinstance(card, dict) or card.get("format") != CARD_FORMAT:
        raise ModelError(f"{where} is not a foldwise model card. Nothing was loaded.")
    if int(card.get("card_version", 0)) > CARD_VERSION:
        raise ModelError(f"{where} was written by a newer foldwise (card version "
                         f"{card.get('card_version')}); upgrade foldwise to use it.")
    try:
        family = str(card["cell"]["family"])
        sha = str(card["artefact"]["sha256"])
        features = card["features"]
        names = [str(f["name"]) for f in features]
        kinds = {str(f["type"]) for f in features}
    except (KeyError, TypeError):
        raise ModelError(f"{where} lacks the cell, artefact or features a model card "
                         "holds; it is damaged. Nothing was loaded.") from None
    if not names or len(set(names)) != len(names) or not kinds <= {"numeric", "categorical"}:
        raise ModelError(f"{where} lists no input columns, a column twice, or an unknown "
                         "column type; it is damaged. Nothing was loaded.")
    if len(sha) != 64 or not family:
        raise ModelError(f"{where} gives no valid SHA-256 or family; it is damaged.")
    return card


def read_card_file(path: Path) -> dict:
    """The card beside an artefact file, read as JSON within a size limit and checked."""
    path = Path(path)
    if not path.is_file():
        raise ModelError(f"model card {path} does not exist: a built model's artefact "
                         f"and its card travel together ({path.name} beside the .skops "
                         "file). Fetch both from the store with `foldwise fetch MODEL_ID`.")
    with open(path, "rb") as fh:
        data = fh.read(_MAX_CARD_BYTES + 1)
    if len(data) > _MAX_CARD_BYTES:
        raise ModelError(f"model card {path} is larger than {_MAX_CARD_BYTES // 2**20} MiB; "
                         "no foldwise card is. Nothing was loaded.")
    try:
        card = json.loads(data.decode("utf-8"))
    except (UnicodeDecodeError, ValueError) as exc:
        raise ModelError(f"model card {path} is not JSON ({exc}). Nothing was "
                         "loaded.") from None
    return check_card(card, f"model card {path}")

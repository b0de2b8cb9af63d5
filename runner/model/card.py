"""The model card: the JSON record kept beside every built model (in its `.card.json` file
and in the store's `models` row) that says exactly what the model is and where it came
from — sweep, cell, rule, rows, data and spec fingerprints, the input columns it expects
with their types and the categories it saw, its scores, and the versions that built it.

`predict` checks new data against the card's columns; loading compares the card's versions
with this machine's. The card is plain data: nothing here fits or loads a model."""

from __future__ import annotations

import bisect
import json
import math
import platform
from dataclasses import dataclass
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

from ..errors import ModelError

__all__ = ["CARD_FORMAT", "CARD_VERSION", "versions_here", "version_notes", "feature_schema",
           "card_path_for", "read_card_file", "card_json", "check_card", "VERSIONED",
           "conformal_scores", "Residuals", "read_residuals"]

CARD_FORMAT = "foldwise model card"
CARD_VERSION = 2
"""2: `data.missing_words` lists the words the sweep read as missing, and predict reads new
rows with them; a foldwise of version 1 would read them with pandas' default words, so it
must refuse such a card. A card without a list (pandas' default) is still version 1."""
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


_MAX_COUNT = 2**53
"""The most held-out rows a card may count: ranks up to it are exact in float arithmetic,
and no sweep has so many test rows."""


@dataclass(frozen=True)
class Residuals:
    """A card's held-out absolute residuals, checked: the finite ones in increasing order,
    the count n they were taken from, their ranks among those n when the card keeps a
    thinned selection (None when it keeps them all), and how many were not finite."""

    scores: tuple[float, ...]
    n: int
    ranks: tuple[int, ...] | None
    skipped: int

    def halfwidth(self, level: float, where: str) -> float:
        """q such that [prediction - q, prediction + q] covers a new row's target with
        probability at least `level` when rows are exchangeable: the ceil((n + 1) level)-th
        smallest of the n residuals (split conformal)."""
        k = math.ceil((self.n + 1) * level)
        if k > self.n:
            raise ModelError(f"a {level:g} interval needs at least "
                             f"{math.ceil(level / (1 - level))} held-out rows; {where} was "
                             f"calibrated on {self.n:,}. Ask for a lower level.")
        if self.ranks is None:
            return self.scores[k - 1]
        i = bisect.bisect_left(self.ranks, k)
        if i == len(self.ranks):
            raise ModelError(f"{where}: the held-out residual of rank {k:,} of {self.n:,}, "
                             f"which a {level:g} interval needs, is not a finite number on "
                             "its card. Ask for a lower level, or build the model again.")
        return self.scores[i]

    def note(self, where: str) -> str | None:
        """What skipping non-finite residuals did, or None when none was skipped."""
        if not self.skipped:
            return None
        are = "is not a finite number" if self.skipped == 1 else "are not finite numbers"
        return (f"note: {self.skipped:,} of the {self.skipped + len(self.scores):,} held-out "
                f"residuals on the card of {where} {are} (NULL, NaN or infinite) and "
                f"{'was' if self.skipped == 1 else 'were'} skipped; the interval is split "
                "conformal on the other "
                f"{len(self.scores):,}. Build the model again for a card without them.")


def _residual(value) -> float | None:
    """A stored residual as a float (NaN for NULL, inf beyond float range), or None when it
    is not a number at all."""
    if value is None:
        return math.nan
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    try:
        return float(value)
    except OverflowError:
        return math.inf


def _is_count(value, least: int = 0) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and \
        least <= value <= _MAX_COUNT


def read_residuals(record, where: str) -> Residuals:
    """The card's interval record checked (a card comes from a file or a store another hand
    may have edited): NULL, NaN and infinite residuals are skipped and counted; anything
    else that no build writes is a ModelError naming what is wrong."""
    if record == "absent":
        raise ModelError(f"{where} was built by a foldwise that kept no residuals for "
                         "prediction intervals; build it again to get intervals.")
    if record is None:
        raise ModelError(f"{where} has no held-out residuals for a prediction interval: it "
                         "was built on every row (--all-rows). Build it on the training "
                         "rows to get intervals.")

    def damaged(why: str) -> ModelError:
        error = ModelError(f"the card of {where} has an interval record that {why}, which no "
                           "build writes: the card was changed after the model was built. "
                           "Predict without --interval, or build the model again to get "
                           "intervals.")
        error.why = why  # what is wrong with the record, for a card's own view
        return error

    if not isinstance(record, dict):
        kind = {list: "a list", str: "a string", bool: "true or false"}.get(type(record),
                                                                         "a number")
        raise damaged(f"is {kind}, not an object")
    listed, ranks, n = record.get("scores"), record.get("ranks"), record.get("n")
    if not isinstance(listed, list):
        raise damaged("lists no residuals (its 'scores' is not a list)")
    if len(listed) > _MAX_SCORES:
        raise damaged(f"lists {len(listed):,} residuals, more than the {_MAX_SCORES:,} a "
                      "card keeps")
    if ranks is not None and (not isinstance(ranks, list) or len(ranks) != len(listed)):
        raise damaged("has 'ranks' that are not one per residual")
    if ranks is None and not (_is_count(n) and n == len(listed)):
        raise damaged(f"counts n = {str(n)[:20]} residuals but lists {len(listed):,}")
    if ranks is not None and not _is_count(n, least=len(listed)):
        raise damaged(f"counts n = {str(n)[:20]}, not a whole number from {len(listed):,} "
                      f"(the residuals it keeps) to {_MAX_COUNT:,}")
    scores, kept_ranks = [], []
    for i, value in enumerate(listed):
        x = _residual(value)
        if x is not None and not math.isfinite(x):
            continue
        if x is None or x < 0:
            raise damaged(f"holds {str(value)[:20]!r} where an absolute residual (a number, "
                          "at least 0) belongs")
        scores.append(x)
        if ranks is not None:
            kept_ranks.append(ranks[i])
    if ranks is None:
        scores.sort()
    elif not (all(_is_count(r, least=1) and r <= n for r in kept_ranks)
              and all(a < b for a, b in zip(kept_ranks, kept_ranks[1:]))
              and all(a <= b for a, b in zip(scores, scores[1:]))):
        raise damaged("keeps residuals whose ranks are not increasing whole numbers from 1 "
                      "to n or are out of order")
    if not scores:
        raise ModelError(f"the card of {where} holds no held-out residual that is a finite "
                         f"number ({len(listed):,} listed), so no interval can be made. "
                         "Predict without --interval, or build the model again.")
    return Residuals(tuple(scores), len(scores) if ranks is None else n,
                     None if ranks is None else tuple(kept_ranks), len(listed) - len(scores))


def card_path_for(artefact: Path) -> Path:
    """Where the card of an artefact file lives: beside it, `<name>.card.json`."""
    artefact = Path(artefact)
    return artefact.with_name(artefact.stem + ".card.json")


def card_json(card: dict) -> str:
    """The card as standard JSON text: a stored card (another's text) may hold NaN or an
    infinity, for which JSON has no word; they are written null, as a missing number."""
    return json.dumps(_nulled(card), indent=2, sort_keys=False, allow_nan=False) + "\n"


def _nulled(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _nulled(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_nulled(v) for v in value]
    return value


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
    words = card.get("data", {}).get("missing_words") if isinstance(card.get("data"), dict) \
        else None
    if words is not None and not (isinstance(words, list)
                                  and all(isinstance(w, str) for w in words)):
        raise ModelError(f"{where} gives data.missing_words as {str(words)[:60]!r}, not a "
                         "list of words; it is damaged. Nothing was loaded.")
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

"""The saved form of a built model: its fitted pipeline as skops bytes, and the checks that
stand between those bytes and a loaded object.

skops writes an object as a zip of a JSON schema and numpy arrays and rebuilds it without
pickle. Loading here goes through three gates, in this order, and stops at the first that
fails, before skops reads anything:

1. the bytes' SHA-256 must equal the one recorded with the model (its card, its store row),
   so changed bytes are refused unread;
2. every type the schema names must be one foldwise's pipelines of that family hold (the
   shared preprocessing, the family's `saved_types`, plain containers and numpy values),
   so a file that would build anything else is refused with the types named;
3. skops rebuilds the object trusting exactly those types, never pickle.

Nothing here trusts the card's word beyond choosing which family's types to allow, and that
choice is bounded by the families foldwise knows."""

from __future__ import annotations

import hashlib
import importlib
import io
import json
import zipfile

from ..errors import ModelError
from ..families import FAMILIES

__all__ = ["dump_pipeline", "load_pipeline", "sha256_of", "types_in", "allowed_types",
           "SHARED_TYPES", "FORMAT"]

FORMAT = "skops"
"""The artefact's format, as the card records it."""

SHARED_TYPES = ("sklearn.pipeline.Pipeline", "sklearn.compose.ColumnTransformer",
                "sklearn.impute.SimpleImputer", "sklearn.preprocessing.StandardScaler",
                "sklearn.preprocessing.OneHotEncoder", "sklearn.preprocessing.OrdinalEncoder",
                "sklearn.preprocessing.FunctionTransformer", "runner.families._base.MedianImputer")
"""The preprocessing every family's pipeline is built from (`families/_base.py`)."""

_BUILTINS = {"dict", "list", "tuple", "str", "int", "float", "bool", "slice", "NoneType"}
_MAX_SCHEMA_BYTES = 256 * 2**20
"""The largest schema.json read out of an artefact (a 500-tree forest's is ~40 MiB)."""
_MAX_UNPACKED = 4 * 2**30
"""The most bytes an artefact may unpack to: a small file that would inflate to more is
refused before anything is unpacked."""


def sha256_of(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def dump_pipeline(pipeline) -> bytes:
    """The fitted pipeline as skops bytes (deflated)."""
    import skops.io as sio

    return sio.dumps(pipeline, compression=zipfile.ZIP_DEFLATED)


def _qualified(public: str) -> set[str]:
    """A class's public dotted name and the module path it really lives in (skops records
    the latter, e.g. sklearn.tree._classes.DecisionTreeRegressor)."""
    module, _, name = public.rpartition(".")
    try:
        cls = getattr(importlib.import_module(module), name)
    except (ImportError, AttributeError):
        return {public}
    return {public, f"{cls.__module__}.{cls.__qualname__}"}


def allowed_types(family: str) -> set[str]:
    """Every class a saved pipeline of this family may hold, by dotted name."""
    if family not in FAMILIES:
        raise ModelError(f"the model's card names family '{family[:60]}', which this "
                         f"foldwise does not know ({', '.join(FAMILIES)}); it was built by "
                         "another program or a newer foldwise. Nothing was loaded.")
    out: set[str] = set()
    for public in (*SHARED_TYPES, *FAMILIES[family].saved_types):
        out |= _qualified(public)
    return out


def _numpy_value(name: str) -> bool:
    import numpy as np

    kind = getattr(np, name, None)
    return kind in (np.ndarray, np.dtype) or (isinstance(kind, type)
                                               and issubclass(kind, np.generic))


def types_in(data: bytes, where: str) -> set[str]:
    """Every type an artefact's schema names, read from its zip without building anything."""
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as zf:
            unpacked = sum(i.file_size for i in zf.infolist())
            if unpacked > _MAX_UNPACKED:
                raise ModelError(f"{where} would unpack to {unpacked:,} bytes, more than "
                                 f"foldwise unpacks ({_MAX_UNPACKED:,}). Nothing was loaded.")
            info = zf.getinfo("schema.json")
            if info.file_size > _MAX_SCHEMA_BYTES:
                raise ModelError(f"{where}: its schema is {info.file_size:,} bytes, more than "
                                 f"foldwise reads ({_MAX_SCHEMA_BYTES:,}). Nothing was loaded.")
            schema = json.loads(zf.read(info))
    except ModelError:
        raise
    except (zipfile.BadZipFile, KeyError, ValueError, OSError, RuntimeError) as exc:
        raise ModelError(f"{where} is not a skops artefact foldwise can read ({exc}). "
                         "Nothing was loaded; build the model again or fetch it from the "
                         "store.") from None
    found: set[str] = set()
    stack = [schema]
    while stack:
        node = stack.pop()
        if isinstance(node, dict):
            if node.get("__loader__") == "MethodNode":
                # a bound method names its owner's type, which may be allowed (str.format,
                # ndarray.tofile): no foldwise pipeline holds one, so it is never allowed
                found.add(f"a method of {node.get('__module__')}.{node.get('__class__')}")
            elif "__class__" in node:
                found.add(f"{node.get('__module__')}.{node['__class__']}")
            stack.extend(node.values())
        elif isinstance(node, list):
            stack.extend(node)
    return found


def _outside(found: set[str], allowed: set[str]) -> list[str]:
    out = []
    for name in found:
        module, _, cls = name.rpartition(".")
        if name in allowed or (module == "builtins" and cls in _BUILTINS) or \
                (module == "numpy" and _numpy_value(cls)):
            continue
        out.append(name)
    return sorted(out)


def load_pipeline(data: bytes, *, expected_sha256: str, family: str, where: str,
                  built_with: dict | None = None):
    """The fitted pipeline in `data`, after the three gates of this module's docstring.

    `where` names the artefact in messages (a file or a store's model id); `built_with`
    (the card's versions) is quoted when skops cannot rebuild the object here."""
    got = sha256_of(data)
    if got != str(expected_sha256):
        raise ModelError(f"{where}: the artefact's SHA-256 is {got}, but the model was saved "
                         f"with SHA-256 {str(expected_sha256)[:64]}. Its bytes were changed "
                         "after it was built (damaged in transfer, or tampered with), so it "
                         "is refused and nothing was loaded. Fetch it again from the store "
                         "(`foldwise fetch MODEL_ID`) or build it again.")
    allowed = allowed_types(family)
    outside = _outside(types_in(data, where), allowed)
    untrusted = []
    if not outside:
        import skops.io as sio

        try:
            untrusted = sio.get_untrusted_types(data=data)
        except Exception as exc:
            raise ModelError(f"{where} is not a skops artefact foldwise can read "
                             f"({type(exc).__name__}). Nothing was loaded.") from None
        # trusted: what skops reports and this module's lists allow, never its whole report
        outside = _outside(set(untrusted), allowed)
    if outside:
        raise ModelError(f"{where} holds types a foldwise {family} pipeline never holds: "
                         f"{', '.join(outside[:8])}. It is refused and nothing was loaded; "
                         "load only models built by foldwise.")
    import skops.io as sio

    try:
        pipeline = sio.loads(data, trusted=untrusted)
    except Exception as exc:  # skops raises many kinds when a class changed between versions
        versions = ""
        if built_with:
            versions = (f" It was built with scikit-learn {built_with.get('scikit-learn')} "
                        f"and skops {built_with.get('skops')}.")
        first = (str(exc).splitlines() or [type(exc).__name__])[0][:200]
        raise ModelError(f"{where} could not be rebuilt here: {type(exc).__name__}: "
                         f"{first}.{versions} Build the model again with this foldwise "
                         "(`foldwise build`).") from None
    if not hasattr(pipeline, "named_steps") or "prep" not in pipeline.named_steps:
        raise ModelError(f"{where} does not hold a foldwise pipeline. Nothing was used.")
    return pipeline

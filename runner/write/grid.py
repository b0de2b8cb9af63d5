"""Grid expansion: each model's grid becomes concrete cells with stable ids and a
complexity rank (0 = simplest) that the one-standard-error rule follows."""

from __future__ import annotations

import hashlib
import itertools
import json
from dataclasses import dataclass
from typing import Callable

import numpy as np

from ..families import FAMILIES
from .spec import LinearRange, LogRange, ModelSpec, PathRange

__all__ = ["Cell", "expand_model", "expand_spec", "cell_id", "EVAL_VERSION", "range_values",
           "spread_along_path", "count_cells", "range_size"]

EVAL_VERSION = "1"
"""Bumped whenever a change to foldwise would change any stored score; enters every cell id."""


@dataclass(frozen=True)
class Cell:
    """One grid point of one model."""

    model: str
    family: str
    params: dict
    cell_id: str
    complexity_rank: int = 0

    @property
    def params_json(self) -> str:
        return json.dumps(self.params, sort_keys=True)


def range_values(value, kind: str) -> list:
    """Concrete values of a log or linear range (ints rounded and de-duplicated)."""
    if isinstance(value, LogRange):
        lo, hi = value.log
        vals = np.geomspace(lo, hi, value.n) if value.n > 1 else np.array([lo])
    else:
        lo, hi = value.linear
        vals = np.linspace(lo, hi, value.n) if value.n > 1 else np.array([lo])
    if kind == "int":
        return list(dict.fromkeys(int(round(v)) for v in vals))
    return [float(v) for v in vals]


def spread_along_path(path_alphas: np.ndarray, n: int) -> list[float]:
    """`n` alphas spread evenly by position along a pruning path's distinct alphas."""
    distinct = np.unique(np.asarray(path_alphas, dtype=float))
    if len(distinct) <= n:
        return [float(a) for a in distinct]
    picks = np.unique(np.linspace(0, len(distinct) - 1, n).round().astype(int))
    return [float(distinct[i]) for i in picks]


def cell_id(family: str, params: dict, data_sha256: str, plan_identity: dict, *,
            model: str = "") -> str:
    """A stable hash of (model label, family, params, data, plan, evaluation version).

    The label is part of it so two models that share a grid point stay two cells."""
    payload = json.dumps({"model": model, "family": family, "params": params,
                          "data": data_sha256, "plan": plan_identity, "eval": EVAL_VERSION},
                         sort_keys=True)
    return hashlib.sha256(payload.encode()).hexdigest()[:16]


PathResolver = Callable[[str, dict, int], list]
"""(model label, the cell's other params, N) -> concrete ccp_alpha values."""


def expand_model(label: str, model: ModelSpec, *, data_sha256: str, plan_identity: dict,
                 resolve_path: PathResolver | None = None,
                 n_features: int | None = None, task: str = "regression") -> list[Cell]:
    """All cells of one model, ranked simplest first, without duplicates."""
    fam = FAMILIES[model.family]
    fixed, paths = {}, {}
    for name, value in model.grid.items():
        if isinstance(value, PathRange):
            paths[name] = value.path
        elif isinstance(value, (LogRange, LinearRange)):
            fixed[name] = range_values(value, fam.params[name].kind)
        else:
            fixed[name] = list(value)
    names = sorted(fixed)
    combos = [dict(zip(names, combo)) for combo in itertools.product(*(fixed[n] for n in names))]
    params_list = []
    for combo in combos:
        if paths:
            (pname, n), = paths.items()
            if resolve_path is None:
                raise ValueError("a {path: N} grid needs the data; resolve it with resolve_path")
            for alpha in resolve_path(label, combo, n):
                params_list.append({**combo, pname: alpha})
        else:
            params_list.append(combo)
    unique = {}
    for params in params_list:
        canon = fam.canonical(params, task)
        unique.setdefault(json.dumps(canon, sort_keys=True), canon)
    ordered = sorted(unique.values(),
                     key=lambda p: (fam.complexity_key(p, model.simpler, n_features),
                                    json.dumps(p, sort_keys=True)))
    return [Cell(label, model.family, p,
                 cell_id(model.family, p, data_sha256, plan_identity, model=label), i)
            for i, p in enumerate(ordered)]


def range_size(value, kind: str) -> int:
    """How many values a log or linear range gives; floats by arithmetic (no array is built),
    whole numbers counted after rounding (the spec bounds n, so this stays small)."""
    if kind != "int":
        return value.n
    lo, hi = value.log if isinstance(value, LogRange) else value.linear
    if value.n == 1:
        return 1
    vals = (np.geomspace if isinstance(value, LogRange) else np.linspace)(lo, hi, value.n)
    return int(np.unique(np.round(vals)).size)


def count_cells(model: ModelSpec) -> tuple[int, bool]:
    """Cells a model will have without looking at data; True if a path range makes it an upper bound."""
    fam = FAMILIES[model.family]
    total, bound = 1, False
    for name, value in model.grid.items():
        if isinstance(value, PathRange):
            total *= value.path
            bound = True
        elif isinstance(value, (LogRange, LinearRange)):
            total *= range_size(value, fam.params[name].kind)
        else:
            total *= len(value)
    return total, bound


def expand_spec(spec, *, data_sha256: str, plan_identity: dict,
                resolve_path: PathResolver | None = None,
                n_features: int | None = None, task: str = "regression") -> list[Cell]:
    """Every cell of every model in the spec, models in spec order."""
    cells = []
    for label, model in spec.models.items():
        cells.extend(expand_model(label, model, data_sha256=data_sha256,
                                  plan_identity=plan_identity, resolve_path=resolve_path,
                                  n_features=n_features, task=task))
    return cells

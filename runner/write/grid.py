"""Grid expansion: each model's grid becomes concrete cells with stable ids, a complexity
rank (0 = simplest, one per cell) and a complexity tier (cells equal in every ordered
parameter share one), which the one-standard-error rule follows."""

from __future__ import annotations

import functools
import hashlib
import itertools
import json
from dataclasses import dataclass
from typing import Callable

import numpy as np

from ..families import FAMILIES
from .spec import LinearRange, LogRange, ModelSpec, PathRange

__all__ = ["Cell", "expand_model", "expand_spec", "cell_id", "EVAL_VERSION", "EVALUATION",
           "CELL_SCHEME", "CELLS", "VERSION_NAMES",
           "range_values", "spread_along_path", "count_model", "ModelCount", "range_size",
           "same_value", "SCORE_PACKAGES", "score_versions", "identity_versions"]

EVAL_VERSION = "4"
"""Bumped whenever a change to foldwise would change any stored score; enters every cell id.
2: numeric columns listed as categorical are coded in numeric order (they were text order);
{path: N} gives one set of alphas per model (it was one per combination); cell ids hold
the versions of the packages that change scores.
3: ridge is Ridge(solver="cholesky"), the solver `Ridge()` runs on dense rows (it was
solver="svd"): the scores a user's own `Ridge()` gives, to the last bit; the last bits of
ridge scores changed.
4: a pruned classification tree's path reads each node's class fractions as stored, as
`predict_proba` returns them (it divided them by their sum again): path scores of class
trees equal one fit per cell bit for bit; their last bits changed, and with them the
order of tied probabilities in ROC AUC."""

EVALUATION = "evaluation"
"""The key of the evaluation version in a sweep's recorded versions (`sweeps.versions`)."""

CELL_SCHEME = "2"
"""What a cell id holds besides the grid point, data file, plan and versions.
2: the problem: the target, the task, the feature columns in order with their roles and
how infinite values are read. Under 1 the same grid on the same file with another target
or other features had the same ids, and a rerun reused those scores as its own."""

CELLS = "cells"
"""The key of the cell id scheme in a sweep's recorded versions; a sweep without it: 1."""

VERSION_NAMES = {EVALUATION: "foldwise's evaluation version",
                 CELLS: "foldwise's cell identity version"}
"""How messages name foldwise's own entries among a sweep's versions."""


@dataclass(frozen=True)
class Cell:
    """One grid point of one model."""

    model: str
    family: str
    params: dict
    cell_id: str
    complexity_rank: int = 0
    complexity_tier: int = 0
    """Equally simple cells (equal in every parameter of the complexity order and the
    spec's `simpler:` directions) share a tier; tiers count up from 0 like ranks."""

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


SAME_DIGITS = 12
"""Significant digits to which two alphas are the same value: pruning paths computed on
trees of different shapes give the same alpha up to rounding in the last bits."""


def same_value(x: float) -> float:
    """`x` rounded to SAME_DIGITS significant digits, so values equal in meaning are equal."""
    return float(f"{float(x):.{SAME_DIGITS}g}")


def spread_along_path(path_alphas, n: int) -> list[float]:
    """`n` alphas spread evenly by position along the distinct alphas of one or more pruning
    paths (merged). Alphas equal to SAME_DIGITS significant digits count once, as the largest
    of them, so that every tree whose path holds that alpha is pruned at it."""
    largest: dict[float, float] = {}
    for a in np.asarray(path_alphas, dtype=float).ravel():
        key = same_value(a)
        largest[key] = max(largest.get(key, a), a)
    distinct = np.array(sorted(largest.values()))
    if len(distinct) <= n:
        return [float(a) for a in distinct]
    picks = np.unique(np.linspace(0, len(distinct) - 1, n).round().astype(int))
    return [float(distinct[i]) for i in picks]


SCORE_PACKAGES = ("scikit-learn", "numpy", "scipy", "pandas")
"""The packages whose versions can change a score. Their versions enter every cell id (a
rerun after an upgrade computes its scores anew rather than copying the old ones), and
Dask workers must have the same ones as this machine (write/executors.py)."""


@functools.cache
def _installed_versions() -> tuple[tuple[str, str], ...]:
    from importlib.metadata import PackageNotFoundError, version

    found = {}
    for name in SCORE_PACKAGES:
        try:
            found[name] = version(name)
        except PackageNotFoundError:
            found[name] = "missing"
    return tuple(found.items())


def score_versions() -> dict[str, str]:
    """The installed versions of SCORE_PACKAGES ('missing' for one not installed), read
    once per process: the modules it has loaded compute its scores, whatever is installed
    later (reading the packages' metadata costs some 5 ms each)."""
    return dict(_installed_versions())


def identity_versions() -> dict[str, str]:
    """Every version that enters a cell id, as a sweep records them: the scoring packages',
    foldwise's evaluation version and its cell id scheme."""
    return {**score_versions(), EVALUATION: EVAL_VERSION, CELLS: CELL_SCHEME}


def cell_id(family: str, params: dict, data_sha256: str, plan_identity: dict, *,
            model: str = "", versions: dict | None = None,
            evaluation: str | None = None, problem: dict | None = None) -> str:
    """A stable hash of (model label, family, params, data, plan, the problem (target,
    task, features and their roles; see CELL_SCHEME), evaluation version (this
    foldwise's unless given) and the versions of the packages that can change a score).
    Without `problem`, the id of cell id scheme 1.

    The label is part of it so two models that share a grid point stay two cells."""
    body = {"model": model, "family": family, "params": params, "data": data_sha256,
            "plan": plan_identity, "eval": evaluation or EVAL_VERSION,
            "versions": versions or {}}
    if problem is not None:
        body["problem"] = problem
    payload = json.dumps(body, sort_keys=True)
    return hashlib.sha256(payload.encode()).hexdigest()[:16]


PathResolver = Callable[[str, dict], list]
"""(model label, the other params of a combination) -> that combination's pruning path."""


def expand_model(label: str, model: ModelSpec, *, data_sha256: str, plan_identity: dict,
                 resolve_path: PathResolver | None = None,
                 n_features: int | None = None, task: str = "regression",
                 versions: dict | None = None, problem: dict | None = None) -> list[Cell]:
    """All cells of one model, ranked simplest first, without duplicates.

    A {path: N} grid gives every combination of the other parameters the same N values,
    spread along the merged pruning paths of all the combinations' trees."""
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
    params_list = combos
    if paths:
        (pname, n), = paths.items()
        if resolve_path is None:
            raise ValueError("a {path: N} grid needs the data; resolve it with resolve_path")
        merged = np.concatenate([np.asarray(resolve_path(label, combo), dtype=float)
                                 for combo in combos])
        values = spread_along_path(merged, n)
        params_list = [{**combo, pname: alpha} for combo in combos for alpha in values]
    unique = {}
    for params in params_list:
        canon = fam.canonical(params, task)
        unique.setdefault(json.dumps(canon, sort_keys=True), canon)
    keyed = sorted(((fam.complexity_key(p, model.simpler, n_features),
                     json.dumps(p, sort_keys=True), p) for p in unique.values()),
                   key=lambda t: t[:2])
    tiers = {key: tier for tier, key in enumerate(dict.fromkeys(k for k, _, _ in keyed))}
    return [Cell(label, model.family, p,
                 cell_id(model.family, p, data_sha256, plan_identity, model=label,
                         versions=versions, problem=problem), i, tiers[key])
            for i, (key, _, p) in enumerate(keyed)]


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


EXACT_COUNT_COMBOS = 100_000
"""Up to this many combinations of a model's non-path values are counted one by one (exact,
duplicates merged); beyond it the counts are products, upper bounds."""


@dataclass(frozen=True)
class ModelCount:
    """What one model's grid makes, worked out without data: cells, and the fits each fold
    takes (a group of cells that differ only in a path parameter is fitted once)."""

    cells: int
    fits_per_fold: int
    bound: bool  # True if the cell count is an upper bound ({path: N}, or a huge grid)


def _value_count(value, kind: str) -> int:
    if isinstance(value, PathRange):
        return value.path
    if isinstance(value, (LogRange, LinearRange)):
        return range_size(value, kind)
    return len(value)


def _first_value(value, kind: str):
    if isinstance(value, PathRange):
        return 1.0
    if isinstance(value, (LogRange, LinearRange)):  # its first value alone, nothing built
        return range_values(value.model_copy(update={"n": 1}), kind)[0]
    return value[0]


def count_model(model: ModelSpec, task: str | None = None) -> ModelCount:
    """Cells and fits per fold of one model, before any data are read; for `task` (None:
    as for regression), since a family's path fits may serve one task only.

    Combinations of the values of the parameters that are not path parameters are
    canonicalised (defaults filled, what cannot matter dropped), so duplicates count once;
    each is one fit per fold, scoring every path value of it at once when the path
    parameter matters to it (e.g. not for least squares, which has no alpha)."""
    fam = FAMILIES[model.family]
    path_name = (next((n for n in model.grid if n in fam.path_params), None)
                 if (task or "regression") in fam.path_tasks else None)
    path_count = 1 if path_name is None else _value_count(model.grid[path_name],
                                                          fam.params[path_name].kind)
    other = {n: v for n, v in model.grid.items() if n != path_name}
    combos = 1
    for name, value in other.items():
        combos *= _value_count(value, fam.params[name].kind)
    bound = path_name is not None and isinstance(model.grid[path_name], PathRange)
    if combos > EXACT_COUNT_COMBOS:
        return ModelCount(combos * path_count, combos, True)
    names = sorted(other)
    values = [range_values(other[n], fam.params[n].kind)
              if isinstance(other[n], (LogRange, LinearRange)) else list(other[n])
              for n in names]
    sample = ({} if path_name is None else
              {path_name: _first_value(model.grid[path_name], fam.params[path_name].kind)})
    groups: dict[str, bool] = {}
    for combo in itertools.product(*values):
        canon = fam.canonical({**dict(zip(names, combo)), **sample})
        keeps_path = path_name is not None and path_name in canon
        canon.pop(path_name, None)
        groups[json.dumps(canon, sort_keys=True)] = keeps_path
    cells = sum(path_count if keeps else 1 for keeps in groups.values())
    return ModelCount(cells, len(groups), bound)


def expand_spec(spec, *, data_sha256: str, plan_identity: dict,
                resolve_path: PathResolver | None = None,
                n_features: int | None = None, task: str = "regression",
                versions: dict | None = None, problem: dict | None = None) -> list[Cell]:
    """Every cell of every model in the spec, models in spec order."""
    cells = []
    for label, model in spec.models.items():
        cells.extend(expand_model(label, model, data_sha256=data_sha256,
                                  plan_identity=plan_identity, resolve_path=resolve_path,
                                  n_features=n_features, task=task, versions=versions,
                                  problem=problem))
    return cells

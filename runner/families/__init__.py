"""The family catalogue: which hyperparameters each model family takes, their defaults and
their complexity direction. Pure data, no scikit-learn, so the spec can validate against it
cheaply; `load_family` imports a family's estimator module only when a sweep needs it."""

from __future__ import annotations

import difflib
import importlib
from dataclasses import dataclass, field
from typing import Any

__all__ = ["FAMILIES", "Family", "Param", "load_family", "nearest", "check_param_value"]


@dataclass(frozen=True)
class Param:
    """One hyperparameter: its kind, default and which direction makes a model simpler."""

    name: str
    kind: str  # "float", "int", "choice", "bool", "max_features"
    default: Any
    choices: tuple = ()
    minimum: float | None = None
    maximum: float | None = None
    min_inclusive: bool = True
    allow_none: bool = False
    simpler: str | None = None  # "higher" or "lower": which values give the simpler model
    help: str = ""


@dataclass(frozen=True)
class Family:
    """A model family: its parameters and the order in which they decide complexity."""

    name: str
    module: str
    params: dict[str, Param]
    complexity_order: tuple[str, ...]
    description: str = ""
    path_params: tuple[str, ...] = field(default=())


def _params(*items: Param) -> dict[str, Param]:
    return {p.name: p for p in items}


FAMILIES: dict[str, Family] = {
    "linear": Family(
        name="linear",
        module="runner.families.linear",
        description="Least squares, ridge, lasso or elastic net after imputation, "
        "one-hot encoding and standardisation.",
        params=_params(
            Param("penalty", "choice", "none", choices=("none", "l2", "l1", "elasticnet"),
                  help="none = ordinary least squares; l2 = ridge; l1 = lasso; elasticnet = both"),
            Param("alpha", "float", 1.0, minimum=0.0, min_inclusive=False, simpler="higher",
                  help="penalty strength (ignored when penalty is none)"),
            Param("l1_ratio", "float", 0.5, minimum=0.0, maximum=1.0,
                  help="share of the l1 penalty in the elastic net"),
        ),
        complexity_order=("penalty", "alpha"),
        path_params=("alpha",),
    ),
    "pruned_tree": Family(
        name="pruned_tree",
        module="runner.families.pruned_tree",
        description="A regression tree pruned by cost complexity.",
        params=_params(
            Param("ccp_alpha", "float", 0.0, minimum=0.0, simpler="higher",
                  help="cost-complexity pruning strength, as in scikit-learn"),
            Param("ccp_fraction", "float", None, minimum=0.0, allow_none=True, simpler="higher",
                  help="ccp_alpha as a fraction of the root node's mean squared error"),
            Param("min_samples_leaf", "int", 1, minimum=1, simpler="higher"),
            Param("max_depth", "int", None, minimum=1, allow_none=True, simpler="lower"),
            Param("max_features", "max_features", None, allow_none=True, simpler="lower"),
        ),
        complexity_order=("ccp_alpha", "ccp_fraction", "min_samples_leaf", "max_depth",
                          "max_features"),
        path_params=("ccp_alpha", "ccp_fraction"),
    ),
    "forest": Family(
        name="forest",
        module="runner.families.forest",
        description="A random forest of regression trees.",
        params=_params(
            Param("n_estimators", "int", 100, minimum=1, simpler="lower",
                  help="number of trees (does not change complexity; fewer is cheaper)"),
            Param("max_features", "max_features", 1.0, allow_none=True, simpler="lower"),
            Param("min_samples_leaf", "int", 1, minimum=1, simpler="higher"),
            Param("max_depth", "int", None, minimum=1, allow_none=True, simpler="lower"),
            Param("max_samples", "float", None, minimum=0.0, maximum=1.0, min_inclusive=False,
                  allow_none=True),
            Param("bootstrap", "bool", True),
        ),
        complexity_order=("min_samples_leaf", "max_features", "max_depth", "n_estimators"),
        path_params=("n_estimators",),
    ),
}


def nearest(name: str, candidates) -> str:
    """A ' Did you mean ...?' hint naming the closest candidate, or ''."""
    close = difflib.get_close_matches(name, list(candidates), n=1, cutoff=0.5)
    return f" Did you mean '{close[0]}'?" if close else ""


def check_param_value(param: Param, value: Any) -> Any:
    """Return the canonical value for one grid entry, or raise ValueError saying why not."""
    if value is None:
        if param.allow_none:
            return None
        raise ValueError(f"{param.name} cannot be null")
    if param.kind == "choice":
        if isinstance(value, str) and value in param.choices:
            return value
        raise ValueError(f"{param.name} must be one of {', '.join(param.choices)}, got {value!r}")
    if param.kind == "bool":
        if isinstance(value, bool):
            return value
        raise ValueError(f"{param.name} must be true or false, got {value!r}")
    if param.kind == "max_features":
        if isinstance(value, str):
            if value in ("sqrt", "log2"):
                return value
            raise ValueError(f"{param.name} must be a fraction in (0, 1], a whole number of "
                             f"features, 'sqrt' or 'log2', got {value!r}")
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ValueError(f"{param.name} must be a number or 'sqrt'/'log2', got {value!r}")
        if isinstance(value, int):
            if value < 1:
                raise ValueError(f"{param.name} as a count must be >= 1, got {value}")
            return value
        if not 0.0 < value <= 1.0:
            raise ValueError(f"{param.name} as a fraction must be in (0, 1], got {value}")
        return float(value)
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ValueError(f"{param.name} must be a number, got {value!r}")
    if param.kind == "int":
        if float(value) != int(value):
            raise ValueError(f"{param.name} must be a whole number, got {value!r}")
        value = int(value)
    else:
        value = float(value)
    if value != value or value in (float("inf"), float("-inf")):
        raise ValueError(f"{param.name} must be finite, got {value!r}")
    if param.minimum is not None:
        if value < param.minimum or (not param.min_inclusive and value == param.minimum):
            op = ">=" if param.min_inclusive else ">"
            raise ValueError(f"{param.name} must be {op} {param.minimum:g}, got {value!r}")
    if param.maximum is not None and value > param.maximum:
        raise ValueError(f"{param.name} must be <= {param.maximum:g}, got {value!r}")
    return value


_LOADED: dict[str, Any] = {}


def load_family(name: str):
    """Import and return the estimator module of a family (it imports scikit-learn)."""
    if name not in FAMILIES:
        raise KeyError(f"unknown family '{name}'")
    if name not in _LOADED:
        _LOADED[name] = importlib.import_module(FAMILIES[name].module)
    return _LOADED[name]

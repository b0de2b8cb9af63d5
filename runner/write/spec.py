"""The spec: one YAML file read with a safe loader and validated by pydantic.

Errors name the file, the line, the field path and, for misspelt names, the nearest valid
one. Paths inside the spec resolve relative to the spec file."""

from __future__ import annotations

import hashlib
import itertools
import math
from pathlib import Path
from typing import Any, Literal

import yaml
from pydantic import (BaseModel, ConfigDict, Field, ValidationError, field_validator,
                      model_validator)

from ..errors import SpecError
from ..families import FAMILIES, check_param_value
from ..names import nearest
from ..metrics import METRICS, TASK_DEFAULTS
from .findings import KINDS
from .spec_yaml import (MAX_DEPTH, MAX_NODES, MAX_SPEC_BYTES, UniqueKeyLoader, line_map,
                        shape_problem)

__all__ = ["Spec", "ModelSpec", "Limits", "load_spec", "parse_spec", "spec_json_schema",
           "LogRange", "LinearRange", "PathRange", "MAX_SPEC_BYTES", "MAX_DEPTH", "MAX_NODES",
           "MAX_SEED", "MAX_RANGE_N", "FoldPlan", "TestSplit", "Checks", "SCHEMES",
           "implied_scheme"]

MAX_SEED = 2**32 - 1
"""numpy's and scikit-learn's random_state take 0 ... 2**32 - 1."""
MAX_RANGE_N = 1_000_000
"""Most values one {log: ..., n: N} or {linear: ..., n: N} range, or {path: N}, may ask for."""


class _FieldProblem(ValueError):
    """A cross-field check's complaint about one field, so the message gives that field's
    line rather than the line of the section whose validator found it."""

    def __init__(self, field: str | tuple, message: str):
        super().__init__(message)
        self.loc = tuple(field.split(".")) if isinstance(field, str) else field


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class DataSpec(_Strict):
    """Where the rows are and which column is the target."""

    path: str = Field(description="CSV or Parquet file, relative to the spec file")
    target: str = Field(description="the column to predict (numeric)")
    drop: list[str] = Field(default_factory=list, description="columns never used as features")
    categorical: list[str] = Field(
        default_factory=list,
        description="columns treated as categories; text and boolean columns always are")
    infinite: Literal["refuse", "missing"] = Field(
        "refuse", description="infinite feature values: refuse the data (default) or treat "
        "them as missing values")
    missing_words: list[str] | None = Field(
        None, description="the words read as missing values in the CSV files the sweep "
        "reads (the data, a test file, and the new rows given to a model it builds), in "
        "place of pandas' default list ('NA', 'None', 'null', 'NaN', 'N/A', ...); an empty "
        "field is always missing, so [] keeps every word as written. Left out: pandas' "
        "list. Not for Parquet, whose missing values are nulls")

    @field_validator("missing_words", mode="before")
    @classmethod
    def _words_are_text(cls, v):
        for word in v if isinstance(v, list) else []:
            if not isinstance(word, str):
                raise ValueError(
                    f"missing_words lists words as text, got {word!r}: YAML reads null, ~, "
                    "true, false, yes, no and numbers as other values, so quote each word "
                    "as written in the file (e.g. ['null', '-999'])")
        return sorted(set(v)) if isinstance(v, list) else v  # one form, whatever the order

    @model_validator(mode="after")
    def _roles_do_not_clash(self):
        if self.target in self.categorical:
            raise ValueError(f"the target '{self.target}' is listed in categorical, which names "
                             "feature columns. Remove it from data.categorical; to treat a "
                             "numeric target as classes, set `task: classification`")
        both = [c for c in self.categorical if c in self.drop]
        if both:
            raise ValueError(f"column(s) {', '.join(map(repr, both))} are listed in both drop and "
                             "categorical; a dropped column is never a feature, so remove it "
                             "from one of the two lists")
        return self


class TestSplit(_Strict):
    """The held-out test rows: a random fraction, a separate file, or a boolean column."""

    fraction: float | None = Field(None, gt=0.0, lt=1.0, description="share of rows held out")
    seed: int = Field(0, ge=0, le=MAX_SEED, description="random_state of the test split "
                      "(0 ... 2**32 - 1)")
    groups: str | None = Field(None, description="with fraction: hold out this share of the "
                               "groups this column names, whole (default: folds.groups)")
    file: str | None = Field(None, description="a separate test file with the same columns")
    column: str | None = Field(None, description="a boolean column: true marks test rows")

    @model_validator(mode="after")
    def _exactly_one_form(self):
        given = [n for n in ("fraction", "file", "column") if getattr(self, n) is not None]
        if len(given) != 1:
            raise ValueError("give exactly one of fraction, file or column "
                             f"(got {', '.join(given) or 'none'})")
        if self.groups is not None and self.fraction is None:
            raise ValueError("groups holds out a fraction of the groups, so it needs "
                             "test.fraction; a test file or column already says which rows "
                             "are test rows")
        return self


SCHEMES = ("rows", "groups", "time")
"""How folds cut the training rows: at random by row, by whole groups, or in time order."""


def implied_scheme(folds: "FoldPlan") -> str:
    """The scheme a fold plan asks for: as written, else implied by its column."""
    if folds.scheme is not None:
        return folds.scheme
    return "groups" if folds.groups is not None else "time" if folds.order is not None \
        else "rows"


class FoldPlan(_Strict):
    """How the training rows are cut into validation folds: repeated k-fold over rows,
    repeated k-fold over whole groups, or expanding windows in time order."""

    scheme: Literal["rows", "groups", "time"] | None = Field(
        None, description="rows (default), groups (needs groups) or time (needs order); "
        "implied by groups or order when left out")
    k: int = Field(5, ge=2, description="folds per repeat")
    repeats: int = Field(1, ge=1, description="how many times the k folds are redrawn "
                         "(time-ordered folds: 1)")
    seed: int = Field(0, ge=0, le=MAX_SEED, description="random_state of the folds "
                      "(0 ... 2**32 - 1); estimator seeds derive from it")
    groups: str | None = Field(None, description="a column naming groups (plant, bay, "
                               "patient, site, batch): every group's rows fall on one side of "
                               "every split; not a feature unless listed in data.categorical")
    order: str | None = Field(None, description="a column of numbers or ISO dates: folds "
                              "fit on earlier values and validate on later ones")
    gap: int = Field(0, ge=0, le=MAX_RANGE_N, description="time-ordered folds: distinct "
                     "values of `order` left out between the fitting and validation rows "
                     "(and before the test split)")

    @model_validator(mode="after")
    def _one_scheme(self):
        if self.groups is not None and self.order is not None:
            raise ValueError("give groups (grouped folds) or order (time-ordered folds), "
                             "not both")
        scheme = implied_scheme(self)
        needs = {"groups": "groups", "time": "order"}
        for name, column in needs.items():
            if scheme == name and getattr(self, column) is None:
                raise ValueError(f"scheme {name} needs folds.{column}: the column "
                                 + ("whose values name the groups" if name == "groups" else
                                    "whose values give the time order"))
        for name, column in needs.items():
            if scheme != name and getattr(self, column) is not None:
                raise ValueError(f"{column} belongs to scheme {name}, but the scheme is "
                                 f"{scheme}; remove {column} or set scheme: {name}")
        if scheme == "time" and self.repeats > 1:
            raise ValueError(f"time-ordered folds cannot be redrawn, so repeats must be 1 "
                             f"(got repeats={self.repeats}); remove repeats, or use scheme "
                             "rows or groups to repeat folds")
        if scheme != "time" and self.gap:
            raise ValueError(f"gap is for time-ordered folds (scheme time with order); the "
                             f"scheme here is {scheme}, so remove gap")
        return self


def _finite_bounds(v):
    if not all(math.isfinite(b) for b in v):
        raise ValueError(f"range bounds must be finite numbers, got {list(v)}")
    return v


class LogRange(_Strict):
    """`n` values spaced evenly on a log scale from lo to hi."""

    log: tuple[float, float]
    n: int = Field(ge=1, le=MAX_RANGE_N)

    @field_validator("log")
    @classmethod
    def _positive(cls, v):
        _finite_bounds(v)
        if v[0] <= 0 or v[1] <= 0:
            raise ValueError(f"log range bounds must both be > 0, got {list(v)}")
        return v


class LinearRange(_Strict):
    """`n` values spaced evenly from lo to hi."""

    linear: tuple[float, float]
    n: int = Field(ge=1, le=MAX_RANGE_N)

    @field_validator("linear")
    @classmethod
    def _finite(cls, v):
        return _finite_bounds(v)


class PathRange(_Strict):
    """`n` values spread along the cost-complexity pruning path (pruned_tree only)."""

    path: int = Field(ge=1, le=MAX_RANGE_N)


_RANGE_FORMS = {"log": LogRange, "linear": LinearRange, "path": PathRange}


def _data_path_params() -> str:
    """'ccp_alpha of the pruned_tree family': where {path: N} may be used."""
    return " and ".join(f"{p.name} of the {f.name} family" for f in FAMILIES.values()
                        for p in f.params.values() if p.data_path)


def _grid_form(name: str, value: Any):
    """Resolve one grid entry to a list of values or a range object (the canonical forms)."""
    if isinstance(value, dict):
        kind = next((k for k in _RANGE_FORMS if k in value), None)
        if kind is None:
            raise ValueError(f"grid.{name}: a mapping must be {{log: [lo, hi], n: N}}, "
                             f"{{linear: [lo, hi], n: N}} or {{path: N}}; got keys "
                             f"{', '.join(map(str, value))}")
        try:
            return _RANGE_FORMS[kind].model_validate(value)
        except ValidationError as exc:
            detail = "; ".join(e["msg"].removeprefix("Value error, ") + f" ({'.'.join(map(str, e['loc']))})"
                               for e in exc.errors())
            raise ValueError(f"grid.{name}: bad {kind} range: {detail}") from None
    if isinstance(value, list):
        for v in value:
            if isinstance(v, (list, dict)):
                raise ValueError(f"grid.{name}: list items must be single values, got {v!r}")
        return value
    return [value]


class ModelSpec(_Strict):
    """A labelled model: a family and a grid of its hyperparameters."""

    family: str = Field(description="linear, pruned_tree or forest")
    grid: dict[str, Any] = Field(default_factory=dict,
                                 description="hyperparameter -> list of values, "
                                 "{log: [lo, hi], n: N}, {linear: [lo, hi], n: N} or {path: N}")
    simpler: dict[str, Literal["higher", "lower"]] = Field(
        default_factory=dict,
        description="override which direction of a parameter gives the simpler model")

    @field_validator("family")
    @classmethod
    def _known_family(cls, v):
        if v not in FAMILIES:
            raise ValueError(f"unknown family '{v}'; valid families: "
                             f"{', '.join(FAMILIES)}.{nearest(v, FAMILIES)}")
        return v

    @model_validator(mode="after")
    def _known_params(self):
        family = FAMILIES[self.family]
        for name in list(self.grid) + list(self.simpler):
            if name not in family.params:
                raise ValueError(
                    f"unknown hyperparameter '{name}' for family '{self.family}'; valid names: "
                    f"{', '.join(family.params)}.{nearest(name, family.params)}")
        canonical = {}
        for name, value in self.grid.items():
            param = family.params[name]
            value = _grid_form(name, value)
            if isinstance(value, PathRange):
                if not param.data_path:
                    raise ValueError(f"grid.{name}: {{path: N}} is only for "
                                     f"{_data_path_params()}")
                canonical[name] = value
            elif isinstance(value, (LogRange, LinearRange)):
                if param.kind not in ("float", "int"):
                    raise ValueError(f"grid.{name}: a range needs a numeric parameter; "
                                     f"give a list of values instead")
                lo, hi = value.log if isinstance(value, LogRange) else value.linear
                for bound in (lo, hi):
                    check_param_value(param, int(round(bound)) if param.kind == "int" else bound)
                canonical[name] = value
            else:
                values = value
                if not values:
                    raise ValueError(f"grid.{name} is an empty list; give at least one value")
                try:
                    canonical[name] = [check_param_value(param, v) for v in values]
                except ValueError as exc:
                    raise ValueError(f"grid.{exc}") from None
        if "ccp_alpha" in self.grid and "ccp_fraction" in self.grid:
            raise ValueError("give ccp_alpha or ccp_fraction in the grid, not both")
        self.grid = canonical
        return self


def _value_count(value) -> int:
    if isinstance(value, (LogRange, LinearRange)):
        return value.n
    return 1 if isinstance(value, PathRange) else len(value)


def _unused_params(family, grid: dict) -> list[str]:
    """Grid parameters of several values that no combination of the grid's choices lets
    matter (alpha with only penalty none; l1_ratio without elasticnet): the family drops
    them, so the values a user meant to tune would silently give one cell."""
    switches = [n for n, v in grid.items()
                if isinstance(v, list) and family.params[n].kind in ("choice", "bool")]
    sample = {}
    for name, value in grid.items():
        if isinstance(value, (LogRange, LinearRange)):
            sample[name] = (value.log if isinstance(value, LogRange) else value.linear)[0]
        elif isinstance(value, list):
            sample[name] = next((v for v in value if v is not None), None)
    unused = []
    for name in grid:
        if name in switches or name not in sample or _value_count(grid[name]) < 2 \
                or not family.params[name].counts_when:
            continue
        if not any(family.canonical({**sample, **dict(zip(switches, combo))}).get(name)
                   == sample[name]
                   for combo in itertools.product(*(grid[s] for s in switches))):
            unused.append(name)
    return unused


class PermutationPlan(_Strict):
    """How permutation importance shuffles each column on the test split."""

    repeats: int = Field(5, ge=1, description="shuffles per column")
    seed: int = Field(0, ge=0, le=MAX_SEED, description="random_state of the shuffles "
                      "(0 ... 2**32 - 1)")
    rows: int = Field(5000, ge=100, le=1_000_000, description="test rows drawn for each "
                      "column's shuffles (scikit-learn's max_samples; 100 ... 1000000, "
                      "default 5000); a test split of no more rows is used whole")


class ExplainPlan(_Strict):
    """Which cells get importances, tree stability and stored test predictions after a sweep."""

    cells: Literal["picked", "all", "none"] = Field(
        "picked", description="picked = each model's best and one-SE cells; all; or none")
    permutation: PermutationPlan = Field(default_factory=PermutationPlan)


class Limits(_Strict):
    """Ceilings on a sweep's size, checked by arithmetic before any data are read or any
    array is built; raise one here, or lift them all with `--lift-limits`."""

    cells: int = Field(10_000, ge=1, description="grid cells over all models")
    folds: int = Field(500, ge=1, description="validation folds, k x repeats")
    fits: int = Field(250_000, ge=1, description="fits per fold and refit (folds + 1): one "
                      "per path group and one per other cell; with --no-paths, cells x "
                      "(folds + 1)")
    data_mb: float = Field(1024.0, gt=0, description="size of the data file (and of the "
                           "test file) in MiB")
    plan_mb: float = Field(2048.0, gt=0, description="memory for the folds' row positions "
                           "(8 bytes x training rows x folds), in MiB")


class Checks(_Strict):
    """The leakage checks run by `check` and `run`: which findings are accepted."""

    allow: list[str] = Field(default_factory=list, description="finding kinds accepted "
                             "knowingly: an allowed error no longer stops the sweep, an "
                             "allowed warning is still listed, marked allowed. Kinds: " +
                             ", ".join(KINDS))

    @field_validator("allow")
    @classmethod
    def _known_kinds(cls, v):
        for name in v:
            if name not in KINDS:
                raise ValueError(f"unknown check '{name}'; the checks are "
                                 f"{', '.join(KINDS)}.{nearest(name, KINDS)}")
        return v


class Spec(_Strict):
    """A whole sweep: data, test split, folds, metrics, store and models."""

    name: str = Field(description="a short name for the sweep")
    description: str | None = None
    data: DataSpec
    test: TestSplit
    task: Literal["regression", "classification"] | None = Field(
        None, description="regression (a numeric target) or classification (its classes); "
        "default: classification for a text, boolean or categorical target, else regression")
    folds: FoldPlan = Field(default_factory=FoldPlan)
    metrics: list[str] | None = Field(
        None, description="the first one decides picks; default rmse, mae, r2 for regression "
        "and log_loss, brier, roc_auc, accuracy for classification")
    pick: Literal["best", "one_se"] = Field("one_se", description="the default pick rule")
    store: str | None = Field(None, description="DuckDB file, relative to the spec file, or "
                              "a team store's postgresql://USER@HOST[:PORT]/DATABASE")
    jobs: int | None = Field(None, ge=-1, description="parallel workers (-1 or none: every "
                             "core; more than the cores available is capped)")
    limits: Limits = Field(default_factory=Limits,
                           description="ceilings on the sweep's size (see `foldwise check`)")
    explain: ExplainPlan = Field(default_factory=ExplainPlan,
                                 description="importances and tree stability after the sweep")
    checks: Checks = Field(default_factory=Checks,
                           description="leakage checks: which findings are accepted")
    models: dict[str, ModelSpec] = Field(min_length=1)

    @model_validator(mode="after")
    def _plan_columns(self):
        scheme = implied_scheme(self.folds)
        if scheme == "time" and self.test.groups is not None:
            raise _FieldProblem("test.groups", "it does not go with time-ordered "
                                "folds: their test split is the last fraction in "
                                "folds.order; remove test.groups")
        for field, column in (("folds.groups", self.folds.groups),
                              ("folds.order", self.folds.order),
                              ("test.groups", self.test.groups)):
            if column is not None and column == self.data.target:
                raise _FieldProblem(field, f"it names the target '{column}'; name the "
                                    "column that holds the groups or the time order instead")
        return self

    @field_validator("store")
    @classmethod
    def _store_without_password(cls, v):
        from ..store.locations import is_server_url, url_problem

        if v is not None and is_server_url(v) and url_problem(v):
            raise ValueError(url_problem(v))
        return v

    @field_validator("metrics")
    @classmethod
    def _known_metrics(cls, v):
        if v is None:
            return v
        if not v:
            raise ValueError("list at least one metric")
        for m in v:
            if m not in METRICS:
                raise ValueError(f"unknown metric '{m}'; valid metrics: "
                                 f"{', '.join(METRICS)}.{nearest(m, METRICS)}")
        if len(set(v)) != len(v):
            raise ValueError("a metric is listed twice")
        return v

    @field_validator("models")
    @classmethod
    def _labels(cls, v):
        for label in v:
            if not isinstance(label, str) or not label.strip():
                raise ValueError("model labels must be non-empty text")
        return v

    @model_validator(mode="after")
    def _every_grid_parameter_counts(self):
        for label, model in self.models.items():
            family = FAMILIES[model.family]
            for name in _unused_params(family, model.grid):
                where, entry = family.params[name].counts_when
                raise _FieldProblem(
                    ("models", label, "grid", name),
                    f"{name} counts only where {where}, and no cell of this grid has that, "
                    f"so its {_value_count(model.grid[name])} values would give one cell. "
                    f"Add one to the grid (e.g. `{entry}`), or drop {name}")
        return self

    @model_validator(mode="after")
    def _fits_its_task(self):
        if self.task is not None:
            problem = self._task_problem_at(self.task)
            if problem:
                loc, why = problem
                raise _FieldProblem(loc, why if loc[0] == "metrics" else f"it is {why}")
        return self

    def task_problem(self, task: str) -> str | None:
        """Why this spec's metrics or grids do not suit `task` (None if they do)."""
        problem = self._task_problem_at(task)
        if problem is None:
            return None
        loc, why = problem
        return why if loc[0] == "metrics" else f"{'.'.join(loc)} is {why}"

    def _task_problem_at(self, task: str) -> tuple[tuple, str] | None:
        """The field whose metric or grid does not suit `task`, and why."""
        for i, m in enumerate(self.metrics or []):
            if METRICS[m].task != task:
                fits = [n for n, r in METRICS.items() if r.task == task]
                return (("metrics", i),
                        f"metric '{m}' scores {METRICS[m].task}, but this sweep is {task}; "
                        f"its metrics are {', '.join(fits)}")
        for label, model in self.models.items():
            family = FAMILIES[model.family]
            for name in model.grid:
                if task not in family.params[name].tasks:
                    return (("models", label, "grid", name),
                            f"a {family.params[name].tasks[0]} parameter of the "
                            f"{model.family} family, but this sweep is {task}")
        return None

    def settle_task(self, task: str) -> None:
        """Once the task is known (stated or read off the target): its default metrics if the
        spec lists none."""
        if self.metrics is None:
            self.metrics = list(TASK_DEFAULTS[task])

    # Set after loading; not part of the YAML.
    _source: Path | None = None
    _text: str = ""

    @property
    def source(self) -> Path | None:
        return self._source

    @property
    def text(self) -> str:
        return self._text

    @property
    def plan_columns(self) -> dict[str, str]:
        """The data columns the plan reads, by the field that names them: never features
        unless also listed in data.categorical."""
        named = {"folds.groups": self.folds.groups, "folds.order": self.folds.order,
                 "test.groups": self.test.groups}
        return {field: column for field, column in named.items() if column is not None}

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self._text.encode()).hexdigest()

    @property
    def base_dir(self) -> Path:
        return self._source.parent if self._source else Path.cwd()

    def resolve(self, relative: str) -> Path:
        """A path from the spec, resolved against the spec file's folder."""
        p = Path(relative).expanduser()
        return p if p.is_absolute() else (self.base_dir / p)



def _describe(exc: ValidationError, lines: dict[tuple, int], where: str) -> str:
    parts = []
    for err in exc.errors():
        loc = tuple(x for x in err["loc"] if not (isinstance(x, str) and (
            x.startswith(("list[", "LogRange", "LinearRange", "PathRange", "function-"))
            or x in ("bool", "int", "float", "str", "none"))))
        cause = err.get("ctx", {}).get("error")
        if isinstance(cause, _FieldProblem):
            loc += cause.loc
        field = ".".join(str(x) for x in loc) or "(top level)"
        line = None
        for n in range(len(loc), -1, -1):
            if loc[:n] in lines:
                line = lines[loc[:n]]
                break
        msg = err["msg"].removeprefix("Value error, ")
        if err["type"] == "extra_forbidden":
            parent = loc[:-1]
            valid = _valid_keys(parent)
            msg = f"unknown field '{loc[-1]}'"
            if valid:
                hint = _home_of(str(loc[-1]), parent) or nearest(str(loc[-1]), valid)
                msg += f"; valid fields here: {', '.join(valid)}.{hint}"
        elif err["type"] == "missing":
            msg = "this required field is missing"
        elif err["type"] == "list_type" and isinstance(err.get("input"), str):
            msg = (f"expects a list, got the text {err['input']!r}; write it in brackets: "
                   f"[{err['input']}]")
        elif msg.startswith("Input should") and _short(err.get("input")):
            msg += f", got {err['input']!r}"
        at = f"line {line}, " if line else ""
        parts.append(f"{at}{field}: {msg}")
    body = "; ".join(p.rstrip(".") for p in dict.fromkeys(parts))
    return (f"{where} does not validate: {body}{' ' if body.endswith('?') else '. '}Fix the "
            "field(s) named and run `foldwise check` again (`foldwise schema` prints every "
            "field).")


def _short(value) -> bool:
    """Whether a value is worth quoting in a message: a scalar, or a short list of them."""
    if isinstance(value, (str, int, float, bool)):
        return True
    return isinstance(value, list) and len(repr(value)) <= 60 and all(
        isinstance(v, (str, int, float, bool)) for v in value)


def _home_of(name: str, parent: tuple) -> str:
    """Where a field written in the wrong section belongs (`task` under `data`, `groups` at
    the top): the spec's top level or the sections that hold it; '' when none does."""
    homes = [home for home in [()] + [(k,) for k in _valid_keys(())]
             if home != parent and name in _valid_keys(home)]
    if not homes:
        return ""
    where = " or ".join(f"section '{h[0]}'" if h else "the spec's top level" for h in homes)
    return f" '{name}' is a field of {where}: move it there."


def _valid_keys(parent: tuple) -> list[str]:
    model: Any = Spec
    for part in parent:
        if model is Spec and part == "models":
            model = dict
            continue
        if model is dict:
            model = ModelSpec
            continue
        field = getattr(model, "model_fields", {}).get(part)
        if field is None:
            return []
        ann = field.annotation
        model = ann if isinstance(ann, type) and issubclass(ann, BaseModel) else None
        if model is None:
            return []
    if model is dict or model is None:
        return []
    return list(model.model_fields)


def parse_spec(text: str, *, source: Path | None = None) -> Spec:
    """Validate spec text; `source` (the file) is used for messages and relative paths."""
    where = f"spec {source}" if source else "the spec"
    if len(text) > MAX_SPEC_BYTES:
        raise SpecError(f"{where} is {len(text):,} characters long; foldwise reads specs of at "
                        f"most {MAX_SPEC_BYTES // 1024} KiB. A spec lists models and grids, not "
                        "data: put data in the file that `data.path` names.")
    problem = shape_problem(text)
    if problem:
        raise SpecError(f"{where} is refused before it is built: {problem}.")
    try:
        node = yaml.compose(text, Loader=yaml.SafeLoader)
        raw = yaml.load(text, Loader=UniqueKeyLoader)
    except SpecError as exc:
        raise SpecError(f"{where}: {exc}") from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise SpecError(f"{where} is not valid YAML{line}: {problem}. Check the indentation "
                        "and quoting near that line.") from None
    except (ValueError, OverflowError) as exc:  # e.g. an integer with thousands of digits
        first = (str(exc).splitlines() or [type(exc).__name__])[0].split(";")[0]
        raise SpecError(f"{where} holds a value foldwise cannot read ({first}). Write numbers "
                        "with at most a few dozen digits.") from None
    if not isinstance(raw, dict):
        raise SpecError(f"{where} must be a YAML mapping with keys such as name, data, test, "
                        f"folds, metrics and models; got {type(raw).__name__}.")
    lines = line_map(node) if node is not None else {}
    try:
        spec = Spec.model_validate(raw)
    except ValidationError as exc:
        raise SpecError(_describe(exc, lines, where)) from None
    spec._source = source
    spec._text = text
    return spec


def load_spec(path: str | Path) -> Spec:
    """Read and validate a spec file (a regular file of at most MAX_SPEC_BYTES)."""
    path = Path(path)
    if not path.is_file():
        what = "is not a regular file" if path.exists() else "does not exist"
        raise SpecError(f"spec file {path} {what}. Give the path of a YAML spec, "
                        "e.g. specs/greenhouse.yaml.")
    try:
        with open(path, "rb") as fh:
            data = fh.read(MAX_SPEC_BYTES + 1)
        if len(data) > MAX_SPEC_BYTES:
            raise SpecError(f"spec file {path} is larger than {MAX_SPEC_BYTES // 1024} KiB, "
                            "the most foldwise reads. A spec lists models and grids, not data: "
                            "put data in the file that `data.path` names.")
        text = data.decode("utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"spec file {path} cannot be read as UTF-8 text ({exc}). "
                        "Save it as UTF-8 YAML.") from None
    return parse_spec(text, source=path.resolve())


def spec_json_schema() -> dict:
    """The JSON Schema of a spec, for editors that complete and check YAML."""
    schema = Spec.model_json_schema()
    schema["title"] = "foldwise spec"
    families = {name: sorted(f.params) for name, f in FAMILIES.items()}
    schema["description"] = ("A foldwise sweep. Valid grid names per family: " +
                             "; ".join(f"{k}: {', '.join(v)}" for k, v in families.items()))
    return schema

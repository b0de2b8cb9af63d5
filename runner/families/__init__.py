"""The family objects: everything foldwise knows about each model family in one record —
its hyperparameters and defaults, their complexity order, which of them one fit can sweep,
what the explain step reads from a fitted model, and how the family is described. Records
are pure data (no scikit-learn), so the spec validates against them cheaply; each family's
estimator module (`Family.estimators`) is imported only when something is fitted."""

from __future__ import annotations

import importlib
import math
from dataclasses import dataclass, field
from typing import Any, Callable

__all__ = ["FAMILIES", "Family", "Param", "get_family", "load_family",
           "check_param_value", "READABLE_LEAVES", "READABLE_COEFFICIENTS"]


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
    none_rank: float = 0.0  # where null sits among the values when ranking complexity
    choice_rank: tuple = ()  # (choice, rank) pairs for a "choice" parameter
    data_path: bool = False  # takes {path: N}: values read off the data's pruning path
    tasks: tuple = ("regression", "classification")  # the tasks it applies to
    task_defaults: tuple = ()  # (task, default) pairs where a task's default differs
    counts_when: tuple = ()  # (where the family's other parameters let it matter, in words;
    #                           a grid entry that makes it matter), e.g. alpha needs a penalty

    def default_for(self, task: str):
        return dict(self.task_defaults).get(task, self.default)

    def rank(self, value, n_features: int | None) -> float:
        """A number that orders this parameter's values (the direction is `simpler`)."""
        if value is None:
            return self.none_rank
        if self.kind == "choice":
            return float(dict(self.choice_rank).get(value, 0.0))
        if isinstance(value, str):  # max_features 'sqrt' / 'log2' as a share of the columns
            n = n_features or 100
            return (math.log2(n) if value == "log2" else math.sqrt(n)) / n
        if self.kind == "max_features" and isinstance(value, int):
            return value / (n_features or 100)
        return float(f"{float(value):.12g}")  # values equal in meaning rank equal


@dataclass(frozen=True)
class Family:
    """A model family: its parameters, how they order complexity, which of them one fit can
    sweep (`path_params`), what the explain step reads from a fitted model, and how it is
    described. The estimators themselves live in `module`, imported only when needed."""

    name: str
    module: str
    params: dict[str, Param]
    complexity_order: tuple[str, ...]
    description: str = ""
    path_params: tuple[str, ...] = field(default=())
    path_tasks: tuple[str, ...] = ("regression", "classification")  # where one fit sweeps them
    importance: str = "impurity"  # the fitted model's own importance: impurity/coefficient
    one_tree: bool = False  # the fitted model is one tree: leaves, shape and nodes are kept
    readable_size: int | None = None  # the largest fitted model a person reads whole
    size_word: str = ""  # what that size counts, e.g. "leaves"
    size_param: str | None = None  # a parameter that states the size (a forest's trees)
    plural: str = "models"  # what its fitted models are called, e.g. "forests"
    explain_cost: float = 1.0  # a refit's rough cost, to start the slowest first
    tidy: Callable[[dict], None] | None = None  # drops what cannot matter, in place
    coefficients: bool = False  # the fitted model has one coefficient per input column
    unseen_category: str = "treated as a missing value"  # what its pipeline does with a
    #                                                      category it never saw
    saved_types: tuple[str, ...] = ()  # classes its saved pipelines hold beyond the shared
    #                                    preprocessing (runner/model/artefact.py trusts them)

    @property
    def defaults(self) -> dict[str, Any]:
        return {name: p.default for name, p in self.params.items()}

    def defaults_for(self, task: str) -> dict[str, Any]:
        """The defaults of the parameters that apply to `task`."""
        return {name: p.default_for(task) for name, p in self.params.items()
                if task in p.tasks}

    def size_text(self, n) -> str:
        """'79 leaves', '1 non-zero coefficient' ('' when unknown)."""
        if n is None or n != n or not self.size_word:
            return ""
        word = self.size_word[:-1] if round(n) == 1 and self.size_word.endswith("s") else \
            self.size_word
        return f"{round(n)} {word}"

    def readable(self, n) -> bool | None:
        """Whether a fitted model of this size can be read whole: True, False, or None
        when its size is not known (a family without `readable_size` never is)."""
        if self.readable_size is None:
            return False
        if n is None or n != n:
            return None
        return round(n) <= self.readable_size

    @property
    def estimators(self):
        """The module that builds and fits this family's estimators (imports scikit-learn)."""
        return load_family(self.name)

    def fit_pipeline(self, params: dict, X, y, *, seed: int, numeric, categorical,
                     task: str = "regression"):
        """This cell's whole pipeline fitted on (X, y) with `seed`, exactly as the sweep
        fits it; returns (pipeline, warnings raised while fitting)."""
        import warnings

        est = self.estimators.make_estimator(params, seed=seed, y_fit=y, numeric=numeric,
                                             categorical=categorical, task=task)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            est.fit(X, y)
        return est, [str(w.message) for w in caught
                     if not issubclass(w.category, (DeprecationWarning, FutureWarning))]

    def prediction_columns(self, pipeline, X) -> dict:
        """What a fitted pipeline of this family predicts for the rows X, as named columns:
        `predicted` for numbers; for classes `predicted_class` (the most probable) and one
        `probability_<class>` column per class."""
        return self.estimators.prediction_columns(pipeline, X)

    def canonical(self, params: dict, task: str = "regression") -> dict:
        """Defaults filled (of the parameters that apply to `task`), parameters that cannot
        matter dropped, keys sorted: equal models get equal parameters (and cell ids)."""
        full = {**self.defaults_for(task), **params}
        if self.tidy is not None:
            self.tidy(full)
        return dict(sorted(full.items()))

    def complexity_key(self, params: dict, simpler: dict | None = None,
                       n_features: int | None = None) -> tuple:
        """A sort key under which smaller means simpler; `simpler` overrides directions."""
        simpler = simpler or {}
        names = list(self.complexity_order) + [n for n in simpler
                                               if n not in self.complexity_order]
        key = []
        for name in names:
            if name not in params:
                continue
            param = self.params[name]
            rank = param.rank(params[name], n_features)
            key.append(-rank if simpler.get(name, param.simpler) == "higher" else rank)
        return tuple(key)


TREE_INPUT = "runner.families._base.as_tree_input"
"""The function a tree or forest pipeline casts its columns with; a saved pipeline holds it
by name (`model/artefact.py` trusts it for those families)."""


def _params(*items: Param) -> dict[str, Param]:
    return {p.name: p for p in items}


_CLASS_WEIGHT = Param("class_weight", "choice", "none", choices=("none", "balanced"),
                      tasks=("classification",),
                      help="balanced weighs each class inversely to its share of the rows")
_CRITERION = Param("criterion", "choice", "gini", choices=("gini", "entropy"),
                   tasks=("classification",), help="the impurity a split reduces")


def _tidy_linear(p: dict) -> None:
    if p["penalty"] == "none":
        p.pop("alpha"), p.pop("l1_ratio")
    elif p["penalty"] != "elasticnet":
        p.pop("l1_ratio")


def _tidy_tree(p: dict) -> None:
    p.pop("ccp_alpha" if p.get("ccp_fraction") is not None else "ccp_fraction")


def _tidy_forest(p: dict) -> None:
    if not p["bootstrap"]:
        p["max_samples"] = None


READABLE_LEAVES = 16
"""The most leaves a pruned tree may have to count as readable whole: 15 splits, a drawing
of four levels or a page of rules (our judgement, not a standard)."""

READABLE_COEFFICIENTS = 30
"""The most non-zero coefficients a linear model may have to count as readable whole: one
table a person can take in, one row a term (our judgement, not a standard)."""


FAMILIES: dict[str, Family] = {
    "linear": Family(
        name="linear",
        module="runner.families.linear",
        description="Least squares, ridge, lasso or elastic net after imputation, "
        "one-hot encoding and standardisation.",
        params=_params(
            Param("penalty", "choice", "none", choices=("none", "l2", "l1", "elasticnet"),
                  simpler="lower",
                  choice_rank=(("none", 1), ("l2", 0), ("l1", 0), ("elasticnet", 0)),
                  help="none = ordinary least squares; l2 = ridge; l1 = lasso; elasticnet = both"),
            Param("alpha", "float", 1.0, minimum=0.0, min_inclusive=False, simpler="higher",
                  help="penalty strength (ignored when penalty is none)",
                  counts_when=("penalty is l2, l1 or elasticnet", "penalty: l2")),
            Param("l1_ratio", "float", 0.5, minimum=0.0, maximum=1.0,
                  help="share of the l1 penalty in the elastic net",
                  counts_when=("penalty is elasticnet", "penalty: elasticnet")),
            _CLASS_WEIGHT,
        ),
        complexity_order=("penalty", "alpha"),
        path_params=("alpha",),
        path_tasks=("regression",),  # logistic regression has no exact one-fit route here
        importance="coefficient", plural="linear models", tidy=_tidy_linear,
        readable_size=READABLE_COEFFICIENTS, size_word="non-zero coefficients",
        coefficients=True,
        unseen_category="encoded with every indicator of the column 0, so no level's "
        "coefficient applies",
        saved_types=("sklearn.linear_model.LinearRegression", "sklearn.linear_model.Ridge",
                     "sklearn.linear_model.Lasso", "sklearn.linear_model.ElasticNet",
                     "sklearn.linear_model.LogisticRegression"),
    ),
    "pruned_tree": Family(
        name="pruned_tree",
        module="runner.families.pruned_tree",
        description="A decision tree pruned by cost complexity.",
        params=_params(
            Param("ccp_alpha", "float", 0.0, minimum=0.0, simpler="higher", data_path=True,
                  help="cost-complexity pruning strength, as in scikit-learn"),
            Param("ccp_fraction", "float", None, minimum=0.0, allow_none=True, simpler="higher",
                  help="ccp_alpha as a fraction of the root node's impurity (the mean squared "
                  "error for numbers, the criterion's impurity for classes)"),
            Param("min_samples_leaf", "int", 1, minimum=1, simpler="higher"),
            Param("max_depth", "int", None, minimum=1, allow_none=True, simpler="lower",
                  none_rank=math.inf),
            Param("max_features", "max_features", None, allow_none=True, simpler="lower",
                  none_rank=1.0),
            _CRITERION, _CLASS_WEIGHT,
        ),
        complexity_order=("ccp_alpha", "ccp_fraction", "min_samples_leaf", "max_depth",
                          "max_features"),
        path_params=("ccp_alpha", "ccp_fraction"),
        one_tree=True, plural="trees", tidy=_tidy_tree,
        readable_size=READABLE_LEAVES, size_word="leaves",
        unseen_category="treated as a missing value, which the tree routes as it learned to",
        saved_types=("sklearn.tree.DecisionTreeRegressor", "sklearn.tree.DecisionTreeClassifier",
                     "sklearn.tree._tree.Tree", TREE_INPUT),
    ),
    "forest": Family(
        name="forest",
        module="runner.families.forest",
        description="A random forest of decision trees.",
        params=_params(
            Param("n_estimators", "int", 100, minimum=1, simpler="lower",
                  help="number of trees (does not change complexity; fewer is cheaper)"),
            Param("max_features", "max_features", 1.0, allow_none=True, simpler="lower",
                  none_rank=1.0, task_defaults=(("classification", "sqrt"),),
                  help="share of columns tried at each split (default 1.0 for numbers, "
                  "'sqrt' for classes, as scikit-learn's forests)"),
            Param("min_samples_leaf", "int", 1, minimum=1, simpler="higher"),
            Param("max_depth", "int", None, minimum=1, allow_none=True, simpler="lower",
                  none_rank=math.inf),
            Param("max_samples", "float", None, minimum=0.0, maximum=1.0, min_inclusive=False,
                  allow_none=True, counts_when=("bootstrap is true", "bootstrap: true")),
            Param("bootstrap", "bool", True),
            _CRITERION, _CLASS_WEIGHT,
        ),
        complexity_order=("min_samples_leaf", "max_features", "max_depth", "n_estimators"),
        path_params=("n_estimators",),
        plural="forests", explain_cost=3.0, tidy=_tidy_forest,
        size_word="trees", size_param="n_estimators",
        unseen_category="treated as a missing value, which each tree routes as it learned to",
        saved_types=("sklearn.ensemble.RandomForestRegressor",
                     "sklearn.ensemble.RandomForestClassifier",
                     "sklearn.tree.DecisionTreeRegressor", "sklearn.tree.DecisionTreeClassifier",
                     "sklearn.tree._tree.Tree", TREE_INPUT),
    ),
}


def get_family(name: str) -> Family:
    """The family of this name; a name this foldwise does not know (from a store a newer
    foldwise wrote) gets a bare record, so reading a store never fails on it."""
    if name in FAMILIES:
        return FAMILIES[name]
    return Family(name=name, module="", params={}, complexity_order=())


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

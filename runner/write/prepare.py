"""Everything a sweep needs before its first fit: the checked data, the grid's cells (with
any {path: N} values read off the data) and, on first use, the plan. Both the engine and
the explain step start from it."""

from __future__ import annotations

from .budget import check_limits, check_plan_memory, data_limit_bytes
from .data import Frame, load_frame, problem_identity
from ..errors import DataError
from ..families import FAMILIES
from .grid import Cell, expand_spec, score_versions
from .leakage import checks_key, findings_frame, run_checks
from ..metrics import METRICS
from .resampling import REFIT, Plan, make_plan, plan_counts, plan_identity, refit_seed
from .spec import Spec

__all__ = ["Prepared", "prepare", "load_checked"]


class Prepared:
    """Everything a sweep needs before the first fit: data, plan and cells.

    The plan (which needs scikit-learn's splitters, slow to import) is built on first use,
    so a rerun whose every result is already stored never builds it."""

    def __init__(self, spec: Spec, frame: Frame, cells: list[Cell] | None = None):
        self.spec, self.frame, self.cells = spec, frame, cells or []
        self.identity = plan_identity(spec, frame.task)
        self.problem = problem_identity(frame, spec.data.infinite, spec.data.missing_words)
        self._plan: Plan | None = None
        self._split: dict | None = None
        self._split_only = False

    @property
    def plan(self) -> Plan:
        if self._plan is None:
            self._plan = make_plan(self.spec, self.frame)
        return self._plan

    @property
    def split(self) -> dict:
        """The training and test rows (X_train, y_train, X_test, y_test), cut once and
        shared by the sweep's tasks and the explain step's (a cluster receives them once)."""
        if self._split is None:
            frame, plan, X = self.frame, self.plan, self._full_table()
            self._split = dict(X_train=X.iloc[plan.train_rows],
                               y_train=frame.y[plan.train_rows],
                               X_test=X.iloc[plan.test_rows],
                               y_test=frame.y[plan.test_rows])
        return self._split

    def use_split(self, split: dict) -> None:
        """Hold these tables as the split from now on: the same rows, kept elsewhere (an
        executor's shared file), so that the copy cut here can go."""
        assert split.keys() == self.split.keys()
        self._split = split

    def keep_split_only(self) -> None:
        """Let the frame's full table go once the split is cut, so that a sweep holds its
        rows once (a 10^6-row table is 160 MiB): the frame keeps its columns and types but
        no rows, and whatever would read them again (the leakage checks, the grid's pruning
        paths) is refused."""
        self.split  # noqa: B018 - cut it first, from the full table
        self.frame.X = self.frame.X.iloc[:0].copy()  # a slice would keep the rows alive
        self._split_only = True

    def _full_table(self):
        if self._split_only:
            raise RuntimeError("this Prepared kept only its split (keep_split_only); "
                               "the full table is gone")
        return self.frame.X

    @property
    def checks_key(self) -> str:
        """What this sweep's leakage findings depend on (see `leakage.checks_key`)."""
        return checks_key(self.spec, self.frame, self.identity)

    def findings(self, *, threads: int = 1):
        """The leakage checks' findings on this data and plan, as rows (builds the plan);
        `threads` of this process may share the work (`leakage.run_checks`)."""
        self._full_table()
        return findings_frame(run_checks(self.spec, self.frame, self.plan, threads=threads))

    def fold_keys(self) -> list[tuple[int, int]]:
        """(repeat, fold) of every validation fold, then the refit's."""
        k, r = self.spec.folds.k, self.spec.folds.repeats
        return [(i, j) for i in range(r) for j in range(k)] + [(REFIT, REFIT)]

    def all_keys(self) -> frozenset:
        """(cell_id, repeat, fold) of every cell's every fold and refit."""
        return frozenset((c.cell_id, *key) for c in self.cells for key in self.fold_keys())


def _path_resolver(prep: Prepared):
    """The data path of one combination of a model's other parameters, on the training
    rows (a pruned tree's cost-complexity pruning path); `expand_model` merges them."""
    def resolve(label: str, combo: dict):
        family = FAMILIES[prep.spec.models[label].family].estimators
        frame, plan = prep.frame, prep.plan
        X = prep._full_table().iloc[plan.train_rows]
        y = frame.y[plan.train_rows]
        return family.pruning_path_alphas(combo, X, y, seed=refit_seed(plan.seed),
                                          numeric=frame.numeric, categorical=frame.categorical,
                                          task=frame.task)

    return resolve


def load_checked(spec: Spec, *, max_bytes: int | None = None) -> Frame:
    """The spec's data (a file larger than `max_bytes` is refused unread), its task settled
    (the spec's metrics and grids must suit it), refused if a metric cannot score the
    target."""
    frame = load_frame(spec, max_bytes=max_bytes)
    problem = spec.task_problem(frame.task)
    if problem:
        how = ("the spec says so" if spec.task else f"target column '{frame.target}' holds "
               + ("numbers" if frame.task == "regression" else "classes"))
        raise DataError(f"{problem} ({how}). Change the spec's metrics or grid, or state "
                        "`task:` in the spec.")
    spec.settle_task(frame.task)
    for name in spec.metrics:
        problem = METRICS[name].target_problem(frame.y)
        if problem:
            raise DataError(f"metric '{name}' cannot score target column '{frame.target}' of "
                            f"{frame.source}: the column {problem}. Remove '{name}' from "
                            "`metrics` in the spec, or choose another target.")
    return frame


def prepare(spec: Spec, *, lift_limits: bool = False, paths: bool = True) -> Prepared:
    """Check the plan's size, load and check the data and expand every model's grid; the
    plan follows on demand. Limits (the spec's `limits`) hold unless `lift_limits`; the fits
    limit counts the fits of `paths` (False: every cell on its own)."""
    check_limits(spec, lifted=lift_limits, paths=paths)
    prep = Prepared(spec, load_checked(spec, max_bytes=data_limit_bytes(spec,
                                                                         lifted=lift_limits)))
    check_limits(spec, lifted=lift_limits, paths=paths, task=prep.frame.task)
    check_plan_memory(spec, plan_counts(spec, prep.frame)[0], lifted=lift_limits)
    prep.cells = expand_spec(spec, data_sha256=prep.frame.sha256,
                             plan_identity=prep.identity,
                             resolve_path=_path_resolver(prep),
                             n_features=len(prep.frame.features), task=prep.frame.task,
                             versions=score_versions(), problem=prep.problem)
    return prep

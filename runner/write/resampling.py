"""The plan: the held-out test rows and the folds of the training rows, built from
scikit-learn's own splitters so that anyone can rebuild them (README, "Rebuilding the folds
yourself", gives every recipe). The spec's fold scheme and test split are resolved here, in
one place (`resolve_scheme`, `resolve_holdout`), into records the rest of foldwise reads.

Fold schemes, over the training rows in file order (the i-th split is repeat i // k, fold
i % k):
- `rows`: RepeatedKFold(n_splits=k, n_repeats=r, random_state=seed); for a class target
  RepeatedStratifiedKFold (same arguments, y = the training rows' classes).
- `groups`: one numpy RandomState(seed), handed from repeat to repeat as RepeatedKFold does,
  gives each repeat's GroupKFold(n_splits=k, shuffle=True, random_state=that RandomState);
  groups = the column's values of the training rows. No group is on both sides of a fold.
  For a class target StratifiedGroupKFold with the same arguments: whole groups still, each
  fold's class shares as close to the whole's as whole groups allow.
- `time`: TimeSeriesSplit(n_splits=k, gap=gap) over the distinct values of the order column
  (ascending); a fold's rows are those whose value its split holds. No repeats; time order
  comes first, so a class target's folds are not stratified.

Test splits of a fraction: `rows` train_test_split (stratify = the classes, for a class
target); `groups` GroupShuffleSplit(n_splits=1) on the group column (test.groups, else
folds.groups; whole groups, not stratified); `time` the rows holding the last
ceil(fraction x distinct values) values of the order column, with the `gap` values before
them in neither part. Training rows = the others, in file order.""" 

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Iterable

import numpy as np

from ..errors import DataError

__all__ = ["Plan", "Fold", "Scheme", "Holdout", "SCHEMES", "HOLDOUTS", "make_plan",
           "fold_seed", "refit_seed", "REFIT", "plan_identity", "plan_counts",
           "resolve_scheme", "resolve_holdout", "stratifies", "MIN_TEST_ROWS"]

MIN_TEST_ROWS = 2
"""The fewest test rows a plan may have: every metric, r2 included, needs two."""

REFIT = -1
"""The `repeat` and `fold` number given to the refit on all training rows."""


def fold_seed(plan_seed: int, repeat: int, fold: int) -> int:
    """The estimator random_state for one fold, shared by every cell of that fold.

    Rule: numpy.random.SeedSequence([plan_seed, repeat, fold]).generate_state(1)[0];
    the refit on all training rows uses repeat = fold = -1 mapped to 2**31 - 1."""
    entropy = [plan_seed, repeat if repeat >= 0 else 2**31 - 1, fold if fold >= 0 else 2**31 - 1]
    return int(np.random.SeedSequence(entropy).generate_state(1)[0])


def refit_seed(plan_seed: int) -> int:
    """The estimator random_state of the refit on all training rows."""
    return fold_seed(plan_seed, REFIT, REFIT)


@dataclass(frozen=True)
class Cut:
    """What a splitter may look at: its rows' target and column values (positions 0..n-1
    of the rows it cuts) and the plan's numbers."""

    y: np.ndarray
    values: np.ndarray | None  # the scheme's column (groups or order) for these rows
    k: int
    repeats: int
    seed: int
    gap: int = 0
    stratify: bool = False  # a class target: keep each class's share where the scheme can

    @property
    def n(self) -> int:
        return len(self.y)


# -- fold schemes ----------------------------------------------------------------------------
def _rows_folds(cut: Cut) -> Iterable:
    from sklearn.model_selection import RepeatedKFold, RepeatedStratifiedKFold

    if cut.stratify:
        return RepeatedStratifiedKFold(n_splits=cut.k, n_repeats=cut.repeats,
                                       random_state=cut.seed).split(np.arange(cut.n), cut.y)
    return RepeatedKFold(n_splits=cut.k, n_repeats=cut.repeats,
                         random_state=cut.seed).split(np.arange(cut.n))


def _group_folds(cut: Cut) -> Iterable:
    from sklearn.model_selection import GroupKFold, StratifiedGroupKFold

    rng = np.random.RandomState(cut.seed)
    for _ in range(cut.repeats):
        if cut.stratify:
            yield from StratifiedGroupKFold(n_splits=cut.k, shuffle=True,
                                            random_state=rng).split(
                np.arange(cut.n), cut.y, groups=cut.values)
        else:
            yield from GroupKFold(n_splits=cut.k, shuffle=True, random_state=rng).split(
                np.arange(cut.n), groups=cut.values)


def _time_folds(cut: Cut) -> Iterable:
    from sklearn.model_selection import TimeSeriesSplit

    times, codes = np.unique(cut.values, return_inverse=True)
    for fit_t, valid_t in TimeSeriesSplit(n_splits=cut.k, gap=cut.gap).split(times):
        yield np.flatnonzero(np.isin(codes, fit_t)), np.flatnonzero(np.isin(codes, valid_t))


def _enough_rows(cut: Cut, column: str | None) -> str | None:
    if cut.n < 2 * cut.k:
        return (f"only {cut.n} training rows for {cut.k} folds; each fold needs at least 2 rows "
                "to fit and 1 to score. Lower `folds.k` or supply more rows")
    if cut.stratify:
        labels, counts = np.unique(cut.y, return_counts=True)
        few = [(c, n) for c, n in zip(labels.tolist(), counts.tolist()) if n < cut.k]
        if few:
            c, n = few[0]
            lower = f"Lower `folds.k` to at most {n}, merge" if n >= 2 else "Drop or merge"
            return (f"class {c!r} has {n} training row(s), fewer than the {cut.k} folds: "
                    f"stratified folds need one in each. {lower} rare classes, or supply "
                    "more rows")
    return None


def _enough_groups(cut: Cut, column: str | None) -> str | None:
    n_groups = len(np.unique(cut.values))
    if n_groups < 2:
        return (f"column '{column}' (folds.groups) has a single value in the training rows, "
                "so there is nothing to cut into folds. Name a column with one value per "
                "group (plant, bay, patient, site, batch)")
    if n_groups < cut.k:
        return (f"the training rows hold {n_groups} group(s) of column '{column}' "
                f"(folds.groups) for {cut.k} folds; grouped folds need at least one group per "
                f"fold. Lower `folds.k` to at most {n_groups}, or group by a column with more "
                "groups")
    return _class_in_one_group(cut, column) or _enough_rows(cut, column)


def _class_in_one_group(cut: Cut, column: str | None) -> str | None:
    """A class all of whose training rows share one group is missing from the fitting rows of
    whichever fold validates that group, for every k: fewer folds cannot help."""
    if not cut.stratify:
        return None
    for c in np.unique(cut.y).tolist():
        if len(np.unique(cut.values[cut.y == c])) > 1:
            continue
        return (f"class {c!r} lies in a single group of column '{column}' (folds.groups) "
                "among the training rows: grouped folds keep a group's rows on one side of "
                "every fold, so the fold that validates on that group fits without the "
                "class, whatever `folds.k`. Drop or merge that class, or group by a column "
                "the class spreads over")
    return None


def _times_that_always_cut(k: int, gap: int) -> int:
    """The fewest distinct values from which every larger count also cuts into k time-ordered
    folds with this gap. TimeSeriesSplit gives each fold T // (k + 1) values and needs
    T > gap + k x that; the largest T failing it is gap x (k + 1), so counts do not pass in
    order below it."""
    return max(k + 1, gap * (k + 1) + 1)


def _enough_times(cut: Cut, column: str | None) -> str | None:
    n_times, k, gap = len(np.unique(cut.values)), cut.k, cut.gap
    per_fold = n_times // (k + 1)
    start = (f"the training rows hold {n_times} distinct value(s) of column '{column}' "
             f"(folds.order), ")
    always = (f"Any count of {_times_that_always_cut(k, gap)} or more values works with "
              f"{k} folds and gap {gap}")
    if per_fold < 1:
        return (f"{start}too few for {k} time-ordered folds: they need one value per fold and "
                f"one to fit on. {always}. Lower `folds.k`, or order by a finer column")
    if n_times - gap - per_fold * k <= 0:
        return (f"{start}so each of the {k} time-ordered folds validates on {n_times} // "
                f"{k + 1} = {per_fold} of them; the {k} folds ({per_fold * k} values) and the "
                f"gap of {gap} leave the first fold nothing to fit on. With these {n_times} "
                f"values a gap of at most {n_times - per_fold * k - 1} works. {always}. Lower "
                "`folds.gap` or `folds.k`, or order by a finer column")
    return None


@dataclass(frozen=True)
class Scheme:
    """One way of cutting training rows into folds: its column, whether it ignores any
    grouping of the rows, the test split a fraction gets with it, the splitter, and why
    rows cannot be cut. Add a scheme by adding a record."""

    name: str
    column: str | None  # the folds field naming its column: "groups", "order" or None
    row_wise: bool  # rows fall into folds whatever group they belong to
    holdout: str  # the HOLDOUTS entry a test fraction uses
    split: Callable[[Cut], Iterable]
    problem: Callable[[Cut, str | None], str | None]  # why these rows cannot be cut, or None


SCHEMES = {s.name: s for s in (
    Scheme("rows", None, True, "rows", _rows_folds, _enough_rows),
    Scheme("groups", "groups", False, "groups", _group_folds, _enough_groups),
    Scheme("time", "order", False, "time", _time_folds, _enough_times),
)}


def resolve_scheme(spec) -> Scheme:
    """The fold scheme a spec asks for (written, or implied by folds.groups / folds.order)."""
    from .spec import implied_scheme  # here: workers unpickle folds without the spec model

    return SCHEMES[implied_scheme(spec.folds)]


# -- test splits -------------------------------------------------------------------------------
def _rest(n: int, test: np.ndarray) -> np.ndarray:
    keep = np.ones(n, dtype=bool)
    keep[test] = False
    return np.flatnonzero(keep)


def _rows_holdout(n, fraction, seed, values, gap, strata=None):
    from sklearn.model_selection import train_test_split

    try:
        test = train_test_split(np.arange(n), test_size=fraction, random_state=seed,
                                stratify=strata)[1]
    except ValueError as exc:  # `_strata_problem` foresees what a stratified split refuses
        raise DataError(f"the test split cannot keep every class's share: {exc} A stratified "
                        "test split needs two rows of every class and, on each side, one row "
                        "per class: drop or merge rare classes, or change `test.fraction`."
                        ) from None
    test = np.sort(test)
    return _rest(n, test), test


def _rows_count(n, fraction, seed, values, gap):
    """train_test_split holds out ceil(fraction x rows) rows."""
    n_test = math.ceil(fraction * n)
    return n - n_test, n_test


def _groups_holdout(n, fraction, seed, values, gap, strata=None):
    from sklearn.model_selection import GroupShuffleSplit

    split = GroupShuffleSplit(n_splits=1, test_size=fraction, random_state=seed)
    test = np.sort(next(split.split(np.arange(n), groups=values))[1])
    return _rest(n, test), test


def _groups_count(n, fraction, seed, values, gap):
    """GroupShuffleSplit's own arithmetic, without importing it: the test groups are the
    first ceil(fraction x groups) of numpy's RandomState(seed).permutation of the sorted
    distinct groups (tests/test_resampling.py checks it against the splitter)."""
    names, codes = np.unique(values, return_inverse=True)
    chosen = np.random.RandomState(seed).permutation(len(names))[:math.ceil(fraction * len(names))]
    n_test = int(np.isin(codes, chosen).sum())
    return n - n_test, n_test


def _time_holdout(n, fraction, seed, values, gap, strata=None):
    times, codes = np.unique(values, return_inverse=True)
    cut = len(times) - math.ceil(fraction * len(times))
    return np.flatnonzero(codes < cut - gap), np.flatnonzero(codes >= cut)


def _time_count(n, fraction, seed, values, gap):
    train, test = _time_holdout(n, fraction, seed, values, gap)
    return len(train), len(test)


def _groups_problem(values, fraction, gap, column) -> str | None:
    n_groups = len(np.unique(values))
    if n_groups < 2 or math.ceil(fraction * n_groups) >= n_groups:
        return (f"column '{column}' names {n_groups} group(s); holding out "
                f"{fraction:g} of them leaves no group to train on. Lower `test.fraction`, or "
                "group by a column with more groups")
    return None


def _time_problem(values, fraction, gap, column) -> str | None:
    n_times = len(np.unique(values))
    if n_times - math.ceil(fraction * n_times) - gap < 1:
        return (f"column '{column}' (folds.order) has {n_times} distinct value(s); the last "
                f"{fraction:g} of them as the test split and a gap of {gap} leave none to "
                "train on. Lower `test.fraction` or `folds.gap`")
    return None


@dataclass(frozen=True)
class Holdout:
    """One way of holding out a fraction of the rows as the test split: the rows it takes
    (scikit-learn's splitter), their count by arithmetic alone (no scikit-learn import, so
    a rerun with nothing to fit stays quick), and why it cannot split a column, if so."""

    name: str
    rows: Callable  # (n, fraction, seed, values, gap, strata) -> (train rows, test rows)
    count: Callable  # same arguments -> (n_train, n_test)
    problem: Callable | None = None  # (values, fraction, gap, column) -> reason or None


HOLDOUTS = {h.name: h for h in (
    Holdout("rows", _rows_holdout, _rows_count),
    Holdout("groups", _groups_holdout, _groups_count, _groups_problem),
    Holdout("time", _time_holdout, _time_count, _time_problem),
)}


def resolve_holdout(spec) -> tuple[Holdout, str | None]:
    """The test split a spec's fraction gets, and the column it reads: the fold scheme's
    own (time order), else test.groups or the folds' groups, else random rows."""
    scheme = resolve_scheme(spec)
    if scheme.holdout == "time":
        return HOLDOUTS["time"], spec.folds.order
    column = spec.test.groups or (spec.folds.groups if scheme.column == "groups" else None)
    if column is not None:
        return HOLDOUTS["groups"], column
    return HOLDOUTS[scheme.holdout], None


# -- the plan -----------------------------------------------------------------------------------
@dataclass(frozen=True)
class Fold:
    """One validation fold: positions into the training rows, and its estimator seed."""

    repeat: int
    fold: int
    fit: np.ndarray
    valid: np.ndarray
    seed: int


@dataclass(frozen=True)
class Plan:
    """Test rows, training rows (file order) and the folds, plus what identifies them."""

    train_rows: np.ndarray
    test_rows: np.ndarray
    folds: tuple[Fold, ...]
    k: int
    repeats: int
    seed: int
    test_form: dict
    scheme: str
    identity: dict  # what makes two plans the same: enters every cell id
    stratified: bool = False  # folds (and a row-wise test split) keep each class's share

    @property
    def n_train(self) -> int:
        return len(self.train_rows)

    @property
    def n_test(self) -> int:
        return len(self.test_rows)


def _test_form(spec) -> dict:
    t = spec.test
    if t.fraction is None:
        return {"file": t.file} if t.file is not None else {"column": t.column}
    holdout, column = resolve_holdout(spec)
    if holdout.name == "time":
        return {"fraction": t.fraction, "order": column}
    form = {"fraction": t.fraction, "seed": t.seed}
    return {**form, "groups": column} if column is not None else form


def stratifies(spec, task: str) -> bool:
    """Whether a plan keeps class shares: a class target's row or group folds do (time
    order comes first)."""
    return task == "classification" and resolve_scheme(spec).name != "time"


def plan_identity(spec, task: str = "regression") -> dict:
    """The plan's identity from the spec and the task (equal to `make_plan(...).identity`).
    A row plan's identity is what it was before schemes existed, so its cell ids are
    unchanged; a stratified plan (a class target) says so."""
    identity = {"test": _test_form(spec), "k": spec.folds.k, "repeats": spec.folds.repeats,
                "seed": spec.folds.seed}
    scheme = resolve_scheme(spec)
    if scheme.column is not None:
        identity.update(scheme=scheme.name, **{scheme.column: getattr(spec.folds, scheme.column)})
    if scheme.name == "time":
        identity["gap"] = spec.folds.gap
    return {**identity, "stratified": True} if stratifies(spec, task) else identity


def _holdout_values(spec, frame):
    """(holdout, its column's values for every row, the column) of a fraction test split."""
    holdout, column = resolve_holdout(spec)
    values = frame.plan_values[column] if column is not None else None
    if holdout.problem is not None:
        problem = holdout.problem(values, spec.test.fraction, spec.folds.gap, column)
        if problem:
            raise DataError(f"the test split cannot be made from {frame.source}: {problem}.")
    return holdout, values


def plan_counts(spec, frame) -> tuple[int, int]:
    """(training rows, test rows) without building the plan or importing scikit-learn: a
    fraction by the holdout's arithmetic, a test file or column by its marked rows."""
    n = len(frame.y)
    if spec.test.fraction is None:
        n_test = int(np.count_nonzero(frame.test_mask))
        return n - n_test, n_test
    holdout, values = _holdout_values(spec, frame)
    return holdout.count(n, spec.test.fraction, spec.test.seed, values, spec.folds.gap)


def _strata_problem(y: np.ndarray, fraction: float, k: int) -> str | None:
    """Why train_test_split(stratify=y) cannot split these classes, in words: it needs two
    rows of every class and, on each side, at least one row per class."""
    labels, counts = np.unique(y, return_counts=True)
    single = [repr(c) for c, m in zip(labels.tolist(), counts.tolist()) if m < 2]
    if single:
        return (f"class {', '.join(single)} has a single row; a stratified test split "
                "(test.fraction with a class target) needs two rows of every class, one on "
                "each side, whatever the fraction. Drop that class's rows or merge it into a "
                "similar class, or supply more rows of it: the stratified folds need "
                f"{k} of them among the training rows")
    n, c = len(y), len(labels)
    n_test = math.ceil(fraction * n)
    if n_test < c or n - n_test < c:
        side, bound = (("test", f"at least {math.ceil(c / n * 1e4) / 1e4:g}") if n_test < c
                       else ("training", f"at most {math.floor((n - c) / n * 1e4) / 1e4:g}"))
        return (f"test.fraction {fraction:g} of {n} rows leaves {min(n_test, n - n_test)} "
                f"{side} row(s) for {c} classes, and a stratified split needs one row of "
                f"every class on each side. Set `test.fraction` to {bound}")
    return None


def _split_test(spec, frame) -> tuple[np.ndarray, np.ndarray]:
    n = len(frame.y)
    if spec.test.fraction is None:
        return np.flatnonzero(~frame.test_mask), np.flatnonzero(frame.test_mask)
    holdout, values = _holdout_values(spec, frame)
    strata = frame.y if frame.task == "classification" and holdout.name == "rows" else None
    problem = None if strata is None else _strata_problem(strata, spec.test.fraction,
                                                         spec.folds.k)
    if problem:
        raise DataError(f"the test split cannot be made from {frame.source} (target "
                        f"'{frame.target}'): {problem}.")
    train, test = holdout.rows(n, spec.test.fraction, spec.test.seed, values, spec.folds.gap,
                               strata=strata)
    if strata is not None:
        _check_classes_tested(frame, strata, test, spec.test.fraction)
    return train, test


def _check_classes_tested(frame, strata: np.ndarray, test: np.ndarray, fraction: float) -> None:
    """A stratified test split promises every class on each side; train_test_split may still
    leave a small class without a test row (its share rounds to none), and then the test
    scores say nothing of that class. A fraction of at least 1/m, m the smallest class's
    rows, gives each class a test row."""
    labels, counts = np.unique(strata, return_counts=True)
    tested = set(np.unique(strata[test]).tolist())
    missing = [(c, m) for c, m in zip(labels.tolist(), counts.tolist()) if c not in tested]
    if not missing:
        return
    names = [f"{c!r} ({m} rows)" for c, m in missing]
    names = ("class " + names[0] if len(names) == 1 else
             f"classes {', '.join(names[:-1])} and {names[-1]}")
    smallest = int(counts.min())
    bound = max(math.ceil(1e4 / smallest) / 1e4, fraction)
    raise DataError(f"the test split cannot be made from {frame.source} (target "
                    f"'{frame.target}'): test.fraction {fraction:g} leaves {names} "
                    "without a test row, so the test scores would say nothing of it (and ROC "
                    f"AUC would be undefined). Set `test.fraction` to at least {bound:g} "
                    f"(1/{smallest}, the smallest class's rows, gives every class a test row), "
                    "or merge that class into a similar one.")


def make_plan(spec, frame) -> Plan:
    """Resolve the spec's test split and fold plan against the data's rows; a class
    target's folds are stratified where the scheme allows (`stratifies`)."""
    scheme = resolve_scheme(spec)
    train_rows, test_rows = _split_test(spec, frame)
    k, r, seed = spec.folds.k, spec.folds.repeats, spec.folds.seed
    if len(test_rows) < MIN_TEST_ROWS:
        raise DataError(f"the test split has {len(test_rows)} row(s) of {len(frame.y)}; it needs "
                        f"at least {MIN_TEST_ROWS} (r2 is undefined on one row). Set "
                        "`test.fraction` larger, or mark more rows in the test file or column.")
    column = getattr(spec.folds, scheme.column) if scheme.column else None
    values = frame.plan_values[column][train_rows] if column else None
    stratified = stratifies(spec, frame.task)
    if frame.task == "classification":
        grouped = scheme.name == "groups" and spec.test.fraction is not None
        _check_classes_trained(frame, train_rows, column if grouped else None)
    cut = Cut(frame.y[train_rows], values, k, r, seed, spec.folds.gap, stratified)
    problem = scheme.problem(cut, column)
    if problem:
        raise DataError(f"the folds cannot be made from {frame.source}: {problem}.")
    folds = []
    for i, (fit, valid) in enumerate(scheme.split(cut)):
        rep, f = divmod(i, k)
        folds.append(Fold(rep, f, fit, valid, fold_seed(seed, rep, f)))
    if frame.task == "classification":
        _check_classes_fitted(frame, cut, folds, scheme.name, column)
    return Plan(train_rows, test_rows, tuple(folds), k, r, seed, _test_form(spec), scheme.name,
                plan_identity(spec, frame.task), stratified)


_LACKING_ADVICE = {
    "groups": "The class lies in too few groups to be on both sides of every fold: lower "
              "folds.k, or choose groups that each class spreads over.",
}


def _time_text(value) -> str:
    if isinstance(value, np.datetime64):
        return np.datetime_as_string(value, unit="s").removesuffix("T00:00:00")
    return f"{value:g}"


def _time_advice(cut: Cut, column) -> str:
    """What lets the first time-ordered fold, which fits on the fewest values (T - k x
    (T // (k + 1)) - gap of the T training values, as TimeSeriesSplit cuts them), reach the
    class that occurs last; when no fewer folds can, say so."""
    times, codes = np.unique(cut.values, return_inverse=True)
    firsts = {c: int(codes[cut.y == c].min()) for c in np.unique(cut.y).tolist()}
    late = max(firsts, key=firsts.get)
    need, n = firsts[late] + 1, len(times)

    def fitted(k: int, gap: int) -> int:
        return n - k * (n // (k + 1)) - gap

    said = (f"Class {late!r} first occurs at {column} = {_time_text(times[need - 1])} (value "
            f"{need} of the training rows' {n} distinct values), but the first fold fits on "
            f"the first {fitted(cut.k, cut.gap)} of them only")
    ks = [k for k in range(cut.k - 1, 1, -1) if fitted(k, cut.gap) >= need]
    if ks:
        return (f"{said}: lower `folds.k` to at most {ks[0]}, or start the data where every "
                "class has occurred.")
    gap = f" with gap {cut.gap}: lower `folds.gap`," if cut.gap else ":"
    return (f"{said}, and no fewer folds reach it{gap} start the data where every class has "
            "occurred, or merge that class into a similar one.")


def _check_classes_fitted(frame, cut: Cut, folds, scheme: str, column) -> None:
    """Every fold's fitting rows must hold every class: a model fitted without one gives it
    no probability, so every fit of that fold would fail. Known from the plan alone."""
    for fold in folds:
        present = set(np.unique(cut.y[fold.fit]).tolist())
        missing = [c for c in frame.classes if c not in present]
        if missing:
            where = f" (by '{column}')" if column else ""
            advice = (_time_advice(cut, column) if scheme == "time" else
                      _LACKING_ADVICE.get(scheme, "Lower folds.k."))
            raise DataError(
                f"fold {fold.fold} of repeat {fold.repeat} of the {scheme} folds{where} fits "
                f"on rows of {frame.source} that hold no row of class {missing[0]!r} of "
                f"target '{frame.target}', so no model fitted there can give it a "
                f"probability. {advice}")


def _check_classes_trained(frame, train_rows, grouped_by: str | None = None) -> None:
    """Every class must have training rows, or no model can learn it. Under grouped folds
    with a grouped test split, a class held by one group cannot be helped by another split."""
    present = set(np.unique(frame.y[train_rows]).tolist())
    missing = [c for c in frame.classes if c not in present]
    if missing and grouped_by is not None:
        held = np.unique(frame.plan_values[grouped_by][frame.y == missing[0]]).tolist()
        if len(held) == 1:
            raise DataError(f"class {missing[0]!r} of target '{frame.target}' lies in a single "
                            f"group of column '{grouped_by}' (folds.groups), {held[0]!r}, "
                            "which the test split holds out whole, so no model can learn the "
                            "class; with that group in training instead, the fold that "
                            "validates on it would fit without the class. Drop or merge that "
                            "class, or group by a column the class spreads over.")
    if missing:
        raise DataError(f"class {missing[0]!r} of target '{frame.target}' has no training rows "
                        "(its rows are all test rows, or in the gap before them); no model "
                        "can learn it. Move some of its rows into training, or change the "
                        "test split.")

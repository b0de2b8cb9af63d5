"""The plan: the held-out test rows and the repeated k-fold split of the training rows.

Built from scikit-learn's own splitters so that anyone can rebuild the folds:
test rows = train_test_split(np.arange(n_rows), test_size=f, random_state=seed)[1];
training rows = the rest, in file order; folds = RepeatedKFold(n_splits=k, n_repeats=r,
random_state=seed).split(training_rows), the i-th split being repeat i // k, fold i % k."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import DataError

__all__ = ["Plan", "Fold", "make_plan", "fold_seed", "refit_seed", "REFIT", "plan_identity",
           "plan_counts", "MIN_TEST_ROWS"]

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
    stratified: bool = False

    @property
    def n_train(self) -> int:
        return len(self.train_rows)

    @property
    def n_test(self) -> int:
        return len(self.test_rows)

    @property
    def identity(self) -> dict:
        """What makes two plans the same: enters every cell id."""
        found = {"test": self.test_form, "k": self.k, "repeats": self.repeats, "seed": self.seed}
        return {**found, "stratified": True} if self.stratified else found


def _test_form(spec) -> dict:
    t = spec.test
    if t.fraction is not None:
        return {"fraction": t.fraction, "seed": t.seed}
    return {"file": t.file} if t.file is not None else {"column": t.column}


def plan_identity(spec, task: str = "regression") -> dict:
    """The plan's identity from the spec and the task (equal to `make_plan(...).identity`);
    a class target's plan is stratified."""
    found = {"test": _test_form(spec), "k": spec.folds.k, "repeats": spec.folds.repeats,
             "seed": spec.folds.seed}
    return {**found, "stratified": True} if task == "classification" else found


def plan_counts(spec, frame) -> tuple[int, int]:
    """(training rows, test rows) without building the plan: train_test_split holds out
    ceil(fraction x rows) rows, a test file or column marks its rows."""
    n = len(frame.y)
    if spec.test.fraction is not None:
        n_test = int(np.ceil(spec.test.fraction * n))
    else:
        n_test = int(np.count_nonzero(frame.test_mask))
    return n - n_test, n_test


def _test_rows(spec, frame) -> tuple[np.ndarray, dict]:
    from sklearn.model_selection import train_test_split

    n = len(frame.y)
    t = spec.test
    if t.fraction is not None:
        strata = frame.y if frame.task == "classification" else None
        try:
            rows = train_test_split(np.arange(n), test_size=t.fraction, random_state=t.seed,
                                    stratify=strata)[1]
        except ValueError as exc:
            raise DataError(f"the test split cannot keep every class's share: {exc} Set "
                            "`test.fraction` so that every class has a test row, or merge rare "
                            "classes.") from None
        return np.sort(rows), {"fraction": t.fraction, "seed": t.seed}
    form = {"file": t.file} if t.file is not None else {"column": t.column}
    return np.flatnonzero(frame.test_mask), form


def make_plan(spec, frame) -> Plan:
    """Resolve the spec's test split and fold plan against the data's rows: stratified by
    class (RepeatedStratifiedKFold, a stratified test split) for a class target."""
    from sklearn.model_selection import RepeatedKFold, RepeatedStratifiedKFold

    test_rows, form = _test_rows(spec, frame)
    is_test = np.zeros(len(frame.y), dtype=bool)
    is_test[test_rows] = True
    train_rows = np.flatnonzero(~is_test)
    k, r, seed = spec.folds.k, spec.folds.repeats, spec.folds.seed
    if len(test_rows) < MIN_TEST_ROWS:
        raise DataError(f"the test split has {len(test_rows)} row(s) of {len(frame.y)}; it needs "
                        f"at least {MIN_TEST_ROWS} (r2 is undefined on one row). Set "
                        "`test.fraction` larger, or mark more rows in the test file or column.")
    if len(train_rows) < 2 * k:
        raise DataError(f"only {len(train_rows)} training rows for {k} folds; each fold needs at "
                        f"least 2 rows to fit and 1 to score. Lower `folds.k` or supply more rows.")
    _check_test_levels(frame, train_rows, test_rows)
    stratified = frame.task == "classification"
    if stratified:
        _check_class_counts(frame, train_rows, k)
        splitter = RepeatedStratifiedKFold(n_splits=k, n_repeats=r, random_state=seed)
        splits = splitter.split(train_rows, frame.y[train_rows])
    else:
        splits = RepeatedKFold(n_splits=k, n_repeats=r, random_state=seed).split(train_rows)
    folds = []
    for i, (fit, valid) in enumerate(splits):
        rep, f = divmod(i, k)
        folds.append(Fold(rep, f, fit, valid, fold_seed(seed, rep, f)))
    return Plan(train_rows, test_rows, tuple(folds), k, r, seed, form, stratified)


def _check_class_counts(frame, train_rows, k: int) -> None:
    """Every class must have at least k training rows: one in every validation fold."""
    labels, counts = np.unique(frame.y[train_rows], return_counts=True)
    missing = [c for c in frame.classes if c not in set(labels.tolist())]
    if missing:
        raise DataError(f"class {missing[0]!r} of target '{frame.target}' has no training rows "
                        "(all its rows are test rows); no model can learn it. Move some of "
                        "its rows into training, or change the test split.")
    few = [(c, n) for c, n in zip(labels.tolist(), counts.tolist()) if n < k]
    if few:
        c, n = few[0]
        raise DataError(f"class {c!r} of target '{frame.target}' has {n} training row(s), fewer "
                        f"than the {k} folds: stratified folds need one in each. Lower "
                        "`folds.k`, merge rare classes, or supply more rows.")


def _check_test_levels(frame, train_rows, test_rows) -> None:
    for col in frame.categorical:
        train_levels = set(pd.unique(frame.X[col].iloc[train_rows].dropna()))
        test_only = set(pd.unique(frame.X[col].iloc[test_rows].dropna())) - train_levels
        if test_only:
            shown = ", ".join(sorted(map(repr, test_only))[:5])
            raise DataError(f"categorical column '{col}' has levels only in the test rows "
                            f"({shown}); no model can learn them. Merge rare levels, move those "
                            "rows into training, or change the test split.")

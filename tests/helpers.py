"""Test helpers: the diabetes data, spec writing, and the documented plans rebuilt with
scikit-learn alone (README: "Rebuilding the folds yourself"), one per fold scheme."""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.model_selection import (GroupKFold, GroupShuffleSplit, RepeatedKFold,
                                     TimeSeriesSplit, train_test_split)

from runner.write.spec import parse_spec


def diabetes_frame() -> pd.DataFrame:
    """The 442-row diabetes data in original units; target column `progression`."""
    from sklearn.datasets import load_diabetes

    data = load_diabetes(as_frame=True, scaled=False)
    df = data.frame.rename(columns={"target": "progression"})
    return df


SMALL_SPEC = """
name: small
data:
  path: {data}
  target: progression
test:
  fraction: 0.25
  seed: 3
folds:
  k: 3
  repeats: 2
  seed: 17
metrics: [rmse, mae, r2]
store: store.duckdb
models:
{models}
"""


def write_spec(folder: Path, models: str, *, data: str = "diabetes.csv", extra: str = "",
               name: str = "spec.yaml", explain: str = "none") -> Path:
    """Write a spec file with the given models block (YAML, indented two spaces).

    The explain step is off unless asked for (`explain="picked"`): most tests check scores."""
    text = SMALL_SPEC.format(data=data, models=textwrap.indent(textwrap.dedent(models), "  "))
    if explain and "explain:" not in extra:
        text = text.replace("models:\n", f"explain: {{cells: {explain}}}\nmodels:\n", 1)
    path = folder / name
    path.write_text(text + textwrap.dedent(extra))
    return path


def spec_from(folder: Path, models: str, **kw):
    path = write_spec(folder, models, **kw)
    return parse_spec(path.read_text(), source=path)


def documented_plan(n_rows: int, *, test_fraction: float, test_seed: int, k: int, repeats: int,
                    seed: int):
    """(train_rows, test_rows, [(repeat, fold, fit_positions, valid_positions)])."""
    test_rows = np.sort(train_test_split(np.arange(n_rows), test_size=test_fraction,
                                         random_state=test_seed)[1])
    train_rows = np.setdiff1d(np.arange(n_rows), test_rows)  # file order
    splits = RepeatedKFold(n_splits=k, n_repeats=repeats, random_state=seed).split(train_rows)
    folds = [(i // k, i % k, fit, valid) for i, (fit, valid) in enumerate(splits)]
    return train_rows, test_rows, folds


def documented_group_plan(groups: np.ndarray, *, test_fraction: float, test_seed: int, k: int,
                          repeats: int, seed: int, test_groups: np.ndarray | None = None,
                          folds_by_groups: bool = True):
    """The README's grouped recipe: the test split holds out whole groups
    (GroupShuffleSplit); each repeat's GroupKFold(shuffle=True) draws from one RandomState
    handed on from repeat to repeat. With `folds_by_groups=False` the folds are row-wise
    (RepeatedKFold) and only the test split is grouped (test.groups)."""
    n = len(groups)
    held = groups if test_groups is None else test_groups
    split = GroupShuffleSplit(n_splits=1, test_size=test_fraction, random_state=test_seed)
    test_rows = np.sort(next(split.split(np.arange(n), groups=held))[1])
    train_rows = np.setdiff1d(np.arange(n), test_rows)
    if not folds_by_groups:
        splits = RepeatedKFold(n_splits=k, n_repeats=repeats, random_state=seed).split(train_rows)
        return train_rows, test_rows, [(i // k, i % k, fit, valid)
                                       for i, (fit, valid) in enumerate(splits)]
    rng = np.random.RandomState(seed)
    folds = []
    for repeat in range(repeats):
        cv = GroupKFold(n_splits=k, shuffle=True, random_state=rng)
        for fold, (fit, valid) in enumerate(cv.split(train_rows, groups=groups[train_rows])):
            folds.append((repeat, fold, fit, valid))
    return train_rows, test_rows, folds


def documented_time_plan(order: np.ndarray, *, test_fraction: float, k: int, gap: int):
    """The README's time-ordered recipe: the test split is the rows of the last
    ceil(fraction x distinct values) values of the order column, the `gap` values before
    them are left out, and TimeSeriesSplit(k, gap) cuts the training rows' distinct values."""
    times = np.unique(order)
    first_test = len(times) - int(np.ceil(test_fraction * len(times)))
    test_rows = np.flatnonzero(order >= times[first_test])
    train_rows = np.flatnonzero(order < times[first_test - gap])
    ordered, train_times = order[train_rows], np.unique(order[train_rows])
    folds = []
    for fold, (fit_t, valid_t) in enumerate(TimeSeriesSplit(n_splits=k, gap=gap).split(train_times)):
        folds.append((0, fold, np.flatnonzero(np.isin(ordered, train_times[fit_t])),
                      np.flatnonzero(np.isin(ordered, train_times[valid_t]))))
    return train_rows, test_rows, folds


def nearly_collinear_frame(n: int = 200, seed: int = 0):
    """Invented rows where column b is 3 x column a up to 1e-9 noise, and c is unrelated: a
    ridge solve with a tiny alpha on them (after foldwise's standardisation) warns of an
    ill-conditioned matrix, a larger alpha does not. Returns (frame, y)."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    frame = pd.DataFrame({"a": x, "b": 3 * x + 1e-9 * rng.normal(size=n),
                          "c": rng.normal(size=n)})
    return frame, x + rng.normal(size=n)

"""Test helpers: the diabetes data, spec writing, and the documented plan rebuilt with
scikit-learn alone (README: "Rebuilding the folds")."""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.model_selection import RepeatedKFold, train_test_split

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

"""Shared fixtures: scikit-learn's bundled diabetes data (Efron et al. 2004) written to CSV
files in a fresh folder."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from .helpers import diabetes_frame


@pytest.fixture
def diabetes_csv(tmp_path) -> Path:
    path = tmp_path / "diabetes.csv"
    diabetes_frame().to_csv(path, index=False)
    return path


@pytest.fixture
def diabetes_mixed_csv(tmp_path) -> Path:
    """Diabetes with `sex` as text and 8 % of two columns blanked (fixed rows)."""
    df = diabetes_frame()
    df["sex"] = df["sex"].map({1.0: "one", 2.0: "two"})
    rng = np.random.default_rng(0)
    for col in ("bmi", "s5"):
        df.loc[rng.random(len(df)) < 0.08, col] = np.nan
    path = tmp_path / "diabetes_mixed.csv"
    df.to_csv(path, index=False)
    return path

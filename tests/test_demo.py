"""The shipped demo data are exactly what the generator writes (so anyone can rebuild them)."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from runner.demo import make_greenhouse, write_greenhouse

SHIPPED = Path(__file__).resolve().parents[1] / "specs" / "data" / "greenhouse.csv"


def test_shipped_csv_is_the_generator_output(tmp_path):
    fresh = pd.read_csv(write_greenhouse(tmp_path / "g.csv"))
    pd.testing.assert_frame_equal(fresh, pd.read_csv(SHIPPED), check_exact=False, rtol=1e-12)


def test_generator_shape_and_missing_sensors():
    df = make_greenhouse(3000, seed=7)
    assert df.shape == (3000, 17)
    assert {"cultivar", "glazing", "irrigation", "yield_kg_m2"} <= set(df.columns)
    share = df[["leaf_temp_c", "par_umol_m2_s"]].isna().mean()
    assert 0.08 < share.min() and share.max() < 0.15
    pd.testing.assert_frame_equal(df, make_greenhouse(3000, seed=7))

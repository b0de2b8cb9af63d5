"""OLS through the `linear` family's own pipeline against the NIST StRD certified values
for the Longley data (source: NIST Statistical Reference Datasets, Linear Regression,
Longley 1967; data and values in tests/data/)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from runner.families import linear

DATA = Path(__file__).parent / "data"


@pytest.fixture(scope="module")
def fitted():
    df = pd.read_csv(DATA / "longley.csv")
    cert = json.loads((DATA / "longley_certified.json").read_text())
    X, y = df.drop(columns="y"), df["y"].to_numpy(float)
    # The same estimator the sweep builds for a `penalty: none` cell.
    pipe = linear.make_estimator({"penalty": "none"}, seed=0, numeric=list(X.columns),
                                 categorical=[])
    pipe.fit(X, y)
    return pipe, X, y, cert


def _digits(got: float, want: float) -> float:
    """Agreeing significant digits, -log10 of the relative error (NIST's LRE)."""
    return np.inf if got == want else -np.log10(abs(got - want) / abs(want))


def test_coefficients_agree_to_seven_digits(fitted):
    pipe, X, y, cert = fitted
    coefs, intercept = linear.original_scale_coefficients(pipe)
    for p in cert["parameters"]:
        got = intercept if p["column"] == "intercept" else coefs[p["column"]]
        assert _digits(got, p["estimate"]) >= 7, (p["name"], got, p["estimate"])


def test_residual_sd_agrees_to_seven_digits(fitted):
    pipe, X, y, cert = fitted
    resid = y - pipe.predict(X)
    dof = len(y) - (X.shape[1] + 1)
    sd = float(np.sqrt(resid @ resid / dof))
    assert _digits(sd, cert["residual_std_dev"]) >= 7


def test_pipeline_standardises_before_least_squares(fitted):
    # The path the tool uses: the design reaching LinearRegression is standardised, which
    # keeps it well conditioned (raw Longley design: condition number ~5e9).
    pipe, X, _, _ = fitted
    Z = pipe.named_steps["prep"].transform(X)
    np.testing.assert_allclose(Z.mean(axis=0), 0, atol=1e-12)
    np.testing.assert_allclose(Z.std(axis=0), 1, atol=1e-12)
    assert np.linalg.cond(Z) < 1e3 < np.linalg.cond(X.to_numpy())


LONGLEY_SPEC = """
name: longley
data: {path: longley.csv, target: y}
test: {fraction: 0.25, seed: 1}
folds: {k: 3, repeats: 1, seed: 1}
metrics: [rmse]
store: store.duckdb
explain: {cells: none}
models:
  ols: {family: linear, grid: {penalty: none}}
"""


def test_a_least_squares_model_built_on_all_16_rows_reports_the_certified_coefficients(
        tmp_path):
    # NIST StRD, certified values (tests/data/longley_certified.json): a `penalty: none`
    # model swept, then built with --all-rows, stores its signed coefficients in the data's
    # units; each agrees with the certified estimate to at least 7 significant digits.
    from click.testing import CliRunner

    from runner.cli import main
    from runner.store import Store

    (tmp_path / "longley.csv").write_bytes((DATA / "longley.csv").read_bytes())
    (tmp_path / "spec.yaml").write_text(LONGLEY_SPEC)
    store = str(tmp_path / "store.duckdb")
    assert CliRunner().invoke(main, ["run", str(tmp_path / "spec.yaml"), "-q",
                                     "--jobs", "1"]).exit_code == 0
    built = CliRunner().invoke(main, ["build", "--all-rows", "--out",
                                      str(tmp_path / "ols.skops"), "--store", store])
    assert built.exit_code == 0, built.output
    assert "on 16 rows (training and test)" in built.output
    model_id = Store(store).query("select model_id from models")["model_id"][0]
    out = CliRunner().invoke(main, ["coefficients", "--model-id", model_id, "--format",
                                    "json", "--store", store])
    got = {r["term"]: r["coefficient"] for r in json.loads(out.output)}
    cert = json.loads((DATA / "longley_certified.json").read_text())
    assert len(got) == len(cert["parameters"]) == 7
    for p in cert["parameters"]:
        term = "(intercept)" if p["column"] == "intercept" else p["column"]
        assert _digits(got[term], p["estimate"]) >= 7, (p["name"], got[term], p["estimate"])

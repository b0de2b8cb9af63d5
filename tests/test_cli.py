"""The foldwise command end to end, and every bad input it must refuse cleanly."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from runner.cli import main

from .helpers import diabetes_frame, write_spec

MODELS = """
ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 10.0]}}
tree: {family: pruned_tree, grid: {ccp_alpha: [0.0, 200.0]}}
"""


def invoke(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=True)


@pytest.fixture
def swept(tmp_path, diabetes_csv):
    spec = write_spec(tmp_path, MODELS)
    result = invoke("run", spec, "--jobs", "1", "--quiet")
    assert result.exit_code == 0, result.output
    return tmp_path, tmp_path / "store.duckdb", result


def test_run_reports_rows(swept):
    _, _, result = swept
    # 4 cells x (3 folds x 2 repeats) x 3 metrics fold rows; 4 cells x 3 metrics test rows
    assert "4 cells, 72 fold-score rows, 12 test-score rows" in result.output


def test_check_prints_plan_and_writes_nothing(tmp_path, diabetes_csv):
    spec = write_spec(tmp_path, MODELS)
    result = invoke("check", spec)
    assert result.exit_code == 0, result.output
    assert "train rows   331" in result.output and "test rows    111" in result.output
    assert "3 folds x 2 repeats (seed 17)" in result.output
    assert "│ ridge │ linear      │ 2     │     6 │ 14   │" in result.output
    assert not (tmp_path / "store.duckdb").exists()


def test_summary_json_equals_fold_rows(swept):
    _, store, _ = swept
    out = invoke("summary", "--store", store, "--format", "json")
    assert out.exit_code == 0, out.output
    rows = {r["model"]: r for r in json.loads(out.output)}
    assert set(rows) == {"ridge", "tree"}
    # Recompute from the raw fold rows with pandas.
    raw = invoke("sql", "--store", store, "--format", "csv",
                 "select c.model, c.cell_id, f.metric, f.value from fold_scores f "
                 "join cells c using (sweep_id, cell_id)")
    df = pd.read_csv(__import__("io").StringIO(raw.output))
    rmse = df[df.metric == "rmse"].groupby(["model", "cell_id"]).value.agg(["mean", "std", "count"])
    for model, row in rows.items():
        best = rmse.loc[model]["mean"].idxmin()
        assert row["cell_id"] == best
        m, sd, n = rmse.loc[(model, best)]
        assert row["cv_rmse"] == pytest.approx(m, rel=1e-12)
        assert row["se_rmse"] == pytest.approx(sd / np.sqrt(n), rel=1e-12)
        assert n == 6
        assert row["test_rmse"] > 0 and 0 < row["cv_r2"] < 1


def test_sql_and_sweeps(swept):
    _, store, _ = swept
    out = invoke("sql", "--store", store, "--format", "json",
                 "select metric, count(*) as n from fold_scores group by metric order by metric")
    assert json.loads(out.output) == [{"metric": "mae", "n": 24}, {"metric": "r2", "n": 24},
                                      {"metric": "rmse", "n": 24}]
    out = invoke("sweeps", "--store", store, "--format", "json")
    (sweep,) = json.loads(out.output)
    assert sweep["status"] == "finished" and sweep["cells"] == 4 and sweep["fold_rows"] == 72
    assert (sweep["n_train"], sweep["n_test"], sweep["k"], sweep["repeats"]) == (331, 111, 3, 2)


def test_sql_refuses_writes(swept):
    _, store, _ = swept
    before = store.read_bytes()
    for query in ("delete from fold_scores", "drop table cells", "attach 'x.duckdb'",
                  "copy fold_scores to 'out.csv'", "create table t as select 1",
                  "update sweeps set status = 'x'", "set threads = 1"):
        out = invoke("sql", "--store", store, query)
        assert out.exit_code == 2, (query, out.output)
        assert "only read queries" in out.output
    out = invoke("sql", "--store", store, "select * from read_csv('/etc/passwd')")
    assert out.exit_code == 2
    assert store.read_bytes() == before


def test_every_command_has_help():
    for name, command in main.commands.items():
        out = invoke(name, "--help")
        assert out.exit_code == 0 and "Usage:" in out.output, name
        assert command.help and command.help.strip(), name


def test_help_does_not_import_scikit_learn():
    code = ("import sys; from runner.cli import main\n"
            "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
            "print('sklearn' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.stdout.strip().endswith("False")


def test_python_dash_m_runs():
    out = subprocess.run([sys.executable, "-m", "runner", "--version"], capture_output=True,
                         text=True)
    assert out.returncode == 0 and "foldwise" in out.stdout


# ----------------------------------------------------------------------------------------
# Bad input: exit 2, one paragraph naming file/field/column and the fix, nothing written.

def _df():
    return diabetes_frame()


def _write(folder: Path, df: pd.DataFrame, name="diabetes.csv"):
    df.to_csv(folder / name, index=False)


def case_missing_data(folder):
    return write_spec(folder, MODELS, data="nowhere.csv")


def case_target_not_column(folder):
    _write(folder, _df().rename(columns={"progression": "progress"}))
    return write_spec(folder, MODELS)


def case_text_target(folder):
    df = _df()
    df["progression"] = np.where(df.progression > 150, "high", "low")
    _write(folder, df)
    return write_spec(folder, MODELS)


def case_target_all_missing(folder):
    df = _df()
    df["progression"] = np.nan
    _write(folder, df)
    return write_spec(folder, MODELS)


def case_target_some_missing(folder):
    df = _df()
    df.loc[[4, 9], "progression"] = np.nan
    _write(folder, df)
    return write_spec(folder, MODELS)


def case_target_constant(folder):
    df = _df()
    df["progression"] = 7.0
    _write(folder, df)
    return write_spec(folder, MODELS)


def case_target_inf(folder):
    df = _df().astype({"progression": float})
    df.loc[3, "progression"] = np.inf
    _write(folder, df)
    return write_spec(folder, MODELS)


def case_feature_all_missing(folder):
    df = _df()
    df["s3"] = np.nan
    _write(folder, df)
    return write_spec(folder, MODELS)


def case_unknown_family(folder):
    _write(folder, _df())
    return write_spec(folder, "m: {family: boosted}")


def case_unknown_param(folder):
    _write(folder, _df())
    return write_spec(folder, "m: {family: forest, grid: {n_estimator: [10]}}")


def case_empty_grid(folder):
    _write(folder, _df())
    return write_spec(folder, "m: {family: linear, grid: {penalty: l2, alpha: []}}")


def case_too_many_folds(folder):
    _write(folder, _df().iloc[:5])
    return write_spec(folder, MODELS)  # 3 training rows for 3 folds: too few


def case_bad_yaml(folder):
    path = folder / "spec.yaml"
    path.write_text("name: x\ndata: {path: d.csv\n  target: y\n")
    return path


def case_empty_file(folder):
    (folder / "diabetes.csv").write_text("")
    return write_spec(folder, MODELS)


def case_header_only(folder):
    (folder / "diabetes.csv").write_text("age,progression\n")
    return write_spec(folder, MODELS)


def case_not_csv(folder):
    _write(folder, _df(), name="diabetes.xlsx")
    return write_spec(folder, MODELS, data="diabetes.xlsx")


def case_latin1(folder):
    (folder / "diabetes.csv").write_bytes("ciudad,progression\nMálaga,1\nCádiz,2\n".encode("latin-1"))
    return write_spec(folder, MODELS)


def case_duplicate_columns(folder):
    (folder / "diabetes.csv").write_text("age,age,progression\n1,2,3\n4,5,6\n")
    return write_spec(folder, MODELS)


def case_drop_unknown(folder):
    _write(folder, _df())
    spec = write_spec(folder, MODELS)
    spec.write_text(spec.read_text().replace("  target: progression",
                                             "  target: progression\n  drop: [ages]"))
    return spec


def case_test_only_level(folder):
    df = _df()
    df["site"] = "north"
    df.loc[[0, 1], "site"] = "island"  # rows 0 and 1 fall in the test split below
    _write(folder, df)
    spec = write_spec(folder, MODELS)
    spec.write_text(spec.read_text().replace("fraction: 0.25\n  seed: 3", "column: holdout"))
    df["holdout"] = np.arange(len(df)) < 40
    _write(folder, df)
    return spec


def case_store_folder_missing(folder):
    _write(folder, _df())
    spec = write_spec(folder, MODELS)
    spec.write_text(spec.read_text().replace("store: store.duckdb", "store: no/such/dir/s.duckdb"))
    return spec


BAD = [
    (case_missing_data, ["nowhere.csv", "does not exist", "data.path"]),
    (case_target_not_column, ["target 'progression' is not a column", "Did you mean 'progress'"]),
    (case_text_target, ["target column 'progression'", "not numeric"]),
    (case_target_all_missing, ["entirely missing"]),
    (case_target_some_missing, ["2 missing values", "file lines 6, 11"]),
    (case_target_constant, ["is constant"]),
    (case_target_inf, ["infinite"]),
    (case_feature_all_missing, ["feature column 's3'", "entirely missing", "data.drop"]),
    (case_unknown_family, ["unknown family 'boosted'", "linear, pruned_tree, forest"]),
    (case_unknown_param, ["unknown hyperparameter 'n_estimator'", "Did you mean 'n_estimators'"]),
    (case_empty_grid, ["grid.alpha is an empty list"]),
    (case_too_many_folds, ["training rows for 3 folds", "folds.k"]),
    (case_bad_yaml, ["not valid YAML", "line 3"]),
    (case_empty_file, ["is empty"]),
    (case_header_only, ["no rows"]),
    (case_not_csv, ["extension '.xlsx'", ".csv and .parquet"]),
    (case_latin1, ["not UTF-8"]),
    (case_duplicate_columns, ["duplicate column names: age"]),
    (case_drop_unknown, ["column in `data.drop` 'ages'", "Did you mean 'age'"]),
    (case_test_only_level, ["categorical column 'site'", "only in the test rows", "'island'"]),
    (case_store_folder_missing, ["store folder", "does not exist"]),
]


@pytest.mark.parametrize("make,words", BAD, ids=[m.__name__[5:] for m, _ in BAD])
@pytest.mark.parametrize("command", ["run", "check"])
def test_bad_input_is_refused_cleanly(tmp_path, make, words, command):
    spec = make(tmp_path)
    result = invoke(command, spec, "--jobs", "1") if command == "run" else invoke(command, spec)
    assert result.exit_code == 2, result.output
    assert result.output.startswith("Error: ")
    message = result.output[len("Error: "):].strip()
    assert "\n" not in message and "Traceback" not in result.output
    for w in words:
        assert w in message, (w, message)
    assert not list(tmp_path.rglob("*.duckdb"))

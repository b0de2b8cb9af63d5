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

from .helpers import write_spec

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
    assert "4 cells, all computed in this sweep; 72 fold-score rows, 12 test-score rows" in \
        result.output


def test_check_prints_plan_and_writes_nothing(tmp_path, diabetes_csv):
    spec = write_spec(tmp_path, MODELS)
    result = invoke("check", spec)
    assert result.exit_code == 0, result.output
    assert "train rows   331" in result.output and "test rows    111" in result.output
    assert ("plan         3 folds × 2 repeats over rows, seed 17; test split: 0.25 of the "
            "rows (seed 3)") in result.output
    assert "leakage checks: nothing found" in result.output
    # two ridge alphas from one SVD a fold: 1 x (6 folds + 1 refit) = 7 fits
    assert "│ ridge │ linear      │     2 │             1 │    7 │" in result.output
    assert not (tmp_path / "store.duckdb").exists()


def test_check_names_the_store_run_would_write_to(tmp_path, diabetes_csv):
    # run writes to --store, else $FOLDWISE_STORE, before the spec's `store` (store.duckdb
    # here); check must name (and vet) that store, not the spec's
    spec = write_spec(tmp_path, MODELS)
    env_store, given = tmp_path / "env.duckdb", tmp_path / "given.duckdb"
    env = {"FOLDWISE_STORE": str(env_store)}
    for args, shown in (((), env_store), (("--store", str(given)), given)):
        result = CliRunner().invoke(main, ["check", str(spec), *args], env=env)
        assert result.exit_code == 0, result.output
        assert f"store        {shown}\n" in result.output
    assert not any(p.suffix == ".duckdb" for p in tmp_path.iterdir())
    for command in ("check", "run"):
        shown = " ".join(CliRunner().invoke(main, [command, "--help"]).output.split())
        assert "[default: $FOLDWISE_STORE, else the spec's `store`, else " in shown


def test_summary_json_equals_fold_rows(swept):
    _, store, _ = swept
    out = invoke("summary", "--store", store, "--format", "json")
    assert out.exit_code == 0, out.output
    rows = {r["model"]: r for r in json.loads(out.stdout)}
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


def test_json_gives_params_as_objects_and_every_digit(swept):
    from runner.read.queries import summary
    from runner.store import Store

    _, store, _ = swept
    rows = json.loads(invoke("summary", "--store", store, "--format", "json").stdout)
    api = summary(Store(store)).table
    for row, (_, ref) in zip(rows, api.iterrows()):
        assert row["params"] == json.loads(ref["params"]) and isinstance(row["params"], dict)
        for col in ("cv_rmse", "se_rmse", "test_r2"):
            assert row[col] == ref[col]  # exactly: no digit lost on the way


def test_sql_and_sweeps(swept):
    _, store, _ = swept
    out = invoke("sql", "--store", store, "--format", "json",
                 "select metric, count(*) as n from fold_scores group by metric order by metric")
    assert json.loads(out.output) == [{"metric": "mae", "n": 24}, {"metric": "r2", "n": 24},
                                      {"metric": "rmse", "n": 24}]
    out = invoke("sweeps", "--store", store, "--format", "json")
    (sweep,) = json.loads(out.stdout)
    assert sweep["status"] == "finished" and sweep["cells"] == 4 and sweep["fold_rows"] == 72
    assert (sweep["n_train"], sweep["n_test"], sweep["k"], sweep["repeats"]) == (331, 111, 3, 2)


def test_sql_refuses_writes(swept):
    _, store, _ = swept
    before = store.read_bytes()
    for query, kind in (("delete from fold_scores", "a DELETE"), ("drop table cells", "a DROP"),
                        ("attach 'x.duckdb'", "an ATTACH"),
                        ("copy fold_scores to 'out.csv'", "a COPY"),
                        ("create table t as select 1", "a CREATE"),
                        ("update sweeps set status = 'x'", "an UPDATE"),
                        ("set threads = 1", "a SET"), ("select 1; select 2", None)):
        out = invoke("sql", "--store", store, query)
        assert out.exit_code == 2, (query, out.output)
        assert kind is None or f"only read queries (SELECT, WITH, DESCRIBE, SUMMARIZE, " \
            f"EXPLAIN) are allowed; refused {kind} statement." in " ".join(out.output.split())
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
            "print([m for m in ('sklearn', 'pandas', 'duckdb') if m in sys.modules])")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.stdout.strip().endswith("[]")


def test_python_dash_m_runs():
    out = subprocess.run([sys.executable, "-m", "runner", "--version"], capture_output=True,
                         text=True)
    assert out.returncode == 0 and "foldwise" in out.stdout


def test_the_console_command_exits_with_its_objects_frozen_and_its_code():
    """`command_line` (the installed `foldwise` and `python -m runner`) freezes what is alive
    out of the collector at exit, after the command's own work and output; a bad spec still
    exits 2 with its message."""
    pyproject = (Path(__file__).parents[1] / "pyproject.toml").read_text()
    assert '\nfoldwise = "runner.cli:command_line"\n' in pyproject
    code = ("import atexit, gc, sys\n"
            "atexit.register(lambda: print('frozen at exit:', gc.get_freeze_count() > 0))\n"
            "from runner.cli import command_line\n"
            "sys.argv = ['foldwise', *sys.argv[1:]]\n"
            "command_line()")
    out = subprocess.run([sys.executable, "-c", code, "--version"], capture_output=True,
                         text=True)
    assert out.returncode == 0
    version, frozen = out.stdout.splitlines()
    assert version.startswith("foldwise, version ") and frozen == "frozen at exit: True"
    out = subprocess.run([sys.executable, "-c", code, "check", "no-such-spec.yaml"],
                         capture_output=True, text=True)
    assert out.returncode == 2 and out.stderr.startswith("Error: ")
    assert out.stdout.splitlines() == ["frozen at exit: True"]


def test_run_names_its_store_without_dot_dot(tmp_path, diabetes_csv):
    specs = tmp_path / "specs"
    specs.mkdir()
    (tmp_path / "results").mkdir()
    (specs / "diabetes.csv").write_bytes(diabetes_csv.read_bytes())
    spec = write_spec(specs, MODELS)
    spec.write_text(spec.read_text().replace("store: store.duckdb",
                                             "store: ../results/store.duckdb"))
    result = invoke("run", spec, "--jobs", "1", "--quiet")
    assert result.exit_code == 0, result.output
    assert f"-> {tmp_path / 'results' / 'store.duckdb'}\n" in result.output, result.output
    assert (tmp_path / "results" / "store.duckdb").exists()


def test_a_query_after_a_run_into_the_specs_store_says_where_queries_look(swept, monkeypatch):
    # The spec's `store:` sent the sweep to store.duckdb; a query without --store looks in
    # results/, and must not tell the user who just ran a sweep only to run one.
    folder, store, _ = swept
    monkeypatch.chdir(folder)
    monkeypatch.delenv("FOLDWISE_STORE", raising=False)
    out = invoke("summary")
    message = " ".join(out.output.split())
    assert out.exit_code == 2 and "Traceback" not in out.output, out.output
    assert "no store at results/foldwise.duckdb" in message
    assert "point --store (or $FOLDWISE_STORE) at an existing store: a spec's `store:` is " \
           "read by `run` and `check` only" in message
    assert invoke("summary", "--store", store).exit_code == 0


def _colours(text: str) -> list[str]:
    """The colour codes among a text's terminal style sequences (SGR 30-38, 40-48, 90-97,
    100-107: foreground and background; bold and the like are not colours)."""
    import re

    found = []
    for params in re.findall(r"\x1b\[([0-9;]*)m", text):
        codes = [int(c) for c in params.split(";") if c]
        found += [str(c) for c in codes if 30 <= c <= 48 or 90 <= c <= 107]
    return found


@pytest.mark.parametrize("no_colour", [True, False])
def test_statuses_are_words_and_read_the_same_with_colour_off(tmp_path, monkeypatch,
                                                              no_colour):
    """On a terminal (forced, as FORCE_COLOR does) a sweep's status is its word: the tables
    wear no colour, so NO_COLOR takes nothing away; the progress bar says done/total in
    figures and, with NO_COLOR, draws only the part done."""
    import io

    from runner.commands.options import _ProgressBar

    from .store_builder import write_sweep

    env = {"FORCE_COLOR": "1", "NO_COLOR": "1" if no_colour else None}
    store = tmp_path / "s.duckdb"
    write_sweep(store, {"m": [[1.0, 2.0, 3.0, 4.0]]}, k=2, repeats=2)
    write_sweep(store, {"m": [[1.0, 2.0, 3.0, 4.0]]}, k=2, repeats=2, status="failed",
                sweep_id="20260101-000000-bbbb")
    out = CliRunner(env=env).invoke(main, ["sweeps", "--store", str(store)])
    assert out.exit_code == 0, out.output
    assert "\x1b[1m" in out.output  # a terminal's styles were written (bold headings)
    assert _colours(out.output) == []
    rows = {line.split()[1]: line.split()[5] for line in out.output.splitlines()
            if "20260101-000000-" in line}
    assert rows == {"20260101-000000-aaaa": "finished", "20260101-000000-bbbb": "failed"}

    for name, value in env.items():
        if value is None:
            monkeypatch.delenv(name, raising=False)
        else:
            monkeypatch.setenv(name, value)
    monkeypatch.setattr(sys, "stderr", io.StringIO())
    bar = _ProgressBar("run")
    bar(3, 10)
    bar.close()
    drawn = sys.stderr.getvalue()
    last = drawn.split("\r\x1b[2K")[-1]
    assert "3/10" in last and "tasks" in last
    if no_colour:
        assert _colours(drawn) == []
        assert last.count("━") == 12  # 3/10 of the 40-character bar; the rest left blank
    else:
        assert _colours(drawn)  # colour only adds to the words

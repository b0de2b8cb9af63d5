"""What `run`, `sweeps` and the report say about a sweep's time and its reused cells: one
duration everywhere, measured the same way and said what it measures, and a rerun that
fitted nothing says so."""

from __future__ import annotations

import html
import re
import time

import pytest
from click.testing import CliRunner

from runner.cli import main
from runner.read.queries import sweep_record
from runner.read.report import CAUTIONS, render_report
from runner.read.views import TIME_MEANING, reuse_text, time_text
from runner.store import Store
from runner.write import engine
from runner.write.engine import run_sweep

from .helpers import diabetes_frame, spec_from, write_spec

MODELS = """
ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 10.0]}}
tree: {family: pruned_tree, grid: {ccp_fraction: [0.002, 0.02], min_samples_leaf: [5]}}
"""


@pytest.fixture
def folder(tmp_path):
    diabetes_frame().to_csv(tmp_path / "diabetes.csv", index=False)
    return tmp_path


def _text(page: str) -> str:
    return " ".join(html.unescape(re.sub(r"<[^>]+>", " ", page)).split())


def test_stored_duration_counts_the_preparation_and_equals_the_printed_one(folder, monkeypatch):
    # Reading the data and expanding the grid happen before the sweep is recorded; they
    # belong to its time. A preparation made one second slower must show in the store.
    real = engine.prepare

    def slow(*args, **kwargs):
        time.sleep(1.0)
        return real(*args, **kwargs)

    monkeypatch.setattr(engine, "prepare", slow)
    store = Store(folder / "store.duckdb")
    result = run_sweep(spec_from(folder, MODELS), store=store, jobs=1)
    stored = store.query("select epoch(finished_at - started_at) s from sweeps").s[0]
    assert stored >= 1.0
    assert stored == pytest.approx(result.seconds, abs=1e-5)  # timestamps keep microseconds


def test_run_sweeps_and_report_say_what_the_time_measures_and_what_was_reused(folder):
    spec = write_spec(folder, MODELS)
    store = folder / "store.duckdb"
    first = CliRunner().invoke(main, ["run", str(spec), "--quiet", "--jobs", "1"])
    assert first.exit_code == 0, first.output
    assert "finished in " in first.output and f" s {TIME_MEANING}: 4 cells, all computed " \
        "in this sweep;" in first.output
    again = CliRunner().invoke(main, ["run", str(spec), "--quiet", "--jobs", "1"])
    assert again.exit_code == 0, again.output
    assert (f" s {TIME_MEANING}: 4 cells, all reused from earlier sweeps: nothing was "
            "fitted;") in again.output
    listed = CliRunner().invoke(main, ["sweeps", "--store", str(store)])
    assert f"seconds: {TIME_MEANING}" in " ".join(listed.output.split())

    s = Store(store)
    old, new = s.query("select sweep_id from sweeps order by started_at").sweep_id
    page = _text(render_report(s, new))
    assert f"4 cells, all reused from sweep {old}: nothing was fitted" in page
    assert re.search(rf"time \d+\.\d s {TIME_MEANING}", page)
    assert "its own fits took" not in page  # nothing was fitted, so no worker time
    counts = sweep_record(s, old)["counts"]
    assert (counts["cells"], counts["reused"], counts["reused_from"]) == (4, 0, [])
    assert counts["fit_seconds"] > 0  # the first sweep's fits, one metric's rows summed
    assert "its own fits took" in time_text(1.0, counts["fit_seconds"])


def test_cautions_point_to_where_the_fingerprint_is():
    # The data fingerprint is under "Sweep facts", which comes before the cautions.
    audit = [c for c in CAUTIONS if "fingerprint" in c]
    assert len(audit) == 1 and "Sweep facts, above" in audit[0] and "below" not in audit[0]


@pytest.mark.parametrize("args,expected", [
    ((42, 42, ["20260101-000000-aaaa"]),
     "42 cells, all reused from sweep 20260101-000000-aaaa: nothing was fitted"),
    ((42, 30, ["a", "b"]), "42 cells, 30 of them reused from sweeps a, b"),
    ((1, 0, []), "1 cell, all computed in this sweep"),
    ((5, 5, []), "5 cells, all reused from earlier sweeps: nothing was fitted"),
])
def test_reuse_words(args, expected):
    assert reuse_text(*args) == expected


def test_time_words():
    assert time_text(3.84, 12.25) == (f"3.8 s {TIME_MEANING}; its own fits took 12.2 s of "
                                      "worker time")
    assert time_text(0.46, 0.0) == f"0.5 s {TIME_MEANING}"
    assert time_text(None) == "not finished"

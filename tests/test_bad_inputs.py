"""The bad-input corpus: every folder in tests/bad_inputs/ holds a spec (and its data files)
that foldwise must refuse with exit code 2, one paragraph naming the file, field or column
and the fix, no traceback, and a store left untouched. The first line of each spec says
what is expected: `# expect: exit 2; words | that | must | appear`."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
import threading
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import duckdb
import pytest
from click.testing import CliRunner

from runner.cli import main
from runner.store import Store

from .helpers import write_spec

CORPUS = Path(__file__).parent / "bad_inputs"
CASES = sorted(p for p in CORPUS.iterdir() if p.is_dir() and not p.name.startswith("_"))
# `check` fits and writes nothing; it still validates the store's place, not its contents.
CHECK_SKIPS_STORE_CONTENT = {"store_not_duckdb", "store_newer_schema"}


def _expectation(spec: Path) -> tuple[int, list[str]]:
    first = spec.read_text().splitlines()[0]
    code, words = first.removeprefix("# expect: exit ").split(";", 1)
    return int(code), [w.strip() for w in words.split("|")]


def _materialise(case: Path, into: Path) -> Path:
    """Copy the case (and the shared data) to a scratch folder; build stores it asks for."""
    shutil.copytree(CORPUS / "_data", into / "_data")
    work = into / case.name
    shutil.copytree(case, work)
    for recipe in work.glob("*.make"):
        target = recipe.with_suffix("")
        kind = recipe.read_text().strip()
        if kind == "JUNK":  # not a database at all (stores are git-ignored, so made here)
            target.write_bytes(b"not a database at all" * 100)
            recipe.unlink()
            continue
        if kind == "FIFO":  # a named pipe: opening it for reading would wait for a writer
            os.mkfifo(target)
            recipe.unlink()
            continue
        if kind.startswith("PAD "):  # grow a file past a size limit with comment lines
            with open(target, "a") as fh:
                fh.write(("#" * 99 + "\n") * (int(kind.split()[1]) // 100 + 1))
            recipe.unlink()
            continue
        Store(target).ensure_schema()
        if kind == "NEWER":
            with duckdb.connect(str(target)) as con:
                con.execute("update foldwise_meta set value = '999' where key = 'schema_version'")
        elif kind == "READONLY":
            target.chmod(0o444)
        recipe.unlink()
    return work / "spec.yaml"


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() if p.is_file() else b"(not a file)"
            for p in sorted(folder.rglob("*")) if not p.is_dir()}


def test_corpus_is_large():
    assert len(CASES) >= 40


@pytest.mark.parametrize("command", ["run", "check"])
@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_bad_input_refused_cleanly(tmp_path, case, command):
    if command == "check" and case.name.split("_", 1)[1] in CHECK_SKIPS_STORE_CONTENT:
        return
    spec = _materialise(case, tmp_path)
    code, words = _expectation(spec)
    before = _snapshot(tmp_path)
    args = [command, str(spec)] + (["--jobs", "1"] if command == "run" else [])
    result = CliRunner().invoke(main, args)
    assert result.exit_code == code, result.output
    assert result.output.startswith("Error: "), result.output
    message = result.output.removeprefix("Error: ").strip()
    assert "\n" not in message and "Traceback" not in result.output
    assert "?." not in message, message
    for word in words:
        assert word in message, (word, message)
    assert _snapshot(tmp_path) == before, "the store or data changed"


def test_sweep_whose_every_fit_fails_exits_nonzero(tmp_path, diabetes_csv, monkeypatch):
    """Every fit raising is not a success: exit 1, one paragraph naming the error and the
    failures table, the sweep stored as 'failed'; `summary` then says there is no pick
    instead of printing empty facts."""
    from runner.families import linear

    def regressor(params):
        raise FloatingPointError("matrix is singular to working precision")

    monkeypatch.setattr(linear, "_regressor", regressor)
    spec = write_spec(tmp_path, "ridge: {family: linear, grid: {penalty: l2, alpha: [1.0, 9.0]}}")
    result = CliRunner().invoke(main, ["run", str(spec), "--jobs", "1", "--no-paths"])
    assert result.exit_code == 1, result.output
    message = result.output.strip().splitlines()[-1]
    assert message.startswith("Error: sweep ") and "Traceback" not in result.output
    for words in ("all 14 fits raised an error", "FloatingPointError: matrix is singular",
                  "status 'failed'", "from failures"):
        assert words in message, (words, message)
    store = Store(tmp_path / "store.duckdb")
    status = store.query("select status from sweeps")["status"].tolist()
    assert status == ["failed"]
    assert store.query("select count(*) n from failures")["n"][0] == 2 * (3 * 2 + 1)
    out = CliRunner().invoke(main, ["summary", "--store", str(tmp_path / "store.duckdb")])
    assert out.exit_code == 0, out.output
    assert "None" not in out.output and "(one-SE rule) by CV RMSE" in out.output
    assert "model 'ridge' has no cell to pick" in out.output


# Resource cases: refused before anything large is read, built or allocated. Each is run in
# its own process so that its CPU time and peak memory can be measured (os.wait4). The
# bounds are generous on purpose, documented as such: a refusal here costs about 1 s of CPU
# and 150 MB, nearly all of it Python starting and importing pandas, numpy and pydantic;
# before these checks the same inputs took 35-86 s and 2.3-3.2 GB, or never ended.
RESOURCE_CASES = ["69_yaml_alias_bomb", "70_yaml_deep_lists", "71_yaml_deep_mappings",
                  "72_yaml_alias_loop", "73_spec_too_large", "74_yaml_huge_integer",
                  "75_folds_repeats_huge", "76_grid_hundred_million_cells",
                  "77_grid_million_cells", "78_range_n_huge", "79_path_range_huge",
                  "80_fits_over_limit", "81_data_dev_zero", "82_data_fifo",
                  "83_test_file_fifo", "84_data_over_size_limit"]
PLAN_CASES = {"75_folds_repeats_huge", "76_grid_hundred_million_cells",
              "77_grid_million_cells", "80_fits_over_limit"}  # `check` also sized these
CPU_SECONDS, PEAK_MB, HANG_SECONDS = 2.0, 200, 60


# Runs `python -m runner` and, at exit, writes the process's peak resident memory (VmHWM
# of its own address space; the rusage figure would include the forking parent's).
_PEAK_WRAPPER = """
import atexit, runpy, sys
peak_file = sys.argv.pop(1)
def _peak():
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            open(peak_file, "w").write(line.split()[1])
atexit.register(_peak)
sys.argv[0] = "foldwise"
runpy.run_module("runner", run_name="__main__", alter_sys=True)
"""


def _measured(args: list[str], cwd: Path) -> tuple[int, str, float, float]:
    """(exit code, output, CPU seconds, peak resident MB) of `python -m runner ARGS`."""
    peak_file = cwd / f"peak-{args[0]}.txt"
    with tempfile.TemporaryFile() as out:
        proc = subprocess.Popen([sys.executable, "-c", _PEAK_WRAPPER, str(peak_file), *args],
                                cwd=cwd, stdout=out, stderr=subprocess.STDOUT,
                                stdin=subprocess.DEVNULL)
        guard = threading.Timer(HANG_SECONDS, proc.kill)  # a hang fails instead of blocking
        guard.start()
        try:
            _, status, usage = os.wait4(proc.pid, 0)
        finally:
            guard.cancel()
        proc.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        text = out.read().decode()
    peak = int(peak_file.read_text()) / 1024 if peak_file.exists() else float("inf")
    peak_file.unlink(missing_ok=True)
    return proc.returncode, text, usage.ru_utime + usage.ru_stime, peak


def test_resource_cases_are_in_the_corpus():
    assert set(RESOURCE_CASES) <= {c.name for c in CASES}


def test_resource_cases_refused_quickly(tmp_path):
    jobs = []
    for name in RESOURCE_CASES:
        spec = _materialise(CORPUS / name, tmp_path / name)
        jobs.append((name, ["run", str(spec), "--jobs", "1"], spec.parent))
        if name in PLAN_CASES:
            jobs.append((name, ["check", str(spec)], spec.parent))
    with ThreadPoolExecutor(2) as pool:
        results = list(pool.map(lambda job: (job[0], job[1][0], *_measured(job[1], job[2])),
                                jobs))
    for name, command, code, output, cpu, peak in results:
        where = (name, command, output)
        assert code == 2 and output.startswith("Error: ") and "Traceback" not in output, where
        assert cpu < CPU_SECONDS, (name, command, f"{cpu:.2f} s of CPU")
        assert peak < PEAK_MB, (name, command, f"{peak:.0f} MB peak")
    assert not any((tmp_path / name / name / "store.duckdb").exists() for name in RESOURCE_CASES)

"""The bad-input corpus: every folder in tests/bad_inputs/ holds a spec (and its data files)
that foldwise must refuse with exit code 2, one paragraph naming the file, field or column
and the fix, no traceback, and a store left untouched. The first line of each spec says
what is expected: `# expect: exit 2; words | that | must | appear`."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import duckdb
import pytest
from click.testing import CliRunner

from runner.cli import main
from runner.store import Store

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
    for word in words:
        assert word in message, (word, message)
    assert _snapshot(tmp_path) == before, "the store or data changed"

"""Worker processes die with their parent: after a `kill -9` of `foldwise run`, no worker
(local joblib processes or a Dask LocalCluster's) is left running or holding the
terminal's output open. Linux only: it reads process ancestry from /proc."""

from __future__ import annotations

import os
import select
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from .helpers import diabetes_frame, write_spec

pytestmark = pytest.mark.skipif(not Path("/proc/self/stat").exists(),
                                reason="reads process ancestry from /proc (Linux)")

SLOW = """
forest: {family: forest, grid: {n_estimators: [600], max_features: [0.3, 0.6, 1.0]}}
"""  # 21 separate forest fits: several seconds of work for two workers
GONE_WITHIN = 5.0  # seconds; generous, documented: workers look every 0.2 s


def _stat(pid: int) -> tuple[str, int] | None:
    """(state, parent id) of a process, or None once it is gone."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    state, ppid = text[text.rindex(")") + 2:].split()[:2]
    return state, int(ppid)


def _descendants(root: int) -> set[int]:
    parents = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit() and (st := _stat(int(entry.name))) is not None:
            parents[int(entry.name)] = st[1]
    found, frontier = set(), {root}
    while frontier:
        frontier = {pid for pid, parent in parents.items() if parent in frontier} - found
        found |= frontier
    return found


def _running(pids: set[int]) -> set[int]:
    """The pids still running (a zombie has exited; only its entry waits to be reaped)."""
    return {pid for pid in pids if (st := _stat(pid)) is not None and st[0] != "Z"}


def _cmdline(pid: int) -> str:
    try:
        return Path(f"/proc/{pid}/cmdline").read_bytes().replace(b"\0", b" ").decode()
    except OSError:
        return ""


@pytest.mark.parametrize("how, marker", [(["--jobs", "2"], "LokyProcess"),
                                         (["--cluster", "local:2"], "spawn_main")])
def test_workers_exit_when_the_parent_is_killed(tmp_path, how, marker):
    diabetes_frame().to_csv(tmp_path / "diabetes.csv", index=False)
    spec = write_spec(tmp_path, SLOW)
    proc = subprocess.Popen([sys.executable, "-m", "runner", "run", str(spec), "--store",
                             str(tmp_path / "store.duckdb"), "--quiet", *how],
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
    children: set[int] = set()
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and proc.poll() is None:
            children = _descendants(proc.pid)
            if sum(marker in _cmdline(pid) for pid in children) >= 2:
                break
            time.sleep(0.1)
        assert proc.poll() is None, "the sweep ended before its workers were seen"
        time.sleep(1.5)  # let the workers get into their fits
        children = _descendants(proc.pid)
        assert sum(marker in _cmdline(pid) for pid in children) >= 2
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        killed = time.monotonic()
        while _running(children) and time.monotonic() - killed < GONE_WITHIN:
            time.sleep(0.05)
        left = _running(children)
        assert not left, [(pid, _cmdline(pid)) for pid in left]
        # nothing holds the output pipe any more: reading it reaches the end
        fd = proc.stdout.fileno()
        while select.select([fd], [], [], GONE_WITHIN)[0]:
            if not os.read(fd, 65536):
                break
        else:
            pytest.fail("the command's output is still held open by a process it started")
    finally:
        for pid in _running(children | {proc.pid}):
            os.kill(pid, signal.SIGKILL)  # only processes this test started
        proc.wait()
        proc.stdout.close()

"""Where a sweep's tasks run: worker processes on this machine (joblib), or the workers of
a Dask cluster. The engine only submits tasks and receives their rows, in the order they
finish; it never learns which.

A task is `work(*args, **kwargs)` with the arguments that `unpack(data, item)` builds from
the sweep's shared data and one light task description. Locally each task's rows are cut
from the data in this process as the task is sent; on a cluster the data travel to every
worker once (scattered) and each worker cuts its own task's rows.

Workers never outlive the process that started them: a local worker watches its parent
from its first task on and exits when it is gone (even after a `kill -9`, which no exit
handler sees), and Dask's own local workers already do the same. The watch starts with
the task, not as a pool initializer, so that the local workers are joblib's reusable pool
with default settings: a sweep after another sweep, or after any scikit-learn code run
with the same n_jobs in this process, finds its workers already started."""

from __future__ import annotations

import atexit
import gc
import logging
import os
import threading
import time
import warnings
from typing import Any, Callable, Iterable, Iterator

from ..errors import FoldwiseError

__all__ = ["LocalExecutor", "DaskExecutor", "Running", "make_executor", "ClusterError",
           "package_versions", "watch_parent", "give_back_freed_memory"]

Unpack = Callable[[dict, Any], tuple[tuple, dict]]


class ClusterError(FoldwiseError, RuntimeError):
    """The Dask cluster cannot be reached or started as asked."""

    exit_code = 2


PARENT_CHECK_SECONDS = 0.2
"""How often a local worker looks whether the process that started it is still there."""


def watch_parent(parent: int, interval: float = PARENT_CHECK_SECONDS) -> None:
    """In a worker: end this process once `parent` is no longer its parent.

    A process whose parent dies is handed to another (init or a subreaper), so its parent
    id changes; a daemon thread notices within `interval` seconds, even while the worker
    is in the middle of a fit, and exits at once (the parent is gone: no one is waiting for
    the result). Parent ids behave so on Linux and macOS."""
    def watch():
        while os.getppid() == parent:
            time.sleep(interval)
        os._exit(1)

    threading.Thread(target=watch, name="foldwise-watch-parent", daemon=True).start()


SHARE_BYTES = 2 ** 20
"""Shared data of at least this size reach local workers through one memory-mapped file
instead of inside every task. It is joblib's own size for mapping a task's arguments:
above it joblib would write each task's rows to a file of their own (and remove them all
when the tasks end), where one file of all the rows serves every task."""


def _data_bytes(data: dict) -> int:
    """The bytes of the row tables in a task's shared data."""
    total = 0
    for value in data.values():
        if hasattr(value, "memory_usage"):
            total += int(value.memory_usage(index=False, deep=False).sum())
        elif hasattr(value, "nbytes"):
            total += int(value.nbytes)
    return total


class _SharedFile:
    """The shared data written once to a file that every local worker maps (joblib's
    memory mapping: numeric columns are read from the page cache, not copied into each
    worker), and removed when the tasks are done."""

    def __init__(self, data: dict):
        import tempfile

        import joblib

        self.folder = tempfile.mkdtemp(prefix="foldwise-shared-")
        self.path = os.path.join(self.folder, "data.joblib")
        joblib.dump(data, self.path)

    def close(self) -> None:
        import shutil

        shutil.rmtree(self.folder, ignore_errors=True)


_MAPPED: dict[str, dict] = {}


def _mapped(path: str) -> dict:
    """The shared data of `path`, mapped once per process; files since removed are let go
    (a sweep's shared rows and one call's own file may be in use side by side)."""
    if path not in _MAPPED:
        import joblib

        for gone in [p for p in _MAPPED if not os.path.exists(p)]:
            del _MAPPED[gone]
        _MAPPED[path] = joblib.load(path, mmap_mode="r")
    return _MAPPED[path]


class _Ref:
    """Where a worker finds one shared table: the file it was written to, and its key."""

    def __init__(self, path: str, key: str):
        self.path, self.key = path, key


def _glibc_trim() -> Callable[[], Any] | None:
    """glibc's `malloc_trim`, or None where the C library is not glibc."""
    import ctypes
    import ctypes.util

    try:
        return ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6").malloc_trim
    except (OSError, AttributeError):
        return None


_TRIM = _glibc_trim() if os.name == "posix" else None


TRIM_AFTER_SECONDS = 1.0
"""A worker gives back freed memory after a task of at least this long: the pages of a fit
on many rows are worth the walk over the heap (tens of ms), a quick task's are not."""


def give_back_freed_memory() -> None:
    """Return to the system the heap pages that freed objects left behind. glibc keeps
    them for reuse; after a fit on many rows a long-lived process holds tens to hundreds
    of MiB that nothing uses, and the next task's peak comes on top of them."""
    if _TRIM is not None:
        _TRIM(0)


_WATCHED: list[int] = []


def _watched(parent: int, work: Callable, *args, **kwargs):
    """Run one task, first making sure that this worker watches `parent` (once per worker;
    never in `parent` itself, where joblib runs the tasks of a one-worker sweep), and give
    back what a long task freed before the next one starts."""
    if os.getpid() != parent and parent not in _WATCHED:
        watch_parent(parent)
        # The parent's exit waits for its workers' own: keep theirs quick, as the
        # command's (runner/cli.py, command_line).
        atexit.register(gc.freeze)
        _WATCHED.append(parent)
    start = time.perf_counter()
    try:
        return work(*args, **kwargs)
    finally:
        if time.perf_counter() - start >= TRIM_AFTER_SECONDS:
            give_back_freed_memory()


def _on_local_worker(work: Callable, unpack: Unpack, path: str, refs: dict, item):
    """Run one task on a local worker: its rows are cut here from the mapped data (the
    call's own file, and the tables shared once for every call, `refs`)."""
    data = {**_mapped(path), **{k: _mapped(r.path)[r.key] for k, r in refs.items()}}
    args, kwargs = unpack(data, item)
    return work(*args, **kwargs)


class Running:
    """The results of tasks already started, in the order they finish. `close()` stops the
    tasks still running and lets go of what they shared; it is called when the last result
    is taken, and should be called (`contextlib.closing`) by a caller that stops early or
    never asks at all."""

    def __init__(self, results: Iterator, on_close: Callable[[], Any] | None = None):
        self._results, self._on_close = results, on_close

    def __iter__(self) -> "Running":
        return self

    def __next__(self):
        try:
            return next(self._results)
        except BaseException:
            self.close()
            raise

    def close(self) -> None:
        results, on_close = self._results, self._on_close
        self._results, self._on_close = iter(()), None
        try:
            if hasattr(results, "close"):
                with warnings.catch_warnings():  # joblib counts the tasks it stops: we meant to
                    warnings.filterwarnings(  # both of joblib's wordings
                        "ignore", "[0-9]+ tasks (which were still being|have been succ)",
                        UserWarning)
                    results.close()
        finally:
            if on_close is not None:
                on_close()

    def __del__(self):
        try:
            self.close()
        except Exception:  # at interpreter exit the modules it needs may be gone
            pass


class LocalExecutor:
    """joblib worker processes on this machine (`jobs`: -1 = every core), each of which
    exits when this process is gone (`watch_parent`, from its first task on). Shared data
    of `SHARE_BYTES` or more are written once to a file the workers memory-map, and each
    worker cuts its tasks' rows from it; smaller data travel inside each task, cut here.
    Tables given to `share` are written once for all calls, and this process maps them
    too."""

    name = "local"

    def __init__(self, jobs: int = -1):
        self.jobs = jobs
        self._shared: dict[int, tuple[object, _Ref]] = {}  # id(mapped table) -> it, where
        self._files: list[_SharedFile] = []

    @property
    def n_workers(self) -> int:
        from joblib import effective_n_jobs

        return effective_n_jobs(self.jobs)

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self._shared.clear()
        for file in self._files:
            file.close()
        self._files.clear()

    def share(self, tables: dict) -> dict:
        """`tables` written once to a file that every worker maps, returned as mapped from
        that file, so that this process can let its own copy go and hold the rows once
        with its workers. Passed to `results` (in this call's data or a later one's), a
        returned table is not written again. Tables too small to be worth a file, or with
        a single worker, come back as they are. The file goes when the executor closes."""
        if self.n_workers <= 1 or _data_bytes(tables) < SHARE_BYTES:
            return tables
        import joblib

        file = _SharedFile(tables)
        self._files.append(file)
        mapped = joblib.load(file.path, mmap_mode="r")
        for key, table in mapped.items():
            self._shared[id(table)] = (table, _Ref(file.path, key))
        return mapped

    def _refs(self, data: dict) -> dict:
        """The entries of `data` that are tables returned by `share`, as references."""
        refs = {}
        for key, value in data.items():
            known = self._shared.get(id(value))
            if known is not None and known[0] is value:
                refs[key] = known[1]
        return refs

    def results(self, work: Callable, data: dict, items: Iterable, unpack: Unpack
                ) -> "Running":
        """Each item's result, in the order the tasks finish. The first tasks are sent at
        once, so the workers are busy while the caller does its own work before asking."""
        from joblib import Parallel, delayed

        shared = None
        refs = self._refs(data) if self.n_workers > 1 else {}
        rest = {k: v for k, v in data.items() if k not in refs}
        if refs or (self.n_workers > 1 and _data_bytes(rest) >= SHARE_BYTES):
            shared = _SharedFile(rest)
            run, calls = _on_local_worker, (((work, unpack, shared.path, refs, item), {})
                                            for item in items)
        else:
            run, calls = work, (unpack(data, item) for item in items)
        parent = os.getpid()
        try:
            results = Parallel(n_jobs=self.jobs, backend="loky",
                               return_as="generator_unordered")(
                delayed(_watched)(parent, run, *args, **kw) for args, kw in calls)
        except BaseException:
            if shared is not None:
                shared.close()
            raise
        return Running(results, shared.close if shared is not None else None)


def _on_worker(work: Callable, unpack: Unpack, data: dict, item):
    args, kwargs = unpack(data, item)
    return work(*args, **kwargs)


class DaskExecutor:
    """The workers of a Dask cluster: an existing scheduler (`tcp://HOST:PORT`) or a
    LocalCluster of N worker processes started here (`local:N`).

    A worker lost mid-sweep costs only its unfinished tasks, which the scheduler reruns
    elsewhere (and `retries` reruns a task that raised); each task's result is received
    once, so no row is written twice."""

    name = "dask"

    def __init__(self, address: str, *, retries: int = 1, connect_seconds: float = 10.0,
                 versions: dict | None = None):
        self.address = address
        self.retries = retries
        self.connect_seconds = connect_seconds
        self.versions = versions  # what every worker must have; default: this machine's
        self.client = None
        self._cluster = None
        self._sent: dict[int, tuple] = {}  # id(table) -> (table, its future on the workers)
        self.n_scatters = 0

    @property
    def n_workers(self) -> int:
        info = self.client.scheduler_info() if self.client is not None else {}
        return max(1, len(info.get("workers", {})))

    def __enter__(self):
        try:
            from distributed import Client, LocalCluster
        except ImportError:
            raise ClusterError("running on a Dask cluster needs the packages dask and "
                               "distributed: pip install 'foldwise[cluster]'.") from None
        quiet = logging.ERROR
        if self.address.startswith("local:"):
            n = _local_workers(self.address)
            with warnings.catch_warnings():  # its status page moves if port 8787 is taken
                warnings.filterwarnings("ignore", message="Port .* is already in use")
                self._cluster = LocalCluster(n_workers=n, threads_per_worker=1,
                                             processes=True, dashboard_address=None,
                                             silence_logs=quiet)
            self.client = Client(self._cluster)
        else:
            try:
                self.client = Client(self.address, timeout=self.connect_seconds)
            except (OSError, TimeoutError, ValueError) as exc:
                raise ClusterError(f"cannot reach the Dask scheduler at {self.address}: "
                                   f"{exc}. Start one with `dask scheduler` and workers with "
                                   "`dask worker ADDRESS`, or use --cluster local:N to start "
                                   "workers on this machine.") from None
        try:
            if not self.client.scheduler_info().get("workers"):
                self.client.wait_for_workers(1, timeout=self.connect_seconds)
            self._check_workers()
        except TimeoutError:
            self.__exit__(None, None, None)
            raise ClusterError(f"the Dask scheduler at {self.address} has no workers after "
                               f"{self.connect_seconds:g} s; start some with `dask worker "
                               f"{self.address}`.") from None
        except BaseException:
            self.__exit__(None, None, None)
            raise
        return self

    def _check_workers(self) -> None:
        """Refuse workers whose foldwise or numerical packages differ from this machine's:
        their scores would not be the same as a local run's."""
        from .grid import SCORE_PACKAGES, VERSION_NAMES

        ours = self.versions or package_versions()
        try:
            theirs = self.client.run(package_versions)
        except Exception as exc:
            raise ClusterError(f"the workers at {self.address} cannot run foldwise "
                               f"({type(exc).__name__}: {exc}). Install the same foldwise "
                               "on every worker: pip install 'foldwise[cluster]'.") from None
        for worker, versions in sorted(theirs.items()):
            for package, version in ours.items():
                if versions.get(package) != version:
                    what = VERSION_NAMES.get(package, package)
                    raise ClusterError(
                        f"worker {worker} has {what} {versions.get(package, 'unknown')}, "
                        f"this machine {version}; its scores would differ from a local "
                        f"run's. Install the same foldwise and the same versions of "
                        f"{', '.join(SCORE_PACKAGES)} on every worker.")

    def __exit__(self, *exc) -> None:
        self._sent.clear()
        if self.client is not None:
            self.client.close()
        if self._cluster is not None:
            self._cluster.close()
        self.client = self._cluster = None

    def results(self, work: Callable, data: dict, items: Iterable, unpack: Unpack
                ) -> "Running":
        """Each item's result as its task finishes; every task is submitted at once, and
        unfinished tasks are cancelled if the caller stops early (Ctrl-C)."""
        from distributed import as_completed

        items = list(items)
        if not items:
            return Running(iter(()))
        shared = self._scattered(data)
        futures = [self.client.submit(_on_worker, work, unpack, shared, item, pure=False,
                                      retries=self.retries) for item in items]

        def finished():
            for future in as_completed(futures):
                result = future.result()
                future.release()
                yield result

        return Running(finished(), lambda: self.client.cancel(futures))

    def share(self, tables: dict) -> dict:
        """`tables` as they are: `results` sends a table to the workers once anyway."""
        return tables

    def _scattered(self, data: dict) -> dict:
        """`data` with its row tables replaced by futures of copies on every worker. A table
        already sent (the same object, e.g. the sweep's training rows reused by the explain
        step) is not sent again."""
        tables = {k: v for k, v in data.items() if hasattr(v, "shape")}
        new = {k: v for k, v in tables.items() if id(v) not in self._sent}
        if new:
            futures = self.client.scatter(list(new.values()), broadcast=True, hash=False)
            self.n_scatters += 1
            for value, future in zip(new.values(), futures):
                self._sent[id(value)] = (value, future)  # the value keeps its id unique
        return {k: self._sent[id(v)][1] if k in tables else v for k, v in data.items()}


def package_versions() -> dict[str, str]:
    """The versions that decide a score, as installed where this runs: foldwise's own and
    every version that enters a cell id (`grid.identity_versions`: the scoring packages'
    and foldwise's evaluation version, which a release can change without a new number)."""
    from importlib.metadata import PackageNotFoundError, version

    from .grid import identity_versions

    try:
        own = version("foldwise")
    except PackageNotFoundError:
        own = "missing"
    return {"foldwise": own, **identity_versions()}


def _local_workers(address: str) -> int:
    try:
        n = int(address.split(":", 1)[1])
    except ValueError:
        n = 0
    if n < 1:
        raise ClusterError(f"--cluster {address}: write local:N with N worker processes, "
                           "for example local:2.")
    return n


def make_executor(cluster: str | None, jobs: int) -> LocalExecutor | DaskExecutor:
    """A Dask executor if a cluster is named, else local worker processes."""
    if cluster:
        if not (cluster.startswith(("local:", "tcp://", "tls://", "ws://", "wss://",
                                    "inproc://", "ucx://"))):
            raise ClusterError(f"--cluster {cluster}: give a scheduler address such as "
                               "tcp://HOST:8786, or local:N to start N workers here.")
        return DaskExecutor(cluster)
    return LocalExecutor(jobs)

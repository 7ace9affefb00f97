"""Run per-session tasks serially, on a local process pool, or on a Dask cluster.

Tasks are plain picklable callables' arguments; the task functions are pure, so the
result does not depend on where they ran. Results are yielded as they complete,
each as ``(index, Outcome)``; a failure is an Outcome too, never an exception that
stops the others.
"""

from __future__ import annotations

import os
import traceback
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from dataclasses import dataclass
from typing import Any, Callable, Iterator, Sequence

from pipeline.errors import ConfigError, ScreenweaveError

#: How long to wait for a Dask scheduler to answer before giving up.
DASK_CONNECT_TIMEOUT_S = 20


@dataclass
class Outcome:
    """What one task gave: a value, or the error that stopped it."""

    value: Any = None
    error: str | None = None
    hint: str | None = None
    traceback: str | None = None

    @property
    def ok(self) -> bool:
        return self.error is None


def _call(fn: Callable, arg: Any) -> Outcome:
    try:
        return Outcome(value=fn(arg))
    except ScreenweaveError as err:
        return Outcome(error=err.message, hint=err.hint, traceback=traceback.format_exc())
    except Exception as err:  # a bug or an unforeseen input: reported per session
        return Outcome(error=f"internal error: {type(err).__name__}: {err}",
                       hint="rerun with --debug and report it with the traceback",
                       traceback=traceback.format_exc())


def default_workers() -> int:
    """All cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


#: glibc malloc settings for processes that run per-session work (mallopt parameter
#: numbers from <malloc.h>): M_MMAP_THRESHOLD, M_TRIM_THRESHOLD.
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
MMAP_THRESHOLD_BYTES = 256 << 20
TRIM_THRESHOLD_BYTES = 1 << 30


def keep_freed_memory() -> None:
    """Let this process reuse the memory it frees instead of returning it to the OS.

    By default glibc maps every array above a few MB afresh and unmaps it when freed,
    so each session's many multi-MB arrays cost thousands of page faults (measured:
    about 11,700 per 4-hour session, a fifth of its signal-processing time). Raising
    the mmap and trim thresholds keeps freed blocks in the heap for the next array.
    The process then stays at its peak (one session's working set) rather than
    shrinking between sessions. A no-op where the C library is not glibc.
    """
    try:
        import ctypes

        libc = ctypes.CDLL("libc.so.6")
        libc.mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD_BYTES)
        libc.mallopt(_M_TRIM_THRESHOLD, TRIM_THRESHOLD_BYTES)
    except (OSError, AttributeError):  # not glibc
        pass


def return_freed_memory() -> None:
    """Hand the memory this process has freed back to the OS (glibc ``malloc_trim``).

    Reading a big media log leaves its temporary arrays' pages in the heap (measured:
    about 150 MB after a 2.1-million-row log whose parsed table holds 18 MB); the runner
    calls this after ingest so that it does not sit on them for the rest of the run.
    A no-op where the C library is not glibc.
    """
    try:
        import ctypes

        ctypes.CDLL("libc.so.6").malloc_trim(0)
    except (OSError, AttributeError):  # not glibc
        pass


def _start_worker() -> None:
    """Set-up of each local worker process."""
    keep_freed_memory()
    _limit_threads()


def _limit_threads() -> None:
    """Worker start-up: one thread per worker process.

    The pool already uses every core it was given; libraries that start their own
    thread pools (Arrow's readers, BLAS) would only oversubscribe them, and a
    ``--workers 1`` run must really use one core.
    """
    try:
        import pyarrow

        pyarrow.set_cpu_count(1)
        pyarrow.set_io_thread_count(1)
    except ImportError:  # pragma: no cover - pyarrow is a dependency
        pass
    try:
        from threadpoolctl import threadpool_limits

        threadpool_limits(1)
    except ImportError:  # pragma: no cover - optional
        pass


class TaskPool:
    """Where a run's per-session tasks execute: in this process, a local process pool
    or a Dask cluster. One pool serves every phase of a run, so worker processes are
    started (and import the package) once.

    Use as a context manager; :meth:`map` yields ``(index, Outcome)`` for each task as
    it finishes. Local worker processes are started by :meth:`start`, which a run calls
    before it reads the study, so that the forked workers do not inherit (and count in
    their resident memory) the study's tables.
    """

    def __init__(self, workers: int = 1, cluster: str | None = None):
        self.workers, self.cluster = workers, cluster
        self._pool: ProcessPoolExecutor | None = None

    @property
    def local_files(self) -> bool:
        """True when tasks see this machine's file system (no cluster)."""
        return not self.cluster

    @property
    def runs_here(self) -> bool:
        """True when tasks run in this process (serial runs)."""
        return not self.cluster and self.workers <= 1

    def start(self) -> "TaskPool":
        if not self.cluster and self.workers > 1 and self._pool is None:
            self._pool = ProcessPoolExecutor(max_workers=self.workers,
                                             initializer=_start_worker)
            # start every worker now (the pool forks lazily otherwise)
            for fut in [self._pool.submit(_ready) for _ in range(self.workers)]:
                fut.result()
        return self

    def close(self) -> None:
        if self._pool is not None:
            self._pool.shutdown()
            self._pool = None

    def __enter__(self) -> "TaskPool":
        return self.start()

    def __exit__(self, *exc) -> None:
        self.close()

    def submit(self, fn: Callable, arg: Any) -> Future | _Done:
        """Start one task; ``.result()`` gives its Outcome. On a local pool it runs in
        a worker while the caller goes on; otherwise (serial runs, and cluster runs,
        whose group work stays with the runner) it runs here and now."""
        if self._pool is not None:
            return self._pool.submit(_call, fn, arg)
        return _Done(_call(fn, arg))

    def map(self, fn: Callable, args: Sequence[Any], *, stop_on_error: bool = False
            ) -> Iterator[tuple[int, Outcome]]:
        """Yield ``(index, Outcome)`` for each task as it finishes.

        With ``stop_on_error`` no new task is started after the first failure (tasks
        already running finish and are yielded).
        """
        if self.cluster:
            yield from _run_dask(fn, args, self.cluster, stop_on_error)
            return
        if self.workers <= 1 or len(args) <= 1:
            for i, arg in enumerate(args):
                out = _call(fn, arg)
                yield i, out
                if stop_on_error and not out.ok:
                    return
            return
        self.start()
        pending: dict[Future, int] = {}
        queue = iter(enumerate(args))
        stopped = False

        def submit_next() -> None:
            try:
                i, arg = next(queue)
            except StopIteration:
                return
            pending[self._pool.submit(_call, fn, arg)] = i

        # keep at most 2 tasks per worker in flight so memory stays bounded
        for _ in range(2 * self.workers):
            submit_next()
        while pending:
            done, _ = wait(pending, return_when=FIRST_COMPLETED)
            for fut in done:
                i = pending.pop(fut)
                out = fut.result()
                yield i, out
                if not out.ok and stop_on_error:
                    stopped = True
                if not stopped:
                    submit_next()


class _Done:
    """An outcome computed on the spot, shaped like a future."""

    def __init__(self, outcome: Outcome):
        self.outcome = outcome

    def result(self) -> Outcome:
        return self.outcome


def _ready() -> bool:
    return True


def run_tasks(fn: Callable, args: Sequence[Any], *, workers: int = 1,
              cluster: str | None = None, stop_on_error: bool = False
              ) -> Iterator[tuple[int, Outcome]]:
    """Yield ``(index, Outcome)`` for each task as it finishes, on a pool of its own.

    With ``stop_on_error`` no new task is started after the first failure (tasks
    already running finish and are yielded).
    """
    with TaskPool(workers, cluster) as pool:
        yield from pool.map(fn, args, stop_on_error=stop_on_error)


def _run_dask(fn: Callable, args: Sequence[Any], address: str, stop_on_error: bool
              ) -> Iterator[tuple[int, Outcome]]:
    try:
        from distributed import Client, as_completed
    except ImportError:
        raise ConfigError("--cluster needs the Dask extra",
                          hint="pip install 'screenweave[dask]'") from None
    try:
        client = Client(address, timeout=f"{DASK_CONNECT_TIMEOUT_S}s")
    except (OSError, TimeoutError) as err:
        raise ConfigError(f"cannot reach the Dask scheduler at {address!r} ({err})",
                          hint="give the scheduler address, e.g. tcp://10.0.0.5:8786") from None
    try:
        # Like the local pool: a bounded number of tasks in flight per worker, so the
        # client never holds every session's data at once.
        n_workers = max(1, len(client.scheduler_info().get("workers", {})))
        queue = iter(enumerate(args))
        index: dict = {}
        running = as_completed()

        def submit_next() -> None:
            try:
                i, arg = next(queue)
            except StopIteration:
                return
            fut = client.submit(_call, fn, arg, pure=False)
            index[fut] = i
            running.add(fut)

        for _ in range(2 * n_workers):
            submit_next()
        for fut in running:
            out = fut.result()
            yield index.pop(fut), out
            if stop_on_error and not out.ok:
                for other in index:
                    other.cancel()
                return
            submit_next()
    finally:
        client.close()

"""Run per-session tasks serially, on a local process pool, or on a Dask cluster.

Tasks are plain picklable callables' arguments; the task functions are pure, so the
result does not depend on where they ran. Results are yielded as they complete,
each as ``(index, Outcome)``; a failure is an Outcome too, never an exception that
stops the others.
"""

from __future__ import annotations

import functools
import gc
import importlib
import os
import queue
import threading
import traceback
from concurrent.futures import Future, InvalidStateError, ProcessPoolExecutor
from dataclasses import dataclass
from typing import Any, Callable, Iterable, Iterator, Sequence

from pipeline.errors import ConfigError, ScreenweaveError

#: How long to wait for a Dask scheduler to answer before giving up.
DASK_CONNECT_TIMEOUT_S = 20

#: The modules the per-session and group tasks need: the runner's task functions and
#: the stage modules that import scipy and statsmodels (about 1.2 s of one core on
#: first import, measured 2026-12-03), and the statsmodels model the cohort
#: comparison fits first. Local workers are forked from one process that has
#: imported them (see :func:`start_worker_server`), so a run imports them once however
#: many workers it has, and the runner's own process never needs them when it has
#: workers.
STAGE_MODULES = ("pipeline.runner", "pipeline.signals", "pipeline.metrics.session",
                 "pipeline.metrics.switch_locked", "pipeline.models",
                 "statsmodels.genmod.generalized_estimating_equations")


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
#: what :func:`map_big_arrays` maps on its own
BIG_ARRAY_BYTES = 1 << 20


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


def map_big_arrays() -> None:
    """Give every allocation of 1 MB or more its own memory map, returned to the OS when
    freed (glibc ``M_MMAP_THRESHOLD``, fixed).

    glibc raises its threshold as big blocks are freed, after which arrays of up to
    32 MB come from the heap, where freed ones stay in the process. The runner sets this
    before it reads the study: reading a big media log makes and frees a few dozen
    arrays of every row, and with the threshold fixed the process's memory follows what
    it holds (measured on the 4.2-million-row log of the 240-session benchmark study:
    peak 372 MB instead of 395 MB, 239 MB afterwards instead of 314 MB). A no-op where
    the C library is not glibc; :func:`keep_freed_memory` undoes it.
    """
    try:
        import ctypes

        ctypes.CDLL("libc.so.6").mallopt(_M_MMAP_THRESHOLD, BIG_ARRAY_BYTES)
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


def _context():
    """The multiprocessing context of local pools: workers forked from a server process
    ("forkserver") where the platform has one, else the platform's default."""
    import multiprocessing as mp

    return mp.get_context("forkserver" if "forkserver" in mp.get_all_start_methods()
                          else None)


def start_worker_server(preload: Sequence[str] = STAGE_MODULES) -> None:
    """Start the process that local workers are forked from, without waiting for it.

    It imports ``preload`` once (about 1.2 s of one core for the stage modules)
    while the caller goes on with its own imports and reads the study on the other
    core; every worker forked from it then starts with them imported, instead of each
    worker importing them anew (two workers used to spend about 3.6 s of CPU on it).
    The command line calls this first thing for ``run --workers N`` (N > 1), before it
    imports pandas. A no-op where the platform has no fork server or it is running
    already (the first call's ``preload`` holds).
    """
    ctx = _context()
    if ctx.get_start_method() != "forkserver":
        return
    from multiprocessing import forkserver

    ctx.set_forkserver_preload([*preload, "pipeline.worker_server"])
    forkserver.ensure_running()


def _start_worker(preload: Sequence[str] = ()) -> None:
    """Set-up of each local worker process: memory and thread settings, then the
    modules its tasks will need (already imported when the fork server has them)."""
    keep_freed_memory()
    _limit_threads()
    for name in preload:
        importlib.import_module(name)
    # what the imports made lives as long as the worker: keep it out of the garbage
    # collector's passes over the tasks' objects
    gc.freeze()


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
    started (and import the package) once, and the Dask client connects once.

    Use as a context manager. :meth:`start_task` queues a task and gives a future;
    :meth:`next_done` waits until some of them have finished; each future's
    ``.result()`` is an :class:`Outcome`. :meth:`map` runs one function over many
    arguments with a bounded number in flight. Local worker processes are forked from
    the fork server (:func:`start_worker_server`), never from the runner, so they do not
    inherit (and count in their resident memory) the study's tables; ``preload`` names
    the modules the server imports. Starting them waits for that import, so a local
    pool's tasks are handed to its processes by a thread of its own
    (:class:`_Handoff`): queueing a task never waits, and the runner reads the study
    meanwhile.
    """

    def __init__(self, workers: int = 1, cluster: str | None = None,
                 preload: Sequence[str] = ()):
        self.workers, self.cluster, self.preload = workers, cluster, tuple(preload)
        self._pool: ProcessPoolExecutor | None = None
        self._handoff: _Handoff | None = None
        self._client = None
        # local pool: each task's future is put here as it finishes (on a cluster,
        # distributed.as_completed does the same), so that waiting for the next one
        # costs the same with ten tasks in flight or ten thousand (the libraries' wait
        # functions look at every pending future on every call)
        self._finished: queue.SimpleQueue = queue.SimpleQueue()
        self._unclaimed: set = set()
        self._completions = None  # cluster: a distributed.as_completed of the tasks

    @property
    def local_files(self) -> bool:
        """True when tasks see this machine's file system (no cluster)."""
        return not self.cluster

    @property
    def runs_here(self) -> bool:
        """True when tasks run in this process (serial runs)."""
        return not self.cluster and self.workers <= 1

    def start(self) -> "TaskPool":
        if self.cluster and self._client is None:
            self._client = _dask_client(self.cluster)
        elif not self.cluster and self.workers > 1 and self._pool is None:
            start_worker_server(self.preload)
            self._pool = ProcessPoolExecutor(max_workers=self.workers, mp_context=_context(),
                                             initializer=_start_worker,
                                             initargs=(self.preload,))
            self._handoff = _Handoff(self._pool, self._finished)
            # start every worker now (the pool starts them as tasks come otherwise)
            for _ in range(self.workers):
                self._handoff.submit(_ready, None, notify=False)
        return self

    def close(self) -> None:
        if self._handoff is not None:
            self._handoff.close()
            self._handoff = None
        if self._pool is not None:
            self._pool.shutdown(cancel_futures=True)
            self._pool = None
        if self._client is not None:
            self._client.close()
            self._client = None

    def __enter__(self) -> "TaskPool":
        return self.start()

    def __exit__(self, *exc) -> None:
        self.close()

    @property
    def capacity(self) -> int:
        """How many tasks run at once."""
        if self._client is not None:
            return max(1, len(self._client.scheduler_info().get("workers", {})))
        return max(1, self.workers)

    def start_task(self, fn: Callable, arg: Any):
        """Queue one per-session task; return its future (``.result()`` is an Outcome).

        Local pool: a worker runs it. Cluster: a Dask worker does. Serial runs: it runs
        in this process when :meth:`next_done` reaches it (tasks run in the order
        they were queued)."""
        self.start()
        if self._client is not None:
            future = self._client.submit(_call, fn, arg, pure=False)
            if self._completions is None:
                from distributed import as_completed

                self._completions = as_completed(loop=self._client.loop)
            self._completions.add(future)
            return future
        if self._handoff is not None:
            return self._handoff.submit(fn, arg)
        return _Deferred(fn, arg)

    def next_done(self, futures: Iterable) -> list:
        """Wait until at least one of ``futures`` (given by :meth:`start_task`) has
        finished; return those that have."""
        if self._handoff is not None or self._client is not None:
            return self._next_finished(futures)
        futures = list(futures)
        done = [f for f in futures if f.finished]
        if not done:  # serial: run the first task queued that has not run
            first = min(futures, key=lambda f: f.order)
            first.run()
            done = [first]
        return done

    def _next_finished(self, futures: Iterable) -> list:
        """Local pool or cluster: the finished futures among ``futures``, waiting for one
        if none has finished yet (futures finished but not asked for are kept for
        later)."""
        wanted = futures if isinstance(futures, (dict, set, frozenset)) else set(futures)
        if not wanted:
            return []
        while True:
            done = [f for f in self._unclaimed if f in wanted]
            if done:
                self._unclaimed.difference_update(done)
                return done
            if self._client is not None:  # blocks until a task finishes
                self._unclaimed.update(self._completions.next_batch(block=True))
                continue
            self._unclaimed.add(self._finished.get())  # blocks until a task finishes
            while True:
                try:
                    self._unclaimed.add(self._finished.get_nowait())
                except queue.Empty:
                    break

    def cancel(self, futures: Iterable) -> None:
        """Drop queued tasks that have not started (running ones finish)."""
        for fut in futures:
            if self._handoff is not None:
                self._handoff.cancel(fut)
            else:
                fut.cancel()

    def submit(self, fn: Callable, arg: Any) -> Future | _Done:
        """Start one task of the group stage; ``.result()`` gives its Outcome. On a
        local pool it runs in a worker while the caller goes on; otherwise (serial runs,
        and cluster runs, whose group work stays with the runner) it runs here and now."""
        if self._handoff is not None:
            return self._handoff.submit(fn, arg, notify=False)
        return _Done(_call(fn, arg))

    def map(self, fn: Callable, args: Sequence[Any], *, stop_on_error: bool = False
            ) -> Iterator[tuple[int, Outcome]]:
        """Yield ``(index, Outcome)`` for each task as it finishes.

        At most two tasks per worker are in flight, so memory stays bounded. With
        ``stop_on_error`` no new task is started after the first failure (tasks
        already running finish and are yielded).
        """
        queue = iter(enumerate(args))
        pending: dict = {}
        stopped = False

        def start_next() -> None:
            for i, arg in queue:
                pending[self.start_task(fn, arg)] = i
                return

        try:
            for _ in range(2 * self.capacity):
                start_next()
            while pending:
                for fut in self.next_done(pending):
                    i = pending.pop(fut)
                    out = fut.result()
                    yield i, out
                    if not out.ok and stop_on_error:
                        stopped = True
                    if not stopped:
                        start_next()
                if stopped:  # the tasks not yet started are dropped
                    self.cancel(pending)
                    pending = {f: i for f, i in pending.items() if not f.cancelled()}
        finally:
            self.cancel(pending)


class _Handoff:
    """Hands a local pool's tasks to its worker processes from a thread of its own.

    Starting a worker waits until the fork server has imported the stage modules
    (1.4 to 2.3 s into a run, as traced); a task queued before that must not hold up
    the runner. Each task gets a future of its own at once; the thread submits the task
    to the process pool, and the pool's future settles it. With ``notify`` a settled future is put on
    ``finished`` (what :meth:`TaskPool.next_done` waits on).
    """

    def __init__(self, pool: ProcessPoolExecutor, finished: queue.SimpleQueue):
        self._pool, self._finished = pool, finished
        self._todo: queue.SimpleQueue = queue.SimpleQueue()
        #: our future -> the pool's future, once handed over
        self._handed: dict[Future, Future] = {}
        self._lock = threading.Lock()
        self._closed = False
        self._thread = threading.Thread(target=self._feed, name="screenweave-handoff",
                                        daemon=True)
        self._thread.start()

    def submit(self, fn: Callable, arg: Any, notify: bool = True) -> Future:
        ours: Future = Future()
        self._todo.put((fn, arg, ours, notify))
        return ours

    def _feed(self) -> None:
        while (item := self._todo.get()) is not None:
            fn, arg, ours, notify = item
            if self._closed or ours.cancelled():
                ours.cancel()
                continue
            try:
                theirs = self._pool.submit(_call, fn, arg)
            except Exception as err:  # the pool is broken or shut down
                _settle(ours, exception=err)
                if notify:
                    self._finished.put(ours)
                continue
            with self._lock:
                self._handed[ours] = theirs
                dropped = ours.cancelled()
            if dropped:  # cancelled while being handed over
                theirs.cancel()
            theirs.add_done_callback(functools.partial(self._done, ours, notify))

    def _done(self, ours: Future, notify: bool, theirs: Future) -> None:
        with self._lock:
            self._handed.pop(ours, None)
        if theirs.cancelled():
            ours.cancel()
        else:
            _settle(ours, theirs.exception(), theirs)
        if notify:
            self._finished.put(ours)

    def cancel(self, ours: Future) -> None:
        """Drop a task that has not started; one that has runs on and is settled."""
        with self._lock:  # (not held while cancelling: that runs _done, which takes it)
            theirs = self._handed.get(ours)
        if theirs is None or theirs.cancel():
            ours.cancel()

    def close(self) -> None:
        """Hand over nothing more; tasks not yet handed over are cancelled."""
        self._closed = True
        self._todo.put(None)
        self._thread.join()


def _settle(ours: Future, exception: BaseException | None = None,
            theirs: Future | None = None) -> None:
    try:
        if exception is not None:
            ours.set_exception(exception)
        else:
            ours.set_result(theirs.result())
    except InvalidStateError:  # cancelled meanwhile: nobody waits for it
        pass


class _Deferred:
    """A serial run's task: run in this process when the run waits for it."""

    _queued = 0

    def __init__(self, fn: Callable, arg: Any):
        self.fn, self.arg = fn, arg
        self.outcome: Outcome | None = None
        self._cancelled = False
        _Deferred._queued += 1
        self.order = _Deferred._queued

    @property
    def finished(self) -> bool:
        return self.outcome is not None or self._cancelled

    def run(self) -> None:
        if not self.finished:
            self.outcome = _call(self.fn, self.arg)
            self.fn = self.arg = None  # free the task's data

    def result(self) -> Outcome:
        self.run()
        return self.outcome

    def cancel(self) -> bool:
        if self.outcome is None:
            self._cancelled = True
        return self._cancelled

    def cancelled(self) -> bool:
        return self._cancelled


class _Done:
    """An outcome computed on the spot, shaped like a future."""

    def __init__(self, outcome: Outcome):
        self.outcome = outcome

    def result(self) -> Outcome:
        return self.outcome


def _ready(_: Any = None) -> bool:
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


def _dask_client(address: str):
    """A client of the Dask scheduler at ``address`` (ConfigError when unreachable)."""
    try:
        from distributed import Client
    except ImportError:
        raise ConfigError("--cluster needs the Dask extra",
                          hint="pip install 'screenweave[dask]'") from None
    try:
        return Client(address, timeout=f"{DASK_CONNECT_TIMEOUT_S}s")
    except (OSError, TimeoutError) as err:
        raise ConfigError(f"cannot reach the Dask scheduler at {address!r} ({err})",
                          hint="give the scheduler address, e.g. tcp://10.0.0.5:8786") from None

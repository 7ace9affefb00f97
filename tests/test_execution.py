"""Per-session tasks give the same results serially, in a process pool and on Dask."""

import pytest

from pipeline.errors import ConfigError, InputError
from pipeline.execution import run_tasks


def square_or_fail(x):
    if x == 3:
        raise InputError("roster.csv", "bad row", line=4)
    if x == 5:
        raise ZeroDivisionError("bug")
    return x * x


def _collect(**kw):
    return {i: o for i, o in run_tasks(square_or_fail, list(range(7)), **kw)}


def test_serial_collects_values_and_failures():
    got = _collect(workers=1)
    assert {i: o.value for i, o in got.items() if o.ok} == {0: 0, 1: 1, 2: 4, 4: 16, 6: 36}
    assert "bad row" in got[3].error
    assert got[5].error.startswith("internal error: ZeroDivisionError")


def test_process_pool_matches_serial():
    serial, pool = _collect(workers=1), _collect(workers=2)
    assert {i: (o.value, o.error) for i, o in serial.items()} == \
           {i: (o.value, o.error) for i, o in pool.items()}


def test_stop_on_error_starts_nothing_after_the_failure():
    got = [i for i, _ in run_tasks(square_or_fail, list(range(7)), workers=1,
                                   stop_on_error=True)]
    assert got == [0, 1, 2, 3]


@pytest.mark.slow
def test_local_dask_cluster_matches_serial():
    from distributed import LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cluster:
        dask = _collect(cluster=cluster.scheduler_address)
    serial = _collect(workers=1)
    assert {i: (o.value, o.error) for i, o in serial.items()} == \
           {i: (o.value, o.error) for i, o in dask.items()}


def test_unreachable_cluster_is_a_config_error(monkeypatch):
    monkeypatch.setattr("pipeline.execution.DASK_CONNECT_TIMEOUT_S", 1)
    with pytest.raises(ConfigError, match="cannot reach the Dask scheduler"):
        list(run_tasks(square_or_fail, [1, 2], cluster="tcp://127.0.0.1:1"))


def test_serial_tasks_run_when_waited_for_in_the_order_queued():
    from pipeline.execution import TaskPool

    ran = []

    def note(x):
        ran.append(x)
        return x

    with TaskPool(1) as pool:
        futures = [pool.start_task(note, x) for x in (10, 20, 30)]
        assert ran == []  # queued, not run
        done = pool.next_done(futures[::-1])
        assert [f.result().value for f in done] == [10] and ran == [10]
        pool.cancel(futures[2:])
        assert futures[2].cancelled()
        assert pool.next_done(futures[1:2]) == [futures[1]]
        assert futures[2].result() is None and ran == [10, 20]  # it never ran


def test_pool_futures_finish_with_outcomes():
    from pipeline.execution import TaskPool

    with TaskPool(2) as pool:
        pending = {pool.start_task(square_or_fail, x): x for x in range(6)}
        got = {}
        while pending:
            for fut in pool.next_done(pending):
                got[pending.pop(fut)] = fut.result()
    assert {x: o.value for x, o in got.items() if o.ok} == {0: 0, 1: 1, 2: 4, 4: 16}
    assert "bad row" in got[3].error and "ZeroDivisionError" in got[5].error


def test_pool_keeps_finished_futures_until_asked_for():
    # next_done on a local pool takes finished futures from a queue: one finished but
    # not asked for is kept and given when it is asked for
    from pipeline.execution import TaskPool

    with TaskPool(2) as pool:
        first = pool.start_task(square_or_fail, 2)
        others = [pool.start_task(square_or_fail, x) for x in (4, 6, 7)]
        got = []
        while len(got) < len(others):
            got += pool.next_done(set(others) - set(got))
        assert sorted(f.result().value for f in got) == [16, 36, 49]
        assert pool.next_done([first]) == [first] and first.result().value == 4
        assert pool.next_done([]) == []


def wait_for_file(path):
    """A task that notes it has started, then runs until ``path`` exists (at most 60 s)
    and gives its name."""
    import os
    import time
    from pathlib import Path

    path = Path(path)
    (path.parent / f"started_{os.getpid()}").touch()
    for _ in range(6000):
        if path.exists():
            return path.name
        time.sleep(0.01)
    raise TimeoutError(path)


def test_pool_cancel_drops_queued_tasks_and_running_ones_finish(tmp_path):
    # A local pool's tasks reach the workers through a hand-off thread; cancelling must
    # still drop a task not yet started and let a running one finish with its outcome.
    import time

    from pipeline.execution import TaskPool

    go = tmp_path / "go"
    with TaskPool(2) as pool:
        running = [pool.start_task(wait_for_file, go) for _ in range(2)]
        for _ in range(6000):  # until both workers are in their task
            if len(list(tmp_path.glob("started_*"))) == 2:
                break
            time.sleep(0.01)
        # the process pool moves at most workers + 1 tasks to its call queue, after
        # which they cannot be cancelled: the last of these six is surely queued
        queued = [pool.start_task(square_or_fail, x) for x in range(6)]
        pool.cancel(running + queued[-1:])
        assert queued[-1].cancelled()
        assert not any(f.cancelled() for f in running)
        go.touch()
        got = []
        while len(got) < 2:
            got += pool.next_done(set(running) - set(got))
        assert [f.result().value for f in got] == ["go", "go"]
        rest = set(queued[:-1])
        while rest:
            rest -= set(pool.next_done(rest))
        assert queued[0].result().value == 0

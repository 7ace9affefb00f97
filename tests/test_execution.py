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

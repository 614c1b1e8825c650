"""Where population runs execute: a Dask cluster gives the same numbers as local processes.

The cluster is a Dask ``LocalCluster`` listening on the loopback interface (tcp://127.0.0.1),
with in-process worker threads to keep the test quick.
"""

import socket
import warnings

import numpy as np
import pytest

import circlesim as cs
from circlesim.base.distributed import (
    SchedulerUnreachableError,
    check_scheduler_address,
    map_chunks,
)
from circlesim.population.run import compare_populations
from circlesim.population.virtual_patients import sample_patients

distributed = pytest.importorskip("distributed")

SCENARIOS = [
    cs.Scenario(plan=cs.Plan([cs.Step(0, o2_l_min=2.0, air_l_min=4.0, dial_percent=5.0),
                              cs.Step(8, o2_l_min=0.35, air_l_min=0.15, dial_percent=3.5)],
                             duration_min=30.0, name="reduce at 8 min")),
    cs.Scenario(plan=cs.Plan([cs.Step(0, o2_l_min=1.0, dial_percent=2.0)], duration_min=30.0,
                             name="desflurane 1 L/min"), vaporizer=cs.Vaporizer("desflurane")),
]


@pytest.fixture(scope="module")
def people():
    return sample_patients(24, seed=11)


@pytest.fixture(scope="module")
def local(people):
    return compare_populations(SCENARIOS, people, workers=1, chunk_size=5)


@pytest.fixture(scope="module")
def cluster():
    from distributed import LocalCluster

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        c = LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                         protocol="tcp://", host="127.0.0.1", dashboard_address=None)
    yield c
    c.close()


def _same(a, b):
    for x, y in zip(a, b, strict=True):
        assert x.outcomes.equals(y.outcomes)
        for key in x.curves:
            np.testing.assert_array_equal(x.curves[key], y.curves[key])


def test_cluster_run_gives_the_local_numbers(cluster, people, local):
    address = cluster.scheduler_address
    assert address.startswith("tcp://127.0.0.1:")
    done = []
    remote = compare_populations(SCENARIOS, people, scheduler=address, chunk_size=5,
                                 progress=done.append)
    assert remote[0].where == f"Dask cluster at {address}"
    assert len(done) == 2 * 5  # 24 patients in chunks of 5, two plans
    _same(remote, local)


def test_connected_client_can_be_passed(cluster, people, local):
    from distributed import Client

    with Client(cluster.scheduler_address, set_as_default=False) as client:
        remote = compare_populations(SCENARIOS, people, scheduler=client, chunk_size=7)
    _same(remote, local)


def test_local_processes_give_the_same_numbers(people, local):
    run = compare_populations(SCENARIOS, people, workers=2, chunk_size=12)
    assert run[0].where == "2 local processes"
    _same(run, local)


def test_threads_of_this_process_give_the_numbers_of_one_integration(people, local):
    # one chunk: integrated on numba's threads; chunks of 5 (the fixture): on a thread per core
    whole = compare_populations(SCENARIOS[:1], people, workers=1, chunk_size=len(people))
    assert whole[0].where == "this process"
    _same(whole, local[:1])


def _square_or_fail(item, parallel):
    if item < 0:
        raise ValueError(f"item {item} is negative")
    return item * item, parallel


def test_threads_keep_the_order_and_raise_the_first_error(monkeypatch):
    monkeypatch.setattr("circlesim.base.distributed.local_workers", lambda: 3)
    done = []
    run = map_chunks(_square_or_fail, range(7), workers=1, threads=True, progress=done.append)
    assert run.results == [(k * k, False) for k in range(7)]
    assert run.where == "this process, 3 threads"
    assert done == [1] * 7
    alone = map_chunks(_square_or_fail, [3], workers=1, threads=True)
    assert (alone.results, alone.where) == ([(9, True)], "this process")
    with pytest.raises(ValueError, match="item -2 is negative"):
        map_chunks(_square_or_fail, [1, -2, 3], workers=1, threads=True)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_unreachable_scheduler_is_a_clear_error(people):
    address = f"tcp://127.0.0.1:{_free_port()}"
    with pytest.raises(SchedulerUnreachableError, match=f"scheduler at {address} could not "
                                                         "be reached"):
        compare_populations(SCENARIOS, people, scheduler=address)


def test_unreachable_scheduler_falls_back_only_when_asked(people, local):
    address = f"tcp://127.0.0.1:{_free_port()}"
    with pytest.warns(RuntimeWarning, match="Running on local processes instead"):
        run = compare_populations(SCENARIOS, people, scheduler=address, fallback_to_local=True,
                                  workers=1, chunk_size=5)
    assert run[0].where.startswith("this process")
    _same(run, local)


@pytest.mark.parametrize("address", ["localhost", "tcp://", "tcp://host", "http://a:1",
                                     "tcp://a:99999", 8786])
def test_malformed_scheduler_address_is_named(address):
    with pytest.raises(cs.InputError, match="scheduler must be a Dask scheduler address"):
        check_scheduler_address(address)


@pytest.mark.parametrize("workers", [0, -1, 2.5, True])
def test_bad_worker_count_is_named(workers):
    with pytest.raises(cs.InputError, match="workers must be a whole number from 1 to 1024"):
        map_chunks(print, [1], workers=workers)

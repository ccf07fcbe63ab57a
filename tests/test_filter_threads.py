"""How many threads the filter loop may use (simwave.threads.filter_threads)."""

from __future__ import annotations

import numpy as np
import pytest

from simwave import threads


@pytest.fixture(autouse=True)
def _default_afterwards():
    yield
    threads.set_filter_threads(None)


@pytest.mark.parametrize("text, want", [("3", 3), ("1", 1), ("0", 1), ("-2", 1), ("500", 64)])
def test_the_variable_sets_the_count(monkeypatch, text, want):
    monkeypatch.setenv(threads.FILTER_THREADS_VARIABLE, text)
    threads.set_filter_threads(None)
    assert threads.filter_threads() == want


def test_unset_or_unreadable_is_the_cpus_at_most_8(monkeypatch):
    monkeypatch.setenv(threads.FILTER_THREADS_VARIABLE, "many")
    threads.set_filter_threads(None)
    assert threads.filter_threads() == threads._cpus()
    assert 1 <= threads._cpus() <= 8


def test_a_batch_pair_filters_on_one_thread(tmp_path):
    from simwave.batch.tasks import PairTask, run_pair

    threads.set_filter_threads(4)
    result = run_pair(PairTask(0, ("text", "1/(s+1)"),
                               {"source": str(tmp_path / "missing.wav"),
                                "output": str(tmp_path / "o.wav")}))
    assert result["status"] == "failed"  # the input is missing: still, the count was set
    assert threads.filter_threads() == 1


def test_a_many_channel_simulate_is_the_same_on_one_thread_and_on_several():
    import simwave

    x = np.random.default_rng(4).standard_normal((40_000, 8))
    w = simwave.Waveform(x, 48000.0)
    system = "(2*pi*1k)^2/(s^2 + 1.414*2*pi*1k*s + (2*pi*1k)^2)"
    threads.set_filter_threads(1)
    one = simwave.simulate(system, w).data
    threads.set_filter_threads(3)
    several = simwave.simulate(system, w).data
    assert np.array_equal(one.view(np.uint64), several.view(np.uint64))


def test_a_forked_child_gets_a_pool_of_its_own(tmp_path):
    # POSIX fork copies only the calling thread (fork(2)): a thread pool made before the
    # fork has no threads in the child, and work handed to it would never run
    import multiprocessing

    import simwave
    from simwave.discrete import filter as filt

    x = np.random.default_rng(5).standard_normal((70_000, 4))
    w = simwave.Waveform(x, 48000.0)
    threads.set_filter_threads(2)
    want = simwave.simulate("1/(1m*s + 1)", w).data  # makes the pool in this process
    assert filt._POOL[0] is not None
    ctx = multiprocessing.get_context("fork")
    with ctx.Pool(1) as pool:
        got = pool.apply_async(_simulate_in_child, (x,)).get(timeout=60)
    assert np.array_equal(got.view(np.uint64), want.view(np.uint64))


def _simulate_in_child(x):
    import simwave

    return simwave.simulate("1/(1m*s + 1)", simwave.Waveform(x, 48000.0)).data

"""The seed-and-executor service: every kind of seed becomes one recordable root and the same
child streams; the executor gives the same results in this process, on local workers and after
a worker was killed, and leaves no worker behind when it is interrupted."""

import multiprocessing
import os
import signal
import threading
import time

import numpy as np
import pytest

from crn.core.errors import WorkerError
from crn.io.models import load_model
from crn.runtime.executor import Executor
from crn.runtime.seeds import child_streams, keyed_stream, root_seed, seed_entropy
from crn.solvers.simulate import simulate

AM = "models/approximate_majority.toml"


def state(seq):
    return seq.generate_state(4).tolist()


def test_an_int_seed_is_the_root_entropy():
    assert root_seed(12).entropy == 12
    assert seed_entropy(np.int64(12)) == 12
    assert state(root_seed(12)) == state(np.random.SeedSequence(12))


def test_no_seed_draws_fresh_recordable_entropy():
    first, second = seed_entropy(None), seed_entropy(None)
    assert isinstance(first, int) and first != second


def test_a_generator_seed_follows_the_generator_state():
    a = root_seed(np.random.default_rng(3))
    b = root_seed(np.random.default_rng(3))
    assert a.entropy == b.entropy and isinstance(a.entropy, int)


def test_a_seed_sequence_keeps_its_stream_and_spawn_key():
    child = np.random.SeedSequence(77).spawn(3)[2]
    root = root_seed(child)
    assert root.spawn_key == (2,)
    assert state(root) == state(child)
    assert [state(c) for c in root.spawn(2)] == [state(c) for c in child.spawn(2)]


def test_a_seed_sequence_from_a_list_of_ints_becomes_the_integer_it_spells():
    # derived: SeedSequence reads [1, 2, 3] as the 32-bit words of 1 + 2 * 2**32 + 3 * 2**64
    listed = np.random.SeedSequence([1, 2, 3])
    root = root_seed(listed)
    assert root.entropy == 1 + (2 << 32) + (3 << 64)
    assert state(root) == state(listed)
    keyed = np.random.SeedSequence([5, 2**40], spawn_key=(4,))
    assert state(root_seed(keyed)) == state(keyed)  # a word above 32 bits spans two words


def test_a_list_no_integer_spells_still_gives_one_repeatable_root():
    odd = np.random.SeedSequence([1, 2, 3, 4, 0])  # trailing zero beyond the pool counts
    root = root_seed(odd)
    assert isinstance(root.entropy, int)
    assert root.entropy == root_seed(np.random.SeedSequence([1, 2, 3, 4, 0])).entropy


@pytest.mark.parametrize("bad", [1.5, "7", True, np.random.RandomState(1)])
def test_other_seed_types_are_refused(bad):
    with pytest.raises(TypeError, match="`rng` must be"):
        root_seed(bad)


def test_a_negative_seed_is_refused():
    with pytest.raises(ValueError, match="non-negative"):
        root_seed(-3)


def test_children_by_position_are_the_children_by_key():
    by_position = child_streams(41, 3)
    assert [state(c) for c in by_position] == [state(keyed_stream(41, i)) for i in range(3)]
    assert [state(c) for c in child_streams(41, 5)[:3]] == [state(c) for c in by_position]
    parent = np.random.SeedSequence(41).spawn(2)[1]
    assert state(keyed_stream(parent, 0)) == state(parent.spawn(1)[0])


def test_simulate_takes_a_seed_sequence_built_from_a_list():
    net = load_model(AM, {"n": 30, "gap": 4}).network
    listed = simulate(net, runs=3, rng=np.random.SeedSequence([1, 2, 3]), workers=1)
    again = simulate(net, runs=3, rng=listed.seed_entropy, workers=1)
    assert listed.seed_entropy == 1 + (2 << 32) + (3 << 64)
    np.testing.assert_array_equal(listed.counts, again.counts)


def draw(seed):
    """A task: a few numbers from its own stream."""
    return np.random.default_rng(seed).random(3).tolist()


def draw_with(shared, seed):
    return [shared, *draw(seed)]


def test_the_results_do_not_depend_on_where_the_tasks_run():
    tasks = child_streams(5, 12)
    results = {}
    for workers in (1, 2):
        got = {}
        calling = threading.get_ident()

        def keep(index, value, got=got, calling=calling):
            assert threading.get_ident() == calling  # results arrive in the calling thread
            got[index] = value

        with Executor(workers=workers) as executor:
            executor.run(draw, tasks, keep)
        results[workers] = got
    assert sorted(results[1]) == list(range(12))
    assert results[1] == results[2]


def test_the_shared_object_reaches_every_task():
    got = {}
    with Executor(workers=2) as executor:
        executor.run(draw_with, child_streams(5, 3), got.__setitem__, shared="net")
    assert [value[0] for _, value in sorted(got.items())] == ["net"] * 3
    assert [value[1:] for _, value in sorted(got.items())] == [draw(s) for s in child_streams(5, 3)]


def die_once(task):
    """A task that SIGKILLs its worker the first time task 3 runs (a marker file says so)."""
    index, marker = task
    if index == 3 and not os.path.exists(marker):
        open(marker, "w").close()
        os.kill(os.getpid(), signal.SIGKILL)
    return index * index


def die_always(task):
    index, _ = task
    if index == 3:
        os.kill(os.getpid(), signal.SIGKILL)
    return index


def test_a_task_lost_with_a_killed_worker_is_run_again(tmp_path):
    got = {}
    tasks = [(i, str(tmp_path / "killed")) for i in range(8)]
    with pytest.warns(RuntimeWarning, match="worker process died; rerunning"), \
            Executor(workers=2) as executor:
        executor.run(die_once, tasks, got.__setitem__)
    assert got == {i: i * i for i in range(8)}


def test_workers_that_keep_dying_give_up_with_a_worker_error(tmp_path):
    got = {}
    with pytest.warns(RuntimeWarning), pytest.raises(WorkerError, match="died 2 times"), \
            Executor(workers=2, restarts=1) as executor:
        executor.run(die_always, [(i, "") for i in range(6)], got.__setitem__, noun="cells")
    assert 3 not in got
    assert multiprocessing.active_children() == []


def slow(seconds):
    time.sleep(seconds)
    return seconds


def test_an_interruption_kills_local_workers_at_once():
    def interrupt(index, value):
        raise KeyboardInterrupt

    started = time.monotonic()
    with pytest.raises(KeyboardInterrupt), Executor(workers=2) as executor:
        executor.run(slow, [0.01] + [30.0] * 3, interrupt)
    assert time.monotonic() - started < 20  # not waiting for the 30 s tasks
    assert multiprocessing.active_children() == []


def test_an_interruption_stops_in_process_tasks_after_the_one_under_way():
    ran = []

    def task(seconds):
        ran.append(seconds)
        time.sleep(seconds)
        return seconds

    def interrupt(index, value):
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt), Executor(workers=1) as executor:
        executor.run(task, [0.3] * 6, interrupt)
    time.sleep(0.8)  # the abandoned thread finishes the task under way, then stops
    assert len(ran) <= 2


def test_a_task_error_reaches_the_caller():
    with pytest.raises(ZeroDivisionError), Executor(workers=1) as executor:
        executor.run(lambda x: 1 / x, [1, 0, 2], lambda i, v: None)


def test_workers_must_be_positive():
    with pytest.raises(ValueError, match="`workers` must be at least 1"):
        Executor(workers=0)

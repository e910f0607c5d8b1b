"""The engine layer: one registry of callables with one signature, one check of horizon and
sample times, one per-network cache; a new engine is one module plus one registry line."""

import inspect
import math
import threading

import numpy as np
import pytest

import crn.engines.batched
import crn.engines.direct
from crn.core.errors import CRNError
from crn.engines import ENGINES, LazyEngine, get_engine
from crn.engines.base import DEFAULT_SAMPLES, NetworkCache, check_horizon
from crn.io.models import load_model
from crn.solvers.simulate import choose_engine, simulate

AM = "models/approximate_majority.toml"


@pytest.fixture(scope="module")
def net():
    return load_model(AM, {"n": 40, "gap": 4}).network


def test_the_registry_holds_lazy_callables_that_load_the_named_function():
    assert set(ENGINES) == {"direct", "batched", "reduced", "reference"}
    for name, engine in ENGINES.items():
        assert isinstance(engine, LazyEngine)
        function = get_engine(name)
        assert function.__module__ == engine.module
        assert function.__name__ == engine.function


@pytest.mark.parametrize("name", sorted(ENGINES))
def test_every_engine_has_the_one_signature(name):
    parameters = inspect.signature(get_engine(name)).parameters
    assert list(parameters)[0] == "net"
    for keyword, default in [("until", inspect.Parameter.empty), ("times", None),
                             ("rng", None), ("stop_at_consensus", False)]:
        assert parameters[keyword].kind is inspect.Parameter.KEYWORD_ONLY
        assert parameters[keyword].default == default


@pytest.mark.parametrize("name", ["direct", "batched"])
def test_calling_the_registry_entry_is_calling_the_engine(net, name):
    via_registry = ENGINES[name](net, until=30.0, rng=5, stop_at_consensus=True)
    direct_call = get_engine(name)(net, until=30.0, rng=5, stop_at_consensus=True)
    np.testing.assert_array_equal(via_registry.counts, direct_call.counts)
    assert via_registry.outcome == direct_call.outcome


def test_an_engine_is_one_registry_line(net, monkeypatch):
    # a "new" engine: any module-level function with the signature, named in one line
    monkeypatch.setitem(ENGINES, "copy_of_direct", LazyEngine("crn.engines.direct", "run_direct"))
    assert choose_engine(net, "copy_of_direct") == "copy_of_direct"
    new = simulate(net, runs=5, rng=9, workers=1, engine="copy_of_direct")
    old = simulate(net, runs=5, rng=9, workers=1, engine="direct")
    assert new.engine == "copy_of_direct"
    np.testing.assert_array_equal(new.counts, old.counts)


def test_an_engine_whose_module_is_missing_says_so_and_is_not_offered(net, monkeypatch):
    missing = LazyEngine("crn.engines.no_such_engine", "run")
    with pytest.raises(ImportError):
        missing.load()
    with pytest.raises(ImportError, match="defines no engine"):
        LazyEngine("crn.engines.direct", "no_such_function").load()
    monkeypatch.setitem(ENGINES, "batched", missing)
    big = load_model(AM, {"n": 200_000, "gap": 0}).network
    assert choose_engine(big) == "direct"  # auto falls back when batched cannot load
    with pytest.raises(CRNError, match="unknown engine 'nope'"):
        choose_engine(big, "nope")


def test_default_samples_are_evenly_spaced_to_the_horizon():
    until, times = check_horizon(8)
    assert until == 8.0 and times.size == DEFAULT_SAMPLES
    np.testing.assert_allclose(times, np.linspace(0, 8, DEFAULT_SAMPLES))
    assert times.flags.c_contiguous and times.dtype == np.float64
    assert check_horizon(math.inf, infinite=True)[1].size == 0  # no horizon: no default grid


@pytest.mark.parametrize("until", [0.0, -1.0, math.nan, math.inf])
def test_bad_horizons_are_refused(until):
    with pytest.raises(ValueError, match="`until` must be a positive finite time"):
        check_horizon(until)


def test_an_infinite_horizon_only_where_the_engine_allows_it():
    assert check_horizon(math.inf, infinite=True)[0] == math.inf
    with pytest.raises(ValueError, match="`until` must be a positive time"):
        check_horizon(math.nan, infinite=True)


@pytest.mark.parametrize("times", [[0.0, 2.0, 1.0], [-0.1, 1.0], [0.0, 10.5], [0.0, math.nan]])
def test_bad_sample_times_are_refused(times):
    with pytest.raises(ValueError, match="`times` must be finite, non-decreasing"):
        check_horizon(10.0, times)


def test_repeated_sample_times_only_where_the_engine_allows_them():
    assert check_horizon(10.0, [0.0, 1.0, 1.0])[1].size == 3
    with pytest.raises(ValueError, match="increasing"):
        check_horizon(10.0, [0.0, 1.0, 1.0], increasing=True)
    # a grid built by adding steps may land a rounding error above the horizon
    assert check_horizon(0.3, np.arange(4) * 0.1)[1][-1] > 0.3


@pytest.mark.parametrize("name", sorted(ENGINES))
def test_every_engine_uses_the_one_check(net, name):
    with pytest.raises(ValueError, match="`times` must be finite"):
        get_engine(name)(net, until=5.0, times=[0.0, 6.0], rng=1)
    with pytest.raises(ValueError, match="`until` must be a positive"):
        get_engine(name)(net, until=-1.0, rng=1)


def test_the_network_cache_builds_once_per_network_object(net):
    built = []
    cache = NetworkCache(lambda n: built.append(n) or len(built))
    assert cache(net) == cache(net) == 1
    twin = load_model(AM, {"n": 40, "gap": 4}).network  # equal content, another object
    assert cache(twin) == 2
    assert len(built) == 2 and len(cache) == 2


def test_a_content_key_shares_one_build_between_equal_networks(net):
    built = []
    cache = NetworkCache(lambda n, extra: built.append(extra) or extra, size=2,
                         key=lambda n, extra: (n.species, extra))
    twin = load_model(AM, {"n": 40, "gap": 4}).network
    assert cache(net, "a") == cache(twin, "a") == "a"
    assert built == ["a"]
    cache(net, "b")
    cache(net, "c")  # size 2: the oldest ("a") goes
    assert len(cache) == 2
    cache(net, "a")
    assert built == ["a", "b", "c", "a"]


def test_concurrent_lookups_build_once(net):
    built = []
    start = threading.Barrier(4)

    def slow_build(n):
        built.append(n)
        return object()

    cache = NetworkCache(slow_build)
    values = []

    def look():
        start.wait()
        values.append(cache(net))

    threads = [threading.Thread(target=look) for _ in range(4)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert len(built) == 1 and len({id(v) for v in values}) == 1


def test_the_engines_keep_their_tables_in_the_one_cache(net):
    assert isinstance(crn.engines.direct._prepared, NetworkCache)
    assert isinstance(crn.engines.batched._tables, NetworkCache)
    crn.engines.direct.run_direct(net, until=1.0, rng=1)
    assert crn.engines.direct._prepared(net) is crn.engines.direct._prepared(net)

"""The bridge to the reference library (GillesPy2) reproduces our mass-action convention."""

import numpy as np
import pytest
from seeds import seed

from crn.core.errors import CRNError
from crn.core.network import Network, Reaction, propensities
from crn.engines.gillespy2_bridge import reference_propensities, run_reference, to_gillespy2
from crn.io.models import load_model


def mixed_order_network():
    """Zero-, first-, second- (both kinds), third- and fourth-order reactions, volume 3.5."""
    reactions = [
        Reaction({}, {"A": 1}, 2.0),
        Reaction({"A": 1}, {}, 0.7),
        Reaction({"A": 1, "B": 1}, {"C": 1}, 1.3),
        Reaction({"A": 2}, {"B": 1}, 0.5),
        Reaction({"A": 3}, {"C": 2}, 0.11),
        Reaction({"A": 2, "B": 1, "C": 1}, {"A": 1}, 0.03),
    ]
    return Network.from_reactions("mixed", ["A", "B", "C"], reactions, volume=3.5,
                                  initial={"A": 10, "B": 5, "C": 2})


def test_propensities_agree_at_random_states():
    # derived: both sides must give k * prod x(x-1)..(x-r+1) / v**(order-1) (docs/design.md);
    # compared to 1e-12 relative (floating-point evaluation order only).
    rng = np.random.default_rng(seed(2024))
    nets = [mixed_order_network(),
            load_model("models/approximate_majority.toml", {"n": 1000, "gap": 10}).network,
            load_model("models/exact_majority.toml", {"n": 100, "gap": 2}).network]
    for net in nets:
        model = to_gillespy2(net)
        for _ in range(50):
            x = rng.integers(0, 2000, size=net.n_species)
            x[rng.random(net.n_species) < 0.2] = rng.integers(0, 3)
            ours = propensities(net, x)
            theirs = reference_propensities(model, dict(zip(net.species, x, strict=True)))
            np.testing.assert_allclose(theirs, ours, rtol=1e-12, atol=0)


def test_second_order_same_species_counts_ordered_pairs():
    # derived: 2 A at k=0.5, v=3.5, x_A=10 -> 0.5 * 10 * 9 / 3.5 (no division by 2)
    net = mixed_order_network()
    theirs = reference_propensities(to_gillespy2(net), {"A": 10, "B": 5, "C": 2})
    assert theirs[3] == pytest.approx(0.5 * 10 * 9 / 3.5, rel=1e-14)


def test_reserved_name_is_refused():
    net = Network.from_reactions("bad", ["vol"], [Reaction({"vol": 1}, {}, 1.0)],
                                 initial={"vol": 3})
    with pytest.raises(CRNError, match="reserved"):
        to_gillespy2(net)


def test_run_reference_pure_decay_is_binomial_in_mean():
    # derived: X -> 0 at c: X(t) ~ Binomial(X0, e^{-ct}); 300 runs of the pure-Python solver,
    # mean within 4 standard errors of X0 e^{-ct}.
    net = Network.from_reactions("decay", ["X"], [Reaction({"X": 1}, {}, 1.0)],
                                 initial={"X": 20})
    children = np.random.SeedSequence(seed(7)).spawn(300)
    finals = np.array([run_reference(net, until=1.0, times=[0.0, 0.5, 1.0], rng=c,
                                     solver="numpy").counts[-1, 0] for c in children])
    p = np.exp(-1.0)
    se = np.sqrt(20 * p * (1 - p) / finals.size)
    assert abs(finals.mean() - 20 * p) < 4 * se


def test_run_reference_rejects_uneven_times():
    net = mixed_order_network()
    with pytest.raises(ValueError, match="evenly spaced"):
        run_reference(net, until=1.0, times=[0.0, 0.1, 0.5], rng=1, solver="numpy")

"""Seeds of the statistical tests, derived from one root so the suite can be rerun on others.

Every statistical test draws its randomness from ``seed(key)`` (a fixed key per stream of
the test). With no ``CRN_TEST_SEED_ROOT`` in the environment the seed is the key itself,
so the default suite runs on the same numbers every time; with a root, every key is mapped
to an independent seed, ``SeedSequence([root, key])``, so the whole suite can be rerun on
other random numbers (``CRN_TEST_SEED_ROOT=3 make test``) to show that no statistical test
passes only because of its seed. Tests that pin a regression value keep a literal seed.
"""

import os

import numpy as np

ENV = "CRN_TEST_SEED_ROOT"


def seed_root() -> int | None:
    """The root from ``CRN_TEST_SEED_ROOT``, or None for the default seeds."""
    text = os.environ.get(ENV, "").strip()
    if not text:
        return None
    try:
        root = int(text)
    except ValueError:
        raise ValueError(f"{ENV} must be a non-negative whole number, got {text!r}") from None
    if root < 0:
        raise ValueError(f"{ENV} must be a non-negative whole number, got {text!r}")
    return root


def seed(key: int) -> int:
    """The seed of the test stream ``key``: ``key`` by default, else drawn from the root."""
    root = seed_root()
    if root is None:
        return int(key)
    return int(np.random.SeedSequence([root, int(key)]).generate_state(1, np.uint64)[0] >> 1)

"""Seeds in, independent random streams out: the one place a user's seed is normalised.

Every stochastic computation takes a seed as an int, a
``numpy.random.Generator``, a ``SeedSequence`` or None, turns it into a root
``SeedSequence`` with :func:`root_seed` (whose integer entropy is recorded with
the results) and draws its parts from children of that root: by position
(:func:`child_streams`, ``SeedSequence.spawn``) or by a key naming the part
(:func:`keyed_stream`, the same children addressed directly), so that the
numbers depend neither on the order the parts run in nor on how many
processes run them.
"""

from __future__ import annotations

from typing import TypeAlias, cast

import numpy as np

Seed: TypeAlias = "int | np.integer | np.random.Generator | np.random.SeedSequence | None"

__all__ = ["root_seed", "child_streams", "keyed_stream", "seed_entropy"]

_WORD = 32
_CHECK_WORDS = 8  # state words compared when deciding two SeedSequences are the same


def root_seed(rng: Seed = None) -> np.random.SeedSequence:
    """The root ``SeedSequence`` of a seed, with integer entropy (recordable, repeatable).

    Parameters
    ----------
    rng : int, numpy.random.Generator, numpy.random.SeedSequence or None
        An int (>= 0) is the entropy itself; None draws fresh entropy from the
        operating system; a Generator gives one draw from it (so the root
        follows the generator's state); a SeedSequence is used as it is, spawn
        key included (children from an earlier ``spawn`` on it are not
        skipped). A SeedSequence whose entropy is a list of ints is the same
        stream as the integer that list spells in 32-bit words (least
        significant first), which becomes its entropy; one that no integer
        reproduces (trailing zero words beyond the pool) is replaced by a root
        drawn from its state.

    Returns
    -------
    numpy.random.SeedSequence
        ``int(root.entropy)`` is the entropy to record; ``root_seed(entropy)``
        gives the same streams when the input had no spawn key.

    Raises
    ------
    TypeError
        For any other type (a float, a string, a ``RandomState``).
    ValueError
        For a negative integer.

    References
    ----------
    NumPy, "Parallel random number generation" (``SeedSequence``, ``spawn``).

    Examples
    --------
    >>> import numpy as np
    >>> root_seed(7).entropy
    7
    >>> root_seed(np.random.SeedSequence([1, 2])).entropy == 1 + (2 << 32)
    True
    """
    if isinstance(rng, np.random.SeedSequence):
        return _integer_entropy(rng)
    if isinstance(rng, np.random.Generator):
        return np.random.SeedSequence(int(rng.integers(0, 2**63)))
    if rng is None:
        return np.random.SeedSequence()
    if isinstance(rng, int | np.integer) and not isinstance(rng, bool):
        if rng < 0:
            raise ValueError(f"a seed must be a non-negative integer, got {rng}")
        return np.random.SeedSequence(int(rng))
    raise TypeError(f"`rng` must be a Generator, int, SeedSequence or None, got {type(rng)}")


def seed_entropy(rng: Seed = None) -> int:
    """The integer entropy of :func:`root_seed` (what a saved result records)."""
    return cast(int, root_seed(rng).entropy)


def child_streams(rng: Seed, count: int) -> list[np.random.SeedSequence]:
    """``count`` independent child streams of the seed's root, in order (``SeedSequence.spawn``).

    Child i is the same whatever ``count`` is, so part i of a computation draws
    the same numbers however many parts there are.

    Examples
    --------
    >>> [int(c.generate_state(1)[0]) == int(k.generate_state(1)[0])
    ...  for c, k in zip(child_streams(5, 2), [keyed_stream(5, 0), keyed_stream(5, 1)])]
    [True, True]
    """
    return root_seed(rng).spawn(int(count))


def keyed_stream(root: int | np.random.SeedSequence | None, *key: int) -> np.random.SeedSequence:
    """The child stream addressed by ``key``: the same numbers whenever and wherever it runs.

    ``keyed_stream(root, i)`` is child i of ``root.spawn``; longer keys address
    grandchildren, so a sweep can give each (cell, round) its own stream
    without spawning in order.

    Parameters
    ----------
    root : int or numpy.random.SeedSequence
        Root entropy, or a SeedSequence (its spawn key is extended, so streams
        keyed under two siblings never coincide).
    *key : int
    """
    if isinstance(root, np.random.SeedSequence):
        return np.random.SeedSequence(entropy=root.entropy,
                                      spawn_key=(*root.spawn_key, *(int(k) for k in key)))
    return np.random.SeedSequence(entropy=root, spawn_key=tuple(int(k) for k in key))


def _integer_entropy(seq: np.random.SeedSequence) -> np.random.SeedSequence:
    entropy = seq.entropy
    if isinstance(entropy, int | np.integer):
        return np.random.SeedSequence(int(entropy), spawn_key=seq.spawn_key,
                                      pool_size=seq.pool_size)
    value = 0
    for i, word in enumerate(_words(entropy)):
        value |= word << (_WORD * i)
    same = np.random.SeedSequence(value, spawn_key=seq.spawn_key, pool_size=seq.pool_size)
    if np.array_equal(same.generate_state(_CHECK_WORDS), seq.generate_state(_CHECK_WORDS)):
        return same
    state = seq.generate_state(4, np.uint64)
    return np.random.SeedSequence(sum(int(w) << (64 * i) for i, w in enumerate(state)))


def _words(entropy) -> list[int]:
    """The 32-bit words SeedSequence reads from a sequence of non-negative ints."""
    words = []
    for item in np.asarray(entropy, dtype=object).reshape(-1):
        item = int(item)
        words.append(item & 0xFFFFFFFF)
        item >>= _WORD
        while item:
            words.append(item & 0xFFFFFFFF)
            item >>= _WORD
    return words

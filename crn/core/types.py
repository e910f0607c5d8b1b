"""Type aliases of the public API, for annotations.

Modules import them under ``typing.TYPE_CHECKING`` only, so using them costs
no import at run time.
"""

from __future__ import annotations

from typing import TypeAlias

import numpy as np

__all__ = ["Seed", "SeedLike"]

#: What every stochastic function accepts as ``rng``: a root seed, a ``SeedSequence``
#: or a ``Generator`` (None: fresh entropy from the operating system).
SeedLike: TypeAlias = int | np.random.SeedSequence | np.random.Generator | None

#: A root seed or ``SeedSequence`` (None: fresh entropy), for analyses that address their
#: child streams by key (cell, round) so that any order of work draws the same numbers.
Seed: TypeAlias = int | np.random.SeedSequence | None

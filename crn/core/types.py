"""Type aliases of the public API, for annotations.

Modules import them under ``typing.TYPE_CHECKING`` only, so using them costs
no import at run time.
"""

from __future__ import annotations

from typing import TypeAlias

import numpy as np

__all__ = ["SeedLike"]

#: What every stochastic function accepts as ``rng``: a root seed, a ``SeedSequence``
#: or a ``Generator`` (None: fresh entropy from the operating system); see
#: :func:`crn.runtime.seeds.root_seed`.
SeedLike: TypeAlias = int | np.integer | np.random.SeedSequence | np.random.Generator | None

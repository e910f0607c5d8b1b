"""The resume policy of a regime map: which seed, which cells are done, where each new one goes.

A regime map with an output folder keeps ``<out>/regimes.jsonl``
(:class:`~crn.io.sweep_store.SweepStore`): a header naming the model file (and
its SHA-256), every option that changes a number and the seed entropy, then
each cell as it finishes. Resuming adopts the file's seed (refusing another
seed given explicitly), refuses a file written for other parameters or another
version of the model file, and skips the cells already there, so the resumed map
has the numbers an uninterrupted one would have had.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path

from crn.core.errors import CRNError
from crn.runtime.seeds import seed_entropy

__all__ = ["RegimeSweep", "open_regime_sweep", "regime_sweep_parameters", "RESULTS_NAME"]

#: Stem of the results file in the output folder (``regimes.jsonl``).
RESULTS_NAME = "regimes"


def regime_sweep_parameters(model, *, sets=(), n=(), gap=None, gap_fraction=None, risk: float,
                            until=None, runs_max: int, time_factor: float, method: str,
                            implementation=None, full_network: bool = False) -> dict:
    """Everything that fixes a regime map's numbers, as its results file records it.

    Parameters
    ----------
    model : crn.core.model.Model
        The loaded model; its file (``model.source``) is named and hashed.
    sets : sequence of str
        The ``NAME=VALUE`` overrides as given.
    n, gap, gap_fraction, risk, until, runs_max, time_factor, method :
        As :func:`crn.analyses.regimes.regime_map` takes them.
    implementation : (str, crn.dna.DNAParameters), optional
        The DNA scheme and its parameters, when the cells run on an implementation.
    full_network : bool
        The implementation's stochastic cells forced onto the full network (no reduced
        model); recorded so that a resumed sweep never mixes the two.

    Returns
    -------
    dict
        JSON-ready.

    Raises
    ------
    CRNError
        When the model file cannot be read.
    """
    path = Path(model.source)
    try:
        digest = hashlib.sha256(path.read_bytes()).hexdigest()
    except OSError as err:
        raise CRNError(f"{path}: cannot read the model file ({err.strerror or err})") from err
    parameters = {
        "model": path.name, "model_sha256": digest,
        "sets": sorted(sets or ()), "n": list(n), "gap": None if gap is None else list(gap),
        "gap_fraction": None if gap_fraction is None else list(gap_fraction),
        "risk": risk, "until": until, "runs_max": runs_max, "time_factor": time_factor,
        "method": method,
    }
    if implementation is not None:
        scheme, params = implementation
        parameters["implement"] = {"scheme": scheme, "parameters": params.as_dict(),
                                   "full_network": bool(full_network)}
    return parameters


@dataclass
class RegimeSweep:
    """A regime map's seed and finished cells, and where new cells are kept.

    Attributes
    ----------
    seed_entropy : int
        Root entropy to run the map with (the results file's, on resume).
    done : dict of (int, int) to RegimeCell
        Cells finished before (pass as ``regime_map(..., done=)``).
    store : SweepStore or None
        The results file; None without an output folder (nothing is kept).
    new : list of RegimeCell
        Cells finished in this run, in order.
    """

    seed_entropy: int
    done: dict = field(default_factory=dict)
    store: object = None
    new: list = field(default_factory=list)

    def record(self, cell) -> None:
        """Keep a finished cell (appended durably to the results file, if any)."""
        self.new.append(cell)
        if self.store is not None:
            self.store.append(cell.to_dict())

    def finished(self) -> list:
        """Every finished cell, old and new, by n and gap."""
        return sorted([*self.done.values(), *self.new], key=lambda c: (c.n, c.gap))

    @property
    def path(self) -> Path | None:
        """The results file (None without an output folder)."""
        return None if self.store is None else self.store.path


def open_regime_sweep(out, parameters: dict, *, seed=None, resume: bool = False) -> RegimeSweep:
    """Start or resume a regime map.

    Parameters
    ----------
    out : str or Path or None
        Output folder of the results file; None keeps nothing (a fresh seed unless given).
    parameters : dict
        From :func:`regime_sweep_parameters`; a resumed file must record the same.
    seed : int or None
        The seed given by the user; None draws fresh entropy (or, on resume, adopts
        the file's).
    resume : bool
        Continue the results file in ``out`` (else a new one replaces it).

    Returns
    -------
    RegimeSweep

    Raises
    ------
    CRNError
        On resume, when the file records other parameters or another seed than the
        one given, or is not a results file; when ``out`` cannot be written.
    """
    from crn.analyses.regimes import RegimeCell
    from crn.io.sweep_store import SweepStore

    entropy = seed_entropy(seed)
    if out is None:
        return RegimeSweep(seed_entropy=entropy)
    store = SweepStore(out, RESULTS_NAME, parameters, seed_entropy=entropy, resume=resume,
                       check_seed=seed is not None)
    done = {(c["n"], c["gap"]): RegimeCell.from_dict(c) for c in store.finished}
    return RegimeSweep(seed_entropy=store.seed_entropy, done=done, store=store)

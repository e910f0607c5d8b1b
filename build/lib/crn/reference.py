"""Bridge to the stochastic-simulation library GillesPy2, used as an independent check.

What GillesPy2 1.8 does (read in ``gillespy2/core/reaction.py``,
``Reaction._create_mass_action``): a mass-action reaction of rate k builds the
propensity string ``k * A * B / vol`` for ``A + B``, ``k * A * (A - 1) / vol``
for ``2 A``, ``k * A`` for ``A`` and ``k * vol`` for ``0 ->``. That is exactly
our convention ``k * prod x(x-1)...(x-r+1) / v**(order-1)`` (ordered tuples, no
division by 2), so orders 0 to 2 use its own mass-action code unchanged and no
rate compensation is needed. It refuses mass action above order 2; those
reactions get a custom propensity string written in our convention
(``k * A * (A - 1) * (A - 2) / (vol * vol)``), rate first so that its C++
solver evaluates in double precision. Rates are named parameters, never inlined
literals, because the library substitutes names into propensity strings by
plain text replacement.

The compiled solver (``SSACSolver``) is built with SCons; its build looks for a
``scons`` executable on ``PATH`` and otherwise runs ``python -m SCons`` with the
*resolved* interpreter, which in a virtual environment is the base interpreter
without SCons. :func:`run_reference` therefore puts the running interpreter's
``bin`` directory on ``PATH`` while it builds. When no C++ compiler or SCons is
available it falls back to the pure-Python ``NumPySSASolver``.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import shutil
import sys
import threading
import warnings
from pathlib import Path

import numpy as np

from crn.core.errors import CRNError
from crn.core.network import Network
from crn.core.outcome import RunOutcome, consensus_index
from crn.engines.base import Trajectory

__all__ = ["to_gillespy2", "run_reference", "reference_propensities"]

_SOLVERS = ("auto", "c", "numpy")
_compiled: dict[str, object] = {}
_compiled_lock = threading.Lock()
_c_unavailable: list[str] = []


def _rate_names(net: Network) -> list[str]:
    prefix = "k_"
    while any(s.startswith(prefix) for s in net.species):
        prefix = "k" + prefix
    return [f"{prefix}{i}" for i in range(net.n_reactions)]


def to_gillespy2(net: Network):
    """Build a GillesPy2 model whose propensities are exactly ours.

    Parameters
    ----------
    net : Network

    Returns
    -------
    gillespy2.Model
        Discrete species with the network's initial counts, volume ``net.volume``,
        one named rate parameter per reaction, mass-action reactions for orders
        0-2 and custom propensities (same convention) for higher orders.

    Raises
    ------
    CRNError
        If a species is called ``vol`` (reserved by GillesPy2).

    References
    ----------
    Gillespie, J. Phys. Chem. 81:2340, 1977 (the propensity convention of the library).
    """
    import gillespy2

    with warnings.catch_warnings():
        # its expression parser uses ast.Num, deprecated since Python 3.8
        warnings.simplefilter("ignore", DeprecationWarning)
        return _build_model(gillespy2, net)


def _build_model(gillespy2, net: Network):
    if "vol" in net.species:
        raise CRNError("species name 'vol' is reserved by the reference library (GillesPy2)")
    model = gillespy2.Model(name="crn_model", volume=float(net.volume))
    model.add_species([
        gillespy2.Species(name=s, initial_value=int(c), mode="discrete")
        for s, c in zip(net.species, net.initial, strict=True)
    ])
    names = _rate_names(net)
    params = [gillespy2.Parameter(name=name, expression=repr(float(k)))
              for name, k in zip(names, net.rates, strict=True)]
    if params:
        model.add_parameter(params)
    reactions = []
    for i in range(net.n_reactions):
        r = net.reaction(i)
        if r.order <= 2:
            reaction = gillespy2.Reaction(name=f"r{i}", reactants=dict(r.reactants),
                                          products=dict(r.products), rate=params[i])
        else:
            factors = [names[i]]
            for s, m in r.reactants.items():
                factors += [s if j == 0 else f"({s} - {j})" for j in range(m)]
            propensity = " * ".join(factors) + " / (" + " * ".join(["vol"] * (r.order - 1)) + ")"
            reaction = gillespy2.Reaction(name=f"r{i}", reactants=dict(r.reactants),
                                          products=dict(r.products),
                                          propensity_function=propensity)
        reactions.append(reaction)
    if reactions:
        model.add_reaction(reactions)
    return model


def reference_propensities(model, x) -> np.ndarray:
    """Evaluate a GillesPy2 model's stochastic propensity strings at counts ``x``.

    Uses the same sanitised strings the library's solvers evaluate.

    Parameters
    ----------
    model : gillespy2.Model
    x : mapping of str to int
        Species name -> count.

    Returns
    -------
    ndarray of float64, shape (n_reactions,)
    """
    species_map = model.sanitized_species_names()
    param_map = model.sanitized_parameter_names()
    env = {"V": float(model.volume), "S": [0] * len(species_map)}
    for name, short in species_map.items():
        env["S"][int(short[2:-1])] = int(x[name])
    for name, short in param_map.items():
        if name != "vol":
            env[short] = float(model.listOfParameters[name].value)
    out = []
    for reaction in model.listOfReactions.values():
        expr = reaction.sanitized_propensity_function(species_map, param_map)
        out.append(float(eval(expr, {"__builtins__": {}}, env)))  # noqa: S307 - our own strings
    return np.asarray(out, dtype=np.float64)


@contextlib.contextmanager
def _scons_on_path():
    bin_dir = str(Path(sys.executable).parent)
    old = os.environ.get("PATH", "")
    if shutil.which("scons") is None and (Path(bin_dir) / "scons").exists():
        os.environ["PATH"] = bin_dir + os.pathsep + old
        try:
            yield
        finally:
            os.environ["PATH"] = old
    else:
        yield


def _fingerprint(net: Network, grid: np.ndarray) -> str:
    h = hashlib.sha256()
    for a in (net.reactant_species, net.reactant_counts, net.product_species,
              net.product_counts, net.rates, net.initial, grid):
        h.update(np.ascontiguousarray(a).tobytes())
    h.update(repr((net.species, net.volume)).encode())
    return h.hexdigest()


def _compiled_solver(net: Network, model, grid: np.ndarray):
    """A built SSACSolver for this network, cached per process; None if it cannot be built."""
    import gillespy2

    if _c_unavailable:
        return None
    key = _fingerprint(net, grid)
    with _compiled_lock:
        if key in _compiled:
            return _compiled[key]
        try:
            with _scons_on_path(), warnings.catch_warnings():
                warnings.simplefilter("ignore")
                solver = gillespy2.SSACSolver(model=model)
        except Exception as err:  # no compiler or build tool: fall back to NumPy
            _c_unavailable.append(f"{type(err).__name__}: {err}")
            return None
        if len(_compiled) >= 8:
            _compiled.pop(next(iter(_compiled)))
        _compiled[key] = solver
        return solver


def _uniform_grid(times: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A uniform grid from 0 containing ``times`` (the library's requirement) and their indices."""
    if times[0] < 0:
        raise ValueError("`times` must be non-negative")
    grid = times if times[0] == 0 else np.concatenate([[0.0], times])
    if grid.size == 1:
        grid = np.array([0.0, max(float(grid[0]), 1.0)])
    steps = np.diff(grid)
    if steps.size and not np.allclose(steps, steps[0], rtol=1e-9, atol=0):
        raise ValueError("the reference engine needs evenly spaced `times` "
                         "(GillesPy2 only supports uniform time grids)")
    index = np.searchsorted(grid, times - 1e-12 * max(1.0, float(grid[-1])))
    return grid, index


def run_reference(net: Network, *, until: float, times=None, rng=None,
                  stop_at_consensus: bool = False, solver: str = "auto") -> Trajectory:
    """One exact stochastic run by GillesPy2 (an independent implementation of the SSA).

    Parameters
    ----------
    net : Network
    until : float
        Horizon (network time).
    times : array_like of float, optional
        Evenly spaced sample times within ``[0, until]`` (GillesPy2 needs a
        uniform grid from 0); default 101 points from 0 to ``until``.
    rng : numpy.random.Generator, int, SeedSequence or None
        One 31-bit seed for the library is drawn from it.
    stop_at_consensus : bool, default False
        Accepted for the engine interface; the library always runs to the
        horizon, so this only changes ``status``.
    solver : {"auto", "c", "numpy"}
        ``"c"``: the compiled ``SSACSolver`` (built once per network and
        process, several seconds); ``"numpy"``: the pure-Python
        ``NumPySSASolver``; ``"auto"``: compiled when it builds, else NumPy.

    Returns
    -------
    Trajectory
        Consensus is detected on the sample grid only: the first consensus time
        is the first sample time showing consensus. ``events`` is -1 (the
        library does not report it); ``end_time`` is the horizon.

    Raises
    ------
    ValueError
        For bad ``until``, ``times`` or ``solver``.
    CRNError
        If ``solver="c"`` and the compiled solver cannot be built.

    References
    ----------
    Gillespie, J. Phys. Chem. 81:2340, 1977. Matthew, Abel, Drawert, Petzold et
    al., GillesPy2 (the library).
    """
    import gillespy2

    if solver not in _SOLVERS:
        raise ValueError(f"`solver` must be one of {_SOLVERS}, got {solver!r}")
    until = float(until)
    if not np.isfinite(until) or until <= 0:
        raise ValueError(f"`until` must be a positive finite time, got {until}")
    times = (np.linspace(0.0, until, 101) if times is None
             else np.asarray(times, dtype=np.float64).reshape(-1))
    if times.size == 0 or (np.diff(times) <= 0).any() or times[-1] > until * (1 + 1e-12):
        raise ValueError("`times` must be increasing and within [0, until]")
    rng = np.random.default_rng(rng)
    seed = int(rng.integers(1, 2**31 - 1))
    grid, index = _uniform_grid(times)
    model = to_gillespy2(net)
    model.timespan(grid)
    chosen = None
    if solver in ("auto", "c"):
        chosen = _compiled_solver(net, model, grid)
        if chosen is None and solver == "c":
            raise CRNError("the compiled GillesPy2 solver cannot be built here: "
                           + (_c_unavailable[0] if _c_unavailable else "unknown reason"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if chosen is None:
            result = model.run(solver=gillespy2.NumPySSASolver, number_of_trajectories=1,
                               seed=seed)
        else:
            result = chosen.run(number_of_trajectories=1, seed=seed)
    run = result[0]
    counts = np.stack([np.rint(np.asarray(run[s], dtype=np.float64)) for s in net.species],
                      axis=1).astype(np.int64)[index]
    first, first_time = -1, float("nan")
    for t, x in zip(times, counts, strict=True):
        k = consensus_index(net.species_label, x)
        if k >= 0:
            first, first_time = k, float(t)
            break
    last = consensus_index(net.species_label, counts[-1]) if len(counts) else -1
    from crn.core.network import propensities

    silent = not propensities(net, counts[-1]).sum() > 0
    status = "silent" if silent else "horizon"
    if stop_at_consensus and first >= 0:
        status = "consensus"
    return Trajectory(times=times, counts=counts,
                      outcome=RunOutcome.from_indices(net, first, first_time, last),
                      events=-1, end_time=until, status=status)

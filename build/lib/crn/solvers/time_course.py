"""Time courses: species mean, spread and quantiles at evenly spaced sample times.

A stochastic ensemble is reduced run by run as the runs arrive
(:class:`TimeCourseAccumulator`), so memory does not grow with the number of
runs; the mean-field ODE gives the same shape with the mean only
(:meth:`TimeCourse.from_mean_field`), so the two overlay directly.

Mean and variance use Welford's update (Welford, Technometrics 4:419, 1962),
applied in run order whatever order the runs finish in, so the same seed gives
bit-for-bit the same numbers on one process, a local pool or a Dask cluster.

The 5% and 95% quantiles are those of the counts of a fixed set of runs: every
run while the ensemble fits in ``quantile_memory`` bytes (exact), otherwise K
runs drawn uniformly without replacement from the seed before the first run
(``quantile_runs`` says K). By the Dvoretzky-Kiefer-Wolfowitz inequality with
Massart's constant (Ann. Probab. 18:1269, 1990) the empirical distribution of
K draws is within ``eps = sqrt(ln(2 / 0.05) / (2 K))`` of the ensemble's at
every value with probability at least 95% (drawing without replacement only
tightens it, Serfling, Ann. Statist. 2:39, 1974): the reported 5% quantile
lies between the ensemble's (5 - 100 eps)% and (5 + 100 eps)% quantiles.
:func:`quantile_rank_error` gives eps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["MAX_SAMPLES", "QUANTILE_MEMORY", "TimeCourse", "TimeCourseAccumulator",
           "sample_times", "quantile_rank_error", "time_course_of_counts", "reduction_memory"]

#: Most sample times a time course takes without ``force``.
MAX_SAMPLES = 1_000_000
#: Bytes of counts kept for the quantiles (the runs beyond are summarised by mean and sd only).
QUANTILE_MEMORY = 256 * 2**20
#: The quantiles reported, as fractions.
QUANTILES = (0.05, 0.95)
_RESERVOIR_KEY = 2**32  # spawn key of the stream choosing the kept runs; runs use 0..runs-1


def sample_times(every: float, until: float, *, max_samples: int = MAX_SAMPLES,
                 force: bool = False) -> np.ndarray:
    """Sample times ``0, every, 2 every, ..., until`` (``until`` added if not a multiple).

    Parameters
    ----------
    every : float
        Sample interval, positive and at most ``until``.
    until : float
        Horizon, positive and finite.
    max_samples : int, default MAX_SAMPLES
        Most sample times allowed unless ``force``.
    force : bool, default False

    Returns
    -------
    ndarray of float64, shape (n_times,)

    Raises
    ------
    ValueError
        For a non-positive or non-finite interval or horizon, an interval larger
        than the horizon, or more than ``max_samples`` times without ``force``.
    """
    every, until = float(every), float(until)
    if not math.isfinite(until) or until <= 0:
        raise ValueError(f"the horizon must be a positive finite time, got {until:g}")
    if not math.isfinite(every) or every <= 0:
        raise ValueError(f"the sample interval must be positive, got {every:g}")
    if every > until:
        raise ValueError(f"the sample interval {every:g} is longer than the horizon {until:g}")
    ratio = until / every * (1 + 1e-12)
    if not ratio < 2**53:  # beyond any memory; also keeps floor() exact and finite
        raise ValueError(f"an interval of {every:g} up to {until:g} makes about {ratio:.3g} "
                         "sample times, far more than can be recorded")
    steps = math.floor(ratio)
    n = steps + 1 + (until - steps * every > 1e-9 * until)
    if n > max_samples and not force:
        raise ValueError(f"an interval of {every:g} up to {until:g} makes {n} sample times, "
                         f"more than the limit {max_samples}; pass --force to go ahead")
    times = every * np.arange(steps + 1, dtype=np.float64)
    times[-1] = min(times[-1], until)
    return times if n == steps + 1 else np.append(times, until)


def reduction_memory(n_times: int, n_species: int, runs: int, *,
                     quantile_memory: int = QUANTILE_MEMORY) -> int:
    """Bytes a :class:`TimeCourseAccumulator` holds, whatever the number of runs beyond.

    Parameters
    ----------
    n_times, n_species, runs : int
    quantile_memory : int, default QUANTILE_MEMORY

    Returns
    -------
    int
        The moments (two float64 tables), the kept runs and the result's four
        tables; runs that finish out of order add one float64 table each while
        they wait (a few per worker in practice; not counted).
    """
    cell = 8 * max(1, n_times) * max(1, n_species)
    kept = min(int(runs), max(1, int(quantile_memory) // cell))
    return 6 * cell + kept * cell


def quantile_rank_error(kept: int, confidence: float = 0.95) -> float:
    """DKW bound on the rank error of quantiles read from ``kept`` sampled runs.

    Parameters
    ----------
    kept : int
        Runs whose counts give the quantiles.
    confidence : float, default 0.95

    Returns
    -------
    float
        eps such that the sample's distribution function is within eps of the
        ensemble's everywhere with the given confidence (Massart 1990).
    """
    if kept < 1:
        return 1.0
    return math.sqrt(math.log(2.0 / (1.0 - confidence)) / (2.0 * kept))


@dataclass(frozen=True)
class TimeCourse:
    """Per-species summaries at sample times.

    Attributes
    ----------
    times : ndarray of float64, shape (n_times,)
        Parallel time for protocols, network time otherwise.
    species : tuple of str
    mean : ndarray of float64, shape (n_times, n_species)
    sd : ndarray of float64, shape (n_times, n_species), or None
        Sample standard deviation (n - 1 denominator); NaN with fewer than 2
        runs; None for the ODE.
    q05, q95 : ndarray of float64, shape (n_times, n_species), or None
        5% and 95% quantiles (numpy's default linear interpolation); None for
        the ODE.
    runs : int
        Runs summarised (0 for the ODE).
    quantile_runs : int
        Runs the quantiles were read from (``runs`` when exact).
    units : str
        ``"count"``, ``"concentration"`` or ``"fraction"``.
    time_units : str
        ``"parallel time"`` or ``"network time"``.
    source : str
        ``"ssa"`` or ``"ode"``.
    """

    times: np.ndarray
    species: tuple
    mean: np.ndarray
    sd: np.ndarray | None = None
    q05: np.ndarray | None = None
    q95: np.ndarray | None = None
    runs: int = 0
    quantile_runs: int = 0
    units: str = "count"
    time_units: str = "network time"
    source: str = "ssa"

    def column(self, statistic: str, species: str) -> np.ndarray:
        """One statistic (``"mean"``, ``"sd"``, ``"q05"``, ``"q95"``) of one species over time."""
        values = getattr(self, statistic)
        return values[:, self.species.index(species)]

    def to_json(self) -> dict:
        """The ``time_course`` JSON object.

        Returns
        -------
        dict
            ``times``, ``mean`` (species -> list), and for an ensemble ``sd``,
            ``q05``, ``q95`` (NaN as None), plus ``units``, ``time_units``,
            ``source``, ``runs`` and ``quantile_runs``.
        """
        def table(values):
            return {s: [None if not math.isfinite(v) else float(v) for v in values[:, i]]
                    for i, s in enumerate(self.species)}

        out = {"times": [float(t) for t in self.times], "mean": table(self.mean)}
        for name in ("sd", "q05", "q95"):
            values = getattr(self, name)
            if values is not None:
                out[name] = table(values)
        out.update(units=self.units, time_units=self.time_units, source=self.source,
                   runs=self.runs)
        if self.source == "ssa":
            out["quantile_runs"] = self.quantile_runs
        return out

    @classmethod
    def from_json(cls, obj: dict) -> TimeCourse:
        """Rebuild a time course from :meth:`to_json` output (a saved ``time_course`` object).

        Parameters
        ----------
        obj : dict
            With ``times`` and ``mean`` at least; None values become NaN.

        Returns
        -------
        TimeCourse

        Raises
        ------
        ValueError
            When a key is missing or a column's length differs from ``times``.
        """
        try:
            times = np.asarray(obj["times"], dtype=np.float64)
            species = tuple(obj["mean"])
        except (KeyError, TypeError) as err:
            raise ValueError(f"a time course needs `times` and `mean`: {err}") from err

        def table(name):
            if obj.get(name) is None:
                return None
            columns = [[np.nan if v is None else v for v in obj[name][s]] for s in species]
            values = np.asarray(columns, dtype=np.float64).reshape(len(species), -1).T
            if values.shape[0] != times.size:
                raise ValueError(f"`{name}` has {values.shape[0]} times, `times` {times.size}")
            return values

        runs = int(obj.get("runs", 0))
        return cls(times=times, species=species, mean=table("mean"), sd=table("sd"),
                   q05=table("q05"), q95=table("q95"), runs=runs,
                   quantile_runs=int(obj.get("quantile_runs", runs)),
                   units=obj.get("units", "count"),
                   time_units=obj.get("time_units", "network time"),
                   source=obj.get("source", "ssa" if "sd" in obj else "ode"))

    def at(self, index: int = -1) -> dict:
        """Mean and sd (and quantiles) of every species at one sample (default the last).

        Returns
        -------
        dict
            ``time`` and, per statistic present, species -> value (NaN as None).
        """
        out = {"time": float(self.times[index])}
        for name in ("mean", "sd", "q05", "q95"):
            values = getattr(self, name)
            if values is not None:
                out[name] = {s: None if not math.isfinite(v) else float(v)
                             for s, v in zip(self.species, values[index], strict=True)}
        return out

    @classmethod
    def from_mean_field(cls, result, *, counts: bool = False) -> TimeCourse:
        """The time course of a mean-field solution.

        Parameters
        ----------
        result : crn.solvers.ode.MeanFieldResult
        counts : bool, default False
            Report molecule counts (the ODE value times molecules per unit)
            instead of the solver's fractions or concentrations.

        Returns
        -------
        TimeCourse
            Mean only, ``source="ode"``.
        """
        values = np.asarray(result.values, dtype=np.float64)
        if counts:
            values = values * result.molecules_per_unit
        return cls(times=np.asarray(result.times, dtype=np.float64), species=tuple(result.species),
                   mean=values, units="count" if counts else result.units,
                   time_units="parallel time" if result.units == "fraction" else "network time",
                   source="ode")


class TimeCourseAccumulator:
    """Reduces stochastic runs to a :class:`TimeCourse` as they arrive.

    Parameters
    ----------
    times : array_like of float, shape (n_times,)
    species : sequence of str
    runs : int
        Runs the ensemble will have (indices 0..runs-1).
    rng : int, SeedSequence, Generator or None
        Chooses the runs kept for the quantiles when not all fit.
    quantile_memory : int, default QUANTILE_MEMORY
        Bytes of counts kept for the quantiles.
    time_units : str, default "network time"

    Notes
    -----
    Memory: two float64 arrays of shape (n_times, n_species) for the moments,
    the kept runs (at most ``quantile_memory`` bytes), and the runs that
    finished before an earlier one (held until the earlier one arrives, so the
    moments are updated in run order).
    """

    def __init__(self, times, species, runs: int, *, rng=None,
                 quantile_memory: int = QUANTILE_MEMORY, time_units: str = "network time"):
        self.times = np.asarray(times, dtype=np.float64).reshape(-1)
        self.species = tuple(species)
        if runs < 1:
            raise ValueError(f"`runs` must be at least 1, got {runs}")
        self.runs = int(runs)
        self.time_units = time_units
        shape = (self.times.size, len(self.species))
        self._shape = shape
        self._count = 0
        self._mean = np.zeros(shape)
        self._m2 = np.zeros(shape)
        self._next = 0
        self._pending: dict[int, np.ndarray] = {}
        per_run = max(1, shape[0] * shape[1] * 8)
        capacity = max(1, int(quantile_memory) // per_run)
        if self.runs <= capacity:
            chosen = np.arange(self.runs)
        else:
            chosen = np.sort(np.random.default_rng(_reservoir_stream(rng)).choice(
                self.runs, capacity, replace=False))
        self._slot = {int(i): j for j, i in enumerate(chosen)}
        self._kept = np.zeros((chosen.size, *shape), dtype=np.int64)
        self._filled = np.zeros(chosen.size, dtype=bool)

    @property
    def quantile_capacity(self) -> int:
        """Runs kept for the quantiles."""
        return int(self._filled.size)

    def add(self, index: int, counts) -> None:
        """Take run ``index``'s counts, shape (n_times, n_species)."""
        counts = np.asarray(counts)
        if counts.shape != self._shape:
            raise ValueError(f"run {index}: counts of shape {counts.shape}, expected {self._shape}")
        index = int(index)
        slot = self._slot.get(index)
        if slot is not None:
            self._kept[slot] = counts
            self._filled[slot] = True
        if index != self._next:
            self._pending[index] = np.array(counts, dtype=np.float64)
            return
        self._update(self._mean, self._m2, counts, self._count + 1)
        self._count += 1
        self._next += 1
        while self._next in self._pending:
            self._update(self._mean, self._m2, self._pending.pop(self._next), self._count + 1)
            self._count += 1
            self._next += 1

    @staticmethod
    def _update(mean, m2, x, n):
        delta = x - mean
        mean += delta / n
        m2 += delta * (x - mean)

    def result(self) -> TimeCourse:
        """The time course of the runs added so far (gaps allowed, after an interruption)."""
        mean, m2, n = self._mean.copy(), self._m2.copy(), self._count
        for index in sorted(self._pending):
            n += 1
            self._update(mean, m2, self._pending[index], n)
        with np.errstate(invalid="ignore", divide="ignore"):
            sd = np.sqrt(m2 / (n - 1)) if n > 1 else np.full(self._shape, np.nan)
        if n == 0:
            mean = np.full(self._shape, np.nan)
        kept = self._kept[self._filled]
        if kept.shape[0]:
            q05 = np.empty(self._shape)
            q95 = np.empty(self._shape)
            step = max(1, (8 * 2**20) // max(1, kept.shape[0] * self._shape[1] * 8))
            for start in range(0, self._shape[0], step):
                block = kept[:, start:start + step, :]
                q05[start:start + step], q95[start:start + step] = np.quantile(
                    block, QUANTILES, axis=0)
        else:
            q05 = q95 = np.full(self._shape, np.nan)
        return TimeCourse(times=self.times.copy(), species=self.species, mean=mean, sd=sd,
                          q05=q05, q95=q95, runs=n, quantile_runs=int(kept.shape[0]),
                          units="count", time_units=self.time_units, source="ssa")


def _reservoir_stream(rng) -> np.random.SeedSequence:
    if isinstance(rng, np.random.SeedSequence):
        return np.random.SeedSequence(rng.entropy, spawn_key=(*rng.spawn_key, _RESERVOIR_KEY))
    if isinstance(rng, np.random.Generator):
        return np.random.SeedSequence(int(rng.integers(0, 2**63)))
    return np.random.SeedSequence(rng, spawn_key=(_RESERVOIR_KEY,))


def time_course_of_counts(times, counts, species, *,
                          time_units: str = "network time") -> TimeCourse:
    """The time course of counts already in memory.

    Parameters
    ----------
    times : array_like of float, shape (n_times,)
    counts : array_like of int, shape (runs, n_times, n_species)
    species : sequence of str
    time_units : str

    Returns
    -------
    TimeCourse
    """
    counts = np.asarray(counts)
    acc = TimeCourseAccumulator(times, species, max(1, counts.shape[0]),
                                quantile_memory=max(QUANTILE_MEMORY, counts.nbytes),
                                time_units=time_units)
    for r in range(counts.shape[0]):
        acc.add(r, counts[r])
    return acc.result()

"""Hypergeometric samplers for populations up to 2**60, in numba nopython code.

numpy refuses populations of 10**9 and more and numba's own sampler draws one
item at a time. These samplers take int64 counts, cost O(1) expected time per
draw for any population size, and keep log-probability ratios accurate at
2**60 by never subtracting two large log-factorials: a difference
``ln Gamma(a + d) - ln Gamma(a)`` is written through Stirling's series as
``d ln a + a log1pmx(d / a) + (d - 1/2) log1p(d / a) + ...``, whose terms are
each of the size of the result, and the ``d ln a`` parts of several factorials
are combined into ``d`` times a sum of ``log1p`` of exact integer ratios.

Draws with a mode below :data:`INVERSION_MODE` use inversion from zero; larger
ones use the ratio-of-uniforms method with the table-mountain hat of
Stadlober (HRUA). The multivariate sampler draws one colour after the other
from its conditional univariate hypergeometric law.

References
----------
Stadlober, "The ratio of uniforms approach for generating discrete random
variates", J. Comput. Appl. Math. 31:181-189, 1990; Stadlober, "Sampling from
Poisson, binomial and hypergeometric distributions: ratio of uniforms as a
simple and fast alternative", Math. Statist. Sektion 303, Forschungszentrum
Graz, 1989. Kinderman, Monahan, "Computer generation of random variables
using the ratio of uniform deviates", ACM TOMS 3:257-260, 1977.
"""

from __future__ import annotations

import math

import numba
import numpy as np

__all__ = [
    "MAX_POPULATION",
    "INVERSION_MODE",
    "hypergeometric",
    "multivariate_hypergeometric",
    "hypergeometric_draw",
    "multivariate_hypergeometric_draw",
    "log_factorial_ratio",
]

#: Largest population the samplers accept (int64 counts with headroom for sums).
MAX_POPULATION = 2**60
#: Below this mode the univariate sampler inverts the distribution function from 0.
INVERSION_MODE = 16

_STIRLING_MIN = 30.0  # Stirling's series (to z**-7) is exact to ~1e-17 from here on
_D1 = 1.7155277699214135  # 2 sqrt(2 / e): table-mountain hat of the ratio-of-uniforms method
_D2 = 0.8989161620588988  # 3 - 2 sqrt(3 / e)


@numba.njit(cache=True)
def _log1pmx(t):
    """``log1p(t) - t`` without cancellation for small ``|t|`` (t > -1).

    The Taylor series is cut where the next term is below 1e-16 of the first.
    """
    at = abs(t)
    if at > 0.1:
        return math.log1p(t) - t
    if at < 1e-4:  # -t^2/2 + t^3/3 - t^4/4 + t^5/5
        return t * t * (-0.5 + t * (1.0 / 3.0 + t * (-0.25 + t * 0.2)))
    if at < 1e-2:  # through t^9
        return t * t * (-0.5 + t * (1.0 / 3.0 + t * (-0.25 + t * (0.2 + t * (
            -1.0 / 6.0 + t * (1.0 / 7.0 + t * (-0.125 + t * (1.0 / 9.0))))))))
    total = 0.0  # through t^19
    for k in range(19, 1, -1):
        total = t * total + (1.0 / k if k % 2 == 1 else -1.0 / k)
    return t * t * total


@numba.njit(cache=True)
def _stirling_tail(z):
    """``ln Gamma(z) - ((z - 1/2) ln z - z + ln(2 pi) / 2)`` for z >= 30."""
    r = 1.0 / z
    r2 = r * r
    return r * (1.0 / 12.0 - r2 * (1.0 / 360.0 - r2 * (1.0 / 1260.0 - r2 / 1680.0)))


@numba.njit(cache=True)
def _lgamma_excess(a, d):
    """``ln Gamma(a + d) - ln Gamma(a) - d ln a`` for a, a + d >= 30 (floats of integers)."""
    t = d / a
    if abs(t) <= 0.1:
        lm = _log1pmx(t)
        return a * lm + (d - 0.5) * (t + lm) + _stirling_tail(a + d) - _stirling_tail(a)
    return (a * _log1pmx(t) + (d - 0.5) * math.log1p(t)
            + _stirling_tail(a + d) - _stirling_tail(a))


@numba.njit(cache=True)
def log_factorial_ratio(top, bottom):
    """``ln(top!) - ln(bottom!)`` for int64 ``top, bottom >= 0``, accurate when both are huge.

    Parameters
    ----------
    top, bottom : int

    Returns
    -------
    float
    """
    a = float(bottom) + 1.0
    d = float(top - bottom)
    if a < _STIRLING_MIN or a + d < _STIRLING_MIN:
        return math.lgamma(float(top) + 1.0) - math.lgamma(a)
    return d * math.log(a) + _lgamma_excess(a, d)


@numba.njit(cache=True)
def _four_term_log_ratio(x1, x2, x3, x4, d):
    """``ln`` of ``f(k) / f(m)`` for ``f(k) = 1 / (k! (g-k)! (s-k)! (b-s+k)!)``, k = m + d.

    ``x1..x4`` are the int64 arguments at the mode m: ``m, g - m, s - m,
    b - s + m``; the factorials at k take ``x1 + d, x2 - d, x3 - d, x4 + d``.
    """
    lead = 0.0  # d times the sum of +-ln(x + 1) over the Stirling-evaluated terms
    total = 0.0
    fd = float(d)
    a1 = float(x1) + 1.0
    a2 = float(x2) + 1.0
    a3 = float(x3) + 1.0
    a4 = float(x4) + 1.0
    big1 = a1 >= _STIRLING_MIN and a1 + fd >= _STIRLING_MIN
    big2 = a2 >= _STIRLING_MIN and a2 - fd >= _STIRLING_MIN
    big3 = a3 >= _STIRLING_MIN and a3 - fd >= _STIRLING_MIN
    big4 = a4 >= _STIRLING_MIN and a4 + fd >= _STIRLING_MIN
    if big1:
        total -= _lgamma_excess(a1, fd)
    else:
        total -= math.lgamma(a1 + fd) - math.lgamma(a1)
    if big2:
        total -= _lgamma_excess(a2, -fd)
    else:
        total -= math.lgamma(a2 - fd) - math.lgamma(a2)
    if big3:
        total -= _lgamma_excess(a3, -fd)
    else:
        total -= math.lgamma(a3 - fd) - math.lgamma(a3)
    if big4:
        total -= _lgamma_excess(a4, fd)
    else:
        total -= math.lgamma(a4 + fd) - math.lgamma(a4)
    # The leading terms are d (ln a2 + ln a3 - ln a1 - ln a4); pair them as
    # log1p of exact integer differences so that near the mode they cancel cleanly.
    if big1 and big2:
        lead += math.log1p(float(x2 - x1) / a1)
    else:
        if big1:
            lead -= math.log(a1)
        if big2:
            lead += math.log(a2)
    if big3 and big4:
        lead += math.log1p(float(x3 - x4) / a4)
    else:
        if big3:
            lead += math.log(a3)
        if big4:
            lead -= math.log(a4)
    return total + fd * lead


@numba.njit(cache=True)
def _log_first(s, g, n):
    """``ln P(X = 0)`` for X ~ HG(s draws, g good, n items), without cancellation.

    ``P(0) = prod_{i<d} (n - e - i) / (n - i)`` with d = min(s, g), e = max(s, g).
    """
    d = min(s, g)
    e = max(s, g)
    a_low = float(n - d - e) + 1.0
    a_high = float(n - d) + 1.0
    if a_low < _STIRLING_MIN:
        return log_factorial_ratio(n - e, n - e - d) - log_factorial_ratio(n, n - d)
    fd = float(d)
    return (fd * math.log1p(-float(e) / a_high)
            + _lgamma_excess(a_low, fd) - _lgamma_excess(a_high, fd))


@numba.njit(cache=True)
def _inversion(rng, s, g, b):
    """Inversion from 0 for HG(s draws, g good, b bad), s <= b (small mode)."""
    top = min(s, g)
    p0 = math.exp(_log_first(s, g, g + b))
    while True:
        p = p0
        u = rng.random()
        k = 0
        while u > p and k < top:
            u -= p
            p *= float(g - k) * float(s - k) / (float(k + 1) * float(b - s + k + 1))
            k += 1
        if u <= p:
            return k
        # rounding left u above the whole mass (probability ~1e-16): draw again


@numba.njit(cache=True)
def _hrua(rng, s, g, b):
    """Ratio of uniforms (Stadlober's HRUA) for HG(s draws, g good, b bad), s, g <= N/2."""
    n = g + b
    fs = float(s)
    fn = float(n)
    p = float(g) / fn
    mean = fs * p
    var = (fn - fs) * fs * p * (1.0 - p) / (fn - 1.0)
    a = mean + 0.5
    c = math.sqrt(var + 0.5)
    h = _D1 * c + _D2
    top = min(s, g)
    m = int(math.floor((fs + 1.0) * (float(g) + 1.0) / (fn + 2.0)))
    m = max(0, min(m, top))
    bound = min(float(top) + 1.0, math.floor(a + 16.0 * c))
    x1 = m
    x2 = g - m
    x3 = s - m
    x4 = b - s + m
    # Fast path: while |k - m| stays below `reach`, all four factorials use Stirling's
    # series and the leading logarithms and Stirling tails at the mode are constants.
    a1 = float(x1) + 1.0
    a2 = float(x2) + 1.0
    a3 = float(x3) + 1.0
    a4 = float(x4) + 1.0
    reach = min(min(a1, a2), min(a3, a4)) - _STIRLING_MIN
    lead = math.log1p(float(x2 - x1) / a1) + math.log1p(float(x3 - x4) / a4)
    tails = _stirling_tail(a1) + _stirling_tail(a2) + _stirling_tail(a3) + _stirling_tail(a4)
    while True:
        u = rng.random()
        v = rng.random()
        if u == 0.0:
            continue
        x = a + h * (v - 0.5) / u
        if x < 0.0 or x >= bound:
            continue
        k = int(math.floor(x))
        fd = float(k - m)
        if abs(fd) < reach:
            t = fd * lead + tails - (_stirling_tail(a1 + fd) + _stirling_tail(a2 - fd)
                                     + _stirling_tail(a3 - fd) + _stirling_tail(a4 + fd))
            t -= _core(a1, fd) + _core(a2, -fd) + _core(a3, -fd) + _core(a4, fd)
        else:
            t = _four_term_log_ratio(x1, x2, x3, x4, k - m)
        if u * (4.0 - u) - 3.0 <= t:  # quick acceptance: 2 ln u <= u (4 - u) - 3
            return k
        if u * (u - t) >= 1.0:  # quick rejection: 2 ln u >= u - 1/u
            continue
        if 2.0 * math.log(u) <= t:
            return k


@numba.njit(cache=True)
def _core(a, d):
    """``_lgamma_excess`` without the Stirling tails."""
    t = d / a
    lm = _log1pmx(t)
    if abs(t) <= 0.1:
        return a * lm + (d - 0.5) * (t + lm)
    return a * lm + (d - 0.5) * math.log1p(t)


@numba.njit(cache=True)
def hypergeometric_draw(rng, draws, good, total):
    """Number of good items among ``draws`` taken without replacement (numba kernel).

    Parameters
    ----------
    rng : numpy.random.Generator
        Passed into nopython code.
    draws, good, total : int
        ``0 <= draws, good <= total <= MAX_POPULATION``; not checked here.

    Returns
    -------
    int
    """
    if draws == 0 or good == 0:
        return 0
    bad = total - good
    if bad == 0:
        return draws
    if draws == total:
        return good
    g = min(good, bad)
    s = min(draws, total - draws)
    b = total - g
    mode = (float(s) + 1.0) * (float(g) + 1.0) / (float(total) + 2.0)
    if mode < INVERSION_MODE:
        x = _inversion(rng, s, g, b)
    else:
        x = _hrua(rng, s, g, b)
    if good > bad:
        x = s - x
    if draws > total - draws:
        x = good - x
    return x


@numba.njit(cache=True)
def multivariate_hypergeometric_draw(rng, colors, draws, out):
    """Draw ``draws`` items without replacement from urns of ``colors`` (numba kernel).

    One colour after the other: the count of colour i is hypergeometric
    given the draws left and the items of the colours not yet visited.

    Parameters
    ----------
    rng : numpy.random.Generator
    colors : ndarray of int64, shape (k,)
        Items of each colour; their sum must not exceed ``MAX_POPULATION``.
    draws : int
        At most ``colors.sum()``.
    out : ndarray of int64, shape (k,)
        Receives the count drawn of each colour.
    """
    left = 0
    for i in range(colors.shape[0]):
        left += colors[i]
    for i in range(colors.shape[0]):
        ci = colors[i]
        if draws == 0 or ci == 0:
            out[i] = 0
        else:
            x = hypergeometric_draw(rng, draws, ci, left)
            out[i] = x
            draws -= x
        left -= ci


@numba.njit(cache=True)
def _many(rng, draws, good, total, size):
    out = np.empty(size, dtype=np.int64)
    for i in range(size):
        out[i] = hypergeometric_draw(rng, draws, good, total)
    return out


@numba.njit(cache=True)
def _many_multi(rng, colors, draws, size):
    out = np.empty((size, colors.shape[0]), dtype=np.int64)
    for i in range(size):
        multivariate_hypergeometric_draw(rng, colors, draws, out[i])
    return out


def _whole(name, value):
    if isinstance(value, bool) or not isinstance(value, int | np.integer):
        raise TypeError(f"`{name}` must be an integer, got {value!r}")
    return int(value)


def hypergeometric(ngood, nbad, nsample, size=None, rng=None):
    """Hypergeometric draws valid for populations up to 2**60.

    Parameters
    ----------
    ngood, nbad : int
        Good and bad items, ``ngood + nbad <= 2**60``.
    nsample : int
        Items drawn without replacement, ``0 <= nsample <= ngood + nbad``.
    size : int, optional
        Number of independent draws; a scalar when omitted.
    rng : numpy.random.Generator, int, SeedSequence or None

    Returns
    -------
    int or ndarray of int64, shape (size,)
        Good items drawn.

    Raises
    ------
    ValueError
        For negative counts, a population above 2**60 or too large a sample.

    References
    ----------
    Stadlober, J. Comput. Appl. Math. 31:181-189, 1990 (ratio of uniforms, HRUA).

    Examples
    --------
    >>> x = hypergeometric(2**58, 2**59, 2**40, rng=1)
    >>> abs(x - 2**40 / 3) < 10 * 2**20
    True
    """
    ngood, nbad, nsample = (_whole(k, v) for k, v in
                            (("ngood", ngood), ("nbad", nbad), ("nsample", nsample)))
    total = ngood + nbad
    if min(ngood, nbad, nsample) < 0:
        raise ValueError("`ngood`, `nbad` and `nsample` must be non-negative")
    if total > MAX_POPULATION:
        raise ValueError(f"population ngood + nbad must be at most 2**60, got {total}")
    if nsample > total:
        raise ValueError(f"`nsample` ({nsample}) exceeds the population ({total})")
    rng = np.random.default_rng(rng)
    if size is None:
        return int(_many(rng, nsample, ngood, total, 1)[0])
    return _many(rng, nsample, ngood, total, int(size))


def multivariate_hypergeometric(colors, nsample, size=None, rng=None):
    """Multivariate hypergeometric draws valid for populations up to 2**60.

    Parameters
    ----------
    colors : array_like of int, shape (k,)
        Items of each colour, sum at most 2**60.
    nsample : int
        Items drawn without replacement, at most ``sum(colors)``.
    size : int, optional
        Number of independent draws.
    rng : numpy.random.Generator, int, SeedSequence or None

    Returns
    -------
    ndarray of int64, shape (k,) or (size, k)

    Raises
    ------
    ValueError
        For negative counts, a population above 2**60 or too large a sample.
    """
    nsample = _whole("nsample", nsample)
    values = [_whole("colors", c) for c in np.asarray(colors, dtype=object).reshape(-1)]
    if min(values, default=0) < 0 or nsample < 0:
        raise ValueError("`colors` and `nsample` must be non-negative")
    if sum(values) > MAX_POPULATION:
        raise ValueError(f"the population sum(colors) must be at most 2**60, got {sum(values)}")
    if nsample > sum(values):
        raise ValueError(f"`nsample` ({nsample}) exceeds the population ({sum(values)})")
    rng = np.random.default_rng(rng)
    arr = np.array(values, dtype=np.int64)
    out = _many_multi(rng, arr, nsample, 1 if size is None else int(size))
    return out[0] if size is None else out

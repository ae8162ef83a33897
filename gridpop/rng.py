"""Counter-based random numbers.

A uniform draw is a pure function of (seed, replicate, year, stream, cell, counter): a hash, not a
generator state. Any split of the work over threads, processes or cluster workers therefore draws
the same numbers, a replicate's numbers never depend on which other replicates run, and replicate i
of two scenarios with the same seed shares its numbers (common random numbers).

Use::

    key = year_key(seed, replicate, year, STREAM_BIRTHS)   # once per year and stream
    ck = cell_key(key, i * nx + j)                           # once per cell
    u = uniform(ck, k)                                       # k = 0, 1, 2, ... within the cell

The mixing function is the 64-bit finaliser of SplitMix64 (Steele, Lea and Flood 2014, "Fast
splittable pseudorandom number generators", OOPSLA), applied to a Weyl-sequence counter, which
passes BigCrush when used this way (Salmon et al. 2011, "Parallel random numbers: as easy as 1, 2,
3", SC'11, describe the counter-based design).
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from ._jit import njit

# Streams: independent families of numbers within one replicate and year.
STREAM_ENV = 1
STREAM_SURVIVAL = 2
STREAM_BIRTHS = 3
STREAM_EMIGRATION = 4
STREAM_DISPERSAL = 5
STREAM_FIRE = 6
STREAM_FLOOD = 7
STREAM_DISTURBANCE_MORTALITY = 8
STREAM_WALK = 9
STREAM_INITIAL = 10
STREAM_BARRIER = 11
STREAM_TRANSITION = 12  # stage transitions of the survivors
STREAM_SEX = 13  # sex of the births
STREAM_REMOVAL = 14  # removals of individuals (gridpop.management)
CLASS_STREAMS = 64
"""Stream ids below this; the dispersal of class c > 0 of a stage-structured model draws its
streams ``s + c * CLASS_STREAMS`` (:class:`YearStreams` ``offset``)."""

_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_S30 = np.uint64(30)
_S27 = np.uint64(27)
_S31 = np.uint64(31)
_S11 = np.uint64(11)
_INV53 = 1.0 / 9007199254740992.0  # 2**-53


@njit
def mix64(x):
    """SplitMix64 finaliser: a bijective avalanche hash of a 64-bit word."""
    x = np.uint64(x)
    x = (x ^ (x >> _S30)) * _M1
    x = (x ^ (x >> _S27)) * _M2
    return x ^ (x >> _S31)


@njit
def _combine(key, value):
    return mix64(np.uint64(key) + _GOLDEN * (np.uint64(value) + np.uint64(1)))


@njit
def year_key(seed, replicate, year, stream):
    """Key of one (seed, replicate, year, stream): hash it once, outside the cell loop."""
    k = _combine(np.uint64(0x5EED5EED5EED5EED), seed)
    k = _combine(k, replicate)
    k = _combine(k, year)
    return _combine(k, stream)


class YearStreams(NamedTuple):
    """The random streams of one replicate-year: :meth:`key` of a stream is its year key."""

    seed: int
    replicate: int
    year: int
    offset: int = 0  # added to every stream id (the streams of one class, CLASS_STREAMS)

    def key(self, stream: int) -> np.uint64:
        return np.uint64(year_key(self.seed, self.replicate, self.year, stream + self.offset))


@njit
def cell_key(key, cell):
    """Key of one cell (flat index ``i * nx + j``) under a year key."""
    return _combine(key, cell)


@njit
def uniform(ckey, k):
    """The k-th uniform of a cell key, in the open interval (0, 1)."""
    x = _combine(ckey, k)
    return (np.float64(x >> _S11) + 0.5) * _INV53


@njit
def normal(ckey, k):
    """The k-th standard normal of a cell key (Box-Muller on counters 2k and 2k+1)."""
    u1 = uniform(ckey, 2 * k)
    u2 = uniform(ckey, 2 * k + 1)
    return math.sqrt(-2.0 * math.log(u1)) * math.cos(2.0 * math.pi * u2)


POISSON_BLOCK = 8
"""Terms of the Poisson CDF that :func:`poisson_inversion` compares branch-free."""

BERNOULLI_MAX = 16
"""Binomial(n, p) with ``n <= BERNOULLI_MAX`` is drawn as a sum of n Bernoulli trials."""

_RECIPROCALS = tuple(1.0 / j for j in range(1, POISSON_BLOCK + 1))


@njit
def poisson_inversion(lam, exp_neg_lam, u):
    """The Poisson(lam) quantile of a uniform ``u``: the smallest k with ``u <= F(k)``.

    Parameters
    ----------
    lam : float
        Mean, ``0 <= lam`` and small (the search takes about ``lam + 1`` steps).
    exp_neg_lam : float
        ``exp(-lam)``, the probability of 0 (callers that hold many means compute it in a
        vectorised pass).
    u : float
        Uniform in (0, 1).

    Returns
    -------
    int
        Inversion by sequential search (Devroye 1986, Non-Uniform Random Variate Generation,
        Springer: section III.2, the inversion method for discrete distributions, and section
        X.3, the Poisson distribution; section numbers from memory, pages not verified).
        The first :data:`POISSON_BLOCK` comparisons are counted without branching (a search
        that stops at a random step costs a mispredicted branch per draw); the search goes on
        one term at a time beyond them.
    """
    p = exp_neg_lam
    f = p
    k = 0
    for j in range(POISSON_BLOCK):  # counts the terms F(0..POISSON_BLOCK-1) below u
        k += u > f
        p *= lam * _RECIPROCALS[j]
        f += p
    while u > f and p > 0.0:  # p underflows to 0 far in the tail: stops a rounding loop
        k += 1
        p *= lam / k
        f += p
    return k


@njit
def poisson(lam, ckey):
    """A Poisson(lam) variate from the uniforms of one cell key.

    Parameters
    ----------
    lam : float
        Mean. ``lam <= 0`` (and NaN) gives 0.
    ckey : uint64
        Cell key (:func:`cell_key`); its counters 0, 1, 2, ... are used.

    Returns
    -------
    int
        For ``lam < 10`` inversion of ``uniform(ckey, 0)`` (:func:`poisson_inversion`);
        otherwise the transformed rejection method PTRS, attempt m using ``uniform(ckey, 2m)``
        and ``uniform(ckey, 2m + 1)``.

    References
    ----------
    Hoermann, W. (1993). The transformed rejection method for generating Poisson random
    variables. Insurance: Mathematics and Economics 12, 39-45.
    """
    if not lam > 0.0:
        return 0
    if lam < 10.0:
        return poisson_inversion(lam, math.exp(-lam), uniform(ckey, np.int64(0)))
    slam = math.sqrt(lam)
    loglam = math.log(lam)
    b = 0.931 + 2.53 * slam
    a = -0.059 + 0.02483 * b
    log_invalpha = math.log(1.1239 + 1.1328 / (b - 3.4))
    vr = 0.9277 - 3.6224 / (b - 2.0)
    m = 0
    # same loop shape as the binomial sampler below: two transformed-rejection algorithms
    # (PTRS, BTRS) with different constants and acceptance tests, kept apart for clarity
    while True:
        u = uniform(ckey, 2 * m) - 0.5
        v = uniform(ckey, 2 * m + 1)
        m += 1
        us = 0.5 - abs(u)
        k = math.floor((2.0 * a / us + b) * u + lam + 0.43)
        if us >= 0.07 and v <= vr:
            return k
        if k < 0 or (us < 0.013 and v > us):
            continue
        if (math.log(v) + log_invalpha - math.log(a / (us * us) + b)
                <= -lam + k * loglam - math.lgamma(k + 1.0)):
            return k


@njit
def binomial(n, p, ckey):
    """A Binomial(n, p) variate from the uniforms of one cell key (exact).

    Parameters
    ----------
    n : int
        Number of trials (``n <= 0`` gives 0).
    p : float
        Success probability: ``p <= 0`` (and NaN) gives 0, ``p >= 1`` gives ``n``; above
        ``BERNOULLI_MAX`` trials ``p > 0.5`` is drawn as ``n - Binomial(n, 1 - p)``.
    ckey : uint64
        Cell key (:func:`cell_key`); its counters 0, 1, 2, ... are used.

    Returns
    -------
    int
        For ``n <= BERNOULLI_MAX`` the number of counters ``t < n`` with
        ``uniform(ckey, t) < p`` (a sum of Bernoulli trials: no logarithm, no exponential, no
        branch on the outcome); else, for ``n p < 10``, inversion by sequential search on
        ``uniform(ckey, 0)``; otherwise the transformed rejection method BTRS, attempt m using
        ``uniform(ckey, 2m)`` and ``uniform(ckey, 2m + 1)``.

    References
    ----------
    Hoermann, W. (1993). The generation of binomial random variates. Journal of Statistical
    Computation and Simulation 46, 101-110.
    """
    if n <= 0 or not p > 0.0:
        return 0
    if p >= 1.0:
        return n
    if n <= BERNOULLI_MAX:
        k = 0
        for t in range(n):
            k += uniform(ckey, t) < p
        return k
    if p > 0.5:
        return n - _binomial_low(n, 1.0 - p, ckey)
    return _binomial_low(n, p, ckey)


@njit
def binomial_table(p):
    """Inversion table of Binomial(n, p) for every n up to :data:`BERNOULLI_MAX`.

    Parameters
    ----------
    p : float
        Success probability; as in :func:`binomial`, below 0 counts as 0, above 1 as 1 and NaN
        gives a table that draws 0.

    Returns
    -------
    (BERNOULLI_MAX + 1, BERNOULLI_MAX) ndarray of float64
        Row n holds the CDF ``F(0), ..., F(n - 1)`` of Binomial(n, p), then ones; each
        probability is ``C(n, k) p^k (1 - p)^(n - k)`` from Pascal's triangle and powers by
        repeated products (a few hundred operations: cheap enough to build per row of a grid).
        For :func:`binomial_inversion`.
    """
    m = BERNOULLI_MAX
    table = np.ones((m + 1, m))
    p = min(max(p, 0.0), 1.0) if p == p else p
    pk = np.ones(m + 1)
    qk = np.ones(m + 1)
    choose = np.zeros(m + 1)
    choose[0] = 1.0
    for k in range(1, m + 1):
        pk[k] = pk[k - 1] * p
        qk[k] = qk[k - 1] * (1.0 - p)
    for n in range(1, m + 1):
        for k in range(n, 0, -1):  # row n of Pascal's triangle
            choose[k] += choose[k - 1]
        f = 0.0
        for k in range(n):
            f += choose[k] * pk[k] * qk[n - k]
            table[n, k] = f
    return table


@njit
def binomial_inversion(table, n, u):
    """The Binomial(n, p) quantile of a uniform ``u`` from ``binomial_table(p)``, ``0 <= n <=
    BERNOULLI_MAX``: the number of CDF values below u, counted without branching (inversion,
    Devroye 1986, Non-Uniform Random Variate Generation, Springer: section III.2, inversion for
    discrete distributions, and section X.4, the binomial distribution; section numbers from
    memory, pages not verified)."""
    row = table[n]
    k = 0
    for j in range(BERNOULLI_MAX):
        k += u > row[j]
    return k


@njit
def binomial_with_table(n, p, p_table, table, ckey):
    """Binomial(n, p) on cell key ``ckey``: from ``table = binomial_table(p_table)`` by
    :func:`binomial_inversion` of ``uniform(ckey, 0)`` when ``p == p_table`` and ``n <=
    BERNOULLI_MAX``, else :func:`binomial`. For many draws of which most share one
    probability."""
    if n <= BERNOULLI_MAX and p == p_table:
        return binomial_inversion(table, n, uniform(ckey, np.int64(0)))
    return binomial(n, p, ckey)


@njit
def _binomial_low(n, p, ckey):
    """Binomial(n, p) for 0 < p <= 0.5."""
    q = 1.0 - p
    if n * p < 10.0:
        u = uniform(ckey, np.int64(0))
        ratio = p / q
        a = (n + 1) * ratio
        r = math.exp(n * math.log1p(-p))
        f = r
        k = 0
        while u > f and k < n:
            k += 1
            r *= a / k - ratio
            f += r
        return k
    spq = math.sqrt(n * p * q)
    b = 1.15 + 2.53 * spq
    a = -0.0873 + 0.0248 * b + 0.01 * p
    c = n * p + 0.5
    log_alpha = math.log((2.83 + 5.1 / b) * spq)
    vr = 0.92 - 4.2 / b
    lpq = math.log(p / q)
    mode = math.floor((n + 1) * p)
    h_mode = math.lgamma(mode + 1.0) + math.lgamma(n - mode + 1.0)
    m = 0
    # same loop shape as the Poisson sampler above (see there): a different algorithm
    while True:
        u = uniform(ckey, 2 * m) - 0.5
        v = uniform(ckey, 2 * m + 1)
        m += 1
        us = 0.5 - abs(u)
        k = math.floor((2.0 * a / us + b) * u + c)
        if k < 0 or k > n:
            continue
        if us >= 0.07 and v <= vr:
            return k
        if (math.log(v) + log_alpha - math.log(a / (us * us) + b)
                <= h_mode - math.lgamma(k + 1.0) - math.lgamma(n - k + 1.0) + (k - mode) * lpq):
            return k

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

"""The fire spread kernel of :mod:`gridpop.disturbance`: one fire table's ignitions and their
spread over a replicate-year, as first-passage percolation on the 8-neighbour grid.

Each burnable cell is open to a fire with probability q (site percolation, Broadbent and
Hammersley 1957) and is reached after a delay Exp(1) / q; cells burn in order of arrival time,
kept in a binary heap, until the fire reaches its target size or no open cell borders it.
"""

from __future__ import annotations

import math

import numpy as np

from . import rng
from ._jit import njit


@njit
def _push(heap_t, heap_c, size, t, c):
    """Push (t, c) on a binary min-heap; returns the new size and the (possibly grown) arrays."""
    if size == len(heap_t):
        bigger_t = np.empty(2 * size)
        bigger_c = np.empty(2 * size, np.int64)
        for m in range(size):  # a loop, not a slice copy: no shape check to compile
            bigger_t[m] = heap_t[m]
            bigger_c[m] = heap_c[m]
        heap_t, heap_c = bigger_t, bigger_c
    i = size
    heap_t[i] = t
    heap_c[i] = c
    while i > 0:
        parent = (i - 1) // 2
        if heap_t[parent] <= heap_t[i]:
            break
        heap_t[parent], heap_t[i] = heap_t[i], heap_t[parent]
        heap_c[parent], heap_c[i] = heap_c[i], heap_c[parent]
        i = parent
    return size + 1, heap_t, heap_c


@njit
def _pop(heap_t, heap_c, size):
    t, c = heap_t[0], heap_c[0]
    size -= 1
    heap_t[0] = heap_t[size]
    heap_c[0] = heap_c[size]
    i = 0
    while True:
        left = 2 * i + 1
        small = i
        if left < size and heap_t[left] < heap_t[small]:
            small = left
        if left + 1 < size and heap_t[left + 1] < heap_t[small]:
            small = left + 1
        if small == i:
            break
        heap_t[small], heap_t[i] = heap_t[i], heap_t[small]
        heap_c[small], heap_c[i] = heap_c[i], heap_c[small]
        i = small
    return t, c, size


@njit
def _reach(c, t, fid, fkey, spread, nx, ny, fire_of, heap_t, heap_c, size):
    """Offer the 8 neighbours of cell ``c`` (burned at time ``t``) to fire ``fid``.

    ``fire_of`` holds ``fid`` for burned cells and ``-fid`` for cells this fire has examined
    (closed, or open and waiting in the heap); a later fire examines them afresh.
    """
    i0, j0 = c // nx, c % nx
    for di in range(-1, 2):
        i = i0 + di
        if i < 0 or i >= ny:
            continue
        for dj in range(-1, 2):
            j = j0 + dj
            if j < 0 or j >= nx or (di == 0 and dj == 0):
                continue
            nb = i * nx + j
            q = spread[nb]
            if q <= 0.0 or fire_of[nb] > 0 or fire_of[nb] == -fid:
                continue
            fire_of[nb] = -fid
            ck = rng.cell_key(fkey, nb)
            if rng.uniform(ck, np.int64(0)) < q:
                size, heap_t, heap_c = _push(heap_t, heap_c, size,
                                             t - math.log(rng.uniform(ck, np.int64(1))) / q, nb)
    return size, heap_t, heap_c


@njit
def _first_above(a, lo, hi, x):
    """The first index ``i`` in ``lo..hi`` with ``a[i] > x`` (``hi`` if none), ``a[lo:hi]``
    sorted: ``lo + np.searchsorted(a[lo:hi], x, side="right")`` for a NaN-free ``a``, by
    bisection (numba's searchsorted, which orders NaNs, takes seconds to compile)."""
    while lo < hi:
        mid = (lo + hi) // 2
        if a[mid] > x:
            hi = mid
        else:
            lo = mid + 1
    return lo


@njit
def _power_law(u, lo, hi, a):
    """Quantile u of the density ~ s^-a on [lo, hi]."""
    if a == 1.0:
        return lo * (hi / lo) ** u
    e = 1.0 - a
    return (lo ** e + u * (hi ** e - lo ** e)) ** (1.0 / e)


@njit
def burn_year(rkey, rate, ptr, cells, cumw, size_code, fraction_cells, mean_cells, lo_cells,
               hi_cells, exponent, spread, nx, ny, fire_of):
    """Ignite and spread one year's fires of one fire table.

    ``fire_of`` (flat int32, zeros on entry) receives the fire number 1..F of every burned cell;
    returns F. Patch p's candidate ignition cells are ``cells[ptr[p]:ptr[p + 1]]`` with
    cumulative weights ``cumw`` (running over all patches).
    """
    count_key = rng.cell_key(rkey, np.int64(0))
    ignite_key = rng.cell_key(rkey, np.int64(1))
    spread_key = rng.cell_key(rkey, np.int64(2))
    heap_t = np.empty(64)
    heap_c = np.empty(64, np.int64)
    fires = 0
    for p in range(1, len(ptr) - 1):
        lo, hi = ptr[p], ptr[p + 1]
        if hi == lo:
            continue
        k = rng.poisson(rate[p], rng.cell_key(count_key, p))
        base = cumw[lo - 1] if lo > 0 else 0.0
        total = cumw[hi - 1] - base
        for m in range(k):
            ck = rng.cell_key(rng.cell_key(ignite_key, p), m)
            x = base + rng.uniform(ck, np.int64(0)) * total
            c0 = cells[min(_first_above(cumw, lo, hi, x), hi - 1)]
            if fire_of[c0] > 0:
                continue
            u = rng.uniform(ck, np.int64(1))
            if size_code == 0:
                s = fraction_cells[p]
            elif size_code == 1:
                s = -mean_cells * math.log(u)
            else:
                s = _power_law(u, lo_cells, hi_cells, exponent)
            target = max(1, int(round(s)))
            fires += 1
            fkey = rng.cell_key(rng.cell_key(spread_key, p), m)
            fire_of[c0] = fires
            burned = 1
            size, heap_t, heap_c = _reach(c0, 0.0, fires, fkey, spread, nx, ny, fire_of,
                                          heap_t, heap_c, np.int64(0))
            while burned < target and size > 0:
                t, c, size = _pop(heap_t, heap_c, size)
                fire_of[c] = fires
                burned += 1
                size, heap_t, heap_c = _reach(c, t, fires, fkey, spread, nx, ny, fire_of,
                                              heap_t, heap_c, size)
    for c in range(len(fire_of)):
        if fire_of[c] < 0:
            fire_of[c] = 0
    return fires

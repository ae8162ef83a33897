"""Stochastic kernel dispersal of whole individuals: each disperser draws its destination from the
kernel's alias table (Walker 1977; Vose 1991), or the dispersers of a cell are placed by one
multinomial draw when they outnumber the stencil, so individuals are conserved exactly.
"""

from __future__ import annotations

import numba
import numpy as np

from .. import rng
from .._jit import njit, pjit, prange
from .convolution import as_field, edge_code
from .kernels import Kernel

# Stochastic engine: a cell's n dispersers are placed one by one (one uniform each through the
# alias table, O(1) whatever the number S of stencil cells with weight > 0) unless
# n >= MULTINOMIAL_PER_CELL * S; then a sequential-binomial multinomial over the stencil (one
# binomial per stencil cell, largest weights first, until none remain) is cheaper. Measured with
# benchmarks/bench_dispersal.py (1 and 2 threads): one by one costs ~11 ns per disperser; the
# two cost the same near n = 0.7 S for S = 5 and 13, and n = 1.6 S for S = 81 and 317.
MULTINOMIAL_PER_CELL = 1.5


def edge_map(n: int, r: int, edge_code: int) -> np.ndarray:
    """Cell reached along an axis of n cells by the coordinate g = -r..n+r-1 (at index g + r):
    g inside the grid; off it -1 (absorbing: lost) or g mirrored back across the boundary,
    repeatedly if needed (reflecting). A table, so that the kernel does not branch on the
    edge."""
    g = np.arange(-r, n + r, dtype=np.int64)
    if edge_code == 0:
        return np.where((g >= 0) & (g < n), g, -1)
    m = g % (2 * n)
    return np.where(m < n, m, 2 * n - 1 - m)


@njit
def _alias_draw(threshold, index, u):
    """Entry of the alias table drawn by one uniform ``u`` in (0, 1): its integer part of
    ``S u`` picks the slot, its fraction the entry in the slot (Walker 1977)."""
    x = u * threshold.size
    c = min(np.int64(x), threshold.size - 1)  # S u rounds to S for u within 2**-54 of 1
    return c if x - c < threshold[c] else index[c]


@njit
def _land(i, j, k, cnt, offsets, ymap, xmap, settle, labels, lab, arrivals):
    """Put cnt dispersers from cell (i, j), of patch lab, at stencil entry k (``ymap``, ``xmap``:
    :func:`_edge_map` of the rows and columns); off the grid (absorbing) they are dropped.
    Returns how many of them landed back in (i, j), in a settle cell, and in a settle cell of
    patch lab."""
    ry = (ymap.size - arrivals.shape[0]) // 2
    rx = (xmap.size - arrivals.shape[1]) // 2
    y = ymap[i + offsets[k, 0] + ry]
    x = xmap[j + offsets[k, 1] + rx]
    if y < 0 or x < 0:
        return 0, 0, 0
    arrivals[y, x] += cnt
    settled = cnt * settle[y, x]  # products, not branches: the outcomes are random
    return cnt * ((y == i) & (x == j)), settled, settled * (labels[y, x] == lab)


@njit
def entry_buffers(cond):
    """The buffers of :func:`draw_cell` for a stencil of ``cond.size`` entries: the entries
    reached, and a count per entry (zeros)."""
    return np.empty(cond.size, np.int64), np.zeros(cond.size, np.int64)


@njit
def draw_cell(n, ck, cond, threshold, alias, multinomial_min, entry, count):
    """Where the n dispersers of one cell go: ``count[entry[e]] > 0`` of them land at stencil
    entry ``entry[e]``, e < m; returns m. The caller sets those counts back to 0. From the cell
    key ``ck``: with ``n >= multinomial_min`` one multinomial over the stencil (sequential
    binomials ``Binomial(remaining, cond[k])`` on ``cell_key(ck, k)``), otherwise disperser t
    by ``uniform(ck, t)`` through the alias table. ``entry``, ``count``: from
    :func:`entry_buffers`."""
    m = 0
    if n >= multinomial_min:
        for k in range(cond.size):
            if n == 0:
                break
            cnt = rng.binomial(n, cond[k], rng.cell_key(ck, k))
            if cnt > 0:
                n -= cnt
                entry[m] = k
                count[k] = cnt
                m += 1
    else:
        for t in range(n):
            k = _alias_draw(threshold, alias, rng.uniform(ck, t))
            if count[k] == 0:
                entry[m] = k
                m += 1
            count[k] += 1
    return m


@njit
def _disperse_rows(dispersers, settle, labels, offsets, threshold, alias, cond, ymap, xmap, key,
                   multinomial_min, r0, r1, arrivals, stayed, ret):
    """The dispersers of rows r0..r1, drawn as by :func:`draw_cell` (the same random numbers,
    so the same landings): landings added to ``arrivals``, ``stayed`` written, and per patch
    of origin the number landing in a settle cell of the patch (``ret[p, 0]``) and in any
    settle cell (``ret[p, 1]``). A cell of fewer than ``multinomial_min`` dispersers (most
    cells) lands each draw at once rather than through :func:`draw_cell`'s buffers: on 2048^2
    (``bench_cycle.py``, 1 thread) the buffered form took 107-110 ms a year against 73 ms, a
    fifth of the stochastic year; the barrier mover, which sorts its landings, keeps them."""
    nx = dispersers.shape[1]
    entry, count = entry_buffers(cond)
    for i in range(r0, r1):
        for j in range(nx):
            n = np.int64(dispersers[i, j])
            if n <= 0:
                stayed[i, j] = 0.0
                continue
            lab = labels[i, j]
            ck = rng.cell_key(key, i * nx + j)
            stay = 0
            settled = 0
            own = 0
            if n >= multinomial_min:
                for e in range(draw_cell(n, ck, cond, threshold, alias, multinomial_min, entry,
                                         count)):
                    k = entry[e]
                    st, se, ow = _land(i, j, k, count[k], offsets, ymap, xmap, settle, labels,
                                       lab, arrivals)
                    count[k] = 0
                    stay += st
                    settled += se
                    own += ow
            else:
                for t in range(n):
                    k = _alias_draw(threshold, alias, rng.uniform(ck, t))
                    st, se, ow = _land(i, j, k, 1, offsets, ymap, xmap, settle, labels, lab,
                                       arrivals)
                    stay += st
                    settled += se
                    own += ow
            stayed[i, j] = stay
            if lab > 0:
                ret[lab, 0] += own
                ret[lab, 1] += settled


@pjit(grid="dispersers")
def _disperse_stochastic_kernel(dispersers, settle, labels, n_patches, offsets, threshold, alias,
                                cond, ymap, xmap, key, multinomial_min, bounds, arrivals, stayed,
                                retained, settled_from):
    """Each disperser of cell (i, j) draws its destination from the kernel.

    ``arrivals`` is zeroed first, ``stayed`` written for every cell. Row block b (rows
    bounds[b]..bounds[b+1]) then adds its landings straight into ``arrivals``:
    destinations lie within ry rows of their source (folding at a reflecting edge does not move
    a point further from its source), and every block but the last is at least 2 ry rows high,
    so blocks of the same parity never write the same row; the even blocks run in parallel,
    then the odd ones. Counts are whole numbers, so the sums are exact and the result does not
    depend on the blocks or the number of threads.

    A cell's dispersers draw their destinations as by :func:`draw_cell` from the cell's key
    ``ck = rng.cell_key(key, i * nx + j)``.
    """
    for i in prange(arrivals.shape[0]):
        arrivals[i] = 0.0
    nb = bounds.size - 1
    ret = np.zeros((nb, n_patches + 1, 2))
    for parity in range(2):
        for h in prange((nb - parity + 1) // 2):
            b = 2 * h + parity
            _disperse_rows(dispersers, settle, labels, offsets, threshold, alias, cond, ymap,
                           xmap, key, multinomial_min, bounds[b], bounds[b + 1], arrivals, stayed,
                           ret[b])
    for b in range(nb):
        for p in range(n_patches + 1):
            retained[p] += ret[b, p, 0]
            settled_from[p] += ret[b, p, 1]


@pjit(grid="dispersers")
def _row_work(dispersers, multinomial_min, work):
    """Work of each row: dispersers placed one by one, or stencil cells of a multinomial."""
    ny, nx = dispersers.shape
    for i in prange(ny):
        w = 1.0
        for j in range(nx):
            w += min(dispersers[i, j], multinomial_min)
        work[i] = w


BLOCKS_PER_THREAD = 8
"""Row blocks of the stochastic engine per numba thread and parity (load balance)."""


def work_cuts(dispersers: np.ndarray, multinomial_min: float,
              blocks: int) -> tuple[np.ndarray, np.ndarray]:
    """Each row's work (:func:`_row_work`) and the ``blocks - 1`` rows at which blocks of about
    equal work would start (sorted; may repeat, may be 0 or ``ny``)."""
    work = np.empty(dispersers.shape[0])
    _row_work(dispersers, multinomial_min, work)
    cum = np.concatenate([[0.0], np.cumsum(work)])
    return work, np.searchsorted(cum, cum[-1] * np.arange(1, blocks) / blocks)


def _row_blocks(dispersers: np.ndarray, multinomial_min: float, ry: int) -> np.ndarray:
    """Bounds of row blocks of about equal work, each but the last at least 2 ry rows high."""
    ny = dispersers.shape[0]
    _, cuts = work_cuts(dispersers, multinomial_min, 2 * BLOCKS_PER_THREAD *
                        numba.get_num_threads())
    bounds = [0]
    for c in cuts:
        if c >= bounds[-1] + max(2 * ry, 1) and c < ny:
            bounds.append(int(c))
    bounds.append(ny)
    return np.array(bounds, dtype=np.int64)


def disperse_stochastic(dispersers, settle, labels, n_patches: int, kernel: Kernel, edge: str,
                        key, *, out=None):
    """Move whole individuals: each disperser draws its destination from the kernel.

    Parameters
    ----------
    dispersers : (ny, nx) array_like of float
        Whole numbers of individuals leaving each cell.
    settle : (ny, nx) array_like of bool
        Cells where a disperser may settle (the caller removes those landing elsewhere).
    labels : (ny, nx) array_like of int
        Patch labels, 0 = no patch.
    n_patches : int
    kernel : Kernel
    edge : {'absorbing', 'reflecting'}
    key : int
        ``rng.year_key(seed, replicate, year, rng.STREAM_DISPERSAL)``; cell (i, j) uses
        ``rng.cell_key(key, i * nx + j)``.
    out : (arrivals, stayed), optional
        Two C-contiguous float64 arrays of the dispersers' shape (not the dispersers) to write
        the first two results into (overwritten), so that a caller can keep them from year to
        year: fresh memory costs page faults that slow the kernel down, most on 2 threads.

    Returns
    -------
    arrivals : (ny, nx) ndarray of float64
        Landings per cell (whole numbers), wherever they land. ``dispersers.sum() -
        arrivals.sum()`` is exactly the number that left the grid (0 with a reflecting edge).
    stayed : (ny, nx) ndarray of float64
        Dispersers of each cell that landed back in it.
    retained : (n_patches + 1,) ndarray of float64
        Dispersers from patch p that landed in a settle cell of patch p; ``retained[0] = 0``.
    settled_from : (n_patches + 1,) ndarray of float64
        Dispersers from patch p that landed in any settle cell; ``settled_from[0] = 0``.
    """
    d = as_field(dispersers, "dispersers")
    settle = np.ascontiguousarray(settle, dtype=np.bool_)
    labels = np.ascontiguousarray(labels, dtype=np.int32)
    if settle.shape != d.shape or labels.shape != d.shape:
        raise ValueError(f"dispersers {d.shape}, settle {settle.shape} and labels "
                         f"{labels.shape} must have the same shape")
    code = edge_code(edge)
    multinomial_min = MULTINOMIAL_PER_CELL * kernel.conditional.size
    bounds = _row_blocks(d, multinomial_min, kernel.ry)
    if out is None:
        arrivals, stayed = np.empty(d.shape), np.empty(d.shape)
    else:
        arrivals, stayed = out
        for a in out:
            if not (isinstance(a, np.ndarray) and a.dtype == np.float64 and a.shape == d.shape
                    and a.flags.c_contiguous):
                raise ValueError(f"out must be two C-contiguous float64 arrays of shape "
                                 f"{d.shape}")
    retained = np.zeros(n_patches + 1)
    settled_from = np.zeros(n_patches + 1)
    _disperse_stochastic_kernel(d, settle, labels, n_patches, kernel.offsets,
                                kernel.alias_threshold, kernel.alias_index, kernel.conditional,
                                edge_map(d.shape[0], kernel.ry, code),
                                edge_map(d.shape[1], kernel.rx, code), np.uint64(key),
                                multinomial_min, bounds, arrivals, stayed, retained, settled_from)
    return arrivals, stayed, retained, settled_from

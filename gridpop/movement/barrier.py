"""Kernel dispersal across barrier actions.

Barrier cells split the grid into *regions*: 4-neighbour connected groups of the other cells.
The barrier cells themselves form *pieces*: 8-neighbour connected groups of cells with the same
crossing mortality (so two barrier actions of different mortality are different pieces, and so
is the overlap of two barriers, which kills as the two together). Regions and pieces are the
nodes of a small graph, joined where their cells are 4-neighbours. A disperser that jumps from
its region to a cell of another node crossed the barriers on the path between the two, and
survives with the product of their survivals ``1 - crossing_mortality``; the path taken is the
one of highest survival (fewest, least deadly barriers), found by Dijkstra's algorithm on the
costs ``-log(survival)`` (:func:`scipy.sparse.csgraph.dijkstra`). Impassable pieces (mortality
1) are never entered. One barrier between two regions charges exactly its own mortality.
"""

from __future__ import annotations

import math

import numba
import numpy as np
import scipy.sparse
from scipy import ndimage
from scipy.sparse.csgraph import dijkstra

from .. import rng
from .._jit import njit, pjit, prange
from ..rng import YearStreams
from . import NO_RETENTION, Moved, Retention, scratch
from .convolution import as_field, disperse_deterministic, edge_code
from .kernels import Kernel
from .placement import (
    MULTINOMIAL_PER_CELL,
    draw_cell,
    edge_map,
    entry_buffers,
    work_cuts,
)


def crossing_survival(barrier: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Regions, nodes and the survival of a crossing from each region to each node.

    Parameters
    ----------
    barrier : (ny, nx) ndarray of float
        Probability of dying on entering each cell (0 off barriers, 1 = impassable).

    Returns
    -------
    regions : (ny, nx) ndarray of int32
        Region of each cell, 1..R; 0 on barrier cells.
    node : (ny, nx) ndarray of int64
        Node of each cell: its region (1..R), or R + its barrier piece (R+1..R+B).
    survival : (R + 1, R + B + 1) ndarray of float64
        ``survival[r, v]``: probability that a disperser from region r survives the barriers
        on its way to a cell of node v (1 for v = r, 0 where every way is impassable); row and
        column 0 unused.
    """
    regions, n_regions = ndimage.label(barrier == 0)
    pieces = np.zeros(barrier.shape, np.int64)
    piece_survival: list[float] = []
    for value in np.unique(barrier[barrier > 0]):
        lab, n = ndimage.label(barrier == value, structure=np.ones((3, 3)))
        pieces[lab > 0] = lab[lab > 0] + len(piece_survival)
        piece_survival += [1.0 - float(value)] * n
    node = np.where(regions > 0, regions, pieces + n_regions).astype(np.int64)
    n_nodes = n_regions + len(piece_survival)
    node_survival = np.concatenate([np.ones(n_regions + 1), piece_survival])
    with np.errstate(divide="ignore"):
        cost = -np.log(node_survival)  # 0 for regions, inf for impassable pieces
    pairs = np.concatenate([np.stack([node[:, :-1].ravel(), node[:, 1:].ravel()], axis=1),
                            np.stack([node[:-1, :].ravel(), node[1:, :].ravel()], axis=1)])
    pairs = np.unique(pairs[pairs[:, 0] != pairs[:, 1]], axis=0)
    pairs = np.concatenate([pairs, pairs[:, ::-1]])
    passable = np.isfinite(cost[pairs[:, 0]]) & np.isfinite(cost[pairs[:, 1]])
    a, b = pairs[passable, 0], pairs[passable, 1]
    # half of each node's cost on each edge that touches it: a path between two regions costs
    # the sum of the costs of the pieces it crosses; every edge has a positive weight
    weight = 0.5 * (cost[a] + cost[b])
    graph = scipy.sparse.csr_matrix((weight, (a - 1, b - 1)), shape=(n_nodes, n_nodes))
    survival = np.zeros((n_regions + 1, n_nodes + 1))
    if n_regions:
        _, before = dijkstra(graph, indices=np.arange(n_regions), return_predecessors=True)
        for r in range(1, n_regions + 1):
            for v in range(1, n_nodes + 1):
                s, w = 1.0, v - 1
                while w != r - 1 and w >= 0:
                    s *= node_survival[w + 1]
                    w = before[r - 1, w]
                survival[r, v] = s if w == r - 1 else 0.0
    return regions.astype(np.int32), node, survival


class BarrierKernelMover:
    """Moves emigrants with ``kernel`` across the barriers of ``barrier`` (per-cell crossing
    mortality, :attr:`gridpop.actions.Actions.barrier`).

    The dispersers of a cell belong to its group g = (region r, patch p), so the per-patch
    bookkeeping stays exact: a disperser that crosses a barrier and lands in its own patch is
    retained by the patch. In stochastic mode the crossers of a group landing at a cell are
    thinned binomially all together, as whole individuals.
    """

    def __init__(self, kernel: Kernel, edge: str, labels: np.ndarray, n_patches: int,
                 stochastic: bool, barrier: np.ndarray):
        self.kernel, self.edge, self.stochastic = kernel, edge, stochastic
        self.labels, self.n_patches = labels, n_patches
        self.regions, self.node, self.survival = crossing_survival(barrier)
        self.group = self.regions.astype(np.int64) * (n_patches + 1) + labels
        # the binomial table of every crossing survival (a few distinct values), once per run
        q, which = np.unique(self.survival, return_inverse=True)
        self._table_of = which.reshape(self.survival.shape).astype(np.int64)
        self._tables = np.stack([rng.binomial_table(v) for v in q])

    def retention(self, k: np.ndarray) -> Retention:
        return NO_RETENTION

    def move(self, leaving: np.ndarray, k: np.ndarray, streams: YearStreams,
             work: dict[str, np.ndarray]) -> Moved:
        if self.stochastic:
            return self._move_stochastic(leaving, k > 0, streams, work)
        settle = k > 0
        n_p = self.n_patches
        arrivals = np.zeros_like(leaving)
        stayed = np.zeros_like(leaving)
        retained = np.zeros(n_p + 1)
        settled_from = np.zeros(n_p + 1)
        group = self.group
        for g in np.unique(group[leaving > 0]):
            r, p = divmod(int(g), n_p + 1)
            if r == 0:
                continue  # no one disperses from a barrier cell: see build_model
            inside = self.regions == r
            arr, st = disperse_deterministic(np.where(group == g, leaving, 0.0), self.kernel,
                                             self.edge)
            arr = np.where(inside, arr, arr * self.survival[r][self.node])
            arrivals += arr
            stayed += st
            if p > 0:
                landed = np.where(settle, arr, 0.0)
                settled_from[p] += landed.sum()
                retained[p] += landed[self.labels == p].sum()
        return Moved(arrivals, stayed, retained, settled_from)

    def _move_stochastic(self, leaving, settle, streams: YearStreams,
                         work: dict[str, np.ndarray]) -> Moved:
        """Whole individuals: every disperser draws its landing cell as in
        :func:`disperse_stochastic` (same numbers); those of group g = (region r, patch p) that
        land at a cell of another node are thinned there by one binomial of survival
        ``survival[r, node]`` on ``rng.cell_key(barrier key, (g * ny + i) * nx + j)``, as
        :func:`thin` does (see :func:`_across_kernel`)."""
        d = as_field(leaving, "leaving")
        ny, nx = d.shape
        kern = self.kernel
        code = edge_code(self.edge)
        multinomial_min = MULTINOMIAL_PER_CELL * kern.conditional.size
        parallel = _across_kernel.variant(d) is _across_kernel.parallel
        # no more blocks than ny / ry: the halos then hold at most about twice the grid
        blocks = min(BLOCKS_PER_THREAD * numba.get_num_threads(),
                     max(ny // max(kern.ry, 1), 1)) if parallel else 1
        bounds, room = _blocks(d, multinomial_min, blocks)
        top = np.maximum(bounds[:-1] - kern.ry, 0)
        bot = np.minimum(bounds[1:] + kern.ry, ny)
        base = np.concatenate([[0], np.cumsum((bounds[:-1] - top + bot - bounds[1:]) * nx)])
        # kept from year to year, zeros and -1 (empty lists) between calls: the kernel clears
        # what it used
        if "barrier_halo" not in work or work["barrier_halo"].size < base[-1]:
            work["barrier_halo"] = np.zeros(base[-1])
            work["barrier_halo_head"] = np.full(base[-1], -1, np.int64)
        if "barrier_head" not in work:
            work["barrier_head"] = np.full(ny * nx, -1, np.int64)
        start = np.concatenate([[0], np.cumsum(room)])
        arrivals, stayed = scratch(work, "arrivals", d.shape), scratch(work, "stayed", d.shape)
        retained, settled_from = np.zeros(self.n_patches + 1), np.zeros(self.n_patches + 1)
        _across_kernel(d, self.regions, self.node, self.labels,
                       np.ascontiguousarray(settle, np.bool_), self.survival, self._table_of,
                       self._tables, kern.offsets, kern.alias_threshold, kern.alias_index,
                       kern.conditional, edge_map(ny, kern.ry, code), edge_map(nx, kern.rx, code),
                       np.uint64(streams.key(rng.STREAM_DISPERSAL)),
                       np.uint64(streams.key(rng.STREAM_BARRIER)), multinomial_min, bounds, top,
                       bot, base, start, work["barrier_halo"], work["barrier_halo_head"],
                       work["barrier_head"], np.empty((start[-1], 3), np.int64),
                       np.empty(start[-1], np.int64), arrivals, stayed, retained, settled_from)
        return Moved(arrivals, stayed, retained, settled_from)



BLOCKS_PER_THREAD = 1
"""Row blocks of the stochastic barrier mover per numba thread (on a grid that runs the parallel
variant): each block costs a halo of the rows it reaches outside its own."""


def _blocks(d: np.ndarray, multinomial_min: float, blocks: int) -> tuple[np.ndarray, np.ndarray]:
    """Bounds of ``blocks`` row blocks (or fewer) of about equal work, and the room each needs
    for its list entries: one per landing at most, so at most one per disperser and
    ``multinomial_min`` per cell (:func:`draw_cell`)."""
    ny = d.shape[0]
    work, cuts = work_cuts(d, multinomial_min, blocks)
    bounds = np.unique(np.concatenate([[0], cuts[(cuts > 0) & (cuts < ny)], [ny]]))
    return bounds, np.ceil(np.add.reduceat(work, bounds[:-1])).astype(np.int64)


@njit
def _halo_index(y, x, r0, r1, top, nx):
    """Where cell (y, x) is in the halo of the block of rows r0..r1 (the rows it reaches
    above, from ``top``, then below); -1 in the block's own rows."""
    if y < r0:
        return (y - top) * nx + x
    if y >= r1:
        return (r0 - top + y - r1) * nx + x
    return -1


@njit
def _cross_rows(d, regions, labels, settle, offsets, threshold, alias, cond, ymap, xmap, key,
                multinomial_min, r0, r1, top, halo, halo_head, head, pool, free, touched,
                arrivals, stayed, ret):
    """The dispersers of rows r0..r1 off barriers, placed by :func:`draw_cell`; returns how
    many cells it added to ``touched``. Rows r0..r1 of ``arrivals`` and ``stayed`` are zeroed
    first.

    Those landing in their own region r are added to ``arrivals`` in rows r0..r1, in the
    block's ``halo`` elsewhere (:func:`_halo_index`), and to ``stayed``, and per patch of
    origin p to ``ret[p, 0]`` (settled in p) and ``ret[p, 1]`` (settled anywhere). Those
    landing at a cell of another node are counted in the cell's entry of their group g: the
    cell's entries are a list in ``pool`` (rows: next entry or -1, g, count) from the cell's
    ``head`` (flat index, rows r0..r1) or ``halo_head``; new entries are taken from row
    ``free`` on, and a cell whose list was empty is added to ``touched`` (flat index) from
    ``touched[free]`` on."""
    ny, nx = d.shape
    n_p1 = ret.shape[0]
    ry = (ymap.size - ny) // 2
    rx = (xmap.size - nx) // 2
    first = free
    m = 0
    entry, count = entry_buffers(cond)
    for i in range(r0, r1):
        arrivals[i] = 0.0
        stayed[i] = 0.0
    for i in range(r0, r1):
        for j in range(nx):
            r = regions[i, j]
            if r == 0 or not d[i, j] > 0:
                continue  # no one disperses from a barrier cell: see build_model
            p = labels[i, j]
            g = r * n_p1 + p
            n_land = draw_cell(np.int64(d[i, j]), rng.cell_key(key, i * nx + j), cond,
                               threshold, alias, multinomial_min, entry, count)
            for e in range(n_land):
                cnt = count[entry[e]]
                count[entry[e]] = 0
                y = ymap[i + offsets[entry[e], 0] + ry]
                x = xmap[j + offsets[entry[e], 1] + rx]
                if y < 0 or x < 0:
                    continue
                h = _halo_index(y, x, r0, r1, top, nx)
                if regions[y, x] == r:
                    if h < 0:
                        arrivals[y, x] += cnt
                    else:
                        halo[h] += cnt
                    if y == i and x == j:
                        stayed[i, j] += cnt
                    if p > 0 and settle[y, x]:
                        ret[p, 1] += cnt
                        if labels[y, x] == p:
                            ret[p, 0] += cnt
                    continue
                lists, at = (head, y * nx + x) if h < 0 else (halo_head, h)
                k = lists[at]
                while k >= 0 and pool[k, 1] != g:
                    k = pool[k, 0]
                if k < 0:
                    if lists[at] < 0:
                        touched[first + m] = y * nx + x
                        m += 1
                    k = free
                    free += 1
                    pool[k, 0] = lists[at]
                    pool[k, 1] = g
                    pool[k, 2] = 0
                    lists[at] = k
                pool[k, 2] += cnt
    return m


@njit
def _listed(pool, k, g):
    """Count of group g in the list of ``pool`` from entry k (0 when not listed)."""
    while k >= 0:
        if pool[k, 1] == g:
            return pool[k, 2]
        k = pool[k, 0]
    return 0


@njit
def _thin_cell(y, x, c, bounds, top, bot, base, halo_head, head, pool, firsts, node, labels,
               settle, survival, table_of, tables, barrier_key, arrivals, ret):
    """The crossers listed at cell (y, x) of block c's rows, by block c (``head``) and in the
    halos of the others: those of each group g = (r, p), all lists together, thinned by one
    binomial of ``survival[r, node]`` on ``rng.cell_key(barrier_key, (g * ny + y) * nx + x)``,
    the survivors added to ``arrivals`` and ``ret`` (as in :func:`_cross_rows`); the lists
    emptied. ``firsts``: room for a list per block."""
    ny, nx = arrivals.shape
    n_p1 = ret.shape[0]
    firsts[0] = head[y * nx + x]
    head[y * nx + x] = -1
    n = 1
    for o in range(top.size):
        if o != c and top[o] <= y < bot[o]:
            at = base[o] + _halo_index(y, x, bounds[o], bounds[o + 1], top[o], nx)
            firsts[n] = halo_head[at]
            halo_head[at] = -1
            n += 1
    for i in range(n):
        k = firsts[i]
        while k >= 0:
            g = pool[k, 1]
            cnt = pool[k, 2]
            for j in range(i):
                if _listed(pool, firsts[j], g):
                    cnt = 0  # thinned with that list's entry
            if cnt > 0:
                for j in range(i + 1, n):
                    cnt += _listed(pool, firsts[j], g)
                r, p = g // n_p1, g % n_p1
                v = node[y, x]
                q = survival[r, v]
                kept = rng.binomial_with_table(cnt, q, q, tables[table_of[r, v]],
                                               rng.cell_key(barrier_key, (g * ny + y) * nx + x))
                arrivals[y, x] += kept
                if p > 0 and settle[y, x]:
                    ret[p, 1] += kept
                    if labels[y, x] == p:
                        ret[p, 0] += kept
            k = pool[k, 0]


@njit
def _merge_rows(c, bounds, top, bot, base, start, n_touched, touched, halo, halo_head, head,
                pool, node, labels, settle, survival, table_of, tables, barrier_key, arrivals,
                ret):
    """Rows of block c: the other blocks' halos over them added to ``arrivals`` (and cleared),
    and the crossers listed at their cells by any block thinned (:func:`_thin_cell`)."""
    nx = arrivals.shape[1]
    r0, r1 = bounds[c], bounds[c + 1]
    nb = top.size
    for o in range(nb):
        if o == c:
            continue
        for y in range(max(r0, top[o]), min(r1, bot[o])):
            h = _halo_index(y, 0, bounds[o], bounds[o + 1], top[o], nx)
            for x in range(nx):
                arrivals[y, x] += halo[base[o] + h + x]
                halo[base[o] + h + x] = 0.0
    firsts = np.empty(nb, np.int64)
    for o in range(nb):
        for t in range(start[o], start[o] + n_touched[o]):
            y, x = touched[t] // nx, touched[t] % nx
            if r0 <= y < r1:
                _thin_cell(y, x, c, bounds, top, bot, base, halo_head, head, pool, firsts, node,
                           labels, settle, survival, table_of, tables, barrier_key, arrivals,
                           ret)


@pjit(grid="d")
def _across_kernel(d, regions, node, labels, settle, survival, table_of, tables, offsets,
                   threshold, alias, cond, ymap, xmap, key, barrier_key, multinomial_min, bounds,
                   top, bot, base, start, halo, halo_head, head, pool, touched, arrivals, stayed,
                   retained, settled_from):
    """:meth:`BarrierKernelMover._move_stochastic` in row blocks (any number: the result does
    not depend on them). Block b places the sources of rows bounds[b]..bounds[b+1]
    (:func:`_cross_rows`): landings in those rows straight into ``arrivals`` and their lists
    of crossers in ``head``, those in the other rows it reaches, top[b]..bot[b] (within ry
    rows: folding at a reflecting edge does not move a point further from its source), into
    its halo, ``halo[base[b]:base[b + 1]]`` and ``halo_head[...]``; its list entries in
    ``pool`` rows start[b]..start[b + 1], the cells of its new lists in
    ``touched[start[b]:]``. The blocks run in parallel. When all are placed, each block adds
    the others' halos to its rows and thins the crossers listed there (:func:`_merge_rows`),
    the blocks again in parallel. Every sum is of whole numbers (individuals), so exact in any
    order: the result depends neither on the blocks nor on the number of threads."""
    nb = bounds.size - 1
    ret = np.zeros((nb, retained.size, 2))
    n_touched = np.zeros(nb, np.int64)
    for b in prange(nb):
        n_touched[b] = _cross_rows(
            d, regions, labels, settle, offsets, threshold, alias, cond, ymap, xmap, key,
            multinomial_min, bounds[b], bounds[b + 1], top[b], halo[base[b]:base[b + 1]],
            halo_head[base[b]:base[b + 1]], head, pool, start[b], touched, arrivals, stayed,
            ret[b])
    for b in prange(nb):
        _merge_rows(np.int64(b), bounds, top, bot, base, start, n_touched, touched, halo,
                    halo_head, head, pool, node, labels, settle, survival, table_of, tables,
                    barrier_key, arrivals, ret[b])
    for b in range(nb):
        for p in range(retained.size):
            retained[p] += ret[b, p, 0]
            settled_from[p] += ret[b, p, 1]


@pjit(grid="counts")
def _thin_kernel(counts, node, p_node, tables, key, group, out):
    ny, nx = counts.shape
    for i in prange(ny):
        for j in range(nx):
            c = np.int64(counts[i, j])
            v = node[i, j]
            out[i, j] = 0.0 if c <= 0 else rng.binomial_with_table(
                c, p_node[v], p_node[v], tables[v], rng.cell_key(key, (group * ny + i) * nx + j))


def thin(counts, p, key, group: int, *, node=None) -> np.ndarray:
    """Binomial thinning of whole counts: each individual survives with probability ``p``.

    ``p`` is one probability, or with ``node`` ((ny, nx) ints) one per node: cell (i, j) then
    survives with ``p[node[i, j]]``. Cell (i, j) of group ``g`` uses
    ``rng.cell_key(key, (g * ny + i) * nx + j)``, so different groups (e.g. the dispersers of
    different regions) draw independent numbers.
    """
    d = as_field(counts, "counts")
    if node is None:
        node = np.zeros(d.shape, np.int64)
        p = [p]
    p_node = np.asarray(p, np.float64)
    if not np.all((p_node >= 0) & (p_node <= 1)) or not all(map(math.isfinite, p_node)):
        raise ValueError(f"thinning probabilities must be in [0, 1], got {p_node}")
    tables = np.stack([rng.binomial_table(q) for q in p_node])
    out = np.empty_like(d)
    _thin_kernel(d, np.ascontiguousarray(node, np.int64), p_node, tables, np.uint64(key),
                 np.int64(group), out)
    return out

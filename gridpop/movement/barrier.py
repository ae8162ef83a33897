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

import numpy as np
import scipy.sparse
from scipy import ndimage
from scipy.sparse.csgraph import dijkstra

from .. import rng
from .._jit import njit, pjit, prange
from ..rng import YearStreams
from . import NO_RETENTION, Moved, Retention
from .convolution import as_field, disperse_deterministic, edge_code
from .kernels import Kernel
from .placement import (
    MULTINOMIAL_PER_CELL,
    draw_cell,
    edge_map,
    entry_buffers,
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

    Sources are processed by (region, patch) group, so the per-patch bookkeeping stays exact: a
    disperser that crosses a barrier and lands in its own patch is retained by the patch. In
    stochastic mode the crossers are thinned binomially, as whole individuals.
    """

    def __init__(self, kernel: Kernel, edge: str, labels: np.ndarray, n_patches: int,
                 stochastic: bool, barrier: np.ndarray):
        self.kernel, self.edge, self.stochastic = kernel, edge, stochastic
        self.labels, self.n_patches = labels, n_patches
        self.regions, self.node, self.survival = crossing_survival(barrier)
        # group g = (region r, patch p) of every cell, and the cells off the barrier sorted by
        # group (then by cell): fixed for the run, so not worked out again every year
        self.group = self.regions.astype(np.int64) * (n_patches + 1) + labels
        sources = np.flatnonzero(self.regions.ravel() > 0)
        self._by_group = sources[np.argsort(self.group.ravel()[sources], kind="stable")]
        self._group_of = self.group.ravel()[self._by_group]

    def retention(self, k: np.ndarray) -> Retention:
        return NO_RETENTION

    def move(self, leaving: np.ndarray, k: np.ndarray, streams: YearStreams,
             work: dict[str, np.ndarray]) -> Moved:
        if self.stochastic:
            return self._move_stochastic(leaving, k > 0, streams)
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

    def _move_stochastic(self, leaving, settle, streams: YearStreams) -> Moved:
        """Whole individuals: every disperser draws its landing cell as in
        :func:`disperse_stochastic` (same numbers); those of group g = (region r, patch p) that
        land at a cell of another node are thinned there by one binomial of survival
        ``survival[r, node]`` on ``rng.cell_key(barrier key, (g * ny + i) * nx + j)``, as
        :func:`thin` does. One pass over the sources, group after group."""
        d = as_field(leaving, "leaving")
        ny, nx = d.shape
        n_p = self.n_patches
        cells, gids, gptr = _sources(d.ravel(), self._by_group, self._group_of)
        kern = self.kernel
        code = edge_code(self.edge)
        arrivals, stayed = np.zeros(d.shape), np.zeros(d.shape)
        retained, settled_from = np.zeros(n_p + 1), np.zeros(n_p + 1)
        _across_kernel(d, cells, gptr, gids,
                       self.regions, self.node, self.labels,
                       np.ascontiguousarray(settle, np.bool_), self.survival, kern.offsets,
                       kern.alias_threshold, kern.alias_index, kern.conditional,
                       edge_map(ny, kern.ry, code), edge_map(nx, kern.rx, code),
                       np.uint64(streams.key(rng.STREAM_DISPERSAL)),
                       np.uint64(streams.key(rng.STREAM_BARRIER)),
                       MULTINOMIAL_PER_CELL * kern.conditional.size, arrivals, stayed, retained,
                       settled_from)
        return Moved(arrivals, stayed, retained, settled_from)


@njit
def _sources(d, by_group, group_of):
    """The cells of ``by_group`` (sorted by group, then cell) with ``d > 0``, the groups
    ``gids`` they belong to and ``gptr``: group ``gids[b]``'s cells are
    ``cells[gptr[b]:gptr[b + 1]]``."""
    cells = np.empty(by_group.size, np.int64)
    gids = np.empty(by_group.size, np.int64)
    gptr = np.empty(by_group.size + 1, np.int64)
    m = b = 0
    for idx in range(by_group.size):
        c = by_group[idx]
        if d[c] > 0:
            g = group_of[idx]
            if b == 0 or gids[b - 1] != g:
                gids[b] = g
                gptr[b] = m
                b += 1
            cells[m] = c
            m += 1
    gptr[b] = m
    return cells[:m], gids[:b], gptr[:b + 1]


@njit
def _across_kernel(d, cells, gptr, gids, regions, node, labels, settle, survival, offsets,
                   threshold, alias, cond, ymap, xmap, key, barrier_key, multinomial_min,
                   arrivals, stayed, retained, settled_from):
    """:meth:`BarrierKernelMover._move_stochastic`: the sources ``cells[gptr[b]:gptr[b + 1]]``
    (flat indices) of group ``gids[b]``, group after group. Landings in the group's region
    are added to ``arrivals`` at once; the others are summed per cell in ``crossed`` (the
    cells listed in ``touched``) and thinned when the group is done."""
    ny, nx = d.shape
    n_p1 = retained.size
    ry = (ymap.size - ny) // 2
    rx = (xmap.size - nx) // 2
    crossed = np.zeros(ny * nx, np.int64)
    touched = np.empty(ny * nx, np.int64)
    entry, count = entry_buffers(cond)
    n_nodes = survival.shape[1]
    tables = np.empty((n_nodes, rng.BERNOULLI_MAX + 1, rng.BERNOULLI_MAX))
    for b in range(gids.size):
        g = gids[b]
        r, p = g // n_p1, g % n_p1
        for v in range(n_nodes):
            tables[v] = rng.binomial_table(survival[r, v])
        m = 0
        for idx in range(gptr[b], gptr[b + 1]):
            c = cells[idx]
            i, j = c // nx, c % nx
            n_land = draw_cell(np.int64(d[i, j]), rng.cell_key(key, c), cond, threshold, alias,
                               multinomial_min, entry, count)
            for e in range(n_land):
                cnt = count[entry[e]]
                count[entry[e]] = 0
                y = ymap[i + offsets[entry[e], 0] + ry]
                x = xmap[j + offsets[entry[e], 1] + rx]
                if y < 0 or x < 0:
                    continue
                if regions[y, x] == r:
                    arrivals[y, x] += cnt
                    if y == i and x == j:
                        stayed[i, j] += cnt
                    if p > 0 and settle[y, x]:
                        settled_from[p] += cnt
                        if labels[y, x] == p:
                            retained[p] += cnt
                else:
                    dest = y * nx + x
                    if crossed[dest] == 0:
                        touched[m] = dest
                        m += 1
                    crossed[dest] += cnt
        for t in range(m):
            dest = touched[t]
            y, x = dest // nx, dest % nx
            v = node[y, x]
            q = survival[r, v]
            kept = rng.binomial_with_table(crossed[dest], q, q, tables[v],
                                           rng.cell_key(barrier_key, (g * ny + y) * nx + x))
            crossed[dest] = 0
            arrivals[y, x] += kept
            if p > 0 and settle[y, x]:
                settled_from[p] += kept
                if labels[y, x] == p:
                    retained[p] += kept


@pjit
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

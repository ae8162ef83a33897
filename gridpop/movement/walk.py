"""Dispersal by a walk over a permeability surface: the resistance engine.

A disperser does not jump: it walks from cell to cell, so roads, rivers and open farmland stop or
kill it and hedgerows lead it. The engine mirrors the kernel engine of :mod:`gridpop.movement`
(``dispersers -> arrivals, stayed, retained``) and adds a fourth output, the flow map ``visits``.

Surfaces
--------
*Permeability* ``P`` (float64, ``(ny, nx)``) is the ease of entering a cell: ``P = 1 / R`` from a
resistance raster ``R`` (:func:`permeability_from_resistance`; ``R = inf``, NaN or outside the grid
= impassable, ``P = 0``). Without a resistance raster, ``R`` can be derived from habitat suitability
``s`` (0..1) by ``R = 1 + (r_max - 1) (1 - s)^shape`` (:func:`resistance_from_suitability`): 1 in
the best habitat, ``r_max`` in the worst, ``shape > 1`` keeps resistance low in middling habitat.
*Quality* ``q`` (0..1, NaN = 0) is the habitat quality a walker uses to decide to settle.

One walk
--------
A disperser leaves its cell and takes at least one and at most ``walk_length`` steps. Each step:

1. **Direction.** It steps to one of its 8 neighbours ``b`` with probability proportional to
   ``P(b) / len`` (``len`` = 1 for the 4 orthogonal, ``sqrt(2)`` for the 4 diagonal neighbours),
   times ``exp(kappa (cos(theta) - 1))`` (that is, proportional to ``exp(kappa cos(theta))``)
   where ``theta`` is the turn from its previous step (``kappa = heading_bias``; 0 = uncorrelated;
   the first step has no previous direction). A cell with ``P = 0`` is never entered, and a
   diagonal step is refused when both orthogonal cells it passes between are impassable, so a
   barrier drawn as a diagonal line of cells also holds. A walker with no enterable neighbour is
   lost where it stands.
2. **Mortality.** It dies on entering cell ``b`` with probability
   ``1 - exp(-death_per_resistance * R(b) * len)``: the hazard is the cost distance of the step
   (resistance times length), 0 when the parameter is 0.
3. **Settlement.** If alive, it settles in ``b`` with probability ``q(b) ** settle_exponent``;
   never in the matrix (``q = 0``).

A walker still moving after ``walk_length`` steps dies. Lost walkers (mortality, trapped, out of
steps) are the difference ``sum(dispersers) - sum(arrivals)``; ``lost``, when given, receives where
they were lost. ``visits`` counts entries into each cell (a walker that dies on entering a cell has
visited it; the start cell is not visited by leaving it).

Reversibility
-------------
Without heading_bias, the step weight ``P(b) / len`` makes the walk a reversible Markov chain: with
the symmetric edge conductance ``c_ab = P(a) P(b) / len_ab`` the transition is
``c_ab / sum_b c_ab`` (``P(a)`` cancels), so the stationary measure is ``sum_b c_ab`` and the walk
is the random walk of an electrical network with those conductances (Doyle and Snell 1984). Escape
probabilities, hitting times and commute times are then set by effective resistances
(Chandra et al. 1997), as in circuit-theory connectivity (McRae 2006).

Modes
-----
*Stochastic* (:func:`disperse_walk_stochastic`): whole individuals. Walker ``w`` of cell ``(i, j)``
draws its numbers from ``uniform(cell_key(cell_key(key, i * nx + j), w), c)`` with counters
``c = 3t, 3t + 1, 3t + 2`` for the direction, mortality and settlement of step ``t``, so a walk does
not depend on which thread runs it. Source rows run in a ``prange``; each thread adds into its own
buffers, which are summed afterwards. All outputs are whole numbers, whose float64 sums are exact in
any order, so results are bit-identical for any number of threads. ``stayed`` and ``retained`` are
exact.

*Deterministic* (:func:`disperse_walk_deterministic`): the expected densities of walkers still
moving are propagated one step at a time (a Markov-chain redistribution), the exact expectation of
the stochastic walk. With heading_bias the state is (cell, direction of the last step), 8 layers.
Each target cell gathers from its neighbours (no write conflicts, same floating-point order for
any thread count). The origin of a walker is not tracked: ``stayed = 0`` and ``retained = 0``, that
is, a walker that settles back in its own cell or patch counts as an emigrant and an immigrant
(:func:`patch_connectivity` gives the patch-to-patch probabilities).

Cost: the deterministic engine gathers 8 neighbours per cell and step (8 x 8 with heading_bias) and
keeps about 10 float64 grids (33 with heading_bias); the stochastic one costs per walker step and
keeps 3 float64 grids per numba thread. ``benchmarks/bench_walk.py`` measures both.

References
----------
Doyle, P. G., and J. L. Snell. 1984. Random Walks and Electric Networks. Mathematical Association
of America, Washington DC (from memory).

Chandra, A. K., P. Raghavan, W. L. Ruzzo, R. Smolensky and P. Tiwari. 1997. The electrical
resistance of a graph captures its commute and cover times. Computational Complexity 6:312-340
(from memory).

McRae, B. H. 2006. Isolation by resistance. Evolution 60:1551-1561.

Kareiva, P. M., and N. Shigesada. 1983. Analyzing insect movement as a correlated random walk.
Oecologia 56:234-238 (from memory).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import NamedTuple

import numba
import numpy as np
from scipy import ndimage

from .. import rng
from .._jit import njit, pjit, prange
from ..rng import YearStreams, cell_key, uniform
from . import NO_RETENTION, Moved, Retention

# The 8 neighbour directions (row step, column step) and their lengths in cells.
_DY = np.array([-1, -1, -1, 0, 0, 1, 1, 1], dtype=np.int64)
_DX = np.array([-1, 0, 1, -1, 1, -1, 0, 1], dtype=np.int64)
_LEN = np.sqrt(_DY**2 + _DX**2).astype(np.float64)
_INV_SQRT2 = 1.0 / math.sqrt(2.0)

@dataclass(frozen=True)
class WalkParams:
    """Parameters of the walk (see the module docstring for their meaning).

    Parameters
    ----------
    walk_length : int
        Largest number of steps of one walk (>= 1).
    death_per_resistance : float
        Hazard per unit of cost distance (resistance x step length); 0 = no mortality.
    settle_exponent : float
        Settlement probability is ``quality ** settle_exponent`` (> 0).
    heading_bias : float
        Concentration ``kappa`` of the turning angle, >= 0; 0 = uncorrelated walk.
    """

    walk_length: int
    death_per_resistance: float = 0.0
    settle_exponent: float = 1.0
    heading_bias: float = 0.0

    def __post_init__(self):
        checks = (
            ("walk_length", isinstance(self.walk_length, (int, np.integer))
             and not isinstance(self.walk_length, bool) and self.walk_length >= 1,
             "an integer >= 1"),
            ("death_per_resistance", _finite(self.death_per_resistance)
             and self.death_per_resistance >= 0, "a finite number >= 0"),
            ("settle_exponent", _finite(self.settle_exponent) and self.settle_exponent > 0,
             "a finite number > 0"),
            ("heading_bias", _finite(self.heading_bias) and self.heading_bias >= 0,
             "a finite number >= 0"),
        )
        for name, ok, allowed in checks:
            if not ok:
                raise ValueError(f"{name} must be {allowed}, got {getattr(self, name)!r}")


def _finite(x) -> bool:
    return isinstance(x, (int, float, np.integer, np.floating)) and math.isfinite(x)


def permeability_from_resistance(r: np.ndarray) -> np.ndarray:
    """Permeability ``P = 1 / R`` of a resistance raster.

    Parameters
    ----------
    r : (ny, nx) ndarray
        Resistance, > 0; ``inf`` or NaN mark impassable cells.

    Returns
    -------
    (ny, nx) float64 ndarray
        ``1 / r``, 0 where ``r`` is infinite or NaN.
    """
    r = np.asarray(r, dtype=np.float64)
    bad = ~(np.isnan(r) | (r > 0))
    if bad.any():
        raise ValueError(f"resistance: values must be > 0 (inf or NaN = impassable), got "
                             f"{r[bad].min():g} in {int(bad.sum())} cell(s)")
    with np.errstate(divide="ignore"):
        p = 1.0 / r
    p[np.isnan(p)] = 0.0
    return p


def resistance_from_suitability(s: np.ndarray, r_max: float, shape: float) -> np.ndarray:
    """Resistance derived from habitat suitability: ``R = 1 + (r_max - 1) (1 - s) ** shape``.

    Parameters
    ----------
    s : (ny, nx) ndarray
        Suitability in [0, 1]; NaN (outside the study area) stays NaN, that is impassable.
    r_max : float
        Resistance of the least suitable habitat (``s = 0``), >= 1.
    shape : float
        Exponent, > 0; above 1 resistance stays low until suitability is poor.

    Returns
    -------
    (ny, nx) float64 ndarray
        Resistance, 1 where ``s = 1``.
    """
    if not (_finite(r_max) and r_max >= 1):
        raise ValueError(f"resistance_max must be a finite number >= 1, got "
                            f"{r_max!r}")
    if not (_finite(shape) and shape > 0):
        raise ValueError(f"resistance_shape must be a finite number > 0, got "
                            f"{shape!r}")
    s = np.asarray(s, dtype=np.float64)
    bad = ~(np.isnan(s) | ((s >= 0) & (s <= 1)))
    if bad.any():
        raise ValueError(f"suitability: values must be in [0, 1] or NaN, got "
                             f"{s[bad][0]:g} in {int(bad.sum())} cell(s)")
    return 1.0 + (r_max - 1.0) * (1.0 - s) ** shape


class WalkSurfaces(NamedTuple):
    """Per-cell arrays the kernels read, derived once from the inputs."""

    perm: np.ndarray  # permeability, 0 = impassable
    settle: np.ndarray  # settlement probability q ** settle_exponent
    surv1: np.ndarray  # survival of an orthogonal step into the cell
    surv2: np.ndarray  # survival of a diagonal step into the cell

    def crop(self, ys: slice, xs: slice) -> WalkSurfaces:
        return WalkSurfaces(*(np.ascontiguousarray(a[ys, xs]) for a in self))


def walk_surfaces(permeability, quality, params: WalkParams, entry_survival=None) -> WalkSurfaces:
    perm = np.array(permeability, dtype=np.float64)
    if perm.ndim != 2:
        raise ValueError(f"permeability must be 2-D, got shape {perm.shape}")
    perm[np.isnan(perm)] = 0.0
    bad = ~(np.isfinite(perm) & (perm >= 0))
    if bad.any():
        raise ValueError(f"permeability: values must be finite and >= 0 (0 or NaN = "
                             f"impassable), got {perm[bad][0]:g} in {int(bad.sum())} cell(s)")
    q = np.array(quality, dtype=np.float64)
    check_shape("quality", q, perm.shape)
    q[np.isnan(q)] = 0.0
    bad = ~((q >= 0) & (q <= 1))
    if bad.any():
        raise ValueError(f"habitat quality: values must be in [0, 1] or NaN, got "
                             f"{q[bad][0]:g} in {int(bad.sum())} cell(s)")
    settle = np.where(q > 0, q, 0.0) ** params.settle_exponent
    resist = np.divide(1.0, perm, out=np.zeros_like(perm), where=perm > 0)
    mu = params.death_per_resistance
    surv1, surv2 = np.exp(-mu * resist), np.exp(-mu * math.sqrt(2.0) * resist)
    if entry_survival is not None:
        surv1 *= entry_survival
        surv2 *= entry_survival
    return WalkSurfaces(perm, settle, surv1, surv2)


def turn_table(heading_bias: float) -> np.ndarray:
    """Turning weights ``(rows, 8)``: row 0 = no previous step (all 1); with heading_bias, row
    ``d + 1`` = previous step in direction ``d``, weight ``exp(kappa (cos(turn) - 1))``."""
    if heading_bias == 0.0:
        return np.ones((1, 8))
    cos = (np.outer(_DY, _DY) + np.outer(_DX, _DX)) / np.outer(_LEN, _LEN)
    return np.vstack([np.ones((1, 8)), np.exp(heading_bias * (cos - 1.0))])


def check_shape(name: str, a: np.ndarray, shape: tuple[int, ...]) -> None:
    if a.shape != shape:
        raise ValueError(f"{name} has shape {a.shape}, expected {shape}")


def _check_dispersers(dispersers, shape, whole: bool) -> np.ndarray:
    d = np.ascontiguousarray(dispersers, dtype=np.float64)
    check_shape("dispersers", d, shape)
    if not (np.isfinite(d).all() and (d >= 0).all()):
        raise ValueError("dispersers must be finite and >= 0")
    if whole and not (d == np.floor(d)).all():
        raise ValueError("dispersers must be whole numbers in stochastic mode")
    return d


def check_labels(labels, n_patches: int, shape) -> np.ndarray:
    lab = np.ascontiguousarray(labels, dtype=np.int32)
    check_shape("labels", lab, shape)
    if lab.size and (lab.min() < 0 or lab.max() > n_patches):
        raise ValueError(f"labels must be in 0..{n_patches}, got {lab.min()}..{lab.max()}")
    return lab


# --------------------------------------------------------------------------- numba kernels


@njit
def _step_weight(perm, y, x, k):
    """Unnormalised weight ``P(target) / len`` of a step from (y, x) in direction k."""
    ny, nx = perm.shape
    ty = y + _DY[k]
    tx = x + _DX[k]
    if ty < 0 or ty >= ny or tx < 0 or tx >= nx:
        return 0.0
    p = perm[ty, tx]
    if p <= 0.0:
        return 0.0
    if _DY[k] != 0 and _DX[k] != 0:
        if perm[ty, x] <= 0.0 and perm[y, tx] <= 0.0:
            return 0.0
        return p * _INV_SQRT2
    return p


@njit
def _norm(perm, y, x, turn, row):
    z = 0.0
    for k in range(8):
        z += _step_weight(perm, y, x, k) * turn[row, k]
    return z


@njit
def _pick(perm, y, x, turn, row, target):
    """Direction whose cumulative weight first exceeds ``target`` (in [0, total))."""
    acc = 0.0
    last = -1
    for k in range(8):
        w = _step_weight(perm, y, x, k) * turn[row, k]
        if w > 0.0:
            acc += w
            last = k
            if target < acc:
                return k
    return last  # target rounded up to the total


@pjit(grid="dispersers")
def _walk_stochastic(dispersers, perm, settle, surv1, surv2, labels, turn, walk_length, mortal,
                     key, arrivals, visits, lost, retained, settled_from, stayed):
    ny, nx = perm.shape
    persist = turn.shape[0] > 1
    for i in prange(ny):
        tid = numba.get_thread_id()
        for j in range(nx):
            n = np.int64(dispersers[i, j])
            if n == 0:
                continue
            ck = cell_key(key, i * nx + j)
            home = labels[i, j]
            for w in range(n):
                wk = cell_key(ck, w)
                y = np.int64(i)
                x = np.int64(j)
                row = np.int64(0)  # typed: a literal 0 would compile _norm and _pick again
                settled = False
                for t in range(walk_length):
                    z = _norm(perm, y, x, turn, row)
                    if z <= 0.0:
                        break
                    k = _pick(perm, y, x, turn, row, uniform(wk, 3 * t) * z)
                    y += _DY[k]
                    x += _DX[k]
                    visits[tid, y, x] += 1.0
                    if mortal:
                        sv = surv2[y, x] if _DY[k] != 0 and _DX[k] != 0 else surv1[y, x]
                        if uniform(wk, 3 * t + 1) >= sv:
                            break
                    s = settle[y, x]
                    if s > 0.0 and uniform(wk, 3 * t + 2) < s:
                        settled = True
                        break
                    if persist:
                        row = k + 1
                if settled:
                    arrivals[tid, y, x] += 1.0
                    if y == i and x == j:
                        stayed[i, j] += 1.0
                    if home > 0:
                        settled_from[tid, home] += 1.0
                        if labels[y, x] == home:
                            retained[tid, home] += 1.0
                else:
                    lost[tid, y, x] += 1.0


@pjit(grid="perm")
def _inv_norm(perm, turn, out):
    """``out[i, j, r] = 1 / sum_k weight_k turn[r, k]``, 0 where no neighbour can be entered."""
    ny, nx = perm.shape
    for i in prange(ny):
        for j in range(nx):
            for r in range(turn.shape[0]):
                z = _norm(perm, i, j, turn, r)
                out[i, j, r] = 1.0 / z if z > 0.0 else 0.0


@pjit(grid="dispersers")
def _det_start(dispersers, invz, g, lost):
    """Scaled start densities ``g = dispersers / norm``; trapped dispersers are lost."""
    ny, nx = dispersers.shape
    for i in prange(ny):
        for j in range(nx):
            d = dispersers[i, j]
            g[i, j, 0] = d * invz[i, j, 0]
            if invz[i, j, 0] == 0.0:
                lost[i, j] += d


@pjit(grid="g")
def _det_step(g, perm, settle, surv1, surv2, turn, invz, last, g_next, arrivals, visits,
              lost, box):
    """One step of the expected walk, over the cells ``box = (y0, y1, x0, x1)`` (rows
    ``y0:y1``, columns ``x0:x1``): those a walker can have reached by the end of the step.

    ``g[a, l]`` holds the density of moving walkers of cell a in state layer ``l`` divided by the
    normaliser of their turn row ``r(l)``, so the flow into cell c from neighbour a = c - d_k is
    ``weight_k(a) * sum_l g[a, l] * turn[r(l), k]``; ``r(l) = l + 1`` for the 8 direction layers,
    0 for a single layer (no heading_bias, or before the first step). Each target cell gathers its
    inflow, removes the dead and the settled, and stores its own scaled density in ``g_next``: one
    layer per arrival direction with heading_bias, a single layer without. Outside ``box``,
    ``g`` and ``g_next`` hold zeros.
    """
    ny, nx = perm.shape
    nl = g.shape[2]
    row0 = 1 if nl == 8 else 0
    persist = turn.shape[0] > 1
    y0, y1, x0, x1 = box
    for i0 in prange(y1 - y0):
        i = y0 + np.int64(i0)
        for j in range(x0, x1):
            for o in range(g_next.shape[2]):
                g_next[i, j, o] = 0.0
            pc = perm[i, j]
            if pc <= 0.0:
                continue
            s = settle[i, j]
            sv1 = surv1[i, j]
            sv2 = surv2[i, j]
            seen = 0.0
            dead = 0.0
            arrived = 0.0
            acc = 0.0
            for k in range(8):
                ay = i - _DY[k]
                ax = j - _DX[k]
                if ay < 0 or ay >= ny or ax < 0 or ax >= nx:
                    continue
                diagonal = _DY[k] != 0 and _DX[k] != 0
                if diagonal and perm[i, ax] <= 0.0 and perm[ay, j] <= 0.0:
                    continue  # no corner cutting (as in _step_weight)
                f = 0.0
                for layer in range(nl):
                    f += g[ay, ax, layer] * turn[row0 + layer, k]
                if f == 0.0:
                    continue
                f *= pc * _INV_SQRT2 if diagonal else pc
                seen += f
                alive = f * (sv2 if diagonal else sv1)
                settled = alive * s
                arrived += settled
                dead += f - alive
                moving = alive - settled
                if persist:
                    if last or invz[i, j, k + 1] == 0.0:
                        dead += moving
                    else:
                        g_next[i, j, k] = moving * invz[i, j, k + 1]
                else:
                    acc += moving
            if not persist:
                if last or invz[i, j, 0] == 0.0:
                    dead += acc
                else:
                    g_next[i, j, 0] = acc * invz[i, j, 0]
            visits[i, j] += seen
            arrivals[i, j] += arrived
            lost[i, j] += dead


# --------------------------------------------------------------------------- wrappers


def propagate(dispersers: np.ndarray, surf: WalkSurfaces, turn: np.ndarray, walk_length: int):
    """Expected walk of ``dispersers``: (arrivals, visits, lost) maps.

    Step t sweeps only the cells within t + 1 cells of the dispersers' bounding box, the
    farthest a walker can be; elsewhere every density is 0, so the maps are those of a sweep
    of the whole grid.
    """
    shape = dispersers.shape
    layers = 8 if turn.shape[0] > 1 else 1
    invz = np.empty(shape + (turn.shape[0],))
    _inv_norm(surf.perm, turn, invz)
    arrivals, visits, lost = np.zeros(shape), np.zeros(shape), np.zeros(shape)
    g: np.ndarray = np.empty(shape + (1,))  # no direction before the first step
    _det_start(dispersers, invz, g, lost)
    g_next = np.zeros(shape + (layers,))
    rows, cols = np.nonzero(dispersers.any(axis=1))[0], np.nonzero(dispersers.any(axis=0))[0]
    if rows.size == 0:
        return arrivals, visits, lost
    for t in range(walk_length):
        box = (max(int(rows[0]) - t - 1, 0), min(int(rows[-1]) + t + 2, shape[0]),
               max(int(cols[0]) - t - 1, 0), min(int(cols[-1]) + t + 2, shape[1]))
        _det_step(g, surf.perm, surf.settle, surf.surv1, surf.surv2, turn, invz,
                  t == walk_length - 1, g_next, arrivals, visits, lost, box)
        if g.shape[-1] != layers:
            g = np.zeros_like(g_next)
        g, g_next = g_next, g
    return arrivals, visits, lost


def disperse_walk_deterministic(dispersers, permeability, quality, labels, n_patches: int,
                                params: WalkParams, lost: np.ndarray | None = None, *,
                                entry_survival=None) -> Moved:
    """Expected redistribution of dispersers by the walk (Markov-chain propagation).

    Parameters
    ----------
    dispersers : (ny, nx) float64 ndarray
        Expected number leaving each cell.
    permeability : (ny, nx) ndarray
        ``P >= 0``, 0 or NaN = impassable.
    quality : (ny, nx) ndarray
        Habitat quality in [0, 1] (NaN = 0) driving settlement.
    labels : (ny, nx) int32 ndarray
        Patch labels, 0 = no patch.
    n_patches : int
        Number of patches.
    params : WalkParams
    lost : (ny, nx) float64 ndarray, optional
        If given, the expected number lost in each cell (died, trapped or out of steps) is added.
    entry_survival : (ny, nx) ndarray, optional
        Extra probability of surviving the entry into each cell (barriers crossed with a
        mortality); default 1.

    Returns
    -------
    Moved
        ``stayed`` is zero: cell origins are not tracked in this mode (see the module
        docstring). ``retained`` and ``settled_from`` are exact: each patch's dispersers are also
        propagated on their own, on the patch's bounding box widened by ``walk_length + 1``.
    """
    surf = walk_surfaces(permeability, quality, params, entry_survival)
    d = _check_dispersers(dispersers, surf.perm.shape, whole=False)
    lab = check_labels(labels, n_patches, surf.perm.shape)
    turn = turn_table(params.heading_bias)
    arrivals, visits, lost_map = propagate(d, surf, turn, params.walk_length)
    if lost is not None:
        lost += lost_map
    retained, settled_from = np.zeros(n_patches + 1), np.zeros(n_patches + 1)
    for p, ys, xs in patch_windows(lab, n_patches, params.walk_length + 1):
        start = np.where(lab[ys, xs] == p, d[ys, xs], 0.0)
        if start.any():
            arr, _, _ = propagate(start, surf.crop(ys, xs), turn, params.walk_length)
            settled_from[p] = arr.sum()
            retained[p] = arr[lab[ys, xs] == p].sum()
    return Moved(arrivals, np.zeros_like(arrivals), retained, settled_from, visits)


def patch_windows(lab: np.ndarray, n_patches: int, margin: int):
    """(patch, row slice, column slice): each patch's bounding box widened by ``margin``."""
    ny, nx = lab.shape
    for p, box in enumerate(ndimage.find_objects(lab, max_label=n_patches), start=1):
        if box is not None:
            yield (p, slice(max(box[0].start - margin, 0), min(box[0].stop + margin, ny)),
                   slice(max(box[1].start - margin, 0), min(box[1].stop + margin, nx)))


def disperse_walk_stochastic(dispersers, permeability, quality, labels, n_patches: int,
                             params: WalkParams, key, lost: np.ndarray | None = None, *,
                             entry_survival=None) -> Moved:
    """Move whole dispersers, each on its own walk.

    Parameters
    ----------
    dispersers : (ny, nx) float64 ndarray
        Whole number of individuals leaving each cell.
    permeability, quality, labels, n_patches, params, entry_survival
        As in :func:`disperse_walk_deterministic`.
    key : uint64
        Year key of the walk, ``rng.year_key(seed, replicate, year, rng.STREAM_WALK)``.
    lost : (ny, nx) float64 ndarray, optional
        If given, the number lost in each cell (died, trapped or out of steps) is added.

    Returns
    -------
    Moved
        All fields exact whole numbers.
    """
    surf = walk_surfaces(permeability, quality, params, entry_survival)
    shape = surf.perm.shape
    d = _check_dispersers(dispersers, shape, whole=True)
    lab = check_labels(labels, n_patches, shape)
    nt = numba.get_num_threads()
    arrivals, visits, lost_t = (np.zeros((nt,) + shape) for _ in range(3))
    retained, settled_from = np.zeros((nt, n_patches + 1)), np.zeros((nt, n_patches + 1))
    stayed = np.zeros(shape)
    mortal = params.death_per_resistance > 0 or entry_survival is not None
    _walk_stochastic(d, surf.perm, surf.settle, surf.surv1, surf.surv2, lab,
                     turn_table(params.heading_bias), int(params.walk_length), mortal,
                     np.uint64(key), arrivals, visits, lost_t, retained, settled_from, stayed)
    if lost is not None:
        lost += lost_t.sum(axis=0)
    return Moved(arrivals.sum(axis=0), stayed, retained.sum(axis=0),
                      settled_from.sum(axis=0), visits.sum(axis=0))


@dataclass(frozen=True, eq=False)
class Walk:
    """The walk engine as a mover (:class:`gridpop.movement.Mover`).

    Attributes
    ----------
    permeability : (ny, nx) float64 ndarray
        With barriers that cannot be crossed already set to 0 (year 0 when it changes).
    entry_survival : (ny, nx) float64 ndarray or None
        Survival of entering barrier cells that can be crossed with a mortality.
    full_capacity : float
        Capacity of a cell at suitability 1: habitat quality is ``K / full_capacity``
        (clipped to 0..1), so walkers never settle where the capacity of the year is 0.
    params : WalkParams
    labels : (ny, nx) int32 ndarray
        Patch labels, 0 = no patch; ``n_patches`` patches.
    stochastic : bool
        Whole walkers (each on its own walk) or expected numbers.
    by_year : callable or None
        ``by_year(year)``: the permeability of a year when resistance changes over time.
    """

    permeability: np.ndarray
    entry_survival: np.ndarray | None
    full_capacity: float
    params: WalkParams
    labels: np.ndarray
    n_patches: int
    stochastic: bool
    by_year: Callable[[int], np.ndarray] | None = None  # permeability of a year, if it changes

    def quality(self, k: np.ndarray) -> np.ndarray:
        return np.clip(k / self.full_capacity, 0.0, 1.0) if self.full_capacity > 0 \
            else np.zeros_like(k)

    def retention(self, k: np.ndarray) -> Retention:
        return NO_RETENTION

    def move(self, leaving: np.ndarray, k: np.ndarray, streams: YearStreams,
             work: dict[str, np.ndarray]) -> Moved:
        q = self.quality(k)
        perm = self.permeability if self.by_year is None else self.by_year(streams.year)
        if self.stochastic:
            return disperse_walk_stochastic(leaving, perm, q, self.labels,
                                            self.n_patches, self.params,
                                            streams.key(rng.STREAM_WALK),
                                            entry_survival=self.entry_survival)
        return disperse_walk_deterministic(leaving, perm, q, self.labels,
                                           self.n_patches, self.params,
                                           entry_survival=self.entry_survival)

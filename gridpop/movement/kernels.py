"""Dispersal: how many individuals leave their cell, and where they land.

A kernel gives the probability that a disperser leaving the centre of a cell lands in each cell
of a stencil around it. The weights are *cell-integrated*: the kernel's density integrated over
each destination cell (not sampled at the cell centre, which biases the displacement distance on
coarse grids), truncated at a maximum distance and renormalised to sum 1.

Two engines move dispersers with a kernel:

- :func:`disperse_deterministic` moves expected numbers: a convolution of the disperser field
  with the kernel, by a direct stencil (small radius) or by FFT (large radius).
- :func:`disperse_stochastic` moves whole individuals: each draws its own destination, so
  individuals are conserved exactly.

Grid edges: *absorbing* (what lands off the grid is lost) or *reflecting* (a destination off the
grid is mirrored back across the grid boundary, repeatedly if the kernel reaches further than the
grid is wide; mass is conserved).

How many leave: :func:`leaving_deterministic` and :func:`leaving_stochastic`, a fraction
``fraction * min(1, N / K) ** density_dependence`` of each cell's individuals.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numba
import numpy as np
import scipy.fft as sfft
from scipy import ndimage
from scipy.special import erf, lambertw, ndtr

from . import rng
from ._jit import njit, pjit, prange
from .errors import ScenarioError, where

KERNELS = {"gaussian": 0, "exponential": 1, "2dt": 2}
"""Kernel shapes and their integer codes (keys equal :data:`gridpop.scenario.KERNELS`)."""

EDGES = {"absorbing": 0, "reflecting": 1}
"""Grid edge behaviours and their integer codes (keys equal :data:`gridpop.scenario.EDGES`)."""

TAIL_MASS = 1e-6
"""Default truncation: the distance at which the kernel's distance CDF reaches 1 - TAIL_MASS."""

TWODT_CAP_MEANS = 50.0
"""Cap of the default 2dt truncation, in mean distances. The 2dt tail is so fat that its 1 - 1e-6
distance is 100 (p = 1.5) to 600 (p = 1) mean distances; at 50 means the mass beyond is 8e-6
(p = 1.5) or 1.6e-4 (p = 1), and it is redistributed over the stencil by the renormalisation."""

MIN_MEAN_CELLS = 0.1
"""Smallest mean distance, in cells of the grid's shorter side."""

FFT_FLOOR = 1e-12
"""FFT output below FFT_FLOOR times its maximum is set to 0. Round-off of order 1e-16 ahead of an
invasion front would otherwise be multiplied by the growth rate every year and move the front
(the floor itself slows a front only by about pi^2 sigma^2 / (2 ln(1e-12)^2) = 0.0065 sigma per
year, Brunet and Derrida 1997)."""

# Crossover of the deterministic engine, measured with benchmarks/bench_dispersal.py on a
# 2048 x 2048 grid with 1 and 2 numba threads (results in
# benchmarks/results/bench_dispersal.json). The FFT costs 0.06-0.10 s per step whatever the
# radius; the separable stencil (two 1-D passes, ~2 (2R + 1) operations per cell) costs the same
# near R = 40-56 cells, so up to R = 40, a gaussian sigma of 7.6 cells at the default
# truncation; the full 2-D stencil (~pi R^2 per cell) up to R = 6 (0.03-0.06 s; 0.09-0.10 s at
# R = 8).
STENCIL_MAX_RADIUS_SEPARABLE = 40
STENCIL_MAX_RADIUS = 6

# Stochastic engine: a cell's n dispersers are placed one by one (one uniform each through the
# alias table, O(1) whatever the number S of stencil cells with weight > 0) unless
# n >= MULTINOMIAL_PER_CELL * S; then a sequential-binomial multinomial over the stencil (one
# binomial per stencil cell, largest weights first, until none remain) is cheaper. Measured with
# benchmarks/bench_dispersal.py (1 and 2 threads): one by one costs ~11 ns per disperser; the
# two cost the same near n = 0.7 S for S = 5 and 13, and n = 1.6 S for S = 81 and 317.
MULTINOMIAL_PER_CELL = 1.5

_CACHE_SIZE = 16  # kernel transforms and stay fractions kept per kernel (grid shapes, sub-boxes)

_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(6)
_GL_NODES = 0.5 * (_GL_NODES + 1.0)  # on [0, 1]
_GL_WEIGHTS = 0.5 * _GL_WEIGHTS  # sum 1
_GL_THETA_NODES, _GL_THETA_WEIGHTS = np.polynomial.legendre.leggauss(24)
_GL_THETA_NODES = 0.5 * (_GL_THETA_NODES + 1.0)
_GL_THETA_WEIGHTS = 0.5 * _GL_THETA_WEIGHTS


@dataclass(frozen=True, eq=False)
class Kernel:
    """A dispersal kernel on the grid.

    Attributes
    ----------
    kind : str
        One of :data:`KERNELS`.
    weights : (2R+1, 2R+1) ndarray of float64
        Probability that a disperser from the centre cell lands in each cell (row offset
        ``a - R``, column offset ``b - R``); cell-integrated, truncated and renormalised to sum 1.
        Symmetric under flipping either axis.
    radius : int
        R = max(ry, rx), cells.
    ry, rx : int
        Reach of the stencil along rows and columns (differ when cells are not square).
    separable : tuple of two ndarrays or None
        ``(wy, wx)`` with ``weights[R-ry:R+ry+1, R-rx:R+rx+1] == outer(wy, wx)`` for the gaussian
        kernel, else None.
    mean_distance_m, max_distance_m : float
        Mean displacement of the untruncated kernel and truncation distance, metres.
    offsets : (S, 2) ndarray of int64
        Row and column offsets of the S stencil cells with weight > 0, largest weight first.
    alias_threshold, alias_index : (S,) ndarray of float64, (S,) ndarray of int64
        Alias table of the weights in that order (:func:`_alias_table`): slot c holds entry c
        with probability ``alias_threshold[c]`` and entry ``alias_index[c]`` otherwise.
    conditional : (S,) ndarray of float64
        ``p_k / sum(p_k, p_k+1, ...)`` in that order (last 1): the success probabilities of the
        sequential-binomial multinomial.
    """

    kind: str
    weights: np.ndarray = field(repr=False)
    radius: int
    ry: int
    rx: int
    separable: tuple | None = field(repr=False)
    mean_distance_m: float
    max_distance_m: float
    offsets: np.ndarray = field(repr=False)
    alias_threshold: np.ndarray = field(repr=False)
    alias_index: np.ndarray = field(repr=False)
    conditional: np.ndarray = field(repr=False)
    _cache: dict = field(default_factory=dict, repr=False)

    @property
    def stencil(self) -> np.ndarray:
        """The weights trimmed to (2 ry + 1, 2 rx + 1)."""
        r = self.radius
        return self.weights[r - self.ry:r + self.ry + 1, r - self.rx:r + self.rx + 1]

    def _cached(self, key, make):
        if key not in self._cache:
            if len(self._cache) >= _CACHE_SIZE:
                del self._cache[next(iter(self._cache))]
            self._cache[key] = make()
        return self._cache[key]


# --------------------------------------------------------------------------------------------
# Kernel construction


def _scale(code: int, mean: float, p: float) -> float:
    """Scale parameter from the mean displacement: sigma, a, or u (2dt)."""
    if code == 0:
        return mean / math.sqrt(math.pi / 2.0)  # Rayleigh mean sigma sqrt(pi / 2)
    if code == 1:
        return mean / 2.0  # distance ~ Gamma(2, a)
    # Clark et al. (1999): mean = (sqrt(pi u) / 2) Gamma(p - 1/2) / Gamma(p)
    root_u = 2.0 * mean * math.exp(math.lgamma(p) - math.lgamma(p - 0.5)) / math.sqrt(math.pi)
    return root_u * root_u


def _default_truncation(code: int, scale: float, p: float) -> float:
    """Distance where the distance CDF reaches 1 - TAIL_MASS."""
    if code == 0:
        return scale * math.sqrt(-2.0 * math.log(TAIL_MASS))
    if code == 1:  # e^-x (1 + x) = q  <=>  x = -W_-1(-q / e) - 1
        return scale * (-lambertw(-TAIL_MASS / math.e, k=-1).real - 1.0)
    return math.sqrt(scale * (TAIL_MASS ** (-1.0 / p) - 1.0))


@njit
def _radial_cdf(code, r, scale, p):
    """Distance CDF of the radial kernels: exponential (code 1) or 2dt (code 2)."""
    if code == 1:
        x = r / scale
        return -math.expm1(-x) - x * math.exp(-x)
    return -math.expm1(-p * math.log1p(r * r / scale))


@njit
def _radial_density(code, r2, scale, p):
    """Density per unit area at squared distance r2."""
    if code == 1:
        return math.exp(-math.sqrt(r2) / scale) / (2.0 * math.pi * scale * scale)
    return p / (math.pi * scale) * math.exp(-(p + 1.0) * math.log1p(r2 / scale))


@njit
def _centre_cell_mass(code, scale, p, w, h, tn, tw):
    """Mass of the cell centred on the origin, in polar coordinates (exact radial integral).

    By symmetry 4 quadrants, each split at its corner into a triangle reaching the edge
    x = w/2 (angles 0..atan(h/w)) and one reaching y = h/2; along a ray the radial integral is the
    distance CDF at the edge. The remaining angular integrand is smooth: no trouble with the
    exponential kernel's cusp at the origin.
    """
    tc = math.atan2(h, w)
    s = 0.0
    for q in range(tn.size):
        t = tc * tn[q]
        s += tw[q] * tc * _radial_cdf(code, 0.5 * w / math.cos(t), scale, p)
        t = (0.5 * math.pi - tc) * tn[q]
        s += tw[q] * (0.5 * math.pi - tc) * _radial_cdf(code, 0.5 * h / math.cos(t), scale, p)
    return 2.0 / math.pi * s


@pjit
def _radial_cell_masses(code, scale, p, w, h, ry, rx, dmax, touch, gn, gw, tn, tw):
    """Unnormalised cell masses of a radial kernel over one quadrant (row offset ky = 0..ry,
    column offset kx = 0..rx); cells beyond dmax get 0: cells whose nearest point is beyond
    when ``touch``, else cells whose centre is beyond.

    Each cell is split into m x m sub-cells, each integrated with a 6 x 6 Gauss-Legendre rule; m
    keeps sub-cells below half the local length scale of the density (a for the exponential,
    sqrt(u + r^2) for the 2dt) and is at least 4 next to the centre, where the distance function's
    complex branch points (x = +-i y) come close.
    """
    out = np.zeros((ry + 1, rx + 1))
    big = max(w, h)
    for ky in prange(ry + 1):
        for kx in range(rx + 1):
            ny_ = max(0.0, (ky - 0.5) * h)
            nx_ = max(0.0, (kx - 0.5) * w)
            if touch:
                d2 = ny_ * ny_ + nx_ * nx_
            else:
                d2 = (ky * h) ** 2 + (kx * w) ** 2
            if d2 > dmax * dmax * (1.0 + 1e-12):
                continue
            if ky == 0 and kx == 0:
                out[0, 0] = _centre_cell_mass(code, scale, p, w, h, tn, tw)
                continue
            if code == 1:
                length = scale
            else:
                length = math.sqrt(scale + ny_ * ny_ + nx_ * nx_)
            m = min(64, max(1, int(math.ceil(big / (0.5 * length)))))
            if ky <= 1 and kx <= 1:
                m = max(m, 4)
            sh = h / m
            sw = w / m
            s = 0.0
            for sy in range(m):
                for a in range(gn.size):
                    y = (ky - 0.5) * h + (sy + gn[a]) * sh
                    for sx in range(m):
                        for b in range(gn.size):
                            x = (kx - 0.5) * w + (sx + gn[b]) * sw
                            s += gw[a] * gw[b] * _radial_density(code, x * x + y * y, scale, p)
            out[ky, kx] = s * w * h / (m * m)
    return out


def _gaussian_axis(sigma: float, cell: float, r: int) -> np.ndarray:
    """Cell-integrated 1-D gaussian over offsets -r..r, renormalised to sum 1."""
    k = np.arange(1, r + 1)
    half = np.empty(r + 1)
    half[0] = erf(0.5 * cell / (sigma * math.sqrt(2.0)))
    half[1:] = ndtr(-(k - 0.5) * cell / sigma) - ndtr(-(k + 0.5) * cell / sigma)
    wts = np.concatenate([half[:0:-1], half])
    return wts / wts.sum()


def _reach(dmax: float, cell: float, touch: bool) -> int:
    """Stencil reach in cells along one axis: the last cell whose near edge (touch) or centre
    lies within dmax."""
    x = dmax / cell * (1.0 + 1e-12)
    return max(0, math.ceil(x - 0.5) if touch else math.floor(x))


@njit
def _alias_table(probs):
    """Alias table of a discrete distribution over S entries (Vose's construction).

    Slots are filled so that a slot c chosen uniformly yields entry c with probability
    ``threshold[c]`` and entry ``index[c]`` otherwise, which reproduces ``probs``: entry k
    gets ``(threshold[k] + sum of 1 - threshold[c] over slots c with index[c] = k) / S``.

    References
    ----------
    Walker, A. J. (1977). An efficient method for generating discrete random variables with
    general distributions. ACM Transactions on Mathematical Software 3, 253-256. Vose, M. D.
    (1991). A linear algorithm for generating random numbers with a given distribution. IEEE
    Transactions on Software Engineering 17, 972-975 [both from memory].
    """
    size = probs.size
    scaled = probs * (size / probs.sum())
    threshold = np.ones(size)
    index = np.arange(size)
    small = np.empty(size, np.int64)
    large = np.empty(size, np.int64)
    ns = 0
    nl = 0
    for k in range(size):
        if scaled[k] < 1.0:
            small[ns] = k
            ns += 1
        else:
            large[nl] = k
            nl += 1
    while ns > 0 and nl > 0:
        ns -= 1
        lo = small[ns]
        hi = large[nl - 1]
        threshold[lo] = scaled[lo]
        index[lo] = hi
        scaled[hi] = (scaled[hi] + scaled[lo]) - 1.0
        if scaled[hi] < 1.0:
            nl -= 1
            small[ns] = hi
            ns += 1
    return threshold, index  # slots left over hold their own entry (round-off): threshold 1


def _mirror_quadrant(q: np.ndarray) -> np.ndarray:
    """Full (2ry+1, 2rx+1) array from the quadrant ky, kx >= 0."""
    top = np.concatenate([q[:, :0:-1], q], axis=1)
    return np.concatenate([top[:0:-1], top], axis=0)


def make_kernel(kind, *, mean_distance_m, tail=1.5, max_distance_m=None, cell_w_m, cell_h_m,
                grid_shape=None, file="scenario") -> Kernel:
    """Build the cell-integrated dispersal kernel for a grid.

    Parameters
    ----------
    kind : {'gaussian', 'exponential', '2dt'}
        Kernel shape, parameterised by the mean displacement distance D:

        - gaussian: per-axis standard deviation sigma = D / sqrt(pi / 2) (the distance is
          Rayleigh distributed);
        - exponential: density exp(-r / a) / (2 pi a^2), a = D / 2 (distance Gamma(2, a));
        - 2dt: density p / (pi u (1 + r^2 / u)^(p + 1)), p = ``tail``, with
          D = (sqrt(pi u) / 2) Gamma(p - 1/2) / Gamma(p) (Clark et al. 1999).
    mean_distance_m : float
        Mean displacement distance D, metres; at least a tenth of the shorter cell side.
    tail : float
        Shape p of the 2dt kernel, > 0.5 (smaller = fatter tail). Ignored by the others.
    max_distance_m : float, optional
        Truncation distance, metres; at most the grid diagonal. The stencil keeps the cells
        whose centre lies within it (centre-to-centre displacement <= max distance); the
        gaussian kernel keeps the square |dy|, |dx| <= max distance (it stays separable).
        Default: the distance where the kernel's distance CDF reaches 1 - 1e-6
        (:data:`TAIL_MASS`), for the 2dt at most 50 mean distances (:data:`TWODT_CAP_MEANS`)
        and for all at most the grid diagonal; then the stencil keeps every cell that distance
        reaches into (the circle, or the gaussian's square, touches the cell), so that no more
        than 1e-6 is cut off even from a kernel smaller than a cell.
    cell_w_m, cell_h_m : float
        Cell width (along a row) and height, metres.
    grid_shape : (int, int), optional
        (ny, nx) of the grid, to check the truncation against the grid.
    file : str or path
        Scenario file named in error messages.

    Returns
    -------
    Kernel

    Raises
    ------
    ScenarioError
        Unknown kind, mean distance <= 0 or below a tenth of a cell, 2dt tail <= 0.5, maximum
        distance <= 0 or larger than the grid.

    References
    ----------
    Clark, J. S., Silman, M., Kern, R., Macklin, E. and HilleRisLambers, J. (1999). Seed dispersal
    near and far: patterns across temperate and tropical forests. Ecology 80, 1475-1494.
    """
    if kind not in KERNELS:
        raise ScenarioError(f"{where(file, 'dispersal', 'kernel')} = {kind!r} is not a known "
                            f"kernel; allowed: {', '.join(repr(k) for k in KERNELS)}.")
    if not (cell_w_m > 0 and cell_h_m > 0):
        raise ValueError(f"cell size must be positive, got {cell_w_m!r} x {cell_h_m!r} m")
    code = KERNELS[kind]
    mean = float(mean_distance_m)
    cell = min(cell_w_m, cell_h_m)
    loc = where(file, "dispersal", "mean_distance_m")
    if not mean > 0:
        raise ScenarioError(f"{loc} = {mean:g} must be > 0 (metres).")
    if mean < MIN_MEAN_CELLS * cell:
        raise ScenarioError(
            f"{loc} = {mean:g} m is below a tenth of a cell (cells are {cell_w_m:g} x "
            f"{cell_h_m:g} m): almost every disperser would land back in its own cell. Use at "
            f"least {MIN_MEAN_CELLS * cell:g} m, or fraction = 0 for no dispersal.")
    p = float(tail)
    if code == 2 and not p > 0.5:
        raise ScenarioError(f"{where(file, 'dispersal', 'tail')} = {p:g}: the 2dt kernel needs "
                            f"tail > 0.5 (its mean distance is infinite otherwise).")
    scale = _scale(code, mean, p)
    extent = math.inf
    if grid_shape is not None:
        extent = math.hypot(grid_shape[0] * cell_h_m, grid_shape[1] * cell_w_m)
    if max_distance_m is None:
        dmax = _default_truncation(code, scale, p)
        if code == 2:
            dmax = min(dmax, TWODT_CAP_MEANS * mean)
        dmax = min(dmax, extent)
    else:
        dmax = float(max_distance_m)
        loc = where(file, "dispersal", "max_distance_m")
        if not dmax > 0:
            raise ScenarioError(f"{loc} = {dmax:g} must be > 0 (metres).")
        if dmax > extent:
            raise ScenarioError(
                f"{loc} = {dmax:g} m is larger than the grid ({grid_shape[0]} x {grid_shape[1]} "
                f"cells of {cell_w_m:g} x {cell_h_m:g} m, diagonal {extent:.6g} m); allowed: "
                f"0 < value <= {extent:.6g}.")
    # Default truncation: every cell the truncation circle touches, so that at most TAIL_MASS is
    # cut off even for kernels much smaller than a cell. A given maximum distance: the cells whose
    # centre is within it, so that no disperser moves further (centre to centre).
    touch = max_distance_m is None
    ry = _reach(dmax, cell_h_m, touch)
    rx = _reach(dmax, cell_w_m, touch)
    if code == 0:
        wy = _gaussian_axis(scale, cell_h_m, ry)
        wx = _gaussian_axis(scale, cell_w_m, rx)
        stencil = np.outer(wy, wx)
        separable = (wy, wx)
    else:
        q = _radial_cell_masses(code, scale, p, float(cell_w_m), float(cell_h_m), ry, rx, dmax,
                                touch, _GL_NODES, _GL_WEIGHTS, _GL_THETA_NODES, _GL_THETA_WEIGHTS)
        stencil = _mirror_quadrant(q)
        stencil /= stencil.sum()
        separable = None
    r = max(ry, rx)
    weights = np.zeros((2 * r + 1, 2 * r + 1))
    weights[r - ry:r + ry + 1, r - rx:r + rx + 1] = stencil
    flat = stencil.ravel()
    nz = np.flatnonzero(flat > 0)
    order = nz[np.argsort(-flat[nz], kind="stable")]
    probs = flat[order]
    threshold, index = _alias_table(probs)
    remaining = np.cumsum(probs[::-1])[::-1]
    conditional = np.minimum(probs / remaining, 1.0)
    conditional[-1] = 1.0
    offsets = np.stack([order // (2 * rx + 1) - ry, order % (2 * rx + 1) - rx], axis=1)
    return Kernel(kind=kind, weights=weights, radius=r, ry=ry, rx=rx, separable=separable,
                  mean_distance_m=mean, max_distance_m=dmax,
                  offsets=np.ascontiguousarray(offsets, dtype=np.int64),
                  alias_threshold=threshold, alias_index=index, conditional=conditional)


# --------------------------------------------------------------------------------------------
# Deterministic engine


def _edge_code(edge) -> int:
    if edge not in EDGES:
        raise ScenarioError(f"[dispersal] edge = {edge!r} is not known; allowed: "
                            f"{', '.join(repr(e) for e in EDGES)}.")
    return EDGES[edge]


@njit
def _fold(g, n):
    """Mirror a coordinate back into 0..n-1 (reflecting edge), repeatedly if needed."""
    m = g % (2 * n)
    if m < n:
        return m
    return 2 * n - 1 - m


@njit
def _axpy(dst, w, src):
    """``dst += w * src`` over two equal-length contiguous rows (a loop LLVM vectorises)."""
    for j in range(dst.size):
        dst[j] += w * src[j]


@njit
def _source_row(q, n, edge_code):
    """Grid row of padded-row index ``q - r`` (the stencil reaching row ``q`` of the field
    extended by the edge): the row itself inside the grid; off the grid -1 (absorbing) or the
    mirrored row (reflecting)."""
    if 0 <= q < n:
        return q
    return -1 if edge_code == 0 else _fold(q, n)


@njit
def _extend_row(row, rx, edge_code, ext):
    """``ext`` = ``row`` with ``rx`` cells beyond each end: zeros (absorbing) or the mirror
    images, repeated if ``rx`` exceeds the row (reflecting), as ``np.pad`` modes 'constant' and
    'symmetric' do."""
    nx = row.size
    ext[rx:rx + nx] = row
    for p in range(rx):
        ext[p] = 0.0 if edge_code == 0 else row[_fold(p - rx, nx)]
        ext[rx + nx + p] = 0.0 if edge_code == 0 else row[_fold(nx + p, nx)]


STENCIL_BAND_ROWS = 128
"""Output rows per task of the separable stencil: each task keeps the row pass of the
2 ry + 1 rows its current output row needs in a ring (in cache), and makes the row pass of the
2 ry rows above and below its band once more."""


@pjit
def _stencil_separable(d, wy, wx, edge_code, out):
    """``out`` = ``d`` convolved with ``outer(wy, wx)``, the field extended by the edge: a row
    pass of each source row into a ring of rows, then a column pass over the ring."""
    ny, nx = d.shape
    ry = (wy.size - 1) // 2
    rx = (wx.size - 1) // 2
    w = wy.size
    n_bands = (ny + STENCIL_BAND_ROWS - 1) // STENCIL_BAND_ROWS
    for band in prange(n_bands):
        i0 = band * STENCIL_BAND_ROWS
        i1 = min(ny, i0 + STENCIL_BAND_ROWS)
        ring = np.empty((w, nx))
        ext = np.empty(nx + 2 * rx)
        for q in range(i0 - ry, i1 + ry):
            src = _source_row(q, ny, edge_code)
            if src >= 0:
                _extend_row(d[src], rx, edge_code, ext)
                t = ring[(q - i0 + ry) % w]
                t[:] = 0.0
                for b in range(wx.size):
                    _axpy(t, wx[b], ext[2 * rx - b:2 * rx - b + nx])
            i = q - ry  # the output row whose source rows are now all in the ring
            if i < i0:
                continue
            o = out[i]
            o[:] = 0.0
            for a in range(w):
                qa = i + ry - a
                if _source_row(qa, ny, edge_code) >= 0:
                    _axpy(o, wy[a], ring[(qa - i0 + ry) % w])


@pjit
def _stencil_full(d, w, edge_code, out):
    """``out`` = ``d`` convolved with the (2ry+1, 2rx+1) stencil ``w``, the field extended by
    the edge."""
    ny, nx = d.shape
    ry = (w.shape[0] - 1) // 2
    rx = (w.shape[1] - 1) // 2
    for i in prange(ny):
        ext = np.empty(nx + 2 * rx)
        o = out[i]
        o[:] = 0.0
        for a in range(w.shape[0]):
            q = _source_row(i + ry - a, ny, edge_code)
            if q < 0:
                continue
            _extend_row(d[q], rx, edge_code, ext)
            for b in range(w.shape[1]):
                if w[a, b] != 0.0:
                    _axpy(o, w[a, b], ext[2 * rx - b:2 * rx - b + nx])


def _fft_valid(d, kernel: Kernel, edge_code: int) -> np.ndarray:
    ny, nx = d.shape
    ry, rx = kernel.ry, kernel.rx
    padded = np.pad(d, ((ry, ry), (rx, rx)), mode="constant" if edge_code == 0 else "symmetric")
    s = (sfft.next_fast_len(padded.shape[0], real=True),
         sfft.next_fast_len(padded.shape[1], real=True))
    workers = numba.get_num_threads()
    wk = kernel._cached(("fft", s), lambda: sfft.rfft2(kernel.stencil, s, workers=workers))
    full = sfft.irfft2(sfft.rfft2(padded, s, workers=workers) * wk, s, workers=workers)
    out = np.ascontiguousarray(full[2 * ry:2 * ry + ny, 2 * rx:2 * rx + nx])
    out[out < FFT_FLOOR * out.max()] = 0.0
    return out


def _spread(d: np.ndarray, kernel: Kernel, edge_code: int, method: str, *,
            out=None) -> np.ndarray:
    """Where the dispersers ``d`` land (expected numbers), into ``out`` if given (stencils).

    Reflecting edge: the destination off the grid is folded back (``A`` below). The kernel is
    symmetric under flipping either axis, which makes the fold operator symmetric, so the
    forward scatter ``A d`` equals the gather over the mirror-extended field (``np.pad`` mode
    'symmetric', repeated when the kernel reaches beyond the grid), a plain valid convolution.
    """
    if method == "auto":
        limit = STENCIL_MAX_RADIUS_SEPARABLE if kernel.separable else STENCIL_MAX_RADIUS
        method = "stencil" if kernel.radius <= limit else "fft"
    if method == "fft":
        return _fft_valid(d, kernel, edge_code)
    out = np.empty(d.shape) if out is None else out
    if kernel.separable is not None:
        _stencil_separable(d, kernel.separable[0], kernel.separable[1], edge_code, out)
    else:
        _stencil_full(d, np.ascontiguousarray(kernel.stencil), edge_code, out)
    return out


def _fold_indicator(n: int, r: int) -> np.ndarray:
    """(n, 2r+1): 1 where offset a - r from cell i folds back onto cell i (reflecting edge)."""
    g = np.arange(n)[:, None] + np.arange(-r, r + 1)[None, :]
    m = g % (2 * n)
    return (np.where(m < n, m, 2 * n - 1 - m) == np.arange(n)[:, None]).astype(np.float64)


def stay_share(kernel: Kernel, shape, edge: str) -> np.ndarray:
    """Share of each cell's dispersers that land back in it, for a grid of ``shape``: a
    ``shape`` array when the edge is reflecting (the fold brings some back, more near the
    edges), else one row ``(1, nx)`` of the kernel's centre weight, which broadcasts."""
    if _edge_code(edge) == 0:
        return np.full((1, shape[1]), kernel.stencil[kernel.ry, kernel.rx])
    return kernel._cached(("stay", shape), lambda: _fold_indicator(shape[0], kernel.ry)
                          @ kernel.stencil @ _fold_indicator(shape[1], kernel.rx).T)


def _as_field(a, name: str) -> np.ndarray:
    a = np.ascontiguousarray(a, dtype=np.float64)
    if a.ndim != 2:
        raise ValueError(f"{name} must be a 2-D (ny, nx) array, got shape {a.shape}")
    return a


def _check_method(method: str) -> None:
    if method not in ("auto", "stencil", "fft"):
        raise ValueError(f"method must be 'auto', 'stencil' or 'fft', got {method!r}")


def spread(dispersers, kernel: Kernel, edge: str, *, method: str = "auto",
           out=None) -> np.ndarray:
    """Where expected numbers of dispersers land: the ``arrivals`` of
    :func:`disperse_deterministic`, written into ``out`` by the stencils if given (float64,
    the dispersers' shape)."""
    _check_method(method)
    return _spread(_as_field(dispersers, "dispersers"), kernel, _edge_code(edge), method,
                   out=out)


def disperse_deterministic(dispersers, kernel: Kernel, edge: str, *, method: str = "auto"):
    """Move expected numbers of dispersers with a kernel.

    Parameters
    ----------
    dispersers : (ny, nx) array_like of float
        Expected number leaving each cell this year, >= 0.
    kernel : Kernel
    edge : {'absorbing', 'reflecting'}
    method : {'auto', 'stencil', 'fft'}
        'auto' takes the direct stencil up to :data:`STENCIL_MAX_RADIUS_SEPARABLE` (gaussian)
        or :data:`STENCIL_MAX_RADIUS` cells of radius, the FFT beyond. FFT output below
        :data:`FFT_FLOOR` times its maximum is set to 0.

    Returns
    -------
    arrivals : (ny, nx) ndarray of float64
        Where the dispersers land, including those that land back in their own cell. With an
        absorbing edge ``dispersers.sum() - arrivals.sum()`` is the kernel mass off the grid;
        with a reflecting edge mass is conserved.
    stayed : (ny, nx) ndarray of float64
        The part of each cell's dispersers that landed back in the same cell.
    """
    d = _as_field(dispersers, "dispersers")
    return spread(d, kernel, edge, method=method), d * stay_share(kernel, d.shape, edge)


@dataclass(frozen=True, eq=False)
class SettleFields:
    """Per source cell, the share of its dispersers that lands in a settle cell anywhere
    (``anywhere``) and in a settle cell of its own patch (``own``); see :func:`settle_fields`."""

    settle: np.ndarray
    anywhere: np.ndarray
    own: np.ndarray


def settle_fields(labels, settle, kernel: Kernel, edge: str, *,
                  method: str = "auto") -> SettleFields:
    """Shares of each cell's dispersers that can settle, anywhere and in their own patch.

    The landing operator is symmetric (a symmetric kernel, and the mirror fold of a reflecting
    edge), so the share of cell c's dispersers landing in a set S equals the spread of S's
    indicator evaluated at c. The fields depend only on where dispersers may settle, so they
    are computed once and reused while that does not change. Per patch, only the patch's
    bounding box expanded by the kernel radius is convolved.
    """
    _check_method(method)
    labels = np.asarray(labels)
    settle = np.asarray(settle, dtype=bool)
    code = _edge_code(edge)
    ny, nx = settle.shape
    anywhere = _spread(settle.astype(np.float64), kernel, code, method)
    own = np.zeros((ny, nx))
    n_patches = int(labels.max()) if labels.size else 0
    for p, box in enumerate(ndimage.find_objects(labels, max_label=n_patches), start=1):
        if box is None:
            continue
        y0, y1 = max(0, box[0].start - kernel.ry), min(ny, box[0].stop + kernel.ry)
        x0, x1 = max(0, box[1].start - kernel.rx), min(nx, box[1].stop + kernel.rx)
        mine = labels[y0:y1, x0:x1] == p
        target = (mine & settle[y0:y1, x0:x1]).astype(np.float64)
        if not target.any():
            continue
        # Sides of the box inside the grid lie a kernel radius beyond the patch: the mirror
        # padding there reflects only zeros.
        gathered = _spread(target, kernel, code, method)
        own[y0:y1, x0:x1][mine] = gathered[mine]
    return SettleFields(settle.copy(), anywhere, own)


# --------------------------------------------------------------------------------------------
# Stochastic engine


def _edge_map(n: int, r: int, edge_code: int) -> np.ndarray:
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
def _place_multinomial(i, j, n, ck, cond, offsets, ymap, xmap, settle, labels, lab, arrivals):
    """The n dispersers of cell (i, j) as one multinomial over the stencil: sequential binomials
    ``Binomial(remaining, cond[k])`` on cell key ``cell_key(ck, k)``. Returns the counts of
    :func:`_land`, summed."""
    stay = 0
    settled = 0
    own = 0
    for k in range(cond.size):
        if n == 0:
            break
        cnt = rng.binomial(n, cond[k], rng.cell_key(ck, k))
        if cnt > 0:
            n -= cnt
            st, se, ow = _land(i, j, k, cnt, offsets, ymap, xmap, settle, labels, lab, arrivals)
            stay += st
            settled += se
            own += ow
    return stay, settled, own


@njit
def _disperse_rows(dispersers, settle, labels, offsets, threshold, alias, cond, ymap, xmap, key,
                   multinomial_min, r0, r1, arrivals, stayed, ret):
    """The dispersers of rows r0..r1: landings added to ``arrivals``, ``stayed`` written, and per
    patch of origin the number landing in a settle cell of the patch (``ret[p, 0]``) and in any
    settle cell (``ret[p, 1]``). Disperser t of a cell placed one by one takes ``uniform(ck,
    t)`` through the alias table."""
    nx = dispersers.shape[1]
    for i in range(r0, r1):
        for j in range(nx):
            n = np.int64(dispersers[i, j])
            if n <= 0:
                stayed[i, j] = 0.0
                continue
            ck = rng.cell_key(key, i * nx + j)
            lab = labels[i, j]
            if n >= multinomial_min:
                stay, settled, own = _place_multinomial(i, j, n, ck, cond, offsets, ymap, xmap,
                                                        settle, labels, lab, arrivals)
            else:
                stay = 0
                settled = 0
                own = 0
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


@pjit
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

    A cell with n >= multinomial_min dispersers draws a multinomial over the stencil
    (:func:`_place_multinomial`), otherwise each disperser its own destination, from the
    cell's key ``ck = rng.cell_key(key, i * nx + j)``.
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


@pjit
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


def _row_blocks(dispersers: np.ndarray, multinomial_min: float, ry: int) -> np.ndarray:
    """Bounds of row blocks of about equal work, each but the last at least 2 ry rows high."""
    ny = dispersers.shape[0]
    work = np.empty(ny)
    _row_work(dispersers, multinomial_min, work)
    cum = np.concatenate([[0.0], np.cumsum(work)])
    nb = 2 * BLOCKS_PER_THREAD * numba.get_num_threads()
    cuts = np.searchsorted(cum, cum[-1] * np.arange(1, nb) / nb)
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
    d = _as_field(dispersers, "dispersers")
    settle = np.ascontiguousarray(settle, dtype=np.bool_)
    labels = np.ascontiguousarray(labels, dtype=np.int32)
    if settle.shape != d.shape or labels.shape != d.shape:
        raise ValueError(f"dispersers {d.shape}, settle {settle.shape} and labels "
                         f"{labels.shape} must have the same shape")
    code = _edge_code(edge)
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
                                _edge_map(d.shape[0], kernel.ry, code),
                                _edge_map(d.shape[1], kernel.rx, code), np.uint64(key),
                                multinomial_min, bounds, arrivals, stayed, retained, settled_from)
    return arrivals, stayed, retained, settled_from


# --------------------------------------------------------------------------------------------
# How many leave


@njit
def _emigration_fraction(n, k, fraction, dd):
    """fraction * min(1, n / k) ** dd; the plain fraction when dd == 0 or k <= 0."""
    if dd == 0.0 or not k > 0.0 or n >= k:
        return fraction
    return fraction * (n / k) ** dd


@njit
def leaving_row_deterministic(n, k, fraction, dd, out):
    """Expected emigrants of one row (1-D ``n``, ``k``; written to ``out``)."""
    for j in range(n.size):
        out[j] = n[j] * _emigration_fraction(n[j], k[j], fraction, dd)


@njit
def leaving_row_stochastic(n, k, fraction, dd, key, first_cell, out):
    """Emigrants of one row, ``Binomial(n, f)`` on ``rng.cell_key(key, first_cell + j)``; cells
    that lose the plain fraction draw from its binomial table."""
    table = rng.binomial_table(fraction)
    for j in range(n.size):
        c = np.int64(n[j])
        out[j] = 0.0 if c <= 0 else rng.binomial_with_table(
            c, _emigration_fraction(n[j], k[j], fraction, dd), fraction, table,
            rng.cell_key(key, first_cell + j))


@pjit
def _leaving_deterministic_kernel(n, k, fraction, dd, out):
    for i in prange(n.shape[0]):
        leaving_row_deterministic(n[i], k[i], fraction, dd, out[i])


@pjit
def _leaving_stochastic_kernel(n, k, fraction, dd, key, out):
    nx = n.shape[1]
    for i in prange(n.shape[0]):
        leaving_row_stochastic(n[i], k[i], fraction, dd, key, i * nx, out[i])


def _leaving_args(n, k):
    n = _as_field(n, "n")
    k = _as_field(k, "k")
    if k.shape != n.shape:
        raise ValueError(f"n {n.shape} and k {k.shape} must have the same shape")
    return n, k


def leaving_deterministic(n, k, fraction: float, density_dependence: float, *,
                          out=None) -> np.ndarray:
    """Expected emigrants per cell: ``n * fraction * min(1, n / k) ** density_dependence``.

    Cells with ``k <= 0``, and every cell when ``density_dependence == 0``, lose the plain
    ``fraction``. Written into ``out`` (float64, ``n``'s shape) if given.
    """
    n, k = _leaving_args(n, k)
    out = np.empty(n.shape) if out is None else out
    _leaving_deterministic_kernel(n, k, float(fraction), float(density_dependence), out)
    return out


def leaving_stochastic(n, k, fraction: float, density_dependence: float, key) -> np.ndarray:
    """Emigrants per cell, ``Binomial(n, f)`` with f as in :func:`leaving_deterministic`.

    ``key = rng.year_key(seed, replicate, year, rng.STREAM_EMIGRATION)``; cell (i, j) draws on
    ``rng.cell_key(key, i * nx + j)``. ``n`` holds whole numbers.
    """
    n, k = _leaving_args(n, k)
    out = np.zeros(n.shape)
    _leaving_stochastic_kernel(n, k, float(fraction), float(density_dependence), np.uint64(key),
                               out)
    return out


# --------------------------------------------------------------------------------------------
# Crossing barriers


@pjit
def _thin_kernel(counts, p, key, group, out):
    ny, nx = counts.shape
    table = rng.binomial_table(p)
    for i in prange(ny):
        for j in range(nx):
            c = np.int64(counts[i, j])
            out[i, j] = 0.0 if c <= 0 else rng.binomial_with_table(
                c, p, p, table, rng.cell_key(key, (group * ny + i) * nx + j))


def thin(counts, p: float, key, group: int) -> np.ndarray:
    """Binomial thinning of whole counts: each individual survives with probability ``p``.

    Cell (i, j) of group ``g`` uses ``rng.cell_key(key, (g * ny + i) * nx + j)``, so different
    groups (e.g. the dispersers of different regions) draw independent numbers.
    """
    d = _as_field(counts, "counts")
    out = np.empty_like(d)
    _thin_kernel(d, float(p), np.uint64(key), np.int64(group), out)
    return out

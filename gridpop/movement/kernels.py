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

import numpy as np
from scipy.special import erf, lambertw, ndtr

from .._jit import njit, pjit, prange
from ..config import KERNELS

KERNEL_CODES = {name: code for code, name in enumerate(KERNELS)}
"""Integer code of each kernel shape (the choices of ``[dispersal] kernel``) in the kernels."""

TAIL_MASS = 1e-6
"""Default truncation: the distance at which the kernel's distance CDF reaches 1 - TAIL_MASS."""

TWODT_CAP_MEANS = 50.0
"""Cap of the default 2dt truncation, in mean distances. The 2dt tail is so fat that its 1 - 1e-6
distance is 100 (p = 1.5) to 600 (p = 1) mean distances; at 50 means the mass beyond is 8e-6
(p = 1.5) or 1.6e-4 (p = 1), and it is redistributed over the stencil by the renormalisation."""

MIN_MEAN_CELLS = 0.1
"""Smallest mean distance, in cells of the grid's shorter side."""


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
        One of :data:`KERNEL_CODES`.
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


@pjit(grid=None)
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
                grid_shape=None) -> Kernel:
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

    Returns
    -------
    Kernel

    Raises
    ------
    ValueError
        Unknown kind, mean distance <= 0 or below a tenth of a cell, 2dt tail <= 0.5, maximum
        distance <= 0 or larger than the grid.

    References
    ----------
    Clark, J. S., Silman, M., Kern, R., Macklin, E. and HilleRisLambers, J. (1999). Seed dispersal
    near and far: patterns across temperate and tropical forests. Ecology 80, 1475-1494.
    """
    if kind not in KERNEL_CODES:
        raise ValueError(f"kernel = {kind!r} is not a known kernel; allowed: "
                         f"{', '.join(repr(k) for k in KERNELS)}.")
    if not (cell_w_m > 0 and cell_h_m > 0):
        raise ValueError(f"cell size must be positive, got {cell_w_m!r} x {cell_h_m!r} m")
    code = KERNEL_CODES[kind]
    mean = float(mean_distance_m)
    cell = min(cell_w_m, cell_h_m)
    loc = "mean_distance_m"
    if not mean > 0:
        raise ValueError(f"{loc} = {mean:g} must be > 0 (metres).")
    if mean < MIN_MEAN_CELLS * cell:
        raise ValueError(
            f"{loc} = {mean:g} m is below a tenth of a cell (cells are {cell_w_m:g} x "
            f"{cell_h_m:g} m): almost every disperser would land back in its own cell. Use at "
            f"least {MIN_MEAN_CELLS * cell:g} m, or fraction = 0 for no dispersal.")
    p = float(tail)
    if code == 2 and not p > 0.5:
        raise ValueError(f"tail = {p:g}: the 2dt kernel needs "
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
        loc = "max_distance_m"
        if not dmax > 0:
            raise ValueError(f"{loc} = {dmax:g} must be > 0 (metres).")
        if dmax > extent:
            raise ValueError(
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


# --------------------------------------------------------------------------------------------
# Stochastic engine


# --------------------------------------------------------------------------------------------
# How many leave


# --------------------------------------------------------------------------------------------
# Crossing barriers



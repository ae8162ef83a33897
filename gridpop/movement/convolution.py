"""Expected numbers of dispersers spread by a kernel: a direct stencil (separable for the gaussian
kernel, full otherwise) for small radii and an FFT (:mod:`scipy.fft`, zero padding, not
circular) for large ones, with absorbing or reflecting grid edges; and the per-cell shares of a
cell's dispersers that settle at home, in their own patch or anywhere (:func:`settle_fields`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
import scipy.fft as sfft
from scipy import ndimage

from .._jit import njit, pjit, prange
from ..config import EDGES
from .kernels import Kernel

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


EDGE_CODES = {name: code for code, name in enumerate(EDGES)}
"""Integer code of each grid edge behaviour (the choices of ``[dispersal] edge``)."""


def edge_code(edge) -> int:
    if edge not in EDGE_CODES:
        raise ValueError(f"edge = {edge!r} is not known; allowed: "
                            f"{', '.join(repr(e) for e in EDGES)}.")
    return EDGE_CODES[edge]


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


@pjit(grid="d")
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


@pjit(grid="d")
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
    if edge_code(edge) == 0:
        return np.full((1, shape[1]), kernel.stencil[kernel.ry, kernel.rx])
    return kernel._cached(("stay", shape), lambda: _fold_indicator(shape[0], kernel.ry)
                          @ kernel.stencil @ _fold_indicator(shape[1], kernel.rx).T)


def as_field(a, name: str) -> np.ndarray:
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
    return _spread(as_field(dispersers, "dispersers"), kernel, edge_code(edge), method,
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
    d = as_field(dispersers, "dispersers")
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
    code = edge_code(edge)
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

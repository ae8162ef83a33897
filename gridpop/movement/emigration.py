"""How many individuals leave their cell: a fraction ``fraction * min(1, N / K) **
density_dependence`` of each cell's individuals (N the cell's density-stage total, which the row
kernels take apart from the individuals that may leave), as expected numbers or as binomial
draws of whole individuals. The row kernels (:func:`leaving_row_deterministic`,
:func:`leaving_row_stochastic`) are what the yearly cycle's growth pass calls; the whole-grid
functions apply them to every row.
"""

from __future__ import annotations

import numpy as np

from .. import rng
from .._jit import njit, pjit, prange
from .convolution import as_field


@njit
def _emigration_fraction(n, k, fraction, dd):
    """fraction * min(1, n / k) ** dd; the plain fraction when dd == 0 or k <= 0."""
    if dd == 0.0 or not k > 0.0 or n >= k:
        return fraction
    return fraction * (n / k) ** dd


@njit
def leaving_row_deterministic(n, density, k, fraction, dd, out):
    """Expected emigrants of one row (1-D ``n`` who may leave, ``density`` the density-stage
    total, ``k``; written to ``out``)."""
    for j in range(n.size):
        out[j] = n[j] * _emigration_fraction(density[j], k[j], fraction, dd)


@njit
def leaving_row_stochastic(n, density, k, fraction, dd, key, first_cell, out):
    """Emigrants of one row, ``Binomial(n, f)`` on ``rng.cell_key(key, first_cell + j)``; cells
    that lose the plain fraction draw from its binomial table."""
    table = rng.binomial_table(fraction)
    for j in range(n.size):
        c = np.int64(n[j])
        out[j] = 0.0 if c <= 0 else rng.binomial_with_table(
            c, _emigration_fraction(density[j], k[j], fraction, dd), fraction, table,
            rng.cell_key(key, first_cell + j))


@pjit(grid="n")
def _leaving_deterministic_kernel(n, k, fraction, dd, out):
    for i in prange(n.shape[0]):
        leaving_row_deterministic(n[i], n[i], k[i], fraction, dd, out[i])


@pjit(grid="n")
def _leaving_stochastic_kernel(n, k, fraction, dd, key, out):
    nx = n.shape[1]
    for i in prange(n.shape[0]):
        leaving_row_stochastic(n[i], n[i], k[i], fraction, dd, key, i * nx, out[i])


def _leaving_args(n, k):
    n = as_field(n, "n")
    k = as_field(k, "k")
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

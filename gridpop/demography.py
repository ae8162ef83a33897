"""Local growth: density-dependent multipliers, explicit births and deaths, environmental noise.

A cell holding N individuals with capacity K expects the multiplier ``L = lambda(N, K) exp(e)`` this
year, where ``lambda`` comes from the growth model (:data:`MODEL_CODES`, see :func:`multiplier`) and
``e`` is the cell's environmental deviation of the log multiplier (:class:`EnvironmentalNoise`).
With adult annual survival ``s`` the multiplier splits into survival and births::

    survivors ~ Binomial(N, min(s, L))          deaths = N - survivors
    births    ~ Poisson(N max(L - s, 0) a(N))   a(N) = N / (N + A) if A > 0 else 1

so ``E[survivors + births] = N L`` when there is no Allee effect, and births and deaths are real
counts. ``a(N)`` is a mate-finding Allee effect acting on births only. The deterministic kernel
uses the expectations. For the ceiling model the environmental deviation acts on the growth rate
and the cap stays a cap: ``L = min(exp(r + e), K / N)``.

Kernels take 2-D float64 C-contiguous arrays ``(ny, nx)`` and run rows in parallel; random numbers
come from :mod:`gridpop.rng` keyed by cell, so results do not depend on the thread count.
"""

from __future__ import annotations

import math

import numba
import numpy as np
import scipy.fft

from . import rng
from ._jit import njit, pjit, prange
from .config import GROWTH_MODELS

MODEL_CODES = {name: code for code, name in enumerate(GROWTH_MODELS)}
"""Growth model names and the integer codes the kernels take."""

_EXPONENTIAL, _BEVERTON_HOLT, _RICKER, _THETA_LOGISTIC, _CEILING = range(5)

_LOG2E = 1.4426950408889634
_LN2_HI = 6.93147180369123816490e-01  # low 21 mantissa bits zero: k * _LN2_HI is exact
_LN2_LO = 1.90821492927058770002e-10
_SHIFTER = 6755399441055744.0  # 1.5 * 2**52: (x + _SHIFTER) - _SHIFTER rounds x to an integer
_EXP_TAYLOR = tuple(1.0 / math.factorial(i) for i in range(13, -1, -1))


@njit
def fast_exp(x):
    """``exp(x)`` in plain arithmetic, so that LLVM vectorises loops calling it.

    Range reduction ``x = k ln 2 + t`` with ``|t| <= ln(2) / 2`` (Cody and Waite 1980, Software
    Manual for the Elementary Functions), a degree-13 Taylor polynomial for ``exp(t)`` (truncation
    below 1e-17) and a scale by ``2**k`` built from its bits. Relative error about 2e-16 for normal
    results; ``x < -746`` gives 0, ``x > 710`` gives inf, NaN gives NaN.
    """
    x = -746.0 if x < -746.0 else x
    x = 710.0 if x > 710.0 else x
    kf = (x * _LOG2E + _SHIFTER) - _SHIFTER
    t = (x - kf * _LN2_HI) - kf * _LN2_LO
    p = 0.0
    for c in _EXP_TAYLOR:  # Horner
        p = p * t + c
    k = np.int64(kf if kf == kf else 0.0)
    k1 = k >> 1  # 2**k as two factors, each a normal number for |k| <= 1077
    s1 = np.int64((k1 + 1023) << 52).view(np.float64)
    s2 = np.int64((k - k1 + 1023) << 52).view(np.float64)
    return p * s1 * s2


@njit
def _lambda_row(n, k, env, lam, model, r, er, theta):
    """``lam = lambda(n, k) exp(env)`` over one row; ``er = exp(r)``. ``env`` holds one
    deviation per cell, or one for the whole row (size 1: then ``exp(r + env)`` is computed
    once, not per cell).

    One loop per model and ``np.divide`` (no zero-division check), so that each loop vectorises.
    """
    m = n.size
    per_cell = env.size == m
    e0 = env[0]
    if model == _RICKER:
        for j in range(m):
            e = env[j] if per_cell else e0
            lam[j] = fast_exp(r * (1.0 - np.divide(n[j], k[j])) + e)
    elif model == _THETA_LOGISTIC:
        for j in range(m):
            e = env[j] if per_cell else e0
            lam[j] = fast_exp(r * (1.0 - np.divide(n[j], k[j]) ** theta) + e)
    else:  # exp(r + env), divided by the crowding of the beverton-holt model
        crowding = er - 1.0 if model == _BEVERTON_HOLT and r > 0.0 else 0.0
        g0 = fast_exp(r + e0)
        for j in range(m):
            g = fast_exp(r + env[j]) if per_cell else g0
            lam[j] = np.divide(g, 1.0 + crowding * np.divide(n[j], k[j]))
        if model == _CEILING:
            for j in range(m):  # K / 0 = inf: an empty cell grows at e^r
                lam[j] = min(lam[j], np.divide(k[j], n[j]))
    for j in range(m):
        lam[j] = lam[j] if k[j] > 0.0 else 0.0


@njit
def multiplier(model, r, theta, n, k):
    """Expected yearly multiplier ``lambda(N, K)`` of one cell, with ``lambda0 = e^r``.

    Parameters
    ----------
    model : int
        Code from :data:`MODEL_CODES`.
    r : float
        Intrinsic (low-density) growth rate.
    theta : float
        Shape of the theta-logistic model (ignored by the others).
    n, k : float
        Abundance N and carrying capacity K of the cell.

    Returns
    -------
    float
        exponential ``e^r``; beverton-holt ``e^r / (1 + (e^r - 1) N / K)`` (``e^r`` when
        ``r <= 0``); ricker ``exp(r (1 - N / K))``; theta-logistic ``exp(r (1 - (N / K)^theta))``;
        ceiling ``min(e^r, K / N)`` (``e^r`` at N = 0). 0 wherever ``K <= 0``.

    References
    ----------
    Beverton, R. J. H. and Holt, S. J. (1957). On the dynamics of exploited fish populations.
    Fishery Investigations Ser. II 19. Ricker, W. E. (1954). Stock and recruitment. J. Fish. Res.
    Board Can. 11, 559-623. Gilpin, M. E. and Ayala, F. J. (1973). Global models of growth and
    competition. PNAS 70, 3590-3593.
    """
    lam = np.empty(1)
    _lambda_row(np.full(1, n), np.full(1, k), np.zeros(1), lam, model, r, math.exp(r), theta)
    return lam[0]


@njit
def _allee(n, allee_a):
    return np.divide(n, n + allee_a) if allee_a > 0.0 else 1.0


@njit
def _split_row_deterministic(n, out, births, deaths, s, allee_a):
    """Expected survivors and births of one row; ``births`` holds the multiplier on entry."""
    for j in range(n.size):
        nj = n[j]
        lam = births[j]
        surv = nj * min(s, lam)
        b = nj * max(lam - s, 0.0) * _allee(nj, allee_a)
        out[j] = surv + b
        births[j] = b
        deaths[j] = nj - surv


@pjit(grid="n")
def step_deterministic(n, k, env, out, births, deaths, model, r, s, theta, allee_a):
    """One year of local growth with expected values.

    Parameters
    ----------
    n, k, env : (ny, nx) float64 ndarray
        Abundance, carrying capacity and this year's environmental log deviation per cell.
    out, births, deaths : (ny, nx) float64 ndarray
        Written: abundance after growth (``n - deaths + births``), births and deaths. ``out`` may
        be ``n`` (update in place).
    model : int
        Code from :data:`MODEL_CODES`.
    r, s, theta, allee_a : float
        Growth rate, adult survival, theta-logistic shape and Allee density A per cell
        (0 = no Allee effect).
    """
    for i in prange(n.shape[0]):
        grow_row(n[i], k[i], env[i], out[i], births[i], deaths[i], model, r, s, theta, allee_a,
                 False, np.uint64(0), np.uint64(0), 0)


@njit
def _split_row_stochastic(n, out, births, deaths, s, allee_a, key_survival, key_births,
                          first_cell):
    """Random survivors and births of one row; ``births`` holds the multiplier on entry.

    Two passes that vectorise put the survival probability in ``deaths``, the mean of the
    births in ``births`` and its ``exp(-mean)`` (for the Poisson inversion) in a row buffer; a
    third pass draws. Survivors of a cell with at most ``rng.BERNOULLI_MAX`` individuals and
    survival probability s come from the binomial table of s.
    """
    m = n.size
    survival_table = rng.binomial_table(s)
    for j in range(m):
        lam = births[j]
        deaths[j] = min(s, lam)
        births[j] = n[j] * max(lam - s, 0.0) * _allee(n[j], allee_a)
    exp_neg = np.empty(m)
    for j in range(m):
        exp_neg[j] = fast_exp(-births[j])
    for j in range(m):
        nj = n[j]
        if nj == 0.0:
            out[j] = 0.0
            births[j] = 0.0
            deaths[j] = 0.0
            continue
        cell = first_cell + j
        surv = rng.binomial_with_table(np.int64(nj), deaths[j], s, survival_table,
                                       rng.cell_key(key_survival, cell))
        mean = births[j]
        ck = rng.cell_key(key_births, cell)
        if mean < 10.0:
            b = rng.poisson_inversion(mean, exp_neg[j], rng.uniform(ck, np.int64(0)))
        else:
            b = rng.poisson(mean, ck)
        out[j] = surv + b
        births[j] = b
        deaths[j] = nj - surv


@pjit(grid="n")
def step_stochastic(n, k, env, out, births, deaths, model, r, s, theta, allee_a,
                    key_survival, key_births):
    """One year of local growth with demographic stochasticity (whole individuals).

    Survivors are Binomial(N, min(s, L)) and births Poisson(N max(L - s, 0) a(N)), drawn from the
    cell keys ``rng.cell_key(key, i * nx + j)``. Arguments as :func:`step_deterministic`, plus

    Parameters
    ----------
    key_survival, key_births : uint64
        ``np.uint64(rng.year_key(seed, replicate, year, rng.STREAM_SURVIVAL))`` and the same with
        ``rng.STREAM_BIRTHS`` (wrap in ``np.uint64``: numba returns a Python int, and keys above
        2**63 would not convert back).
    """
    nx = n.shape[1]
    for i in prange(n.shape[0]):
        grow_row(n[i], k[i], env[i], out[i], births[i], deaths[i], model, r, s, theta, allee_a,
                 True, key_survival, key_births, i * nx)


@njit
def grow_row(n, k, env, out, births, deaths, model, r, s, theta, allee_a, stochastic,
             key_survival, key_births, first_cell):
    """One year of local growth over one row (1-D arrays; ``env`` may have size 1, one
    deviation for the row), as :func:`step_stochastic` (with
    ``stochastic``; the row's first cell has flat index ``first_cell``) or
    :func:`step_deterministic` do over a grid: the row kernel the engine's yearly cycle is
    built from."""
    _lambda_row(n, k, env, births, model, r, math.exp(r), theta)
    if stochastic:
        _split_row_stochastic(n, out, births, deaths, s, allee_a, key_survival, key_births,
                              first_cell)
    else:
        _split_row_deterministic(n, out, births, deaths, s, allee_a)


@pjit(grid="out")
def _standard_normals(key, out):
    nx = out.shape[1]
    for i in prange(out.shape[0]):
        row = out[i]
        for j in range(nx):
            row[j] = rng.normal(rng.cell_key(key, i * nx + j), np.int64(0))


@pjit(grid="out")
def _low_rank_field(ay, e, ax_t, out):
    """``out = ay @ e @ ax_t`` in a fixed summation order (BLAS may depend on its threads)."""
    nx = ax_t.shape[1]
    t = np.zeros((e.shape[0], nx))
    for a in prange(e.shape[0]):
        ta = t[a]
        for b in range(e.shape[1]):
            eab = e[a, b]
            axb = ax_t[b]
            for j in range(nx):
                ta[j] += eab * axb[j]
    r = ay.shape[1]
    for i in prange(out.shape[0]):
        row = out[i]
        row[:] = 0.0
        # four modes per sweep of the row, added one after another: the same sums, a quarter
        # of the loads and stores of the row
        for a in range(0, r - r % 4, 4):
            y0, y1, y2, y3 = ay[i, a], ay[i, a + 1], ay[i, a + 2], ay[i, a + 3]
            t0, t1, t2, t3 = t[a], t[a + 1], t[a + 2], t[a + 3]
            for j in range(nx):
                row[j] = row[j] + y0 * t0[j] + y1 * t1[j] + y2 * t2[j] + y3 * t3[j]
        for a in range(r - r % 4, r):
            ya = ay[i, a]
            ta = t[a]
            for j in range(nx):
                row[j] += ya * ta[j]


@pjit(grid="previous")
def _autoregress(previous, e, a, b, sd, field):
    """``e = a * previous + b * e`` in place and ``field = sd * e``, in one pass."""
    for i in prange(e.shape[0]):
        for j in range(e.shape[1]):
            z = a * previous[i, j] + b * e[i, j]
            e[i, j] = z
            field[i, j] = sd * z


def _axis_spectrum(n, cell, length, pad):
    """Torus of ``m = n + 2 ceil(pad L / cell)`` cells along one axis and the DFT (length m) of
    the correlation ``exp(-(d / L)**2)`` at its lags, made non-negative and scaled to mean 1,
    which is unit variance. The correlation wraps around at ``exp(-pad**2)``."""
    m = n + 2 * math.ceil(pad * length / cell)
    lag = np.minimum(np.arange(m), m - np.arange(m)) * cell
    spectrum = np.maximum(scipy.fft.fft(np.exp(-((lag / length) ** 2))).real, 0.0)
    return m, spectrum / spectrum.mean()


def _axis_factor(n, m, spectrum, q):
    """``(n, r)`` matrix A with ``A A^T`` the torus correlation among the first n cells, from the
    cosine and sine of the frequencies ``q`` (``0 <= q <= m / 2``)."""
    angle = 2.0 * np.pi * np.outer(np.arange(n), q) / m
    paired = (q > 0) & (2 * q != m)  # q and m - q: one cosine and one sine of weight 2
    amp = np.sqrt(np.where(paired, 2.0, 1.0) * spectrum[q] / m)
    return np.hstack([np.cos(angle) * amp, np.sin(angle[:, paired]) * amp[paired]])


class EnvironmentalNoise:
    """Yearly field of deviations of the log growth multiplier, correlated in space and time.

    The standardised field ``z`` is Gaussian with mean 0, variance 1 and correlation
    ``exp(-(d / L)**2)`` between cells a distance ``d`` (metres) apart. That is white noise filtered
    by a Gaussian of standard deviation ``L / 2`` per axis (common practice: the autocorrelation of
    that filter is this correlation function). The filter is applied by FFT on a torus padded by
    three correlation lengths on every side, so that the correlation wrapping around is below
    exp(-9); its transform is the square root of the transform of the correlation sampled at cell
    lags (circulant embedding), so the correlation is exact at cell lags even when ``L`` is close
    to a cell size. But only a few of the torus's Fourier modes carry variance unless ``L`` is
    a few cells: as the correlation is separable,
    ``exp(-dx^2/L^2) exp(-dy^2/L^2)``, the field is then ``z = A_y E A_x^T`` with E white noise (one
    value per pair of modes) and the columns of ``A_y``, ``A_x`` the cosines and sines of the
    modes, on a torus padded by six correlation lengths (wrap below exp(-36)); this mode sum is
    taken when it is the cheaper (:attr:`MADDS_PER_FFT_CELL`). ``L = 0`` gives
    independent cells; ``L`` above three times the grid diagonal one value for the whole landscape.

    In time, ``z_t = a z_(t-1) + sqrt(1 - a**2) e_t`` with ``z_0 = e_0`` (AR(1)), so the
    correlation between years ``t`` and ``t + h`` is ``a**h``. The field returned is ``sd * z``.

    Parameters
    ----------
    shape : (int, int)
        Grid shape (ny, nx).
    cell_w_m, cell_h_m : float
        Cell width and height in metres.
    sd : float
        Standard deviation of the deviation (``[growth] env_sd``).
    correlation_m : float
        Correlation length L in metres (``[growth] env_correlation_m``).
    autocorrelation : float
        AR(1) coefficient a, ``-1 < a < 1`` (``[growth] env_autocorrelation``).

    References
    ----------
    Dietrich, C. R. and Newsam, G. N. (1997). Fast and exact simulation of stationary Gaussian
    processes through circulant embedding of the covariance matrix. SIAM J. Sci. Comput. 18,
    1088-1107 [from memory].
    """

    MADDS_PER_FFT_CELL = 100
    """The mode sum replaces the FFT when its multiply-adds per year (``ny nx r_y + r_y r_x nx``
    for ``r_y``, ``r_x`` modes per axis) are at most this many per cell of the FFT's torus: each
    torus cell costs a Box-Muller normal and its share of two FFTs, some 100-1000 vectorised
    multiply-adds (benchmarks/bench_scenario.py), so the rule errs on the side of the FFT."""

    def __init__(self, shape, cell_w_m, cell_h_m, sd, correlation_m, autocorrelation):
        ny, nx = (int(v) for v in shape)
        if ny < 1 or nx < 1:
            raise ValueError(f"grid shape must be positive, got {tuple(shape)}")
        if not (cell_w_m > 0 and cell_h_m > 0):
            raise ValueError(f"cell size must be positive, got {cell_w_m} x {cell_h_m} m")
        if not sd >= 0:
            raise ValueError(f"env_sd must be >= 0, got {sd}")
        if not correlation_m >= 0:
            raise ValueError(f"env_correlation_m must be >= 0, got {correlation_m}")
        if not -1 < autocorrelation < 1:
            raise ValueError("env_autocorrelation must be in (-1, 1), got "
                                f"{autocorrelation}")
        self.shape = (ny, nx)
        self.sd = float(sd)
        self.autocorrelation = float(autocorrelation)
        self.method = "independent"
        if correlation_m > 3.0 * math.hypot(ny * cell_h_m, nx * cell_w_m):
            self.method = "uniform"
        elif correlation_m > 0:
            my, sy = _axis_spectrum(ny, cell_h_m, correlation_m, 6.0)
            mx, sx = _axis_spectrum(nx, cell_w_m, correlation_m, 6.0)
            qy = np.flatnonzero(sy[:my // 2 + 1] > 1e-13)
            qx = np.flatnonzero(sx[:mx // 2 + 1] > 1e-13)
            fy, fsy = _axis_spectrum(ny, cell_h_m, correlation_m, 3.0)
            fx, fsx = _axis_spectrum(nx, cell_w_m, correlation_m, 3.0)
            ry, rx = 2 * qy.size, 2 * qx.size  # about: a cosine and a sine per mode
            if ny * nx * ry + ry * rx * nx <= self.MADDS_PER_FFT_CELL * fy * fx:
                self.method = "modes"
                self._ay = _axis_factor(ny, my, sy, qy)
                self._ax_t = np.ascontiguousarray(_axis_factor(nx, mx, sx, qx).T)
            else:
                self.method = "fft"
                self._padded = (fy, fx)
                self._pad = ((fy - ny) // 2, (fx - nx) // 2)
                self._filter = np.sqrt(np.outer(fsy, fsx[:fx // 2 + 1]))  # rfft2 layout

    def draw(self, seed, replicate, year, previous=None):
        """The field of one year.

        Parameters
        ----------
        seed, replicate, year : int
            Keys of the year's random numbers (stream ``rng.STREAM_ENV``).
        previous : (ny, nx) float64 ndarray or None
            Last year's standardised field, or None in the first year.

        Returns
        -------
        field, standardised : (ny, nx) float64 ndarray
            ``sd * z`` and ``z``; pass ``standardised`` as ``previous`` next year.
        """
        key = np.uint64(rng.year_key(seed, replicate, year, rng.STREAM_ENV))
        ny, nx = self.shape
        if self.method == "independent":
            e = np.empty(self.shape)
            _standard_normals(key, e)
        elif self.method == "uniform":
            e = np.empty((1, 1))
            _standard_normals(key, e)
            e = np.full(self.shape, e[0, 0])
        elif self.method == "modes":
            white = np.empty((self._ay.shape[1], self._ax_t.shape[0]))
            _standard_normals(key, white)
            e = np.empty(self.shape)
            _low_rank_field(self._ay, white, self._ax_t, e)
        else:
            white = np.empty(self._padded)
            _standard_normals(key, white)
            # pocketfft's threads share out whole 1-D transforms: the same result on any number
            workers = numba.get_num_threads()
            spectrum = scipy.fft.rfft2(white, workers=workers)
            spectrum *= self._filter
            smooth = scipy.fft.irfft2(spectrum, s=self._padded, workers=workers)
            py, px = self._pad
            e = np.ascontiguousarray(smooth[py:py + ny, px:px + nx])
        if previous is None:
            return self.sd * e, e
        a = self.autocorrelation
        field = np.empty(self.shape)
        _autoregress(previous, e, a, math.sqrt(1.0 - a * a), self.sd, field)
        return field, e

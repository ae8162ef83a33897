"""Dispersal kernels, the deterministic and stochastic engines, and emigration."""

from __future__ import annotations

import math

import numba
import numpy as np
import pytest
from scipy import integrate, ndimage, optimize, stats
from scipy.special import ndtr

from gridpop import config, rng
from gridpop._jit import njit
from gridpop.movement import kernels, placement
from gridpop.movement.barrier import thin
from gridpop.movement.convolution import EDGE_CODES, disperse_deterministic, settle_fields
from gridpop.movement.emigration import leaving_deterministic, leaving_stochastic
from gridpop.movement.kernels import (
    KERNEL_CODES,
    _alias_table,
    _radial_cdf,
    _radial_cell_masses,
    _radial_density,
    _scale,
    make_kernel,
)
from gridpop.movement.placement import (
    MULTINOMIAL_PER_CELL,
    _alias_draw,
    _row_blocks,
    disperse_stochastic,
)

KEY = rng.year_key(7, 0, 3, rng.STREAM_DISPERSAL)


def kernel(kind="gaussian", mean=1.0, cell=0.25, cell_h=None, **kw):
    return make_kernel(kind, mean_distance_m=mean, cell_w_m=cell,
                         cell_h_m=cell if cell_h is None else cell_h, **kw)


def offsets_distance(k, w, h):
    """Centre-to-centre distance of every stencil cell, shape of k.weights."""
    a = np.arange(-k.radius, k.radius + 1)
    return np.hypot(a[:, None] * h, a[None, :] * w)


def fold(g, n):
    m = g % (2 * n)
    return m if m < n else 2 * n - 1 - m


def landings(shape, k, edge):
    """Brute force: (source i, j, destination y, x, weight) for every stencil offset of every
    cell, folded back (reflecting) or dropped (absorbing) at the edge."""
    ny, nx = shape
    w = k.stencil
    for i in range(ny):
        for j in range(nx):
            for a in range(w.shape[0]):
                for b in range(w.shape[1]):
                    y, x = i + a - k.ry, j + b - k.rx
                    if not (0 <= y < ny and 0 <= x < nx):
                        if edge == "absorbing":
                            continue
                        y, x = fold(y, ny), fold(x, nx)
                    yield i, j, y, x, w[a, b]


def scatter(d, k, edge):
    """Brute force: every source cell sends weight w to each offset, folded or dropped."""
    arr = np.zeros_like(d)
    stay = np.zeros_like(d)
    for i, j, y, x, w in landings(d.shape, k, edge):
        arr[y, x] += d[i, j] * w
        if (y, x) == (i, j):
            stay[i, j] += d[i, j] * w
    return arr, stay


@pytest.fixture
def threads(parallel_kernels):
    """Restore numba's thread count after a test that changes it (with 2 threads, the
    parallel variants of the kernels run)."""
    n = numba.get_num_threads()
    yield
    numba.set_num_threads(n)


# ------------------------------------------------------------------------------------------
# Kernels


def test_registries_match_scenario_schema():
    """The option names the engine maps to codes are exactly those the scenario accepts."""
    assert tuple(KERNEL_CODES) == config.KERNELS
    assert tuple(EDGE_CODES) == config.EDGES
    assert sorted(KERNEL_CODES.values()) == list(range(len(KERNEL_CODES)))


@pytest.mark.parametrize("kind", list(KERNEL_CODES))
@pytest.mark.parametrize("cells", [(0.4, 0.4), (0.4, 0.55)])
def test_weights_normalised_and_symmetric(kind, cells):
    """Weights are a probability distribution, mirror-symmetric on both axes (and under
    transposition for square cells); the gaussian is the outer product of its 1-D weights
    (common practice: a radial kernel on a rectangular grid)."""
    w, h = cells
    k = kernel(kind, mean=1.3, cell=w, cell_h=h)
    assert k.weights.shape == (2 * k.radius + 1,) * 2
    assert k.radius == max(k.ry, k.rx)
    assert abs(k.weights.sum() - 1.0) < 1e-12
    assert (k.weights >= 0).all()
    np.testing.assert_array_equal(k.weights, k.weights[::-1])
    np.testing.assert_array_equal(k.weights, k.weights[:, ::-1])
    if w == h:
        np.testing.assert_allclose(k.weights, k.weights.T, rtol=1e-12, atol=1e-17)
    else:
        assert k.ry < k.rx
    if kind == "gaussian":
        np.testing.assert_allclose(np.outer(*k.separable), k.stencil, rtol=0, atol=1e-18)
    else:
        assert k.separable is None


@pytest.mark.parametrize("code, scale, p", [(1, 1.0, 0.0), (1, 0.15, 0.0), (1, 6.0, 0.0),
                                            (2, 1.0, 1.0), (2, 0.3, 1.5), (2, 30.0, 0.7)])
def test_cell_masses_match_scipy_dblquad(code, scale, p):
    """Cell-integrated masses of the exponential (common practice: e^(-r/a) / (2 pi a^2)) and
    2Dt (Clark et al. 1999, Ecology 80:1475) densities against scipy.integrate.dblquad, for the
    centre cell (cusp of the exponential), its neighbours and far cells, on 1 x 1.3 cells."""
    w, h = 1.0, 1.3
    q = _radial_cell_masses(code, scale, p, w, h, 5, 5, 100.0, False, kernels._GL_NODES,
                              kernels._GL_WEIGHTS, kernels._GL_THETA_NODES,
                              kernels._GL_THETA_WEIGHTS)
    if code == 1:
        def f(y, x):
            return math.exp(-math.hypot(x, y) / scale) / (2 * math.pi * scale ** 2)
    else:
        def f(y, x):
            return p / (math.pi * scale * (1 + (x * x + y * y) / scale) ** (p + 1))
    for ky, kx in [(0, 0), (0, 1), (1, 0), (1, 1), (2, 1), (5, 3)]:
        x0, x1 = (kx - 0.5) * w, (kx + 0.5) * w
        y0, y1 = (ky - 0.5) * h, (ky + 0.5) * h
        if ky == 0 and kx == 0:  # split at the cusp so that dblquad converges
            ref = 4 * integrate.dblquad(f, 0, x1, 0, y1, epsabs=0, epsrel=1e-12)[0]
        else:
            ref = integrate.dblquad(f, x0, x1, y0, y1, epsabs=0, epsrel=1e-12)[0]
        assert q[ky, kx] == pytest.approx(ref, rel=1e-9)


def test_gaussian_fine_cells_rayleigh_mean_and_sheppard():
    """Gaussian kernel, cells of sigma/4: the discretised mean displacement matches the Rayleigh
    mean sigma sqrt(pi/2) (common practice; reference-checks 7) within 0.3%; its mean squared
    displacement is 2 sigma^2 plus Sheppard's correction (w^2 + h^2)/12 for rounding to cell
    centres (Sheppard 1898, Proc. London Math. Soc. 29:353, from memory), and the mass beyond
    the first cell along an axis is exactly 2 (1 - Phi(h / 2 sigma)) (cell integration)."""
    sigma = 1.0
    mean = sigma * math.sqrt(math.pi / 2)
    w = h = sigma / 4
    k = kernel("gaussian", mean=mean, cell=w, max_distance_m=8 * sigma)
    r = offsets_distance(k, w, h)
    assert (k.weights * r).sum() == pytest.approx(mean, rel=3e-3)
    assert (k.weights * r * r).sum() == pytest.approx(2 * sigma ** 2 + (w * w + h * h) / 12,
                                                      rel=1e-9)
    c = k.radius
    off_axis = k.weights[:, np.abs(np.arange(-c, c + 1)) >= 1].sum()
    assert off_axis == pytest.approx(2 * ndtr(-h / (2 * sigma)), rel=1e-12)


@pytest.mark.parametrize("kind, cell, sampled_bias", [("gaussian", 1.0, -0.031),
                                                      ("exponential", 1.0, -0.051),
                                                      ("gaussian", 0.5, -0.0037),
                                                      ("exponential", 0.5, -0.0067)])
def test_integration_less_biased_than_centre_sampling(kind, cell, sampled_bias):
    """Reference-checks 7 (common practice): sampling the kernel at cell centres biases the mean
    distance by -3.1% (gaussian) / -5.1% (exponential) at cell = scale (sigma, a), -0.37% /
    -0.67% at cell = scale / 2. Reproduce those figures with centre sampling. On the coarse grid
    (cell = scale) the cell-integrated kernel is closer to the analytic mean (+1.2% and +0.5%).
    At cell = scale / 2 only the exponential is closer: measuring integrated cell masses at
    cell-centre distances adds Sheppard's h^2/12 per axis, +0.68% for the gaussian (the cell
    masses themselves are exact, see the fine-cell test)."""
    scale = 1.0
    mean = scale * math.sqrt(math.pi / 2) if kind == "gaussian" else 2 * scale
    k = kernel(kind, mean=mean, cell=cell)
    r = offsets_distance(k, cell, cell)
    f = np.exp(-r ** 2 / (2 * scale ** 2)) if kind == "gaussian" else np.exp(-r / scale)
    f = np.where(k.weights > 0, f, 0.0)
    f /= f.sum()
    sampled = (f * r).sum() / mean - 1
    integrated = (k.weights * r).sum() / mean - 1
    assert sampled == pytest.approx(sampled_bias, abs=0.0006)
    if cell == scale or kind == "exponential":
        assert abs(integrated) < abs(sampled)
    else:
        assert integrated == pytest.approx(0.0068, abs=0.0003)


def test_exponential_mean_distance():
    """Exponential kernel e^(-r/a) / (2 pi a^2): distance Gamma(2, a), mean 2a (reference-checks
    7, common practice); discretised on cells of a/4 within 0.3%."""
    a = 1.0
    k = kernel("exponential", mean=2 * a, cell=a / 4)
    assert _scale(1, 2 * a, 0.0) == a
    assert (k.weights * offsets_distance(k, a / 4, a / 4)).sum() == pytest.approx(2 * a,
                                                                                  rel=3e-3)


def test_2dt_mean_and_median_clark():
    """2Dt kernel (Clark et al. 1999, Ecology 80:1475; reference-checks 7): mean
    (sqrt(pi u)/2) Gamma(p - 1/2)/Gamma(p), distance CDF 1 - (1 + r^2/u)^-p, median
    sqrt(u (2^(1/p) - 1)). Worked values u=1, p=1: mean pi/2, median 1; u=4, p=1.5: mean 2,
    median 1.5328419. The discretised kernel (cells of 0.1, truncated at 40) matches the
    truncated analytic mean (scipy.integrate.quad) to 0.1% and median to 1% (ordering cells by
    centre distance costs ~0.4% at this resolution)."""
    assert _scale(2, math.pi / 2, 1.0) == pytest.approx(1.0, rel=1e-12)
    assert _scale(2, 2.0, 1.5) == pytest.approx(4.0, rel=1e-12)
    assert _radial_cdf(2, 1.0, 1.0, 1.0) == pytest.approx(0.5, rel=1e-12)
    assert _radial_cdf(2, 1.5328419, 4.0, 1.5) == pytest.approx(0.5, abs=1e-7)
    u, p, dmax = 4.0, 1.5, 40.0
    k = kernel("2dt", mean=2.0, tail=p, cell=0.1, max_distance_m=dmax)

    def cdf(x):
        return 1 - (1 + x * x / u) ** -p

    def density(x):  # of the distance
        return 2 * p * x / u * (1 + x * x / u) ** (-p - 1)

    mean_t = integrate.quad(lambda x: x * density(x), 0, dmax, limit=200)[0] / cdf(dmax)
    median_t = optimize.brentq(lambda x: cdf(x) / cdf(dmax) - 0.5, 0.1, dmax)
    r = offsets_distance(k, 0.1, 0.1).ravel()
    wts = k.weights.ravel()
    assert (wts * r).sum() == pytest.approx(mean_t, rel=1e-3)
    order = np.argsort(r, kind="stable")
    median_d = np.interp(0.5, np.cumsum(wts[order]), r[order])
    assert median_d == pytest.approx(median_t, rel=0.01)


def test_default_truncation_mass():
    """Default truncation where the distance CDF reaches 1 - 1e-6: Rayleigh quantile
    sigma sqrt(2 ln 1e6) (common practice) and the Gamma(2, a) quantile; the 2dt is capped at
    50 mean distances; and at the grid diagonal when the grid is given."""
    g = kernel("gaussian", mean=math.sqrt(math.pi / 2), cell=0.1)
    assert g.max_distance_m == pytest.approx(math.sqrt(2 * math.log(1e6)), rel=1e-12)
    e = kernel("exponential", mean=2.0, cell=0.5)
    assert 1 - _radial_cdf(1, e.max_distance_m, 1.0, 0.0) == pytest.approx(1e-6, rel=1e-9)
    t = kernel("2dt", mean=1.0, tail=1.5, cell=0.5)
    assert t.max_distance_m == pytest.approx(50.0)
    assert t.radius == 100
    small = kernel("2dt", mean=1.0, tail=1.5, cell=0.5, grid_shape=(30, 40))
    assert small.max_distance_m == pytest.approx(math.hypot(15.0, 20.0))


@pytest.mark.parametrize("kind", ["gaussian", "exponential"])
def test_default_truncation_keeps_cells_the_circle_touches(kind):
    """A kernel smaller than a cell (mean 0.2 cell): the default stencil keeps the neighbours the
    1 - 1e-6 circle reaches into, so the mass leaving the centre cell is within 1e-6 of the
    untruncated value (gaussian: 1 - erf(h / (2 sqrt(2) sigma))^2, common practice; the others:
    1 - centre-cell mass by scipy.integrate.dblquad). A given max distance keeps whole cells by
    centre distance: 0.9 cell keeps the centre only."""
    h = 1.0
    k = kernel(kind, mean=0.2, cell=h)
    assert k.radius == math.ceil(k.max_distance_m / h - 0.5) >= 1
    code = KERNEL_CODES[kind]
    scale = _scale(code, 0.2, 1.5)
    if kind == "gaussian":
        leave = 1 - math.erf(h / (2 * math.sqrt(2) * scale)) ** 2
    else:
        def f(y, x):
            return _radial_density(code, x * x + y * y, scale, 1.5)
        leave = 1 - 4 * integrate.dblquad(f, 0, h / 2, 0, h / 2, epsabs=0, epsrel=1e-12)[0]
    c = k.radius
    assert 1 - k.weights[c, c] == pytest.approx(leave, abs=1e-6)
    assert leave > 1e-4
    assert kernel(kind, mean=0.2, cell=h, max_distance_m=0.9).radius == 0


# ------------------------------------------------------------------------------------------
# Deterministic engine


def test_absorbing_edge_loss_is_gaussian_tail():
    """A unit mass at distance x from a straight absorbing edge loses 1 - Phi(x / sigma) (common
    practice: the gaussian's 1-D marginal is gaussian with the same sigma); cell integration
    makes this exact up to the 1e-6 truncation."""
    sigma = 3.0
    k = kernel("gaussian", mean=sigma * math.sqrt(math.pi / 2), cell=1.0)
    nx = 2 * k.radius + 11
    for i in (0, 1, 3, 6, 12):
        d = np.zeros((40, nx))
        d[i, nx // 2] = 1.0
        for method in ("stencil", "fft"):
            arr, _ = disperse_deterministic(d, k, "absorbing", method=method)
            assert 1.0 - arr.sum() == pytest.approx(ndtr(-(i + 0.5) / sigma), abs=1e-6)


@pytest.mark.parametrize("kind", ["gaussian", "exponential"])
@pytest.mark.parametrize("edge", list(EDGE_CODES))
def test_stencil_fft_reference_and_mass(kind, edge):
    """Direct stencil against scipy.ndimage.convolve (mode 'constant' for absorbing, 'reflect'
    = half-sample mirror for reflecting) and against the FFT, to 1e-10 on random input;
    reflecting conserves mass to 1e-12 relative; FFT output is never negative."""
    d = np.random.default_rng(5).random((57, 64)) * 10
    k = kernel(kind, mean=2.0, cell=0.5, cell_h=0.6, max_distance_m=4.0)
    st, _ = disperse_deterministic(d, k, edge, method="stencil")
    ft, _ = disperse_deterministic(d, k, edge, method="fft")
    ref = ndimage.convolve(d, k.stencil, mode="constant" if edge == "absorbing" else "reflect")
    np.testing.assert_allclose(st, ref, rtol=0, atol=1e-10)
    np.testing.assert_allclose(ft, st, rtol=0, atol=1e-10)
    assert (ft >= 0).all()
    if edge == "reflecting":
        for a in (st, ft):
            assert a.sum() == pytest.approx(d.sum(), rel=1e-12)
    else:
        assert st.sum() < d.sum()


@pytest.mark.parametrize("edge", list(EDGE_CODES))
def test_kernel_wider_than_grid_matches_brute_force(edge):
    """A kernel reaching several grid widths: the reflecting fold is applied repeatedly (mirror
    images, common practice) and the absorbing edge drops what leaves; arrivals and stayed
    against a brute-force scatter."""
    d = np.random.default_rng(2).random((5, 4))
    k = kernel("exponential", mean=3.0, cell=1.0, cell_h=1.2, max_distance_m=9.0)
    assert k.ry > 5 and k.rx > 4
    ref_a, ref_s = scatter(d, k, edge)
    for method in ("stencil", "fft"):
        arr, stay = disperse_deterministic(d, k, edge, method=method)
        np.testing.assert_allclose(arr, ref_a, rtol=0, atol=1e-12)
        np.testing.assert_allclose(stay, ref_s, rtol=0, atol=1e-14)


def patch_layout(rng_, ny=14, nx=17):
    labels = np.zeros((ny, nx), dtype=np.int32)
    labels[1:6, 1:7] = 1
    labels[8:13, 3:9] = 2
    labels[2:12, 11:16] = 3
    labels[4, 13] = 0
    settle = rng_.random((ny, nx)) < 0.75
    d = rng_.random((ny, nx)) * 5
    return d, labels, settle


def retention(d, labels, settle, k, edge, method="auto"):
    """Per patch (index 0: none), the dispersers ``d`` that settle in their own patch and that
    settle anywhere, from :func:`gridpop.movement.convolution.settle_fields` (as the engine counts
    them)."""
    f = settle_fields(labels, settle, k, edge, method=method)
    n = int(labels.max()) + 1
    own = np.bincount(labels.ravel(), weights=(d * f.own).ravel(), minlength=n)
    anywhere = np.bincount(labels.ravel(), weights=(d * f.anywhere).ravel(), minlength=n)
    own[0] = anywhere[0] = 0.0
    return own, anywhere


@pytest.mark.parametrize("kind", ["gaussian", "exponential"])
@pytest.mark.parametrize("edge", list(EDGE_CODES))
def test_patch_retention_brute_force(kind, edge):
    """Dispersers from patch p landing in settle cells of patch p, against a brute-force loop
    over sources and stencil offsets (definition)."""
    d, labels, settle = patch_layout(np.random.default_rng(11))
    k = kernel(kind, mean=1.5, cell=0.5, max_distance_m=2.0)
    ref = np.zeros(4)
    ref_from = np.zeros(4)
    for i, j, y, x, w in landings(d.shape, k, edge):
        p = labels[i, j]
        if p > 0 and settle[y, x]:
            ref_from[p] += d[i, j] * w
            if labels[y, x] == p:
                ref[p] += d[i, j] * w
    for method in ("stencil", "fft"):
        got, got_from = retention(d, labels, settle, k, edge, method=method)
        assert got[0] == 0.0
        np.testing.assert_allclose(got, ref, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(got_from, ref_from, rtol=1e-12, atol=1e-12)
        assert np.all(got_from >= got) and np.any(got_from > got)


def front_speed(k, method, r0=2.0, gens=120, nx=800):
    """Beverton-Holt growth N' = R N / (1 + (R - 1) N / K), K = 1, then dispersal of everyone;
    front = where the row mean crosses 1/2; speed = slope over the second half."""
    n = np.zeros((8, nx))
    n[:, :20] = 1.0
    pos = []
    for _ in range(gens):
        n = r0 * n / (1 + (r0 - 1) * n)
        n, _ = disperse_deterministic(n, k, "reflecting", method=method)
        m = n.mean(axis=0)
        i = np.flatnonzero(m >= 0.5)[-1]
        pos.append(i + (m[i] - 0.5) / (m[i] - m[i + 1]))
    t = np.arange(gens)
    late = t >= gens // 2
    return np.polyfit(t[late], np.array(pos)[late], 1)[0]


@pytest.mark.parametrize("method", ["stencil", "fft"])
def test_invasion_front_speed_kot(method):
    """Integrodifference spread speed c* = sigma sqrt(2 ln R0) for a gaussian kernel (Kot, Lewis
    and van den Driessche 1996, Ecology 77:2027, pages from memory; reference-checks 2): a strip
    8 x 800 cells of sigma/4 with reflecting edges behaves as the 1-D marginal (gaussian, same
    sigma). Simulated fronts lag c* by ~1% (Bramson's log correction); tolerance 3%. The FFT
    run checks that its round-off floor keeps the front from racing ahead."""
    sigma, cell = 1.0, 0.25
    k = kernel("gaussian", mean=sigma * math.sqrt(math.pi / 2), cell=cell)
    assert k.ry > 8  # the kernel folds several times across the strip
    c_star = sigma * math.sqrt(2 * math.log(2.0))
    assert c_star == pytest.approx(1.1774100225, rel=1e-10)
    speed = front_speed(k, method) * cell
    assert speed == pytest.approx(c_star, rel=0.03)
    assert speed < c_star


# ------------------------------------------------------------------------------------------
# Stochastic engine


def single_source(k, n, edge="reflecting", shape=None, at=None):
    shape = shape or (2 * k.ry + 3, 2 * k.rx + 3)
    d = np.zeros(shape)
    at = at or (shape[0] // 2, shape[1] // 2)
    d[at] = n
    ones = np.ones(shape, dtype=bool)
    labels = np.ones(shape, dtype=np.int32)
    return d, disperse_stochastic(d, ones, labels, 1, k, edge, KEY)


@pytest.fixture(params=["individual", "multinomial"])
def sampling(request, monkeypatch):
    """Force one sampling path of the stochastic engine."""
    monkeypatch.setattr(placement, "MULTINOMIAL_PER_CELL", np.inf if request.param == "individual"
                        else 0.0)
    return request.param


def test_stochastic_rayleigh_mean_displacement(sampling):
    """Simulated displacements of 200000 dispersers (gaussian kernel, cells of sigma/4) have mean
    sigma sqrt(pi/2) (Rayleigh, common practice; reference-checks 7): tolerance 4 standard
    errors (sd of a Rayleigh distance sigma sqrt(2 - pi/2)) plus the 0.3% discretisation bound
    of the kernel test."""
    sigma, n = 1.0, 200_000
    mean = sigma * math.sqrt(math.pi / 2)
    k = kernel("gaussian", mean=mean, cell=sigma / 4)
    d, (arr, stay, ret, _) = single_source(k, n)
    assert arr.sum() == n
    c = (d.shape[0] // 2, d.shape[1] // 2)
    y, x = np.indices(d.shape)
    dist = np.hypot(y - c[0], x - c[1]) * sigma / 4
    se = sigma * math.sqrt(2 - math.pi / 2) / math.sqrt(n)
    assert abs((arr * dist).sum() / n - mean) < 4 * se + 3e-3 * mean
    assert stay.sum() == arr[c] and ret[1] == n


def test_stochastic_landing_frequencies_chi_square(sampling):
    """Landing counts of 100000 dispersers from one cell against N * weights (Pearson 1900,
    Philosophical Magazine 50:157, from memory): chi-square over cells with expectation >= 5
    (the rest pooled) below its 0.9999 quantile."""
    n = 100_000
    k = kernel("exponential", mean=1.0, cell=0.5, cell_h=0.7, max_distance_m=6.0)
    d, (arr, *_) = single_source(k, n)
    c0, c1 = d.shape[0] // 2, d.shape[1] // 2
    obs = arr[c0 - k.ry:c0 + k.ry + 1, c1 - k.rx:c1 + k.rx + 1].ravel()
    exp = n * k.stencil.ravel()
    assert obs[exp == 0].sum() == 0
    big = exp >= 5
    small = (exp > 0) & ~big
    assert small.any()
    obs_b = np.append(obs[big], obs[small].sum())
    exp_b = np.append(exp[big], exp[small].sum())
    chi2 = ((obs_b - exp_b) ** 2 / exp_b).sum()
    assert big.sum() > 30
    assert chi2 < stats.chi2.ppf(0.9999, obs_b.size - 1)
    assert obs.sum() == n


def test_stochastic_absorbing_loss_and_conservation(sampling):
    """Whole individuals are conserved: reflecting keeps every one; absorbing loses, from a cell
    at distance x from an edge, a Binomial(N, 1 - Phi(x / sigma)) number (common practice),
    within 4 standard errors."""
    sigma, n = 2.0, 50_000
    k = kernel("gaussian", mean=sigma * math.sqrt(math.pi / 2), cell=1.0)
    shape = (30, 2 * k.rx + 5)
    for edge in EDGE_CODES:
        d, (arr, *_) = single_source(k, n, edge, shape, at=(2, shape[1] // 2))
        assert np.array_equal(arr, np.round(arr))
        lost = n - arr.sum()
        if edge == "reflecting":
            assert lost == 0
        else:
            q = ndtr(-2.5 / sigma)
            assert abs(lost - n * q) < 4 * math.sqrt(n * q * (1 - q))



@pytest.mark.parametrize("edge", list(EDGE_CODES))
def test_stochastic_matches_expectation_and_threads(edge, threads):
    """Many cells with few dispersers and one crowded cell (both sampling paths): exact
    conservation (reflecting); stayed and patch retention against the deterministic expectation
    within 4 sqrt(expected) (sums of independent Bernoulli counts, binomial standard error);
    bit-identical results for 1 and 2 numba threads (counter-based random numbers, Salmon et
    al. 2011)."""
    g = np.random.default_rng(3)
    d0, labels, settle = patch_layout(g, 40, 50)
    labels = np.kron(labels[:20, :25], np.ones((2, 2), dtype=np.int32))
    d = np.floor(d0 * 8)
    d[20, 25] = 200_000
    k = kernel("exponential", mean=1.5, cell=0.5, max_distance_m=3.0)
    runs = []
    for nt in (1, 2):
        numba.set_num_threads(nt)
        runs.append(disperse_stochastic(d, settle, labels, 3, k, edge, KEY))
    for a, b in zip(*runs, strict=True):
        np.testing.assert_array_equal(a, b)
    arr, stay, ret, ret_from = runs[0]
    if edge == "reflecting":
        assert arr.sum() == d.sum()
    assert arr.sum() <= d.sum()
    e_arr, e_stay = disperse_deterministic(d, k, edge)
    e_ret, e_from = retention(d, labels, settle, k, edge)
    assert abs(arr.sum() - e_arr.sum()) < 4 * math.sqrt(d.sum() - e_arr.sum() + 1)
    assert abs(stay.sum() - e_stay.sum()) < 4 * math.sqrt(e_stay.sum())
    assert ret[0] == 0
    for p in (1, 2, 3):
        assert abs(ret[p] - e_ret[p]) < 4 * math.sqrt(e_ret[p])
        assert abs(ret_from[p] - e_from[p]) < 4 * math.sqrt(e_from[p])


def _alias_probabilities(threshold, index):
    """Probability of each entry under an alias table: slot c (chance 1/S) gives c with
    probability threshold[c], else index[c]."""
    size = threshold.size
    return (threshold + np.bincount(index, weights=1.0 - threshold, minlength=size)) / size


@pytest.mark.parametrize("kind", list(KERNEL_CODES))
def test_alias_table_reproduces_kernel_weights(kind):
    """The alias table of a kernel gives each stencil entry exactly its weight (Walker 1977,
    ACM TOMS 3:253; Vose 1991, IEEE TSE 17:972, both from memory), to 1e-15 relative."""
    k = kernel(kind, mean=1.0, cell=0.3, cell_h=0.4)
    s = k.offsets.shape[0]
    assert s > 50 and k.alias_threshold.shape == (s,) and k.alias_index.shape == (s,)
    assert (k.alias_threshold >= 0).all() and (k.alias_threshold <= 1).all()
    w = k.stencil[k.offsets[:, 0] + k.ry, k.offsets[:, 1] + k.rx]
    np.testing.assert_allclose(_alias_probabilities(k.alias_threshold, k.alias_index), w,
                               rtol=1e-15 * s, atol=0)


@njit
def _alias_draws(threshold, index, key, m):
    out = np.empty(m, np.int64)
    for c in range(m):
        out[c] = _alias_draw(threshold, index, rng.uniform(rng.cell_key(key, c), 0))
    return out


def test_alias_draws_match_distribution_chi_square():
    """Draws through the alias table of an uneven distribution over 40 entries (one with weight
    1e-9, one with 0) against their probabilities: Pearson chi-square (scipy.stats.chisquare as
    reference library) over 400000 draws; the zero-weight entry is never drawn, and the alias
    probabilities equal the distribution (Walker 1977; Vose 1991, from memory)."""
    g = np.random.default_rng(9)
    probs = g.dirichlet(np.full(40, 0.5))
    probs[7] = 1e-9
    probs[11] = 0.0
    probs /= probs.sum()
    threshold, index = _alias_table(probs)
    np.testing.assert_allclose(_alias_probabilities(threshold, index), probs, rtol=1e-13,
                               atol=1e-17)
    m = 400_000
    x = _alias_draws(threshold, index, np.uint64(KEY), m)
    counts = np.bincount(x, minlength=probs.size)
    assert counts[11] == 0
    big = probs * m >= 5
    obs = np.append(counts[big], counts[~big].sum())
    exp = np.append(probs[big] * m, probs[~big].sum() * m)
    assert stats.chisquare(obs, exp).pvalue > 1e-3


@pytest.mark.parametrize("edge", list(EDGE_CODES))
def test_stochastic_kernel_wider_than_grid(edge, sampling):
    """A kernel reaching beyond a 5 x 4 grid (repeated folds at a reflecting edge): 100 000
    dispersers from each cell land as the brute-force scatter expects; arrivals and stayed each
    give a Pearson chi-square below its 0.9999 quantile (Pearson 1900, Philosophical Magazine
    50:157, from memory); the reflecting edge keeps every disperser."""
    k = kernel("exponential", mean=3.0, cell=1.0, cell_h=1.2, max_distance_m=9.0)
    d = np.full((5, 4), 100_000.0)
    settle = np.ones(d.shape, dtype=bool)
    labels = np.ones(d.shape, dtype=np.int32)
    arr, stay, ret, _ = disperse_stochastic(d, settle, labels, 1, k, edge, KEY)
    ref_a, ref_s = scatter(d, k, edge)
    if edge == "reflecting":
        assert arr.sum() == d.sum() and ret[1] == d.sum()
    for obs, exp in ((arr, ref_a), (stay, ref_s)):
        assert ((obs - exp) ** 2 / exp).sum() < stats.chi2.ppf(0.9999, d.size)


def test_stochastic_result_does_not_depend_on_row_blocks(monkeypatch, threads):
    """The row blocks of the stochastic engine (any number, same-parity blocks written in
    parallel) give bit-identical results: whole counts add exactly (definition of the counter-
    based design, Salmon et al. 2011, SC'11)."""
    g = np.random.default_rng(4)
    d = np.floor(g.gamma(0.6, 3.0, (150, 70)))
    d[70:80, 30] = 400.0
    labels = np.kron(np.arange(1, 16, dtype=np.int32).reshape(15, 1), np.ones((10, 70),
                                                                               np.int32))
    settle = g.random(d.shape) < 0.7
    k = kernel("gaussian", mean=1.0, cell=0.5)
    numba.set_num_threads(1)
    runs = []
    for per_thread in (1, 3, 40):
        monkeypatch.setattr(placement, "BLOCKS_PER_THREAD", per_thread)
        bounds = _row_blocks(d, MULTINOMIAL_PER_CELL * k.conditional.size, k.ry)
        assert (np.diff(bounds)[:-1] >= 2 * k.ry).all()
        runs.append((bounds.size, disperse_stochastic(d, settle, labels, 15, k, "reflecting",
                                                        KEY)))
    assert len({size for size, _ in runs}) == 3
    for _, res in runs[1:]:
        for a, b in zip(runs[0][1], res, strict=True):
            np.testing.assert_array_equal(a, b)


def test_stochastic_out_buffers(threads):
    """Results written into caller buffers (filled with garbage first) equal fresh ones, for 1
    and 2 threads (counter-based random numbers: the same draws); wrong buffers are refused."""
    g = np.random.default_rng(8)
    d = np.floor(g.gamma(0.8, 2.0, (60, 45)))
    labels = np.kron(np.arange(1, 4, dtype=np.int32).reshape(3, 1), np.ones((20, 45), np.int32))
    settle = g.random(d.shape) < 0.6
    k = kernel("exponential", mean=1.0, cell=0.5, max_distance_m=2.5)
    fresh = disperse_stochastic(d, settle, labels, 3, k, "absorbing", KEY)
    for nt in (1, 2):
        numba.set_num_threads(nt)
        out = (np.full(d.shape, 7.0), np.full(d.shape, -3.0))
        res = disperse_stochastic(d, settle, labels, 3, k, "absorbing", KEY, out=out)
        assert res[0] is out[0] and res[1] is out[1]
        for a, b in zip(fresh, res, strict=True):
            np.testing.assert_array_equal(a, b)
    with pytest.raises(ValueError, match="out must be"):
        disperse_stochastic(d, settle, labels, 3, k, "absorbing", KEY,
                              out=(np.zeros(d.shape), np.zeros((60, 44))))


def test_deterministic_thread_invariance(threads):
    """Same numbers for 1 and 2 threads: stencil (fixed summation order per cell) and FFT
    (pocketfft splits independent 1-D transforms)."""
    d = np.random.default_rng(1).random((300, 257))
    for kind, method in [("gaussian", "stencil"), ("exponential", "stencil"),
                         ("gaussian", "fft")]:
        k = kernel(kind, mean=1.0, cell=0.5, max_distance_m=2.0)
        runs = []
        for nt in (1, 2):
            numba.set_num_threads(nt)
            runs.append(disperse_deterministic(d, k, "reflecting", method=method)[0])
        np.testing.assert_array_equal(runs[0], runs[1])


# ------------------------------------------------------------------------------------------
# Emigration


def test_leaving_deterministic_formula():
    """Emigrants n * fraction * min(1, n/K)^dd (scenario schema, [dispersal]
    density_dependence); K <= 0 cells and dd = 0 lose the plain fraction."""
    n = np.array([[0.0, 5.0, 10.0, 20.0, 8.0]])
    k = np.array([[10.0, 10.0, 10.0, 10.0, 0.0]])
    np.testing.assert_allclose(leaving_deterministic(n, k, 0.4, 2.0),
                               [[0.0, 0.5, 4.0, 8.0, 3.2]], rtol=1e-15)
    np.testing.assert_allclose(leaving_deterministic(n, k, 0.4, 0.0), 0.4 * n, rtol=1e-15)


@pytest.mark.parametrize("n0, capacity, dd", [(50.0, 100.0, 1.0), (7.0, 100.0, 1.0),
                                              (7.0, 100.0, 0.0), (7.0, 5.0, 2.0)])
def test_leaving_stochastic_binomial(threads, n0, capacity, dd):
    """Binomial(n, f) per cell, f = 0.3 min(1, n/K)^dd: mean n f and variance n f (1 - f) (common
    practice) within 4 standard errors over 40000 cells, for n above rng.BERNOULLI_MAX and below
    it with f varying by cell (Bernoulli sums) or the plain fraction (binomial table); whole
    numbers, 0 <= leaving <= n; identical for 1 and 2 threads."""
    shape = (200, 200)
    n = np.full(shape, n0)
    k = np.full(shape, capacity)
    key = rng.year_key(7, 0, 3, rng.STREAM_EMIGRATION)
    runs = []
    for nt in (1, 2):
        numba.set_num_threads(nt)
        runs.append(leaving_stochastic(n, k, 0.3, dd, key))
    np.testing.assert_array_equal(runs[0], runs[1])
    x = runs[0]
    f = 0.3 * min(1.0, n0 / capacity) ** dd
    m = x.size
    var = n0 * f * (1 - f)
    assert np.array_equal(x, np.round(x)) and x.min() >= 0 and x.max() <= n0
    assert abs(x.mean() - n0 * f) < 4 * math.sqrt(var / m)
    assert abs(x.var() - var) < 4 * var * math.sqrt(2 / m)
    assert leaving_stochastic(np.zeros(shape), k, 0.3, dd, key).sum() == 0


def test_thin_binomial(threads):
    """Binomial thinning: Binomial(c, p) per cell, mean c p and variance c p (1 - p) (common
    practice) within 4 SE, for counts served by the binomial table (c <= rng.BERNOULLI_MAX) and
    above it; groups draw different numbers; identical for 1 and 2 threads; p = 0 and p = 1 keep
    none and all."""
    counts = np.where(np.arange(200)[:, None] < 100, 9.0, 40.0) * np.ones((200, 150))
    key = rng.year_key(7, 0, 3, rng.STREAM_BARRIER)
    runs = []
    for nt in (1, 2):
        numba.set_num_threads(nt)
        runs.append(thin(counts, 0.35, key, 2))
    np.testing.assert_array_equal(runs[0], runs[1])
    for c in (9.0, 40.0):
        x = runs[0][counts == c]
        var = c * 0.35 * 0.65
        assert abs(x.mean() - c * 0.35) < 4 * math.sqrt(var / x.size)
        assert abs(x.var() - var) < 4 * var * math.sqrt(2 / x.size)
    assert not np.array_equal(runs[0], thin(counts, 0.35, key, 3))
    assert thin(counts, 0.0, key, 2).sum() == 0
    np.testing.assert_array_equal(thin(counts, 1.0, key, 2), counts)


# ------------------------------------------------------------------------------------------
# Bad input


def test_bad_mean_distance():
    with pytest.raises(ValueError, match=r"^mean_distance_m = 0"):
        make_kernel("gaussian", mean_distance_m=0.0, cell_w_m=30, cell_h_m=30)
    with pytest.raises(ValueError, match=r"below a tenth of a cell.*30 x 30 m"):
        make_kernel("gaussian", mean_distance_m=2.9, cell_w_m=30, cell_h_m=30)
    make_kernel("gaussian", mean_distance_m=3.0, cell_w_m=30, cell_h_m=30)


def test_bad_max_distance_kind_tail_edge():
    kw = dict(mean_distance_m=100.0, cell_w_m=30.0, cell_h_m=30.0, grid_shape=(10, 20))
    with pytest.raises(ValueError, match=r"max_distance_m = 700 m is larger than the grid"):
        make_kernel("exponential", max_distance_m=700.0, **kw)
    make_kernel("exponential", max_distance_m=600.0, **kw)
    with pytest.raises(ValueError, match="max_distance_m = -1"):
        make_kernel("exponential", max_distance_m=-1.0, **kw)
    with pytest.raises(ValueError, match="'cauchy' is not a known kernel"):
        make_kernel("cauchy", **kw)
    with pytest.raises(ValueError, match="tail > 0.5"):
        make_kernel("2dt", tail=0.5, **kw)
    k = make_kernel("gaussian", **kw)
    with pytest.raises(ValueError, match="'periodic' is not known"):
        disperse_deterministic(np.zeros((10, 20)), k, "periodic")

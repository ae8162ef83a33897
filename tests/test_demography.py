"""Growth models, the births/deaths split, the kernels and environmental noise."""

from __future__ import annotations

import math

import numba
import numpy as np
import pytest
from scipy import optimize, stats

from gridpop import demography as dm
from gridpop import rng
from gridpop._jit import njit
from gridpop.config import GROWTH_MODELS

EXP, BH, RICKER, THETA, CEILING = (dm.MODEL_CODES[m] for m in GROWTH_MODELS)


def _grid(*arrays):
    return [np.ascontiguousarray(np.atleast_2d(np.asarray(a, dtype=np.float64))) for a in arrays]


def _run(n0, k, years, model, r, s=0.0, theta=1.0, allee_a=0.0, env=None):
    """Deterministic trajectory: array (years + 1, ...) of abundances."""
    n, k = _grid(n0, k)
    env = np.zeros_like(n) if env is None else _grid(env)[0]
    out, births, deaths = np.empty_like(n), np.empty_like(n), np.empty_like(n)
    path = [n.copy()]
    for _ in range(years):
        dm.step_deterministic(n, k, env, out, births, deaths, model, r, s, theta, allee_a)
        n = out.copy()
        path.append(n)
    return np.array(path)


def _stochastic(n, k, model, r, s, year, theta=1.0, allee_a=0.0, env=None, seed=3):
    n, k = _grid(n, k)
    env = np.zeros_like(n) if env is None else env
    out, births, deaths = np.empty_like(n), np.empty_like(n), np.empty_like(n)
    ks = np.uint64(rng.year_key(seed, 0, year, rng.STREAM_SURVIVAL))
    kb = np.uint64(rng.year_key(seed, 0, year, rng.STREAM_BIRTHS))
    dm.step_stochastic(n, k, env, out, births, deaths, model, r, s, theta, allee_a, ks, kb)
    return out, births, deaths


def test_model_codes_match_scenario_schema():
    """The kernel's model table and the scenario schema list the same models, in order."""
    assert tuple(dm.MODEL_CODES) == GROWTH_MODELS
    assert sorted(dm.MODEL_CODES.values()) == list(range(len(GROWTH_MODELS)))


@njit
def _fast_exp_array(x):
    out = np.empty_like(x)
    for j in range(x.size):
        out[j] = dm.fast_exp(x[j])
    return out


def test_fast_exp_matches_libm():
    """The vectorisable exp agrees with the C library's exp (math.exp as reference) to 2.5e-16
    relative wherever the result is a normal number, and handles the IEEE special values."""
    x = np.concatenate([np.linspace(-708.0, 709.7, 1_000_003), np.linspace(-1, 1, 100_001),
                        np.random.default_rng(5).normal(0.0, 3.0, 100_000)])
    ref = np.array([math.exp(v) for v in x])
    got = _fast_exp_array(x)
    assert np.max(np.abs(got - ref) / ref) < 2.5e-16
    sub = np.linspace(-745.0, -708.5, 10_001)  # subnormal results: absolute error
    ref_sub = np.array([math.exp(v) for v in sub])
    assert np.max(np.abs(_fast_exp_array(sub) - ref_sub)) < 1e-320
    assert dm.fast_exp(0.0) == 1.0
    assert dm.fast_exp(-800.0) == 0.0 and dm.fast_exp(-math.inf) == 0.0
    assert dm.fast_exp(710.0) == math.inf and dm.fast_exp(math.inf) == math.inf
    assert math.isnan(dm.fast_exp(math.nan))
    assert math.isfinite(dm.fast_exp(709.78))


@pytest.mark.parametrize("r", [0.7, -0.3])
def test_multiplier_formulas(r):
    """lambda(N, K) of each model against its closed form: Beverton and Holt 1957 (from memory),
    Ricker 1954 (from memory), theta-logistic (Gilpin and Ayala 1973, PNAS 70:3590, from memory),
    ceiling and exponential (common practice); K <= 0 gives 0."""
    er = math.exp(r)
    for n, k in [(0.0, 50.0), (10.0, 50.0), (50.0, 50.0), (120.0, 50.0), (3.0, 0.5)]:
        x = n / k
        expected = {
            EXP: er,
            BH: er / (1 + (er - 1) * x) if r > 0 else er,
            RICKER: math.exp(r * (1 - x)),
            THETA: math.exp(r * (1 - x ** 2.5)),
            CEILING: min(er, k / n) if n > 0 else er,
        }
        for model, value in expected.items():
            got = dm.multiplier(model, r, 2.5, n, k)
            assert got == pytest.approx(value, rel=1e-14, abs=1e-300)
    for model in dm.MODEL_CODES.values():
        assert dm.multiplier(model, r, 2.5, 10.0, 0.0) == 0.0
        assert dm.multiplier(model, r, 2.5, 10.0, -5.0) == 0.0


@pytest.mark.parametrize("s", [0.0, 0.4, 0.95])
def test_beverton_holt_closed_form(s):
    """Deterministic Beverton-Holt N(t) = K N0 / (N0 + (K - N0) R^-t) (Beverton and Holt 1957,
    Fishery Investigations II 19, from memory; closed form derived in reference-checks 1), R = 2,
    K = 100: N1 = 18.181818182, N2 = 30.769230769, N5 = 78.048780488, N10 = 99.128751210 from
    N0 = 10, to 1e-10 relative; any survival s splits the same multiplier."""
    big_r, k = 2.0, 100.0
    n0 = np.array([10.0, 1.0, 180.0])
    path = _run(n0, np.full(3, k), 10, BH, math.log(big_r), s=s)[:, 0, :]
    t = np.arange(11)[:, None]
    closed = k * n0 / (n0 + (k - n0) * big_r ** -t)
    np.testing.assert_allclose(path, closed, rtol=1e-10)
    worked = {1: 18.181818182, 2: 30.769230769, 5: 78.048780488, 10: 99.128751210}
    for year, value in worked.items():
        assert path[year, 0] == pytest.approx(value, abs=1e-8)


def _two_cycle(r, years=3000):
    path = _run([0.3], [1.0], years, RICKER, r)[:, 0, 0]
    return path


def test_ricker_equilibrium_stable_below_two():
    """Ricker N(t+1) = N exp(r (1 - N/K)): the equilibrium K is stable for 0 < r < 2 (May 1976,
    Nature 261:459; reference-checks 1): r = 1.9 converges to K."""
    path = _two_cycle(1.9, 2000)
    assert abs(path[-1] - 1.0) < 1e-9 and abs(path[-2] - 1.0) < 1e-9


@pytest.mark.parametrize("r, low, high", [(2.2, 0.4970594251, 1.5029405749),
                                          (2.5, 0.2895882165, 1.7104117835)])
def test_ricker_two_cycle(r, low, high):
    """Ricker 2-cycle above r = 2 (May 1976, Nature 261:459): points x1 + x2 = 2 with
    ln((2 - x1)/x1) = r (1 - x1) [derived, reference-checks 1]; r = 2.2 gives 0.4970594251 and
    1.5029405749, r = 2.5 gives 0.2895882165 and 1.7104117835 (units of K), to 1e-9."""
    path = _two_cycle(r)
    pair = sorted(path[-2:])
    assert pair[0] == pytest.approx(low, abs=1e-9)
    assert pair[1] == pytest.approx(high, abs=1e-9)
    x1 = optimize.brentq(lambda x: math.log((2 - x) / x) - r * (1 - x), 1e-6, 0.999)
    assert pair[0] == pytest.approx(x1, abs=1e-9)


def test_ricker_four_cycle():
    """Ricker at r = 2.6 (between the 2->4 doubling at 2.5265 and the 4->8 doubling; May 1976,
    Nature 261:459; reference-checks 1) settles on a 4-cycle that is not a 2-cycle."""
    path = _two_cycle(2.6, 5000)
    assert np.max(np.abs(path[-4:] - path[-8:-4])) < 1e-9
    assert np.max(np.abs(path[-2:] - path[-4:-2])) > 1e-2
    assert np.unique(np.round(path[-4:], 6)).size == 4


def test_exponential_growth():
    """Exponential model N(t) = N0 e^{r t} (common practice), growing and declining, to 1e-12."""
    for r in (0.1, -0.2):
        path = _run([7.0, 1000.0], [1.0, 1.0], 50, EXP, r, s=0.5)[:, 0, :]
        t = np.arange(51)[:, None]
        np.testing.assert_allclose(path, np.array([7.0, 1000.0]) * np.exp(r * t), rtol=1e-12)


def test_ceiling_caps_at_capacity():
    """Ceiling model (common practice): exponential growth min(N0 e^{r t}, K), and a population
    above K is cut to K in one year."""
    path = _run([5.0, 400.0], [100.0, 100.0], 30, CEILING, 0.3, s=0.6)[:, 0, :]
    t = np.arange(31)
    np.testing.assert_allclose(path[:, 0], np.minimum(5.0 * np.exp(0.3 * t), 100.0), rtol=1e-12)
    np.testing.assert_allclose(path[1:, 1], 100.0, rtol=1e-14)


def test_theta_logistic():
    """Theta-logistic N exp(r (1 - (N/K)^theta)) (Gilpin and Ayala 1973, PNAS 70:3590, from
    memory): theta = 1 is the Ricker model; for 0 < r theta < 2 the equilibrium is K."""
    n0, k = [3.0, 40.0, 150.0], [50.0, 50.0, 50.0]
    np.testing.assert_allclose(_run(n0, k, 40, THETA, 1.2, theta=1.0),
                               _run(n0, k, 40, RICKER, 1.2), rtol=1e-13)
    for theta in (0.5, 3.0):
        path = _run(n0, k, 400, THETA, 0.6, theta=theta)
        np.testing.assert_allclose(path[-1], 50.0, rtol=1e-9)


def test_deterministic_split_allee_environment_and_empty_habitat():
    """The births/deaths split by definition (ARCHITECTURE notes): survivors N min(s, L), births
    N max(L - s, 0) N/(N + A) (mate-finding Allee effect, Courchamp, Berec and Gascoigne 2008,
    Allee Effects in Ecology and Conservation, from memory), L = lambda e^env; K = 0 kills all."""
    n, k, env = _grid([10.0, 40.0, 25.0], [50.0, 50.0, 0.0], [0.3, -0.8, 0.1])
    out, births, deaths = np.empty_like(n), np.empty_like(n), np.empty_like(n)
    r, s, a = 0.5, 0.6, 20.0
    dm.step_deterministic(n, k, env, out, births, deaths, RICKER, r, s, 1.0, a)
    for j in range(2):
        nj, lam = n[0, j], math.exp(r * (1 - n[0, j] / 50.0) + env[0, j])
        assert deaths[0, j] == pytest.approx(nj * (1 - min(s, lam)), rel=1e-14)
        assert births[0, j] == pytest.approx(nj * max(lam - s, 0.0) * nj / (nj + a), rel=1e-14)
    assert births[0, 1] == 0.0  # lambda below s: no births
    assert out[0, 2] == 0.0 and births[0, 2] == 0.0 and deaths[0, 2] == 25.0
    np.testing.assert_allclose(out, n - deaths + births, rtol=1e-15)
    inplace = n.copy()
    dm.step_deterministic(inplace, k, env, inplace, births, deaths, RICKER, r, s, 1.0, a)
    assert np.array_equal(inplace, out)


def test_poisson_ricker_one_step_mean_and_variance():
    """Poisson-Ricker with s = 0 (Melbourne and Hastings 2008, Nature 454:100;
    reference-checks 9): one step from N = 50, K = 100, r = 1.5 has mean and variance
    105.8500008, within 4 SE over 40 000 cells; births and deaths are whole numbers and
    out = n - deaths + births exactly."""
    cells = (200, 200)
    out, births, deaths = _stochastic(np.full(cells, 50.0), np.full(cells, 100.0), RICKER, 1.5,
                                      0.0, year=1)
    m, size = 105.8500008, out.size
    assert abs(out.mean() - m) < 4 * math.sqrt(m / size)
    assert abs(out.var() - m) < 4 * math.sqrt((m + 2 * m * m) / size)  # var(s^2), Poisson
    assert np.array_equal(births, np.round(births)) and np.array_equal(deaths, np.full(cells, 50))
    assert np.array_equal(out, 50.0 - deaths + births)


@pytest.mark.parametrize("n0, capacity, allee_a", [
    (30.0, 60.0, 0.0), (30.0, 10.0, 0.0), (30.0, 60.0, 30.0), (6.0, 10.0, 0.0),
    (6.0, 1.0, 0.0), (6.0, 60.0, 8.0),
])
def test_binomial_survival_and_poisson_births_moments(n0, capacity, allee_a):
    """With survival s the stochastic step has mean N p + m and variance N p (1 - p) + m, p =
    min(s, L), m = N max(L - s, 0) N/(N + A) (independent binomial survivors and Poisson births;
    common practice), within 4 SE, for L above s, below s, and with an Allee effect, with N above
    and below rng.BERNOULLI_MAX (table, Bernoulli-sum and inversion or BTRS samplers; birth means
    below 10 by inversion, above by PTRS); deaths are Binomial(N, 1 - p), mean and variance
    within 4 SE; empty cells stay empty."""
    n = np.full((150, 200), n0)
    n[::7, ::5] = 0.0
    k = np.full_like(n, capacity)
    r, s = 0.8, 0.7
    out, births, deaths = _stochastic(n, k, BH, r, s, year=4, allee_a=allee_a)
    lam = math.exp(r) / (1 + (math.exp(r) - 1) * n0 / capacity)
    p = min(s, lam)
    m = n0 * max(lam - s, 0.0) * (n0 / (n0 + allee_a) if allee_a > 0 else 1.0)
    full = n > 0
    x = out[full]
    mean, var = n0 * p + m, n0 * p * (1 - p) + m
    assert abs(x.mean() - mean) < 4 * math.sqrt(var / x.size)
    assert abs(x.var() - var) < 4 * var * math.sqrt(2.2 / x.size)
    assert abs(births[full].mean() - m) < 4 * math.sqrt(m / x.size) + 1e-12
    dv = n0 * p * (1 - p)
    assert abs(deaths[full].mean() - n0 * (1 - p)) < 4 * math.sqrt(dv / x.size)
    assert abs(deaths[full].var() - dv) < 4 * dv * math.sqrt(2.2 / x.size)
    assert np.all(out[~full] == 0) and np.all(births[~full] == 0) and np.all(deaths[~full] == 0)
    assert np.all(deaths[full] >= 0) and np.all(deaths[full] <= n0)
    assert np.array_equal(out, n - deaths + births)
    assert np.array_equal(deaths, np.round(deaths)) and np.array_equal(births, np.round(births))


@pytest.mark.parametrize("big_r, generations", [(1.2, 60), (1.5, 30), (2.0, 30)])
def test_branching_process_extinction(big_r, generations):
    """Galton-Watson process with Poisson(R) offspring (exponential model, s = 0, one founder per
    cell): the extinction fraction over 10 000 cells matches the smallest root of q = exp(R (q -
    1)) (Harris 1963, The Theory of Branching Processes, from memory; reference-checks 3:
    R = 1.2: 0.6863016690, 1.5: 0.4171883561, 2.0: 0.2031878700) within 4 SE."""
    q = optimize.brentq(lambda v: v - math.exp(big_r * (v - 1)), 0.0, 1.0 - 1e-9)
    reference = {1.2: 0.6863016690, 1.5: 0.4171883561, 2.0: 0.2031878700}[big_r]
    assert q == pytest.approx(reference, abs=1e-9)
    n = np.ones((100, 100))
    k = np.ones_like(n)
    for year in range(generations):
        n, births, deaths = _stochastic(n, k, EXP, math.log(big_r), 0.0, year, seed=11)
    extinct = np.mean(n == 0)
    assert abs(extinct - q) < 4 * math.sqrt(q * (1 - q) / n.size)


def _lag_correlations(noise, draws, lags, axis):
    """Per-draw mean products of the standardised field at the given lags: (draws, lags)."""
    est = np.empty((draws, len(lags)))
    for d in range(draws):
        _, z = noise.draw(5, d, 0)
        z = z if axis == 1 else z.T
        est[d] = [np.mean(z[:, :-h] * z[:, h:]) for h in lags]
    return est


@pytest.mark.parametrize("cell_w, cell_h, length", [(30.0, 30.0, 90.0), (30.0, 60.0, 100.0)])
def test_noise_spatial_correlation_fft(cell_w, cell_h, length):
    """Correlation of the standardised field at lags 1..5 cells along each axis equals
    exp(-(d / L)^2) (Gaussian correlation of white noise filtered by a Gaussian of std L/2,
    common practice) within 4 SE over draws; variance 1 and the field is sd times it."""
    noise = dm.EnvironmentalNoise((60, 70), cell_w, cell_h, 0.3, length, 0.0)
    assert noise.method == "fft"
    lags = [1, 2, 3, 4, 5]
    for axis, cell in ((1, cell_w), (0, cell_h)):
        est = _lag_correlations(noise, 40, lags, axis)
        target = np.exp(-((np.array(lags) * cell / length) ** 2))
        se = est.std(axis=0, ddof=1) / math.sqrt(est.shape[0])
        assert np.all(np.abs(est.mean(axis=0) - target) < 4 * se + 1e-12)
    fields = [noise.draw(5, d, 1) for d in range(40)]
    var = np.array([np.mean(z * z) for _, z in fields])
    assert abs(var.mean() - 1.0) < 4 * var.std(ddof=1) / math.sqrt(var.size)
    f, z = fields[0]
    assert np.array_equal(f, 0.3 * z) and f.shape == (60, 70) and f.flags.c_contiguous


def test_noise_spatial_correlation_long_range():
    """A correlation length near the grid size uses the Fourier-mode sum; the correlation of
    two cells across 5 000 draws equals exp(-(d / L)^2) (common practice) within 4 SE of a
    correlation estimate, (1 - rho^2) / sqrt(n) (Fisher 1915, Biometrika 10:507, from memory),
    and each cell has variance 1."""
    noise = dm.EnvironmentalNoise((30, 40), 50.0, 50.0, 1.0, 1000.0, 0.0)
    assert noise.method == "modes"
    draws = 5000
    lags = [0, 5, 10, 20, 39]
    samples = np.array([noise.draw(9, d, 2)[1][12, lags] for d in range(draws)])
    assert abs(samples[:, 0].var() - 1.0) < 4 * math.sqrt(2.0 / draws)
    for i, h in enumerate(lags[1:], start=1):
        rho = math.exp(-((h * 50.0 / 1000.0) ** 2))
        got = np.corrcoef(samples[:, 0], samples[:, i])[0, 1]
        assert abs(got - rho) < 4 * (1 - rho ** 2) / math.sqrt(draws)


def test_noise_many_modes_spatial_correlation():
    """A correlation length of 20 cells needs more than 64 Fourier modes along x, where the mode
    sum still costs less than the FFT torus and is taken: correlation at lags 1..15 cells along
    each axis equals exp(-(d / L)^2) (common practice) within 4 SE over draws."""
    noise = dm.EnvironmentalNoise((100, 150), 30.0, 30.0, 0.3, 600.0, 0.0)
    assert noise.method == "modes" and noise._ax_t.shape[0] > 64
    lags = [1, 5, 10, 15]
    for axis in (1, 0):
        est = _lag_correlations(noise, 60, lags, axis)
        target = np.exp(-((np.array(lags) * 30.0 / 600.0) ** 2))
        se = est.std(axis=0, ddof=1) / math.sqrt(est.shape[0])
        assert np.all(np.abs(est.mean(axis=0) - target) < 4 * se + 1e-12)


def test_noise_independent_and_uniform_limits():
    """L = 0: cells independent (lag-1 correlation within 4/sqrt(n) of 0) with variance sd^2; L
    far above the grid diagonal: one standard normal for the whole landscape (KS test against
    N(0, 1), scipy.stats.kstest)."""
    noise = dm.EnvironmentalNoise((80, 90), 30.0, 30.0, 0.5, 0.0, 0.0)
    f, z = noise.draw(1, 0, 0)
    assert abs(np.corrcoef(z[:, :-1].ravel(), z[:, 1:].ravel())[0, 1]) < 4 / math.sqrt(z.size)
    assert abs(np.corrcoef(z[:-1].ravel(), z[1:].ravel())[0, 1]) < 4 / math.sqrt(z.size)
    assert abs(f.var() - 0.25) < 4 * 0.25 * math.sqrt(2.0 / f.size)
    assert stats.kstest(z.ravel(), "norm").pvalue > 1e-3
    flat = dm.EnvironmentalNoise((80, 90), 30.0, 30.0, 0.5, 1e6, 0.0)
    values = []
    for d in range(400):
        f, z = flat.draw(1, d, 0)
        assert np.ptp(f) == 0.0
        values.append(z[0, 0])
    assert stats.kstest(values, "norm").pvalue > 1e-3


def test_noise_ar1_in_time():
    """z_t = a z_(t-1) + sqrt(1 - a^2) e_t keeps unit variance and has lag-1 correlation a
    (AR(1) process, Box and Jenkins 1970, Time Series Analysis, from memory): estimated per cell
    over 30 years, 4 SE across independent cells; the same seed gives the same years."""
    a = 0.6
    noise = dm.EnvironmentalNoise((40, 50), 30.0, 30.0, 0.2, 0.0, a)
    z, fields = None, []
    for year in range(30):
        f, z = noise.draw(2, 0, year, z)
        fields.append(z)
    zs = np.array(fields)
    lag1 = np.mean(zs[1:] * zs[:-1], axis=0).ravel()
    assert abs(lag1.mean() - a) < 4 * lag1.std(ddof=1) / math.sqrt(lag1.size)
    var = np.mean(zs * zs, axis=0).ravel()
    assert abs(var.mean() - 1.0) < 4 * var.std(ddof=1) / math.sqrt(var.size)
    again = noise.draw(2, 0, 1, fields[0])[1]
    assert np.array_equal(again, fields[1])
    assert not np.array_equal(noise.draw(2, 1, 0)[1], fields[0])


@pytest.mark.parametrize("kwargs, key", [
    (dict(sd=-0.1), "env_sd"), (dict(correlation_m=-5.0), "env_correlation_m"),
    (dict(autocorrelation=1.0), "env_autocorrelation"), (dict(shape=(0, 4)), "shape"),
    (dict(cell_w_m=0.0), "cell size"),
])
def test_noise_rejects_bad_values(kwargs, key):
    """Out-of-range noise settings raise ValueError naming the key."""
    args = dict(shape=(5, 6), cell_w_m=30.0, cell_h_m=30.0, sd=0.1, correlation_m=10.0,
                autocorrelation=0.0) | kwargs
    with pytest.raises(ValueError, match=key):
        dm.EnvironmentalNoise(**args)


def test_thread_count_invariance(parallel_kernels):
    """Kernels and noise fields are bit-identical with 1 and 2 numba threads (counter-based
    random numbers; reproducibility requirement of the project)."""
    n = np.floor(np.random.default_rng(0).gamma(0.7, 40.0, (97, 61)))
    k = np.full_like(n, 35.0)
    noises = [dm.EnvironmentalNoise(n.shape, 30.0, 30.0, 0.3, length, 0.5)
              for length in (0.0, 120.0, 4000.0)]
    assert [x.method for x in noises] == ["independent", "fft", "modes"]

    def run():
        results = []
        prev = [None] * len(noises)
        for year in range(3):
            fields = []
            for i, noise in enumerate(noises):
                f, prev[i] = noise.draw(4, 2, year, prev[i])
                fields.append(f)
            env = fields[1]
            results.extend(fields)
            results.extend(_stochastic(n, k, THETA, 0.4, 0.6, year, theta=1.7, allee_a=3.0,
                                       env=env))
            results.append(_run(n, k, 2, RICKER, 0.9, s=0.3, allee_a=2.0, env=env)[-1])
        return results

    old = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = run()
        numba.set_num_threads(2)
        two = run()
    finally:
        numba.set_num_threads(old)
    assert len(one) == len(two)
    for a, b in zip(one, two, strict=True):
        assert np.array_equal(a, b)


@pytest.mark.parametrize("model", sorted(dm.MODEL_CODES))
def test_uniform_deviation_row_equals_the_same_deviation_per_cell(model):
    """A row's single environmental deviation (size-1 ``env``) gives exactly what that
    deviation repeated in every cell gives (the engine's shortcut without noise)."""
    rng = np.random.default_rng(5)
    nx = 37
    n = np.floor(rng.uniform(0.0, 30.0, nx))
    k = np.where(rng.random(nx) < 0.8, rng.uniform(5.0, 40.0, nx), 0.0)
    results = []
    for env in (np.full(1, 0.3), np.full(nx, 0.3)):
        out, births, deaths = np.empty(nx), np.empty(nx), np.empty(nx)
        dm.grow_row(n, k, env, out, births, deaths, dm.MODEL_CODES[model], 0.6, 0.5, 1.5, 0.0,
                    False, np.uint64(0), np.uint64(0), 0)
        results.append(np.concatenate([out, births, deaths]))
    np.testing.assert_array_equal(results[0], results[1])
    assert results[0].sum() > 0

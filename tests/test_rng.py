"""Counter-based uniforms, normals and the Poisson and binomial samplers against scipy.stats."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from gridpop import rng
from gridpop._jit import njit

DRAWS = 200_000


@njit
def _poisson_draws(lam, key, m):
    out = np.empty(m, np.int64)
    for c in range(m):
        out[c] = rng.poisson(lam, rng.cell_key(key, c))
    return out


@njit
def _binomial_draws(n, p, key, m):
    out = np.empty(m, np.int64)
    for c in range(m):
        out[c] = rng.binomial(n, p, rng.cell_key(key, c))
    return out


@njit
def _uniforms(key, cells, counters, cell_offset, counter_offset):
    out = np.empty(cells * counters)
    for c in range(cells):
        ck = rng.cell_key(key, c + cell_offset)
        for k in range(counters):
            out[c * counters + k] = rng.uniform(ck, k + counter_offset)
    return out


@njit
def _normals(key, m):
    out = np.empty(m)
    for c in range(m):
        out[c] = rng.normal(rng.cell_key(key, c), 0)
    return out


def _key(seed=1, replicate=0, year=0, stream=rng.STREAM_BIRTHS):
    return np.uint64(rng.year_key(seed, replicate, year, stream))


def _chi_square_pvalue(x, dist):
    """Pearson chi-square of integer draws against a scipy.stats discrete distribution, over (up
    to) 100 bins of about equal probability cut at integers, tails included in the end bins."""
    cuts = np.unique(dist.ppf(np.linspace(0.0, 1.0, 101)[1:-1]))
    cuts = cuts[dist.cdf(cuts) < 1.0 - 1e-12]
    observed = np.histogram(x, bins=np.concatenate([[-np.inf], cuts + 0.5, [np.inf]]))[0]
    expected = np.diff(np.concatenate([[0.0], dist.cdf(cuts), [1.0]])) * x.size
    assert cuts.size >= 1 and expected.min() > 50
    return stats.chisquare(observed, expected).pvalue


def _assert_moments(x, dist):
    """Sample mean and variance within 4 standard errors of the distribution's (SE of the
    variance from the fourth moment: var(s^2) ~ sigma^4 (excess kurtosis + 2) / n)."""
    mean, var, kurt = (float(v) for v in dist.stats(moments="mvk"))
    se_mean = math.sqrt(var / x.size)
    se_var = var * math.sqrt((kurt + 2.0) / x.size)
    assert abs(x.mean() - mean) < 4 * se_mean
    assert abs(x.var() - var) < 4 * se_var


@pytest.mark.parametrize("lam", [0.05, 1.0, 4.5, 9.999, 10.0, 27.3, 1_000.0, 1e6])
def test_poisson_matches_scipy(lam):
    """Poisson sampler (inversion below 10, PTRS of Hoermann 1993, Insurance: Mathematics and
    Economics 12:39, from 10 on) against scipy.stats.poisson: chi-square goodness of fit of the
    pmf, mean and variance within 4 SE (reference library: scipy)."""
    x = _poisson_draws(lam, _key(), DRAWS)
    dist = stats.poisson(lam)
    assert x.min() >= 0
    assert _chi_square_pvalue(x, dist) > 1e-3
    _assert_moments(x, dist)


def test_poisson_boundaries():
    """lam <= 0 (and NaN) gives 0; a tiny mean gives almost always 0, with P(X >= 1) = 1 - e^-lam
    within 4 SE (scipy.stats.poisson as reference)."""
    ck = rng.cell_key(_key(), 3)
    for lam in (0.0, -1.0, -1e300, math.nan):
        assert rng.poisson(lam, np.uint64(ck)) == 0
    lam = 1e-3
    x = _poisson_draws(lam, _key(), DRAWS)
    p = stats.poisson(lam).sf(0)
    assert abs(np.mean(x >= 1) - p) < 4 * math.sqrt(p * (1 - p) / DRAWS)


@pytest.mark.parametrize("n, p", [
    (1, 0.3), (10, 0.5), (16, 0.03), (16, 0.52), (16, 0.97), (17, 0.5), (50, 0.1), (19, 0.52),
    (200, 0.05), (100, 0.3), (1000, 0.7), (40, 0.97), (10**6, 1e-6), (10**6, 0.3),
    (10**6, 0.999999), (3_000_000_000, 0.5),
])
def test_binomial_matches_scipy(n, p):
    """Binomial sampler (a sum of n Bernoulli trials for n <= BERNOULLI_MAX = 16; inversion for
    n p < 10, BTRS of Hoermann 1993, J. Statist. Comput. Simul. 46:101, otherwise; symmetry for
    p > 0.5) against scipy.stats.binom: chi-square goodness of fit of the pmf, mean and variance
    within 4 SE (reference library: scipy)."""
    x = _binomial_draws(n, p, _key(stream=rng.STREAM_SURVIVAL), DRAWS)
    dist = stats.binom(n, p)
    assert x.min() >= 0 and x.max() <= n
    assert _chi_square_pvalue(x, dist) > 1e-3
    _assert_moments(x, dist)


@njit
def _table_draws(table, n, key, m):
    out = np.empty(m, np.int64)
    for c in range(m):
        out[c] = rng.binomial_inversion(table, n, rng.uniform(rng.cell_key(key, c), 0))
    return out


def _ppf_agrees(draw, u, dist):
    """``draw(u)`` against ``dist.ppf(u)`` (scipy) for every u not within 1e-12 of a CDF value,
    where the rounding of the CDF may decide either way; returns how many were compared."""
    k = np.array([draw(v) for v in u])
    ref = dist.ppf(u)
    near = (np.abs(dist.cdf(ref) - u) < 1e-12) | (np.abs(dist.cdf(ref - 1) - u) < 1e-12)
    np.testing.assert_array_equal(k[~near], ref[~near])
    return int((~near).sum())


@pytest.mark.parametrize("p", [0.0, 1e-4, 0.2, 0.6, 0.999, 1.0])
def test_binomial_table_is_the_binomial_cdf(p):
    """binomial_table rows are the CDF of Binomial(n, p), n = 0..16, padded with ones (scipy.stats
    .binom as reference library, 1e-14), and binomial_inversion returns the quantile
    scipy.stats.binom.ppf of 300 uniforms per n, among them uniforms deep in both tails
    (inversion: Devroye 1986, Non-Uniform Random Variate Generation, from memory)."""
    table = rng.binomial_table(p)
    assert table.shape == (rng.BERNOULLI_MAX + 1, rng.BERNOULLI_MAX)
    g = np.random.default_rng(5)
    u = np.concatenate([g.random(280), 10.0 ** -g.uniform(1, 15, 10),
                        1 - 10.0 ** -g.uniform(1, 15, 10)])
    compared = 0
    for n in range(rng.BERNOULLI_MAX + 1):
        dist = stats.binom(n, p)
        np.testing.assert_allclose(table[n, :n], dist.cdf(np.arange(n)), rtol=0, atol=1e-14)
        assert (table[n, n:] == 1.0).all()
        compared += _ppf_agrees(lambda v, n=n: rng.binomial_inversion(table, n, v), u, dist)
    assert compared > 0.9 * u.size * (rng.BERNOULLI_MAX + 1)


@pytest.mark.parametrize("n, p", [(1, 0.3), (5, 0.2), (16, 0.6)])
def test_binomial_table_draws_match_scipy(n, p):
    """Draws of binomial_inversion on the counter-based uniforms (the path of the stochastic
    kernels when many cells share one probability) against scipy.stats.binom: chi-square of the
    pmf, mean and variance within 4 SE (reference library: scipy)."""
    x = _table_draws(rng.binomial_table(p), n, _key(stream=rng.STREAM_EMIGRATION), DRAWS)
    dist = stats.binom(n, p)
    assert _chi_square_pvalue(x, dist) > 1e-3
    _assert_moments(x, dist)


@pytest.mark.parametrize("lam", [0.01, 0.7, 3.0, 6.5, 9.9])
def test_poisson_inversion_is_the_poisson_quantile(lam):
    """poisson_inversion(lam, exp(-lam), u) is the quantile scipy.stats.poisson.ppf(u) for 2000
    uniforms, among them uniforms deep in the upper tail that run past the branch-free block of
    POISSON_BLOCK terms (reference library: scipy)."""
    g = np.random.default_rng(6)
    u = np.concatenate([g.random(1980), 1 - 10.0 ** -g.uniform(1, 15, 20)])
    dist = stats.poisson(lam)
    em = math.exp(-lam)
    compared = _ppf_agrees(lambda v: rng.poisson_inversion(lam, em, v), u, dist)
    assert compared > 0.99 * u.size
    if lam >= 3.0:
        assert dist.ppf(u).max() > rng.POISSON_BLOCK


def test_binomial_boundaries():
    """p <= 0 gives 0 and p >= 1 gives n; n <= 0 gives 0 (definition of the binomial)."""
    ck = np.uint64(rng.cell_key(_key(), 11))
    assert rng.binomial(25, 0.0, ck) == 0
    assert rng.binomial(25, -0.5, ck) == 0
    assert rng.binomial(25, math.nan, ck) == 0
    assert rng.binomial(25, 1.0, ck) == 25
    assert rng.binomial(25, 1.5, ck) == 25
    assert rng.binomial(0, 0.5, ck) == 0
    assert rng.binomial(-3, 0.5, ck) == 0
    assert rng.binomial(10**12, 1.0, ck) == 10**12


def test_uniform_is_uniform():
    """Uniforms over cells and counters pass a Kolmogorov-Smirnov test against U(0, 1)
    (scipy.stats.kstest as reference) and lie in the open interval (0, 1)."""
    u = _uniforms(_key(), 20_000, 10, 0, 0)
    assert 0.0 < u.min() and u.max() < 1.0
    assert stats.kstest(u, "uniform").pvalue > 1e-3


@pytest.mark.parametrize("other", [
    dict(replicate=1), dict(year=1), dict(stream=rng.STREAM_SURVIVAL), dict(seed=8),
    dict(cell_offset=1), dict(counter_offset=1),
])
def test_neighbouring_keys_give_independent_streams(other):
    """Streams for neighbouring replicates, years, streams, seeds, cells and counters are
    uncorrelated: Pearson correlation within 4/sqrt(n) of 0, and the pairs (u_a, u_b) fill a 10 x
    10 grid uniformly (chi-square, scipy.stats.chisquare) (common practice for testing generators;
    Salmon et al. 2011, SC'11, for the counter-based design)."""
    m = 100_000
    offsets = {k: other.pop(k) for k in ("cell_offset", "counter_offset") if k in other}
    a = _uniforms(_key(), m, 1, 0, 0)
    b = _uniforms(_key(**other), m, 1, offsets.get("cell_offset", 0),
                  offsets.get("counter_offset", 0))
    assert not np.array_equal(a, b)
    assert abs(np.corrcoef(a, b)[0, 1]) < 4 / math.sqrt(m)
    counts = np.histogram2d(a, b, bins=10, range=[[0, 1], [0, 1]])[0].ravel()
    assert stats.chisquare(counts).pvalue > 1e-3


def test_normal_is_standard_normal():
    """Box-Muller normals pass a Kolmogorov-Smirnov test against N(0, 1) (scipy.stats.kstest as
    reference; Box and Muller 1958, Ann. Math. Statist. 29:610, from memory)."""
    z = _normals(_key(stream=rng.STREAM_ENV), DRAWS)
    assert stats.kstest(z, "norm").pvalue > 1e-3
    assert abs(z.mean()) < 4 / math.sqrt(DRAWS)
    assert abs(z.var() - 1.0) < 4 * math.sqrt(2.0 / DRAWS)

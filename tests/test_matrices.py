"""Projection matrices: validation, diagnostics, the Weibull Leslie matrix, the check lines."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg
from scipy import optimize, special, stats

from gridpop import matrices as mx

# /work/shared/reference-checks.md section 8 (invented example): Leslie 1945, Biometrika 33:183;
# Caswell 2001, Matrix Population Models, 2nd ed.
REF_T = [[0.0, 0.0, 0.0], [0.5, 0.0, 0.0], [0.0, 0.4, 0.0]]
REF_F = [[0.0, 1.5, 2.0], [0.0, 0.0, 0.0], [0.0, 0.0, 0.0]]


def _leslie(fertility, survival):
    """(transitions, fecundity) of a plain Leslie matrix: first row ``fertility``, subdiagonal
    ``survival``, no survival out of the last class."""
    s = len(fertility)
    t, f = np.zeros((s, s)), np.zeros((s, s))
    t[np.arange(1, s), np.arange(s - 1)] = survival
    f[0] = fertility
    return t, f


def _random_stage_matrix(rng, s):
    """Random non-negative primitive matrix pair: every stage survives to every stage with some
    probability (columns sum below 1) and every stage breeds into the first."""
    t = rng.uniform(0.05, 1.0, (s, s))
    t *= rng.uniform(0.3, 0.95, s) / t.sum(axis=0)
    f = np.zeros((s, s))
    f[0] = rng.uniform(0.1, 3.0, s)
    return t, f


def _lambda(a):
    """Dominant eigenvalue by numpy's general eigenvalue routine (the real one of largest
    modulus; Perron-Frobenius)."""
    values = np.linalg.eigvals(a)
    return float(values[np.argmax(np.abs(values))].real)


def test_reference_leslie_example():
    """Section 8 of reference-checks.md (Leslie 1945; Caswell 2001): F = (0, 1.5, 2.0),
    P1 = 0.5, P2 = 0.4. Tolerance 1e-9 for the values given to 10 digits, half a unit of the
    seventh decimal for those given to 7."""
    d = mx.diagnostics(REF_T, REF_F)
    assert d.lam == pytest.approx(1.0615173516, abs=1e-9)
    np.testing.assert_allclose(d.stable_distribution, [0.6066067, 0.2857262, 0.1076671],
                               rtol=0, atol=6e-8)
    np.testing.assert_allclose(d.reproductive_values, [1.0, 2.1230347, 1.8840954],
                               rtol=0, atol=6e-8)
    assert d.r0 == pytest.approx(1.15, abs=1e-12)
    assert d.generation_time == pytest.approx(2.3410966, abs=6e-8)
    assert d.stable_distribution.sum() == pytest.approx(1.0, abs=1e-15)


def test_reference_damping_ratio_from_the_characteristic_equation():
    """Leslie 1945: the eigenvalues of a Leslie matrix are the roots of
    lambda^3 = F1 lambda^2 + F2 P1 lambda + F3 P1 P2, here lambda^3 - 0.75 lambda - 0.4 (solved
    with numpy.roots, independent of the eigen-decomposition); damping ratio = lambda_1 /
    |lambda_2| (Caswell 2001 ch. 4)."""
    roots = sorted(np.roots([1.0, 0.0, -0.75, -0.4]), key=abs, reverse=True)
    d = mx.diagnostics(REF_T, REF_F)
    assert d.lam == pytest.approx(roots[0].real, abs=1e-12)
    assert d.damping_ratio == pytest.approx(abs(roots[0]) / abs(roots[1]), rel=1e-10)


@pytest.mark.parametrize("seed", range(8))
def test_random_primitive_matrices_agree_with_scipy(seed):
    """lambda, w and v are the dominant eigenvalue and eigenvectors that scipy.linalg.eig
    returns (right) and that numpy.linalg.eig returns for A transposed (left), normalised; the
    damping ratio is lambda over the second largest modulus (Caswell 2001 ch. 4)."""
    rng = np.random.default_rng(seed)
    t, f = _random_stage_matrix(rng, 2 + seed % 6)
    a = t + f
    d = mx.diagnostics(t, f)
    values, right = scipy.linalg.eig(a)
    k = np.argmax(np.abs(values))
    assert d.lam == pytest.approx(values[k].real, rel=1e-12)
    w = right[:, k].real / right[:, k].real.sum()
    np.testing.assert_allclose(d.stable_distribution, w, rtol=1e-9, atol=1e-12)
    values_t, left = np.linalg.eig(a.T)
    kt = np.argmax(np.abs(values_t))
    v = left[:, kt].real / left[:, kt].real[0]
    np.testing.assert_allclose(d.reproductive_values, v, rtol=1e-9)
    moduli = np.sort(np.abs(values))[::-1]
    assert d.damping_ratio == pytest.approx(moduli[0] / moduli[1], rel=1e-9)
    assert (d.stable_distribution > 0).all() and (d.reproductive_values > 0).all()


@pytest.mark.parametrize("seed", range(4))
def test_projection_converges_to_the_stable_distribution(seed):
    """Strong ergodic theorem (Caswell 2001 ch. 4): A^t n0 / |A^t n0| tends to the stable
    distribution, the one-year growth ratio to lambda, and the distance to the stable
    distribution shrinks by the damping ratio a year (log-linear fit over 40 years). Power
    iteration from an arbitrary start, no eigen-decomposition."""
    rng = np.random.default_rng(100 + seed)
    t, f = (REF_T, REF_F) if seed == 0 else _random_stage_matrix(rng, 3 + seed)
    a = np.asarray(t) + np.asarray(f)
    d = mx.diagnostics(t, f)
    n = np.zeros(len(a))
    n[-1] = 1.0  # all in the last stage: far from stable
    distances = []
    for _ in range(400):
        grown = a @ n
        ratio = grown.sum() / n.sum()
        n = grown / grown.sum()
        distances.append(np.abs(n - d.stable_distribution).sum())
    np.testing.assert_allclose(n, d.stable_distribution, rtol=1e-10, atol=1e-14)
    assert ratio == pytest.approx(d.lam, rel=1e-10)
    years = np.arange(5, 45)
    usable = np.array(distances)[years] > 1e-13
    slope = np.polyfit(years[usable], np.log(np.array(distances)[years][usable]), 1)[0]
    assert math.exp(-slope) == pytest.approx(d.damping_ratio, rel=0.05)


@pytest.mark.parametrize("seed", range(6))
def test_elasticities_are_finite_difference_log_derivatives(seed):
    """e_ij = d ln lambda / d ln a_ij (Caswell 2001 ch. 9; de Kroon et al. 1986, Ecology
    67:1427): checked against a central finite difference of lambda from numpy's eigenvalues
    of the perturbed matrix, entry by entry, instead of a published table (no published table
    was verified). They sum to 1 (same sources)."""
    rng = np.random.default_rng(200 + seed)
    t, f = (REF_T, REF_F) if seed == 0 else _random_stage_matrix(rng, 2 + seed)
    a = np.asarray(t) + np.asarray(f)
    d = mx.diagnostics(t, f)
    h = 1e-6
    for i, j in zip(*np.nonzero(a), strict=True):
        up, down = a.copy(), a.copy()
        up[i, j] *= 1 + h
        down[i, j] *= 1 - h
        derivative = (math.log(_lambda(up)) - math.log(_lambda(down))) / (
            math.log1p(h) - math.log1p(-h))
        assert d.elasticity[i, j] == pytest.approx(derivative, abs=1e-7)
    assert d.elasticity.sum() == pytest.approx(1.0, abs=1e-12)
    assert (d.elasticity[a == 0] == 0).all()


def test_elasticities_into_and_out_of_a_stage_balance():
    """The elasticities of the entries leading into stage i sum to those leading out of it,
    both v_i w_i / <v, w> (van Groenendael et al. 1994, Ecology 75:2410, from memory; derived
    here from v A = lambda v and A w = lambda w). For a Leslie matrix this makes the elasticity
    of survival P_j the sum of the fertility elasticities of the older classes."""
    rng = np.random.default_rng(7)
    t, f = _random_stage_matrix(rng, 5)
    d = mx.diagnostics(t, f)
    v, w = d.reproductive_values, d.stable_distribution
    np.testing.assert_allclose(d.elasticity.sum(axis=1), v * w / (v @ w), atol=1e-12)
    np.testing.assert_allclose(d.elasticity.sum(axis=0), v * w / (v @ w), atol=1e-12)
    e = mx.diagnostics(REF_T, REF_F).elasticity
    assert e[1, 0] == pytest.approx(e[0, 1] + e[0, 2], abs=1e-12)
    assert e[2, 1] == pytest.approx(e[0, 2], abs=1e-12)


def test_fertility_elasticities_sum_to_one_over_the_mean_age_of_parents():
    """For a Leslie matrix the fertility elasticities sum to 1 / A-bar, A-bar = sum over x of
    x lambda^-x l(x) m(x), the mean age of mothers in the stable population, with lambda the root
    of the Euler-Lotka equation sum lambda^-x l(x) m(x) = 1 (Caswell 2001 ch. 9, from memory;
    derived here). lambda is solved with scipy.optimize.brentq, without eigenvectors."""
    fertility, survival = [0.0, 0.8, 1.6, 1.2], [0.6, 0.7, 0.5]
    t, f = _leslie(fertility, survival)
    lx = np.concatenate([[1.0], np.cumprod(survival)])  # newborn reaches class j
    age = np.arange(1, 5)  # offspring of class j are born when the parent is j + 1 years old

    def euler_lotka(lam):
        return float((lam ** -age * lx * fertility).sum()) - 1.0

    lam = optimize.brentq(euler_lotka, 0.5, 3.0, xtol=1e-15)
    d = mx.diagnostics(t, f)
    assert d.lam == pytest.approx(lam, rel=1e-12)
    mean_age = float((age * lam ** -age * lx * np.asarray(fertility)).sum())
    assert d.elasticity[0].sum() == pytest.approx(1.0 / mean_age, rel=1e-10)


def test_long_lived_species_follows_its_elasticities():
    """A long-lived species (adult survival 0.9, low fecundity) loses more growth from a 10 % cut
    in adult survival than from a 10 % cut in fecundity, and each loss is close to 10 % of lambda
    times the elasticities of the entries cut (first-order perturbation; Caswell 2001 ch. 9).
    Invented life history."""
    t = np.array([[0.0, 0.0], [0.4, 0.9]])
    f = np.array([[0.0, 0.3], [0.0, 0.0]])
    d = mx.diagnostics(t, f)
    cut_survival = _lambda(t * [[1, 1], [1, 0.9]] + f)
    cut_fecundity = _lambda(t + 0.9 * f)
    assert d.lam - cut_survival > 3 * (d.lam - cut_fecundity)
    assert (d.lam - cut_survival) / d.lam == pytest.approx(0.1 * d.elasticity[1, 1], rel=0.1)
    assert (d.lam - cut_fecundity) / d.lam == pytest.approx(0.1 * d.elasticity[0, 1], rel=0.1)


@pytest.mark.parametrize("seed", range(5))
def test_r0_and_generation_time_of_leslie_matrices(seed):
    """Leslie matrix: R0 = sum over classes of l(x) m(x) (Caswell 2001 ch. 5), l the chance that
    a newborn reaches the class; generation time ln R0 / ln lambda with lambda the Euler-Lotka
    root (scipy.optimize.brentq), not an eigenvalue."""
    rng = np.random.default_rng(300 + seed)
    s = 3 + seed
    fertility = np.concatenate([[0.0], rng.uniform(0.2, 2.5, s - 1)])
    survival = rng.uniform(0.2, 0.9, s - 1)
    t, f = _leslie(fertility, survival)
    lx = np.concatenate([[1.0], np.cumprod(survival)])
    age = np.arange(1, s + 1)
    lam = optimize.brentq(lambda x: float((x ** -age * lx * fertility).sum()) - 1.0,
                          1e-3, 10.0, xtol=1e-15)
    d = mx.diagnostics(t, f)
    r0 = float((lx * fertility).sum())
    assert d.r0 == pytest.approx(r0, rel=1e-12)
    assert d.generation_time == pytest.approx(math.log(r0) / math.log(lam), rel=1e-8)


def test_r0_of_a_juvenile_adult_model():
    """Two stages, juveniles maturing with probability g, adults surviving with s and producing
    f young a year: R0 = g f / (1 - s) (expected adult years times fecundity; common practice)."""
    g, s, fec = 0.3, 0.85, 0.9
    d = mx.diagnostics([[0.0, 0.0], [g, s]], [[0.0, fec], [0.0, 0.0]])
    assert d.r0 == pytest.approx(g * fec / (1 - s), rel=1e-12)
    assert d.generation_time == pytest.approx(math.log(d.r0) / math.log(d.lam), rel=1e-12)


def test_generation_time_at_lambda_one_is_the_mean_age_of_parents():
    """F = (0, 1, 4), P = (0.5, 0.25): R0 = 0.5 + 0.5 = 1 and lambda = 1, where ln R0 / ln lambda
    is 0/0. The convention is its limit, the mean age of the parents, sum x l(x) m(x) / R0 = 2.5
    years for a Leslie matrix at lambda = 1 (Caswell 2001 ch. 5, from memory); the finite
    ratio on either side of lambda = 1 approaches it."""
    t, f = _leslie([0.0, 1.0, 4.0], [0.5, 0.25])
    d = mx.diagnostics(t, f)
    assert d.lam == pytest.approx(1.0, abs=1e-14)
    assert d.r0 == pytest.approx(1.0, abs=1e-14)
    assert d.generation_time == pytest.approx((2 * 0.5 * 1 + 3 * 0.125 * 4) / 1.0, rel=1e-9)
    for scale in (1 - 1e-5, 1 + 1e-5):
        near = mx.diagnostics(t, f * scale)
        assert abs(math.log(near.lam)) > 1e-7  # the ordinary formula applies
        assert near.generation_time == pytest.approx(2.5, rel=1e-4)


def test_post_reproductive_stage():
    """A reducible matrix: the reference Leslie matrix (section 8 of reference-checks.md) with a
    fourth, post-reproductive class surviving 0.3 a year. lambda stays the breeding classes'
    lambda (Caswell 2001 ch. 4: the dominant eigenvalue of a reducible non-negative matrix is
    still real and that of its dominant block); the old class has reproductive value 0 and
    elasticity 0, and its share of the stable distribution follows from A w = lambda w."""
    t = np.zeros((4, 4))
    t[:3, :3] = REF_T
    t[3, 2], t[3, 3] = 0.3, 0.3
    f = np.zeros((4, 4))
    f[:3, :3] = REF_F
    d = mx.diagnostics(t, f)
    assert d.lam == pytest.approx(1.0615173516, abs=1e-9)
    assert d.reproductive_values[3] == 0.0
    assert (d.elasticity[:, 3] == 0).all() and (d.elasticity[3] == 0).all()
    assert d.elasticity.sum() == pytest.approx(1.0, abs=1e-12)
    w = d.stable_distribution
    assert w[3] == pytest.approx(0.3 * (w[2] + w[3]) / d.lam, rel=1e-12)
    np.testing.assert_allclose(w[:3] / w[:3].sum(), [0.6066067, 0.2857262, 0.1076671],
                               atol=6e-8)


def test_long_lived_non_breeders_set_lambda_and_are_flagged():
    """When the post-reproductive survival (0.95) exceeds the breeding classes' lambda (0.5),
    the dominant eigenvalue of A is that survival (Perron-Frobenius on the reducible matrix;
    Caswell 2001 ch. 4): the stable population holds only non-breeders and describe says so."""
    t = np.array([[0.0, 0.0, 0.0], [0.5, 0.0, 0.0], [0.0, 0.5, 0.95]])
    f = np.array([[0.0, 0.5, 0.0], [0.0, 0.0, 0.0], [0.0, 0.0, 0.0]])
    d = mx.diagnostics(t, f)
    assert d.lam == pytest.approx(0.95, abs=1e-12)
    np.testing.assert_allclose(d.stable_distribution, [0.0, 0.0, 1.0], atol=1e-12)
    assert any("no longer breed" in line for line in mx.describe(["j", "a", "old"], t, f))
    t[2, 2] = 0.3  # below the breeding classes' lambda 0.5: they set lambda again
    assert mx.diagnostics(t, f).lam == pytest.approx(0.5, abs=1e-12)
    assert not any("no longer breed" in line for line in mx.describe(["j", "a", "old"], t, f))


def test_imprimitive_leslie_matrix():
    """Only the last class breeds: the matrix is imprimitive with period 3, its eigenvalues are
    lambda times the cube roots of unity (Caswell 2001 ch. 4), lambda = (P1 P2 F3)^(1/3), the
    damping ratio is 1 and describe warns that the composition does not settle."""
    t, f = _leslie([0.0, 0.0, 8.0], [0.5, 0.25])
    d = mx.diagnostics(t, f)
    assert d.lam == pytest.approx(1.0, abs=1e-12)
    assert d.damping_ratio == pytest.approx(1.0, abs=1e-9)
    np.testing.assert_allclose(d.stable_distribution, np.array([1, 0.5, 0.125]) / 1.625,
                               atol=1e-12)
    assert any("does not settle" in line for line in mx.describe(["a", "b", "c"], t, f))


def test_conventions_without_fecundity_and_for_a_defective_eigenvalue():
    """No fecundity: R0 = 0 and no generation time (NaN). Two stages that both survive 0.5 with
    one feeding the other: lambda = 0.5 is a defective double eigenvalue (a Jordan block; not
    differentiable), so the elasticities are NaN as documented."""
    d = mx.diagnostics([[0.5, 0.0], [0.1, 0.5]], [[0.0, 0.0], [0.0, 0.0]])
    assert d.lam == pytest.approx(0.5, abs=1e-7)
    assert d.r0 == 0.0 and math.isnan(d.generation_time)
    assert np.isnan(d.elasticity).all()


def test_immortal_individuals_give_infinite_r0():
    """Adults that survive with probability 1 and breed have infinite lifetime offspring
    (I - T is singular; common practice)."""
    d = mx.diagnostics([[0.0, 0.0], [0.5, 1.0]], [[0.0, 0.2], [0.0, 0.0]])
    assert d.r0 == math.inf and d.generation_time == math.inf
    assert d.lam > 1.0


def test_reproductive_values_when_newborns_cannot_reach_the_dominant_stage():
    """Stage 0 only survives in place; stage 1 breeds into itself: the newborn stage has
    reproductive value 0 for lambda = 1.1, so values are scaled to a maximum of 1 (left
    eigenvector of numpy.linalg.eig on A transposed)."""
    t, f = [[0.2, 0.0], [0.0, 0.5]], [[0.0, 0.0], [0.0, 0.6]]
    d = mx.diagnostics(t, f)
    assert d.lam == pytest.approx(1.1, abs=1e-12)
    np.testing.assert_allclose(d.reproductive_values, [0.0, 1.0], atol=1e-12)


def _weibull_scale(shape, mean):
    return mean / special.gamma(1 + 1 / shape)


@pytest.mark.parametrize("shape", [0.4, 1.0, 2.5, 6.0])
def test_weibull_leslie_reproduces_the_survivorship_curve(shape):
    """A cohort of newborns projected with the transitions keeps l(x) = exp(-(x / b)^c)
    survivors at age x for x = 0 .. ages, with l from scipy.stats.weibull_min.sf (Pinder,
    Wiener and Smith 1978, Ecology 59:175: the Weibull as survivorship types I-III); the scale
    b gives scipy's weibull_min mean = mean_lifespan_years."""
    ages, mean = 8, 4.0
    t, f = mx.weibull_leslie(ages, shape, mean, [0.0] + [1.0] * (ages - 1))
    b = _weibull_scale(shape, mean)
    assert stats.weibull_min.mean(shape, scale=b) == pytest.approx(mean, rel=1e-12)
    cohort = np.zeros(ages)
    cohort[0] = 1.0
    for x in range(ages + 1):
        assert cohort.sum() == pytest.approx(stats.weibull_min.sf(x, shape, scale=b),
                                             rel=1e-10, abs=1e-300)
        cohort = t @ cohort
    mx.validate(t, f)


def test_weibull_shapes_give_survivorship_types():
    """Pinder, Wiener and Smith 1978 (Ecology 59:175): shape > 1 is type I (yearly survival falls
    with age), shape = 1 type II (constant survival exp(-1 / mean lifespan), at every age, also
    beyond the last class), shape < 1 type III (survival rises with age)."""
    ages = 6
    rising = np.diagonal(mx.weibull_leslie(ages, 0.5, 3.0, [1.0] * ages)[0], -1)
    falling = np.diagonal(mx.weibull_leslie(ages, 3.0, 3.0, [1.0] * ages)[0], -1)
    assert (np.diff(rising) > 0).all() and (np.diff(falling) < 0).all()
    t, _ = mx.weibull_leslie(ages, 1.0, 3.0, [1.0] * ages)
    np.testing.assert_allclose(np.diagonal(t, -1), math.exp(-1 / 3), rtol=1e-13)
    assert t[-1, -1] == pytest.approx(math.exp(-1 / 3), rel=1e-13)
    cohort = np.eye(ages)[0]
    for x in range(1, 3 * ages):
        cohort = t @ cohort
        assert cohort.sum() == pytest.approx(stats.weibull_min.sf(x, 1.0, scale=3.0), rel=1e-12)


def test_weibull_leslie_census_convention_gives_r0_of_the_life_table():
    """Post-breeding census: fecundity[0][j] = P_j m(j + 1), m(j + 1) = fecundity_by_age[j], so
    R0 = sum over x >= 1 of l(x) m(x) (Caswell 2001 ch. 5), with l from scipy's weibull_min.sf up
    to x = ages and the last class's geometric survival after it (its documented continuation)."""
    ages, shape, mean = 5, 1.8, 3.5
    m = [0.0, 0.7, 1.4, 1.4, 1.1]
    t, f = mx.weibull_leslie(ages, shape, mean, m)
    b = _weibull_scale(shape, mean)
    x = np.arange(1, ages + 1)
    lx = stats.weibull_min.sf(x, shape, scale=b)
    last = lx[-1] / lx[-2]  # l(ages) / l(ages - 1): the oldest class's yearly survival
    tail = lx[-1] * m[-1] * last / (1 - last)  # ages + 1, + 2, ... with the last class's m
    assert mx.diagnostics(t, f).r0 == pytest.approx(float((lx * m).sum()) + tail, rel=1e-10)
    np.testing.assert_allclose(f[0], np.concatenate([lx[:1], lx[1:] / lx[:-1]]) * m, rtol=1e-12)
    assert not f[1:].any()


@pytest.mark.parametrize("shape", [0.02, 40.0])
def test_weibull_leslie_extreme_shapes_stay_finite(shape):
    """Numerically extreme shapes still give survival probabilities in [0, 1] (0 where l is 0)."""
    t, f = mx.weibull_leslie(30, shape, 2.0, [1.0] * 30)
    assert np.isfinite(t).all() and ((t >= 0) & (t <= 1)).all() and np.isfinite(f).all()


@pytest.mark.parametrize(("args", "name"), [
    ((0, 1.0, 3.0, []), "ages"),
    ((2.5, 1.0, 3.0, [1, 1]), "ages"),
    ((True, 1.0, 3.0, [1]), "ages"),
    ((3, 0.0, 3.0, [1, 1, 1]), "shape"),
    ((3, float("nan"), 3.0, [1, 1, 1]), "shape"),
    ((3, -1.0, 3.0, [1, 1, 1]), "shape"),
    ((3, True, 3.0, [1, 1, 1]), "shape"),
    ((3, 1.0, 0.0, [1, 1, 1]), "mean_lifespan_years"),
    ((3, 1.0, float("inf"), [1, 1, 1]), "mean_lifespan_years"),
    ((3, 1.0, "3", [1, 1, 1]), "mean_lifespan_years"),
    ((3, 1.0, 3.0, [1, 1]), "fecundity_by_age"),
    ((3, 1.0, 3.0, [1, -1, 1]), "fecundity_by_age"),
    ((3, 1.0, 3.0, [1, float("nan"), 1]), "fecundity_by_age"),
    ((3, 1.0, 3.0, ["1", "1", "1"]), "fecundity_by_age"),
    ((3, 1.0, 3.0, 2.0), "fecundity_by_age"),
])
def test_weibull_leslie_refuses_bad_values(args, name):
    with pytest.raises(ValueError, match=f"^{name}:"):
        mx.weibull_leslie(*args)


def test_weibull_leslie_takes_numpy_numbers():
    """numpy integers and floats are numbers like Python's (common practice)."""
    t, f = mx.weibull_leslie(np.int64(3), np.float32(1.0), np.float64(2.0), np.ones(3))
    np.testing.assert_allclose(np.diagonal(t, -1), math.exp(-0.5), rtol=1e-13)


@pytest.mark.parametrize(("transitions", "fecundity", "name", "words"), [
    ([[0.0, 0.5]], [[0.0, 1.0]], "transitions", "square"),
    ([[0.0], [0.5, 0.0]], [[0.0, 1.0], [0, 0]], "transitions", "different lengths"),
    (0.5, [[1.0]], "transitions", "list of lists"),
    ([[0.0, 0.0], [0.5, 0.0]], [[0.0, 1.0]], "fecundity", "square"),
    ([[0.5]], [["2"]], "fecundity", "list of lists"),
    ([[True]], [[1.0]], "transitions", "list of lists"),
    ([[0.0, 0.0], [0.5, 0.5]], [[1.0]], "fecundity", "has 1 stages but transitions has 2"),
    ([[0.0, 0.0], [-0.5, 0.5]], [[0.0, 1.0], [0, 0]], "transitions", "-0.5"),
    ([[0.0, 0.0], [0.5, 0.5]], [[0.0, -1.0], [0, 0]], "fecundity", ">= 0"),
    ([[0.0, 0.0], [0.5, float("nan")]], [[0.0, 1.0], [0, 0]], "transitions", "finite"),
    ([[0.0, 0.0], [0.5, 0.5]], [[0.0, float("inf")], [0, 0]], "fecundity", "finite"),
    ([[0.0, 0.3], [0.5, 0.8]], [[0.0, 1.0], [0, 0]], "transitions", "column 1 .* sums to 1.1"),
    ([[0.0, 0.0], [0.5, 0.0]], [[0.0, 0.0], [0, 0]], "fecundity", "lambda = 0"),
    ([[0.0, 0.0], [0.0, 0.0]], [[0.0, 2.0], [0, 0]], "fecundity", "lambda = 0"),
    ([[]], [[]], "transitions", "square"),
])
def test_validate_refuses_bad_matrices(transitions, fecundity, name, words):
    """Each refusal names the parameter first (DEVELOPERS.md, errors by layer)."""
    with pytest.raises(ValueError, match=f"^{name}:.*{words}"):
        mx.validate(transitions, fecundity)


def test_validate_accepts_and_converts():
    """Integer entries become float64; a column that sums to 1 only up to rounding (0.33 + 0.56
    + 0.11 adds up to 1.0000000000000002 in float64) is accepted; numpy arrays too."""
    t, f = mx.validate([[0, 0, 0], [1, 0, 0], [0, 1, 0]], [[0, 0, 3], [0, 0, 0], [0, 0, 0]])
    assert t.dtype == f.dtype == np.float64 and t.shape == (3, 3)
    column = np.array([[0.33, 0, 0], [0.56, 0, 0], [0.11, 0, 0]])
    assert column.sum(axis=0)[0] > 1.0
    t2, f2 = mx.validate(column, np.array([[0.0, 2.0, 0], [0, 0, 0], [0, 0, 0]]))
    np.testing.assert_array_equal(t2, column)
    assert f2[0, 1] == 2.0


def test_describe_lists_the_matrix_and_its_diagnostics():
    """The lines for check and the report: the matrix with stage names, then each diagnostic
    (values from section 8 of reference-checks.md); no warning when lambda > 1."""
    names = ["juvenile", "subadult", "adult"]
    lines = mx.describe(names, REF_T, REF_F)
    text = "\n".join(lines)
    header = lines[1].split()
    assert header == names
    assert lines[3].split() == ["subadult", "0.5", "0", "0"]
    for expected in ("lambda (dominant eigenvalue): 1.06152", "juvenile 0.6066",
                     "subadult 2.123", "R0 (offspring per newborn over its life): 1.15",
                     "generation time: 2.341 years", "damping ratio: 1.729",
                     "0.4284"):
        assert expected in text
    assert "warning" not in text


def test_describe_warns_below_one():
    """lambda < 1: the population cannot persist even without crowding (common practice)."""
    lines = mx.describe(["young", "old"], [[0.0, 0.0], [0.3, 0.6]], [[0.0, 0.8], [0.0, 0.0]])
    assert mx.diagnostics([[0.0, 0.0], [0.3, 0.6]], [[0.0, 0.8], [0.0, 0.0]]).lam < 1
    assert any(line.strip().startswith("warning: lambda") and
               "cannot persist even without crowding" in line for line in lines)


@pytest.mark.parametrize("names", [["a"], ["a", "b", "c"], "ab", ["a", ""], ["a", 2]])
def test_describe_refuses_names_that_do_not_fit(names):
    with pytest.raises(ValueError, match="^names:"):
        mx.describe(names, [[0.0, 0.0], [0.5, 0.5]], [[0.0, 1.0], [0.0, 0.0]])

"""Tests for gridpop.analysis.metrics: risk, occupancy, connectivity and comparison statistics.

Worked values come from /work/shared/reference-checks.md (section numbers given below).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from gridpop.analysis.metrics import (
    binomial_interval,
    colonisation_probability,
    expected_minimum,
    final_abundance,
    levins_equilibrium,
    levins_occupancy,
    median_first_year,
    metapopulation_capacity,
    occupancy_over_time,
    paired_difference,
    quasi_extinction_diffusion,
    risk_curve,
    unpaired_difference,
)


def _rng(seed):
    return np.random.Generator(np.random.PCG64(seed))


# --- binomial intervals ------------------------------------------------------------------------

CASES = [(0, 10), (10, 10), (3, 10), (0, 1), (1, 1), (17, 50), (250, 1000), (0, 500)]


@pytest.mark.parametrize("method, scipy_method", [("wilson", "wilson"), ("exact", "exact"),
                                                  ("clopper-pearson", "exact")])
@pytest.mark.parametrize("confidence", [0.95, 0.9, 0.99])
@pytest.mark.parametrize("k, n", CASES)
def test_binomial_interval_matches_scipy(k, n, confidence, method, scipy_method):
    """Against scipy.stats.binomtest(k, n).proportion_ci (reference library), which implements
    Wilson (1927, JASA 22:209) and Clopper and Pearson (1934, Biometrika 26:404); k = 0 and
    k = n edge cases included."""
    lo, hi = binomial_interval(k, n, confidence, method)
    ref = stats.binomtest(k, n).proportion_ci(confidence_level=confidence, method=scipy_method)
    assert lo == pytest.approx(ref.low, abs=1e-12)
    assert hi == pytest.approx(ref.high, abs=1e-12)
    assert 0.0 <= lo <= k / n <= hi <= 1.0


def test_binomial_interval_edge_closed_forms():
    """At k = 0 the Wilson upper bound is z^2 / (n + z^2) (Wilson 1927, JASA 22:209) and the
    Clopper-Pearson upper bound is 1 - (alpha/2)^(1/n) (Clopper and Pearson 1934, Biometrika
    26:404); at k = n they mirror. Lower bounds at k = 0 are exactly 0."""
    n = 10
    z = stats.norm.ppf(0.975)
    lo, hi = binomial_interval(0, n, 0.95, "wilson")
    assert lo == 0.0 and hi == pytest.approx(z * z / (n + z * z), rel=1e-12)
    lo, hi = binomial_interval(n, n, 0.95, "wilson")
    assert hi == 1.0 and lo == pytest.approx(n / (n + z * z), rel=1e-12)
    lo, hi = binomial_interval(0, n, 0.95, "exact")
    assert lo == 0.0 and hi == pytest.approx(1 - 0.025 ** (1 / n), rel=1e-12)
    lo, hi = binomial_interval(n, n, 0.95, "exact")
    assert hi == 1.0 and lo == pytest.approx(0.025 ** (1 / n), rel=1e-12)


@pytest.mark.parametrize("method", ["wilson", "exact"])
def test_binomial_interval_arrays(method):
    """Array input gives the same bounds as scalar calls (scipy.stats.binomtest as reference);
    zero trials give NaN."""
    k = np.array([[0, 3], [10, 0]])
    n = np.array([[10, 10], [10, 0]])
    lo, hi = binomial_interval(k, n, 0.95, method)
    assert lo.shape == hi.shape == (2, 2)
    for idx in [(0, 0), (0, 1), (1, 0)]:
        ref = stats.binomtest(int(k[idx]), int(n[idx])).proportion_ci(method=method)
        assert lo[idx] == pytest.approx(ref.low, abs=1e-12)
        assert hi[idx] == pytest.approx(ref.high, abs=1e-12)
    assert np.isnan(lo[1, 1]) and np.isnan(hi[1, 1])


def test_binomial_interval_rejects_bad_input():
    """Unknown method names, confidence outside (0, 1) and k > n are refused (common practice)."""
    with pytest.raises(ValueError, match="wilson"):
        binomial_interval(1, 10, method="agresti")
    with pytest.raises(ValueError, match="confidence"):
        binomial_interval(1, 10, confidence=1.0)
    with pytest.raises(ValueError):
        binomial_interval(11, 10)


# --- risk curve, final abundance, expected minimum ---------------------------------------------

def test_risk_curve_constructed():
    """Hand-counted quasi-extinction curve; intervals are Wilson (1927, JASA 22:209) intervals
    checked against scipy.stats.binomtest. "Below" is N < threshold, so N == threshold is not."""
    abundance = np.array([[10, 5, 12, 3],
                          [10, 12, 11, 13],
                          [10, 8, 4, 20],
                          [10, 6, 9, 9]], dtype=float)
    out = risk_curve(abundance, threshold=6.0)
    np.testing.assert_array_equal(out["ever_below"], [0.0, 0.25, 0.5, 0.5])
    np.testing.assert_array_equal(out["below_now"], [0.0, 0.25, 0.25, 0.25])
    assert np.all(np.diff(out["ever_below"]) >= 0)
    for est, lo, hi in [("ever_below", "lo", "hi"), ("below_now", "below_now_lo", "below_now_hi")]:
        assert np.all(out[lo] <= out[est]) and np.all(out[est] <= out[hi])
        for t in range(4):
            ref = stats.binomtest(int(round(4 * out[est][t])), 4).proportion_ci(method="wilson")
            assert out[lo][t] == pytest.approx(ref.low, abs=1e-12)
            assert out[hi][t] == pytest.approx(ref.high, abs=1e-12)
    assert out["lo"][0] == 0.0 and out["hi"][0] > 0.0


def test_risk_curve_monotone_on_random_walks():
    """ever_below never decreases and is never smaller than below_now (it is a running union;
    common practice)."""
    x = 100 * np.exp(np.cumsum(_rng(3).normal(0, 0.3, size=(200, 31)), axis=1))
    out = risk_curve(x, 50.0)
    assert np.all(np.diff(out["ever_below"]) >= 0)
    assert np.all(out["ever_below"] >= out["below_now"])
    assert out["ever_below"][-1] > out["below_now"][-1]  # some walks came back up


def test_final_abundance_percentiles():
    """Final-year abundances 0..100 (shuffled) have mean 50 and q-th percentile q (hand
    computation with linear interpolation between order statistics; common practice)."""
    last = _rng(1).permutation(101).astype(float)
    abundance = np.column_stack([np.full(101, 7.0), last])
    out = final_abundance(abundance)
    assert out == {"mean": 50.0, "p5": 5.0, "p25": 25.0, "p50": 50.0, "p75": 75.0, "p95": 95.0}


def test_expected_minimum_hand_computed():
    """Expected minimum abundance (McCarthy and Thompson 2001, Animal Conservation 4:351) on three
    trajectories. Hand computation: minima over years 0..3 are 8, 7 and 10 (year 0 included), so
    the estimate is (8 + 7 + 10) / 3 = 8.3333...; every bootstrap mean lies between the smallest
    and largest minimum, so 7 <= lo <= estimate <= hi <= 10."""
    abundance = np.array([[10, 8, 9, 12],
                          [10, 11, 7, 13],
                          [10, 12, 14, 15]], dtype=float)
    est, lo, hi = expected_minimum(abundance, n_boot=2000, seed=5)
    assert est == pytest.approx(25.0 / 3.0, rel=1e-15)
    assert 7.0 <= lo <= est <= hi <= 10.0
    assert lo < hi
    # Same seed, same interval (numpy Generator(PCG64(seed))).
    assert expected_minimum(abundance, n_boot=2000, seed=5) == (est, lo, hi)


def test_expected_minimum_interval_narrows_and_matches_normal_theory():
    """The percentile bootstrap interval (Efron and Tibshirani 1993, An Introduction to the
    Bootstrap) contains the estimate, narrows about as 1/sqrt(R) (16 x replicates: width / 4),
    and for many replicates agrees with the normal interval mean +- 1.96 s / sqrt(R) (central
    limit theorem) to within 10 %."""
    x = 100 * np.exp(np.cumsum(_rng(11).normal(0, 0.2, size=(800, 21)), axis=1))
    widths = []
    for r in (50, 800):
        est, lo, hi = expected_minimum(x[:r], n_boot=2000, seed=2)
        assert lo < est < hi
        widths.append(hi - lo)
    assert widths[1] < 0.5 * widths[0]
    minima = x.min(axis=1)
    normal_width = 2 * 1.959964 * minima.std(ddof=1) / np.sqrt(800)
    assert widths[1] == pytest.approx(normal_width, rel=0.10)


# --- occupancy and colonisation ----------------------------------------------------------------

PATCHES = np.array([
    # replicate 0: years 0..2, patches 0..2
    [[5, 0, 2], [0, 3, 2], [0, 4, 1]],
    # replicate 1
    [[5, 0, 0], [6, 0, 2], [0, 0, 2]],
], dtype=float)


def test_occupancy_over_time_hand_counts():
    """Occupied means N >= threshold (threshold 2 here, so N = 2 counts); hand counts."""
    out = occupancy_over_time(PATCHES, threshold=2.0)
    np.testing.assert_array_equal(out["fraction_occupied"],
                                  [[1.0, 0.0, 0.5], [0.5, 0.5, 1.0], [0.0, 0.5, 0.5]])
    np.testing.assert_array_equal(out["n_occupied"], [[2, 2, 1], [1, 2, 1]])
    np.testing.assert_array_equal(out["mean_n_occupied"], [1.5, 2.0, 1.0])


def test_colonisation_probability_hand_counts():
    """A patch counts as colonised from the first year it is occupied on, even if it is lost
    later (running union over years; hand counts)."""
    p = colonisation_probability(PATCHES, threshold=2.0)
    np.testing.assert_array_equal(p, [[1.0, 0.0, 0.5], [1.0, 0.5, 1.0], [1.0, 0.5, 1.0]])
    assert np.all(np.diff(p, axis=0) >= 0)


def test_median_first_year_hand_made():
    """Four replicates: a cell's median first year is the first t with count >= 2 (ties at
    exactly half count: the lower median); a cell reached by only 1 of 4 replicates is NaN."""
    counts = np.zeros((4, 1, 5), dtype=np.int64)
    counts[:, 0, 0] = [0, 1, 2, 4]   # reached half at t = 2
    counts[:, 0, 1] = [0, 0, 1, 1]   # never half: NaN
    counts[:, 0, 2] = [4, 4, 4, 4]   # occupied from the start
    counts[:, 0, 3] = [0, 1, 1, 3]   # t = 3
    counts[:, 0, 4] = [0, 0, 0, 0]   # never occupied: NaN
    out = median_first_year(counts, 4)
    np.testing.assert_array_equal(out, [[2.0, np.nan, 0.0, 3.0, np.nan]])
    # Odd number of replicates: half of 3 is 1.5, so 2 replicates are needed.
    odd = np.array([0, 1, 1, 2])[:, None, None]
    assert median_first_year(odd, 3)[0, 0] == 3.0


def test_median_first_year_is_lower_median_of_first_years():
    """The rule equals the lower median of per-replicate first years with never = +inf (order
    statistic definition; common practice), checked on random first years."""
    rng = _rng(4)
    for replicates in (6, 7):
        first = rng.integers(0, 15, size=(replicates, 3, 4)).astype(float)
        first[first > 10] = np.inf  # never occupied within years 0..10
        years = np.arange(11)
        counts = (first[None] <= years[:, None, None, None]).sum(axis=1)
        lower = np.sort(first, axis=0)[(replicates + 1) // 2 - 1]
        expected = np.where(np.isfinite(lower), lower, np.nan)
        np.testing.assert_array_equal(median_first_year(counts, replicates), expected)


def test_median_first_year_rejects_non_cumulative():
    """Counts that decrease over years are not cumulative counts (common practice)."""
    with pytest.raises(ValueError, match="cumulative"):
        median_first_year(np.array([2, 1])[:, None, None], 4)


# --- patch networks ----------------------------------------------------------------------------

XY = [(0.0, 0.0), (1.0, 0.0), (0.0, 2.0)]
AREA = [1.0, 2.0, 3.0]


def _hand_matrix(xy, area, alpha):
    xy = np.asarray(xy)
    area = np.asarray(area)
    p = len(area)
    m = np.zeros((p, p))
    for i in range(p):
        for j in range(p):
            if i != j:
                d = np.sqrt((xy[i, 0] - xy[j, 0]) ** 2 + (xy[i, 1] - xy[j, 1]) ** 2)
                m[i, j] = np.exp(-alpha * d) * area[i] * area[j]
    return m


def test_metapopulation_capacity_reference_example():
    """Hanski and Ovaskainen 2000 (Nature 404:755): reference-checks section 5 example, lambda_M
    = 1.1987521132 (tol 1e-10), leading eigenvector (sum 1) = (0.3281, 0.3654, 0.3066); and
    numpy.linalg.eigvals of the same matrix built by hand."""
    out = metapopulation_capacity(XY, AREA, 1.0)
    assert out["lambda_M"] == pytest.approx(1.1987521132, abs=1e-10)
    np.testing.assert_allclose(out["contribution"], [0.3281, 0.3654, 0.3066], atol=5e-5)
    assert out["contribution"].sum() == pytest.approx(1.0, abs=1e-14)
    assert out["lambda_M"] == pytest.approx(np.linalg.eigvals(_hand_matrix(XY, AREA, 1.0))
                                            .real.max(), rel=1e-12)


def test_metapopulation_capacity_removal_drop_two_patch_closed_form():
    """Removing one patch of three leaves two patches, whose M = [[0, f A A'], [f A A', 0]] has
    leading eigenvalue f A A' (hand computation). Patch distances in the example: 1 (0-1),
    2 (0-2, via (0,0)-(0,2)) and sqrt 5 (1-2)."""
    out = metapopulation_capacity(XY, AREA, 1.0)
    lam = 1.1987521132
    expected = [lam - np.exp(-np.sqrt(5.0)) * 2 * 3,   # without patch 0
                lam - np.exp(-2.0) * 1 * 3,            # without patch 1
                lam - np.exp(-1.0) * 1 * 2]            # without patch 2
    np.testing.assert_allclose(out["removal_drop"], expected, atol=1e-10)


def test_metapopulation_capacity_dispersal_matrix():
    """A dispersal matrix equal to exp(-alpha d) gives the same capacity (Hanski and Ovaskainen
    2000, Nature 404:755); an asymmetric one is checked against numpy.linalg.eig of the matrix
    built by hand, with the right eigenvector (not the left)."""
    xy = np.asarray(XY)
    f = np.exp(-np.linalg.norm(xy[:, None, :] - xy[None, :, :], axis=2))  # diagonal: ignored
    same = metapopulation_capacity(XY, AREA, None, dispersal=f)
    assert same["lambda_M"] == pytest.approx(1.1987521132, abs=1e-10)
    asym = np.array([[0.9, 0.5, 0.1], [0.2, 0.9, 0.05], [0.3, 0.4, 0.9]])
    out = metapopulation_capacity(XY, AREA, None, dispersal=asym)
    m = asym * np.outer(AREA, AREA)
    np.fill_diagonal(m, 0.0)
    w, v = np.linalg.eig(m)
    i = np.argmax(w.real)
    assert out["lambda_M"] == pytest.approx(w[i].real, rel=1e-12)
    np.testing.assert_allclose(out["contribution"], v[:, i].real / v[:, i].real.sum(), atol=1e-12)
    np.testing.assert_allclose(m @ out["contribution"], out["lambda_M"] * out["contribution"],
                               atol=1e-12)


def test_metapopulation_capacity_large_network_uses_arpack():
    """Above 100 patches the capacity comes from ARPACK (scipy.sparse.linalg.eigs); it must equal
    the dense numpy.linalg.eigvals value, and removal drops those of the reduced matrices
    (Hanski and Ovaskainen 2000, Nature 404:755)."""
    rng = _rng(8)
    p = 130
    xy = rng.random((p, 2)) * 20.0
    area = 0.5 + rng.random(p)
    out = metapopulation_capacity(xy, area, 0.5)
    m = _hand_matrix(xy, area, 0.5)
    lam = np.linalg.eigvals(m).real.max()
    assert out["lambda_M"] == pytest.approx(lam, rel=1e-10)
    assert np.all(out["contribution"] > 0)
    for i in (0, 57, 129):
        keep = np.arange(p) != i
        reduced = np.linalg.eigvals(m[np.ix_(keep, keep)]).real.max()
        assert out["removal_drop"][i] == pytest.approx(lam - reduced, rel=1e-8, abs=1e-10)
    assert np.all(out["removal_drop"] >= -1e-10)  # removing a patch never raises capacity


def test_metapopulation_capacity_rejects_bad_areas():
    """Areas must be positive (common practice)."""
    with pytest.raises(ValueError, match="area"):
        metapopulation_capacity(XY, [1.0, 0.0, 3.0], 1.0)


def test_levins_equilibrium():
    """Levins 1969 (Bull. Entomol. Soc. Am. 15:237): p* = 1 - e/c; c = 0.5, e = 0.2 gives 0.6
    (reference-checks section 5); no persistence when e >= c."""
    assert levins_equilibrium(0.5, 0.2) == pytest.approx(0.6, abs=1e-15)
    assert levins_equilibrium(0.2, 0.2) == 0.0
    assert levins_equilibrium(0.1, 0.3) == 0.0


@pytest.mark.parametrize("c, e", [(0.5, 0.2), (0.3, 0.3), (0.2, 0.5)])
def test_levins_occupancy_matches_ode(c, e):
    """The Levins ODE dp/dt = c p (1 - p) - e p (Levins 1969, Bull. Entomol. Soc. Am. 15:237)
    integrated with scipy.integrate.solve_ivp from p0 = 0.05; reference-checks section 5 gives
    p(20) = 0.5840744656 for c = 0.5, e = 0.2."""
    t = np.array([0.0, 1.0, 5.0, 20.0, 60.0])
    sol = integrate.solve_ivp(lambda _, p: c * p * (1 - p) - e * p, (0.0, 60.0), [0.05],
                              t_eval=t, rtol=1e-12, atol=1e-14, method="DOP853")
    np.testing.assert_allclose(levins_occupancy(c, e, 0.05, t), sol.y[0], rtol=1e-9, atol=1e-13)
    if (c, e) == (0.5, 0.2):
        assert levins_occupancy(c, e, 0.05, 20.0) == pytest.approx(0.5840744656, abs=1e-9)
        assert levins_occupancy(c, e, 0.05, 500.0) == pytest.approx(levins_equilibrium(c, e))


# --- paired and unpaired comparisons -----------------------------------------------------------

def test_paired_bootstrap_much_tighter_than_unpaired():
    """Two scenarios sharing replicate noise (common random numbers): the paired bootstrap
    variance of the mean difference is far below the unpaired one (Efron and Tibshirani 1993,
    An Introduction to the Bootstrap); the paired bootstrap SD matches the plug-in standard error
    sd(d) sqrt((R-1)/R) / sqrt(R) within 4 SE of a bootstrap SD (relative SE 1/sqrt(2 B))."""
    rng = _rng(21)
    r = 200
    shared = rng.normal(100.0, 20.0, r)
    a = shared + rng.normal(0.0, 1.0, r)
    b = shared + 2.0 + rng.normal(0.0, 1.0, r)
    paired = paired_difference(a, b, n_boot=2000, seed=1)
    unpaired = unpaired_difference(a, b, n_boot=2000, seed=1)
    assert paired["mean_difference"] == pytest.approx(np.mean(b - a), rel=1e-12)
    assert unpaired["mean_difference"] == pytest.approx(b.mean() - a.mean(), rel=1e-12)
    assert (paired["boot_sd"] / unpaired["boot_sd"]) ** 2 < 0.2
    assert paired["distinguishable"] and paired["lo"] > 0
    assert not unpaired["distinguishable"] and unpaired["lo"] < 0 < unpaired["hi"]
    d = b - a
    plug_in = d.std(ddof=0) / np.sqrt(r)
    assert paired["boot_sd"] == pytest.approx(plug_in, rel=4 / np.sqrt(2 * 2000))
    assert "mcnemar_p" not in paired


def test_paired_difference_bool_mcnemar():
    """For paired events the exact conditional (McNemar 1947, Psychometrika 12:153) test is a
    two-sided binomial test of one discordant count out of all discordant pairs with p = 1/2;
    checked against scipy.stats.binomtest, and for 0 vs 6 discordant pairs against the hand value
    2 (1/2)^6 = 0.03125."""
    rng = _rng(33)
    shared = rng.random(300)
    a = shared < 0.30
    b = (shared + 0.1 * rng.standard_normal(300)) < 0.22
    out = paired_difference(a, b, n_boot=1000, seed=0)
    n_a_only = int(np.sum(a & ~b))
    n_b_only = int(np.sum(~a & b))
    assert (out["n_a_only"], out["n_b_only"]) == (n_a_only, n_b_only)
    assert n_a_only > n_b_only > 0
    ref = stats.binomtest(n_b_only, n_a_only + n_b_only, 0.5).pvalue
    assert out["mcnemar_p"] == pytest.approx(ref, rel=1e-12)
    assert out["mean_difference"] == pytest.approx(b.mean() - a.mean(), abs=1e-15)
    assert out["distinguishable"] == (out["hi"] < 0 or out["lo"] > 0)

    a6 = np.zeros(20, dtype=bool)
    b6 = a6.copy()
    b6[:6] = True
    out6 = paired_difference(a6, b6, n_boot=500)
    assert out6["mcnemar_p"] == pytest.approx(0.03125, rel=1e-12)
    same = paired_difference(a6, a6, n_boot=500)
    assert same["mcnemar_p"] == 1.0 and not same["distinguishable"]


def test_difference_bootstraps_are_reproducible():
    """Same seed, same interval; another seed, another one (numpy Generator(PCG64(seed)))."""
    rng = _rng(5)
    a = rng.normal(size=50)
    b = a + rng.normal(0.5, 1.0, size=50)
    assert paired_difference(a, b, seed=3) == paired_difference(a, b, seed=3)
    assert paired_difference(a, b, seed=3)["lo"] != paired_difference(a, b, seed=4)["lo"]
    assert unpaired_difference(a, b, seed=3) == unpaired_difference(a, b, seed=3)


def test_paired_difference_rejects_unequal_lengths():
    """Pairs need one outcome per replicate in each scenario (common practice)."""
    with pytest.raises(ValueError, match="equal lengths"):
        paired_difference(np.zeros(5), np.zeros(6))


# --- quasi-extinction under environmental noise ------------------------------------------------

def test_quasi_extinction_diffusion_reference_values():
    """Ginzburg et al. 1982 (Risk Analysis 2); Dennis, Munholland and Scott 1991 (Ecological
    Monographs 61:115), reference-checks section 4: mu = 0.02, sigma = 0.2, N0 = 500, Nq = 50
    gives G(50) = 0.0276151698, G(100) = 0.0597138055 and P(ever) = exp(-2 mu d / sigma^2) =
    0.1; G increases with t towards it."""
    args = (0.02, 0.2, 500.0, 50.0)
    assert quasi_extinction_diffusion(*args, 50.0) == pytest.approx(0.0276151698, abs=1e-9)
    assert quasi_extinction_diffusion(*args, 100.0) == pytest.approx(0.0597138055, abs=1e-9)
    assert quasi_extinction_diffusion(*args, np.inf) == pytest.approx(0.1, rel=1e-12)
    assert quasi_extinction_diffusion(*args, 1e6) == pytest.approx(0.1, rel=1e-9)
    g = quasi_extinction_diffusion(*args, np.array([0.0, 10.0, 50.0, 100.0, 1000.0, np.inf]))
    assert g[0] == 0.0 and np.all(np.diff(g) > 0)
    # No positive drift: reached eventually for sure.
    assert quasi_extinction_diffusion(0.0, 0.2, 500.0, 50.0, np.inf) == 1.0
    assert quasi_extinction_diffusion(-0.01, 0.2, 500.0, 50.0, 1e7) == pytest.approx(1.0)
    # Starting at or below the threshold.
    assert quasi_extinction_diffusion(0.02, 0.2, 50.0, 50.0, 10.0) == 1.0


def test_quasi_extinction_annual_census_monte_carlo():
    """Annual-step random walk of ln N (numpy Generator, 100 000 walks) against the annual-step
    values of reference-checks section 4 (0.0223 at t = 50, 0.0507 at t = 100) within 4 binomial
    SE. The continuous-time formula (Dennis, Munholland and Scott 1991, Ecological Monographs
    61:115) overstates the risk of a yearly census by much more than 4 SE (the discrete-census
    bias described there); shifting the barrier outward by 0.5826 sigma, the discrete-monitoring
    correction of Broadie, Glasserman and Kou 1997 (Mathematical Finance 7:325, from memory),
    brings it within 4 SE."""
    mu, sigma, n0, nq = 0.02, 0.2, 500.0, 50.0
    n = 100_000
    rng = _rng(20240)
    x = np.cumsum(rng.normal(mu, sigma, size=(n, 100)), axis=1)
    hit = np.minimum.accumulate(x, axis=1) <= -np.log(n0 / nq)
    for t, annual in ((50, 0.0223), (100, 0.0507)):
        p = hit[:, t - 1].mean()
        se = np.sqrt(p * (1 - p) / n)
        assert abs(p - annual) < 4 * se
        assert quasi_extinction_diffusion(mu, sigma, n0, nq, t) - p > 4 * se
        corrected = quasi_extinction_diffusion(mu, sigma, n0, nq * np.exp(-0.5826 * sigma), t)
        assert abs(p - corrected) < 4 * se

"""Tests of the walk over a permeability surface (gridpop.movement.walk)."""

from __future__ import annotations

import math

import numba
import numpy as np
import pytest
from scipy import sparse, stats
from scipy.signal import fftconvolve
from scipy.sparse.linalg import spsolve

from gridpop import rng
from gridpop.movement.connectivity import corridor_share, patch_connectivity
from gridpop.movement.walk import (
    WalkParams,
    disperse_walk_deterministic,
    disperse_walk_stochastic,
    permeability_from_resistance,
    resistance_from_suitability,
)

SQ2 = math.sqrt(2.0)
DIRS = [(-1, -1), (-1, 0), (-1, 1), (0, -1), (0, 1), (1, -1), (1, 0), (1, 1)]


def key(year=0, replicate=0):
    return rng.year_key(20240607, replicate, year, rng.STREAM_WALK)


def det(d, perm, q, params, labels=None, n_patches=0):
    """Deterministic walk: (arrivals, visits, lost)."""
    labels = np.zeros(d.shape, np.int32) if labels is None else labels
    lost = np.zeros(d.shape)
    out = disperse_walk_deterministic(d, perm, q, labels, n_patches, params, lost=lost)
    return out.arrivals, out.visits, lost


def sto(d, perm, q, params, k, labels=None, n_patches=0):
    """Stochastic walk: (arrivals, stayed, retained, visits, lost)."""
    labels = np.zeros(d.shape, np.int32) if labels is None else labels
    lost = np.zeros(d.shape)
    out = disperse_walk_stochastic(d, perm, q, labels, n_patches, params, k, lost=lost)
    return out.arrivals, out.stayed, out.retained, out.visits, lost


def point(n, value):
    d = np.zeros((n, n))
    d[n // 2, n // 2] = value
    return d


def moments(density, c):
    """Per-axis mean, variance and fourth central moment of a density about cell (c, c)."""
    yy, xx = np.mgrid[: density.shape[0], : density.shape[1]]
    w = density / density.sum()
    out = []
    for z in (xx - c, yy - c):
        m = (w * z).sum()
        out.append((m, (w * (z - m) ** 2).sum(), (w * (z - m) ** 4).sum()))
    return out


def conductances(perm):
    """Symmetric conductance matrix c_ab = P_a P_b / len_ab of the 8-neighbour grid graph
    (diagonal edges between two impassable orthogonal cells left out)."""
    ny, nx = perm.shape
    rows, cols, vals = [], [], []
    for y in range(ny):
        for x in range(nx):
            for dy, dx in DIRS:
                ty, tx = y + dy, x + dx
                if not (0 <= ty < ny and 0 <= tx < nx) or perm[y, x] <= 0 or perm[ty, tx] <= 0:
                    continue
                if dy and dx and perm[ty, x] <= 0 and perm[y, tx] <= 0:
                    continue
                rows.append(y * nx + x)
                cols.append(ty * nx + tx)
                vals.append(perm[y, x] * perm[ty, tx] / math.hypot(dy, dx))
    return sparse.csr_matrix((vals, (rows, cols)), shape=(ny * nx, ny * nx))


def effective_resistance(c, a, b):
    """Two-point effective resistance: ground b, inject a unit current at a (Kirchhoff)."""
    lap = (sparse.diags(np.asarray(c.sum(axis=1)).ravel()) - c).tocsr()
    keep = np.array([i for i in range(c.shape[0]) if i != b and c[i].nnz > 0])
    rhs = (keep == a).astype(float)
    v = spsolve(lap[keep][:, keep].tocsc(), rhs)
    return v[keep == a][0]


# --------------------------------------------------------------------------- diffusion


@pytest.mark.parametrize("n", [1, 4, 12])
def test_deterministic_walk_is_the_one_step_stencil_convolved_n_times(n):
    """Uniform permeability, no mortality, no settlement: after n steps the walkers' positions are
    the one-step stencil (orthogonal 1, diagonal 1/sqrt 2, normalised) convolved n times, and the
    per-axis variance is n times the one-step variance 1/sqrt(2) (random-walk diffusion, common
    practice). scipy.signal.fftconvolve is the reference."""
    size = 2 * n + 5
    c = size // 2
    params = WalkParams(walk_length=n)
    _, visits, lost = det(point(size, 1.0), np.ones((size, size)), np.zeros((size, size)), params)
    stencil = np.array([[1 / SQ2, 1, 1 / SQ2], [1, 0, 1], [1 / SQ2, 1, 1 / SQ2]])
    stencil /= stencil.sum()
    ref = point(size, 1.0)
    for _ in range(n):
        ref = fftconvolve(ref, stencil, mode="same")
    np.testing.assert_allclose(lost, ref, atol=1e-12)
    for mean, var, _ in moments(lost, c):
        assert abs(mean) < 1e-12
        assert var == pytest.approx(n / SQ2, rel=1e-12)
    assert visits.sum() == pytest.approx(n, rel=1e-12)  # one entry per step and walker


@pytest.mark.parametrize("n", [4, 16])
def test_stochastic_displacement_variance_grows_linearly(n):
    """Whole walkers, uniform permeability, no settlement: per-axis displacement variance after n
    steps is n / sqrt(2) (random-walk diffusion, common practice), within 4 standard errors of the
    sample variance, SE = sqrt((mu4 - sigma^4) / N) with mu4 of the exact distribution."""
    size = 2 * n + 5
    c = size // 2
    walkers = 20_000
    params = WalkParams(walk_length=n)
    perm, q = np.ones((size, size)), np.zeros((size, size))
    _, _, lost_exact = det(point(size, 1.0), perm, q, params)
    arrivals, _, _, visits, lost = sto(point(size, walkers), perm, q, params, key())
    assert arrivals.sum() == 0 and lost.sum() == walkers
    assert visits.sum() == walkers * n
    for (mean, var, _), (_, var0, mu4) in zip(moments(lost, c), moments(lost_exact, c),
                                              strict=True):
        se = math.sqrt((mu4 - var0**2) / walkers)
        assert abs(var - n / SQ2) < 4 * se
        assert abs(mean) < 4 * math.sqrt(var0 / walkers)


def test_persistence_mean_squared_displacement_matches_direction_chain():
    """Correlated walk (kappa = 1.5) on a uniform grid: the mean squared displacement after n
    steps equals sum_t E|v_t|^2 + 2 sum_{s<t} E[v_s . v_t], the velocity-correlation decomposition
    of a correlated random walk (Kareiva and Shigesada 1983, Oecologia 56:234, from memory),
    evaluated on the 8-state Markov chain of step directions with numpy."""
    n, kappa = 10, 1.5
    size = 2 * n + 5
    c = size // 2
    params = WalkParams(walk_length=n, heading_bias=kappa)
    _, _, lost = det(point(size, 1.0), np.ones((size, size)), np.zeros((size, size)), params)
    yy, xx = np.mgrid[:size, :size]
    msd = (lost * ((xx - c) ** 2 + (yy - c) ** 2)).sum()

    v = np.array(DIRS, dtype=float)
    length = np.hypot(v[:, 0], v[:, 1])
    b = 1.0 / length
    cos = (v @ v.T) / np.outer(length, length)
    trans = b * np.exp(kappa * cos)
    trans /= trans.sum(axis=1, keepdims=True)
    dots = v @ v.T
    pi = [b / b.sum()]
    for _ in range(n - 1):
        pi.append(pi[-1] @ trans)
    ref = sum(p @ length**2 for p in pi)
    for s in range(n):
        for t in range(s + 1, n):
            ref += 2 * pi[s] @ (np.linalg.matrix_power(trans, t - s) * dots).sum(axis=1)
    assert msd == pytest.approx(ref, rel=1e-12)
    assert msd > n * SQ2  # heading_bias spreads walkers faster than the uncorrelated walk


def test_mortality_and_settlement_follow_the_geometric_series():
    """Uniform permeability P = 0.5 (R = 2), hazard mu R len per step, settlement q^shape = 0.25:
    a step is diagonal with probability sqrt(2) - 1, so the one-step survival is
    s1 = (2 - sqrt 2) e^(-2 mu) + (sqrt 2 - 1) e^(-2 sqrt(2) mu) and the settled share after n steps
    is s s1 sum_t (s1 (1 - s))^t, t < n (independent trials, common practice). Deterministic
    exactly; stochastic within 4 binomial standard errors."""
    n, mu = 8, 0.3
    size = 2 * n + 5
    perm, q = np.full((size, size), 0.5), np.full((size, size), 0.5)
    params = WalkParams(walk_length=n, death_per_resistance=mu, settle_exponent=2.0)
    s = 0.25
    s1 = (2 - SQ2) * math.exp(-2 * mu) + (SQ2 - 1) * math.exp(-2 * SQ2 * mu)
    r = s1 * (1 - s)
    settled = s * s1 * (1 - r**n) / (1 - r)
    arrivals, visits, lost = det(point(size, 1.0), perm, q, params)
    assert arrivals.sum() == pytest.approx(settled, rel=1e-12)
    assert visits.sum() == pytest.approx((1 - r**n) / (1 - r), rel=1e-12)
    walkers = 20_000
    arrivals, _, _, _, lost = sto(point(size, walkers), perm, q, params, key())
    se = math.sqrt(walkers * settled * (1 - settled))
    assert abs(arrivals.sum() - walkers * settled) < 4 * se


# --------------------------------------------------------------------------- barriers


def barrier_cases():
    size = 24
    yy, xx = np.mgrid[:size, :size]
    vertical = xx == 11
    diagonal = xx == yy  # an 8-connected line: crossing it needs a corner-cutting step
    return [
        ("vertical", vertical, xx < 11),
        ("diagonal", diagonal, xx < yy),
    ]


@pytest.mark.parametrize("name,wall,left", barrier_cases(), ids=lambda v: v if isinstance(v, str)
                         else "")
def test_infinite_resistance_barrier_splits_the_grid(name, wall, left):
    """A line of infinite resistance (P = 0, 8-connected) is never crossed, in either mode
    (exact; common practice for cost surfaces, the diagonal line is held by the no corner-cutting
    rule)."""
    size = wall.shape[0]
    gen = np.random.default_rng(3)
    r = gen.lognormal(0.0, 0.5, (size, size))
    r[wall] = np.inf
    perm = permeability_from_resistance(r)
    q = np.where(gen.random((size, size)) < 0.1, 0.3, 0.0)
    d = np.where(left, gen.integers(0, 30, (size, size)), 0).astype(float)
    right = ~left & ~wall
    params = WalkParams(walk_length=200, death_per_resistance=0.01, heading_bias=0.5)
    arr_s, _, _, vis_s, lost_s = sto(d, perm, q, params, key())
    for arrivals, visits, lost in (det(d, perm, q, params), (arr_s, vis_s, lost_s)):
        assert arrivals[right].sum() == 0 and visits[right].sum() == 0 and lost[right].sum() == 0
        assert visits[wall].sum() == 0
        assert visits[left].sum() > 0


# --------------------------------------------------------------------------- electrical network


@pytest.mark.parametrize("perm_row,expected", [
    ([1, 1, 1, 1, 1, 1], 1 / 5),
    ([1, 2, 0.5, 1, 3, 1], 1 / (2 * (1 / 2 + 1 + 2 + 1 / 3 + 1 / 3))),
])
def test_escape_probability_of_a_strip_is_one_over_conductance_times_resistance(perm_row,
                                                                                  expected):
    """A 1 x 6 strip, patches at both ends that absorb (settle with probability 1): the chance
    that a walker from the left end reaches the right end before returning is
    1 / (C_A R_eff), C_A = P0 P1 the conductance at A and R_eff = sum 1 / (P_k P_k+1) the series
    resistance (Doyle and Snell 1984, Random Walks and Electric Networks, from memory;
    hand-checked: 1/5 = 0.2 for the uniform strip, 0.12 for the second)."""
    perm = np.array([perm_row], dtype=float)
    labels = np.array([[1, 0, 0, 0, 0, 2]], dtype=np.int32)
    q = (labels > 0).astype(float)
    m = patch_connectivity(labels, 2, perm, q, WalkParams(walk_length=4000))
    assert m[0, 1] == pytest.approx(expected, abs=1e-10)
    assert m[0, 0] == pytest.approx(1 - expected, abs=1e-10)


def grid_with_patches():
    gen = np.random.default_rng(11)
    perm = gen.uniform(0.5, 2.0, (7, 8))
    perm[3, 4] = 0.0  # one impassable cell
    labels = np.zeros((7, 8), np.int32)
    labels[0:2, 0:2] = 1
    labels[5:7, 6:8] = 2
    labels[0, 6] = 3
    labels[6, 0:2] = 3
    return perm, labels


def test_patch_settlement_probabilities_are_the_harmonic_voltages():
    """Reversible walk (no heading_bias, no mortality), patches absorb, walk_length large: the
    probability that a disperser leaving patch i (uniform over its cells) settles in patch j is
    the mean over its cells of the one-step average of the voltage V_j, the harmonic function
    with V_j = 1 on patch j and 0 on the other patches, solved on the conductance network
    c_ab = P_a P_b / len_ab with scipy.sparse (Doyle and Snell 1984, from memory; McRae 2006,
    Evolution 60:1551)."""
    perm, labels = grid_with_patches()
    q = (labels > 0).astype(float)
    m = patch_connectivity(labels, 3, perm, q, WalkParams(walk_length=3000))

    c = conductances(perm)
    trans = sparse.diags(1.0 / np.maximum(np.asarray(c.sum(axis=1)).ravel(), 1e-300)) @ c
    lab = labels.ravel()
    interior = np.flatnonzero((lab == 0) & (perm.ravel() > 0))
    boundary = np.flatnonzero(lab > 0)
    lap = (sparse.diags(np.asarray(c.sum(axis=1)).ravel()) - c).tocsr()
    ref = np.zeros((3, 3))
    for j in range(1, 4):
        volt = np.zeros(lab.size)
        volt[lab == j] = 1.0
        rhs = -lap[interior][:, boundary] @ volt[boundary]
        volt[interior] = spsolve(lap[interior][:, interior].tocsc(), rhs)
        after_one_step = trans @ volt
        for i in range(1, 4):
            ref[i - 1, j - 1] = after_one_step[lab == i].mean()
    np.testing.assert_allclose(m, ref, atol=1e-10)
    np.testing.assert_allclose(m.sum(axis=1), 1.0, atol=1e-10)


def test_commute_time_and_escape_probability_follow_effective_resistance():
    """Two single cells A and B of a reversible grid walk: the commute time (expected steps A to
    B plus B to A, read from the flow map as total visits) is vol(G) R_eff (Chandra et al. 1997,
    Computational Complexity 6:312, from memory), and the escape probability is
    P(A -> B before A) = 1 / (C_A R_eff), so C_A M_AB = C_B M_BA (Doyle and Snell 1984, from
    memory). R_eff from Kirchhoff's equations with scipy.sparse."""
    perm, _ = grid_with_patches()
    ny, nx = perm.shape
    a, b = (1, 1), (5, 6)
    ia, ib = a[0] * nx + a[1], b[0] * nx + b[1]
    c = conductances(perm)
    r_eff = effective_resistance(c, ia, ib)
    degree = np.asarray(c.sum(axis=1)).ravel()
    params = WalkParams(walk_length=8000)
    hitting = []
    for src, dst in ((a, b), (b, a)):
        d = np.zeros((ny, nx))
        d[src] = 1.0
        q = np.zeros((ny, nx))
        q[dst] = 1.0
        arrivals, visits, _ = det(d, perm, q, params)
        assert arrivals[dst] == pytest.approx(1.0, abs=1e-12)
        hitting.append(visits.sum())
    assert sum(hitting) == pytest.approx(degree.sum() * r_eff, rel=1e-9)

    labels = np.zeros((ny, nx), np.int32)
    labels[a], labels[b] = 1, 2
    m = patch_connectivity(labels, 2, perm, (labels > 0).astype(float), params)
    assert m[0, 1] == pytest.approx(1 / (degree[ia] * r_eff), rel=1e-9)
    assert m[1, 0] == pytest.approx(1 / (degree[ib] * r_eff), rel=1e-9)


# --------------------------------------------------------------------------- both modes


def landscape(size=25, seed=5):
    gen = np.random.default_rng(seed)
    perm = permeability_from_resistance(gen.lognormal(0.5, 0.7, (size, size)))
    perm[gen.random((size, size)) < 0.05] = 0.0
    q = np.where(gen.random((size, size)) < 0.3, gen.random((size, size)), 0.0)
    labels = np.zeros((size, size), np.int32)
    labels[2:8, 2:9] = 1
    labels[14:22, 10:20] = 2
    perm[labels > 0] = np.maximum(perm[labels > 0], 0.5)
    q[labels > 0] = 0.8
    # an enclosed cell: its dispersers are trapped and lost
    perm[10:13, 20:23] = 0.0
    perm[11, 21] = 1.0
    return perm, q, labels


PARAMS = WalkParams(walk_length=25, death_per_resistance=0.05, settle_exponent=1.5,
                    heading_bias=0.8)


def test_stochastic_mode_conserves_and_tracks_origins_exactly():
    """Whole individuals: every disperser settles or is lost, sum(dispersers) == sum(arrivals) +
    sum(lost) exactly; a walk depends only on its cell and walker index, so two sources walked
    together give the sum of the two walked alone; `stayed` and `retained` are exact."""
    perm, q, labels = landscape()
    gen = np.random.default_rng(8)
    d = gen.integers(0, 20, perm.shape).astype(float)
    d[10:13, 20:23] = 0.0
    d[11, 21] = 7.0
    arrivals, stayed, retained, visits, lost = sto(d, perm, q, PARAMS, key(), labels, 2)
    assert arrivals.sum() + lost.sum() == d.sum()
    assert lost[11, 21] == 7.0 and visits[10:13, 20:23].sum() == 0
    for x in (arrivals, stayed, retained, visits, lost):
        assert (x == np.floor(x)).all()
    assert (stayed <= arrivals).all() and (stayed <= d).all()

    src1, src2 = (4, 5), (18, 15)  # in patch 1 and patch 2
    parts = []
    for src in (src1, src2):
        one = np.zeros_like(d)
        one[src] = 500.0
        parts.append(sto(one, perm, q, PARAMS, key(), labels, 2))
        arr, st, ret = parts[-1][:3]
        p = labels[src]
        assert st[src] == arr[src] and st.sum() == st[src]
        assert ret[p] == arr[labels == p].sum() and ret.sum() == ret[p]
    both = np.zeros_like(d)
    both[src1] = both[src2] = 500.0
    for x, x1, x2 in zip(sto(both, perm, q, PARAMS, key(), labels, 2), *parts, strict=True):
        np.testing.assert_array_equal(x, x1 + x2)


def test_deterministic_mode_conserves_expected_individuals():
    """Expected walkers: sum(arrivals) + sum(lost) == sum(dispersers) to 1e-12 relative
    (conservation of a Markov-chain redistribution, common practice)."""
    perm, q, labels = landscape()
    d = np.random.default_rng(8).uniform(0, 20, perm.shape)
    d[10:13, 20:23] = 0.0
    d[11, 21] = 7.0
    arrivals, visits, lost = det(d, perm, q, PARAMS, labels, 2)
    assert arrivals.sum() + lost.sum() == pytest.approx(d.sum(), rel=1e-12)
    assert lost[11, 21] == 7.0
    assert (arrivals >= 0).all() and (lost >= 0).all()
    assert arrivals[q == 0].sum() == 0  # nobody settles in the matrix


def test_stochastic_arrivals_match_deterministic_expectation():
    """Walkers from one cell fall in cells as a multinomial with the deterministic probabilities:
    Pearson's chi-square over cells with expected count >= 5 (the rest pooled, lost as one class)
    stays below its 0.9999 quantile (Pearson 1900, common practice); the lost share is within 4
    binomial SE; total visits, averaged over 20 years, within 4 SE of the expectation."""
    perm, q, labels = landscape()
    src = (12, 12)
    walkers = 20_000
    d = np.zeros(perm.shape)
    d[src] = 1.0
    p_arr, p_vis, p_lost = det(d, perm, q, PARAMS)
    arrivals, _, _, _, lost = sto(d * walkers, perm, q, PARAMS, key())
    expected = walkers * p_arr.ravel()
    big = expected >= 5
    obs = np.r_[arrivals.ravel()[big], arrivals.ravel()[~big].sum(), lost.sum()]
    exp = np.r_[expected[big], expected[~big].sum(), walkers * p_lost.sum()]
    chi2 = ((obs - exp) ** 2 / exp).sum()
    assert big.sum() > 20
    assert chi2 < stats.chi2.ppf(0.9999, len(obs) - 1)
    pl = p_lost.sum()
    assert abs(lost.sum() - walkers * pl) < 4 * math.sqrt(walkers * pl * (1 - pl))

    totals = [sto(d * 1000, perm, q, PARAMS, key(year))[3].sum() for year in range(20)]
    se = np.std(totals, ddof=1) / math.sqrt(len(totals))
    assert abs(np.mean(totals) - 1000 * p_vis.sum()) < 4 * se


def test_results_do_not_depend_on_the_number_of_threads(parallel_kernels):
    """Bit-identical outputs with 1 and 2 numba threads (counter-based random numbers and
    per-thread buffers of whole numbers; common practice for reproducible parallel Monte Carlo)."""
    if numba.config.NUMBA_NUM_THREADS < 2:
        pytest.skip("needs 2 numba threads")
    perm, q, labels = landscape(size=40, seed=9)
    d = np.random.default_rng(2).integers(0, 15, perm.shape).astype(float)
    before = numba.get_num_threads()
    runs = []
    try:
        for threads in (1, 2):
            numba.set_num_threads(threads)
            runs.append(sto(d, perm, q, PARAMS, key(), labels, 2)
                        + det(d, perm, q, PARAMS, labels, 2))
    finally:
        numba.set_num_threads(before)
    for x1, x2 in zip(*runs, strict=True):
        np.testing.assert_array_equal(x1, x2)


def test_connectivity_window_equals_full_grid():
    """The per-patch window of patch_connectivity loses nothing: each row equals the full-grid
    walk of the patch's start weights, summed by patch (uniform and capacity weights)."""
    perm, q, labels = landscape(size=40, seed=4)
    labels[30:34, 2:5] = 3
    params = WalkParams(walk_length=6, death_per_resistance=0.05, heading_bias=0.8)
    weights = np.random.default_rng(1).uniform(0, 5, perm.shape)
    for w in (None, weights):
        m = patch_connectivity(labels, 3, perm, q, params, weights=w)
        for p in range(1, 4):
            start = np.where(labels == p, 1.0 if w is None else w, 0.0)
            arrivals, _, _ = det(start / start.sum(), perm, q, params)
            ref = np.bincount(labels.ravel(), weights=arrivals.ravel(), minlength=4)[1:]
            np.testing.assert_allclose(m[p - 1], ref, rtol=1e-12, atol=1e-15)
        assert (m.sum(axis=1) < 1).all() and (np.diag(m) > 0).all()


# --------------------------------------------------------------------------- surfaces, errors


def test_surfaces_from_resistance_and_suitability():
    """P = 1/R with inf and NaN impassable; R = 1 + (r_max - 1)(1 - s)^shape (definitions)."""
    p = permeability_from_resistance(np.array([[4.0, np.inf, np.nan, 0.5]]))
    np.testing.assert_array_equal(p, [[0.25, 0.0, 0.0, 2.0]])
    r = resistance_from_suitability(np.array([[1.0, 0.0, 0.5, np.nan]]), 101.0, 2.0)
    np.testing.assert_array_equal(r[:, :3], [[1.0, 101.0, 26.0]])
    assert np.isnan(r[0, 3])


def test_user_errors_name_the_value():
    with pytest.raises(ValueError, match="resistance.*-1"):
        permeability_from_resistance(np.array([[1.0, -1.0]]))
    with pytest.raises(ValueError, match="suitability.*1.5"):
        resistance_from_suitability(np.array([[1.5]]), 10.0, 1.0)
    with pytest.raises(ValueError, match="resistance_max.*0.5"):
        resistance_from_suitability(np.array([[0.5]]), 0.5, 1.0)
    with pytest.raises(ValueError, match="walk_length.*0"):
        WalkParams(walk_length=0)
    with pytest.raises(ValueError, match="heading_bias.*-1"):
        WalkParams(walk_length=3, heading_bias=-1.0)
    with pytest.raises(ValueError, match="quality.*2"):
        det(np.ones((2, 2)), np.ones((2, 2)), np.full((2, 2), 2.0), WalkParams(walk_length=1))
    with pytest.raises(ValueError, match="permeability.*inf"):
        det(np.ones((1, 2)), np.array([[1.0, np.inf]]), np.zeros((1, 2)), WalkParams(walk_length=1))


def test_patch_origins_exact_in_both_modes():
    """Per-patch bookkeeping of the walk: settled_from[p] counts the dispersers of patch p that
    settled anywhere, retained[p] those that settled in p; in deterministic mode both equal the
    expected values of a walk of that patch's dispersers alone (linearity of expectation, common
    practice), and in stochastic mode a settled disperser has exactly one origin."""
    n = 15
    perm = np.ones((n, n))
    q = np.zeros((n, n))
    labels = np.zeros((n, n), np.int32)
    labels[2:5, 2:5] = 1
    labels[9:13, 9:13] = 2
    q[labels > 0] = 0.6
    d = np.where(labels > 0, 7.0, 0.0)
    params = WalkParams(walk_length=30, death_per_resistance=0.05)
    res = disperse_walk_deterministic(d, perm, q, labels, 2, params)
    for p in (1, 2):
        alone = disperse_walk_deterministic(np.where(labels == p, d, 0.0), perm, q, labels, 2,
                                            params)
        assert res.settled_from[p] == pytest.approx(alone.arrivals.sum(), rel=1e-12)
        assert res.retained[p] == pytest.approx(alone.arrivals[labels == p].sum(), rel=1e-12)
    assert 0 < res.retained[1] < res.settled_from[1] < d[labels == 1].sum()
    sres = disperse_walk_stochastic(d, perm, q, labels, 2, params, key())
    assert sres.settled_from[1:].sum() == sres.arrivals.sum()
    assert np.all(sres.retained <= sres.settled_from)


def test_entry_survival_thins_walkers_crossing_a_line():
    """A line of cells entered with survival 0.5 halves what crosses it when walkers cross at
    most once (one-way strip, exact expectation; common practice)."""
    perm = np.ones((1, 6))
    q = np.zeros((1, 6))
    q[0, 5] = 1.0
    d = np.zeros((1, 6))
    d[0, 0] = 1.0
    params = WalkParams(walk_length=5)
    surv = np.ones((1, 6))
    open_ = disperse_walk_deterministic(d, perm, q, np.zeros((1, 6), np.int32), 0, params)
    surv[0, 3] = 0.5
    thinned = disperse_walk_deterministic(d, perm, q, np.zeros((1, 6), np.int32), 0, params,
                                          entry_survival=surv)
    assert open_.arrivals[0, 5] > 0
    # a walker reaching cell 5 within 5 steps on a 1-D strip from cell 0 went straight: it
    # entered cell 3 exactly once
    assert thinned.arrivals[0, 5] == pytest.approx(0.5 * open_.arrivals[0, 5], rel=1e-12)


def test_connectivity_counts_barrier_crossing_mortality():
    """patch_connectivity with entry survival equals the expected walk of a patch's dispersers
    with the same entry survival (the definition of the table), and a lossy crossing lowers it."""
    n = 21
    perm = np.ones((n, n))
    q = np.zeros((n, n))
    labels = np.zeros((n, n), np.int32)
    labels[8:13, 1:5] = 1
    labels[8:13, 16:20] = 2
    q[labels > 0] = 0.5
    surv = np.ones((n, n))
    surv[:, 10] = 0.3
    params = WalkParams(walk_length=80)
    free = patch_connectivity(labels, 2, perm, q, params)
    lossy = patch_connectivity(labels, 2, perm, q, params, entry_survival=surv)
    start = np.where(labels == 1, 1.0, 0.0)
    walk = disperse_walk_deterministic(start / start.sum(), perm, q, labels, 2, params,
                                       entry_survival=surv)
    assert lossy[0, 1] == pytest.approx(walk.arrivals[labels == 2].sum(), rel=1e-9)
    assert 0 < lossy[0, 1] < free[0, 1]
    assert lossy[0, 0] <= free[0, 0]


def test_corridor_share_of_the_flow_between_two_blocks():
    """Two blocks joined by two routes, one marked as the corridor: when the other route is
    closed everything flows through the corridor (share 1, exact), when the corridor is not on
    any route the share is 0, and with both open the share lies strictly between (the walk's
    linearity in its walkers, common practice)."""

    ny, nx = 11, 21
    labels = np.zeros((ny, nx), np.int32)
    labels[3:8, 0:3] = 1
    labels[3:8, 18:21] = 2
    q = np.where(labels > 0, 1.0, 0.0)
    perm = np.zeros((ny, nx))
    perm[labels > 0] = 1.0
    perm[2, :] = 1.0  # northern route
    perm[8, :] = 1.0  # southern route
    perm[2:9, 0:3] = perm[2:9, 18:21] = 1.0
    corridor = np.zeros((ny, nx), bool)
    corridor[2, 5:16] = True
    params = WalkParams(walk_length=200)
    flow, share = corridor_share(labels == 1, labels == 2, corridor, perm, q, params)
    assert flow > 0 and 0.3 < share < 0.7
    closed = perm.copy()
    closed[8, 5:16] = 0.0
    flow_c, share_c = corridor_share(labels == 1, labels == 2, corridor, closed, q, params)
    assert flow_c > 0 and share_c == pytest.approx(1.0, abs=1e-12)
    elsewhere = np.zeros((ny, nx), bool)
    elsewhere[0, :] = True  # impassable cells: never visited
    assert corridor_share(labels == 1, labels == 2, elsewhere, perm, q,
                          params)[1] == pytest.approx(0.0)

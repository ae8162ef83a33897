"""Kernel dispersal across barriers: each crossing charged the mortality of the barrier it
crosses, several crossings the product of their survivals."""

import numpy as np
import pytest

from gridpop import rng as rng_streams
from gridpop.movement.barrier import BarrierKernelMover, crossing_survival, thin
from gridpop.movement.convolution import disperse_deterministic
from gridpop.movement.kernels import make_kernel
from gridpop.movement.placement import disperse_stochastic
from gridpop.rng import YearStreams

NY, NX = 9, 31
W1, W2 = 10, 20  # barrier columns


def two_barriers(m1, m2):
    barrier = np.zeros((NY, NX))
    barrier[:, W1] = m1
    barrier[:, W2] = m2
    return barrier


def test_survival_between_regions_is_the_product_over_the_barriers_between():
    """Regions west, middle and east of two barriers of mortality 0.3 and 0.95: from the west,
    the middle is reached with survival 0.7, the east with 0.7 x 0.05 (independent crossings
    multiply, common practice); an impassable barrier makes what lies beyond unreachable."""
    regions, node, surv = crossing_survival(two_barriers(0.3, 0.95))
    west, middle, east = regions[0, 0], regions[0, W1 + 1], regions[0, -1]
    assert len({west, middle, east}) == 3
    assert surv[west, west] == 1.0
    assert surv[west, middle] == pytest.approx(0.7, rel=1e-15)
    assert surv[west, east] == pytest.approx(0.7 * 0.05, rel=1e-15)
    assert surv[east, west] == pytest.approx(0.7 * 0.05, rel=1e-15)
    assert surv[west, node[0, W1]] == pytest.approx(0.7, rel=1e-15)  # landing on the barrier
    assert surv[west, node[0, W2]] == pytest.approx(0.7 * 0.05, rel=1e-15)
    regions, node, surv = crossing_survival(two_barriers(0.3, 1.0))
    assert surv[regions[0, 0], regions[0, -1]] == 0.0
    assert surv[regions[0, 0], regions[0, W1 + 1]] == pytest.approx(0.7, rel=1e-15)


def test_one_barrier_charges_exactly_its_own_mortality():
    """A single barrier: the survival of a crossing is 1 - mortality, to the last bit."""
    barrier = np.zeros((NY, NX))
    barrier[:, W1] = 0.35
    regions, _, surv = crossing_survival(barrier)
    assert surv[regions[0, 0], regions[0, -1]] == 1.0 - 0.35


def test_expected_survivors_across_two_barriers_closed_form():
    """Deterministic kernel dispersal from one cell west of both barriers: the expected
    arrivals in each region are the kernel's mass landing there times the product of the
    survivals of the barriers crossed, N w_west, 0.7 N w_middle, 0.7 x 0.05 N w_east (common
    practice: independent survival of successive crossings); with the old rule (the largest
    mortality on the grid for every crossing) the middle would get 0.05 N w_middle."""
    kernel = make_kernel("exponential", mean_distance_m=150.0, cell_w_m=30.0, cell_h_m=30.0,
                         grid_shape=(NY, NX))
    assert kernel.rx > W2 - 8  # the kernel reaches the east region
    leaving = np.zeros((NY, NX))
    leaving[4, 8] = 1000.0
    k = np.ones((NY, NX))
    labels = np.zeros((NY, NX), np.int32)
    mover = BarrierKernelMover(kernel, "absorbing", labels, 0, False, two_barriers(0.3, 0.95))
    moved = mover.move(leaving, k, YearStreams(1, 0, 0), {})
    free, _ = disperse_deterministic(leaving, kernel, "absorbing")
    cols = np.arange(NX)[None, :] * np.ones((NY, 1), int)
    for cells, s in ((cols < W1, 1.0), (cols == W1, 0.7), ((cols > W1) & (cols < W2), 0.7),
                     (cols == W2, 0.7 * 0.05), (cols > W2, 0.7 * 0.05)):
        assert free[cells].sum() > 0
        assert moved.arrivals[cells].sum() == pytest.approx(s * free[cells].sum(), rel=1e-12)


def test_stochastic_crossers_thinned_by_their_own_barriers():
    """Stochastic mode: whole individuals; over many years the mean number landing east of
    both barriers is N w_east x 0.7 x 0.05 within 4 standard errors (binomial thinning of
    multinomial landings, common practice)."""
    kernel = make_kernel("exponential", mean_distance_m=150.0, cell_w_m=30.0, cell_h_m=30.0,
                         grid_shape=(NY, NX))
    leaving = np.zeros((NY, NX))
    leaving[4, 8] = 2000.0
    k = np.ones((NY, NX))
    labels = np.zeros((NY, NX), np.int32)
    mover = BarrierKernelMover(kernel, "absorbing", labels, 0, True, two_barriers(0.3, 0.95))
    free, _ = disperse_deterministic(leaving, kernel, "absorbing")
    east = np.arange(NX)[None, :].repeat(NY, 0) > W2
    p = free[east].sum() / 2000.0 * 0.7 * 0.05
    got = np.array([mover.move(leaving, k, YearStreams(3, 0, y), {}).arrivals[east].sum()
                    for y in range(200)])
    assert np.all(got == np.round(got))
    se = np.sqrt(2000.0 * p * (1 - p) / got.size)
    assert abs(got.mean() - 2000.0 * p) < 4 * se


@pytest.mark.parametrize("edge", ["absorbing", "reflecting"])
def test_stochastic_mover_draws_what_dispersal_by_group_then_thinning_draws(edge):
    """The stochastic mover places every source in one pass; it must give exactly what the
    definition gives: per (region, patch) group, the group's dispersers placed by
    ``disperse_stochastic`` (same key), those landing outside the group's region thinned by
    ``thin`` with the group's survivals, summed over the groups; retention counted per patch.
    Several patches on both sides of two barriers, many dispersers (multinomial and one by one).
    Internal consistency, no outside reference."""
    rng = np.random.default_rng(5)
    labels = np.zeros((NY, NX), np.int32)
    labels[1:4, 2:8] = 1
    labels[5:8, 3:9] = 2
    labels[2:7, 12:18] = 3
    labels[:, 22:27] = 4
    barrier = two_barriers(0.3, 0.6)
    labels[barrier > 0] = 0
    leaving = np.floor(rng.gamma(0.5, 30.0, (NY, NX)))
    leaving[2, 4] = leaving[4, 14] = 400.0
    leaving[barrier > 0] = 0.0
    k = np.where(rng.random((NY, NX)) < 0.8, 5.0, 0.0)
    kernel = make_kernel("exponential", mean_distance_m=60.0, max_distance_m=150.0,
                         cell_w_m=30.0, cell_h_m=30.0, grid_shape=(NY, NX))
    n_p = 4
    mover = BarrierKernelMover(kernel, edge, labels, n_p, True, barrier)
    streams = YearStreams(8, 1, 2)
    got = mover.move(leaving, k, streams, {})

    regions, node, surv = crossing_survival(barrier)
    settle = k > 0
    group = regions.astype(np.int64) * (n_p + 1) + labels
    arrivals, stayed = np.zeros((NY, NX)), np.zeros((NY, NX))
    retained, settled_from = np.zeros(n_p + 1), np.zeros(n_p + 1)
    for g in np.unique(group[(leaving > 0) & (regions > 0)]):
        r, p = divmod(int(g), n_p + 1)
        inside = regions == r
        arr, st, _, _ = disperse_stochastic(np.where(group == g, leaving, 0.0), settle, labels,
                                            n_p, kernel, edge,
                                            streams.key(rng_streams.STREAM_DISPERSAL))
        kept = thin(np.where(inside, 0.0, arr), surv[r], streams.key(rng_streams.STREAM_BARRIER),
                    int(g), node=node)
        arr = np.where(inside, arr, kept)
        arrivals += arr
        stayed += st
        if p > 0:
            landed = np.where(settle, arr, 0.0)
            settled_from[p] += landed.sum()
            retained[p] += landed[labels == p].sum()
    assert (leaving >= 1.5 * kernel.conditional.size).any()  # some cells draw a multinomial
    np.testing.assert_array_equal(got.arrivals, arrivals)
    np.testing.assert_array_equal(got.stayed, stayed)
    np.testing.assert_array_equal(got.retained, retained)
    np.testing.assert_array_equal(got.settled_from, settled_from)
    assert arrivals.sum() < leaving.sum()  # some died crossing

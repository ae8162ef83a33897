"""Kernel dispersal across barriers: each crossing charged the mortality of the barrier it
crosses, several crossings the product of their survivals."""

import numba
import numpy as np
import pytest

from gridpop import _jit
from gridpop import rng as rng_streams
from gridpop.movement import barrier as barrier_module
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


def by_definition(leaving, k, labels, n_p, kernel, edge, barrier, streams):
    """What the stochastic mover must draw: per (region, patch) group, the group's dispersers
    placed by ``disperse_stochastic`` (same key), those landing outside the group's region
    thinned by ``thin`` with the group's survivals, summed over the groups; retention counted
    per patch."""
    regions, node, surv = crossing_survival(barrier)
    settle = k > 0
    group = regions.astype(np.int64) * (n_p + 1) + labels
    arrivals, stayed = np.zeros(leaving.shape), np.zeros(leaving.shape)
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
    return arrivals, stayed, retained, settled_from


def assert_moved(got, expected):
    for a, b in zip(got[:4], expected, strict=True):
        np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("edge", ["absorbing", "reflecting"])
def test_stochastic_mover_draws_what_dispersal_by_group_then_thinning_draws(edge):
    """The stochastic mover places every source in one pass; it must give exactly what the
    definition gives (:func:`by_definition`). Several patches on both sides of two barriers,
    many dispersers (multinomial and one by one). Internal consistency, no outside reference."""
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
    streams = YearStreams(8, 1, 2)
    got = BarrierKernelMover(kernel, edge, labels, 4, True, barrier).move(leaving, k, streams, {})
    expected = by_definition(leaving, k, labels, 4, kernel, edge, barrier, streams)
    assert (leaving >= 1.5 * kernel.conditional.size).any()  # some cells draw a multinomial
    assert_moved(got, expected)
    assert expected[0].sum() < leaving.sum()  # some died crossing


@pytest.mark.parametrize("edge", ["absorbing", "reflecting"])
def test_stochastic_mover_on_a_large_grid_same_serial_and_parallel(edge, monkeypatch):
    """Above PARALLEL_CELLS with 2 threads the parallel variant places the sources in row
    blocks whose landings in other blocks' rows go through halos, the crossers of a group at a
    cell then summed over the blocks before thinning: it must give bit for bit what the serial
    variant (1 thread) gives and the definition (:func:`by_definition`), with 2 blocks and
    with 10 blocks as high as the kernel's reach (a cell listed in several halos). Two barriers
    across the grid, many patches, the year's numbers kept from one call to the next (the
    mover's scratch arrays reused). Internal consistency, no outside reference."""
    ny, nx = 200, 170
    assert ny * nx >= _jit.PARALLEL_CELLS
    rng = np.random.default_rng(11)
    barrier = np.zeros((ny, nx))
    barrier[:, 60] = 0.4
    barrier[:, 110:112] = 0.8
    labels = np.kron(np.arange(1, 9, dtype=np.int32).reshape(4, 2), np.ones((50, 85), np.int32))
    labels[barrier > 0] = 0
    leaving = np.floor(rng.gamma(0.4, 20.0, (ny, nx)))
    leaving[barrier > 0] = 0.0
    k = np.where(rng.random((ny, nx)) < 0.8, 5.0, 0.0)
    kernel = make_kernel("exponential", mean_distance_m=90.0, max_distance_m=600.0,
                         cell_w_m=30.0, cell_h_m=30.0, grid_shape=(ny, nx))
    assert kernel.ry == 20
    mover = BarrierKernelMover(kernel, edge, labels, 8, True, barrier)
    blocks = []
    split = barrier_module._blocks
    monkeypatch.setattr(barrier_module, "_blocks",
                        lambda *a: blocks.append(split(*a)[0].size - 1) or split(*a))
    n = numba.get_num_threads()
    try:
        streams = YearStreams(4, 0, 2)
        expected = by_definition(leaving, k, labels, 8, kernel, edge, barrier, streams)
        assert expected[0].sum() < leaving.sum()
        for threads, per_thread, n_blocks in ((1, 1, 1), (2, 1, 2), (2, 6, 10)):
            numba.set_num_threads(threads)
            monkeypatch.setattr(barrier_module, "BLOCKS_PER_THREAD", per_thread)
            kernel_used = barrier_module._across_kernel.variant(leaving)
            assert (kernel_used is barrier_module._across_kernel.parallel) == (threads > 1)
            work: dict = {}
            mover.move(leaving[::-1].copy(), k, YearStreams(9, 0, 1), work)  # fills work
            assert_moved(mover.move(leaving, k, streams, work), expected)
            assert blocks[-2:] == [n_blocks, n_blocks]
    finally:
        numba.set_num_threads(n)

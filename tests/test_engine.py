"""The yearly cycle: ledger identities, reproducibility, replicate independence."""

from __future__ import annotations

import subprocess
import sys

import numba
import numpy as np
import pytest
from conftest import FIRE, read_rows, scenario_text

import gridpop
from gridpop import _jit, demography, rng
from gridpop.io.results import LEDGER_FIELDS
from gridpop.landscape import build_landscape
from gridpop.movement import NO_RETENTION
from gridpop.movement.emigration import leaving_deterministic, leaving_stochastic
from gridpop.simulation.check import describe
from gridpop.simulation.cycle import census_pass, grow_pass, patch_totals
from gridpop.simulation.model import Emigration, GrowthRates, build_model


def read_ledger(path, patches=False):
    rows = read_rows(path)
    key = ("replicate", "year", "patch") if patches else ("replicate", "year")
    return {tuple(int(r[k]) for k in key): np.array([float(r[f]) for f in LEDGER_FIELDS])
            for r in rows}


def check_identity(ledger, exact, rtol=1e-6):
    """N(t+1) = N(t) + births - deaths - disturbance_deaths + immigrants - emigrants
    (the births-deaths-immigration-emigration balance, common practice in population ecology).
    Keys are (replicate, year) or (replicate, year, patch)."""
    a, b, d, dd, e, i = range(6)
    checked = 0
    for key, row in ledger.items():
        prev = ledger.get((key[0], key[1] - 1, *key[2:]))
        if prev is None:
            continue
        expected = prev[a] + row[b] - row[d] - row[dd] + row[i] - row[e]
        if exact:
            assert row[a] == expected, (key, row, prev)
        else:
            assert row[a] == pytest.approx(expected, rel=rtol, abs=1e-9), key
        checked += 1
    assert checked > 0


@pytest.mark.parametrize("stochastic", [True, False])
def test_ledger_identity_landscape_and_patches(make_scenario, tmp_path, stochastic):
    out = tmp_path / "r"
    gridpop.run(make_scenario(scenario_text(stochastic=stochastic)), out)
    land = read_ledger(out / "timeseries.csv")
    check_identity(land, exact=stochastic)
    # the whole landscape: emigrants = immigrants + losses
    for row in land.values():
        assert row[4] == pytest.approx(row[5] + row[6], rel=1e-9, abs=1e-9)
    moved = sum(row[4] for row in land.values())
    assert moved > 0
    patches = read_ledger(out / "patches.csv", patches=True)
    check_identity(patches, exact=stochastic)
    # patches partition the habitat: patch abundances add up to the landscape's
    for (r, t), row in land.items():
        total = sum(v[0] for (rr, tt, _), v in patches.items() if rr == r and tt == t)
        assert total == pytest.approx(row[0], rel=1e-9)


@pytest.mark.parametrize("stochastic, kernel", [(True, "exponential"), (False, "gaussian")])
@pytest.mark.slow
def test_same_seed_bit_identical_whatever_threads_and_batches(make_scenario, tmp_path, stochastic,
                                                              kernel):
    """Counter-based random numbers (Salmon et al. 2011, SC'11): any split of the work gives the
    same numbers, and sums run over a fixed chunking of rows. Runs in subprocesses with
    NUMBA_NUM_THREADS 1 and 2 and two batch sizes (stochastic with the full stencil's kernel,
    deterministic with the separable one)."""
    outs = []
    for threads, batch in ((1, 1), (2, 3)):
        text = scenario_text(batch=batch, stochastic=stochastic).replace(
            'kernel = "exponential"', f'kernel = "{kernel}"')
        scen = make_scenario(text, name=f"s{threads}.toml")
        out = tmp_path / f"r{threads}"
        code = ("import sys, gridpop, gridpop._jit as j; j.PARALLEL_CELLS = 0; "  # parallel code
                "gridpop.run(sys.argv[1], sys.argv[2])")
        subprocess.run([sys.executable, "-c", code, str(scen), str(out)], check=True,
                       env={"NUMBA_NUM_THREADS": str(threads), "PATH": "/usr/bin:/bin",
                            "HOME": str(tmp_path)})
        outs.append(out)
    for name in ("abundance.tif", "occupancy.tif", "colonised.tif", "timeseries.csv",
                 "patches.csv"):
        assert (outs[0] / name).read_bytes() == (outs[1] / name).read_bytes(), name


def test_replicate_does_not_depend_on_other_replicates(make_scenario, tmp_path):
    one = make_scenario(scenario_text().replace("replicates = 4", "replicates = 1"), "one.toml")
    four = make_scenario(scenario_text(), "four.toml")
    gridpop.run(one, tmp_path / "one")
    gridpop.run(four, tmp_path / "four")
    a = read_ledger(tmp_path / "one" / "timeseries.csv")
    b = read_ledger(tmp_path / "four" / "timeseries.csv")
    for key, row in a.items():
        np.testing.assert_array_equal(row, b[key])
    # and different replicates do differ
    assert any(not np.array_equal(b[(0, t)], b[(1, t)]) for t in range(1, 9))


def test_outside_study_area_and_matrix_hold_nobody(make_scenario, tmp_path):
    import rasterio

    out = tmp_path / "r"
    gridpop.run(make_scenario(scenario_text()), out)
    with rasterio.open(tmp_path / "suitability.tif") as s:
        suit = s.read(1)
    inside = suit != -9999.0
    matrix = inside & (suit < 0.3)  # the threshold response gives these cells no capacity
    assert matrix.sum() > 100
    with rasterio.open(out / "abundance.tif") as ds:
        stack = ds.read()
    assert np.all(stack[:, ~inside] == ds.nodata)
    assert np.all(stack[:, matrix] == 0)
    assert stack[-1, inside & ~matrix].sum() > 0


DISTURBED = FIRE + """
[[disturbance]]
kind = "flood"
return_period_years = 3.0
zone = "zone.tif"
mortality = 0.4
"""


@pytest.mark.parametrize("stochastic", [True, False])
def test_ledger_identity_with_disturbance(make_scenario, make_raster, tmp_path, stochastic):
    """N(t+1) = N(t) + births - deaths - disturbance_deaths + immigrants - emigrants, exactly in
    stochastic mode, with fires and floods (common practice: the BIDE balance). events.csv deaths
    add up to the ledger's disturbance deaths."""
    zone = np.zeros((40, 60))
    zone[20:40, 30:60] = 1
    make_raster("zone.tif", zone, nodata=None)
    out = tmp_path / "r"
    gridpop.run(make_scenario(scenario_text(stochastic=stochastic) + DISTURBED), out)
    land = read_ledger(out / "timeseries.csv")
    check_identity(land, exact=stochastic)
    check_identity(read_ledger(out / "patches.csv", patches=True), exact=stochastic)
    dist = sum(row[3] for row in land.values())
    assert dist > 0
    events = read_rows(out / "events.csv")
    assert {e["kind"] for e in events} == {"fire", "flood"}
    assert sum(float(e["deaths"]) for e in events) == pytest.approx(dist, rel=1e-9)
    per_year = {}
    for e in events:
        key = (int(e["replicate"]), int(e["year"]))
        per_year[key] = per_year.get(key, 0.0) + float(e["deaths"])
    for key, d in per_year.items():
        assert land[key][3] == pytest.approx(d, rel=1e-9, abs=1e-9)
    import rasterio

    for name in ("burned.tif", "flooded.tif"):
        with rasterio.open(out / name) as ds:
            stack = ds.read(masked=True)
            assert stack.max() > 0 and stack.min() >= 0 and stack.max() <= 1
            assert np.all(stack[0] == 0)


def test_patch_losses_add_up_to_landscape_losses(make_scenario, tmp_path):
    """Losses are dispersers that settled nowhere: with every disperser starting in a patch, the
    patches' losses add up to the landscape's exactly (stochastic integers)."""
    out = tmp_path / "r"
    gridpop.run(make_scenario(scenario_text()), out)
    land = read_ledger(out / "timeseries.csv")
    patches = read_ledger(out / "patches.csv", patches=True)
    total = 0.0
    for (r, t), row in land.items():
        by_patch = sum(v[6] for (rr, tt, _), v in patches.items() if rr == r and tt == t)
        assert by_patch == row[6]
        total += row[6]
        for (rr, tt, _), v in patches.items():
            if rr == r and tt == t:
                assert 0 <= v[6] <= v[4]  # a patch loses no more than its emigrants
    assert total > 0


WALK = """
[dispersal]
fraction = 0.3
method = "walk"
walk_length = 40
death_per_resistance = 0.02
heading_bias = 0.5
"""


@pytest.mark.parametrize("stochastic", [True, False])
def test_walk_method_ledger_flow_and_connectivity(make_scenario, tmp_path, stochastic):
    """Walk dispersal in the yearly cycle: the BIDE ledger stays exact (common practice), the
    flow stack and the patch connectivity table are written, rows of probabilities <= 1."""
    text = scenario_text(stochastic=stochastic).split("[dispersal]")[0] + WALK

    scen = gridpop.load_scenario(make_scenario(text, "walk.toml"))
    lines = describe(scen, build_model(scen, build_landscape(scen, stochastic=stochastic)))
    assert any("walk over the landscape" in line and "up to 40 steps" in line for line in lines)
    out = tmp_path / "r"
    gridpop.run(make_scenario(text), out)
    land = read_ledger(out / "timeseries.csv")
    check_identity(land, exact=stochastic)
    check_identity(read_ledger(out / "patches.csv", patches=True), exact=stochastic)
    assert sum(row[4] for row in land.values()) > 0
    import rasterio

    with rasterio.open(out / "flow.tif") as ds:
        flow = ds.read(masked=True)
        assert flow[1:].sum() > 0 and np.all(flow[0] == 0)
    rows = read_rows(out / "connectivity.csv")
    assert len(rows) == 4  # two patches
    for p in ("1", "2"):
        assert 0 < sum(float(r["probability"]) for r in rows if r["from_patch"] == p) <= 1
    # metapopulation capacity from the walk's connections in place of exp(-alpha d)
    # (Hanski and Ovaskainen 2000, Nature 404:755), checked against numpy's eigenvalues
    import json

    summary = json.loads((out / "summary.json").read_text())
    mc = summary["metapopulation_capacity"]
    conn = np.zeros((2, 2))
    for r in rows:
        conn[int(r["from_patch"]) - 1, int(r["to_patch"]) - 1] = float(r["probability"])
    area = np.array(mc["area_ha"])
    m = conn * np.outer(area, area)
    np.fill_diagonal(m, 0.0)
    assert mc["lambda_M"] == pytest.approx(max(np.linalg.eigvals(m).real), rel=1e-9)


def walled_runs(make_scenario, make_raster, tmp_path, *, stochastic, mortality, edits=()):
    """Runs with the west block stocked and the east block empty, without and with a barrier
    between them: (patch ledger without, patch ledger with, id of the east patch)."""
    import rasterio

    with rasterio.open(tmp_path / "suitability.tif") as s:
        suit = s.read(1)
    start = np.zeros_like(suit)
    start[5:20, 5:25] = 5
    make_raster("start.tif", start, nodata=None)
    wall = np.zeros_like(suit)
    wall[:, 29:31] = 1
    make_raster("wall.tif", wall, nodata=0)
    text = scenario_text(stochastic=stochastic)
    for edit in (("fraction_of_capacity = 0.6", 'raster = "start.tif"'),
                 ("mean_distance_m = 90.0", "mean_distance_m = 300.0"), *edits):
        text = text.replace(*edit)
    barrier = ('\n[[action]]\nkind = "barrier"\narea = "wall.tif"\n'
               f"crossing_mortality = {mortality}\n")
    gridpop.run(make_scenario(text, "open.toml"), tmp_path / "open")
    gridpop.run(make_scenario(text + barrier, "walled.toml"), tmp_path / "walled")
    a = read_ledger(tmp_path / "open" / "patches.csv", patches=True)
    b = read_ledger(tmp_path / "walled" / "patches.csv", patches=True)
    east = [p for p in (1, 2) if a[(0, 0, p)][0] == 0]
    assert len(east) == 1  # the east block starts empty
    return a, b, east[0]


def test_impassable_barrier_stops_kernel_dispersal(make_scenario, make_raster, tmp_path):
    """A barrier with crossing mortality 1 between two patches: nobody from the occupied west
    patch ever settles in the empty east patch (exact)."""
    a, b, p = walled_runs(make_scenario, make_raster, tmp_path, stochastic=True, mortality=1.0)
    assert sum(v[5] for (r, t, q), v in a.items() if q == p) > 0  # colonised if open
    assert sum(v[0] + v[5] for (r, t, q), v in b.items() if q == p) == 0  # never if walled


def test_barrier_crossing_mortality_thins_crossers_exactly(make_scenario, make_raster,
                                                          tmp_path):
    """Deterministic mode, crossing mortality 0.5: in the first year the empty east patch
    receives exactly half the immigrants it receives without the barrier (expected survival of
    a crossing, common practice)."""
    a, b, p = walled_runs(make_scenario, make_raster, tmp_path, stochastic=False, mortality=0.5,
                          edits=(("env_sd = 0.3", "env_sd = 0.0"), ("years = 8", "years = 1")))
    assert a[(0, 1, p)][5] > 0
    assert b[(0, 1, p)][5] == pytest.approx(0.5 * a[(0, 1, p)][5], rel=1e-9)


def test_serial_and_parallel_variants_agree():
    """A ``pjit`` kernel runs its parallel variant on a grid of at least ``PARALLEL_CELLS``
    cells when numba has several threads, its serial variant below, and the two give
    bit-identical results (fixed chunking of the sums, counter-based random numbers: common
    practice for reproducible parallel Monte Carlo)."""
    r = np.random.default_rng(8)
    ny, nx, n_patches = 190, 180, 3
    assert ny * nx >= _jit.PARALLEL_CELLS
    labels = np.ascontiguousarray(r.integers(0, n_patches + 1, (ny, nx)), dtype=np.int32)
    k = np.where(r.random((ny, nx)) < 0.8, r.uniform(2.0, 20.0, (ny, nx)), 0.0)
    n = np.floor(r.uniform(0.0, 15.0, (ny, nx))) * (k > 0)
    keys = np.array([rng.year_key(5, 1, 2, s) for s in
                     (rng.STREAM_SURVIVAL, rng.STREAM_BIRTHS, rng.STREAM_EMIGRATION,
                      rng.STREAM_TRANSITION, rng.STREAM_SEX)], np.uint64)
    rates = GrowthRates(demography.MODEL_CODES["ricker"], 0.5, 0.7, 1.0, 0.0, True)
    results = []
    for variant in (grow_pass.serial, grow_pass.parallel):
        out, lv = np.empty((1, ny, nx)), np.empty((1, ny, nx))
        part = variant(labels, n_patches, n[None], k, np.full((1, 1), 0.1), out, lv,
                       rates, None, np.array([0.3]), Emigration(0.3, 1.0), keys,
                       NO_RETENTION)
        results.append((out, lv, part))
    for a, b in zip(*results, strict=True):
        np.testing.assert_array_equal(a, b)
    assert results[0][1].sum() > 0
    args = (labels, n_patches, n, k)
    small = (labels[:10, :10], n_patches, n[:10, :10], k[:10, :10])
    if numba.get_num_threads() > 1:
        assert grow_pass.variant(*args) is grow_pass.parallel
    assert grow_pass.variant(*small) is grow_pass.serial


def test_variant_is_chosen_by_the_named_grid_argument(monkeypatch):
    """The grid that decides is the argument the decorator names, not the first large array:
    the environmental field's low-rank product takes (ny, rank) factors first, and on a large
    grid with a small rank it ran serially. A name the kernel does not have is refused."""
    monkeypatch.setattr(numba, "get_num_threads", lambda: 2)
    ny, nx, rank = 200, 300, 4
    ay, e, ax_t, out = np.ones((ny, rank)), np.ones((rank, rank)), np.ones((rank, nx)), \
        np.empty((ny, nx))
    assert ny * rank < _jit.PARALLEL_CELLS <= ny * nx
    assert demography._low_rank_field.variant(ay, e, ax_t, out) is \
        demography._low_rank_field.parallel
    assert demography._low_rank_field.variant(ay, e, ax_t, out[:10, :10]) is \
        demography._low_rank_field.serial
    with pytest.raises(TypeError, match="no argument 'grid'"):
        _jit.pjit(grid="grid")(lambda n, k: None)


def test_settle_and_census_sums_match_numpy():
    """The census kernel's per-patch sums (runs of a patch along a row summed in registers)
    against ``np.bincount`` over the cells (NumPy as the reference library), and its per-cell
    accumulators against whole-array arithmetic."""

    rng = np.random.default_rng(3)
    ny, nx, n_patches = 37, 53, 5
    labels = np.repeat(rng.integers(0, n_patches + 1, (ny, 8)), 7, axis=1)[:, :nx]
    labels = np.ascontiguousarray(labels, dtype=np.int32)
    k = np.where(rng.random((ny, nx)) < 0.8, rng.uniform(1.0, 9.0, (ny, nx)), 0.0)
    n = rng.uniform(0.0, 5.0, (ny, nx))
    arrivals, stayed, dist = (rng.uniform(0.0, 2.0, (ny, nx)) for _ in range(3))
    ever = (rng.random((ny, nx)) < 0.3).astype(np.uint8)
    acc = [np.full((ny, nx), 1.5), np.full((ny, nx), 2, np.int32), np.full((ny, nx), 3, np.int32)]
    settled = np.where(k > 0, arrivals, 0.0)
    after = n + settled
    ever_after = ever | (after >= 1.0)
    got = n.copy()[None]
    part, _ = census_pass(labels, n_patches, k, got, got[0], None,
                          arrivals[None], np.zeros(1, np.int64), stayed, dist, 1.0, ever, *acc)
    s = patch_totals(part)
    got = got[0]
    np.testing.assert_array_equal(got, after)
    np.testing.assert_array_equal(ever, ever_after)
    np.testing.assert_array_equal(acc[0], 1.5 + after)
    np.testing.assert_array_equal(acc[1], 2 + (after >= 1.0))
    np.testing.assert_array_equal(acc[2], 3 + ever_after)
    for f, x in enumerate([after, dist, after >= 1.0, settled, np.where(k > 0, stayed, 0.0)]):
        ref = np.bincount(labels.ravel(), weights=x.ravel().astype(float),
                          minlength=n_patches + 1)
        ref[0] = x.sum()
        np.testing.assert_allclose(s[:, f], ref, rtol=1e-12)
    assert np.all(s[:, 5] == 0.0)


@pytest.mark.parametrize("stochastic", [False, True])
def test_growth_pass_matches_the_stage_functions(stochastic):
    """The engine's fused growth-and-emigration pass gives what the growth step and the
    emigration step give one after the other (demography.step_*, dispersal.leaving_*), and its
    per-patch sums match ``np.bincount`` (NumPy as the reference library)."""

    r = np.random.default_rng(4)
    ny, nx, n_patches = 29, 41, 4
    labels = np.ascontiguousarray(np.repeat(r.integers(0, n_patches + 1, (ny, 6)), 7,
                                            axis=1)[:, :nx], dtype=np.int32)
    k = np.where(r.random((ny, nx)) < 0.7, r.uniform(2.0, 20.0, (ny, nx)), 0.0)
    n = np.floor(r.uniform(0.0, 15.0, (ny, nx))) * (k > 0)
    env = np.zeros((ny, nx))
    keys = np.array([rng.year_key(7, 0, 3, s) for s in
                     (rng.STREAM_SURVIVAL, rng.STREAM_BIRTHS, rng.STREAM_EMIGRATION,
                      rng.STREAM_TRANSITION, rng.STREAM_SEX)], np.uint64)
    model, rate, surv, theta = demography.MODEL_CODES["ricker"], 0.5, 0.7, 1.0
    grown, births, deaths = (np.empty((ny, nx)) for _ in range(3))
    if stochastic:
        demography.step_stochastic(n, k, env, grown, births, deaths, model, rate, surv, theta,
                                   0.0, keys[0], keys[1])
        leaving = leaving_stochastic(grown, k, 0.25, 1.0, keys[2])
    else:
        demography.step_deterministic(n, k, env, grown, births, deaths, model, rate, surv,
                                      theta, 0.0)
        leaving = leaving_deterministic(grown, k, 0.25, 1.0)
    out, lv = np.empty((1, ny, nx)), np.empty((1, ny, nx))
    rates = GrowthRates(model, rate, surv, theta, 0.0, stochastic)
    s = patch_totals(grow_pass(labels, n_patches, n[None], k, np.zeros((1, nx)), out, lv, rates,
                               None, np.array([0.25]), Emigration(0.25, 1.0), keys,
                               NO_RETENTION))
    out, lv = out[0], lv[0]
    np.testing.assert_array_equal(lv, leaving)
    np.testing.assert_array_equal(out, grown - leaving)
    assert leaving.sum() > 0
    for f, x in enumerate([births, deaths, leaving]):
        ref = np.bincount(labels.ravel(), weights=x.ravel(), minlength=n_patches + 1)
        ref[0] = x.sum()
        np.testing.assert_allclose(s[:, f], ref, rtol=1e-12)

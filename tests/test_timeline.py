"""Landscapes that change over time: future suitability layers and series, interpolation, actions
on each year's layer, checks of every layer, and disturbance regimes that change."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import suitability_array, write_raster

from gridpop.actions import apply_actions
from gridpop.config import load_scenario
from gridpop.errors import InputDataError, ScenarioError
from gridpop.landscape import build_landscape

BASE = """
[run]
years = 40
replicates = 2
seed = 5

[habitat]
suitability = "{suitability}"
capacity_per_ha = 10.0
{habitat}

[growth]
rate = 0.4
{more}
"""

K1 = 10.0 * (30.0 * 30.0 / 10_000.0)  # capacity at suitability 1 of a 30 m cell


def layers(seed=0):
    """The conftest suitability raster and two later layers with the same nodata corner."""
    s0 = suitability_array()
    rng = np.random.default_rng(seed + 11)
    inside = s0 != -9999.0
    s1 = np.where(inside, rng.random(s0.shape), -9999.0)
    s2 = np.where(inside, 0.5 * s0, -9999.0)
    return s0, s1, s2


def scenario(make_scenario, habitat="", more="", name="scenario.toml"):
    return load_scenario(make_scenario(BASE.replace("{habitat}", habitat)
                                       .replace("{more}", more), name))


def actions_of(sc):
    return apply_actions(sc, build_landscape(sc, stochastic=False))


FUTURE = """
change = "{change}"
[[habitat.future]]
year = 10
suitability = "s10.tif"
[[habitat.future]]
year = 30
suitability = "s30.tif"
"""


def test_linear_change_equals_numpy_interp_per_cell(make_scenario, make_raster):
    """Capacity of every year equals capacity_per_ha x cell area x the per-cell linear
    interpolation of numpy.interp between the layers of years 0, 10 and 30, held after 30
    (numpy reference: Harris et al. 2020, Nature 585:357, numpy.interp)."""
    s0, s1, s2 = layers()
    make_raster("s10.tif", s1)
    make_raster("s30.tif", s2)
    act = actions_of(scenario(make_scenario, FUTURE.format(change="linear")))
    stack = np.stack([s0, s1, s2]).astype(np.float32).astype(np.float64)
    inside = s0 != -9999.0
    for year in range(0, 40):
        want = np.zeros(s0.shape)
        for i, j in zip(*np.nonzero(inside), strict=True):
            want[i, j] = np.interp(year, [0, 10, 30], stack[:, i, j])
        got = act.capacity_for_year(year)
        np.testing.assert_array_equal(got, K1 * want, err_msg=f"year {year}")


def test_step_change_happens_in_the_stated_year(make_scenario, make_raster):
    """With change = "step" a layer holds from its year on, the earlier one until the year
    before (year t is the step from census year t to t + 1)."""
    s0, s1, s2 = layers()
    make_raster("s10.tif", s1)
    make_raster("s30.tif", s2)
    act = actions_of(scenario(make_scenario, FUTURE.format(change="step")))
    inside = s0 != -9999.0
    k = {y: act.capacity_for_year(y) for y in (0, 9, 10, 29, 30, 39)}
    f32 = [K1 * a.astype(np.float32).astype(np.float64)[inside] for a in (s0, s1, s2)]
    np.testing.assert_array_equal(k[0][inside], f32[0])
    np.testing.assert_array_equal(k[9][inside], f32[0])
    np.testing.assert_array_equal(k[10][inside], f32[1])
    np.testing.assert_array_equal(k[29][inside], f32[1])
    np.testing.assert_array_equal(k[30][inside], f32[2])
    np.testing.assert_array_equal(k[39][inside], f32[2])


def test_series_band_k_is_year_k_minus_1(make_scenario, make_raster):
    """A multi-band series: band k is the layer of year k-1, the last band holds after it."""
    s0, s1, s2 = layers()
    make_raster("series.tif", np.stack([s0, s1, s2]))
    act = actions_of(scenario(make_scenario, 'suitability_series = "series.tif"'))
    inside = s0 != -9999.0
    for year, s in ((0, s0), (1, s1), (2, s2), (25, s2)):
        got = act.capacity_for_year(year)
        want = K1 * s.astype(np.float32).astype(np.float64)
        np.testing.assert_array_equal(got[inside], want[inside])


def test_series_band_1_must_be_the_starting_layer(make_scenario, make_raster):
    s0, s1, s2 = layers()
    make_raster("series.tif", np.stack([s1, s2]))
    with pytest.raises(InputDataError, match="band 1 is the layer of year 0"):
        actions_of(scenario(make_scenario, 'suitability_series = "series.tif"'))


def test_layers_with_different_study_areas_name_both_files(make_scenario, make_raster):
    s0, s1, _ = layers()
    s1 = s1.copy()
    s1[20:22, 10:12] = -9999.0
    make_raster("s10.tif", s1)
    make_raster("s30.tif", s1)
    with pytest.raises(InputDataError) as err:
        build_landscape(scenario(make_scenario, FUTURE.format(change="linear")),
                        stochastic=False)
    msg = str(err.value)
    assert "s10.tif" in msg and "suitability.tif" in msg and "study area" in msg
    assert "[habitat.future #1] suitability" in msg


def test_future_layer_out_of_range_and_reprojected(make_scenario, make_raster):
    """Values beyond 0..1 are refused as in the starting layer; a later layer on a finer grid
    is aggregated onto the grid like the starting layer (GDAL average resampling through
    rasterio, the reference library for raster alignment)."""
    from rasterio.transform import from_origin

    s0, s1, s2 = layers()
    bad = np.where(s1 == -9999.0, -9999.0, 1.5)
    make_raster("s10.tif", bad)
    make_raster("s30.tif", s2)
    with pytest.raises(InputDataError, match="values must lie in 0..1"):
        build_landscape(scenario(make_scenario, FUTURE.format(change="linear")),
                        stochastic=False)
    # the layer of year 10 at 15 m cells: averaged onto the 30 m grid, as the starting layer
    # would be (each grid cell covers four equal source cells, so the average is exact)
    fine = np.kron(s1, np.ones((2, 2)))
    make_raster("s10.tif", fine, transform=from_origin(500_000.0, 4_000_000.0, 15.0, 15.0))
    act = actions_of(scenario(make_scenario, FUTURE.format(change="step")))
    inside = s0 != -9999.0
    np.testing.assert_allclose(act.capacity_for_year(10)[inside],
                               K1 * s1.astype(np.float32)[inside], rtol=1e-6)
    assert any("s10.tif" in n and "average" in n for n in act.landscape.notes)


def test_cli_check_exits_2_naming_both_files(make_scenario, make_raster, capsys):
    """Layers whose study areas differ: gridpop check exits 2 with one message naming both."""
    from gridpop.cli import main

    s0, s1, _ = layers()
    s1[30:33, 2:4] = -9999.0
    make_raster("s10.tif", s1)
    make_raster("s30.tif", s1)
    path = make_scenario(BASE.replace("{habitat}", FUTURE.format(change="step"))
                         .replace("{more}", ""))
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "s10.tif" in err and "suitability.tif" in err and "Traceback" not in err


@pytest.mark.parametrize(("value", "message"), [
    ("{ start = 30, end = 0.5 }", "is not allowed"),
    ("{ start = 30 }", "is not allowed"),
    ("[[0, 30], [10]]", "is not allowed"),
    ("[[10, 30], [5, 15]]", "The years must increase"),
])
def test_changing_return_interval_is_checked(make_scenario, value, message):
    """Each value of a change over the run is checked against the key's bounds."""
    value = value.replace("{", "{{").replace("}", "}}")  # make_scenario formats the text
    fire = f"""
[[disturbance]]
kind = "fire"
return_interval_years = {value}
mortality = 0.5
"""
    with pytest.raises(ScenarioError, match=message) as err:
        load_scenario(make_scenario(BASE.replace("{habitat}", "").replace("{more}", fire)))
    assert "[disturbance #1 (fire)] return_interval_years" in str(err.value)


def test_future_years_must_increase(make_scenario, make_raster):
    s0, s1, s2 = layers()
    make_raster("s10.tif", s1)
    make_raster("s30.tif", s2)
    text = FUTURE.format(change="linear").replace("year = 30", "year = 5")
    with pytest.raises(ScenarioError, match=r"\[habitat\] future: the years \[10, 5\] must"):
        scenario(make_scenario, text)
    with pytest.raises(ScenarioError, match="suitability_series or"):
        scenario(make_scenario, 'suitability_series = "s10.tif"\n'
                 + FUTURE.format(change="linear"))


def test_reserve_and_habitat_loss_act_on_each_years_layer(make_scenario, make_raster):
    """A reserve multiplies the capacity of every year's layer and is exempt from habitat
    loss; habitat loss lowers each year's layer outside it (arithmetic of the action rules)."""
    s0, s1, s2 = layers()
    make_raster("s10.tif", s1)
    make_raster("s30.tif", s2)
    reserve = np.zeros(s0.shape)
    reserve[5:20, 5:25] = 1.0
    make_raster("reserve.tif", reserve)
    make_raster("loss.tif", np.ones(s0.shape))
    actions = """
[[action]]
kind = "reserve"
area = "reserve.tif"
capacity_multiplier = 1.5
[[action]]
kind = "habitat_loss"
area = "loss.tif"
target_suitability = 0.1
start_year = 20
"""
    plain = actions_of(scenario(make_scenario, FUTURE.format(change="linear")))
    plan = actions_of(scenario(make_scenario, FUTURE.format(change="linear"), actions,
                               name="plan.toml"))
    inside = s0 != -9999.0
    res = reserve > 0
    for year in (0, 15, 19, 20, 35):
        k0, k1 = plain.capacity_for_year(year), plan.capacity_for_year(year)
        np.testing.assert_allclose(k1[res], 1.5 * k0[res], rtol=1e-14)
        out = inside & ~res
        if year < 20:
            np.testing.assert_array_equal(k1[out], k0[out])
        else:
            np.testing.assert_allclose(k1[out], np.minimum(k0[out], K1 * 0.1),
                                       rtol=1e-14)


SHIFT = """
[run]
years = {years}
replicates = 1

[habitat]
suitability = "start.tif"
suitability_series = "series.tif"
capacity_per_ha = 100.0

[initial]
fraction_of_capacity = 1e-6

[growth]
model = "beverton-holt"
rate = {rate}
stochastic = false

[dispersal]
fraction = 1.0
kernel = "gaussian"
mean_distance_m = {mean}
edge = "reflecting"
"""


def shifting_band(folder, *, speed, width, years, sigma, rate, cell=100.0, ny=3):
    """Abundance per year in a band of habitat of ``width`` cells (suitability 1, the edge cells
    their covered share) moving ``speed`` cells a year along a thin grid, given as a
    suitability series; deterministic Beverton-Holt growth, every individual dispersing with a
    Gaussian kernel of standard deviation ``sigma`` cells per axis, starting far below
    capacity (the linear regime of the spread-speed theory)."""
    from rasterio.transform import from_origin

    from gridpop.simulation.cycle import BatchSink, simulate_replicate
    from gridpop.simulation.model import build_model

    x0 = 4.0 * sigma
    nx = int(x0 + width + speed * years + 4.0 * sigma) + 1
    edges = np.arange(nx + 1, dtype=np.float64)
    bands = []
    for t in range(years + 1):
        lo, hi = x0 + speed * t, x0 + speed * t + width
        cover = np.clip(np.minimum(edges[1:], hi) - np.maximum(edges[:-1], lo), 0.0, 1.0)
        bands.append(np.repeat(cover[None, :], ny, axis=0))
    tr = from_origin(0.0, 0.0, cell, cell)
    write_raster(folder / "series.tif", np.stack(bands), transform=tr, dtype="float64")
    write_raster(folder / "start.tif", bands[0], transform=tr, dtype="float64")
    # mean distance of a 2-D Gaussian with per-axis sd sigma: sigma sqrt(pi / 2)
    (folder / "shift.toml").write_text(SHIFT.format(
        years=years, rate=rate, mean=sigma * cell * np.sqrt(np.pi / 2.0)))
    sc = load_scenario(folder / "shift.toml")
    model = build_model(sc, build_landscape(sc, stochastic=False))
    sink = BatchSink(folder / "batch", model, range(1))
    simulate_replicate(model, 0, sink, 0)
    return sink.ledger[0, :, 0, 0]


@pytest.mark.slow
def test_shifting_habitat_critical_speed_is_the_spread_speed(tmp_path):
    """A band of habitat moving at speed c: the population keeps up when c is below the spread
    speed c* = min over s of (1/s) ln(lambda0 M(s)) of the same growth and kernel (Kot, Lewis
    and van den Driessche 1996, Ecology 77:2027) and dies out above it; for a wide band the
    critical speed of the shifting habitat tends to c* (Zhou and Kot 2011, Theoretical Ecology
    4:13). The critical speed found by bisection over c is within 10 % of c*, and does not
    depend on the band's width once the band is wide (20 and 40 kernel widths agree within
    5 %). Gaussian kernel, lambda0 = 2: c* = sigma sqrt(2 ln 2) = 1.1774100225 sigma
    (reference value of /work/shared/reference-checks.md, section 2), checked here against the
    minimum of the formula with the Gaussian moment-generating function M(s) =
    exp(sigma^2 s^2 / 2).

    Persistence is judged in the linear regime (start at 1e-6 of capacity): the population
    persists when it grows over the last 20 years of a run long enough for the band to pass
    its own width. Finite runs place the boundary a few per cent off c* (the front needs time
    to build, the front-lag of Bramson; Hu and Shi 2009, from memory), within the tolerance."""
    import numba
    from scipy.optimize import minimize_scalar

    sigma, rate = 3.0, float(np.log(2.0))
    c_formula = minimize_scalar(lambda s: np.log(np.exp(rate) * np.exp(sigma**2 * s**2 / 2))
                                / s, bounds=(1e-3, 5.0), method="bounded").fun
    c_star = 1.1774100225 * sigma
    assert c_formula == pytest.approx(c_star, rel=1e-6)

    threads = numba.get_num_threads()
    numba.set_num_threads(1)  # results do not depend on it; tiny grids run faster on one
    try:
        found = {}
        for widths in (20, 40):
            width = widths * sigma
            years = int(width / c_star) + 40
            run = 0

            def persists(c, width=width, years=years, widths=widths):
                nonlocal run
                run += 1
                folder = tmp_path / f"w{widths}_{run}"
                folder.mkdir()
                n = shifting_band(folder, speed=c, width=width, years=years, sigma=sigma,
                                  rate=rate)
                return n[-1] > n[-21]

            lo, hi = 0.6 * c_star, 1.4 * c_star
            assert persists(lo), "the population does not keep up with a slow band"
            assert not persists(hi), "the population keeps up with a band faster than c*"
            for _ in range(5):
                mid = 0.5 * (lo + hi)
                lo, hi = (mid, hi) if persists(mid) else (lo, mid)
            found[widths] = 0.5 * (lo + hi)
    finally:
        numba.set_num_threads(threads)
    for c in found.values():
        assert c == pytest.approx(c_star, rel=0.10)
    assert found[20] == pytest.approx(found[40], rel=0.05)


RUN = """
[run]
years = 12
replicates = 3
seed = 4
batch_size = 2

[habitat]
suitability = "{suitability}"
capacity_per_ha = 30.0
response = "threshold"
threshold = 0.5
change = "linear"
[[habitat.future]]
year = 6
suitability = "s6.tif"

[growth]
rate = 0.5
stochastic = {stochastic}

[dispersal]
fraction = 0.2
mean_distance_m = 60.0
"""

FIRE_LOSS = """
[[disturbance]]
kind = "fire"
return_interval_years = {{ start = 4, end = 2 }}
mortality = 0.5
capacity_loss = 0.5
recovery_years = 3.0
"""


def test_run_writes_capacity_per_year_and_check_describes_it(make_scenario, make_raster,
                                                              tmp_path):
    """capacity.tif holds one band per year (band k = year k-1): without disturbance the
    capacity of the year itself, with fires that remove capacity the mean over replicates of
    what they left (each replicate's capacity never exceeds the layer's, and fires lower the
    mean). gridpop check prints the total capacity at the layers' years and the last year."""
    import rasterio

    import gridpop
    from gridpop.simulation.check import describe
    from gridpop.simulation.model import build_model

    s0, s1, _ = layers()
    make_raster("s6.tif", s1)
    plain = load_scenario(make_scenario(RUN.replace("{stochastic}", "false"), "plain.toml"))
    out = gridpop.run(plain, tmp_path / "plain")
    model = build_model(plain, build_landscape(plain, stochastic=False))
    with rasterio.open(out / "capacity.tif") as src:
        assert src.count == 12 and src.descriptions[6] == "year 6"
        for t in (0, 3, 6, 11):
            np.testing.assert_allclose(src.read(t + 1, masked=True).filled(np.nan),
                                       np.where(model.landscape.mask,
                                                model.actions.capacity_for_year(t), np.nan),
                                       rtol=1e-6)
    from gridpop.report.plots import plan_cells, read_run

    cells = plan_cells(read_run(out))  # the maps' habitat: first and last years
    assert cells is not None and cells.first is not None
    np.testing.assert_array_equal(cells.first, model.actions.capacity_for_year(0) > 0)
    np.testing.assert_array_equal(cells.habitat, model.actions.capacity_for_year(11) > 0)
    assert (cells.first != cells.habitat).any()
    text = "\n".join(describe(plain, model))
    assert "habitat through time (linear change between the layers)" in text
    for t in (0, 6, 11):
        k = model.actions.capacity_for_year(t).sum()
        assert f"  year {t}: {k:,.1f}" in text

    burnt = load_scenario(make_scenario(RUN.replace("{stochastic}", "true") + FIRE_LOSS,
                                        "fire.toml"))
    out = gridpop.run(burnt, tmp_path / "fire")
    with rasterio.open(out / "capacity.tif") as src:
        mean = src.read(masked=True).filled(np.nan)
    layer = np.stack([model.actions.capacity_for_year(t) for t in range(12)])
    inside = np.broadcast_to(model.landscape.mask, mean.shape)
    assert np.all(mean[inside] <= layer[inside] * (1 + 1e-6) + 1e-9)
    assert mean[inside].sum() < 0.95 * layer[inside].sum()
    assert "return interval 4 in year 0 to 2 in the last year" in "\n".join(
        describe(burnt, build_model(burnt, build_landscape(burnt, stochastic=True))))


WALK = """
[dispersal]
method = "walk"
fraction = 0.3
resistance = "r0.tif"
walk_length = 20

[[dispersal.future]]
year = 12
resistance = "r12.tif"
"""


def test_walk_resistance_of_later_years(make_scenario, make_raster):
    """[[dispersal.future]]: the walk's permeability (1 / resistance) follows the year's
    resistance layer, interpolated as [habitat] change says (step here: the new layer from
    its year on); a layer that leaves cells without a value where the first has one is
    refused, naming both files."""
    from gridpop.simulation.model import build_model

    s0, _, _ = layers()
    inside = s0 != -9999.0
    r0 = np.where(inside, 2.0, -9999.0)
    r12 = np.where(inside, 8.0, -9999.0)
    r12[10:14, 30] = np.inf  # a road built in year 12
    make_raster("r0.tif", r0)
    make_raster("r12.tif", r12)
    sc = scenario(make_scenario, 'change = "step"', "stochastic = false\n" + WALK)
    walk = build_model(sc, build_landscape(sc, stochastic=False)).walk
    assert walk is not None and walk.by_year is not None
    np.testing.assert_array_equal(walk.by_year(11), walk.permeability)
    np.testing.assert_array_equal(walk.by_year(11)[inside], 0.5)
    late = walk.by_year(12)
    assert np.all(late[10:14, 30] == 0.0)
    rest = inside.copy()
    rest[10:14, 30] = False
    np.testing.assert_array_equal(late[rest], 1 / 8.0)
    np.testing.assert_array_equal(walk.by_year(30), late)
    from gridpop.rng import YearStreams  # the walk moves over the layer of the year it is given

    model = build_model(sc, build_landscape(sc, stochastic=False))
    leaving = np.where(model.capacity > 0, 5.0, 0.0)
    visits = {y: model.walk.move(leaving, model.capacity, YearStreams(1, 0, y), {}).visits
              for y in (11, 12)}
    assert visits[11][10:14, 30].sum() > 0 and visits[12][10:14, 30].sum() == 0

    r12[20, 20] = -9999.0
    make_raster("r12.tif", r12)
    sc = scenario(make_scenario, 'change = "step"', "stochastic = false\n" + WALK, "b.toml")
    with pytest.raises(InputDataError, match="r12.tif.*r0.tif"):
        build_model(sc, build_landscape(sc, stochastic=False))


def test_timeline_holds_two_layers_and_reads_each_once_per_pass():
    """Memory flat in years: walking the years in order, each later layer is read once and no
    more than two are held at a time (linear: the bracketing pair; step: one)."""
    from pathlib import Path

    from gridpop.timeline import Source, Timeline

    reads = []

    def read(source):
        reads.append(source.year)
        return np.full((2, 3), float(source.year))

    sources = tuple(Source(y, Path(f"l{y}.tif"), None, "habitat", "suitability")
                    for y in (5, 10, 20, 30))
    for change in ("linear", "step"):
        reads.clear()
        tl = Timeline(np.zeros((2, 3)), sources, change, read)
        for year in range(40):
            value = tl.at(tl.key(year))
            assert len(tl._held) <= (2 if change == "linear" else 1)
            want = np.interp(year, [0, 5, 10, 20, 30], [0, 5, 10, 20, 30])
            if change == "step":
                want = max(y for y in (0, 5, 10, 20, 30) if y <= year)
            np.testing.assert_allclose(value, want, rtol=1e-15)
        assert reads == [5, 10, 20, 30]

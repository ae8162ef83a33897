"""Fire and flood regimes: event statistics against closed forms, effects, reproducibility."""

from __future__ import annotations

import math
import re
import textwrap

import geopandas as gpd
import numpy as np
import pytest
import shapely
from conftest import UTM, write_raster
from rasterio.transform import from_origin
from rasterio.warp import transform_bounds
from scipy import integrate, ndimage, stats

from gridpop.actions import apply_actions
from gridpop.config import load_scenario
from gridpop.disturbance import build_regime, expected_size
from gridpop.errors import InputDataError, ScenarioError
from gridpop.landscape import build_landscape

ORIGIN = (500_000.0, 4_000_000.0)  # top-left corner of the test grids, UTM 33N, 30 m cells


def build(tmp_path, suitability, tables, *, stochastic=True, years=10, layers=None,
          name="scenario.toml"):
    """Write the suitability raster, extra layers and a scenario; return (scenario, landscape,
    regime)."""
    write_raster(tmp_path / "suitability.tif", suitability)
    for file, data in (layers or {}).items():
        write_raster(tmp_path / file, data)
    body = f"""
    [run]
    years = {years}
    replicates = 1
    [habitat]
    suitability = "suitability.tif"
    capacity_per_ha = 100.0
    [growth]
    rate = 0.2
    stochastic = {"true" if stochastic else "false"}
    """
    path = tmp_path / name
    path.write_text(textwrap.dedent(body) + textwrap.dedent(tables))
    scenario = load_scenario(path)
    landscape = build_landscape(scenario, stochastic=stochastic)
    actions = apply_actions(scenario, landscape)
    return scenario, actions.landscape, build_regime(scenario, actions.landscape, actions)


def blocks(n_side=10, size=2, gap=1):
    """Isolated square habitat blocks (8-connected patches) separated by matrix rows/columns."""
    step = size + gap
    s = np.zeros((n_side * step, n_side * step))
    for i in range(n_side):
        for j in range(n_side):
            s[i * step:i * step + size, j * step:j * step + size] = 0.8
    return s


def run_years(regime, landscape, years, *, seed=1, replicate=0, stochastic=True, n=None):
    """Apply the regime for some years to 50 individuals in every habitat cell."""
    state = regime.start()
    n = np.where(landscape.capacity > 0, 50.0, 0.0) if n is None else n
    out = []
    for year in range(years):
        out.append(regime.apply(state, n, landscape.capacity, seed=seed, replicate=replicate,
                                year=year, stochastic=stochastic))
    return out


FLOOD = """
[[disturbance]]
kind = "flood"
return_period_years = {t}
zone = "zone.tif"
mortality = 0.5
"""


@pytest.mark.parametrize("t, years, expected", [(100, 30, 0.2602996266), (50, 25, 0.3965352702)])
@pytest.mark.slow
def test_flood_at_least_one_t_year_event_in_n_years(tmp_path, t, years, expected):
    """P(at least one T-year flood in n years) = 1 - (1 - 1/T)^n.

    Standard hydrology (Chow, Maidment and Mays 1988, Applied Hydrology, from memory); worked
    values from /work/shared/reference-checks.md section 6. Tolerance 4 binomial standard errors.
    """
    assert 1 - (1 - 1 / t) ** years == pytest.approx(expected, abs=1e-10)
    s = np.full((4, 4), 0.5)
    _, landscape, regime = build(tmp_path, s, FLOOD.format(t=t), layers={"zone.tif": s * 0 + 1})
    runs = 8000
    hit = 0
    for rep in range(runs):
        state = regime.start()
        n = np.full((4, 4), 10.0)
        flooded = False
        for year in range(years):
            e = regime.apply(state, n, landscape.capacity, seed=11, replicate=rep, year=year,
                             stochastic=True)
            flooded |= bool(e.flooded.any())
        hit += flooded
    p = hit / runs
    assert abs(p - expected) < 4 * math.sqrt(expected * (1 - expected) / runs)


def test_flood_is_regional_and_magnitudes_nested(tmp_path):
    """Every flood year hits the whole zone at once (one draw shared by all patches); the 100-year
    zone floods with annual probability 1/100 and some zone with 1/10 (annual exceedance
    probability 1/T: Chow, Maidment and Mays 1988, from memory). 4 binomial standard errors."""
    s = blocks(4)
    small = np.zeros_like(s)
    small[:6] = 1  # the top two rows of blocks
    big = np.zeros_like(s)
    big[:9] = 1  # the top three rows of blocks (not drawn as containing the small one: nested
    big[:3] = 0  # by the regime anyway)
    tables = """
    [[disturbance]]
    kind = "flood"
    return_period_years = [10, 100]
    zone = ["small.tif", "big.tif"]
    mortality = 0.5
    """
    _, landscape, regime = build(tmp_path, s, tables, layers={"small.tif": small,
                                                              "big.tif": big})
    assert any("does not contain" in note for note in regime.notes)
    in_small = (small > 0).sum()
    in_union = ((small > 0) | (big > 0)).sum()
    years, reps = 200, 500
    counts = {0: 0, in_small: 0, in_union: 0}
    for rep in range(reps):
        for e in run_years(regime, landscape, years, seed=5, replicate=rep):
            cells = int(e.flooded.sum())
            counts[cells] += 1
            if cells:
                assert len(e.events) == 1 and e.events[0][2] == cells
                patches = e.events[0][1].split(";")
                assert len(patches) == (8 if cells == in_small else 12)
    total = years * reps
    for p, k in ((0.09, in_small), (0.01, in_union)):
        assert abs(counts[k] / total - p) < 4 * math.sqrt(p * (1 - p) / total)


def test_terrain_flood_below_interpolated_stage(tmp_path):
    """Terrain floods below the stage interpolated linearly in ln T between (10 y, 2 m) and
    (100 y, 5 m): stage > 3.5 m when T > 10 * 10^(1/2), probability 10^(-3/2) = 0.0316228 a year
    (annual exceedance probability 1/T, Chow, Maidment and Mays 1988, from memory; the
    interpolation is the documented convention). 4 binomial standard errors."""
    s = np.full((8, 3), 0.5)
    terrain = np.repeat(np.arange(8.0), 3).reshape(8, 3) + 0.5  # row r at r + 0.5 m
    tables = """
    [[disturbance]]
    kind = "flood"
    return_period_years = [10, 100]
    terrain = "dem.tif"
    stage_m = [2.0, 5.0]
    mortality = 0.2
    """
    _, landscape, regime = build(tmp_path, s, tables, layers={"dem.tif": terrain})
    flooded_rows = []
    for rep in range(60):
        for e in run_years(regime, landscape, 200, seed=2, replicate=rep):
            flooded_rows.append(int(e.flooded[:, 0].sum()))
    rows = np.array(flooded_rows)
    assert rows.max() <= 5  # the stage never exceeds 5 m: rows at 0.5 .. 4.5 m
    assert not (rows == 1).any()  # every flood year reaches at least the 10-year stage, 2 m
    for p, observed in ((0.1, (rows > 0).mean()), (10 ** (-3 / 2), (rows >= 4).mean())):
        assert abs(observed - p) < 4 * math.sqrt(p * (1 - p) / rows.size)


FIRE = """
[[disturbance]]
kind = "fire"
return_interval_years = {ri}
mortality = 0.5
"""


def test_fire_cycle_whole_patch_burns(tmp_path):
    """Whole-patch burns with return interval RI: each patch burns with probability p = 1/RI a
    year, so the long-run fraction burned per year is 1/RI and time since fire is geometric,
    P(age = a) = p (1 - p)^a with mean (1 - p)/p when age is 0 in the burn year (Van Wagner 1978,
    Can. J. For. Res. 8:220, from memory for pages; Johnson and Van Wagner 1985, Can. J. For.
    Res. 15:214). The fraction burned uses 4 binomial standard errors (it would be 1 - e^-0.2 =
    0.181 with a Poisson rate of 1/RI, 20 standard errors away); the age distribution a
    chi-square test (scipy.stats.chisquare) and the mean 4 standard errors."""
    ri, years, reps = 5.0, 60, 30
    p = 1 / ri
    _, landscape, regime = build(tmp_path, blocks(10), FIRE.format(ri=ri))
    labels = landscape.patches.labels
    assert landscape.patches.n == 100
    burned_patch_years = 0
    ages = []
    for rep in range(reps):
        effects = run_years(regime, landscape, years, seed=3, replicate=rep)
        for e in effects:
            assert all(cells == 4 for _, _, cells, _ in e.events)  # each fire: its whole patch
            burned_patch_years += len(np.unique(labels[e.burned]))
        tsf = effects[-1].time_since_fire
        ages += [tsf[labels == k][0] for k in range(1, 101)]
    total = 100 * reps * years
    assert abs(burned_patch_years / total - p) < 4 * math.sqrt(p * (1 - p) / total)
    ages = np.array(ages)
    assert ages.min() >= 0  # P(a patch never burns in 60 years) = 0.8^60 = 1.5e-6
    mean, sd = (1 - p) / p, math.sqrt(1 - p) / p
    assert abs(ages.mean() - mean) < 4 * sd / math.sqrt(ages.size)
    edges = np.arange(16)
    observed = np.bincount(np.minimum(ages, 15), minlength=16)
    expected = ages.size * np.append(stats.geom.pmf(edges[:-1] + 1, p), stats.geom.sf(15, p))
    assert stats.chisquare(observed, expected).pvalue > 1e-3


def test_time_since_fire_convention(tmp_path):
    """Documented convention: -1 until a cell first burns, 0 in its burn year, then +1 a year;
    unburnable (matrix) cells stay -1 without a hazard raster."""
    _, landscape, regime = build(tmp_path, blocks(3), FIRE.format(ri=3.0))
    effects = run_years(regime, landscape, 30, seed=9)
    habitat = landscape.patches.labels > 0
    previous = np.full(landscape.grid.shape, -1)
    for e in effects:
        expected = np.where(e.burned, 0, np.where(previous >= 0, previous + 1, -1))
        np.testing.assert_array_equal(e.time_since_fire, expected)
        assert not e.burned[~habitat].any()
        previous = e.time_since_fire
    assert (previous[~habitat] == -1).all() and (previous[habitat] >= 0).all()


def test_mortality_binomial_mean_and_variance(tmp_path):
    """Survivors of a flood in each of many cells of 40 individuals, mortality 0.3, follow
    Binomial(40, 0.7) (scipy.stats.binom as the reference): mean within 4 standard errors,
    variance within 4 standard errors of the sample variance (from the binomial's kurtosis)."""
    s = np.full((60, 60), 0.5)
    tables = """
    [[disturbance]]
    kind = "flood"
    return_period_years = 1.0001
    zone = "zone.tif"
    mortality = 0.3
    """
    _, landscape, regime = build(tmp_path, s, tables, layers={"zone.tif": s * 0 + 1})
    n = np.full(s.shape, 40.0)
    e = regime.apply(regime.start(), n, landscape.capacity, seed=4, replicate=0, year=0,
                     stochastic=True)
    assert e.flooded.all()
    np.testing.assert_array_equal(n + e.deaths, 40.0)
    assert np.array_equal(n, np.rint(n))
    assert e.events[0][3] == e.deaths.sum()
    m, v, _, kurt = stats.binom.stats(40, 0.7, moments="mvsk")
    size = n.size
    assert abs(n.mean() - m) < 4 * math.sqrt(v / size)
    var_se = math.sqrt(((kurt + 3) * v ** 2 - (size - 3) / (size - 1) * v ** 2) / size)
    assert abs(n.var(ddof=1) - v) < 4 * var_se


def test_deterministic_mortality_is_the_expectation(tmp_path):
    """Deterministic mode removes exactly mortality * N (the binomial mean; common practice)."""
    s = np.full((5, 5), 0.5)
    tables = FLOOD.format(t=1.0001).replace("0.5", "0.25")
    _, landscape, regime = build(tmp_path, s, tables, stochastic=False,
                                 layers={"zone.tif": s * 0 + 1})
    n = np.full(s.shape, 13.0)
    e = regime.apply(regime.start(), n, landscape.capacity, seed=1, replicate=0, year=0,
                     stochastic=False)
    np.testing.assert_allclose(n, 13.0 * 0.75, rtol=1e-15)
    np.testing.assert_allclose(e.deaths, 13.0 * 0.25, rtol=1e-15)


def fuel_break():
    s = np.zeros((30, 40))
    s[2:28, 2:38] = 0.8  # one patch of 26 x 36 = 936 cells
    hazard = np.ones_like(s)
    hazard[:, 20] = 0  # a fuel break splitting the grid into 30 x 20 and 30 x 19 cells
    return s, hazard


def fire_events(regime, landscape, years, seed=1):
    """(burned mask, fire events) per year."""
    return [(e.burned, [x for x in e.events if x[0] == "fire"])
            for e in run_years(regime, landscape, years, seed=seed)]


def test_fire_stops_where_fuel_ends(tmp_path):
    """With a target larger than the fuel, a fire burns exactly the burnable 8-connected
    component of its ignition cell (scipy.ndimage.label as the reference), never a cell with
    hazard 0, and crosses the matrix where the hazard raster makes it burnable."""
    s, hazard = fuel_break()
    tables = FIRE.format(ri=2.0) + 'hazard = "hazard.tif"\n'
    _, landscape, regime = build(tmp_path, s, tables, layers={"hazard.tif": hazard})
    components, _ = ndimage.label(hazard > 0, structure=np.ones((3, 3)))
    sizes = np.bincount(components.ravel())
    seen = 0
    for burned, events in fire_events(regime, landscape, 60):
        assert not (burned & (hazard == 0)).any()
        if len(events) == 1:
            (side,) = np.unique(components[burned])
            assert events[0][2] == sizes[side] == burned.sum()
            assert sizes[side] < round(936 * 1.0)
            seen += 1
    assert seen >= 5


def test_fire_reaches_drawn_size_when_fuel_allows(tmp_path):
    """A fire of a fixed fraction 0.3 of its 936-cell patch burns round(0.3 * 936) = 281 cells
    when the fuel around the ignition holds more (documented size rule)."""
    s, hazard = fuel_break()
    tables = FIRE.format(ri=2.0) + 'hazard = "hazard.tif"\nsize_fraction = 0.3\n'
    _, landscape, regime = build(tmp_path, s, tables, layers={"hazard.tif": hazard})
    checked = 0
    for burned, events in fire_events(regime, landscape, 60):
        assert not (burned & (hazard == 0)).any()
        if len(events) == 1:
            assert events[0][2] == burned.sum() == 281
            checked += 1
    assert checked >= 5


def test_fire_crosses_into_neighbouring_patch(tmp_path):
    """Two patches joined by burnable matrix: a large fire from one burns into the other and
    the event names both patches."""
    s = np.zeros((10, 25))
    s[2:8, 2:8] = 0.9
    s[2:8, 15:21] = 0.5
    tables = """
    [[disturbance]]
    kind = "fire"
    return_interval_years = 3
    size_distribution = "exponential"
    mean_size_ha = 100000
    mortality = 1.0
    hazard = "hazard.tif"
    """
    _, landscape, regime = build(tmp_path, s, tables, layers={"hazard.tif": np.ones_like(s)})
    assert landscape.patches.n == 2
    events = [x for _, ev in fire_events(regime, landscape, 20) for x in ev]
    assert events[0] == ("fire", "1;2", 250, 72 * 50.0)  # the whole grid, every individual
    assert all(x[:3] == ("fire", "1;2", 250) for x in events)


def test_exponential_fire_sizes(tmp_path):
    """Fire sizes drawn from an exponential of mean 20 cells (1.8 ha of 0.09 ha cells), rounded
    to whole cells with at least one: the mean burned area matches E[max(1, round(S))]
    (scipy.stats.expon as the reference) within 4 standard errors, in fuel that does not limit
    them."""
    s = np.full((100, 100), 0.6)
    tables = """
    [[disturbance]]
    kind = "fire"
    return_interval_years = 100
    size_distribution = "exponential"
    mean_size_ha = 1.8
    mortality = 0.1
    """
    _, landscape, regime = build(tmp_path, s, tables)
    sizes = [x[2] for e in run_years(regime, landscape, 120, seed=6) for x in e.events]
    k = np.arange(1, 2000)
    dist = stats.expon(scale=20.0)
    pmf = dist.cdf(k + 0.5) - dist.cdf(k - 0.5)
    pmf[0] = dist.cdf(1.5)
    mean = (k * pmf).sum()
    sd = math.sqrt((k ** 2 * pmf).sum() - mean ** 2)
    assert len(sizes) > 400
    assert abs(np.mean(sizes) - mean) < 4 * sd / math.sqrt(len(sizes))


@pytest.mark.parametrize("exponent", [1.5, 1.0, 2.0])
def test_expected_truncated_power_law_size(exponent):
    """E[min(S, A)] of the truncated power law against numerical integration
    (scipy.integrate.quad as the reference), for A below, inside and above the size range."""
    lo, hi = 1.0, 500.0
    norm = integrate.quad(lambda x: x ** -exponent, lo, hi)[0]
    for area in (0.5, 37.0, 1000.0):
        ref = integrate.quad(lambda x, a=area: min(x, a) * x ** -exponent / norm, lo, hi,
                             points=[min(max(area, lo), hi)])[0]
        got = expected_size("power_law", area, min_ha=lo, max_ha=hi, exponent=exponent)
        assert got == pytest.approx(ref, rel=1e-9)


def test_expected_truncated_exponential_size():
    """E[min(S, A)] = m (1 - e^(-A/m)) for an exponential of mean m (scipy.stats.expon.expect
    as the reference)."""
    for area in (0.3, 5.0, 80.0):
        ref = stats.expon(scale=4.0).expect(lambda x, a=area: np.minimum(x, a))
        assert expected_size("exponential", area, mean_ha=4.0) == pytest.approx(ref, rel=1e-9)


def test_capacity_loss_and_linear_recovery(tmp_path):
    """Capacity after a burn: K (1 - L (1 - t/R)) for t years after it, then K; a second burn
    before recovery compounds, 1 - (1 - remaining)(1 - L) (documented convention)."""
    tables = FIRE.format(ri=6.0) + "capacity_loss = 0.6\nrecovery_years = 5\n"
    _, landscape, regime = build(tmp_path, blocks(2), tables)
    k = landscape.capacity
    cell = np.argwhere(landscape.patches.labels == 1)[0]
    burn_years = []
    ratio = []
    for e in run_years(regime, landscape, 80, seed=21):
        if e.burned[tuple(cell)]:
            burn_years.append(len(ratio))
        ratio.append(e.capacity[tuple(cell)] / k[tuple(cell)])
    assert len(burn_years) >= 5
    loss = 0.0
    last = None
    for year, r in enumerate(ratio):
        if last is not None:
            remaining = loss * max(0.0, 1 - (year - last) / 5)
        else:
            remaining = 0.0
        if year in burn_years:
            loss = 1 - (1 - remaining) * (1 - 0.6)
            last = year
            remaining = loss
        assert r == pytest.approx(1 - remaining, abs=1e-12)
    gaps = np.diff(burn_years)
    assert (gaps < 5).any() and (gaps >= 5).any()  # both compounding and full recovery seen


def test_exponential_recovery(tmp_path):
    """Exponential recovery: the remaining loss is L e^(-t/R) t years after a burn (documented
    convention)."""
    tables = FIRE.format(ri=20.0) + ('capacity_loss = 0.5\nrecovery = "exponential"\n'
                                     "recovery_years = 4\n")
    _, landscape, regime = build(tmp_path, blocks(1), tables)
    ratios, burns = [], []
    for e in run_years(regime, landscape, 120, seed=2):
        burns.append(bool(e.burned.any()))
        ratios.append(float(e.capacity[0, 0] / landscape.capacity[0, 0]))
    first = burns.index(True)
    nxt = burns.index(True, first + 1)
    for t in range(nxt - first):
        assert ratios[first + t] == pytest.approx(1 - 0.5 * math.exp(-t / 4), abs=1e-12)


def test_same_seed_same_events_and_replicates_independent(tmp_path):
    """Counter-based numbers: the same seed gives identical events; a replicate's events do not
    depend on the replicates run before it; another seed gives other events; another mortality
    (a paired scenario) keeps the footprints."""
    tables = FIRE.format(ri=8.0) + FLOOD.format(t=5)
    s = blocks(5)
    _, landscape, regime = build(tmp_path, s, tables, layers={"zone.tif": (s > 0) * 1.0})

    def history(reg, rep, seed=7):
        return [(e.events, e.burned.copy(), e.flooded.copy())
                for e in run_years(reg, landscape, 25, seed=seed, replicate=rep)]

    alone = history(regime, 3)
    for rep in range(3):
        history(regime, rep)
    again = history(regime, 3)
    assert all(a[0] == b[0] and np.array_equal(a[1], b[1]) and np.array_equal(a[2], b[2])
               for a, b in zip(alone, again, strict=True))
    assert sum(len(a[0]) for a in alone) > 10
    other = history(regime, 3, seed=8)
    assert [a[0] for a in other] != [a[0] for a in alone]
    assert [a[0] for a in history(regime, 4)] != [a[0] for a in alone]

    _, _, paired = build(tmp_path, s, tables.replace("mortality = 0.5", "mortality = 0.9"),
                         layers={"zone.tif": (s > 0) * 1.0}, name="paired.toml")
    for a, b in zip(alone, history(paired, 3), strict=True):
        assert np.array_equal(a[1], b[1]) and np.array_equal(a[2], b[2])
        assert [x[:3] for x in a[0]] == [x[:3] for x in b[0]]


def test_reserve_suppresses_ignitions(tmp_path):
    """A reserve with ignition_multiplier 0 over some patches: no fire starts there (it may burn
    in from outside only with a hazard raster; here fires cannot spread between patches)."""
    s = blocks(4)
    reserve = np.zeros_like(s)
    reserve[:6] = 1
    write_raster(tmp_path / "reserve.tif", reserve)
    tables = FIRE.format(ri=3.0) + """
    [[action]]
    kind = "reserve"
    area = "reserve.tif"
    ignition_multiplier = 0.0
    """
    _, landscape, regime = build(tmp_path, s, tables)
    assert any("8 of 16 patches can ignite" in note for note in regime.notes)
    burned = np.zeros(s.shape, bool)
    for e in run_years(regime, landscape, 40):
        burned |= e.burned
    assert not burned[:6].any() and burned[6:].any()


@pytest.mark.parametrize("key, value, message", [
    ("return_interval_years", "0", "return_interval_years = 0 is not allowed"),
    ("return_interval_years", "-5", "return_interval_years = -5 is not allowed"),
    ("mortality", "1.5", "mortality = 1.5 is not allowed; expected a number with 0 <= value <= 1"),
    ("mortality", "-0.1", "mortality = -0.1 is not allowed"),
    ("kind", '"blaze"', "known kinds: 'fire', 'flood'"),
    ("zone", '"z.tif"', "unknown key 'zone'"),
])
def test_bad_fire_input(tmp_path, key, value, message):
    """Bad input is refused with the table, key, value and what is allowed."""
    lines = {"kind": '"fire"', "return_interval_years": "10", "mortality": "0.5"}
    lines[key] = value
    tables = "[[disturbance]]\n" + "".join(f"{k} = {v}\n" for k, v in lines.items())
    with pytest.raises(ScenarioError, match=re.escape(message)):
        build(tmp_path, blocks(2), tables)


@pytest.mark.parametrize("extra, message", [
    ('zone = ["a.tif", "b.tif"]', "2 values for 1 return periods"),
    ('zone = "a.tif"\nterrain = "a.tif"\nstage_m = 1.0', "not both"),
    ("", "not neither"),
    ('terrain = "a.tif"', "stage_m is required with terrain"),
])
def test_bad_flood_input(tmp_path, extra, message):
    """Flood tables need zone or terrain, one zone or stage per return period."""
    write_raster(tmp_path / "a.tif", np.ones((6, 6)))
    write_raster(tmp_path / "b.tif", np.ones((6, 6)))
    tables = ('[[disturbance]]\nkind = "flood"\nreturn_period_years = 20\nmortality = 0.1\n'
              + extra + "\n")
    with pytest.raises(ScenarioError, match=message):
        build(tmp_path, blocks(2), tables)


def test_flood_return_periods_must_increase(tmp_path):
    write_raster(tmp_path / "a.tif", np.ones((6, 6)))
    tables = ('[[disturbance]]\nkind = "flood"\nreturn_period_years = [100, 10]\n'
              'zone = ["a.tif", "a.tif"]\nmortality = 0.1\n')
    with pytest.raises(ScenarioError, match="return periods must increase"):
        build(tmp_path, blocks(2), tables)


def test_negative_hazard_refused(tmp_path):
    hazard = np.ones((6, 6))
    hazard[0, 0] = -1
    tables = FIRE.format(ri=10) + 'hazard = "h.tif"\n'
    with pytest.raises(InputDataError, match="values must be >= 0; the minimum is -1"):
        build(tmp_path, blocks(2), tables, layers={"h.tif": hazard})


def test_flood_zone_in_another_crs_is_reprojected(tmp_path):
    """A flood-zone polygon in geographic coordinates (EPSG:4326) is reprojected to the grid
    (pyproj as the reference for the coordinates) and the notes say so; it floods the cells
    whose centres it covers."""
    s = np.full((20, 20), 0.5)
    x0, y0 = ORIGIN
    box = shapely.box(x0 + 150, y0 - 450, x0 + 450, y0 - 150)  # cells 5..14 x 5..14
    gpd.GeoDataFrame(geometry=[box], crs=UTM).to_crs("EPSG:4326").to_file(tmp_path / "z.gpkg")
    tables = ('[[disturbance]]\nkind = "flood"\nreturn_period_years = 1.0001\nzone = "z.gpkg"\n'
              "mortality = 0.5\n")
    _, landscape, regime = build(tmp_path, s, tables)
    assert any("reprojected from EPSG:4326" in note for note in regime.notes)
    e = run_years(regime, landscape, 1)[0]
    expected = np.zeros(s.shape, bool)
    expected[5:15, 5:15] = True
    assert (e.flooded != expected).sum() <= 4  # reprojected edges may shift a corner cell


def test_flood_zone_raster_in_another_crs(tmp_path):
    """A flood-zone raster on another grid (UTM zone 32N) is resampled to the template and the
    notes name the source CRS."""
    s = np.full((20, 20), 0.5)
    x0, y0 = ORIGIN
    b = transform_bounds(UTM, "EPSG:32632", x0 - 300, y0 - 900, x0 + 900, y0 + 300)
    zone = np.ones((60, 60))
    transform = from_origin(b[0], b[3], (b[2] - b[0]) / 60, (b[3] - b[1]) / 60)
    write_raster(tmp_path / "z.tif", zone, crs="EPSG:32632", transform=transform)
    tables = FLOOD.format(t=1.0001).replace("zone.tif", "z.tif")
    _, landscape, regime = build(tmp_path, s, tables)
    assert any("resampled from EPSG:32632" in note for note in regime.notes)
    assert run_years(regime, landscape, 1)[0].flooded.all()


def test_no_disturbance_gives_no_regime(tmp_path):
    _, _, regime = build(tmp_path, blocks(2), "")
    assert regime is None


@pytest.mark.parametrize("ri", ["{ start = 30, end = 15 }", "[[0, 30], [39, 15]]"])
def test_fire_return_interval_halving_over_the_run(tmp_path, ri):
    """A return interval falling linearly from 30 to 15 years over a 40-year run: with
    whole-patch burns each patch burns in year t with probability 1/RI(t) (Van Wagner 1978,
    Can. J. For. Res. 8:220, the fire cycle applied year by year, from memory for pages). Per
    year the fraction of the 100 patches x 60 replicates burned lies within 4 binomial standard
    errors of 1/RI(t), and what is left after subtracting 1/RI(t) has no trend (a fitted slope
    within 4 standard errors of 0); both ways of writing the change are accepted."""
    years, reps = 40, 60
    _, landscape, regime = build(tmp_path, blocks(10), FIRE.format(ri=ri), years=years)
    labels = landscape.patches.labels
    burned = np.zeros(years)
    for rep in range(reps):
        for t, e in enumerate(run_years(regime, landscape, years, seed=5, replicate=rep)):
            burned[t] += len(np.unique(labels[e.burned]))
    n = 100 * reps
    p = 1.0 / (30.0 + (15.0 - 30.0) * np.arange(years) / (years - 1))
    frac = burned / n
    se = np.sqrt(p * (1 - p) / n)
    assert np.all(np.abs(frac - p) < 4 * se), np.c_[frac, p]
    assert frac[-10:].mean() > 1.6 * frac[:10].mean()  # nearly doubled (2 - 0.35 expected)
    fit = stats.linregress(np.arange(years), frac - p)
    assert abs(fit.slope) < 4 * fit.stderr + 1e-12
    notes = " ".join(regime.notes)
    assert "return interval 30" in notes and "15" in notes


def test_flood_return_period_that_changes(tmp_path):
    """A flood return period falling from 50 to 10 years: the year floods with probability
    1/T(t), the annual exceedance probability of that year's return period (Chow, Maidment and
    Mays 1988, Applied Hydrology); one draw per replicate-year, 4 binomial standard errors over
    the first and last 10 years. Several magnitudes cannot change (one zone needed)."""
    zone = np.ones((6, 6))
    years, reps = 30, 800
    _, landscape, regime = build(
        tmp_path, np.full((6, 6), 0.8), FLOOD.format(t="{ start = 50, end = 10 }"),
        years=years, layers={"zone.tif": zone})
    flooded = np.zeros(years)
    for rep in range(reps):
        for t, e in enumerate(run_years(regime, landscape, years, seed=2, replicate=rep)):
            flooded[t] += bool(e.flooded.any())
    p = 1.0 / (50.0 + (10.0 - 50.0) * np.arange(years) / (years - 1))
    for part in (slice(0, 10), slice(-10, None)):
        n = reps * 10
        expected = p[part].mean()
        assert abs(flooded[part].sum() / n - expected) < 4 * math.sqrt(expected / n)
    with pytest.raises(ScenarioError, match="needs a single magnitude"):
        build(tmp_path, np.full((6, 6), 0.8), """
        [[disturbance]]
        kind = "flood"
        return_period_years = [[0, 50], [20, 10]]
        zone = ["zone.tif", "zone.tif"]
        mortality = 0.5
        """, layers={"zone.tif": zone}, name="two.toml")

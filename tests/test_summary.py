"""The run summary: summary.json, risk.csv, patch_occupancy.csv, colonisation_year.tif."""

from __future__ import annotations

import csv
import json
import math

import geopandas as gpd
import numpy as np
import pytest
import rasterio
import shapely.geometry as sg
from conftest import UTM, write_raster
from rasterio.transform import from_origin
from scipy import stats

from gridpop.analysis.summary import FocusCensus
from gridpop.cli import main
from gridpop.io.results import NODATA

NY, NX, CELL = 10, 16, 30.0
X0, Y0 = 500_000.0, 4_000_000.0
TRANSFORM = from_origin(X0, Y0, CELL, CELL)
WEST = (slice(1, 5), slice(1, 6))  # rows 1-4, columns 1-5: 20 cells
EAST = (slice(5, 9), slice(9, 15))  # rows 5-8, columns 9-14: 24 cells


def suitability(seed=0):
    """Two habitat blocks (not 8-connected) in a matrix below the threshold, one nodata cell."""
    rng = np.random.default_rng(seed)
    s = np.full((NY, NX), 0.05)
    s[WEST] = 0.3 + 0.7 * rng.random((4, 5))
    s[EAST] = 0.3 + 0.7 * rng.random((4, 6))
    s[0, NX - 1] = NODATA
    return s.astype(np.float32)


def box(rows: slice, cols: slice):
    """Polygon covering exactly the centres of the cells in rows x cols."""
    return sg.box(X0 + cols.start * CELL, Y0 - rows.stop * CELL, X0 + cols.stop * CELL,
                  Y0 - rows.start * CELL)


def block_order():
    """Blocks in patch-label order (patches are numbered by decreasing total capacity)."""
    s = suitability().astype(np.float64)
    return sorted(("west", "east"), key=lambda b: -s[WEST if b == "west" else EAST].sum())


def write_focus_areas(path, names, geoms, field="name"):
    gpd.GeoDataFrame({field: names}, geometry=geoms, crs=UTM).to_file(path)
    return path


def write_case(tmp_path, body, targets=None, name="scenario.toml"):
    write_raster(tmp_path / "suit.tif", suitability(), transform=TRANSFORM)
    if targets is not None:
        write_focus_areas(tmp_path / "focus_areas.gpkg", *targets)
    path = tmp_path / name
    path.write_text(body)
    return path


def run_cli(*args):
    return main([str(a) for a in args])


def read_rows(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def ledger_array(path, field="abundance", patches=False):
    """(R, T + 1) or (R, T + 1, P) array of one field of timeseries.csv / patches.csv."""
    rows = read_rows(path)
    r = 1 + max(int(x["replicate"]) for x in rows)
    t = 1 + max(int(x["year"]) for x in rows)
    shape = (r, t, max(int(x["patch"]) for x in rows)) if patches else (r, t)
    out = np.full(shape, np.nan)
    for x in rows:
        key = (int(x["replicate"]), int(x["year"])) + ((int(x["patch"]) - 1,) if patches else ())
        out[key] = float(x[field])
    return out


DETERMINISTIC = """
[run]
years = 6
replicates = 2
seed = 1

[habitat]
suitability = "suit.tif"
capacity_per_ha = 20.0
response = "threshold"
threshold = 0.3

[initial]
fraction_of_capacity = 0.02

[growth]
model = "exponential"
rate = 0.6931471805599453
survival = 0.5
stochastic = false

[risk]
quasi_extinction = 20.0
focus_areas = "focus_areas.gpkg"
"""


def first_reached(values, threshold):
    """First t with values[t] >= threshold, or None."""
    hits = np.flatnonzero(np.asarray(values) >= threshold)
    return int(hits[0]) if hits.size else None


def test_deterministic_doubling_hand_checked(tmp_path):
    """Deterministic exponential growth N_c(t) = N_c(0) lambda^t in every cell, lambda = e^r = 2
    (Malthus 1798, from memory; common practice): each cell is first occupied (N >= 1) at
    ceil(log2(1 / N_c(0))), a focus area or the whole landscape is below the threshold Q until
    ceil(log2(Q / N(0))). All replicates are equal, so the risk curves are 0 or 1 and the
    colonisation map is that year wherever it is reached by the horizon (nodata elsewhere).
    The GeoTIFF must carry the template's CRS and transform (rasterio / GDAL round trip)."""
    part = (slice(1, 3), slice(1, 4))  # 6 cells of the west block
    scen = write_case(tmp_path, DETERMINISTIC,
                      targets=(["part", "east"], [box(*part), box(*EAST)]))
    out = tmp_path / "res"
    assert run_cli("run", scen, "--out", out, "--quiet", "--no-plots") == 0
    s = suitability().astype(np.float64)
    k = np.where(s >= 0.3, 20.0 * 0.09 * s, 0.0)
    n0 = 0.02 * k
    lam, years = math.exp(0.6931471805599453), 6
    growth = lam ** np.arange(years + 1)

    with rasterio.open(out / "colonisation_year.tif") as ds:
        assert ds.count == 1 and ds.dtypes[0] == "float32" and ds.nodata == NODATA
        assert ds.crs == rasterio.crs.CRS.from_user_input(UTM)
        assert ds.transform == TRANSFORM and ds.shape == (NY, NX)
        year = ds.read(1)
    with np.errstate(divide="ignore"):
        expect = np.ceil(np.log(1.0 / n0) / np.log(lam))
    expect[(n0 == 0) | (expect > years)] = NODATA
    assert np.any(expect == NODATA) and np.any((expect > 0) & (expect <= years))
    np.testing.assert_array_equal(year, expect.astype(np.float32))

    summary = json.loads((out / "summary.json").read_text())
    q = 20.0
    total = n0.sum() * growth
    t_total = first_reached(total, q)
    assert 0 < t_total <= years
    np.testing.assert_array_equal(summary["risk"]["below_now"], (total < q).astype(float))
    np.testing.assert_array_equal(summary["risk"]["ever_below"], np.ones(years + 1))
    for name, cells in (("part", part), ("east", EAST)):
        n_focus = n0[cells].sum() * growth
        first = first_reached(n_focus, 1.0)
        assert first is not None
        col = np.zeros(years + 1)
        col[first:] = 1.0
        assert summary["colonisation"][name]["probability"] == col.tolist()
        assert summary["focus_risk"][name]["below_now"] == (n_focus < q).astype(float).tolist()
    assert summary["expected_minimum"]["estimate"] == pytest.approx(total[0], rel=1e-12)
    assert summary["final_abundance"]["p50"] == pytest.approx(total[-1], rel=1e-12)
    assert summary["metapopulation_capacity"] is None  # no dispersal
    assert summary["focus_areas"]["names"] == ["part", "east"]


STOCHASTIC = """
[run]
years = 10
replicates = 24
seed = 7

[habitat]
suitability = "suit.tif"
capacity_per_ha = 60.0
response = "threshold"
threshold = 0.3

[initial]
fraction_of_capacity = 0.6

[growth]
model = "ricker"
rate = 0.1
survival = 0.5
env_sd = 0.5

[dispersal]
fraction = 0.2
kernel = "exponential"
mean_distance_m = 60.0

[risk]
quasi_extinction = 60.0
focus_areas = "focus_areas.gpkg"
focus_name_field = "label"
confidence = 0.9

[plan]
description = "the base case"
"""


@pytest.fixture(scope="module")
def stochastic_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("stochastic")
    scen = write_case(tmp, STOCHASTIC, targets=(["east"], [box(*EAST)], "label"))
    out = tmp / "res"
    assert run_cli("run", scen, "--out", out, "--quiet", "--no-plots") == 0
    return scen, out, json.loads((out / "summary.json").read_text())


def test_risk_curve_against_ledger_and_scipy_wilson(stochastic_run):
    """The risk curve recomputed from timeseries.csv (fraction of replicates below Q in year t,
    and below in some year <= t), with Wilson score intervals from scipy.stats.binomtest
    (Wilson 1927, JASA 22:209; scipy as the reference implementation)."""
    _, out, summary = stochastic_run
    n = ledger_array(out / "timeseries.csv")
    reps = n.shape[0]
    below = n < 60.0
    ever = np.logical_or.accumulate(below, axis=1)
    assert 0 < ever[:, -1].sum() < reps  # the case exercises a risk strictly between 0 and 1
    rows = read_rows(out / "risk.csv")
    assert [int(r["year"]) for r in rows] == list(range(n.shape[1]))
    for t, row in enumerate(rows):
        for key, hits in (("ever_below", ever[:, t].sum()), ("below_now", below[:, t].sum())):
            ci = stats.binomtest(int(hits), reps).proportion_ci(confidence_level=0.9,
                                                                 method="wilson")
            assert float(row[key]) == pytest.approx(hits / reps, abs=1e-11)
            assert float(row[f"{key}_lo"]) == pytest.approx(ci.low, abs=1e-11)
            assert float(row[f"{key}_hi"]) == pytest.approx(ci.high, abs=1e-11)
            assert summary["risk"][key][t] == pytest.approx(hits / reps, abs=1e-15)


def test_minimum_and_final_abundance_against_ledger(stochastic_run):
    """Expected minimum abundance (McCarthy and Thompson 2001, Animal Conservation 4:351): the
    mean over replicates of each trajectory's minimum; its percentile bootstrap interval (Efron
    and Tibshirani 1993) brackets it and is close to the normal-theory width 2 z s / sqrt(R)
    (within 40 %, the spread of a bootstrap width at R = 24). Final abundance percentiles as
    numpy's linear interpolation (common practice)."""
    _, out, summary = stochastic_run
    n = ledger_array(out / "timeseries.csv")
    minima = n.min(axis=1)
    em = summary["expected_minimum"]
    assert em["estimate"] == pytest.approx(minima.mean(), rel=1e-12)
    assert em["lo"] < em["estimate"] < em["hi"]
    width = 2 * stats.norm.ppf(0.95) * minima.std(ddof=1) / math.sqrt(minima.size)
    assert em["hi"] - em["lo"] == pytest.approx(width, rel=0.4)
    final = summary["final_abundance"]
    assert final["mean"] == pytest.approx(n[:, -1].mean(), rel=1e-12)
    for q in (5, 25, 50, 75, 95):
        assert final[f"p{q}"] == pytest.approx(np.percentile(n[:, -1], q), rel=1e-12)


def test_patch_and_target_occupancy_against_patch_ledger(stochastic_run):
    """patch_occupancy.csv and the occupied-patch count recomputed from patches.csv (occupied:
    N >= occupancy threshold). The target "east" covers exactly the east block, which is one
    patch, so its census must equal that patch's abundance in every replicate-year: its risk
    curve and colonisation probability are those of the patch (ledger identity, exact)."""
    _, out, summary = stochastic_run
    p = ledger_array(out / "patches.csv", patches=True)
    occ = p >= 1.0
    rows = read_rows(out / "patch_occupancy.csv")
    assert len(rows) == p.shape[1] * p.shape[2]
    col = np.logical_or.accumulate(occ, axis=1)
    for r in rows:
        t, q = int(r["year"]), int(r["patch"]) - 1
        assert float(r["fraction_occupied"]) == pytest.approx(occ[:, t, q].mean(), abs=1e-11)
        assert float(r["fraction_colonised"]) == pytest.approx(col[:, t, q].mean(), abs=1e-11)
    np.testing.assert_allclose(summary["occupied_patches"]["mean"], occ.sum(axis=2).mean(axis=0))

    east = block_order().index("east")
    target = p[:, :, east]
    below = target < 60.0
    assert summary["focus_risk"]["east"]["below_now"] == pytest.approx(below.mean(axis=0))
    assert summary["focus_risk"]["east"]["ever_below"] == pytest.approx(
        np.logical_or.accumulate(below, axis=1).mean(axis=0))
    assert 0 < below[:, -1].mean() < 1
    assert summary["colonisation"]["east"]["probability"] == pytest.approx(col[:, :, east]
                                                                           .mean(axis=0))


def test_metapopulation_capacity_of_the_two_blocks(stochastic_run):
    """lambda_M is the leading eigenvalue of M_ij = exp(-alpha d_ij) A_i A_j, M_ii = 0 (Hanski
    and Ovaskainen 2000, Nature 404:755), built here by hand from the blocks' centroids and areas
    and solved with numpy.linalg.eigvals; alpha = 1 / mean dispersal distance."""
    _, _, summary = stochastic_run
    cap = summary["metapopulation_capacity"]
    centre = {"west": (3.5, 3.0), "east": (12.0, 7.0)}  # mean (column, row) + 0.5 of the cells
    area = {"west": 20 * 0.09, "east": 24 * 0.09}
    order = block_order()
    xy = np.array([centre[b] for b in order]) * CELL
    a = np.array([area[b] for b in order])
    assert cap["area_ha"] == pytest.approx(a.tolist())
    d = np.hypot(xy[:, None, 0] - xy[None, :, 0], xy[:, None, 1] - xy[None, :, 1])
    m = np.exp(-d / 60.0) * a[:, None] * a[None, :]
    np.fill_diagonal(m, 0.0)
    assert cap["lambda_M"] == pytest.approx(np.linalg.eigvals(m).real.max(), rel=1e-10)
    assert cap["alpha_per_m"] == pytest.approx(1 / 60.0)
    assert sum(cap["contribution"]) == pytest.approx(1.0)


def test_parameters_plan_and_cautions(stochastic_run):
    """The summary carries the scenario as read (every section, paths absolute), the plan's name
    and description, and the cautions (common practice for decision-support reports)."""
    scen, _, summary = stochastic_run
    par = summary["parameters"]
    assert par["risk"]["quasi_extinction"] == 60.0 and par["risk"]["confidence"] == 0.9
    assert par["habitat"]["suitability"] == str(scen.parent / "suit.tif")
    assert par["action"] == [] and par["disturbance"] == []
    assert summary["plan"] == {"name": "scenario", "description": "the base case", "actions": []}
    assert "do not replace field data" in summary["cautions"]
    assert summary["confidence"] == 0.9 and summary["replicates"] == 24


def test_target_census_sums_cells():
    """FocusCensus.record sums the census inside each target's cells (flat index i * nx + j),
    checked against a hand sum on a 3 x 4 array."""
    n = np.arange(12.0).reshape(3, 4)
    census = FocusCensus(("a", "b"), (np.array([0, 1, 4]), np.array([11])))
    row = np.zeros(2)
    census.record(row, n)
    assert row.tolist() == [0 + 1 + 4, 11]


@pytest.mark.parametrize(
    "edit, names, field, expect",
    [
        ('focus_name_field = "label"', ["east"], "name",
         "[risk] focus_name_field = 'label': focus_areas.gpkg has no such attribute; it has name"),
        ("", ["far"], "name", "covers no cell centre"),
    ],
)
def test_bad_focus_areas_exit_2_nothing_written(tmp_path, capsys, edit, names, field, expect):
    body = STOCHASTIC.replace('focus_name_field = "label"', edit)
    geoms = [box(*EAST)] if names == ["east"] else [sg.box(0, 0, 10, 10)]
    scen = write_case(tmp_path, body, targets=(names, geoms, field))
    out = tmp_path / "res"
    assert run_cli("run", scen, "--out", out, "--quiet", "--no-plots") == 2
    err = capsys.readouterr().err
    assert expect in err and str(scen) in err and "Traceback" not in err
    assert not out.exists() and not (tmp_path / ".res.partial").exists()


def test_capacity_skipped_above_the_patch_limit(tmp_path, monkeypatch):
    """Above CAPACITY_MAX_PATCHES patches the capacity (one eigenproblem per patch for the
    removal drops, cost ~ P^3) is not computed, and the summary says so (common practice:
    report what was skipped)."""
    monkeypatch.setattr("gridpop.analysis.summary.CAPACITY_MAX_PATCHES", 1)
    scen = write_case(tmp_path, STOCHASTIC.replace("replicates = 24", "replicates = 2"),
                      targets=(["east"], [box(*EAST)], "label"))
    out = tmp_path / "res"
    assert run_cli("run", scen, "--out", out, "--quiet", "--no-plots") == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["metapopulation_capacity"] is None
    assert summary["notes"] == ["metapopulation capacity not computed: 2 patches, more than 1"]

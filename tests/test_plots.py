"""Plots of a run and of a comparison, on small fake RUN and COMPARE folders.

The folders hold the files of the issue 5 contract (summary.json, run.json, timeseries.csv, the
GeoTIFF stacks, comparison.csv, compare.json ...) made up here, so these tests do not need a
simulation.
"""

from __future__ import annotations

import csv
import errno
import json
import os
from pathlib import Path

import geopandas as gpd
import matplotlib.image
import numpy as np
import pyproj
import pytest
from conftest import UTM, suitability_array, write_raster
from matplotlib.colors import to_hex
from shapely.geometry import LineString, Point, Polygon, box

from gridpop import load_scenario
from gridpop.analysis.summary import CAUTIONS as RUN_CAUTIONS
from gridpop.analysis.summary import parameters
from gridpop.analysis.summary import plan as plan_of
from gridpop.errors import InputDataError
from gridpop.io.results import LEDGER_FIELDS
from gridpop.report.plots import (
    ACTION_STYLE,
    HABITAT,
    MATRIX,
    NOT_REACHED,
    _maps,
    abundance_figure,
    action_outlines,
    add_scale_bar,
    focus_outlines,
    ledger_figure,
    ledger_means,
    map_figure,
    nice_length,
    plan_cells,
    plot_compare,
    plot_run,
    read_band,
    read_plans,
    read_run,
    risk_figure,
)

NY, NX, CELL = 40, 60, 30.0
X0, Y0 = 500_000.0, 4_000_000.0  # upper-left corner of the conftest grid
RESERVE = (X0 + 300.0, Y0 - 600.0, X0 + 900.0, Y0 - 150.0)  # a reserve rectangle in UTM 33N
CORRIDOR = ((X0 + 750, Y0 - 600), (X0 + 1200, Y0 - 900))  # a corridor centre line
CORRIDOR_BUFFER_M = 45.0
OUTSIDE = (slice(None, 4), slice(-6, None))  # the nodata corner of conftest.suitability_array
ACTIONS = {
    "barrier": 'kind = "barrier"\narea = "road.gpkg"\ncrossing_mortality = 0.9',
    "reserve": 'kind = "reserve"\narea = "reserve.gpkg"\ncapacity_multiplier = 1.5',
    "corridor": (f'kind = "corridor"\narea = "corridor.geojson"\nbuffer_m = {CORRIDOR_BUFFER_M}'
                 '\ntarget_suitability = 0.8\nresistance_multiplier = 0.5'),
    "restoration": 'kind = "restoration"\narea = "restoration.tif"\ntarget_suitability = 0.8\n'
                   'start_year = 2\nramp_years = 4',
}
"""The fake plans' actions; the restoration raster covers the whole study area."""


def _curve(n: np.ndarray, threshold: float) -> dict:
    below = n < threshold
    ever = np.maximum.accumulate(below, axis=1).mean(axis=0)
    now = below.mean(axis=0)
    return {"year": list(range(n.shape[1])), "ever_below": ever.tolist(),
            "ever_below_lo": np.clip(ever - 0.1, 0, 1).tolist(),
            "ever_below_hi": np.clip(ever + 0.1, 0, 1).tolist(), "below_now": now.tolist(),
            "below_now_lo": np.clip(now - 0.1, 0, 1).tolist(),
            "below_now_hi": np.clip(now + 0.1, 0, 1).tolist()}


def _areas(folder):
    """A reserve polygon stored in WGS 84 longitude/latitude, a corridor line and a road line in
    UTM, a raster area covering the grid and two focus areas."""
    to_ll = pyproj.Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
    x0, y0, x1, y1 = RESERVE
    corners = [to_ll.transform(x, y) for x, y in ((x0, y0), (x1, y0), (x1, y1), (x0, y1))]
    gpd.GeoDataFrame(geometry=[Polygon(corners)], crs="EPSG:4326").to_file(folder / "reserve.gpkg")
    gpd.GeoDataFrame(geometry=[LineString(CORRIDOR)], crs=UTM).to_file(folder / "corridor.geojson")
    gpd.GeoDataFrame(geometry=[LineString([(X0 + 1005, Y0), (X0 + 1005, Y0 - NY * CELL)])],
                     crs=UTM).to_file(folder / "road.gpkg")
    write_raster(folder / "restoration.tif", np.ones((NY, NX)))
    targets = folder / "focus_areas.gpkg"
    gpd.GeoDataFrame({"name": ["east", "west"]},
                     geometry=[box(X0 + 1200, Y0 - 1100, X0 + 1600, Y0 - 700),
                               box(X0 + 150, Y0 - 1050, X0 + 600, Y0 - 750)],
                     crs=UTM).to_file(targets)
    return targets


def write_scenario(folder, name, *, rate=0.35, actions=(), method="kernel", stochastic=True,
                   fire=True, env_sd=0.0) -> Path:
    """A scenario on the conftest suitability raster with the given ``actions`` (keys of
    :data:`ACTIONS`), written into ``folder`` as ``<name>.toml``."""
    write_raster(folder / "suitability.tif", suitability_array())
    dispersal = ('method = "walk"\nwalk_length = 20\ndeath_per_resistance = 0.01\n'
                 'heading_bias = 1.0' if method == "walk" else
                 'kernel = "exponential"\nmean_distance_m = 300.0')
    text = f"""[run]
years = 12
replicates = 8
seed = 7

[habitat]
suitability = "suitability.tif"
capacity_per_ha = 30.0
response = "threshold"
threshold = 0.3

[growth]
model = "beverton-holt"
rate = {rate}
stochastic = {"true" if stochastic else "false"}
env_sd = {env_sd}

[dispersal]
fraction = 0.3
{dispersal}

[risk]
quasi_extinction = 50.0
focus_areas = "focus_areas.gpkg"

[plan]
description = "question <of> plan {name} & more"
"""
    if fire:
        text += ('\n[[disturbance]]\nkind = "fire"\nreturn_interval_years = 25.0\n'
                 'mortality = 0.5\n')
    text += "".join(f"\n[[action]]\n{ACTIONS[a]}\n" for a in actions)
    path = folder / f"{name}.toml"
    path.write_text(text)
    return path


def make_run(folder, name, *, years=12, replicates=8, seed=0, growth=0.0,
             actions=("barrier", "reserve", "corridor", "restoration"), **scenario):
    """Write a fake RUN folder (the files of the contract, with a real scenario file whose
    parameters summary.json holds) and return it."""
    folder.mkdir(parents=True)
    rng = np.random.default_rng(seed)
    r, t = replicates, years + 1
    births = rng.poisson(30, (r, t)).astype(float)
    deaths = rng.poisson(30 - growth, (r, t)).astype(float)
    dist = rng.poisson(2, (r, t)).astype(float)
    emig = rng.poisson(10, (r, t)).astype(float)
    imm = np.minimum(emig, rng.poisson(9, (r, t))).astype(float)
    for a in (births, deaths, dist, emig, imm):
        a[:, 0] = 0
    n = np.maximum(60 + np.cumsum(births - deaths - dist + imm - emig, axis=1), 0)
    with open(folder / "timeseries.csv", "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["replicate", "year", *LEDGER_FIELDS])
        for i in range(r):
            for k in range(t):
                w.writerow([i, k, int(n[i, k]), int(births[i, k]), int(deaths[i, k]),
                            int(dist[i, k]), int(emig[i, k]), int(imm[i, k]),
                            int(emig[i, k] - imm[i, k]), 10])
    occ = rng.random((t, NY, NX)) * np.linspace(0, 1, NX)
    occ[:, :, :NX // 6] = 0.0  # occupied in no replicate: habitat and matrix
    occ[(slice(None), *OUTSIDE)] = -9999.0  # outside the study area
    write_raster(folder / "occupancy.tif", occ)
    first = np.where(occ[-1] > 0.3, np.floor(occ[-1] * years), -9999.0)
    write_raster(folder / "colonisation_year.tif", first)
    targets = _areas(folder)
    path = write_scenario(folder, name, rate=0.35 + growth / 100, actions=actions, **scenario)
    loaded = load_scenario(path)
    west = np.zeros((r, t))  # the west focus area starts empty and is colonised
    summary = {
        "quasi_extinction": 50.0, "replicates": r, "years": years, "confidence": 0.95,
        "occupancy_threshold": 1.0,
        "risk": _curve(n, 50.0), "focus_risk": {"east": _curve(n / 4, 10.0),
                                                "west": _curve(west, 10.0)},
        "expected_minimum": {"estimate": 41.5, "lo": 30.25, "hi": 52.75},
        "final_abundance": {"mean": 70.5, "p5": 10.0, "p25": 40.0, "p50": 66.0, "p75": 90.0,
                            "p95": 130.0},
        "occupied_patches": {"year": list(range(t)), "mean": [3.0] * (t - 1) + [2.5]},
        "colonisation": {"east": {"year": list(range(t)),
                                  "probability": np.linspace(0, 0.625, t).tolist()},
                         "west": {"year": list(range(t)),
                                  "probability": (np.arange(t) * 2 // 3 / r).clip(0, 1).tolist()}},
        "metapopulation_capacity": {"lambda_M": 12.75, "contribution": [0.5, 0.25, 0.25],
                                    "removal_drop": [6.0, 2.0, 2.0]},
        "parameters": parameters(loaded), "plan": plan_of(loaded),
        "focus_areas": {"file": str(targets), "name_field": "name", "names": ["east", "west"]},
        "cautions": RUN_CAUTIONS, "notes": ["fake note <b>"],
    }
    (folder / "summary.json").write_text(json.dumps(summary))
    (folder / "run.json").write_text(json.dumps({
        "gridpop_version": "0.1.0", "scenario": str(path), "scenario_sha256": loaded.sha256,
        "seed": 7, "years": years, "replicates": r, "stochastic": True, "complete": True}))
    return folder


PLAN_ACTIONS = {"base": ("barrier",), "corridor": ("barrier", "reserve", "corridor",
                                                   "restoration"),
                "reserve": ("barrier", "reserve")}
"""The fake comparison's plans: the barrier is in every plan, the rest tells them apart."""


def make_compare(folder, names=("base", "corridor", "reserve")):
    """Write a fake COMPARE folder: one fake run per plan, the table, difference maps."""
    folder.mkdir()
    for i, name in enumerate(names):
        make_run(folder / name, name, seed=i, growth=2.0 * i, actions=PLAN_ACTIONS[name])
    base = read_band(folder / names[0] / "occupancy.tif").values
    rows = []
    for i, name in enumerate(names):
        if i:
            diff = read_band(folder / name / "occupancy.tif").values - base
            write_raster(folder / f"occupancy_difference_{name}.tif", diff.filled(-9999.0))
        rows.append({"plan": name, "description": f"plan {name}", "risk": 0.5 - 0.125 * i,
                     "risk_lo": 0.25, "risk_hi": 0.75, "risk_difference": -0.125 * i,
                     "expected_minimum": 40.5 + 10 * i, "final_median": 66 + i,
                     "colonisation_east": 0.375 + 0.25 * i,
                     "metapopulation_capacity": 12.75 + i, "rank": i + 1,
                     "distinguishable": i > 0})
    with open(folder / "comparison.csv", "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    (folder / "comparison.json").write_text(json.dumps({
        "paired": "Replicates are paired by common random numbers (seed 7).",
        "ranking": "Ordered by risk at the horizon.", "notes": [], "plans": rows}))
    (folder / "compare.json").write_text(json.dumps({
        "plans": [{"name": n, "folder": n, "scenario": str(folder / n / f"{n}.toml")}
                  for n in names], "complete": True}))
    return folder


@pytest.fixture
def run_dir(tmp_path):
    return make_run(tmp_path / "run", "corridor")


@pytest.fixture
def compare_dir(tmp_path):
    return make_compare(tmp_path / "cmp")


def _check_pngs(paths, names):
    assert sorted(p.name for p in paths) == sorted(f"{n}.png" for n in names)
    for p in paths:
        assert p.is_file() and p.stat().st_size > 10_000, p
        img = matplotlib.image.imread(p)
        assert img.ndim == 3 and min(img.shape[:2]) > 300
        assert img[..., :3].std() > 0.05, f"{p.name} looks blank"


def test_plot_run_writes_pngs(run_dir):
    """Every figure of a run is a readable, non-blank PNG in plots/ (common practice)."""
    paths = plot_run(run_dir)
    assert all(p.parent == run_dir / "plots" for p in paths)
    _check_pngs(paths, ["risk", "abundance", "occupancy", "colonisation", "ledger"])


def test_figures_drawn_again_stay_whole_when_interrupted(run_dir, monkeypatch):
    """Drawing a folder's figures again (``gridpop report`` on a published folder) replaces each
    PNG only once it is written whole: a write that fails half way (ENOSPC, POSIX "no space left
    on device") leaves the previous figure byte for byte."""
    from matplotlib.figure import Figure

    risk = plot_run(run_dir)[0]
    before = risk.read_bytes()

    def half_written(self, fname, **kwargs):
        Path(fname).write_bytes(before[:100])
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(Figure, "savefig", half_written)
    with pytest.raises(OSError):
        plot_run(run_dir)
    assert risk.read_bytes() == before


def test_plot_compare_one_risk_curve_per_plan(compare_dir):
    """One risk line per plan, holding that plan's ever_below curve, on one axis per
    population; the compare figures (with the difference maps) are written (common practice)."""
    paths = plot_compare(compare_dir)
    _check_pngs(paths, ["risk", "abundance", "occupancy", "colonisation", "ledger",
                        "occupancy_difference"])
    _, plans = read_plans(compare_dir)
    fig = risk_figure(plans)
    visible = [ax for ax in fig.axes if ax.get_visible()]
    assert [ax.get_title() for ax in visible][:2] == ["whole landscape", "focus area east"]
    for ax, key in zip(visible, ("risk", "east"), strict=False):
        lines = [ln for ln in ax.get_lines() if not ln.get_label().startswith("_")]
        assert [ln.get_label() for ln in lines] == ["base", "corridor", "reserve"]
        assert len(ax.collections) == 3  # one interval band per plan
        for ln, plan in zip(lines, plans, strict=True):
            curve = plan.summary["risk"] if key == "risk" else plan.summary["focus_risk"][key]
            np.testing.assert_array_equal(ln.get_ydata(), curve["ever_below"])
        colours = {ln.get_color() for ln in lines}
        assert len(colours) == 3
    for name in ("abundance", "ledger"):
        fig = {"abundance": abundance_figure, "ledger": ledger_figure}[name](plans)
        titles = [ax.get_title() for ax in fig.axes if ax.get_visible()]
        assert titles == ["base", "corridor", "reserve"], name


def test_abundance_median_and_band(tmp_path):
    """Median and 5-95 % band over replicates of a hand-made set: replicate i has abundance
    10 i + t, so the median of i = 0..4 is 20 + t and the 5 % and 95 % points (linear
    interpolation between order statistics, Hyndman and Fan 1996, The American Statistician
    50:361, definition 7) are 2 + t and 38 + t."""
    run = make_run(tmp_path / "r", "hand", replicates=5, years=4)
    with open(run / "timeseries.csv", "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["replicate", "year", *LEDGER_FIELDS])
        for i in (3, 0, 4, 1, 2):  # rows in any order
            for t in range(5):
                w.writerow([i, t, 10 * i + t, 0, 0, 0, 0, 0, 0, 0])
    fig = abundance_figure([read_run(run)], replicate_lines=2)
    ax = fig.axes[0]
    median = [ln for ln in ax.get_lines() if ln.get_label() == "median"][0]
    np.testing.assert_allclose(median.get_ydata(), 20 + np.arange(5))
    singles = [ln for ln in ax.get_lines() if ln.get_color() == "0.35"]
    assert len(singles) == 2
    np.testing.assert_allclose(singles[1].get_ydata(), 10 + np.arange(5))
    band = ax.collections[0].get_paths()[0].vertices
    assert band[:, 1].min() == pytest.approx(2.0) and band[:, 1].max() == pytest.approx(42.0)


def test_ledger_means(tmp_path):
    """Ledger chart values: means over replicates of births, deaths, disturbance deaths and
    immigrants - emigrants per year 1..T, checked by hand on two replicates (common practice:
    the ledger identity N(t) = N(t-1) + births - deaths - disturbance deaths + immigrants -
    emigrants)."""
    run = make_run(tmp_path / "r", "hand", replicates=2, years=2)
    rows = [(0, 0, 10, 0, 0, 0, 0, 0), (0, 1, 13, 6, 2, 1, 4, 4), (0, 2, 12, 3, 3, 0, 2, 1),
            (1, 0, 10, 0, 0, 0, 0, 0), (1, 1, 9, 2, 4, 1, 1, 3), (1, 2, 11, 5, 2, 2, 1, 2)]
    with open(run / "timeseries.csv", "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["replicate", "year", *LEDGER_FIELDS])
        for rep, t, n, b, d, dd, em, im in rows:
            w.writerow([rep, t, n, b, d, dd, em, im, em - im, 1])
    led = read_run(run).ledger()
    for rep in range(2):  # the hand-made rows keep the ledger identity
        n, b, d, dd, em, im = (led[k][rep] for k in ("abundance", "births", "deaths",
                                                      "disturbance_deaths", "emigrants",
                                                      "immigrants"))
        np.testing.assert_array_equal(n[1:], n[:-1] + b[1:] - d[1:] - dd[1:] + im[1:] - em[1:])
    m = ledger_means(led)
    np.testing.assert_array_equal(m["year"], [1, 2])
    np.testing.assert_allclose(m["births"], [4.0, 4.0])
    np.testing.assert_allclose(m["deaths"], [3.0, 2.5])
    np.testing.assert_allclose(m["disturbance deaths"], [1.0, 1.0])
    np.testing.assert_allclose(m["net movement"], [1.0, 0.0])
    ax = ledger_figure([read_run(run)]).axes[0]
    heights = sorted(round(p.get_height(), 6) for p in ax.patches)
    assert heights == sorted([4.0, 4.0, -3.0, -2.5, -1.0, -1.0])


@pytest.mark.parametrize("width_m, expected", [(1800.0, 200.0), (5000.0, 1000.0),
                                               (12_000.0, 2000.0), (260.0, 50.0),
                                               (30_000.0, 5000.0)])
def test_nice_length(width_m, expected):
    """Scale-bar length: the largest 1-2-5 x 10^k length not above a fifth of the map width
    (common practice in cartography)."""
    assert nice_length(width_m) == expected


def test_maps_outline_in_grid_crs_and_scale_bar(run_dir):
    """Action areas stored in another CRS are drawn in grid coordinates: the reserve polygon
    saved in WGS 84 lies back on its UTM 33N rectangle (pyproj as reference, Snyder 1987, Map
    Projections: A Working Manual, USGS Professional Paper 1395, for the transverse Mercator);
    axes, title and scale bar are in metres of the grid CRS."""
    plan = read_run(run_dir)
    layer = read_band(run_dir / "occupancy.tif")
    lines, _ = action_outlines([plan], [plan_cells(plan)], layer)
    areas = dict(lines[0])
    assert list(areas) == ["barrier", "reserve", "corridor"]  # restoration: whole study area
    np.testing.assert_allclose(areas["reserve"].total_bounds, RESERVE, atol=1e-3)
    assert layer.extent == (X0, X0 + NX * CELL, Y0 - NY * CELL, Y0)
    fig = map_figure([("corridor", layer, lines[0])], cmap="viridis", vmin=0, vmax=1,
                     label="fraction occupied", title="Occupancy")
    ax = fig.axes[0]
    assert "WGS 84 / UTM zone 33N (EPSG:32633)" in fig.get_suptitle()
    assert ax.get_xlabel() == "Easting (m)" and ax.get_ylabel() == "Northing (m)"
    assert (ax.get_xlim(), ax.get_ylim()) == ((X0, X0 + NX * CELL), (Y0 - NY * CELL, Y0))
    pink = [c for c in ax.collections
            if to_hex(c.get_colors()[0]) == ACTION_STYLE["reserve"][0].lower()]
    drawn = np.concatenate([seg for c in pink for seg in c.get_segments()])
    np.testing.assert_allclose([drawn[:, 0].min(), drawn[:, 1].min(), drawn[:, 0].max(),
                                drawn[:, 1].max()], RESERVE, atol=1e-3)
    bars = [a for a in ax.artists if hasattr(a, "size_bar")]
    assert len(bars) == 1
    label = bars[0].txt_label.get_children()[0].get_text()
    assert label == "200 m"  # 1800 m wide map


def test_corridor_drawn_as_its_buffered_footprint(run_dir):
    """A corridor line with buffer_m is drawn as the cells the model gave it, not as its centre
    line: the outline holds exactly the cells whose centre lies within buffer_m of the line
    (the rasterising rule of the README: a cell belongs to a polygon when its centre is inside
    it), computed here with shapely distances; that is a band several cells wide."""
    plan = read_run(run_dir)
    layer = read_band(run_dir / "occupancy.tif")
    lines, _ = action_outlines([plan], [plan_cells(plan)], layer)
    corridor = dict(lines[0])["corridor"].union_all()
    line = LineString(CORRIDOR)
    centres = [Point(X0 + (j + 0.5) * CELL, Y0 - (i + 0.5) * CELL)
               for i in range(NY) for j in range(NX)]
    expected = np.array([line.distance(c) <= CORRIDOR_BUFFER_M for c in centres])
    inside = np.array([corridor.contains(c) for c in centres])
    np.testing.assert_array_equal(inside, expected)
    assert corridor.area == pytest.approx(expected.sum() * CELL * CELL)
    assert max(line.distance(c) for c, e in zip(centres, expected, strict=True) if e) > CELL


def _kinds(ax) -> set[str]:
    """The outline kinds drawn on a map axis, by their colours."""
    colours = {to_hex(c.get_colors()[0]) for c in ax.collections if len(c.get_colors())}
    return {k for k, (colour, _) in ACTION_STYLE.items()
            if k != "focus" and colour.lower() in colours}


def test_maps_draw_only_actions_that_tell_plans_apart(compare_dir):
    """In a comparison, an action with the same cells in every plan (the barrier) and one
    covering the whole study area (the restoration raster) are not drawn; the legend text names
    them with their files relative to the scenario. A single run draws its barrier, not its
    whole-area restoration."""

    _, plans = read_plans(compare_dir)
    fig = dict(_maps(plans))["occupancy"]
    drawn = [_kinds(ax) for ax in fig.axes[:3]]
    assert drawn == [set(), {"reserve", "corridor"}, {"reserve"}]
    title = " ".join(fig.legends[0].get_title().get_text().split())
    assert title == ("not drawn, the same in every plan: barrier (road.gpkg); not drawn, "
                     "covering the whole study area: restoration (restoration.tif)")
    entries = [t.get_text() for t in fig.legends[0].get_texts()]
    assert "barrier" not in entries and "restoration" not in entries
    assert {"reserve", "corridor", "focus area"} <= set(entries)
    single = dict(_maps([plans[1]]))["occupancy"]
    assert _kinds(single.axes[0]) == {"barrier", "reserve", "corridor"}
    assert single.legends[0].get_title().get_text() == (
        "not drawn, covering the whole study area: restoration (restoration.tif)")


def test_maps_show_habitat_under_empty_cells(tmp_path):
    """Cells occupied in no replicate show the habitat of the last year apart from the matrix:
    with the threshold response, habitat is where suitability >= 0.3 (the conftest raster); cells
    outside the study area show nothing (common practice)."""

    run = make_run(tmp_path / "r", "base", actions=("barrier",))
    fig = dict(_maps([read_run(run)]))["occupancy"]
    under = fig.axes[0].images[0]
    codes = under.get_array()
    occ = read_band(run / "occupancy.tif").values
    empty = ~np.ma.getmaskarray(occ) & (occ.filled(1) == 0)
    np.testing.assert_array_equal(~np.ma.getmaskarray(codes), empty)
    suit = suitability_array()
    np.testing.assert_array_equal(codes[empty] == 1, suit[empty] >= 0.3)
    assert (suit[empty] >= 0.3).any() and (suit[empty] < 0.3).any()
    assert [to_hex(under.cmap(i)) for i in (0, 255)] == [MATRIX.lower(), HABITAT.lower()]
    entries = [t.get_text() for t in fig.legends[0].get_texts()]
    assert {"habitat, occupied in no replicate", "matrix (no habitat)"} <= set(entries)
    assert np.ma.getmaskarray(fig.axes[0].images[1].get_array())[empty].all()


def test_colonisation_map_marks_unreached_cells(run_dir):
    """Study-area cells never colonised in half of the replicates show habitat or matrix and
    are listed in the legend; cells outside the study area do not (common practice)."""
    plots = plot_run(run_dir)
    assert (run_dir / "plots" / "colonisation.png") in plots

    fig = dict(_maps([read_run(run_dir)]))["colonisation"]
    texts = [t.get_text() for leg in fig.legends for t in leg.get_texts()]
    assert "habitat, not occupied in half of the replicates" in texts
    under = fig.axes[0].images[0].get_array()
    col = read_band(run_dir / "colonisation_year.tif").values
    occ = read_band(run_dir / "occupancy.tif").values
    expected = np.ma.getmaskarray(col) & ~np.ma.getmaskarray(occ)
    np.testing.assert_array_equal(~np.ma.getmaskarray(under), expected)


def test_changed_scenario_warns_and_maps_without_habitat(run_dir):
    """A scenario file edited since the run is not used: a warning, and the maps show cells
    without a value in grey, with no action areas."""

    scenario = run_dir / "corridor.toml"
    scenario.write_text(scenario.read_text().replace("rate = 0.35", "rate = 0.5"))
    with pytest.warns(UserWarning, match="corridor.toml: the scenario of plan corridor has "
                                         "changed since the run"):
        fig = dict(_maps([read_run(run_dir)]))["occupancy"]
    assert _kinds(fig.axes[0]) == set()
    assert to_hex(fig.axes[0].images[0].cmap(0)) == NOT_REACHED.lower()


def test_missing_focus_file_warns(run_dir):
    """Focus areas moved away since the run are left out of the maps with a warning."""
    (run_dir / "focus_areas.gpkg").unlink()
    with pytest.warns(UserWarning, match="focus areas of plan corridor are missing"):
        assert focus_outlines(read_run(run_dir), read_band(run_dir / "occupancy.tif").crs) == []


def test_risk_panel_shows_colonisation_for_focus_area_starting_below(compare_dir):
    """A focus area below the threshold in year 0 in every replicate (west) shows its
    colonisation probability instead of a flat risk of 1, and its title says so; its band is the
    Wilson score interval of k colonised replicates out of n (Wilson 1927, Journal of the American
    Statistical Association 22:209), here worked by hand for k = 2, n = 8 at 95 %. A focus area
    that starts above (east) keeps its risk curve."""
    _, plans = read_plans(compare_dir)
    fig = risk_figure(plans)
    visible = [ax for ax in fig.axes if ax.get_visible()]
    titles = [ax.get_title() for ax in visible]
    assert titles[1] == "focus area east"
    assert titles[2] == ("focus area west: below 50 individuals from year 0,\n"
                         "so shown: probability colonised by year t")
    assert "held at least\n1 individuals" in visible[2].get_ylabel()
    lines = [ln for ln in visible[2].get_lines() if not ln.get_label().startswith("_")]
    for ln, p in zip(lines, plans, strict=True):
        west = p.summary["colonisation"]["west"]["probability"]
        np.testing.assert_array_equal(ln.get_ydata(), west)
        assert not np.array_equal(ln.get_ydata(), p.summary["focus_risk"]["west"]["ever_below"])
    k, n, z = 2, 8, 1.959963984540054
    centre = (k + z * z / 2) / (n + z * z)
    half = z / (n + z * z) * np.sqrt(k * (n - k) / n + z * z / 4)
    year = 3  # 3 * 2 // 3 = 2 colonised replicates
    assert plans[0].summary["colonisation"]["west"]["probability"][year] == k / n
    band = visible[2].collections[0].get_paths()[0].vertices
    at = np.sort(band[np.isclose(band[:, 0], year), 1])
    np.testing.assert_allclose([at.min(), at.max()], [centre - half, centre + half], rtol=1e-9)


def test_not_a_result_folder(tmp_path):
    """A folder without run.json or compare.json is refused with a message naming it."""
    with pytest.raises(InputDataError, match="not a gridpop result folder"):
        read_plans(tmp_path)
    with pytest.raises(InputDataError, match="summary.json: missing"):
        plot_run(tmp_path)


def test_scale_bar_in_feet():
    """A grid in US survey feet (EPSG:2263) gets a bar of a round length in metres drawn in
    feet: 6000 ft = 1828.8 m wide gives 200 m = 656.17 ft (1 US survey foot = 1200/3937 m,
    NIST Handbook 44, Appendix C)."""
    from matplotlib.figure import Figure

    ax = Figure().subplots()
    ax.set_xlim(0, 6000)
    bar = add_scale_bar(ax, pyproj.CRS("EPSG:2263"), 6000.0)
    rect = bar.size_bar.get_children()[0]
    assert rect.get_width() == pytest.approx(200 / (1200 / 3937), rel=1e-9)
    assert bar.txt_label.get_children()[0].get_text() == "200 m"

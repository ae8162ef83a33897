"""Warnings where the model is probably not what the user meant (gridpop.simulation.pitfalls):
each one triggered, and not triggered by the scenario beside it."""

from __future__ import annotations

import pickle
import warnings

import geopandas as gpd
import numpy as np
import pytest
from conftest import UTM, suitability_array
from shapely.geometry import box

from gridpop.cli import main
from gridpop.config import load_scenario
from gridpop.errors import InputDataError, ScenarioWarning
from gridpop.landscape import build_landscape
from gridpop.simulation.model import build_model
from gridpop.simulation.pitfalls import FEW_PER_CELL

SCENARIO = """
[run]
years = 3
replicates = 2
seed = 5

[habitat]
suitability = "{{suitability}}"
capacity_per_ha = {capacity}
response = "threshold"
threshold = 0.3

[initial]
fraction_of_capacity = 0.5

[growth]
model = "beverton-holt"
rate = 0.5
survival = 0.5
stochastic = {stochastic}

[dispersal]
fraction = 0.2
{dispersal}

[risk]
quasi_extinction = {threshold}
{risk}
"""

KERNEL = 'kernel = "gaussian"\nmean_distance_m = 60.0'
WALK = 'method = "walk"'


def text(*, capacity=200.0, stochastic="true", dispersal=KERNEL, threshold=10.0, risk="",
         extra=""):
    return SCENARIO.format(capacity=capacity, stochastic=stochastic, dispersal=dispersal,
                           threshold=threshold, risk=risk) + extra


def warned(path) -> list[str]:
    """The ScenarioWarnings of building the model of a scenario file."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        s = load_scenario(path)
        build_model(s, build_landscape(s, stochastic=s.growth.stochastic))
    return [str(w.message) for w in caught if issubclass(w.category, ScenarioWarning)]


def polygons(path, boxes: dict[str, tuple[float, float, float, float]]):
    gpd.GeoDataFrame({"name": list(boxes)}, geometry=[box(*b) for b in boxes.values()],
                     crs=UTM).to_file(path)
    return path.name


# the conftest grid: 40 rows x 60 columns of 30 m from (500000, 4000000); habitat blocks in
# rows 5-19 x columns 5-24 and rows 22-35 x columns 35-54
BLOCK = (500_150.0, 3_999_400.0, 500_750.0, 3_999_850.0)
MATRIX = (501_200.0, 3_999_850.0, 501_500.0, 3_999_950.0)  # rows 1-4, columns 40-49: no habitat
FAR = (600_000.0, 4_100_000.0, 601_000.0, 4_101_000.0)


def test_no_warning_for_a_plain_scenario(make_scenario):
    assert warned(make_scenario(text())) == []


def test_few_individuals_per_cell_warned_with_the_cell_figure(make_scenario):
    """Mean capacity of habitat cells = capacity_per_ha x cell area (0.09 ha for 30 m cells)
    x mean suitability of the cells at or above the threshold (common practice: K per cell is
    a density times an area)."""
    lines = warned(make_scenario(text(capacity=30.0)))
    s = suitability_array()
    habitat = s[(s >= 0.3)]
    expected = 30.0 * 0.09 * habitat.mean()
    assert expected < FEW_PER_CELL
    assert len(lines) == 1
    line = lines[0]
    assert "[habitat] capacity_per_ha = 30" in line
    assert f"{expected:.3g} individuals each" in line
    assert "per hectare" in line and "a cell here is 0.09 ha" in line
    assert "\n" not in line


def test_few_individuals_per_cell_not_warned_when_deterministic_or_enough(make_scenario):
    assert warned(make_scenario(text(capacity=30.0, stochastic="false"))) == []
    assert warned(make_scenario(text(capacity=80.0))) == []  # about 5.6 per cell


def test_population_starting_below_the_threshold(make_scenario):
    lines = warned(make_scenario(text(threshold=1e6)))
    assert len(lines) == 1
    assert "[risk] quasi_extinction = 1e+06" in lines[0]
    assert "risk is 1 from year 0" in lines[0]


def test_focus_area_starting_below_the_threshold(make_scenario, tmp_path):
    name = polygons(tmp_path / "focus.gpkg", {"block": BLOCK, "fen": MATRIX})
    lines = warned(make_scenario(text(threshold=50.0, risk=f'focus_areas = "{name}"')))
    assert len(lines) == 1
    assert "focus area 'fen' (0 individuals) starts below it" in lines[0]
    assert "'block'" not in lines[0]
    assert "colonisation" in lines[0]


def test_focus_areas_above_the_threshold_not_warned(make_scenario, tmp_path):
    name = polygons(tmp_path / "focus.gpkg", {"block": BLOCK})
    assert warned(make_scenario(text(threshold=50.0, risk=f'focus_areas = "{name}"'))) == []


@pytest.mark.parametrize("where_, expect", [(FAR, True), (BLOCK, False)])
def test_action_area_off_the_grid(make_scenario, tmp_path, where_, expect):
    name = polygons(tmp_path / "reserve.gpkg", {"r": where_})
    lines = warned(make_scenario(text(extra=f'\n[[action]]\nkind = "reserve"\n'
                                              f'area = "{name}"\n')))
    if expect:
        assert len(lines) == 1
        assert "[action #1 (reserve)] area" in lines[0]
        assert "does not intersect the grid" in lines[0]
    else:
        assert lines == []


@pytest.mark.parametrize("dispersal, expect", [
    (KERNEL + "\nwalk_length = 80\nheading_bias = 1.0", "walk_length, heading_bias: have no "
     "effect with method = 'kernel'"),
    (WALK + '\nedge = "reflecting"', "edge: has no effect with method = 'walk'"),
    (KERNEL + "\nwalk_length = 60", None),  # the default value changes nothing
    (WALK + "\nwalk_length = 80", None),
])
def test_keys_of_the_other_dispersal_method(make_scenario, dispersal, expect):
    lines = warned(make_scenario(text(dispersal=dispersal)))
    if expect is None:
        assert lines == []
    else:
        assert len(lines) == 1 and "[dispersal] " + expect in lines[0]


@pytest.mark.parametrize("dispersal, expect", [(KERNEL, True), (WALK, False)])
def test_corridor_resistance_with_the_kernel(make_scenario, tmp_path, dispersal, expect):
    name = polygons(tmp_path / "corridor.gpkg", {"c": BLOCK})
    lines = warned(make_scenario(text(dispersal=dispersal, extra=(
        f'\n[[action]]\nkind = "corridor"\narea = "{name}"\ntarget_suitability = 0.8\n'
        'resistance_multiplier = 0.5\n'))))
    assert lines == ([
        f"{tmp_path / 'scenario.toml'}: [action #1 (corridor)] resistance_multiplier = 0.5 has "
        "no effect with [dispersal] method = 'kernel': only the walk crosses a resistance "
        "surface."] if expect else [])


def test_check_and_run_print_each_warning_on_one_line(make_scenario, tmp_path, capsys):
    path = make_scenario(text(capacity=30.0, dispersal=KERNEL + "\nwalk_length = 80"))
    assert main(["check", str(path)]) == 0
    out, err = capsys.readouterr()
    lines = [x for x in err.splitlines() if x.startswith("gridpop: warning: ")]
    assert len(lines) == 2
    assert any("capacity_per_ha" in x for x in lines) and any("walk_length" in x for x in lines)
    assert "walk_length" not in out and "80 steps" not in out  # not shown as if it applied
    assert main(["run", str(path), "--out", str(tmp_path / "res"), "--quiet",
                 "--no-plots"]) == 0
    err = capsys.readouterr().err
    assert [x for x in err.splitlines() if x.startswith("gridpop: warning: ")] == lines


@pytest.mark.parametrize("scale, hint", [(100.0, True), (250.0, False)])
def test_percent_suitability_gets_a_hint(make_raster, tmp_path, scale, hint):
    s = suitability_array()
    s = np.where(s >= 0, s * scale, s)
    make_raster("pct.tif", s)
    path = tmp_path / "pct.toml"
    path.write_text(text().format(suitability="pct.tif"))
    scenario = load_scenario(path)
    with pytest.raises(InputDataError) as err:
        build_landscape(scenario, stochastic=True)
    assert "values must lie in 0..1" in str(err.value)
    assert ("divide the raster by 100" in str(err.value)) == hint


def test_a_warning_repeated_for_every_plan_of_a_comparison_is_printed_once(make_scenario,
                                                                           tmp_path, capsys):
    """Plans that share a base share its warnings: the first plan's line says it in full, the
    others point to it, one short line each (common practice: say a thing once)."""
    body = text(capacity=30.0)
    a, b = make_scenario(body, "a.toml"), make_scenario(body, "b.toml")
    assert main(["compare", str(a), str(b), "--out", str(tmp_path / "cmp"), "--quiet",
                 "--no-plots", "--replicates", "2", "--years", "2"]) == 0
    lines = [x for x in capsys.readouterr().err.splitlines()
             if x.startswith("gridpop: warning: ")]
    assert len(lines) == 2 and "capacity_per_ha" in lines[0] and str(a) in lines[0]
    assert lines[1] == f"gridpop: warning: {b}: the same as for a.toml above."


def test_scenario_warning_names_its_file_and_survives_pickling():
    """A warning keeps its file and its text apart (the command line compares the texts of
    plans) and crosses to a Dask worker and back whole (common practice: exceptions pickle)."""
    w = pickle.loads(pickle.dumps(ScenarioWarning("/plans/a.toml", "[growth] rate = 3")))
    assert (w.file, w.detail, str(w)) == ("/plans/a.toml", "[growth] rate = 3",
                                          "/plans/a.toml: [growth] rate = 3")

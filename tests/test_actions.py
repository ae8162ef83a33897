"""Management actions: areas, suitability and capacity changes, schedules, notes, bad input."""

from __future__ import annotations

import re
import tomllib

import geopandas as gpd
import numpy as np
import pytest
import shapely
from conftest import UTM, write_raster

from gridpop import actions as actions_module
from gridpop.actions import apply_actions
from gridpop.config import (
    ARRAY_SECTIONS,
    REQUIRED,
    load_scenario,
    reference_markdown,
    template_toml,
)
from gridpop.config.load import parse_tables
from gridpop.errors import ScenarioError
from gridpop.landscape import build_landscape, capacity

X0, Y0 = 500_000.0, 4_000_000.0  # top-left corner of the conftest raster, UTM 33N, 30 m cells
CELL = 30.0
BASE = """
[run]
years = {years}
replicates = 1
[habitat]
suitability = "{{suitability}}"
capacity_per_ha = 2.0
response = "threshold"
threshold = 0.5
[growth]
rate = 0.2
"""


def at(col, row):
    """Map coordinates of the centre of a cell of the conftest raster."""
    return X0 + (col + 0.5) * CELL, Y0 - (row + 0.5) * CELL


def cells_box(c0, r0, c1, r1):
    """Polygon covering the cells c0..c1-1 x r0..r1-1."""
    return shapely.box(X0 + c0 * CELL, Y0 - r1 * CELL, X0 + c1 * CELL, Y0 - r0 * CELL)


def vector(tmp_path, name, *geoms, crs=UTM):
    gdf = gpd.GeoDataFrame(geometry=list(geoms), crs=UTM)
    path = tmp_path / name
    gdf.to_crs(crs).to_file(path)
    return path.name


def setup(make_scenario, tables, years=20):
    """(base landscape, actions) of the conftest landscape (two blocks: patches 1 and 2)."""
    scenario = load_scenario(make_scenario(BASE.format(years=years) + tables))
    base = build_landscape(scenario, stochastic=True)
    return scenario, base, apply_actions(scenario, base)


def k_of(s):
    """Capacity of the BASE habitat settings (gridpop.landscape.capacity)."""
    k = capacity(s, capacity_per_ha=2.0, cell_area_ha=0.09, response="threshold",
                 threshold=0.5, exponent=2.0)
    return np.where(np.isfinite(s), k, 0.0)


def test_no_actions_keeps_the_base_landscape(make_scenario):
    _, base, actions = setup(make_scenario, "")
    assert actions.landscape is base and actions.notes == ()
    assert actions.capacity_for_year(7) is base.capacity
    assert (actions.barrier, actions.resistance_factor, actions.ignition_multiplier,
            actions.spread_multiplier) == (None, None, None, None)


def test_corridor_buffer_area_matches_shapely(make_scenario, tmp_path):
    """A line buffered by 45 m and rasterised (cell centres covered) has the area of the shapely
    buffer (GEOS as the reference) within one ring of cells along its boundary."""
    line = shapely.LineString([at(22, 12), at(30, 20), at(40, 27)])
    name = vector(tmp_path, "corridor.gpkg", line)
    tables = f"""
    [[action]]
    kind = "corridor"
    area = "{name}"
    buffer_m = 45.0
    target_suitability = 0.7
    """
    _, _, actions = setup(make_scenario, tables)
    poly = line.buffer(45.0)
    area = actions.areas[0].sum() * CELL * CELL
    assert abs(area - poly.area) <= poly.length * CELL


def test_corridor_raises_suitability_joins_patches_and_eases_movement(make_scenario, tmp_path):
    """Corridor cells get max(suitability, target); capacity follows the [habitat] response; the
    two blocks become one patch; resistance is multiplied along it; the note gives the cells,
    hectares and the exact change in total capacity."""
    name = vector(tmp_path, "c.gpkg", shapely.LineString([at(22, 12), at(40, 27)]))
    tables = f"""
    [[action]]
    kind = "corridor"
    area = "{name}"
    buffer_m = 40.0
    target_suitability = 0.7
    resistance_multiplier = 0.3
    """
    _, base, actions = setup(make_scenario, tables)
    cells = actions.areas[0]
    s0 = base.suitability
    expected = np.where(cells & base.mask, np.maximum(s0, 0.7), s0)
    np.testing.assert_array_equal(actions.landscape.suitability, expected)
    np.testing.assert_allclose(actions.landscape.capacity, k_of(expected), rtol=1e-12)
    assert base.patches.n == 2 and actions.landscape.patches.n == 1
    np.testing.assert_array_equal(actions.resistance_factor, np.where(cells, 0.3, 1.0))
    (note,) = actions.notes
    n = int(cells.sum())
    change = k_of(expected).sum() - base.capacity.sum()
    assert f"{n} cells ({n * 0.09:.6g} ha)" in note
    assert f"({change:+.6g})" in note and "dispersal resistance x0.3" in note


def test_reserve_multiplier_and_habitat_loss_exemption(make_scenario, tmp_path):
    """A reserve multiplies capacity and is exempt from a later habitat loss over the whole
    grid (a raster area), which takes effect from its start year; the note counts the exempt
    cells."""
    write_raster(tmp_path / "everywhere.tif", np.ones((40, 60)))
    reserve = vector(tmp_path, "reserve.gpkg", cells_box(5, 5, 25, 20))
    tables = f"""
    [[action]]
    kind = "habitat_loss"
    area = "everywhere.tif"
    start_year = 5
    [[action]]
    kind = "reserve"
    area = "{reserve}"
    capacity_multiplier = 1.5
    """
    _, base, actions = setup(make_scenario, tables)
    inside = np.zeros((40, 60), bool)
    inside[5:20, 5:25] = True
    k = base.capacity
    np.testing.assert_allclose(actions.capacity_for_year(4), np.where(inside, 1.5 * k, k))
    np.testing.assert_allclose(actions.capacity_for_year(5), np.where(inside, 1.5 * k, 0.0))
    assert actions.capacity_for_year(9) is actions.capacity_for_year(5)
    np.testing.assert_allclose(actions.landscape.capacity, actions.capacity_for_year(0))
    assert actions.landscape.patches.n == 2  # block 2 is habitat until year 5
    assert f"{int((inside & base.mask).sum())} cells inside reserves exempt" in actions.notes[0]


def restoration(tmp_path) -> str:
    """A restoration of the gap between the blocks from year 3 over 4 years."""
    area = vector(tmp_path, "r.gpkg", cells_box(25, 10, 35, 30))
    return f"""
    [[action]]
    kind = "restoration"
    area = "{area}"
    target_suitability = 0.9
    start_year = 3
    ramp_years = 4
    """


def test_restoration_ramp(make_scenario, tmp_path):
    """Restoration from year 3 over 4 years: year 3 + i has min(1, (i + 1)/4) of the change
    (documented convention); restored cells belong to a patch from year 0; years in which no
    schedule moves reuse one array."""
    tables = restoration(tmp_path)
    _, base, actions = setup(make_scenario, tables)
    cells = actions.areas[0] & base.mask
    s0 = base.suitability
    for year in range(10):
        f = min(1.0, max(0.0, (year - 3 + 1) / 4))
        s = np.where(cells, s0 + f * np.maximum(0.9 - s0, 0.0), s0)
        np.testing.assert_allclose(actions.capacity_for_year(year), k_of(s), rtol=1e-12)
    assert actions.capacity_for_year(0) is actions.capacity_for_year(2)
    assert actions.capacity_for_year(8) is actions.capacity_for_year(9)
    first = [actions.capacity_for_year(year) for year in range(10)]
    assert all(actions.capacity_for_year(year) is first[year] for year in range(10))  # kept
    assert actions.capacity_arrays(10) == 5  # before year 3, years 3, 4, 5, from year 6
    assert (actions.landscape.patches.labels[cells] > 0).all()
    assert (actions.landscape.capacity[cells] == 0).all()
    assert actions.landscape.patches.n == 1
    assert "from year 3, in full from year 6" in actions.notes[0]


def test_capacity_beyond_the_kept_arrays_is_computed_again(make_scenario, tmp_path,
                                                            monkeypatch):
    """With room for two capacity arrays, the years of the other states of a ramp give the
    same capacity as with room for all (computed again, the last one reused)."""
    tables = restoration(tmp_path)
    _, _, actions = setup(make_scenario, tables)
    expected = [actions.capacity_for_year(year).copy() for year in range(10)]
    monkeypatch.setattr(actions_module, "CAPACITY_KEPT", 2)
    _, _, actions = setup(make_scenario, tables)
    assert actions.capacity_arrays(10) == 3
    for _ in range(2):
        for year in range(10):
            np.testing.assert_array_equal(actions.capacity_for_year(year), expected[year])
    assert len(actions._kept) == 2


def test_barriers_combine_as_independent_risks(make_scenario, tmp_path):
    """Two crossing barriers with mortality 0.5 each kill 1 - 0.5^2 = 0.75 where they cross
    (independent risks; common practice); barriers do not change capacity."""
    a = vector(tmp_path, "a.gpkg", shapely.LineString([at(30, 0), at(30, 39)]))
    b = vector(tmp_path, "b.gpkg", shapely.LineString([at(0, 21), at(59, 21)]))
    tables = "".join(f"""
    [[action]]
    kind = "barrier"
    area = "{name}"
    crossing_mortality = 0.5
    """ for name in (a, b))
    _, base, actions = setup(make_scenario, tables)
    both = actions.areas[0] & actions.areas[1]
    one = actions.areas[0] ^ actions.areas[1]
    assert both.any() and one.any()
    np.testing.assert_allclose(actions.barrier[both], 0.75)
    np.testing.assert_allclose(actions.barrier[one], 0.5)
    assert (actions.barrier[~(both | one)] == 0).all()
    np.testing.assert_array_equal(actions.landscape.capacity, base.capacity)


def test_overlapping_actions_apply_in_order(make_scenario, tmp_path):
    """Overlapping actions are allowed and act in table order: a corridor then a habitat loss
    leaves the loss's suitability, the reverse the corridor's; the notes say so."""
    area = vector(tmp_path, "o.gpkg", cells_box(26, 10, 34, 30))
    corridor = f'[[action]]\nkind = "corridor"\narea = "{area}"\ntarget_suitability = 0.9\n'
    loss = f'[[action]]\nkind = "habitat_loss"\narea = "{area}"\ntarget_suitability = 0.1\n'
    _, base, first = setup(make_scenario, corridor + loss)
    _, _, second = setup(make_scenario, loss + corridor)
    cells = first.areas[0] & base.mask
    assert (first.landscape.suitability[cells] == 0.1).all()
    assert (second.landscape.suitability[cells] == 0.9).all()
    n = int(first.areas[0].sum())
    assert f"overlaps [action #1 (corridor)] in {n} cells, applied after it" in first.notes[1]
    assert f"overlaps [action #1 (habitat_loss)] in {n} cells" in second.notes[1]


def test_area_outside_grid_warns_with_both_bounds(make_scenario, tmp_path):
    """An area that misses the grid is a warning naming its bounds and the grid's; it has no
    effect."""
    far = vector(tmp_path, "far.gpkg", shapely.box(600_000, 3_000_000, 601_000, 3_001_000))
    tables = f'[[action]]\nkind = "reserve"\narea = "{far}"\ncapacity_multiplier = 2.0\n'
    _, base, actions = setup(make_scenario, tables)
    (note,) = actions.notes
    assert note.startswith("[action #1 (reserve)] far.gpkg: far.gpkg does not intersect the grid")
    assert actions.no_effect == (f"{tmp_path / 'scenario.toml'}: [action #1 (reserve)] area: "
                                 f"{note.split(': ', 1)[1]}",)
    area_part, grid_part = note.split("grid bounds")
    numbers = [{float(x) for x in re.findall(r"-?\d+(?:\.\d+)?(?:e[+-]\d+)?", part)}
               for part in (area_part.split("grid CRS")[1], grid_part)]
    assert {600_000, 3_000_000, 601_000, 3_001_000} <= numbers[0]
    assert {X0, Y0 - 40 * CELL, X0 + 60 * CELL, Y0} <= numbers[1]
    np.testing.assert_array_equal(actions.landscape.capacity, base.capacity)
    assert not actions.areas[0].any()


def test_area_in_another_crs_is_reprojected(make_scenario, tmp_path):
    """A reserve polygon stored in EPSG:4326 is reprojected to the grid (pyproj as the
    reference) and the note says so."""
    name = vector(tmp_path, "geo.gpkg", cells_box(5, 5, 25, 20), crs="EPSG:4326")
    tables = f'[[action]]\nkind = "reserve"\narea = "{name}"\ncapacity_multiplier = 2.0\n'
    _, _, actions = setup(make_scenario, tables)
    assert "reprojected from EPSG:4326" in actions.notes[0]
    expected = np.zeros((40, 60), bool)
    expected[5:20, 5:25] = True
    assert (actions.areas[0] != expected).sum() <= 4


def test_unknown_action_kind_lists_known_ones(make_scenario):
    tables = '[[action]]\nkind = "fence"\narea = "{suitability}"\n'
    with pytest.raises(ScenarioError, match=re.escape(
            "kind = 'fence' is not known; known kinds: 'reserve', 'corridor', 'barrier', "
            "'restoration', 'habitat_loss', 'release', 'removal'.")):
        setup(make_scenario, tables)


def test_buffer_with_raster_area_is_refused(make_scenario):
    tables = '[[action]]\nkind = "corridor"\narea = "{suitability}"\nbuffer_m = 10.0\n'
    with pytest.raises(ScenarioError, match="a buffer applies to vector layers"):
        setup(make_scenario, tables)


@pytest.mark.parametrize("section", list(ARRAY_SECTIONS))
def test_template_examples_parse_and_reference_documents_every_key(tmp_path, section):
    """Each commented example of the template, uncommented, is a valid table of its kind; the
    reference documents every key of every kind."""
    text = template_toml()
    doc = reference_markdown()
    _, kinds = ARRAY_SECTIONS[section]
    blocks = text.split(f"# [[{section}]]\n")[1:]
    assert len(blocks) == len(kinds)
    for block, (kind, (_, keys)) in zip(blocks, kinds.items(), strict=True):
        lines = [line[2:] for line in block.split("\n\n")[0].splitlines()]
        table = tomllib.loads("\n".join(lines))
        assert table["kind"] == kind
        required = {k.name for k in keys if k.default is REQUIRED}
        assert set(table) - {"kind"} == required
        for k in keys:
            if k.type in ("path", "pathlist") and k.name in table:
                for p in np.atleast_1d(table[k.name]):
                    (tmp_path / p).touch()
            assert f"| `{k.name}` |" in doc
        if kind == "flood":  # a flood needs zone or terrain; the example's zone is commented
            table["zone"] = ["flood10.gpkg", "flood100.gpkg"]
            for p in table["zone"]:
                (tmp_path / p).touch()
        if kind == "removal":  # a removal needs fraction or count; both are commented
            table["fraction"] = 0.1
        (config,) = parse_tables(tmp_path / "s.toml", section, [table])
        assert config.kind == kind
        assert f'### kind = "{kind}"' in doc


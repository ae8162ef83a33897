"""Tests of gridpop.landscape: grid geometry, alignment, rasterising, capacity, patches, errors."""

from __future__ import annotations

import math
import warnings

import geopandas as gpd
import numpy as np
import pyproj
import pytest
import rasterio
import rasterio.transform
import rasterio.warp
import shapely
from affine import Affine
from conftest import UTM, suitability_array
from scipy import ndimage
from shapely.geometry import LineString, Point, Polygon, box

from gridpop.config import load_scenario
from gridpop.errors import InputDataError, ScenarioError
from gridpop.io.rasters import align_raster, load_grid
from gridpop.io.vectors import rasterize_vector, read_points
from gridpop.landscape import build_landscape, capacity, label_patches

# conftest's default transform comes from rasterio's from_origin, which composes affines with `*`;
# affine 3 marks that as a pending deprecation. gridpop.landscape itself raises no such warning.
pytestmark = pytest.mark.filterwarnings("ignore:Use `@` matmul:PendingDeprecationWarning")

X0, Y0, RES = 500_000.0, 4_000_000.0, 30.0  # the conftest grid: 40 x 60 cells of 30 m in UTM 33N
NY, NX = 40, 60


def _north_up(x0, y0, res):
    return Affine(res, 0.0, x0, 0.0, -res, y0)


SCENARIO = """
[run]
years = 3
replicates = 1
[habitat]
suitability = "{suitability}"
capacity_per_ha = {capacity}
response = "{response}"
[growth]
rate = 0.3
[initial]
{initial}
"""


def _scenario(make_scenario, initial="fraction_of_capacity = 0.5", response="linear",
              suitability="{suitability}", extra="", capacity=2.0):
    body = SCENARIO.replace("{initial}", initial).replace("{response}", response)
    body = body.replace("{capacity}", repr(capacity))
    body = body.replace('"{suitability}"', f'"{suitability}"') + extra
    return load_scenario(make_scenario(body))


@pytest.fixture
def grid(make_raster):
    """The 40 x 60 grid of 30 m cells in UTM 33N used by the conftest rasters."""
    return load_grid(make_raster("template.tif", np.zeros((NY, NX))), file="s.toml",
                     key="template")


def _write_vector(path, geoms, crs=UTM, **columns):
    frame = gpd.GeoDataFrame(columns, geometry=gpd.GeoSeries(geoms, crs=crs), crs=crs)
    with warnings.catch_warnings():  # a layer without CRS is written on purpose in some tests
        warnings.simplefilter("ignore", UserWarning)
        frame.to_file(path)
    return path


def _cell_centres(grid):
    rows, cols = np.mgrid[0:grid.shape[0], 0:grid.shape[1]]
    xs, ys = rasterio.transform.xy(grid.transform, rows.ravel(), cols.ravel())
    return np.reshape(xs, grid.shape), np.reshape(ys, grid.shape)


# --- grid geometry -------------------------------------------------------------------------------


def test_grid_geometry_matches_gdal_transform_and_geodesic_area(make_raster, tmp_path):
    """Bounds and cell centres follow GDAL's affine geotransform, evaluated by rasterio's
    ``array_bounds`` and ``xy``; pyproj's axis info says UTM 33N is in metres; 30 m cells are
    0.09 ha (common practice). The geodesic area of one cell (pyproj.Geod on WGS 84, Karney 2013,
    J. Geodesy 87:43) equals the planar area divided by k0^2, k0 = 0.9996 the UTM scale factor on
    the central meridian (Snyder 1987, Map Projections - A Working Manual, USGS PP 1395, from
    memory)."""
    path = make_raster("t.tif", np.zeros((NY, NX)))
    grid = load_grid(path, file="s.toml", key="template")
    with rasterio.open(path) as src:
        assert grid.shape == (src.height, src.width) == (NY, NX)
        assert grid.bounds == pytest.approx(rasterio.transform.array_bounds(NY, NX, src.transform))
        x, y = rasterio.transform.xy(src.transform, NY - 1, NX - 1)
    assert (x, y) == pytest.approx((grid.bounds[2] - grid.cell_width_m / 2,
                                    grid.bounds[1] + grid.cell_height_m / 2))
    assert pyproj.CRS(UTM).axis_info[0].unit_name == "metre"
    assert grid.n_cells == 2400
    assert grid.cell_area_ha == pytest.approx(0.09, rel=1e-12)

    to_lonlat = pyproj.Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
    lon, lat = to_lonlat.transform([X0, X0 + RES, X0 + RES, X0], [Y0, Y0, Y0 - RES, Y0 - RES])
    area, _ = pyproj.Geod(ellps="WGS84").polygon_area_perimeter(lon, lat)
    assert abs(area) == pytest.approx(grid.cell_area_ha * 1e4 / 0.9996**2, rel=1e-6)

    # the profile writes a raster that reads back as the same grid
    with rasterio.open(tmp_path / "copy.tif", "w", **grid.profile(), count=1,
                       dtype="uint8") as dst:
        dst.write(np.zeros((1, NY, NX), dtype="uint8"))
    assert load_grid(tmp_path / "copy.tif", file="s.toml", key="template") == grid


def test_cell_size_in_feet_is_converted_to_metres(make_raster):
    """EPSG:2227 (NAD83 / California zone 3) is in US survey feet of 1200/3937 m (US Metric Law
    of 1866 and the Mendenhall Order of 1893, common practice); pyproj's axis info gives the same
    factor. A 100 ft cell is 30.4800609601 m wide."""
    path = make_raster("ft.tif", np.zeros((4, 5)), crs="EPSG:2227",
                       transform=_north_up(6_000_000.0, 2_100_000.0, 100.0))
    grid = load_grid(path, file="s.toml", key="template")
    factor = pyproj.CRS("EPSG:2227").axis_info[0].unit_conversion_factor
    assert factor == pytest.approx(1200 / 3937, rel=1e-12)
    assert grid.cell_width_m == pytest.approx(100 * 1200 / 3937, rel=1e-12)
    assert grid.cell_area_ha == pytest.approx((100 * 1200 / 3937) ** 2 / 1e4, rel=1e-12)


# --- raster alignment ----------------------------------------------------------------------------


def _template_over(make_raster, src_crs, src_transform, shape, dst_crs, res=RES):
    """A template in dst_crs covering the footprint of a source raster, with res-sized cells."""
    bounds = rasterio.transform.array_bounds(*shape, src_transform)
    left, bottom, right, top = rasterio.warp.transform_bounds(src_crs, dst_crs, *bounds)
    left, top = math.floor(left / res) * res - res, math.ceil(top / res) * res + res
    nx, ny = math.ceil((right - left) / res) + 1, math.ceil((top - bottom) / res) + 1
    path = make_raster("template.tif", np.zeros((ny, nx)), crs=dst_crs,
                       transform=_north_up(left, top, res))
    return load_grid(path, file="s.toml", key="template")


@pytest.mark.parametrize("kind", ["count", "continuous"])
@pytest.mark.parametrize("src_crs, dst_crs, src_transform", [
    (UTM, "EPSG:3035", _north_up(X0, Y0, RES)),
    (UTM, "EPSG:32634", _north_up(X0, Y0, RES)),
    ("EPSG:4326", UTM, _north_up(15.0, 36.15, 0.0003)),
])
def test_marked_cell_lands_where_pyproj_puts_it(make_raster, kind, src_crs, dst_crs,
                                                src_transform):
    """A single marked cell, aligned onto a template in another CRS, lands within one cell of
    where pyproj.Transformer (PROJ, common practice) puts its centre; with the count kind its
    value is kept whole."""
    data = np.zeros((NY, NX))
    data[17, 23] = 1.0
    path = make_raster("marked.tif", data, crs=src_crs, transform=src_transform)
    grid = _template_over(make_raster, src_crs, src_transform, data.shape, dst_crs)
    layer = align_raster(path, grid, kind=kind, file="s.toml", section="habitat",
                         key="suitability")
    assert "resampled from" in layer.note
    w = np.nan_to_num(layer.data)
    xs, ys = _cell_centres(grid)
    centroid = (w * xs).sum() / w.sum(), (w * ys).sum() / w.sum()
    sx, sy = rasterio.transform.xy(src_transform, 17, 23)
    px, py = pyproj.Transformer.from_crs(src_crs, dst_crs, always_xy=True).transform(sx, sy)
    assert math.hypot(centroid[0] - px, centroid[1] - py) < grid.cell_width_m
    if kind == "count":
        assert w.sum() == pytest.approx(1.0, rel=1e-9)


@pytest.mark.parametrize("case", ["down 10 m to 30 m", "up 90 m to 30 m", "from EPSG:3035"])
def test_count_resampling_preserves_totals(make_raster, grid, case):
    """Sum resampling weights each source cell by its overlap with the target cells, so the
    total of a source lying inside the grid is kept (gdalwarp -r sum, GDAL documentation, common
    practice)."""
    rng = np.random.default_rng(3)
    if case == "down 10 m to 30 m":
        crs, transform, shape = UTM, _north_up(X0, Y0, 10.0), (120, 180)
    elif case == "up 90 m to 30 m":
        crs, transform, shape = UTM, _north_up(X0 + 15.0, Y0 - 15.0, 90.0), (13, 19)
    else:
        cx, cy = pyproj.Transformer.from_crs(UTM, "EPSG:3035", always_xy=True).transform(
            X0 + 900.0, Y0 - 600.0)
        crs, transform, shape = "EPSG:3035", _north_up(cx - 300.0, cy + 300.0, 30.0), (20, 20)
    counts = rng.poisson(4.0, shape).astype(float)
    path = make_raster("counts.tif", counts, crs=crs, transform=transform)
    layer = align_raster(path, grid, kind="count", file="s.toml", section="initial",
                         key="raster")
    assert np.nansum(layer.data) == pytest.approx(counts.sum(), rel=1e-9)
    assert "with sum" in layer.note


def test_average_and_mode_match_block_statistics(make_raster, tmp_path):
    """On a template of 30 m cells over a 10 m source, each target cell holds the mean
    (continuous) or the majority class (categorical) of its 3 x 3 source cells, as computed with
    numpy (gdalwarp -r average / -r mode, GDAL documentation, common practice)."""
    rng = np.random.default_rng(5)
    values = rng.random((120, 180))
    classes = rng.integers(1, 3, (120, 180)).astype(float)  # two classes: a 9-cell block never ties
    t10 = _north_up(X0, Y0, 10.0)
    grid = load_grid(make_raster("template.tif", np.zeros((NY, NX))), file="s.toml",
                     key="template")
    avg = align_raster(make_raster("v.tif", values, transform=t10, dtype="float64"), grid,
                       kind="continuous", file="s.toml", section="habitat", key="suitability")
    mode = align_raster(make_raster("c.tif", classes, transform=t10), grid, kind="categorical",
                        file="s.toml", section="habitat", key="suitability")
    blocks = values.reshape(NY, 3, NX, 3).mean(axis=(1, 3))
    majority = np.where((classes == 2).reshape(NY, 3, NX, 3).sum(axis=(1, 3)) >= 5, 2.0, 1.0)
    np.testing.assert_allclose(avg.data, blocks, rtol=1e-12)
    np.testing.assert_array_equal(mode.data, majority)
    assert "average" in avg.note and "mode" in mode.note


def test_bilinear_reproduces_a_plane(make_raster, grid):
    """Bilinear interpolation reproduces a linear function exactly (a textbook property of
    bilinear interpolation, common practice): a plane sampled at 30 m and shifted by 10 m
    reads back as the plane at the template's cell centres."""
    src_t = _north_up(X0 - 10.0, Y0 + 10.0, RES)
    rows, cols = np.mgrid[0:NY + 2, 0:NX + 2]
    xs, ys = rasterio.transform.xy(src_t, rows.ravel(), cols.ravel())
    plane = (0.2 + 1e-4 * (np.asarray(xs) - X0) + 3e-4 * (np.asarray(ys) - Y0 + 1200.0))
    path = make_raster("plane.tif", plane.reshape(NY + 2, NX + 2), transform=src_t,
                       dtype="float64")
    layer = align_raster(path, grid, kind="continuous", file="s.toml", section="habitat",
                         key="suitability")
    gx, gy = _cell_centres(grid)
    expected = 0.2 + 1e-4 * (gx - X0) + 3e-4 * (gy - Y0 + 1200.0)
    assert "bilinear" in layer.note
    np.testing.assert_allclose(layer.data[1:-1, 1:-1], expected[1:-1, 1:-1], rtol=0, atol=1e-9)


def test_nodata_and_nan_become_nan_never_zero(make_raster, grid):
    """Source nodata (-9999) and NaN cells are NaN after alignment on the same grid and after
    averaging onto a 60 m grid (GDAL excludes nodata from averages, common practice): no zero or
    -9999 leaks into the valid values."""
    s = suitability_array()
    s[30:34, 2:6] = np.nan
    path = make_raster("s.tif", s)
    same = align_raster(path, grid, kind="continuous", file="s.toml", section="habitat",
                        key="suitability")
    invalid = (s == -9999.0) | np.isnan(s)
    np.testing.assert_array_equal(np.isnan(same.data), invalid)
    assert "read as is" in same.note

    coarse = load_grid(make_raster("t60.tif", np.zeros((NY // 2, NX // 2)),
                                   transform=_north_up(X0, Y0, 60.0)), file="s.toml",
                       key="template")
    avg = align_raster(path, coarse, kind="continuous", file="s.toml", section="habitat",
                       key="suitability")
    blocks_invalid = invalid.reshape(NY // 2, 2, NX // 2, 2).all(axis=(1, 3))
    np.testing.assert_array_equal(np.isnan(avg.data), blocks_invalid)
    valid = avg.data[~blocks_invalid]
    assert valid.min() >= s[~invalid].min() - 1e-12 and valid.max() <= s[~invalid].max() + 1e-12


# --- vectors -------------------------------------------------------------------------------------

POLYGONS = {
    "disc": Point(X0 + 900.0, Y0 - 600.0).buffer(450.0),
    "quadrilateral": Polygon([(X0 + 103.7, Y0 - 96.1), (X0 + 1502.3, Y0 - 301.9),
                              (X0 + 1197.2, Y0 - 1103.3), (X0 + 301.1, Y0 - 797.6)]),
}


@pytest.mark.parametrize("crs", [UTM, "EPSG:4326"])
@pytest.mark.parametrize("name", list(POLYGONS))
def test_rasterised_polygon_area(tmp_path, grid, name, crs):
    """Burned cells are the cells whose centre the polygon contains (shapely.contains_xy, GEOS),
    so their area matches the shapely area within one ring of cells (perimeter x cell size,
    common practice). With all_touched the cells cover the polygon and lie within its buffer by
    one cell diagonal, so their area is between the two shapely areas."""
    poly = POLYGONS[name]
    geom = gpd.GeoSeries([poly], crs=UTM).to_crs(crs)
    path = _write_vector(tmp_path / "p.gpkg", list(geom), crs=crs)
    poly = gpd.GeoSeries(geom, crs=crs).to_crs(UTM).iloc[0]  # what the grid sees after the trip
    mask, note = rasterize_vector(path, grid, file="s.toml", section="actions", key="area")
    assert mask.dtype == np.uint8
    cell = grid.cell_width_m * grid.cell_height_m
    assert abs(mask.sum() * cell - poly.area) <= poly.length * grid.cell_width_m
    xs, ys = _cell_centres(grid)
    np.testing.assert_array_equal(mask == 1, shapely.contains_xy(poly, xs, ys))
    touched, _ = rasterize_vector(path, grid, file="s.toml", section="actions", key="area",
                                  all_touched=True)
    assert poly.area <= touched.sum() * cell <= poly.buffer(grid.cell_width_m * 2**0.5).area
    assert ("reprojected from EPSG:4326" in note) == (crs == "EPSG:4326")


def test_buffered_line_and_attribute_values(tmp_path, grid):
    """A line buffered by b covers 2 b L + pi b^2 (Steiner's formula for the parallel set of a
    segment, common practice; here the shapely buffer area) within one ring of cells; burned
    attribute values sit where shapely.contains_xy puts each polygon, NaN elsewhere."""
    line = LineString([(X0 + 200, Y0 - 300), (X0 + 1400, Y0 - 900)])
    path = _write_vector(tmp_path / "line.gpkg", [line])
    mask, note = rasterize_vector(path, grid, file="s.toml", section="actions", key="road",
                                  buffer_m=45.0)
    band = line.buffer(45.0)
    assert band.area == pytest.approx(2 * 45.0 * line.length + math.pi * 45.0**2, rel=1e-3)
    assert abs(mask.sum() * 900.0 - band.area) <= band.length * 30.0
    assert "buffered by 45 m" in note

    a, b = box(X0 + 100, Y0 - 700, X0 + 610, Y0 - 95), box(X0 + 905, Y0 - 1000, X0 + 1700, Y0 - 420)
    path = _write_vector(tmp_path / "zones.gpkg", [a, b], level=[2.5, 7.0])
    values, _ = rasterize_vector(path, grid, file="s.toml", section="actions", key="zones",
                                 attribute="level")
    xs, ys = _cell_centres(grid)
    expected = np.where(shapely.contains_xy(a, xs, ys), 2.5,
                        np.where(shapely.contains_xy(b, xs, ys), 7.0, np.nan))
    np.testing.assert_array_equal(values, expected)


def test_read_points_counts_per_cell(tmp_path, grid):
    """Points are counted in the cell that contains them (cell index = floor of the inverse
    geotransform, GDAL convention, common practice); two points in one cell add up; points given
    in EPSG:4326 are reprojected first."""
    pts = [Point(X0 + 45, Y0 - 15), Point(X0 + 50, Y0 - 20), Point(X0 + 1795, Y0 - 1195)]
    lonlat = gpd.GeoSeries(pts, crs=UTM).to_crs("EPSG:4326")
    path = _write_vector(tmp_path / "p.gpkg", list(lonlat), crs="EPSG:4326", n=[3, 4, 10])
    counts = read_points(path, grid, count_field="n", file="s.toml", section="initial",
                         key="points")
    assert counts.dtype == np.float64
    assert counts[0, 1] == 7 and counts[NY - 1, NX - 1] == 10 and counts.sum() == 17


# --- capacity and patches ------------------------------------------------------------------------


@pytest.mark.parametrize("response", ["linear", "threshold", "power"])
def test_capacity_per_response(response):
    """K = capacity_per_ha x cell area x f(s) with f the response of the scenario schema
    (linear s; threshold s for s >= t else 0; power s^e): closed forms evaluated here."""
    s = np.array([[0.0, 0.2, 0.5, 0.7], [0.9, 1.0, np.nan, 0.49]])
    k = capacity(s, capacity_per_ha=2.0, cell_area_ha=0.09, response=response, threshold=0.5,
                 exponent=3.0)
    f = {"linear": s, "power": s**3.0,
         "threshold": np.array([[0, 0, 0.5, 0.7], [0.9, 1.0, np.nan, 0]])}[response]
    np.testing.assert_allclose(k, 2.0 * 0.09 * f, rtol=1e-15)
    assert np.isnan(k[1, 2]) and k.dtype == np.float64


def test_capacity_refuses_bad_arguments():
    """Unknown responses and negative capacities are refused with the value and what is allowed
    (scenario schema)."""
    s = np.ones((2, 2))
    with pytest.raises(ScenarioError, match="linear, threshold, power"):
        capacity(s, capacity_per_ha=1.0, cell_area_ha=1.0, response="step", threshold=0.5,
                 exponent=2.0)
    with pytest.raises(ScenarioError, match=r"capacity_per_ha = -1\.0"):
        capacity(s, capacity_per_ha=-1.0, cell_area_ha=1.0, response="linear", threshold=0.5,
                 exponent=2.0)


def test_patches_match_scipy_label_with_8_connectivity():
    """Patches are the 8-connected components of K > 0 found by scipy.ndimage.label with a 3 x 3
    structure (Rosenfeld and Pfaltz 1966, J. ACM 13:471, from memory); areas and capacities are
    the component sums (scipy.ndimage.sum_labels); numbering follows decreasing capacity."""
    rng = np.random.default_rng(11)
    k = np.where(rng.random((NY, NX)) > 0.6, rng.random((NY, NX)), 0.0)
    k[rng.random((NY, NX)) > 0.95] = np.nan
    p = label_patches(k, 0.09)
    ref, n = ndimage.label(np.nan_to_num(k) > 0, structure=np.ones((3, 3)))
    assert p.n == n > 1 and p.labels.dtype == np.int32
    pairs = {(int(a), int(b)) for a, b in zip(ref.ravel(), p.labels.ravel(), strict=True)}
    assert len(pairs) == n + 1 and {a for a, _ in pairs} == set(range(n + 1))  # a bijection
    mapping = dict(pairs)
    ref_cap = ndimage.sum_labels(np.nan_to_num(k), ref, index=np.arange(1, n + 1))
    ref_cells = ndimage.sum_labels(np.ones_like(k), ref, index=np.arange(1, n + 1))
    new = np.array([mapping[i] for i in range(1, n + 1)])
    np.testing.assert_allclose(p.capacity[new], ref_cap, rtol=1e-12)
    np.testing.assert_allclose(p.area_ha[new], ref_cells * 0.09, rtol=1e-12)
    assert np.all(np.diff(p.capacity[1:]) <= 0) and p.capacity[0] == p.area_ha[0] == 0

    diagonal = np.zeros((3, 3))
    diagonal[0, 0] = diagonal[1, 1] = 1.0
    assert label_patches(diagonal, 1.0).n == 1 and ndimage.label(diagonal)[1] == 2


# --- the whole landscape -------------------------------------------------------------------------


def _read(path):
    with rasterio.open(path) as src:
        return src.read(1, masked=True).astype(float).filled(np.nan)


def test_build_landscape_threshold_patches_and_initial(make_scenario, tmp_path):
    """With the threshold response the conftest landscape has two habitat blocks of 15 x 20 and
    14 x 20 cells of 0.09 ha (27 and 25.2 ha; hand count); patch capacities are the sums of
    50 x 0.09 x s over each block read back with rasterio; year 0 holds rint(0.5 K) in stochastic
    mode and exactly 0.5 K otherwise, 0 outside."""
    sc = _scenario(make_scenario, response="threshold", capacity=50.0)
    det = build_landscape(sc, stochastic=False)
    sto = build_landscape(sc, stochastic=True)
    s = _read(tmp_path / "suitability.tif")
    np.testing.assert_array_equal(det.mask, np.isfinite(s))
    assert np.isnan(det.suitability[~det.mask]).all() and (det.capacity[~det.mask] == 0).all()
    assert det.patches.n == 2
    blocks = [(slice(5, 20), slice(5, 25)), (slice(22, 36), slice(35, 55))]
    caps = [50.0 * 0.09 * s[b].sum() for b in blocks]
    order = np.argsort(caps)[::-1]
    np.testing.assert_allclose(det.patches.area_ha[1:], np.array([27.0, 25.2])[order])
    np.testing.assert_allclose(det.patches.capacity[1:], np.array(caps)[order], rtol=1e-12)
    np.testing.assert_allclose(det.initial, 0.5 * det.capacity, rtol=1e-15)
    np.testing.assert_array_equal(sto.initial, np.rint(0.5 * sto.capacity))
    assert sto.initial.sum() > 500 and not np.array_equal(sto.initial, det.initial)
    assert det.initial.flags.c_contiguous and det.initial.dtype == np.float64
    assert "read as is" in det.notes[1] and "2 patches" in det.notes[2]


def test_build_landscape_drops_individuals_outside_habitat(make_scenario, make_raster, tmp_path):
    """An initial raster of 3 individuals per cell keeps 3 in each habitat cell (s >= 0.5, counted
    with numpy) and drops the rest, outside the study area or with K = 0; the note says how
    many."""
    make_raster("counts.tif", np.full((NY, NX), 3.0))
    sc = _scenario(make_scenario, initial='raster = "counts.tif"', response="threshold")
    land = build_landscape(sc, stochastic=True)
    s = suitability_array()
    habitat = (s >= 0.5)
    np.testing.assert_array_equal(land.initial, np.where(habitat, 3.0, 0.0))
    dropped = 3 * (NY * NX - habitat.sum())
    assert f"{dropped} individuals in {NY * NX - habitat.sum()} cells" in land.notes[-1]


def test_build_landscape_points_and_coarser_template(make_scenario, make_raster, tmp_path):
    """Release points on a 60 m template: the suitability is averaged (block means of the
    conftest raster, numpy), a point in the nodata corner is dropped and two points in one cell
    add up."""
    make_raster("t60.tif", np.zeros((NY // 2, NX // 2)), transform=_north_up(X0, Y0, 60.0))
    pts = [Point(X0 + 400, Y0 - 400), Point(X0 + 410, Y0 - 410), Point(X0 + 1790, Y0 - 10)]
    _write_vector(tmp_path / "release.gpkg", pts, count=[5, 6, 4])
    sc = _scenario(make_scenario, initial='points = "release.gpkg"',
                   extra='[grid]\ntemplate = "t60.tif"\n')
    land = build_landscape(sc, stochastic=True)
    assert land.grid.shape == (NY // 2, NX // 2) and land.grid.cell_area_ha == pytest.approx(0.36)
    blocks = _read(tmp_path / "suitability.tif").reshape(NY // 2, 2, NX // 2, 2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN blocks outside the study area
        expected = np.nanmean(blocks, axis=(1, 3))
    np.testing.assert_allclose(land.suitability, expected, rtol=1e-12)
    assert land.initial.sum() == 11 and land.initial[6, 6] == 11
    assert "average" in land.notes[1] and "4 individuals in 1 cells" in land.notes[-1]


# --- errors a user can cause ---------------------------------------------------------------------


def _raises(call, file, section, key, path, *fragments):
    with pytest.raises(InputDataError) as info:
        call()
    msg = str(info.value)
    for part in (str(file), f"[{section}] {key}", str(path), *fragments):
        assert part in msg, (part, msg)
    return msg


def test_raster_errors_name_file_key_and_path(make_raster, grid, tmp_path):
    """Missing file, not a raster (a text file called .tif), no CRS, several bands, all nodata
    and no overlap each raise InputDataError naming the scenario file, the key and the raster."""
    f = tmp_path / "s.toml"
    text = tmp_path / "text.tif"
    text.write_text("not a raster")
    nocrs = make_raster("nocrs.tif", np.ones((NY, NX)), crs=None)
    bands = make_raster("bands.tif", np.ones((2, NY, NX)))
    empty = make_raster("empty.tif", np.full((NY, NX), -9999.0))
    far = make_raster("far.tif", np.ones((NY, NX)), transform=_north_up(700_000.0, Y0, RES))
    missing = tmp_path / "missing.tif"
    for path, fragment in [(missing, "not found"), (text, "not a raster"), (nocrs, "no CRS")]:
        _raises(lambda p=path: load_grid(p, file=f, key="template"), f, "grid", "template", path,
                fragment)
    cases = [(missing, ["not found"]), (text, ["not a raster"]), (nocrs, ["no CRS"]),
             (bands, ["2 bands"]), (empty, ["nodata"]),
             (far, ["does not overlap", "left 700000", "left 500000"])]
    for path, fragments in cases:
        _raises(lambda p=path: align_raster(p, grid, kind="continuous", file=f,
                                            section="habitat", key="suitability"),
                f, "habitat", "suitability", path, *fragments)


@pytest.mark.parametrize("lon, lat", [(15.5, 45.5), (-47.9, -15.8)])
def test_geographic_template_is_refused_with_a_utm_zone(make_raster, tmp_path, lon, lat):
    """A template in EPSG:4326 is refused; the message proposes gdalwarp to the UTM zone of the
    raster centre, zone = floor((lon + 180) / 6) + 1, EPSG 326zz north and 327zz south (Snyder
    1987, USGS PP 1395, from memory)."""
    path = make_raster("geo.tif", np.ones((10, 10)), crs="EPSG:4326",
                       transform=_north_up(lon - 0.005, lat + 0.005, 0.001))
    zone = math.floor((lon + 180) / 6) + 1
    code = (32600 if lat >= 0 else 32700) + zone
    _raises(lambda: load_grid(path, file=tmp_path / "s.toml", key="template"), tmp_path / "s.toml",
            "grid", "template", path, "geographic", f"gdalwarp -t_srs EPSG:{code}")


def test_suitability_out_of_range_is_refused(make_scenario, make_raster, tmp_path):
    """Suitability must lie in 0..1; the message gives the min and max found."""
    s = suitability_array()
    s[10, 10], s[30, 40] = -0.2, 1.7
    path = make_raster("bad.tif", s)
    sc = _scenario(make_scenario, suitability="bad.tif")
    _raises(lambda: build_landscape(sc, stochastic=True), sc.path, "habitat", "suitability", path,
            "min -0.2", "max 1.7")


def test_all_nodata_suitability_is_refused(make_scenario, make_raster):
    """A suitability raster with no valid cell is refused through build_landscape."""
    path = make_raster("void.tif", np.full((NY, NX), -9999.0))
    sc = _scenario(make_scenario, suitability="void.tif")
    _raises(lambda: build_landscape(sc, stochastic=True), sc.path, "habitat", "suitability", path,
            "nodata")


def test_vector_errors_name_file_key_and_path(tmp_path, grid):
    """Missing file, unreadable file, no features, no CRS (a Shapefile without .prj), a missing
    count field (the fields are listed), negative counts and points outside the grid (how many,
    their bounds and the grid's) each raise InputDataError naming file, key and path."""
    f = tmp_path / "s.toml"
    text = tmp_path / "text.gpkg"
    text.write_text("not a vector")
    empty = _write_vector(tmp_path / "empty.gpkg", [], n=[])
    nocrs = _write_vector(tmp_path / "nocrs.shp", [Point(X0 + 50, Y0 - 50)], crs=None, n=[2])
    assert not (tmp_path / "nocrs.prj").exists()
    for path, fragment in [(tmp_path / "missing.gpkg", "not found"), (text, "not a vector"),
                           (empty, "no features"), (nocrs, "no CRS")]:
        _raises(lambda p=path: rasterize_vector(p, grid, file=f, section="actions", key="area"),
                f, "actions", "area", path, fragment)
        _raises(lambda p=path: read_points(p, grid, count_field="n", file=f, section="initial",
                                           key="points"), f, "initial", "points", path, fragment)
    inside = [Point(X0 + 50, Y0 - 50), Point(X0 + 500, Y0 - 500), Point(X0 + 900, Y0 - 900)]
    outside = [Point(X0 - 100, Y0 - 50), Point(X0 + 2000, Y0 - 1300)]
    pts = _write_vector(tmp_path / "pts.gpkg", inside + outside, n=[1, 2, 3, 4, 5],
                        name=["a", "b", "c", "d", "e"])
    neg = _write_vector(tmp_path / "neg.gpkg", inside, n=[1, -2, 3])
    for path, field, fragments in [
        (pts, "count", ["'count'", "n, name"]),
        (neg, "n", ["-2.0"]),
        (pts, "n", ["2 of 5 points", "left 499900", "right 502000", "right 501800"]),
    ]:
        _raises(lambda p=path, c=field: read_points(p, grid, count_field=c, file=f,
                                                    section="initial", key="points"),
                f, "initial", "points", path, *fragments)
    far = _write_vector(tmp_path / "far.gpkg", [box(X0 + 5000, Y0, X0 + 6000, Y0 + 1000)])
    _raises(lambda: rasterize_vector(far, grid, file=f, section="actions", key="area"),
            f, "actions", "area", far, "covers a grid cell")


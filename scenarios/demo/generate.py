"""Generate the demo landscape: Brindlemoor Flats, an invented place, and its invented species.

The fen lantern shrew (invented) lives in wet grassland. Brindlemoor Flats is 8 x 6 km of
farmland with two large habitat blocks (the west block, occupied, and the east block, a reserve
the shrew has been lost from), a scatter of small fens, the Sallow Brook winding from the west
block south and back north-east to the east block, and a road running north-south between the
blocks, with a bridge where the brook passes under it. Everything here is made up; the layers are
deterministic (fixed seeds, a fixed date in the GeoPackages), so running this script again
rewrites the same bytes.

Layers written into scenarios/demo/data/ (all on the 160 x 120 grid of 50 m cells, or vectors in
its CRS):

- ``suitability.tif``: habitat suitability 0..1 (nodata: a corner outside the study area);
- ``suitability_dry_40.tif``: the same in year 40 of a drier future (a projection of our own
  invention): the fens shrink to two thirds of their habitat area, the rest is unchanged;
- ``resistance.tif``: resistance to walking dispersers (1 in the best wet grassland, 12 to 15 on
  arable land, 3 on the brook's damp banks, 60 on the road except at the bridge);
- ``fire_hazard.tif``: relative fire hazard of the habitat (drier tussock higher, the brook's
  wet banks low, arable land 0);
- ``flood_10yr.tif``, ``flood_50yr.tif``: nested flood zones of the brook (1 = floods);
- ``initial.tif``: the shrews in year 0, half of the capacity (CAPACITY_PER_HA, THRESHOLD) in
  every habitat cell west of the road, none east of it;
- ``drainage.gpkg``: the drainage scheme (the whole study area) that threatens every fen and wet
  meadow left unprotected;
- ``east_reserve.gpkg``: the existing reserve over the east block;
- ``reserve_one_block.gpkg``, ``reserve_small_sites.gpkg``: the two reserve layouts, 100 ha each
  (one 1 x 1 km block in the west block; four 500 x 500 m sites, two in the west block and two
  on fens west of the road);
- ``corridor_brook.gpkg``, ``corridor_straight.gpkg``: the two corridor options from the east
  side of the one-block reserve to the east block, 200 m wide strips: along the brook (4.1 km,
  83 ha, under the road at the bridge) and straight (2.6 km, 51 ha, cut by the road);
- ``road.gpkg``: the road (two lines, broken at the bridge);
- ``focus_areas.gpkg``: the two blocks, for colonisation and risk per block;
- ``release_sites.gpkg``: two 250 x 250 m release sites in the core of the east block, for the
  reintroduction plan.

Run: ``python scenarios/demo/generate.py [FOLDER]`` (default scenarios/demo/data/).
"""

from __future__ import annotations

import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyogrio
import rasterio
import rasterio.features
from rasterio.transform import from_origin
from scipy import ndimage
from shapely import unary_union
from shapely.geometry import LineString, Polygon, box

HERE = Path(__file__).resolve().parent
DATA = HERE / "data"
CRS = "EPSG:32630"  # WGS 84 / UTM zone 30N: a projected CRS in metres (the place is invented)
CELL = 50.0  # metres
NY, NX = 120, 160  # 6 km x 8 km
ORIGIN = (420_000.0, 5_760_000.0)  # upper-left corner, invented
TRANSFORM = from_origin(ORIGIN[0], ORIGIN[1], CELL, CELL)
GPKG_DATE = "2026-12-01T00:00:00.000Z"  # the date written into the GeoPackages

# As in base.toml [habitat]: the initial population is half of this capacity.
CAPACITY_PER_HA = 80.0
THRESHOLD = 0.35

# Places in grid cells (column, row); xy() turns them into metres.
FENS = [(70, 14, 4.0), (76, 30, 4.0), (48, 102, 4.0), (100, 26, 4.0), (100, 44, 3.5),
        (106, 108, 4.0), (140, 22, 4.0)]  # centre column, centre row, radius
BROOK = [(58, 54), (62, 66), (66, 78), (74, 88), (86, 94), (98, 93), (106, 89), (114, 83)]
STRAIGHT = [(59, 48), (108, 68)]
ROAD = [(90, -1), (88, 30), (85, 60), (84, 85), (85, 100), (87, 121)]
BRIDGE_HALF_M = 90.0  # the road is broken this far either side of the brook
ROAD_CLEAR_M = 50.0  # the straight corridor stops this far either side of the road
CORRIDOR_HALF_M = 100.0  # corridors are 200 m wide strips
ONE_BLOCK = (40, 35, 60, 55)  # column0, row0, column1, row1 of the 1 km square
SMALL_SITES = [(24, 30), (24, 50), (65, 9), (71, 25)]  # upper-left cells of 500 m squares
RELEASE_SITES = [(119, 68), (127, 76)]  # upper-left cells of 250 m squares in the east block
# The drier future: fen radii times this leave two thirds of the fens' habitat cells (282 of 422
# within 2.5 radii of a fen centre), so the fens shrink by a third.
DRY_FEN_SCALE = 0.813


def xy(col: float, row: float) -> tuple[float, float]:
    """Metres of a point given in cells (column, row), cell centres at half cells."""
    return ORIGIN[0] + CELL * col, ORIGIN[1] - CELL * row


def line(points) -> LineString:
    return LineString([xy(c + 0.5, r + 0.5) for c, r in points])


def square(col0, row0, col1, row1) -> Polygon:
    """Polygon over cells col0..col1-1, row0..row1-1."""
    (x0, y0), (x1, y1) = xy(col0, row0), xy(col1, row1)
    return box(x0, y1, x1, y0)


def strip(centre: LineString) -> Polygon:
    """A corridor: the strip CORRIDOR_HALF_M either side of its centre line, square ends."""
    return centre.buffer(CORRIDOR_HALF_M, cap_style="flat")


def smooth_field(rng, sigma):
    f = ndimage.gaussian_filter(rng.standard_normal((NY, NX)), sigma, mode="reflect")
    return (f - f.min()) / (f.max() - f.min())


def suitability(fen_scale: float = 1.0) -> np.ndarray:
    """Habitat suitability; ``fen_scale`` scales the radius of every fen (the fens' habitat area
    scales with its square)."""
    rng = np.random.default_rng(20261201)
    yy, xx = np.mgrid[0:NY, 0:NX]
    base = 0.05 + 0.15 * smooth_field(rng, 6)  # farmland matrix: poor but not hostile
    west = np.exp(-(((yy - 45) / 22.0) ** 2 + ((xx - 40) / 22.0) ** 2))
    east = np.exp(-(((yy - 75) / 18.0) ** 2 + ((xx - 125) / 16.0) ** 2))
    blocks = np.clip(1.6 * np.maximum(west, east), 0, 1)
    fens = np.zeros((NY, NX))
    for cx, cy, r in FENS:
        r = r * fen_scale
        fens += np.exp(-(((yy - cy) / r) ** 2 + ((xx - cx) / r) ** 2))
    s = np.maximum(base, np.maximum(blocks, np.clip(1.3 * fens, 0, 0.9)))
    s = s * (0.85 + 0.15 * smooth_field(rng, 2))
    s = np.clip(s, 0, 1)
    s[:6, :14] = np.nan  # a corner outside the study area (no survey there)
    return s


def burn(geoms, value=1.0, all_touched=True) -> np.ndarray:
    return rasterio.features.rasterize([(g, value) for g in geoms], out_shape=(NY, NX),
                                       transform=TRANSFORM, fill=0.0, all_touched=all_touched,
                                       dtype="float32").astype(np.float64)


def road_lines() -> list[LineString]:
    """The road, cut where it passes over the brook (the bridge)."""
    road, brook = line(ROAD), line(BROOK)
    gap = road.intersection(brook).buffer(BRIDGE_HALF_M)
    rest = road.difference(gap)
    return sorted(rest.geoms, key=lambda g: -g.bounds[3])


def layers() -> dict[str, np.ndarray | gpd.GeoDataFrame]:
    """Every layer of the demo: name -> raster array or GeoDataFrame."""
    s = suitability()
    brook = line(BROOK)
    near = burn([brook.buffer(75.0)], all_touched=False)  # the brook's damp banks
    road = burn(road_lines())

    resistance = 1.0 + 14.0 * (1.0 - np.nan_to_num(s)) ** 1.5
    resistance = np.where(near > 0, np.minimum(resistance, 3.0), resistance)
    resistance = np.where(road > 0, 60.0, resistance)
    resistance[np.isnan(s)] = np.nan

    rng = np.random.default_rng(20261202)
    habitat = np.nan_to_num(s) >= THRESHOLD
    hazard = np.where(habitat, 0.5 + smooth_field(rng, 5), 0.0)
    hazard = np.where(near > 0, 0.2 * hazard, hazard)
    hazard[np.isnan(s)] = np.nan

    low_reach = box(*xy(60, 120), *xy(160, 85))  # xmin, ymin, xmax, ymax of the lower reach
    flood10 = burn([brook.buffer(100.0).intersection(low_reach)], all_touched=False)
    flood50 = np.maximum(flood10, burn([brook.buffer(250.0)], all_touched=False))
    flood10[np.isnan(s)] = np.nan
    flood50[np.isnan(s)] = np.nan

    k = np.where(habitat, CAPACITY_PER_HA * (CELL * CELL / 10_000.0) * np.nan_to_num(s), 0.0)
    cols = np.arange(NX)[None, :]
    road_col = np.interp(np.arange(NY), [r for _, r in ROAD], [c for c, _ in ROAD])[:, None]
    initial = np.where(cols < road_col, np.rint(0.5 * k), 0.0)
    initial[np.isnan(s)] = np.nan

    def gdf(names, geoms):
        return gpd.GeoDataFrame({"name": names}, geometry=list(geoms), crs=CRS)

    straight = strip(line(STRAIGHT)).difference(unary_union(road_lines()).buffer(ROAD_CLEAR_M))
    x0, y0 = ORIGIN
    study = box(x0, y0 - NY * CELL, x0 + NX * CELL, y0)
    east = Polygon([xy(c, r) for c, r in [(106, 54), (140, 54), (146, 72), (140, 95),
                                          (112, 96), (104, 80)]])
    west = Polygon([xy(c, r) for c, r in [(12, 16), (64, 16), (70, 45), (64, 74), (16, 74),
                                          (10, 45)]])
    return {
        "suitability.tif": s,
        "suitability_dry_40.tif": suitability(DRY_FEN_SCALE),
        "resistance.tif": resistance,
        "fire_hazard.tif": hazard,
        "flood_10yr.tif": flood10,
        "flood_50yr.tif": flood50,
        "initial.tif": initial,
        "drainage.gpkg": gdf(["Brindlemoor drainage scheme"], [study]),
        "east_reserve.gpkg": gdf(["East block reserve"], [east]),
        "reserve_one_block.gpkg": gdf(["West block reserve"], [square(*ONE_BLOCK)]),
        "reserve_small_sites.gpkg": gdf([f"Site {i + 1}" for i in range(len(SMALL_SITES))],
                                        [square(c, r, c + 10, r + 10) for c, r in SMALL_SITES]),
        "corridor_brook.gpkg": gdf(["Sallow Brook corridor"], [strip(brook)]),
        "corridor_straight.gpkg": gdf(["Straight corridor"], [straight]),
        "road.gpkg": gdf(["Flats road north", "Flats road south"], road_lines()),
        "focus_areas.gpkg": gdf(["west_block", "east_block"], [west, east]),
        "release_sites.gpkg": gdf([f"Release site {i + 1}" for i in range(len(RELEASE_SITES))],
                                  [square(c, r, c + 5, r + 5) for c, r in RELEASE_SITES]),
    }


def write_raster(path: Path, data: np.ndarray) -> None:
    profile = dict(driver="GTiff", width=NX, height=NY, count=1, dtype="float32", crs=CRS,
                   transform=TRANSFORM, nodata=-9999.0, compress="deflate", predictor=3)
    out = np.where(np.isnan(data), -9999.0, data).astype("float32")
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(out, 1)


def main(folder: Path = DATA) -> None:
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    # GeoPackages record when they were written; a fixed date keeps the files byte-identical.
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": GPKG_DATE})
    try:
        for name, layer in layers().items():
            path = folder / name
            if name.endswith(".tif"):
                write_raster(path, layer)
            else:
                path.unlink(missing_ok=True)
                layer.to_file(path, driver="GPKG", layer=path.stem)
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": None})


if __name__ == "__main__":
    main(*(Path(a) for a in sys.argv[1:2]))

"""Vector layers on the grid: read and reproject a layer (GeoPackage, Shapefile, GeoJSON), rasterise
polygons by cell centre, count points per cell, and read an action's area from a raster or a
vector file.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pyogrio
import pyogrio.errors
import pyproj
import rasterio
import rasterio.crs
import rasterio.errors
import rasterio.features
import rasterio.transform
import rasterio.warp

from ..errors import InputDataError, ScenarioError, where, where_layer
from .rasters import Grid, align_raster, crs_name, fmt_bounds, metres_per_unit


def read_vector(path: Path, grid: Grid, loc: str):
    path = Path(path)
    if not path.exists():
        raise InputDataError(f"{loc}: file not found.")
    try:
        gdf = gpd.read_file(path, engine="pyogrio")
    except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError) as exc:
        raise InputDataError(f"{loc}: not a vector file GDAL can read ({exc}).") from None
    gdf = gdf[gdf.geometry.notna() & ~gdf.geometry.is_empty]
    if len(gdf) == 0:
        raise InputDataError(f"{loc}: the layer has no features with a geometry.")
    if gdf.crs is None:
        raise InputDataError(f"{loc}: the layer has no CRS (a Shapefile without its .prj?). "
                             f"Assign one, e.g. `ogr2ogr -a_srs EPSG:XXXX out.gpkg {path.name}`.")
    src_crs = gdf.crs
    target = pyproj.CRS.from_wkt(grid.crs.to_wkt())
    if src_crs.equals(target):
        return gdf, ""
    return gdf.to_crs(target), f", reprojected from {src_crs.to_string()}"


def rasterize_vector(path: Path, grid: Grid, *, file: Path, section: str, key: str,
                     attribute: str | None = None, all_touched: bool = False,
                     buffer_m: float | None = None) -> tuple[np.ndarray, str]:
    """Burn a vector layer (polygons, lines or points) into the grid.

    Parameters
    ----------
    path : Path
        GeoPackage, Shapefile, GeoJSON or any vector format GDAL reads.
    grid : Grid
        The target grid; features are reprojected to its CRS.
    file, section, key
        Scenario file and key the path came from, for messages.
    attribute : str, optional
        Numeric attribute to burn. Without it the result is a 0/1 mask.
    all_touched : bool
        Burn every cell a feature touches, not only cells whose centre it covers.
    buffer_m : float, optional
        Buffer features by this distance in metres first (to give lines a width).

    Returns
    -------
    values : (ny, nx) ndarray
        uint8 mask (1 = covered), or float64 attribute values with NaN where no feature lies
        (where features overlap, the later one wins).
    note : str
        What was read and burned.

    Raises
    ------
    InputDataError
        Missing or unreadable file, no features, no CRS, unknown or non-numeric attribute, or
        no feature on the grid.
    """
    loc = where_layer(file, section, key, path)
    gdf, how = read_vector(path, grid, loc)
    if attribute is not None:
        if attribute not in gdf.columns or attribute == gdf.geometry.name:
            raise InputDataError(f"{loc}: no attribute {attribute!r}; the layer has "
                                 f"{', '.join(map(str, gdf.columns.drop(gdf.geometry.name)))}.")
        if not np.issubdtype(gdf[attribute].dtype, np.number):
            raise InputDataError(f"{loc}: attribute {attribute!r} is not numeric "
                                 f"({gdf[attribute].dtype}).")
    geoms = gdf.geometry
    if buffer_m is not None:
        geoms = geoms.buffer(buffer_m / metres_per_unit(grid.crs))
        how += f", buffered by {buffer_m:g} m"
    shapes: Iterable[tuple[Any, float]]
    fill: float
    dtype: type[np.generic]
    if attribute is None:
        shapes, fill, dtype = ((g, 1) for g in geoms), 0, np.uint8
    else:
        shapes = zip(geoms, gdf[attribute].astype(np.float64), strict=True)
        fill, dtype = np.nan, np.float64
    out = rasterio.features.rasterize(shapes, out_shape=grid.shape, transform=grid.transform,
                                      fill=fill, all_touched=all_touched, dtype=dtype)
    covered = int(np.count_nonzero(out) if attribute is None else np.isfinite(out).sum())
    if covered == 0:
        raise InputDataError(f"{loc}: no feature covers a grid cell ({len(gdf)} read). "
                             f"Feature bounds {fmt_bounds(geoms.total_bounds)}, grid bounds "
                             f"{fmt_bounds(grid.bounds)} ({crs_name(grid.crs)}).")
    burned = "cells touched" if all_touched else "cells whose centre is covered"
    note = f"{Path(path).name}: {len(gdf)} features{how}, burned into {covered} {burned}"
    if attribute is not None:
        note += f" (attribute {attribute!r})"
    return out, note


def read_points(path: Path, grid: Grid, *, count_field: str, file: Path, section: str,
                key: str) -> np.ndarray:
    """Count individuals per cell from a layer of release points.

    Parameters
    ----------
    path : Path
        Vector layer of Point features.
    grid : Grid
        The target grid; points are reprojected to its CRS.
    count_field : str
        Attribute holding the number of individuals released at each point.
    file, section, key
        Scenario file and key the path came from, for messages.

    Returns
    -------
    (ny, nx) float64 ndarray
        Individuals per cell (points in the same cell add up).

    Raises
    ------
    InputDataError
        Missing or unreadable file, no features, no CRS, geometries that are not points, a missing
        or non-numeric count field (the fields are listed), negative or non-finite counts, or
        points outside the grid (how many, their bounds and the grid's).
    """
    loc = where_layer(file, section, key, path)
    gdf, _ = read_vector(path, grid, loc)
    kinds = set(gdf.geom_type)
    if kinds != {"Point"}:
        raise InputDataError(f"{loc}: expected Point features, found {', '.join(sorted(kinds))}.")
    fields = [str(c) for c in gdf.columns if c != gdf.geometry.name]
    if count_field not in gdf.columns:
        raise InputDataError(f"{loc}: no field {count_field!r} (set [initial] count_field); "
                             f"the layer has {', '.join(fields) or 'no fields'}.")
    if not np.issubdtype(gdf[count_field].dtype, np.number):
        raise InputDataError(f"{loc}: field {count_field!r} is not numeric "
                             f"({gdf[count_field].dtype}).")
    counts = gdf[count_field].to_numpy(dtype=np.float64)
    bad = ~np.isfinite(counts) | (counts < 0)
    if bad.any():
        raise InputDataError(f"{loc}: field {count_field!r} must hold counts >= 0; found "
                             f"{counts[bad][:5].tolist()} ({bad.sum()} of {len(gdf)} points).")
    x, y = gdf.geometry.x.to_numpy(), gdf.geometry.y.to_numpy()
    col, row = ~grid.transform @ (x, y)
    col, row = np.floor(col), np.floor(row)
    ny, nx = grid.shape
    outside = (col < 0) | (col >= nx) | (row < 0) | (row >= ny)
    if outside.any():
        xo, yo = x[outside], y[outside]
        raise InputDataError(
            f"{loc}: {outside.sum()} of {len(gdf)} points lie outside the grid. Their bounds "
            f"{fmt_bounds((xo.min(), yo.min(), xo.max(), yo.max()))}, grid bounds "
            f"{fmt_bounds(grid.bounds)} ({crs_name(grid.crs)}).")
    out = np.zeros(grid.shape)
    np.add.at(out, (row.astype(np.intp), col.astype(np.intp)), counts)
    return out


def is_raster(path: Path) -> bool:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rasterio.errors.NotGeoreferencedWarning)
        try:
            with rasterio.open(path):
                return True
        except rasterio.errors.RasterioIOError:
            return False


def _bounds(path: Path, raster: bool):
    """Bounds and CRS of a layer as stored, or (None, None) when they cannot be read."""
    if raster:
        with rasterio.open(path) as src:
            return tuple(src.bounds), src.crs
    try:
        info = pyogrio.read_info(path, force_total_bounds=True)
    except pyogrio.errors.DataSourceError:
        return None, None
    return info["total_bounds"], info["crs"]


def read_cells(path: Path, grid: Grid, *, file: Path, section: str, key: str,
               buffer_m: float = 0.0, all_touched: bool = False) -> tuple[np.ndarray, str, bool]:
    """Cells covered by a layer: a vector file (polygons, lines) or a raster (cells > 0).

    Parameters
    ----------
    path : Path
    grid : Grid
    file, section, key
        Scenario file and key the path came from, for messages.
    buffer_m : float
        Buffer vector features by this distance first (vector layers only).
    all_touched : bool
        Take every cell a vector feature touches, not only cells whose centre it covers.

    Returns
    -------
    cells : (ny, nx) bool ndarray
    note : str
        How the layer was read (reprojection, resampling, buffer), or a warning with the bounds
        of the layer (in the grid CRS) and of the grid when the layer misses the grid.
    missed : bool
        True when the layer does not intersect the grid (``cells`` is then all False).

    Raises
    ------
    ScenarioError
        ``buffer_m`` given with a raster.
    InputDataError
        Unreadable layer, no CRS (see :func:`gridpop.io.rasters.align_raster` and
        :func:`gridpop.io.vectors.rasterize_vector`).
    """
    path = Path(path)
    raster = is_raster(path)
    if raster and buffer_m > 0:
        raise ScenarioError(f"{where(file, section, 'buffer_m')} = {buffer_m:g}: a buffer "
                            f"applies to vector layers; {key} = {path.name} is a raster.")
    bounds, crs = _bounds(path, raster)
    if bounds is not None and crs is not None and np.all(np.isfinite(bounds)):
        b = rasterio.warp.transform_bounds(crs, grid.crs, *bounds)
        pad = buffer_m / grid.crs.linear_units_factor[1]
        b = (b[0] - pad, b[1] - pad, b[2] + pad, b[3] + pad)
        g = grid.bounds
        if not (b[0] < g[2] and b[2] > g[0] and b[1] < g[3] and b[3] > g[1]):
            return (np.zeros(grid.shape, bool),
                    f"{path.name} does not intersect the grid and has no effect. Its "
                    f"bounds in the grid CRS {fmt_bounds(b)}, grid bounds {fmt_bounds(g)} "
                    f"({crs_name(grid.crs)})", True)
    if raster:
        layer = align_raster(path, grid, kind="categorical", file=file, section=section,
                             key=key)
        return np.isfinite(layer.data) & (layer.data > 0), layer.note, False
    values, note = rasterize_vector(path, grid, file=file, section=section, key=key,
                                    all_touched=all_touched, buffer_m=buffer_m or None)
    return values > 0, note, False

"""The landscape: one grid, every input layer aligned to it, carrying capacity and habitat patches.

A scenario names a template raster (by default the suitability raster) whose CRS, transform and
shape define :class:`Grid`. Every other raster is resampled onto that grid (:func:`align_raster`),
vector layers are burned into it (:func:`rasterize_vector`) and release points are counted per cell
(:func:`read_points`). Suitability becomes carrying capacity K per cell (:func:`capacity`) and the
cells with K > 0 are grouped into 8-connected patches (:func:`label_patches`).
:func:`build_landscape` does all of this for a scenario and keeps a note of every step for
``gridpop check``.

Cells outside the study area (nodata or NaN suitability) are ``False`` in the mask and carry K = 0
in the engine-ready capacity; cells inside the study area with K = 0 are matrix: individuals may
cross them but cannot stay.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import affine
import geopandas as gpd
import numpy as np
import pyogrio.errors
import pyproj
import rasterio
import rasterio.crs
import rasterio.errors
import rasterio.features
import rasterio.transform
import rasterio.warp
from rasterio.enums import Resampling
from scipy import ndimage

from .errors import InputDataError, ScenarioError, where
from .scenario import RESPONSES

KINDS = ("continuous", "categorical", "count")
"""What a raster holds; decides how it is resampled (see :func:`align_raster`)."""

COARSER = 1.5
"""A target cell this many times wider than the source cell (geometric mean of the two axes)
counts as downsampling: values are aggregated (average, mode) rather than interpolated."""


def _loc(file, section, key, path) -> str:
    return f"{where(file, section, key)} ({path})"


def _metres_per_unit(crs: rasterio.crs.CRS) -> float:
    return crs.linear_units_factor[1]


def _crs_name(crs: rasterio.crs.CRS) -> str:
    return crs.to_string() if crs.is_epsg_code else pyproj.CRS.from_wkt(crs.to_wkt()).name


def _fmt_bounds(b) -> str:
    return f"(left {b[0]:.10g}, bottom {b[1]:.10g}, right {b[2]:.10g}, top {b[3]:.10g})"


@dataclass(frozen=True)
class Grid:
    """The raster grid every layer is aligned to.

    Attributes
    ----------
    crs : rasterio.crs.CRS
        A projected CRS (linear units convertible to metres).
    transform : affine.Affine
        North-up, unrotated pixel-to-CRS transform.
    shape : tuple of int
        ``(ny, nx)``.
    """

    crs: rasterio.crs.CRS
    transform: affine.Affine
    shape: tuple[int, int]

    @property
    def cell_width_m(self) -> float:
        return abs(self.transform.a) * _metres_per_unit(self.crs)

    @property
    def cell_height_m(self) -> float:
        return abs(self.transform.e) * _metres_per_unit(self.crs)

    @property
    def cell_area_ha(self) -> float:
        return self.cell_width_m * self.cell_height_m / 10_000.0

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """``(left, bottom, right, top)`` in CRS units."""
        return rasterio.transform.array_bounds(*self.shape, self.transform)

    @property
    def n_cells(self) -> int:
        return self.shape[0] * self.shape[1]

    def profile(self) -> dict:
        """Base rasterio profile for writing a GeoTIFF on this grid (add dtype, count, nodata)."""
        return dict(driver="GTiff", crs=self.crs, transform=self.transform,
                    width=self.shape[1], height=self.shape[0])

    def describe(self) -> str:
        return (f"{_crs_name(self.crs)}, {self.shape[1]} x {self.shape[0]} cells of "
                f"{self.cell_width_m:g} x {self.cell_height_m:g} m ({self.cell_area_ha:g} ha)")


def _open(path: Path, loc: str):
    path = Path(path)
    if not path.is_file():
        raise InputDataError(f"{loc}: file not found.")
    try:
        return rasterio.open(path)
    except rasterio.errors.RasterioIOError as exc:
        raise InputDataError(f"{loc}: not a raster GDAL can read ({exc}).") from None


def _check_crs(src, loc: str) -> None:
    if src.crs is None:
        raise InputDataError(f"{loc}: the raster has no CRS. Assign one, e.g. "
                             f"`gdal_edit.py -a_srs EPSG:XXXX {src.name}`.")
    if src.count != 1:
        raise InputDataError(f"{loc}: the raster has {src.count} bands; expected a single band.")


def _utm_hint(crs: rasterio.crs.CRS, bounds) -> str:
    """A reprojection command naming the UTM zone that holds the centre of ``bounds``."""
    to_lonlat = pyproj.Transformer.from_crs(pyproj.CRS.from_wkt(crs.to_wkt()), "EPSG:4326",
                                            always_xy=True)
    lon, lat = to_lonlat.transform((bounds[0] + bounds[2]) / 2, (bounds[1] + bounds[3]) / 2)
    if not -80.0 <= lat <= 84.0:
        return ("Reproject it to a projected CRS in metres, e.g. a polar stereographic one: "
                "`gdalwarp -t_srs EPSG:XXXX in.tif out.tif`")
    zone = int((lon + 180.0) // 6.0) % 60 + 1
    code = (32600 if lat >= 0 else 32700) + zone
    name = pyproj.CRS.from_epsg(code).name
    return (f"Reproject it to a projected CRS in metres; the raster centre ({lon:.4f} E, "
            f"{lat:.4f} N) lies in {name}: `gdalwarp -t_srs EPSG:{code} in.tif out.tif`")


def load_grid(path: Path, *, file: Path, key: str, section: str = "grid") -> Grid:
    """Read the template raster's CRS, transform and shape.

    Parameters
    ----------
    path : Path
        The template raster.
    file, section, key
        Scenario file and key the path came from, for messages.

    Raises
    ------
    InputDataError
        Missing or unreadable file, no CRS, a geographic CRS (with a suggested projected CRS), or
        a rotated transform.
    """
    loc = _loc(file, section, key, path)
    with _open(path, loc) as src:
        _check_crs(src, loc)
        if src.crs.is_geographic or not src.crs.is_projected:
            raise InputDataError(
                f"{loc}: the template grid has a geographic CRS ({_crs_name(src.crs)}), in "
                f"degrees; cells need a size in metres. {_utm_hint(src.crs, src.bounds)}.")
        if not src.transform.is_rectilinear:
            raise InputDataError(f"{loc}: the raster is rotated or sheared "
                                 f"({tuple(src.transform)[:6]}); expected a north-up grid.")
        return Grid(crs=src.crs, transform=src.transform, shape=(src.height, src.width))


@dataclass(frozen=True, eq=False)
class Layer:
    """One input raster aligned to the grid.

    Attributes
    ----------
    data : (ny, nx) float64 ndarray
        Values on the grid; NaN where the source has no data.
    note : str
        What was read and how it was resampled.
    """

    data: np.ndarray
    note: str


def _cell_size(crs: rasterio.crs.CRS, transform: affine.Affine) -> str:
    if crs.is_projected:
        f = _metres_per_unit(crs)
        return f"{abs(transform.a) * f:g} x {abs(transform.e) * f:g} m"
    return f"{abs(transform.a):g} x {abs(transform.e):g} degree"


def _resampling(kind: str, coarser: bool) -> Resampling:
    if kind == "count":
        return Resampling.sum
    if kind == "categorical":
        return Resampling.mode if coarser else Resampling.nearest
    return Resampling.average if coarser else Resampling.bilinear


def align_raster(path: Path, grid: Grid, *, kind: str, file: Path, section: str,
                 key: str) -> Layer:
    """Resample a single-band raster onto the grid.

    Parameters
    ----------
    path : Path
        The raster.
    grid : Grid
        The target grid.
    kind : {'continuous', 'categorical', 'count'}
        ``continuous``: bilinear interpolation, or the average of the covered cells when the grid
        is coarser than the source (cells more than ``COARSER`` times wider, the source cell
        measured as its share of the source footprint in the grid CRS). ``categorical``:
        nearest cell, or the most common value when coarser. ``count``: the overlap-weighted sum,
        so totals are preserved.
    file, section, key
        Scenario file and key the path came from, for messages.

    Returns
    -------
    Layer
        float64 values, NaN where the source has nodata or NaN or does not reach.

    Raises
    ------
    InputDataError
        Missing or unreadable file, no CRS, more than one band, no valid value, no overlap with
        the grid (both bounds given), or no valid value on the grid.
    """
    if kind not in KINDS:
        raise ValueError(f"kind = {kind!r}; expected one of {', '.join(KINDS)}.")
    loc = _loc(file, section, key, path)
    name = Path(path).name
    with _open(path, loc) as src:
        _check_crs(src, loc)
        data = src.read(1, masked=True).astype(np.float64).filled(np.nan)
        src_crs, src_transform = src.crs, src.transform
        src_bounds = src.bounds
    if not np.isfinite(data).any():
        raise InputDataError(f"{loc}: every cell is nodata or NaN.")
    same = (src_crs == grid.crs and data.shape == grid.shape
            and src_transform.almost_equals(grid.transform))
    if same:
        return Layer(data, f"{name}: same grid as the template, read as is")
    on_grid = rasterio.warp.transform_bounds(src_crs, grid.crs, *src_bounds)
    g = grid.bounds
    if not (on_grid[0] < g[2] and on_grid[2] > g[0] and on_grid[1] < g[3] and on_grid[3] > g[1]):
        raise InputDataError(
            f"{loc}: the raster does not overlap the grid. Raster bounds in the grid CRS "
            f"{_fmt_bounds(on_grid)}, grid bounds {_fmt_bounds(g)} ({_crs_name(grid.crs)}).")
    src_cell = (on_grid[2] - on_grid[0]) * (on_grid[3] - on_grid[1]) / data.size
    ratio = math.sqrt(abs(grid.transform.a * grid.transform.e) / src_cell)
    method = _resampling(kind, ratio > COARSER)
    out = np.full(grid.shape, np.nan)
    rasterio.warp.reproject(data, out, src_transform=src_transform, src_crs=src_crs,
                            src_nodata=np.nan, dst_transform=grid.transform, dst_crs=grid.crs,
                            dst_nodata=np.nan, resampling=method)
    if not np.isfinite(out).any():
        raise InputDataError(f"{loc}: no valid cell of the raster falls on the grid "
                             f"{_fmt_bounds(g)}.")
    note = (f"{name}: resampled from {_crs_name(src_crs)} {_cell_size(src_crs, src_transform)} "
            f"to the template with {method.name}")
    if kind == "count":
        note += f" (total {np.nansum(data):.6g} in the source, {np.nansum(out):.6g} on the grid)"
    return Layer(out, note)


def _read_vector(path: Path, grid: Grid, loc: str):
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
    loc = _loc(file, section, key, path)
    gdf, how = _read_vector(path, grid, loc)
    if attribute is not None:
        if attribute not in gdf.columns or attribute == gdf.geometry.name:
            raise InputDataError(f"{loc}: no attribute {attribute!r}; the layer has "
                                 f"{', '.join(map(str, gdf.columns.drop(gdf.geometry.name)))}.")
        if not np.issubdtype(gdf[attribute].dtype, np.number):
            raise InputDataError(f"{loc}: attribute {attribute!r} is not numeric "
                                 f"({gdf[attribute].dtype}).")
    geoms = gdf.geometry
    if buffer_m is not None:
        geoms = geoms.buffer(buffer_m / _metres_per_unit(grid.crs))
        how += f", buffered by {buffer_m:g} m"
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
                             f"Feature bounds {_fmt_bounds(geoms.total_bounds)}, grid bounds "
                             f"{_fmt_bounds(grid.bounds)} ({_crs_name(grid.crs)}).")
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
    loc = _loc(file, section, key, path)
    gdf, _ = _read_vector(path, grid, loc)
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
            f"{_fmt_bounds((xo.min(), yo.min(), xo.max(), yo.max()))}, grid bounds "
            f"{_fmt_bounds(grid.bounds)} ({_crs_name(grid.crs)}).")
    out = np.zeros(grid.shape)
    np.add.at(out, (row.astype(np.intp), col.astype(np.intp)), counts)
    return out


def capacity(suitability: np.ndarray, *, capacity_per_ha: float, cell_area_ha: float,
             response: str, threshold: float, exponent: float) -> np.ndarray:
    """Carrying capacity per cell from habitat suitability.

    K = capacity_per_ha * cell_area_ha * f(s), with f(s) = s (``linear``), s where s >= threshold
    else 0 (``threshold``), or s**exponent (``power``).

    Parameters
    ----------
    suitability : (ny, nx) float ndarray
        Values in 0..1; NaN outside the study area.
    capacity_per_ha : float
        Individuals per hectare at suitability 1 (>= 0).
    cell_area_ha : float
        Area of one cell (> 0).
    response : {'linear', 'threshold', 'power'}
    threshold : float
        Cut-off of the threshold response.
    exponent : float
        Exponent of the power response (> 0).

    Returns
    -------
    (ny, nx) float64 ndarray
        K in individuals per cell; NaN where suitability is NaN.
    """
    if response not in RESPONSES:
        raise ScenarioError(f"response = {response!r} is not known; expected one of "
                            f"{', '.join(RESPONSES)}.")
    if not (math.isfinite(capacity_per_ha) and capacity_per_ha >= 0):
        raise ScenarioError(f"capacity_per_ha = {capacity_per_ha!r}; expected a number >= 0.")
    if not (math.isfinite(cell_area_ha) and cell_area_ha > 0):
        raise ScenarioError(f"cell_area_ha = {cell_area_ha!r}; expected a number > 0.")
    s = np.asarray(suitability, dtype=np.float64)
    if response == "linear":
        f = s
    elif response == "threshold":
        f = np.where(np.isnan(s) | (s >= threshold), s, 0.0)
    else:
        f = s ** exponent
    return capacity_per_ha * cell_area_ha * f


@dataclass(frozen=True, eq=False)
class Patches:
    """Habitat patches: 8-connected groups of cells with K > 0.

    Attributes
    ----------
    labels : (ny, nx) int32 ndarray
        0 = not habitat, 1..P the patches, numbered by decreasing capacity (1 = the largest).
    area_ha : (P + 1,) float64 ndarray
        Patch area; index 0 unused (0).
    capacity : (P + 1,) float64 ndarray
        Sum of K over the patch; index 0 unused (0).
    """

    labels: np.ndarray
    area_ha: np.ndarray
    capacity: np.ndarray

    @property
    def n(self) -> int:
        return len(self.area_ha) - 1


def label_patches(k: np.ndarray, cell_area_ha: float) -> Patches:
    """Label the 8-connected components of the cells with finite K > 0.

    Patches are numbered by decreasing total capacity; ties keep the order in which
    :func:`scipy.ndimage.label` meets them (row-major scan).

    References
    ----------
    Rosenfeld, A. and Pfaltz, J. L. (1966). Sequential operations in digital picture processing.
    Journal of the ACM 13(4), 471-494.
    """
    k = np.asarray(k, dtype=np.float64)
    habitat = np.isfinite(k) & (k > 0)
    raw, n = ndimage.label(habitat, structure=np.ones((3, 3), dtype=bool))
    cap = np.bincount(raw.ravel(), weights=np.where(habitat, k, 0.0).ravel(), minlength=n + 1)
    cells = np.bincount(raw.ravel(), minlength=n + 1)
    order = np.argsort(-cap[1:], kind="stable") + 1  # order[i] = old label of new label i + 1
    new_of_old = np.zeros(n + 1, dtype=np.int32)
    new_of_old[order] = np.arange(1, n + 1, dtype=np.int32)
    area = np.zeros(n + 1)
    area[1:] = cells[order] * cell_area_ha
    capacity_ = np.zeros(n + 1)
    capacity_[1:] = cap[order]
    return Patches(labels=new_of_old[raw], area_ha=area, capacity=capacity_)


@dataclass(frozen=True, eq=False)
class Landscape:
    """Everything the engine needs from the maps, on one grid.

    Attributes
    ----------
    grid : Grid
    mask : (ny, nx) bool ndarray
        True inside the study area (suitability finite).
    suitability : (ny, nx) float64 ndarray
        NaN outside the study area.
    capacity : (ny, nx) float64 ndarray
        K per cell; 0 outside the study area; 0 inside it is matrix.
    patches : Patches
    initial : (ny, nx) float64 ndarray
        Individuals per cell in year 0; 0 outside the study area and in matrix.
    notes : tuple of str
        What was read, resampled and dropped, for ``gridpop check``.
    """

    grid: Grid
    mask: np.ndarray
    suitability: np.ndarray
    capacity: np.ndarray
    patches: Patches
    initial: np.ndarray
    notes: tuple[str, ...]


SUITABILITY_TOLERANCE = 1e-9
"""Round-off allowed beyond 0..1 after resampling; such values are clipped to 0..1."""


def _initial(scenario, grid: Grid, k: np.ndarray) -> tuple[np.ndarray, str]:
    init = scenario.initial
    if init.raster is not None:
        layer = align_raster(init.raster, grid, kind="count", file=scenario.path,
                             section="initial", key="raster")
        counts = np.nan_to_num(layer.data, nan=0.0)
        if (counts < 0).any():
            raise InputDataError(f"{_loc(scenario.path, 'initial', 'raster', init.raster)}: "
                                 f"counts must be >= 0; the minimum is {counts.min():g}.")
        return counts, layer.note
    if init.points is not None:
        counts = read_points(init.points, grid, count_field=init.count_field,
                             file=scenario.path, section="initial", key="points")
        return counts, (f"{init.points.name}: {counts.sum():.6g} individuals in "
                        f"{np.count_nonzero(counts)} cells")
    return init.fraction_of_capacity * k, f"initial: {init.fraction_of_capacity:g} x K"


def build_landscape(scenario, *, stochastic: bool) -> Landscape:
    """Build the grid, capacity, patches and initial abundance of a scenario.

    Parameters
    ----------
    scenario : gridpop.scenario.Scenario
    stochastic : bool
        Round the initial abundance to whole individuals.

    Raises
    ------
    InputDataError
        Any problem with the template, suitability or initial layers (see :func:`load_grid`,
        :func:`align_raster`, :func:`read_points`), or suitability outside 0..1.
    """
    hab = scenario.habitat
    if scenario.grid.template == hab.suitability:
        grid = load_grid(hab.suitability, file=scenario.path, section="habitat",
                         key="suitability")
    else:
        grid = load_grid(scenario.grid.template, file=scenario.path, key="template")
    notes = [f"grid: {scenario.grid.template.name}, {grid.describe()}"]

    layer = align_raster(hab.suitability, grid, kind="continuous", file=scenario.path,
                         section="habitat", key="suitability")
    notes.append(layer.note)
    suit = layer.data
    mask = np.isfinite(suit)
    lo, hi = suit[mask].min(), suit[mask].max()
    if lo < -SUITABILITY_TOLERANCE or hi > 1 + SUITABILITY_TOLERANCE:
        raise InputDataError(
            f"{_loc(scenario.path, 'habitat', 'suitability', hab.suitability)}: values must lie "
            f"in 0..1 (nodata or NaN outside the study area); found min {lo:g}, max {hi:g}.")
    suit = np.where(mask, np.clip(suit, 0.0, 1.0), np.nan)

    k = capacity(suit, capacity_per_ha=hab.capacity_per_ha, cell_area_ha=grid.cell_area_ha,
                 response=hab.response, threshold=hab.threshold, exponent=hab.exponent)
    k = np.where(mask, k, 0.0)
    patches = label_patches(k, grid.cell_area_ha)
    notes.append(f"capacity: {hab.response} response, {hab.capacity_per_ha:g} individuals/ha at "
                 f"suitability 1, total K {k.sum():.6g}; {mask.sum()} of {grid.n_cells} cells in "
                 f"the study area, {np.count_nonzero(k)} habitat cells in {patches.n} patches")

    initial, note = _initial(scenario, grid, k)
    drop = (initial > 0) & (k <= 0)
    if drop.any():
        note += (f"; {initial[drop].sum():.6g} individuals in {drop.sum()} cells outside the "
                 f"study area or with K = 0 dropped")
        initial = np.where(drop, 0.0, initial)
    if stochastic:
        rounded = np.rint(initial)
        if not np.array_equal(rounded, initial):
            note += (f"; rounded to whole individuals ({initial.sum():.6g} -> "
                     f"{rounded.sum():.6g})")
        initial = rounded
    notes.append(note + f"; {initial.sum():.6g} individuals in year 0")
    return Landscape(grid=grid, mask=mask, suitability=suit, capacity=k, patches=patches,
                     initial=np.ascontiguousarray(initial, dtype=np.float64), notes=tuple(notes))

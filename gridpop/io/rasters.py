"""The grid and raster alignment: the template raster defines CRS, transform and shape; every other
raster is aligned onto it with rasterio (reprojection and resampling chosen by the kind of layer),
nodata becoming outside the study area.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import affine
import numpy as np
import pyproj
import rasterio
import rasterio.crs
import rasterio.errors
import rasterio.features
import rasterio.transform
import rasterio.warp
from rasterio.enums import Resampling

from ..errors import InputDataError, where_layer

KINDS = ("continuous", "categorical", "count")
"""What a raster holds; decides how it is resampled (see :func:`align_raster`)."""


COARSER = 1.5
"""A target cell this many times wider than the source cell (geometric mean of the two axes)
counts as downsampling: values are aggregated (average, mode) rather than interpolated."""


def metres_per_unit(crs: rasterio.crs.CRS) -> float:
    return crs.linear_units_factor[1]


def crs_name(crs: rasterio.crs.CRS) -> str:
    return crs.to_string() if crs.is_epsg_code else pyproj.CRS.from_wkt(crs.to_wkt()).name


def fmt_bounds(b) -> str:
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
        return abs(self.transform.a) * metres_per_unit(self.crs)

    @property
    def cell_height_m(self) -> float:
        return abs(self.transform.e) * metres_per_unit(self.crs)

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
        return (f"{crs_name(self.crs)}, {self.shape[1]} x {self.shape[0]} cells of "
                f"{self.cell_width_m:g} x {self.cell_height_m:g} m ({self.cell_area_ha:g} ha)")


def _open(path: Path, loc: str):
    path = Path(path)
    if not path.is_file():
        raise InputDataError(f"{loc}: file not found.")
    try:
        return rasterio.open(path)
    except rasterio.errors.RasterioIOError as exc:
        raise InputDataError(f"{loc}: not a raster GDAL can read ({exc}).") from None


def _check_crs(src, loc: str, band: int | None = None) -> None:
    """A CRS, and a single band (``band`` None) or at least ``band`` bands."""
    if src.crs is None:
        raise InputDataError(f"{loc}: the raster has no CRS. Assign one, e.g. "
                             f"`gdal_edit.py -a_srs EPSG:XXXX {src.name}`.")
    if band is None and src.count != 1:
        raise InputDataError(f"{loc}: the raster has {src.count} bands; expected a single band.")
    if band is not None and src.count < band:
        raise InputDataError(f"{loc}: the raster has {src.count} bands; band {band} asked for.")


def band_count(path: Path, *, file: Path, section: str, key: str) -> int:
    """Number of bands of a raster (which must have a CRS)."""
    loc = where_layer(file, section, key, path)
    with _open(path, loc) as src:
        _check_crs(src, loc, band=1)
        return src.count


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
    loc = where_layer(file, section, key, path)
    with _open(path, loc) as src:
        _check_crs(src, loc)
        if src.crs.is_geographic or not src.crs.is_projected:
            raise InputDataError(
                f"{loc}: the template grid has a geographic CRS ({crs_name(src.crs)}), in "
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
        f = metres_per_unit(crs)
        return f"{abs(transform.a) * f:g} x {abs(transform.e) * f:g} m"
    return f"{abs(transform.a):g} x {abs(transform.e):g} degree"


def _resampling(kind: str, coarser: bool) -> Resampling:
    if kind == "count":
        return Resampling.sum
    if kind == "categorical":
        return Resampling.mode if coarser else Resampling.nearest
    return Resampling.average if coarser else Resampling.bilinear


def _read_band(src, band: int) -> np.ndarray:
    """One band as float64, NaN where nodata, read block window by block window into the result
    (no whole-band temporaries of the file's type and mask)."""
    out = np.empty((src.height, src.width))
    for _, w in src.block_windows(band):
        rows, cols = w.toslices()
        out[rows, cols] = src.read(band, window=w, masked=True).astype(np.float64).filled(np.nan)
    return out


def align_raster(path: Path, grid: Grid, *, kind: str, file: Path, section: str,
                 key: str, band: int | None = None) -> Layer:
    """Resample a single-band raster, or one band of a multi-band raster, onto the grid.

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
    band : int, optional
        The band to read (1 = the first) of a multi-band raster; not given: the raster must
        have a single band.

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
    loc = where_layer(file, section, key, path)
    name = Path(path).name
    with _open(path, loc) as src:
        _check_crs(src, loc, band)
        data = _read_band(src, band or 1)
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
            f"{fmt_bounds(on_grid)}, grid bounds {fmt_bounds(g)} ({crs_name(grid.crs)}).")
    src_cell = (on_grid[2] - on_grid[0]) * (on_grid[3] - on_grid[1]) / data.size
    ratio = math.sqrt(abs(grid.transform.a * grid.transform.e) / src_cell)
    method = _resampling(kind, ratio > COARSER)
    out = np.full(grid.shape, np.nan)
    rasterio.warp.reproject(data, out, src_transform=src_transform, src_crs=src_crs,
                            src_nodata=np.nan, dst_transform=grid.transform, dst_crs=grid.crs,
                            dst_nodata=np.nan, resampling=method)
    if not np.isfinite(out).any():
        raise InputDataError(f"{loc}: no valid cell of the raster falls on the grid "
                             f"{fmt_bounds(g)}.")
    note = (f"{name}: resampled from {crs_name(src_crs)} {_cell_size(src_crs, src_transform)} "
            f"to the template with {method.name}")
    if kind == "count":
        note += f" (total {np.nansum(data):.6g} in the source, {np.nansum(out):.6g} on the grid)"
    return Layer(out, note)

"""Cartography for the report's maps: scale bars, axis and CRS labels, one band of a result
GeoTIFF as a map layer, and file paths written relative to a folder."""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path

import affine
import numpy as np
import pyproj
import rasterio
import rasterio.plot
from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

from ..errors import InputDataError


def nice_length(width_m: float) -> float:
    """Scale-bar length: the largest 1, 2 or 5 x 10^k metres not above a fifth of the width."""
    target = width_m / 5.0
    k = math.floor(math.log10(target))
    return max(m * 10.0 ** k for m in (1, 2, 5) if m * 10.0 ** k <= target)


def length_label(metres: float) -> str:
    return f"{metres / 1000:g} km" if metres >= 1000 else f"{metres:g} m"


def add_scale_bar(ax, crs: pyproj.CRS, width_units: float) -> AnchoredSizeBar:
    """A scale bar in the lower right of a map axis in the projected ``crs``."""
    per_unit = crs.axis_info[0].unit_conversion_factor  # metres per CRS unit
    metres = nice_length(width_units * per_unit)
    bar = AnchoredSizeBar(ax.transData, metres / per_unit, length_label(metres),
                          loc="lower right", pad=0.4, borderpad=0.6, sep=4, frameon=True,
                          size_vertical=width_units / 150, fontproperties={"size": 8})
    bar.patch.set_alpha(0.8)
    ax.add_artist(bar)
    return bar


def axis_label(crs: pyproj.CRS, direction: str, fallback: str) -> str:
    for a in crs.axis_info:
        if a.direction.lower() == direction:
            unit = "m" if a.unit_name == "metre" else a.unit_name
            return f"{a.name} ({unit})"
    return fallback


def crs_label(crs: pyproj.CRS) -> str:
    """The CRS name, with its EPSG code when it has one."""
    code = crs.to_epsg()
    return f"{crs.name} (EPSG:{code})" if code else crs.name


@dataclass(frozen=True, eq=False)
class MapLayer:
    """A raster band on the grid: values (nodata masked), extent, CRS, and optionally the study
    area (True inside) and the habitat (True where capacity > 0), for telling study-area cells
    without a value (masked) in habitat from those in the matrix."""

    values: np.ma.MaskedArray
    extent: tuple[float, float, float, float]
    crs: pyproj.CRS
    study: np.ndarray | None = None
    habitat: np.ndarray | None = None

    @property
    def transform(self) -> affine.Affine:
        left, right, bottom, top = self.extent
        ny, nx = self.values.shape
        return affine.Affine((right - left) / nx, 0.0, left, 0.0, -(top - bottom) / ny, top)


def read_band(path: Path, band: int | None = None) -> MapLayer:
    """One band of a GeoTIFF (default the last), nodata masked."""
    if not path.is_file():
        raise InputDataError(f"{path}: missing; the result folder is incomplete.")
    with rasterio.open(path) as src:
        values = src.read(band or src.count, masked=True)
        return MapLayer(values, rasterio.plot.plotting_extent(src),
                        pyproj.CRS.from_wkt(src.crs.to_wkt()))


def relative(path, base: Path) -> str:
    """``path`` as written relative to the folder ``base`` (with ``..`` where it lies outside),
    or its file name when it cannot be (another drive)."""
    path = Path(path)
    if not path.is_absolute():
        return path.as_posix()
    try:
        return Path(os.path.relpath(path, base)).as_posix()
    except ValueError:
        return path.name

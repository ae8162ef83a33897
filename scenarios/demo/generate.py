"""Generate the demo landscape: Brindlemoor Flats, an invented place, and its invented species.

The fen lantern shrew (invented) lives in wet grassland. Brindlemoor Flats is 8 x 6 km of
farmland with two large habitat blocks, a scatter of small fens, a river valley that floods and
a road. Everything here is made up; the rasters are deterministic (fixed seed), so running this
script again rewrites identical files.

Run: ``python scenarios/demo/generate.py`` (writes into scenarios/demo/data/).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import rasterio
from rasterio.transform import from_origin
from scipy import ndimage

HERE = Path(__file__).resolve().parent
DATA = HERE / "data"
CRS = "EPSG:32630"  # WGS 84 / UTM zone 30N: a projected CRS in metres (the place is invented)
CELL = 50.0  # metres
NY, NX = 120, 160  # 6 km x 8 km
ORIGIN = (420_000.0, 5_760_000.0)  # upper-left corner, invented
TRANSFORM = from_origin(ORIGIN[0], ORIGIN[1], CELL, CELL)


def smooth_field(rng, sigma):
    f = ndimage.gaussian_filter(rng.standard_normal((NY, NX)), sigma, mode="reflect")
    return (f - f.min()) / (f.max() - f.min())


def suitability() -> np.ndarray:
    rng = np.random.default_rng(20261201)
    yy, xx = np.mgrid[0:NY, 0:NX]
    base = 0.05 + 0.15 * smooth_field(rng, 6)  # farmland matrix: poor but not hostile
    west = np.exp(-(((yy - 45) / 22.0) ** 2 + ((xx - 35) / 20.0) ** 2))
    east = np.exp(-(((yy - 75) / 18.0) ** 2 + ((xx - 125) / 16.0) ** 2))
    blocks = np.clip(1.6 * np.maximum(west, east), 0, 1)
    fens = np.zeros((NY, NX))
    for cy, cx in rng.uniform((10, 60), (110, 100), size=(7, 2)):
        fens += np.exp(-(((yy - cy) / 4.0) ** 2 + ((xx - cx) / 4.0) ** 2))
    s = np.maximum(base, np.maximum(blocks, np.clip(1.3 * fens, 0, 0.9)))
    s = s * (0.85 + 0.15 * smooth_field(rng, 2))
    s = np.clip(s, 0, 1)
    s[:6, :14] = np.nan  # a corner outside the study area (no survey there)
    return s


def write(name: str, data: np.ndarray) -> Path:
    DATA.mkdir(exist_ok=True)
    path = DATA / name
    profile = dict(driver="GTiff", width=NX, height=NY, count=1, dtype="float32", crs=CRS,
                   transform=TRANSFORM, nodata=-9999.0, compress="deflate", predictor=3)
    out = np.where(np.isnan(data), -9999.0, data).astype("float32")
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(out, 1)
    return path


def main() -> None:
    write("suitability.tif", suitability())


if __name__ == "__main__":
    main()

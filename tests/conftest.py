"""Shared fixtures: tiny synthetic rasters and scenarios written to a temporary folder."""

from __future__ import annotations

import csv
import json
import textwrap
from pathlib import Path

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

UTM = "EPSG:32633"  # WGS 84 / UTM zone 33N, a projected CRS in metres


def write_raster(path, data, *, crs=UTM, transform=None, nodata=-9999.0, dtype="float32"):
    """Write a single-band (2-D) or multi-band (3-D) GeoTIFF and return its path."""
    data = np.asarray(data)
    if data.ndim == 2:
        data = data[None]
    if transform is None:
        transform = from_origin(500_000.0, 4_000_000.0, 30.0, 30.0)
    profile = dict(driver="GTiff", width=data.shape[2], height=data.shape[1],
                   count=data.shape[0], dtype=dtype, transform=transform, nodata=nodata)
    if crs is not None:
        profile["crs"] = crs
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(data.astype(dtype))
    return Path(path)


@pytest.fixture
def make_raster(tmp_path):
    """Factory: ``make_raster(name, array, **kwargs)`` writes a GeoTIFF in tmp_path."""

    def _make(name, data, **kwargs):
        return write_raster(tmp_path / name, data, **kwargs)

    return _make


def suitability_array(ny=40, nx=60, seed=0):
    """Two habitat blocks in a matrix, with a nodata corner outside the study area."""
    rng = np.random.default_rng(seed)
    s = np.full((ny, nx), 0.05)
    s[5:20, 5:25] = 0.6 + 0.4 * rng.random((15, 20))
    s[22:36, 35:55] = 0.5 + 0.5 * rng.random((14, 20))
    s[:4, -6:] = -9999.0
    return s


@pytest.fixture
def make_scenario(tmp_path):
    """Factory: ``make_scenario(body, name)`` writes a scenario TOML beside a suitability raster.

    ``body`` is TOML text; ``{suitability}`` in it is replaced by the path of a 40 x 60 raster of
    30 m cells in UTM 33N (see :func:`suitability_array`).
    """
    suit = write_raster(tmp_path / "suitability.tif", suitability_array())

    def _make(body, name="scenario.toml"):
        path = tmp_path / name
        path.write_text(textwrap.dedent(body).format(suitability=suit.name))
        return path

    return _make


SCENARIO = """
[run]
years = {years}
replicates = {replicates}
seed = {seed}
batch_size = {batch}

[habitat]
suitability = "{{suitability}}"
capacity_per_ha = 30.0
response = "threshold"
threshold = 0.3

[initial]
fraction_of_capacity = 0.6

[growth]
model = "ricker"
rate = 0.6
survival = 0.4
stochastic = {stochastic}
env_sd = 0.3
env_correlation_m = 200.0
env_autocorrelation = 0.5

[dispersal]
fraction = 0.3
density_dependence = 1.0
kernel = "exponential"
mean_distance_m = 90.0
edge = "absorbing"
"""

FIRE = """
[[disturbance]]
kind = "fire"
return_interval_years = 4.0
mortality = 0.6
capacity_loss = 0.5
recovery_years = 3.0
"""


def scenario_text(*, years=8, replicates=4, seed=3, batch=2, stochastic=True, fire=False):
    """A scenario for :func:`make_scenario` on the conftest suitability raster: Ricker growth,
    correlated environmental noise, exponential-kernel dispersal, optionally a fire regime."""
    text = SCENARIO.format(years=years, replicates=replicates, seed=seed, batch=batch,
                           stochastic="true" if stochastic else "false")
    return text + FIRE if fire else text


def read_rows(path):
    """Rows of a CSV file as dicts."""
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def same_results(a: Path, b: Path, *, figures: bool = True) -> None:
    """The same files under both folders (figures included, when drawn); every table, GeoTIFF
    and text file byte for byte, every JSON file equal apart from the ``execution`` block of
    run.json (wall time, resumed batches)."""
    files = sorted(p.relative_to(a) for p in a.rglob("*"))
    assert files == sorted(p.relative_to(b) for p in b.rglob("*"))
    assert any(f.suffix == ".png" for f in files) == figures
    assert any(f.suffix == ".tif" for f in files)
    for f in files:
        if (a / f).is_dir() or f.suffix == ".png":
            continue
        if f.suffix == ".json":
            x, y = (json.loads((d / f).read_text()) for d in (a, b))
            x.pop("execution", None), y.pop("execution", None)
            assert x == y, f
        else:
            assert (a / f).read_bytes() == (b / f).read_bytes(), f

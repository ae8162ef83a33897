"""Shared by the benchmark scripts: the machine they ran on, a synthetic landscape as a scenario,
timing, and writing results to benchmarks/results/."""

from __future__ import annotations

import json
import os
import platform
import time
from pathlib import Path

import numpy as np

RESULTS = Path(__file__).parent / "results"


def machine() -> dict:
    """Facts about this machine and its load, to publish beside the figures."""
    import numba

    cpu = ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    try:
        import psutil

        memory = psutil.virtual_memory().total
    except ImportError:
        memory = None
    return {"platform": platform.platform(), "cpu_model": cpu, "nproc": os.cpu_count(),
            "memory_bytes": memory, "python": platform.python_version(),
            "numpy": np.__version__, "numba": numba.__version__,
            "numba_threads": numba.get_num_threads(), "load_average": os.getloadavg()}


def write_result(name: str, result: dict, quick: bool) -> Path:
    """Write ``result`` (with the machine) to benchmarks/results/NAME.json (NAME_quick.json)."""
    RESULTS.mkdir(exist_ok=True)
    path = RESULTS / (f"{name}_quick.json" if quick else f"{name}.json")
    path.write_text(json.dumps({"machine": machine(), **result}, indent=1) + "\n")
    print(f"wrote {path}")
    return path


def best_time(fn, repeat=3) -> float:
    """Fastest of ``repeat`` calls after one warm-up call, seconds."""
    fn()
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


SCENARIO = """
[run]
years = {years}
replicates = {replicates}
seed = 1
batch_size = {batch}

[habitat]
suitability = "suitability.tif"
capacity_per_ha = {capacity}
response = "threshold"
threshold = 0.5

[initial]
fraction_of_capacity = 0.5

[growth]
model = "beverton-holt"
rate = 0.4
survival = 0.6
stochastic = {stochastic}

[dispersal]
fraction = 0.2
kernel = "gaussian"
mean_distance_m = {mean_m}
max_distance_m = {max_m}
edge = "absorbing"
"""

CELL_M = 100.0
SIGMA_CELLS = 2.0
"""Per-axis standard deviation of the benchmark's gaussian kernel, cells."""


def write_scenario(folder: Path, size: int, *, years: int, replicates: int = 1, batch: int = 1,
                   stochastic: bool = False, capacity: float = 50.0) -> Path:
    """A size x size landscape of 1 ha cells, about half habitat in blobs, and its scenario.

    The kernel is gaussian with sigma = :data:`SIGMA_CELLS` cells, truncated at 4 sigma (what
    ``scipy.ndimage.gaussian_filter`` does by default).
    """
    import rasterio
    from rasterio.transform import from_origin
    from scipy import ndimage

    folder.mkdir(parents=True, exist_ok=True)
    noise = np.random.default_rng(size).standard_normal((size, size)).astype(np.float32)
    field = ndimage.gaussian_filter(noise, 6.0)
    field = (field - field.min()) / (field.max() - field.min())
    profile = dict(driver="GTiff", width=size, height=size, count=1, dtype="float32",
                   crs="EPSG:32633", transform=from_origin(500_000.0, 4_000_000.0, CELL_M, CELL_M),
                   nodata=-9999.0, tiled=True, blockxsize=256, blockysize=256)
    if size < 256:
        profile.update(tiled=False, blockxsize=None, blockysize=None)
        profile = {k: v for k, v in profile.items() if v is not None}
    with rasterio.open(folder / "suitability.tif", "w", **profile) as dst:
        dst.write(field, 1)
    mean_m = SIGMA_CELLS * CELL_M * np.sqrt(np.pi / 2)
    text = SCENARIO.format(years=years, replicates=replicates, batch=batch, capacity=capacity,
                           stochastic="true" if stochastic else "false", mean_m=mean_m,
                           max_m=4 * SIGMA_CELLS * CELL_M)
    path = folder / "scenario.toml"
    path.write_text(text)
    return path

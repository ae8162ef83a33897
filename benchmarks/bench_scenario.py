"""Speed of whole runs of the scenarios planners set up, per extra replicate, against the cycle.

A few invented scenarios, each a whole ``gridpop run`` (``gridpop.run``: model built, batches,
accumulators, GeoTIFF stacks, tables, summary) on a synthetic landscape of 30 m cells:

- ``plain``: demographic stochasticity only, a small gaussian kernel (mean 60 m);
- ``realistic``: spatially correlated (1,500 m) and autocorrelated (0.5) environmental noise,
  fire (exponential sizes on a hazard raster) and a zoned flood with capacity loss and recovery,
  an exponential kernel (mean 250 m), a reserve, a scheduled habitat loss and a road barrier;
- ``walk``: the same with the walk instead of the kernel;

on grids of 250 x 400 (10^5 cells) and 1000 x 1000 (10^6). Each is run with R and 2R replicates
(one batch each); the difference of the two wall times is the cost of R extra replicates, from
which start-up, compiling and the writing of results per run drop out. Figure: cell-years per
extra replicate per second, and its ratio to the stochastic yearly cycle of
``bench_cycle.py`` (512^2, its code, measured in the same session: the reference). A ratio
``reference / scenario`` of 1 means a real run costs what the cycle does.

Per-phase profile of the extra replicates: the engine's calls wrapped and timed (the same way as
``bench_cycle.py``), per replicate-year: environmental noise field, disturbance (fire, flood),
capacity of the year (actions), growth (``grow_pass``), dispersal (the mover), census
(``census_pass``, which adds into the per-year accumulators), per-replicate set-up
(``Replicate``), the batch's accumulator files (``BatchSink``: created, flushed), writing the
results (once per run: its share of the difference is noise), and the rest.

The machine is shared: every measurement is repeated (``--repeat``) and the minimum taken, and
the reference is measured between the scenarios, so ratios are within one session.

Usage: python benchmarks/bench_scenario.py [--only plain_1e5,...] [--repeat 3] [--quick]
Writes benchmarks/results/bench_scenario.json (bench_scenario_quick.json with --quick).
"""

from __future__ import annotations

import argparse
import contextlib
import shutil
import tempfile
import time
from pathlib import Path

import numpy as np
from _common import write_result, write_scenario
from bench_cycle import gridpop_cycle

import gridpop
from gridpop.actions import Actions
from gridpop.config import load_scenario
from gridpop.demography import EnvironmentalNoise
from gridpop.disturbance import Regime
from gridpop.landscape import build_landscape
from gridpop.movement.barrier import BarrierKernelMover
from gridpop.movement.kernel import KernelMover
from gridpop.movement.walk import Walk
from gridpop.simulation import cycle, run
from gridpop.simulation.cycle import BatchSink, Replicate
from gridpop.simulation.model import build_model

CELL_M = 30.0

BASE = """
[run]
years = {years}
replicates = {replicates}
seed = 11
batch_size = 64

[habitat]
suitability = "suitability.tif"
capacity_per_ha = 150.0
response = "threshold"
threshold = 0.45

[initial]
fraction_of_capacity = 0.6

[growth]
model = "beverton-holt"
rate = 0.5
survival = 0.55
stochastic = true
{noise}

[dispersal]
fraction = 0.25
{dispersal}
"""

NOISE = """env_sd = 0.3
env_correlation_m = 1500.0
env_autocorrelation = 0.5"""

SMALL_KERNEL = """kernel = "gaussian"
mean_distance_m = 60.0"""

LARGE_KERNEL = """kernel = "exponential"
mean_distance_m = 250.0"""

WALK = """method = "walk"
walk_length = 60
death_per_resistance = 0.002
settle_exponent = 2.0
heading_bias = 1.0"""

EVERYTHING = """
[[disturbance]]
kind = "fire"
return_interval_years = 20.0
size_distribution = "exponential"
mean_size_ha = 30.0
hazard = "hazard.tif"
mortality = 0.7
capacity_loss = 0.5
recovery_years = 5.0

[[disturbance]]
kind = "flood"
return_period_years = [5.0, 25.0]
zone = ["flood5.tif", "flood25.tif"]
mortality = 0.5
capacity_loss = 0.3
recovery_years = 3.0

[[action]]
kind = "reserve"
area = "reserve.tif"
capacity_multiplier = 1.2
ignition_multiplier = 0.5

[[action]]
kind = "habitat_loss"
area = "loss.tif"
target_suitability = 0.2
start_year = 2
ramp_years = 4

[[action]]
kind = "barrier"
area = "road.tif"
crossing_mortality = 0.9
"""

SCENARIOS = {
    # name: (rows, cols, noise, dispersal, disturbances and actions)
    "plain": ("", SMALL_KERNEL, ""),
    "realistic": (NOISE, LARGE_KERNEL, EVERYTHING),
    "walk": (NOISE, WALK, EVERYTHING),
}
SIZES = {"1e5": (250, 400), "1e6": (1000, 1000)}


def write_layers(folder: Path, ny: int, nx: int) -> None:
    """Suitability (smooth blobs), fire hazard, two nested flood zones along a valley, a reserve,
    a drained area and a road, as GeoTIFFs of 30 m cells."""
    import rasterio
    from rasterio.transform import from_origin
    from scipy import ndimage

    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(ny * nx)
    field = ndimage.gaussian_filter(rng.standard_normal((ny, nx)), 5.0)
    suit = (field - field.min()) / (field.max() - field.min())
    y, x = np.mgrid[0:ny, 0:nx]
    valley = np.abs(y - ny / 2 - 0.15 * ny * np.sin(2 * np.pi * x / nx))
    layers = {
        "suitability": suit,
        "hazard": np.clip(0.3 + ndimage.gaussian_filter(rng.random((ny, nx)), 8.0), 0.0, 1.0),
        "flood5": (valley < 0.04 * ny).astype(float),
        "flood25": (valley < 0.10 * ny).astype(float),
        "reserve": ((x > 0.55 * nx) & (x < 0.85 * nx) & (y < 0.4 * ny)).astype(float),
        "loss": ((x < 0.35 * nx) & (y > 0.5 * ny)).astype(float),
        "road": (np.abs(x - 0.45 * nx) < 1.0).astype(float),
    }
    profile = dict(driver="GTiff", width=nx, height=ny, count=1, dtype="float32",
                   crs="EPSG:32633", transform=from_origin(400_000.0, 5_000_000.0, CELL_M,
                                                           CELL_M), nodata=-9999.0)
    for name, data in layers.items():
        with rasterio.open(folder / f"{name}.tif", "w", **profile) as dst:
            dst.write(data.astype(np.float32), 1)


def scenario_file(folder: Path, name: str, years: int, replicates: int) -> Path:
    noise, dispersal, extra = SCENARIOS[name]
    path = folder / f"{name}_{replicates}.toml"
    path.write_text(BASE.format(years=years, replicates=replicates, noise=noise,
                                dispersal=dispersal) + extra)
    return path


PHASES = [
    # (label, owner, attribute): the calls timed (a call inside another counts in the outer)
    ("noise", EnvironmentalNoise, "draw"),
    ("disturbance", Regime, "apply"),
    ("capacity_of_year", Actions, "capacity_for_year"),
    ("growth", cycle, "grow_pass"),
    ("dispersal", KernelMover, "move"),
    ("dispersal", BarrierKernelMover, "move"),
    ("dispersal", Walk, "move"),
    ("census", cycle, "census_pass"),
    ("replicate_setup", Replicate, "__init__"),
    ("batch_files", BatchSink, "__init__"),
    ("batch_files", BatchSink, "close"),
    ("write_results", run, "write_results"),
]


@contextlib.contextmanager
def timed_phases(spent: dict):
    """Wrap the calls of :data:`PHASES` so that their seconds add up in ``spent``."""
    depth = [0]

    def wrap(label, fn):
        def call(*args, **kwargs):
            if depth[0]:
                return fn(*args, **kwargs)
            depth[0] += 1
            t = time.perf_counter()
            try:
                return fn(*args, **kwargs)
            finally:
                spent[label] = spent.get(label, 0.0) + time.perf_counter() - t
                depth[0] -= 1
        return call

    saved = [(owner, name, owner.__dict__[name] if isinstance(owner, type)
              else getattr(owner, name)) for _, owner, name in PHASES]
    for label, owner, name in PHASES:
        setattr(owner, name, wrap(label, getattr(owner, name)))
    try:
        yield
    finally:
        for owner, name, fn in saved:
            setattr(owner, name, fn)


def whole_run(path: Path, out: Path) -> tuple[float, dict]:
    """Wall seconds of one ``gridpop run`` and the seconds in each phase."""
    scenario = load_scenario(path)
    spent: dict = {}
    with timed_phases(spent):
        t = time.perf_counter()
        gridpop.run(scenario, out, overwrite=True)
        total = time.perf_counter() - t
    shutil.rmtree(out)
    spent["other"] = total - sum(spent.values())
    return total, spent


def reference(tmp: Path) -> float:
    """Cell-years per second of bench_cycle's stochastic yearly cycle on 512^2 (its fastest
    year of a batch's second replicate)."""
    size, years = 512, 6
    folder = tmp / "reference"
    path = write_scenario(folder, size, years=years, stochastic=True, capacity=10.0)
    s = load_scenario(path)
    model = build_model(s, build_landscape(s, stochastic=True))
    seconds, _ = gridpop_cycle(model, folder / "batch", years)
    return size * size / seconds


def measure(tmp: Path, name: str, size: str, years: int, reps: int, repeat: int) -> dict:
    ny, nx = SIZES[size]
    folder = tmp / size
    if not (folder / "suitability.tif").exists():
        write_layers(folder, ny, nx)
    paths = {r: scenario_file(folder, name, years, r) for r in (reps, 2 * reps)}
    whole_run(scenario_file(folder, name, 2, 1), tmp / "warm")  # compile, fill caches
    best: dict[int, tuple[float, dict]] = {}
    for _ in range(repeat):
        for r, path in paths.items():
            total, phases = whole_run(path, tmp / "out")
            if r not in best or total < best[r][0]:
                best[r] = (total, phases)
    (t1, p1), (t2, p2) = best[reps], best[2 * reps]
    extra = max(t2 - t1, 1e-9)
    replicate_years = reps * years
    phases = {k: (p2.get(k, 0.0) - p1.get(k, 0.0)) / replicate_years
              for k in sorted(set(p1) | set(p2))}
    return {"scenario": name, "size": size, "shape": [ny, nx], "cells": ny * nx,
            "years": years, "replicates": [reps, 2 * reps],
            "run_seconds": [t1, t2], "extra_seconds_per_replicate_year": extra / replicate_years,
            "cell_years_per_s": ny * nx * replicate_years / extra,
            "phases_s_per_replicate_year": phases,
            "phases_whole_run_2R_s": p2}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", default="", help="comma-separated NAME_SIZE, e.g. plain_1e5")
    ap.add_argument("--repeat", type=int, default=3, help="runs of each, minimum taken")
    ap.add_argument("--quick", action="store_true", help="10^5 cells only, fewer years")
    args = ap.parse_args()
    cases = [(n, s) for s in SIZES for n in SCENARIOS]
    if args.quick:
        cases = [(n, s) for n, s in cases if s == "1e5"]
    if args.only:
        keep = set(args.only.split(","))
        cases = [(n, s) for n, s in cases if f"{n}_{s}" in keep]
    rows, refs = [], []
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        refs.append(max(reference(tmp) for _ in range(args.repeat)))
        print(f"reference: stochastic cycle 512^2, {refs[-1]:.3g} cell-years/s")
        for name, size in cases:
            big = size == "1e6"
            years = 4 if args.quick else (8 if big else 20)
            reps = 2 if big or args.quick else 4
            if name == "walk" and big:
                years = max(2, years // 2)
            row = measure(tmp, name, size, years, reps, args.repeat)
            refs.append(max(reference(tmp) for _ in range(args.repeat)))
            row["reference_cell_years_per_s"] = max(refs[-2:])
            row["slowdown_vs_cycle"] = row["reference_cell_years_per_s"] / row["cell_years_per_s"]
            rows.append(row)
            ph = row["phases_s_per_replicate_year"]
            print(f"{name:>10} {size}: {row['cell_years_per_s']:.3g} cell-years/s per extra "
                  f"replicate, {row['slowdown_vs_cycle']:.2f}x slower than the cycle "
                  f"({row['reference_cell_years_per_s']:.3g});  "
                  + ", ".join(f"{k} {v * 1e3:.1f}" for k, v in ph.items() if abs(v) > 5e-5)
                  + " ms/replicate-year")
    write_result("bench_scenario", {"scenarios": rows, "reference_cell_years_per_s": refs,
                                    "reference": "bench_cycle.gridpop_cycle, stochastic, "
                                                 "512^2, fastest year",
                                    "timing": f"minimum of {args.repeat} runs each"},
                 args.quick)


if __name__ == "__main__":
    main()

"""The yearly cycle over replicates, its accumulators, and a whole run.

Order of the steps from census year t to census year t+1 (one replicate):

1. **Environment**: this year's deviation of the log growth multiplier, a spatially correlated
   field, AR(1) in time (:class:`gridpop.demography.EnvironmentalNoise`).
2. **Habitat and disturbance**: the capacity of the year (restoration, habitat loss); fires and
   floods drawn for this replicate-year kill individuals (density-independent) and reduce
   capacity, which then recovers (:mod:`gridpop.disturbance`).
3. **Growth**: survival and births with density dependence against the cell's capacity of the
   year (:mod:`gridpop.demography`).
4. **Dispersal**: a fraction of the individuals leaves its cell and settles by kernel; those that
   land outside habitat or off the grid are lost (:mod:`gridpop.dispersal`).
5. **Census** at year t+1: abundance and the ledger
   ``N(t+1) = N(t) + births - deaths - disturbance_deaths + immigrants - emigrants``.

So abundance is counted after dispersal, before the next year's disturbance: a post-dispersal,
pre-breeding census.

The unit of work is a *batch* of replicates. A batch writes its per-year per-cell sums and its
ledger into its own folder of the run's working folder; the run combines batches in index order,
so results do not depend on how batches were scheduled.
"""

from __future__ import annotations

import dataclasses
import json
import math
import time
from dataclasses import dataclass
from pathlib import Path

import numba
import numpy as np

from . import __version__, rng
from ._jit import njit, pjit, prange
from .demography import MODELS, EnvironmentalNoise, step_deterministic, step_stochastic
from .dispersal import (
    Kernel,
    disperse_deterministic,
    disperse_stochastic,
    leaving_deterministic,
    leaving_stochastic,
    make_kernel,
    patch_retention_deterministic,
)
from .landscape import Landscape, build_landscape
from .outputs import (
    LEDGER_FIELDS,
    check_output,
    prepare_output,
    publish,
    write_json,
    write_ledger_csv,
    write_stack,
    year_labels,
)

N_FIELDS = len(LEDGER_FIELDS)
F_ABUND, F_BIRTHS, F_DEATHS, F_DIST, F_EMIG, F_IMMIG, F_LOSS, F_OCC = range(N_FIELDS)

ACCUMULATORS = {
    # name: (dtype, what one replicate adds per year and cell)
    "sum_n": (np.float64, "abundance"),
    "occupied": (np.int32, "1 if occupied"),
    "ever": (np.int32, "1 if occupied in this or an earlier year"),
}


@dataclass(frozen=True)
class Model:
    """Everything the yearly cycle needs, in cell units (the one place units are converted)."""

    years: int
    replicates: int
    seed: int
    batch_size: int
    stochastic: bool
    model_code: int
    rate: float
    survival: float
    theta: float
    allee_cells: float  # Allee density times cell area: individuals per cell
    capacity: np.ndarray
    initial: np.ndarray
    mask: np.ndarray
    labels: np.ndarray
    n_patches: int
    fraction: float
    density_dependence: float
    kernel: Kernel | None
    edge: str
    env: EnvironmentalNoise | None
    occupancy_threshold: float


def build_model(scenario, landscape: Landscape) -> Model:
    """Convert a scenario's user units (metres, hectares, years) to cell units on the grid."""
    g, d, grid = scenario.growth, scenario.dispersal, landscape.grid
    kernel = None
    if d.fraction > 0:
        kernel = make_kernel(d.kernel, mean_distance_m=d.mean_distance_m, tail=d.tail,
                             max_distance_m=d.max_distance_m, cell_w_m=grid.cell_width_m,
                             cell_h_m=grid.cell_height_m, grid_shape=grid.shape,
                             file=scenario.path)
    env = None
    if g.env_sd > 0:
        env = EnvironmentalNoise(grid.shape, grid.cell_width_m, grid.cell_height_m, g.env_sd,
                                 g.env_correlation_m, g.env_autocorrelation)
    r = scenario.run
    return Model(
        years=r.years, replicates=r.replicates, seed=r.seed, batch_size=r.batch_size,
        stochastic=g.stochastic, model_code=MODELS[g.model], rate=g.rate, survival=g.survival,
        theta=g.theta, allee_cells=g.allee_density * grid.cell_area_ha,
        capacity=np.ascontiguousarray(landscape.capacity, dtype=np.float64),
        initial=np.ascontiguousarray(landscape.initial, dtype=np.float64),
        mask=landscape.mask, labels=np.ascontiguousarray(landscape.patches.labels, np.int32),
        n_patches=landscape.patches.n, fraction=d.fraction,
        density_dependence=d.density_dependence, kernel=kernel, edge=d.edge, env=env,
        occupancy_threshold=scenario.output.occupancy_threshold,
    )


N_CHUNKS = 64  # fixed row chunking of reductions: sums do not depend on the thread count


@pjit
def _census(labels, n_patches, n, births, deaths, dist_deaths, threshold, ever,
            sum_n, occupied, ever_count):
    """Per-patch sums of the census fields and the per-cell accumulators of one year.

    Returns (n_chunks, n_patches + 1, 5) partial sums of abundance, births, deaths, disturbance
    deaths and occupied cells (index 0: all cells); the caller adds chunks in order.
    """
    ny, nx = n.shape
    rows = (ny + N_CHUNKS - 1) // N_CHUNKS
    part = np.zeros((N_CHUNKS, n_patches + 1, 5))
    for c in prange(N_CHUNKS):
        for i in range(c * rows, min(ny, (c + 1) * rows)):
            for j in range(nx):
                v = n[i, j]
                occ = 1 if v >= threshold else 0
                if occ:
                    ever[i, j] = 1
                sum_n[i, j] += v
                occupied[i, j] += occ
                ever_count[i, j] += ever[i, j]
                b = births[i, j]
                dd = deaths[i, j]
                xd = dist_deaths[i, j]
                if v == 0.0 and b == 0.0 and dd == 0.0 and xd == 0.0:
                    continue
                _add5(part, c, 0, v, b, dd, xd, occ)
                p = labels[i, j]
                if p > 0:
                    _add5(part, c, p, v, b, dd, xd, occ)
    return part


@njit
def _add5(part, c, q, v, b, dd, xd, occ):
    part[c, q, 0] += v
    part[c, q, 1] += b
    part[c, q, 2] += dd
    part[c, q, 3] += xd
    part[c, q, 4] += occ


@njit
def _patch_sum(labels, n_patches, x):
    out = np.zeros(n_patches + 1)
    ny, nx = x.shape
    for i in range(ny):
        for j in range(nx):
            v = x[i, j]
            if v != 0.0:
                out[0] += v
                p = labels[i, j]
                if p > 0:
                    out[p] += v
    return out


class BatchSink:
    """Per-year accumulators and ledger of one batch, memory-mapped in the batch folder."""

    def __init__(self, folder: Path, model: Model, replicates: range):
        folder.mkdir(parents=True, exist_ok=True)
        shape = (model.years + 1, *model.capacity.shape)
        self.acc = {name: np.lib.format.open_memmap(folder / f"{name}.npy", mode="w+",
                                                    dtype=dt, shape=shape)
                    for name, (dt, _) in ACCUMULATORS.items()}
        self.ledger = np.zeros((len(replicates), model.years + 1, model.n_patches + 1,
                                N_FIELDS))
        self.folder = folder
        self.replicates = replicates

    def close(self) -> None:
        for a in self.acc.values():
            a.flush()
        np.save(self.folder / "ledger.npy", self.ledger)
        (self.folder / "done").write_text("ok\n")


def simulate_replicate(model: Model, replicate: int, sink: BatchSink, row: int) -> None:
    """Run one replicate through all years, adding its results to ``sink`` at ledger ``row``."""
    shape = model.capacity.shape
    n = model.initial.copy()
    out = np.empty(shape)
    births = np.zeros(shape)
    deaths = np.zeros(shape)
    dist_deaths = np.zeros(shape)
    ever = np.zeros(shape, np.uint8)
    ledger = sink.ledger[row]
    settle = model.capacity > 0
    env_state = None
    zeros = np.zeros(shape)

    def census(t):
        part = _census(model.labels, model.n_patches, n, births, deaths, dist_deaths,
                       model.occupancy_threshold, ever, sink.acc["sum_n"][t],
                       sink.acc["occupied"][t], sink.acc["ever"][t])
        s = part.sum(axis=0)
        ledger[t, :, F_ABUND] = s[:, 0]
        ledger[t, :, F_BIRTHS] = s[:, 1]
        ledger[t, :, F_DEATHS] = s[:, 2]
        ledger[t, :, F_DIST] = s[:, 3]
        ledger[t, :, F_OCC] = s[:, 4]

    census(0)
    for t in range(1, model.years + 1):
        year = t - 1  # the transition from census year t-1 to t draws the numbers of year t-1
        if model.env is not None:
            env, env_state = model.env.draw(model.seed, replicate, year, env_state)
        else:
            env = zeros
        k = model.capacity
        if model.stochastic:
            step_stochastic(n, k, env, out, births, deaths, model.model_code, model.rate,
                            model.survival, model.theta, model.allee_cells,
                            _key(model, replicate, year, rng.STREAM_SURVIVAL),
                            _key(model, replicate, year, rng.STREAM_BIRTHS))
        else:
            step_deterministic(n, k, env, out, births, deaths, model.model_code, model.rate,
                               model.survival, model.theta, model.allee_cells)
        n, out = out, n
        if model.kernel is not None:
            _disperse(model, replicate, year, n, settle, ledger[t])
        census(t)


def _key(model: Model, replicate: int, year: int, stream: int) -> np.uint64:
    return np.uint64(rng.year_key(model.seed, replicate, year, stream))


def _disperse(model: Model, replicate: int, year: int, n: np.ndarray, settle: np.ndarray,
              row: np.ndarray) -> None:
    """Move dispersers in place in ``n`` and write the movement columns of one ledger row."""
    if model.stochastic:
        leaving = leaving_stochastic(n, model.capacity, model.fraction,
                                     model.density_dependence,
                                     _key(model, replicate, year, rng.STREAM_EMIGRATION))
        arrivals, stayed, retained = disperse_stochastic(
            leaving, settle, model.labels, model.n_patches, model.kernel, model.edge,
            _key(model, replicate, year, rng.STREAM_DISPERSAL))
    else:
        leaving = leaving_deterministic(n, model.capacity, model.fraction,
                                        model.density_dependence)
        arrivals, stayed = disperse_deterministic(leaving, model.kernel, model.edge)
        retained = patch_retention_deterministic(leaving, model.labels, settle, model.kernel,
                                                 model.edge, model.n_patches)
    settled = np.where(settle, arrivals, 0.0)
    n -= leaving
    n += settled
    out_p = _patch_sum(model.labels, model.n_patches, leaving)
    in_p = _patch_sum(model.labels, model.n_patches, settled)
    stay = float(stayed.sum())
    row[:, F_EMIG] = out_p - retained
    row[:, F_IMMIG] = in_p - retained
    row[0, F_EMIG] = out_p[0] - stay
    row[0, F_IMMIG] = in_p[0] - stay
    row[:, F_LOSS] = row[:, F_EMIG] - row[:, F_IMMIG]
    row[0, F_LOSS] = out_p[0] - in_p[0]


def batches(model: Model) -> list[range]:
    b = model.batch_size
    return [range(s, min(s + b, model.replicates)) for s in range(0, model.replicates, b)]


def run_batch(model: Model, reps: range, folder: Path, progress=None) -> None:
    """Run one batch of replicates into ``folder`` (a ``done`` marker is written last)."""
    sink = BatchSink(folder, model, reps)
    for row, rep in enumerate(reps):
        simulate_replicate(model, rep, sink, row)
        if progress is not None:
            progress.update(1)
    sink.close()


def combine(work: Path, model: Model, parts: list[Path]) -> dict[str, np.ndarray]:
    """Add the batches' accumulators in batch order into memory-mapped totals."""
    shape = (model.years + 1, *model.capacity.shape)
    totals = {name: np.lib.format.open_memmap(work / f"total_{name}.npy", mode="w+",
                                              dtype=dt, shape=shape)
              for name, (dt, _) in ACCUMULATORS.items()}
    for name, total in totals.items():
        for part in parts:
            src = np.load(part / f"{name}.npy", mmap_mode="r")
            for t in range(shape[0]):
                total[t] += src[t]
        total.flush()
    return totals


def run(scenario, out_dir, *, overwrite: bool = False, progress: bool = False) -> Path:
    """Run a scenario and write its results to ``out_dir``; return the output folder."""
    from tqdm import tqdm

    started = time.time()
    out_dir = Path(out_dir)
    check_output(out_dir, overwrite=overwrite)
    landscape = build_landscape(scenario, stochastic=scenario.growth.stochastic)
    model = build_model(scenario, landscape)
    work = prepare_output(out_dir, overwrite=overwrite)
    parts = []
    with tqdm(total=model.replicates, unit="replicate", disable=not progress,
              desc="gridpop run") as bar:
        for b, reps in enumerate(batches(model)):
            folder = work / "batches" / f"{b:05d}"
            run_batch(model, reps, folder, bar)
            parts.append(folder)
    files = write_results(work, scenario, model, landscape, parts)
    manifest = {
        "gridpop_version": __version__,
        "scenario": str(scenario.path),
        "scenario_sha256": scenario.sha256,
        "seed": model.seed,
        "years": model.years,
        "replicates": model.replicates,
        "stochastic": model.stochastic,
        "grid": {"crs_wkt": landscape.grid.crs.to_wkt(),
                 "transform": list(landscape.grid.transform)[:6],
                 "shape": list(landscape.grid.shape)},
        "files": sorted(files),
        "numba_threads": numba.get_num_threads(),
        "wall_time_s": round(time.time() - started, 3),
        "complete": True,
    }
    write_json(work / "run.json", manifest)
    publish(work, out_dir)
    return out_dir


def write_results(work: Path, scenario, model: Model, landscape: Landscape,
                  parts: list[Path]) -> list[str]:
    """Combine batches and write stacks and tables; remove the batch folders."""
    import shutil

    totals = combine(work, model, parts)
    reps = model.replicates
    grid, mask = landscape.grid, landscape.mask
    labels = year_labels(model.years)
    files = []
    wanted = scenario.output.rasters
    stacks = {"abundance": "sum_n", "occupancy": "occupied", "colonised": "ever"}
    for name, acc in stacks.items():
        if name in wanted:
            total = totals[acc]
            write_stack(work / f"{name}.tif", grid, mask,
                        (total[t] / reps for t in range(model.years + 1)), labels)
            files.append(f"{name}.tif")
    ledger = np.concatenate([np.load(p / "ledger.npy") for p in parts], axis=0)
    write_ledger_csv(work / "timeseries.csv", ledger[:, :, 0, :], integers=model.stochastic)
    files.append("timeseries.csv")
    if scenario.output.patches_csv and model.n_patches > 0:
        write_ledger_csv(work / "patches.csv", ledger[:, :, 1:, :], patches=True,
                         integers=model.stochastic)
        files.append("patches.csv")
    del totals
    for name in ACCUMULATORS:
        (work / f"total_{name}.npy").unlink()
    shutil.rmtree(work / "batches")
    return files


def describe(scenario, landscape: Landscape, model: Model) -> list[str]:
    """What the tool understood, for ``gridpop check``."""
    g, grid = scenario.growth, landscape.grid
    p = landscape.patches
    k = model.capacity
    lines = [f"scenario: {scenario.path}",
             f"grid: {grid.shape[0]} rows x {grid.shape[1]} columns, cells "
             f"{grid.cell_width_m:g} x {grid.cell_height_m:g} m ({grid.cell_area_ha:g} ha), "
             f"CRS {grid.crs.to_string()}",
             f"study area: {int(landscape.mask.sum())} cells "
             f"({landscape.mask.sum() * grid.cell_area_ha:,.1f} ha)"]
    lines += [f"  {note}" for note in landscape.notes]
    lines.append(f"habitat: {int((k > 0).sum())} cells with capacity, total capacity "
                 f"{k.sum():,.1f} individuals")
    if p.n:
        lines.append(f"patches: {p.n} (8-neighbour); largest: patch 1, {p.area_ha[1]:,.1f} ha, "
                     f"capacity {p.capacity[1]:,.1f}")
    else:
        lines.append("patches: none (no cell has capacity)")
    lines.append(f"initial population: {model.initial.sum():,.1f} individuals")
    mode = "stochastic (whole individuals)" if g.stochastic else "deterministic (expectations)"
    lines.append(f"growth: {g.model}, r = {g.rate:g} (lambda0 = {math.exp(g.rate):.4g}), "
                 f"survival = {g.survival:g}, {mode}")
    if model.env is not None:
        lines.append(f"environment: sd {g.env_sd:g}, correlation length "
                     f"{g.env_correlation_m:g} m, autocorrelation {g.env_autocorrelation:g}")
    if model.kernel is not None:
        d = scenario.dispersal
        lines.append(f"dispersal: {d.fraction:g} of individuals per year, {d.kernel} kernel, "
                     f"mean distance {d.mean_distance_m:g} m, radius {model.kernel.radius} "
                     f"cells, {d.edge} edge")
    else:
        lines.append("dispersal: none (fraction = 0)")
    lines.append(f"run: {model.years} years x {model.replicates} replicates, seed {model.seed}")
    return lines


def scenario_summary(scenario) -> dict:
    """The parameters as read, for manifests and reports."""
    out = {}
    for name in ("run", "grid", "habitat", "initial", "growth", "dispersal", "output"):
        out[name] = {k: (str(v) if isinstance(v, Path) else v)
                     for k, v in dataclasses.asdict(getattr(scenario, name)).items()}
    return json.loads(json.dumps(out, default=str))

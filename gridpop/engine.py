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
from .actions import Actions, apply_actions
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
from .disturbance import Regime, build_regime
from .landscape import Landscape, build_landscape
from .outputs import (
    LEDGER_FIELDS,
    check_output,
    prepare_output,
    publish,
    write_events_csv,
    write_json,
    write_ledger_csv,
    write_stack,
    year_labels,
)

N_FIELDS = len(LEDGER_FIELDS)
F_ABUND, F_BIRTHS, F_DEATHS, F_DIST, F_EMIG, F_IMMIG, F_LOSS, F_OCC = range(N_FIELDS)



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
    landscape: Landscape  # with the actions applied
    capacity: np.ndarray
    initial: np.ndarray
    labels: np.ndarray
    n_patches: int
    fraction: float
    density_dependence: float
    kernel: Kernel | None
    edge: str
    env: EnvironmentalNoise | None
    occupancy_threshold: float
    actions: Actions
    regime: Regime | None

    @property
    def accumulators(self) -> dict:
        """Per-year per-cell sums this model writes: name -> dtype."""
        acc = {"sum_n": np.float64, "occupied": np.int32, "ever": np.int32}
        if self.regime is not None:
            acc.update({f"n_{kind}": np.int32 for kind in self.disturbance_kinds})
        return acc

    @property
    def disturbance_kinds(self) -> list[str]:
        return sorted({t.kind for t in self.regime.tables}) if self.regime else []


def build_model(scenario, base: Landscape) -> Model:
    """Apply the scenario's actions to its base landscape and convert its user units (metres,
    hectares, years) to cell units on the grid: the one place where this happens."""
    actions = apply_actions(scenario, base)
    landscape = actions.landscape
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
        landscape=landscape, labels=np.ascontiguousarray(landscape.patches.labels, np.int32),
        n_patches=landscape.patches.n, fraction=d.fraction,
        density_dependence=d.density_dependence, kernel=kernel, edge=d.edge, env=env,
        occupancy_threshold=scenario.output.occupancy_threshold,
        actions=actions, regime=build_regime(scenario, landscape, actions),
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
    """Per-year accumulators, ledger and events of one batch, kept in the batch folder.

    Accumulators (:attr:`Model.accumulators`) are memory-mapped ``(years + 1, ny, nx)`` arrays:
    ``sum_n`` (abundance), ``occupied`` (1 if occupied), ``ever`` (1 if occupied in this or an
    earlier year) and, with disturbance, ``n_fire`` / ``n_flood`` (1 if hit that year).
    """

    def __init__(self, folder: Path, model: Model, replicates: range):
        folder.mkdir(parents=True, exist_ok=True)
        shape = (model.years + 1, *model.capacity.shape)
        self.acc = {name: np.lib.format.open_memmap(folder / f"{name}.npy", mode="w+",
                                                    dtype=dt, shape=shape)
                    for name, dt in model.accumulators.items()}
        self.ledger = np.zeros((len(replicates), model.years + 1, model.n_patches + 1,
                                N_FIELDS))
        self.events: list[tuple] = []
        self.folder = folder
        self.replicates = replicates

    def close(self) -> None:
        for a in self.acc.values():
            a.flush()
        np.save(self.folder / "ledger.npy", self.ledger)
        with open(self.folder / "events.json", "w") as fh:
            json.dump(self.events, fh)
        (self.folder / "done").write_text("ok\n")


class Replicate:
    """One replicate's state and the yearly cycle that advances it (see the module docstring).

    ``advance(t)`` moves the population from census year ``t - 1`` to census year ``t`` and
    writes ledger row ``t``. The random numbers of that transition are those of year ``t - 1``.
    """

    def __init__(self, model: Model, replicate: int, ledger: np.ndarray):
        self.model, self.replicate, self.ledger = model, replicate, ledger
        shape = model.capacity.shape
        self.n = model.initial.copy()
        self._out = np.empty(shape)
        self.births = np.zeros(shape)
        self.deaths = np.zeros(shape)
        self.dist_deaths = np.zeros(shape)
        self.ever = np.zeros(shape, np.uint8)
        self._zeros = np.zeros(shape)
        self._env_state = None
        self._dist_state = model.regime.start() if model.regime is not None else None
        self.effects = None  # the last year's disturbance effects

    def advance(self, t: int) -> None:
        m, year = self.model, t - 1
        env = self._zeros
        if m.env is not None:
            env, self._env_state = m.env.draw(m.seed, self.replicate, year, self._env_state)
        k = m.actions.capacity_for_year(year)
        if m.regime is not None:
            self.effects = m.regime.apply(self._dist_state, self.n, k, seed=m.seed,
                                          replicate=self.replicate, year=year,
                                          stochastic=m.stochastic)
            self.dist_deaths = self.effects.deaths
            k = self.effects.capacity
        if m.stochastic:
            step_stochastic(self.n, k, env, self._out, self.births, self.deaths, m.model_code,
                            m.rate, m.survival, m.theta, m.allee_cells,
                            _key(m, self.replicate, year, rng.STREAM_SURVIVAL),
                            _key(m, self.replicate, year, rng.STREAM_BIRTHS))
        else:
            step_deterministic(self.n, k, env, self._out, self.births, self.deaths,
                               m.model_code, m.rate, m.survival, m.theta, m.allee_cells)
        self.n, self._out = self._out, self.n
        row = self.ledger[t]
        row[:, F_EMIG:F_LOSS + 1] = 0.0
        if m.kernel is not None:
            _disperse(m, self.replicate, year, self.n, k, row)

    def census(self, t: int, sink: BatchSink) -> None:
        m = self.model
        part = _census(m.labels, m.n_patches, self.n, self.births, self.deaths,
                       self.dist_deaths, m.occupancy_threshold, self.ever,
                       sink.acc["sum_n"][t], sink.acc["occupied"][t], sink.acc["ever"][t])
        s = part.sum(axis=0)
        row = self.ledger[t]
        row[:, F_ABUND] = s[:, 0]
        row[:, F_BIRTHS] = s[:, 1]
        row[:, F_DEATHS] = s[:, 2]
        row[:, F_DIST] = s[:, 3]
        row[:, F_OCC] = s[:, 4]
        eff = self.effects
        if t > 0 and eff is not None:
            for kind, hit in (("fire", eff.burned), ("flood", eff.flooded)):
                if hit is not None:
                    sink.acc[f"n_{kind}"][t] += hit
            sink.events += [(self.replicate, t, *e) for e in eff.events]


def simulate_replicate(model: Model, replicate: int, sink: BatchSink, row: int) -> None:
    """Run one replicate through all years, adding its results to ``sink`` at ledger ``row``."""
    rep = Replicate(model, replicate, sink.ledger[row])
    rep.census(0, sink)
    for t in range(1, model.years + 1):
        rep.advance(t)
        rep.census(t, sink)


def _key(model: Model, replicate: int, year: int, stream: int) -> np.uint64:
    return np.uint64(rng.year_key(model.seed, replicate, year, stream))


def _disperse(model: Model, replicate: int, year: int, n: np.ndarray, k: np.ndarray,
              row: np.ndarray) -> None:
    """Move dispersers in place in ``n`` and write the movement columns of one ledger row.

    Dispersers settle only where the capacity of the year ``k`` is positive; the rest are lost.
    """
    settle = k > 0
    if model.stochastic:
        leaving = leaving_stochastic(n, k, model.fraction,
                                     model.density_dependence,
                                     _key(model, replicate, year, rng.STREAM_EMIGRATION))
        arrivals, stayed, retained = disperse_stochastic(
            leaving, settle, model.labels, model.n_patches, model.kernel, model.edge,
            _key(model, replicate, year, rng.STREAM_DISPERSAL))
    else:
        leaving = leaving_deterministic(n, k, model.fraction,
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
    totals = {}
    for name, dt in model.accumulators.items():
        total = np.lib.format.open_memmap(work / f"total_{name}.npy", mode="w+", dtype=dt,
                                          shape=shape)
        for part in parts:
            src = np.load(part / f"{name}.npy", mmap_mode="r")
            for t in range(shape[0]):
                total[t] += src[t]
        total.flush()
        totals[name] = total
    return totals


def run(scenario, out_dir, *, overwrite: bool = False, progress: bool = False) -> Path:
    """Run a scenario and write its results to ``out_dir``; return the output folder."""
    from tqdm import tqdm

    started = time.time()
    out_dir = Path(out_dir)
    check_output(out_dir, overwrite=overwrite)
    model = build_model(scenario, build_landscape(scenario, stochastic=scenario.growth.stochastic))
    work = prepare_output(out_dir, overwrite=overwrite)
    parts = []
    with tqdm(total=model.replicates, unit="replicate", disable=not progress,
              desc="gridpop run") as bar:
        for b, reps in enumerate(batches(model)):
            folder = work / "batches" / f"{b:05d}"
            run_batch(model, reps, folder, bar)
            parts.append(folder)
    files = write_results(work, scenario, model, parts)
    grid = model.landscape.grid
    manifest = {
        "gridpop_version": __version__,
        "scenario": str(scenario.path),
        "scenario_sha256": scenario.sha256,
        "seed": model.seed,
        "years": model.years,
        "replicates": model.replicates,
        "stochastic": model.stochastic,
        "grid": {"crs_wkt": grid.crs.to_wkt(), "transform": list(grid.transform)[:6],
                 "shape": list(grid.shape)},
        "files": sorted(files),
        "numba_threads": numba.get_num_threads(),
        "wall_time_s": round(time.time() - started, 3),
        "complete": True,
    }
    write_json(work / "run.json", manifest)
    publish(work, out_dir)
    return out_dir


STACKS = {
    # output raster name: (accumulator, what the band holds)
    "abundance": ("sum_n", "mean abundance over replicates"),
    "occupancy": ("occupied", "fraction of replicates in which the cell is occupied"),
    "colonised": ("ever", "fraction of replicates in which the cell has been occupied by then"),
    "burned": ("n_fire", "fraction of replicates in which the cell burned that year"),
    "flooded": ("n_flood", "fraction of replicates in which the cell flooded that year"),
}


def write_results(work: Path, scenario, model: Model, parts: list[Path]) -> list[str]:
    """Combine batches and write stacks and tables; remove the batch folders."""
    import shutil

    totals = combine(work, model, parts)
    reps = model.replicates
    grid, mask = model.landscape.grid, model.landscape.mask
    labels = year_labels(model.years)
    files = []
    for name, (acc, _) in STACKS.items():
        if acc in totals and (name in scenario.output.rasters or acc.startswith("n_")):
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
    if model.regime is not None:
        events = [e for p in parts for e in json.loads((p / "events.json").read_text())]
        write_events_csv(work / "events.csv", events)
        files.append("events.csv")
    for name in list(totals):
        del totals[name]
        (work / f"total_{name}.npy").unlink()
    shutil.rmtree(work / "batches")
    return files


def describe(scenario, model: Model) -> list[str]:
    """What the tool understood, for ``gridpop check``."""
    landscape = model.landscape
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
    lines += [f"action {note}" for note in model.actions.notes]
    if model.regime is not None:
        lines += [f"disturbance {note}" for note in model.regime.notes]
    lines.append(f"run: {model.years} years x {model.replicates} replicates, seed {model.seed}")
    return lines


def scenario_summary(scenario) -> dict:
    """The parameters as read, for manifests and reports."""
    out = {}
    for name in ("run", "grid", "habitat", "initial", "growth", "dispersal", "output"):
        out[name] = {k: (str(v) if isinstance(v, Path) else v)
                     for k, v in dataclasses.asdict(getattr(scenario, name)).items()}
    return json.loads(json.dumps(out, default=str))

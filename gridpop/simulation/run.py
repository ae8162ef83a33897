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

import contextlib
import csv
import dataclasses
import errno
import functools
import json
import math
import os
import shutil
import time
import uuid
from dataclasses import dataclass
from pathlib import Path

import numba
import numpy as np
from scipy import ndimage

from . import __version__, rng
from ._jit import njit, pjit, prange
from .actions import Actions, apply_actions
from .demography import MODELS, EnvironmentalNoise, grow_row
from .dispersal import (
    STENCIL_MAX_RADIUS,
    STENCIL_MAX_RADIUS_SEPARABLE,
    Kernel,
    disperse_deterministic,
    disperse_stochastic,
    leaving_row_deterministic,
    leaving_row_stochastic,
    make_kernel,
    settle_fields,
    spread,
    stay_share,
    thin,
)
from .disturbance import Regime, build_regime
from .errors import RunStateError
from .landscape import Landscape, align_raster, build_landscape
from .outputs import (
    LEDGER_FIELDS,
    check_output,
    prepare_output,
    publish,
    working_folder,
    write_events_csv,
    write_json,
    write_ledger_csv,
    write_stack,
    year_labels,
)
from .resistance import (
    Walk,
    WalkParams,
    corridor_share,
    patch_connectivity,
    permeability_from_resistance,
    resistance_from_suitability,
)
from .scenario import OUTPUT_RASTERS
from .summary import FocusCensus, focus_census, parameters, write_summary

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
    walk: Walk | None
    regions: np.ndarray | None  # kernel dispersal across barriers: region labels, 0 = barrier
    n_regions: int
    crossing_survival: float
    edge: str
    env: EnvironmentalNoise | None
    occupancy_threshold: float
    actions: Actions
    regime: Regime | None
    focus: FocusCensus | None = None  # focus areas counted at each census (gridpop.summary)
    # derived arrays reused from year to year (e.g. dispersal.SettleFields)
    cache: dict = dataclasses.field(default_factory=dict, compare=False, repr=False)

    @property
    def accumulators(self) -> dict:
        """Per-year per-cell sums this model writes: name -> dtype."""
        acc = {"sum_n": np.float64, "occupied": np.int32, "ever": np.int32}
        if self.regime is not None:
            acc.update({f"n_{kind}": np.int32 for kind in self.disturbance_kinds})
        if self.walk is not None:
            acc["visits"] = np.float64
        return acc

    @functools.cached_property
    def connectivity(self) -> np.ndarray | None:
        """Walk method: (P, P) probability that a disperser leaving patch i settles in patch j
        in one year (expected walk on the year-0 landscape, start cells weighted by capacity)."""
        if self.walk is None:
            return None
        w = self.walk
        return patch_connectivity(self.labels, self.n_patches, w.permeability,
                                  w.quality(self.capacity), w.params, weights=self.capacity,
                                  entry_survival=w.entry_survival)

    @property
    def expected_kernel(self) -> bool:
        """Expected numbers move by the kernel with no barrier: the growth pass counts who
        stays home and who settles in its own patch (:func:`_grow`), the dispersal step only
        spreads."""
        return self.kernel is not None and not self.stochastic and self.regions is None

    @property
    def disturbance_kinds(self) -> list[str]:
        return sorted({t.kind for t in self.regime.tables}) if self.regime else []


def build_model(scenario, base: Landscape) -> Model:
    """Apply the scenario's actions to its base landscape and convert its user units (metres,
    hectares, years) to cell units on the grid: the one place where this happens."""
    actions = apply_actions(scenario, base)
    landscape = actions.landscape
    g, d, grid = scenario.growth, scenario.dispersal, landscape.grid
    kernel = walk = regions = None
    n_regions, crossing_survival = 0, 1.0
    barrier = actions.barrier
    if d.fraction > 0 and d.method == "walk":
        walk = _walk_surface(scenario, landscape, actions)
    elif d.fraction > 0:
        kernel = make_kernel(d.kernel, mean_distance_m=d.mean_distance_m, tail=d.tail,
                             max_distance_m=d.max_distance_m, cell_w_m=grid.cell_width_m,
                             cell_h_m=grid.cell_height_m, grid_shape=grid.shape,
                             file=scenario.path)
        if barrier is not None and barrier.max() > 0:
            regions, n_regions = ndimage.label(barrier == 0)  # 4-neighbour regions
            crossing_survival = 1.0 - float(barrier.max())
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
        density_dependence=d.density_dependence, kernel=kernel, walk=walk, regions=regions,
        n_regions=n_regions, crossing_survival=crossing_survival, edge=d.edge, env=env,
        occupancy_threshold=scenario.output.occupancy_threshold,
        actions=actions, regime=build_regime(scenario, landscape, actions),
        focus=focus_census(scenario, grid),
    )


def _walk_surface(scenario, landscape: Landscape, actions: Actions) -> Walk:
    """Permeability, barriers and settlement of the walk engine."""
    d, grid = scenario.dispersal, landscape.grid
    if d.resistance is not None:
        res = align_raster(d.resistance, grid, kind="continuous", file=scenario.path,
                           section="dispersal", key="resistance").data
    else:
        res = resistance_from_suitability(landscape.suitability, d.resistance_max,
                                          d.resistance_shape)
    res = np.where(landscape.mask, res, np.nan)
    if actions.resistance_factor is not None:
        res = res * actions.resistance_factor
    perm = permeability_from_resistance(res)
    entry = None
    if actions.barrier is not None:
        perm[actions.barrier >= 1.0] = 0.0
        partial = (actions.barrier > 0) & (actions.barrier < 1.0)
        if partial.any():
            entry = np.where(partial, 1.0 - actions.barrier, 1.0)
    params = WalkParams(walk_length=d.walk_length, death_per_resistance=d.death_per_resistance,
                        settle_exponent=d.settle_exponent, heading_bias=d.heading_bias)
    full = scenario.habitat.capacity_per_ha * grid.cell_area_ha
    return Walk(np.ascontiguousarray(perm), entry, full, params)


N_CHUNKS = 64  # fixed row chunking of reductions: sums do not depend on the thread count
N_SUMS = 6  # fields per patch in the partial sums of _grow and _count


def _patch_totals(part: np.ndarray) -> np.ndarray:
    """(n_patches + 1, N_SUMS) sums from the chunk partials of :func:`_grow` or
    :func:`_count`: chunks added in order, row 0 the whole landscape (the patches and the cells
    of no patch, which the kernels keep in a last row)."""
    s = part.sum(axis=0)
    s[0] = s.sum(axis=0)
    return s[:-1]


@njit
def _row_of(a, i):
    """Row ``i`` of a field, or its only row: a one-row array stands for a field uniform
    along the grid's columns ((1, nx)), or everywhere ((1, 1), where the kernels allow it)."""
    return a[i] if a.shape[0] > 1 else a[0]


@njit
def _run_sums(part, c, labels, n_patches, x0, x1, x2, x3, x4, x5):
    """Add the sums of six 1-D fields over one row to ``part[c, patch]`` (patch index
    ``n_patches + 1`` for the cells of no patch). Each run of one patch along the row is summed
    in registers and added once; the six sums are independent chains, so one pass costs about
    what one field would."""
    run = labels[0]
    r0 = r1 = r2 = r3 = r4 = r5 = 0.0
    for j in range(labels.size):
        p = labels[j]
        if p != run:
            _add_run(part, c, run if run > 0 else n_patches + 1, r0, r1, r2, r3, r4, r5)
            run = p
            r0 = r1 = r2 = r3 = r4 = r5 = 0.0
        r0 += x0[j]
        r1 += x1[j]
        r2 += x2[j]
        r3 += x3[j]
        r4 += x4[j]
        r5 += x5[j]
    _add_run(part, c, run if run > 0 else n_patches + 1, r0, r1, r2, r3, r4, r5)


@njit
def _add_run(part, c, q, r0, r1, r2, r3, r4, r5):
    part[c, q, 0] += r0
    part[c, q, 1] += r1
    part[c, q, 2] += r2
    part[c, q, 3] += r3
    part[c, q, 4] += r4
    part[c, q, 5] += r5


@pjit
def _grow(labels, n_patches, n, k, env, out, leaving, model, r, s, theta, allee_a, stochastic,
          fraction, dd, keys, share, own, anywhere):
    """Local growth of every cell, then emigration: ``out`` gets the residents (grown minus
    emigrants), ``leaving`` the emigrants (zero when ``fraction == 0``).

    ``env``: the year's environmental field, or (1, 1) for one deviation everywhere.
    ``keys``: year keys of survival, births and emigration (stochastic). When ``own`` is not
    empty (expected kernel dispersal, :func:`gridpop.dispersal.settle_fields`), the emigrants
    are also summed weighted by ``share`` (of them landing back home, where ``k > 0``; (1, nx)
    when uniform), by ``own`` and by ``anywhere``: the stayers, those that settle in their own
    patch and those that settle.

    Returns (n_chunks, n_patches + 2, N_SUMS) partial sums per chunk of rows and patch (row 0
    unused, the last row the cells of no patch; :func:`_patch_totals` adds them up) of births,
    deaths, emigrants and the three weighted sums.
    """
    ny, nx = n.shape
    rows = (ny + N_CHUNKS - 1) // N_CHUNKS
    part = np.zeros((N_CHUNKS, n_patches + 2, N_SUMS))
    weighted = own.shape[0] > 0
    for c in prange(N_CHUNKS):
        births, deaths = np.empty(nx), np.empty(nx)
        home, mine, anyw = np.zeros(nx), np.zeros(nx), np.zeros(nx)
        for i in range(c * rows, min(ny, (c + 1) * rows)):
            o, lv, ki = out[i], leaving[i], k[i]
            grow_row(n[i], ki, _row_of(env, i), o, births, deaths, model, r, s, theta, allee_a,
                     stochastic, keys[0], keys[1], i * nx)
            if fraction == 0.0:
                lv[:] = 0.0
            elif stochastic:
                leaving_row_stochastic(o, ki, fraction, dd, keys[2], i * nx, lv)
            else:
                leaving_row_deterministic(o, ki, fraction, dd, lv)
            for j in range(nx):
                o[j] -= lv[j]
            if weighted:
                sh, ow, an = _row_of(share, i), own[i], anywhere[i]
                for j in range(nx):
                    home[j] = lv[j] * sh[j] if ki[j] > 0.0 else 0.0
                    mine[j] = lv[j] * ow[j]
                    anyw[j] = lv[j] * an[j]
            _run_sums(part, c, labels[i], n_patches, births, deaths, lv, home, mine, anyw)
    return part


@pjit
def _count(labels, n_patches, k, n, arrivals, stayed, dist_deaths, threshold, ever, sum_n,
           occupied, ever_count):
    """Settle the year's arrivals, then take the census.

    ``n`` holds the residents on entry and the census abundance on return: ``n + arrivals``
    where capacity ``k > 0`` (arrivals elsewhere are lost). ``arrivals``, ``stayed`` (the
    dispersers that landed back home) and ``dist_deaths`` (the year's disturbance deaths) may
    be (1, nx) zeros. Adds this year's per-cell abundance, occupancy and ever-occupied to the
    accumulators (``ever``: this replicate's cells occupied so far).

    Returns partial sums as :func:`_grow` does, of abundance, disturbance deaths, occupied
    cells, settled arrivals and settled stayers (the last field is 0).
    """
    ny, nx = n.shape
    rows = (ny + N_CHUNKS - 1) // N_CHUNKS
    part = np.zeros((N_CHUNKS, n_patches + 2, N_SUMS))
    for c in prange(N_CHUNKS):
        occ, settled, home, zero = np.empty(nx), np.empty(nx), np.empty(nx), np.zeros(nx)
        for i in range(c * rows, min(ny, (c + 1) * rows)):
            v, ki, e, sn, oc, ec = n[i], k[i], ever[i], sum_n[i], occupied[i], ever_count[i]
            a, st = _row_of(arrivals, i), _row_of(stayed, i)
            for j in range(nx):
                here = ki[j] > 0.0
                settled[j] = a[j] if here else 0.0
                home[j] = st[j] if here else 0.0
                v[j] += settled[j]
                hit = v[j] >= threshold
                e[j] = 1 if hit or e[j] else 0
                occ[j] = 1.0 if hit else 0.0
                sn[j] += v[j]
                oc[j] += 1 if hit else 0
                ec[j] += e[j]
            _run_sums(part, c, labels[i], n_patches, v, _row_of(dist_deaths, i), occ, settled,
                      home, zero)
    return part


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
        self.focus = (model.focus.table(len(replicates), model.years)
                        if model.focus is not None else None)

    def close(self) -> None:
        for a in self.acc.values():
            a.flush()
        np.save(self.folder / "ledger.npy", self.ledger)
        with open(self.folder / "events.json", "w") as fh:
            json.dump(self.events, fh)
        if self.focus is not None:
            np.save(self.folder / "focus.npy", self.focus)
        (self.folder / "done").write_text("ok\n")


class Replicate:
    """One replicate's state and the yearly cycle that advances it (see the module docstring).

    ``start(sink)`` takes the census of year 0; ``advance(t, sink)`` moves the population from
    census year ``t - 1`` to census year ``t``, takes that census and writes ledger row ``t``.
    The random numbers of that transition are those of year ``t - 1``.
    """

    def __init__(self, model: Model, replicate: int, ledger: np.ndarray):
        self.model, self.replicate, self.ledger = model, replicate, ledger
        shape = model.capacity.shape
        self.n = model.initial.copy()
        self._out = np.empty(shape)
        self._leaving = np.zeros(shape)
        self._uniform = np.zeros((1, shape[1]))  # a field of zeros (see _row_of)
        self._no_env = np.zeros((1, 1))  # no environmental deviation (one value per row)
        self.ever = np.zeros(shape, np.uint8)
        self._work = {}  # scratch arrays of the dispersal step, reused from year to year
        self._env_state = None
        self._dist_state = model.regime.start() if model.regime is not None else None
        self.effects = None  # the last year's disturbance effects
        self.visits = np.zeros(shape) if model.walk is not None else None  # the year's flow

    def start(self, sink: BatchSink) -> None:
        self._census(0, sink, self.model.capacity, self._uniform, self._uniform,
                     self._uniform)

    def advance(self, t: int, sink: BatchSink) -> None:
        m, year = self.model, t - 1
        env, dist_deaths = self._no_env, self._uniform
        if m.env is not None:
            env, self._env_state = m.env.draw(m.seed, self.replicate, year, self._env_state)
        k = m.actions.capacity_for_year(year)
        if m.regime is not None:
            self.effects = m.regime.apply(self._dist_state, self.n, k, seed=m.seed,
                                          replicate=self.replicate, year=year,
                                          stochastic=m.stochastic)
            dist_deaths = self.effects.deaths
            k = self.effects.capacity
        moves = m.kernel is not None or m.walk is not None
        expected = m.expected_kernel
        share = own = anywhere = _NO_FIELD
        if expected:
            fields = _settle_fields(m, k)
            share = stay_share(m.kernel, k.shape, m.edge)
            own, anywhere = fields.own, fields.anywhere
        keys = np.array([_key(m, self.replicate, year, stream) for stream in
                         (rng.STREAM_SURVIVAL, rng.STREAM_BIRTHS, rng.STREAM_EMIGRATION)],
                        np.uint64)
        g = _patch_totals(_grow(m.labels, m.n_patches, self.n, k, env, self._out,
                                self._leaving, m.model_code, m.rate, m.survival, m.theta,
                                m.allee_cells, m.stochastic, m.fraction if moves else 0.0,
                                m.density_dependence, keys, share, own, anywhere))
        self.n, self._out = self._out, self.n
        row = self.ledger[t]
        row[:, F_BIRTHS] = g[:, 0]
        row[:, F_DEATHS] = g[:, 1]
        arrivals = stayed = self._uniform
        if moves:
            if self.visits is not None:
                self.visits[:] = 0.0
            arrivals, stayed, retained, settled_from = _disperse(
                m, self.replicate, year, self._leaving, k, self.visits, self._work)
        c = self._census(t, sink, k, arrivals, stayed, dist_deaths)
        if moves:
            out_p, in_p, stay = g[:, 2], c[:, 3], c[0, 4]
            if expected:
                stay, retained, settled_from = g[0, 3], g[:, 4].copy(), g[:, 5].copy()
                retained[0] = settled_from[0] = 0.0
            row[:, F_EMIG] = out_p - retained
            row[:, F_IMMIG] = in_p - retained
            row[:, F_LOSS] = out_p - settled_from
            row[0, F_EMIG] = out_p[0] - stay
            row[0, F_IMMIG] = in_p[0] - stay
            row[0, F_LOSS] = out_p[0] - in_p[0]

    def _census(self, t: int, sink: BatchSink, k, arrivals, stayed, dist_deaths) -> np.ndarray:
        """Settle the arrivals, take the census of year ``t`` into ``sink`` and the ledger;
        returns the patch totals of :func:`_count`."""
        m = self.model
        s = _patch_totals(_count(m.labels, m.n_patches, k, self.n, arrivals, stayed,
                                 dist_deaths, m.occupancy_threshold, self.ever,
                                 sink.acc["sum_n"][t], sink.acc["occupied"][t],
                                 sink.acc["ever"][t]))
        row = self.ledger[t]
        row[:, F_ABUND] = s[:, 0]
        row[:, F_DIST] = s[:, 1]
        row[:, F_OCC] = s[:, 2]
        if self.visits is not None and t > 0:
            sink.acc["visits"][t] += self.visits
        if m.focus is not None:
            m.focus.record(sink.focus[self.replicate - sink.replicates.start, t], self.n)
        eff = self.effects
        if t > 0 and eff is not None:
            for kind, hit in (("fire", eff.burned), ("flood", eff.flooded)):
                if hit is not None:
                    sink.acc[f"n_{kind}"][t] += hit
            sink.events += [(self.replicate, t, *e) for e in eff.events]
        return s


def simulate_replicate(model: Model, replicate: int, sink: BatchSink, row: int) -> None:
    """Run one replicate through all years, adding its results to ``sink`` at ledger ``row``."""
    rep = Replicate(model, replicate, sink.ledger[row])
    rep.start(sink)
    for t in range(1, model.years + 1):
        rep.advance(t, sink)


def _key(model: Model, replicate: int, year: int, stream: int) -> np.uint64:
    return np.uint64(rng.year_key(model.seed, replicate, year, stream))


def _disperse(model: Model, replicate: int, year: int, leaving: np.ndarray, k: np.ndarray,
              visits: np.ndarray | None, work: dict):
    """Where the year's emigrants ``leaving`` land: ``(arrivals, stayed, retained,
    settled_from)``, anywhere (:func:`_count` settles those where capacity ``k > 0``).

    ``stayed``: those that landed back in their own cell. Per patch (index 0 unused):
    ``retained`` settled in their own patch, ``settled_from`` settled anywhere; with
    :attr:`Model.expected_kernel` ``stayed`` is (1, nx) zeros and the last two None
    (:func:`_grow` counts them). ``work`` holds the replicate's scratch arrays.
    """
    m = model
    if m.expected_kernel:
        arrivals = spread(leaving, m.kernel, m.edge, out=_scratch(work, "arrivals", k.shape))
        return arrivals, np.zeros((1, k.shape[1])), None, None
    if m.walk is not None:
        res = m.walk.disperse(leaving, k, m.labels, m.n_patches, m.stochastic,
                              _key(m, replicate, year, rng.STREAM_WALK))
        visits += res.visits
        return res[:4]
    if m.regions is not None:
        return _kernel_step_with_barriers(m, leaving, k > 0, replicate, year)
    return disperse_stochastic(leaving, k > 0, m.labels, m.n_patches, m.kernel, m.edge,
                               _key(m, replicate, year, rng.STREAM_DISPERSAL),
                               out=(_scratch(work, "arrivals", k.shape),
                                    _scratch(work, "stayed", k.shape)))


def _settle_fields(m: Model, k: np.ndarray):
    """:func:`gridpop.dispersal.settle_fields` where capacity ``k > 0``, kept while that does
    not change (``k`` is the same array, or has the same cells of positive capacity)."""
    cached = m.cache.get("settle_fields")
    if cached is None or (cached[0] is not k and not np.array_equal(cached[1].settle, k > 0)):
        cached = m.cache["settle_fields"] = (k, settle_fields(m.labels, k > 0, m.kernel, m.edge))
    return cached[1]


_NO_FIELD = np.empty((0, 0))
"""``share``, ``own`` and ``anywhere`` of :func:`_grow` when it does not count retention."""


def _scratch(work: dict, name: str, shape) -> np.ndarray:
    """The float64 scratch array ``name`` of ``shape`` in ``work``, made on first use."""
    a = work.get(name)
    if a is None:
        a = work[name] = np.empty(shape)
    return a


def _kernel_spread(m: Model, leaving, settle, replicate, year):
    """Kernel dispersal of ``leaving``: (arrivals, stayed), fresh arrays."""
    if m.stochastic:
        return disperse_stochastic(leaving, settle, m.labels, m.n_patches, m.kernel, m.edge,
                                   _key(m, replicate, year, rng.STREAM_DISPERSAL))[:2]
    return disperse_deterministic(leaving, m.kernel, m.edge)


def _kernel_step_with_barriers(m: Model, leaving, settle, replicate, year):
    """Kernel dispersal across barriers.

    Barrier cells split the grid into regions (4-neighbour connected groups of the other
    cells). Dispersers spread by the kernel; those that land in another region or on a barrier
    cell crossed a barrier and survive with ``m.crossing_survival`` (binomial thinning of whole
    individuals in stochastic mode). Sources are processed by (region, patch) group, so the
    per-patch bookkeeping stays exact; a disperser that crosses a barrier and lands in its own
    patch is retained by the patch.
    """
    arrivals = np.zeros_like(leaving)
    stayed = np.zeros_like(leaving)
    retained = np.zeros(m.n_patches + 1)
    settled_from = np.zeros(m.n_patches + 1)
    group = m.regions.astype(np.int64) * (m.n_patches + 1) + m.labels
    key = _key(m, replicate, year, rng.STREAM_BARRIER)
    for g in np.unique(group[leaving > 0]):
        r, p = divmod(int(g), m.n_patches + 1)
        if r == 0:
            continue  # no one disperses from a barrier cell: see build_model
        inside = m.regions == r
        src = np.where(group == g, leaving, 0.0)
        arr, st = _kernel_spread(m, src, settle & inside, replicate, year)
        crossed = np.where(inside, 0.0, arr)
        kept = (thin(crossed, m.crossing_survival, key, int(g)) if m.stochastic
                else crossed * m.crossing_survival)
        arr = np.where(inside, arr, kept)
        arrivals += arr
        stayed += st
        if p > 0:
            landed = np.where(settle, arr, 0.0)
            settled_from[p] += landed.sum()
            retained[p] += landed[m.labels == p].sum()
    return arrivals, stayed, retained, settled_from


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


CHECKPOINT = "checkpoint.json"
"""Manifest of an unfinished run in its working folder: gridpop version, scenario hash, the
parameters as read (overrides included) and the number of batches. A resumed run must match it."""

NO_SPACE = (errno.ENOSPC, errno.EDQUOT)


def batch_folder(work: Path, b: int) -> Path:
    """Where batch ``b`` of a run lives in its working folder."""
    return Path(work) / "batches" / f"{b:05d}"


def run_checkpointed_batch(model: Model, b: int, reps: range, work, progress=None) -> int:
    """Run batch ``b`` into a temporary folder, then rename it to :func:`batch_folder`.

    The rename is the checkpoint: the batch folder is either absent or whole. When it is already
    in place (another attempt at the same batch, e.g. a task Dask retried, finished first) the
    new copy is discarded, so a batch is never counted twice. Returns ``b``.
    """
    final = batch_folder(work, b)
    tmp = final.with_name(f"{final.name}.{uuid.uuid4().hex[:12]}.tmp")
    _ensure_space(final.parent, batch_bytes(model), f"batch {b}")
    run_batch(model, reps, tmp, progress)
    try:
        os.rename(tmp, final)
    except OSError:
        if not (final / "done").is_file():
            raise
        shutil.rmtree(tmp)
    return b


def _finished(work: Path, n: int) -> set[int]:
    """Indices of the batches in place (folder with its ``done`` marker) in a working folder."""
    folder = work / "batches"
    if not folder.is_dir():
        return set()
    return {int(p.name) for p in folder.iterdir()
            if p.name.isdigit() and int(p.name) < n and (p / "done").is_file()}


def _discard_unfinished(work: Path, keep: set[int]) -> None:
    """Remove everything under ``batches/`` but the finished batches (e.g. the temporary folder
    of a batch that was interrupted)."""
    folder = work / "batches"
    folder.mkdir(exist_ok=True)
    for p in folder.iterdir():
        if not (p.name.isdigit() and int(p.name) in keep):
            shutil.rmtree(p) if p.is_dir() else p.unlink()


def _run_identity(scenario, model: Model) -> dict:
    return {"gridpop_version": __version__, "scenario": str(scenario.path),
            "scenario_sha256": scenario.sha256, "parameters": parameters(scenario),
            "batches": len(batches(model))}


def _may_continue(work: Path, identity: dict, *, resume: bool, overwrite: bool) -> bool:
    """Whether the run continues the interrupted run in ``work`` (read only).

    Raises
    ------
    RunStateError
        With ``resume`` when the interrupted run is of another scenario file, other parameters or
        another gridpop version; without ``resume`` or ``overwrite`` when there is an
        interrupted run to lose.
    """
    path = work / CHECKPOINT
    if not path.is_file():
        return False
    try:
        saved = json.loads(path.read_text())
    except (OSError, ValueError) as exc:
        raise RunStateError(f"{path}: unreadable ({exc}); pass --overwrite without --resume "
                            "to start over.") from None
    if not resume:
        if overwrite:
            return False
        raise RunStateError(
            f"{work}: holds an interrupted run of {saved.get('scenario')}; pass --resume to "
            "continue it or --overwrite to start over.")
    scen = identity["scenario"]
    if saved.get("scenario_sha256") != identity["scenario_sha256"]:
        raise RunStateError(
            f"{scen}: the scenario file changed since the interrupted run in {work} started "
            f"(sha256 {str(saved.get('scenario_sha256'))[:12]}... then, "
            f"{identity['scenario_sha256'][:12]}... now); --resume continues only the same "
            "scenario. Restore the file, or run without --resume and with --overwrite to start "
            "over.")
    now, then = identity["parameters"], saved.get("parameters", {})
    changed = [f"[{sec}] {key} = {old!r} then, {now[sec].get(key)!r} now"
               for sec, values in then.items() if isinstance(values, dict)
               for key, old in values.items() if now.get(sec, {}).get(key) != old]
    changed += [f"the [[{sec}]] tables" for sec, values in then.items()
                if isinstance(values, list) and now.get(sec) != values]
    if saved.get("gridpop_version") != identity["gridpop_version"]:
        changed.append(f"gridpop {saved.get('gridpop_version')} then, "
                       f"{identity['gridpop_version']} now")
    if changed or saved.get("batches") != identity["batches"]:
        raise RunStateError(
            f"{scen}: the interrupted run in {work} had other settings: "
            f"{'; '.join(changed) or 'another number of batches'}. --resume needs the same "
            "settings (command-line overrides included); or run without --resume and with "
            "--overwrite to start over.")
    return True


BASE_BYTES = 350 * 2**20
"""Resident memory of a gridpop process before any grid is loaded (Python, numba's compiled
kernels, GDAL), measured with benchmarks/bench_memory.py."""
MODEL_BYTES_PER_CELL = 56
"""The model's and landscape's per-cell arrays (capacity, initial, labels, mask, ...)."""
REPLICATE_BYTES_PER_CELL = 120
"""State and temporaries of one replicate's yearly cycle (population, emigrants, arrivals,
stayers, noise), per cell. With the model's arrays about 1.4 times the anonymous memory per
cell measured by benchmarks/bench_memory.py (128 bytes between 1024^2 and 2048^2 grids)."""
FFT_BYTES_PER_CELL = 48
"""Per cell of the padded grid when dispersal goes through the FFT: the padded field, its
spectrum and the kernel's."""
CSV_ROW_BYTES = 170
"""Upper bound of a ledger row in timeseries.csv / patches.csv (8 numbers of up to 18 chars)."""


@dataclass(frozen=True)
class Footprint:
    """Estimated resources of a run, bytes (see :func:`footprint`)."""

    base: int  # one process with the model loaded
    batch: int  # on top of base, while a process runs a batch
    combine: int  # on top of base, while the batches are combined and the results written
    output: int  # the published results, GeoTIFF stacks counted uncompressed (an upper bound)
    results: int  # disk to combine the batches: the totals and the results
    work: int  # peak disk use of the working folder (batches, totals and results together)

    def memory(self, *, workers: int | None = None, scheduler: str | None = None) -> int:
        """Peak memory on this machine: in-process, with ``workers`` local worker processes
        (plus this one) or with a remote ``scheduler`` (this process only)."""
        if scheduler is not None:
            return self.base + self.combine
        if workers is not None:
            return workers * (self.base + self.batch) + self.base + self.combine
        return self.base + max(self.batch, self.combine)


def footprint(scenario, model: Model) -> Footprint:
    """Estimate the memory and disk a run needs.

    Per-year accumulators are memory-mapped files, so memory does not grow with the number of
    years; what does are the ledgers (replicates x years x patches) and the disk use. The working
    folder holds every batch's accumulators until they are combined.
    """
    ny, nx = model.capacity.shape
    cells = ny * nx
    years = model.years + 1
    rows = years * (model.n_patches + 1)
    per_cell = sum(np.dtype(dt).itemsize for dt in model.accumulators.values())
    fft = 0
    kernel = model.kernel
    if kernel is not None and kernel.radius > (STENCIL_MAX_RADIUS_SEPARABLE if kernel.separable
                                               else STENCIL_MAX_RADIUS):
        fft = FFT_BYTES_PER_CELL * (ny + 2 * kernel.radius) * (nx + 2 * kernel.radius)
    ledger_row = N_FIELDS * 8
    n_stacks = len(stacks_written(scenario, model))
    patch_rows = model.replicates * years * model.n_patches if scenario.output.patches_csv else 0
    output = (n_stacks * years * cells * 4
              + (model.replicates * years + patch_rows) * CSV_ROW_BYTES)
    results = years * cells * per_cell + output  # the combined totals beside the results
    return Footprint(
        base=BASE_BYTES + cells * MODEL_BYTES_PER_CELL,
        batch=cells * REPLICATE_BYTES_PER_CELL + fft + model.batch_size * rows * ledger_row,
        combine=model.replicates * rows * ledger_row + cells * 16,
        output=output, results=results,
        work=len(batches(model)) * batch_bytes(model) + results)


def batch_bytes(model: Model) -> int:
    """Disk taken by one batch folder: its per-year accumulators and its ledger, bytes."""
    ny, nx = model.capacity.shape
    years = model.years + 1
    per_cell = sum(np.dtype(dt).itemsize for dt in model.accumulators.values())
    return years * (ny * nx * per_cell + model.batch_size * (model.n_patches + 1) * N_FIELDS * 8)


def _ensure_space(folder: Path, need: int, what: str) -> None:
    """Raise ``OSError(ENOSPC)`` before writing ``need`` bytes into ``folder`` if they do not
    fit: memory-mapped files on a full disk would end the process with SIGBUS instead."""
    free = shutil.disk_usage(folder).free
    if free < need:
        raise OSError(errno.ENOSPC, f"{what} needs {size_text(need)} but {size_text(free)} is "
                      "free", str(folder))


def free_room(path) -> tuple[int, int]:
    """Available memory, and free disk space where ``path`` is (or would be created), bytes."""
    import psutil

    p = Path(path).absolute()
    while not p.exists():
        p = p.parent
    return psutil.virtual_memory().available, shutil.disk_usage(p).free


def size_text(n: float) -> str:
    """A byte count for people: ``'1.5 GB'``."""
    for unit in ("B", "kB", "MB", "GB", "TB"):
        if abs(n) < 1000 or unit == "TB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1000
    raise AssertionError("unreachable")


def check_room(fp: Footprint, work: Path, *, workers=None, scheduler=None,
               finished: float = 0.0) -> None:
    """Refuse a run whose estimate does not fit in free memory or on the working folder's disk.

    ``finished`` is the fraction of batches already on disk (a resumed run needs that much less).

    Raises
    ------
    RunStateError
        With the estimated need and what is free.
    """
    memory, disk = free_room(work)
    need_mem = fp.memory(workers=workers, scheduler=scheduler)
    need_disk = int(fp.results + (fp.work - fp.results) * (1.0 - finished))
    short = []
    if need_mem > memory:
        short.append(f"about {size_text(need_mem)} of memory but {size_text(memory)} is "
                     "available")
    if need_disk > disk:
        short.append(f"about {size_text(need_disk)} of disk beside {work.parent} but "
                     f"{size_text(disk)} is free")
    if short:
        raise RunStateError(
            f"{work.parent}: this run needs {' and '.join(short)}. Fewer years, replicates, "
            "workers or output rasters, a larger [run] batch_size (fewer batch folders on "
            "disk), or another --out would help; pass --force to start anyway.")


def footprint_lines(scenario, model: Model, out_dir) -> list[str]:
    """The estimate and what is free now, for ``gridpop check``."""
    fp = footprint(scenario, model)
    memory, disk = free_room(out_dir)
    return [f"estimated peak memory: {size_text(fp.memory())} in-process; with --workers N, "
            f"{size_text(fp.base + fp.batch)} per worker plus "
            f"{size_text(fp.base + fp.combine)} for this process",
            f"estimated output: {size_text(fp.output)} (stacks counted uncompressed); working "
            f"space up to {size_text(fp.work)} beside the output folder",
            f"free now: {size_text(memory)} of memory, {size_text(disk)} of disk at "
            f"{Path(out_dir).absolute().parent}"]


def run(scenario, out_dir, *, overwrite: bool = False, progress: bool = False,
        workers: int | None = None, scheduler: str | None = None, resume: bool = False,
        force: bool = False) -> Path:
    """Run a scenario and write its results to ``out_dir``; return the output folder.

    Batches of replicates are checkpointed in the working folder beside ``out_dir``
    (:func:`gridpop.outputs.working_folder`) and combined in batch order when all are done, so
    results are the same in-process, on any number of Dask workers and after a resume.

    Parameters
    ----------
    scenario : Scenario
    out_dir : path
    overwrite : bool
        Replace an existing output folder (and discard an interrupted run of it).
    progress : bool
        Show a progress bar.
    workers : int, optional
        Run the batches on a new local Dask cluster of this many worker processes.
    scheduler : str, optional
        Run the batches on the Dask cluster at this address; the output folder must then be on
        a filesystem its workers share (:mod:`gridpop.distributed`).
    resume : bool
        Continue the interrupted run of ``out_dir``, keeping the batches it finished. Refused
        when the scenario file, its parameters or the gridpop version differ.
    force : bool
        Start even when the estimate (:func:`footprint`) exceeds the free memory or disk.

    Raises
    ------
    OutputExistsError
        ``out_dir`` exists and ``overwrite`` is false.
    RunStateError
        Both ``workers`` and ``scheduler``; no room; unreachable scheduler; a changed scenario
        under ``resume``; an interrupted run in the way; the disk filled up during the run
        (finished batches are kept for ``resume``).
    """
    from tqdm import tqdm

    started = time.time()
    out_dir = Path(out_dir)
    local = workers is None and scheduler is None
    if workers is not None and scheduler is not None:
        raise RunStateError("--workers and --scheduler exclude each other: --workers starts a "
                            "cluster on this machine, --scheduler uses a running one.")
    if workers is not None and workers < 1:
        raise RunStateError(f"--workers {workers}: must be 1 or more.")
    check_output(out_dir, overwrite=overwrite)
    model = build_model(scenario, build_landscape(scenario, stochastic=scenario.growth.stochastic))
    plan = batches(model)
    work = working_folder(out_dir)
    resuming = _may_continue(work, _run_identity(scenario, model), resume=resume,
                             overwrite=overwrite)
    finished = _finished(work, len(plan)) if resuming else set()
    fp = footprint(scenario, model)
    if not force:
        check_room(fp, work, workers=workers, scheduler=scheduler,
                   finished=len(finished) / len(plan))
    if local:
        cluster = contextlib.nullcontext()
    else:
        from .distributed import cluster_client, run_batches

        cluster = cluster_client(workers=workers, scheduler=scheduler)
    with cluster as client:  # reach the cluster before anything is written
        work = prepare_output(out_dir, overwrite=overwrite, resume=resuming)
        with _resumable_if_disk_full(work, len(plan)):
            if not resuming:
                write_json(work / CHECKPOINT, {**_run_identity(scenario, model),
                                               "complete": False})
            _discard_unfinished(work, finished)
            todo = [(b, reps) for b, reps in enumerate(plan) if b not in finished]
            with tqdm(total=model.replicates,
                      initial=model.replicates - sum(len(r) for _, r in todo),
                      unit="replicate", disable=not progress, desc="gridpop run") as bar:
                if local:
                    for b, reps in todo:
                        run_checkpointed_batch(model, b, reps, work, bar)
                elif todo:
                    run_batches(client, model, todo, work, bar)
    with _resumable_if_disk_full(work, len(plan)):
        _ensure_space(work, fp.results, "combining the batches and writing the results")
        files = write_results(work, scenario, model, [batch_folder(work, b)
                                                      for b in range(len(plan))])
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
            "execution": {  # how the run was carried out: the only part that may differ
                "mode": ("in-process" if local
                         else "local cluster" if workers is not None else "scheduler"),
                "workers": workers,
                "numba_threads": (numba.get_num_threads() if local
                                  else 1 if workers is not None else None),
                "resumed_batches": len(finished),
                "wall_time_s": round(time.time() - started, 3),
            },
            "complete": True,
        }
        write_json(work / "run.json", manifest)
        (work / CHECKPOINT).unlink()
        publish(work, out_dir)
    return out_dir


@contextlib.contextmanager
def _resumable_if_disk_full(work: Path, n_batches: int):
    """Turn a full disk (or quota) into a :class:`RunStateError` that says how to resume."""
    try:
        yield
    except OSError as exc:
        if exc.errno not in NO_SPACE:
            raise
        done = len(_finished(work, n_batches))
        raise RunStateError(
            f"{work}: no space left on the device ({exc.strerror or exc}); {done} of "
            f"{n_batches} batches are finished and kept. Free some space, then run the same "
            "command again with --resume.") from None


STACKS = {
    # output raster name: (accumulator, what the band holds)
    "abundance": ("sum_n", "mean abundance over replicates"),
    "occupancy": ("occupied", "fraction of replicates in which the cell is occupied"),
    "colonised": ("ever", "fraction of replicates in which the cell has been occupied by then"),
    "burned": ("n_fire", "fraction of replicates in which the cell burned that year"),
    "flooded": ("n_flood", "fraction of replicates in which the cell flooded that year"),
    "flow": ("visits", "mean number of disperser visits to the cell that year (walk method)"),
}


def stacks_written(scenario, model: Model) -> dict[str, str]:
    """Stacks a run writes (name -> accumulator): those asked for in [output] rasters, and
    always those of disturbance and walk dispersal when present."""
    return {name: acc for name, (acc, _) in STACKS.items() if acc in model.accumulators
            and (name in scenario.output.rasters or name not in OUTPUT_RASTERS)}


def _blocks(model: Model) -> list[tuple[str, np.ndarray]]:
    """The two areas a corridor joins: the first two [risk] focus_areas, else patches 1 and 2."""
    shape = model.capacity.shape
    if model.focus is not None and len(model.focus.names) >= 2:
        out = []
        for name, idx in list(zip(model.focus.names, model.focus.cells, strict=True))[:2]:
            mask = np.zeros(shape, bool)
            mask.ravel()[idx] = True
            out.append((name, mask))
        return out
    if model.n_patches >= 2:
        return [(f"patch {p}", model.labels == p) for p in (1, 2)]
    return []


def write_connectivity(work: Path, scenario, model: Model, visits) -> list[str]:
    """connectivity.csv (patch-to-patch settlement probabilities of the walk, from the expected
    walk on the year-0 landscape, start cells weighted by capacity) and connectivity.json (the
    same matrix and, per corridor action, its share of the walkers' visits over the run and of
    the one-year flow between patches 1 and 2, see :func:`resistance.corridor_share`)."""
    conn = model.connectivity
    with open(work / "connectivity.csv", "w", newline="") as fh:
        out = csv.writer(fh)
        out.writerow(["from_patch", "to_patch", "probability"])
        for i in range(model.n_patches):
            for j in range(model.n_patches):
                out.writerow([i + 1, j + 1, f"{conn[i, j]:.12g}"])
    total = np.zeros(model.capacity.shape)
    for t in range(1, model.years + 1):
        total += visits[t]
    everywhere = float(total.sum())
    w = model.walk
    corridors = {}
    for cfg, cells in zip(scenario.extra.get("action", ()), model.actions.areas, strict=True):
        if cfg.kind != "corridor":
            continue
        entry = {"share_of_visits": float(total[cells].sum()) / everywhere if everywhere
                 else None}
        blocks = _blocks(model)
        for (name_a, a), (name_b, b) in ((blocks[0], blocks[1]), (blocks[1], blocks[0])) \
                if len(blocks) == 2 else ():
            flow, share = corridor_share(a, b, cells, w.permeability, w.quality(model.capacity),
                                         w.params, weights=model.capacity,
                                         entry_survival=w.entry_survival)
            entry[f"{name_a} -> {name_b}"] = {"flow": flow, "share_through_corridor": share}
        corridors[cfg.label] = entry
    write_json(work / "connectivity.json", {
        "matrix": conn, "corridors": corridors,
        "note": "matrix[i][j]: probability that a disperser leaving patch i+1 settles in patch "
                "j+1 in one year (expected walk, year-0 landscape). corridors: per corridor "
                "action, its share of all walker visits over the run, and of the one-year flow "
                "between the two blocks (the first two [risk] focus_areas, else patches 1 and 2) "
                "the part that passed through it."})
    return ["connectivity.csv", "connectivity.json"]


def write_results(work: Path, scenario, model: Model, parts: list[Path]) -> list[str]:
    """Combine batches and write stacks and tables; remove the batch folders."""
    import shutil

    totals = combine(work, model, parts)
    reps = model.replicates
    grid, mask = model.landscape.grid, model.landscape.mask
    labels = year_labels(model.years)
    files = []
    for name, acc in stacks_written(scenario, model).items():
        total = totals[acc]
        write_stack(work / f"{name}.tif", grid, mask,
                    (total[t] / reps for t in range(model.years + 1)), labels)
        files.append(f"{name}.tif")
    if model.walk is not None:
        files += write_connectivity(work, scenario, model, totals["visits"])
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
    files += write_summary(work, scenario, model, ledger, totals, parts)
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
    elif model.walk is not None:
        d, w = scenario.dispersal, model.walk
        source = f"resistance {d.resistance.name}" if d.resistance is not None else (
            f"resistance from suitability (max {d.resistance_max:g}, shape "
            f"{d.resistance_shape:g})")
        blocked = int((w.permeability == 0).sum())
        lines.append(f"dispersal: {d.fraction:g} of individuals per year walk over the "
                     f"landscape, {source}; up to {d.walk_length} steps, "
                     f"death_per_resistance {d.death_per_resistance:g}, heading_bias "
                     f"{d.heading_bias:g}; "
                     f"{blocked} cells impassable")
    else:
        lines.append("dispersal: none (fraction = 0)")
    lines += [f"action {note}" for note in model.actions.notes]
    if model.regime is not None:
        lines += [f"disturbance {note}" for note in model.regime.notes]
    lines.append(f"run: {model.years} years x {model.replicates} replicates, seed {model.seed}")
    return lines

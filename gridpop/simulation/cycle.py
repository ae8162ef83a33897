"""The yearly cycle of one replicate, as three passes over the grid.

Order of the steps from census year t to census year t+1 (one replicate):

1. **Environment**: this year's deviation of the log growth multiplier, a spatially correlated
   field, AR(1) in time (:class:`gridpop.demography.EnvironmentalNoise`).
2. **Habitat and disturbance**: the capacity of the year (restoration, habitat loss); fires and
   floods drawn for this replicate-year kill individuals (density-independent) and reduce
   capacity, which then recovers (:mod:`gridpop.disturbance`).
3. **Growth**: survival and births with density dependence against the cell's capacity of the
   year (:mod:`gridpop.demography`), then emigration (:mod:`gridpop.movement.emigration`).
4. **Dispersal**: the emigrants move (:mod:`gridpop.movement`); those that land outside
   habitat, off the grid or die on the way are lost.
5. **Census** at year t+1: abundance and the ledger
   ``N(t+1) = N(t) + births - deaths - disturbance_deaths + immigrants - emigrants``.

So abundance is counted after dispersal, before the next year's disturbance: a post-dispersal,
pre-breeding census.

A year of a large grid is memory-bound, so steps 3 and 5 are each one pass over the grid
(:func:`grow_pass`, :func:`census_pass`) that also adds up the per-patch sums of the ledger
while a row is in cache; the mover's dispersal is the pass between them.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import NamedTuple

import numpy as np

from .._jit import njit, pjit, prange
from ..demography import grow_row
from ..disturbance import YearEffects
from ..io.results import LEDGER_FIELDS
from ..movement import NO_RETENTION, Moved
from ..movement.emigration import leaving_row_deterministic, leaving_row_stochastic
from ..rng import (
    CLASS_STREAMS,
    STREAM_BIRTHS,
    STREAM_EMIGRATION,
    STREAM_SEX,
    STREAM_SURVIVAL,
    STREAM_TRANSITION,
    YearStreams,
)
from ..stages import density_row, share_deaths, stage_row
from .model import Emigration, Model

N_FIELDS = len(LEDGER_FIELDS)
F_ABUND, F_BIRTHS, F_DEATHS, F_DIST, F_EMIG, F_IMMIG, F_LOSS, F_OCC = range(N_FIELDS)
"""Columns of a ledger row (:data:`gridpop.io.results.LEDGER_FIELDS`)."""

N_CHUNKS = 64  # fixed row chunking of reductions: sums do not depend on the thread count
N_SUMS = 6  # fields per patch in the partial sums of grow_pass and census_pass

NO_EMIGRATION = Emigration(0.0, 0.0)


class GrowthSums(NamedTuple):
    """Per patch (index 0: the whole landscape), what :func:`grow_pass` added up."""

    births: np.ndarray
    deaths: np.ndarray
    emigrants: np.ndarray
    stayed: np.ndarray  # expected kernel only: emigrants landing back home, where k > 0
    retained: np.ndarray  # expected kernel only: settling in their own patch
    settled_from: np.ndarray  # expected kernel only: settling anywhere


class CensusSums(NamedTuple):
    """Per patch (index 0: the whole landscape), what :func:`census_pass` added up."""

    abundance: np.ndarray
    disturbance_deaths: np.ndarray
    occupied: np.ndarray
    settled: np.ndarray  # arrivals settled in the patch
    stayed: np.ndarray  # of them, those that landed back in their own cell
    unused: np.ndarray


def patch_totals(part: np.ndarray) -> np.ndarray:
    """(n_patches + 1, N_SUMS) sums from the chunk partials of :func:`grow_pass` or
    :func:`census_pass`: chunks added in order, row 0 the whole landscape (the patches and the
    cells of no patch, which the kernels keep in a last row)."""
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


@njit
def _run_sums_block(part, c, labels, n_patches, block):
    """Add the sums of the rows of ``block`` (m, nx) over one row of the grid to
    ``part[c, patch, :m]``, one run of a patch at a time (as :func:`_run_sums`)."""
    m = block.shape[0]
    run = labels[0]
    acc = np.zeros(m)
    for j in range(labels.size + 1):
        p = labels[j] if j < labels.size else -1
        if p != run:
            q = run if run > 0 else n_patches + 1
            for f in range(m):
                part[c, q, f] += acc[f]
                acc[f] = 0.0
            run = p
        if j < labels.size:
            for f in range(m):
                acc[f] += block[f, j]


@pjit(grid="labels")
def grow_pass(labels, n_patches, n, k, env, out, leaving, rates, stages, fractions, emigration,
              keys, retention):
    """Local growth of every cell, then emigration: ``out`` gets the residents (grown minus
    emigrants), ``leaving`` the emigrants (zero for classes whose ``fractions`` is 0).

    ``n``, ``out``, ``leaving``: (C, ny, nx) counts per class (:mod:`gridpop.stages`; one class
    for the stage-free model). ``env``: the year's environmental field, or (1, 1) for one
    deviation everywhere. ``rates``: :class:`GrowthRates`; ``stages``:
    :class:`gridpop.stages.StageRates`, or None for the stage-free model, whose one class the
    scalar kernel :func:`gridpop.demography.grow_row` grows (None rather than ``matrix``
    False: numba then leaves the stage kernels out when it compiles this one, which
    takes a good part of a cold start); ``fractions``: (C,) emigration
    fraction per class; ``emigration``: :class:`Emigration` (its density dependence acts on the
    density-stage total); ``keys``: year keys of survival, births, emigration, transitions and
    sex (stochastic); class ``c`` of cell ``i * nx + j`` is drawn as cell
    ``(c * ny + i) * nx + j``. When ``retention.own`` is not empty (expected kernel dispersal,
    :class:`gridpop.movement.Retention`), the emigrants are also summed weighted by its
    ``share`` (of them landing back home, where ``k > 0``), ``own`` and ``anywhere``: the
    stayers, those that settle in their own patch and those that settle.

    Returns (n_chunks, n_patches + 2, N_SUMS) partial sums per chunk of rows and patch (row 0
    unused, the last row the cells of no patch; :func:`patch_totals` adds them up) of the
    fields of :class:`GrowthSums`.
    """
    classes, ny, nx = n.shape
    rows = (ny + N_CHUNKS - 1) // N_CHUNKS
    part = np.zeros((N_CHUNKS, n_patches + 2, N_SUMS))
    weighted = retention.own.shape[0] > 0
    dd = emigration.density_dependence
    stochastic = rates.stochastic
    stage_keys = np.array([keys[0], keys[1], keys[3], keys[4]], np.uint64)
    for chunk in prange(N_CHUNKS):
        c = np.int64(chunk)  # a prange index is unsigned: one type for the callees
        births, deaths = np.empty(nx), np.empty(nx)
        home, mine, anyw = np.zeros(nx), np.zeros(nx), np.zeros(nx)
        dens, total = np.empty(nx), np.empty(nx)
        for i in range(c * rows, min(ny, (c + 1) * rows)):
            ki = k[i]
            if stages is not None:
                stage_row(n[:, i], ki, _row_of(env, i), out[:, i], births, deaths, dens,
                          rates.model, rates.theta, rates.allee_a, stages, stochastic,
                          stage_keys, i * nx, ny * nx)
                density_row(out[:, i], stages.density, dens)
            else:
                grow_row(n[0, i], ki, _row_of(env, i), out[0, i], births, deaths, rates.model,
                         rates.r, rates.s, rates.theta, rates.allee_a, stochastic, keys[0],
                         keys[1], i * nx)
            density = out[0, i] if stages is None else dens
            lv = leaving[0, i]
            for a in range(classes):
                o, lv = out[a, i], leaving[a, i]
                fraction = fractions[a]
                if fraction == 0.0:
                    lv[:] = 0.0
                elif stochastic:
                    leaving_row_stochastic(o, density, ki, fraction, dd, keys[2],
                                           (a * ny + i) * nx, lv)
                else:
                    leaving_row_deterministic(o, density, ki, fraction, dd, lv)
                for j in range(nx):
                    o[j] -= lv[j]
            if classes > 1:
                total[:] = 0.0
                for a in range(classes):
                    la = leaving[a, i]
                    for j in range(nx):
                        total[j] += la[j]
                lv = total
            if weighted:
                sh = _row_of(retention.share, i)
                ow, an = retention.own[i], retention.anywhere[i]
                for j in range(nx):
                    home[j] = lv[j] * sh[j] if ki[j] > 0.0 else 0.0
                    mine[j] = lv[j] * ow[j]
                    anyw[j] = lv[j] * an[j]
            _run_sums(part, c, labels[i], n_patches, births, deaths, lv, home, mine, anyw)
    return part


@njit
def _settle_classes(n, i, ki, arrivals, arriving, counted, v, settled):
    """Row ``i`` of several classes: each class gains its arrivals where ``ki > 0``
    (``settled``: their sum), ``v`` the sum of the counted classes."""
    settled[:] = 0.0
    for a in range(n.shape[0]):
        if arriving[a] < 0:
            continue
        ar, na = _row_of(arrivals[arriving[a]], i), n[a, i]
        for j in range(ki.size):
            x = ar[j] if ki[j] > 0.0 else 0.0
            settled[j] += x
            na[j] += x
    v[:] = 0.0
    for a in range(n.shape[0]):
        if counted[a]:
            na = n[a, i]
            for j in range(ki.size):
                v[j] += na[j]


@pjit(grid="labels")
def census_pass(labels, n_patches, k, n, abundance, counted, arrivals, arriving, stayed,
                dist_deaths, threshold, ever, sum_n, occupied, ever_count):
    """Settle the year's arrivals, then take the census.

    ``n`` (C, ny, nx) holds the residents per class on entry and the census counts on return:
    class ``c`` gains ``arrivals[arriving[c]]`` where capacity ``k > 0`` (``arriving[c] < 0``:
    none; arrivals elsewhere are lost). ``abundance`` (ny, nx) gets the census abundance, the
    sum of the classes where ``counted`` is 1; ``counted`` is None with one class, and
    ``abundance`` is then ``n[0]`` itself (None rather than a flag: numba then leaves the
    kernels of several classes out when it compiles this one).
    ``arrivals`` may be (A, 1, nx), ``stayed`` (the dispersers that landed back home) and
    ``dist_deaths`` (the year's disturbance deaths) (1, nx), zeros. Adds this year's per-cell
    abundance, occupancy and ever-occupied to the accumulators (``ever``: this replicate's
    cells occupied so far).

    Returns partial sums as :func:`grow_pass` does, of the fields of :class:`CensusSums`, and
    (with more than one class) those of every class, (n_chunks, n_patches + 2, C).
    """
    classes, ny, nx = n.shape
    rows = (ny + N_CHUNKS - 1) // N_CHUNKS
    part = np.zeros((N_CHUNKS, n_patches + 2, N_SUMS))
    per_class = np.zeros((N_CHUNKS, n_patches + 2, classes if classes > 1 else 0))
    for chunk in prange(N_CHUNKS):
        c = np.int64(chunk)  # a prange index is unsigned: one type for the callees
        occ, settled, home, zero = np.empty(nx), np.empty(nx), np.empty(nx), np.zeros(nx)
        for i in range(c * rows, min(ny, (c + 1) * rows)):
            v, ki, e, sn, oc, ec = abundance[i], k[i], ever[i], sum_n[i], occupied[i], \
                ever_count[i]
            st = _row_of(stayed, i)
            a0 = _row_of(arrivals[max(arriving[0], 0)], i)
            lands = arriving[0] >= 0
            if counted is not None:  # one class is settled in the census loop below
                _settle_classes(n, i, ki, arrivals, arriving, counted, v, settled)
                _run_sums_block(per_class, c, labels[i], n_patches, n[:, i])
            for j in range(nx):
                here = ki[j] > 0.0
                if counted is None:
                    settled[j] = a0[j] if here and lands else 0.0
                    v[j] += settled[j]
                home[j] = st[j] if here else 0.0
                hit = v[j] >= threshold
                e[j] = 1 if hit or e[j] else 0
                occ[j] = 1.0 if hit else 0.0
                sn[j] += v[j]
                oc[j] += 1 if hit else 0
                ec[j] += e[j]
            _run_sums(part, c, labels[i], n_patches, v, _row_of(dist_deaths, i), occ, settled,
                      home, zero)
    return part, per_class


class YearConditions(NamedTuple):
    """What :meth:`Replicate.conditions` gives the growth of a year."""

    streams: YearStreams
    env: np.ndarray  # the environmental field, (1, 1) without
    k: np.ndarray  # capacity after disturbance
    dist_deaths: np.ndarray  # disturbance deaths per cell, (1, nx) zeros without


class Replicate:
    """One replicate's state and the yearly cycle that advances it (see the module docstring).

    ``start(sink)`` takes the census of year 0; ``advance(t, sink)`` moves the population from
    census year ``t - 1`` to census year ``t``, takes that census and writes ledger row ``t``.
    The random numbers of that transition are those of year ``t - 1``. The state ``n`` holds
    one (ny, nx) field per class of the life history (:class:`gridpop.simulation.model.
    LifeHistory`).
    """

    def __init__(self, model: Model, replicate: int, ledger: np.ndarray):
        self.model, self.replicate, self.ledger = model, replicate, ledger
        life = model.growth.life
        shape = model.capacity.shape
        self.n = life.initial.copy()
        self._out = np.empty_like(self.n)
        self._leaving = np.zeros_like(self.n)
        self._abundance = np.empty(shape) if life.classes > 1 else None
        self.moving = np.flatnonzero(life.fractions > 0) if model.movement is not None else \
            np.zeros(0, np.int64)
        self._fractions = life.fractions if model.movement is not None else \
            np.zeros(life.classes)
        self._arriving = np.full(life.classes, -1, np.int64)
        self._arriving[self.moving] = np.arange(self.moving.size)
        self._arrivals = np.empty((self.moving.size, *shape)) if self.moving.size > 1 else None
        self._no_arrivals = np.zeros((1, 1, shape[1]))
        self._uniform = np.zeros((1, shape[1]))  # a field of zeros (see _row_of)
        self._no_env = np.zeros((1, 1))  # no environmental deviation (one value per row)
        self.ever = np.zeros(shape, np.uint8)
        self._work: dict[str, np.ndarray] = {}  # the mover's scratch arrays, reused
        self._env_state = None
        self._dist_state = model.regime.start() if model.regime is not None else None
        self.effects: YearEffects | None = None  # the last year's disturbance effects
        self.visits = np.zeros(shape) if model.walk is not None else None  # the year's flow

    @property
    def abundance(self) -> np.ndarray:
        """The census abundance per cell (the counted classes)."""
        return self.n[0] if self._abundance is None else self._abundance

    def start(self, sink: BatchSink) -> None:
        self._census(0, sink, self.model.capacity, self._no_arrivals, self._uniform,
                     self._uniform, np.full(self.n.shape[0], -1, np.int64))

    def _disturb(self, year: int, k: np.ndarray) -> YearEffects:
        """This year's fires and floods; their deaths shared among the classes."""
        m = self.model
        assert m.regime is not None
        n = self.n[0] if self.n.shape[0] == 1 else self.n.sum(axis=0)
        before = n.copy() if self.n.shape[0] > 1 else n
        effects = m.regime.apply(self._dist_state, n, k, seed=m.plan.seed,
                                 replicate=self.replicate, year=year,
                                 stochastic=m.growth.stochastic)
        if self.n.shape[0] > 1:
            share_deaths(before, n, self.n, m.growth.stochastic)
        return effects

    def conditions(self, t: int, sink: BatchSink) -> YearConditions:
        """Steps 1 and 2 of the transition to census year ``t`` (and the releases and
        removals of management): the year's environmental field, its capacity after
        disturbance and the disturbance deaths."""
        m, year = self.model, t - 1
        seed = m.plan.seed
        streams = YearStreams(seed, self.replicate, year)
        env, dist_deaths = self._no_env, self._uniform
        if m.growth.env is not None:
            env, self._env_state = m.growth.env.draw(seed, self.replicate, year,
                                                     self._env_state)
        k = m.actions.capacity_for_year(year)
        if m.regime is not None:
            effects = self.effects = self._disturb(year, k)
            dist_deaths = effects.deaths
            k = effects.capacity
            if "sum_k" in sink.acc:
                sink.acc["sum_k"][year] += k
        if m.management is not None:
            self.ledger[t, :, N_FIELDS:N_FIELDS + 2] = np.stack(m.management.apply(
                self.n, k, year, streams, m.growth.stochastic), axis=1)
        return YearConditions(streams, env, k, dist_deaths)

    def advance(self, t: int, sink: BatchSink) -> None:
        m = self.model
        streams, env, k, dist_deaths = self.conditions(t, sink)
        movement = m.movement
        retention = movement.mover.retention(k) if movement is not None else NO_RETENTION
        counted = retention.own.shape[0] > 0  # the growth pass counts the retention
        keys = np.array([streams.key(s) for s in (STREAM_SURVIVAL, STREAM_BIRTHS,
                                                  STREAM_EMIGRATION, STREAM_TRANSITION,
                                                  STREAM_SEX)], np.uint64)
        c = m.census
        g = GrowthSums(*patch_totals(grow_pass(
            c.labels, c.n_patches, self.n, k, env, self._out, self._leaving, m.growth.rates,
            m.growth.life.rates if m.growth.life.rates.matrix else None, self._fractions,
            movement.emigration if movement is not None else NO_EMIGRATION, keys,
            retention)).T)
        self.n, self._out = self._out, self.n
        row = self.ledger[t]
        row[:, F_BIRTHS] = g.births
        row[:, F_DEATHS] = g.deaths
        if movement is None or self.moving.size == 0:
            self._census(t, sink, k, self._no_arrivals, self._uniform, dist_deaths,
                         self._arriving)
            return
        if self.visits is not None:
            self.visits[:] = 0.0
        moved = self.move(streams, k)
        if moved.visits is not None:
            self.visits += moved.visits
        s = self._census(t, sink, k, moved.arrivals, moved.stayed, dist_deaths, self._arriving)
        if counted:
            stay, retained, settled_from = g.stayed[0], g.retained.copy(), g.settled_from.copy()
            retained[0] = settled_from[0] = 0.0
        else:
            assert moved.retained is not None and moved.settled_from is not None
            stay, retained, settled_from = s.stayed[0], moved.retained, moved.settled_from
        out_p, in_p = g.emigrants, s.settled
        row[:, F_EMIG] = out_p - retained
        row[:, F_IMMIG] = in_p - retained
        row[:, F_LOSS] = out_p - settled_from
        row[0, F_EMIG] = out_p[0] - stay
        row[0, F_IMMIG] = in_p[0] - stay
        row[0, F_LOSS] = out_p[0] - in_p[0]

    def move(self, streams: YearStreams, k: np.ndarray) -> Moved:
        """The emigrants of every dispersing class moved, each class on its own streams
        (``arrivals``: (A, ny, nx), one field per dispersing class)."""
        mover = self.model.movement.mover  # type: ignore[union-attr]
        if self.moving.size == 1:
            a = int(self.moving[0])
            one = mover.move(self._leaving[a], k, streams._replace(offset=a * CLASS_STREAMS),
                             self._work)
            return one._replace(arrivals=one.arrivals[None])
        assert self._arrivals is not None
        total: Moved | None = None
        for i, a in enumerate(self.moving.tolist()):
            one = mover.move(self._leaving[a], k, streams._replace(offset=a * CLASS_STREAMS),
                             self._work)
            self._arrivals[i] = one.arrivals
            if total is None:
                total = Moved(self._arrivals, one.stayed.copy(), _copy(one.retained),
                              _copy(one.settled_from), _copy(one.visits))
                continue
            total.stayed[...] += one.stayed
            for mine, theirs in ((total.retained, one.retained),
                                 (total.settled_from, one.settled_from),
                                 (total.visits, one.visits)):
                if mine is not None and theirs is not None:
                    mine += theirs
        assert total is not None
        return total

    def _census(self, t: int, sink: BatchSink, k, arrivals, stayed, dist_deaths,
                arriving) -> CensusSums:
        """Settle the arrivals, take the census of year ``t`` into ``sink`` and the ledger."""
        c, life = self.model.census, self.model.growth.life
        part, per_class = census_pass(
            c.labels, c.n_patches, k, self.n, self.abundance,
            life.counted if life.classes > 1 else None, arrivals, arriving,
            stayed, dist_deaths, c.occupancy_threshold, self.ever, sink.acc["sum_n"][t],
            sink.acc["occupied"][t], sink.acc["ever"][t])
        s = CensusSums(*patch_totals(part).T)
        row = self.ledger[t]
        row[:, F_ABUND] = s.abundance
        row[:, F_DIST] = s.disturbance_deaths
        row[:, F_OCC] = s.occupied
        if life.columns:
            row[:, N_FIELDS + 2 * (self.model.management is not None):] = life.columns_of(
                patch_totals(per_class) if life.classes > 1 else row[:, F_ABUND:F_ABUND + 1])
        if self.visits is not None and t > 0:
            sink.acc["visits"][t] += self.visits
        for stage in life.rasters:
            sink.acc[f"sum_abundance_{life.names[stage]}"][t] += \
                self.n[stage::len(life.names)].sum(axis=0)
        if c.focus is not None and sink.focus is not None:
            c.focus.record(sink.focus[self.replicate - sink.replicates.start, t], self.abundance)
        eff = self.effects
        if t > 0 and eff is not None:
            for kind, hit in (("fire", eff.burned), ("flood", eff.flooded)):
                if hit is not None:
                    sink.acc[f"n_{kind}"][t] += hit
            sink.events += [(self.replicate, t, *e) for e in eff.events]
        return s


def _copy(a: np.ndarray | None) -> np.ndarray | None:
    return None if a is None else a.copy()


def simulate_replicate(model: Model, replicate: int, sink: BatchSink, row: int) -> None:
    """Run one replicate through all years, adding its results to ``sink`` at ledger ``row``."""
    rep = Replicate(model, replicate, sink.ledger[row])
    rep.start(sink)
    for t in range(1, model.plan.years + 1):
        rep.advance(t, sink)


class BatchSink:
    """Per-year accumulators, ledger and events of one batch, kept in the batch folder.

    Accumulators (:attr:`Model.accumulators`) are memory-mapped ``(years + 1, ny, nx)`` arrays:
    ``sum_n`` (abundance), ``occupied`` (1 if occupied), ``ever`` (1 if occupied in this or an
    earlier year) and, with disturbance, ``n_fire`` / ``n_flood`` (1 if hit that year).
    """

    def __init__(self, folder: Path, model: Model, replicates: range):
        folder.mkdir(parents=True, exist_ok=True)
        shape = (model.plan.years + 1, *model.capacity.shape)
        self.acc = {name: np.lib.format.open_memmap(folder / f"{name}.npy", mode="w+",
                                                    dtype=dt, shape=shape)
                    for name, dt in model.accumulators.items()}
        self.ledger = np.zeros((len(replicates), model.plan.years + 1, model.census.n_patches + 1,
                                N_FIELDS + len(model.ledger_columns)))
        self.events: list[tuple] = []
        self.folder = folder
        self.replicates = replicates
        self.focus = (model.census.focus.table(len(replicates), model.plan.years)
                      if model.census.focus is not None else None)

    def close(self) -> None:
        for a in self.acc.values():
            a.flush()
        np.save(self.folder / "ledger.npy", self.ledger)
        with open(self.folder / "events.json", "w") as fh:
            json.dump(self.events, fh)
        if self.focus is not None:
            np.save(self.folder / "focus.npy", self.focus)
        (self.folder / "done").write_text("ok\n")

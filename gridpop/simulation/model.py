"""The model of a run: everything the yearly cycle needs, in cell units.

:func:`build_model` is the one place where a scenario's user units (metres, hectares, years)
become cell units on the grid. The model is grouped as the cycle uses it: the run plan (how
many years and replicates), the growth (vital rates and environmental noise), the movement
(emigration and the mover that takes the emigrants where they land) and the census (patches,
occupancy threshold, focus areas), beside the landscape with the actions applied and the
disturbance regime.
"""

from __future__ import annotations

import contextlib
import functools
from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

import numpy as np

from .. import matrices
from ..actions import Actions, apply_actions
from ..analysis.summary import FocusCensus, focus_census
from ..demography import MODEL_CODES, EnvironmentalNoise
from ..disturbance import Regime, build_regime
from ..errors import InputDataError, ScenarioError, where, where_layer
from ..io.rasters import Grid, align_raster
from ..landscape import Landscape
from ..management import Management, build_management
from ..movement import Mover
from ..movement.barrier import BarrierKernelMover
from ..movement.connectivity import patch_connectivity
from ..movement.kernel import KernelMover
from ..movement.kernels import Kernel, make_kernel
from ..movement.walk import (
    Walk,
    WalkParams,
    permeability_from_resistance,
    resistance_from_suitability,
)
from ..stages import StageRates, one_stage, split_initial, stage_rates
from ..timeline import Source, Timeline, read_layer
from .pitfalls import warn


@dataclass(frozen=True)
class RunPlan:
    """How long and how often: years, replicates, seed and replicates per batch."""

    years: int
    replicates: int
    seed: int
    batch_size: int

    def batches(self) -> list[range]:
        """The replicates of each batch, in order."""
        b = self.batch_size
        return [range(s, min(s + b, self.replicates)) for s in range(0, self.replicates, b)]


class GrowthRates(NamedTuple):
    """The vital rates the growth kernels take: growth model code
    (:data:`gridpop.demography.MODEL_CODES`), r, adult survival s, theta, Allee density in
    individuals per cell, and whether individuals are whole (stochastic)."""

    model: int
    r: float
    s: float
    theta: float
    allee_a: float
    stochastic: bool


@dataclass(frozen=True)
class LifeHistory:
    """The classes of a cell's population (:mod:`gridpop.stages`): the stages, and with two sexes
    the female stages then the male stages. The stage-free model has one class and no names."""

    rates: StageRates
    names: tuple[str, ...]  # stage names; () without [stages]
    fractions: np.ndarray  # (C,) emigration fraction per class
    counted: np.ndarray  # (C,) uint8: 1 for classes counted in abundance
    initial: np.ndarray  # (C, ny, nx) year-0 counts per class
    rasters: tuple[int, ...] = ()  # stages whose abundance stacks are written

    @property
    def classes(self) -> int:
        return self.fractions.size

    @property
    def columns(self) -> list[str]:
        """Ledger columns after :data:`gridpop.io.results.LEDGER_FIELDS`: ``abundance_<stage>``
        per stage, then ``females`` and ``males`` with two sexes."""
        return [f"abundance_{n}" for n in self.names] + (
            ["females", "males"] if self.rates.sexes == 2 else [])

    def columns_of(self, per_class: np.ndarray) -> np.ndarray:
        """The :attr:`columns` from the counts per class (last axis, C)."""
        s = len(self.names)
        sexes = [per_class[..., x * s:(x + 1) * s] for x in range(self.rates.sexes)]
        cols = [sum(sexes[1:], sexes[0])]
        if self.rates.sexes == 2:
            cols += [x.sum(axis=-1, keepdims=True) for x in sexes]
        return np.concatenate(cols, axis=-1)


@dataclass(frozen=True)
class Growth:
    """Local growth: the vital rates, the environmental noise (None: none) and the life
    history."""

    rates: GrowthRates
    env: EnvironmentalNoise | None
    life: LifeHistory

    @property
    def stochastic(self) -> bool:
        return self.rates.stochastic


class Emigration(NamedTuple):
    """Who leaves a cell: ``fraction * min(1, N / K) ** density_dependence``."""

    fraction: float
    density_dependence: float


@dataclass(frozen=True)
class Movement:
    """Dispersal: who leaves (``emigration``) and where they go (``mover``); ``kernel`` or
    ``walk`` is the mover's engine."""

    emigration: Emigration
    mover: Mover
    kernel: Kernel | None = None
    walk: Walk | None = None


@dataclass(frozen=True)
class Census:
    """What the census counts: patch labels (0 = no patch), the occupancy threshold
    (individuals per cell) and the focus areas (None: none)."""

    labels: np.ndarray
    n_patches: int
    occupancy_threshold: float
    focus: FocusCensus | None


@dataclass(frozen=True)
class Model:
    """Everything the yearly cycle needs, in cell units (see the module docstring)."""

    plan: RunPlan
    growth: Growth
    movement: Movement | None  # None: no dispersal
    census: Census
    landscape: Landscape  # with the actions applied
    capacity: np.ndarray
    initial: np.ndarray
    actions: Actions
    regime: Regime | None
    management: Management | None = None  # releases and removals

    @property
    def ledger_columns(self) -> list[str]:
        """Ledger columns after :data:`gridpop.io.results.LEDGER_FIELDS`: ``released`` and
        ``removed`` with releases or removals, then those of the life history
        (:attr:`LifeHistory.columns`)."""
        return (["released", "removed"] if self.management is not None else []) + \
            self.growth.life.columns

    @property
    def walk(self) -> Walk | None:
        return self.movement.walk if self.movement is not None else None

    @property
    def kernel(self) -> Kernel | None:
        return self.movement.kernel if self.movement is not None else None

    @property
    def accumulators(self) -> dict:
        """Per-year per-cell sums this model writes: name -> dtype."""
        acc = {"sum_n": np.float64, "occupied": np.int32, "ever": np.int32}
        if self.regime is not None:
            acc.update({f"n_{kind}": np.int32 for kind in self.disturbance_kinds})
        if self.walk is not None:
            acc["visits"] = np.float64
        acc.update({f"sum_abundance_{self.growth.life.names[s]}": np.float64
                    for s in self.growth.life.rasters})
        if self.landscape.timeline is not None and self.regime is not None:
            acc["sum_k"] = np.float64  # capacity of year t (after disturbance) at index t
        return acc

    @functools.cached_property
    def connectivity(self) -> np.ndarray | None:
        """Walk method: (P, P) probability that a disperser leaving patch i settles in patch j
        in one year (expected walk on the year-0 landscape, start cells weighted by capacity)."""
        w = self.walk
        if w is None:
            return None
        return patch_connectivity(w.labels, w.n_patches, w.permeability,
                                  w.quality(self.capacity), w.params, weights=self.capacity,
                                  entry_survival=w.entry_survival)

    @property
    def disturbance_kinds(self) -> list[str]:
        return sorted({t.kind for t in self.regime.tables}) if self.regime else []


def build_model(scenario, base: Landscape) -> Model:
    """Apply the scenario's actions to its base landscape and convert its user units (metres,
    hectares, years) to cell units on the grid: the one place where this happens. Warns
    (:class:`gridpop.errors.ScenarioWarning`) where the model is probably not what the user
    meant (:mod:`gridpop.simulation.pitfalls`)."""
    actions = apply_actions(scenario, base)
    landscape = actions.landscape
    g, d, grid = scenario.growth, scenario.dispersal, landscape.grid
    labels = np.ascontiguousarray(landscape.patches.labels, np.int32)
    n_patches = landscape.patches.n
    life = _life_history(scenario, landscape.initial)
    movement = None
    if life.fractions.max() > 0:
        emigration = Emigration(d.fraction, d.density_dependence)
        if d.method == "walk":
            walk = _walk(scenario, landscape, actions, labels, g.stochastic)
            movement = Movement(emigration, walk, walk=walk)
        else:
            with _keys_of(scenario, "dispersal"):
                kernel = make_kernel(d.kernel, mean_distance_m=d.mean_distance_m, tail=d.tail,
                                     max_distance_m=d.max_distance_m,
                                     cell_w_m=grid.cell_width_m, cell_h_m=grid.cell_height_m,
                                     grid_shape=grid.shape)
            barrier = actions.barrier
            mover: Mover
            if barrier is not None and barrier.max() > 0:
                mover = BarrierKernelMover(kernel, d.edge, labels, n_patches, g.stochastic,
                                           barrier)
            else:
                mover = KernelMover(kernel, d.edge, labels, n_patches, g.stochastic)
            movement = Movement(emigration, mover, kernel=kernel)
    env = None
    if g.env_sd > 0:
        with _keys_of(scenario, "growth"):
            env = EnvironmentalNoise(grid.shape, grid.cell_width_m, grid.cell_height_m, g.env_sd,
                                     g.env_correlation_m, g.env_autocorrelation)
    r = scenario.run
    rates = GrowthRates(MODEL_CODES[g.model], g.rate, g.survival, g.theta,
                        g.allee_density * grid.cell_area_ha, g.stochastic)
    model = Model(
        plan=RunPlan(r.years, r.replicates, r.seed, r.batch_size),
        growth=Growth(rates, env, life),
        movement=movement,
        census=Census(labels, n_patches, scenario.output.occupancy_threshold,
                      focus_census(scenario, grid)),
        landscape=landscape,
        capacity=np.ascontiguousarray(landscape.capacity, dtype=np.float64),
        initial=np.ascontiguousarray(landscape.initial, dtype=np.float64),
        actions=actions, regime=build_regime(scenario, landscape, actions),
        management=build_management(scenario, grid, actions.areas, labels, n_patches),
    )
    warn(scenario, model)
    return model


def _life_history(scenario, initial: np.ndarray) -> LifeHistory:
    """The classes, their rates, emigration fractions and year-0 counts."""
    st, g, sex = scenario.stages, scenario.growth, scenario.sex
    if st is None:
        return LifeHistory(one_stage(), (), np.array([scenario.dispersal.fraction]),
                           np.ones(1, np.uint8), np.ascontiguousarray(initial[None], np.float64))
    names = st.names
    t, f = np.array(st.transitions), np.array(st.fecundity)
    sexes = 1 if sex.system == "female-only" else 2
    with _keys_of(scenario, "stages"):
        rates = stage_rates(t, f, model=g.model, acts_on=st.density_acts_on,
                            density_stages=[x in (st.density_stages or names) for x in names],
                            sexes=sexes, system=sex.system,
                            female_fraction=sex.female_fraction_at_birth, harem=sex.harem_size)
    if st.initial_distribution == "stable":
        w = matrices.diagnostics(t, f).stable_distribution
    else:
        w = np.array(st.initial_distribution, np.float64)
    if sexes == 2:
        p = sex.female_fraction_at_birth
        w = np.concatenate([w * p, w * (1.0 - p)])
    fractions = np.tile(np.array(st.dispersal_fraction
                                 or [scenario.dispersal.fraction] * len(names)), sexes)
    counted = np.tile([x in (st.abundance_stages or names) for x in names], sexes)
    rasters = tuple(names.index(r[len("abundance_"):]) for r in scenario.output.rasters
                    if r.startswith("abundance_"))
    return LifeHistory(rates, names, fractions, counted.astype(np.uint8),
                       np.ascontiguousarray(split_initial(initial, w, g.stochastic)), rasters)


@contextlib.contextmanager
def _keys_of(scenario, section: str):
    """Turn the ``ValueError`` of numerical code, whose message starts with the name of the
    parameter (the key), into a :class:`ScenarioError` that names the file and the section."""
    try:
        yield
    except ValueError as exc:
        raise ScenarioError(f"{where(scenario.path, section)} {exc}") from None


def _permeability(res, mask, actions: Actions) -> np.ndarray:
    """Permeability from resistance: NaN outside the study area, the corridors' factors, the
    impassable barriers at 0 (raises ValueError on bad resistance)."""
    res = np.where(mask, res, np.nan)
    if actions.resistance_factor is not None:
        res = res * actions.resistance_factor
    perm = permeability_from_resistance(res)
    if actions.barrier is not None:
        perm[actions.barrier >= 1.0] = 0.0
    return np.ascontiguousarray(perm)


@dataclass(frozen=True, eq=False)
class FutureResistance:
    """Reads a later resistance layer for a :class:`Timeline`: aligned, a value in the cells
    where the starting resistance layer ``first`` has one, values a permeability can be made
    of."""

    file: Path
    first: Path
    grid: Grid
    mask: np.ndarray  # the study area
    has_value: np.ndarray  # the starting resistance layer's cells with a value
    actions: Actions

    def __call__(self, source: Source) -> np.ndarray:
        data, _ = read_layer(source, self.grid, self.has_value, self.first, self.file)
        try:
            _permeability(data, self.mask, self.actions)
        except ValueError as exc:
            loc = where_layer(self.file, source.section, source.key, source.path)
            raise InputDataError(f"{loc}: {exc}") from None
        return data


@dataclass(eq=False)
class PermeabilityByYear:
    """The walk's permeability of each year from a resistance :class:`Timeline`; the last one is
    reused while the layer does not change."""

    timeline: Timeline
    mask: np.ndarray
    actions: Actions
    _last: tuple = ((-1, -1), None)

    def __call__(self, year: int) -> np.ndarray:
        key = self.timeline.key(year)
        if key != self._last[0]:
            self._last = (key, _permeability(self.timeline.at(key), self.mask, self.actions))
        return self._last[1]


def _walk(scenario, landscape: Landscape, actions: Actions, labels: np.ndarray,
          stochastic: bool) -> Walk:
    """Permeability, barriers and settlement of the walk engine."""
    d, grid = scenario.dispersal, landscape.grid
    if d.resistance is not None:
        res = align_raster(d.resistance, grid, kind="continuous", file=scenario.path,
                           section="dispersal", key="resistance").data
    else:
        with _keys_of(scenario, "dispersal"):
            res = resistance_from_suitability(landscape.suitability, d.resistance_max,
                                              d.resistance_shape)
    try:
        perm = _permeability(res, landscape.mask, actions)
    except ValueError as exc:
        layer = d.resistance or "resistance from suitability"
        raise InputDataError(f"{where_layer(scenario.path, 'dispersal', 'resistance', layer)}: "
                             f"{exc}") from None
    by_year = None
    if d.future:
        read = FutureResistance(scenario.path, d.resistance, grid, landscape.mask,
                                ~np.isnan(res), actions)
        sources = tuple(Source(f.year, f.resistance, None, f"dispersal.future #{i}",
                               "resistance") for i, f in enumerate(d.future, 1))
        for source in sources:
            read(source)  # every layer checked once before the run
        by_year = PermeabilityByYear(Timeline(res, sources, scenario.habitat.change, read),
                                     landscape.mask, actions)
    entry = None
    if actions.barrier is not None:
        partial = (actions.barrier > 0) & (actions.barrier < 1.0)
        if partial.any():
            entry = np.where(partial, 1.0 - actions.barrier, 1.0)
    with _keys_of(scenario, "dispersal"):
        params = WalkParams(walk_length=d.walk_length,
                            death_per_resistance=d.death_per_resistance,
                            settle_exponent=d.settle_exponent, heading_bias=d.heading_bias)
    full = scenario.habitat.capacity_per_ha * grid.cell_area_ha
    return Walk(perm, entry, full, params, labels, landscape.patches.n, stochastic, by_year)

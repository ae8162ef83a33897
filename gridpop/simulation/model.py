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
from typing import NamedTuple

import numpy as np

from ..actions import Actions, apply_actions
from ..analysis.summary import FocusCensus, focus_census
from ..demography import MODEL_CODES, EnvironmentalNoise
from ..disturbance import Regime, build_regime
from ..errors import InputDataError, ScenarioError, where, where_layer
from ..io.rasters import align_raster
from ..landscape import Landscape
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
class Growth:
    """Local growth: the vital rates and the environmental noise (None: none)."""

    rates: GrowthRates
    env: EnvironmentalNoise | None

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
    movement = None
    if d.fraction > 0:
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
        growth=Growth(rates, env),
        movement=movement,
        census=Census(labels, n_patches, scenario.output.occupancy_threshold,
                      focus_census(scenario, grid)),
        landscape=landscape,
        capacity=np.ascontiguousarray(landscape.capacity, dtype=np.float64),
        initial=np.ascontiguousarray(landscape.initial, dtype=np.float64),
        actions=actions, regime=build_regime(scenario, landscape, actions),
    )
    warn(scenario, model)
    return model


@contextlib.contextmanager
def _keys_of(scenario, section: str):
    """Turn the ``ValueError`` of numerical code, whose message starts with the name of the
    parameter (the key), into a :class:`ScenarioError` that names the file and the section."""
    try:
        yield
    except ValueError as exc:
        raise ScenarioError(f"{where(scenario.path, section)} {exc}") from None


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
    res = np.where(landscape.mask, res, np.nan)
    if actions.resistance_factor is not None:
        res = res * actions.resistance_factor
    try:
        perm = permeability_from_resistance(res)
    except ValueError as exc:
        layer = d.resistance or "resistance from suitability"
        raise InputDataError(f"{where_layer(scenario.path, 'dispersal', 'resistance', layer)}: "
                             f"{exc}") from None
    entry = None
    if actions.barrier is not None:
        perm[actions.barrier >= 1.0] = 0.0
        partial = (actions.barrier > 0) & (actions.barrier < 1.0)
        if partial.any():
            entry = np.where(partial, 1.0 - actions.barrier, 1.0)
    with _keys_of(scenario, "dispersal"):
        params = WalkParams(walk_length=d.walk_length,
                            death_per_resistance=d.death_per_resistance,
                            settle_exponent=d.settle_exponent, heading_bias=d.heading_bias)
    full = scenario.habitat.capacity_per_ha * grid.cell_area_ha
    return Walk(np.ascontiguousarray(perm), entry, full, params, labels, landscape.patches.n,
                stochastic)

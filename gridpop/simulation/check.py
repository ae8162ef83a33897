"""What the tool understood of a scenario, as ``gridpop check`` prints it.
"""

from __future__ import annotations

import dataclasses
import math
import tempfile
import time
from pathlib import Path

import numpy as np

from .. import matrices
from ..config import merged_toml
from .batches import run_batch
from .cycle import BatchSink, Replicate
from .model import Model, RunPlan


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
    st = scenario.stages
    if st is None:
        lines.append(f"growth: {g.model}, r = {g.rate:g} (lambda0 = {math.exp(g.rate):.4g}), "
                     f"survival = {g.survival:g}, {mode}")
    else:
        lines += stage_lines(scenario, mode)
    if model.growth.env is not None:
        lines.append(f"environment: sd {g.env_sd:g}, correlation length "
                     f"{g.env_correlation_m:g} m, autocorrelation {g.env_autocorrelation:g}")
    staged = st is not None and st.dispersal_fraction is not None
    who = ("the stage fractions above" if staged
           else f"{scenario.dispersal.fraction:g} of individuals")
    if model.kernel is not None:
        d = scenario.dispersal
        lines.append(f"dispersal: {who} per year, {d.kernel} kernel, "
                     f"mean distance {d.mean_distance_m:g} m, radius {model.kernel.radius} "
                     f"cells, {d.edge} edge")
    elif model.walk is not None:
        d, w = scenario.dispersal, model.walk
        source = f"resistance {d.resistance.name}" if d.resistance is not None else (
            f"resistance from suitability (max {d.resistance_max:g}, shape "
            f"{d.resistance_shape:g})")
        blocked = int((w.permeability == 0).sum())
        lines.append(f"dispersal: {who} per year walk over the "
                     f"landscape, {source}; up to {d.walk_length} steps, "
                     f"death_per_resistance {d.death_per_resistance:g}, heading_bias "
                     f"{d.heading_bias:g}; "
                     f"{blocked} cells impassable")
    else:
        lines.append("dispersal: none (fraction = 0)")
    lines += [f"action {note}" for note in model.actions.notes]
    lines += _through_time(scenario, model)
    if model.regime is not None:
        lines += [f"disturbance {note}" for note in model.regime.notes]
    plan = model.plan
    lines.append(f"run: {plan.years} years x {plan.replicates} replicates, seed {plan.seed}")
    return lines


def stage_lines(scenario, mode: str) -> list[str]:
    """The life history: stages, crowding, sexes, then the matrix and its diagnostics."""
    st, g, sex = scenario.stages, scenario.growth, scenario.sex
    names = list(st.names)
    t, f = np.array(st.transitions), np.array(st.fecundity)
    init = st.initial_distribution
    lines = [f"growth: {len(names)}-stage matrix ({', '.join(names)}), {g.model} crowding of "
             f"{st.density_acts_on} by {', '.join(st.density_stages or names)}, {mode}",
             f"  abundance counts {', '.join(st.abundance_stages or names)}; initial "
             f"distribution {init if isinstance(init, str) else list(init)}"]
    if st.dispersal_fraction is not None:
        lines.append("  dispersal fraction by stage: " + ", ".join(
            f"{n} {x:g}" for n, x in zip(names, st.dispersal_fraction, strict=True)))
    if sex.system != "female-only":
        harem = f", harem size {sex.harem_size:g}" if sex.system == "polygynous" else ""
        lines.append(f"  two sexes, {sex.system}{harem}, female fraction at birth "
                     f"{sex.female_fraction_at_birth:g}")
    lines.append("  transitions: " + "; ".join(" ".join(f"{x:g}" for x in r) for r in t))
    lines.append("  fecundity: " + "; ".join(" ".join(f"{x:g}" for x in r) for r in f))
    return lines + [f"  {line}" for line in matrices.describe(names, t, f)]


def _through_time(scenario, model: Model) -> list[str]:
    """Total capacity at the years with a suitability layer (and the last year), of the layer
    alone and with this plan's actions."""
    timeline = model.landscape.timeline
    if timeline is None:
        return []
    last = model.plan.years - 1
    years = sorted({y for y in timeline.years if y <= last} | {last})
    lines = [f"habitat through time ({scenario.habitat.change} change between the layers): "
             f"total capacity by year"]
    for year, alone, with_plan in model.actions.totals(years):
        line = f"  year {year}: {alone:,.1f}"
        if scenario.actions:
            line += f"; with this plan's actions {with_plan:,.1f} ({with_plan - alone:+,.1f})"
        lines.append(line)
    return lines


def merged_lines(scenario) -> list[str]:
    """With ``[plan] extends``: the merged scenario as one TOML file, indented (the last part
    of ``gridpop check``); otherwise nothing."""
    if scenario.plan.extends is None:
        return []
    return ([f"extends {scenario.plan.extends.name}: the merged scenario, as one file (tables "
             "merged key by key, [[disturbance]] and [[action]] appended):"]
            + [f"  {line}" if line else "" for line in merged_toml(scenario.path).splitlines()])


PROBE_SECONDS = 3.0
"""How long the run-time probe of ``gridpop check`` runs years of replicate 0 (at least one
year, at most all of them)."""


def _duration(seconds: float) -> str:
    if seconds < 90:
        return f"{max(seconds, 1):.0f} s"
    if seconds < 90 * 60:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


def runtime_line(model: Model) -> str:
    """An estimate of the run time from a probe: years of replicate 0 of the scenario itself,
    run in this process for about :data:`PROBE_SECONDS` (after a one-year warm-up that loads or
    compiles the kernels), the time per year scaled to every year and replicate. Nothing is
    written but a temporary folder."""
    plan = model.plan
    one = dataclasses.replace(model, plan=RunPlan(plan.years, 1, plan.seed, 1))
    with tempfile.TemporaryDirectory(prefix="gridpop-probe-") as tmp:
        run_batch(dataclasses.replace(model, plan=RunPlan(1, 1, plan.seed, 1)), range(1),
                  Path(tmp) / "warm-up")
        sink = BatchSink(Path(tmp) / "probe", one, range(1))
        replicate = Replicate(one, 0, sink.ledger[0])
        start = time.perf_counter()
        replicate.start(sink)
        years = 0
        while years < plan.years and (years == 0
                                      or time.perf_counter() - start < PROBE_SECONDS):
            years += 1
            replicate.advance(years, sink)
        took = time.perf_counter() - start
        del sink, replicate  # release the memory-mapped files before the folder goes
    total = took / years * plan.years * plan.replicates
    return (f"estimated run time: about {_duration(total)} in this process (a probe ran "
            f"{years} year{'s' if years > 1 else ''} of replicate 0 in {took:.2g} s; x "
            f"{plan.years} years x {plan.replicates} replicates; writing the results not "
            "counted; the first years may cost more or less than later ones)")

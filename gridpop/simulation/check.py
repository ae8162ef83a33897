"""What the tool understood of a scenario, as ``gridpop check`` prints it.
"""

from __future__ import annotations

import math

from ..config import merged_toml
from .model import Model


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
    if model.growth.env is not None:
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
    plan = model.plan
    lines.append(f"run: {plan.years} years x {plan.replicates} replicates, seed {plan.seed}")
    return lines


def merged_lines(scenario) -> list[str]:
    """With ``[plan] extends``: the merged scenario as one TOML file, indented (the last part
    of ``gridpop check``); otherwise nothing."""
    if scenario.plan.extends is None:
        return []
    return ([f"extends {scenario.plan.extends.name}: the merged scenario, as one file (tables "
             "merged key by key, [[disturbance]] and [[action]] appended):"]
            + [f"  {line}" if line else "" for line in merged_toml(scenario.path).splitlines()])

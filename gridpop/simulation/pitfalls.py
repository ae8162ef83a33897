"""Scenarios that run but are probably not what the user meant: one line each, naming the key.

:func:`pitfalls` lists them for a built model; :func:`gridpop.simulation.model.build_model`
emits each as a :class:`gridpop.errors.ScenarioWarning`, so ``gridpop check``, ``gridpop run``,
``gridpop compare`` and the Python API say them alike (the command line prints them on stderr
as ``gridpop: warning: ...``).

- Habitat cells holding on average fewer than :data:`FEW_PER_CELL` individuals at capacity, in a
  stochastic run: demographic noise dominates, and it is often a unit slip (``capacity_per_ha``
  is per hectare, a cell is a fraction of a hectare or many hectares).
- A population, or a focus area, that starts below ``[risk] quasi_extinction``: its risk is 1
  from year 0 whatever the plan.
- An action whose area does not intersect the grid, or a corridor that changes nothing.
- Keys the dispersal method does not read (walk-only keys with ``method = "kernel"`` and the
  other way round, a corridor's ``resistance_multiplier`` with the kernel): warned, not refused,
  so that one can switch ``method`` in a plan that extends a base scenario without editing the
  keys of the other method. A key counts as set when it differs from its default.
"""

from __future__ import annotations

import dataclasses
import warnings

from ..config import KERNEL_KEYS, WALK_KEYS, DispersalConfig
from ..errors import ScenarioWarning, where

FEW_PER_CELL = 5.0
"""Mean capacity of the habitat cells (individuals) below which a stochastic run is warned."""


def _capacity(scenario, model) -> list[str]:
    k = model.capacity
    habitat = k > 0
    if not model.growth.stochastic or not habitat.any():
        return []
    mean = float(k[habitat].mean())
    if mean >= FEW_PER_CELL:
        return []
    h = scenario.habitat
    return [f"{where(scenario.path, 'habitat', 'capacity_per_ha')} = {h.capacity_per_ha:g}: "
            f"habitat cells hold {mean:.3g} individuals each on average at capacity, fewer "
            f"than {FEW_PER_CELL:g}, so demographic noise will dominate the results "
            f"(capacity_per_ha is individuals per hectare at suitability 1; a cell here is "
            f"{model.landscape.grid.cell_area_ha:.4g} ha)."]


def _below_threshold(scenario, model) -> list[str]:
    q = scenario.risk.quasi_extinction
    loc = f"{where(scenario.path, 'risk', 'quasi_extinction')} = {q:g}"
    out = []
    start = float(model.initial.sum())
    if start < q:
        out.append(f"{loc}: the population starts with {start:,.6g} individuals, below it, so "
                   "the quasi-extinction risk is 1 from year 0.")
    focus = model.census.focus
    if focus is not None:
        flat = model.initial.ravel()
        low = [(name, float(flat[idx].sum()))
               for name, idx in zip(focus.names, focus.cells, strict=True)
               if flat[idx].sum() < q]
        if low:
            names = ", ".join(f"{name!r} ({n:,.6g} individuals)" for name, n in low)
            one = len(low) == 1
            out.append(f"{loc}: focus area{'' if one else 's'} {names} start{'s' if one else ''} "
                       f"below it, so {'its' if one else 'their'} risk is 1 from year 0; read "
                       f"{'its' if one else 'their'} colonisation figures instead "
                       "(summary.json \"colonisation\", the report).")
    return out


def _method_keys(scenario) -> list[str]:
    d = scenario.dispersal
    default = {f.name: f.default for f in dataclasses.fields(DispersalConfig)}
    other, keys = ("walk", WALK_KEYS) if d.method == "kernel" else ("kernel", KERNEL_KEYS)
    given = [k for k in keys if getattr(d, k) != default[k]]
    out = []
    if given:
        one = len(given) == 1
        out.append(f"{where(scenario.path, 'dispersal')} {', '.join(given)}: "
                   f"{'has' if one else 'have'} no effect with method = {d.method!r} (only "
                   f"method = {other!r} reads {'it' if one else 'them'}); remove "
                   f"{'it' if one else 'them'} or set method = {other!r}.")
    if d.method == "kernel":
        out += [f"{where(scenario.path, c.label, 'resistance_multiplier')} = "
                f"{c.resistance_multiplier:g} has no effect with [dispersal] method = 'kernel': "
                "only the walk crosses a resistance surface."
                for c in scenario.actions
                if c.kind == "corridor" and c.resistance_multiplier != 1]
    return out


def pitfalls(scenario, model) -> list[str]:
    """The warnings of a scenario and its built model
    (:class:`gridpop.simulation.model.Model`), one line each, in the order of the module
    docstring."""
    return [*_capacity(scenario, model), *_below_threshold(scenario, model),
            *model.actions.no_effect, *_method_keys(scenario)]


def warn(scenario, model) -> None:
    """Emit each of :func:`pitfalls` as a :class:`ScenarioWarning`."""
    for line in pitfalls(scenario, model):
        detail = line.removeprefix(f"{scenario.path}: ")  # each line names the file first
        warnings.warn(ScenarioWarning(scenario.path, detail), stacklevel=3)

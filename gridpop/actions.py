"""Management actions: a scenario is a base landscape plus its ``[[action]]`` tables, in order.

Each action has an area (a vector file of polygons or lines, or a raster whose cells > 0 count)
and a kind (:data:`gridpop.config.ACTION_KINDS`):

- **reserve**: capacity times ``capacity_multiplier``; exempt from every habitat_loss action
  (whatever the order); fire ignition and spread times ``ignition_multiplier`` and
  ``spread_multiplier`` (read by :func:`gridpop.disturbance.build_regime`).
- **corridor**: suitability raised to ``target_suitability`` (cells already better keep theirs);
  dispersal resistance times ``resistance_multiplier``.
- **barrier**: a crossing mortality per cell, for the dispersal engines.
- **restoration**: suitability rises towards ``target_suitability`` from ``start_year``.
- **habitat_loss**: suitability falls towards ``target_suitability`` from ``start_year``, outside
  reserves.

Suitability changes are applied in the order of the tables, each to the suitability left by the
ones before (so overlapping actions are allowed and the later one acts on the earlier one's
result); capacity is then computed from the suitability with the ``[habitat]`` response and
multiplied by the reserves' multipliers. A schedule (restoration, habitat loss) spreads its change
over ``ramp_years``: in year ``start_year + i`` the fraction ``min(1, (i + 1) / ramp_years)`` of
the change is done (``ramp_years`` 0 or 1: all at once). Year t is the step from census year t to
t + 1, the numbering of :meth:`gridpop.disturbance.Regime.apply`.

The initial abundance stays that of the base landscape, so plans start from the same population.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import where
from .io.vectors import read_cells
from .landscape import Landscape, Patches, capacity, label_patches
from .management import managed_note


@dataclass(frozen=True, eq=False)
class _Change:
    """One suitability change: towards ``target`` (up or down) in ``cells``, on a schedule."""

    up: bool
    cells: np.ndarray
    target: float
    start: int = 0
    ramp: int = 0

    @property
    def scheduled(self) -> bool:
        return self.start > 0 or self.ramp > 1

    def fraction(self, year: int) -> float:
        if year < self.start:
            return 0.0
        return min(1.0, (year - self.start + 1) / self.ramp) if self.ramp > 1 else 1.0

    def apply(self, s: np.ndarray, fraction: float) -> None:
        c = self.cells
        reached = np.maximum(s[c], self.target) if self.up else np.minimum(s[c], self.target)
        s[c] = reached if fraction >= 1.0 else s[c] + fraction * (reached - s[c])


def _change(config, cells, mask, reserved) -> _Change | None:
    """The suitability change of an action, or None (reserve, barrier, corridor without one)."""
    if config.kind == "corridor" and config.target_suitability is not None:
        return _Change(True, cells & mask, config.target_suitability)
    if config.kind == "restoration":
        return _Change(True, cells & mask, config.target_suitability, config.start_year,
                       config.ramp_years)
    if config.kind == "habitat_loss":
        return _Change(False, cells & mask & ~reserved, config.target_suitability,
                       config.start_year, config.ramp_years)
    return None


@dataclass(frozen=True, eq=False)
class _Schedule:
    """Suitability changes in order, then capacity times the reserves' multipliers."""

    base: Landscape
    habitat: object
    changes: tuple[_Change, ...]
    multiplier: np.ndarray

    def key(self, year: int) -> tuple:
        """The habitat's key of the year (:meth:`Timeline.key`, with a timeline) and the
        fractions done of the scheduled changes: equal keys, equal capacity."""
        done = tuple(c.fraction(year) for c in self.changes if c.scheduled)
        timeline = self.base.timeline
        return done if timeline is None else (timeline.key(year), *done)

    def suitability(self, key) -> np.ndarray:
        it = iter(key)
        timeline = self.base.timeline
        s = self.base.suitability.copy() if timeline is None else timeline.at(next(it)).copy()
        for c in self.changes:
            c.apply(s, next(it) if c.scheduled else 1.0)
        return s

    def capacity(self, key) -> np.ndarray:
        return _k(self.suitability(key), self.multiplier, self.base, self.habitat)


def _k(s, multiplier, base: Landscape, habitat) -> np.ndarray:
    k = capacity(s, capacity_per_ha=habitat.capacity_per_ha, cell_area_ha=base.grid.cell_area_ha,
                 response=habitat.response, threshold=habitat.threshold,
                 exponent=habitat.exponent)
    return np.ascontiguousarray(np.where(base.mask, k * multiplier, 0.0))


CAPACITY_KEPT = 8
"""Capacity arrays of distinct years that :meth:`Actions.capacity_for_year` keeps for the run."""


@dataclass(eq=False)
class Actions:
    """A scenario's landscape with its actions applied.

    Attributes
    ----------
    landscape : Landscape
        Suitability and capacity of year 0; patches labelled from the largest capacity each cell
        reaches during the run (so cells that become habitat later, by restoration, belong to a
        patch from the start), with ``patches.capacity`` the year-0 sums; ``initial`` is the base
        landscape's.
    notes : tuple of str
        Per action: cells and hectares touched, change in total capacity (at full effect),
        overlap with earlier actions, how the layer was read.
    areas : tuple of (ny, nx) bool ndarray
        Cells of each action's area, in order.
    barrier : (ny, nx) float64 ndarray or None
        Probability that a disperser dies entering the cell (1 = impassable; several barriers
        combine as independent risks); None without barriers.
    resistance_factor : (ny, nx) float64 ndarray or None
        Multiplier on dispersal resistance (corridors < 1); None when every factor is 1.
    ignition_multiplier, spread_multiplier : (ny, nx) float64 ndarray or None
        Multipliers on fire ignition and spread from reserves; None when every factor is 1.
    no_effect : tuple of str
        One line per action that cannot change anything, naming its key: an area that does not
        intersect the grid, a corridor with neither target_suitability nor
        resistance_multiplier (warned by :func:`gridpop.simulation.pitfalls.pitfalls`).
    """

    landscape: Landscape
    notes: tuple[str, ...]
    areas: tuple[np.ndarray, ...]
    barrier: np.ndarray | None
    resistance_factor: np.ndarray | None
    ignition_multiplier: np.ndarray | None
    spread_multiplier: np.ndarray | None
    no_effect: tuple[str, ...] = ()
    _schedule: _Schedule | None = field(default=None, repr=False)
    _kept: dict = field(default_factory=dict, repr=False)
    _last: tuple = field(default=((), None), repr=False)

    def capacity_for_year(self, year: int) -> np.ndarray:
        """Carrying capacity K per cell in year ``year`` (float64 (ny, nx); do not modify).

        Without scheduled actions this is ``landscape.capacity`` for every year; otherwise the
        array of each distinct state of the schedules is computed once and kept (the first
        :data:`CAPACITY_KEPT`; beyond them the last computed array is reused while no
        schedule moves), so that every replicate's years of a ramp reuse them.
        """
        if self._schedule is None:
            return self.landscape.capacity
        key = self._schedule.key(year)
        k = self._kept.get(key)
        if k is not None:
            return k
        last_key, last = self._last
        if key != last_key or last is None:
            last = self._schedule.capacity(key)
            if len(self._kept) < CAPACITY_KEPT:
                self._kept[key] = last
            else:
                self._last = (key, last)
        return last

    def capacity_arrays(self, years: int) -> int:
        """How many capacity arrays :meth:`capacity_for_year` holds at most over years
        0..years - 1 (for the memory estimate)."""
        if self._schedule is None:
            return 0
        distinct = len({self._schedule.key(y) for y in range(years)})
        return min(distinct, CAPACITY_KEPT) + (distinct > CAPACITY_KEPT)

    def totals(self, years) -> list[tuple[int, float, float]]:
        """``(year, total K of the year's suitability layer alone, total K with the actions)``
        for some years, for ``gridpop check``."""
        out = []
        for year in years:
            k = self.capacity_for_year(year)
            s = self._schedule
            if s is None or s.base.timeline is None:
                alone = self.landscape.capacity if s is None else s.base.capacity
            else:
                timeline = s.base.timeline
                alone = _k(timeline.at(timeline.key(year)), 1.0, s.base, s.habitat)
            out.append((year, float(alone.sum()), float(k.sum())))
        return out


def _product(shape, pairs) -> np.ndarray | None:
    """Cell-wise product of (cells, factor) pairs; None when every factor is 1."""
    pairs = [(c, f) for c, f in pairs if f != 1.0 and c.any()]
    if not pairs:
        return None
    out = np.ones(shape)
    for cells, f in pairs:
        out[cells] *= f
    return out


def apply_actions(scenario, landscape: Landscape) -> Actions:
    """Apply a scenario's ``[[action]]`` tables, in order, to its base landscape.

    Parameters
    ----------
    scenario : gridpop.config.Scenario
    landscape : Landscape
        The base landscape (:func:`gridpop.landscape.build_landscape`).

    Returns
    -------
    Actions
        Without actions: the base landscape itself, no notes, every layer None.

    Raises
    ------
    ScenarioError
        ``buffer_m`` with a raster area.
    InputDataError
        An area layer that cannot be read.
    """
    configs = scenario.actions
    if not configs and landscape.timeline is None:
        return Actions(landscape, (), (), None, None, None, None)
    grid, shape, mask = landscape.grid, landscape.grid.shape, landscape.mask
    read = [read_cells(c.area, grid, file=scenario.path, section=c.label, key="area",
                       buffer_m=c.buffer_m, all_touched=c.all_touched) for c in configs]
    pairs = [(c, r[0]) for c, r in zip(configs, read, strict=True)]
    reserved = np.zeros(shape, bool)
    multiplier = np.ones(shape)
    for c, cells in pairs:
        if c.kind == "reserve":
            reserved |= cells
            multiplier[cells] *= c.capacity_multiplier
    changes = [_change(c, cells, mask, reserved) for c, cells in pairs]
    schedule = _Schedule(landscape, scenario.habitat, tuple(x for x in changes if x is not None),
                         multiplier)

    k0 = schedule.capacity(schedule.key(0))
    k_max = k0
    for key in dict.fromkeys(schedule.key(t) for t in range(1, scenario.run.years)):
        k_max = np.maximum(k_max, schedule.capacity(key))
    labelled = label_patches(k_max, grid.cell_area_ha)
    patches = Patches(labels=labelled.labels, area_ha=labelled.area_ha,
                      capacity=np.bincount(labelled.labels.ravel(), weights=k0.ravel(),
                                           minlength=labelled.n + 1))
    changed = Landscape(grid=grid, mask=mask, suitability=schedule.suitability(schedule.key(0)),
                        capacity=k0, patches=patches, initial=landscape.initial,
                        notes=landscape.notes, timeline=landscape.timeline)

    barriers = [(cells, 1.0 - c.crossing_mortality) for c, cells in pairs if c.kind == "barrier"]
    barrier = None
    if barriers:
        survive = _product(shape, barriers)
        barrier = np.zeros(shape) if survive is None else 1.0 - survive
    reserves = [(c, cells) for c, cells in pairs if c.kind == "reserve"]
    scheduled = any(x.scheduled for x in schedule.changes) or landscape.timeline is not None
    return Actions(
        landscape=changed,
        notes=tuple(_notes(configs, read, changes, landscape, scenario.habitat, reserved)),
        areas=tuple(cells for _, cells in pairs),
        barrier=barrier,
        resistance_factor=_product(shape, [(cells, c.resistance_multiplier)
                                           for c, cells in pairs if c.kind == "corridor"]),
        ignition_multiplier=_product(shape, [(cells, c.ignition_multiplier)
                                             for c, cells in reserves]),
        spread_multiplier=_product(shape, [(cells, c.spread_multiplier)
                                           for c, cells in reserves]),
        no_effect=tuple(_no_effect(scenario.path, configs, read)),
        _schedule=schedule if scheduled else None,
    )


def _no_effect(file: Path, configs, read) -> list[str]:
    out = []
    for c, (_, how, missed) in zip(configs, read, strict=True):
        if missed:
            out.append(f"{where(file, c.label, 'area')}: {how}")
        elif (c.kind == "corridor" and c.target_suitability is None
              and c.resistance_multiplier == 1):
            out.append(f"{where(file, c.label)}: neither target_suitability nor "
                       "resistance_multiplier is set, so the corridor has no effect")
    return out


def _notes(configs, read, changes, base: Landscape, habitat, reserved) -> list[str]:
    """One line per action, replaying the actions in order at full effect."""
    s = base.suitability.copy()
    multiplier = np.ones(base.grid.shape)
    total = base.capacity.sum()
    lines = []
    for i, c in enumerate(configs):
        cells, how, missed = read[i]
        head = f"[{c.label}] {Path(c.area).name}"
        if missed:
            lines.append(f"{head}: {how}")
            continue
        n = int(cells.sum())
        inside = cells & base.mask
        parts = [f"{n} cells ({n * base.grid.cell_area_ha:.6g} ha), {int(inside.sum())} in the "
                 f"study area"]
        if c.kind == "reserve":
            multiplier[cells] *= c.capacity_multiplier
            if c.ignition_multiplier != 1 or c.spread_multiplier != 1:
                parts.append(f"fire ignition x{c.ignition_multiplier:g}, spread "
                             f"x{c.spread_multiplier:g}")
        elif c.kind == "corridor":
            if c.resistance_multiplier != 1:
                parts.append(f"dispersal resistance x{c.resistance_multiplier:g}")
        elif c.kind == "barrier":
            parts.append(f"crossing mortality {c.crossing_mortality:g}"
                         + (" (impassable)" if c.crossing_mortality == 1 else ""))
        elif c.kind in ("release", "removal"):
            parts.append(managed_note(c))
        else:
            ramp = max(c.ramp_years, 1)
            parts.append(f"suitability towards {c.target_suitability:g} from year "
                         f"{c.start_year}, in full from year {c.start_year + ramp - 1}")
            exempt = int((inside & reserved).sum())
            if c.kind == "habitat_loss" and exempt:
                parts.append(f"{exempt} cells inside reserves exempt")
        if changes[i] is not None:
            changes[i].apply(s, 1.0)
        if c.kind not in ("barrier", "release", "removal"):
            after = _k(s, multiplier, base, habitat).sum()
            full = " at full effect" if changes[i] is not None and changes[i].scheduled else ""
            parts.append(f"total capacity {total:.6g} -> {after:.6g} ({after - total:+.6g})"
                         f"{full}")
            total = after
        for j in range(i):
            shared = int((cells & read[j][0]).sum())
            if shared:
                parts.append(f"overlaps [{configs[j].label}] in {shared} cells, applied after it")
        parts.append(how)
        lines.append(f"{head}: " + "; ".join(parts))
    return lines

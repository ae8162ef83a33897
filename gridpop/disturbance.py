"""Disturbance regimes: fires and floods drawn per replicate-year, with mortality and recovery.

A scenario's ``[[disturbance]]`` tables (:data:`gridpop.config.DISTURBANCE_KINDS`) become one
:class:`Regime`. The engine calls :meth:`Regime.apply` once per replicate-year, before growth.
Events depend only on (seed, replicate, year, table position) through the counter-based numbers
of :mod:`gridpop.rng`, never on the population: replicate i of two scenarios on the same
landscape has the same fires and floods (paired comparisons), and a replicate's events do not
depend on which other replicates run.

Fire
----
Ignitions in patch p follow a Poisson process with yearly mean

    m_p = -ln(1 - 1/RI) * h_p * A_p / E[min(S, A_p)]

with RI the return interval, A_p the patch area, h_p the patch mean of hazard times the reserves'
ignition multiplier (1 without either), and S the fire size. Ignitions scale with the patch area
over the mean fire size (a fire cannot be expected to burn more than its patch), so the expected
area burned per year is about A_p / RI. For fires that burn the whole patch, P(the patch burns
in a year) = 1 - exp(-m_p) = 1/RI exactly: time since fire is then geometric, the fire cycle of
Van Wagner (1978). The ignition cell is drawn with probability proportional to its hazard times
ignition multiplier. From it the fire spreads to the 8 neighbours of burned cells: each burnable
cell is open to this fire with probability q = min(1, hazard * spread multiplier) (site
percolation) and is reached after a delay Exp(1) / q; cells burn in order of arrival time (first
passage percolation) until the fire reaches its target size or no open cell borders it. Burnable
cells are the hazard > 0 cells of the study area when a hazard raster is given (then fires cross
the matrix into neighbouring patches where fuel connects), otherwise the habitat cells. A cell
burns at most once a year per fire table; an ignition in a cell already burned that year goes
out.

Flood
-----
One uniform u per replicate-year and flood table, shared by every cell, gives the year's return
period T = 1/u, so P(T >= T_k) = 1/T_k, the annual exceedance probability. The year floods when T
reaches the smallest return period given: the zone of the largest return period <= T (zones
nested: each includes the smaller ones), or the terrain cells below the stage interpolated at T
(linear in ln T, held at the largest given).

Effects and conventions
-----------------------
Mortality: each individual in a hit cell dies with probability ``mortality`` (binomial in
stochastic mode, the expectation otherwise). Capacity: a hit cell loses ``capacity_loss`` of its
capacity (a cell hit again keeps the larger share, 1 - (1 - L)(1 - capacity_loss)); the loss
shrinks linearly to 0 over ``recovery_years`` or by exp(-t / recovery_years). Tables act in
order, each on the abundance the previous left. Time since fire is 0 in a cell's burn year,
then 1, 2, ...; -1 for cells not burned since the run started. Year t is the step from census
year t to t + 1. A return interval or period that changes over the run (a Trend) gives each year
the value of that year: ignition rates scale by ln(1 - 1/RI(t)) / ln(1 - 1/RI(0)).

References
----------
Van Wagner, C. E. (1978). Age-class distribution and the forest fire cycle. Canadian Journal of
Forest Research 8, 220-227.
Broadbent, S. R. and Hammersley, J. M. (1957). Percolation processes. Mathematical Proceedings of
the Cambridge Philosophical Society 53, 629-641.
Chow, V. T., Maidment, D. R. and Mays, L. W. (1988). Applied Hydrology. McGraw-Hill (return
period and annual exceedance probability).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import rng
from ._jit import njit
from .config import FIRE_SIZES, RECOVERY, Trend
from .errors import InputDataError, where
from .firespread import burn_year
from .io.rasters import align_raster
from .io.vectors import read_cells
from .landscape import Landscape

SIZES = {name: code for code, name in enumerate(FIRE_SIZES)}
RECOVERIES = {name: code for code, name in enumerate(RECOVERY)}


def _integral(lo, hi, q):
    """Integral of s^q from lo to hi (elementwise)."""
    if q == -1.0:
        return np.log(hi / lo)
    return (hi ** (q + 1.0) - lo ** (q + 1.0)) / (q + 1.0)


def expected_size(distribution: str, area_ha, *, fraction=1.0, mean_ha=None, min_ha=None,
                  max_ha=None, exponent=None):
    """E[min(S, A)]: the mean fire size in hectares, truncated at the patch area A.

    Parameters
    ----------
    distribution : {'fraction', 'exponential', 'power_law'}
    area_ha : float or ndarray
        Patch areas A (> 0).
    fraction, mean_ha, min_ha, max_ha, exponent : float
        Parameters of the size distribution (``[[disturbance]]`` keys).

    Returns
    -------
    float or ndarray
        ``fraction * A``; ``mean (1 - exp(-A / mean))`` for the exponential; for the power law
        with density c s^-a on [min, max], c (I(min, m; 1 - a) + A I(m, max; -a)) with
        m = clip(A, min, max) and I(lo, hi; q) the integral of s^q.
    """
    a = np.asarray(area_ha, dtype=np.float64)
    if distribution == "fraction":
        return fraction * a
    if distribution == "exponential":
        return mean_ha * -np.expm1(-a / mean_ha)
    m = np.clip(a, min_ha, max_ha)
    c = 1.0 / _integral(min_ha, max_ha, -exponent)
    return c * (_integral(min_ha, m, 1.0 - exponent) + a * _integral(m, max_ha, -exponent))


def ignition_rate(return_interval: float, hazard_mean, area_ha, expected_size_ha):
    """Yearly mean number of ignitions of a patch: -ln(1 - 1/RI) h A / E[min(S, A)]."""
    return -math.log1p(-1.0 / return_interval) * hazard_mean * area_ha / expected_size_ha


def _table_key(seed, replicate, year, stream, index) -> np.uint64:
    """Key of one table's numbers in one replicate-year and stream."""
    key = np.uint64(rng.year_key(seed, replicate, year, stream))
    return np.uint64(rng.cell_key(key, index))


@njit
def _kill(n, hit, mortality, stochastic, key, deaths):
    """Apply mortality in place to the flat abundance ``n`` at cells ``hit``; deaths per hit."""
    for h in range(len(hit)):
        c = hit[h]
        if stochastic:
            d = float(rng.binomial(int(n[c]), mortality, rng.cell_key(key, c)))
        else:
            d = n[c] * mortality
        n[c] -= d
        deaths[h] = d


@dataclass(frozen=True, eq=False)
class _Table:
    """What one ``[[disturbance]]`` table does to the cells it hits."""

    label: str
    kind: str
    mortality: float
    capacity_loss: float
    recovery: int
    recovery_years: float

    def left(self, since: np.ndarray) -> np.ndarray:
        """Share of a loss still in place ``since`` years after the hit."""
        t = since.astype(np.float64)
        if self.recovery == RECOVERIES["linear"]:
            return np.clip(1.0 - t / self.recovery_years, 0.0, 1.0)
        return np.exp(-t / self.recovery_years)

    def remaining(self, since: np.ndarray, loss: np.ndarray) -> np.ndarray:
        return np.where(since >= 0, loss * self.left(since), 0.0)


@dataclass(frozen=True, eq=False)
class _Fire(_Table):
    rate: np.ndarray
    ptr: np.ndarray
    cells: np.ndarray
    cumw: np.ndarray
    size_code: int
    fraction_cells: np.ndarray
    mean_cells: float
    lo_cells: float
    hi_cells: float
    exponent: float
    spread: np.ndarray
    shape: tuple[int, int]
    interval: Trend | None = None  # a return interval that changes over the run
    run_years: int = 1

    def rate_of(self, year: int) -> np.ndarray:
        """Ignition rates of a year: ``rate`` (computed with the year-0 return interval) scaled
        by ln(1 - 1/RI(year)) / ln(1 - 1/RI(0))."""
        if self.interval is None:
            return self.rate
        ri0, ri = self.interval.at(0, self.run_years), self.interval.at(year, self.run_years)
        return self.rate * (math.log1p(-1.0 / ri) / math.log1p(-1.0 / ri0))

    def footprint(self, seed, replicate, year, index):
        fire_of = np.zeros(self.shape[0] * self.shape[1], np.int32)
        key = _table_key(seed, replicate, year, rng.STREAM_FIRE, index)
        count = burn_year(key, self.rate_of(year), self.ptr, self.cells, self.cumw, self.size_code,
                           self.fraction_cells, self.mean_cells, self.lo_cells, self.hi_cells,
                           self.exponent, self.spread, self.shape[1], self.shape[0], fire_of)
        return fire_of, count


@dataclass(frozen=True, eq=False)
class _Flood(_Table):
    periods: np.ndarray
    zones: tuple[np.ndarray, ...] | None  # flat bool, nested (zone k includes zones < k)
    terrain: np.ndarray | None  # flat, NaN outside the study area
    stages: np.ndarray | None
    period: Trend | None = None  # a return period that changes over the run (one magnitude)
    run_years: int = 1

    def return_period(self, seed, replicate, year, index) -> float:
        """The year's return period T = 1/u (one uniform shared by every cell)."""
        return 1.0 / rng.uniform(_table_key(seed, replicate, year, rng.STREAM_FLOOD, index), 0)

    def footprint(self, seed, replicate, year, index):
        t = self.return_period(seed, replicate, year, index)
        periods = self.periods if self.period is None else \
            np.array([self.period.at(year, self.run_years)])
        if t < periods[0]:
            return None, 0
        if self.zones is not None:
            hit = self.zones[int(np.searchsorted(periods, t, side="right")) - 1]
        else:
            stage = np.interp(math.log(t), np.log(periods), self.stages)
            hit = self.terrain < stage
        return hit.astype(np.int32), int(hit.any())


@dataclass
class _State:
    since: np.ndarray | None  # int32 flat, years since the table last hit the cell, -1 never
    loss: np.ndarray | None  # float64 flat, capacity share lost when last hit (after compounding)
    years: int = 0  # years applied so far: ``since`` is below it

    def age(self, fresh: bool) -> None:
        """One more year since the last hit, in a new array if ``fresh``."""
        if self.since is not None:
            aged = np.empty_like(self.since) if fresh else self.since
            _age(self.since, aged)
            self.since = aged


@njit
def _age(since, out):
    """One more year since the last hit, where there was one, into ``out`` (may be
    ``since``)."""
    for c in range(since.size):
        out[c] = since[c] + 1 if since[c] >= 0 else since[c]


@njit
def _keep(since, loss, left, factor, first):
    """``factor *= 1 - remaining`` in place (``factor = 1 - remaining`` for the ``first``
    table, which is the same number): the share of capacity kept, with ``left[t]`` the share of
    a loss still in place t years after the hit (:meth:`_Table.remaining`, cell by cell)."""
    for c in range(since.size):
        t = since[c]
        kept = 1.0 - (loss[c] * left[t] if t >= 0 else 0.0)
        factor[c] = kept if first else factor[c] * kept


@dataclass
class YearEffects:
    """What this year's disturbances did (see :meth:`Regime.apply`).

    Attributes
    ----------
    deaths : (ny, nx) float64 ndarray
        Disturbance deaths this year.
    capacity : (ny, nx) float64 ndarray
        Effective K this year: ``k_base`` times the share of capacity not lost (``k_base`` itself
        when no table has a capacity loss).
    burned, flooded : (ny, nx) bool ndarray or None
        Cells burned / flooded this year; None without fire / flood tables.
    events : list of tuple
        ``(kind, patch ids joined by ";", cells hit, deaths)`` per event, in table order (fires in
        order of ignition); patch ids are those of the regime's landscape, empty when only matrix
        cells were hit.
    fire_since : tuple of (ny, nx) int32 ndarray
        Per fire table, years since it last burned each cell (-1 never): see
        :attr:`time_since_fire`.
    """

    deaths: np.ndarray
    capacity: np.ndarray
    burned: np.ndarray | None
    flooded: np.ndarray | None
    events: list[tuple]
    fire_since: tuple[np.ndarray, ...] = ()

    @property
    def time_since_fire(self) -> np.ndarray | None:
        """(ny, nx) int32: years since the last fire (0 in the burn year, -1 never burned in
        this run); None without fire tables."""
        if not self.fire_since:
            return None
        big = np.iinfo(np.int32).max
        tsf = np.min([np.where(s >= 0, s, big) for s in self.fire_since], axis=0)
        return np.where(tsf == big, -1, tsf).astype(np.int32)


@dataclass(frozen=True, eq=False)
class Regime:
    """The disturbance tables of a scenario on one landscape (built by :func:`build_regime`).

    Attributes
    ----------
    notes : tuple of str
        One line per table and layer for ``gridpop check`` (reprojection, zones, ignition rates).
    """

    notes: tuple[str, ...]
    tables: tuple[_Fire | _Flood, ...]
    labels: np.ndarray  # flat int32 patch labels
    n_patches: int
    shape: tuple[int, int]

    def start(self) -> list[_State]:
        """Fresh per-replicate state: nothing burned or flooded, full capacity."""
        n = self.shape[0] * self.shape[1]
        states = []
        for t in self.tables:
            track = t.kind == "fire" or t.capacity_loss > 0
            states.append(_State(np.full(n, -1, np.int32) if track else None,
                                 np.zeros(n) if t.capacity_loss > 0 else None))
        return states

    def apply(self, state, n, k_base, *, seed, replicate, year, stochastic) -> YearEffects:
        """Draw this replicate-year's events and apply them, before growth.

        Parameters
        ----------
        state : list
            From :meth:`start`, carried from year to year of one replicate (updated in place).
        n : (ny, nx) float64 C-contiguous ndarray
            Abundance; disturbance deaths are removed in place.
        k_base : (ny, nx) float64 ndarray
            Capacity of the year before disturbance (e.g. :meth:`Actions.capacity_for_year`).
        seed, replicate, year : int
            Counter of the random numbers: the events depend on these only.
        stochastic : bool
            Binomial deaths of whole individuals, or the expected deaths.

        Returns
        -------
        YearEffects
        """
        if n.shape != self.shape or not n.flags.c_contiguous:
            raise ValueError(f"n must be a C-contiguous array of shape {self.shape}.")
        flat = n.reshape(-1)
        deaths = np.zeros(flat.size)
        kinds = {t.kind for t in self.tables}
        hit_any = {k: np.zeros(flat.size, bool) for k in kinds}
        factor = None
        events = []
        for index, (table, st) in enumerate(zip(self.tables, state, strict=True)):
            st.years += 1
            st.age(fresh=table.kind == "fire")  # the year's effects keep a fire table's ages
            event_of, count = table.footprint(seed, replicate, year, index)
            if count and event_of is not None:
                hit = np.flatnonzero(event_of != 0)  # faster than on the int32 itself
                d = np.empty(hit.size)
                key = _table_key(seed, replicate, year, rng.STREAM_DISTURBANCE_MORTALITY, index)
                _kill(flat, hit, table.mortality, stochastic, key, d)
                deaths[hit] += d
                hit_any[table.kind][hit] = True
                if st.loss is not None:
                    left = 1.0 - table.remaining(st.since[hit], st.loss[hit])
                    st.loss[hit] = 1.0 - left * (1.0 - table.capacity_loss)
                if st.since is not None:
                    st.since[hit] = 0
                events += self._events(table.kind, event_of[hit], hit, d, count)
            if st.loss is not None:
                first = factor is None
                if factor is None:
                    factor = np.empty(flat.size)
                _keep(st.since, st.loss, table.left(np.arange(st.years)), factor, first)
        shape = self.shape
        return YearEffects(
            deaths=deaths.reshape(shape),
            capacity=k_base if factor is None else k_base * factor.reshape(shape),
            burned=hit_any["fire"].reshape(shape) if "fire" in hit_any else None,
            flooded=hit_any["flood"].reshape(shape) if "flood" in hit_any else None,
            events=events,
            fire_since=tuple(st.since.reshape(shape)
                             for t, st in zip(self.tables, state, strict=True)
                             if t.kind == "fire"))

    def _events(self, kind, ids, hit, deaths, count) -> list[tuple]:
        cells = np.bincount(ids, minlength=count + 1)
        dead = np.bincount(ids, weights=deaths, minlength=count + 1)
        labels = self.labels[hit].astype(np.int64)
        pairs = np.unique(ids.astype(np.int64) * (self.n_patches + 1) + labels)
        patches: dict[int, list[str]] = {e: [] for e in range(1, count + 1)}
        for pair in pairs:
            e, p = divmod(int(pair), self.n_patches + 1)
            if p:
                patches[e].append(str(p))
        return [(kind, ";".join(patches[e]), int(cells[e]), float(dead[e]))
                for e in range(1, count + 1) if cells[e]]


def _effects(c) -> dict:
    return dict(label=c.label, kind=c.kind, mortality=c.mortality,
                capacity_loss=c.capacity_loss, recovery=RECOVERIES[c.recovery],
                recovery_years=c.recovery_years)


def _fire(c, landscape: Landscape, actions, file, run_years: int) -> tuple[_Fire, list[str]]:
    grid, labels = landscape.grid, landscape.patches.labels
    patches = landscape.patches
    notes = []
    if c.hazard is not None:
        layer = align_raster(c.hazard, grid, kind="continuous", file=file, section=c.label,
                             key="hazard")
        hazard = np.where(landscape.mask, np.nan_to_num(layer.data, nan=0.0), 0.0)
        if (hazard < 0).any():
            raise InputDataError(f"{where(file, c.label, 'hazard')} ({Path(c.hazard).name}): "
                                 f"values must be >= 0; the minimum is {hazard.min():g}.")
        notes.append(f"[{c.label}] hazard: {layer.note}")
    else:
        hazard = (labels > 0).astype(np.float64)
    weight = hazard.copy()
    spread = hazard.copy()
    if actions is not None and actions.ignition_multiplier is not None:
        weight *= actions.ignition_multiplier
    if actions is not None and actions.spread_multiplier is not None:
        spread *= actions.spread_multiplier
    spread = np.clip(spread, 0.0, 1.0).ravel()

    flat_labels = labels.ravel()
    w = np.where(flat_labels > 0, weight.ravel(), 0.0)
    cand = np.flatnonzero(w > 0)
    cand = cand[np.argsort(flat_labels[cand], kind="stable")]
    ptr = np.zeros(patches.n + 2, np.int64)
    ptr[1:] = np.cumsum(np.bincount(flat_labels[cand], minlength=patches.n + 1))
    cumw = np.cumsum(w[cand])
    cells_per_patch = np.bincount(flat_labels, minlength=patches.n + 1)
    hazard_mean = np.zeros(patches.n + 1)
    sums = np.bincount(flat_labels, weights=w, minlength=patches.n + 1)
    hazard_mean[1:] = sums[1:] / np.maximum(cells_per_patch[1:], 1)

    ha = grid.cell_area_ha
    area = patches.area_ha[1:]
    size = expected_size(c.size_distribution, area, fraction=c.size_fraction,
                         mean_ha=c.mean_size_ha, min_ha=c.min_size_ha, max_ha=c.max_size_ha,
                         exponent=c.size_exponent)
    interval = c.return_interval_years if isinstance(c.return_interval_years, Trend) else None
    ri0 = interval.at(0, run_years) if interval is not None else c.return_interval_years
    rate = np.zeros(patches.n + 1)
    rate[1:] = ignition_rate(ri0, hazard_mean[1:], area, size)
    fraction_cells = c.size_fraction * cells_per_patch.astype(np.float64)

    if c.size_distribution == "fraction":
        sizes = f"each fire burns {c.size_fraction:g} of its patch"
    elif c.size_distribution == "exponential":
        sizes = f"exponential sizes, mean {c.mean_size_ha:g} ha"
    else:
        sizes = (f"power-law sizes ~ s^-{c.size_exponent:g} from {c.min_size_ha:g} to "
                 f"{c.max_size_ha:g} ha")
    ri = f"{ri0:g}" if interval is None else interval.describe()
    notes.append(f"[{c.label}] return interval {ri} years, {sizes}; "
                 f"{int(np.count_nonzero(rate))} of {patches.n} patches can ignite, "
                 f"{rate.sum():.4g} ignitions per year expected"
                 f"{' in year 0' if interval is not None else ''}; "
                 f"{int(np.count_nonzero(spread))} burnable cells")
    fire = _Fire(**_effects(c), rate=rate, ptr=ptr, cells=cand, cumw=cumw,
                 size_code=SIZES[c.size_distribution], fraction_cells=fraction_cells,
                 mean_cells=(c.mean_size_ha or 0.0) / ha, lo_cells=(c.min_size_ha or 0.0) / ha,
                 hi_cells=(c.max_size_ha or 0.0) / ha, exponent=c.size_exponent or 0.0,
                 spread=spread, shape=grid.shape, interval=interval, run_years=run_years)
    return fire, notes


def _flood(c, landscape: Landscape, file, run_years: int) -> tuple[_Flood, list[str]]:
    grid, mask = landscape.grid, landscape.mask
    ha = grid.cell_area_ha
    period = c.return_period_years if isinstance(c.return_period_years, Trend) else None
    periods = np.asarray(c.return_period_years if period is None else period.values[:1],
                         dtype=np.float64)
    if period is None:
        aep = ", ".join(f"{1 / t:.4g}" for t in periods)
        notes = [f"[{c.label}] return periods {', '.join(f'{t:g}' for t in periods)} years "
                 f"(annual exceedance probability {aep}), regional: one draw per year for "
                 f"every patch"]
    else:
        notes = [f"[{c.label}] return period {period.describe()} years (annual exceedance "
                 f"probability 1 / return period of the year), regional: one draw per year for "
                 f"every patch"]
    zones = terrain = stages = None
    if c.zone is not None:
        zone_cells: list[np.ndarray] = []
        union = np.zeros(grid.shape, bool)
        for t, path in zip(periods, c.zone, strict=True):
            cells, how, _ = read_cells(path, grid, file=file, section=c.label, key="zone")
            cells &= mask
            extra = ""
            if union.any() and (union & ~cells).any():
                extra = (f"; does not contain {int((union & ~cells).sum())} cells of the "
                         f"smaller zones, which flood too")
            union = union | cells
            zone_cells.append(union.ravel())
            notes.append(f"[{c.label}] zone {t:g} years: {int(union.sum())} cells "
                         f"({union.sum() * ha:.6g} ha) in the study area{extra}; {how}")
        zones = tuple(zone_cells)
    else:
        layer = align_raster(c.terrain, grid, kind="continuous", file=file, section=c.label,
                             key="terrain")
        terrain = np.where(mask, layer.data, np.nan).ravel()
        stages = np.asarray(c.stage_m, dtype=np.float64)
        counts = ", ".join(f"{int((terrain < s).sum())} cells below {s:g}" for s in stages)
        notes.append(f"[{c.label}] terrain: {counts}; {layer.note}")
    return _Flood(**_effects(c), periods=periods, zones=zones, terrain=terrain,
                  stages=stages, period=period, run_years=run_years), notes


def build_regime(scenario, landscape: Landscape, actions=None) -> Regime | None:
    """The disturbance regime of a scenario on a landscape.

    Parameters
    ----------
    scenario : gridpop.config.Scenario
    landscape : Landscape
        The landscape the engine runs on (with actions: ``actions.landscape``); its patch labels
        are the ignition units and the patch ids of events.
    actions : gridpop.actions.Actions, optional
        Source of the reserves' ignition and spread multipliers.

    Returns
    -------
    Regime or None
        None when the scenario has no ``[[disturbance]]`` table.

    Raises
    ------
    InputDataError
        A hazard, zone or terrain layer that cannot be read, or negative hazard.
    """
    configs = scenario.disturbances
    if not configs:
        return None
    tables: list[_Fire | _Flood] = []
    notes: list[str] = []
    for c in configs:
        table: _Fire | _Flood
        if c.kind == "fire":
            table, lines = _fire(c, landscape, actions, scenario.path, scenario.run.years)
        else:
            table, lines = _flood(c, landscape, scenario.path, scenario.run.years)
        tables.append(table)
        notes += lines
    return Regime(notes=tuple(notes), tables=tuple(tables),
                  labels=np.ascontiguousarray(landscape.patches.labels.ravel(), np.int32),
                  n_patches=landscape.patches.n, shape=landscape.grid.shape)

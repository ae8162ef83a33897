"""The landscape: one grid, every input layer aligned to it, carrying capacity and habitat patches.

A scenario names a template raster (by default the suitability raster) whose CRS, transform and
shape define :class:`Grid`. Every other raster is resampled onto that grid (:func:`align_raster`),
vector layers are burned into it (:func:`rasterize_vector`) and release points are counted per cell
(:func:`read_points`). Suitability becomes carrying capacity K per cell (:func:`capacity`) and the
cells with K > 0 are grouped into 8-connected patches (:func:`label_patches`).
:func:`build_landscape` does all of this for a scenario and keeps a note of every step for
``gridpop check``.

Cells outside the study area (nodata or NaN suitability) are ``False`` in the mask and carry K = 0
in the engine-ready capacity; cells inside the study area with K = 0 are matrix: individuals may
cross them but cannot stay.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import ndimage

from .config import RESPONSES
from .errors import InputDataError, ScenarioError, where_layer
from .io.rasters import Grid, align_raster, band_count, load_grid
from .io.vectors import read_points
from .timeline import Source, Timeline, read_layer


def capacity(suitability: np.ndarray, *, capacity_per_ha: float, cell_area_ha: float,
             response: str, threshold: float, exponent: float) -> np.ndarray:
    """Carrying capacity per cell from habitat suitability.

    K = capacity_per_ha * cell_area_ha * f(s), with f(s) = s (``linear``), s where s >= threshold
    else 0 (``threshold``), or s**exponent (``power``).

    Parameters
    ----------
    suitability : (ny, nx) float ndarray
        Values in 0..1; NaN outside the study area.
    capacity_per_ha : float
        Individuals per hectare at suitability 1 (>= 0).
    cell_area_ha : float
        Area of one cell (> 0).
    response : {'linear', 'threshold', 'power'}
    threshold : float
        Cut-off of the threshold response.
    exponent : float
        Exponent of the power response (> 0).

    Returns
    -------
    (ny, nx) float64 ndarray
        K in individuals per cell; NaN where suitability is NaN.
    """
    if response not in RESPONSES:
        raise ScenarioError(f"response = {response!r} is not known; expected one of "
                            f"{', '.join(RESPONSES)}.")
    if not (math.isfinite(capacity_per_ha) and capacity_per_ha >= 0):
        raise ScenarioError(f"capacity_per_ha = {capacity_per_ha!r}; expected a number >= 0.")
    if not (math.isfinite(cell_area_ha) and cell_area_ha > 0):
        raise ScenarioError(f"cell_area_ha = {cell_area_ha!r}; expected a number > 0.")
    s = np.asarray(suitability, dtype=np.float64)
    if response == "linear":
        f = s
    elif response == "threshold":
        f = np.where(np.isnan(s) | (s >= threshold), s, 0.0)
    else:
        f = s ** exponent
    return capacity_per_ha * cell_area_ha * f


@dataclass(frozen=True, eq=False)
class Patches:
    """Habitat patches: 8-connected groups of cells with K > 0.

    Attributes
    ----------
    labels : (ny, nx) int32 ndarray
        0 = not habitat, 1..P the patches, numbered by decreasing capacity (1 = the largest).
    area_ha : (P + 1,) float64 ndarray
        Patch area; index 0 unused (0).
    capacity : (P + 1,) float64 ndarray
        Sum of K over the patch; index 0 unused (0).
    """

    labels: np.ndarray
    area_ha: np.ndarray
    capacity: np.ndarray

    @property
    def n(self) -> int:
        return len(self.area_ha) - 1


def label_patches(k: np.ndarray, cell_area_ha: float) -> Patches:
    """Label the 8-connected components of the cells with finite K > 0.

    Patches are numbered by decreasing total capacity; ties keep the order in which
    :func:`scipy.ndimage.label` meets them (row-major scan).

    References
    ----------
    Rosenfeld, A. and Pfaltz, J. L. (1966). Sequential operations in digital picture processing.
    Journal of the ACM 13(4), 471-494.
    """
    k = np.asarray(k, dtype=np.float64)
    habitat = np.isfinite(k) & (k > 0)
    raw, n = ndimage.label(habitat, structure=np.ones((3, 3), dtype=bool))
    cap = np.bincount(raw.ravel(), weights=np.where(habitat, k, 0.0).ravel(), minlength=n + 1)
    cells = np.bincount(raw.ravel(), minlength=n + 1)
    order = np.argsort(-cap[1:], kind="stable") + 1  # order[i] = old label of new label i + 1
    new_of_old = np.zeros(n + 1, dtype=np.int32)
    new_of_old[order] = np.arange(1, n + 1, dtype=np.int32)
    area = np.zeros(n + 1)
    area[1:] = cells[order] * cell_area_ha
    capacity_ = np.zeros(n + 1)
    capacity_[1:] = cap[order]
    return Patches(labels=new_of_old[raw], area_ha=area, capacity=capacity_)


@dataclass(frozen=True, eq=False)
class Landscape:
    """Everything the engine needs from the maps, on one grid.

    Attributes
    ----------
    grid : Grid
    mask : (ny, nx) bool ndarray
        True inside the study area (suitability finite).
    suitability : (ny, nx) float64 ndarray
        NaN outside the study area.
    capacity : (ny, nx) float64 ndarray
        K per cell; 0 outside the study area; 0 inside it is matrix.
    patches : Patches
    initial : (ny, nx) float64 ndarray
        Individuals per cell in year 0; 0 outside the study area and in matrix.
    notes : tuple of str
        What was read, resampled and dropped, for ``gridpop check``.
    timeline : Timeline or None
        Suitability of later years ([[habitat.future]], suitability_series); None: suitability
        stays that of year 0 (but for actions).
    """

    grid: Grid
    mask: np.ndarray
    suitability: np.ndarray
    capacity: np.ndarray
    patches: Patches
    initial: np.ndarray
    notes: tuple[str, ...]
    timeline: Timeline | None = None


SUITABILITY_TOLERANCE = 1e-9
"""Round-off allowed beyond 0..1 after resampling; such values are clipped to 0..1."""


def _in_range(suit: np.ndarray, mask: np.ndarray, loc: str) -> np.ndarray:
    """Suitability clipped to 0..1 inside the study area, NaN outside; values beyond 0..1 by
    more than round-off are an error."""
    lo, hi = suit[mask].min(), suit[mask].max()
    if lo < -SUITABILITY_TOLERANCE or hi > 1 + SUITABILITY_TOLERANCE:
        hint = (" They look like percentages: divide the raster by 100."
                if lo >= 0 and hi <= 100 else "")
        raise InputDataError(f"{loc}: values must lie in 0..1 (nodata or NaN outside the study "
                             f"area); found min {lo:g}, max {hi:g}.{hint}")
    return np.where(mask, np.clip(suit, 0.0, 1.0), np.nan)


@dataclass(frozen=True, eq=False)
class FutureSuitability:
    """Reads a later suitability layer for a :class:`Timeline`: aligned, the starting layer's
    study area, values in 0..1."""

    file: Path
    grid: Grid
    mask: np.ndarray
    first: Path

    def __call__(self, source: Source) -> np.ndarray:
        data, _ = self.read(source)
        return data

    def read(self, source: Source) -> tuple[np.ndarray, str]:
        data, note = read_layer(source, self.grid, self.mask, self.first, self.file)
        loc = where_layer(self.file, source.section, source.key, source.path)
        return _in_range(data, self.mask, f"{loc} {source.describe()}"), note


def _timeline(scenario, grid: Grid, suit: np.ndarray, mask: np.ndarray
              ) -> tuple[Timeline | None, list[str]]:
    """The suitability of later years, every layer read and checked once; notes."""
    hab, file = scenario.habitat, scenario.path
    if hab.suitability_series is not None:
        path = hab.suitability_series
        n = band_count(path, file=file, section="habitat", key="suitability_series")
        sources = tuple(Source(b - 1, path, b, "habitat", "suitability_series")
                        for b in range(1, n + 1))
        band1, rest = sources[0], sources[1:]
    elif hab.future:
        sources = tuple(Source(f.year, f.suitability, None, f"habitat.future #{i}",
                               "suitability") for i, f in enumerate(hab.future, 1))
        band1, rest = None, sources
    else:
        return None, []
    read = FutureSuitability(file, grid, mask, hab.suitability)
    notes = []
    if band1 is not None:
        first, note = read.read(band1)
        if not np.allclose(first[mask], suit[mask], rtol=0.0, atol=1e-6):
            raise InputDataError(
                f"{where_layer(file, 'habitat', 'suitability_series', band1.path)}: band 1 is "
                f"the layer of year 0 and must equal the starting layer "
                f"{hab.suitability.name}; they differ by up to "
                f"{np.abs(first - suit)[mask].max():g}.")
        notes.append(f"suitability series {band1.path.name}: {n} bands, years 0 to {n - 1}")
    timeline = Timeline(suit, rest, hab.change, read)
    for source in rest:
        _, note = read.read(source)
        notes.append(f"future: {note}")
    if not rest:
        return None, notes
    return timeline, notes


def _initial(scenario, grid: Grid, k: np.ndarray) -> tuple[np.ndarray, str]:
    init = scenario.initial
    if init.raster is not None:
        layer = align_raster(init.raster, grid, kind="count", file=scenario.path,
                             section="initial", key="raster")
        counts = np.nan_to_num(layer.data, nan=0.0)
        if (counts < 0).any():
            raise InputDataError(f"{where_layer(scenario.path, 'initial', 'raster', init.raster)}: "
                                 f"counts must be >= 0; the minimum is {counts.min():g}.")
        return counts, layer.note
    if init.points is not None:
        counts = read_points(init.points, grid, count_field=init.count_field,
                             file=scenario.path, section="initial", key="points")
        return counts, (f"{init.points.name}: {counts.sum():.6g} individuals in "
                        f"{np.count_nonzero(counts)} cells")
    return init.fraction_of_capacity * k, f"initial: {init.fraction_of_capacity:g} x K"


@dataclass(frozen=True, eq=False)
class Habitat:
    """The grid and the suitability aligned to it (NaN outside the study area), with notes."""

    grid: Grid
    mask: np.ndarray
    suitability: np.ndarray
    notes: tuple[str, ...]


def read_habitat(scenario) -> Habitat:
    """Read the template and the suitability of a scenario and align them (the file part of
    :func:`build_landscape`, which scenarios that differ only in numbers can share).

    Raises
    ------
    InputDataError
        See :func:`build_landscape`.
    """
    hab = scenario.habitat
    if scenario.grid.template == hab.suitability:
        grid = load_grid(hab.suitability, file=scenario.path, section="habitat",
                         key="suitability")
    else:
        grid = load_grid(scenario.grid.template, file=scenario.path, key="template")
    notes = [f"grid: {scenario.grid.template.name}, {grid.describe()}"]

    layer = align_raster(hab.suitability, grid, kind="continuous", file=scenario.path,
                         section="habitat", key="suitability")
    notes.append(layer.note)
    mask = np.isfinite(layer.data)
    suit = _in_range(layer.data, mask,
                     where_layer(scenario.path, 'habitat', 'suitability', hab.suitability))
    return Habitat(grid, mask, suit, tuple(notes))


def build_landscape(scenario, *, stochastic: bool, habitat: Habitat | None = None) -> Landscape:
    """Build the grid, capacity, patches and initial abundance of a scenario.

    Parameters
    ----------
    scenario : gridpop.config.Scenario
    stochastic : bool
        Round the initial abundance to whole individuals.
    habitat : Habitat, optional
        The scenario's template and suitability as read by :func:`read_habitat` (read here when
        not given).

    Raises
    ------
    InputDataError
        Any problem with the template, suitability or initial layers (see :func:`load_grid`,
        :func:`align_raster`, :func:`read_points`), or suitability outside 0..1.
    """
    hab = scenario.habitat
    if habitat is None:
        habitat = read_habitat(scenario)
    grid, mask, suit, notes = habitat.grid, habitat.mask, habitat.suitability, list(habitat.notes)
    timeline, future_notes = _timeline(scenario, grid, suit, mask)
    notes += future_notes

    k = capacity(suit, capacity_per_ha=hab.capacity_per_ha, cell_area_ha=grid.cell_area_ha,
                 response=hab.response, threshold=hab.threshold, exponent=hab.exponent)
    k = np.where(mask, k, 0.0)
    patches = label_patches(k, grid.cell_area_ha)
    notes.append(f"capacity: {hab.response} response, {hab.capacity_per_ha:g} individuals/ha at "
                 f"suitability 1, total K {k.sum():.6g}; {mask.sum()} of {grid.n_cells} cells in "
                 f"the study area, {np.count_nonzero(k)} habitat cells in {patches.n} patches")

    initial, note = _initial(scenario, grid, k)
    drop = (initial > 0) & (k <= 0)
    if drop.any():
        note += (f"; {initial[drop].sum():.6g} individuals in {drop.sum()} cells outside the "
                 f"study area or with K = 0 dropped")
        initial = np.where(drop, 0.0, initial)
    if stochastic:
        rounded = np.rint(initial)
        if not np.array_equal(rounded, initial):
            note += (f"; rounded to whole individuals ({initial.sum():.6g} -> "
                     f"{rounded.sum():.6g})")
        initial = rounded
    notes.append(note + f"; {initial.sum():.6g} individuals in year 0")
    return Landscape(grid=grid, mask=mask, suitability=suit, capacity=k, patches=patches,
                     initial=np.ascontiguousarray(initial, dtype=np.float64), notes=tuple(notes),
                     timeline=timeline)

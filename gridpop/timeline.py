"""Layers that change over time: the layer of any year from layers given at some years.

A :class:`Timeline` starts from the layer of year 0 (the scenario's starting layer, already on the
grid) and has later layers given at increasing years: ``[[habitat.future]]`` or
``[[dispersal.future]]`` tables, or the bands of a series raster (band k = year k - 1). Between
two given years a cell's value is interpolated linearly in time (``linear``) or the earlier
layer holds (``step``); after the last given year its layer holds. Year t is the step from census
year t to t + 1, the numbering of :meth:`gridpop.actions.Actions.capacity_for_year`.

Memory stays flat in the number of years: besides the starting layer a timeline holds at most
two layers, the pair that brackets the year asked for, and reads the next one when the year
passes it (a replicate walks through the years in order). Every layer is aligned onto the grid
like the starting layer (:func:`gridpop.io.rasters.align_raster`: read block window by block
window, reprojection, resampling, nodata) and must cover the same study area.
"""

from __future__ import annotations

import bisect
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .config import CHANGES
from .errors import InputDataError, where_layer
from .io.rasters import Grid, align_raster


@dataclass(frozen=True)
class Source:
    """Where the layer of one year comes from: a raster (and its band), and the scenario key
    that names it (``[section] key``), for messages."""

    year: int
    path: Path
    band: int | None  # None: a single-band raster
    section: str
    key: str

    def describe(self) -> str:
        band = f" band {self.band}" if self.band is not None else ""
        return f"{self.path.name}{band}"


def read_layer(source: Source, grid: Grid, mask: np.ndarray, first: Path, file: Path
               ) -> tuple[np.ndarray, str]:
    """A later layer aligned onto the grid, NaN outside the study area, and how it was read.

    ``mask`` is the starting layer's study area: its cells with a value (not NaN).

    Raises
    ------
    InputDataError
        The layer cannot be read or aligned (see :func:`align_raster`), or its study area (the
        cells with a value) differs from that of the starting layer ``first``: the message names
        both files.
    """
    layer = align_raster(source.path, grid, kind="continuous", file=file,
                         section=source.section, key=source.key, band=source.band)
    inside = ~np.isnan(layer.data)
    if not np.array_equal(inside, mask):
        only_new, only_first = int((inside & ~mask).sum()), int((mask & ~inside).sum())
        raise InputDataError(
            f"{where_layer(file, source.section, source.key, source.path)}: the study area "
            f"of {source.describe()} (year {source.year}) differs from that of the starting "
            f"layer {first.name}: {only_new} cells have a value only in {source.describe()}, "
            f"{only_first} only in {first.name}. Every layer must have nodata in the same "
            f"cells.")
    return layer.data, f"{source.describe()} (year {source.year}): {layer.note}"


@dataclass(eq=False)
class Timeline:
    """The layer of every year from a starting layer and later ones (see the module docstring).

    Attributes
    ----------
    first : (ny, nx) float64 ndarray
        The layer of year 0.
    sources : tuple of Source
        The later layers, in increasing year (> 0).
    change : {'linear', 'step'}
    read : callable
        ``read(source) -> (ny, nx) float64 ndarray``: a later layer aligned and checked.
    """

    first: np.ndarray
    sources: tuple[Source, ...]
    change: str
    read: Callable[[Source], np.ndarray]
    _held: dict[int, np.ndarray] = field(default_factory=dict, repr=False)

    def __post_init__(self):
        if self.change not in CHANGES:
            raise ValueError(f"change = {self.change!r}; expected one of {', '.join(CHANGES)}.")
        years = [s.year for s in self.sources]
        if any(y <= 0 for y in years) or any(b <= a for a, b in zip(years, years[1:],
                                                                     strict=False)):
            raise ValueError(f"years = {years}; expected increasing years > 0.")

    @property
    def years(self) -> tuple[int, ...]:
        """The years with a layer, starting with 0."""
        return (0, *(s.year for s in self.sources))

    def key(self, year: int) -> tuple[int, int]:
        """``(i, d)``: the year lies ``d`` years after given year ``i`` (``d = 0``: layer ``i``
        itself, always so with ``step`` and after the last given year). Equal keys, equal
        layers."""
        years = self.years
        i = bisect.bisect_right(years, year) - 1
        if i < 0:
            raise ValueError(f"year = {year}; expected a year >= 0.")
        if self.change == "step" or i == len(years) - 1:
            return i, 0
        return i, year - years[i]

    def at(self, key: tuple[int, int]) -> np.ndarray:
        """The layer of a :meth:`key` (do not modify it). Linear: ``a + (b - a) / (y1 - y0) *
        d`` per cell with ``a``, ``b`` the layers of the bracketing years ``y0``, ``y1``, the
        formula of :func:`numpy.interp`."""
        i, d = key
        need = (i,) if d == 0 else (i, i + 1)
        self._held = {j: a for j, a in self._held.items() if j in need}
        a = self._layer(i)
        if d == 0:
            return a
        b = self._layer(i + 1)
        y0, y1 = self.years[i], self.years[i + 1]
        return (b - a) / float(y1 - y0) * float(d) + a

    def _layer(self, i: int) -> np.ndarray:
        if i == 0:
            return self.first
        if i not in self._held:
            self._held[i] = self.read(self.sources[i - 1])
        return self._held[i]

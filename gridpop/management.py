"""Management of individuals: releases (captive-bred or translocated) and removals (culling,
harvest, bycatch), applied each year after disturbance and before growth.

A release of ``count`` individuals of one stage is spread over the habitat cells (capacity > 0
that year) of its area in proportion to capacity; with two sexes a share
``female_fraction_at_birth`` of them is female. With ``source_area`` the individuals are taken from
the wild there first (up to ``count``, in proportion to the cells' numbers of that stage) and
only those taken are released. A removal takes a ``fraction`` of the stage in its area (binomial
per cell and class in stochastic mode) or ``count`` individuals (as many as are present, in
proportion to the cells' numbers). Whole individuals are shared out by the largest remainder,
so totals are exact. Both add to the ledger's ``released`` and ``removed``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import rng
from ._jit import njit
from .config.kinds import ReleaseConfig, RemovalConfig
from .io.vectors import read_cells


def managed_note(c) -> str:
    """What a release or removal does, for ``gridpop check``."""
    stage = f" {c.stage}" if c.stage else ""
    if c.kind == "release":
        years = ", ".join(str(int(y)) for y in c.years)
        source = f", taken from {c.source_area.name}" if c.source_area is not None else ""
        return f"release of {c.count}{stage} individuals in years {years}{source}"
    what = f"{c.fraction:g} of the" if c.fraction is not None else f"{c.count}"
    return f"removal of {what}{stage} individuals a year from year {c.start_year}"


def shares(weights: np.ndarray, total: float, whole: bool) -> np.ndarray:
    """``total`` divided in proportion to ``weights`` (1-D, sum > 0); with ``whole`` the whole
    parts, then one more for the largest remainders (ties: first)."""
    exact = total * weights / weights.sum()
    if not whole:
        return exact
    out = np.floor(exact)
    left = int(round(total - out.sum()))
    if left > 0:
        out[np.argsort(-(exact - out), kind="stable")[:left]] += 1.0
    return out


@njit
def _thin(counts, cells, p, key, first):
    """Binomial(counts[i], p) for each i, on cell keys ``first + cells[i]``."""
    out = np.empty(counts.size)
    for i in range(counts.size):
        out[i] = rng.binomial(np.int64(counts[i]), p, rng.cell_key(key, first + cells[i]))
    return out


@dataclass(frozen=True)
class Managed:
    """One release or removal on the grid: flat indices of its area's cells, the classes of
    its stage (both sexes), and of a translocation the cells of its source."""

    config: ReleaseConfig | RemovalConfig
    cells: np.ndarray
    classes: tuple[int, ...]
    source: np.ndarray | None


@dataclass(frozen=True)
class Management:
    """The scenario's releases and removals, in order (see the module docstring)."""

    actions: tuple[Managed, ...]
    labels: np.ndarray  # flat patch labels (0: no patch)
    n_patches: int
    female_fraction: float

    def apply(self, n: np.ndarray, k: np.ndarray, year: int, streams: rng.YearStreams,
              stochastic: bool) -> tuple[np.ndarray, np.ndarray]:
        """Apply the actions of ``year`` to the counts ``n`` (C, ny, nx) in place; capacity
        ``k``. Returns the individuals released and removed per patch, (n_patches + 1,) each
        (index 0: the landscape)."""
        flat = n.reshape(n.shape[0], -1)
        size = self.n_patches + 1
        released, removed = np.zeros(size), np.zeros(size)
        key = streams.key(rng.STREAM_REMOVAL)
        for a, m in enumerate(self.actions):
            c = m.config
            if isinstance(c, RemovalConfig):
                if year < c.start_year:
                    continue
                taken = self._take(flat, m.cells, m.classes, c.fraction, c.count, stochastic,
                                   key, a)
                self._add(removed, m.cells, taken)
                continue
            if year not in c.years:
                continue
            count = float(c.count)
            if m.source is not None:
                taken = self._take(flat, m.source, m.classes, None, c.count, stochastic, key, a)
                self._add(removed, m.source, taken)
                count = float(taken.sum())
            habitat = m.cells[k.reshape(-1)[m.cells] > 0]
            if count == 0 or habitat.size == 0:
                continue
            weights = k.reshape(-1)[habitat]
            parts = (shares(np.array([self.female_fraction, 1.0 - self.female_fraction]), count,
                            stochastic) if len(m.classes) == 2 else np.array([count]))
            for cls, part in zip(m.classes, parts, strict=True):
                add = shares(weights, part, stochastic)
                flat[cls, habitat] += add
                self._add(released, habitat, add)
        return released, removed

    def _take(self, flat, cells, classes, fraction, count, stochastic, key, action) -> np.ndarray:
        """Remove from ``cells`` of ``classes``; the individuals taken per cell."""
        have = flat[list(classes)][:, cells]  # (classes, cells)
        if fraction is not None:
            if stochastic:
                size = flat.shape[1]
                taken = np.stack([_thin(have[i], cells, fraction, key,
                                        (action * flat.shape[0] + cls) * size)
                                  for i, cls in enumerate(classes)])
            else:
                taken = have * fraction
        else:
            total = have.sum()
            taken = (shares(have.ravel(), min(float(count), total), stochastic).reshape(
                have.shape) if total > 0 else np.zeros_like(have))
        for i, cls in enumerate(classes):
            flat[cls, cells] -= taken[i]
        return taken.sum(axis=0)

    def _add(self, per_patch: np.ndarray, cells: np.ndarray, amounts: np.ndarray) -> None:
        sums = np.bincount(self.labels[cells], weights=amounts, minlength=self.n_patches + 1)
        per_patch[1:] += sums[1:self.n_patches + 1]
        per_patch[0] += amounts.sum()


def build_management(scenario, grid, areas, labels: np.ndarray, n_patches: int
                     ) -> Management | None:
    """The releases and removals of a scenario (``areas``: the cells of every action, in order,
    :attr:`gridpop.actions.Actions.areas`); None without any."""
    st = scenario.stages
    names = list(st.names) if st is not None else [None]
    sexes = 2 if scenario.sex.system != "female-only" else 1
    out = []
    for c, cells in zip(scenario.actions, areas, strict=True):
        if not isinstance(c, ReleaseConfig | RemovalConfig):
            continue
        s = names.index(c.stage)
        source = None
        if isinstance(c, ReleaseConfig) and c.source_area is not None:
            source = np.flatnonzero(read_cells(c.source_area, grid, file=scenario.path,
                                               section=c.label, key="source_area",
                                               buffer_m=c.buffer_m,
                                               all_touched=c.all_touched)[0])
        out.append(Managed(c, np.flatnonzero(cells),
                           tuple(x * len(names) + s for x in range(sexes)), source))
    if not out:
        return None
    return Management(tuple(out), np.ascontiguousarray(labels.reshape(-1), np.int64), n_patches,
                      scenario.sex.female_fraction_at_birth)

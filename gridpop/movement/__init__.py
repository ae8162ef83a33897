"""Where the year's emigrants go: one protocol, three movers.

The growth pass takes the emigrants out of their cells; a *mover* takes that field of emigrants
and returns where they land (:class:`Moved`). The census then settles the arrivals where the
year's capacity is positive; the rest are lost, as are those that die on the way or leave the
grid, so the losses of a patch are its emigrants minus those it ``settled_from``.

- :class:`gridpop.movement.kernel.KernelMover`: jumps drawn from a dispersal kernel.
- :class:`gridpop.movement.barrier.BarrierKernelMover`: the same jumps across barrier actions,
  each crossing charged the survival of the barriers it crosses.
- :class:`gridpop.movement.walk.Walk`: cell-to-cell walks over a resistance surface.

The numerical pieces live beside them: kernel quadrature (:mod:`.kernels`), convolution
(:mod:`.convolution`), stochastic placement (:mod:`.placement`), emigration
(:mod:`.emigration`) and the connectivity of the walk (:mod:`.connectivity`).
"""

from __future__ import annotations

from typing import NamedTuple, Protocol

import numpy as np

from ..rng import YearStreams


class Moved(NamedTuple):
    """Where one year's emigrants went (float64 arrays; whole numbers in stochastic mode).

    arrivals : (ny, nx) number landing in each cell, anywhere (the census settles those where
        capacity > 0).
    stayed : (ny, nx) of them, those that landed back in their own cell; (1, nx) zeros when
        the growth pass counts the stayers (:meth:`Mover.retention`).
    retained, settled_from : (n_patches + 1,) per patch of origin (index 0 unused): settled in
        their own patch, settled anywhere; None when the growth pass counts them.
    visits : (ny, nx) walker visits per cell (walk only), else None.
    """

    arrivals: np.ndarray
    stayed: np.ndarray
    retained: np.ndarray | None
    settled_from: np.ndarray | None
    visits: np.ndarray | None = None


class Retention(NamedTuple):
    """Per cell, the shares of its emigrants that the growth pass counts itself (expected
    kernel dispersal): landing back home (``share``, (1, nx) when uniform), settling in their own
    patch (``own``) and settling anywhere (``anywhere``). Empty (0, 0) arrays: not counted."""

    share: np.ndarray
    own: np.ndarray
    anywhere: np.ndarray


NO_RETENTION = Retention(np.empty((0, 0)), np.empty((0, 0)), np.empty((0, 0)))
"""The growth pass does not count retention: the mover reports it in :class:`Moved`."""


class Mover(Protocol):
    """Moves a year's emigrants."""

    def retention(self, k: np.ndarray) -> Retention:
        """What the growth pass counts of the emigrants where capacity is ``k``
        (:data:`NO_RETENTION` when the mover reports it)."""

    def move(self, leaving: np.ndarray, k: np.ndarray, streams: YearStreams,
             work: dict[str, np.ndarray]) -> Moved:
        """Where ``leaving`` (emigrants per cell) land in the year of ``streams``, capacity
        ``k``; ``work`` holds the replicate's scratch arrays (:func:`scratch`)."""


def scratch(work: dict[str, np.ndarray], name: str, shape: tuple[int, ...]) -> np.ndarray:
    """The float64 scratch array ``name`` of ``shape`` in ``work``, made on first use."""
    a = work.get(name)
    if a is None:
        a = work[name] = np.empty(shape)
    return a

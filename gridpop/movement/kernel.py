"""Kernel dispersal as a mover: each emigrant jumps to a cell drawn from the dispersal kernel.

In deterministic mode the expected numbers are spread by convolution
(:func:`gridpop.movement.convolution.spread`) and the growth pass counts who lands back home
and who settles in their own patch (:meth:`KernelMover.retention`, from
:func:`gridpop.movement.convolution.settle_fields`); in stochastic mode whole individuals draw
their destinations (:func:`gridpop.movement.placement.disperse_stochastic`).
"""

from __future__ import annotations

import numpy as np

from .. import rng
from ..rng import YearStreams
from . import NO_RETENTION, Moved, Retention, scratch
from .convolution import SettleFields, settle_fields, spread, stay_share
from .kernels import Kernel
from .placement import disperse_stochastic


class KernelMover:
    """Moves emigrants with ``kernel`` on a grid with patch ``labels`` (1..``n_patches``)."""

    def __init__(self, kernel: Kernel, edge: str, labels: np.ndarray, n_patches: int,
                 stochastic: bool):
        self.kernel, self.edge, self.stochastic = kernel, edge, stochastic
        self.labels, self.n_patches = labels, n_patches
        self._settle: tuple[np.ndarray, SettleFields] | None = None  # last capacity seen

    def settle_fields(self, k: np.ndarray) -> SettleFields:
        """:func:`settle_fields` where capacity ``k > 0``, kept while that does not change
        (``k`` is the same array, or has the same cells of positive capacity)."""
        cached = self._settle
        if cached is None or (cached[0] is not k and not np.array_equal(cached[1].settle, k > 0)):
            cached = self._settle = (k, settle_fields(self.labels, k > 0, self.kernel, self.edge))
        return cached[1]

    def retention(self, k: np.ndarray) -> Retention:
        if self.stochastic:
            return NO_RETENTION
        fields = self.settle_fields(k)
        return Retention(stay_share(self.kernel, k.shape, self.edge), fields.own,
                         fields.anywhere)

    def move(self, leaving: np.ndarray, k: np.ndarray, streams: YearStreams,
             work: dict[str, np.ndarray]) -> Moved:
        if not self.stochastic:
            arrivals = spread(leaving, self.kernel, self.edge,
                              out=scratch(work, "arrivals", k.shape))
            return Moved(arrivals, np.zeros((1, k.shape[1])), None, None)
        return Moved(*disperse_stochastic(
            leaving, k > 0, self.labels, self.n_patches, self.kernel, self.edge,
            streams.key(rng.STREAM_DISPERSAL),
            out=(scratch(work, "arrivals", k.shape), scratch(work, "stayed", k.shape))))

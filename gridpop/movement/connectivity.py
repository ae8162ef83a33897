"""Connectivity of the walk engine: patch-to-patch settlement probabilities of the expected walk
(:func:`patch_connectivity`) and the share of the flow between two areas that passes through a
corridor (:func:`corridor_share`).
"""

from __future__ import annotations

import numpy as np

from .walk import (
    WalkParams,
    check_labels,
    check_shape,
    disperse_walk_deterministic,
    patch_windows,
    propagate,
    turn_table,
    walk_surfaces,
)


def patch_connectivity(labels, n_patches: int, permeability, quality, params: WalkParams,
                       weights=None, *, entry_survival=None) -> np.ndarray:
    """Probability that a disperser leaving patch i settles in patch j, by the expected walk.

    Parameters
    ----------
    labels : (ny, nx) int32 ndarray
        Patch labels, 0 = no patch.
    n_patches : int
    permeability, quality, params
        As in :func:`disperse_walk_deterministic`.
    weights : (ny, nx) ndarray, optional
        Where in its patch a disperser starts: proportional to ``weights`` (e.g. capacity K);
        default uniform over the patch's cells.
    entry_survival : (ny, nx) ndarray, optional
        As in :func:`disperse_walk_deterministic` (barriers crossed with a mortality).

    Returns
    -------
    (n_patches, n_patches) float64 ndarray
        Row i (patch i + 1): settlement probabilities in each patch, the diagonal included (return
        to the home patch). A row sums to less than 1 by the share lost or settling outside
        patches; a patch whose weights are all 0 has a row of zeros.

    Notes
    -----
    Each patch's walk is computed on its bounding box widened by ``walk_length + 1`` cells, the
    farthest a walker can reach, so the result is the same as on the full grid.
    """
    surf = walk_surfaces(permeability, quality, params, entry_survival)
    shape = surf.perm.shape
    lab = check_labels(labels, n_patches, shape)
    w = np.ones(shape) if weights is None else np.asarray(weights, dtype=np.float64)
    check_shape("weights", w, shape)
    if not (np.isfinite(w).all() and (w >= 0).all()):
        raise ValueError("weights must be finite and >= 0")
    turn = turn_table(params.heading_bias)
    out = np.zeros((n_patches, n_patches))
    for p, ys, xs in patch_windows(lab, n_patches, params.walk_length + 1):
        lab_w = lab[ys, xs]
        start = np.where(lab_w == p, w[ys, xs], 0.0)
        total = start.sum()
        if total == 0.0:
            continue
        arrivals, _, _ = propagate(start / total, surf.crop(ys, xs), turn, params.walk_length)
        out[p - 1] = np.bincount(lab_w.ravel(), weights=arrivals.ravel(),
                                 minlength=n_patches + 1)[1:]
    return out


def corridor_share(source, target, cells, permeability, quality, params: WalkParams,
                   weights=None, *, entry_survival=None):
    """Share of the one-year flow from area ``source`` to area ``target`` (bool masks, e.g. two
    habitat blocks) that passes through ``cells`` (a corridor), by the expected walk.

    The flow is the expected number of walkers settling in ``target`` per walker leaving
    ``source`` (start cells weighted by ``weights``, default uniform). Walkers that never enter
    the corridor are those of the same walk with corridor cells made deadly on entry (killing a
    walker on entry does not change where the others go), so the share is
    ``1 - flow_without / flow``. Corridor cells inside the two areas are left out.

    Returns
    -------
    flow : float
    share : float or None
        None when nothing flows from ``source`` to ``target``.
    """
    source = np.asarray(source, bool)
    target = np.asarray(target, bool)
    w = np.ones(source.shape) if weights is None else np.asarray(weights, dtype=np.float64)
    start = np.where(source, w, 0.0)
    if start.sum() <= 0:
        return 0.0, None
    start = start / start.sum()
    base = np.ones(source.shape) if entry_survival is None else np.asarray(entry_survival, float)
    corridor = np.asarray(cells, bool) & ~source & ~target
    no_patches = np.zeros(source.shape, np.int32)
    flows = []
    for surv in (base, np.where(corridor, 0.0, base)):
        res = disperse_walk_deterministic(start, permeability, quality, no_patches, 0, params,
                                          entry_survival=surv)
        flows.append(float(res.arrivals[target].sum()))
    flow, without = flows
    return flow, (1.0 - without / flow if flow > 0 else None)

"""A run's combined results: the batches' accumulators added in batch order, the GeoTIFF stacks, the
ledger tables, the walk's connectivity and the summary.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path
from typing import Any

import numpy as np

from ..analysis.summary import write_summary
from ..config import OUTPUT_RASTERS
from ..io.results import (
    write_events_csv,
    write_json,
    write_ledger_csv,
    write_patches,
    write_stack,
    year_labels,
)
from ..movement.connectivity import corridor_share
from .model import Model


def combine(work: Path, model: Model, parts: list[Path]) -> dict[str, np.ndarray]:
    """Add the batches' accumulators in batch order into memory-mapped totals."""
    shape = (model.plan.years + 1, *model.capacity.shape)
    totals: dict[str, np.ndarray] = {}
    for name, dt in model.accumulators.items():
        total = np.lib.format.open_memmap(work / f"total_{name}.npy", mode="w+", dtype=dt,
                                          shape=shape)
        for part in parts:
            src = np.load(part / f"{name}.npy", mmap_mode="r")
            for t in range(shape[0]):
                total[t] += src[t]
        total.flush()
        totals[name] = total
    return totals


STACKS = {
    # output raster name: (accumulator, what the band holds)
    "abundance": ("sum_n", "mean abundance over replicates"),
    "occupancy": ("occupied", "fraction of replicates in which the cell is occupied"),
    "colonised": ("ever", "fraction of replicates in which the cell has been occupied by then"),
    "burned": ("n_fire", "fraction of replicates in which the cell burned that year"),
    "flooded": ("n_flood", "fraction of replicates in which the cell flooded that year"),
    "flow": ("visits", "mean number of disperser visits to the cell that year (walk method)"),
}


def stacks_written(scenario, model: Model) -> dict[str, str]:
    """Stacks a run writes (name -> accumulator): those asked for in [output] rasters, and
    always those of disturbance and walk dispersal when present."""
    return {name: acc for name, (acc, _) in STACKS.items() if acc in model.accumulators
            and (name in scenario.output.rasters or name not in OUTPUT_RASTERS)} | {
        name: f"sum_{name}" for name in scenario.output.rasters if name.startswith("abundance_")}


def _blocks(model: Model) -> list[tuple[str, np.ndarray]]:
    """The two areas a corridor joins: the first two [risk] focus_areas, else patches 1 and 2."""
    shape = model.capacity.shape
    focus = model.census.focus
    if focus is not None and len(focus.names) >= 2:
        out = []
        for name, idx in list(zip(focus.names, focus.cells, strict=True))[:2]:
            mask = np.zeros(shape, bool)
            mask.ravel()[idx] = True
            out.append((name, mask))
        return out
    if model.census.n_patches >= 2:
        return [(f"patch {p}", model.census.labels == p) for p in (1, 2)]
    return []


def write_connectivity(work: Path, scenario, model: Model, visits) -> list[str]:
    """connectivity.csv (patch-to-patch settlement probabilities of the walk, from the expected
    walk on the year-0 landscape, start cells weighted by capacity) and connectivity.json (the
    same matrix and, per corridor action, its share of the walkers' visits over the run and of
    the one-year flow between patches 1 and 2, see :func:`resistance.corridor_share`)."""
    conn, w = model.connectivity, model.walk
    assert w is not None and conn is not None  # the walk method writes connectivity
    with open(work / "connectivity.csv", "w", newline="") as fh:
        out = csv.writer(fh)
        out.writerow(["from_patch", "to_patch", "probability"])
        for i in range(model.census.n_patches):
            for j in range(model.census.n_patches):
                out.writerow([i + 1, j + 1, f"{conn[i, j]:.12g}"])
    total = np.zeros(model.capacity.shape)
    for t in range(1, model.plan.years + 1):
        total += visits[t]
    everywhere = float(total.sum())
    corridors = {}
    for cfg, cells in zip(scenario.actions, model.actions.areas, strict=True):
        if cfg.kind != "corridor":
            continue
        of_visits = float(total[cells].sum()) / everywhere if everywhere else None
        entry: dict[str, Any] = {"share_of_visits": of_visits}
        blocks = _blocks(model)
        for (name_a, a), (name_b, b) in ((blocks[0], blocks[1]), (blocks[1], blocks[0])) \
                if len(blocks) == 2 else ():
            flow, share = corridor_share(a, b, cells, w.permeability, w.quality(model.capacity),
                                         w.params, weights=model.capacity,
                                         entry_survival=w.entry_survival)
            entry[f"{name_a} -> {name_b}"] = {"flow": flow, "share_through_corridor": share}
        corridors[cfg.label] = entry
    write_json(work / "connectivity.json", {
        "matrix": conn, "corridors": corridors,
        "note": "matrix[i][j]: probability that a disperser leaving patch i+1 settles in patch "
                "j+1 in one year (expected walk, year-0 landscape). corridors: per corridor "
                "action, its share of all walker visits over the run, and of the one-year flow "
                "between the two blocks (the first two [risk] focus_areas, else patches 1 and 2) "
                "the part that passed through it."})
    return ["connectivity.csv", "connectivity.json"]


def _capacity_bands(model: Model, totals):
    """Capacity of years 0 .. years - 1 (of the step from census year t to t + 1): the same in
    every replicate, or with disturbance the mean over replicates after its losses."""
    for t in range(model.plan.years):
        if "sum_k" in totals:
            yield totals["sum_k"][t] / model.plan.replicates
        else:
            yield model.actions.capacity_for_year(t)


def write_results(work: Path, scenario, model: Model, parts: list[Path]) -> list[str]:
    """Combine batches and write stacks and tables (the batch folders stay, for a resume)."""
    totals = combine(work, model, parts)
    reps = model.plan.replicates
    grid, mask = model.landscape.grid, model.landscape.mask
    labels = year_labels(model.plan.years)
    files = []
    for name, acc in stacks_written(scenario, model).items():
        total = totals[acc]
        write_stack(work / f"{name}.tif", grid, mask,
                    (total[t] / reps for t in range(model.plan.years + 1)), labels)
        files.append(f"{name}.tif")
    if model.landscape.timeline is not None:
        write_stack(work / "capacity.tif", grid, mask, _capacity_bands(model, totals),
                    labels[:-1])
        files.append("capacity.tif")
    if model.walk is not None:
        files += write_connectivity(work, scenario, model, totals["visits"])
    write_patches(work / "patches.tif", grid, mask, model.census.labels)
    files.append("patches.tif")
    ledger = np.concatenate([np.load(p / "ledger.npy") for p in parts], axis=0)
    extra = tuple(model.ledger_columns)
    write_ledger_csv(work / "timeseries.csv", ledger[:, :, 0, :], integers=model.growth.stochastic,
                     extra=extra)
    files.append("timeseries.csv")
    if scenario.output.patches_csv and model.census.n_patches > 0:
        write_ledger_csv(work / "patches.csv", ledger[:, :, 1:, :], patches=True,
                         integers=model.growth.stochastic, extra=extra)
        files.append("patches.csv")
    if model.regime is not None:
        events = [e for p in parts for e in json.loads((p / "events.json").read_text())]
        write_events_csv(work / "events.csv", events)
        files.append("events.csv")
    files += write_summary(work, scenario, model, ledger, totals, parts)
    for name in list(totals):
        del totals[name]
        (work / f"total_{name}.npy").unlink()
    return files

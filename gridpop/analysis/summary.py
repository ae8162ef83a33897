"""The summary of one run: risk, occupancy, colonisation and connectivity, from its ledger.

:func:`write_summary` is called by :func:`gridpop.simulation.results.write_results` and writes into
the run folder:

- ``summary.json``: the numbers below, the parameters as read, the plan and the cautions;
- ``risk.csv``: the quasi-extinction risk curve of the total abundance with its intervals;
- ``patch_occupancy.csv``: per year and patch, the fraction of replicates in which the patch is
  occupied and the fraction in which it has been occupied by then;
- ``colonisation_year.tif``: per cell, the median first year occupied (nodata where fewer than
  half of the replicates ever occupy it).

Definitions (the functions of :mod:`gridpop.analysis.metrics` do the arithmetic):

- Abundance is the census of the ledger (after dispersal, see :mod:`gridpop.simulation`), year 0 the
  initial population. A replicate is *below* the quasi-extinction threshold ``[risk]
  quasi_extinction`` in a year when its abundance is smaller than it; a patch or a focus area is
  *occupied* when its abundance is at least ``[output] occupancy_threshold``.
- Focus areas (``[risk] focus_areas``, a vector file): each name of ``focus_name_field`` is one
  focus area, the cells whose centre its features cover. Its abundance is counted at every census of
  every replicate (:class:`FocusCensus`), so it is exact and stays the same cells in every plan,
  even where a corridor joins two patches into one.
- Metapopulation capacity: the run's patches (after the plan's actions), each at its centroid
  with its area in hectares, and ``alpha = 1 / [dispersal] mean_distance_m``; with the walk
  method, the walk's patch-to-patch settlement probabilities (``Model.connectivity``) take the
  place of ``exp(-alpha d)``, so resistance, corridors and barriers count; null without
  dispersal, and above :data:`CAPACITY_MAX_PATCHES` patches (said in ``"notes"``).
"""

from __future__ import annotations

import csv
import dataclasses
import json
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import rasterio.features

from ..config import SECTIONS
from ..errors import InputDataError, ScenarioError, where
from ..io.rasters import fmt_bounds
from ..io.results import LEDGER_FIELDS, write_json, write_stack
from ..io.vectors import read_vector
from .metrics import (
    colonisation_probability,
    expected_minimum,
    final_abundance,
    median_first_year,
    metapopulation_capacity,
    occupancy_over_time,
    risk_curve,
)

ABUNDANCE = LEDGER_FIELDS.index("abundance")

N_BOOT = 2000
"""Bootstrap resamples behind every bootstrap interval of the summary and the comparison."""

BLOCK_CELLS = 1 << 22
"""Cells x years of the ``ever`` accumulator read at once for the colonisation map."""

CAUTIONS = (
    "These results are projections of a simple model under the assumptions and parameters "
    "listed; their intervals cover only the randomness simulated, not errors in the maps or "
    "parameters. They support decisions and do not replace field data, the responsible agency, "
    "local regulations or licensed professional judgement."
)

CAPACITY_MAX_PATCHES = 500
"""Above this many patches the metapopulation capacity is not computed: each patch's removal
drop is an eigenproblem of the whole network, so the cost grows as P^3 (about 2 s at 500 patches,
a minute at 1000)."""

FILES = ("summary.json", "risk.csv", "patch_occupancy.csv", "colonisation_year.tif")
"""Files :func:`write_summary` adds to a run folder."""


@dataclass(frozen=True, eq=False)
class FocusCensus:
    """Abundance inside named focus areas, counted at each census of each replicate.

    Attributes
    ----------
    names : tuple of str
        Target names, in the order of their first feature in the file.
    cells : tuple of (k,) int64 ndarray
        Flat indices (``i * nx + j``) of each focus area's cells.
    """

    names: tuple[str, ...]
    cells: tuple[np.ndarray, ...]

    def table(self, replicates: int, years: int) -> np.ndarray:
        """An empty ``(replicates, years + 1, focus areas)`` table for a batch."""
        return np.zeros((replicates, years + 1, len(self.names)))

    def record(self, row: np.ndarray, n: np.ndarray) -> None:
        """Write the abundance inside each focus area of the census ``n`` (ny, nx) into ``row``."""
        flat = n.ravel()
        for q, idx in enumerate(self.cells):
            row[q] = flat[idx].sum()


def focus_census(scenario, grid) -> FocusCensus | None:
    """The focus areas of ``[risk] focus_areas`` on the grid, or None when none are given.

    Raises
    ------
    ScenarioError
        ``focus_name_field`` is not an attribute of the layer, or a feature has no name.
    InputDataError
        The layer cannot be read, has no CRS, or a focus area covers no cell centre of the grid.
    """
    risk = scenario.risk
    if risk.focus_areas is None:
        return None
    loc = f"{where(scenario.path, 'risk', 'focus_areas')} ({risk.focus_areas})"
    gdf, _ = read_vector(risk.focus_areas, grid, loc)
    field = risk.focus_name_field
    columns = [str(c) for c in gdf.columns if c != gdf.geometry.name]
    if field not in columns:
        raise ScenarioError(f"{where(scenario.path, 'risk', 'focus_name_field')} = {field!r}: "
                            f"{Path(risk.focus_areas).name} has no such attribute; it has "
                            f"{', '.join(columns) or 'no attributes'}.")
    if gdf[field].isna().any():
        raise ScenarioError(f"{loc}: {int(gdf[field].isna().sum())} features have no "
                            f"{field!r}; every focus area needs a name.")
    names = list(dict.fromkeys(str(v) for v in gdf[field]))
    cells = []
    for name in names:
        geoms = gdf.geometry[gdf[field].astype(str) == name]
        mask = rasterio.features.rasterize(((g, 1) for g in geoms), out_shape=grid.shape,
                                           transform=grid.transform, fill=0, dtype=np.uint8)
        if not mask.any():
            raise InputDataError(f"{loc}: focus area {name!r} covers no cell centre of the grid "
                                 f"(its bounds {fmt_bounds(geoms.total_bounds)}, grid bounds "
                                 f"{fmt_bounds(grid.bounds)}).")
        cells.append(np.flatnonzero(mask))
    return FocusCensus(tuple(names), tuple(cells))


def patch_centroids(labels: np.ndarray, n_patches: int, grid) -> np.ndarray:
    """Centroids ``(P, 2)`` of patches 1..P, in metres from the grid's upper-left corner."""
    ny, nx = labels.shape
    rows, cols = np.indices((ny, nx))
    count = np.bincount(labels.ravel(), minlength=n_patches + 1)[1:]
    x = np.bincount(labels.ravel(), weights=(cols + 0.5).ravel(), minlength=n_patches + 1)[1:]
    y = np.bincount(labels.ravel(), weights=(rows + 0.5).ravel(), minlength=n_patches + 1)[1:]
    return np.column_stack([x / count * grid.cell_width_m, y / count * grid.cell_height_m])


def _risk(abundance: np.ndarray, threshold: float, confidence: float) -> dict:
    c = risk_curve(abundance, threshold, confidence)
    return {"year": list(range(abundance.shape[1])), "ever_below": c["ever_below"],
            "ever_below_lo": c["lo"], "ever_below_hi": c["hi"], "below_now": c["below_now"],
            "below_now_lo": c["below_now_lo"], "below_now_hi": c["below_now_hi"]}


def _capacity(scenario, model, notes: list[str]) -> dict | None:
    patches, d = model.landscape.patches, scenario.dispersal
    walk = model.walk is not None
    if patches.n == 0 or d.fraction == 0 or (d.mean_distance_m is None and not walk):
        return None
    if patches.n > CAPACITY_MAX_PATCHES:
        notes.append(f"metapopulation capacity not computed: {patches.n} patches, more than "
                     f"{CAPACITY_MAX_PATCHES}")
        return None
    xy = patch_centroids(patches.labels, patches.n, model.landscape.grid)
    if walk:
        m = metapopulation_capacity(xy, patches.area_ha[1:], None,
                                    dispersal=model.connectivity)
        basis = {"connection": "walk settlement probabilities (connectivity.csv)"}
    else:
        m = metapopulation_capacity(xy, patches.area_ha[1:], 1.0 / d.mean_distance_m)
        basis = {"connection": "exp(-alpha d)", "alpha_per_m": 1.0 / d.mean_distance_m}
    return {"lambda_M": m["lambda_M"], "contribution": m["contribution"],
            "removal_drop": m["removal_drop"], "patch": list(range(1, patches.n + 1)),
            "area_ha": patches.area_ha[1:], **basis}


def parameters(scenario) -> dict:
    """The scenario as read: every section (``[plan] extends`` left out), then the
    ``[[disturbance]]`` and ``[[action]]`` tables as lists; paths as absolute path strings."""
    out: dict[str, Any] = {name: dataclasses.asdict(getattr(scenario, name))
                           for name in SECTIONS if getattr(scenario, name) is not None
                           and (name != "sex" or scenario.stages is not None)}
    del out["plan"]["extends"]  # how the file is written, not a parameter: merged in already
    out["disturbance"] = [dataclasses.asdict(c) for c in scenario.disturbances]
    out["action"] = [dataclasses.asdict(c) for c in scenario.actions]
    return json.loads(json.dumps(out, default=str))


def plan(scenario) -> dict:
    """Name (file stem), description and actions (kind, absolute area path) of a scenario."""
    return {"name": scenario.path.stem, "description": scenario.plan.description,
            "actions": [{"kind": c.kind, "area": str(c.area)}
                        for c in scenario.actions]}


def summarise(scenario, model, ledger: np.ndarray, focus_abundance: np.ndarray | None, *,
              capacity: bool = True) -> dict:
    """The content of summary.json (without the metapopulation capacity when ``capacity`` is
    false: with the walk method it needs the expected walk from every patch).

    Parameters
    ----------
    scenario : gridpop.config.Scenario
    model : gridpop.simulation.model.Model
    ledger : (R, T + 1, P + 1, F) ndarray
        The combined ledger (index 0 the landscape, 1..P the patches; fields
        :data:`gridpop.io.results.LEDGER_FIELDS`).
    focus_abundance : (R, T + 1, Q) ndarray or None
        Abundance inside each focus area (:class:`FocusCensus`).
    """
    risk, occ_threshold = scenario.risk, scenario.output.occupancy_threshold
    total = ledger[:, :, 0, ABUNDANCE]
    reps, steps = total.shape
    est, lo, hi = expected_minimum(total, n_boot=N_BOOT, confidence=risk.confidence,
                                   seed=model.plan.seed)
    out = {"quasi_extinction": risk.quasi_extinction, "replicates": reps, "years": steps - 1,
           "confidence": risk.confidence, "occupancy_threshold": occ_threshold,
           "risk": _risk(total, risk.quasi_extinction, risk.confidence),
           "focus_risk": {}, "expected_minimum": {"estimate": est, "lo": lo, "hi": hi},
           "final_abundance": final_abundance(total),
           "occupied_patches": {"year": list(range(steps)), "mean": np.zeros(steps)},
           "colonisation": {}, "notes": []}
    if model.census.n_patches:
        occ = occupancy_over_time(ledger[:, :, 1:, ABUNDANCE], occ_threshold)
        out["occupied_patches"]["mean"] = occ["mean_n_occupied"]
    if focus_abundance is not None:
        names = model.census.focus.names
        col = colonisation_probability(focus_abundance, occ_threshold)
        for q, name in enumerate(names):
            out["focus_risk"][name] = _risk(focus_abundance[:, :, q], risk.quasi_extinction,
                                             risk.confidence)
            out["colonisation"][name] = {"year": list(range(steps)), "probability": col[:, q]}
        out["focus_areas"] = {"file": str(risk.focus_areas), "name_field": risk.focus_name_field,
                          "names": list(names)}
    out.update(metapopulation_capacity=_capacity(scenario, model, out["notes"]) if capacity
               else None,
               parameters=parameters(scenario), plan=plan(scenario), cautions=CAUTIONS)
    return out


def _count(v: float) -> str:
    return f"{v:,.0f}" if v == round(v) else f"{v:,.1f}"


def headline(summary: dict) -> str:
    """One line from a run's summary.json: the risk by the horizon with its interval and the
    final median abundance (what ``gridpop run`` prints at its end)."""
    r = summary["risk"]
    return (f"risk of falling below {_count(summary['quasi_extinction'])} individuals by year "
            f"{summary['years']}: {r['ever_below'][-1]:.3f} [{r['ever_below_lo'][-1]:.3f}, "
            f"{r['ever_below_hi'][-1]:.3f}] ({100 * summary['confidence']:g} % interval); final "
            f"median abundance {_count(summary['final_abundance']['p50'])}")


def _write_csv(path: Path, header, rows) -> None:
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        w.writerows(rows)


def _fmt(v) -> str:
    return f"{v:.12g}"


def write_colonisation_year(path: Path, ever, replicates: int, grid, mask) -> None:
    """Median first year occupied per cell (:func:`gridpop.analysis.metrics.median_first_year`) as a
    single-band float32 GeoTIFF, nodata where it is not reached; read in row blocks so memory
    does not grow with the number of years."""
    steps, ny, nx = ever.shape
    rows = max(1, BLOCK_CELLS // (steps * nx))
    first = np.empty((ny, nx))
    for i in range(0, ny, rows):
        first[i:i + rows] = median_first_year(ever[:, i:i + rows], replicates)
    write_stack(path, grid, mask, [first], ["median first year occupied"])


def write_summary(work: Path, scenario, model, ledger: np.ndarray, totals: dict,
                  parts: list[Path]) -> list[str]:
    """Write summary.json, risk.csv, patch_occupancy.csv and colonisation_year.tif into ``work``.

    Parameters
    ----------
    work : Path
        The run's working folder.
    scenario, model
        The run's scenario and :class:`gridpop.simulation.model.Model`.
    ledger : (R, T + 1, P + 1, F) ndarray
        The combined ledger.
    totals : dict
        The combined accumulators (``"ever"``: replicates occupied by year t, per cell).
    parts : list of Path
        The batch folders, in replicate order (each holds ``focus.npy`` when focus areas are
        given).

    Returns
    -------
    list of str
        The names of the files written.
    """
    focus = None
    if model.census.focus is not None:
        focus = np.concatenate([np.load(p / "focus.npy") for p in parts], axis=0)
    summary = summarise(scenario, model, ledger, focus)
    write_json(work / "summary.json", summary)
    r = summary["risk"]
    keys = ("ever_below", "ever_below_lo", "ever_below_hi", "below_now", "below_now_lo",
            "below_now_hi")
    _write_csv(work / "risk.csv", ("year",) + keys,
               ([t] + [_fmt(r[k][t]) for k in keys] for t in r["year"]))
    rows: Iterable[list] = []
    if model.census.n_patches:
        patch_n = ledger[:, :, 1:, ABUNDANCE]
        threshold = scenario.output.occupancy_threshold
        occ = occupancy_over_time(patch_n, threshold)["fraction_occupied"]
        col = colonisation_probability(patch_n, threshold)
        rows = ([t, p + 1, _fmt(occ[t, p]), _fmt(col[t, p])]
                for t in range(occ.shape[0]) for p in range(occ.shape[1]))
    _write_csv(work / "patch_occupancy.csv",
               ("year", "patch", "fraction_occupied", "fraction_colonised"), rows)
    write_colonisation_year(work / "colonisation_year.tif", totals["ever"], model.plan.replicates,
                            model.landscape.grid, model.landscape.mask)
    return list(FILES)

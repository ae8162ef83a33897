"""Figures of a run or a comparison of plans, as PNG files in the folder's ``plots/``.

:func:`plot_run` draws the figures of one RUN folder, :func:`plot_compare` those of a COMPARE
folder (every plan on the same axes or side by side on the same scales, plus the occupancy
difference maps). The figure builders (:func:`risk_figure`, :func:`abundance_figure`,
:func:`ledger_figure`, :func:`map_figure`) return matplotlib figures without touching pyplot's
global state, so nothing needs a display.

Colours: lines use the Okabe-Ito palette, maps viridis (occupancy) and cividis (colonisation
year), difference maps the ColorBrewer PuOr diverging scheme; all three families are designed to
stay readable with the common forms of colour blindness.

References
----------
Okabe, M. and Ito, K. (2008). Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people. J*Fly Data Depository for Drosophila
Researchers.
Nunez, J. R., Anderton, C. R. and Renslow, R. S. (2018). Optimizing colormaps with consideration
for color vision deficiency to enable accurate interpretation of scientific data. PLoS ONE 13,
e0199239 (cividis).
Harrower, M. and Brewer, C. A. (2003). ColorBrewer.org: an online tool for selecting colour
schemes for maps. The Cartographic Journal 40, 27-37.
"""

from __future__ import annotations

import json
import math
import textwrap
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import geopandas as gpd
import matplotlib.patheffects as pe
import numpy as np
import pyproj
import rasterio
import rasterio.features
import rasterio.plot
import shapely.geometry
from matplotlib.artist import Artist
from matplotlib.colors import ListedColormap
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import MaxNLocator

from ..actions import apply_actions
from ..analysis.metrics import binomial_interval
from ..config import load_scenario
from ..errors import GridpopError, InputDataError, RunStateError
from ..io.results import LEDGER_FIELDS, whole_file
from ..landscape import build_landscape
from .cartography import MapLayer, add_scale_bar, axis_label, crs_label, read_band, relative
from .stageplots import stage_figures

OKABE_ITO = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#000000",
             "#F0E442")
"""Okabe and Ito (2008) colours, ordered so that the first ones contrast most on white."""

_DASHES = ("-", "--", "-.", ":")

ACTION_STYLE: dict[str, tuple[str, Any]] = {
    "reserve": ("#CC79A7", "-"), "corridor": ("#D55E00", "--"), "barrier": ("#000000", ":"),
    "restoration": ("#009E73", "-."), "habitat_loss": ("#E69F00", (0, (5, 1, 1, 1))),
    "release": ("#56B4E9", "-"), "removal": ("#0072B2", ":"), "focus": ("#FFFFFF", "-"),
    "habitat in year 0": ("#F0E442", (0, (1, 1)))}
"""Outline colour and line style on the maps: action kinds, focus areas, habitat of year 0."""

DPI = 110


@dataclass(frozen=True, eq=False)
class Plan:
    """One plan's RUN folder as read: its name, folder, summary.json and run.json."""

    name: str
    folder: Path
    summary: dict
    manifest: dict

    def ledger(self) -> dict[str, np.ndarray]:
        """timeseries.csv as ``{column: (replicates, years + 1) array}``, plus ``"year"``."""
        path = self.folder / "timeseries.csv"
        if not path.is_file():
            raise InputDataError(f"{path}: missing; the run folder is incomplete.")
        with open(path) as fh:
            head = fh.readline().strip().split(",")
        data = np.loadtxt(path, delimiter=",", skiprows=1, ndmin=2)
        reps, r_idx = np.unique(data[:, head.index("replicate")], return_inverse=True)
        years, t_idx = np.unique(data[:, head.index("year")], return_inverse=True)
        out = {"year": years}
        for name in LEDGER_FIELDS:
            table = np.full((len(reps), len(years)), np.nan)
            table[r_idx, t_idx] = data[:, head.index(name)]
            out[name] = table
        return out


def _read_json(path: Path) -> dict:
    try:
        data = json.loads(path.read_text())
    except FileNotFoundError:
        raise InputDataError(f"{path}: missing; is {path.parent} a complete gridpop result "
                             "folder?") from None
    except (OSError, ValueError) as exc:
        raise InputDataError(f"{path}: cannot be read as JSON ({exc}).") from None
    if data.get("complete") is False:
        raise RunStateError(f"{path}: the run is not complete (\"complete\": false).")
    return data


def read_run(folder, manifest: dict | None = None) -> Plan:
    """Read a RUN folder (run.json and summary.json); ``manifest`` stands for run.json in a
    folder that is drawn before it is published."""
    folder = Path(folder)
    summary = _read_json(folder / "summary.json")
    manifest = _read_json(folder / "run.json") if manifest is None else manifest
    name = summary.get("plan", {}).get("name") or folder.name
    return Plan(name, folder, summary, manifest)


def read_plans(folder, manifest: dict | None = None) -> tuple[str, list[Plan]]:
    """The plans of a result folder: ``("compare", plans)`` for a COMPARE folder (compare.json
    present, or its content given as ``manifest``), ``("run", [plan])`` for a RUN folder.

    Raises
    ------
    InputDataError
        The folder is neither, or a file it needs is missing or unreadable.
    """
    folder = Path(folder)
    if manifest is not None or (folder / "compare.json").is_file():
        manifest = _read_json(folder / "compare.json") if manifest is None else manifest
        plans = [read_run(folder / p["folder"]) for p in manifest.get("plans", [])]
        if not plans:
            raise InputDataError(f"{folder / 'compare.json'}: lists no plans.")
        return "compare", plans
    if (folder / "run.json").is_file():
        return "run", [read_run(folder)]
    raise InputDataError(f"{folder}: not a gridpop result folder (no run.json or compare.json).")


def _colour(i: int) -> tuple[str, str]:
    """Colour and line style of the i-th plan: Okabe-Ito, then the same with dashes."""
    return OKABE_ITO[i % len(OKABE_ITO)], _DASHES[(i // len(OKABE_ITO)) % len(_DASHES)]


def starts_below(plans: list[Plan], name: str) -> bool:
    """Whether focus area ``name`` is below the quasi-extinction threshold in year 0 in every
    replicate of every plan that has it (its risk curve is then 1 throughout)."""
    curves = [p.summary["focus_risk"][name] for p in plans
              if name in p.summary.get("focus_risk", {})]
    return bool(curves) and all(c["ever_below"][0] >= 1.0 for c in curves)


def colonisation_curve(plan: Plan, name: str) -> dict | None:
    """Probability that focus area ``name`` has been occupied by year t, with its Wilson
    interval over the plan's replicates (the interval of the risk curves); None when the plan
    does not have it."""
    c = plan.summary.get("colonisation", {}).get(name)
    if c is None:
        return None
    reps = int(plan.summary["replicates"])
    p = np.asarray(c["probability"], dtype=float)
    lo, hi = binomial_interval(np.rint(p * reps), reps, plan.summary.get("confidence", 0.95))
    return {"year": c["year"], "value": p, "lo": lo, "hi": hi}


def _risk_curve(plan: Plan, key: str | None) -> dict | None:
    r = plan.summary["risk"] if key is None else plan.summary["focus_risk"].get(key)
    if r is None:
        return None
    return {"year": r["year"], "value": r["ever_below"], "lo": r["ever_below_lo"],
            "hi": r["ever_below_hi"]}


def risk_figure(plans: list[Plan]) -> Figure:
    """Quasi-extinction risk curves: P(abundance fell below the threshold by year t), one line
    per plan with its confidence band, one panel for the whole landscape and one per focus area.

    A focus area below the threshold in year 0 (in every replicate) would show a flat risk of 1;
    its panel shows instead the probability that it has been colonised (held at least
    ``occupancy_threshold`` individuals) by year t, and its title says so."""
    first = plans[0].summary
    q = f"{first['quasi_extinction']:g} individuals"
    panels = [("whole landscape", None, False)] + [
        (f"focus area {t}", t, starts_below(plans, t)) for t in first.get("focus_risk", {})]
    fig = Figure(figsize=(6.4 * min(len(panels), 2), 4.2 * math.ceil(len(panels) / 2)),
                 layout="constrained")
    axes = fig.subplots(math.ceil(len(panels) / 2), min(len(panels), 2), squeeze=False,
                        sharey=True).ravel()
    for ax, (title, key, colonise) in zip(axes, panels, strict=False):
        for i, plan in enumerate(plans):
            c = colonisation_curve(plan, key) if colonise else _risk_curve(plan, key)
            if c is None:
                continue
            colour, dash = _colour(i)
            ax.fill_between(c["year"], c["lo"], c["hi"], color=colour, alpha=0.18, linewidth=0)
            ax.plot(c["year"], c["value"], color=colour, linestyle=dash, linewidth=2,
                    label=plan.name)
        if colonise:
            title += (f": below {q} from year 0,\nso shown: probability colonised by year t")
            occupied = first.get("occupancy_threshold")
            ax.set_ylabel("probability of having held at least\n"
                          f"{occupied:g} individuals by year t" if occupied is not None
                          else "probability colonised by year t")
        ax.set_ylim(-0.02, 1.02)
        ax.set_xlim(left=0)
        ax.set_title(title)
        ax.set_xlabel("year")
        ax.grid(alpha=0.3)
    for ax in axes[len(panels):]:
        ax.set_visible(False)
    axes[0].set_ylabel(f"probability of having fallen below\n{q} by year t")
    conf = first.get("confidence", 0.95)
    axes[0].legend(title=f"plan (band: {conf:.0%} interval)", fontsize="small")
    fig.suptitle("Quasi-extinction risk")
    return fig


def abundance_figure(plans: list[Plan], *, replicate_lines: int = 3) -> Figure:
    """Total abundance over time per plan: median and 5-95 % band over replicates and the
    first few replicates as thin lines; one panel per plan on a shared scale."""
    cols = min(len(plans), 3)
    rows = math.ceil(len(plans) / cols)
    fig = Figure(figsize=(5.0 * cols, 3.6 * rows + 0.6), layout="constrained")
    axes = fig.subplots(rows, cols, squeeze=False, sharey=True).ravel()
    for i, (ax, plan) in enumerate(zip(axes, plans, strict=False)):
        led = plan.ledger()
        years, n = led["year"], led["abundance"]
        colour, _ = _colour(i)
        lo, med, hi = np.percentile(n, [5, 50, 95], axis=0)
        ax.fill_between(years, lo, hi, color=colour, alpha=0.25, linewidth=0,
                        label="5-95 % of replicates")
        for k in range(min(replicate_lines, n.shape[0])):
            ax.plot(years, n[k], color="0.35", linewidth=0.7, alpha=0.8,
                    label="single replicates" if k == 0 else None)
        ax.plot(years, med, color=colour, linewidth=2.2, label="median")
        q = plan.summary.get("quasi_extinction")
        if q is not None:
            ax.axhline(q, color="#D55E00", linestyle=":", linewidth=1.2,
                       label="quasi-extinction threshold")
        ax.set_title(plan.name)
        ax.set_xlabel("year")
        ax.set_ylim(bottom=0)
        ax.grid(alpha=0.3)
    for ax in axes[len(plans):]:
        ax.set_visible(False)
    axes[0].set_ylabel("total abundance (individuals)")
    fig.legend(*axes[0].get_legend_handles_labels(), loc="outside lower center", ncols=4,
               fontsize="small")
    fig.suptitle("Total abundance over time")
    return fig


LEDGER_SERIES = (("births", "#009E73"), ("deaths", "#D55E00"),
                 ("disturbance deaths", "#E69F00"), ("net movement", "#0072B2"))
"""Series of the ledger chart and their colours."""


def ledger_means(led: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Mean over replicates, per year 1..T, of births, deaths, disturbance deaths and net
    movement (immigrants - emigrants; negative when dispersers are lost off habitat)."""
    mean = {k: np.nanmean(v[:, 1:], axis=0) for k, v in led.items() if k != "year"}
    return {"year": led["year"][1:], "births": mean["births"], "deaths": mean["deaths"],
            "disturbance deaths": mean["disturbance_deaths"],
            "net movement": mean["immigrants"] - mean["emigrants"]}


def ledger_figure(plans: list[Plan]) -> Figure:
    """The yearly ledger, mean over replicates: births up, deaths and disturbance deaths down
    (stacked bars), net movement as a line; one panel per plan on a shared scale."""
    cols = min(len(plans), 3)
    rows = math.ceil(len(plans) / cols)
    fig = Figure(figsize=(5.0 * cols, 3.6 * rows + 0.6), layout="constrained")
    axes = fig.subplots(rows, cols, squeeze=False, sharey=True).ravel()
    for ax, plan in zip(axes, plans, strict=False):
        m = ledger_means(plan.ledger())
        (b, cb), (d, cd), (dd, cdd), (mv, cm) = LEDGER_SERIES
        ax.bar(m["year"], m[b], width=0.85, color=cb, label=b)
        ax.bar(m["year"], -m[d], width=0.85, color=cd, label=d)
        ax.bar(m["year"], -m[dd], width=0.85, bottom=-m[d], color=cdd, label=dd)
        ax.plot(m["year"], m[mv], color=cm, marker="o", markersize=3, linewidth=1.5, label=mv)
        ax.axhline(0, color="black", linewidth=0.8)
        ax.set_title(plan.name)
        ax.set_xlabel("year (step from year t - 1 to t)")
        ax.grid(alpha=0.3, axis="y")
    for ax in axes[len(plans):]:
        ax.set_visible(False)
    axes[0].set_ylabel("individuals per year (mean of replicates)\n"
                       "gains above 0, losses below")
    handles, labels = axes[0].get_legend_handles_labels()
    order = [labels.index(name) for name, _ in LEDGER_SERIES]
    fig.legend([handles[i] for i in order], [labels[i] for i in order],
               loc="outside lower center", ncols=4, fontsize="small")
    fig.suptitle("Yearly ledger")
    return fig


@dataclass(frozen=True, eq=False)
class PlanCells:
    """A plan's landscape rebuilt on the run's grid: the habitat (capacity > 0, no disturbance)
    of the last year, of year 0 when suitability changes over time (``first``, else None), and
    each action as ``(kind, area file relative to the scenario, cells)``, in order."""

    habitat: np.ndarray
    actions: tuple[tuple[str, str, np.ndarray], ...]
    first: np.ndarray | None = None


def plan_cells(plan: Plan) -> PlanCells | None:
    """The :class:`PlanCells` of a plan, from the scenario file named in run.json when it is still
    the file that was run (same sha256); otherwise None, with a warning (the maps then show no
    habitat and no action areas)."""
    path = Path(plan.manifest.get("scenario", ""))
    why = None
    if not path.is_file():
        why = "is missing"
    else:
        try:  # the hash covers the scenarios it extends (gridpop.config.load_scenario)
            scenario = load_scenario(path)
            if scenario.sha256 != plan.manifest.get("scenario_sha256"):
                why = "has changed since the run"
            else:
                actions = apply_actions(scenario, build_landscape(scenario, stochastic=False))
        except GridpopError as exc:
            why = f"cannot be rebuilt ({exc})"
    if why is not None:
        warnings.warn(f"{path}: the scenario of plan {plan.name} {why}; its maps show no "
                      "habitat and no action areas.", stacklevel=2)
        return None
    habitat = actions.capacity_for_year(int(plan.summary["years"]) - 1) > 0
    first = actions.capacity_for_year(0) > 0 if actions.landscape.timeline is not None else None
    return PlanCells(habitat, tuple((c.kind, relative(c.area, path.parent), cells) for c, cells
                                    in zip(scenario.actions, actions.areas, strict=True)), first)


def footprint(cells: np.ndarray, layer: MapLayer) -> gpd.GeoDataFrame:
    """The cells as polygons in the layer's CRS (their outline is what the model used)."""
    shapes = rasterio.features.shapes(cells.astype(np.uint8), mask=cells,
                                      transform=layer.transform)
    return gpd.GeoDataFrame(geometry=[shapely.geometry.shape(g) for g, _ in shapes],
                            crs=layer.crs)


def focus_outlines(plan: Plan, crs: pyproj.CRS) -> list[tuple[str, gpd.GeoDataFrame]]:
    """The plan's focus areas reprojected to ``crs``, as ``[("focus", features)]``; none when it
    has none, or with a warning when the file is missing."""
    focus = plan.summary.get("focus_areas")
    if not focus:
        return []
    path = Path(focus["file"])
    if not path.exists():
        warnings.warn(f"{path}: the focus areas of plan {plan.name} are missing; they are not "
                      "drawn on the maps.", stacklevel=2)
        return []
    gdf = gpd.read_file(path)
    return [("focus", gdf.to_crs(crs) if gdf.crs is not None else gdf)]


def action_outlines(plans: list[Plan], cells: list[PlanCells | None], layer: MapLayer
                    ) -> tuple[list[list[tuple[str, gpd.GeoDataFrame]]], str]:
    """Per plan, the footprints ``(kind, polygons)`` of the actions that tell the plans apart,
    and a note naming the others, which are not drawn: an action covering the whole study area
    (it would frame every panel), and, with several plans, one of the same kind and cells in
    every plan."""
    study = ~np.ma.getmaskarray(layer.values)
    shared: dict[str, None] = {}
    whole: dict[str, None] = {}
    out = []
    for pc in cells:
        lines = []
        for kind, name, area in pc.actions if pc is not None else ():
            label = f"{kind.replace('_', ' ')} ({name})"
            if not (study & ~area).any():
                whole[label] = None
            elif len(plans) > 1 and all(
                    other is not None and any(k == kind and np.array_equal(a, area)
                                              for k, _, a in other.actions) for other in cells):
                shared[label] = None
            elif area.any():
                lines.append((kind, footprint(area, layer)))
        out.append(lines)
    note = "; ".join(f"not drawn, {why}: {', '.join(labels)}" for why, labels in (
        ("the same in every plan", shared), ("covering the whole study area", whole)) if labels)
    return out, note


def _stroke(kind: str) -> list:
    """A halo under an outline so it reads on any map colour (black under the white focus areas)."""
    return [pe.withStroke(linewidth=3.4, foreground="black" if kind == "focus" else "white")]


def _draw_outlines(ax, layers) -> None:
    for kind, gdf in layers:
        colour, dash = ACTION_STYLE.get(kind, ("#000000", "-"))
        polygonal = gdf.geom_type.isin(["Polygon", "MultiPolygon"])
        edges = gpd.GeoSeries(list(gdf.geometry[polygonal].boundary)
                              + list(gdf.geometry[~polygonal]), crs=gdf.crs)
        if len(edges):
            edges.plot(ax=ax, color=colour, linestyle=dash, linewidth=1.6,
                       path_effects=_stroke(kind))


NOT_REACHED = "#D9D9D9"
"""Colour of study-area cells without a value when the habitat is not known."""

HABITAT, MATRIX = "#C8DDB4", "#F0F0F0"
"""Colours of study-area cells without a value in habitat and in the matrix (light, under the
colour scale)."""


def _underlay(ax, layer: MapLayer) -> set[str]:
    """Draw the study-area cells without a value (habitat and matrix apart when the habitat is
    known) and return which of "habitat", "matrix", "grey" it drew."""
    if layer.study is None:
        return set()
    blank = layer.study & np.ma.getmaskarray(layer.values)
    if not blank.any():
        return set()
    if layer.habitat is None:
        codes, colours, drawn = np.zeros(blank.shape), [NOT_REACHED], {"grey"}
    else:
        codes, colours = layer.habitat.astype(float), [MATRIX, HABITAT]
        drawn = ({"habitat"} if (blank & layer.habitat).any() else set()) | (
            {"matrix"} if (blank & ~layer.habitat).any() else set())
    ax.imshow(np.ma.masked_array(codes, ~blank), extent=layer.extent,
              cmap=ListedColormap(colours), vmin=0, vmax=max(len(colours) - 1, 1),
              interpolation="nearest")
    return drawn


def map_figure(panels: list[tuple[str, MapLayer, list]], *, cmap: str, vmin: float,
               vmax: float, label: str, title: str, no_value: str = "no value",
               note: str = "") -> Figure:
    """Maps on the grid, one panel per ``(title, layer, outlines)`` on one colour scale, with
    the outlines (``(kind, features)``) on top, a scale bar and axes in grid CRS coordinates.

    Study-area cells without a value (masked, ``layer.study`` given) are drawn light: habitat
    and matrix in two colours when ``layer.habitat`` is given (legend entries "habitat,
    ``no_value``" and "matrix"), else grey (legend entry ``no_value``); cells outside the study
    area stay white. ``note`` (e.g. the actions not drawn) is the legend's title.
    """
    cols = min(len(panels), 3)
    rows = math.ceil(len(panels) / cols)
    left, right, bottom, top = panels[0][1].extent
    aspect = (top - bottom) / (right - left)
    width = min(4.8, 5.0 / aspect)  # of one map, inches
    fig_width = cols * (width + 0.9) + 1.2
    fig = Figure(figsize=(fig_width, rows * (width * aspect + 1.0) + 1.3 + 0.3 * bool(note)),
                 layout="constrained")
    axes = fig.subplots(rows, cols, squeeze=False).ravel()
    crs = panels[0][1].crs
    kinds, blank, image = set(), set(), None
    for ax, (name, layer, lines) in zip(axes, panels, strict=False):
        blank |= _underlay(ax, layer)
        image = ax.imshow(layer.values, extent=layer.extent, cmap=cmap, vmin=vmin, vmax=vmax,
                          interpolation="nearest")
        _draw_outlines(ax, lines)
        kinds |= {k for k, _ in lines}
        ax.set_xlim(layer.extent[0], layer.extent[1])
        ax.set_ylim(layer.extent[2], layer.extent[3])
        ax.set_title(name)
        ax.ticklabel_format(useOffset=False, style="plain")
        ax.tick_params(labelsize=7)
        ax.xaxis.set_major_locator(MaxNLocator(4))
        ax.yaxis.set_major_locator(MaxNLocator(5))
        ax.set_xlabel(axis_label(crs, "east", "x"), fontsize=8)
        ax.set_ylabel(axis_label(crs, "north", "y"), fontsize=8)
        add_scale_bar(ax, crs, layer.extent[1] - layer.extent[0])
    for ax in axes[len(panels):]:
        ax.set_visible(False)
    assert image is not None  # at least one panel
    fig.colorbar(image, ax=axes[:len(panels)].tolist(), label=label, shrink=0.85)
    handles: list[Artist] = [
        Line2D([], [], color=c, linestyle=dash, linewidth=1.6, path_effects=_stroke(k),
               label="focus area" if k == "focus" else k.replace("_", " "))
        for k, (c, dash) in ACTION_STYLE.items() if k in kinds]
    for key, colour, text in (("habitat", HABITAT, f"habitat, {no_value}"),
                              ("matrix", MATRIX, "matrix (no habitat)"),
                              ("grey", NOT_REACHED, no_value)):
        if key in blank:
            handles.append(Patch(facecolor=colour, edgecolor="0.5", label=text))
    if handles or note:
        fig.legend(handles=handles, loc="outside lower center",
                   ncols=max(min(len(handles), 6, int(fig_width / 2.4)), 1),
                   fontsize="small", facecolor="#BFBFBF", framealpha=1.0,
                   title=textwrap.fill(note, int(fig_width * 13)) or None,
                   title_fontsize="small")
    fig.suptitle(f"{title}\ngrid CRS: {crs_label(crs)}", fontsize=11)
    return fig


def _save(fig: Figure, path: Path) -> Path:
    with whole_file(path) as tmp:  # a folder drawn again keeps whole figures if interrupted
        fig.savefig(tmp, dpi=DPI, format="png")
    return path


def _without_zero(layer: MapLayer) -> np.ma.MaskedArray:
    return np.ma.masked_where(layer.values == 0, layer.values)


def _maps(plans: list[Plan], compare_dir: Path | None = None) -> list[tuple[str, Figure]]:
    """The occupancy and colonisation maps, and with ``compare_dir`` the occupancy difference
    maps of the plans after the first."""
    finals = [read_band(p.folder / "occupancy.tif") for p in plans]
    cells = [plan_cells(p) for p in plans]
    actions, note = action_outlines(plans, cells, finals[0])
    years = max(int(p.summary.get("years", 0)) for p in plans)
    occ, col, diff = [], [], []
    for plan, final, pc, lines in zip(plans, finals, cells, actions, strict=True):
        study = ~np.ma.getmaskarray(final.values)
        habitat = pc.habitat if pc is not None else None
        lines = focus_outlines(plan, final.crs) + lines  # actions drawn over focus areas
        if pc is not None and pc.first is not None:
            lines.append(("habitat in year 0", footprint(pc.first, final)))
        occ.append((plan.name, MapLayer(_without_zero(final), final.extent, final.crs, study,
                                        habitat), lines))
        first = read_band(plan.folder / "colonisation_year.tif", 1)
        col.append((plan.name, MapLayer(first.values, first.extent, first.crs, study, habitat),
                    lines))
        if compare_dir is not None and plan is not plans[0]:
            d = read_band(compare_dir / f"occupancy_difference_{plan.name}.tif", 1)
            diff.append((f"{plan.name} minus {plans[0].name}",
                         MapLayer(_without_zero(d), d.extent, d.crs, study, habitat), lines))
    maps = [
        ("occupancy", map_figure(
            occ, cmap="viridis", vmin=0.0, vmax=1.0, label="fraction of replicates occupied",
            title=f"Occupancy in year {years}", no_value="occupied in no replicate",
            note=note)),
        ("colonisation", map_figure(
            col, cmap="cividis", vmin=0.0, vmax=max(years, 1),
            label="median first year occupied", title="Colonisation year",
            no_value="not occupied in half of the replicates", note=note)),
    ]
    if diff:
        top = max(max(float(np.ma.max(np.ma.abs(d[1].values)) or 0.0) for d in diff), 0.01)
        maps.append(("occupancy_difference", map_figure(
            diff, cmap="PuOr", vmin=-top, vmax=top,
            label="difference in fraction of replicates occupied",
            title="Final-year occupancy: difference from the first plan",
            no_value="no difference", note=note)))
    return maps


def _figures(plans: list[Plan], compare_dir: Path | None = None) -> list[tuple[str, Figure]]:
    return ([("risk", risk_figure(plans)), ("abundance", abundance_figure(plans))]
            + _maps(plans, compare_dir) + [("ledger", ledger_figure(plans))] + stage_figures(plans))


def _write(folder: Path, figures) -> list[Path]:
    out = folder / "plots"
    out.mkdir(exist_ok=True)
    return [_save(fig, out / f"{name}.png") for name, fig in figures]


def plot_run(run_dir, manifest: dict | None = None) -> list[Path]:
    """Draw the figures of a RUN folder into ``run_dir/plots/`` and return their paths.

    risk.png (quasi-extinction risk with intervals; colonisation for a focus area that starts
    below the threshold), abundance.png (median, 5-95 % band and a few replicates),
    occupancy.png (final-year occupancy), colonisation.png (median colonisation year), both over
    the habitat of the last year (and of year 0, outlined, when it changes) with the action
    footprints and focus areas, and ledger.png (births, deaths, disturbance deaths, movement).
    ``manifest`` stands for run.json (a working folder, drawn before it is published).
    """
    run_dir = Path(run_dir)
    return _write(run_dir, _figures([read_run(run_dir, manifest)]))


def plot_compare(compare_dir, manifest: dict | None = None) -> list[Path]:
    """Draw the figures of a COMPARE folder into ``compare_dir/plots/`` and return their paths.

    The figures of :func:`plot_run` with every plan (one risk curve per plan on one axis, one
    panel per plan elsewhere, shared scales; the maps draw only the actions that tell the plans
    apart), and occupancy_difference.png: each plan's final-year occupancy probability minus the
    first plan's (occupancy_difference_<plan>.tif). ``manifest`` stands for compare.json.
    """
    compare_dir = Path(compare_dir)
    _, plans = read_plans(compare_dir, manifest)
    return _write(compare_dir, _figures(plans, compare_dir))

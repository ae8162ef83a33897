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
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import geopandas as gpd
import matplotlib.patheffects as pe
import numpy as np
import pyproj
import rasterio
import rasterio.plot
from matplotlib.artist import Artist
from matplotlib.colors import ListedColormap
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import MaxNLocator
from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

from ..errors import InputDataError, RunStateError
from ..io.results import LEDGER_FIELDS
from ..io.vectors import is_raster

OKABE_ITO = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#000000",
             "#F0E442")
"""Okabe and Ito (2008) colours, ordered so that the first ones contrast most on white."""

_DASHES = ("-", "--", "-.", ":")

ACTION_STYLE: dict[str, tuple[str, Any]] = {
    "reserve": ("#CC79A7", "-"), "corridor": ("#D55E00", "--"), "barrier": ("#000000", ":"),
    "restoration": ("#009E73", "-."), "habitat_loss": ("#E69F00", (0, (5, 1, 1, 1))),
    "focus": ("#FFFFFF", "-")}
"""Outline colour and line style per action kind (and the focus areas) on the maps."""

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


def read_run(folder) -> Plan:
    """Read a RUN folder (run.json and summary.json)."""
    folder = Path(folder)
    summary = _read_json(folder / "summary.json")
    manifest = _read_json(folder / "run.json")
    name = summary.get("plan", {}).get("name") or folder.name
    return Plan(name, folder, summary, manifest)


def read_plans(folder) -> tuple[str, list[Plan]]:
    """The plans of a result folder: ``("compare", plans)`` for a COMPARE folder (compare.json
    present), ``("run", [plan])`` for a RUN folder.

    Raises
    ------
    InputDataError
        The folder is neither, or a file it needs is missing or unreadable.
    """
    folder = Path(folder)
    if (folder / "compare.json").is_file():
        manifest = _read_json(folder / "compare.json")
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


def risk_figure(plans: list[Plan]) -> Figure:
    """Quasi-extinction risk curves: P(abundance fell below the threshold by year t), one line
    per plan with its confidence band, one panel for the whole landscape and one per focus area."""
    first = plans[0].summary
    panels = [("whole landscape", "risk")] + [(f"focus area {t}", t) for t in first.get(
        "focus_risk", {})]
    fig = Figure(figsize=(6.4 * min(len(panels), 2), 4.2 * math.ceil(len(panels) / 2)),
                 layout="constrained")
    axes = fig.subplots(math.ceil(len(panels) / 2), min(len(panels), 2), squeeze=False,
                        sharey=True).ravel()
    for ax, (title, key) in zip(axes, panels, strict=False):
        for i, plan in enumerate(plans):
            r = plan.summary["risk"] if key == "risk" else plan.summary["focus_risk"].get(key)
            if r is None:
                continue
            colour, dash = _colour(i)
            ax.fill_between(r["year"], r["ever_below_lo"], r["ever_below_hi"], color=colour,
                            alpha=0.18, linewidth=0)
            ax.plot(r["year"], r["ever_below"], color=colour, linestyle=dash, linewidth=2,
                    label=plan.name)
        ax.set_ylim(-0.02, 1.02)
        ax.set_xlim(left=0)
        ax.set_title(title)
        ax.set_xlabel("year")
        ax.grid(alpha=0.3)
    for ax in axes[len(panels):]:
        ax.set_visible(False)
    axes[0].set_ylabel("probability of having fallen below\n"
                       f"{first['quasi_extinction']:g} individuals by year t")
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


def nice_length(width_m: float) -> float:
    """Scale-bar length: the largest 1, 2 or 5 x 10^k metres not above a fifth of the width."""
    target = width_m / 5.0
    k = math.floor(math.log10(target))
    return max(m * 10.0 ** k for m in (1, 2, 5) if m * 10.0 ** k <= target)


def _length_label(metres: float) -> str:
    return f"{metres / 1000:g} km" if metres >= 1000 else f"{metres:g} m"


def add_scale_bar(ax, crs: pyproj.CRS, width_units: float) -> AnchoredSizeBar:
    """A scale bar in the lower right of a map axis in the projected ``crs``."""
    per_unit = crs.axis_info[0].unit_conversion_factor  # metres per CRS unit
    metres = nice_length(width_units * per_unit)
    bar = AnchoredSizeBar(ax.transData, metres / per_unit, _length_label(metres),
                          loc="lower right", pad=0.4, borderpad=0.6, sep=4, frameon=True,
                          size_vertical=width_units / 150, fontproperties={"size": 8})
    bar.patch.set_alpha(0.8)
    ax.add_artist(bar)
    return bar


def _axis_label(crs: pyproj.CRS, direction: str, fallback: str) -> str:
    for a in crs.axis_info:
        if a.direction.lower() == direction:
            unit = "m" if a.unit_name == "metre" else a.unit_name
            return f"{a.name} ({unit})"
    return fallback


def _crs_label(crs: pyproj.CRS) -> str:
    """The CRS name, with its EPSG code when it has one."""
    code = crs.to_epsg()
    return f"{crs.name} (EPSG:{code})" if code else crs.name


@dataclass(frozen=True, eq=False)
class MapLayer:
    """A raster band on the grid: values (nodata masked), extent, CRS and optionally the study
    area (True inside), for telling cells without a value inside it from cells outside."""

    values: np.ma.MaskedArray
    extent: tuple[float, float, float, float]
    crs: pyproj.CRS
    study: np.ndarray | None = None


def read_band(path: Path, band: int | None = None) -> MapLayer:
    """One band of a GeoTIFF (default the last), nodata masked."""
    if not path.is_file():
        raise InputDataError(f"{path}: missing; the result folder is incomplete.")
    with rasterio.open(path) as src:
        values = src.read(band or src.count, masked=True)
        return MapLayer(values, rasterio.plot.plotting_extent(src),
                        pyproj.CRS.from_wkt(src.crs.to_wkt()))


def outlines(plan: Plan, crs: pyproj.CRS) -> list[tuple[str, gpd.GeoDataFrame]]:
    """The plan's vector action areas and its focus areas, reprojected to ``crs``, as
    ``(kind, features)``; raster areas are skipped, a missing file is skipped with a warning."""
    areas = [(a["kind"], a["area"]) for a in plan.summary.get("plan", {}).get("actions", [])]
    if plan.summary.get("focus_areas"):
        areas.append(("focus", plan.summary["focus_areas"]["file"]))
    out = []
    for kind, area in areas:
        path = Path(area)
        if not path.exists():
            warnings.warn(f"{path}: the {kind} area of plan {plan.name} is missing; it is not "
                          "drawn on the maps.", stacklevel=2)
            continue
        if is_raster(path):
            continue
        gdf = gpd.read_file(path)
        if gdf.crs is not None:
            gdf = gdf.to_crs(crs)
        out.append((kind, gdf))
    return out


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
"""Colour of study-area cells without a value (e.g. never colonised)."""


def map_figure(panels: list[tuple[str, MapLayer, list]], *, cmap: str, vmin: float,
               vmax: float, label: str, title: str,
               no_value: str = "no value") -> Figure:
    """Maps on the grid, one panel per ``(title, layer, outlines)`` on one colour scale, with
    the outlines (:func:`outlines`) on top, a scale bar and axes in grid CRS coordinates.

    Study-area cells without a value (``layer.study`` given) are light grey, with the legend
    entry ``no_value``; cells outside the study area stay white.
    """
    cols = min(len(panels), 3)
    rows = math.ceil(len(panels) / cols)
    left, right, bottom, top = panels[0][1].extent
    aspect = (top - bottom) / (right - left)
    width = min(4.8, 5.0 / aspect)  # of one map, inches
    fig = Figure(figsize=(cols * (width + 0.9) + 1.2, rows * (width * aspect + 1.0) + 1.3),
                 layout="constrained")
    axes = fig.subplots(rows, cols, squeeze=False).ravel()
    crs = panels[0][1].crs
    kinds, grey, image = set(), False, None
    for ax, (name, layer, lines) in zip(axes, panels, strict=False):
        if layer.study is not None:
            empty = layer.study & np.ma.getmaskarray(layer.values)
            grey |= bool(empty.any())
            ax.imshow(np.ma.masked_array(np.ones(empty.shape), ~empty), extent=layer.extent,
                      cmap=ListedColormap([NOT_REACHED]), interpolation="nearest")
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
        ax.set_xlabel(_axis_label(crs, "east", "x"), fontsize=8)
        ax.set_ylabel(_axis_label(crs, "north", "y"), fontsize=8)
        add_scale_bar(ax, crs, layer.extent[1] - layer.extent[0])
    for ax in axes[len(panels):]:
        ax.set_visible(False)
    assert image is not None  # at least one panel
    fig.colorbar(image, ax=axes[:len(panels)].tolist(), label=label, shrink=0.85)
    handles: list[Artist] = [
        Line2D([], [], color=c, linestyle=dash, linewidth=1.6, path_effects=_stroke(k),
               label="focus area" if k == "focus" else k.replace("_", " "))
        for k, (c, dash) in ACTION_STYLE.items() if k in kinds]
    if grey:
        handles.append(Patch(color=NOT_REACHED, label=no_value))
    if handles:
        fig.legend(handles=handles, loc="outside lower center", ncols=min(len(handles), 6),
                   fontsize="small", facecolor="#BFBFBF", framealpha=1.0)
    fig.suptitle(f"{title}\ngrid CRS: {_crs_label(crs)}", fontsize=11)
    return fig


def _save(fig: Figure, path: Path) -> Path:
    fig.savefig(path, dpi=DPI)
    return path


def _maps(plans: list[Plan]) -> list[tuple[str, Figure]]:
    occ, col = [], []
    years = max(int(p.summary.get("years", 0)) for p in plans)
    for plan in plans:
        final = read_band(plan.folder / "occupancy.tif")
        study = ~np.ma.getmaskarray(final.values)
        lines = outlines(plan, final.crs)
        occ.append((plan.name, final, lines))
        first = read_band(plan.folder / "colonisation_year.tif", 1)
        col.append((plan.name, MapLayer(first.values, first.extent, first.crs, study), lines))
    return [
        ("occupancy", map_figure(
            occ, cmap="viridis", vmin=0.0, vmax=1.0,
            label="fraction of replicates occupied", title=f"Occupancy in year {years}")),
        ("colonisation", map_figure(
            col, cmap="cividis", vmin=0.0, vmax=max(years, 1),
            label="median first year occupied", title="Colonisation year",
            no_value="not occupied in half of the replicates")),
    ]


def _figures(plans: list[Plan]) -> list[tuple[str, Figure]]:
    return ([("risk", risk_figure(plans)), ("abundance", abundance_figure(plans))]
            + _maps(plans) + [("ledger", ledger_figure(plans))])


def _write(folder: Path, figures) -> list[Path]:
    out = folder / "plots"
    out.mkdir(exist_ok=True)
    return [_save(fig, out / f"{name}.png") for name, fig in figures]


def plot_run(run_dir) -> list[Path]:
    """Draw the figures of a RUN folder into ``run_dir/plots/`` and return their paths.

    risk.png (quasi-extinction risk with intervals), abundance.png (median, 5-95 % band and a
    few replicates), occupancy.png (final-year occupancy probability), colonisation.png (median
    colonisation year), both maps with the plan's vector action areas and focus areas, and
    ledger.png (births, deaths, disturbance deaths, net movement per year).
    """
    run_dir = Path(run_dir)
    return _write(run_dir, _figures([read_run(run_dir)]))


def plot_compare(compare_dir) -> list[Path]:
    """Draw the figures of a COMPARE folder into ``compare_dir/plots/`` and return their paths.

    The figures of :func:`plot_run` with every plan (one risk curve per plan on one axis, one
    panel per plan elsewhere, shared scales), and occupancy_difference.png: each plan's
    final-year occupancy probability minus the first plan's (occupancy_difference_<plan>.tif).
    """
    compare_dir = Path(compare_dir)
    _, plans = read_plans(compare_dir)
    figures = _figures(plans)
    diffs = []
    for plan in plans[1:]:
        path = compare_dir / f"occupancy_difference_{plan.name}.tif"
        layer = read_band(path, 1)
        diffs.append((f"{plan.name} minus {plans[0].name}", layer, outlines(plan, layer.crs)))
    if diffs:
        top = max(float(np.ma.max(np.ma.abs(d[1].values)) or 0.0) for d in diffs)
        top = max(top, 0.01)
        figures.append(("occupancy_difference", map_figure(
            diffs, cmap="PuOr", vmin=-top, vmax=top,
            label="difference in fraction of replicates occupied",
            title="Final-year occupancy: difference from the first plan")))
    return _write(compare_dir, figures)

"""Figures of a stage-structured life history: stage composition over time and, with two sexes,
the sex ratio (stages.png)."""

from __future__ import annotations

import csv
import math

import numpy as np
from matplotlib.figure import Figure

PREFIX = "abundance_"


def stage_means(plan) -> dict[str, np.ndarray] | None:
    """Mean over replicates per year of every ``abundance_<stage>`` column of a plan's
    timeseries.csv (and ``females``, ``males``); None without stage columns. ``plan``:
    :class:`gridpop.report.plots.Plan`."""
    with open(plan.folder / "timeseries.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    if not rows or not any(c.startswith(PREFIX) for c in rows[0]):
        return None
    cols = [c for c in rows[0] if c.startswith(PREFIX) or c in ("females", "males")]
    years = sorted({int(r["year"]) for r in rows})
    out = {"year": np.array(years, float)}
    for c in cols:
        total = np.zeros(len(years))
        count = np.zeros(len(years))
        for r in rows:
            t = int(r["year"])
            total[t] += float(r[c])
            count[t] += 1
        out[c] = total / np.maximum(count, 1)
    return out


def stage_figure(plans: list, means: list[dict[str, np.ndarray] | None]) -> Figure:
    """Stage composition (stacked mean abundance per stage) per plan, and below it the sex
    ratio (males per female, mean over replicates) for two-sex models."""
    sexes = any(m is not None and "females" in m for m in means)
    cols = min(len(plans), 3)
    rows = math.ceil(len(plans) / cols) * (2 if sexes else 1)
    fig = Figure(figsize=(5.0 * cols, 3.4 * rows + 0.6), layout="constrained")
    axes = fig.subplots(rows, cols, squeeze=False)
    for i, (plan, m) in enumerate(zip(plans, means, strict=True)):
        r, c = divmod(i, cols)
        ax = axes[r * (2 if sexes else 1), c]
        ax.set_title(plan.name)
        if m is None:
            ax.text(0.5, 0.5, "no stages", ha="center", va="center", transform=ax.transAxes)
            continue
        stages = [k for k in m if k.startswith(PREFIX)]
        ax.stackplot(m["year"], *[m[k] for k in stages],
                     labels=[k[len(PREFIX):] for k in stages],
                     colors=[f"C{j % 10}" for j in range(len(stages))])
        ax.set_xlabel("year")
        ax.set_ylabel("mean individuals per stage")
        ax.legend(fontsize="small", loc="upper left")
        ax.grid(alpha=0.3)
        if sexes and "females" in m:
            sx = axes[r * 2 + 1, c]
            ratio = np.divide(m["males"], m["females"], out=np.full(m["year"].size, np.nan),
                              where=m["females"] > 0)
            sx.plot(m["year"], ratio, color="C0", linewidth=1.8)
            sx.axhline(1.0, color="black", linewidth=0.8, linestyle=":")
            sx.set_xlabel("year")
            sx.set_ylabel("males per female")
            sx.set_ylim(bottom=0)
            sx.grid(alpha=0.3)
    for ax in axes.ravel():
        if not ax.has_data() and not ax.texts:
            ax.set_visible(False)
    fig.suptitle("Stage composition" + (" and sex ratio" if sexes else "") + " over time")
    return fig


def stage_figures(plans: list) -> list[tuple[str, Figure]]:
    """[("stages", figure)] when some plan has stages, else []."""
    means = [stage_means(p) for p in plans]
    if all(m is None for m in means):
        return []
    return [("stages", stage_figure(plans, means))]

"""Figures and the HTML report of a SENSITIVITY folder (``gridpop sensitivity``).

:func:`plot_sensitivity` draws into ``plots/``: ``tornado.png`` (the sensitivity of the risk and
of the expected minimum abundance to each parameter, per plan, with intervals),
``risk_by_parameter.png`` (each set's risk against each parameter, per plan, with a running
median as smoother) and ``ranking_matrix.png`` (for
each ordered pair of plans the fraction of sets in which the row plan is better).
:func:`write_sensitivity_report` writes the self-contained HTML report with the tables, the
figures and the caveats.
"""

from __future__ import annotations

import base64
import csv
import datetime
import html
import json
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from .._version import __version__
from ..errors import InputDataError
from .html import CAUTIONS, STYLE
from .plots import DPI, OKABE_ITO

INDEX_LABEL = {"prcc": "partial rank correlation (PRCC)", "ST": "total Sobol index",
               "S1": "first-order Sobol index", "mu_star": "Morris mu* (mean |effect|)"}
"""Which index each design's tornado shows, and its axis label."""

TORNADO_INDEX = {"latin-hypercube": "prcc", "sobol": "ST", "morris": "mu_star"}

CAPTIONS = {
    "tornado": "Sensitivity of the risk (probability of falling below the quasi-extinction "
               "threshold by the horizon, top) and of the expected minimum abundance (bottom) "
               "to each uncertain parameter, per plan, largest first; whiskers: the interval "
               "of the index. For Sobol designs the pale bar is the first-order index and the "
               "dark bar the total index.",
    "risk_by_parameter": "Risk of each parameter set against each parameter, one colour per "
                         "plan; the line is a running median over neighbouring sets.",
    "ranking_matrix": "Fraction of parameter sets in which the row plan is better than the "
                      "column plan (lower risk; the same risk: higher expected minimum "
                      "abundance; a tie on both counts half), with its interval.",
}


def read_csv(path: Path) -> list[dict[str, str]]:
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def _num(v: str) -> float:
    return float(v) if v not in ("", None) else float("nan")


def running_median(x: np.ndarray, y: np.ndarray, window: int) -> tuple[np.ndarray, np.ndarray]:
    """Median of ``y`` over each run of ``window`` consecutive points in the order of ``x``
    (a simple robust smoother; common practice)."""
    order = np.argsort(x, kind="stable")
    xs, ys = x[order], y[order]
    h = max(1, window // 2)
    med = np.array([np.median(ys[max(0, i - h): i + h + 1]) for i in range(len(ys))])
    return xs, med


TORNADO_OUTPUTS = {"risk": "risk", "expected_minimum": "expected minimum"}


def tornado_figure(sens: list[dict], manifest: dict) -> Figure:
    """One panel per output (rows: risk, expected minimum) and plan (columns)."""
    index = TORNADO_INDEX[manifest["design"]]
    plans = [p["name"] for p in manifest["plans"]]
    longest = max(len(p["name"]) for p in manifest["parameters"])  # the tick labels' width
    fig = Figure(figsize=((3.5 + 0.09 * longest) * len(plans),
                          2 * (0.45 * len(manifest["parameters"]) + 1.4)), layout="constrained")
    axes = fig.subplots(len(TORNADO_OUTPUTS), len(plans), squeeze=False, sharex="row")
    for row, (output, label) in zip(axes, TORNADO_OUTPUTS.items(), strict=True):
        for ax, plan in zip(row, plans, strict=True):
            _tornado(ax, [r for r in sens if r["plan"] == plan and r["output"] == output],
                     index)
            ax.set_title(f"{plan}: {label}")
            ax.set_xlabel(INDEX_LABEL[index])
    return fig


def _tornado(ax, rows: list[dict], index: str) -> None:
    main = {r["parameter"]: r for r in rows if r["index"] == index}
    first = {r["parameter"]: r for r in rows if r["index"] == "S1"}
    names = sorted(main, key=lambda n: abs(np.nan_to_num(_num(main[n]["estimate"]))))
    y = np.arange(len(names))
    est = np.array([_num(main[n]["estimate"]) for n in names])
    lo = np.array([_num(main[n]["lo"]) for n in names])
    hi = np.array([_num(main[n]["hi"]) for n in names])
    ax.barh(y, np.nan_to_num(est), color=OKABE_ITO[0], height=0.6)
    if first and index == "ST":
        ax.barh(y, [np.nan_to_num(_num(first[n]["estimate"])) for n in names],
                color="#9ecae1", height=0.35)
    ok = np.isfinite(lo) & np.isfinite(hi) & np.isfinite(est)
    ax.errorbar(est[ok], y[ok], xerr=[est[ok] - lo[ok], hi[ok] - est[ok]], fmt="none",
                ecolor="black", capsize=3, lw=1)
    ax.axvline(0, color="grey", lw=0.8)
    ax.set_yticks(y, names)
    if not np.isfinite(est).any():
        ax.text(0.5, 0.5, "does not vary over the sets", transform=ax.transAxes,
                ha="center", va="center")


def risk_by_parameter_figure(samples: list[dict], results: list[dict], manifest: dict
                             ) -> Figure:
    names = [p["name"] for p in manifest["parameters"]]
    plans = [p["name"] for p in manifest["plans"]]
    cols = min(3, len(names))
    nrows = -(-len(names) // cols)
    fig = Figure(figsize=(4.2 * cols, 3.2 * nrows), layout="constrained")
    axes = fig.subplots(nrows, cols, squeeze=False)
    x_of = {int(r["set"]): r for r in samples}
    window = max(5, len(samples) // 6)
    for j, name in enumerate(names):
        ax = axes[j // cols][j % cols]
        for i, plan in enumerate(plans):
            rows = [r for r in results if r["plan"] == plan]
            x = np.array([_num(x_of[int(r["set"])][name]) for r in rows])
            y = np.array([_num(r["risk"]) for r in rows])
            colour = OKABE_ITO[i % len(OKABE_ITO)]
            ax.scatter(x, y, s=10, color=colour, alpha=0.5)
            xs, med = running_median(x, y, window)
            ax.plot(xs, med, color=colour, lw=2, label=plan)
        ax.set_xlabel(name)
        ax.set_ylabel("risk")
        ax.set_ylim(-0.03, 1.03)
    for k in range(len(names), nrows * cols):
        axes[k // cols][k % cols].set_visible(False)
    axes[0][0].legend(fontsize="small")
    return fig


def ranking_figure(ranking: list[dict], manifest: dict) -> Figure:
    plans = [p["name"] for p in manifest["plans"]]
    n = len(plans)
    m = np.full((n, n), np.nan)
    text = {}
    for r in ranking:
        i, j = plans.index(r["first"]), plans.index(r["second"])
        m[i, j] = _num(r["first_better"])
        text[i, j] = (f"{m[i, j]:.2f}\n[{_num(r['first_better_lo']):.2f}, "
                      f"{_num(r['first_better_hi']):.2f}]")
    fig = Figure(figsize=(1.6 * n + 2.5, 1.3 * n + 1.5), layout="constrained")
    ax = fig.subplots()
    im = ax.imshow(m, cmap="PuOr_r", vmin=0, vmax=1)
    for (i, j), t in text.items():
        ax.text(j, i, t, ha="center", va="center", fontsize=8)
    ax.set_xticks(range(n), plans, rotation=30, ha="right")
    ax.set_yticks(range(n), plans)
    ax.set_xlabel("second plan")
    ax.set_ylabel("first plan (row) is better")
    fig.colorbar(im, ax=ax, label="fraction of parameter sets")
    return fig


def plot_sensitivity(folder, manifest: dict | None = None) -> list[Path]:
    """Draw the figures of a SENSITIVITY folder into ``folder/plots/`` (module docstring) and
    return their paths."""
    folder = Path(folder)
    if manifest is None:
        manifest = json.loads((folder / "sensitivity.json").read_text())
    out = folder / "plots"
    out.mkdir(exist_ok=True)
    figures = [("tornado", tornado_figure(read_csv(folder / "sensitivity.csv"), manifest)),
               ("risk_by_parameter", risk_by_parameter_figure(
                   read_csv(folder / "samples.csv"), read_csv(folder / "results.csv"),
                   manifest))]
    if len(manifest["plans"]) > 1:
        figures.append(("ranking_matrix", ranking_figure(read_csv(folder / "ranking.csv"),
                                                         manifest)))
    paths = []
    for name, fig in figures:
        fig.savefig(out / f"{name}.png", dpi=DPI)
        paths.append(out / f"{name}.png")
    return paths


def _e(value) -> str:
    return html.escape(str(value), quote=True)


def _table(head: list[str], rows: list[list[str]]) -> str:
    out = ["<table>", "<tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr>"]
    out += ["<tr>" + "".join(f"<td>{_e(c)}</td>" for c in r) + "</tr>" for r in rows]
    return "\n".join(out + ["</table>"])


def _fmt(v: str, digits: int = 3) -> str:
    x = _num(v)
    return "-" if not np.isfinite(x) else f"{x:.{digits}g}"


def ranking_sentences(ranking: list[dict], plans: list[str]) -> list[str]:
    """One sentence per pair of plans (rows of ranking.csv whose first plan comes first in
    ``plans``)."""
    out = []
    for r in ranking:
        if plans.index(r["first"]) > plans.index(r["second"]):
            continue
        p = _num(r["first_better"])
        text = (f"{r['first']} is better than {r['second']} in {100 * p:.0f} % of the "
                f"{r['sets']} parameter sets [{100 * _num(r['first_better_lo']):.0f}, "
                f"{100 * _num(r['first_better_hi']):.0f} %]; the same risk in "
                f"{r['same_risk']} sets, decided by the expected minimum")
        if r["flip_parameter"]:
            text += (f"; the best single predictor of the winner is {r['flip_parameter']}: "
                     f"at or below {_fmt(r['flip_threshold'], 4)} the first is better in "
                     f"{100 * _num(r['first_better_below']):.0f} % of sets, above it in "
                     f"{100 * _num(r['first_better_above']):.0f} % (the rule is right for "
                     f"{100 * _num(r['rule_accuracy']):.0f} % of sets)")
        else:
            text += "; no single-parameter threshold predicts a flip"
        out.append(text + ".")
    return out


def _figure_html(path: Path, caption: str) -> str:
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    return (f'<figure><img alt="{_e(path.stem)}" src="data:image/png;base64,{data}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


def sensitivity_html(folder) -> str:
    """The report of a SENSITIVITY folder as one HTML document."""
    folder = Path(folder)
    path = folder / "sensitivity.json"
    try:
        m = json.loads(path.read_text())
    except (OSError, ValueError) as exc:
        raise InputDataError(f"{path}: not readable ({exc}).") from None
    if not m.get("complete"):
        raise InputDataError(f"{folder}: not a complete sensitivity folder.")
    figures = plot_sensitivity(folder, m)
    sens = read_csv(folder / "sensitivity.csv")
    ranking = ranking_sentences(read_csv(folder / "ranking.csv"),
                                [p["name"] for p in m["plans"]])
    params = _table(["parameter", "distribution", "arguments"],
                    [[p["name"], p["distribution"], ", ".join(f"{a:g}" for a in p["args"])]
                     for p in m["parameters"]])
    sens_rows = [[r["plan"], r["parameter"], r["index"], _fmt(r["estimate"]),
                  f"[{_fmt(r['lo'])}, {_fmt(r['hi'])}]"] for r in sens if r["output"] == "risk"]
    plans = _table(["plan", "description"], [[p["name"], p["description"]] for p in m["plans"]])
    design = (f"{m['design']} design, {m['sets']} parameter sets (seed {m['design_seed']}); "
              f"each set of each plan: {m['replicates']} replicates over {m['years']} years, "
              f"seed {m['seed']}. Risk: probability of falling below {m['quasi_extinction']:g} "
              f"individuals by year {m['years']}. {m['pairing']} {m['ties']}")
    sections = [
        ("Plans", plans),
        ("Design and uncertain parameters", f"<p>{_e(design)}</p>\n{params}"),
        ("Is the ranking robust?", "<ul>" + "".join(f"<li>{_e(t)}</li>" for t in ranking)
         + "</ul>" if ranking else "<p>One plan: no ranking.</p>"),
        ("Which parameters drive the risk?",
         _table(["plan", "parameter", "index", "estimate", "interval"], sens_rows)
         + "<p>All outputs (expected minimum, final median, patches occupied, colonisation) "
           "are in sensitivity.csv.</p>"),
        ("Figures", "\n".join(_figure_html(p, CAPTIONS[p.stem]) for p in figures)),
        ("Caveats", "<ul>" + "".join(f"<li>{_e(c)}</li>" for c in m["caveats"]) + "</ul>"
         + "".join(f"<p>note: {_e(n)}</p>" for n in m["notes"])),
        ("Cautions", f'<p class="caution">{_e(CAUTIONS)}</p>'),
    ]
    title = f"gridpop sensitivity report: {folder.resolve().name}"
    made = datetime.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z")
    meta = (f"{len(m['plans'])} plans, {m['sets']} parameter sets; gridpop "
            f"{m['gridpop_version']} (report by gridpop {__version__}, {made})")
    body = "\n".join(f"<h2>{_e(h)}</h2>\n{c}" for h, c in sections)
    return (f'<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
            f"<title>{_e(title)}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n"
            f"<h1>{_e(title)}</h1>\n<p class=\"meta\">{_e(meta)}</p>\n{body}\n</body>\n</html>\n")


def write_sensitivity_report(folder, out=None) -> Path:
    """Write the report of a SENSITIVITY folder to ``out`` (default ``folder/report.html``)."""
    folder = Path(folder)
    out = Path(out) if out is not None else folder / "report.html"
    text = sensitivity_html(folder)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(text, encoding="utf-8")
    return out

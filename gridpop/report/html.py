"""A self-contained HTML report of a RUN or COMPARE folder, for a planner to share.

:func:`write_report` writes one HTML file: the question, the plans, the results table, the
figures (drawn by :mod:`gridpop.report.plots`, embedded as base64 PNG data), the parameters as
read, the
model's assumptions and limitations and the cautions. Styles are inline and nothing is fetched
from elsewhere, so the file reads the same offline and as an e-mail attachment. Every piece of
text taken from the results is HTML-escaped, and file paths are written relative to their
scenario file (no local absolute path).

The assumptions are generated from each plan's parameters as read (:func:`assumptions`), so they
describe the run as it was made: its dispersal method, growth model, stochasticity, disturbance
and actions.
"""

from __future__ import annotations

import base64
import csv
import datetime
import html
import json
from pathlib import Path

from .._version import __version__
from ..config import ARRAY_SECTIONS, SECTIONS
from ..errors import InputDataError
from ..io.results import whole_file
from .assumptions import CAPACITY, CONNECTION, WALK_CAPACITY, assumptions, fmt
from .plots import Plan, plot_compare, plot_run, read_plans, relative

CAUTIONS = (
    "These results support decisions; they do not replace field data, the advice of the "
    "responsible wildlife agency, local regulations or licensed professional judgement. They "
    "are projections of a simple model under the assumptions and parameters above, and a "
    "simulation is only as good as its inputs: habitat maps, capacities, growth rates and "
    "dispersal distances are rarely known well. Compare plans under several plausible parameter "
    "sets, and give more weight to differences between plans (which share their random numbers) "
    "than to absolute risks."
)
"""The report's cautions, shown once. They say what the cautions of summary.json say (the
intervals' reach is in the assumptions), so those are not repeated."""


CAPTIONS = {
    "risk": "Probability that total abundance (and abundance in each focus area) has fallen "
            "below the quasi-extinction threshold by year t, per plan; the band is the "
            "confidence interval. A focus area below the threshold from year 0 shows instead "
            "the probability that it has been colonised (held at least the occupancy threshold) "
            "by year t, as its title says.",
    "abundance": "Total abundance: median over replicates (thick line), 5-95 % of replicates "
                 "(band) and a few single replicates (thin lines); dotted: the quasi-extinction "
                 "threshold.",
    "occupancy": "Fraction of replicates in which each cell is occupied in the final year. "
                 "Cells occupied in no replicate show the habitat of the last year (light "
                 "green) apart from the matrix (light grey); outlines: the cells of the plan's "
                 "actions and the focus areas. Actions the same in every plan or covering the "
                 "whole study area are named above the legend instead of drawn.",
    "colonisation": "Median year in which each cell is first occupied; cells not occupied in "
                    "at least half of the replicates show the habitat of the last year (light "
                    "green) apart from the matrix (light grey).",
    "ledger": "Yearly ledger, mean over replicates: births, deaths and disturbance deaths, and "
              "net movement (immigrants minus emigrants; below 0 when dispersers are lost "
              "outside habitat or off the grid).",
    "occupancy_difference": "Final-year occupancy probability of each plan minus that of the "
                            "first plan: purple where the plan does better, orange where worse; "
                            "cells without a difference show the plan's habitat of the last "
                            "year (light green) apart from the matrix (light grey).",
}

LABELS = {
    "description": "description",
    "risk": "risk of falling below the threshold by the horizon",
    "risk_difference": "risk difference from the first plan",
    "risk_mcnemar_p": "McNemar p-value of the risk difference",
    "expected_minimum": "expected minimum abundance",
    "expected_minimum_difference": "expected minimum difference from the first plan",
    "final_median": "median final abundance",
    "final_difference": "final abundance difference from the first plan",
    "patches_occupied": "patches occupied at the horizon (mean)",
    "metapopulation_capacity": "metapopulation capacity (hectares squared)",
    "rank": "rank (a shared rank: not distinguishable)",
    "distinguishable": "distinguishable from the first plan",
}
"""Row labels of the comparison table by comparison.csv column."""

STYLE = """
body { font-family: Helvetica, Arial, sans-serif; color: #1a1a1a; max-width: 1100px;
       margin: 2em auto; padding: 0 1em; line-height: 1.45; }
h1 { font-size: 1.6em; border-bottom: 3px solid #0072B2; padding-bottom: .2em; }
h2 { font-size: 1.25em; margin-top: 2em; color: #0b3c5d; }
table { border-collapse: collapse; margin: .8em 0; font-size: .92em; }
th, td { border: 1px solid #c8c8c8; padding: .3em .6em; text-align: left;
         vertical-align: top; }
th { background: #eef3f7; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
tr.differs td { background: #fff4d6; }
.col { color: #666; font-size: .85em; font-family: monospace; }
figure { margin: 1.5em 0; }
figure img { max-width: 100%; border: 1px solid #ddd; }
figcaption { font-size: .9em; color: #444; }
.caution { border-left: 5px solid #D55E00; background: #fdf1ea; padding: .6em 1em; }
.meta { color: #555; font-size: .9em; }
dt { font-weight: bold; margin-top: .6em; }
dd { margin-left: 1.2em; }
"""


def _e(value) -> str:
    return html.escape(str(value), quote=True)


def _csv_value(text: str):
    """A comparison.csv cell back to a number or boolean where it is one."""
    if text in ("True", "False"):
        return text == "True"
    try:
        return int(text)
    except ValueError:
        pass
    try:
        return float(text)
    except ValueError:
        return text


def _interval(value, lo, hi) -> str:
    if lo is None or hi is None or lo == "" or hi == "":
        return fmt(value)
    return f"{fmt(value)} ({fmt(lo)} \u2013 {fmt(hi)})"


def _table(head: list[str], rows: list[tuple[str, list[str]]], *, numbers: bool = True,
           classes: list[str] | None = None) -> str:
    """An HTML table: ``head`` cells, then rows of (label HTML, value texts); values escaped
    and, with ``numbers``, right-aligned."""
    td = '<td class="num">' if numbers else "<td>"
    out = ["<table>", "<tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr>"]
    for i, (label, values) in enumerate(rows):
        cls = f' class="{classes[i]}"' if classes and classes[i] else ""
        cells = "".join(f"{td}{_e(v)}</td>" for v in values)
        out.append(f"<tr{cls}><th>{label}</th>{cells}</tr>")
    out.append("</table>")
    return "\n".join(out)


def _run_results(plans: list[Plan]) -> str:
    """The summary metrics of each plan (one column per plan)."""
    s0 = plans[0].summary
    horizon = s0.get("years")
    rows: list[tuple[str, list[str]]] = []

    def add(label, values):
        rows.append((_e(label), values))

    def risk(r, key):
        return _interval(r[key][-1], r[f"{key}_lo"][-1], r[f"{key}_hi"][-1])

    add("quasi-extinction threshold (individuals)",
        [fmt(p.summary.get("quasi_extinction")) for p in plans])
    add(f"risk of having fallen below it by year {horizon}",
        [risk(p.summary["risk"], "ever_below") for p in plans])
    add(f"probability of being below it in year {horizon}",
        [risk(p.summary["risk"], "below_now") for p in plans])
    add("expected minimum abundance",
        [_interval(*(p.summary["expected_minimum"][k] for k in ("estimate", "lo", "hi")))
         for p in plans])
    add("final abundance: mean", [fmt(p.summary["final_abundance"]["mean"]) for p in plans])
    add("final abundance: median (25 \u2013 75 %)",
        [_interval(*(p.summary["final_abundance"][k] for k in ("p50", "p25", "p75")))
         for p in plans])
    add("final abundance: 5 % and 95 % points",
        [f"{fmt(p.summary['final_abundance']['p5'])}, {fmt(p.summary['final_abundance']['p95'])}"
         for p in plans])
    add(f"patches occupied in year {horizon} (mean)",
        [fmt(p.summary["occupied_patches"]["mean"][-1]) for p in plans])
    for name in s0.get("focus_risk", {}):
        add(f"focus area {name}: risk by year {horizon}",
            [risk(p.summary["focus_risk"][name], "ever_below")
             if name in p.summary.get("focus_risk", {}) else fmt(None) for p in plans])
    for name in s0.get("colonisation", {}):
        add(f"focus area {name}: probability colonised by year {horizon}",
            [fmt(p.summary["colonisation"][name]["probability"][-1])
             if name in p.summary.get("colonisation", {}) else fmt(None) for p in plans])
    add("metapopulation capacity (hectares squared)",
        [fmt((p.summary.get("metapopulation_capacity") or {}).get("lambda_M")) for p in plans])
    conf = s0.get("confidence", 0.95)
    note = (f"<p>Intervals in brackets: {_e(f'{conf:.0%}')} confidence. Replicates: "
            f"{_e(s0.get('replicates'))}; horizon: year {_e(horizon)}.</p>")
    notes = "".join(f"<p>Note: {_e(n)}</p>" for n in dict.fromkeys(
        n for p in plans for n in p.summary.get("notes", [])))
    return _table(["", *[p.name for p in plans]], rows) + note + notes + _capacity_note(plans)


def _capacity_note(plans: list[Plan]) -> str:
    """What the metapopulation capacity measures, for the dispersal methods of the plans that
    have one."""
    methods = list(dict.fromkeys(
        p.summary["parameters"]["dispersal"]["method"] for p in plans
        if p.summary.get("metapopulation_capacity")))
    if not methods:
        return ""
    connection = (CONNECTION[methods[0]] if len(methods) == 1 else
                  "; ".join(f"with the {m} method, {CONNECTION[m]}" for m in methods))
    text = CAPACITY.format(connection=connection,
                           walk=WALK_CAPACITY if "walk" in methods else "")
    return f"<p>{_e(text)}</p>"


def _comparison_results(folder: Path, plans: list[Plan]) -> str:
    """comparison.csv turned on its side (a row per measure, a column per plan), intervals
    joined to their estimates, then the pairing and ranking notes of comparison.json."""
    path = folder / "comparison.csv"
    try:
        with open(path, newline="") as fh:
            records = list(csv.DictReader(fh))
    except FileNotFoundError:
        raise InputDataError(f"{path}: missing; the comparison folder is incomplete.") from None
    if not records:
        raise InputDataError(f"{path}: has no rows.")
    columns = [c for c in records[0] if c != "plan"]
    rows = []
    for c in columns:
        if c.endswith(("_lo", "_hi")) and c[:-3] in columns:
            continue
        values = []
        for r in records:
            v = _csv_value(r[c])
            if f"{c}_lo" in r and f"{c}_hi" in r:
                values.append(_interval(v, _csv_value(r[f"{c}_lo"]), _csv_value(r[f"{c}_hi"])))
            else:
                values.append(fmt(v))
        label = LABELS.get(c) or (f"probability focus area {c[len('colonisation_'):]} colonised by "
                                  "the horizon" if c.startswith("colonisation_") else c)
        rows.append((f'{_e(label)} <span class="col">{_e(c)}</span>', values))
    out = [_table(["", *[r.get("plan", "") for r in records]], rows)]
    info_path = folder / "comparison.json"
    if info_path.is_file():
        info = json.loads(info_path.read_text())
        notes = [info.get("paired"), info.get("ranking"), *info.get("notes", [])]
        out += [f"<p>{_e(n)}</p>" for n in notes if n]
    out.append("<p>Intervals in brackets; differences are paired, replicate by replicate.</p>")
    out.append(_capacity_note(plans))
    return "\n".join(out)


def _flatten(value, prefix: str = ""):
    """``(dotted key, value)`` pairs of nested parameters. A list of tables (and any list at
    the top level, the ``[[...]]`` sections) gives its count as ``name: tables``, then each
    table as ``name[i]``."""
    if isinstance(value, dict) and value:
        for k, v in value.items():
            yield from _flatten(v, f"{prefix}.{k}" if prefix else str(k))
    elif (isinstance(value, list) and all(isinstance(v, dict) for v in value)
          and (value or "." not in prefix)):
        yield f"{prefix}: tables", len(value)
        for i, v in enumerate(value, start=1):
            yield from _flatten(v, f"{prefix}[{i}]")
    else:
        yield prefix, value


PATH_TYPES = ("path", "pathlist")


def _relative_paths(table: dict, keys, base: Path) -> None:
    """Rewrite the path keys of one parameter table relative to ``base``, in place."""
    for k in keys:
        v = table.get(k.name)
        if k.type in PATH_TYPES and v:
            table[k.name] = ([relative(x, base) for x in v] if isinstance(v, list)
                             else relative(v, base))


def parameters_as_written(plan: Plan) -> dict:
    """A plan's parameters as read (summary.json) with every file path relative to its scenario
    file, as a scenario would write it, so that the report carries no local absolute path."""
    params = json.loads(json.dumps(plan.summary.get("parameters", {})))
    base = Path(plan.manifest.get("scenario", "")).parent
    for name, (_, keys) in SECTIONS.items():
        _relative_paths(params.get(name, {}), keys, base)
    for name, (_, kinds) in ARRAY_SECTIONS.items():
        for table in params.get(name, []):
            _relative_paths(table, kinds[table["kind"]][1], base)
    return params


def _parameters(plans: list[Plan]) -> str:
    """The parameters as read, one column per plan; rows where plans differ are highlighted."""
    tables = [dict(_flatten(parameters_as_written(p))) for p in plans]
    keys = list(dict.fromkeys(k for t in tables for k in t))
    rows, classes = [], []
    for k in keys:
        values = [fmt(t[k]) if k in t else "\u2014" for t in tables]
        rows.append((_e(k), values))
        classes.append("differs" if len(plans) > 1 and len(set(values)) > 1 else "")
    note = ("<p>Highlighted rows differ between plans.</p>" if len(plans) > 1 else "")
    return note + _table(["section.key", *[p.name for p in plans]], rows, numbers=False,
                         classes=classes)


def _plans(plans: list[Plan]) -> str:
    rows = []
    for p in plans:
        plan = p.summary.get("plan", {})
        base = Path(p.manifest.get("scenario", "")).parent
        actions = [f"{a['kind']} ({relative(a['area'], base)})" for a in plan.get("actions", [])]
        rows.append((_e(p.name), [plan.get("description") or "\u2014",
                                  Path(p.manifest.get("scenario", "")).name or "\u2014",
                                  "; ".join(actions) or "none (base landscape)"]))
    return _table(["plan", "description", "scenario file", "actions (area file)"], rows,
                  numbers=False)


def _question(plans: list[Plan]) -> str:
    said = [(p.name, p.summary.get("plan", {}).get("description", "")) for p in plans]
    said = [(n, d) for n, d in said if d]
    if not said:
        return ("<p>No question was stated: give each scenario a [plan] description to have "
                "it here.</p>")
    if len(plans) == 1:
        return f"<p>{_e(said[0][1])}</p>"
    items = "".join(f"<li><b>{_e(n)}</b>: {_e(d)}</li>" for n, d in said)
    return f"<p>The plans compared, as their scenarios describe them:</p><ul>{items}</ul>"


def _figures(paths: list[Path]) -> str:
    out = []
    for path in paths:
        data = base64.b64encode(path.read_bytes()).decode("ascii")
        caption = CAPTIONS.get(path.stem, path.stem)
        out.append(f'<figure><img src="data:image/png;base64,{data}" alt="{_e(path.stem)}">'
                   f"<figcaption>{_e(caption)}</figcaption></figure>")
    return "\n".join(out)


def _assumptions(plans: list[Plan]) -> str:
    """The assumptions of each plan (:func:`assumptions`): once where the plans share them, per
    plan (plans with the same text together) where they differ."""
    texts = [assumptions(parameters_as_written(p)) for p in plans]
    out = ["<p>Where the plans differ, each plan's text is given.</p>"] if len(plans) > 1 else []
    out.append("<dl>")
    for i, (title, _) in enumerate(texts[0]):
        by_text: dict[str, list[str]] = {}
        for plan, t in zip(plans, texts, strict=True):
            by_text.setdefault(t[i][1], []).append(plan.name)
        if len(by_text) == 1:
            body = _e(texts[0][i][1])
        else:
            body = "".join(f"<p><b>{_e(', '.join(names))}</b>: {_e(text)}</p>"
                           for text, names in by_text.items())
        out.append(f"<dt>{_e(title)}</dt><dd>{body}</dd>")
    out.append("</dl>")
    return "\n".join(out)


def report_html(folder) -> str:
    """The report of a RUN or COMPARE folder as one HTML document (figures drawn into
    ``folder/plots/`` on the way)."""
    folder = Path(folder)
    kind, plans = read_plans(folder)
    figures = plot_compare(folder) if kind == "compare" else plot_run(folder)
    results = (_comparison_results(folder, plans) if kind == "compare"
               else _run_results(plans))
    m = plans[0].manifest
    title = f"gridpop report: {folder.resolve().name}"
    made = datetime.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z")
    what = (f"comparison of {len(plans)} plans" if kind == "compare" else "one plan")
    meta = (f"{what}; {m.get('years')} years, {m.get('replicates')} replicates, seed "
            f"{m.get('seed')}, {'stochastic' if m.get('stochastic', True) else 'deterministic'}"
            f"; gridpop {m.get('gridpop_version', '?')} (report by gridpop {__version__}, "
            f"{made})")
    sections = [
        ("The question", _question(plans)),
        ("Plans", _plans(plans)),
        ("Results", results),
        ("Figures", _figures(figures)),
        ("Parameters as read", _parameters(plans)),
        ("Model assumptions and limitations", _assumptions(plans)),
        ("Cautions", f'<p class="caution">{_e(CAUTIONS)}</p>'),
    ]
    body = "\n".join(f"<h2>{_e(h)}</h2>\n{content}" for h, content in sections)
    return (f'<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
            f"<title>{_e(title)}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n"
            f"<h1>{_e(title)}</h1>\n<p class=\"meta\">{_e(meta)}</p>\n{body}\n</body>\n</html>\n")


def write_report(folder, out=None) -> Path:
    """Write the report of a RUN or COMPARE folder to ``out`` (default ``folder/report.html``)
    and return its path.

    Raises
    ------
    InputDataError
        The folder is not a complete gridpop result folder.
    """
    folder = Path(folder)
    out = Path(out) if out is not None else folder / "report.html"
    text = report_html(folder)
    out.parent.mkdir(parents=True, exist_ok=True)
    with whole_file(out) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return out

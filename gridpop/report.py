"""A self-contained HTML report of a RUN or COMPARE folder, for a planner to share.

:func:`write_report` writes one HTML file: the question, the plans, the results table, the
figures (drawn by :mod:`gridpop.plots`, embedded as base64 PNG data), the parameters as read, the
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

from . import __version__
from .errors import InputDataError
from .plots import Plan, plot_compare, plot_run, read_plans, relative
from .scenario import ARRAY_SECTIONS, SECTIONS

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

CAPACITY = (
    "Metapopulation capacity (Hanski and Ovaskainen 2000) measures how well the patch network "
    "as a whole can hold a metapopulation: the leading eigenvalue of the matrix with entries "
    "A_i A_j f_ij over pairs of different habitat patches (A the patch area in hectares, f_ij "
    "the connection from patch i to patch j: {connection}), so it is in hectares squared and "
    "grows with more, larger and better connected patches. It compares plans for one species on "
    "one landscape, not across species or study areas. It can fall when a corridor is added: "
    "corridor cells that become habitat can join patches into one, and connections inside a "
    "patch do not count{walk}."
)
"""The explanation of the metapopulation capacity; {connection} and {walk} by dispersal method."""

CONNECTION = {
    "kernel": "exp(-d_ij / mean dispersal distance) between patch centroids",
    "walk": "the probability that a disperser leaving patch i settles in patch j within a year, "
            "by the walk on the landscape of year 0",
}

WALK_CAPACITY = ("; with the walk, dispersers that a corridor leads away, or that settle in "
                 "corridor cells joined to their own patch, no longer reach the other patches")

RESPONSE = {
    "linear": "in proportion to suitability",
    "threshold": "in proportion to suitability where suitability is at least {threshold:g}, "
                 "0 below",
    "power": "as suitability to the power {exponent:g}",
}

GROWTH_MODEL = {
    "exponential": "Exponential growth: the multiplier is e^r wherever capacity is above 0, "
                   "with no density dependence",
    "beverton-holt": "Beverton-Holt density dependence: the multiplier e^r / (1 + (e^r - 1) "
                     "N / K) falls with crowding to 1 at capacity K",
    "ricker": "Ricker density dependence: the multiplier exp(r (1 - N / K)) falls with crowding "
              "to 1 at capacity K and below 1 above it",
    "theta-logistic": "Theta-logistic density dependence (theta = {theta:g}): the multiplier "
                      "exp(r (1 - (N / K)^theta)) is 1 at capacity K",
    "ceiling": "Ceiling density dependence: the multiplier e^r, capped so that a cell does not "
               "exceed its capacity K",
}

KERNEL = {"gaussian": "a Gaussian kernel", "exponential": "a negative-exponential kernel",
          "2dt": "a 2Dt kernel (shape p = {tail:g})"}

FIRE_SIZE = {"fraction": "a fraction {size_fraction:g} of the ignition patch",
             "exponential": "exponential with mean {mean_size_ha:g} ha",
             "power_law": "a power law with exponent {size_exponent:g} from {min_size_ha:g} to "
                          "{max_size_ha:g} ha"}

RECOVERY = {"linear": "linearly over {recovery_years:g} years",
            "exponential": "exponentially with a time constant of {recovery_years:g} years"}


def _ramp(c: dict) -> str:
    at = f"from year {c['start_year']}"
    return f"{at}, at once" if c["ramp_years"] <= 1 else f"{at} over {c['ramp_years']} years"


def _action(c: dict) -> str:
    """One action of the parameters as read, in a phrase."""
    area = c["area"] + (f", buffered by {c['buffer_m']:g} m" if c.get("buffer_m") else "")
    kind = c["kind"]
    if kind == "reserve":
        extra = [f"fire ignition x{c['ignition_multiplier']:g}"] * (c["ignition_multiplier"] != 1)
        extra += [f"fire spread x{c['spread_multiplier']:g}"] * (c["spread_multiplier"] != 1)
        what = ", ".join([f"capacity x{c['capacity_multiplier']:g}", "exempt from habitat loss",
                          *extra])
    elif kind == "corridor":
        suit = ("suitability raised to at least {:g}".format(c["target_suitability"])
                if c["target_suitability"] is not None else "suitability unchanged")
        what = f"{suit}, resistance x{c['resistance_multiplier']:g}"
    elif kind == "barrier":
        what = f"crossing mortality {c['crossing_mortality']:g}"
    elif kind == "restoration":
        what = f"suitability rises to {c['target_suitability']:g} {_ramp(c)}"
    else:
        what = f"suitability falls to {c['target_suitability']:g} outside reserves {_ramp(c)}"
    return f"{kind.replace('_', ' ')} ({area}): {what}"


def _kernel_dispersal(d: dict, actions: list[dict]) -> str:
    out = [f"jump to a cell drawn from {KERNEL[d['kernel']].format(**d)} with a mean distance "
           f"of {d['mean_distance_m']:g} m"
           + (f", truncated at {d['max_distance_m']:g} m" if d["max_distance_m"] else "")
           + ", integrated over each destination cell. The kernel ignores the landscape between "
           "the two cells: resistance and the habitat in between do not matter. A disperser "
           "that lands where capacity is 0 (the matrix) is lost; "
           + ("one that lands off the grid is lost." if d["edge"] == "absorbing"
              else "one that would land off the grid is mirrored back onto it.")]
    barriers = [c["crossing_mortality"] for c in actions if c["kind"] == "barrier"]
    if barriers and max(barriers) > 0:
        out.append("Barriers split the grid into regions: a disperser that lands in another "
                   "region than its own, or on a barrier cell, dies with the highest crossing "
                   f"mortality of any barrier cell ({max(barriers):g} unless barriers overlap), "
                   "however many barriers lie between.")
    elif barriers:
        out.append("The barriers have crossing mortality 0 and no effect.")
    if any(c["kind"] == "corridor" for c in actions):
        out.append("Corridors act only through the suitability they set; dispersers do not "
                   "follow them, and their resistance multiplier has no effect with the kernel "
                   "method.")
    return " ".join(out)


def _walk_dispersal(d: dict, actions: list[dict]) -> str:
    surface = (f"the resistance raster {d['resistance']}" if d["resistance"] else
               f"a resistance derived from suitability s as R = 1 + ({d['resistance_max']:g} - 1)"
               f" (1 - s)^{d['resistance_shape']:g}")
    kappa = d["heading_bias"]
    out = [f"walk cell to cell over {surface}: each step goes to one of the 8 neighbouring cells "
           "with probability proportional to 1 / (R x step length)"
           + (f", times exp({kappa:g} cos(turn)), so that a walker tends to keep its heading"
              if kappa > 0 else ", with no memory of its heading")
           + f". A walker takes at most {d['walk_length']} steps a year and dies if still "
           "moving after them; "
           + (f"entering a cell of resistance R kills it with probability 1 - exp(-"
              f"{d['death_per_resistance']:g} R x step length in cells)"
              if d["death_per_resistance"] > 0 else "walking itself does not kill")
           + "; a walker with no neighbour it may enter is lost. After each step it settles "
           f"with probability (K / K at suitability 1)^{d['settle_exponent']:g}, so never where "
           "capacity is 0. Walkers never leave the grid."]
    corridors = [c["resistance_multiplier"] for c in actions if c["kind"] == "corridor"]
    if corridors:
        out.append(f"Corridors multiply resistance by {fmt(corridors)} along them, so walkers "
                   "tend to follow them." if any(m < 1 for m in corridors) else
                   "Corridors leave resistance as it is (multiplier 1): they act through the "
                   "suitability they set.")
    for m in sorted({c["crossing_mortality"] for c in actions if c["kind"] == "barrier"}):
        out.append("Barrier cells with crossing mortality 1 cannot be entered." if m == 1 else
                   f"A walker entering a cell of a barrier with crossing mortality {m:g} dies "
                   "with that probability.")
    return " ".join(out)


def _disturbance(tables: list[dict], actions: list[dict]) -> str:
    if not tables:
        return "None: no fires or floods are simulated."
    out = []
    for t in tables:
        effect = (f"kills {t['mortality']:g} of the individuals of each cell hit and "
                  + (f"removes {t['capacity_loss']:g} of its capacity, which recovers "
                     f"{RECOVERY[t['recovery']].format(**t)}." if t["capacity_loss"] > 0
                     else "leaves its capacity."))
        if t["kind"] == "fire":
            out.append(
                f"Fire (return interval {t['return_interval_years']:g} years at hazard 1"
                + (f", hazard raster {t['hazard']}" if t["hazard"] else "")
                + f"; sizes {FIRE_SIZE[t['size_distribution']].format(**t)}): ignitions in each "
                "patch are Poisson events scaled so that about the patch's area burns once per "
                "return interval, and a fire spreads from cell to cell over "
                + ("cells with hazard above 0 (so it can cross the matrix where fuel connects)"
                   if t["hazard"] else "habitat cells") + f". It {effect}")
        else:
            where = (f"the nested zones {fmt(t['zone'])}" if t["zone"] else
                     f"the cells of {t['terrain']} below stages {fmt(t['stage_m'])} m")
            out.append(f"Flood (return periods {fmt(t['return_period_years'])} years): one draw "
                       f"a year for the whole landscape decides whether and how far {where} "
                       f"flood. It {effect}")
    kinds = {t["kind"] for t in tables}
    out.append("Events come from the seed, the replicate and the year, not from the population, "
               "and act before growth, whatever the density.")
    if "fire" in kinds:
        out.append("Replicate i has the same fires in every plan with the same habitat patches "
                   "and fire multipliers"
                   + (" and the same floods in every plan." if "flood" in kinds else "."))
    else:
        out.append("Replicate i has the same floods in every plan.")
    return " ".join(out)


def assumptions(params: dict) -> list[tuple[str, str]]:
    """The model's assumptions and limitations for one run, as ``(title, text)``, from its
    parameters as read (summary.json, paths relative to the scenario): every sentence is true of
    that run (its dispersal method, growth model, stochasticity, disturbance and actions)."""
    hab, g, d = params["habitat"], params["growth"], params["dispersal"]
    tables, actions = params.get("disturbance", []), params.get("action", [])
    ini = params["initial"]
    moves = d["fraction"] > 0
    env = g["env_sd"] > 0
    if ini["raster"]:
        start = f"Year 0 is the raster {ini['raster']}"
    elif ini["points"]:
        start = f"Year 0 is the release points of {ini['points']}"
    else:
        f = 1.0 if ini["fraction_of_capacity"] is None else ini["fraction_of_capacity"]
        start = f"Year 0 holds {f:g} of each cell's capacity"
    population = (
        "One number of individuals per grid cell: no age, stage or sex structure and no "
        "genetics; all individuals are alike. A cell's carrying capacity K is "
        f"{hab['capacity_per_ha']:g} individuals/ha at suitability 1, "
        f"{RESPONSE[hab['response']].format(**hab)}; cells with capacity 0 are matrix, where "
        f"nobody breeds or settles. Density dependence acts within each cell only. {start}"
        + (", the same in every plan (the base landscape's)." if actions else "."))
    steps = (["environmental variation"] * env
             + ["the year's habitat changes"] * any(c["kind"] in ("restoration", "habitat_loss")
                                                    for c in actions)
             + [" and ".join(sorted({f"{t['kind']}s" for t in tables}))] * bool(tables)
             + ["survival and births"] + ["dispersal"] * moves + ["census"])
    cycle = (f"From one census to the next: {'; '.join(steps)}. Abundance is counted once a "
             f"year, after {'dispersal' if moves else 'growth'}; year 0 is the initial "
             "population.")
    random_parts = [n for n, on in (("the environmental variation", env),
                                    ("the disturbance events", bool(tables))) if on]
    growth = (
        f"{GROWTH_MODEL[g['model']].format(**g)}; r = {g['rate']:g} a year. Adults survive "
        f"with probability min({g['survival']:g}, multiplier) and births make up the rest. "
        + (f"A mate-finding Allee effect scales births by N / (N + A), A = "
           f"{g['allee_density']:g} individuals/ha times the cell area. " if g["allee_density"] > 0
           else "No Allee effect. ")
        + ("Stochastic: counts are whole individuals, survivors binomial and births Poisson "
           "(demographic stochasticity), and dispersers and disturbance deaths are drawn "
           "individual by individual." if g["stochastic"] else
           "Deterministic: expected numbers (fractions of individuals) are carried from year to "
           "year, with no demographic stochasticity; "
           + (f"only {' and '.join(random_parts)} are random." if random_parts else
              "nothing is random, so every replicate is the same.")))
    if env:
        environment = (
            f"Each year a cell's log multiplier deviates by a Gaussian amount with standard "
            f"deviation {g['env_sd']:g}, "
            + (f"correlated in space as exp(-(d / {g['env_correlation_m']:g} m)^2)"
               if g["env_correlation_m"] > 0 else "independent between cells")
            + (f" and from year to year with coefficient {g['env_autocorrelation']:g}."
               if g["env_autocorrelation"] != 0 else ", independent from year to year."))
    else:
        environment = "None: the multiplier depends on density only."
    if not moves:
        dispersal = "None: every individual stays in its cell."
    else:
        leaving = (f"Each year {d['fraction']:g} of a cell's individuals"
                   + (f" (times min(1, N / K)^{d['density_dependence']:g}, so more when crowded)"
                      if d["density_dependence"] > 0 else "") + " leave it and ")
        dispersal = leaving + (_walk_dispersal(d, actions) if d["method"] == "walk"
                               else _kernel_dispersal(d, actions))
    if actions:
        managed = ("In this order: " + "; ".join(_action(c) for c in actions) + ". Suitability "
                   "otherwise stays as mapped, apart from the disturbances' capacity losses.")
    else:
        managed = ("None: the base landscape as mapped; suitability does not change, apart from "
                   "the disturbances' capacity losses.")
    if g["stochastic"] or random_parts:
        randomness = (
            "Every random number is a hash of the seed, the replicate, the year, a stream and "
            "the cell (a counter-based generator), so results are bit-identical whatever the "
            "number of threads or machines, and replicate i of every plan run with the same "
            "seed uses the same random numbers (common random numbers): plans are compared "
            "replicate by replicate.")
    else:
        randomness = "None is used: every replicate of every plan is the same computation."
    behaviour = ("dispersal" if not moves else
                 "perception beyond the neighbouring cells and memory while walking"
                 if d["method"] == "walk" else
                 "behaviour while dispersing (searching for habitat, following corridors, "
                 "avoiding barriers)")
    return [
        ("Population", population),
        ("Yearly cycle and census", cycle),
        ("Growth", growth),
        ("Environmental variation", environment),
        ("Dispersal", dispersal),
        ("Disturbance", _disturbance(tables, actions)),
        ("Management actions", managed),
        ("Randomness and paired replicates", randomness),
        ("Intervals",
         "Risk intervals are Wilson binomial intervals over replicates; the expected minimum "
         "abundance has a percentile bootstrap interval over replicates; in a comparison, "
         "differences between plans have paired intervals. They cover the randomness simulated "
         "only, not errors in the maps or the parameters, which usually matter more."),
        ("Not modelled",
         f"Age, stage or sex structure; genetics (inbreeding, loss of diversity); {behaviour}; "
         "settlement that depends on how crowded a cell is; other species (predators, "
         "competitors, disease); harvest and translocation; habitat change other than the "
         "actions and the disturbances (climate or land-use trends); uncertainty in the "
         "parameters themselves (each run uses one parameter set); anything outside the grid."),
    ]


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


def fmt(value) -> str:
    """A value for the report: numbers to 4 significant digits (thousands separated from
    10 000), booleans as yes/no, None and empty as a dash, lists comma-separated."""
    if value is None or value == "":
        return "\u2014"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value:,}" if abs(value) >= 10_000 else str(value)
    if isinstance(value, float):
        if value != value:
            return "\u2014"
        value = value + 0.0  # no "-0"
        return f"{value:,.0f}" if abs(value) >= 10_000 else f"{value:.4g}"
    if isinstance(value, list | tuple):
        return ", ".join(fmt(v) for v in value) if value else "none"
    if isinstance(value, dict):
        return json.dumps(value)
    return str(value)


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
    out.write_text(text, encoding="utf-8")
    return out

"""The model's assumptions and limitations as run: sentences generated from a plan's parameters
as read (dispersal method, growth model, stochasticity, disturbance, actions), so that every
report describes its own model."""

from __future__ import annotations

import json

from .lifehistory import managed_phrase, stage_texts

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
    elif kind in ("release", "removal"):
        what = managed_phrase(c)
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


def _value(v) -> str:
    """A number, or a value that changes over the run (a Trend as read)."""
    if not isinstance(v, dict):
        return fmt(v)
    if v["over_run"]:
        return (f"{v['values'][0]:g} in year 0 changing linearly to {v['values'][1]:g} in the "
                "last year")
    return "; ".join(f"{b:g} in year {a:g}" for a, b in zip(v["years"], v["values"],
                                                            strict=True)) + ", linear in between"


def _habitat_change(hab: dict) -> str:
    """The sentence on suitability layers of later years; empty without them."""
    change = ("interpolated linearly per cell between the given years" if hab["change"] ==
              "linear" else "each layer holding until the next")
    if hab["suitability_series"]:
        return (f" Suitability changes year by year: band k of {hab['suitability_series']} is "
                "the layer of year k-1, the last band holding after it.")
    if hab["future"]:
        years = ", ".join(str(f["year"]) for f in hab["future"])
        return (f" Suitability changes over the years: layers of years {years} "
                f"({change}), the last holding after its year; actions act on each year's "
                "layer.")
    return ""


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
                f"Fire (return interval {_value(t['return_interval_years'])} years at hazard 1"
                + (f", hazard raster {t['hazard']}" if t["hazard"] else "")
                + f"; sizes {FIRE_SIZE[t['size_distribution']].format(**t)}): ignitions in each "
                "patch are Poisson events scaled so that about the patch's area burns once per "
                "return interval, and a fire spreads from cell to cell over "
                + ("cells with hazard above 0 (so it can cross the matrix where fuel connects)"
                   if t["hazard"] else "habitat cells") + f". It {effect}")
        else:
            where = (f"the nested zones {fmt(t['zone'])}" if t["zone"] else
                     f"the cells of {t['terrain']} below stages {fmt(t['stage_m'])} m")
            out.append(f"Flood (return periods {_value(t['return_period_years'])} years): one draw "
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
    staged = stage_texts(params)
    moves = d["fraction"] > 0 or staged.get("moves") == "True"
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
        f"nobody breeds or settles.{_habitat_change(hab)} Density dependence acts within each "
        f"cell only. {start}"
        + (", the same in every plan (the base landscape's)." if actions else "."))
    steps = (["environmental variation"] * env
             + ["the year's habitat changes"] * (any(c["kind"] in ("restoration", "habitat_loss")
                                                     for c in actions)
                                                 or bool(_habitat_change(hab)))
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
        leaving = staged.get("leaving") or (
            f"Each year {d['fraction']:g} of a cell's individuals"
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
        ("Population", staged.get("Population", population)),
        ("Yearly cycle and census", cycle),
        ("Growth", staged.get("Growth", growth)),
        *([("Life history", staged["Life history"])] if staged else []),
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
         ("Genetics" if staged else "Age, stage or sex structure; genetics")
         + f" (inbreeding, loss of diversity); {behaviour}; "
         "settlement that depends on how crowded a cell is; other species (predators, "
         "competitors, disease); "
         + ("" if any(c["kind"] in ("release", "removal") for c in actions) else
            "harvest and translocation; ") + "habitat change other than the "
         "actions and the disturbances (climate or land-use trends); uncertainty in the "
         "parameters themselves (each run uses one parameter set); anything outside the grid."),
    ]


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

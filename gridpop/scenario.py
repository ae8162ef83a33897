"""The scenario schema: every section, key, type, unit, default and allowed range, in one place.

The tables below are the single source for validation (:func:`load_scenario`), for the scenario
reference (:func:`reference_markdown`, rendered into ``docs/scenario.md``) and for the commented
template written by ``gridpop init`` (:func:`template_toml`).

A scenario is parsed once into frozen dataclasses; paths are resolved relative to the scenario
file. Values stay in the units a user thinks in (metres, hectares, years); the conversion to cells
happens in one place, :func:`gridpop.simulation.model.build_model`.
"""

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import math
import textwrap
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import ScenarioError, where

REQUIRED = object()
"""Default marker for keys that must be given."""


@dataclass(frozen=True)
class Key:
    """One scenario key: its type, default, unit, allowed values and documentation."""

    name: str
    type: str  # "int", "float", "bool", "str", "path", "strlist", "floatlist", "pathlist"
    default: Any
    doc: str
    unit: str = ""
    choices: tuple[str, ...] = ()
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    example: Any = None

    def allowed(self) -> str:
        if self.choices:
            return "one of " + ", ".join(repr(c) for c in self.choices)
        kinds = {
            "int": "an integer",
            "float": "a number",
            "bool": "true or false",
            "str": "a string",
            "path": "a file path (relative to the scenario file)",
            "strlist": "a list of strings",
            "floatlist": "a number or a list of numbers",
            "pathlist": "a file path or a list of file paths",
        }
        text = kinds[self.type]
        if self.low is not None or self.high is not None:
            lo = "" if self.low is None else f"{self.low:g} {'<' if self.low_open else '<='} "
            hi = "" if self.high is None else f" {'<' if self.high_open else '<='} {self.high:g}"
            text += f" with {lo}{'values' if self.type == 'floatlist' else 'value'}{hi}"
        return text


GROWTH_MODELS = ("exponential", "beverton-holt", "ricker", "theta-logistic", "ceiling")
KERNELS = ("gaussian", "exponential", "2dt")
EDGES = ("absorbing", "reflecting")
DISPERSAL_METHODS = ("kernel", "walk")
RESPONSES = ("linear", "threshold", "power")
OUTPUT_RASTERS = ("abundance", "occupancy", "colonised")

SECTIONS: dict[str, tuple[str, tuple[Key, ...]]] = {
    "run": (
        "How long and how often to simulate.",
        (
            Key("years", "int", REQUIRED, "Planning horizon: number of yearly steps.", "years",
                low=1, example=50),
            Key("replicates", "int", REQUIRED, "Number of stochastic replicates.", low=1,
                example=100),
            Key("seed", "int", 1, "Seed of the counter-based random numbers. Replicate i of two "
                "scenarios with the same seed uses the same random numbers.", low=0),
            Key("batch_size", "int", 16, "Replicates per unit of work (checkpoint and "
                "distributed task). Does not change results.", low=1),
        ),
    ),
    "grid": (
        "The raster grid every layer is aligned to.",
        (
            Key("template", "path", None, "Raster that defines CRS, transform and shape. "
                "Defaults to the suitability raster.", example="suitability.tif"),
        ),
    ),
    "habitat": (
        "Habitat suitability and carrying capacity.",
        (
            Key("suitability", "path", REQUIRED, "Habitat-suitability raster, values 0..1; "
                "nodata or NaN marks cells outside the study area.", example="suitability.tif"),
            Key("capacity_per_ha", "float", REQUIRED, "Carrying capacity at suitability 1.",
                "individuals/ha", low=0, example=2.0),
            Key("response", "str", "linear", "How suitability s maps to capacity: linear "
                "(K ~ s), threshold (K ~ s where s >= threshold, else 0), power "
                "(K ~ s^exponent).", choices=RESPONSES),
            Key("threshold", "float", 0.5, "Cut-off for the threshold response.", low=0, high=1),
            Key("exponent", "float", 2.0, "Exponent of the power response.", low=0,
                low_open=True),
        ),
    ),
    "initial": (
        "Who is there in year 0. Give one of fraction_of_capacity, raster, points "
        "(none given: fraction_of_capacity = 1).",
        (
            Key("fraction_of_capacity", "float", None, "Initial abundance as a fraction of each "
                "cell's capacity (rounded to whole individuals in stochastic mode).", low=0,
                example=0.5),
            Key("raster", "path", None, "Raster of individuals per cell (resampled by sum "
                "when its grid differs)."),
            Key("points", "path", None, "Vector file of release points (GeoPackage, Shapefile, "
                "GeoJSON)."),
            Key("count_field", "str", "count", "Attribute of the release points holding the "
                "number of individuals."),
        ),
    ),
    "growth": (
        "Local growth, survival and stochasticity.",
        (
            Key("model", "str", "beverton-holt", "Density dependence of the yearly "
                "multiplier.", choices=GROWTH_MODELS),
            Key("rate", "float", REQUIRED, "Intrinsic growth rate r at low density; lambda0 = "
                "e^r. Declines come from survival, crowding, the environment and disturbance.",
                "1/year", low=0, example=0.4),
            Key("survival", "float", 0.6, "Adult annual survival s; births make up the rest "
                "of the multiplier.", low=0, high=1),
            Key("theta", "float", 1.0, "Shape of the theta-logistic model.", low=0,
                low_open=True),
            Key("allee_density", "float", 0.0, "Mate-finding Allee effect: births are scaled by "
                "N / (N + A), A this density times the cell area. 0 = none.", "individuals/ha",
                low=0),
            Key("stochastic", "bool", True, "true: whole individuals with demographic "
                "stochasticity; false: deterministic expectations."),
            Key("env_sd", "float", 0.0, "Standard deviation of the yearly deviation of the log "
                "growth multiplier (environmental stochasticity).", low=0),
            Key("env_correlation_m", "float", 0.0, "Correlation length of the environmental "
                "deviation: correlation at distance d is exp(-(d/L)^2). 0 = independent cells.",
                "m", low=0),
            Key("env_autocorrelation", "float", 0.0, "Year-to-year correlation of the "
                "environmental deviation (AR(1) coefficient).", low=-1, high=1, low_open=True,
                high_open=True),
        ),
    ),
    "dispersal": (
        "Movement between cells with a dispersal kernel.",
        (
            Key("fraction", "float", 0.0, "Fraction of individuals that disperse each year.",
                low=0, high=1),
            Key("density_dependence", "float", 0.0, "Emigration rises with crowding: fraction "
                "x min(1, N/K)^density_dependence. 0 = constant.", low=0),
            Key("kernel", "str", "gaussian", "Shape of the dispersal kernel.", choices=KERNELS),
            Key("mean_distance_m", "float", None, "Mean distance of a disperser's "
                "displacement. Required when fraction > 0.", "m", low=0, low_open=True,
                example=400.0),
            Key("tail", "float", 1.5, "Shape p of the 2dt kernel (smaller = fatter tail).",
                low=0.5, low_open=True),
            Key("max_distance_m", "float", None, "Truncation distance of the kernel. Default: "
                "where the kernel has dropped to about 1e-6 of its mass.", "m", low=0,
                low_open=True),
            Key("edge", "str", "absorbing", "Grid edge: absorbing (dispersers that leave are "
                "lost) or reflecting. Kernel method only: a walk never leaves the grid.",
                choices=EDGES),
            Key("method", "str", "kernel", "kernel: dispersers jump by the dispersal kernel; "
                "walk: they walk cell by cell over a resistance surface (corridors lead them, "
                "barriers stop them).", choices=DISPERSAL_METHODS),
            Key("resistance", "path", None, "Walk: resistance raster (>= 1 easy to cross; "
                "nodata or inf = impassable). Default: derived from suitability s as "
                "R = 1 + (resistance_max - 1) (1 - s)^resistance_shape."),
            Key("resistance_max", "float", 20.0, "Walk: resistance of the worst habitat "
                "(s = 0) when resistance is derived from suitability.", low=1),
            Key("resistance_shape", "float", 1.0, "Walk: shape of the suitability-to-"
                "resistance transform (> 1 keeps resistance low in middling habitat).", low=0,
                low_open=True),
            Key("walk_length", "int", 60, "Walk: the most cell-to-cell steps a disperser takes "
                "in a year; one still moving after that dies.", "cells", low=1),
            Key("death_per_resistance", "float", 0.0, "Walk: hazard per unit resistance and cell "
                "length: entering a cell of resistance R kills with probability "
                "1 - exp(-death_per_resistance R len).", low=0),
            Key("settle_exponent", "float", 1.0, "Walk: a walker settles on a cell of suitability "
                "s with probability s^settle_exponent (never where capacity is 0).", low=0,
                low_open=True),
            Key("heading_bias", "float", 0.0, "Walk: heading bias kappa, how strongly a walker "
                "keeps its last direction (correlated random walk; 0 = none).", low=0),
        ),
    ),
    "output": (
        "What to write.",
        (
            Key("rasters", "strlist", list(OUTPUT_RASTERS), "GeoTIFF time stacks to write.",
                choices=OUTPUT_RASTERS),
            Key("occupancy_threshold", "float", 1.0, "A cell is occupied when it holds at "
                "least this many individuals.", "individuals", low=0, low_open=True),
            Key("patches_csv", "bool", True, "Write the per-patch ledger patches.csv."),
        ),
    ),
    "risk": (
        "How the run summary measures risk (summary.json, risk.csv).",
        (
            Key("quasi_extinction", "float", 10.0, "Quasi-extinction threshold: a replicate is "
                "below it in a year when abundance < this value.", "individuals", low=0,
                low_open=True),
            Key("focus_areas", "path", None, "Vector file of named focus areas (polygons): risk "
                "and colonisation are also reported for the individuals inside each.",
                example="focus_areas.gpkg"),
            Key("focus_name_field", "str", "name", "Attribute of the focus areas holding "
                "their names (features with the same name form one focus area)."),
            Key("confidence", "float", 0.95, "Coverage of the confidence intervals.", low=0,
                high=1, low_open=True, high_open=True),
        ),
    ),
    "plan": (
        "What this scenario stands for, for tables and reports.",
        (
            Key("description", "str", "", "One line on the plan (e.g. \"two corridors between "
                "the north blocks\")."),
        ),
    ),
}


FIRE_SIZES = ("fraction", "exponential", "power_law")
RECOVERY = ("linear", "exponential")


def _effects(what: str) -> tuple[Key, ...]:
    """Keys of what a disturbance event does to the cells it hits."""
    return (
        Key("mortality", "float", REQUIRED, f"Fraction of the individuals in a {what} cell that "
            "die (binomial in stochastic mode).", low=0, high=1, example=0.5),
        Key("capacity_loss", "float", 0.0, f"Fraction of a {what} cell's capacity lost in the "
            "event year. A cell hit again before it recovers keeps the larger share: the "
            "remaining loss L becomes 1 - (1 - L)(1 - capacity_loss).", low=0, high=1),
        Key("recovery", "str", "linear", "How lost capacity comes back: linear (the loss "
            "shrinks to 0 over recovery_years) or exponential (the loss shrinks by the factor e "
            "every recovery_years).", choices=RECOVERY),
        Key("recovery_years", "float", 10.0, "Years to full recovery (linear) or the time "
            "constant of the recovery (exponential).", "years", low=0, low_open=True),
    )


DISTURBANCE_KINDS: dict[str, tuple[str, tuple[Key, ...]]] = {
    "fire": (
        "Fires ignite in each habitat patch as a Poisson process and spread from the ignition "
        "cell over burnable cells until they reach a size drawn from the size distribution or run "
        "out of fuel; they may cross into a neighbouring patch where burnable cells connect. The "
        "yearly number of ignitions in a patch of area A has mean -ln(1 - 1/RI) h A / E[min(S, A)] "
        "(RI the return interval, h the patch mean of the hazard, S the fire size): ignitions "
        "scale with the patch area over the mean fire size, and a fire that burns the whole patch "
        "comes with probability exactly 1/RI a year.",
        (
            Key("return_interval_years", "float", REQUIRED, "Fire cycle of a patch at hazard 1: "
                "the mean number of years for fires to burn an area equal to the patch (so the "
                "long-run fraction burned per year is 1 / return_interval_years).", "years",
                low=1, low_open=True, example=50.0),
            Key("size_distribution", "str", "fraction", "Fire size: fraction (a fixed fraction "
                "of the ignition patch), exponential (mean mean_size_ha) or power_law (density "
                "~ size^-size_exponent between min_size_ha and max_size_ha).",
                choices=FIRE_SIZES),
            Key("size_fraction", "float", 1.0, "Fire size as a fraction of the ignition "
                "patch (size_distribution = fraction).", low=0, high=1, low_open=True),
            Key("mean_size_ha", "float", None, "Mean fire size (size_distribution = "
                "exponential).", "ha", low=0, low_open=True, example=20.0),
            Key("min_size_ha", "float", None, "Smallest fire (size_distribution = power_law).",
                "ha", low=0, low_open=True, example=1.0),
            Key("max_size_ha", "float", None, "Largest fire (size_distribution = power_law).",
                "ha", low=0, low_open=True, example=500.0),
            Key("size_exponent", "float", None, "Exponent of the fire-size density "
                "(size_distribution = power_law).", low=0, low_open=True, example=1.5),
            Key("hazard", "path", None, "Fuel / flammability raster: relative ignition rate "
                "(1 = the rate of return_interval_years) and spread probability min(1, hazard) "
                "into a cell; 0 or nodata does not burn. Without it every habitat cell burns "
                "with hazard 1 and other cells do not burn.", example="fuel.tif"),
        ) + _effects("burned"),
    ),
    "flood": (
        "Floods come in years with an annual exceedance probability 1 / return period. One "
        "uniform number per replicate-year, shared by every patch, gives the year's return "
        "period T = 1/u (regional, correlated events); the year floods when T reaches the "
        "smallest return period given: the zone of the largest return period <= T (zones are "
        "nested: each includes the smaller ones), or the terrain cells below the stage "
        "interpolated at T (linear in ln T, not beyond the largest given).",
        (
            Key("return_period_years", "floatlist", REQUIRED, "Return period of each flood "
                "magnitude, increasing (e.g. [10, 100]).", "years", low=1, low_open=True,
                example=[10.0, 100.0]),
            Key("zone", "pathlist", None, "Flood-zone layer of each magnitude: a raster (cells "
                "> 0 flood) or a polygon file. Give zone or terrain.",
                example=["flood10.gpkg", "flood100.gpkg"]),
            Key("terrain", "path", None, "Elevation raster: cells below the year's stage flood. "
                "Give zone or terrain.", example="dem.tif"),
            Key("stage_m", "floatlist", None, "Water level of each magnitude, in the terrain's "
                "units (with terrain), not decreasing.", "m", example=[2.0, 3.5]),
        ) + _effects("flooded"),
    ),
}
"""Disturbance kinds of ``[[disturbance]]``: kind -> (description, keys besides ``kind``)."""


def _area(all_touched: bool) -> tuple[Key, ...]:
    """Keys of the area an action applies to."""
    return (
        Key("area", "path", REQUIRED, "Where the action applies: a vector file (polygons, "
            "lines) or a raster (cells > 0).", example="action.gpkg"),
        Key("buffer_m", "float", 0.0, "Buffer vector features by this distance first (gives "
            "lines a width). Vector areas only.", "m", low=0),
        Key("all_touched", "bool", all_touched, "Take every cell a vector feature touches, not "
            "only cells whose centre it covers."),
    )


_SCHEDULE = (
    Key("start_year", "int", 0, "First year of the change: year t is the step from census year t "
        "to t+1 (0 = the first step).", "year", low=0),
)

ACTION_KINDS: dict[str, tuple[str, tuple[Key, ...]]] = {
    "reserve": (
        "Protects habitat: multiplies capacity, exempts the area from every habitat_loss action, "
        "and may suppress fire.",
        _area(False) + (
            Key("capacity_multiplier", "float", 1.0, "Multiplier on the capacity of the area.",
                low=0),
            Key("ignition_multiplier", "float", 1.0, "Multiplier on the fire ignition rate in "
                "the area (fire suppression < 1).", low=0),
            Key("spread_multiplier", "float", 1.0, "Multiplier on the probability that a fire "
                "spreads into a cell of the area.", low=0),
        ),
    ),
    "corridor": (
        "Sets or raises suitability along the area and lowers dispersal resistance there.",
        _area(False) + (
            Key("target_suitability", "float", None, "Suitability along the corridor (cells "
                "already better keep theirs). Not given: suitability unchanged.", low=0, high=1,
                example=0.6),
            Key("resistance_multiplier", "float", 1.0, "Multiplier on dispersal resistance in "
                "the area (< 1 eases movement).", low=0, low_open=True),
        ),
    ),
    "barrier": (
        "A line or area dispersers cross only with a mortality (roads, fences).",
        _area(True) + (
            Key("crossing_mortality", "float", 1.0, "Probability that a disperser dies entering "
                "a barrier cell (1 = impassable).", low=0, high=1),
        ),
    ),
    "restoration": (
        "Suitability rises in the area from start_year to target_suitability over ramp_years.",
        _area(False) + (
            Key("target_suitability", "float", REQUIRED, "Suitability reached (cells already "
                "better keep theirs).", low=0, high=1, example=0.8),
        ) + _SCHEDULE + (
            Key("ramp_years", "int", 10, "Years from start_year to the full target (0 = at "
                "once).", "years", low=0),
        ),
    ),
    "habitat_loss": (
        "Suitability falls in the area, outside every reserve, from start_year to "
        "target_suitability over ramp_years.",
        _area(False) + (
            Key("target_suitability", "float", 0.0, "Suitability left (cells already worse "
                "keep theirs).", low=0, high=1),
        ) + _SCHEDULE + (
            Key("ramp_years", "int", 0, "Years from start_year to the full loss (0 = at "
                "once).", "years", low=0),
        ),
    ),
}
"""Management actions of ``[[action]]``: kind -> (description, keys besides ``kind``)."""

ARRAY_SECTIONS: dict[str, tuple[str, dict[str, tuple[str, tuple[Key, ...]]]]] = {
    "disturbance": ("Disturbance regimes, any number, each with a kind.", DISTURBANCE_KINDS),
    "action": ("Management actions, any number, applied in the order given; a scenario is a base "
               "landscape plus its actions.", ACTION_KINDS),
}
"""Array-of-tables sections (``[[name]]``): name -> (description, kinds)."""


def _section_class(name: str, keys: tuple[Key, ...]):
    return dataclasses.make_dataclass(
        name.capitalize() + "Config", [(k.name, Any) for k in keys], frozen=True
    )


CONFIG_CLASSES = {name: _section_class(name, keys) for name, (_, keys) in SECTIONS.items()}
KIND_CLASSES = {
    name: {kind: dataclasses.make_dataclass(
        "".join(w.capitalize() for w in kind.split("_")) + "Config",
        [("label", str), ("kind", str)] + [(k.name, Any) for k in keys], frozen=True)
        for kind, (_, keys) in kinds.items()}
    for name, (_, kinds) in ARRAY_SECTIONS.items()
}
"""Frozen config class of each kind; ``label`` (e.g. ``"disturbance #2 (flood)"``) locates the
table in messages (pass it as the section to :func:`gridpop.errors.where`)."""


@dataclass(frozen=True)
class Scenario:
    """A validated scenario. Section attributes are frozen dataclasses named after the tables."""

    path: Path
    sha256: str
    run: Any
    grid: Any
    habitat: Any
    initial: Any
    growth: Any
    dispersal: Any
    output: Any
    risk: Any
    plan: Any
    extra: dict = field(default_factory=dict)

    def replace(self, section: str, **values) -> Scenario:
        """A copy with some keys of one section changed (values are validated)."""
        keys = {k.name: k for k in SECTIONS[section][1]}
        for name, value in values.items():
            if name not in keys:
                raise ScenarioError(_unknown(self.path, section, name, keys))
            values[name] = _check_value(self.path, section, keys[name], value)
        new = dataclasses.replace(getattr(self, section), **values)
        return dataclasses.replace(self, **{section: new})


def _unknown(file, section, name, known) -> str:
    guess = difflib.get_close_matches(name, list(known), n=1)
    hint = f"; did you mean {guess[0]!r}?" if guess else ""
    return (f"{where(file, section)}: unknown key {name!r}{hint} "
            f"Known keys: {', '.join(known)}.")


def _check_value(file, section: str, key: Key, value):
    loc = where(file, section, key.name)
    bad = f"{loc} = {value!r} is not allowed; expected {key.allowed()}."
    if key.type == "bool":
        if not isinstance(value, bool):
            raise ScenarioError(bad)
        return value
    if key.type == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            raise ScenarioError(bad)
    elif key.type == "float":
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ScenarioError(bad)
        value = float(value)
        if not math.isfinite(value):
            raise ScenarioError(bad)
    elif key.type in ("str", "path"):
        if not isinstance(value, str) or not value:
            raise ScenarioError(bad)
    elif key.type == "floatlist":
        items = value if isinstance(value, list) else [value]
        if not items:
            raise ScenarioError(bad)
        one = dataclasses.replace(key, type="float")
        return tuple(_check_value(file, section, one, v) for v in items)
    elif key.type == "pathlist":
        items = value if isinstance(value, list) else [value]
        if not items or not all(isinstance(v, str) and v for v in items):
            raise ScenarioError(bad)
        return tuple(items)
    elif key.type == "strlist":
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise ScenarioError(bad)
        for v in value:
            if key.choices and v not in key.choices:
                raise ScenarioError(f"{loc}: {v!r} is not known; expected {key.allowed()}.")
        return tuple(value)
    if key.choices and value not in key.choices:
        guess = difflib.get_close_matches(str(value), key.choices, n=1)
        hint = f" (did you mean {guess[0]!r}?)" if guess else ""
        raise ScenarioError(f"{loc} = {value!r} is not known{hint}; expected {key.allowed()}.")
    if key.low is not None and (value < key.low or (key.low_open and value == key.low)):
        raise ScenarioError(bad)
    if key.high is not None and (value > key.high or (key.high_open and value == key.high)):
        raise ScenarioError(bad)
    return value


def _resolve_path(file: Path, section: str, key: str, value: str) -> Path:
    p = Path(value).expanduser()
    if not p.is_absolute():
        p = file.parent / p
    if not p.exists():
        raise ScenarioError(f"{where(file, section, key)} = {value!r}: file not found "
                            f"(looked for {p}).")
    return p


def parse_section(file: Path, section: str, table: dict) -> Any:
    """Validate one table against the schema and return its frozen dataclass."""
    _, keys = SECTIONS[section]
    known = {k.name: k for k in keys}
    if not isinstance(table, dict):
        raise ScenarioError(f"{where(file, section)} must be a table ([{section}]).")
    for name in table:
        if name not in known:
            raise ScenarioError(_unknown(file, section, name, known))
    return CONFIG_CLASSES[section](**_values(file, section, keys, table))


def _values(file: Path, section: str, keys: tuple[Key, ...], table: dict) -> dict:
    """Checked values of every key of a table (defaults filled in, paths resolved)."""
    values = {}
    for key in keys:
        if key.name in table:
            value = _check_value(file, section, key, table[key.name])
            if key.type == "path":
                value = _resolve_path(file, section, key.name, value)
            elif key.type == "pathlist":
                value = tuple(_resolve_path(file, section, key.name, v) for v in value)
        elif key.default is REQUIRED:
            raise ScenarioError(f"{where(file, section, key.name)} is required: "
                                f"{key.doc} Expected {key.allowed()}.")
        else:
            value = tuple(key.default) if isinstance(key.default, list) else key.default
        values[key.name] = value
    return values


def _cross_checks(file: Path, s: dict) -> dict:
    init = s["initial"]
    given = [k for k in ("fraction_of_capacity", "raster", "points")
             if getattr(init, k) is not None]
    if len(given) > 1:
        raise ScenarioError(f"{where(file, 'initial')}: give only one of fraction_of_capacity, "
                            f"raster, points (got {', '.join(given)}).")
    if not given:
        s["initial"] = dataclasses.replace(init, fraction_of_capacity=1.0)
    disp = s["dispersal"]
    if disp.fraction > 0 and disp.method == "kernel" and disp.mean_distance_m is None:
        raise ScenarioError(f"{where(file, 'dispersal', 'mean_distance_m')} is required when "
                            f"fraction = {disp.fraction:g} > 0.")
    if s["grid"].template is None:
        s["grid"] = dataclasses.replace(s["grid"], template=s["habitat"].suitability)
    return s


EXTRA_PARSERS: dict[str, Any] = {}
"""Parsers for array-of-tables sections (``[[name]]``): name -> function(file, list) -> value."""


def _fire_checks(file: Path, c) -> None:
    needs = {"fraction": ("size_fraction",), "exponential": ("mean_size_ha",),
             "power_law": ("min_size_ha", "max_size_ha", "size_exponent")}
    for name in needs[c.size_distribution]:
        if getattr(c, name) is None:
            raise ScenarioError(f"{where(file, c.label, name)} is required with "
                                f"size_distribution = {c.size_distribution!r}.")
    for dist, names in needs.items():
        if dist != c.size_distribution and dist != "fraction":
            for name in names:
                if getattr(c, name) is not None:
                    raise ScenarioError(
                        f"{where(file, c.label, name)} is only used with size_distribution = "
                        f"{dist!r} (this fire has {c.size_distribution!r}).")
    if c.size_distribution == "power_law" and not c.min_size_ha < c.max_size_ha:
        raise ScenarioError(f"{where(file, c.label)}: min_size_ha = {c.min_size_ha:g} must be "
                            f"below max_size_ha = {c.max_size_ha:g}.")


def _flood_checks(file: Path, c) -> None:
    t = c.return_period_years
    if any(b <= a for a, b in zip(t, t[1:], strict=False)):
        raise ScenarioError(f"{where(file, c.label, 'return_period_years')} = {list(t)}: "
                            f"return periods must increase.")
    if (c.zone is None) == (c.terrain is None):
        raise ScenarioError(f"{where(file, c.label)}: give either zone (flood-zone layers) or "
                            f"terrain with stage_m, not {'both' if c.zone else 'neither'}.")
    if c.terrain is None and c.stage_m is not None:
        raise ScenarioError(f"{where(file, c.label, 'stage_m')} is only used with terrain.")
    lists = ("zone", c.zone) if c.zone is not None else ("stage_m", c.stage_m)
    if lists[1] is None:
        raise ScenarioError(f"{where(file, c.label, 'stage_m')} is required with terrain: one "
                            f"water level per return period.")
    if len(lists[1]) != len(t):
        raise ScenarioError(f"{where(file, c.label, lists[0])}: {len(lists[1])} values for "
                            f"{len(t)} return periods {list(t)}; give one per return period.")
    if c.stage_m is not None and any(b < a for a, b in zip(c.stage_m, c.stage_m[1:],
                                                           strict=False)):
        raise ScenarioError(f"{where(file, c.label, 'stage_m')} = {list(c.stage_m)}: stages "
                            f"must not decrease with the return period.")


KIND_CHECKS = {"fire": _fire_checks, "flood": _flood_checks}
"""Checks across the keys of one kind, after each key is valid on its own."""


def _array_parser(name: str):
    doc, kinds = ARRAY_SECTIONS[name]
    known = ", ".join(repr(k) for k in kinds)

    def parse(file: Path, raw) -> tuple:
        if not isinstance(raw, list) or not all(isinstance(t, dict) for t in raw):
            raise ScenarioError(f"{file}: [{name}] must be an array of tables: write "
                                f"[[{name}]] above each entry.")
        out = []
        for i, table in enumerate(raw, 1):
            kind = table.get("kind")
            loc = where(file, f"{name} #{i}", "kind")
            if kind is None:
                raise ScenarioError(f"{loc} is required; known kinds: {known}.")
            if kind not in kinds:
                guess = difflib.get_close_matches(str(kind), list(kinds), n=1)
                hint = f" (did you mean {guess[0]!r}?)" if guess else ""
                raise ScenarioError(f"{loc} = {kind!r} is not known{hint}; known kinds: "
                                    f"{known}.")
            label = f"{name} #{i} ({kind})"
            keys = kinds[kind][1]
            body = {k: v for k, v in table.items() if k != "kind"}
            names = {k.name: k for k in keys}
            for key in body:
                if key not in names:
                    raise ScenarioError(_unknown(file, label, key, names))
            config = KIND_CLASSES[name][kind](label=label, kind=kind,
                                              **_values(file, label, keys, body))
            if kind in KIND_CHECKS:
                KIND_CHECKS[kind](file, config)
            out.append(config)
        return tuple(out)

    parse.__doc__ = f"Parse the [[{name}]] tables into a tuple of frozen configs. {doc}"
    return parse


for _name in ARRAY_SECTIONS:
    EXTRA_PARSERS[_name] = _array_parser(_name)


def load_scenario(path) -> Scenario:
    """Read, validate and resolve a scenario TOML file.

    Raises
    ------
    ScenarioError
        For a missing or unparsable file, an unknown section or key (with a suggestion), a value
        of the wrong type or out of range, or a missing required key.
    """
    file = Path(path).expanduser().resolve()
    if not file.is_file():
        raise ScenarioError(f"{path}: scenario file not found.")
    raw_bytes = file.read_bytes()
    try:
        raw = tomllib.loads(raw_bytes.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ScenarioError(f"{file}: not a valid TOML file: {exc}") from None
    known = list(SECTIONS) + list(EXTRA_PARSERS)
    for name in raw:
        if name not in known:
            guess = difflib.get_close_matches(name, known, n=1)
            hint = f"; did you mean [{guess[0]}]?" if guess else ""
            raise ScenarioError(f"{file}: unknown section [{name}]{hint} "
                                f"Known sections: {', '.join(known)}.")
    for name in ("run", "habitat", "growth"):
        if name not in raw:
            raise ScenarioError(f"{file}: section [{name}] is required.")
    sections = {name: parse_section(file, name, raw.get(name, {})) for name in SECTIONS}
    sections = _cross_checks(file, sections)
    extra = {name: parser(file, raw.get(name, [])) for name, parser in EXTRA_PARSERS.items()}
    return Scenario(path=file, sha256=hashlib.sha256(raw_bytes).hexdigest(), extra=extra,
                    **sections)


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return f'"{v}"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return repr(v)


def _key_lines(keys: tuple[Key, ...]) -> list[str]:
    """Template lines of some keys: each key's doc, then the key (commented out unless required)."""
    lines = []
    for k in keys:
        unit = f" [{k.unit}]" if k.unit else ""
        lines.append(f"# {k.doc}{unit}")
        if k.default is REQUIRED:
            lines.append(f"{k.name} = {_toml_value(k.example)}")
        elif k.default is None:
            if k.example is not None:
                lines.append(f"# {k.name} = {_toml_value(k.example)}")
            else:
                lines.append(f"# {k.name} = ...")
        else:
            lines.append(f"# {k.name} = {_toml_value(k.default)}")
    return lines


def template_toml() -> str:
    """A commented scenario template generated from the schema (``gridpop init``).

    The ``[[disturbance]]`` and ``[[action]]`` examples are commented out as a whole: removing one
    leading ``# `` from the lines of an example gives a table with its required keys set and its
    optional keys (at their defaults) still commented out.
    """
    lines = ["# gridpop scenario. Paths are relative to this file.",
             "# Every key is documented in docs/scenario.md; defaults are shown commented out.", ""]
    for name, (doc, keys) in SECTIONS.items():
        lines.append(f"[{name}]  # {doc}")
        lines += _key_lines(keys)
        lines.append("")
    for name, (doc, kinds) in ARRAY_SECTIONS.items():
        lines += ["# " + line for line in
                  textwrap.wrap(f"{doc} Known kinds: {', '.join(kinds)}.", 96)] + [""]
        for kind, (kind_doc, keys) in kinds.items():
            block = [f"[[{name}]]"]
            block += ["# " + line for line in textwrap.wrap(kind_doc, 96)]
            block.append(f"kind = {_toml_value(kind)}")
            block += _key_lines(keys)
            lines += ["# " + line for line in block] + [""]
    return "\n".join(lines)


def _key_table(keys: tuple[Key, ...]) -> list[str]:
    out = ["| key | unit | default | allowed | meaning |", "|---|---|---|---|---|"]
    for k in keys:
        default = ("required" if k.default is REQUIRED
                   else "-" if k.default is None else _toml_value(k.default))
        out.append(f"| `{k.name}` | {k.unit or '-'} | {default} | {k.allowed()} | {k.doc} |")
    return out


def reference_markdown() -> str:
    """The scenario reference (docs/scenario.md) generated from the schema."""
    out = ["# Scenario reference", "",
           "Generated from `gridpop/scenario.py` "
           "(`python -m gridpop.scenario > docs/scenario.md`).",
           "Paths are relative to the scenario file.", ""]
    for name, (doc, keys) in SECTIONS.items():
        out += [f"## [{name}]", "", doc, ""] + _key_table(keys) + [""]
    for name, (doc, kinds) in ARRAY_SECTIONS.items():
        out += [f"## [[{name}]]", "", f"{doc} Each table needs `kind`, one of "
                f"{', '.join(f'`{k!r}`' for k in kinds)}; the other keys depend on the kind.", ""]
        for kind, (kind_doc, keys) in kinds.items():
            out += [f"### kind = \"{kind}\"", "", kind_doc, ""] + _key_table(keys) + [""]
    return "\n".join(out)


if __name__ == "__main__":
    print(reference_markdown())

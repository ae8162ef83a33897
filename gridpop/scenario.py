"""The scenario schema: every section, key, type, unit, default and allowed range, in one place.

The tables below are the single source for validation (:func:`load_scenario`), for the scenario
reference (:func:`reference_markdown`, rendered into ``docs/scenario.md``) and for the commented
template written by ``gridpop init`` (:func:`template_toml`).

A scenario is parsed once into frozen dataclasses; paths are resolved relative to the scenario
file. Values stay in the units a user thinks in (metres, hectares, years); the conversion to cells
happens in one place, :func:`gridpop.engine.build_model`.
"""

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import math
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
    type: str  # "int", "float", "bool", "str", "path", "strlist"
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
        }
        text = kinds[self.type]
        if self.low is not None or self.high is not None:
            lo = "" if self.low is None else f"{self.low:g} {'<' if self.low_open else '<='} "
            hi = "" if self.high is None else f" {'<' if self.high_open else '<='} {self.high:g}"
            text += f" with {lo}value{hi}"
        return text


GROWTH_MODELS = ("exponential", "beverton-holt", "ricker", "theta-logistic", "ceiling")
KERNELS = ("gaussian", "exponential", "2dt")
EDGES = ("absorbing", "reflecting")
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
            Key("rate", "float", REQUIRED, "Intrinsic growth rate r; lambda0 = e^r.",
                "1/year", example=0.4),
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
                "lost) or reflecting.", choices=EDGES),
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
}


def _section_class(name: str, keys: tuple[Key, ...]):
    return dataclasses.make_dataclass(
        name.capitalize() + "Config", [(k.name, Any) for k in keys], frozen=True
    )


CONFIG_CLASSES = {name: _section_class(name, keys) for name, (_, keys) in SECTIONS.items()}


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
    values = {}
    for key in keys:
        if key.name in table:
            value = _check_value(file, section, key, table[key.name])
            if key.type == "path":
                value = _resolve_path(file, section, key.name, value)
        elif key.default is REQUIRED:
            raise ScenarioError(f"{where(file, section, key.name)} is required: "
                                f"{key.doc} Expected {key.allowed()}.")
        else:
            value = tuple(key.default) if isinstance(key.default, list) else key.default
        values[key.name] = value
    return CONFIG_CLASSES[section](**values)


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
    if disp.fraction > 0 and disp.mean_distance_m is None:
        raise ScenarioError(f"{where(file, 'dispersal', 'mean_distance_m')} is required when "
                            f"fraction = {disp.fraction:g} > 0.")
    if s["grid"].template is None:
        s["grid"] = dataclasses.replace(s["grid"], template=s["habitat"].suitability)
    return s


EXTRA_PARSERS: dict[str, Any] = {}
"""Parsers for array-of-tables sections (``[[name]]``): name -> function(file, list) -> value."""


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


def template_toml() -> str:
    """A commented scenario template generated from the schema (``gridpop init``)."""
    lines = ["# gridpop scenario. Paths are relative to this file.",
             "# Every key is documented in docs/scenario.md; defaults are shown commented out.", ""]
    for name, (doc, keys) in SECTIONS.items():
        lines.append(f"[{name}]  # {doc}")
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
        lines.append("")
    return "\n".join(lines)


def reference_markdown() -> str:
    """The scenario reference (docs/scenario.md) generated from the schema."""
    out = ["# Scenario reference", "",
           "Generated from `gridpop/scenario.py` (`python -m gridpop.scenario > docs/scenario.md`).",
           "Paths are relative to the scenario file.", ""]
    for name, (doc, keys) in SECTIONS.items():
        out += [f"## [{name}]", "", doc, "", "| key | unit | default | allowed | meaning |",
                "|---|---|---|---|---|"]
        for k in keys:
            default = ("required" if k.default is REQUIRED
                       else "-" if k.default is None else _toml_value(k.default))
            out.append(f"| `{k.name}` | {k.unit or '-'} | {default} | {k.allowed()} | {k.doc} |")
        out.append("")
    return "\n".join(out)


if __name__ == "__main__":
    print(reference_markdown())

"""Reading a scenario file: every key checked against the schema, paths resolved, then the
checks across keys, into a :class:`Scenario`.

Values stay in the units a user thinks in (metres, hectares, years); the conversion to cells
happens in one place, :func:`gridpop.simulation.model.build_model`.
"""

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import math
import os
import tomllib
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import tomli_w

from ..errors import ScenarioError, where
from .kinds import (
    ARRAY_SECTIONS,
    KIND_CLASSES,
    ActionConfig,
    DisturbanceConfig,
    FireConfig,
    FloodConfig,
)
from .schema import REQUIRED, Key
from .sections import (
    SECTION_CLASSES,
    SECTIONS,
    DispersalConfig,
    GridConfig,
    GrowthConfig,
    HabitatConfig,
    InitialConfig,
    OutputConfig,
    PlanConfig,
    RiskConfig,
    RunConfig,
    SectionConfig,
)


@dataclass(frozen=True)
class Scenario:
    """A validated scenario: one frozen dataclass per section, named after its table, and the
    ``[[disturbance]]`` and ``[[action]]`` tables in the order given."""

    path: Path
    sha256: str
    run: RunConfig
    grid: GridConfig
    habitat: HabitatConfig
    initial: InitialConfig
    growth: GrowthConfig
    dispersal: DispersalConfig
    output: OutputConfig
    risk: RiskConfig
    plan: PlanConfig
    disturbances: tuple[DisturbanceConfig, ...] = ()
    actions: tuple[ActionConfig, ...] = ()

    def replace(self, section: str, **values: object) -> Scenario:
        """A copy with some keys of one section changed (values are validated)."""
        keys = {k.name: k for k in SECTIONS[section][1]}
        checked = {}
        for name, value in values.items():
            if name not in keys:
                raise ScenarioError(_unknown(self.path, section, name, keys))
            checked[name] = check_value(self.path, section, keys[name], value)
        new = dataclasses.replace(getattr(self, section), **checked)
        return dataclasses.replace(self, **{section: new})


def _unknown(file: Path | str, section: str, name: str, known: dict[str, Key]) -> str:
    guess = difflib.get_close_matches(name, list(known), n=1)
    hint = f"; did you mean {guess[0]!r}?" if guess else ""
    return (f"{where(file, section)}: unknown key {name!r}{hint} "
            f"Known keys: {', '.join(known)}.")


def _not_known(loc: str, value: object, choices: tuple[str, ...], expected: str) -> ScenarioError:
    guess = difflib.get_close_matches(str(value), choices, n=1)
    hint = f" (did you mean {guess[0]!r}?)" if guess else ""
    return ScenarioError(f"{loc} = {value!r} is not known{hint}; {expected}.")


def check_value(file: Path | str, section: str, key: Key, value: object) -> Any:
    """The value of one key, checked against its type, choices and bounds (a number or list
    of numbers as float, a list as a tuple; paths not yet resolved)."""
    loc = where(file, section, key.name)
    bad = f"{loc} = {value!r} is not allowed; expected {key.allowed()}."
    if key.type == "bool":
        if not isinstance(value, bool):
            raise ScenarioError(bad)
        return value
    if key.type == "floatlist":
        items = value if isinstance(value, list) else [value]
        if not items:
            raise ScenarioError(bad)
        one = dataclasses.replace(key, type="float")
        return tuple(check_value(file, section, one, v) for v in items)
    if key.type == "pathlist":
        items = value if isinstance(value, list) else [value]
        if not items or not all(isinstance(v, str) and v for v in items):
            raise ScenarioError(bad)
        return tuple(items)
    if key.type == "strlist":
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise ScenarioError(bad)
        for v in value:
            if key.choices and v not in key.choices:
                raise ScenarioError(f"{loc}: {v!r} is not known; expected {key.allowed()}.")
        return tuple(value)
    if key.type in ("str", "path"):
        if not isinstance(value, str) or not value:
            raise ScenarioError(bad)
        if key.choices and value not in key.choices:
            raise _not_known(loc, value, key.choices, f"expected {key.allowed()}")
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ScenarioError(bad)
    if key.type == "float":
        value = float(value)
        if not math.isfinite(value):
            raise ScenarioError(bad)
    elif not isinstance(value, int):
        raise ScenarioError(bad)
    if key.low is not None and (value < key.low or (key.low_open and value == key.low)):
        raise ScenarioError(bad)
    if key.high is not None and (value > key.high or (key.high_open and value == key.high)):
        raise ScenarioError(bad)
    return value


def _resolve_path(file: Path, section: str, key: str, value: str) -> Path:
    p = Path(value).expanduser()
    if not p.is_absolute():
        p = Path(os.path.normpath(file.parent / p))
    if not p.exists():
        raise ScenarioError(f"{where(file, section, key)} = {value!r}: file not found "
                            f"(looked for {p}).")
    return p


def _values(file: Path, section: str, keys: tuple[Key, ...], table: dict[str, object]
            ) -> dict[str, Any]:
    """Checked values of every key of a table (defaults filled in, paths resolved)."""
    values: dict[str, Any] = {}
    for key in keys:
        if key.name in table:
            value = check_value(file, section, key, table[key.name])
            if key.type == "path":
                value = _resolve_path(file, section, key.name, str(value))
            elif key.type == "pathlist":
                value = tuple(_resolve_path(file, section, key.name, v) for v in value)
        elif key.default is REQUIRED:
            raise ScenarioError(f"{where(file, section, key.name)} is required: "
                                f"{key.doc} Expected {key.allowed()}.")
        else:
            value = key.default
        values[key.name] = value
    return values


def parse_section(file: Path, section: str, table: object) -> SectionConfig:
    """Validate one table against the schema and return its frozen dataclass."""
    _, keys = SECTIONS[section]
    known = {k.name: k for k in keys}
    if not isinstance(table, dict):
        raise ScenarioError(f"{where(file, section)} must be a table ([{section}]).")
    for name in table:
        if name not in known:
            raise ScenarioError(_unknown(file, section, name, known))
    return SECTION_CLASSES[section](**_values(file, section, keys, table))


def _cross_checks(file: Path, s: Scenario) -> Scenario:
    init = s.initial
    given = [k for k in ("fraction_of_capacity", "raster", "points")
             if getattr(init, k) is not None]
    if len(given) > 1:
        raise ScenarioError(f"{where(file, 'initial')}: give only one of fraction_of_capacity, "
                            f"raster, points (got {', '.join(given)}).")
    if not given:
        s = dataclasses.replace(s, initial=dataclasses.replace(init, fraction_of_capacity=1.0))
    disp = s.dispersal
    if disp.fraction > 0 and disp.method == "kernel" and disp.mean_distance_m is None:
        raise ScenarioError(f"{where(file, 'dispersal', 'mean_distance_m')} is required when "
                            f"fraction = {disp.fraction:g} > 0.")
    if s.grid.template is None:
        s = dataclasses.replace(s, grid=dataclasses.replace(s.grid, template=s.habitat.suitability))
    return s


def _fire_checks(file: Path, c: FireConfig) -> None:
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
    low, high = c.min_size_ha, c.max_size_ha  # both given only with power_law
    if low is not None and high is not None and not low < high:
        raise ScenarioError(f"{where(file, c.label)}: min_size_ha = {low:g} must be below "
                            f"max_size_ha = {high:g}.")


def _flood_checks(file: Path, c: FloodConfig) -> None:
    t = c.return_period_years
    if any(b <= a for a, b in zip(t, t[1:], strict=False)):
        raise ScenarioError(f"{where(file, c.label, 'return_period_years')} = {list(t)}: "
                            f"return periods must increase.")
    if (c.zone is None) == (c.terrain is None):
        raise ScenarioError(f"{where(file, c.label)}: give either zone (flood-zone layers) or "
                            f"terrain with stage_m, not {'both' if c.zone else 'neither'}.")
    if c.terrain is None and c.stage_m is not None:
        raise ScenarioError(f"{where(file, c.label, 'stage_m')} is only used with terrain.")
    name, given = ("zone", c.zone) if c.zone is not None else ("stage_m", c.stage_m)
    if given is None:
        raise ScenarioError(f"{where(file, c.label, 'stage_m')} is required with terrain: one "
                            f"water level per return period.")
    if len(given) != len(t):
        raise ScenarioError(f"{where(file, c.label, name)}: {len(given)} values for "
                            f"{len(t)} return periods {list(t)}; give one per return period.")
    if c.stage_m is not None and any(b < a for a, b in zip(c.stage_m, c.stage_m[1:],
                                                           strict=False)):
        raise ScenarioError(f"{where(file, c.label, 'stage_m')} = {list(c.stage_m)}: stages "
                            f"must not decrease with the return period.")


KIND_CHECKS: dict[str, Callable[[Path, Any], None]] = {"fire": _fire_checks,
                                                       "flood": _flood_checks}
"""Checks across the keys of one kind, after each key is valid on its own."""


def parse_tables(file: Path, name: str, raw: object) -> tuple[Any, ...]:
    """Parse the ``[[name]]`` tables of a scenario into a tuple of frozen configs, one of the
    classes of :data:`gridpop.config.kinds.KIND_CLASSES` ``[name]`` each."""
    _, kinds = ARRAY_SECTIONS[name]
    known = ", ".join(repr(k) for k in kinds)
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
            raise _not_known(loc, kind, tuple(kinds), f"known kinds: {known}")
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


def _read_toml(file: Path) -> tuple[dict[str, Any], bytes]:
    if not file.is_file():
        raise ScenarioError(f"{file}: scenario file not found.")
    data = file.read_bytes()
    try:
        return tomllib.loads(data.decode("utf-8")), data
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ScenarioError(f"{file}: not a valid TOML file: {exc}") from None


def _path_keys(section: str, table: dict) -> list[str]:
    """Names of the path keys of a table (of ``[[section]]`` tables: of the table's kind)."""
    if section in SECTIONS:
        keys = SECTIONS[section][1]
    elif section in ARRAY_SECTIONS and table.get("kind") in ARRAY_SECTIONS[section][1]:
        keys = ARRAY_SECTIONS[section][1][table["kind"]][1]
    else:
        return []
    return [k.name for k in keys if k.type in ("path", "pathlist")]


def _rebased(raw: dict[str, Any], source: Path, target: Path) -> dict[str, Any]:
    """``raw`` with its relative paths rewritten from relative to folder ``source`` to relative
    to folder ``target`` (the same files)."""
    if source == target:
        return raw

    def move(v: object) -> object:
        if isinstance(v, str) and v and not Path(v).expanduser().is_absolute():
            return os.path.relpath(source / v, target)
        if isinstance(v, list):
            return [move(x) for x in v]
        return v

    def table(section: str, t: object) -> object:
        if not isinstance(t, dict):
            return t
        paths = _path_keys(section, t)
        return {k: move(v) if k in paths else v for k, v in t.items()}

    return {name: ([table(name, t) for t in value] if isinstance(value, list)
                   else table(name, value)) for name, value in raw.items()}


def _merge(base: dict[str, Any], top: dict[str, Any]) -> dict[str, Any]:
    """``top`` on ``base``: tables merged key by key (``top`` wins), arrays of tables appended."""
    out = dict(base)
    for name, value in top.items():
        below = base.get(name)
        if isinstance(below, list) and isinstance(value, list):
            out[name] = [*below, *value]
        elif isinstance(below, dict) and isinstance(value, dict):
            out[name] = {**below, **value}
        else:
            out[name] = value
    return out


def _raw_scenario(file: Path, seen: tuple[Path, ...] = ()) -> tuple[dict[str, Any], list[bytes]]:
    """The TOML content of a scenario file with its ``[plan] extends`` chain merged in (paths
    relative to ``file``), and the bytes of every file of the chain, ``file`` first. Each base
    is validated on its own first, so that its errors name it."""
    raw, data = _read_toml(file)
    plan = raw.get("plan")
    extends = plan.get("extends") if isinstance(plan, dict) else None
    if extends is None:
        return raw, [data]
    key = next(k for k in SECTIONS["plan"][1] if k.name == "extends")
    base = _resolve_path(file, "plan", "extends",
                         str(check_value(file, "plan", key, extends))).resolve()
    if base == file or base in seen:
        raise ScenarioError(f"{where(file, 'plan', 'extends')} = {extends!r}: {base.name} "
                            f"extends {file.name} in turn; a chain of extends must end in a "
                            "scenario without one.")
    below, chunks = _raw_scenario(base, (*seen, file))
    _scenario_of(base, below, chunks)
    return _merge(_rebased(below, base.parent, file.parent), raw), [data, *chunks]


def merged_toml(path: str | Path) -> str:
    """The scenario a file with ``[plan] extends`` stands for, as one TOML text with paths
    relative to it (what ``gridpop check`` prints): a file that loads to the same scenario."""
    raw, _ = _raw_scenario(Path(path).expanduser().resolve())
    raw = {name: ({k: v for k, v in value.items() if k != "extends"} if name == "plan"
                  else value) for name, value in raw.items()}
    return tomli_w.dumps(raw)


def _scenario_of(file: Path, raw: dict[str, Any], chunks: list[bytes]) -> Scenario:
    known = list(SECTIONS) + list(ARRAY_SECTIONS)
    for name in raw:
        if name not in known:
            guess = difflib.get_close_matches(name, known, n=1)
            hint = f"; did you mean [{guess[0]}]?" if guess else ""
            raise ScenarioError(f"{file}: unknown section [{name}]{hint} "
                                f"Known sections: {', '.join(known)}.")
    for name in ("run", "habitat", "growth"):
        if name not in raw:
            raise ScenarioError(f"{file}: section [{name}] is required.")
    sections: dict[str, Any] = {name: parse_section(file, name, raw.get(name, {}))
                                for name in SECTIONS}
    digest = (hashlib.sha256(chunks[0]) if len(chunks) == 1 else
              hashlib.sha256(b"".join(hashlib.sha256(c).digest() for c in chunks)))
    scenario = Scenario(path=file, sha256=digest.hexdigest(), **sections)
    scenario = _cross_checks(file, scenario)
    return dataclasses.replace(
        scenario, disturbances=parse_tables(file, "disturbance", raw.get("disturbance", [])),
        actions=parse_tables(file, "action", raw.get("action", [])))


def load_scenario(path: str | Path) -> Scenario:
    """Read, validate and resolve a scenario TOML file, with the scenarios it extends
    (``[plan] extends``: tables merged key by key, ``[[disturbance]]`` and ``[[action]]``
    appended to the base's).

    ``Scenario.sha256`` is the hash of the file, or with ``extends`` of the hashes of every file
    of the chain.

    Raises
    ------
    ScenarioError
        For a missing or unparsable file, an unknown section or key (with a suggestion), a value
        of the wrong type or out of range, a missing required key, or a chain of extends that
        comes back to a file.
    """
    file = Path(path).expanduser().resolve()
    if not file.is_file():
        raise ScenarioError(f"{path}: scenario file not found.")
    raw, chunks = _raw_scenario(file)
    return _scenario_of(file, raw, chunks)

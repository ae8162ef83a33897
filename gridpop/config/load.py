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
import re
import tomllib
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import tomli_w

from .. import matrices
from ..errors import ScenarioError, where
from .kinds import (
    ARRAY_SECTIONS,
    KIND_CLASSES,
    ActionConfig,
    DisturbanceConfig,
    FireConfig,
    FloodConfig,
    ReleaseConfig,
    RemovalConfig,
)
from .schema import REQUIRED, Key, Trend, keys_of
from .sections import (
    SECTION_CLASSES,
    SECTIONS,
    STAGE_RASTER,
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
    SexConfig,
    StagesConfig,
)
from .uncertainty import SECTION as UNCERTAINTY
from .uncertainty import UncertaintyConfig, parse_uncertainty
from .values import check_value, not_known, unknown_key


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
    stages: StagesConfig | None = None  # None: no [stages], the stage-free model
    sex: SexConfig = SexConfig()
    disturbances: tuple[DisturbanceConfig, ...] = ()
    actions: tuple[ActionConfig, ...] = ()
    uncertainty: UncertaintyConfig | None = None  # [uncertainty]: gridpop sensitivity only

    def replace(self, section: str, **values: object) -> Scenario:
        """A copy with some keys of one section changed (values are validated)."""
        keys = {k.name: k for k in SECTIONS[section][1]}
        checked = {}
        for name, value in values.items():
            if name not in keys:
                raise ScenarioError(unknown_key(self.path, section, name, keys))
            checked[name] = check_value(self.path, section, keys[name], value)
        new = dataclasses.replace(getattr(self, section), **checked)
        return dataclasses.replace(self, **{section: new})


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
            elif key.type == "tables":
                value = _tables(file, f"{section}.{key.name}", key, value)
            elif key.type == "pathlist":
                value = tuple(_resolve_path(file, section, key.name, v) for v in value)
        elif key.default is REQUIRED:
            raise ScenarioError(f"{where(file, section, key.name)} is required: "
                                f"{key.doc} Expected {key.allowed()}.")
        else:
            value = key.default
        values[key.name] = value
    return values


def _tables(file: Path, name: str, key: Key, tables: tuple[dict, ...]) -> tuple[Any, ...]:
    """The tables ``[[name]]`` of a key of type "tables", each checked as a section of its own
    (``[name #i]`` in messages)."""
    assert key.table is not None
    keys = keys_of(key.table)
    known = {k.name: k for k in keys}
    out = []
    for i, table in enumerate(tables, 1):
        label = f"{name} #{i}"
        for k in table:
            if k not in known:
                raise ScenarioError(unknown_key(file, label, k, known))
        out.append(key.table(**_values(file, label, keys, table)))
    return tuple(out)


def parse_section(file: Path, section: str, table: object) -> SectionConfig:
    """Validate one table against the schema and return its frozen dataclass."""
    _, keys = SECTIONS[section]
    known = {k.name: k for k in keys}
    if not isinstance(table, dict):
        raise ScenarioError(f"{where(file, section)} must be a table ([{section}]).")
    for name in table:
        if name not in known:
            raise ScenarioError(unknown_key(file, section, name, known))
    return SECTION_CLASSES[section](**_values(file, section, keys, table))


def cross_checks(file: Path, s: Scenario) -> Scenario:
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
    _future_checks(file, s.habitat.future, "habitat")
    _future_checks(file, disp.future, "dispersal")
    if s.habitat.future and s.habitat.suitability_series is not None:
        raise ScenarioError(f"{where(file, 'habitat', 'suitability_series')}: give either "
                            f"suitability_series or [[habitat.future]] tables, not both.")
    if disp.future and (disp.method != "walk" or disp.resistance is None):
        raise ScenarioError(f"{where(file, 'dispersal', 'future')}: resistance layers of later "
                            f"years need method = \"walk\" and a resistance raster.")
    if s.grid.template is None:
        s = dataclasses.replace(s, grid=dataclasses.replace(s.grid, template=s.habitat.suitability))
    if s.stages is not None:
        s = _stage_checks(file, s)
    elif s.sex.system != "female-only":
        raise ScenarioError(f"{where(file, 'sex', 'system')} = {s.sex.system!r} needs a "
                            "[stages] section (the life history of females and males).")
    elif any(r.startswith(STAGE_RASTER) for r in s.output.rasters):
        raise ScenarioError(f"{where(file, 'output', 'rasters')}: abundance_<stage> needs a "
                            "[stages] section.")
    return s


STAGE_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
LESLIE_KEYS = ("ages", "weibull_shape", "mean_lifespan_years", "fecundity_by_age")


def _matrix(file: Path, st: StagesConfig) -> tuple[StagesConfig, Any, Any]:
    """The stages with names, transitions and fecundity filled in (a Leslie matrix built from
    the Weibull survivorship when ``ages`` is given), and the checked (T, F)."""
    leslie = [k for k in LESLIE_KEYS if getattr(st, k) is not None]
    # With ages, the matrices are built here (again on every check: a sensitivity analysis
    # changes the Weibull keys); a file giving both forms is refused in _scenario_of.
    given = [] if leslie else [k for k in ("transitions", "fecundity")
                               if getattr(st, k) is not None]
    needed = LESLIE_KEYS if leslie else ("transitions", "fecundity")
    for k in needed:
        if getattr(st, k) is None:
            raise ScenarioError(f"{where(file, 'stages', k)} is required with "
                                f"{(leslie or given or ['[stages]'])[0]}.")
    for k in given:
        rows = getattr(st, k)
        if any(len(row) != len(rows) for row in rows):
            raise ScenarioError(f"{where(file, 'stages', k)}: must be a square matrix, one row "
                                f"of {len(rows)} numbers per stage (got rows of "
                                f"{', '.join(str(len(r)) for r in rows)}).")
    try:
        if leslie:
            assert st.ages is not None and st.weibull_shape is not None
            assert st.mean_lifespan_years is not None and st.fecundity_by_age is not None
            t, f = matrices.weibull_leslie(st.ages, st.weibull_shape, st.mean_lifespan_years,
                                           st.fecundity_by_age)
            t, f = matrices.validate(t, f)
        else:
            t, f = matrices.validate(st.transitions, st.fecundity)
    except ValueError as exc:
        name = str(exc).split()[0].rstrip(":")
        name = "weibull_shape" if name == "shape" else name  # weibull_leslie's parameter
        if leslie and name not in LESLIE_KEYS:
            raise ScenarioError(f"{where(file, 'stages', 'fecundity_by_age')}: the Leslie "
                                f"matrix: {exc}.") from None
        detail = str(exc).split(":", 1)[-1].strip()
        raise ScenarioError(f"{where(file, 'stages', name)}: {detail}.") from None
    n = t.shape[0]
    names = st.names or tuple(f"age{i}" if leslie else f"stage{i + 1}" for i in range(n))
    if len(names) != n:
        raise ScenarioError(f"{where(file, 'stages', 'names')} = {list(names)}: {len(names)} "
                            f"names for a {n}-stage matrix; give one per stage.")
    for name in names:
        if not STAGE_NAME.match(name) or names.count(name) > 1:
            raise ScenarioError(f"{where(file, 'stages', 'names')}: {name!r} must be unique "
                                "and made of letters, digits and _ (starting with a letter).")
    st = dataclasses.replace(st, names=tuple(names), transitions=tuple(map(tuple, t.tolist())),
                             fecundity=tuple(map(tuple, f.tolist())))
    return st, t, f


def _stage_checks(file: Path, s: Scenario) -> Scenario:
    """[stages] (and [sex]) against each other and against [growth] and [dispersal]."""
    assert s.stages is not None
    st, t, f = _matrix(file, s.stages)
    assert st.names is not None
    names, n = st.names, len(st.names)
    for k in ("density_stages", "abundance_stages"):
        chosen = getattr(st, k)
        if chosen is None:
            continue
        unknown = [x for x in chosen if x not in names]
        if unknown or not chosen:
            raise ScenarioError(f"{where(file, 'stages', k)} = {list(chosen)}: unknown stage "
                                f"{unknown[0] if unknown else 'none given'}; the stages are "
                                f"{', '.join(names)}.")
    for r in s.output.rasters:
        if r.startswith(STAGE_RASTER) and r[len(STAGE_RASTER):] not in names:
            raise ScenarioError(f"{where(file, 'output', 'rasters')}: {r!r} names no stage; "
                                f"the stages are {', '.join(names)}.")
    for k in ("initial_distribution", "dispersal_fraction"):
        v = getattr(st, k)
        if isinstance(v, tuple) and len(v) != n:
            raise ScenarioError(f"{where(file, 'stages', k)} = {list(v)}: {len(v)} values for "
                                f"{n} stages ({', '.join(names)}); give one per stage.")
    init = st.initial_distribution
    if isinstance(init, tuple) and not math.isclose(sum(init), 1.0, abs_tol=1e-6):
        raise ScenarioError(f"{where(file, 'stages', 'initial_distribution')} = {list(init)}: "
                            "the fractions must sum to 1.")
    if st.dispersal_fraction is not None and s.dispersal.fraction > 0:
        raise ScenarioError(f"{where(file, 'dispersal', 'fraction')} is replaced by [stages] "
                            "dispersal_fraction; give only one of them.")
    fractions = st.dispersal_fraction or (s.dispersal.fraction,)
    d = s.dispersal
    if max(fractions) > 0 and d.method == "kernel" and d.mean_distance_m is None:
        raise ScenarioError(f"{where(file, 'dispersal', 'mean_distance_m')} is required when "
                            f"individuals disperse ([stages] dispersal_fraction).")
    diag = matrices.diagnostics(t, f)
    growth = dataclasses.replace(s.growth, rate=math.log(diag.lam),
                                 survival=float(t.sum(axis=0) @ diag.stable_distribution))
    return dataclasses.replace(s, stages=st, growth=growth)


def _future_checks(file: Path, future: tuple, section: str) -> None:
    years = [f.year for f in future]
    if any(b <= a for a, b in zip(years, years[1:], strict=False)):
        raise ScenarioError(f"{where(file, section, 'future')}: the years {years} must "
                            f"increase.")


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
    t = (c.return_period_years.values[0],) if isinstance(c.return_period_years, Trend) \
        else c.return_period_years
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
        if isinstance(c.return_period_years, Trend):
            raise ScenarioError(f"{where(file, c.label, 'return_period_years')}: a return "
                                f"period that changes over the run needs a single magnitude "
                                f"(one {name}); {len(given)} given.")
        raise ScenarioError(f"{where(file, c.label, name)}: {len(given)} values for "
                            f"{len(t)} return periods {list(t)}; give one per return period.")
    if c.stage_m is not None and any(b < a for a, b in zip(c.stage_m, c.stage_m[1:],
                                                           strict=False)):
        raise ScenarioError(f"{where(file, c.label, 'stage_m')} = {list(c.stage_m)}: stages "
                            f"must not decrease with the return period.")


def _release_checks(file: Path, c: ReleaseConfig) -> None:
    if any(y != int(y) for y in c.years):
        raise ScenarioError(f"{where(file, c.label, 'years')} = {list(c.years)}: years must be "
                            "whole numbers.")


def _removal_checks(file: Path, c: RemovalConfig) -> None:
    if (c.fraction is None) == (c.count is None):
        raise ScenarioError(f"{where(file, c.label)}: give either fraction or count, not "
                            f"{'both' if c.count is not None else 'neither'}.")


KIND_CHECKS: dict[str, Callable[[Path, Any], None]] = {"fire": _fire_checks,
                                                       "flood": _flood_checks,
                                                       "release": _release_checks,
                                                       "removal": _removal_checks}
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
            raise not_known(loc, kind, tuple(kinds), f"known kinds: {known}")
        label = f"{name} #{i} ({kind})"
        keys = kinds[kind][1]
        body = {k: v for k, v in table.items() if k != "kind"}
        names = {k.name: k for k in keys}
        for key in body:
            if key not in names:
                raise ScenarioError(unknown_key(file, label, key, names))
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
    known = list(SECTIONS) + list(ARRAY_SECTIONS) + [UNCERTAINTY]
    for name in raw:
        if name not in known:
            guess = difflib.get_close_matches(name, known, n=1)
            hint = f"; did you mean [{guess[0]}]?" if guess else ""
            raise ScenarioError(f"{file}: unknown section [{name}]{hint} "
                                f"Known sections: {', '.join(known)}.")
    for name in ("run", "habitat", "growth"):
        if name not in raw:
            raise ScenarioError(f"{file}: section [{name}] is required.")
    if "stages" in raw and isinstance(raw["growth"], dict):
        for name in ("rate", "survival"):
            if name in raw["growth"]:
                raise ScenarioError(f"{where(file, 'growth', name)} is set by the [stages] "
                                    "matrix; remove it (model, theta, allee_density, "
                                    "stochastic and the env_ keys still apply).")
        # replaced from the matrix below (a new dict: a base's raw is merged into its plans)
        raw = {**raw, "growth": {**raw["growth"], "rate": 0.0}}
    if isinstance(raw.get("stages"), dict):
        leslie = [k for k in LESLIE_KEYS if k in raw["stages"]]
        given = [k for k in ("transitions", "fecundity") if k in raw["stages"]]
        if leslie and given:
            raise ScenarioError(f"{where(file, 'stages', given[0])}: give either transitions "
                                f"and fecundity or {', '.join(LESLIE_KEYS)}, not both.")
    sections: dict[str, Any] = {name: parse_section(file, name, raw.get(name, {}))
                                for name in SECTIONS if name != "stages" or name in raw}
    digest = (hashlib.sha256(chunks[0]) if len(chunks) == 1 else
              hashlib.sha256(b"".join(hashlib.sha256(c).digest() for c in chunks)))
    scenario = Scenario(path=file, sha256=digest.hexdigest(), **sections)
    scenario = cross_checks(file, scenario)
    scenario = dataclasses.replace(
        scenario, disturbances=parse_tables(file, "disturbance", raw.get("disturbance", [])),
        actions=parse_tables(file, "action", raw.get("action", [])),
        uncertainty=(parse_uncertainty(file, raw[UNCERTAINTY]) if UNCERTAINTY in raw
                     else None))
    _managed_stages(file, scenario)
    return scenario


def _managed_stages(file: Path, s: Scenario) -> None:
    """The stage of every release and removal is a stage of [stages] (none without it)."""
    names = s.stages.names or () if s.stages is not None else ()
    for c in s.actions:
        if c.kind not in ("release", "removal"):
            continue
        if c.stage is None and names:
            raise ScenarioError(f"{where(file, c.label, 'stage')} is required with [stages]: "
                                f"one of {', '.join(names)}.")
        if c.stage is not None and c.stage not in names:
            raise ScenarioError(f"{where(file, c.label, 'stage')} = {c.stage!r} is not a stage"
                                + (f"; the stages are {', '.join(names)}." if names else
                                   " (no [stages] section: leave stage out)."))


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

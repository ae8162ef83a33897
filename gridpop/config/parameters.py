"""Uncertain parameters against the plans: which key each names (:func:`check_parameters`) and
a plan with one set of values (:func:`apply_parameters`), validated as when loading."""

from __future__ import annotations

import dataclasses
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import ScenarioError, where
from .kinds import ARRAY_SECTIONS
from .load import KIND_CHECKS, Scenario, cross_checks, load_scenario
from .schema import Key
from .sections import SECTIONS
from .uncertainty import (
    PARAMETERS,
    SECTION,
    UNCERTAIN_SECTIONS,
    UncertaintyConfig,
    parse_uncertainty,
)
from .values import check_value


@dataclass(frozen=True)
class Target:
    """Where a parameter lands in one plan: a section key, or the key of some tables."""

    section: str  # a section name, or "action" / "disturbance"
    key: Key
    tables: tuple[int, ...] = ()  # 0-based indices of the [[action]]/[[disturbance]] tables
    # one entry of a [stages] list or matrix: the key holding it and (stage,) or (row, column)
    entry: tuple[str, tuple[int, ...]] | None = None


MATRICES = ("transitions", "fecundity")
WEIBULL = ("weibull_shape", "mean_lifespan_years")
STAGE_FORMS = ('"stages.transitions.TO.FROM" or "stages.fecundity.TO.FROM" (stage names: the '
               'entry in row TO, column FROM), "stages.dispersal_fraction.STAGE", or '
               '"stages.weibull_shape" / "stages.mean_lifespan_years" (age-structured plans)')


def _stage_targets(scenario: Scenario, parts: list[str]) -> tuple[list[Target], str | None]:
    """The target of a ``stages.…`` parameter: an entry of the stage matrices by stage names,
    or a Weibull key of an age-structured plan (whose matrices are built from those keys)."""
    st = scenario.stages
    if st is None:
        return [], "the plan has no [stages] section"
    keys = {x.name: x for x in SECTIONS["stages"][1]}
    leslie = st.ages is not None
    if len(parts) == 1 and parts[0] in WEIBULL:
        if not leslie:
            return [], f"[stages] {parts[0]} needs an age-structured plan (ages = N)"
        return [Target("stages", keys[parts[0]])], None
    names = st.names or ()
    if len(parts) == 2 and parts[0] == "dispersal_fraction":
        if st.dispersal_fraction is None:
            return [], ("the plan has no [stages] dispersal_fraction (its [dispersal] fraction "
                        'is "dispersal.fraction")')
        if parts[1] not in names:
            return [], f"{parts[1]!r} is not a stage; the stages are {', '.join(names)}"
        element = dataclasses.replace(keys["dispersal_fraction"],
                                      name=f"dispersal_fraction[{parts[1]}]", type="float")
        return [Target("stages", element,
                       entry=("dispersal_fraction", (names.index(parts[1]),)))], None
    if len(parts) == 3 and parts[0] in MATRICES:
        matrix, row, column = parts
        if leslie:
            return [], ("the plan's matrices are built from its ages; make "
                        f"{' or '.join('stages.' + k for k in WEIBULL)} uncertain instead")
        unknown = [x for x in (row, column) if x not in names]
        if unknown:
            return [], f"{unknown[0]!r} is not a stage; the stages are {', '.join(names)}"
        element = dataclasses.replace(keys[matrix], name=f"{matrix}[{row}][{column}]",
                                      type="float",
                                      high=1.0 if matrix == "transitions" else None)
        return [Target("stages", element,
                       entry=(matrix, (names.index(row), names.index(column))))], None
    return [], f"expected {STAGE_FORMS}"


def _targets(scenario: Scenario, name: str) -> tuple[list[Target], str | None]:
    """The targets of a parameter in one plan, or why it names no key (a message)."""
    parts = name.split(".")
    if parts[0] == "stages":
        return _stage_targets(scenario, parts[1:])
    if len(parts) == 2 and parts[0] in SECTIONS:
        section, k = parts
        if section not in UNCERTAIN_SECTIONS:
            return [], (f"[{section}] keys cannot be uncertain (only "
                        f"{', '.join(UNCERTAIN_SECTIONS)}, stages, action and disturbance)")
        keys = {x.name: x for x in SECTIONS[section][1]}
        if k not in keys:
            return [], f"[{section}] has no key {k!r}; known: {', '.join(keys)}"
        if section == "growth" and k in ("rate", "survival") and scenario.stages is not None:
            return [], (f"[growth] {k} is set by the plan's [stages] matrix; make its "
                        'entries uncertain instead, e.g. "stages.fecundity.juvenile.adult"')
        return [Target(section, keys[k])], None
    if len(parts) == 3 and parts[0] in ARRAY_SECTIONS:
        array, which, k = parts
        tables = scenario.actions if array == "action" else scenario.disturbances
        kinds = ARRAY_SECTIONS[array][1]
        if which.isdigit():
            i = int(which) - 1
            if not 0 <= i < len(tables):
                return [], f"the plan has {len(tables)} [[{array}]] tables, no number {which}"
            idx: tuple[int, ...] = (i,)
        elif which in kinds:
            idx = tuple(i for i, t in enumerate(tables) if t.kind == which)
            if not idx:
                return [], f"the plan has no [[{array}]] of kind {which!r}"
        else:
            return [], (f"{which!r} is neither a table number nor a kind (known kinds: "
                        f"{', '.join(kinds)})")
        out = []
        for i in idx:
            keys = {x.name: x for x in kinds[tables[i].kind][1]}
            if k not in keys:
                return [], f"[{tables[i].label}] has no key {k!r}; known: {', '.join(keys)}"
            out.append(Target(array, keys[k], (i,)))
        return out, None
    return [], ('expected "section.key", "action.KIND.key", "action.N.key", '
                f'"disturbance.KIND.key", {STAGE_FORMS}')


def check_parameters(file: Path | str, uncertainty: UncertaintyConfig,
                     plans: list[Scenario]) -> None:
    """Check every uncertain parameter against the plans before anything runs.

    Raises
    ------
    ScenarioError
        Naming the parameter: it names no numeric key in any plan, or its distribution reaches
        values the key does not allow (say a lognormal for a probability).
    """
    for p in uncertainty.parameters:
        loc = where(file, PARAMETERS, repr(p.name))
        found, reasons = [], []
        for s in plans:
            targets, why = _targets(s, p.name)
            found += targets
            if why:
                reasons.append(f"{s.path.name}: {why}")
        if not found:
            raise ScenarioError(f"{loc} names no key of the plans ({'; '.join(reasons)}).")
        k = found[0].key
        if k.type != "float":
            raise ScenarioError(f"{loc}: {k.name} is {k.allowed()}; only number keys (not "
                                "integers, choices or paths) can be uncertain.")
        low, high, reached = p.support()
        too_low = k.low is not None and (low < k.low or (low == k.low and k.low_open and reached))
        too_high = k.high is not None and (high > k.high
                                           or (high == k.high and k.high_open))
        if too_low or too_high:
            span = f"[{low:g}, {high:g}]" if reached else f"({low:g}, {high:g})"
            raise ScenarioError(f"{loc} = {p.describe()} reaches values in {span}; {k.name} "
                                f"must be {k.allowed()}.")
        for s in plans:  # the ends of the range pass every cross check of the plans
            for value in (low, high) if reached else ():
                try:
                    apply_parameters(s, {p.name: value})
                except ScenarioError as exc:
                    raise ScenarioError(f"{loc} = {p.describe()}: at {value:g}, the plan "
                                        f"fails its checks: {exc}") from None


def apply_parameters(scenario: Scenario, values: dict[str, float]) -> Scenario:
    """The scenario with some parameters set (keys as in ``[uncertainty.parameters]``),
    validated as when loading; a parameter that names no key of this plan leaves it as is."""
    for name, value in values.items():
        targets, _ = _targets(scenario, name)
        for t in targets:
            if t.entry is not None:
                assert scenario.stages is not None
                k, index = t.entry
                entries = np.array(getattr(scenario.stages, k), dtype=float)
                entries[index] = value
                scenario = scenario.replace("stages", **{k: entries.tolist()})
                continue
            if not t.tables:
                scenario = scenario.replace(t.section, **{t.key.name: value})
                continue
            attr = "actions" if t.section == "action" else "disturbances"
            tables: list[Any] = list(getattr(scenario, attr))
            for i in t.tables:
                old = tables[i]
                new = dataclasses.replace(old, **{t.key.name: check_value(
                    scenario.path, old.label, t.key, value)})
                if new.kind in KIND_CHECKS:
                    KIND_CHECKS[new.kind](scenario.path, new)
                tables[i] = new
            changed: dict[str, Any] = {attr: tuple(tables)}
            scenario = dataclasses.replace(scenario, **changed)
    return cross_checks(scenario.path, scenario)


def load_study(paths) -> tuple[list[Scenario], UncertaintyConfig, Path]:
    """The plans and the ``[uncertainty]`` section of ``gridpop sensitivity A.toml [B.toml ...]``.

    A file whose only section is ``[uncertainty]`` gives the design and is not a plan; a plan
    file may hold the section too. Every ``[uncertainty]`` given must be the same (the design
    is drawn once for all plans). Returns the plans, the section and the first file that holds
    it; the parameters are checked against the plans (:func:`check_parameters`).

    Raises
    ------
    ScenarioError
        No plan, no ``[uncertainty]`` section, two different ones, or any error of loading a
        plan or checking a parameter.
    """
    plans, found = [], []
    for path in paths:
        file = Path(path).expanduser().resolve()
        try:
            raw = tomllib.loads(file.read_text(encoding="utf-8")) if file.is_file() else None
        except (tomllib.TOMLDecodeError, UnicodeDecodeError):
            raw = None  # load_scenario says what is wrong
        if raw is not None and list(raw) == [SECTION]:
            found.append((file, parse_uncertainty(file, raw[SECTION])))
            continue
        s = load_scenario(file)
        plans.append(s)
        if s.uncertainty is not None:
            found.append((file, s.uncertainty))
    if not plans:
        raise ScenarioError(f"{', '.join(map(str, paths))}: no plan among the files (a file "
                            f"holding only [{SECTION}] is the design, not a plan).")
    if not found:
        raise ScenarioError(f"{', '.join(str(s.path) for s in plans)}: no [{SECTION}] section; "
                            "give the uncertain parameters in one of the files (docs/scenario.md"
                            f", [{SECTION}]).")
    (file, u), *others = found
    for other, v in others:
        if v != u:
            raise ScenarioError(f"{file} and {other}: the [{SECTION}] sections differ; the "
                                "design is drawn once for every plan, so give it once or the "
                                "same in each file.")
    check_parameters(file, u, plans)
    return plans, u, file

"""Documents generated from the schema: the scenario reference (``docs/scenario.md``) and the
commented template written by ``gridpop init``."""

from __future__ import annotations

import textwrap

from .kinds import ARRAY_SECTIONS
from .schema import REQUIRED, Key
from .sections import SECTIONS
from .uncertainty import ARGUMENTS, DOC, KEYS, PARAMETERS, SECTION

UNCERTAINTY_EXAMPLE = (
    '"growth.rate" = { uniform = [0.2, 0.5] }',
    '"dispersal.mean_distance_m" = { triangular = [200, 400, 900] }   # min, mode, max',
    '"habitat.capacity_per_ha" = { lognormal = [2.0, 0.3] }           # median, sd of log',
    '"action.barrier.crossing_mortality" = { uniform = [0.8, 1.0] }   # every barrier',
)
PARAMETER_NAMES = (
    'Each line of [uncertainty.parameters] names a number key: "section.key" (sections habitat, '
    'initial, growth, dispersal), "action.KIND.key" or "disturbance.KIND.key" (every table of '
    'that kind) or "action.N.key" / "disturbance.N.key" (the N-th table, from 1); with '
    '[stages], "stages.transitions.TO.FROM" or "stages.fecundity.TO.FROM" (one matrix entry by '
    'stage names, row TO, column FROM), "stages.dispersal_fraction.STAGE", or '
    '"stages.weibull_shape" / "stages.mean_lifespan_years" (age-structured plans). It gives one '
    "distribution. The range must lie inside the key's allowed values, and a range that makes "
    "a column of transitions sum above 1 is refused. Only gridpop sensitivity reads this "
    "section; gridpop run and compare ignore it."
)


def _toml_value(v: object) -> str:
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


OPTIONAL_SECTIONS = ("stages", "sex")
"""Sections the template shows commented out as a whole: given, they change the model."""


def template_toml() -> str:
    """A commented scenario template generated from the schema (``gridpop init``).

    The ``[stages]`` and ``[sex]`` sections (stage- or age-structured life history, two sexes) and
    the ``[[disturbance]]`` and ``[[action]]`` examples are commented out as a whole: removing one
    leading ``# `` from the lines of an example gives a table with its required keys set and its
    optional keys (at their defaults) still commented out.
    """
    lines = ["# gridpop scenario. Paths are relative to this file.",
             "# Every key is documented in docs/scenario.md; defaults are shown commented out.", ""]
    for name, (doc, keys) in SECTIONS.items():
        block = [f"[{name}]  # {doc}"] + _key_lines(keys)
        if name in OPTIONAL_SECTIONS:  # commented out as a whole, like the examples below
            block = [f"# {line}" for line in block]
        lines += block + [""]
    for name, (doc, kinds) in ARRAY_SECTIONS.items():
        lines += ["# " + line for line in
                  textwrap.wrap(f"{doc} Known kinds: {', '.join(kinds)}.", 96)] + [""]
        for kind, (kind_doc, keys) in kinds.items():
            block = [f"[[{name}]]"]
            block += ["# " + line for line in textwrap.wrap(kind_doc, 96)]
            block.append(f"kind = {_toml_value(kind)}")
            block += _key_lines(keys)
            lines += ["# " + line for line in block] + [""]
    block = [f"[{SECTION}]"] + ["# " + line for line in textwrap.wrap(DOC, 96)]
    block += _key_lines(KEYS) + ["", f"[{PARAMETERS}]"]
    block += ["# " + line for line in textwrap.wrap(PARAMETER_NAMES, 96)]
    block += list(UNCERTAINTY_EXAMPLE)
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
           "Generated from the section classes in `gridpop/config/` "
           "(`python -m gridpop.config > docs/scenario.md`).",
           "Paths are relative to the scenario file.", ""]
    for name, (doc, keys) in SECTIONS.items():
        out += [f"## [{name}]", "", doc, ""] + _key_table(keys) + [""]
    for name, (doc, kinds) in ARRAY_SECTIONS.items():
        out += [f"## [[{name}]]", "", f"{doc} Each table needs `kind`, one of "
                f"{', '.join(f'`{k!r}`' for k in kinds)}; the other keys depend on the kind.", ""]
        for kind, (kind_doc, keys) in kinds.items():
            out += [f"### kind = \"{kind}\"", "", kind_doc, ""] + _key_table(keys) + [""]
    out += [f"## [{SECTION}]", "", DOC, ""] + _key_table(KEYS) + [""]
    out += [f"### [{PARAMETERS}]", "", PARAMETER_NAMES, "", "| distribution | arguments |",
            "|---|---|"] + [f"| `{d}` | {a} |" for d, a in ARGUMENTS.items()]
    out += ["", "```toml", f"[{PARAMETERS}]", *UNCERTAINTY_EXAMPLE, "```", ""]
    return "\n".join(out)

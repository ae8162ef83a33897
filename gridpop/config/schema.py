"""Scenario keys as a table, generated from the fields of the section dataclasses.

A section or kind is a frozen dataclass whose fields are its keys: the annotation gives the type
and, through ``Literal``, the allowed choices; :func:`key` puts the documentation, unit, bounds and
example in the field's metadata. :func:`keys_of` reads them back as :class:`Key` records, the
table that validation, the reference and the template work from.
"""

from __future__ import annotations

import builtins
import dataclasses
import types
import typing
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Final, Literal, Union, get_args, get_origin

import numpy as np

REQUIRED: Final = object()
"""Default marker for keys that must be given."""

META: Final = "gridpop.key"
"""Name under which :func:`key` keeps a field's :class:`KeyInfo` in its metadata."""

SCALARS: Final[dict[object, str]] = {int: "int", float: "float", bool: "bool", str: "str",
                                     Path: "path"}
LISTS: Final = {"str": "strlist", "float": "floatlist", "path": "pathlist",
                "floatlist": "floatmatrix"}


@dataclass(frozen=True)
class Trend:
    """A value that changes over the run: ``(year, value)`` pairs in increasing year, linear in
    between and held before the first and after the last. In a scenario file it is written
    ``{ start = 30, end = 15 }`` (linear from year 0 to the run's last year, ``years`` then
    ``(0, 1)`` in units of the run and ``over_run`` true) or as a list of ``[year, value]``
    pairs."""

    years: tuple[float, ...]
    values: tuple[float, ...]
    over_run: bool = False

    def at(self, year: float, run_years: int) -> float:
        """The value in year ``year`` of a run of ``run_years`` steps (year t is the step from
        census year t to t + 1, so the last year is ``run_years - 1``)."""
        x = year / max(run_years - 1, 1) if self.over_run else year
        return float(np.interp(x, self.years, self.values))

    def describe(self) -> str:
        if self.over_run:
            return f"{self.values[0]:g} in year 0 to {self.values[1]:g} in the last year"
        return ", ".join(f"{v:g} in year {y:g}" for y, v in zip(self.years, self.values,
                                                                 strict=True))


@dataclass(frozen=True)
class KeyInfo:
    """What a key's annotation does not say: its documentation, unit, bounds and example."""

    doc: str
    unit: str = ""
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    example: object = None


def key(default: object = REQUIRED, *, doc: str, unit: str = "", low: float | None = None,
        high: float | None = None, low_open: bool = False, high_open: bool = False,
        example: object = None) -> Any:
    """A dataclass field for one scenario key (no default given: the key is required)."""
    info = KeyInfo(doc, unit, low, high, low_open, high_open, example)
    if default is REQUIRED:
        return dataclasses.field(metadata={META: info})
    return dataclasses.field(default=default, metadata={META: info})


@dataclass(frozen=True)
class Key:
    """One scenario key: its type, default, unit, allowed values and documentation."""

    name: str
    type: str  # "int", "float", "bool", "str", "path", "strlist", "floatlist", "pathlist",
    # "floatmatrix", "tables"
    default: object
    doc: str
    unit: str = ""
    choices: tuple[str, ...] = ()
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    example: object = None
    changing: bool = False  # also accepts a Trend
    table: builtins.type | None = None  # type "tables": the dataclass of each table

    def allowed(self) -> str:
        if self.choices and self.type == "floatlist":
            return (" or ".join(repr(c) for c in self.choices) + " or "
                    + dataclasses.replace(self, choices=()).allowed())
        if self.choices:
            return "one of " + ", ".join(repr(c) for c in self.choices)
        if self.type == "tables":
            assert self.table is not None
            return ("tables, each with " + ", ".join(f"{k.name} ({k.allowed()})"
                                                     for k in keys_of(self.table)))
        kinds = {
            "int": "an integer",
            "float": "a number",
            "bool": "true or false",
            "str": "a string",
            "path": "a file path (relative to the scenario file)",
            "strlist": "a list of strings",
            "floatlist": "a number or a list of numbers",
            "pathlist": "a file path or a list of file paths",
            "floatmatrix": "a list of rows, each a list of numbers",
        }
        text = kinds[self.type]
        if self.low is not None or self.high is not None:
            lo = "" if self.low is None else f"{self.low:g} {'<' if self.low_open else '<='} "
            hi = "" if self.high is None else f" {'<' if self.high_open else '<='} {self.high:g}"
            many = self.type in ("floatlist", "floatmatrix")
            text += f" with {lo}{'values' if many else 'value'}{hi}"
        if self.changing:
            text += (", or a change over the run: { start = ..., end = ... } (linear from year "
                     "0 to the last year) or a list of [year, value] pairs")
        return text


def key_type(hint: object) -> tuple[str, tuple[str, ...]]:
    """Key type name and choices of a field annotation; ``X | None`` and ``X | Trend`` count as
    ``X``; a tuple of dataclasses is ``"tables"``."""
    origin, args = get_origin(hint), get_args(hint)
    if origin is Union or origin is types.UnionType:
        inner = [a for a in args if a is not type(None) and a is not Trend]
        if len(inner) == 2:  # Literal[...] | tuple[float, ...]: a choice or a list of numbers
            (choice,) = (a for a in inner if get_origin(a) is Literal)
            return "floatlist", get_args(choice)
        return key_type(inner[0])
    if origin is Literal:
        return "str", args
    if origin is tuple:
        item, _ = args  # tuple[item, ...]
        if dataclasses.is_dataclass(item):
            return "tables", ()
        name, choices = key_type(item)
        return LISTS[name], choices
    return SCALARS[hint], ()


def doc_of(cls: type) -> str:
    """A section's or kind's description: its class docstring on one line."""
    return " ".join((cls.__doc__ or "").split())


def keys_of(cls: type, skip: tuple[str, ...] = ()) -> tuple[Key, ...]:
    """The keys of a section or kind dataclass, in field order (fields in ``skip`` left out)."""
    hints = typing.get_type_hints(cls)
    out = []
    for f in dataclasses.fields(cls):
        if f.name in skip:
            continue
        info: KeyInfo = f.metadata[META]
        hint = hints[f.name]
        kind, choices = key_type(hint)
        default = REQUIRED if f.default is dataclasses.MISSING else f.default
        table = get_args(hint)[0] if kind == "tables" else None
        out.append(Key(f.name, kind, default, info.doc, info.unit, choices, info.low, info.high,
                       info.low_open, info.high_open, info.example, Trend in get_args(hint),
                       table))
    return tuple(out)

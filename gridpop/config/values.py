"""Checking one value against its key: type, choices and bounds (and a change over the run
for keys that allow one); the messages for unknown keys and choices."""

from __future__ import annotations

import dataclasses
import difflib
import math
from pathlib import Path
from typing import Any

from ..errors import ScenarioError, where
from .schema import Key, Trend
from .sections import STAGE_RASTER


def unknown_key(file: Path | str, section: str, name: str, known: dict[str, Key]) -> str:
    guess = difflib.get_close_matches(name, list(known), n=1)
    hint = f"; did you mean {guess[0]!r}?" if guess else ""
    return (f"{where(file, section)}: unknown key {name!r}{hint} "
            f"Known keys: {', '.join(known)}.")


def not_known(loc: str, value: object, choices: tuple[str, ...], expected: str) -> ScenarioError:
    guess = difflib.get_close_matches(str(value), choices, n=1)
    hint = f" (did you mean {guess[0]!r}?)" if guess else ""
    return ScenarioError(f"{loc} = {value!r} is not known{hint}; {expected}.")


def check_value(file: Path | str, section: str, key: Key, value: object) -> Any:
    """The value of one key, checked against its type, choices and bounds (a number or list
    of numbers as float, a list as a tuple; paths not yet resolved)."""
    loc = where(file, section, key.name)
    bad = f"{loc} = {value!r} is not allowed; expected {key.allowed()}."
    if key.changing and (isinstance(value, dict) or (isinstance(value, list) and value
                                                     and isinstance(value[0], list))):
        return _trend(file, section, key, value, bad)
    if key.type == "tables":
        if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
            raise ScenarioError(f"{bad} Write [[{section}.{key.name}]] above each entry.")
        return tuple(value)  # each table is checked by _tables
    if key.type == "bool":
        if not isinstance(value, bool):
            raise ScenarioError(bad)
        return value
    if key.type == "floatlist" and isinstance(value, str):
        if value in key.choices:
            return value
        raise ScenarioError(bad)
    if key.type == "floatmatrix":
        if not isinstance(value, list) or not value or not all(
                isinstance(row, list) and row for row in value):
            raise ScenarioError(bad)
        one = dataclasses.replace(key, type="float")
        return tuple(tuple(check_value(file, section, one, v) for v in row) for row in value)
    if key.type == "floatlist":
        items = value if isinstance(value, list) else [value]
        if not items:
            raise ScenarioError(bad)
        one = dataclasses.replace(key, type="float", choices=())
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
            if key.choices and v not in key.choices and not (
                    key.name == "rasters" and v.startswith(STAGE_RASTER)):
                raise ScenarioError(f"{loc}: {v!r} is not known; expected {key.allowed()}.")
        return tuple(value)
    if key.type in ("str", "path"):
        if not isinstance(value, str) or not value:
            raise ScenarioError(bad)
        if key.choices and value not in key.choices:
            raise not_known(loc, value, key.choices, f"expected {key.allowed()}")
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


def _trend(file: Path | str, section: str, key: Key, value: dict | list, bad: str) -> Trend:
    """``{ start = a, end = b }`` or ``[[year, value], ...]`` as a :class:`Trend`, each value
    checked against the key's bounds."""
    one = dataclasses.replace(key, type="float", changing=False)
    if isinstance(value, dict):
        if set(value) != {"start", "end"}:
            raise ScenarioError(bad)
        values = tuple(check_value(file, section, one, value[k]) for k in ("start", "end"))
        return Trend((0.0, 1.0), values, over_run=True)
    if not all(isinstance(p, list) and len(p) == 2 for p in value):
        raise ScenarioError(bad)
    years = tuple(check_value(file, section, dataclasses.replace(one, low=0, high=None,
                                                                 low_open=False), p[0])
                  for p in value)
    if any(b <= a for a, b in zip(years, years[1:], strict=False)):
        raise ScenarioError(f"{bad} The years must increase.")
    return Trend(years, tuple(check_value(file, section, one, p[1]) for p in value))

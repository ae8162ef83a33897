"""Checking one value against its key: type, choices and bounds; the messages for unknown keys
and choices."""

from __future__ import annotations

import dataclasses
import difflib
import math
from pathlib import Path
from typing import Any

from ..errors import ScenarioError, where
from .schema import Key


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

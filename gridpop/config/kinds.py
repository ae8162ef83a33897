"""The kinds of the array tables ``[[disturbance]]`` and ``[[action]]``: one frozen, typed
dataclass each.

Each class has ``label`` (e.g. ``"disturbance #2 (flood)"``, which locates the table in messages:
pass it as the section to :func:`gridpop.errors.where`), ``kind`` (a one-choice ``Literal``) and
then its keys; its docstring is the kind's description. :data:`ARRAY_SECTIONS` is generated from
the unions :data:`DisturbanceConfig` and :data:`ActionConfig`.
"""

from __future__ import annotations

import typing
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal, get_args

from .schema import Key, Trend, doc_of, key, keys_of

FireSize = Literal["fraction", "exponential", "power_law"]
Recovery = Literal["linear", "exponential"]

FIRE_SIZES: tuple[FireSize, ...] = get_args(FireSize)
RECOVERY: tuple[Recovery, ...] = get_args(Recovery)


def _mortality(what: str) -> Any:
    return key(doc=f"Fraction of the individuals in a {what} cell that die (binomial in "
               "stochastic mode).", low=0, high=1, example=0.5)


def _capacity_loss(what: str) -> Any:
    return key(0.0, doc=f"Fraction of a {what} cell's capacity lost in the event year. A cell "
               "hit again before it recovers keeps the larger share: the remaining loss L "
               "becomes 1 - (1 - L)(1 - capacity_loss).", low=0, high=1)


def _recovery() -> Any:
    return key("linear", doc="How lost capacity comes back: linear (the loss shrinks to 0 over "
               "recovery_years) or exponential (the loss shrinks by the factor e every "
               "recovery_years).")


def _recovery_years() -> Any:
    return key(10.0, doc="Years to full recovery (linear) or the time constant of the recovery "
               "(exponential).", unit="years", low=0, low_open=True)


@dataclass(frozen=True, kw_only=True)
class FireConfig:
    """Fires ignite in each habitat patch as a Poisson process and spread from the ignition cell
    over burnable cells until they reach a size drawn from the size distribution or run out of
    fuel; they may cross into a neighbouring patch where burnable cells connect. The yearly
    number of ignitions in a patch of area A has mean -ln(1 - 1/RI) h A / E[min(S, A)] (RI the
    return interval, h the patch mean of the hazard, S the fire size): ignitions scale with the
    patch area over the mean fire size, and a fire that burns the whole patch comes with
    probability exactly 1/RI a year."""

    label: str
    kind: Literal["fire"]
    return_interval_years: float | Trend = key(
        doc="Fire cycle of a patch at hazard 1: the mean number of years for fires to burn an "
        "area equal to the patch (so the long-run fraction burned per year is 1 / "
        "return_interval_years). May change over the run (a year's fires follow that year's "
        "value).", unit="years", low=1, low_open=True, example=50.0)
    size_distribution: FireSize = key("fraction", doc="Fire size: fraction (a fixed fraction of "
                                      "the ignition patch), exponential (mean mean_size_ha) or "
                                      "power_law (density ~ size^-size_exponent between "
                                      "min_size_ha and max_size_ha).")
    size_fraction: float = key(1.0, doc="Fire size as a fraction of the ignition patch "
                               "(size_distribution = fraction).", low=0, high=1, low_open=True)
    mean_size_ha: float | None = key(None, doc="Mean fire size (size_distribution = "
                                     "exponential).", unit="ha", low=0, low_open=True,
                                     example=20.0)
    min_size_ha: float | None = key(None, doc="Smallest fire (size_distribution = power_law).",
                                    unit="ha", low=0, low_open=True, example=1.0)
    max_size_ha: float | None = key(None, doc="Largest fire (size_distribution = power_law).",
                                    unit="ha", low=0, low_open=True, example=500.0)
    size_exponent: float | None = key(None, doc="Exponent of the fire-size density "
                                      "(size_distribution = power_law).", low=0, low_open=True,
                                      example=1.5)
    hazard: Path | None = key(None, doc="Fuel / flammability raster: relative ignition rate (1 = "
                              "the rate of return_interval_years) and spread probability "
                              "min(1, hazard) into a cell; 0 or nodata does not burn. Without it "
                              "every habitat cell burns with hazard 1 and other cells do not "
                              "burn.", example="fuel.tif")
    mortality: float = _mortality("burned")
    capacity_loss: float = _capacity_loss("burned")
    recovery: Recovery = _recovery()
    recovery_years: float = _recovery_years()


@dataclass(frozen=True, kw_only=True)
class FloodConfig:
    """Floods come in years with an annual exceedance probability 1 / return period. One uniform
    number per replicate-year, shared by every patch, gives the year's return period T = 1/u
    (regional, correlated events); the year floods when T reaches the smallest return period
    given: the zone of the largest return period <= T (zones are nested: each includes the
    smaller ones), or the terrain cells below the stage interpolated at T (linear in ln T, not
    beyond the largest given)."""

    label: str
    kind: Literal["flood"]
    return_period_years: tuple[float, ...] | Trend = key(
        doc="Return period of each flood magnitude, increasing (e.g. [10, 100]). May change "
        "over the run with a single magnitude (one zone or stage).", unit="years", low=1,
        low_open=True, example=[10.0, 100.0])
    zone: tuple[Path, ...] | None = key(None, doc="Flood-zone layer of each magnitude: a raster "
                                        "(cells > 0 flood) or a polygon file. Give zone or "
                                        "terrain.", example=["flood10.gpkg", "flood100.gpkg"])
    terrain: Path | None = key(None, doc="Elevation raster: cells below the year's stage flood. "
                               "Give zone or terrain.", example="dem.tif")
    stage_m: tuple[float, ...] | None = key(None, doc="Water level of each magnitude, in the "
                                            "terrain's units (with terrain), not decreasing.",
                                            unit="m", example=[2.0, 3.5])
    mortality: float = _mortality("flooded")
    capacity_loss: float = _capacity_loss("flooded")
    recovery: Recovery = _recovery()
    recovery_years: float = _recovery_years()


def _all_touched(default: bool) -> Any:
    return key(default, doc="Take every cell a vector feature touches, not only cells whose "
               "centre it covers.")


def _start_year() -> Any:
    return key(0, doc="First year of the change: year t is the step from census year t to t+1 "
               "(0 = the first step).", unit="year", low=0)


@dataclass(frozen=True, kw_only=True)
class AreaAction:
    """What every action kind has first: its label and kind, and the area it applies to. Each
    kind narrows ``kind`` to its own name (a field keeps its place when a subclass redefines
    it)."""

    label: str
    kind: str
    area: Path = key(doc="Where the action applies: a vector file (polygons, lines) or a raster "
                     "(cells > 0).", example="action.gpkg")
    buffer_m: float = key(0.0, doc="Buffer vector features by this distance first (gives lines a "
                          "width). Vector areas only.", unit="m", low=0)
    all_touched: bool = _all_touched(False)


@dataclass(frozen=True, kw_only=True)
class ReserveConfig(AreaAction):
    """Protects habitat: multiplies capacity, exempts the area from every habitat_loss action,
    and may suppress fire."""

    kind: Literal["reserve"]
    capacity_multiplier: float = key(1.0, doc="Multiplier on the capacity of the area.", low=0)
    ignition_multiplier: float = key(1.0, doc="Multiplier on the fire ignition rate in the area "
                                     "(fire suppression < 1).", low=0)
    spread_multiplier: float = key(1.0, doc="Multiplier on the probability that a fire spreads "
                                   "into a cell of the area.", low=0)


@dataclass(frozen=True, kw_only=True)
class CorridorConfig(AreaAction):
    """Sets or raises suitability along the area and lowers dispersal resistance there."""

    kind: Literal["corridor"]
    target_suitability: float | None = key(None, doc="Suitability along the corridor (cells "
                                           "already better keep theirs). Not given: suitability "
                                           "unchanged.", low=0, high=1, example=0.6)
    resistance_multiplier: float = key(1.0, doc="Multiplier on dispersal resistance in the area "
                                       "(< 1 eases movement).", low=0, low_open=True)


@dataclass(frozen=True, kw_only=True)
class BarrierConfig(AreaAction):
    """A line or area dispersers cross only with a mortality (roads, fences)."""

    kind: Literal["barrier"]
    all_touched: bool = _all_touched(True)
    crossing_mortality: float = key(1.0, doc="Probability that a disperser dies entering a "
                                    "barrier cell (1 = impassable).", low=0, high=1)


@dataclass(frozen=True, kw_only=True)
class RestorationConfig(AreaAction):
    """Suitability rises in the area from start_year to target_suitability over ramp_years."""

    kind: Literal["restoration"]
    target_suitability: float = key(doc="Suitability reached (cells already better keep "
                                    "theirs).", low=0, high=1, example=0.8)
    start_year: int = _start_year()
    ramp_years: int = key(10, doc="Years from start_year to the full target (0 = at once).",
                          unit="years", low=0)


@dataclass(frozen=True, kw_only=True)
class HabitatLossConfig(AreaAction):
    """Suitability falls in the area, outside every reserve, from start_year to
    target_suitability over ramp_years."""

    kind: Literal["habitat_loss"]
    target_suitability: float = key(0.0, doc="Suitability left (cells already worse keep "
                                    "theirs).", low=0, high=1)
    start_year: int = _start_year()
    ramp_years: int = key(0, doc="Years from start_year to the full loss (0 = at once).",
                          unit="years", low=0)


def _stage() -> Any:
    return key(None, doc="Stage of [stages] concerned (required with [stages]; without it, "
               "every individual).", example="adult")


@dataclass(frozen=True, kw_only=True)
class ReleaseConfig(AreaAction):
    """Individuals added (captive-bred or translocated) in the given years, spread over the
    area's habitat cells in proportion to capacity, after the year's disturbance and before
    growth."""

    kind: Literal["release"]
    stage: str | None = _stage()
    count: int = key(doc="Individuals released in each of the years.", low=1, example=60)
    years: tuple[float, ...] = key(doc="Years of the releases: year t is the step from census "
                                   "year t to t+1 (whole numbers, 0 = the first step).",
                                   unit="year", low=0, example=[2, 3, 4])
    source_area: Path | None = key(None, doc="Translocation: the individuals are taken from the "
                                   "wild there (as many as are present, up to count), a vector "
                                   "file or raster as area.", example="donor.gpkg")


@dataclass(frozen=True, kw_only=True)
class RemovalConfig(AreaAction):
    """Individuals removed (culling, harvest, bycatch) from the area each year from start_year,
    after the year's disturbance and before growth. Give fraction or count."""

    kind: Literal["removal"]
    stage: str | None = _stage()
    fraction: float | None = key(None, doc="Fraction of the individuals in the area removed each "
                                 "year (binomial in stochastic mode).", low=0, high=1,
                                 example=0.1)
    count: int | None = key(None, doc="Individuals removed each year (as many as are present, "
                            "taken in proportion to the cells' numbers).", low=1)
    start_year: int = _start_year()


DisturbanceConfig = FireConfig | FloodConfig
"""A ``[[disturbance]]`` table, one class per kind."""

ActionConfig = (ReserveConfig | CorridorConfig | BarrierConfig | RestorationConfig
                | HabitatLossConfig | ReleaseConfig | RemovalConfig)
"""An ``[[action]]`` table, one class per kind."""

TABLE_FIELDS = ("label", "kind")
"""Fields of every kind class that are not keys of its table."""


def kind_name(cls: type) -> str:
    """The ``kind`` a class stands for: the one choice of its ``kind`` annotation."""
    (name,) = get_args(typing.get_type_hints(cls)["kind"])
    return str(name)


def _kinds(union: object) -> dict[str, type]:
    return {kind_name(cls): cls for cls in get_args(union)}


KIND_CLASSES: dict[str, dict[str, type]] = {
    "disturbance": _kinds(DisturbanceConfig), "action": _kinds(ActionConfig)}
"""Array-table name (``[[name]]``) -> kind -> its dataclass."""

ArrayTables = dict[str, tuple[str, tuple[Key, ...]]]



def _described(classes: dict[str, type]) -> ArrayTables:
    return {kind: (doc_of(cls), keys_of(cls, TABLE_FIELDS)) for kind, cls in classes.items()}


DISTURBANCE_KINDS = _described(KIND_CLASSES["disturbance"])
"""Disturbance kinds of ``[[disturbance]]``: kind -> (description, keys besides ``kind``)."""

ACTION_KINDS = _described(KIND_CLASSES["action"])
"""Management actions of ``[[action]]``: kind -> (description, keys besides ``kind``)."""

ARRAY_SECTIONS: dict[str, tuple[str, ArrayTables]] = {
    "disturbance": ("Disturbance regimes, any number, each with a kind.", DISTURBANCE_KINDS),
    "action": ("Management actions, any number, applied in the order given; a scenario is a base "
               "landscape plus its actions.", ACTION_KINDS),
}
"""Array-of-tables sections (``[[name]]``): name -> (description, kinds)."""

"""The scenario sections (``[run]``, ``[grid]``, ...): one frozen, typed dataclass each.

A class's docstring is the section's description and its fields are the section's keys
(:func:`gridpop.config.schema.key`); :data:`SECTIONS` is generated from them. The option choices
are the ``Literal`` aliases below, and the tuples beside them list the same choices in order.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal, get_args

from .schema import Key, doc_of, key, keys_of

GrowthModel = Literal["exponential", "beverton-holt", "ricker", "theta-logistic", "ceiling"]
Kernel = Literal["gaussian", "exponential", "2dt"]
Edge = Literal["absorbing", "reflecting"]
DispersalMethod = Literal["kernel", "walk"]
Response = Literal["linear", "threshold", "power"]
Change = Literal["linear", "step"]
OutputRaster = Literal["abundance", "occupancy", "colonised"]
DensityActsOn = Literal["fecundity", "survival", "all"]
Survivorship = Literal["weibull"]
SexSystem = Literal["female-only", "monogamous", "polygynous"]
StableDistribution = Literal["stable"]

GROWTH_MODELS: tuple[GrowthModel, ...] = get_args(GrowthModel)
KERNELS: tuple[Kernel, ...] = get_args(Kernel)
EDGES: tuple[Edge, ...] = get_args(Edge)
DISPERSAL_METHODS: tuple[DispersalMethod, ...] = get_args(DispersalMethod)
RESPONSES: tuple[Response, ...] = get_args(Response)
CHANGES: tuple[Change, ...] = get_args(Change)
OUTPUT_RASTERS: tuple[OutputRaster, ...] = get_args(OutputRaster)
STAGE_RASTER = "abundance_"
"""[output] rasters also takes ``abundance_<stage>``, a stage of [stages]."""
DENSITY_ACTS_ON: tuple[DensityActsOn, ...] = get_args(DensityActsOn)
SURVIVORSHIPS: tuple[Survivorship, ...] = get_args(Survivorship)
SEX_SYSTEMS: tuple[SexSystem, ...] = get_args(SexSystem)


@dataclass(frozen=True, kw_only=True)
class RunConfig:
    """How long and how often to simulate."""

    years: int = key(doc="Planning horizon: number of yearly steps.", unit="years", low=1,
                     example=50)
    replicates: int = key(doc="Number of stochastic replicates.", low=1, example=100)
    seed: int = key(1, doc="Seed of the counter-based random numbers. Replicate i of two "
                    "scenarios with the same seed uses the same random numbers.", low=0)
    batch_size: int = key(16, doc="Replicates per unit of work (checkpoint and distributed "
                          "task). Does not change results.", low=1)


@dataclass(frozen=True, kw_only=True)
class GridConfig:
    """The raster grid every layer is aligned to."""

    template: Path | None = key(None, doc="Raster that defines CRS, transform and shape. "
                                "Defaults to the suitability raster.", example="suitability.tif")


def _year() -> Any:
    return key(doc="Year from which the layer holds (year t is the step from census year t to "
               "t + 1); the layers of a list in increasing year.", unit="year", low=1,
               example=15)


@dataclass(frozen=True, kw_only=True)
class HabitatFuture:
    """A suitability layer of a later year ([[habitat.future]])."""

    year: int = _year()
    suitability: Path = key(doc="Habitat-suitability raster of that year, read like the "
                            "starting layer; the same study area.", example="suit_2040.tif")


@dataclass(frozen=True, kw_only=True)
class DispersalFuture:
    """A resistance layer of a later year ([[dispersal.future]])."""

    year: int = _year()
    resistance: Path = key(doc="Resistance raster of that year, read like [dispersal] "
                           "resistance; the same study area.", example="resistance_2040.tif")


@dataclass(frozen=True, kw_only=True)
class HabitatConfig:
    """Habitat suitability and carrying capacity, and how suitability changes over the years."""

    suitability: Path = key(doc="Habitat-suitability raster, values 0..1; nodata or NaN marks "
                            "cells outside the study area. The starting layer (year 0).",
                            example="suitability.tif")
    capacity_per_ha: float = key(doc="Carrying capacity at suitability 1.",
                                 unit="individuals/ha", low=0, example=2.0)
    response: Response = key("linear", doc="How suitability s maps to capacity: linear "
                             "(K ~ s), threshold (K ~ s where s >= threshold, else 0), power "
                             "(K ~ s^exponent).")
    threshold: float = key(0.5, doc="Cut-off for the threshold response.", low=0, high=1)
    exponent: float = key(2.0, doc="Exponent of the power response.", low=0, low_open=True)
    change: Change = key("linear", doc="Suitability between the years of the layers: linear "
                         "(interpolated per cell) or step (each layer holds until the next).")
    future: tuple[HabitatFuture, ...] = key((), doc="Layers of later years, [[habitat.future]] "
                                            "tables with year and suitability; after the last "
                                            "year its layer holds.")
    suitability_series: Path | None = key(None, doc="A multi-band raster in place of the future "
                                          "list: band k is the layer of year k-1 (band 1 the "
                                          "starting layer, the same values), the last band "
                                          "holds after its year.", example="suitability_series.tif")


@dataclass(frozen=True, kw_only=True)
class InitialConfig:
    """Who is there in year 0. Give one of fraction_of_capacity, raster, points (none given:
    fraction_of_capacity = 1)."""

    fraction_of_capacity: float | None = key(None, doc="Initial abundance as a fraction of each "
                                             "cell's capacity (rounded to whole individuals in "
                                             "stochastic mode).", low=0, example=0.5)
    raster: Path | None = key(None, doc="Raster of individuals per cell (resampled by sum when "
                              "its grid differs).")
    points: Path | None = key(None, doc="Vector file of release points (GeoPackage, Shapefile, "
                              "GeoJSON).")
    count_field: str = key("count", doc="Attribute of the release points holding the number of "
                           "individuals.")


@dataclass(frozen=True, kw_only=True)
class GrowthConfig:
    """Local growth, survival and stochasticity."""

    model: GrowthModel = key("beverton-holt", doc="Density dependence of the yearly multiplier.")
    rate: float = key(doc="Intrinsic growth rate r at low density; lambda0 = e^r. Declines come "
                      "from survival, crowding, the environment and disturbance.",
                      unit="1/year", low=0, example=0.4)
    survival: float = key(0.6, doc="Adult annual survival s; births make up the rest of the "
                          "multiplier.", low=0, high=1)
    theta: float = key(1.0, doc="Shape of the theta-logistic model.", low=0, low_open=True)
    allee_density: float = key(0.0, doc="Mate-finding Allee effect: births are scaled by "
                               "N / (N + A), A this density times the cell area. 0 = none.",
                               unit="individuals/ha", low=0)
    stochastic: bool = key(True, doc="true: whole individuals with demographic stochasticity; "
                           "false: deterministic expectations.")
    env_sd: float = key(0.0, doc="Standard deviation of the yearly deviation of the log growth "
                        "multiplier (environmental stochasticity).", low=0)
    env_correlation_m: float = key(0.0, doc="Correlation length of the environmental deviation: "
                                   "correlation at distance d is exp(-(d/L)^2). 0 = independent "
                                   "cells.", unit="m", low=0)
    env_autocorrelation: float = key(0.0, doc="Year-to-year correlation of the environmental "
                                     "deviation (AR(1) coefficient).", low=-1, high=1,
                                     low_open=True, high_open=True)


@dataclass(frozen=True, kw_only=True)
class StagesConfig:
    """Stage- or age-structured life history in every cell (a projection matrix). Give names,
    transitions and fecundity, or ages with a Weibull survivorship and fecundity_by_age. With
    [stages], [growth] rate and survival are set by the matrix; the other [growth] keys apply."""

    names: tuple[str, ...] | None = key(None, doc="Stage names, in matrix order (with ages: "
                                        "default age0, age1, ...).",
                                        example=["juvenile", "subadult", "adult"])
    transitions: tuple[tuple[float, ...], ...] | None = key(
        None, doc="transitions[i][j]: probability that an individual of stage j is alive and in "
        "stage i next year (each column sums to at most 1).", low=0,
        example=[[0.0, 0.0, 0.0], [0.35, 0.0, 0.0], [0.0, 0.55, 0.82]])
    fecundity: tuple[tuple[float, ...], ...] | None = key(
        None, doc="fecundity[i][j]: stage-i offspring counted at the next census per individual "
        "of stage j.", low=0, example=[[0.0, 0.9, 2.1], [0.0, 0.0, 0.0], [0.0, 0.0, 0.0]])
    ages: int | None = key(None, doc="Age-structured alternative: number of age classes of a "
                           "Leslie matrix built from survivorship and fecundity_by_age.", low=1)
    survivorship: Survivorship = key("weibull", doc="Survivorship of the age classes: weibull, "
                                     "l(x) = exp(-(x/b)^weibull_shape).")
    weibull_shape: float | None = key(None, doc="Shape of the Weibull survivorship: > 1 "
                                      "late-life mortality (type I), 1 constant (type II), < 1 "
                                      "early mortality (type III).", low=0, low_open=True)
    mean_lifespan_years: float | None = key(None, doc="Mean lifespan of the Weibull "
                                            "survivorship.", unit="years", low=0,
                                            low_open=True)
    fecundity_by_age: tuple[float, ...] | None = key(None, doc="Offspring at the next census "
                                                     "per individual of each age class.", low=0)
    density_acts_on: DensityActsOn = key("fecundity", doc="Vital rates that crowding scales "
                                         "down (so that an isolated cell settles at its K).")
    density_stages: tuple[str, ...] | None = key(None, doc="Stages counted against the "
                                                 "capacity. Default: all stages.")
    abundance_stages: tuple[str, ...] | None = key(None, doc="Stages counted in abundance, "
                                                   "risk and occupancy. Default: all stages.")
    initial_distribution: StableDistribution | tuple[float, ...] = key(
        "stable", doc="How the initial individuals of a cell divide among the stages: stable "
        "(the matrix's stable stage distribution) or one fraction per stage.", low=0)
    dispersal_fraction: tuple[float, ...] | None = key(None, doc="Fraction of each stage that "
                                                       "disperses each year; replaces "
                                                       "[dispersal] fraction.", low=0, high=1)


@dataclass(frozen=True, kw_only=True)
class SexConfig:
    """Two sexes: who breeds depends on the numbers of females and males."""

    system: SexSystem = key("female-only", doc="female-only: one sex, the matrix as given; "
                            "monogamous: births from the harmonic mean 2FM/(F+M) of the "
                            "breeding females F and males M; polygynous: from min(F, harem_size "
                            "M).")
    female_fraction_at_birth: float = key(0.5, doc="Fraction of births that are female (two "
                                          "sexes).", low=0, high=1, low_open=True,
                                          high_open=True)
    harem_size: float = key(4.0, doc="Polygynous: females one male can mate with.", low=1)


@dataclass(frozen=True, kw_only=True)
class DispersalConfig:
    """Movement between cells with a dispersal kernel."""

    fraction: float = key(0.0, doc="Fraction of individuals that disperse each year.", low=0,
                          high=1)
    density_dependence: float = key(0.0, doc="Emigration rises with crowding: fraction x "
                                    "min(1, N/K)^density_dependence. 0 = constant.", low=0)
    kernel: Kernel = key("gaussian", doc="Shape of the dispersal kernel.")
    mean_distance_m: float | None = key(None, doc="Mean distance of a disperser's displacement. "
                                        "Required when fraction > 0.", unit="m", low=0,
                                        low_open=True, example=400.0)
    tail: float = key(1.5, doc="Shape p of the 2dt kernel (smaller = fatter tail).", low=0.5,
                      low_open=True)
    max_distance_m: float | None = key(None, doc="Truncation distance of the kernel. Default: "
                                       "where the kernel has dropped to about 1e-6 of its "
                                       "mass.", unit="m", low=0, low_open=True)
    edge: Edge = key("absorbing", doc="Grid edge: absorbing (dispersers that leave are lost) or "
                     "reflecting. Kernel method only: a walk never leaves the grid.")
    method: DispersalMethod = key("kernel", doc="kernel: dispersers jump by the dispersal "
                                  "kernel; walk: they walk cell by cell over a resistance "
                                  "surface (corridors lead them, barriers stop them).")
    resistance: Path | None = key(None, doc="Walk: resistance raster (>= 1 easy to cross; nodata "
                                  "or inf = impassable). Default: derived from suitability s as "
                                  "R = 1 + (resistance_max - 1) (1 - s)^resistance_shape.")
    resistance_max: float = key(20.0, doc="Walk: resistance of the worst habitat (s = 0) when "
                                "resistance is derived from suitability.", low=1)
    resistance_shape: float = key(1.0, doc="Walk: shape of the suitability-to-resistance "
                                  "transform (> 1 keeps resistance low in middling habitat).",
                                  low=0, low_open=True)
    walk_length: int = key(60, doc="Walk: the most cell-to-cell steps a disperser takes in a "
                           "year; one still moving after that dies.", unit="cells", low=1)
    death_per_resistance: float = key(0.0, doc="Walk: hazard per unit resistance and cell "
                                      "length: entering a cell of resistance R kills with "
                                      "probability 1 - exp(-death_per_resistance R len).", low=0)
    settle_exponent: float = key(1.0, doc="Walk: a walker settles on a cell of suitability s "
                                 "with probability s^settle_exponent (never where capacity is "
                                 "0).", low=0, low_open=True)
    heading_bias: float = key(0.0, doc="Walk: heading bias kappa, how strongly a walker keeps "
                              "its last direction (correlated random walk; 0 = none).", low=0)
    future: tuple[DispersalFuture, ...] = key((), doc="Walk: resistance layers of later years, "
                                              "[[dispersal.future]] tables with year and "
                                              "resistance (interpolated as [habitat] change "
                                              "says); needs resistance.")


KERNEL_KEYS = ("kernel", "mean_distance_m", "tail", "max_distance_m", "edge")
"""[dispersal] keys that only the kernel method reads."""

WALK_KEYS = ("resistance", "resistance_max", "resistance_shape", "walk_length",
             "death_per_resistance", "settle_exponent", "heading_bias")
"""[dispersal] keys that only the walk method reads."""


@dataclass(frozen=True, kw_only=True)
class OutputConfig:
    """What to write."""

    rasters: tuple[OutputRaster, ...] = key(OUTPUT_RASTERS, doc="GeoTIFF time stacks to "
                                            "write; abundance_<stage>: the mean abundance of "
                                            "one stage of [stages] (e.g. abundance_adult).")
    occupancy_threshold: float = key(1.0, doc="A cell is occupied when it holds at least this "
                                     "many individuals.", unit="individuals", low=0,
                                     low_open=True)
    patches_csv: bool = key(True, doc="Write the per-patch ledger patches.csv.")


@dataclass(frozen=True, kw_only=True)
class RiskConfig:
    """How the run summary measures risk (summary.json, risk.csv)."""

    quasi_extinction: float = key(10.0, doc="Quasi-extinction threshold: a replicate is below "
                                  "it in a year when abundance < this value.",
                                  unit="individuals", low=0, low_open=True)
    focus_areas: Path | None = key(None, doc="Vector file of named focus areas (polygons): risk "
                                   "and colonisation are also reported for the individuals "
                                   "inside each.", example="focus_areas.gpkg")
    focus_name_field: str = key("name", doc="Attribute of the focus areas holding their names "
                                "(features with the same name form one focus area).")
    confidence: float = key(0.95, doc="Coverage of the confidence intervals.", low=0, high=1,
                            low_open=True, high_open=True)


@dataclass(frozen=True, kw_only=True)
class PlanConfig:
    """What this scenario stands for, for tables and reports."""

    description: str = key("", doc="One line on the plan (e.g. \"two corridors between the north "
                           "blocks\").")
    extends: Path | None = key(None, doc="Base scenario this file adds to or changes: its "
                               "tables are merged key by key (this file's values win) and its "
                               "[[disturbance]] and [[action]] lists come first, this file's "
                               "appended. Paths in each file are relative to that file.",
                               example="base.toml")


SectionConfig = (RunConfig | GridConfig | HabitatConfig | InitialConfig | GrowthConfig
                 | StagesConfig | SexConfig | DispersalConfig | OutputConfig | RiskConfig
                 | PlanConfig)

SECTION_CLASSES: dict[str, type[SectionConfig]] = {
    "run": RunConfig, "grid": GridConfig, "habitat": HabitatConfig, "initial": InitialConfig,
    "growth": GrowthConfig, "stages": StagesConfig, "sex": SexConfig,
    "dispersal": DispersalConfig, "output": OutputConfig,
    "risk": RiskConfig, "plan": PlanConfig,
}
"""Section name (the TOML table ``[name]``) -> its dataclass, in the order of the reference."""

SECTIONS: dict[str, tuple[str, tuple[Key, ...]]] = {
    name: (doc_of(cls), keys_of(cls)) for name, cls in SECTION_CLASSES.items()
}
"""Section name -> (description, keys), generated from :data:`SECTION_CLASSES`."""

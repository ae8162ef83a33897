"""The scenario schema, loading and the documents generated from it.

Each section of a scenario file is a frozen, typed dataclass (:mod:`.sections`), and so is each
kind of ``[[disturbance]]`` and ``[[action]]`` table (:mod:`.kinds`); their fields, through
:func:`.schema.key`, are the single source of the schema table (:data:`SECTIONS`,
:data:`ARRAY_SECTIONS`) used for validation (:func:`load_scenario`), for the scenario reference
(:func:`reference_markdown`, rendered into ``docs/scenario.md`` by ``python -m gridpop.config``)
and for the commented template written by ``gridpop init`` (:func:`template_toml`). Option
choices are ``Literal`` aliases with a tuple of the same choices beside each.
"""

from .docs import reference_markdown, template_toml
from .kinds import (
    ACTION_KINDS,
    ARRAY_SECTIONS,
    DISTURBANCE_KINDS,
    FIRE_SIZES,
    RECOVERY,
    ActionConfig,
    BarrierConfig,
    CorridorConfig,
    DisturbanceConfig,
    FireConfig,
    FireSize,
    FloodConfig,
    HabitatLossConfig,
    Recovery,
    ReserveConfig,
    RestorationConfig,
)
from .load import Scenario, load_scenario, merged_toml
from .parameters import apply_parameters, check_parameters, load_study
from .schema import REQUIRED, Key, Trend
from .sections import (
    CHANGES,
    DENSITY_ACTS_ON,
    DISPERSAL_METHODS,
    EDGES,
    GROWTH_MODELS,
    KERNEL_KEYS,
    KERNELS,
    OUTPUT_RASTERS,
    RESPONSES,
    SECTIONS,
    SEX_SYSTEMS,
    SURVIVORSHIPS,
    WALK_KEYS,
    Change,
    DensityActsOn,
    DispersalConfig,
    DispersalFuture,
    DispersalMethod,
    Edge,
    GridConfig,
    GrowthConfig,
    GrowthModel,
    HabitatConfig,
    HabitatFuture,
    InitialConfig,
    Kernel,
    OutputConfig,
    OutputRaster,
    PlanConfig,
    Response,
    RiskConfig,
    RunConfig,
    SexConfig,
    SexSystem,
    StagesConfig,
    Survivorship,
)
from .uncertainty import (
    DESIGNS,
    DISTRIBUTIONS,
    Design,
    Distribution,
    ParameterRange,
    UncertaintyConfig,
    parse_uncertainty,
)

__all__ = [
    "ACTION_KINDS", "ARRAY_SECTIONS", "CHANGES", "DENSITY_ACTS_ON", "DESIGNS",
    "DISPERSAL_METHODS", "DISTRIBUTIONS", "DISTURBANCE_KINDS", "EDGES", "FIRE_SIZES",
    "GROWTH_MODELS", "KERNEL_KEYS", "KERNELS", "OUTPUT_RASTERS", "RECOVERY", "REQUIRED",
    "RESPONSES", "SECTIONS", "SEX_SYSTEMS", "SURVIVORSHIPS", "WALK_KEYS",
    "ActionConfig", "BarrierConfig", "Change", "CorridorConfig", "DensityActsOn", "Design",
    "DispersalConfig", "DispersalFuture", "DispersalMethod", "Distribution", "DisturbanceConfig",
    "Edge", "FireConfig", "FireSize", "FloodConfig", "GridConfig", "GrowthConfig", "GrowthModel",
    "HabitatConfig", "HabitatFuture", "HabitatLossConfig", "InitialConfig", "Kernel", "Key",
    "OutputConfig", "OutputRaster", "ParameterRange", "PlanConfig", "Recovery", "ReserveConfig",
    "RestorationConfig", "Response", "RiskConfig", "RunConfig", "Scenario", "SexConfig",
    "SexSystem", "StagesConfig", "Survivorship", "Trend", "UncertaintyConfig",
    "apply_parameters", "check_parameters", "load_scenario", "load_study", "merged_toml",
    "parse_uncertainty", "reference_markdown", "template_toml",
]

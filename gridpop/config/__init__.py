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
from .schema import REQUIRED, Key
from .sections import (
    DISPERSAL_METHODS,
    EDGES,
    GROWTH_MODELS,
    KERNEL_KEYS,
    KERNELS,
    OUTPUT_RASTERS,
    RESPONSES,
    SECTIONS,
    WALK_KEYS,
    DispersalConfig,
    DispersalMethod,
    Edge,
    GridConfig,
    GrowthConfig,
    GrowthModel,
    HabitatConfig,
    InitialConfig,
    Kernel,
    OutputConfig,
    OutputRaster,
    PlanConfig,
    Response,
    RiskConfig,
    RunConfig,
)

__all__ = [
    "ACTION_KINDS", "ARRAY_SECTIONS", "DISPERSAL_METHODS", "DISTURBANCE_KINDS", "EDGES",
    "FIRE_SIZES", "GROWTH_MODELS", "KERNEL_KEYS", "KERNELS", "OUTPUT_RASTERS", "RECOVERY",
    "REQUIRED", "RESPONSES", "SECTIONS", "WALK_KEYS",
    "ActionConfig", "BarrierConfig", "CorridorConfig", "DispersalConfig", "DispersalMethod",
    "DisturbanceConfig", "Edge", "FireConfig", "FireSize", "FloodConfig", "GridConfig",
    "GrowthConfig", "GrowthModel", "HabitatConfig", "HabitatLossConfig", "InitialConfig", "Kernel",
    "Key", "OutputConfig", "OutputRaster", "PlanConfig", "Recovery", "ReserveConfig",
    "RestorationConfig", "Response", "RiskConfig", "RunConfig", "Scenario",
    "load_scenario", "merged_toml", "reference_markdown", "template_toml",
]

"""The ``[uncertainty]`` section: the design of a sensitivity analysis and the ranges of the
uncertain parameters (``[uncertainty.parameters]``).

A parameter is named ``"section.key"`` (``"growth.rate"``), ``"action.KIND.key"`` or
``"disturbance.KIND.key"`` (every action or disturbance of that kind) or ``"action.N.key"``
(the N-th ``[[action]]`` table, from 1). With ``[stages]``, ``"stages.transitions.TO.FROM"``
and ``"stages.fecundity.TO.FROM"`` name one entry of a matrix by stage names (row TO, column
FROM: ``"stages.transitions.adult.adult"`` is adult survival),
``"stages.dispersal_fraction.STAGE"`` one stage's dispersal fraction, and
``"stages.weibull_shape"`` and ``"stages.mean_lifespan_years"`` the survivorship of an
age-structured plan. Its value is one distribution::

    "growth.rate" = { uniform = [0.2, 0.5] }                        # low, high
    "dispersal.mean_distance_m" = { triangular = [200, 400, 900] }  # min, mode, max
    "habitat.capacity_per_ha" = { lognormal = [2.0, 0.3] }          # median, sd of log

:func:`parse_uncertainty` checks the section on its own; :func:`check_parameters` checks the
parameters against the plans (each names a numeric key of at least one plan, and the
distribution's support lies inside the key's allowed values), and :func:`apply_parameters` gives
a plan with one set of values, validated like a loaded scenario.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal, get_args

import numpy as np

from ..errors import ScenarioError, where
from .schema import Key, doc_of, key, keys_of
from .values import check_value, unknown_key

Design = Literal["latin-hypercube", "sobol", "morris"]
Distribution = Literal["uniform", "triangular", "lognormal"]

DESIGNS: tuple[Design, ...] = get_args(Design)
DISTRIBUTIONS: tuple[Distribution, ...] = get_args(Distribution)

ARGUMENTS: dict[str, str] = {"uniform": "[low, high] with low < high",
                             "triangular": "[min, mode, max] with min <= mode <= max, min < max",
                             "lognormal": "[median, sd of log] with median > 0, sd > 0"}
"""What each distribution takes, for messages and the reference."""

UNCERTAIN_SECTIONS = ("habitat", "initial", "growth", "dispersal")
"""Sections whose number keys may be uncertain (besides actions and disturbances): the run,
output, risk and plan sections define what is measured, not the system."""

SECTION = "uncertainty"
PARAMETERS = "uncertainty.parameters"


@dataclass(frozen=True)
class ParameterRange:
    """One uncertain parameter: its name (``"growth.rate"``), distribution and arguments."""

    name: str
    distribution: Distribution
    args: tuple[float, ...]

    def frozen(self) -> Any:
        """The scipy.stats frozen distribution."""
        from scipy import stats  # here: every command loads this module, few draw designs

        a = self.args
        if self.distribution == "uniform":
            return stats.uniform(loc=a[0], scale=a[1] - a[0])
        if self.distribution == "triangular":
            return stats.triang(c=(a[1] - a[0]) / (a[2] - a[0]), loc=a[0], scale=a[2] - a[0])
        return stats.lognorm(s=a[1], scale=a[0])

    def support(self) -> tuple[float, float, bool]:
        """Lowest and highest value, and whether the lowest is reached (lognormal: not 0)."""
        a = self.args
        if self.distribution == "lognormal":
            return 0.0, math.inf, False
        return a[0], a[-1], True

    def values(self, u: np.ndarray) -> np.ndarray:
        """Inverse-CDF transform of probabilities ``u`` in (0, 1)."""
        return np.asarray(self.frozen().ppf(u), dtype=np.float64)

    def describe(self) -> str:
        return f"{self.distribution} {list(self.args)}"


@dataclass(frozen=True, kw_only=True)
class UncertaintyConfig:
    """Sensitivity analysis (gridpop sensitivity): the design that draws the parameter sets and,
    in the table [uncertainty.parameters], the range of each uncertain parameter."""

    samples: int = key(64, doc="Parameter sets: latin-hypercube draws this many; sobol takes it "
                       "as the base sample N (a power of 2) and runs N (k + 2) sets for k "
                       "parameters; morris takes it as the number of trajectories and runs "
                       "samples (k + 1) sets.", low=2)
    design: Design = key("latin-hypercube", doc="How the sets are drawn: latin-hypercube "
                         "(partial rank correlations), sobol (Saltelli sampling; first-order "
                         "and total Sobol indices) or morris (elementary effects on a 4-level "
                         "grid of quantiles).")
    seed: int = key(1, doc="Seed of the design, apart from the run seed (every set runs with "
                    "[run] seed).", low=0)
    parameters: tuple[ParameterRange, ...] = ()


KEYS: tuple[Key, ...] = keys_of(UncertaintyConfig, skip=("parameters",))
DOC = doc_of(UncertaintyConfig)


def parse_uncertainty(file: Path | str, table: object) -> UncertaintyConfig:
    """Validate an ``[uncertainty]`` table (with its ``parameters`` sub-table) on its own."""
    if not isinstance(table, dict):
        raise ScenarioError(f"{where(file, SECTION)} must be a table ([{SECTION}]).")
    known = {k.name: k for k in KEYS}
    values: dict[str, Any] = {}
    for name, value in table.items():
        if name == "parameters":
            continue
        if name not in known:
            raise ScenarioError(unknown_key(file, SECTION, name, known)
                                + f" [{PARAMETERS}] holds the ranges.")
        values[name] = check_value(file, SECTION, known[name], value)
    raw = table.get("parameters")
    if not isinstance(raw, dict) or not raw:
        raise ScenarioError(f"{where(file, PARAMETERS)} is required: one uncertain parameter a "
                            'line, e.g. "growth.rate" = { uniform = [0.2, 0.5] }.')
    params = tuple(_parameter(file, name, spec) for name, spec in raw.items())
    out = UncertaintyConfig(**values, parameters=params)
    if out.design == "sobol" and out.samples & (out.samples - 1):
        raise ScenarioError(f"{where(file, SECTION, 'samples')} = {out.samples}: the sobol "
                            "design needs a power of 2 (e.g. 32, 64, 128) for its balance "
                            "properties.")
    return out


def _parameter(file, name: str, spec: object) -> ParameterRange:
    loc = where(file, PARAMETERS, repr(name))
    forms = "; ".join(f"{{ {d} = {a} }}" for d, a in ARGUMENTS.items())
    if not isinstance(spec, dict) or len(spec) != 1:
        raise ScenarioError(f"{loc} = {spec!r}: give one distribution: {forms}.")
    ((dist, args),) = spec.items()
    if dist not in DISTRIBUTIONS:
        raise ScenarioError(f"{loc}: distribution {dist!r} is not known; expected one of "
                            f"{', '.join(DISTRIBUTIONS)} ({forms}).")
    n = 2 if dist != "triangular" else 3
    bad = f"{loc} = {{ {dist} = {args!r} }}: expected {ARGUMENTS[dist]}."
    if (not isinstance(args, list) or len(args) != n
            or not all(isinstance(v, (int, float)) and not isinstance(v, bool)
                       and math.isfinite(v) for v in args)):
        raise ScenarioError(bad)
    a = tuple(float(v) for v in args)
    if dist == "uniform":
        ok = a[0] < a[1]
    elif dist == "triangular":
        ok = a[0] <= a[1] <= a[2] and a[0] < a[2]
    else:
        ok = a[0] > 0 and a[1] > 0
    if not ok:
        raise ScenarioError(bad)
    return ParameterRange(name, dist, a)

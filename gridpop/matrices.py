"""Projection matrices of stage- and age-structured demography: checks, diagnostics, Leslie builder.

A life history is two non-negative ``(s, s)`` matrices over the stages (column = the stage this
year, row = the stage next year):

- ``transitions[i][j]``: probability that an individual of stage j is alive and in stage i at the
  next census. A column holds the fates of one stage, so it sums to at most 1 (the rest die).
- ``fecundity[i][j]``: stage-i offspring counted at the next census per individual of stage j.

Their sum ``A = transitions + fecundity`` projects a population vector one year:
``n(t+1) = A n(t)``. Without crowding or noise the population grows asymptotically at the rate
lambda, the dominant eigenvalue of A, with the stage composition of its right eigenvector (the
stable stage distribution), whatever the starting composition (the strong ergodic theorem; Caswell
2001, Matrix Population Models, 2nd ed., ch. 4). :func:`diagnostics` computes lambda and the
numbers derived from it (Caswell 2001 ch. 4, 5 and 9):

- reproductive values: the left eigenvector v; the contribution of an individual of each stage to
  future population growth relative to a newborn (first stage = 1);
- R0: offspring per newborn over its whole life, the dominant eigenvalue of ``F (I - T)^-1``;
- generation time ``ln R0 / ln lambda``, the years the population takes to grow by R0. At
  lambda = 1 (within ``|ln lambda| < 1e-7``) both logarithms vanish and the generation time is
  their limit, ``lambda <v, w> / <v, F w>``, the mean age of the parents of the offspring born in
  the stable population (derived here: scale F by c and differentiate; this is also the measure of
  Bienvenu and Legendre 2015, American Naturalist, from memory);
- the damping ratio ``lambda / |lambda_2|``: the distance to the stable distribution shrinks by
  about this factor a year (Caswell 2001 ch. 4);
- elasticities ``e_ij = a_ij s_ij / lambda`` with sensitivities ``s_ij = v_i w_j / <v, w>``: the
  proportional change of lambda per proportional change of each entry; they sum to 1 (Caswell
  2001 ch. 9; de Kroon et al. 1986, Ecology 67:1427).

Reducible and imprimitive matrices. A non-negative matrix always has a real, non-negative
eigenvalue equal to its spectral radius (Perron-Frobenius); that eigenvalue is lambda, and among
several eigenvalues of the same modulus (an imprimitive matrix, e.g. a Leslie matrix whose only
breeding class is the last: the age structure cycles) the real positive one is taken; the
damping ratio is then 1, meaning the composition never settles. Its eigenvectors are taken as
non-negative (rounding below zero is clipped). Stages that can no longer breed (post-reproductive
stages) get reproductive value 0 and elasticity 0 while their own survival is below the lambda of
the breeding stages; when it is above, A's dominant eigenvalue is that survival, the stable
population holds only non-breeders and :func:`describe` says so. If the newborn stage cannot
reach the stages that set lambda (its reproductive value is 0), reproductive values are scaled so
that the largest is 1. If the dominant eigenvalue is defective (blocks sharing it exactly, or
so nearly that ``<v, w> < 1e-10 |v| |w|``), lambda is not (numerically) differentiable and the
elasticities are NaN.

Everything here is pure numpy/scipy on small arrays; errors are plain ``ValueError`` whose message
starts with the parameter's name (the scenario layer adds the file and key).
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence
from typing import Any, NamedTuple

import numpy as np
import scipy.linalg
from scipy.sparse.csgraph import connected_components
from scipy.special import gammaln

COLUMN_SUM_TOLERANCE = 1e-9
"""A column of transitions may exceed 1 by this much (rounding in the numbers as written)."""

_UNIT_LAMBDA = 1e-7
"""``|ln lambda|`` below this counts as lambda = 1 for the generation time."""


class MatrixDiagnostics(NamedTuple):
    """Asymptotic properties of a projection matrix (see the module docstring)."""

    lam: float
    """Dominant eigenvalue of A = transitions + fecundity: the yearly growth multiplier."""
    stable_distribution: np.ndarray
    """Right eigenvector of A, non-negative, sums to 1."""
    reproductive_values: np.ndarray
    """Left eigenvector of A, scaled so the first stage is 1."""
    r0: float
    """Net reproductive rate: dominant eigenvalue of ``F (I - T)^-1``; 0 without fecundity,
    inf when some individuals never die (the spectral radius of transitions is 1)."""
    generation_time: float
    """``ln R0 / ln lambda`` in years; its limit at lambda = 1; NaN when R0 = 0."""
    damping_ratio: float
    """``lambda / |lambda_2|``; inf when there is no other non-zero eigenvalue."""
    elasticity: np.ndarray
    """``(s, s)`` elasticities of lambda to the entries of A; they sum to 1."""


def _numbers(name: str, value: Any, ndim: int, what: str) -> np.ndarray:
    """``value`` as a float64 array of ``ndim`` dimensions of finite numbers >= 0."""
    message = f"{name}: must be {what}"
    try:
        array = np.asarray(value)
    except ValueError:  # ragged rows
        raise ValueError(f"{message}; the rows have different lengths") from None
    if array.ndim != ndim or array.dtype.kind not in "iuf" or any(
            isinstance(x, bool) for x in np.asarray(value, dtype=object).ravel()):
        raise ValueError(f"{message}, got {value!r}")
    array = array.astype(np.float64)
    bad = np.argwhere(~np.isfinite(array) | (array < 0))
    if bad.size:
        at = ", ".join(str(i) for i in bad[0])
        raise ValueError(f"{name}: entries must be finite numbers >= 0; got "
                         f"{array[tuple(bad[0])]!r} at [{at}] (counting from 0)")
    return array


def _square(name: str, value: Any) -> np.ndarray:
    array = _numbers(name, value, 2, "a square list of lists of numbers (one row per stage)")
    if array.shape[0] != array.shape[1] or array.size == 0:
        raise ValueError(f"{name}: must be a square list of lists of numbers (one row per "
                         f"stage); got {array.shape[0]} rows of {array.shape[1]} numbers")
    return array


def validate(transitions: Any, fecundity: Any) -> tuple[np.ndarray, np.ndarray]:
    """The two matrices as float64 ``(s, s)`` arrays, or ValueError naming the one at fault.

    Refused: anything but a square list of lists (or 2-D array) of numbers, matrices of
    different sizes, negative or non-finite entries, a column of ``transitions`` summing above 1
    (beyond :data:`COLUMN_SUM_TOLERANCE`), and a pair whose projection matrix has lambda = 0: no
    stage contributes, directly or through its descendants, to itself, so every cohort is gone
    within s years whatever the numbers. Tested exactly on the pattern of non-zero entries (a
    directed graph without cycles), not on rounded eigenvalues.
    """
    t = _square("transitions", transitions)
    f = _square("fecundity", fecundity)
    if f.shape != t.shape:
        raise ValueError(f"fecundity: has {f.shape[0]} stages but transitions has {t.shape[0]}; "
                         "both must be square with one row and column per stage")
    sums = t.sum(axis=0)
    over = np.flatnonzero(sums > 1.0 + COLUMN_SUM_TOLERANCE)
    if over.size:
        j = int(over[0])
        raise ValueError(f"transitions: column {j} (counting from 0) sums to {sums[j]:.6g}, "
                         "above 1: the probabilities of one stage's fates next year (survive "
                         "and stay, or move to another stage) cannot add up to more than 1")
    links = (t + f) > 0
    n_components, _ = connected_components(links, directed=True, connection="strong")
    if n_components == links.shape[0] and not links.diagonal().any():
        raise ValueError("fecundity: the projection matrix transitions + fecundity has "
                         "lambda = 0: no stage leads back to itself through survival and "
                         "births, so the population dies out within "
                         f"{links.shape[0]} years whatever its size (no growth at all)")
    return t, f


def _nonnegative(x: np.ndarray) -> np.ndarray:
    """A real Perron vector with its sign fixed so that it is non-negative; rounding clipped."""
    x = x.real / x.real[np.argmax(np.abs(x.real))]
    return np.clip(x, 0.0, None)


def _spectral_radius(a: np.ndarray) -> float:
    return float(np.abs(np.linalg.eigvals(a)).max())


def diagnostics(transitions: Any, fecundity: Any) -> MatrixDiagnostics:
    """lambda, stable distribution, reproductive values, R0, generation time, damping ratio and
    elasticities of ``transitions + fecundity`` (validated first; see the module docstring)."""
    t, f = validate(transitions, fecundity)
    a = t + f
    values, left, right = scipy.linalg.eig(a, left=True, right=True)
    moduli = np.abs(values)
    ties = np.flatnonzero(moduli >= moduli.max() * (1.0 - 1e-9))
    k = int(ties[np.argmax(values[ties].real)])
    lam = float(values[k].real)
    others = np.delete(moduli, k)
    second = float(others.max()) if others.size else 0.0
    damping = lam / second if second > 0.0 else math.inf

    w = _nonnegative(right[:, k])
    v = _nonnegative(left[:, k])
    w = w / w.sum()
    v = v / (v[0] if v[0] > 1e-12 * v.max() else v.max())

    vw = float(v @ w)
    if vw > 1e-10 * np.linalg.norm(v) * np.linalg.norm(w):
        elasticity = a * np.outer(v, w) / (vw * lam)
    else:
        elasticity = np.full_like(a, np.nan)

    if not f.any():
        r0 = 0.0
    elif _spectral_radius(t) >= 1.0 - 1e-12:
        r0 = math.inf
    else:
        r0 = _spectral_radius(f @ np.linalg.inv(np.eye(len(t)) - t))

    if r0 == 0.0:
        generation = math.nan
    elif math.isinf(r0):
        generation = math.inf
    elif abs(math.log(lam)) < _UNIT_LAMBDA:
        generation = lam * vw / float(v @ f @ w)
    else:
        generation = math.log(r0) / math.log(lam)
    return MatrixDiagnostics(lam, w, v, r0, generation, damping, elasticity)


def _positive(name: str, value: Any) -> float:
    number = float(value) if isinstance(value, numbers.Real) and not isinstance(
        value, bool) else math.nan
    if not (math.isfinite(number) and number > 0):
        raise ValueError(f"{name}: must be a finite number > 0, got {value!r}")
    return number


def weibull_leslie(ages: int, shape: float, mean_lifespan_years: float,
                   fecundity_by_age: Sequence[float]) -> tuple[np.ndarray, np.ndarray]:
    """``(transitions, fecundity)`` of an age-structured (Leslie) model with Weibull survivorship.

    Survivorship from birth to age x is ``l(x) = exp(-(x / b)^shape)`` with the scale
    ``b = mean_lifespan_years / Gamma(1 + 1 / shape)``, so that the mean lifespan is
    ``mean_lifespan_years``. shape > 1: mortality rises with age (survivorship type I); = 1:
    constant yearly survival ``exp(-1 / mean_lifespan_years)`` (type II); < 1: mortality is highest
    early in life (type III) (Pinder, Wiener and Smith 1978, Ecology 59:175).

    Census convention: post-breeding, birth pulse. The census is taken just after the year's
    births; age class j (j = 0 .. ages - 1) holds the individuals aged j years at the census, so
    class 0 is the year's newborns. An individual of class j survives to the next birth pulse
    with ``P_j = l(j + 1) / l(j)`` (the subdiagonal of transitions) and then produces
    ``fecundity_by_age[j]`` offspring (the ``m(j + 1)`` of a life table: young born to a parent
    turning j + 1), which are age 0 at that census. Hence ``fecundity[0][j] = P_j
    fecundity_by_age[j]``: age-0 offspring counted at the next census per individual of age j, as
    the scenario's fecundity is defined; a species that first breeds at age 2 has
    ``fecundity_by_age[0] = 0`` (Caswell 2001 ch. 2 for the post-breeding Leslie matrix, from
    memory).

    The last class is "ages - 1 years and older": it keeps its members with its own survival
    ``P_{ages-1} = l(ages) / l(ages - 1)`` and the same fecundity, so the model reproduces l(x)
    exactly up to x = ages and continues it geometrically (exactly the Weibull for shape = 1).
    For shape != 1 choose ``ages`` so that l(ages) is small if old individuals matter.
    """
    if isinstance(ages, bool) or not isinstance(ages, int | np.integer) or ages < 1:
        raise ValueError(f"ages: must be a whole number >= 1, got {ages!r}")
    c = _positive("shape", shape)
    mean = _positive("mean_lifespan_years", mean_lifespan_years)
    m = _numbers("fecundity_by_age", fecundity_by_age, 1, "a list of numbers, one per age")
    if m.shape != (ages,):
        raise ValueError(f"fecundity_by_age: needs one number per age class ({ages}), got "
                         f"{len(m)}")
    log_scale = math.log(mean) - float(gammaln(1.0 + 1.0 / c))
    x = np.arange(ages + 1, dtype=np.float64)
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
        hazard = np.exp(c * (np.log(x) - log_scale))  # cumulative hazard (x / b)^c, 0 at x = 0
        step = np.where(np.isinf(hazard[:-1]), np.inf, np.diff(hazard))
    survival = np.exp(-step)  # P_j = l(j + 1) / l(j); 0 where l(j) itself is 0
    transitions = np.zeros((ages, ages))
    transitions[np.arange(1, ages), np.arange(ages - 1)] = survival[:-1]
    transitions[ages - 1, ages - 1] = survival[-1]
    fecundity = np.zeros((ages, ages))
    fecundity[0] = survival * m
    return transitions, fecundity


def _table(names: Sequence[str], matrix: np.ndarray, indent: str) -> list[str]:
    width = max(9, *(len(n) + 1 for n in names))
    head = f"{indent}{'':{width}}" + "".join(f"{n:>{width}}" for n in names)
    return [head] + [f"{indent}{name:{width}}" + "".join(f"{x:>{width}.4g}" for x in row)
                     for name, row in zip(names, matrix, strict=True)]


def _stages(names: Sequence[str], values: np.ndarray) -> str:
    return ", ".join(f"{n} {x:.4g}" for n, x in zip(names, values, strict=True))


def describe(names: Sequence[str], transitions: Any, fecundity: Any) -> list[str]:
    """The lines ``gridpop check`` prints and the report lists for one projection matrix."""
    t, f = validate(transitions, fecundity)
    if isinstance(names, str) or len(names) != len(t) or not all(
            isinstance(n, str) and n for n in names):
        raise ValueError(f"names: needs one non-empty name per stage ({len(t)}), got {names!r}")
    d = diagnostics(t, f)
    change = (d.lam - 1.0) * 100.0
    trend = f"grows {change:.3g} %" if change >= 0 else f"declines {-change:.3g} %"
    lines = ["projection matrix A = transitions + fecundity (column: stage this year, "
             "row: stage next year):"]
    lines += _table(names, t + f, "  ")
    lines += [f"  lambda (dominant eigenvalue): {d.lam:.6g}; without crowding or noise the "
              f"population {trend} a year",
              f"  stable stage distribution: {_stages(names, d.stable_distribution)}",
              f"  reproductive values ({names[0]} = 1): "
              f"{_stages(names, d.reproductive_values)}",
              f"  R0 (offspring per newborn over its life): {d.r0:.6g}",
              f"  generation time: {d.generation_time:.4g} years (ln R0 / ln lambda)",
              f"  damping ratio: {d.damping_ratio:.4g} (lambda / |second eigenvalue|; the "
              "distance to the stable distribution shrinks by this factor a year)",
              "  elasticity of lambda to each entry of A (they sum to 1):"]
    lines += _table(names, d.elasticity, "    ")
    if d.lam < 1.0:
        lines.append(f"  warning: lambda = {d.lam:.4g} < 1: the population cannot persist even "
                     "without crowding")
    if d.damping_ratio <= 1.0 + 1e-9:
        lines.append("  warning: damping ratio 1: the stage composition oscillates and does "
                     "not settle to the stable distribution (imprimitive or reducible matrix)")
    if f.any() and float(d.reproductive_values @ f @ d.stable_distribution) <= 1e-12 * float(
            d.reproductive_values @ (t + f) @ d.stable_distribution):
        lines.append("  warning: lambda is the survival of stages that no longer breed (it "
                     "exceeds the growth of the breeding stages); the diagnostics describe "
                     "their slow decline")
    return lines

"""Stage- and age-structured growth of a cell: the projection matrix, crowding, the environment
and two sexes, as row kernels the yearly cycle's growth pass calls.

A cell holds one count per *class*: the stages of the matrix, and with two sexes the female
stages then the male stages (class ``x * S + s`` is stage ``s`` of sex ``x``). Over one year

- every class of stage j survives with ``s_j`` (the column sum of ``transitions``) and the
  survivors go to stage i with ``T[i, j] / s_j``: binomial survival and a multinomial stage
  transition (conditional binomials) in stochastic mode;
- the stage-i births are ``sum_j F[i, j] n_j``, Poisson in stochastic mode; with two sexes only
  females breed, each of stage j with ``F[i, j] / p_f`` times ``m(F, M) / F`` (``p_f`` the female
  fraction at birth, ``m`` the mating function of the breeding females F and males M, so that at
  the birth sex ratio with mates in excess births equal the one-sex model), and births are female
  with probability ``p_f``.

**Crowding** scales the vital rates chosen by ``density_acts_on`` by a factor ``c(D / K)`` of the
density-stage total D: with ``c*`` the factor at which the scaled matrix has dominant eigenvalue 1
(:func:`equilibrium_factor`), Beverton-Holt ``c = 1 / (1 + (1 / c* - 1) x)``, Ricker
``c = c*^x``, theta-logistic ``c = c*^(x^theta)``, ceiling ``c = min(1, c* / x)`` and exponential
``c = 1``. An equilibrium of an isolated cell has a positive stage vector that the matrix at
``D*`` leaves unchanged, so its dominant eigenvalue is 1 (Perron-Frobenius), ``c(D* / K) = c*``
and, c being strictly decreasing for Beverton-Holt, Ricker and theta-logistic, ``D* = K``. The
ceiling reaches K only as its cap acts on a stable stage distribution (``D' = min(lambda D, K)``
with density_acts_on = "all").

**Environment**: the cell's deviation e of the year multiplies fecundity by ``exp(e)``
(lognormal) and moves survival on the logit scale, ``logit s' = logit s + e`` (logit-normal).

The one-stage, one-sex model is not run here: it is the scalar split of
:mod:`gridpop.demography` (survivors ``min(s, L)``, births ``L - s``), which is what a one-stage
matrix ``[[s]]``, ``[[f]]`` gives with ``r = ln(s + f)``.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from . import matrices, rng
from ._jit import njit, pjit, prange
from .config import DENSITY_ACTS_ON, GROWTH_MODELS, SEX_SYSTEMS

_EXPONENTIAL, _BEVERTON_HOLT, _RICKER, _THETA_LOGISTIC, _CEILING = range(5)
_FECUNDITY, _SURVIVAL, _ALL = range(3)
_FEMALE_ONLY, _MONOGAMOUS, _POLYGYNOUS = range(3)
assert GROWTH_MODELS[_CEILING] == "ceiling" and DENSITY_ACTS_ON[_ALL] == "all"
assert SEX_SYSTEMS[_POLYGYNOUS] == "polygynous"


class StageRates(NamedTuple):
    """The life history the stage kernels take (see the module docstring).

    ``matrix`` False: the one-stage one-sex model, grown by the scalar kernel of
    :mod:`gridpop.demography` (the other fields are then unused)."""

    matrix: bool
    t: np.ndarray  # (S, S) transitions
    f: np.ndarray  # (S, S) fecundity
    survival: np.ndarray  # (S,) column sums of t
    share: np.ndarray  # (S, S) t[i, j] / survival[j]
    last: np.ndarray  # (S,) int64: last destination of stage j with share > 0 (-1: none)
    density: np.ndarray  # (C,) 1.0 for classes counted against K
    breeding: np.ndarray  # (S,) 1.0 for stages with some fecundity
    acts_on: int
    log_c: float  # ln c*
    inv_c: float  # 1 / c* - 1
    c_star: float
    sexes: int
    mating: int
    female_fraction: float
    harem: float


def spectral_radius(a: np.ndarray) -> float:
    return float(np.max(np.abs(np.linalg.eigvals(a))))


def equilibrium_factor(t: np.ndarray, f: np.ndarray, acts_on: str) -> float:
    """``c*`` in (0, 1]: the factor of the rates scaled by crowding at which the dominant
    eigenvalue of ``T + F`` is 1; 1 when it is already at most 1.

    fecundity: ``1 / R0`` with ``R0 = rho(F (I - T)^-1)`` (Caswell 2001, Matrix Population Models,
    sec. 5.3.4: lambda = 1 exactly when R0 = 1); survival: found by bisection (lambda rises with
    the factor); all: ``1 / lambda``.

    Raises
    ------
    ValueError
        "density_acts_on ...": crowding cannot bring lambda to 1 through those rates alone.
    """
    lam = spectral_radius(t + f)
    if lam <= 1.0:
        return 1.0
    if acts_on == "all":
        return 1.0 / lam
    if acts_on == "fecundity":
        if spectral_radius(t) >= 1.0:
            raise ValueError("density_acts_on = 'fecundity' cannot hold the population at K: "
                             "survival alone keeps lambda >= 1; use 'survival' or 'all'")
        return 1.0 / matrices.diagnostics(t, f).r0
    if spectral_radius(f) >= 1.0:
        raise ValueError("density_acts_on = 'survival' cannot hold the population at K: "
                         "fecundity alone gives lambda >= 1; use 'fecundity' or 'all'")
    low, high = 0.0, 1.0
    for _ in range(200):
        mid = 0.5 * (low + high)
        low, high = (mid, high) if spectral_radius(mid * t + f) < 1.0 else (low, mid)
    return 0.5 * (low + high)


def stage_rates(t, f, *, model: str, acts_on: str, density_stages, sexes: int = 1,
                system: str = "female-only", female_fraction: float = 0.5,
                harem: float = 1.0) -> StageRates:
    """:class:`StageRates` of a validated matrix (``density_stages``: (S,) bool)."""
    t, f = np.ascontiguousarray(t, np.float64), np.ascontiguousarray(f, np.float64)
    s = t.shape[0]
    survival = t.sum(axis=0)
    share = np.divide(t, survival, out=np.zeros_like(t), where=survival > 0)
    last = np.array([int(np.flatnonzero(share[:, j])[-1]) if share[:, j].any() else -1
                     for j in range(s)], np.int64)
    c = equilibrium_factor(t, f, acts_on) if model != "exponential" else 1.0
    density = np.tile(np.asarray(density_stages, np.float64), sexes)
    return StageRates(s > 1 or sexes > 1, t, f, survival, share, last, density,
                      (f.sum(axis=0) > 0).astype(np.float64), DENSITY_ACTS_ON.index(acts_on),
                      math.log(c), 1.0 / c - 1.0, c, sexes, SEX_SYSTEMS.index(system),
                      float(female_fraction), float(harem))


def one_stage() -> StageRates:
    """The rates of the stage-free model (``matrix`` False)."""
    one = np.ones((1, 1))
    return stage_rates(one * 0.5, one * 0.5, model="exponential", acts_on="all",
                       density_stages=[True])._replace(matrix=False)


@njit
def crowding(model, st, x, theta):
    """The crowding factor ``c(x)`` at ``x = D / K`` (module docstring)."""
    if model == _BEVERTON_HOLT:
        return 1.0 / (1.0 + st.inv_c * x)
    if model == _RICKER:
        return math.exp(st.log_c * x)
    if model == _THETA_LOGISTIC:
        return math.exp(st.log_c * x ** theta)
    if model == _CEILING:
        return min(1.0, st.c_star / x) if x > 0.0 else 1.0
    return 1.0


@njit
def density_row(n, density, out):
    """``out[j] = sum_c density[c] n[c, j]``: the density-stage total of each cell of a row."""
    out[:] = 0.0
    for c in range(n.shape[0]):
        w = density[c]
        if w != 0.0:
            nc = n[c]
            for j in range(out.size):
                out[j] += w * nc[j]


@njit
def stage_row(n, k, env, out, births, deaths, dens, model, theta, allee_a, st, stochastic,
              keys, first_cell, n_cells):
    """One year of stage-structured growth over one row.

    ``n``, ``out``: (C, nx) counts per class before and after; ``births``, ``deaths``, ``dens``:
    (nx,) written (``dens`` is scratch); ``env`` one deviation per cell or (1,) for the row;
    ``keys``: year keys of survival, births, transitions and sex (stochastic); class ``c`` of
    the cell with flat index ``first_cell + j`` draws on ``cell_key(key, c * n_cells + cell)``.
    """
    s_n, nx = st.t.shape[0], n.shape[1]
    classes = n.shape[0]
    density_row(n, st.density, dens)
    per_cell = env.size == nx
    on_f = st.acts_on != _SURVIVAL
    on_s = st.acts_on != _FECUNDITY
    surv = np.empty(s_n)
    mean = np.empty(s_n)
    for j in range(nx):
        cell = first_cell + j
        for c in range(classes):
            out[c, j] = 0.0
        total = 0.0
        for c in range(classes):
            total += n[c, j]
        births[j] = 0.0
        deaths[j] = total
        if not k[j] > 0.0 or total == 0.0:
            continue
        d = dens[j]
        cf = crowding(model, st, d / k[j], theta)
        e = env[j] if per_cell else env[0]
        ee = math.exp(e)
        for s in range(s_n):
            p = st.survival[s] * (cf if on_s else 1.0)
            surv[s] = p * ee / (1.0 - p + p * ee) if e != 0.0 else p
        scale = (cf if on_f else 1.0) * ee * (d / (d + allee_a) if allee_a > 0.0 else 1.0)
        if st.sexes == 2:
            fem = male = 0.0
            for s in range(s_n):
                fem += st.breeding[s] * n[s, j]
                male += st.breeding[s] * n[s_n + s, j]
            if st.mating == _MONOGAMOUS:
                mates = 2.0 * fem * male / (fem + male) if fem + male > 0.0 else 0.0
            else:
                mates = min(fem, st.harem * male)
            scale *= mates / fem / st.female_fraction if fem > 0.0 else 0.0
        for i in range(s_n):
            m = 0.0
            for s in range(s_n):
                m += st.f[i, s] * n[s, j]  # females only: they are the first S classes
            mean[i] = m * scale
        alive = 0.0
        for c in range(classes):
            s, x = c % s_n, c // s_n
            nc = n[c, j]
            if nc == 0.0:
                continue
            if not stochastic:
                alive += nc * surv[s]
                for i in range(s_n):
                    out[x * s_n + i, j] += nc * surv[s] * st.share[i, s]
                continue
            left = rng.binomial(np.int64(nc), surv[s], rng.cell_key(keys[0], c * n_cells + cell))
            alive += left
            rest = 1.0
            for i in range(st.last[s] + 1):
                q = st.share[i, s]
                if q == 0.0 or left == 0:
                    continue
                go = left if i == st.last[s] else rng.binomial(
                    left, q / rest, rng.cell_key(keys[2], (c * s_n + i) * n_cells + cell))
                out[x * s_n + i, j] += go
                left -= go
                rest -= q
        deaths[j] = total - alive
        for i in range(s_n):
            b = mean[i]
            if stochastic:
                b = float(rng.poisson(b, rng.cell_key(keys[1], i * n_cells + cell)))
            births[j] += b
            if st.sexes == 1:
                out[i, j] += b
            elif stochastic:
                fb = rng.binomial(np.int64(b), st.female_fraction,
                                  rng.cell_key(keys[3], i * n_cells + cell))
                out[i, j] += fb
                out[s_n + i, j] += b - fb
            else:
                out[i, j] += b * st.female_fraction
                out[s_n + i, j] += b * (1.0 - st.female_fraction)


@pjit(grid="before")
def share_deaths(before, after, n, stochastic):
    """Share a cell's disturbance deaths among its classes: ``before``/``after`` the cell
    totals, ``n`` (C, ny, nx) the counts before. Proportional shares; with whole individuals
    each class loses the whole part of its share and the remaining deaths go to the classes
    with the largest remainders (the total stays exact)."""
    classes, ny, nx = n.shape
    for i in prange(ny):
        rem = np.empty(classes)
        for j in range(nx):
            b, a = before[i, j], after[i, j]
            if b <= 0.0 or a == b:
                continue
            dead = b - a
            if not stochastic:
                for c in range(classes):
                    n[c, i, j] -= dead * n[c, i, j] / b
                continue
            left = dead
            for c in range(classes):
                share = dead * n[c, i, j] / b
                whole = math.floor(share)
                rem[c] = share - whole
                n[c, i, j] -= whole
                left -= whole
            while left > 0.5:
                best = -1
                for c in range(classes):
                    if n[c, i, j] >= 1.0 and (best < 0 or rem[c] > rem[best]):
                        best = c
                if best < 0:
                    break
                n[best, i, j] -= 1.0
                rem[best] = -1.0
                left -= 1.0


def split_initial(total: np.ndarray, fractions: np.ndarray, whole: bool) -> np.ndarray:
    """(C, ny, nx) counts per class from the cell totals: ``total * fractions[c]``; with whole
    individuals the whole parts, then one more for the classes with the largest remainders."""
    share = fractions[:, None, None] * total[None]
    if not whole:
        return share
    out = np.floor(share)
    left = np.rint(total - out.sum(axis=0))
    order = np.argsort(-(share - out), axis=0, kind="stable")
    rank = np.argsort(order, axis=0, kind="stable")
    out += rank < left[None]
    return out

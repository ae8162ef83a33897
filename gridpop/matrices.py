"""Projection matrices: validation, diagnostics, Leslie matrices from a Weibull survivorship and
their description (pure numpy).

The year's matrix is ``A = T + F``: ``T[i, j]`` the probability that an individual of stage j is
alive and in stage i next year, ``F[i, j]`` the stage-i offspring at the next census per
individual of stage j.

References
----------
Caswell, H. (2001). Matrix Population Models, 2nd ed. Sinauer (ch. 4-5, 9).
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np


class MatrixDiagnostics(NamedTuple):
    """Asymptotic properties of ``A = T + F`` (Caswell 2001, ch. 4-5, 9)."""

    lam: float
    stable_distribution: np.ndarray
    reproductive_values: np.ndarray
    r0: float
    generation_time: float
    damping_ratio: float
    elasticity: np.ndarray


def _square(name: str, m) -> np.ndarray:
    a = np.asarray(m, dtype=np.float64)
    if a.ndim != 2 or a.shape[0] != a.shape[1] or a.shape[0] == 0:
        raise ValueError(f"{name} must be a square matrix, got shape {a.shape}")
    if not np.isfinite(a).all():
        raise ValueError(f"{name} must hold finite numbers")
    if (a < 0).any():
        raise ValueError(f"{name} must not be negative")
    return a


def validate(transitions, fecundity) -> tuple[np.ndarray, np.ndarray]:
    """``(T, F)`` as float64 arrays, checked: square, the same size, finite, not negative,
    every column of ``transitions`` summing to at most 1, dominant eigenvalue above 0."""
    t = _square("transitions", transitions)
    f = _square("fecundity", fecundity)
    if t.shape != f.shape:
        raise ValueError(f"fecundity {f.shape} and transitions {t.shape} must have the same size")
    sums = t.sum(axis=0)
    if (sums > 1.0 + 1e-12).any():
        j = int(np.argmax(sums))
        raise ValueError(f"transitions: column {j + 1} sums to {sums[j]:g} > 1 (a survival "
                         "probability)")
    if _dominant(t + f)[0] <= 0.0:
        raise ValueError("transitions and fecundity give a matrix with lambda = 0: no "
                         "individual ever contributes to the next census")
    return t, f


def _dominant(a: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """Dominant eigenvalue, right eigenvector and all eigenvalues of ``a``."""
    vals, vecs = np.linalg.eig(a)
    i = int(np.argmax(vals.real))
    w = np.abs(vecs[:, i].real)
    return float(vals[i].real), w, vals


def diagnostics(t: np.ndarray, f: np.ndarray) -> MatrixDiagnostics:
    """lambda, stable distribution w (sums to 1), reproductive values v (``v . w = 1``... scaled
    so that v[0] = 1), R0 = rho(F (I - T)^-1), generation time log(R0) / log(lambda), damping ratio
    lambda / |lambda_2| and elasticities ``a_ij v_i w_j / (lambda v . w)``."""
    a = t + f
    lam, w, vals = _dominant(a)
    w = w / w.sum()
    _, v, _ = _dominant(a.T)
    v = v / v[0] if v[0] > 0 else v / v.max()
    s = a.shape[0]
    try:
        r0 = float(np.max(np.abs(np.linalg.eigvals(f @ np.linalg.inv(np.eye(s) - t)))))
    except np.linalg.LinAlgError:
        r0 = math.inf
    gen = math.log(r0) / math.log(lam) if lam != 1.0 and r0 > 0 and math.isfinite(r0) else math.nan
    others = np.sort(np.abs(vals))[::-1]
    damping = float(lam / others[1]) if s > 1 and others[1] > 0 else math.inf
    elasticity = a * np.outer(v, w) / (lam * float(v @ w))
    return MatrixDiagnostics(lam, w, v, r0, gen, damping, elasticity)


def weibull_leslie(ages: int, shape: float, mean_lifespan_years: float, fecundity_by_age
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Leslie matrix of ``ages`` age classes whose survival follows a Weibull survivorship
    ``l(x) = exp(-(x / b)^shape)`` with mean lifespan ``b Gamma(1 + 1 / shape)``: the
    sub-diagonal holds ``l(x + 1) / l(x)``, the first row the fecundity by age."""
    if ages < 1:
        raise ValueError(f"ages must be at least 1, got {ages}")
    if not shape > 0:
        raise ValueError(f"weibull_shape must be > 0, got {shape}")
    if not mean_lifespan_years > 0:
        raise ValueError(f"mean_lifespan_years must be > 0, got {mean_lifespan_years}")
    fec = np.asarray(fecundity_by_age, dtype=np.float64)
    if fec.shape != (ages,):
        raise ValueError(f"fecundity_by_age must hold {ages} numbers (one per age), got "
                         f"{fec.size}")
    scale = mean_lifespan_years / math.gamma(1.0 + 1.0 / shape)
    x = np.arange(ages + 1, dtype=np.float64)
    lx = np.exp(-((x / scale) ** shape))
    t = np.zeros((ages, ages))
    t[np.arange(1, ages), np.arange(ages - 1)] = lx[1:ages] / lx[:ages - 1]
    f = np.zeros((ages, ages))
    f[0] = fec
    return t, f


def describe(names, t: np.ndarray, f: np.ndarray) -> list[str]:
    """The lines ``gridpop check`` prints for a matrix."""
    d = diagnostics(t, f)
    names = list(names)

    def row(values) -> str:
        return ", ".join(f"{n} {x:.4g}" for n, x in zip(names, values, strict=True))

    lines = [f"matrix lambda {d.lam:.4g}, R0 {d.r0:.4g}, generation time "
             f"{d.generation_time:.4g} years, damping ratio {d.damping_ratio:.4g}",
             f"  stable stage distribution: {row(d.stable_distribution)}",
             f"  reproductive values: {row(d.reproductive_values)}",
             "  elasticities (row: to stage, column: from stage):"]
    lines += [f"    {n}: " + " ".join(f"{x:.3f}" for x in d.elasticity[i])
              for i, n in enumerate(names)]
    if d.lam < 1.0:
        lines.append(f"  warning: lambda = {d.lam:.4g} < 1: the population declines even "
                     "without crowding")
    return lines

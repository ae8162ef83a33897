"""Global sensitivity analysis and the robustness of a plan ranking, on arrays.

- :func:`draw_design`: the parameter sets of an ``[uncertainty]`` section. Latin hypercube
  (:class:`scipy.stats.qmc.LatinHypercube`), Saltelli sampling for Sobol indices
  (:func:`SALib.sample.sobol.sample`, no second-order terms) or Morris trajectories
  (:func:`SALib.sample.morris.sample`, 4 levels), all drawn on the unit hypercube and carried to
  each parameter's distribution by its inverse CDF (scipy.stats). Morris levels are the centres
  of 4 equal-probability bins (quantiles 1/8, 3/8, 5/8, 7/8), so that unbounded distributions
  (lognormal) stay finite.
- :func:`prcc`: partial rank correlation coefficients with bootstrap intervals (Marino et al.
  2008); :func:`sobol_indices` and :func:`morris_indices`: SALib's analyses.
- :func:`pairwise_ranking`: for each ordered pair of plans, the fraction of parameter sets in
  which the first is better (lower risk; the same risk: higher expected minimum abundance; a
  tie on both counts half) with a Wilson score interval (its lower end counting ties as
  losses, its upper end as wins), and the one-split rule
  (:func:`one_split`) that best predicts which plan wins.

References
----------
Marino, S., Hogue, I. B., Ray, C. J. and Kirschner, D. E. (2008). A methodology for performing
global uncertainty and sensitivity analysis in systems biology. J. Theor. Biol. 254, 178-196.
Saltelli, A. et al. (2008). Global Sensitivity Analysis: The Primer. Wiley.
Saltelli, A. et al. (2010). Variance based sensitivity analysis of model output. Design and
estimator for the total sensitivity index. Comput. Phys. Commun. 181, 259-270.
Morris, M. D. (1991). Factorial sampling plans for preliminary computational experiments.
Technometrics 33, 161-174. Campolongo, F., Cariboni, J. and Saltelli, A. (2007). An effective
screening design for sensitivity analysis of large models. Environ. Model. Softw. 22, 1509-1518.
Wilson, E. B. (1927). Probable inference, the law of succession, and statistical inference.
J. Am. Stat. Assoc. 22, 209-212.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy import stats
from scipy.stats import qmc

from ..config import ParameterRange, UncertaintyConfig
from .metrics import binomial_interval

MORRIS_LEVELS = 4
N_BOOT = 1000
"""Bootstrap resamples of the PRCC and Sobol intervals and of the Morris mu* interval."""


@dataclass(frozen=True)
class Design:
    """Parameter sets: ``unit`` (n, k) on the unit hypercube as the design drew them, ``values``
    (n, k) the parameters' values."""

    names: tuple[str, ...]
    unit: np.ndarray
    values: np.ndarray
    method: str

    @property
    def n(self) -> int:
        return len(self.values)


def _problem(names) -> dict:
    return {"num_vars": len(names), "names": list(names), "bounds": [[0.0, 1.0]] * len(names)}


def draw_design(u: UncertaintyConfig) -> Design:
    """The parameter sets of an ``[uncertainty]`` section (module docstring)."""
    from SALib.sample import morris, sobol

    params: tuple[ParameterRange, ...] = u.parameters
    names = tuple(p.name for p in params)
    k = len(names)
    if u.design == "latin-hypercube":
        unit = qmc.LatinHypercube(d=k, rng=u.seed).random(u.samples)
        q = unit
    elif u.design == "sobol":
        unit = sobol.sample(_problem(names), u.samples, calc_second_order=False, seed=u.seed)
        q = unit
    else:
        unit = morris.sample(_problem(names), u.samples, num_levels=MORRIS_LEVELS, seed=u.seed)
        q = (np.rint(unit * (MORRIS_LEVELS - 1)) + 0.5) / MORRIS_LEVELS
    q = np.clip(q, 1e-12, 1 - 1e-12)  # a scrambled Sobol point is never 0 or 1; be sure
    values = np.column_stack([p.values(q[:, j]) for j, p in enumerate(params)])
    return Design(names, np.asarray(unit, dtype=np.float64), values, u.design)


def _prcc_once(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """PRCC of each column of ``x`` with ``y`` (both rank-transformed first)."""
    r = np.apply_along_axis(stats.rankdata, 0, x)
    ry = stats.rankdata(y)
    n, k = r.shape
    out = np.full(k, np.nan)
    for j in range(k):
        z = np.column_stack([np.ones(n), np.delete(r, j, axis=1)])
        ex = r[:, j] - z @ np.linalg.lstsq(z, r[:, j], rcond=None)[0]
        ey = ry - z @ np.linalg.lstsq(z, ry, rcond=None)[0]
        den = math.sqrt(float(ex @ ex) * float(ey @ ey))
        if den > 1e-12 * n * n:
            out[j] = float(ex @ ey) / den
    return out


def prcc(x: np.ndarray, y: np.ndarray, *, confidence: float = 0.95, n_boot: int = N_BOOT,
         seed: int = 0) -> list[tuple[float, float, float]]:
    """Partial rank correlation of each input (column of ``x``) with ``y``, and a percentile
    bootstrap interval over the parameter sets: ``[(estimate, lo, hi), ...]``.

    The correlation between the residuals of rank(x_j) and rank(y) after a linear regression
    on the ranks of the other inputs (Marino et al. 2008, eq. 5). NaN where ``y`` (or an input)
    does not vary.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    est = _prcc_once(x, y)
    rng = np.random.default_rng(seed)
    boot = np.array([_prcc_once(x[i], y[i])
                     for i in rng.integers(0, len(y), size=(n_boot, len(y)))])
    a = (1 - confidence) / 2
    out = []
    for j in range(x.shape[1]):
        b = boot[:, j][np.isfinite(boot[:, j])]
        if not np.isfinite(est[j]) or len(b) < n_boot // 2:
            out.append((float(est[j]), math.nan, math.nan))
        else:
            out.append((float(est[j]), float(np.quantile(b, a)), float(np.quantile(b, 1 - a))))
    return out


def sobol_indices(design: Design, y: np.ndarray, *, confidence: float = 0.95,
                  n_boot: int = N_BOOT, seed: int = 0) -> dict[str, np.ndarray]:
    """First-order (``S1``) and total (``ST``) Sobol indices of ``y`` on a Saltelli design, with
    the half-widths of their bootstrap intervals (``S1_conf``, ``ST_conf``; SALib's
    :func:`SALib.analyze.sobol.analyze`, Saltelli et al. 2010 estimators). NaN when ``y`` does
    not vary."""
    from SALib.analyze import sobol

    y = np.asarray(y, dtype=np.float64)
    k = len(design.names)
    if not np.ptp(y) > 0:
        nan = np.full(k, np.nan)
        return {"S1": nan, "S1_conf": nan, "ST": nan, "ST_conf": nan}
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        res = sobol.analyze(_problem(design.names), y, calc_second_order=False,
                            num_resamples=n_boot, conf_level=confidence, seed=seed)
    return {name: np.asarray(res[name], dtype=np.float64)
            for name in ("S1", "S1_conf", "ST", "ST_conf")}


def morris_indices(design: Design, y: np.ndarray, *, confidence: float = 0.95,
                   n_boot: int = N_BOOT, seed: int = 0) -> dict[str, np.ndarray]:
    """Morris ``mu_star`` (mean absolute elementary effect, with the half-width of its bootstrap
    interval ``mu_star_conf``) and ``sigma`` (their standard deviation) of ``y``, effects per
    unit of the design's [0, 1] scale (SALib's :func:`SALib.analyze.morris.analyze`)."""
    from SALib.analyze import morris

    y = np.asarray(y, dtype=np.float64)
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        res = morris.analyze(_problem(design.names), design.unit, y, num_resamples=n_boot,
                             conf_level=confidence, num_levels=MORRIS_LEVELS, seed=seed)
    return {name: np.asarray(res[name], dtype=np.float64)
            for name in ("mu_star", "mu_star_conf", "sigma")}


SENSITIVITY_COLUMNS = ("plan", "output", "parameter", "index", "estimate", "lo", "hi")


def sensitivity_rows(design: Design, plan: str, output: str, y: np.ndarray, *,
                     confidence: float = 0.95, seed: int = 0) -> list[dict]:
    """Rows of sensitivity.csv for one plan and output: ``index`` is ``prcc`` (latin-hypercube),
    ``S1`` and ``ST`` (sobol) or ``mu_star`` and ``sigma`` (morris); ``lo``/``hi`` its
    interval (none for sigma)."""
    rows = []

    def add(j, index, est, lo, hi):
        rows.append({"plan": plan, "output": output, "parameter": design.names[j],
                     "index": index, "estimate": est, "lo": lo, "hi": hi})

    if design.method == "latin-hypercube":
        for j, (e, lo, hi) in enumerate(prcc(design.values, y, confidence=confidence,
                                             seed=seed)):
            add(j, "prcc", e, lo, hi)
    elif design.method == "sobol":
        s = sobol_indices(design, y, confidence=confidence, seed=seed)
        for name in ("S1", "ST"):
            for j in range(len(design.names)):
                e, c = float(s[name][j]), float(s[f"{name}_conf"][j])
                add(j, name, e, e - c, e + c)
    else:
        m = morris_indices(design, y, confidence=confidence, seed=seed)
        for j in range(len(design.names)):
            e, c = float(m["mu_star"][j]), float(m["mu_star_conf"][j])
            add(j, "mu_star", e, e - c, e + c)
        for j in range(len(design.names)):
            add(j, "sigma", float(m["sigma"][j]), math.nan, math.nan)
    return rows


@dataclass(frozen=True)
class Split:
    """A one-split rule: sets with ``parameter <= threshold`` against the others; the mean
    score of each side and the share of the score it predicts."""

    parameter: str
    threshold: float
    below: float
    above: float
    accuracy: float


def one_split(x: np.ndarray, names, score: np.ndarray) -> Split | None:
    """The split of one parameter at one threshold that best predicts ``score`` (1 first plan
    better, 0 worse, 0.5 tie): each side predicts its majority, and the rule with the smallest
    absolute error wins (earlier parameters and lower thresholds on ties). None when no split
    beats predicting the overall majority (e.g. one plan wins everywhere)."""
    score = np.asarray(score, dtype=np.float64)
    n = len(score)
    total = score.sum()
    best_err, best = min(total, n - total), None
    for j, name in enumerate(names):
        order = np.argsort(x[:, j], kind="stable")
        xs, cum = x[order, j], np.cumsum(score[order])
        for m in range(1, n):
            if xs[m - 1] == xs[m]:
                continue
            left, right = cum[m - 1], total - cum[m - 1]
            err = min(left, m - left) + min(right, n - m - right)
            if err < best_err - 1e-12:
                best_err = err
                best = Split(name, float((xs[m - 1] + xs[m]) / 2), float(left / m),
                             float(right / (n - m)), 0.0)
    if best is None:
        return None
    return Split(best.parameter, best.threshold, best.below, best.above,
                 float(1 - best_err / n))


RANKING_COLUMNS = ("first", "second", "sets", "first_better", "first_better_lo",
                   "first_better_hi", "same_risk", "ties", "flip_parameter", "flip_threshold",
                   "first_better_below", "first_better_above", "rule_accuracy")


def pairwise_ranking(design: Design, risk: dict[str, np.ndarray],
                     minimum: dict[str, np.ndarray], *, confidence: float = 0.95) -> list[dict]:
    """Rows of ranking.csv: for each ordered pair of plans, the fraction of parameter sets in
    which the first is better, its Wilson interval (lower end with the ties counted as losses,
    upper end as wins: it covers every way of breaking them), the sets with the same risk, the
    ties, and the one-split rule that best predicts the winner (:func:`one_split`; empty when
    one plan wins everywhere).

    Better means a lower risk; with the same risk, a higher expected minimum abundance (the
    order of :func:`gridpop.analysis.compare.rank`); the same on both is a tie and counts half.
    """
    rows = []
    for a, ra in risk.items():
        for b, rb in risk.items():
            if a == b:
                continue
            ma, mb = minimum[a], minimum[b]
            same = ra == rb
            win = (ra < rb) | (same & (ma > mb))
            tie = same & (ma == mb)
            score = win + 0.5 * tie
            wins, ties = int(win.sum()), int(tie.sum())
            lo, _ = binomial_interval(wins, design.n, confidence)
            _, hi = binomial_interval(wins + ties, design.n, confidence)
            rule = one_split(design.values, design.names, score)
            rows.append({
                "first": a, "second": b, "sets": design.n, "first_better": float(score.mean()),
                "first_better_lo": lo, "first_better_hi": hi, "same_risk": int(same.sum()),
                "ties": ties,
                "flip_parameter": rule.parameter if rule else None,
                "flip_threshold": rule.threshold if rule else None,
                "first_better_below": rule.below if rule else None,
                "first_better_above": rule.above if rule else None,
                "rule_accuracy": rule.accuracy if rule else None})
    return rows

"""Risk, occupancy, colonisation and connectivity metrics over replicates.

Pure numpy/scipy functions on arrays that the engine's accumulators and the scenario comparison
hand over; nothing here reads or writes files. Conventions shared by every function:

- ``abundance`` is a ``(replicates, years + 1)`` array of totals, year 0 (the initial census)
  first; ``patch_abundance`` adds a last axis of ``P`` patches.
- "Below" a threshold means ``N < threshold``; "occupied" means ``N >= threshold``.
- Proportions over replicates come with binomial intervals (:func:`binomial_interval`).
- Bootstrap intervals are percentile intervals over replicates drawn with
  ``numpy.random.Generator(PCG64(seed))``, so the same inputs and seed give the same interval.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse.linalg
from scipy import stats

BINOMIAL_METHODS = {"wilson": 0, "exact": 1, "clopper-pearson": 1}
"""Interval methods for :func:`binomial_interval`; ``"clopper-pearson"`` is ``"exact"``."""

FINAL_PERCENTILES = (5, 25, 50, 75, 95)
"""Percentiles of final abundance reported by :func:`final_abundance`."""

_DENSE_MAX = 100
"""Largest patch count for which :func:`metapopulation_capacity` uses a dense eigensolver."""

_BOOT_CHUNK = 1 << 22
"""Resampled indices drawn per chunk in bootstraps (bounds memory; fixed so results are too)."""


def _check_confidence(confidence):
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must be strictly between 0 and 1, got {confidence!r}")
    return 1.0 - confidence


def _abundance_2d(abundance):
    a = np.asarray(abundance, dtype=float)
    if a.ndim != 2 or 0 in a.shape:
        raise ValueError("abundance must be a non-empty (replicates, years + 1) array, "
                         f"got shape {a.shape}")
    return a


def _patch_abundance_3d(patch_abundance):
    a = np.asarray(patch_abundance, dtype=float)
    if a.ndim != 3 or 0 in a.shape:
        raise ValueError("patch_abundance must be a non-empty (replicates, years + 1, patches) "
                         f"array, got shape {a.shape}")
    return a


def binomial_interval(successes, trials, confidence=0.95, method="wilson"):
    """Confidence interval for a binomial proportion.

    Parameters
    ----------
    successes, trials : int or array_like of int
        Numbers of successes ``k`` and trials ``n`` (broadcast together), ``0 <= k <= n``.
        Where ``n == 0`` both bounds are NaN.
    confidence : float
        Two-sided coverage, in (0, 1).
    method : {"wilson", "exact", "clopper-pearson"}
        ``"wilson"``: the score interval (no continuity correction). ``"exact"`` (same as
        ``"clopper-pearson"``): the interval from beta quantiles, with lower bound 0 at ``k = 0``
        and upper bound 1 at ``k = n``.

    Returns
    -------
    lo, hi : float or ndarray
        Bounds with the broadcast shape of the inputs (floats for scalar inputs).

    References
    ----------
    Wilson, E. B. (1927). Probable inference, the law of succession, and statistical inference.
    Journal of the American Statistical Association 22, 209-212.
    Clopper, C. J. and Pearson, E. S. (1934). The use of confidence or fiducial limits illustrated
    in the case of the binomial. Biometrika 26, 404-413.
    """
    if method not in BINOMIAL_METHODS:
        raise ValueError(f"binomial interval method {method!r} is unknown; "
                            f"allowed: {', '.join(BINOMIAL_METHODS)}")
    alpha = _check_confidence(confidence)
    k, n = np.broadcast_arrays(np.asarray(successes, dtype=float), np.asarray(trials, dtype=float))
    if np.any(k < 0) or np.any(k > n) or np.any(k != np.round(k)) or np.any(n != np.round(n)):
        raise ValueError("successes and trials must be whole numbers with 0 <= successes <= trials")
    valid = n > 0
    nn = np.where(valid, n, 1.0)
    if BINOMIAL_METHODS[method] == 0:
        z = stats.norm.isf(alpha / 2.0)
        denom = nn + z * z
        centre = (k + z * z / 2.0) / denom
        half = z / denom * np.sqrt(k * (nn - k) / nn + z * z / 4.0)
        lo = np.where(k > 0, np.clip(centre - half, 0.0, 1.0), 0.0)  # exact 0 and 1 at the
        hi = np.where(k < nn, np.clip(centre + half, 0.0, 1.0), 1.0)  # edges, not round-off
    else:
        with np.errstate(invalid="ignore"):
            lo = np.where(k > 0, stats.beta.ppf(alpha / 2.0, k, nn - k + 1.0), 0.0)
            hi = np.where(k < nn, stats.beta.isf(alpha / 2.0, k + 1.0, nn - k), 1.0)
    lo = np.where(valid, lo, np.nan)
    hi = np.where(valid, hi, np.nan)
    if lo.ndim == 0:
        return float(lo), float(hi)
    return lo, hi


def risk_curve(abundance, threshold, confidence=0.95):
    """Quasi-extinction risk per year over replicates.

    Parameters
    ----------
    abundance : (R, T + 1) array_like
        Total abundance per replicate and year, year 0 first.
    threshold : float
        Quasi-extinction threshold; a replicate is below it in year ``t`` when ``N < threshold``.
    confidence : float
        Coverage of the Wilson intervals.

    Returns
    -------
    dict of (T + 1,) ndarray
        ``"ever_below"``: fraction of replicates that were below the threshold in some year
        ``<= t`` (nondecreasing), with its interval ``"lo"``, ``"hi"``; ``"below_now"``: fraction
        below in year ``t``, with ``"below_now_lo"``, ``"below_now_hi"``.

    References
    ----------
    Ginzburg, L. R., Slobodkin, L. B., Johnson, K. and Bindman, A. G. (1982). Quasiextinction
    probabilities as a measure of impact on population growth. Risk Analysis 2, 171-181.
    """
    a = _abundance_2d(abundance)
    replicates = a.shape[0]
    below = a < threshold
    ever = np.logical_or.accumulate(below, axis=1)
    k_ever = ever.sum(axis=0)
    k_now = below.sum(axis=0)
    lo, hi = binomial_interval(k_ever, replicates, confidence)
    now_lo, now_hi = binomial_interval(k_now, replicates, confidence)
    return {"ever_below": k_ever / replicates, "lo": lo, "hi": hi,
            "below_now": k_now / replicates, "below_now_lo": now_lo, "below_now_hi": now_hi}


def _bootstrap_means(values, n_boot, rng):
    """Means of ``n_boot`` resamples (with replacement) of the ``(R,)`` array ``values``.

    Resampled indices are drawn in fixed-size chunks so that memory stays bounded and the draws
    depend only on ``rng``, ``R`` and ``n_boot``.
    """
    r = values.shape[0]
    rows = max(1, _BOOT_CHUNK // r)
    out = np.empty(n_boot)
    for start in range(0, n_boot, rows):
        stop = min(n_boot, start + rows)
        idx = rng.integers(0, r, size=(stop - start, r))
        out[start:stop] = values[idx].mean(axis=1)
    return out


def _check_boot(n_boot):
    if int(n_boot) != n_boot or n_boot < 1:
        raise ValueError(f"n_boot must be a positive whole number, got {n_boot!r}")
    return int(n_boot)


def _percentile_interval(boot, alpha):
    return np.quantile(boot, [alpha / 2.0, 1.0 - alpha / 2.0])


def expected_minimum(abundance, n_boot=2000, confidence=0.95, seed=0):
    """Expected minimum abundance over the horizon, with a bootstrap interval.

    The minimum of each replicate's trajectory (year 0 included) is averaged over replicates; the
    interval is the percentile bootstrap of that mean, resampling replicates.

    Parameters
    ----------
    abundance : (R, T + 1) array_like
        Total abundance per replicate and year, year 0 first.
    n_boot : int
        Bootstrap resamples.
    confidence : float
        Coverage of the percentile interval.
    seed : int
        Seed of ``numpy.random.Generator(PCG64(seed))``.

    Returns
    -------
    estimate, lo, hi : float

    References
    ----------
    McCarthy, M. A. and Thompson, C. (2001). Expected minimum population size as a measure of
    threat. Animal Conservation 4, 351-355.
    Efron, B. and Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall.
    """
    a = _abundance_2d(abundance)
    alpha = _check_confidence(confidence)
    minima = a.min(axis=1)
    rng = np.random.Generator(np.random.PCG64(seed))
    lo, hi = _percentile_interval(_bootstrap_means(minima, _check_boot(n_boot), rng), alpha)
    return float(minima.mean()), float(lo), float(hi)


def final_abundance(abundance):
    """Mean and percentiles (5, 25, 50, 75, 95) of abundance in the last year.

    Parameters
    ----------
    abundance : (R, T + 1) array_like
        Total abundance per replicate and year, year 0 first.

    Returns
    -------
    dict of float
        ``"mean"`` and ``"p5"``, ``"p25"``, ``"p50"``, ``"p75"``, ``"p95"`` (linear interpolation
        between order statistics, numpy's default).
    """
    last = _abundance_2d(abundance)[:, -1]
    out = {"mean": float(last.mean())}
    for q, v in zip(FINAL_PERCENTILES, np.percentile(last, FINAL_PERCENTILES), strict=True):
        out[f"p{q}"] = float(v)
    return out


def occupancy_over_time(patch_abundance, threshold):
    """Patch occupancy per year over replicates.

    Parameters
    ----------
    patch_abundance : (R, T + 1, P) array_like
        Abundance per replicate, year (year 0 first) and patch.
    threshold : float
        A patch is occupied when ``N >= threshold``.

    Returns
    -------
    dict
        ``"fraction_occupied"`` (T + 1, P): fraction of replicates in which the patch is occupied;
        ``"n_occupied"`` (R, T + 1) int: occupied patches per replicate and year;
        ``"mean_n_occupied"`` (T + 1,): its mean over replicates.
    """
    occ = _patch_abundance_3d(patch_abundance) >= threshold
    n_occ = occ.sum(axis=2)
    return {"fraction_occupied": occ.mean(axis=0), "n_occupied": n_occ,
            "mean_n_occupied": n_occ.mean(axis=0)}


def colonisation_probability(patch_abundance, threshold):
    """Probability that a patch has been occupied (``N >= threshold``) in some year ``<= t``.

    Parameters
    ----------
    patch_abundance : (R, T + 1, P) array_like
        Abundance per replicate, year (year 0 first) and patch.
    threshold : float
        Occupancy threshold.

    Returns
    -------
    (T + 1, P) ndarray
        Fraction of replicates, nondecreasing in ``t``.
    """
    occ = _patch_abundance_3d(patch_abundance) >= threshold
    return np.logical_or.accumulate(occ, axis=1).mean(axis=0)


def median_first_year(ever_counts, replicates):
    """Median first year in which each cell is occupied, from cumulative counts.

    Parameters
    ----------
    ever_counts : (T + 1, ny, nx) array_like
        Number of replicates in which the cell has been occupied in some year ``<= t``
        (nondecreasing in ``t``).
    replicates : int
        Number of replicates behind the counts.

    Returns
    -------
    (ny, nx) ndarray of float
        The first ``t`` with ``ever_counts[t] >= replicates / 2``; NaN where that never happens.
        Replicates never occupied count as occupied at an infinitely late year, so this is the
        median of the first-occupied years; with an even number of replicates it is the lower
        median (the year by which exactly half of the replicates were occupied counts).
    """
    c = np.asarray(ever_counts)
    if c.ndim != 3 or c.shape[0] == 0:
        raise ValueError(f"ever_counts must be a (years + 1, ny, nx) array, got shape {c.shape}")
    if int(replicates) != replicates or replicates < 1:
        raise ValueError(f"replicates must be a positive whole number, got {replicates!r}")
    if np.any(np.diff(c, axis=0) < 0) or np.any(c < 0) or np.any(c > replicates):
        raise ValueError("ever_counts must be cumulative: nondecreasing in years, "
                         f"between 0 and replicates ({replicates})")
    reached = 2 * c >= replicates
    first = np.argmax(reached, axis=0).astype(float)
    first[~reached[-1]] = np.nan
    return first


def _leading_eigen(m, v0=None):
    """Leading (largest real part) eigenvalue and its right eigenvector, normalised to sum 1."""
    if m.shape[0] <= _DENSE_MAX:
        w, v = np.linalg.eig(m)
        i = np.argmax(w.real)
        lam, vec = w[i].real, v[:, i].real
    else:
        w, v = scipy.sparse.linalg.eigs(m, k=1, which="LR", v0=v0)
        lam, vec = w[0].real, v[:, 0].real
    total = vec.sum()
    return float(lam), (vec / total if total != 0 else vec)


def metapopulation_capacity(xy, area, alpha, *, dispersal=None):
    """Metapopulation capacity of a patch network and each patch's part in it.

    ``M_ij = f_ij A_i A_j`` for ``i != j`` and ``M_ii = 0``, with ``f_ij = exp(-alpha d_ij)`` or,
    when ``dispersal`` is given, ``f_ij = dispersal[i, j]``. The capacity ``lambda_M`` is the
    leading eigenvalue of ``M``; the network persists in the Levins-type model when ``lambda_M >
    e / c``. Dense eigensolver up to 100 patches, ARPACK (``scipy.sparse.linalg.eigs``) above.

    Parameters
    ----------
    xy : (P, 2) array_like
        Patch coordinates (e.g. centroids), in the length unit of ``1 / alpha``.
    area : (P,) array_like
        Patch areas (or carrying capacities), positive.
    alpha : float
        Inverse of the mean dispersal distance, positive. Ignored (may be None) when
        ``dispersal`` is given.
    dispersal : (P, P) array_like, optional
        Nonnegative patch-to-patch connection probabilities (e.g. from a resistance-surface
        model) used in place of ``exp(-alpha d_ij)``; its diagonal is ignored.

    Returns
    -------
    dict
        ``"lambda_M"`` (float): the capacity.
        ``"contribution"`` (P,): the leading right eigenvector of ``M`` normalised to sum 1 (the
        patch's share in the stationary occupancy pattern near the persistence threshold).
        ``"removal_drop"`` (P,): ``lambda_M`` minus the capacity of the network with that patch
        removed (the loss of capacity if the patch were destroyed).

    References
    ----------
    Hanski, I. and Ovaskainen, O. (2000). The metapopulation capacity of a fragmented landscape.
    Nature 404, 755-758.
    """
    xy = np.asarray(xy, dtype=float)
    area = np.asarray(area, dtype=float)
    if xy.ndim != 2 or xy.shape[1] != 2 or xy.shape[0] < 1:
        raise ValueError(f"xy must be a (patches, 2) array, got shape {xy.shape}")
    p = xy.shape[0]
    if area.shape != (p,) or np.any(~(area > 0)):
        raise ValueError(f"patch areas must be {p} positive values, got shape {area.shape} "
                            f"with minimum {np.min(area) if area.size else None!r}")
    if dispersal is None:
        if alpha is None or not alpha > 0:
            raise ValueError(f"alpha (1 / mean dispersal distance) must be positive, "
                                f"got {alpha!r}")
        f = np.exp(-alpha * np.hypot(xy[:, None, 0] - xy[None, :, 0],
                                     xy[:, None, 1] - xy[None, :, 1]))
    else:
        f = np.array(dispersal, dtype=float)
        if f.shape != (p, p) or np.any(~(f >= 0)):
            raise ValueError(f"dispersal must be a ({p}, {p}) array of nonnegative "
                                f"probabilities, got shape {f.shape}")
    m = f * area[:, None] * area[None, :]
    np.fill_diagonal(m, 0.0)
    lam, vec = _leading_eigen(m)
    drop = np.full(p, lam)  # a single patch leaves an empty network, capacity 0
    if p > 1:
        for i in range(p):
            keep = np.arange(p) != i
            drop[i] -= _leading_eigen(m[np.ix_(keep, keep)], v0=vec[keep])[0]
    return {"lambda_M": lam, "contribution": vec, "removal_drop": drop}


def levins_equilibrium(c, e):
    """Equilibrium fraction of occupied patches ``p* = 1 - e / c`` (0 when ``e >= c``).

    Parameters
    ----------
    c, e : float
        Colonisation and extinction rates, ``c > 0``, ``e >= 0``.

    References
    ----------
    Levins, R. (1969). Some demographic and genetic consequences of environmental heterogeneity
    for biological control. Bulletin of the Entomological Society of America 15, 237-240.
    """
    _check_levins(c, e)
    return max(0.0, 1.0 - e / c)


def _check_levins(c, e):
    if not (c > 0 and e >= 0):
        raise ValueError(f"Levins rates need c > 0 and e >= 0, got c={c!r}, e={e!r}")


def levins_occupancy(c, e, p0, t):
    """Fraction of occupied patches at time ``t`` under ``dp/dt = c p (1 - p) - e p``.

    The equation is logistic with rate ``c - e`` and ceiling ``1 - e / c``, so
    ``p(t) = p* / (1 + (p* / p0 - 1) exp(-(c - e) t))`` for ``c != e`` and
    ``p(t) = p0 / (1 + c p0 t)`` for ``c = e``.

    Parameters
    ----------
    c, e : float
        Colonisation and extinction rates, ``c > 0``, ``e >= 0``.
    p0 : float
        Initial fraction occupied, in (0, 1].
    t : float or array_like
        Times, ``>= 0``.

    Returns
    -------
    float or ndarray

    References
    ----------
    Levins, R. (1969). Bulletin of the Entomological Society of America 15, 237-240.
    """
    _check_levins(c, e)
    if not 0 < p0 <= 1:
        raise ValueError(f"initial occupancy p0 must be in (0, 1], got {p0!r}")
    t = np.asarray(t, dtype=float)
    r = c - e
    if r == 0:
        p = p0 / (1.0 + c * p0 * t)
    else:
        ps = 1.0 - e / c
        p = ps / (1.0 + (ps / p0 - 1.0) * np.exp(-r * t))
    return float(p) if p.ndim == 0 else p


def _outcomes(x, name):
    x = np.asarray(x)
    if x.ndim != 1 or x.size < 2:
        raise ValueError(f"{name} must be a 1-D array of at least 2 replicate outcomes, "
                         f"got shape {x.shape}")
    return x


def _difference_summary(diff, boot, alpha):
    lo, hi = _percentile_interval(boot, alpha)
    return {"mean_difference": float(diff), "lo": float(lo), "hi": float(hi),
            "boot_sd": float(boot.std(ddof=1)) if boot.size > 1 else float("nan"),
            "distinguishable": bool(lo > 0 or hi < 0)}


# n_boot, confidence and seed are documented in each public function (numpydoc), as above
def paired_difference(a, b, n_boot=2000, confidence=0.95, seed=0):
    """Difference ``b - a`` between two scenarios run on the same replicate seeds.

    Replicate ``i`` of ``a`` and of ``b`` share their random numbers (common random numbers), so
    the replicate differences ``b_i - a_i`` are resampled as pairs.

    Parameters
    ----------
    a, b : (R,) array_like of bool or float
        Paired replicate outcomes (an event such as quasi-extinction, or a number such as final
        abundance) of the baseline ``a`` and the alternative ``b``.
    n_boot : int
        Bootstrap resamples.
    confidence : float
        Coverage of the percentile interval.
    seed : int
        Seed of ``numpy.random.Generator(PCG64(seed))``.

    Returns
    -------
    dict
        ``"mean_difference"``: mean of ``b - a``; ``"lo"``, ``"hi"``: paired percentile bootstrap
        interval; ``"boot_sd"``: standard deviation of the bootstrap differences;
        ``"distinguishable"``: whether the interval excludes 0. For bool outcomes also
        ``"n_a_only"`` (event in ``a`` but not ``b``), ``"n_b_only"`` (in ``b`` but not ``a``) and
        ``"mcnemar_p"``: the exact conditional test, two-sided binomial test of ``n_b_only`` out of
        the discordant pairs with probability 1/2 (1.0 when there are none).

    References
    ----------
    McNemar, Q. (1947). Note on the sampling error of the difference between correlated
    proportions or percentages. Psychometrika 12, 153-157.
    Efron, B. and Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall.
    """
    a = _outcomes(a, "a")
    b = _outcomes(b, "b")
    if a.shape != b.shape:
        raise ValueError(f"paired outcomes need equal lengths, got {a.size} and {b.size}")
    alpha = _check_confidence(confidence)
    d = b.astype(float) - a.astype(float)
    rng = np.random.Generator(np.random.PCG64(seed))
    out = _difference_summary(d.mean(), _bootstrap_means(d, _check_boot(n_boot), rng), alpha)
    if a.dtype == bool and b.dtype == bool:
        n_a_only = int(np.sum(a & ~b))
        n_b_only = int(np.sum(b & ~a))
        n_disc = n_a_only + n_b_only
        p = stats.binomtest(n_b_only, n_disc, 0.5).pvalue if n_disc else 1.0
        out.update(n_a_only=n_a_only, n_b_only=n_b_only, mcnemar_p=float(p))
    return out


def unpaired_difference(a, b, n_boot=2000, confidence=0.95, seed=0):
    """Difference ``b - a`` of means treating the two sets of replicates as independent.

    The same summary as :func:`paired_difference` without the pairing: ``a`` and ``b`` are
    resampled separately (they may differ in length), which is the right interval when the
    scenarios did not share replicate seeds and a reference for how much pairing gains.

    Parameters
    ----------
    a, b : (Ra,), (Rb,) array_like of bool or float
        Replicate outcomes of the baseline ``a`` and the alternative ``b``.
    n_boot, confidence, seed
        As in :func:`paired_difference`.

    Returns
    -------
    dict
        ``"mean_difference"``, ``"lo"``, ``"hi"``, ``"boot_sd"``, ``"distinguishable"``.

    References
    ----------
    Efron, B. and Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall.
    """
    a = _outcomes(a, "a").astype(float)
    b = _outcomes(b, "b").astype(float)
    alpha = _check_confidence(confidence)
    n_boot = _check_boot(n_boot)
    rng = np.random.Generator(np.random.PCG64(seed))
    boot_a = _bootstrap_means(a, n_boot, rng)
    boot_b = _bootstrap_means(b, n_boot, rng)
    return _difference_summary(b.mean() - a.mean(), boot_b - boot_a, alpha)


def quasi_extinction_diffusion(mu, sigma, n0, nq, t):
    """Probability that a diffusion of ``ln N`` has reached ``ln nq`` by time ``t``.

    ``ln N`` is Brownian motion with drift ``mu`` and variance ``sigma**2`` per unit time started
    at ``ln n0``; with ``d = ln(n0 / nq)``::

        G(t) = Phi((-d - mu t) / (sigma sqrt t))
               + exp(-2 mu d / sigma**2) Phi((-d + mu t) / (sigma sqrt t)),

    and ``G(inf) = exp(-2 mu d / sigma**2)`` for ``mu > 0``, 1 otherwise. The process is watched
    continuously: a population censused once a year crosses less often (see the tests).

    Parameters
    ----------
    mu : float
        Drift of ``ln N`` per year.
    sigma : float
        Standard deviation of ``ln N`` increments per year, positive.
    n0, nq : float
        Initial abundance and quasi-extinction threshold, positive.
    t : float or array_like
        Horizon(s) in years, ``>= 0``; ``numpy.inf`` gives the probability of ever reaching it.

    Returns
    -------
    float or ndarray

    References
    ----------
    Ginzburg, L. R., Slobodkin, L. B., Johnson, K. and Bindman, A. G. (1982). Quasiextinction
    probabilities as a measure of impact on population growth. Risk Analysis 2, 171-181.
    Dennis, B., Munholland, P. L. and Scott, J. M. (1991). Estimation of growth and extinction
    parameters for endangered species. Ecological Monographs 61, 115-143.
    """
    if not (sigma > 0 and n0 > 0 and nq > 0):
        raise ValueError(f"need sigma > 0, n0 > 0 and nq > 0, got sigma={sigma!r}, "
                            f"n0={n0!r}, nq={nq!r}")
    t = np.asarray(t, dtype=float)
    if np.any(~(t >= 0)):
        raise ValueError("horizon t must be >= 0")
    d = np.log(n0 / nq)
    if d <= 0:
        g = np.ones_like(t)
    else:
        log_reflect = -2.0 * mu * d / sigma**2
        finite = np.isfinite(t) & (t > 0)
        tt = np.where(finite, t, 1.0)
        s = sigma * np.sqrt(tt)
        g = stats.norm.cdf((-d - mu * tt) / s) + np.exp(
            log_reflect + stats.norm.logcdf((-d + mu * tt) / s))
        g_inf = np.exp(log_reflect) if mu > 0 else 1.0
        g = np.where(finite, g, np.where(t == 0, 0.0, g_inf))
    return float(g) if g.ndim == 0 else g

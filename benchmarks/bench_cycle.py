"""Speed of the yearly cycle against a plain NumPy/SciPy version and against memory bandwidth.

1. One replicate's yearly cycle (Beverton-Holt growth split into survivors and births, 20 %
   dispersal with a gaussian kernel of sigma 2 cells truncated at 4 sigma, census into the
   per-year accumulators and the per-patch ledger), deterministic and stochastic, on square
   grids of 1 ha cells: gridpop (``Replicate``, numba) against a straightforward
   vectorised NumPy/SciPy implementation of the same cycle (``np.where`` growth,
   ``scipy.ndimage.gaussian_filter`` dispersal, ``numpy.random.Generator`` binomial and Poisson
   draws, each disperser drawing a rounded normal displacement, ``np.bincount`` census).
   Both add each year into per-year per-cell accumulators that a batch of replicates shares
   (gridpop's are memory-mapped files, the reference's are in memory), and both are timed in
   the steady state of a batch: replicate 1, after replicate 0 has run every year (compiling
   the kernels and touching the accumulators' pages once per batch).
   Figures: cell-years per second and the ratio gridpop / reference.
2. One replicate's yearly cycle with a three-stage life history (juvenile, subadult, adult;
   Beverton-Holt crowding of fecundity; subadults and adults disperse, 0.6 and 0.05) against the
   one-stage year of (1) on the same landscape: the ratio of their fastest years, both
   measured here (the target: a three-stage year within 1.5 times per stage, 4.5 times, of the
   one-stage year).
3. The deterministic local step (``demography.step_deterministic``: reads N, K, the noise; writes
   the new N, births, deaths: 48 bytes per cell at least) against the bound set by a measured
   streaming triad ``a = b + s c`` (STREAM convention: 24 bytes per element; McCalpin 1995, IEEE
   TCCA Newsletter), both on numba's thread pool.

Usage: python benchmarks/bench_cycle.py [--sizes 512,2048,4096] [--quick]
Writes benchmarks/results/bench_cycle.json (bench_cycle_quick.json with --quick).
"""

from __future__ import annotations

import argparse
import math
import shutil
import tempfile
import time
from pathlib import Path

import numba
import numpy as np
from _common import SIGMA_CELLS, best_time, write_result, write_scenario
from scipy import ndimage

from gridpop._jit import pjit, prange
from gridpop.config import load_scenario
from gridpop.demography import MODEL_CODES, step_deterministic
from gridpop.landscape import build_landscape
from gridpop.movement import kernel
from gridpop.simulation import cycle
from gridpop.simulation.cycle import BatchSink, Replicate, simulate_replicate
from gridpop.simulation.model import build_model

PHASES = {"grow": (cycle, "grow_pass"), "spread": (kernel, "spread"),
          "disperse_stochastic": (kernel, "disperse_stochastic"),
          "settle_fields": (kernel, "settle_fields"), "count": (cycle, "census_pass")}
"""Functions the yearly cycle calls, timed one by one: label -> (module, name)."""


def gridpop_cycle(model, folder: Path, years: int) -> tuple[float, dict]:
    """Seconds of gridpop's fastest replicate-year (the second replicate of a batch: the
    machine is shared, so the fastest year is the least disturbed one), and the seconds spent
    in that year in each of :data:`PHASES` (the engine's own calls, timed by wrapping them)."""
    spent = dict.fromkeys(PHASES, 0.0)
    originals = {label: getattr(mod, name) for label, (mod, name) in PHASES.items()}

    def timed(name, fn):
        def call(*args, **kwargs):
            t = time.perf_counter()
            try:
                return fn(*args, **kwargs)
            finally:
                spent[name] += time.perf_counter() - t
        return call

    sink = BatchSink(folder, model, range(2))
    simulate_replicate(model, 0, sink, 0)
    rep = Replicate(model, 1, sink.ledger[1])
    rep.start(sink)
    best, best_phases = math.inf, {}
    for label, fn in originals.items():
        setattr(*PHASES[label], timed(label, fn))
    try:
        for t in range(1, years + 1):
            spent.update(dict.fromkeys(PHASES, 0.0))
            start = time.perf_counter()
            rep.advance(t, sink)
            total = time.perf_counter() - start
            if total < best:
                best = total
                best_phases = {label: v for label, v in spent.items() if v > 0}
                best_phases["other"] = total - sum(best_phases.values())
    finally:
        for label, fn in originals.items():
            setattr(*PHASES[label], fn)
        # deleting the accumulators drops their dirty pages: the next measurement does not
        # share the machine with their writeback
        shutil.rmtree(folder)
    return best, best_phases


class Reference:
    """The same cycle written the direct NumPy/SciPy way (whole-array operations)."""

    def __init__(self, model, stochastic: bool):
        self.k = model.capacity
        self.habitat = self.k > 0
        self.safe_k = np.where(self.habitat, self.k, 1.0)
        self.labels = model.census.labels.ravel()
        self.n_patches = model.census.n_patches
        rates = model.growth.rates
        self.rate, self.s, self.f = rates.r, rates.s, model.movement.emigration.fraction
        self.n = model.initial.copy()
        self.ever = np.zeros(self.k.shape, bool)
        self.stochastic = stochastic
        self.rng = np.random.default_rng(0)

    def patch_sums(self, x):
        return np.bincount(self.labels, weights=x.ravel(), minlength=self.n_patches + 1)

    def year(self, sum_n, occupied, ever_count):
        """One year; adds into this year's accumulators and returns the patch ledger."""
        n, er = self.n, np.exp(self.rate)
        lam = np.where(self.habitat, er / (1.0 + (er - 1.0) * n / self.safe_k), 0.0)
        if self.stochastic:
            survivors = self.rng.binomial(n.astype(np.int64), np.minimum(self.s, lam))
            births = self.rng.poisson(n * np.maximum(lam - self.s, 0.0))
            n = (survivors + births).astype(np.float64)
            leaving = self.rng.binomial(n.astype(np.int64), self.f)
            arrivals = self.scatter(leaving)
        else:
            survivors = n * np.minimum(self.s, lam)
            births = n * np.maximum(lam - self.s, 0.0)
            n = survivors + births
            leaving = self.f * n
            arrivals = ndimage.gaussian_filter(leaving, SIGMA_CELLS, mode="constant",
                                               truncate=4.0)
        deaths = self.n - survivors
        settled = np.where(self.habitat, arrivals, 0.0)
        n = n - leaving + settled
        occ = n >= 1.0
        self.ever |= occ
        sum_n += n
        occupied += occ
        ever_count += self.ever
        ledger = [self.patch_sums(x) for x in (n, births, deaths, leaving, settled)]
        ledger.append(np.bincount(self.labels, weights=occ.ravel(), minlength=self.n_patches + 1))
        self.n = n
        return ledger

    def scatter(self, leaving):
        """Each disperser lands at a normal displacement (sd sigma) from its cell centre, in the
        cell containing that point, dropped if off the grid or beyond 4 sigma."""
        ny, nx = leaving.shape
        source = np.repeat(np.arange(leaving.size), leaving.ravel())
        d = np.rint(self.rng.normal(0.0, SIGMA_CELLS, (2, source.size))).astype(np.int64)
        y, x = source // nx + d[0], source % nx + d[1]
        keep = ((np.abs(d) <= 4 * SIGMA_CELLS).all(axis=0)
                & (y >= 0) & (y < ny) & (x >= 0) & (x < nx))
        return np.bincount(y[keep] * nx + x[keep], minlength=leaving.size).reshape(ny, nx)


def reference_cycle(model, stochastic: bool, years: int) -> float:
    """Seconds of the reference's fastest replicate-year (its second replicate, as gridpop's)."""
    shape = (years + 1, *model.capacity.shape)
    acc = [np.zeros(shape), np.zeros(shape, np.int32), np.zeros(shape, np.int32)]
    first = Reference(model, stochastic)
    for t in range(1, years + 1):
        first.year(*(a[t] for a in acc))
    ref = Reference(model, stochastic)
    best = math.inf
    for t in range(1, years + 1):
        start = time.perf_counter()
        ref.year(*(a[t] for a in acc))
        best = min(best, time.perf_counter() - start)
    return best


BANDWIDTH_CELLS = 2**24
"""At least this many float64 per array in the bandwidth probe (128 MiB, far beyond the caches)."""


@pjit(grid=None)
def triad(a, b, c, s):
    for i in prange(a.size):
        a[i] = b[i] + s * c[i]


def bandwidth(cells: int) -> dict:
    """Streaming triad and numpy copy over arrays of ``cells`` float64, bytes per second."""
    a, b, c = np.zeros(cells), np.ones(cells), np.full(cells, 2.0)
    t_triad = best_time(lambda: triad(a, b, c, 3.0), repeat=5)
    t_copy = best_time(lambda: np.copyto(a, b), repeat=5)
    return {"cells": cells, "triad_bytes_per_s": 24 * cells / t_triad,
            "copy_bytes_per_s": 16 * cells / t_copy}


STAGES = """
[stages]
names = ["juvenile", "subadult", "adult"]
transitions = [[0.0, 0.0, 0.0], [0.35, 0.0, 0.0], [0.0, 0.55, 0.82]]
fecundity = [[0.0, 0.9, 2.1], [0.0, 0.0, 0.0], [0.0, 0.0, 0.0]]
dispersal_fraction = [0.0, 0.6, 0.05]
"""


def three_stage(path: Path) -> Path:
    """The benchmark scenario at ``path`` with the three-stage life history of :data:`STAGES`
    instead of [growth] rate and survival and [dispersal] fraction."""
    text = path.read_text()
    for line in ("rate = 0.4\n", "survival = 0.6\n", "fraction = 0.2\n"):
        text = text.replace(line, "")
    staged = path.with_name("three_stage.toml")
    staged.write_text(text + STAGES)
    return staged


def local_step(size: int, bw: dict) -> dict:
    rng = np.random.default_rng(1)
    k = rng.uniform(0.0, 50.0, (size, size))
    n = k * 0.5
    env = np.zeros_like(n)
    out, births, deaths = np.empty_like(n), np.empty_like(n), np.empty_like(n)
    code = MODEL_CODES["beverton-holt"]
    t = best_time(lambda: step_deterministic(n, k, env, out, births, deaths, code, 0.4, 0.6,
                                             1.0, 0.0), repeat=5)
    cells = size * size
    bound = 48 * cells / bw["triad_bytes_per_s"]
    return {"size": size, "seconds": t, "cell_years_per_s": cells / t,
            "bytes_per_s_at_48_per_cell": 48 * cells / t, "bandwidth_bound_s": bound,
            "fraction_of_bound": bound / t}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="512,2048,4096")
    ap.add_argument("--threads", default="1,2", help="numba thread counts, comma-separated")
    ap.add_argument("--quick", action="store_true", help="512 and 1024 only, fewer years")
    args = ap.parse_args()
    sizes = [512, 1024] if args.quick else [int(s) for s in args.sizes.split(",")]
    threads = [int(t) for t in args.threads.split(",")]
    rows = []
    print(f"{'grid':>6} {'mode':>13} {'threads':>7} {'gridpop cell-yr/s':>18} "
          f"{'numpy cell-yr/s':>16} {'ratio':>6}")
    with tempfile.TemporaryDirectory() as tmp:
        for size in sizes:
            years = 2 if args.quick else max(6, int(8 * (512 / size) ** 2))
            cells = size * size
            for stochastic in (False, True):
                folder = Path(tmp) / f"{size}_{stochastic}"
                path = write_scenario(folder, size, years=years, stochastic=stochastic,
                                      capacity=10.0)
                s = load_scenario(path)
                model = build_model(s, build_landscape(s, stochastic=stochastic))
                t_r = reference_cycle(model, stochastic, years)
                mode = "stochastic" if stochastic else "deterministic"
                s3 = load_scenario(three_stage(path))
                staged = build_model(s3, build_landscape(s3, stochastic=stochastic))
                for nt in threads:
                    numba.set_num_threads(nt)
                    t_g, phases = gridpop_cycle(model, folder / f"batch{nt}", years)
                    t_3, phases_3 = gridpop_cycle(staged, folder / f"staged{nt}", years)
                    rows.append({"size": size, "stochastic": stochastic, "threads": nt,
                                 "years_timed": years, "timing": "fastest year",
                                 "habitat_cells": int((model.capacity > 0).sum()),
                                 "patches": model.census.n_patches,
                                 "kernel_radius": model.kernel.radius,
                                 "gridpop_s_per_year": t_g, "reference_s_per_year": t_r,
                                 "gridpop_cell_years_per_s": cells / t_g,
                                 "reference_cell_years_per_s": cells / t_r,
                                 "speedup": t_r / t_g, "gridpop_phases_s_per_year": phases,
                                 "three_stage_s_per_year": t_3,
                                 "three_stage_over_one_stage": t_3 / t_g,
                                 "three_stage_phases_s_per_year": phases_3})
                    print(f"{size:>6} {mode:>13} {nt:>7} {cells / t_g:>18.3g} "
                          f"{cells / t_r:>16.3g} {t_r / t_g:>6.2f}   "
                          + ", ".join(f"{k} {v * 1e3:.0f} ms" for k, v in phases.items()))
                    print(f"{'':>6} {'three stages':>13} {nt:>7} {cells / t_3:>18.3g} "
                          f"{'':>16} {t_3 / t_g:>6.2f}x the one-stage year   "
                          + ", ".join(f"{k} {v * 1e3:.0f} ms" for k, v in phases_3.items()))
                del model, staged
    bw, steps = [], []
    for nt in threads:
        numba.set_num_threads(nt)
        b = {"threads": nt, **bandwidth(max(BANDWIDTH_CELLS, max(sizes) ** 2))}
        bw.append(b)
        print(f"{nt} threads: triad {b['triad_bytes_per_s'] / 1e9:.2f} GB/s, copy "
              f"{b['copy_bytes_per_s'] / 1e9:.2f} GB/s over {b['cells']} cells")
        for size in sizes:
            st = {"threads": nt, **local_step(size, b)}
            steps.append(st)
            print(f"  local step {size}^2: {st['seconds'] * 1e3:.1f} ms, "
                  f"{st['bytes_per_s_at_48_per_cell'] / 1e9:.2f} GB/s, "
                  f"{st['fraction_of_bound']:.2f} of the triad bound")
    write_result("bench_cycle", {"cycle": rows, "bandwidth": bw, "local_step": steps,
                                 "sigma_cells": SIGMA_CELLS}, args.quick)


if __name__ == "__main__":
    main()

"""Cost of the resistance (walk) dispersal engine of gridpop.resistance.

1. Deterministic: one expected redistribution of a 2048 x 2048 grid by walks of n steps, against
   the Gaussian of the same spread (per-axis sigma^2 = n / sqrt(2), the walk's variance on a uniform
   surface) by scipy.ndimage.gaussian_filter and by the kernel engine (gridpop.dispersal).
2. Stochastic: whole dispersers (about one per habitat cell) walking over the same landscape, with
   heading_bias 1 and settlement probability q or q^8: dispersers and steps per second.

The landscape is smoothed noise: suitability s in [0, 1], resistance 1 + 49 (1 - s)^2, habitat
quality s where s > 0.6 (else matrix), a road of infinite resistance across the middle.

Prints a table and writes benchmarks/results/bench_walk.json (bench_walk_quick.json with --quick).

Usage: python benchmarks/bench_walk.py [--size 2048] [--quick]
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
from functools import partial
from pathlib import Path

import numba
import numpy as np
from _common import best_time
from scipy import ndimage

from gridpop import rng
from gridpop.movement.convolution import disperse_deterministic
from gridpop.movement.kernels import make_kernel
from gridpop.movement.walk import (
    WalkParams,
    disperse_walk_deterministic,
    disperse_walk_stochastic,
    permeability_from_resistance,
    resistance_from_suitability,
)


def make_landscape(size):
    gen = np.random.default_rng(0)
    s = ndimage.gaussian_filter(gen.standard_normal((size, size)), 8.0)
    s = (s - s.min()) / (s.max() - s.min())
    r = resistance_from_suitability(s, 50.0, 2.0)
    r[size // 2, :] = np.inf
    quality = np.where(s > 0.6, s, 0.0)
    return permeability_from_resistance(r), quality


def walk_params(steps, heading_bias, settle_exponent=1.0):
    return WalkParams(walk_length=steps, death_per_resistance=0.02, heading_bias=heading_bias,
                      settle_exponent=settle_exponent)


def bench_deterministic(size, steps, perm, quality, labels):
    d = np.where(quality > 0, 10.0 * quality, 0.0)
    rows = []
    for n in steps:
        walk = {kappa: best_time(partial(disperse_walk_deterministic, d, perm, quality, labels, 0,
                                         walk_params(n, kappa)), repeat=1)
                for kappa in (0.0, 1.0)}
        sigma = math.sqrt(n / math.sqrt(2.0))
        gauss = best_time(partial(ndimage.gaussian_filter, d, sigma, mode="constant"))
        kern = make_kernel("gaussian", mean_distance_m=sigma * math.sqrt(math.pi / 2),
                                     cell_w_m=1.0, cell_h_m=1.0)
        engine = best_time(partial(disperse_deterministic, d, kern, "absorbing"))
        row = {"steps": n, "sigma_cells": sigma, "walk_s": walk[0.0],
               "walk_persistence_s": walk[1.0],
               "walk_cell_steps_per_s": size * size * n / walk[0.0],
               "gaussian_filter_s": gauss, "kernel_engine_s": engine}
        rows.append(row)
        print(f"{n:6d} {sigma:7.2f} {walk[0.0]:9.3f} {walk[1.0]:11.3f} {gauss:9.4f} "
              f"{engine:9.4f}", flush=True)
    return rows


def bench_stochastic(size, steps, perm, quality, labels, per_cell):
    gen = np.random.default_rng(1)
    d = np.where(quality > 0, gen.poisson(per_cell, (size, size)), 0).astype(float)
    key = rng.year_key(1, 0, 0, rng.STREAM_WALK)
    rows = []
    for n in steps:
        for shape in (1.0, 8.0):
            params = walk_params(n, 1.0, shape)
            t = best_time(partial(disperse_walk_stochastic, d, perm, quality, labels, 0, params,
                                  key), repeat=2)
            visits = disperse_walk_stochastic(d, perm, quality, labels, 0, params, key).visits.sum()
            row = {"steps": n, "settle_exponent": shape, "dispersers": float(d.sum()), "walk_s": t,
                   "dispersers_per_s": d.sum() / t, "steps_per_s": visits / t,
                   "mean_steps": visits / d.sum()}
            rows.append(row)
            print(f"{n:6d} {shape:6.1f} {d.sum():12.0f} {t:9.3f} {row['dispersers_per_s']:14.4g} "
                  f"{row['steps_per_s']:12.4g} {row['mean_steps']:8.2f}", flush=True)
    return rows


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=2048)
    ap.add_argument("--quick", action="store_true", help="small grid, few steps (a smoke test)")
    args = ap.parse_args()
    size = 256 if args.quick else args.size
    steps = (10,) if args.quick else (10, 50, 100)
    perm, quality = make_landscape(size)
    labels = np.zeros((size, size), np.int32)
    print(f"deterministic, {size} x {size} grid, {numba.get_num_threads()} threads (seconds)")
    print(f"{'steps':>6} {'sigma':>7} {'walk':>9} {'persistent':>11} {'gaussian':>9} "
          f"{'kernel':>9}")
    det = bench_deterministic(size, steps, perm, quality, labels)
    print("stochastic (heading_bias 1)")
    print(f"{'steps':>6} {'shape':>6} {'dispersers':>12} {'seconds':>9} {'dispersers/s':>14} "
          f"{'steps/s':>12} {'steps/w':>8}")
    sto = bench_stochastic(size, steps, perm, quality, labels, per_cell=1.0)
    out = Path(__file__).parent / "results"
    out.mkdir(exist_ok=True)
    result = {"grid": [size, size], "threads": numba.get_num_threads(),
              "machine": platform.platform(), "processor": platform.processor(),
              "load_average_1min": os.getloadavg()[0],
              "habitat_share": float((quality > 0).mean()),
              "deterministic": det, "stochastic": sto}
    path = out / ("bench_walk_quick.json" if args.quick else "bench_walk.json")
    path.write_text(json.dumps(result, indent=1))
    print(f"wrote {path}")


if __name__ == "__main__":
    main()

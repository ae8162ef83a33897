"""Cost of the dispersal engines, to place the crossovers recorded in gridpop.movement.placement.

1. Deterministic: time per year-step of the separable stencil (gaussian), the full 2-D stencil
   (exponential) and the FFT on a 2048 x 2048 grid for kernel radii 1..100 cells
   (STENCIL_MAX_RADIUS_SEPARABLE, STENCIL_MAX_RADIUS).
2. Stochastic: time per cell of placing n dispersers one by one or by a sequential-binomial
   multinomial, for stencils of S cells (MULTINOMIAL_PER_CELL).

Prints tables and writes benchmarks/results/bench_dispersal.json.

Usage: python benchmarks/bench_dispersal.py [--size 2048] [--threads 1,2] [--quick]
"""

from __future__ import annotations

import argparse
import json
import os
import platform
from pathlib import Path

import numba
import numpy as np
from _common import best_time

from gridpop import rng
from gridpop.movement import placement
from gridpop.movement.convolution import (
    STENCIL_MAX_RADIUS,
    STENCIL_MAX_RADIUS_SEPARABLE,
    disperse_deterministic,
)
from gridpop.movement.kernels import make_kernel
from gridpop.movement.placement import disperse_stochastic

RADII = (1, 2, 3, 4, 5, 6, 8, 10, 12, 16, 24, 32, 40, 48, 56, 64, 80, 100)
FULL_STENCIL_MAX_SECONDS = 5.0  # stop timing the full 2-D stencil beyond this


def kernel(kind, radius):
    return make_kernel(kind, mean_distance_m=max(0.1, radius / 4.0),
                                 max_distance_m=float(radius), cell_w_m=1.0, cell_h_m=1.0)


def bench_deterministic(size, radii):
    d = np.random.default_rng(0).random((size, size))
    rows = []
    full_done = False
    for r in radii:
        g = kernel("gaussian", r)
        row = {"radius": r,
               "separable_stencil_s": best_time(lambda g=g: disperse_deterministic(
                   d, g, "absorbing", method="stencil")),
               "fft_s": best_time(lambda g=g: disperse_deterministic(
                   d, g, "absorbing", method="fft"))}
        if not full_done:
            e = kernel("exponential", r)
            row["full_stencil_s"] = best_time(lambda e=e: disperse_deterministic(
                d, e, "absorbing", method="stencil"), repeat=1)
            full_done = row["full_stencil_s"] > FULL_STENCIL_MAX_SECONDS
        rows.append(row)
        print(f"{r:6d} {row['separable_stencil_s']:12.4f} {row.get('full_stencil_s', np.nan):12.4f}"
              f" {row['fft_s']:10.4f}", flush=True)
    return rows


def bench_stochastic(radii=(2, 5, 10), counts=(1, 4, 16, 64, 256, 1024, 4096), size=128):
    rows = []
    key = rng.year_key(1, 0, 0, rng.STREAM_DISPERSAL)
    settle = np.ones((size, size), dtype=bool)
    labels = np.zeros((size, size), dtype=np.int32)
    saved = placement.MULTINOMIAL_PER_CELL
    try:
        for r in radii:
            k = kernel("exponential", r)
            s = k.conditional.size
            for n in counts:
                d = np.full((size, size), float(n))
                times = {}
                for name, factor in (("individual_s", np.inf), ("multinomial_s", 0.0)):
                    placement.MULTINOMIAL_PER_CELL = factor
                    times[name] = best_time(lambda d=d, k=k: disperse_stochastic(
                        d, settle, labels, 0, k, "reflecting", key)) / d.size
                rows.append({"radius": r, "stencil_cells": s, "n": n, **times})
                print(f"{r:6d} {s:6d} {n:6d} {times['individual_s'] * 1e6:12.3f} "
                      f"{times['multinomial_s'] * 1e6:12.3f}", flush=True)
    finally:
        placement.MULTINOMIAL_PER_CELL = saved
    return rows


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=2048)
    ap.add_argument("--threads", default="1,2", help="numba thread counts, comma-separated")
    ap.add_argument("--quick", action="store_true", help="fewer radii (a smoke test)")
    args = ap.parse_args()
    radii = RADII[::4] if args.quick else RADII
    det, sto = {}, {}
    for nt in (int(t) for t in args.threads.split(",")):
        numba.set_num_threads(nt)
        print(f"deterministic, {args.size} x {args.size} grid, {nt} threads (seconds per step)")
        print(f"{'radius':>6} {'separable':>12} {'full 2-D':>12} {'fft':>10}")
        det[nt] = bench_deterministic(args.size, radii)
        print(f"stochastic, {nt} threads (microseconds per cell)")
        print(f"{'radius':>6} {'S':>6} {'n':>6} {'individual':>12} {'multinomial':>12}")
        sto[nt] = bench_stochastic(radii=(2, 5) if args.quick else (2, 5, 10))
    out = Path(__file__).parent / "results"
    out.mkdir(exist_ok=True)
    result = {"grid": [args.size, args.size], "machine": platform.platform(),
              "processor": platform.processor(), "cpus": os.cpu_count(),
              "load_average": os.getloadavg(), "deterministic": det, "stochastic": sto,
              "recorded": {"STENCIL_MAX_RADIUS_SEPARABLE":
                           STENCIL_MAX_RADIUS_SEPARABLE,
                           "STENCIL_MAX_RADIUS": STENCIL_MAX_RADIUS,
                           "MULTINOMIAL_PER_CELL": placement.MULTINOMIAL_PER_CELL}}
    path = out / ("bench_dispersal_quick.json" if args.quick else "bench_dispersal.json")
    path.write_text(json.dumps(result, indent=1))
    print(f"wrote {path}")


if __name__ == "__main__":
    main()

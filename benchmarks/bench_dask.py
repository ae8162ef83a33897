"""Scaling with replicates: one against two local Dask worker processes.

The same stochastic run (synthetic square landscape, 16 replicates in batches of 2) four ways:
in this process; ``workers=1`` and ``workers=2`` (each starts its own LocalCluster, so the time
includes starting the workers and loading the compiled kernels); and on an already running, warmed
LocalCluster of 1 and of 2 workers (``scheduler=``), which isolates the batches themselves. The
speed-up is the 1-worker time over the 2-worker time. Worker processes run numba on one thread.

Usage: python benchmarks/bench_dask.py [--size 256] [--replicates 16] [--quick]
Writes benchmarks/results/bench_dask.json (bench_dask_quick.json with --quick).
"""

from __future__ import annotations

import argparse
import logging
import tempfile
import time
from pathlib import Path

from _common import write_result, write_scenario

import gridpop
from gridpop.simulation.distributed import WORKER_ENV


def timed_run(scenario, out, **kwargs) -> float:
    start = time.perf_counter()
    gridpop.run(scenario, out, **kwargs)
    return time.perf_counter() - start


def on_warm_cluster(scenario, warmup, folder: Path, workers: int) -> float:
    from distributed import LocalCluster

    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                      dashboard_address=None, silence_logs=logging.ERROR,
                      env=WORKER_ENV) as cluster:
        gridpop.run(warmup, folder / f"warm{workers}", scheduler=cluster.scheduler_address)
        return timed_run(scenario, folder / f"w{workers}", scheduler=cluster.scheduler_address)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=256)
    ap.add_argument("--replicates", type=int, default=16)
    ap.add_argument("--years", type=int, default=30)
    ap.add_argument("--quick", action="store_true", help="128 x 128, 8 replicates, 10 years")
    args = ap.parse_args()
    size, reps, years = (128, 8, 10) if args.quick else (args.size, args.replicates, args.years)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        path = write_scenario(folder / "s", size, years=years, replicates=reps, batch=2,
                              stochastic=True)
        scenario = gridpop.load_scenario(path)
        warmup = scenario.replace("run", replicates=2, years=2)
        gridpop.run(warmup, folder / "warm")
        t = {"in_process": timed_run(scenario, folder / "a"),
             "workers_1_with_start": timed_run(scenario, folder / "b", workers=1),
             "workers_2_with_start": timed_run(scenario, folder / "c", workers=2),
             "warm_cluster_1": on_warm_cluster(scenario, warmup, folder, 1),
             "warm_cluster_2": on_warm_cluster(scenario, warmup, folder, 2)}
    for k, v in t.items():
        print(f"{k:>22}: {v:7.2f} s")
    speedup = {"with_start": t["workers_1_with_start"] / t["workers_2_with_start"],
               "warm": t["warm_cluster_1"] / t["warm_cluster_2"]}
    print(f"speed-up 2 vs 1 workers: {speedup['with_start']:.2f} (cluster start included), "
          f"{speedup['warm']:.2f} (warm cluster)")
    write_result("bench_dask", {"grid": [size, size], "replicates": reps, "years": years,
                                "batch_size": 2, "seconds": t, "speedup_2_vs_1": speedup},
                 args.quick)


if __name__ == "__main__":
    main()

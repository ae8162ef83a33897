"""Time to first result for the demo scenario, with a cold and with a warm numba cache.

``gridpop run scenarios/demo/base.toml --replicates 1`` as a fresh process (everything a user
waits for: imports, reading the layers, compiling or loading the kernels, one replicate, the
outputs and plots), first with ``NUMBA_CACHE_DIR`` pointing at an empty folder (every kernel is
compiled and written to the cache), then again with the same folder (kernels loaded from disk).
Then the whole demo run (all its replicates) with the warm cache.

Usage: python benchmarks/bench_startup.py [--quick]
Writes benchmarks/results/bench_startup.json (bench_startup_quick.json with --quick).
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from _common import write_result

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "demo" / "base.toml"


def wall(cache: Path, out: Path, *extra: str) -> float:
    env = {**os.environ, "NUMBA_CACHE_DIR": str(cache)}
    start = time.perf_counter()
    subprocess.run([sys.executable, "-m", "gridpop.cli", "run", str(DEMO), "--out", str(out),
                    "--quiet", *extra], check=True, env=env)
    return time.perf_counter() - start


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="5 years, no whole demo run")
    args = ap.parse_args()
    first = ["--replicates", "1"] + (["--years", "5"] if args.quick else [])
    with tempfile.TemporaryDirectory() as tmp:
        cache = Path(tmp) / "numba-cache"
        cache.mkdir()
        t = {"first_result_cold_cache_s": wall(cache, Path(tmp) / "cold", *first),
             "first_result_warm_cache_s": wall(cache, Path(tmp) / "warm", *first)}
        if not args.quick:
            t["whole_demo_warm_cache_s"] = wall(cache, Path(tmp) / "whole")
        cached = sum(1 for p in cache.rglob("*.nbi"))
    for k, v in t.items():
        print(f"{k:>28}: {v:6.1f}")
    write_result("bench_startup", {"scenario": str(DEMO.relative_to(DEMO.parents[2])),
                                   "first_result_args": first, "seconds": t,
                                   "cached_kernels": cached}, args.quick)


if __name__ == "__main__":
    main()

"""Time to first result for the demo scenario, with a cold and with a warm numba cache.

``gridpop run scenarios/demo/base.toml --replicates 1`` as a fresh process (everything a user
waits for: imports, reading the layers, compiling or loading the kernels, one replicate, the
outputs and plots), first with ``NUMBA_CACHE_DIR`` pointing at an empty folder (every kernel is
compiled and written to the cache), then again with the same folder (kernels loaded from disk).
Then the whole demo run (all its replicates) with the warm cache. Then, with another empty
cache, the README's install step ``gridpop compile scenarios/demo/base.toml`` and the first
run after it.

Each figure is the wall time and the CPU time (user + system, of the process, its threads and
the helper process that compiles part of the kernels when the cache is cold,
:mod:`gridpop.simulation.warmup`) of a run, the least over ``--repeat`` rounds (each with a new
empty cache): the machine may be shared, and the least is the least disturbed run; CPU time is
disturbed less than wall time. With the helper, a cold run's wall time is less than its CPU
time: two cores compile at once.

Usage: python benchmarks/bench_startup.py [--quick] [--repeat N]
Writes benchmarks/results/bench_startup.json (bench_startup_quick.json with --quick).
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from _common import write_result

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "demo" / "base.toml"


def timed(cache: Path, out: Path | None, *extra: str) -> tuple[float, float]:
    """Wall and CPU seconds of one ``gridpop run`` of the demo in a new process (``gridpop
    compile`` of the demo when ``out`` is None)."""
    env = {**os.environ, "NUMBA_CACHE_DIR": str(cache)}
    command = (["compile", str(DEMO)] if out is None
               else ["run", str(DEMO), "--out", str(out), "--quiet", *extra])
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    subprocess.run([sys.executable, "-m", "gridpop.cli", *command], check=True, env=env,
                   stdout=subprocess.DEVNULL)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="5 years, no whole demo run")
    ap.add_argument("--repeat", type=int, default=3, help="rounds; the least of each figure")
    args = ap.parse_args()
    first = ["--replicates", "1"] + (["--years", "5"] if args.quick else [])
    runs: dict[str, list[tuple[float, float]]] = {}
    for _ in range(args.repeat):
        with tempfile.TemporaryDirectory() as tmp:
            cache = Path(tmp) / "numba-cache"
            cache.mkdir()
            runs.setdefault("first_result_cold_cache", []).append(
                timed(cache, Path(tmp) / "cold", *first))
            runs.setdefault("first_result_warm_cache", []).append(
                timed(cache, Path(tmp) / "warm", *first))
            if not args.quick:
                runs.setdefault("whole_demo_warm_cache", []).append(
                    timed(cache, Path(tmp) / "whole"))
            cached = sum(1 for p in cache.rglob("*.nbi"))
            compiled = Path(tmp) / "numba-cache-compiled"
            compiled.mkdir()
            runs.setdefault("compile_command_cold_cache", []).append(timed(compiled, None))
            runs.setdefault("first_result_after_compile_command", []).append(
                timed(compiled, Path(tmp) / "after-compile", *first))
    seconds = {f"{k}_s": min(w for w, _ in v) for k, v in runs.items()}
    cpu = {f"{k}_cpu_s": min(c for _, c in v) for k, v in runs.items()}
    for k in runs:
        print(f"{k:>34}: wall {seconds[k + '_s']:6.1f} s  cpu {cpu[k + '_cpu_s']:6.1f} s")
    write_result("bench_startup", {"scenario": str(DEMO.relative_to(DEMO.parents[2])),
                                   "first_result_args": first, "repeat": args.repeat,
                                   "seconds": seconds, "cpu_seconds": cpu,
                                   "all_runs_wall_cpu_s": runs, "cached_kernels": cached},
                 args.quick)


if __name__ == "__main__":
    main()

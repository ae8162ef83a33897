"""gridpop sensitivity against the naive loop of one `gridpop run` process per set and plan.

The demo's brook and straight corridors under the design of scenarios/demo/uncertainty.toml
(a Latin hypercube, here of --sets sets), both ways:

- ``sensitivity``: one call of :func:`gridpop.simulation.sensitivity.sensitivity` on a local
  Dask cluster of 2 workers (the time includes starting the cluster and drawing no plots);
- ``separate runs``: one fresh Python process per set and plan doing what `gridpop run`
  does (load the plan, apply the set's parameters, build the landscape and model, run, write
  every output; no plots), two processes at a time, the same parallelism as the 2 workers.

Both run the same sets with the same seed, replicates and years (--years, --replicates: the
demo's 40 years x 100 replicates per set would take hours on a shared 2-core machine). The
ratio is the separate runs' wall time over the sensitivity command's; the CPU ratio compares
the CPU seconds of both (this process, its workers and its child processes), which a shared
machine disturbs less than wall time.

Usage: python benchmarks/bench_sensitivity.py [--sets 32] [--years 10] [--replicates 4] [--quick]
Writes benchmarks/results/bench_sensitivity.json (bench_sensitivity_quick.json with --quick).
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from _common import write_result

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "demo"
PLANS = ("corridor_brook.toml", "corridor_straight.toml")


def study(sets: int, years: int, replicates: int):
    """The two plans with the years and replicates given, and the design with ``sets`` sets."""
    import dataclasses

    from gridpop.config import load_study

    plans, u, _ = load_study([DEMO / "uncertainty.toml", *(DEMO / p for p in PLANS)])
    plans = [s.replace("run", years=years, replicates=replicates) for s in plans]
    return plans, dataclasses.replace(u, samples=sets)


def one_run(plan: str, index: int, sets: int, out: str, years: int, replicates: int) -> None:
    """What `gridpop run --no-plots` does for one plan under parameter set ``index``."""
    import gridpop
    from gridpop.analysis.sensitivity import draw_design
    from gridpop.config import apply_parameters

    plans, u = study(sets, years, replicates)
    design = draw_design(u)
    scenario = next(s for s in plans if s.path.name == plan)
    values = dict(zip(design.names, map(float, design.values[index]), strict=True))
    gridpop.run(apply_parameters(scenario, values), out)


def cpu_seconds() -> float:
    """CPU time of this process and of its finished child processes, seconds."""
    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def separate_runs(folder: Path, sets: int, years: int, replicates: int) -> tuple[float, float]:
    """Wall and CPU seconds of one process per set and plan, two at a time."""
    jobs = [[sys.executable, __file__, "--one", plan, str(i), str(sets),
             str(folder / f"{i}_{plan}"), str(years), str(replicates)]
            for i in range(sets) for plan in PLANS]
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    running: list[subprocess.Popen] = []
    while jobs or running:
        while jobs and len(running) < 2:
            running.append(subprocess.Popen(jobs.pop(0)))
        time.sleep(0.05)
        for p in [p for p in running if p.poll() is not None]:
            if p.returncode:
                raise SystemExit(f"a separate run failed: {p.args}")
            running.remove(p)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sets", type=int, default=32)
    ap.add_argument("--years", type=int, default=10)
    ap.add_argument("--replicates", type=int, default=4)
    ap.add_argument("--quick", action="store_true", help="8 sets, 5 years, 2 replicates")
    ap.add_argument("--one", nargs=6, metavar=("PLAN", "SET", "SETS", "OUT", "YEARS", "REPS"),
                    help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.one:
        plan, index, n, out, years, reps = args.one
        one_run(plan, int(index), int(n), out, int(years), int(reps))
        return
    sets, years, reps = (8, 5, 2) if args.quick else (args.sets, args.years, args.replicates)
    from gridpop.simulation.sensitivity import sensitivity

    plans, u = study(sets, years, reps)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        start, cpu = time.perf_counter(), cpu_seconds()
        sensitivity(plans, u, folder / "sens", workers=2, plots=False)
        t_sens, cpu_sens = time.perf_counter() - start, cpu_seconds() - cpu
        print(f"sensitivity: {t_sens:.1f} s, {cpu_sens:.1f} s CPU", flush=True)
        t_sep, cpu_sep = separate_runs(folder, sets, years, reps)
    result = {"sets": sets, "plans": len(PLANS), "years": years, "replicates": reps,
              "sensitivity_workers_2_s": round(t_sens, 2),
              "separate_runs_2_at_a_time_s": round(t_sep, 2),
              "sensitivity_cpu_s": round(cpu_sens, 2),
              "separate_runs_cpu_s": round(cpu_sep, 2),
              "ratio": round(t_sep / t_sens, 2),
              "cpu_ratio": round(cpu_sep / cpu_sens, 2),
              "note": "wall times on a shared machine; both measured in the same invocation"}
    print(json.dumps(result, indent=1))
    write_result("bench_sensitivity", result, args.quick)


if __name__ == "__main__":
    main()

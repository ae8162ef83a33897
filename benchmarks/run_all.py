"""Run every benchmark, one after the other, and summarise them.

Each benchmark runs as its own process and writes its JSON to benchmarks/results/; this runner
then writes benchmarks/results/run_all.json (machine, wall time of each benchmark, headline
figures) and prints the headline figures as Markdown (the README's performance section).

Usage: python benchmarks/run_all.py [--quick] [--only cycle,memory,...]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
from pathlib import Path

from _common import RESULTS, machine

HERE = Path(__file__).resolve().parent
BENCHMARKS = ("cycle", "scenario", "dispersal", "walk", "memory", "dask", "startup")


def load(name: str, quick: bool) -> dict:
    return json.loads((RESULTS / (f"bench_{name}_quick.json" if quick
                                  else f"bench_{name}.json")).read_text())


def headlines(quick: bool, names) -> list[str]:
    """Markdown lines with the main figures of the benchmarks that ran."""
    lines = []
    if "cycle" in names:
        c = load("cycle", quick)
        lines += ["| grid | mode | numba threads | gridpop cell-years/s | NumPy/SciPy cell-years/s "
                  "| ratio |", "|---|---|---|---|---|---|"]
        for r in c["cycle"]:
            lines.append(f"| {r['size']}^2 | {'stochastic' if r['stochastic'] else 'deterministic'}"
                         f" | {r['threads']} | {r['gridpop_cell_years_per_s']:.3g} | "
                         f"{r['reference_cell_years_per_s']:.3g} | {r['speedup']:.2f} |")
        lines.append("")
        for b in c["bandwidth"]:
            steps = [s for s in c["local_step"] if s["threads"] == b["threads"]]
            lines.append(f"- {b['threads']} thread(s): triad {b['triad_bytes_per_s'] / 1e9:.1f} "
                         "GB/s; deterministic local step at "
                         + ", ".join(f"{s['fraction_of_bound']:.2f} ({s['size']}^2)"
                                     for s in steps) + " of that bound")
    if "scenario" in names:
        for r in load("scenario", quick)["scenarios"]:
            lines.append(f"- whole run, {r['scenario']} on {r['shape'][0]} x {r['shape'][1]}: "
                         f"{r['cell_years_per_s']:.3g} cell-years/s per extra replicate, "
                         f"{r['slowdown_vs_cycle']:.2f}x slower than the stochastic cycle")
    if "dispersal" in names:
        d = load("dispersal", quick)
        lines.append(f"- dispersal: crossovers recorded in gridpop.movement.placement "
                     f"{d['recorded']} "
                     "(benchmarks/results/bench_dispersal.json)")
    if "memory" in names:
        m = load("memory", quick)
        lines.append(f"- peak memory, {m['grid'][0]}^2 grid: " + "; ".join(
            f"{r['years']} years: anonymous {r['peak_anon_bytes_sampled'] / 1e6:.0f} MB, "
            f"resident {r['peak_rss_bytes'] / 1e6:.0f} MB (estimate {r['estimate_bytes'] / 1e6:.0f}"
            " MB)" for r in m["runs"]))
    if "dask" in names:
        k = load("dask", quick)
        s = k["seconds"]
        lines.append(f"- Dask, {k['replicates']} replicates on {k['grid'][0]}^2: in-process "
                     f"{s['in_process']:.1f} s; 1 worker {s['workers_1_with_start']:.1f} s, 2 "
                     f"workers {s['workers_2_with_start']:.1f} s (cluster start included); warm "
                     f"cluster {s['warm_cluster_1']:.1f} s vs {s['warm_cluster_2']:.1f} s: "
                     f"speed-up {k['speedup_2_vs_1']['warm']:.2f}")
    if "startup" in names:
        t = load("startup", quick)["seconds"]
        lines.append(f"- demo, first result: {t['first_result_cold_cache_s']:.1f} s with a cold "
                     f"numba cache, {t['first_result_warm_cache_s']:.1f} s warm"
                     + (f"; whole demo run {t['whole_demo_warm_cache_s']:.1f} s"
                        if "whole_demo_warm_cache_s" in t else ""))
    return lines


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="every benchmark in its quick form")
    ap.add_argument("--only", default=",".join(BENCHMARKS),
                    help=f"comma-separated subset of {', '.join(BENCHMARKS)}")
    args = ap.parse_args()
    names = [n for n in args.only.split(",") if n]
    unknown = set(names) - set(BENCHMARKS)
    if unknown:
        ap.error(f"unknown benchmark(s) {', '.join(sorted(unknown))}; "
                 f"known: {', '.join(BENCHMARKS)}")
    before = machine()
    elapsed = {}
    for name in names:
        print(f"== bench_{name}", flush=True)
        start = time.perf_counter()
        subprocess.run([sys.executable, str(HERE / f"bench_{name}.py")]
                       + (["--quick"] if args.quick else []), check=True, cwd=HERE.parent)
        elapsed[name] = round(time.perf_counter() - start, 1)
    lines = headlines(args.quick, names)
    summary = {"machine": before, "load_average_after": machine()["load_average"],
               "quick": args.quick, "benchmark_wall_s": elapsed, "headlines": lines}
    RESULTS.mkdir(exist_ok=True)
    path = RESULTS / ("run_all_quick.json" if args.quick else "run_all.json")
    path.write_text(json.dumps(summary, indent=1) + "\n")
    print("\n".join(["", f"machine: {before['cpu_model']}, {before['nproc']} CPUs, load "
                     f"{before['load_average'][0]:.1f}", ""] + lines))
    print(f"wrote {path}")


if __name__ == "__main__":
    main()

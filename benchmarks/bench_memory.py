"""Peak memory of a whole run for 10, 50 and 200 years on the same grid, against the estimate.

Each run is a fresh ``gridpop run`` process (in-process execution, no plots) on a synthetic
square landscape (deterministic, one replicate). The parent samples the child's
``/proc/PID/status`` every 10 ms: anonymous memory (``RssAnon``: arrays, interpreter) and
file-backed pages (``RssFile``: the memory-mapped accumulators and libraries; the kernel may drop
them at any time, they are not a demand on memory), and reads the peak resident set (``VmHWM``,
what ``ru_maxrss`` reports) at the end. Beside them: ``gridpop.footprint``'s estimate.

Usage: python benchmarks/bench_memory.py [--size 1024] [--years 10,50,200] [--quick]
Writes benchmarks/results/bench_memory.json (bench_memory_quick.json with --quick).
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from _common import write_result, write_scenario

from gridpop.config import load_scenario
from gridpop.landscape import build_landscape
from gridpop.simulation.model import build_model
from gridpop.simulation.resources import footprint

FIELDS = ("VmHWM", "VmRSS", "RssAnon", "RssFile")


def status(pid: int) -> dict | None:
    """Memory fields of /proc/PID/status in bytes, None once the process is gone."""
    try:
        text = Path(f"/proc/{pid}/status").read_text()
    except OSError:
        return None
    out = {}
    for line in text.splitlines():
        key, _, value = line.partition(":")
        if key in FIELDS:
            out[key] = int(value.split()[0]) * 1024
    return out if len(out) == len(FIELDS) else None


RUN = """
import sys
from pathlib import Path
from gridpop.simulation.run import run
from gridpop.config import load_scenario
run(load_scenario(sys.argv[1]), sys.argv[2])
print(Path("/proc/self/status").read_text())
"""


def measure(scenario: Path, out: Path) -> dict:
    proc = subprocess.Popen([sys.executable, "-c", RUN, str(scenario), str(out)],
                            stdout=subprocess.PIPE, text=True)
    peak = {"RssAnon": 0, "RssFile": 0, "VmRSS": 0}
    start = time.perf_counter()
    while proc.poll() is None:
        st = status(proc.pid)
        if st:
            for k in peak:
                peak[k] = max(peak[k], st[k])
        time.sleep(0.01)
    wall = time.perf_counter() - start
    text = proc.stdout.read()
    if proc.returncode:
        raise RuntimeError(f"run failed ({proc.returncode})")
    hwm = next(int(line.split()[1]) * 1024 for line in text.splitlines()
               if line.startswith("VmHWM"))
    return {"peak_rss_bytes": hwm, "peak_anon_bytes_sampled": peak["RssAnon"],
            "peak_file_bytes_sampled": peak["RssFile"], "wall_s": wall}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=1024)
    ap.add_argument("--years", default="10,50,200")
    ap.add_argument("--quick", action="store_true", help="256 x 256, 10 and 50 years")
    args = ap.parse_args()
    size = 256 if args.quick else args.size
    horizons = [10, 50] if args.quick else [int(y) for y in args.years.split(",")]
    rows = []
    print(f"{size} x {size} grid, 1 replicate, deterministic")
    print(f"{'years':>6} {'peak RSS MB':>12} {'anon MB':>9} {'file MB':>9} {'estimate MB':>12} "
          f"{'wall s':>7}")
    with tempfile.TemporaryDirectory() as tmp:
        for years in horizons:
            folder = Path(tmp) / f"y{years}"
            path = write_scenario(folder, size, years=years)
            s = load_scenario(path)
            fp = footprint(s, build_model(s, build_landscape(s, stochastic=False)))
            row = {"years": years, **measure(path, folder / "out"),
                   "estimate_bytes": fp.memory(), "estimate_output_bytes": fp.output,
                   "estimate_work_bytes": fp.work}
            rows.append(row)
            print(f"{years:>6} {row['peak_rss_bytes'] / 1e6:>12.0f} "
                  f"{row['peak_anon_bytes_sampled'] / 1e6:>9.0f} "
                  f"{row['peak_file_bytes_sampled'] / 1e6:>9.0f} "
                  f"{row['estimate_bytes'] / 1e6:>12.0f} {row['wall_s']:>7.1f}")
    write_result("bench_memory", {"grid": [size, size], "replicates": 1, "runs": rows},
                 args.quick)


if __name__ == "__main__":
    main()

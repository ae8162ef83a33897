"""Nothing is published until it is whole: a ``gridpop run`` or ``gridpop compare`` process
killed with SIGKILL at any moment leaves either no output folder (and a working folder that
``--resume`` completes to the same results as an uninterrupted run) or the whole result.

The moments are found without any hook in the program: a watcher polls the working folder and
kills the process as soon as the file that opens a phase appears (the checkpoint, a batch's
temporary folder, the combined sums, the first table, the first figure, the manifest). Every
phase but the last is followed by seconds of work (the other batches, the tables, the figures),
so the kill lands inside the run.
"""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from conftest import same_results, scenario_text, suitability_array, write_raster
from test_compare import write_plans

from gridpop.cli import main

pytestmark = pytest.mark.slow

REPLICATES = 4  # batches of one replicate


def cli(*args) -> int:
    return main([str(a) for a in args] + ["--quiet"])


def kill_when(args, reached, log: Path) -> bool:
    """Run ``gridpop ARGS`` in a subprocess and SIGKILL it as soon as ``reached()`` is true;
    whether it was killed (False: it finished first)."""
    with open(log, "w") as err:
        proc = subprocess.Popen([sys.executable, "-m", "gridpop.cli", *map(str, args),
                                 "--quiet"], stdout=subprocess.DEVNULL, stderr=err)
        try:
            deadline = time.monotonic() + 600
            while proc.poll() is None and not reached():
                assert time.monotonic() < deadline, "the phase never began"
                time.sleep(0.0005)
            if proc.poll() is None:
                proc.send_signal(signal.SIGKILL)
        finally:
            proc.wait()
    if proc.returncode == -signal.SIGKILL:
        return True
    assert proc.returncode == 0, log.read_text()
    return False


def exists(folder: Path, pattern: str):
    return lambda: any(folder.glob(pattern))


def complete(folder: Path, manifest: str) -> bool:
    return json.loads((folder / manifest).read_text())["complete"] is True


@pytest.fixture(scope="module")
def one_run(tmp_path_factory):
    """A scenario of four one-replicate batches with fires, and its uninterrupted result."""
    tmp = tmp_path_factory.mktemp("publish")
    write_raster(tmp / "suitability.tif", suitability_array())
    scen = tmp / "scenario.toml"
    scen.write_text(scenario_text(years=5, replicates=REPLICATES, seed=9, batch=1, fire=True)
                    .format(suitability="suitability.tif"))
    assert cli("run", scen, "--out", tmp / "whole") == 0
    return scen, tmp / "whole"


# (moment, file in the working folder that opens it, batches finished by then at least)
RUN_MOMENTS = [
    ("start", "checkpoint.json", 0),
    ("mid-simulation", "batches/00001.*.tmp", 1),
    ("combining batches", "total_*.npy", REPLICATES),
    ("writing tables", "timeseries.csv", REPLICATES),
    ("plotting", "plots/*.png", REPLICATES),
    ("publishing", "run.json", None),
]


@pytest.mark.parametrize("moment, opens, kept", RUN_MOMENTS, ids=[m[0] for m in RUN_MOMENTS])
def test_run_killed_then_resumed_or_complete(one_run, tmp_path, moment, opens, kept):
    scen, whole = one_run
    out, work = tmp_path / "r", tmp_path / ".r.partial"
    killed = kill_when(["run", scen, "--out", out], exists(work, opens), tmp_path / "err")
    if moment != "publishing":  # the phase is followed by seconds of work
        assert killed
    if out.exists():
        assert complete(out, "run.json") and not work.exists()
    else:
        assert killed and not (work / "run.json").exists()
        assert cli("run", scen, "--out", out, "--resume") == 0
        if kept is not None:
            resumed = json.loads((out / "run.json").read_text())["execution"]["resumed_batches"]
            assert resumed >= kept
    assert not work.exists()
    same_results(whole, out)


def test_compare_killed_in_second_plan_then_while_plotting_resumes_to_same(tmp_path):
    """A comparison killed while its second plan runs (its first batch done), then its resume
    killed while the comparison's own figures are drawn, then resumed to the end: nothing is
    published before; the first plan's run is kept whole and never run again, the second
    continues from its finished batch; the result is that of an uninterrupted comparison."""
    paths = write_plans(tmp_path, [("base", 5, None, ""), ("reserve", 5, 2.0, "")])
    for p in paths:  # batches of two replicates
        p.write_text(p.read_text().replace("[run]\n", "[run]\nbatch_size = 2\n"))
    assert cli("compare", *paths, "--out", tmp_path / "whole") == 0
    out, work = tmp_path / "c", tmp_path / ".c.partial"

    assert kill_when(["compare", *paths, "--out", out],
                     exists(work, ".reserve.partial/batches/00001.*.tmp"), tmp_path / "err")
    assert not out.exists() and complete(work / "base", "run.json")
    assert not (work / "reserve").exists()
    assert (work / ".reserve.partial" / "batches" / "00000" / "done").is_file()
    first = (work / "base" / "run.json").read_bytes()

    assert kill_when(["compare", *paths, "--out", out, "--resume"], exists(work, "plots/*.png"),
                     tmp_path / "err")
    assert not out.exists() and not (work / "compare.json").exists()
    assert (work / "base" / "run.json").read_bytes() == first  # kept, not run again
    second = (work / "reserve" / "run.json").read_bytes()
    assert json.loads(second)["execution"]["resumed_batches"] >= 1

    assert cli("compare", *paths, "--out", out, "--resume") == 0
    assert [(out / p / "run.json").read_bytes() for p in ("base", "reserve")] == [first, second]
    assert not work.exists() and complete(out, "compare.json")
    same_results(tmp_path / "whole", out)

"""Checkpointed batches: resuming a killed or failed run, refusing a changed one, disk and memory
checks."""

from __future__ import annotations

import errno
import json
import os
import signal
import subprocess
import sys
import time

import pytest
import rasterio
from conftest import same_results
from conftest import scenario_text as shared_scenario

import gridpop
from gridpop.cli import main
from gridpop.landscape import build_landscape
from gridpop.simulation import resources as simulation_resources
from gridpop.simulation import results as simulation_results
from gridpop.simulation.batches import batch_folder, run_checkpointed_batch
from gridpop.simulation.cycle import BatchSink
from gridpop.simulation.model import build_model
from gridpop.simulation.resources import footprint


def scenario_text(years=5, replicates=4):
    return shared_scenario(years=years, replicates=replicates, seed=9, batch=1, fire=True)


def assert_same_outputs(a, b):
    """Every file of the run (run.json's list) byte for byte; run.json apart from ``execution``."""
    ma, mb = (json.loads((d / "run.json").read_text()) for d in (a, b))
    assert {"abundance.tif", "timeseries.csv", "events.csv"} <= set(ma["files"])
    for name in ma["files"]:
        assert (a / name).read_bytes() == (b / name).read_bytes(), name
    ma.pop("execution"), mb.pop("execution")
    assert ma == mb


def finished(work):
    folder = work / "batches"
    if not folder.is_dir():
        return 0
    return sum(1 for p in folder.iterdir() if p.name.isdigit() and (p / "done").is_file())


def run_cli(*args):
    return main([str(a) for a in args] + ["--quiet"])


def fail_on_call(monkeypatch, owner, name, call):
    """Make ``owner.name`` raise OSError(ENOSPC) on its ``call``-th call: a full disk."""
    original = getattr(owner, name)
    calls = []

    def failing(*args, **kwargs):
        calls.append(1)
        if len(calls) == call:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return original(*args, **kwargs)

    monkeypatch.setattr(owner, name, failing)


@pytest.mark.slow
def test_sigkill_part_way_then_resume_identical(make_scenario, tmp_path):
    """A ``gridpop run`` process killed with SIGKILL after some batches: ``--resume`` keeps the
    finished batches, runs the rest and gives the same files as an uninterrupted run with the
    same seed (counter-based random numbers, Salmon et al. 2011, Proc. SC'11)."""
    scen = make_scenario(scenario_text(years=40, replicates=10))
    gridpop.run(scen, tmp_path / "whole")
    out, work = tmp_path / "r", tmp_path / ".r.partial"
    proc = subprocess.Popen([sys.executable, "-m", "gridpop.cli", "run", str(scen), "--out",
                             str(out), "--quiet"])
    try:
        deadline = time.monotonic() + 120
        while finished(work) < 1 and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.01)
        proc.send_signal(signal.SIGKILL)
    finally:
        proc.wait()
    assert proc.returncode == -signal.SIGKILL
    kept = finished(work)
    assert 1 <= kept < 10 and not out.exists()
    assert run_cli("run", scen, "--out", out) == 2  # an interrupted run is in the way
    assert run_cli("run", scen, "--out", out, "--resume") == 0
    assert_same_outputs(tmp_path / "whole", out)
    resumed = json.loads((out / "run.json").read_text())["execution"]["resumed_batches"]
    assert resumed >= kept
    assert not work.exists()


def test_disk_full_during_batches_nothing_complete_then_resume(make_scenario, tmp_path,
                                                               monkeypatch, capsys):
    """A write that fails with ENOSPC (POSIX "no space left on device") while the second batch is
    saved: exit 2 with a message, no output folder, no complete manifest; the first batch is
    kept and ``--resume`` completes the run with the same results."""
    scen = make_scenario(scenario_text())
    gridpop.run(scen, tmp_path / "whole")
    out, work = tmp_path / "r", tmp_path / ".r.partial"
    with monkeypatch.context() as m:
        fail_on_call(m, BatchSink, "close", 2)
        assert run_cli("run", scen, "--out", out) == 2
    err = capsys.readouterr().err
    assert "no space left" in err.lower() and "--resume" in err and "Traceback" not in err
    assert not out.exists() and not (work / "run.json").exists()
    assert json.loads((work / "checkpoint.json").read_text())["complete"] is False
    assert finished(work) == 1
    assert any(p.suffix == ".tmp" for p in (work / "batches").iterdir())  # the failed batch
    assert run_cli("run", scen, "--out", out, "--resume") == 0
    assert_same_outputs(tmp_path / "whole", out)
    assert json.loads((out / "run.json").read_text())["execution"]["resumed_batches"] == 1


def test_disk_full_while_writing_results_then_resume(make_scenario, tmp_path, monkeypatch,
                                                     capsys):
    """ENOSPC while the second GeoTIFF stack is written, after every batch finished: exit 2,
    nothing published, and the resumed run reuses all batches."""
    scen = make_scenario(scenario_text())
    gridpop.run(scen, tmp_path / "whole")
    out, work = tmp_path / "r", tmp_path / ".r.partial"
    with monkeypatch.context() as m:
        fail_on_call(m, simulation_results, "write_stack", 2)
        assert run_cli("run", scen, "--out", out) == 2
    assert "no space left" in capsys.readouterr().err.lower()
    assert not out.exists() and not (work / "run.json").exists()
    assert finished(work) == 4
    assert run_cli("run", scen, "--out", out, "--resume") == 0
    assert_same_outputs(tmp_path / "whole", out)
    assert json.loads((out / "run.json").read_text())["execution"]["resumed_batches"] == 4


def test_disk_full_while_plotting_nothing_published_then_resume(make_scenario, tmp_path,
                                                               monkeypatch, capsys):
    """The figures are drawn in the working folder, before it is published: ENOSPC while the
    second figure is saved leaves no output folder and every batch; ``--resume`` draws them
    again and publishes the same files as an uninterrupted run, with nothing left over."""
    from matplotlib.figure import Figure

    scen = make_scenario(scenario_text())
    assert run_cli("run", scen, "--out", tmp_path / "whole") == 0
    out, work = tmp_path / "r", tmp_path / ".r.partial"
    with monkeypatch.context() as m:
        fail_on_call(m, Figure, "savefig", 2)
        assert run_cli("run", scen, "--out", out) == 2
    assert "no space left" in capsys.readouterr().err.lower()
    assert not out.exists() and not (work / "run.json").exists()
    assert len(list((work / "plots").iterdir())) == 1 and finished(work) == 4
    assert run_cli("run", scen, "--out", out, "--resume") == 0
    assert json.loads((out / "run.json").read_text())["execution"]["resumed_batches"] == 4
    same_results(tmp_path / "whole", out)


def test_resume_refuses_changed_scenario_or_settings(make_scenario, tmp_path, monkeypatch,
                                                     capsys):
    scen = make_scenario(scenario_text())
    out, work = tmp_path / "r", tmp_path / ".r.partial"
    with monkeypatch.context() as m:
        fail_on_call(m, BatchSink, "close", 3)
        assert run_cli("run", scen, "--out", out) == 2
    capsys.readouterr()
    assert run_cli("run", scen, "--out", out, "--resume", "--years", "6") == 2
    err = capsys.readouterr().err
    assert "[run] years = 5 then, 6 now" in err
    scen.write_text(scen.read_text().replace("mortality = 0.6", "mortality = 0.5"))
    assert run_cli("run", scen, "--out", out, "--resume") == 2
    err = capsys.readouterr().err
    assert "changed" in err and "sha256" in err and str(scen) in err
    assert finished(work) == 2  # refusals leave the interrupted run alone
    assert run_cli("run", scen, "--out", out, "--overwrite") == 0  # starts over
    assert json.loads((out / "run.json").read_text())["execution"]["resumed_batches"] == 0


def test_resume_without_interrupted_run_starts_fresh(make_scenario, tmp_path):
    scen = make_scenario(scenario_text())
    assert run_cli("run", scen, "--out", tmp_path / "r", "--resume") == 0
    assert json.loads((tmp_path / "r" / "run.json").read_text())["complete"] is True


def test_batch_placed_once(make_scenario, tmp_path):
    """Two attempts at the same batch (a task retried after its worker was lost): the first
    rename places it, the second copy is discarded, nothing temporary is left."""

    s = gridpop.load_scenario(make_scenario(scenario_text()))
    model = build_model(s, build_landscape(s, stochastic=True))
    work = tmp_path / "w"
    (work / "batches").mkdir(parents=True)
    assert run_checkpointed_batch(model, 1, range(1, 2), work) == 1
    first = {p.name: p.read_bytes() for p in batch_folder(work, 1).iterdir()}
    assert run_checkpointed_batch(model, 1, range(1, 2), work) == 1
    assert [p.name for p in (work / "batches").iterdir()] == ["00001"]
    again = {p.name: p.read_bytes() for p in batch_folder(work, 1).iterdir()}
    assert again == first and "done" in first


def test_room_check_refuses_with_numbers_unless_forced(make_scenario, tmp_path, monkeypatch,
                                                       capsys):
    scen = make_scenario(scenario_text())
    out = tmp_path / "r"
    monkeypatch.setattr(simulation_resources, "free_room", lambda path: (10_000, 20_000))
    assert run_cli("run", scen, "--out", out) == 2
    err = capsys.readouterr().err
    assert "10.0 kB is available" in err and "20.0 kB is free" in err and "--force" in err
    assert not out.exists() and not (tmp_path / ".r.partial").exists()
    assert run_cli("run", scen, "--out", out, "--force") == 0


def test_estimated_output_bounds_what_is_written(make_scenario, tmp_path, capsys):
    """The output estimate counts stacks uncompressed and CSV rows at their widest, so it bounds
    the files written (DEFLATE only shrinks them: Deutsch 1996, RFC 1951, stored blocks). Stacks
    are band-interleaved (GDAL GTiff INTERLEAVE=BAND, common practice for stacks written band by
    band)."""

    path = make_scenario(scenario_text())
    out = tmp_path / "r"
    gridpop.run(path, out)
    s = gridpop.load_scenario(path)
    fp = footprint(s, build_model(s, build_landscape(s, stochastic=True)))
    files = json.loads((out / "run.json").read_text())["files"]
    written = sum((out / f).stat().st_size for f in files if f.endswith((".tif", ".csv")))
    assert written <= fp.output
    with rasterio.open(out / "abundance.tif") as ds:  # bands stream to disk one after another
        assert ds.profile["interleave"] == "band"
    assert fp.memory(workers=2) > fp.memory() > fp.memory(scheduler="tcp://x:1") > 0
    assert main(["check", str(path)]) == 0
    text = capsys.readouterr().out
    assert "estimated peak memory:" in text and "estimated output:" in text
    assert "free now:" in text


def test_space_checked_before_each_batch(make_scenario, tmp_path, monkeypatch, capsys):
    """With --force past the estimate, a disk that fills up after the first batch stops the run
    before the second batch maps its files (memory-mapped writes on a full disk end the process
    with SIGBUS, POSIX mmap(2)), with a clear message, and the run resumes."""
    import shutil

    scen = make_scenario(scenario_text())
    out, work = tmp_path / "r", tmp_path / ".r.partial"
    real = shutil.disk_usage
    calls = []

    def filling(path):
        calls.append(path)
        usage = real(path)
        return usage._replace(free=usage.free if len(calls) == 1 else 500)

    with monkeypatch.context() as m:
        m.setattr(shutil, "disk_usage", filling)
        assert run_cli("run", scen, "--out", out, "--force") == 2
    err = capsys.readouterr().err
    assert "batch 1 needs" in err and "500 B is free" in err and "--resume" in err
    assert finished(work) == 1 and not out.exists()
    assert run_cli("run", scen, "--out", out, "--resume") == 0
    gridpop.run(scen, tmp_path / "whole")
    assert_same_outputs(tmp_path / "whole", out)

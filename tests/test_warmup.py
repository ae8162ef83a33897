"""Compiling in two processes (gridpop.simulation.warmup) and numba's cache lock (gridpop._jit):
the helper process only ever changes the time a run takes, never its results, and leaves no
process or file behind whatever it does."""

from __future__ import annotations

import fcntl
import json
import os
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import psutil
import pytest
from conftest import same_results, scenario_text

from gridpop import _jit, load_scenario, run
from gridpop.landscape import build_landscape
from gridpop.simulation import warmup
from gridpop.simulation.batches import run_batch
from gridpop.simulation.model import build_model

DEMO = Path(__file__).resolve().parents[1] / "scenarios" / "demo" / "base.toml"


@pytest.fixture
def helper_log(tmp_path, monkeypatch):
    """The helper runs whatever the test installs as its share (after writing a marker, so the
    test knows it was started), as with a cold cache (this process has every kernel compiled
    already), and scratch folders go under tmp_path."""
    marker = tmp_path / "helper-started"
    scratch = tmp_path / "scratch"
    scratch.mkdir()
    monkeypatch.setattr(warmup.tempfile, "tempdir", str(scratch))
    monkeypatch.setattr(warmup, "_can_fork", lambda model: True)
    monkeypatch.setattr(warmup, "_cold_cache", lambda: True)

    def install(work):
        def helper_share(model, folder):
            marker.write_text("started\n")
            work()

        monkeypatch.setattr(warmup, "_growth_and_movement", helper_share)

    # processes that earlier tests left running (a Dask cluster's, multiprocessing's resource
    # tracker) are not this test's helpers
    before = {c.pid for c in psutil.Process().children(recursive=True)}
    return install, marker, scratch, before


def _reference(make_scenario, tmp_path, monkeypatch):
    scen = load_scenario(make_scenario(scenario_text(years=4, replicates=2)))
    with monkeypatch.context() as m:
        m.setattr(warmup, "_can_fork", lambda model: False)
        ref = run(scen, tmp_path / "reference")
    return scen, ref


def _no_children_or_scratch(scratch: Path, before: set[int]) -> None:
    new = [c for c in psutil.Process().children(recursive=True) if c.pid not in before]
    assert new == []  # none alive, none a zombie
    assert list(scratch.iterdir()) == []


def test_failing_helper_leaves_the_run_unchanged(make_scenario, tmp_path, monkeypatch,
                                                 helper_log):
    install, marker, scratch, before = helper_log
    scen, ref = _reference(make_scenario, tmp_path, monkeypatch)

    def fail():
        raise RuntimeError("helper broken")

    install(fail)
    out = run(scen, tmp_path / "out")
    assert marker.is_file()
    same_results(ref, out, figures=False)
    _no_children_or_scratch(scratch, before)


def test_slow_helper_is_stopped_and_the_run_unchanged(make_scenario, tmp_path, monkeypatch,
                                                      helper_log):
    install, marker, scratch, before = helper_log
    scen, ref = _reference(make_scenario, tmp_path, monkeypatch)
    install(lambda: time.sleep(300))
    start = time.perf_counter()
    out = run(scen, tmp_path / "out")
    assert time.perf_counter() - start < 60  # waited twice its share plus GRACE_S, not 300 s
    assert marker.is_file()
    same_results(ref, out, figures=False)
    _no_children_or_scratch(scratch, before)


def test_interrupted_run_stops_the_helper(make_scenario, tmp_path, monkeypatch, helper_log):
    """Ctrl-C in the run's share (the helper ignores SIGINT): the helper is stopped and reaped,
    the scratch folder removed, and nothing is published."""
    install, marker, scratch, before = helper_log
    scen = load_scenario(make_scenario(scenario_text(years=4, replicates=2)))
    install(lambda: time.sleep(300))

    def interrupted(model, folder):
        deadline = time.monotonic() + 30
        while not marker.is_file() and time.monotonic() < deadline:
            time.sleep(0.05)
        raise KeyboardInterrupt

    monkeypatch.setattr(warmup, "_census_and_conditions", interrupted)
    with pytest.raises(KeyboardInterrupt):
        run(scen, tmp_path / "out")
    assert marker.is_file()
    assert not (tmp_path / "out").exists()
    _no_children_or_scratch(scratch, before)


def test_no_helper_on_a_large_grid_or_with_threads(make_scenario, monkeypatch):
    """A fork is not attempted on a grid for the parallel kernels, on one core, with another
    thread running or once numba's thread pool runs (a fork copies a thread's locks
    half-held)."""
    scen = load_scenario(make_scenario(scenario_text(years=2, replicates=1)))
    model = build_model(scen, build_landscape(scen, stochastic=True))
    monkeypatch.setattr(warmup, "_thread_pool_started", lambda: False)
    monkeypatch.setattr(warmup.threading, "active_count", lambda: 1)
    monkeypatch.setattr(warmup, "_cores", lambda: 2)
    assert warmup._can_fork(model)
    with monkeypatch.context() as m:
        m.setattr(warmup, "_cores", lambda: 1)
        assert not warmup._can_fork(model)
    with monkeypatch.context() as m:
        m.setattr(_jit, "PARALLEL_CELLS", model.capacity.size)
        assert not warmup._can_fork(model)
    with monkeypatch.context() as m:
        m.setattr(warmup.threading, "active_count", lambda: 2)
        assert not warmup._can_fork(model)
    with monkeypatch.context() as m:
        m.setattr(warmup, "_thread_pool_started", lambda: True)
        assert not warmup._can_fork(model)


def test_warm_process_starts_no_helper(make_scenario, tmp_path, monkeypatch):
    """In a process that has its kernels already (as after a warm cache), no helper is forked:
    it would only cost time."""
    from gridpop import rng

    rng.mix64(np.uint64(0))
    assert not warmup._cold_cache()
    started = []
    monkeypatch.setattr(warmup.multiprocessing, "get_context", started.append)
    scen = load_scenario(make_scenario(scenario_text(years=2, replicates=1)))
    run(scen, tmp_path / "out")
    assert started == []


def test_cache_saves_wait_for_the_folder_lock(tmp_path):
    """A save into numba's cache waits while another holder (here this test, with its own
    open file description) has the cache folder's flock, and completes once it is released."""
    from numba.core.caching import IndexDataCacheFile

    assert _jit.CACHE_LOCKED
    cache = IndexDataCacheFile(str(tmp_path), "kernel-1.py311", ("stamp", 1))
    folder = os.open(tmp_path, os.O_RDONLY)
    fcntl.flock(folder, fcntl.LOCK_EX)
    saver = threading.Thread(target=cache.save, args=(("sig", "target"), b"code"))
    saver.start()
    saver.join(0.5)
    try:
        assert saver.is_alive()  # blocked on the lock
        assert not list(tmp_path.glob("*.nbi"))
    finally:
        os.close(folder)
    saver.join(10)
    assert not saver.is_alive()
    assert cache.load(("sig", "target")) == b"code"


HELPED = """
import json, sys
from pathlib import Path
from numba.core import event
from gridpop import load_scenario
from gridpop.landscape import build_landscape
from gridpop.simulation import warmup
from gridpop.simulation.batches import run_batch
from gridpop.simulation.model import build_model

def names(rec):
    return sorted({e.data["dispatcher"].py_func.__qualname__ for _, e in rec.buffer
                   if e.is_start})

scen = load_scenario(sys.argv[1])
model = build_model(scen, build_landscape(scen, stochastic=scen.growth.stochastic))
assert warmup._can_fork(model)
with event.install_recorder("numba:compile") as share:
    with warmup.kernels_compiled(model):
        pass
with event.install_recorder("numba:compile") as replicate:
    run_batch(model, range(1), Path(sys.argv[2]))
print(json.dumps({"share": names(share), "replicate": names(replicate)}))
"""


@pytest.mark.slow
def test_helper_compiled_kernels_give_identical_results(tmp_path):
    """From an empty numba cache, the demo's first replicate after :func:`kernels_compiled`
    compiles nothing: the run's process compiled its share and loaded the growth pass the
    helper compiled into the cache. The replicate's results are byte for byte those of this
    process's own kernels."""
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "cache"), "TMPDIR": str(tmp_path)}
    done = subprocess.run([sys.executable, "-c", HELPED, str(DEMO), str(tmp_path / "helped")],
                          env=env, capture_output=True, text=True, check=True)
    compiled = json.loads(done.stdout.splitlines()[-1])
    assert "grow_pass_serial" not in compiled["share"]
    assert "census_pass_serial" in compiled["share"]
    assert compiled["replicate"] == []
    assert not list(tmp_path.glob("gridpop-compile-*"))
    scen = load_scenario(DEMO)
    run_batch(build_model(scen, build_landscape(scen, stochastic=scen.growth.stochastic)),
              range(1), tmp_path / "own")
    files = sorted(p.name for p in (tmp_path / "own").iterdir())
    assert files == sorted(p.name for p in (tmp_path / "helped").iterdir())
    for name in files:
        assert (tmp_path / "own" / name).read_bytes() == \
            (tmp_path / "helped" / name).read_bytes(), name


KILLED = """
import os, signal, sys, time
from pathlib import Path
from gridpop import load_scenario, run
from gridpop.simulation import warmup

warmup._can_fork = lambda model: True
warmup._cold_cache = lambda: True
warmup._growth_and_movement = lambda model, scratch: time.sleep(2.0)

def killed(model, scratch):
    os.kill(os.getpid(), signal.SIGKILL)  # the run dies during its share

helper = warmup._helper

def late(*args):  # the helper starts after its run died, as it may on a loaded machine
    time.sleep(1.0)
    helper(*args)

warmup._helper = late

warmup._census_and_conditions = killed
run(load_scenario(sys.argv[1]), Path(sys.argv[2]))
"""


@pytest.mark.slow
def test_helper_of_a_killed_run_removes_the_scratch_folder(make_scenario, tmp_path):
    """A run killed (SIGKILL) during the warm-up cannot remove its scratch folder; its helper,
    left without a parent, finishes its share and removes the folder on its way out, even when
    the run died before the helper started."""
    scen = make_scenario(scenario_text(years=2, replicates=1))
    env = {**os.environ, "TMPDIR": str(tmp_path)}
    done = subprocess.run([sys.executable, "-c", KILLED, str(scen), str(tmp_path / "out")],
                          env=env, capture_output=True, text=True, timeout=300)
    assert done.returncode == -9, done.stderr
    deadline = time.monotonic() + 60
    while list(tmp_path.glob("gridpop-compile-*")) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert list(tmp_path.glob("gridpop-compile-*")) == []
    assert not (tmp_path / "out").exists()


PROBED = """
import json, sys
import numba
from numba.core import event
from gridpop import cli

@numba.njit
def probe(x):  # compiled inside the recorder: it proves that the recorder sees compiles
    return x + 1

with event.install_recorder("numba:compile") as rec:
    probe(1)
    code = cli.main(["run", sys.argv[1], "--replicates", "1", "--out", sys.argv[2], "--quiet"])
print(json.dumps({"code": code, "compiled": sorted({
    e.data["dispatcher"].py_func.__module__ + "." + e.data["dispatcher"].py_func.__qualname__
    for _, e in rec.buffer if e.is_start})}))
"""


@pytest.mark.slow
def test_compile_command_leaves_nothing_for_the_first_run_to_compile(tmp_path):
    """`gridpop compile` (the install step of the README) from an empty numba cache: the
    first run of the demo afterwards compiles no gridpop kernel, and the command leaves no
    output or scratch folder behind."""
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "cache"), "TMPDIR": str(tmp_path)}
    done = subprocess.run([sys.executable, "-m", "gridpop.cli", "compile", str(DEMO)],
                          env=env, capture_output=True, text=True, cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert done.stderr == ""  # the scenario's warnings are for `check` and `run`
    assert "kernels ready" in done.stdout and str(tmp_path / "cache") in done.stdout
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cache"]
    assert len(list((tmp_path / "cache").rglob("*.nbi"))) > 20
    # from tmp_path, as the command: both import the installed gridpop, not the source tree
    # that `python -c` in the checkout would (numba caches each module file apart)
    done = subprocess.run([sys.executable, "-c", PROBED, str(DEMO), str(tmp_path / "out")],
                          env=env, capture_output=True, text=True, cwd=tmp_path)
    probed = json.loads(done.stdout.splitlines()[-1])
    assert probed == {"code": 0, "compiled": ["__main__.probe"]}


def test_compile_command_refuses_a_missing_scenario(tmp_path, capsys):
    from gridpop import cli

    assert cli.main(["compile", str(tmp_path / "absent.toml")]) == 2
    err = capsys.readouterr().err
    assert "absent.toml" in err and "Traceback" not in err


def test_compile_command_on_a_full_disk_says_where(make_scenario, tmp_path, monkeypatch,
                                                   capsys):
    """A full disk under the scratch folder is a user error naming the scenario and TMPDIR,
    not the advice of an interrupted run (there is nothing to resume), and no scratch is left."""
    import errno

    from gridpop import cli
    from gridpop.simulation import run as run_module

    scen = make_scenario(scenario_text(years=2, replicates=3))
    scratch = tmp_path / "scratch"
    scratch.mkdir()
    monkeypatch.setattr(run_module.tempfile, "tempdir", str(scratch))

    def full(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(run_module, "write_results", full)
    assert cli.main(["compile", str(scen)]) == 2
    err = capsys.readouterr().err
    assert str(scen) in err and "TMPDIR" in err and "--resume" not in err
    assert list(scratch.iterdir()) == []

"""Batches of replicates on a Dask cluster: same results as in-process, lost workers, bad addresses.

One LocalCluster of two worker processes on loopback is shared by the module; the runs on it use
``scheduler=`` with its address, the 1-worker run starts its own cluster through ``--workers 1``.
"""

from __future__ import annotations

import json
import os
import signal
import threading
import time

import pytest
from conftest import scenario_text as shared_scenario

import gridpop
from gridpop.cli import main
from gridpop.simulation import distributed as simulation_distributed


def scenario_text(years=6, replicates=5, batch=2):
    return shared_scenario(years=years, replicates=replicates, seed=5, batch=batch, fire=True)


def assert_same_outputs(a, b):
    """Every file of the run (run.json's list) byte for byte; run.json itself apart from its
    ``execution`` block (how the run was carried out: mode, workers, wall time)."""
    ma, mb = (json.loads((d / "run.json").read_text()) for d in (a, b))
    assert {"abundance.tif", "timeseries.csv", "patches.csv", "events.csv"} <= set(ma["files"])
    for name in ma["files"]:
        assert (a / name).read_bytes() == (b / name).read_bytes(), name
    ma.pop("execution"), mb.pop("execution")
    assert ma == mb


@pytest.fixture(scope="module")
def cluster():
    from distributed import Client, LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None, env={"NUMBA_NUM_THREADS": "1"}) as lc:
        with Client(lc) as client:
            yield lc, client


@pytest.mark.slow
def test_in_process_one_and_two_workers_identical(make_scenario, tmp_path, cluster):
    """Counter-based random numbers (Salmon et al. 2011, Proc. SC'11) make a replicate's numbers
    depend on (seed, replicate) only, and batches are combined in index order, so the split of
    batches over processes cannot change a byte of the results."""
    scen = make_scenario(scenario_text())
    gridpop.run(scen, tmp_path / "local")
    assert main(["run", str(scen), "--out", str(tmp_path / "one"), "--workers", "1",
                 "--quiet"]) == 0
    gridpop.run(scen, tmp_path / "two", scheduler=cluster[0].scheduler_address)
    assert_same_outputs(tmp_path / "local", tmp_path / "one")
    assert_same_outputs(tmp_path / "local", tmp_path / "two")
    one = json.loads((tmp_path / "one" / "run.json").read_text())["execution"]
    two = json.loads((tmp_path / "two" / "run.json").read_text())["execution"]
    assert (one["mode"], one["workers"], one["numba_threads"]) == ("local cluster", 1, 1)
    assert two["mode"] == "scheduler"


@pytest.mark.slow
def test_worker_killed_mid_batch_is_retried_and_counted_once(make_scenario, tmp_path, cluster):
    """A worker process killed (SIGKILL) while it writes a batch: Dask reruns the task on a live
    worker (the scheduler's task retry on worker loss; Rocklin 2015, Proc. SciPy, "Dask"), the
    half-written temporary folder is never placed, and the results equal the in-process run, so
    no replicate is counted twice or lost."""
    lc, client = cluster
    scen = make_scenario(scenario_text(years=40, replicates=8, batch=2))
    gridpop.run(scen, tmp_path / "local")
    out = tmp_path / "killed"
    batches = tmp_path / ".killed.partial" / "batches"
    errors = []

    def target():
        try:
            gridpop.run(scen, out, scheduler=lc.scheduler_address)
        except Exception as exc:  # reported by the main thread
            errors.append(exc)

    thread = threading.Thread(target=target)
    thread.start()
    killed = None
    deadline = time.monotonic() + 120
    while killed is None and thread.is_alive() and time.monotonic() < deadline:
        busy = [w for w, keys in client.processing().items()
                if any(str(k).startswith("gridpop-batch-") for k in keys)]
        writing = batches.is_dir() and any(p.suffix == ".tmp" for p in batches.iterdir())
        if busy and writing:
            pids = client.run(os.getpid, workers=busy[:1])
            killed = pids[busy[0]]
            os.kill(killed, signal.SIGKILL)
        time.sleep(0.01)
    thread.join(timeout=180)
    assert not thread.is_alive()
    assert not errors, errors
    assert killed is not None, "no batch was seen running"
    assert killed not in client.run(os.getpid).values()
    assert_same_outputs(tmp_path / "local", out)


@pytest.mark.slow
def test_unreachable_scheduler_clear_error_in_bounded_time(make_scenario, tmp_path, capsys,
                                                           monkeypatch):
    """Nothing listens on port 1 of loopback: the connection is refused and retried until the
    timeout; the command fails with exit 2 and a message within that bound."""

    monkeypatch.setattr(simulation_distributed, "CONNECT_TIMEOUT_S", 2.0)
    scen = make_scenario(scenario_text())
    out = tmp_path / "r"
    started = time.monotonic()
    assert main(["run", str(scen), "--out", str(out), "--scheduler", "tcp://127.0.0.1:1",
                 "--quiet"]) == 2
    elapsed = time.monotonic() - started
    err = capsys.readouterr().err
    assert "tcp://127.0.0.1:1" in err and "scheduler" in err and "Traceback" not in err
    assert elapsed < 15
    assert not out.exists()


def test_bad_execution_options_refused(make_scenario, tmp_path, capsys):
    scen = make_scenario(scenario_text())
    assert main(["run", str(scen), "--out", str(tmp_path / "r"), "--workers", "2",
                 "--scheduler", "tcp://127.0.0.1:8786", "--quiet"]) == 2
    assert "--workers and --scheduler" in capsys.readouterr().err
    assert main(["run", str(scen), "--out", str(tmp_path / "r"), "--workers", "0",
                 "--quiet"]) == 2
    assert "--workers 0" in capsys.readouterr().err
    assert main(["run", str(scen), "--out", str(tmp_path / "r"), "--scheduler", "foo",
                 "--quiet"]) == 2
    assert "not a scheduler address" in capsys.readouterr().err
    assert not (tmp_path / "r").exists() and not (tmp_path / ".r.partial").exists()


@pytest.mark.slow
def test_compare_on_cluster_same_as_in_process(make_scenario, tmp_path, cluster):
    """``gridpop compare --scheduler``: each plan's run goes to the cluster; the comparison files
    are the same as in-process (same reasoning as above: Salmon et al. 2011, Proc. SC'11)."""
    base = make_scenario(scenario_text(), "base.toml")
    plan = make_scenario(scenario_text().replace("mortality = 0.6", "mortality = 0.3"),
                         "plan.toml")
    args = ["compare", str(base), str(plan), "--quiet", "--no-plots"]
    assert main(args + ["--out", str(tmp_path / "local")]) == 0
    assert main(args + ["--out", str(tmp_path / "dask"), "--scheduler",
                        cluster[0].scheduler_address]) == 0
    for name in ("comparison.csv", "comparison.json", "occupancy_difference_plan.tif"):
        assert ((tmp_path / "local" / name).read_bytes()
                == (tmp_path / "dask" / name).read_bytes()), name
    for stem in ("base", "plan"):
        assert_same_outputs(tmp_path / "local" / stem, tmp_path / "dask" / stem)

"""A whole run: the model built, its batches of replicates run (in-process or on Dask) and
checkpointed, combined and written, the plots drawn, and the output folder published when
complete.

The yearly cycle itself is :mod:`gridpop.simulation.cycle`. The unit of work is a *batch* of
replicates (:mod:`gridpop.simulation.batches`). A batch writes its per-year per-cell sums and
its ledger into its own folder of the run's working folder; the run combines batches in index
order, so results do not depend on how batches were scheduled.
"""

from __future__ import annotations

import contextlib
import shutil
import tempfile
import threading
import time
from pathlib import Path

import numba

from .. import _jit
from .._version import __version__
from ..errors import RunStateError
from ..io.results import (
    CHECKPOINT,
    check_output,
    prepare_output,
    publish_complete,
    working_folder,
    write_json,
)
from ..landscape import build_landscape
from .batches import (
    batch_folder,
    discard_unfinished,
    finished_batches,
    may_continue,
    resumable_if_disk_full,
    run_checkpointed_batch,
    run_identity,
)
from .distributed import check_execution
from .model import build_model
from .resources import check_room, ensure_space, footprint
from .results import write_results
from .warmup import kernels_compiled


def run(scenario, out_dir, *, overwrite: bool = False, progress: bool = False,
        workers: int | None = None, scheduler: str | None = None, resume: bool = False,
        force: bool = False, plots: bool = False) -> Path:
    """Run a scenario and write its results to ``out_dir``; return the output folder.

    Batches of replicates are checkpointed in the working folder beside ``out_dir``
    (:func:`gridpop.io.results.working_folder`) and combined in batch order when all are done, so
    results are the same in-process, on any number of Dask workers and after a resume.

    Parameters
    ----------
    scenario : Scenario
    out_dir : path
    overwrite : bool
        Replace an existing output folder (and discard an interrupted run of it).
    progress : bool
        Show a progress bar.
    workers : int, optional
        Run the batches on a new local Dask cluster of this many worker processes.
    scheduler : str, optional
        Run the batches on the Dask cluster at this address; the output folder must then be on
        a filesystem its workers share (:mod:`gridpop.simulation.distributed`).
    resume : bool
        Continue the interrupted run of ``out_dir``, keeping the batches it finished. Refused
        when the scenario file, its parameters or the gridpop version differ.
    force : bool
        Start even when the estimate (:func:`footprint`) exceeds the free memory or disk.
    plots : bool
        Draw the figures (:func:`gridpop.report.plots.plot_run`) into ``plots/``.

    Everything, plots included, is written into the working folder; the folder is renamed to
    ``out_dir`` last, with ``run.json`` (``"complete": true``) written just before
    (:func:`gridpop.io.results.publish_complete`). A kill at any moment leaves either no
    ``out_dir`` and a working folder that ``resume`` continues, or the whole result.

    Raises
    ------
    OutputExistsError
        ``out_dir`` exists and ``overwrite`` is false.
    RunStateError
        Both ``workers`` and ``scheduler``; no room; unreachable scheduler; a changed scenario
        under ``resume``; an interrupted run in the way; the disk filled up during the run
        (finished batches are kept for ``resume``).
    """
    from tqdm import tqdm

    started = time.time()
    out_dir = Path(out_dir)
    local = workers is None and scheduler is None
    check_execution(workers, scheduler)
    check_output(out_dir, overwrite=overwrite)
    model = build_model(scenario, build_landscape(scenario, stochastic=scenario.growth.stochastic))
    plan = model.plan.batches()
    work = working_folder(out_dir)
    resuming = may_continue(work, run_identity(scenario, model), resume=resume,
                             overwrite=overwrite)
    finished = finished_batches(work, len(plan)) if resuming else set()
    fp = footprint(scenario, model)
    if not force:
        check_room(fp, work, workers=workers, scheduler=scheduler,
                   finished=len(finished) / len(plan))
    with kernels_compiled(model, wanted=local and len(finished) < len(plan)):
        connectivity = _connectivity_in_background(model)
    cluster: contextlib.AbstractContextManager
    if local:
        cluster = contextlib.nullcontext()
    else:
        from .distributed import cluster_client, run_batches

        cluster = cluster_client(workers=workers, scheduler=scheduler)
    with cluster as client:  # reach the cluster before anything is written
        work = prepare_output(out_dir, overwrite=overwrite, resume=resuming)
        with resumable_if_disk_full(work, len(plan)):
            if not resuming:
                write_json(work / CHECKPOINT, {**run_identity(scenario, model),
                                               "complete": False})
            discard_unfinished(work, finished)
            todo = [(b, reps) for b, reps in enumerate(plan) if b not in finished]
            with tqdm(total=model.plan.replicates,
                      initial=model.plan.replicates - sum(len(r) for _, r in todo),
                      unit="replicate", disable=not progress,
                      desc=f"gridpop run {scenario.path.stem}") as bar:
                if local:
                    for b, reps in todo:
                        run_checkpointed_batch(model, b, reps, work, bar)
                elif todo:
                    run_batches(client, model, todo, work, bar)
    if connectivity is not None:
        connectivity.join()
    with resumable_if_disk_full(work, len(plan)):
        ensure_space(work, fp.results, "combining the batches and writing the results")
        files = write_results(work, scenario, model, [batch_folder(work, b)
                                                      for b in range(len(plan))])
        grid = model.landscape.grid
        manifest = {
            "gridpop_version": __version__,
            "scenario": str(scenario.path),
            "scenario_sha256": scenario.sha256,
            "seed": model.plan.seed,
            "years": model.plan.years,
            "replicates": model.plan.replicates,
            "stochastic": model.growth.stochastic,
            "grid": {"crs_wkt": grid.crs.to_wkt(), "transform": list(grid.transform)[:6],
                     "shape": list(grid.shape)},
            "files": sorted(files),
            "execution": {  # how the run was carried out: the only part that may differ
                "mode": ("in-process" if local
                         else "local cluster" if workers is not None else "scheduler"),
                "workers": workers,
                "numba_threads": (numba.get_num_threads() if local
                                  else 1 if workers is not None else None),
                "resumed_batches": len(finished),
            },
        }
        if plots:
            from ..report.plots import plot_run

            plot_run(work, manifest)
        shutil.rmtree(work / "batches")
        manifest["execution"]["wall_time_s"] = round(time.time() - started, 3)
        publish_complete(work, out_dir, "run.json", manifest)
    return out_dir


def compile_kernels(scenario) -> None:
    """Compile every kernel that runs of ``scenario`` use into numba's cache (or find them
    there), so that those runs start without compiling: one replicate of the scenario through
    its whole horizon, run as :func:`run` runs it (two processes compiling at once with an
    empty cache) into a scratch folder in the temporary folder (``TMPDIR``), then removed; no
    plots, no memory or disk estimate (one replicate is the least any run of it needs).

    A kernel of an event that this replicate does not meet (a disturbance that never happens
    in it) is compiled by the first run that meets it.

    Raises
    ------
    RunStateError
        The temporary folder's disk filled up.
    """
    with tempfile.TemporaryDirectory(prefix="gridpop-compile-") as scratch:
        try:
            run(scenario.replace("run", replicates=1), Path(scratch) / "run", force=True)
        except RunStateError:  # only a full disk, here: nothing to resume
            raise RunStateError(
                f"{scenario.path}: one replicate of it, run to compile its kernels, filled the "
                f"disk of {scratch}; free some space there or set TMPDIR to a folder on "
                "another disk.") from None


def _connectivity_in_background(model) -> threading.Thread | None:
    """Start computing the walk's connectivity table (an output that depends on the year-0
    landscape only) on another thread: its kernels release the GIL, so it runs on a second core
    while the replicates run. Only on a grid small enough for its kernels to run serially (two
    threads must not enter numba's parallel kernels at once with every threading layer). An
    error is left to be raised where the table is written."""
    if model.walk is None or model.capacity.size >= _jit.PARALLEL_CELLS:
        return None

    def compute():
        with contextlib.suppress(Exception):
            _ = model.connectivity

    thread = threading.Thread(target=compute, daemon=True)
    thread.start()
    return thread

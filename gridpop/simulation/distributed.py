"""Running batches of replicates on a Dask cluster (``dask.distributed``).

The unit of work is one batch of replicates (:func:`gridpop.simulation.batches`). A task receives
the
model (broadcast to every worker once), a batch index and the run's working folder; it writes the
batch folder there and returns only the index. Large per-year accumulators never travel through
the scheduler, so the working folder must be on a filesystem that every worker and the client see
under the same path (on one machine any folder; on a cluster a shared filesystem such as NFS).
The client then combines the batch folders in batch order, so results do not depend on the number
of workers or on the order in which batches finish.

A worker that dies mid-batch leaves only a temporary folder behind; Dask reruns the task on a live
worker, which writes a fresh temporary folder and renames it into place. A batch index is placed
at most once (:func:`gridpop.simulation.batches.run_checkpointed_batch`), so no batch is counted
twice.
"""

from __future__ import annotations

import logging
import uuid
from contextlib import contextmanager
from pathlib import Path

from ..errors import RunStateError

CONNECT_TIMEOUT_S = 10.0
"""How long to try reaching a scheduler before giving up, seconds."""

WORKER_ENV = {"NUMBA_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}
"""Environment of local worker processes: one thread each, the processes give the parallelism."""


def check_execution(workers: int | None, scheduler: str | None) -> None:
    """Refuse ``--workers`` with ``--scheduler`` and a worker count below 1.

    Raises
    ------
    RunStateError
    """
    if workers is not None and scheduler is not None:
        raise RunStateError("--workers and --scheduler exclude each other: --workers starts a "
                            "cluster on this machine, --scheduler uses a running one.")
    if workers is not None and workers < 1:
        raise RunStateError(f"--workers {workers}: must be 1 or more.")


@contextmanager
def cluster_client(*, workers: int | None = None, scheduler: str | None = None):
    """A ``distributed.Client`` on a new local cluster or on an existing scheduler.

    Parameters
    ----------
    workers : int, optional
        Start a ``LocalCluster`` of this many worker processes (one thread each, numba on one
        thread) on this machine, closed on exit.
    scheduler : str, optional
        Address of a running scheduler, e.g. ``tcp://host:8786``.

    Raises
    ------
    RunStateError
        If the scheduler cannot be reached within :data:`CONNECT_TIMEOUT_S` seconds, the address is
        malformed, or the local cluster does not start.
    """
    from distributed import Client, LocalCluster

    if (workers is None) == (scheduler is None):
        raise ValueError("give exactly one of workers and scheduler")
    if scheduler is not None:
        try:
            client = Client(scheduler, timeout=CONNECT_TIMEOUT_S)
        except (ValueError, TypeError) as exc:
            raise RunStateError(f"--scheduler {scheduler}: not a scheduler address ({exc}); "
                                "expected tcp://HOST:PORT.") from None
        except OSError as exc:
            raise RunStateError(
                f"--scheduler {scheduler}: cannot reach a Dask scheduler there within "
                f"{CONNECT_TIMEOUT_S:g} s ({exc}). Check the address and that the scheduler "
                "is running.") from None
        try:
            yield client
        finally:
            client.close()
        return
    try:
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                               dashboard_address=None, silence_logs=logging.ERROR,
                               env=WORKER_ENV)
    except (OSError, RuntimeError) as exc:
        raise RunStateError(f"--workers {workers}: the local Dask cluster did not start "
                            f"({type(exc).__name__}: {exc}). From a Python script, call "
                            "gridpop.run under `if __name__ == \"__main__\":`: the worker "
                            "processes import the main module.") from None
    try:
        with Client(cluster) as client:
            yield client
    finally:
        cluster.close()


def run_batches(client, model, todo: list[tuple[int, range]], work: Path, progress=None) -> None:
    """Run batches on the cluster behind ``client``; return when all are in place.

    Parameters
    ----------
    client : distributed.Client
    model : gridpop.simulation.model.Model
        Sent to every worker once.
    todo : list of (batch index, replicates)
    work : Path
        The run's working folder, on a filesystem every worker sees.
    progress : tqdm, optional
        Advanced by each batch's replicate count as it finishes.

    Raises
    ------
    Exception
        The first task failure (e.g. an ``OSError`` from a full disk); the other tasks are
        cancelled and finished batches stay in place for a resumed run.
    """
    from distributed import KilledWorker, as_completed

    from .batches import run_checkpointed_batch

    shared = client.scatter(model, broadcast=True)
    token = uuid.uuid4().hex[:8]
    futures = {client.submit(run_checkpointed_batch, shared, b, reps, work,
                             key=f"gridpop-batch-{b:05d}-{token}"): (b, reps) for b, reps in todo}
    try:
        for future in as_completed(futures):
            try:
                future.result()  # raises the task's exception
            except KilledWorker:
                b, reps = futures[future]
                raise RunStateError(
                    f"{work}: batch {b} (replicates {reps.start}..{reps.stop - 1}) was lost "
                    "with the worker running it several times in a row (out of memory?). "
                    "Finished batches are kept: fix the cause and run again with --resume."
                ) from None
            if progress is not None:
                progress.update(len(futures[future][1]))
    finally:
        client.cancel(list(futures))

"""Compiling a run's kernels in two processes at once when numba's cache is cold.

The first run after installing gridpop (or after a kernel changed) spends most of its time
compiling, and numba compiles one kernel at a time per process. So before the replicates of a
run on a grid small enough for the serial kernels, :func:`kernels_compiled` shares the kernels
of the yearly cycle between two processes, in two halves of about the same compile time:

- a helper process, forked from the run, takes one year of the model without environmental
  noise, disturbance and management: that compiles the growth pass (the largest kernel, with
  the growth, emigration and random number kernels it calls) and then the movement kernels,
  whose arguments have the same types as in the whole model;
- meanwhile the run's own process moves year 1's emigrants (none yet, so only the movement
  kernels are compiled, long before the helper reaches them and loads them from the cache),
  and takes the census of year 0 and the conditions of years 1 and 2
  (:meth:`gridpop.simulation.cycle.Replicate.conditions`: environment, disturbance,
  management): that compiles the census, the environmental noise and the disturbance kernels,
  while the connectivity table's thread compiles its own;
- then the run waits for the helper and loads its kernels from numba's cache.

The helper only fills the cache: the run computes everything itself, with the same compiled
code, so its results are those of a run without a helper, bit for bit. A helper that fails, is
slow or is interrupted changes nothing but the time: the run waits for it at most twice as long
as its own share took (plus :data:`GRACE_S`), then stops it and compiles whatever is missing
itself. With a warm cache there is no helper.
No process outlives :func:`kernels_compiled` and its scratch folder is removed; the helper
ignores Ctrl-C, which the run handles (stopping the helper on its way out). numba's cache is
made safe for two processes saving at once in :mod:`gridpop._jit`.

Only where a fork is safe and useful (:func:`_can_fork`): two cores or more, and a process of
one thread that has not started numba's thread pool (``gridpop run``; not, say, a notebook
with threads of its own), on a system with ``fork`` and ``flock``.
"""

from __future__ import annotations

import contextlib
import dataclasses
import multiprocessing
import os
import shutil
import signal
import tempfile
import threading
import time
import warnings
from pathlib import Path

import numba
import numpy as np
from numba.core import event

from .. import _jit, rng
from .cycle import BatchSink, Replicate
from .model import Model

GRACE_S = 2.0
"""Seconds the run waits for the helper on top of twice its own share's time."""


class _Stopped(Exception):
    """Raised in the helper by SIGTERM: an exception, so that numba removes a cache file it
    was writing."""


@contextlib.contextmanager
def kernels_compiled(model: Model, wanted: bool = True):
    """Compile (or load from numba's cache) the kernels of the model's yearly cycle, in two
    processes when ``wanted`` and possible (see the module docstring).

    The helper is forked on entry, before the body of the ``with`` runs: start other threads
    (the connectivity table) in the body, never before. On exit the run's share is compiled and
    the helper waited for and stopped; the run can then start. An exception from the body
    stops the helper at once. With a warm cache (:func:`_cold_cache`) there is no helper and
    the run loads its kernels as it goes.
    """
    if not (wanted and _can_fork(model) and _cold_cache()):
        yield
        return
    with tempfile.TemporaryDirectory(prefix="gridpop-compile-") as scratch:
        helper = multiprocessing.get_context("fork").Process(
            target=_helper, args=(model, Path(scratch) / "helper", os.getpid()), daemon=True)
        helper.start()
        try:
            yield
            start = time.perf_counter()
            _census_and_conditions(model, Path(scratch) / "run")
            helper.join(2 * (time.perf_counter() - start) + GRACE_S)
        finally:
            _stop(helper)


def _cold_cache() -> bool:
    """Whether numba had to compile the first kernel of every yearly cycle (a mixing step of
    the random numbers, a fraction of a second) rather than find it in its cache or in this
    process: a cache that has it is taken as warm, and a helper would only cost time."""
    with event.install_recorder("numba:compile") as probe:
        rng.mix64(np.uint64(0))
    return bool(probe.buffer)


def _can_fork(model: Model) -> bool:
    """A small grid (serial kernels: the helper's year is quick), a second core, a locked
    cache, ``fork``, and nothing a fork could catch half-way: no other Python thread, no numba
    thread pool yet."""
    return (model.capacity.size < _jit.PARALLEL_CELLS and _cores() > 1 and _jit.CACHE_LOCKED
            and "fork" in multiprocessing.get_all_start_methods()
            and threading.active_count() == 1 and not _thread_pool_started())


def _cores() -> int:
    """The cores this process may run on."""
    if hasattr(os, "sched_getaffinity"):
        return len(os.sched_getaffinity(0))
    return os.cpu_count() or 1


def _thread_pool_started() -> bool:
    try:
        numba.threading_layer()
    except ValueError:  # "not initialized": no parallel kernel has run in this process
        return False
    return True


def _census_and_conditions(model: Model, scratch: Path) -> None:
    """The run's share: the census of year 0, the conditions of year 1, the movement of year
    1's emigrants (none: the replicate has not grown yet; the helper reaches these kernels last
    and finds them in the cache) and the conditions of year 2 (whose environmental noise
    follows on that of year 1)."""
    sink = BatchSink(scratch, model, range(1))
    rep = Replicate(model, 0, sink.ledger[0])
    rep.start(sink)
    year1 = rep.conditions(1, sink)
    if model.movement is not None:
        rep.move(year1.streams, year1.k)  # nobody is leaving yet: it compiles, nothing moves
    rep.conditions(2, sink)


def _growth_and_movement(model: Model, scratch: Path) -> None:
    """The helper's share: one year of the model without environmental noise, disturbance and
    management."""
    plain = dataclasses.replace(model, regime=None, management=None,
                                growth=dataclasses.replace(model.growth, env=None))
    sink = BatchSink(scratch, plain, range(1))
    Replicate(plain, 0, sink.ledger[0]).advance(1, sink)


def _helper(model: Model, scratch: Path, run: int) -> None:
    """The helper process: quiet, deaf to Ctrl-C, stopped by SIGTERM. A helper whose run (the
    process ``run``, taken before the fork: the run may be killed before the helper starts) was
    killed removes the scratch folder, which the run would have removed."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, _raise_stopped)
    quiet = os.open(os.devnull, os.O_WRONLY)
    os.dup2(quiet, 1)
    os.dup2(quiet, 2)
    warnings.simplefilter("ignore")
    try:
        with contextlib.suppress(_Stopped):
            _growth_and_movement(model, scratch)
    finally:
        if os.getppid() != run:
            shutil.rmtree(scratch.parent, ignore_errors=True)


def _raise_stopped(signum, frame):
    raise _Stopped


def _stop(helper) -> None:
    """Stop the helper if it still runs, and reap it."""
    if helper.is_alive():
        helper.terminate()
        helper.join(5.0)
    if helper.is_alive():
        helper.kill()
    helper.join()
    helper.close()

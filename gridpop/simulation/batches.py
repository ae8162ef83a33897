"""Batches of replicates, the unit of work: one batch writes its per-year per-cell sums, ledger and
events into its own folder, renamed into place when whole (the checkpoint); an interrupted run
resumes from the batches in place when its scenario and settings are the same.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import shutil
import uuid
from pathlib import Path

from .._version import __version__
from ..analysis.summary import parameters
from ..errors import RunStateError
from ..io.results import CHECKPOINT, keep_only
from .cycle import BatchSink, simulate_replicate
from .model import Model
from .resources import batch_bytes, ensure_space


def run_batch(model: Model, reps: range, folder: Path, progress=None) -> None:
    """Run one batch of replicates into ``folder`` (a ``done`` marker is written last)."""
    sink = BatchSink(folder, model, reps)
    for row, rep in enumerate(reps):
        simulate_replicate(model, rep, sink, row)
        if progress is not None:
            progress.update(1)
    sink.close()


NO_SPACE = (errno.ENOSPC, errno.EDQUOT)


def batch_folder(work: Path, b: int) -> Path:
    """Where batch ``b`` of a run lives in its working folder."""
    return Path(work) / "batches" / f"{b:05d}"


def run_checkpointed_batch(model: Model, b: int, reps: range, work, progress=None) -> int:
    """Run batch ``b`` into a temporary folder, then rename it to :func:`batch_folder`.

    The rename is the checkpoint: the batch folder is either absent or whole. When it is already
    in place (another attempt at the same batch, e.g. a task Dask retried, finished first) the
    new copy is discarded, so a batch is never counted twice. Returns ``b``.
    """
    final = batch_folder(work, b)
    tmp = final.with_name(f"{final.name}.{uuid.uuid4().hex[:12]}.tmp")
    ensure_space(final.parent, batch_bytes(model), f"batch {b}")
    run_batch(model, reps, tmp, progress)
    try:
        os.rename(tmp, final)
    except OSError:
        if not (final / "done").is_file():
            raise
        shutil.rmtree(tmp)
    return b


def finished_batches(work: Path, n: int) -> set[int]:
    """Indices of the batches in place (folder with its ``done`` marker) in a working folder."""
    folder = work / "batches"
    if not folder.is_dir():
        return set()
    return {int(p.name) for p in folder.iterdir()
            if p.name.isdigit() and int(p.name) < n and (p / "done").is_file()}


def discard_unfinished(work: Path, keep: set[int]) -> None:
    """Remove everything in the working folder but the checkpoint and the finished batches: the
    temporary folder of an interrupted batch, and the results and plots of an interrupted attempt
    at writing them."""
    keep_only(work, {CHECKPOINT, "batches"})
    folder = work / "batches"
    folder.mkdir(exist_ok=True)
    keep_only(folder, {batch_folder(work, b).name for b in keep})


def plan_identity(scenario) -> dict:
    """What a resumed run (or a plan of a resumed comparison) must share with the interrupted
    one: the scenario file and its hash, the parameters as read (overrides included)."""
    return {"scenario": str(scenario.path), "scenario_sha256": scenario.sha256,
            "parameters": parameters(scenario)}


def run_identity(scenario, model: Model) -> dict:
    return {"gridpop_version": __version__, **plan_identity(scenario),
            "batches": len(model.plan.batches())}


def interrupted(work: Path, *, resume: bool, overwrite: bool,
                checkpoint: str = CHECKPOINT) -> dict | None:
    """The checkpoint (file ``checkpoint``) of the interrupted run, comparison or sensitivity
    analysis in ``work`` when it is to be continued; None when there is none, or when
    ``overwrite`` without ``resume`` discards it.

    Raises
    ------
    RunStateError
        The checkpoint is unreadable; or there is one and neither ``resume`` nor ``overwrite``.
    """
    path = work / checkpoint
    if not path.is_file():
        return None
    try:
        saved = json.loads(path.read_text())
    except (OSError, ValueError) as exc:
        raise RunStateError(f"{path}: unreadable ({exc}); pass --overwrite without --resume "
                            "to start over.") from None
    if resume:
        return saved
    if overwrite:
        return None
    of = saved.get("scenario") or ", ".join(p.get("scenario", "?")
                                             for p in saved.get("plans", []))
    kind = ("sensitivity analysis" if "uncertainty" in saved else
            "comparison" if "plans" in saved else "run")
    raise RunStateError(f"{work}: holds an interrupted {kind} of {of}; pass --resume to "
                        "continue it or --overwrite to start over.")


def parameter_changes(then: dict, now: dict) -> list[str]:
    """The parameters (as :func:`gridpop.analysis.summary.parameters` gives them) that differ,
    as ``"[section] key = old then, new now"``, and the ``[[...]]`` tables that differ."""
    changed = [f"[{sec}] {key} = {old!r} then, {now[sec].get(key)!r} now"
               for sec, values in then.items() if isinstance(values, dict)
               for key, old in values.items() if now.get(sec, {}).get(key) != old]
    return changed + [f"the [[{sec}]] tables" for sec, values in then.items()
                      if isinstance(values, list) and now.get(sec) != values]


def version_change(saved: dict) -> list[str]:
    """``["gridpop X then, Y now"]`` when the checkpoint is of another gridpop version."""
    if saved.get("gridpop_version") == __version__:
        return []
    return [f"gridpop {saved.get('gridpop_version')} then, {__version__} now"]


def may_continue(work: Path, identity: dict, *, resume: bool, overwrite: bool) -> bool:
    """Whether the run continues the interrupted run in ``work`` (read only).

    Raises
    ------
    RunStateError
        With ``resume`` when the interrupted run is of another scenario file, other parameters or
        another gridpop version; without ``resume`` or ``overwrite`` when there is an
        interrupted run to lose.
    """
    saved = interrupted(work, resume=resume, overwrite=overwrite)
    if saved is None:
        return False
    scen = identity["scenario"]
    if saved.get("scenario_sha256") != identity["scenario_sha256"]:
        raise RunStateError(
            f"{scen}: the scenario file changed since the interrupted run in {work} started "
            f"(sha256 {str(saved.get('scenario_sha256'))[:12]}... then, "
            f"{identity['scenario_sha256'][:12]}... now); --resume continues only the same "
            "scenario. Restore the file, or run without --resume and with --overwrite to start "
            "over.")
    changed = (parameter_changes(saved.get("parameters", {}), identity["parameters"])
               + version_change(saved))
    if changed or saved.get("batches") != identity["batches"]:
        raise RunStateError(
            f"{scen}: the interrupted run in {work} had other settings: "
            f"{'; '.join(changed) or 'another number of batches'}. --resume needs the same "
            "settings (command-line overrides included); or run without --resume and with "
            "--overwrite to start over.")
    return True


@contextlib.contextmanager
def resumable_if_disk_full(work: Path, n_batches: int):
    """Turn a full disk (or quota) into a :class:`RunStateError` that says how to resume."""
    try:
        yield
    except OSError as exc:
        if exc.errno not in NO_SPACE:
            raise
        done = len(finished_batches(work, n_batches))
        raise RunStateError(
            f"{work}: no space left on the device ({exc.strerror or exc}); {done} of "
            f"{n_batches} batches are finished and kept. Free some space, then run the same "
            "command again with --resume.") from None

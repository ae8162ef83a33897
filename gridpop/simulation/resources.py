"""The memory and disk a run needs: estimates from the grid, years, replicates and outputs
(:func:`footprint`), and the checks that refuse a run that does not fit.
"""

from __future__ import annotations

import errno
import shutil
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import RunStateError
from ..movement.convolution import STENCIL_MAX_RADIUS, STENCIL_MAX_RADIUS_SEPARABLE
from .cycle import N_FIELDS
from .model import Model
from .results import stacks_written

BASE_BYTES = 350 * 2**20
"""Resident memory of a gridpop process before any grid is loaded (Python, numba's compiled
kernels, GDAL), measured with benchmarks/bench_memory.py."""


MODEL_BYTES_PER_CELL = 56
"""The model's and landscape's per-cell arrays (capacity, initial, labels, mask, ...)."""


REPLICATE_BYTES_PER_CELL = 120
"""State and temporaries of one replicate's yearly cycle (population, emigrants, arrivals,
stayers, noise), per cell. With the model's arrays about 1.4 times the anonymous memory per
cell measured by benchmarks/bench_memory.py (128 bytes between 1024^2 and 2048^2 grids)."""


FFT_BYTES_PER_CELL = 48
"""Per cell of the padded grid when dispersal goes through the FFT: the padded field, its
spectrum and the kernel's."""


CSV_ROW_BYTES = 170
"""Upper bound of a ledger row in timeseries.csv / patches.csv (8 numbers of up to 18 chars)."""


@dataclass(frozen=True)
class Footprint:
    """Estimated resources of a run, bytes (see :func:`footprint`)."""

    base: int  # one process with the model loaded
    batch: int  # on top of base, while a process runs a batch
    combine: int  # on top of base, while the batches are combined and the results written
    output: int  # the published results, GeoTIFF stacks counted uncompressed (an upper bound)
    results: int  # disk to combine the batches: the totals and the results
    work: int  # peak disk use of the working folder (batches, totals and results together)

    def memory(self, *, workers: int | None = None, scheduler: str | None = None) -> int:
        """Peak memory on this machine: in-process, with ``workers`` local worker processes
        (plus this one) or with a remote ``scheduler`` (this process only)."""
        if scheduler is not None:
            return self.base + self.combine
        if workers is not None:
            return workers * (self.base + self.batch) + self.base + self.combine
        return self.base + max(self.batch, self.combine)


def footprint(scenario, model: Model) -> Footprint:
    """Estimate the memory and disk a run needs.

    Per-year accumulators are memory-mapped files, so memory does not grow with the number of
    years; what does are the ledgers (replicates x years x patches) and the disk use. The working
    folder holds every batch's accumulators until they are combined.
    """
    ny, nx = model.capacity.shape
    cells = ny * nx
    years = model.plan.years + 1
    rows = years * (model.census.n_patches + 1)
    per_cell = sum(np.dtype(dt).itemsize for dt in model.accumulators.values())
    fft = 0
    kernel = model.kernel
    if kernel is not None and kernel.radius > (STENCIL_MAX_RADIUS_SEPARABLE if kernel.separable
                                               else STENCIL_MAX_RADIUS):
        fft = FFT_BYTES_PER_CELL * (ny + 2 * kernel.radius) * (nx + 2 * kernel.radius)
    ledger_row = ledger_width(model) * 8
    extra_classes = model.growth.life.classes - 1  # state, grown, emigrants per more class
    n_stacks = len(stacks_written(scenario, model))
    patch_rows = (model.plan.replicates * years * model.census.n_patches
                  if scenario.output.patches_csv else 0)
    output = (n_stacks * years * cells * 4
              + (model.plan.replicates * years + patch_rows) * CSV_ROW_BYTES)
    results = years * cells * per_cell + output  # the combined totals beside the results
    return Footprint(
        base=BASE_BYTES + cells * (MODEL_BYTES_PER_CELL
                                   + 8 * model.actions.capacity_arrays(model.plan.years)),
        batch=cells * (REPLICATE_BYTES_PER_CELL + 24 * extra_classes) + fft
        + model.plan.batch_size * rows * ledger_row,
        combine=model.plan.replicates * rows * ledger_row + cells * 16,
        output=output, results=results,
        work=len(model.plan.batches()) * batch_bytes(model) + results)


def ledger_width(model: Model) -> int:
    """Columns of a ledger row: the fields, then releases and removals and the stages."""
    return N_FIELDS + len(model.ledger_columns)


def batch_bytes(model: Model) -> int:
    """Disk taken by one batch folder: its per-year accumulators and its ledger, bytes."""
    ny, nx = model.capacity.shape
    years = model.plan.years + 1
    per_cell = sum(np.dtype(dt).itemsize for dt in model.accumulators.values())
    ledger = model.plan.batch_size * (model.census.n_patches + 1) * ledger_width(model) * 8
    return years * (ny * nx * per_cell + ledger)


def ensure_space(folder: Path, need: int, what: str) -> None:
    """Raise ``OSError(ENOSPC)`` before writing ``need`` bytes into ``folder`` if they do not
    fit: memory-mapped files on a full disk would end the process with SIGBUS instead."""
    free = shutil.disk_usage(folder).free
    if free < need:
        raise OSError(errno.ENOSPC, f"{what} needs {size_text(need)} but {size_text(free)} is "
                      "free", str(folder))


def free_room(path) -> tuple[int, int]:
    """Available memory, and free disk space where ``path`` is (or would be created), bytes."""
    import psutil

    p = Path(path).absolute()
    while not p.exists():
        p = p.parent
    return psutil.virtual_memory().available, shutil.disk_usage(p).free


def size_text(n: float) -> str:
    """A byte count for people: ``'1.5 GB'``."""
    for unit in ("B", "kB", "MB", "GB", "TB"):
        if abs(n) < 1000 or unit == "TB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1000
    raise AssertionError("unreachable")


def check_room(fp: Footprint, work: Path, *, workers=None, scheduler=None,
               finished: float = 0.0) -> None:
    """Refuse a run whose estimate does not fit in free memory or on the working folder's disk.

    ``finished`` is the fraction of batches already on disk (a resumed run needs that much less).

    Raises
    ------
    RunStateError
        With the estimated need and what is free.
    """
    memory, disk = free_room(work)
    need_mem = fp.memory(workers=workers, scheduler=scheduler)
    need_disk = int(fp.results + (fp.work - fp.results) * (1.0 - finished))
    short = []
    if need_mem > memory:
        short.append(f"about {size_text(need_mem)} of memory but {size_text(memory)} is "
                     "available")
    if need_disk > disk:
        short.append(f"about {size_text(need_disk)} of disk beside {work.parent} but "
                     f"{size_text(disk)} is free")
    if short:
        raise RunStateError(
            f"{work.parent}: this run needs {' and '.join(short)}. Fewer years, replicates, "
            "workers or output rasters, a larger [run] batch_size (fewer batch folders on "
            "disk), or another --out would help; pass --force to start anyway.")


def footprint_lines(scenario, model: Model, out_dir) -> list[str]:
    """The estimate and what is free now, for ``gridpop check``."""
    fp = footprint(scenario, model)
    memory, disk = free_room(out_dir)
    return [f"estimated peak memory: {size_text(fp.memory())} in-process; with --workers N, "
            f"{size_text(fp.base + fp.batch)} per worker plus "
            f"{size_text(fp.base + fp.combine)} for this process",
            f"estimated output: {size_text(fp.output)} (stacks counted uncompressed); working "
            f"space up to {size_text(fp.work)} beside the output folder",
            f"free now: {size_text(memory)} of memory, {size_text(disk)} of disk at "
            f"{Path(out_dir).absolute().parent}"]

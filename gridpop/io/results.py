"""Writing results: GeoTIFF time stacks, ledger tables, the run manifest, the output folder.

A run or a comparison writes everything (tables, stacks, summary, plots) into a working folder
beside the output folder (``.NAME.partial``), which holds a checkpoint (``checkpoint.json``)
while it is unfinished. When every file is whole, :func:`publish_complete` removes the
checkpoint, writes the manifest (``run.json`` or ``compare.json``, ``"complete": true``) and
renames the folder into place, in that order and as the last three steps: a folder under the
output name is always whole, and a kill at any moment leaves either that or a working folder to
resume.
"""

from __future__ import annotations

import contextlib
import csv
import json
import os
import shutil
from pathlib import Path

import numpy as np
import rasterio

from ..errors import OutputExistsError

NODATA = -9999.0

LEDGER_FIELDS = ("abundance", "births", "deaths", "disturbance_deaths", "emigrants",
                 "immigrants", "losses", "occupied_cells")
"""Columns of timeseries.csv and patches.csv after the replicate, year (and patch) columns."""


CHECKPOINT = "checkpoint.json"
"""Manifest of an unfinished run or comparison in its working folder; what ``--resume`` checks."""


def working_folder(out_dir: Path) -> Path:
    """The folder a run writes into before it is renamed to ``out_dir``."""
    return out_dir.parent / f".{out_dir.name}.partial"


def check_output(out_dir: Path, *, overwrite: bool) -> None:
    """Refuse an existing output folder unless overwriting."""
    if Path(out_dir).exists() and not overwrite:
        raise OutputExistsError(
            f"{out_dir}: output folder exists; choose another --out or pass --overwrite.")


def prepare_output(out_dir: Path, *, overwrite: bool, resume: bool = False) -> Path:
    """Check the output folder and return a clean working folder beside it."""
    out_dir = Path(out_dir)
    check_output(out_dir, overwrite=overwrite)
    work = working_folder(out_dir)
    if work.exists() and not resume:
        shutil.rmtree(work)
    work.mkdir(parents=True, exist_ok=True)
    return work


def keep_only(folder: Path, names) -> None:
    """Remove everything in ``folder`` but the entries named in ``names``."""
    for p in folder.iterdir():
        if p.name not in names:
            shutil.rmtree(p) if p.is_dir() and not p.is_symlink() else p.unlink()


def publish_complete(work: Path, out_dir: Path, manifest_name: str, manifest: dict) -> None:
    """The last three steps of a run or comparison whose files are all in ``work``: remove the
    checkpoint, write the manifest with ``"complete": true``, move the folder into place."""
    (work / CHECKPOINT).unlink(missing_ok=True)
    write_json(work / manifest_name, {**manifest, "complete": True})
    publish(work, out_dir)


def publish(work: Path, out_dir: Path) -> None:
    """Move the finished working folder into place (replacing an old result)."""
    if out_dir.exists():
        old = out_dir.parent / f".{out_dir.name}.old"
        if old.exists():
            shutil.rmtree(old)
        os.replace(out_dir, old)
        os.replace(work, out_dir)
        shutil.rmtree(old)
    else:
        os.replace(work, out_dir)


GDAL_CACHE_MB = 64
"""GDAL's block cache while a stack is written, MB. Its default (5 % of the machine's memory)
would fill with finished bands and make memory grow with the number of years."""


def stack_profile(grid, bands: int) -> dict:
    """Profile of a float32 GeoTIFF stack on the grid: tiled, DEFLATE with float predictor, one
    band after the other in the file (band interleaving), so that a stack written band by band
    streams to disk: with pixel interleaving every tile holds all bands and is recompressed and
    rewritten as each band arrives."""
    ny, nx = grid.shape
    profile = dict(driver="GTiff", width=nx, height=ny, count=bands, dtype="float32",
                   crs=grid.crs, transform=grid.transform, nodata=NODATA,
                   compress="deflate", predictor=3, zlevel=6, interleave="band")
    if nx >= 16 and ny >= 16:
        block = 256 if min(nx, ny) >= 256 else 16 * (min(nx, ny) // 16)
        profile.update(tiled=True, blockxsize=block, blockysize=block)
    return profile


def write_stack(path: Path, grid, mask: np.ndarray, bands, labels) -> None:
    """Write a multi-band GeoTIFF one band at a time.

    Parameters
    ----------
    bands : iterable of (ny, nx) arrays
        Produced lazily (e.g. rows of a memory-mapped accumulator), so a stack never has to sit
        whole in memory.
    labels : sequence of str
        Band descriptions, one per band (e.g. ``"year 3"``).
    """
    labels = list(labels)
    outside = ~mask
    with (rasterio.Env(GDAL_CACHEMAX=GDAL_CACHE_MB),
          rasterio.open(path, "w", **stack_profile(grid, len(labels))) as dst):
        for k, (band, label) in enumerate(zip(bands, labels, strict=True), start=1):
            data = np.asarray(band, dtype=np.float32).copy()
            data[outside] = NODATA
            data[~np.isfinite(data)] = NODATA
            dst.write(data, k)
            dst.set_band_description(k, label)


def write_patches(path: Path, grid, mask: np.ndarray, labels: np.ndarray) -> None:
    """Write the patch number of each cell (0 = in no patch) as an int32 GeoTIFF, nodata
    -9999 outside the study area: the key of ``patch`` in patches.csv and the other tables."""
    profile = {**stack_profile(grid, 1), "dtype": "int32", "predictor": 2}
    data = np.where(mask, labels, int(NODATA)).astype(np.int32)
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(data, 1)
        dst.set_band_description(1, "patch number (0 = no patch)")


def year_labels(years: int) -> list[str]:
    return [f"year {t}" for t in range(years + 1)]


def write_ledger_csv(path: Path, ledger: np.ndarray, *, first_replicate: int = 0,
                     patches: bool = False, integers: bool = True,
                     extra: tuple[str, ...] = ()) -> None:
    """Write ledger rows.

    ``ledger`` has shape (replicates, years+1, F) for the landscape or
    (replicates, years+1, P, F) for patches 1..P; F is :data:`LEDGER_FIELDS` and then the
    ``extra`` columns (``abundance_<stage>``, ``females``, ``males`` of a life history).
    """
    head = ["replicate", "year"] + (["patch"] if patches else []) + list(LEDGER_FIELDS) + list(
        extra)
    ledger = np.asarray(ledger, dtype=float)
    reps, years = ledger.shape[:2]
    index = [first_replicate + np.arange(reps), np.arange(years)]
    if patches:
        index.append(np.arange(1, ledger.shape[2] + 1))
    keys = np.stack(np.meshgrid(*index, indexing="ij"), axis=-1).reshape(-1, len(index))
    rows = np.hstack([keys, ledger.reshape(-1, ledger.shape[-1])])
    # one row's format, with the line end of the csv module's writer; rows are formatted a
    # block at a time by one % (C code) rather than value by value
    line = ",".join(["%d"] * len(index) + ["%d" if integers else "%.12g"] * ledger.shape[-1])
    line += "\r\n"
    with open(path, "w", newline="") as fh:
        fh.write(",".join(head) + "\r\n")
        for start in range(0, len(rows), CSV_BLOCK_ROWS):
            block = rows[start:start + CSV_BLOCK_ROWS]
            fh.write((line * len(block)) % tuple(block.ravel().tolist()))


CSV_BLOCK_ROWS = 4096
"""Rows of a ledger CSV formatted at once (bounded memory: a few MB of text)."""


EVENT_FIELDS = ("replicate", "year", "kind", "patches", "cells", "deaths")
"""Columns of events.csv: one row per fire or flood event."""


def write_events_csv(path: Path, events) -> None:
    """Write disturbance events: (replicate, year, kind, patch ids "1;4", cells, deaths)."""
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(EVENT_FIELDS)
        for rep, year, kind, patches, cells, deaths in events:
            w.writerow([rep, year, kind, patches, cells, f"{deaths:.12g}"])


@contextlib.contextmanager
def whole_file(path: Path):
    """Yield a temporary path beside ``path`` to write, and rename it to ``path`` when the block
    ends without error: a reader (or a kill) sees the old file or the new one, never part of
    it."""
    tmp = path.with_name(path.name + ".tmp")
    yield tmp
    os.replace(tmp, path)


def write_json(path: Path, data: dict) -> None:
    with whole_file(path) as tmp:
        tmp.write_text(json.dumps(data, indent=2, default=_jsonable) + "\n")


def _jsonable(obj):
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")

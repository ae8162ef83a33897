"""Ledger tables (timeseries.csv, patches.csv) against Python's csv module."""

from __future__ import annotations

import csv

import numpy as np
import pytest

from gridpop.io.results import CSV_BLOCK_ROWS, LEDGER_FIELDS, write_ledger_csv


def csv_module_rows(path, ledger, first, patches, integers, extra):
    """The same table written value by value with the csv module (Python's standard library:
    its writer's quoting and \\r\\n line ends), integers as int() and numbers as .12g."""
    fmt = (lambda v: str(int(v))) if integers else (lambda v: f"{v:.12g}")
    head = ["replicate", "year"] + (["patch"] if patches else []) + list(LEDGER_FIELDS) + extra
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(head)
        for r in range(ledger.shape[0]):
            for t in range(ledger.shape[1]):
                cells = ledger[r, t] if patches else ledger[r, t][None]
                for p, values in enumerate(cells):
                    w.writerow([first + r, t] + ([p + 1] if patches else [])
                               + [fmt(v) for v in values])


@pytest.mark.parametrize("patches", [False, True])
@pytest.mark.parametrize("integers", [True, False])
def test_ledger_csv_is_what_the_csv_module_writes(tmp_path, patches, integers):
    """Byte for byte the csv module's table (common practice: a reference implementation),
    over more rows than one formatting block, with -0.0, large, small and fractional values."""
    rng = np.random.default_rng(4)
    shape = (3, 2 * CSV_BLOCK_ROWS // 30 + 1) + ((5,) if patches else ()) + (
        len(LEDGER_FIELDS) + 2,)
    ledger = rng.normal(0.0, 1e4, shape)
    ledger.flat[::7] = -0.0
    ledger.flat[::13] = 1e20 if not integers else 7.0
    ledger.flat[::17] = 1 / 3
    if integers:
        ledger = np.rint(ledger)
    write_ledger_csv(tmp_path / "new.csv", ledger, first_replicate=4, patches=patches,
                     integers=integers, extra=("abundance_a", "abundance_b"))
    csv_module_rows(tmp_path / "ref.csv", ledger, 4, patches, integers,
                    ["abundance_a", "abundance_b"])
    assert (tmp_path / "new.csv").read_bytes() == (tmp_path / "ref.csv").read_bytes()
    empty = np.zeros((0, 3, len(LEDGER_FIELDS)))
    write_ledger_csv(tmp_path / "empty.csv", empty)
    csv_module_rows(tmp_path / "empty_ref.csv", empty, 0, False, True, [])
    assert (tmp_path / "empty.csv").read_bytes() == (tmp_path / "empty_ref.csv").read_bytes()

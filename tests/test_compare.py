"""Paired comparison of plans (`gridpop compare`) end to end on small rasters."""

from __future__ import annotations

import contextlib
import errno
import io
import json
import os

import numpy as np
import pytest
import rasterio
from conftest import same_results, write_raster
from scipy import stats
from test_summary import (
    EAST,
    TRANSFORM,
    WEST,
    box,
    ledger_array,
    read_rows,
    suitability,
    write_focus_areas,
)

from gridpop.analysis.metrics import unpaired_difference
from gridpop.cli import main
from gridpop.io.results import NODATA
from gridpop.simulation.cycle import BatchSink

BASE = """
[run]
years = 8
replicates = {replicates}
seed = {seed}

[habitat]
suitability = "{suitability}"
capacity_per_ha = 60.0
response = "threshold"
threshold = 0.3

[initial]
fraction_of_capacity = 0.5

[growth]
model = "ricker"
rate = 0.2
survival = 0.5
env_sd = 0.4

[dispersal]
fraction = 0.2
kernel = "exponential"
mean_distance_m = 60.0

[risk]
quasi_extinction = 70.0
focus_areas = "focus_areas.gpkg"
"""

RESERVE = """
[plan]
description = "reserve on the west block"

[[action]]
kind = "reserve"
area = "reserve.gpkg"
capacity_multiplier = {multiplier}
"""


def run_cli(*args):
    return main([str(a) for a in args])


def write_plans(tmp_path, plans, *, replicates=8, suit="suit.tif"):
    """Write the rasters and layers of the case and one scenario per (name, seed, multiplier,
    extra text); multiplier None is the base case without actions."""
    write_raster(tmp_path / "suit.tif", suitability(), transform=TRANSFORM)
    write_focus_areas(tmp_path / "focus_areas.gpkg", ["east"], [box(*EAST)])
    write_focus_areas(tmp_path / "reserve.gpkg", ["west"], [box(*WEST)])
    paths = []
    for name, seed, multiplier, extra in plans:
        body = BASE.format(replicates=replicates, seed=seed, suitability=suit) + extra
        if multiplier is not None:
            body += RESERVE.format(multiplier=multiplier)
        (tmp_path / f"{name}.toml").write_text(body)
        paths.append(tmp_path / f"{name}.toml")
    return paths


@pytest.fixture(scope="module")
def comparison(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("compare")
    paths = write_plans(tmp, [("base", 5, None, ""), ("reserve", 5, 2.0, ""),
                              ("same", 9, None, "")])
    out = tmp / "cmp"
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        code = run_cli("compare", *paths, "--out", out, "--no-plots")
    return tmp, paths, out, code, printed.getvalue()


def test_compare_writes_complete_folder_and_prints_pairing(comparison):
    """The compare folder: one complete run folder per plan, the table, the difference maps and
    a manifest with "complete": true; the printed table says that replicates are paired by
    common random numbers and that the seed of the third plan was replaced (common practice of
    simulation studies: Law and Kelton 2000, Simulation Modeling and Analysis, from memory)."""
    tmp, paths, out, code, printed = comparison
    assert code == 0
    manifest = json.loads((out / "compare.json").read_text())
    assert manifest["complete"] is True
    assert [p["name"] for p in manifest["plans"]] == ["base", "reserve", "same"]
    assert [p["scenario"] for p in manifest["plans"]] == [str(p) for p in paths]
    for p in manifest["plans"]:
        run = json.loads((out / p["folder"] / "run.json").read_text())
        assert run["complete"] is True and run["seed"] == 5
    assert set(manifest["files"]) == {"comparison.csv", "comparison.json",
                                      "occupancy_difference_reserve.tif",
                                      "occupancy_difference_same.tif"}
    assert not (tmp / ".cmp.partial").exists()
    assert "paired by common random numbers" in printed
    assert "same: [run] seed 9 replaced by 5" in printed
    assert "not distinguishable at 8 replicates: base, same" in printed
    data = json.loads((out / "comparison.json").read_text())
    assert "common random numbers" in data["paired"]
    assert data["not_distinguishable"] == [["base", "same"]]


def test_identical_plan_has_zero_difference_and_shares_the_rank(comparison):
    """A copy of the base plan (another seed in its file, replaced by the first plan's) gives
    the same replicates, so every paired difference is exactly 0, the McNemar test has no
    discordant pair (p = 1; McNemar 1947, Psychometrika 12:153) and the plans share a rank."""
    out = comparison[2]
    rows = {r["plan"]: r for r in read_rows(out / "comparison.csv")}
    same, base = rows["same"], rows["base"]
    for key in ("risk_difference", "expected_minimum_difference", "final_difference"):
        for suffix in ("", "_lo", "_hi"):
            assert float(same[key + suffix]) == 0.0
    assert float(same["risk_mcnemar_p"]) == 1.0
    assert same["distinguishable"] == "False" and same["rank"] == base["rank"]
    np.testing.assert_array_equal(ledger_array(out / "same" / "timeseries.csv"),
                                  ledger_array(out / "base" / "timeseries.csv"))
    with rasterio.open(out / "occupancy_difference_same.tif") as ds:
        diff = ds.read(1, masked=True)
    assert diff.count() > 0 and np.all(diff.compressed() == 0.0)


def test_reserve_difference_is_real_and_matches_the_replicates(comparison):
    """The reserve doubles the west block's capacity: the paired differences recomputed from the
    two plans' timeseries.csv (mean of b_i - a_i of the replicate minima and final abundances;
    McNemar's exact test on the discordant quasi-extinction pairs, scipy.stats.binomtest with
    p = 1/2, McNemar 1947) equal the table's, the interval of the difference in minimum
    abundance excludes 0 and the reserve ranks first."""
    out = comparison[2]
    rows = {r["plan"]: r for r in read_rows(out / "comparison.csv")}
    a = ledger_array(out / "base" / "timeseries.csv")
    b = ledger_array(out / "reserve" / "timeseries.csv")
    r = rows["reserve"]
    d_min = b.min(axis=1) - a.min(axis=1)
    assert float(r["expected_minimum_difference"]) == pytest.approx(d_min.mean(), rel=1e-9)
    assert float(r["final_difference"]) == pytest.approx((b[:, -1] - a[:, -1]).mean(), rel=1e-9)
    assert float(r["expected_minimum_difference_lo"]) > 0
    qa, qb = (a < 70.0).any(axis=1), (b < 70.0).any(axis=1)
    assert float(r["risk_difference"]) == pytest.approx(qb.mean() - qa.mean(), abs=1e-12)
    n_b, n_a = int(np.sum(qb & ~qa)), int(np.sum(qa & ~qb))
    p = stats.binomtest(n_b, n_a + n_b, 0.5).pvalue if n_a + n_b else 1.0
    assert float(r["risk_mcnemar_p"]) == pytest.approx(p, rel=1e-12)
    assert r["distinguishable"] == "True"
    assert int(r["rank"]) == 1 and int(rows["base"]["rank"]) == 2
    summary = json.loads((out / "reserve" / "summary.json").read_text())
    assert float(r["risk"]) == pytest.approx(summary["risk"]["ever_below"][-1], abs=1e-12)
    assert float(r["risk_hi"]) == pytest.approx(summary["risk"]["ever_below_hi"][-1], abs=1e-11)
    assert float(r["colonisation_east"]) == pytest.approx(
        summary["colonisation"]["east"]["probability"][-1], abs=1e-12)
    assert r["description"] == "reserve on the west block"


def test_difference_map_is_georeferenced_and_exact(comparison):
    """occupancy_difference_<plan>.tif is the last band of the plan's occupancy.tif minus the
    first plan's, on the template's grid (rasterio / GDAL round trip), nodata outside the
    study area."""
    out = comparison[2]
    with rasterio.open(out / "occupancy_difference_reserve.tif") as ds:
        assert ds.transform == TRANSFORM and ds.nodata == NODATA and ds.count == 1
        diff = ds.read(1, masked=True)
    bands = []
    for plan in ("reserve", "base"):
        with rasterio.open(out / plan / "occupancy.tif") as ds:
            bands.append(ds.read(ds.count, masked=True))
    expect = bands[0].astype(np.float64) - bands[1]
    np.testing.assert_array_equal(diff.mask, expect.mask)
    np.testing.assert_allclose(diff.compressed(), expect.compressed(), atol=1e-6)
    assert np.any(diff.compressed() != 0)


def test_common_random_numbers_shrink_the_variance_of_differences(tmp_path):
    """Common random numbers: Var(X - Y) = Var X + Var Y - 2 Cov(X, Y), so pairing replicate i
    of two nearly identical plans (capacity x 1.05 on one block) on the same random numbers
    makes the variance of the replicate differences in final abundance far smaller than
    between independent runs (another seed for the second plan) (Law and Kelton 2000,
    Simulation Modeling and Analysis, from memory). Asserted: ratio below 0.1; the paired
    interval in the table is accordingly narrower than the unpaired bootstrap interval."""
    paths = write_plans(tmp_path, [("base", 3, None, ""), ("tweak", 3, 1.05, ""),
                                   ("other", 1003, 1.05, "")], replicates=30)
    paired, unpaired = tmp_path / "paired", tmp_path / "unpaired"
    assert run_cli("compare", paths[0], paths[1], "--out", paired, "--no-plots",
                   "--quiet") == 0
    assert run_cli("run", paths[2], "--out", unpaired, "--no-plots", "--quiet") == 0
    a = ledger_array(paired / "base" / "timeseries.csv")[:, -1]
    b = ledger_array(paired / "tweak" / "timeseries.csv")[:, -1]
    c = ledger_array(unpaired / "timeseries.csv")[:, -1]
    ratio = np.var(b - a, ddof=1) / np.var(c - a, ddof=1)
    assert ratio < 0.1, ratio
    row = {r["plan"]: r for r in read_rows(paired / "comparison.csv")}["tweak"]
    width = float(row["final_difference_hi"]) - float(row["final_difference_lo"])
    u = unpaired_difference(a, c)
    assert width < 0.5 * (u["hi"] - u["lo"])


def test_different_grids_exit_2_naming_both_files(tmp_path, capsys):
    """Plans must share the grid: another origin of the suitability raster is refused before
    anything runs, with both scenario files named (common practice: fail before work)."""
    shifted = rasterio.transform.from_origin(500_030.0, 4_000_000.0, 30.0, 30.0)
    write_raster(tmp_path / "shifted.tif", suitability(), transform=shifted)
    base, other = write_plans(tmp_path, [("base", 5, None, ""), ("other", 5, None, "")])
    other.write_text(other.read_text().replace('"suit.tif"', '"shifted.tif"'))
    out = tmp_path / "cmp"
    assert run_cli("compare", base, other, "--out", out, "--no-plots") == 2
    err = capsys.readouterr().err
    assert "share the grid" in err and str(base) in err and str(other) in err
    assert "Traceback" not in err
    assert not out.exists() and not (tmp_path / ".cmp.partial").exists()


@pytest.mark.parametrize(
    "edit, expect",
    [
        ('focus_areas = "focus_areas.gpkg"',
         'focus_areas = "focus_areas.gpkg"\nfocus_name_field = "site"'),
        ("years = 8", "years = 9"),
    ],
)
def test_bad_second_plan_exit_2_nothing_written(tmp_path, capsys, edit, expect):
    """An unknown target attribute or another horizon in the second plan is refused before the
    first plan runs: exit 2, a message naming the file and key, no output folder."""
    base, other = write_plans(tmp_path, [("base", 5, None, ""), ("other", 5, None, "")])
    other.write_text(other.read_text().replace(edit, expect))
    out = tmp_path / "cmp"
    assert run_cli("compare", base, other, "--out", out, "--no-plots") == 2
    err = capsys.readouterr().err
    assert str(other) in err and "Traceback" not in err
    key = "focus_name_field = 'site'" if "site" in expect else "[run] years = 8 and 9"
    assert key in err
    assert not out.exists() and not (tmp_path / ".cmp.partial").exists()


def test_one_plan_is_not_a_comparison(tmp_path, capsys):
    (base,) = write_plans(tmp_path, [("base", 5, None, "")])
    assert run_cli("compare", base, "--out", tmp_path / "cmp", "--no-plots") == 2
    assert "at least two scenario files" in capsys.readouterr().err


def test_compare_resume_keeps_finished_plans_and_refuses_changes(tmp_path, monkeypatch, capsys):
    """A full disk (ENOSPC, POSIX "no space left on device") while the second plan saves its
    second batch: exit 2, nothing published, the first plan's run kept whole. ``--resume``
    refuses other plans, another order, another horizon or an edited scenario file (exit 2,
    naming what changed, leaving the interrupted comparison alone), and otherwise completes it
    without running the first plan again, with the same results as an uninterrupted one."""
    base, reserve = paths = write_plans(tmp_path, [("base", 5, None, ""), ("reserve", 5, 2.0, "")])
    for p in paths:
        p.write_text(p.read_text().replace("[run]\n", "[run]\nbatch_size = 2\n"))
    assert run_cli("compare", *paths, "--out", tmp_path / "whole", "--no-plots", "--quiet") == 0
    out, work = tmp_path / "c", tmp_path / ".c.partial"
    close, calls = BatchSink.close, []

    def full_at_sixth(self):  # 4 batches of 2 replicates per plan: the second plan's second
        calls.append(1)
        if len(calls) == 6:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return close(self)

    with monkeypatch.context() as m:
        m.setattr(BatchSink, "close", full_at_sixth)
        assert run_cli("compare", *paths, "--out", out, "--no-plots", "--quiet") == 2
    assert "no space left" in capsys.readouterr().err.lower()
    assert not out.exists() and json.loads((work / "base" / "run.json").read_text())["complete"]
    first = (work / "base" / "run.json").read_bytes()
    assert (work / ".reserve.partial" / "batches" / "00000" / "done").is_file()

    def refused(*args):
        assert run_cli("compare", *args, "--out", out, "--no-plots", "--quiet") == 2
        err = capsys.readouterr().err
        assert "Traceback" not in err
        return err

    assert "holds an interrupted comparison" in refused(*paths)
    assert "[run] years = 8 then, 9 now (base, reserve)" in refused(*paths, "--resume",
                                                                    "--years", "9")
    assert "the plans base, reserve then, reserve, base now" in refused(reserve, base, "--resume")
    other = tmp_path / "other.toml"
    other.write_text(base.read_text())
    assert "the plans base, reserve then, base, other now" in refused(base, other, "--resume")
    text = reserve.read_text()
    reserve.write_text(text.replace("capacity_multiplier = 2.0", "capacity_multiplier = 3.0"))
    err = refused(*paths, "--resume")
    assert f"{reserve}: the scenario file changed" in err
    assert "the [[action]] tables (reserve)" in err
    reserve.write_text(text)
    assert (work / "base" / "run.json").read_bytes() == first

    assert run_cli("compare", *paths, "--out", out, "--resume", "--no-plots", "--quiet") == 0
    assert (out / "base" / "run.json").read_bytes() == first  # kept, not run again
    assert json.loads((out / "reserve" / "run.json").read_text())["execution"][
        "resumed_batches"] == 1
    assert not work.exists() and json.loads((out / "compare.json").read_text())["complete"]
    same_results(tmp_path / "whole", out, figures=False)

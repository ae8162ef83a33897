"""End-to-end command-line tests on small rasters made by the tests."""

from __future__ import annotations

import json

import numpy as np
import pytest
import rasterio
from conftest import read_rows

from gridpop.cli import main

BASE = """
[run]
years = 5
replicates = 3
seed = 11

[habitat]
suitability = "{suitability}"
capacity_per_ha = 40.0
response = "threshold"
threshold = 0.3

[initial]
fraction_of_capacity = 0.5

[growth]
model = "beverton-holt"
rate = 0.5
survival = 0.5

[dispersal]
fraction = 0.2
kernel = "gaussian"
mean_distance_m = 60.0
"""


def run_cli(*args):
    return main([str(a) for a in args])


@pytest.mark.slow
def test_run_writes_aligned_stacks_and_complete_manifest(make_scenario, tmp_path, capsys):
    """GeoTIFF round trip through rasterio (GDAL): CRS and transform of every stack equal the
    template's, one band per year (Gillies et al., rasterio, reading back what GDAL wrote)."""
    scen = make_scenario(BASE)
    out = tmp_path / "res"
    assert run_cli("run", scen, "--out", out, "--quiet") == 0
    with rasterio.open(tmp_path / "suitability.tif") as src:
        crs, transform, shape = src.crs, src.transform, src.shape
        inside = src.read(1) != src.nodata
    for name in ("abundance.tif", "occupancy.tif", "colonised.tif"):
        with rasterio.open(out / name) as ds:
            assert ds.crs == crs
            assert ds.transform == transform
            assert ds.shape == shape
            assert ds.count == 6
            assert ds.dtypes[0] == "float32"
            assert ds.descriptions[0] == "year 0" and ds.descriptions[-1] == "year 5"
            assert ds.profile["compress"].lower() == "deflate"
            assert ds.profile["tiled"]
            band = ds.read(1)
            assert np.all(band[~inside] == ds.nodata)
            assert np.all(band[inside] != ds.nodata)
    manifest = json.loads((out / "run.json").read_text())
    assert manifest["complete"] is True
    assert manifest["replicates"] == 3 and manifest["years"] == 5 and manifest["seed"] == 11
    assert set(manifest["files"]) >= {"abundance.tif", "timeseries.csv", "patches.csv"}
    assert not (tmp_path / ".res.partial").exists()
    rows = read_rows(out / "timeseries.csv")
    assert len(rows) == 3 * 6
    assert set(rows[0]) >= {"replicate", "year", "abundance", "births", "deaths",
                            "emigrants", "immigrants", "losses", "occupied_cells"}


def test_mean_abundance_stack_matches_ledger(make_scenario, tmp_path):
    """Internal consistency: the sum of the mean-abundance band equals the mean of the ledger's
    total abundance for the same year."""
    out = tmp_path / "res"
    assert run_cli("run", make_scenario(BASE), "--out", out, "--quiet") == 0
    rows = read_rows(out / "timeseries.csv")
    with rasterio.open(out / "abundance.tif") as ds:
        for t in (1, 6):
            band = ds.read(t, masked=True)
            mean_ledger = np.mean([float(r["abundance"]) for r in rows
                                   if int(r["year"]) == t - 1])
            assert band.sum() == pytest.approx(mean_ledger, rel=1e-5)


def test_existing_output_refused_without_overwrite(make_scenario, tmp_path, capsys):
    scen = make_scenario(BASE)
    out = tmp_path / "res"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    assert run_cli("run", scen, "--out", out, "--quiet") == 2
    err = capsys.readouterr().err
    assert "--overwrite" in err and "Traceback" not in err
    assert (out / "keep.txt").read_text() == "mine"
    assert run_cli("run", scen, "--out", out, "--quiet", "--overwrite") == 0
    assert not (out / "keep.txt").exists()
    assert (out / "run.json").exists()


def test_overrides_years_replicates_seed(make_scenario, tmp_path):
    out = tmp_path / "res"
    assert run_cli("run", make_scenario(BASE), "--out", out, "--quiet", "--years", "2",
                   "--replicates", "2", "--seed", "5") == 0
    m = json.loads((out / "run.json").read_text())
    assert (m["years"], m["replicates"], m["seed"]) == (2, 2, 5)


def test_check_prints_what_was_understood(make_scenario, capsys):
    assert run_cli("check", make_scenario(BASE)) == 0
    text = capsys.readouterr().out
    assert "40 rows x 60 columns" in text
    assert "0.09 ha" in text
    assert "patches: 2" in text
    assert "beverton-holt" in text


def test_init_writes_template_that_parses(tmp_path, make_raster, capsys):
    from gridpop.config import load_scenario

    assert run_cli("init", tmp_path / "proj") == 0
    text = (tmp_path / "proj" / "scenario.toml").read_text()
    assert "[habitat]" in text and "capacity_per_ha" in text
    make_raster("proj/suitability.tif", np.full((10, 10), 0.5))
    scen = load_scenario(tmp_path / "proj" / "scenario.toml")
    assert scen.run.years == 50
    assert run_cli("init", tmp_path / "proj") == 2


def test_version(capsys):
    with pytest.raises(SystemExit) as exc:
        run_cli("--version")
    assert exc.value.code == 0
    assert capsys.readouterr().out.startswith("gridpop ")


@pytest.mark.parametrize(
    "edit, expect",
    [
        (("years = 5", "years = 0"), "years"),
        (("replicates = 3", "replicates = -1"), "replicates"),
        (("rate = 0.5", "rate = \"fast\""), "rate"),
        (("rate = 0.5", "rate = -0.2"), "rate"),
        (("rate = 0.5", "rate = nan"), "rate"),
        (("kernel = \"gaussian\"", "kernel = \"gausian\""), "did you mean 'gaussian'"),
        (("fraction = 0.2", "fracton = 0.2"), "did you mean 'fraction'"),
        (("capacity_per_ha = 40.0", "capacity_per_ha = -1.0"), "capacity_per_ha"),
        (("survival = 0.5", "survival = 1.5"), "survival"),
        (("model = \"beverton-holt\"", "model = \"logistic\""), "exponential"),
        (("mean_distance_m = 60.0", "mean_distance_m = 0.0"), "mean_distance_m"),
        (("mean_distance_m = 60.0", "mean_distance_m = 2.0"), "30"),
        (("mean_distance_m = 60.0", "mean_distance_m = 60.0\nmax_distance_m = 99000.0"),
         "max_distance_m"),
        (("suitability = \"{suitability}\"", "suitability = \"missing.tif\""), "not found"),
    ],
)
def test_bad_input_exit_2_nothing_written(make_scenario, tmp_path, capsys, edit, expect):
    scen = make_scenario(BASE.replace(*edit))
    out = tmp_path / "res"
    assert run_cli("run", scen, "--out", out, "--quiet") == 2
    err = capsys.readouterr().err
    assert expect in err
    assert "Traceback" not in err
    assert str(scen) in err or "scenario" in err
    assert not out.exists()
    assert not (tmp_path / ".res.partial").exists()


def test_run_ends_with_a_headline_matching_summary(make_scenario, tmp_path, capsys):
    """The last lines of run: the risk by the horizon with its interval and the final median
    abundance, the same numbers as summary.json."""
    out = tmp_path / "res"
    assert run_cli("run", make_scenario(BASE), "--out", out, "--no-plots",
                   "--replicates", "6") == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[-1] == f"results written to {out}"
    s = json.loads((out / "summary.json").read_text())
    r = s["risk"]
    median = s["final_abundance"]["p50"]
    median_text = f"{median:,.0f}" if median == round(median) else f"{median:,.1f}"
    assert lines[-2] == (
        f"risk of falling below 10 individuals by year 5: {r['ever_below'][5]:.3f} "
        f"[{r['ever_below_lo'][5]:.3f}, {r['ever_below_hi'][5]:.3f}] (95 % interval); "
        f"final median abundance {median_text}")
    finals = [float(x["abundance"]) for x in read_rows(out / "timeseries.csv")
              if x["year"] == "5"]
    assert median == float(np.median(finals))


def test_interrupted_run_says_how_to_resume(make_scenario, tmp_path, capsys, monkeypatch):
    import gridpop.simulation.run as run_module

    real = run_module.run_checkpointed_batch

    def stop_at_second(model, b, *args, **kwargs):
        if b == 1:
            raise KeyboardInterrupt
        return real(model, b, *args, **kwargs)

    scen = make_scenario(BASE.replace("seed = 11", "seed = 11\nbatch_size = 2"))
    out = tmp_path / "res"
    monkeypatch.setattr(run_module, "run_checkpointed_batch", stop_at_second)
    assert run_cli("run", scen, "--out", out, "--quiet", "--no-plots", "--replicates", "4",
                   "--seed", "3") == 130
    err = capsys.readouterr().err.strip().splitlines()[-1]
    partial = tmp_path / ".res.partial"
    assert err == (f"gridpop: interrupted; the finished work is kept in {partial}. "
                   f"`gridpop run {scen} --out {out} --replicates 4 --seed 3 --resume` "
                   "continues it.")
    monkeypatch.setattr(run_module, "run_checkpointed_batch", real)
    assert run_cli("run", scen, "--out", out, "--quiet", "--no-plots", "--replicates", "4",
                   "--seed", "3", "--resume") == 0
    assert json.loads((out / "run.json").read_text())["execution"]["resumed_batches"] == 1


def test_progress_bar_names_the_plan(make_scenario, tmp_path, capsys):
    from gridpop import load_scenario, run

    run(load_scenario(make_scenario(BASE, name="reserve_north.toml")), tmp_path / "res",
        progress=True)
    assert "gridpop run reserve_north" in capsys.readouterr().err


def test_patches_tif_joins_patches_csv(make_scenario, tmp_path):
    """patches.tif holds the patch numbers of patches.csv: the year-0 abundance of each patch in
    patches.csv (mean over replicates) is the sum of abundance.tif band 1 over its cells."""
    out = tmp_path / "res"
    assert run_cli("run", make_scenario(BASE), "--out", out, "--quiet", "--no-plots") == 0
    with rasterio.open(out / "patches.tif") as src:
        labels = src.read(1)
        assert src.dtypes[0] == "int32" and src.nodata == -9999
    with rasterio.open(out / "abundance.tif") as src:
        year0 = src.read(1, masked=True).filled(0.0).astype(np.float64)
    rows = [r for r in read_rows(out / "patches.csv") if r["year"] == "0"]
    patches = sorted({int(r["patch"]) for r in rows})
    assert patches == sorted(set(np.unique(labels)) - {0, -9999})
    for p in patches:
        mean = np.mean([float(r["abundance"]) for r in rows if int(r["patch"]) == p])
        assert year0[labels == p].sum() == pytest.approx(mean, rel=1e-6)
    assert "patches.tif" in json.loads((out / "run.json").read_text())["files"]


def test_interrupted_compare_says_how_to_resume(make_scenario, tmp_path, capsys, monkeypatch):
    import gridpop.simulation.run as run_module

    def stop(*args, **kwargs):
        raise KeyboardInterrupt

    a, b = make_scenario(BASE, name="a.toml"), make_scenario(BASE, name="b.toml")
    out = tmp_path / "cmp"
    monkeypatch.setattr(run_module, "run_checkpointed_batch", stop)
    assert run_cli("compare", a, b, "--out", out, "--quiet", "--no-plots", "--years", "3") == 130
    err = capsys.readouterr().err.strip().splitlines()[-1]
    partial = tmp_path / ".cmp.partial"
    assert err == (f"gridpop: interrupted; the finished work is kept in {partial}. "
                   f"`gridpop compare {a} {b} --out {out} --years 3 --resume` continues it.")

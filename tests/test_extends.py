"""``[plan] extends``: a plan file holds only what it adds to or changes in its base scenario."""

from __future__ import annotations

import dataclasses
import math
import textwrap

import geopandas as gpd
import pytest
from conftest import UTM, scenario_text
from shapely.geometry import box

from gridpop.cli import main
from gridpop.config import load_scenario, merged_toml
from gridpop.errors import ScenarioError
from gridpop.simulation.run import run

RESERVE = """
[[action]]
kind = "reserve"
area = "{area}"
capacity_multiplier = 1.5
"""

PLAN = """
[plan]
extends = "../base.toml"
description = "a reserve and a faster growth"

[growth]
rate = 0.8
"""


def same(a, b) -> bool:
    """Whether two scenarios are the same but for their file, hash and extends."""
    drop = {"path": None, "sha256": ""}
    return (dataclasses.replace(a, **drop, plan=dataclasses.replace(a.plan, extends=None))
            == dataclasses.replace(b, **drop, plan=dataclasses.replace(b.plan, extends=None)))


@pytest.fixture
def files(make_scenario, tmp_path):
    """base.toml (a fire regime) beside the suitability raster; a/plan.toml extending it with a
    reserve and a changed growth rate; b/plan.toml the same scenario written out in full."""
    gpd.GeoDataFrame(geometry=[box(500_150, 3_999_400, 500_750, 3_999_850)],
                     crs=UTM).to_file(tmp_path / "reserve.gpkg")
    base = make_scenario(scenario_text(years=6, replicates=4, fire=True), name="base.toml")
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    plan = tmp_path / "a" / "plan.toml"
    plan.write_text(PLAN + RESERVE.format(area="../reserve.gpkg"))
    full = base.read_text().replace('"suitability.tif"', '"../suitability.tif"')
    full = full.replace("rate = 0.6", "rate = 0.8")
    full += ('\n[plan]\ndescription = "a reserve and a faster growth"\n'
             + RESERVE.format(area="../reserve.gpkg"))
    (tmp_path / "b" / "plan.toml").write_text(full)
    return base, plan, tmp_path / "b" / "plan.toml"


def test_merged_scenario_equals_the_full_file(files):
    base, plan, full = files
    a, b = load_scenario(plan), load_scenario(full)
    assert same(a, b)
    assert a.plan.extends == base
    assert a.growth.rate == 0.8 and a.growth.model == "ricker"  # merged key by key
    assert [c.kind for c in a.disturbances] == ["fire"]
    assert [c.kind for c in a.actions] == ["reserve"]
    assert a.habitat.suitability == base.parent / "suitability.tif"  # relative to base.toml


def test_merged_scenario_gives_the_same_outputs_bit_for_bit(files, tmp_path):
    _, plan, full = files
    outs = []
    for path, name in ((plan, "from_extends"), (full, "from_full")):
        outs.append(run(load_scenario(path), tmp_path / name))
    names = sorted(p.name for p in outs[0].iterdir())
    assert names == sorted(p.name for p in outs[1].iterdir())
    assert {"summary.json", "abundance.tif", "timeseries.csv", "events.csv"} <= set(names)
    for name in names:
        if name != "run.json":  # the manifest holds the scenario file, its hash, the wall time
            assert (outs[0] / name).read_bytes() == (outs[1] / name).read_bytes(), name


def test_actions_and_disturbances_are_appended(files, tmp_path):
    _, plan, _ = files
    second = tmp_path / "a" / "second.toml"
    second.write_text(textwrap.dedent("""
        [plan]
        extends = "plan.toml"

        [[disturbance]]
        kind = "fire"
        return_interval_years = 10.0
        mortality = 0.2
        capacity_loss = 0.1
        recovery_years = 2.0
        """) + RESERVE.format(area="../reserve.gpkg"))
    s = load_scenario(second)
    assert [c.label for c in s.actions] == ["action #1 (reserve)", "action #2 (reserve)"]
    assert [c.return_interval_years for c in s.disturbances] == [4.0, 10.0]
    assert s.growth.rate == 0.8  # from plan.toml, which extends base.toml
    assert s.plan.extends == plan


def test_check_prints_the_merged_scenario_which_loads_the_same(files, capsys, tmp_path):
    _, plan, full = files
    assert main(["check", str(plan)]) == 0
    out = capsys.readouterr().out
    head = "extends base.toml: the merged scenario, as one file"
    assert head in out
    text = "\n".join(line[2:] for line in out.split(head)[1].splitlines()[1:])
    assert "extends" not in text and 'suitability = "../suitability.tif"' in text
    written = tmp_path / "a" / "merged.toml"
    written.write_text(text)
    assert same(load_scenario(written), load_scenario(full))
    assert merged_toml(plan) == text + "\n"


def test_hash_covers_the_base(files):
    base, plan, _ = files
    before = load_scenario(plan).sha256
    base.write_text(base.read_text().replace("seed = 3", "seed = 4"))
    after = load_scenario(plan)
    assert after.sha256 != before and after.run.seed == 4


def test_extends_errors_name_the_file_and_key(files, tmp_path, capsys):
    base, plan, _ = files
    missing = tmp_path / "a" / "missing.toml"
    missing.write_text('[plan]\nextends = "nowhere.toml"\n')
    with pytest.raises(ScenarioError, match=r"missing.toml: \[plan\] extends = 'nowhere.toml': "
                                            "file not found"):
        load_scenario(missing)
    base.write_text(base.read_text() + '\n[plan]\nextends = "a/plan.toml"\n')
    with pytest.raises(ScenarioError, match="a chain of extends must end"):
        load_scenario(plan)
    base.write_text(base.read_text().replace('extends = "a/plan.toml"', "")
                    .replace("rate = 0.6", "rate = -1.0"))
    assert main(["check", str(plan)]) == 2
    err = capsys.readouterr().err
    assert f"{base}: [growth] rate = -1.0 is not allowed" in err and "Traceback" not in err


def test_a_plan_extends_a_stage_structured_base(make_scenario, tmp_path):
    """A base with [stages] (whose [growth] has no rate) loads as the base of a plan: the plan
    gets the base's matrix and the growth rate ln(lambda) it implies (lambda of [[0, 1.2], [0.4,
    0.8]] is (0.8 + sqrt(0.64 + 1.92)) / 2 by the quadratic formula; common practice)."""
    text = scenario_text(years=3, replicates=2).replace("rate = 0.6\n", "").replace(
        "survival = 0.4\n", "") + ('\n[stages]\nnames = ["young", "adult"]\n'
                                   "transitions = [[0.0, 0.0], [0.4, 0.8]]\n"
                                   "fecundity = [[0.0, 1.2], [0.0, 0.0]]\n")
    make_scenario(text, name="base.toml")
    plan = tmp_path / "plan.toml"
    plan.write_text('[plan]\nextends = "base.toml"\ndescription = "the same life history"\n')
    s = load_scenario(plan)
    assert s.stages.names == ("young", "adult")
    assert s.growth.rate == pytest.approx(math.log((0.8 + math.sqrt(0.64 + 1.92)) / 2), rel=1e-12)

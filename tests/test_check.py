"""The text of gridpop check: the run-time estimate from a timed probe."""

from __future__ import annotations

import warnings

from conftest import scenario_text

import gridpop.simulation.check as check
from gridpop.config import load_scenario
from gridpop.landscape import build_landscape
from gridpop.simulation.model import build_model


class _Clock:
    """A stand-in for the time module: each perf_counter reading is ``step`` seconds after the
    one before."""

    def __init__(self, step):
        self.step, self.now = step, 0.0

    def perf_counter(self):
        self.now += self.step
        return self.now


def model_of(path):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        s = load_scenario(path)
        return build_model(s, build_landscape(s, stochastic=s.growth.stochastic))


def test_estimate_scales_the_probe_to_every_year_and_replicate(make_scenario, monkeypatch,
                                                                tmp_path):
    """The probe runs a first year, then more while less than PROBE_SECONDS (3 s) have passed:
    with a clock reading 0.5 s later at each look, the looks after years 1 to 6 come 0.5, 1,
    ..., 3 s after the start, so it runs 6 years, and the last reading gives 3.5 s; the
    estimate is 3.5 s / 6 years x 40 years x 6 replicates = 140 s = 2 min."""
    model = model_of(make_scenario(scenario_text(years=40, replicates=6, fire=True)))
    before = sorted(p.name for p in tmp_path.iterdir())
    monkeypatch.setattr(check, "time", _Clock(0.5))
    line = check.runtime_line(model)
    assert line.startswith("estimated run time: about 2 min in this process (a probe ran "
                           "6 years of replicate 0 in 3.5 s; x 40 years x 6 replicates")
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # nothing written here


def test_probe_runs_at_least_one_year_and_at_most_all(make_scenario, monkeypatch):
    model = model_of(make_scenario(scenario_text(years=2, replicates=50)))
    monkeypatch.setattr(check, "time", _Clock(0.1))  # fast: both years in 0.2 s
    line = check.runtime_line(model)
    assert "about 10 s" in line and "2 years of replicate 0 in 0.2 s" in line
    monkeypatch.setattr(check, "time", _Clock(10.0))  # slow: one year in 20 s
    line = check.runtime_line(model)
    assert "about 33 min" in line and "1 year of replicate 0 in 20 s" in line


def test_durations_read_as_a_planner_would():
    assert [check._duration(s) for s in (0.2, 42, 600, 7200)] == ["1 s", "42 s", "10 min",
                                                                  "2.0 h"]

"""The text of gridpop check: the run-time estimate from a timed probe."""

from __future__ import annotations

import warnings

from conftest import scenario_text

import gridpop.simulation.check as check
from gridpop.config import load_scenario
from gridpop.landscape import build_landscape
from gridpop.simulation.model import build_model


class _Clock:
    """A stand-in for the time module: perf_counter returns the given readings in turn."""

    def __init__(self, *readings):
        self.readings = list(readings)

    def perf_counter(self):
        return self.readings.pop(0)


def model_of(path):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        s = load_scenario(path)
        return build_model(s, build_landscape(s, stochastic=s.growth.stochastic))


def test_estimate_scales_the_probe_to_every_year_and_replicate(make_scenario, monkeypatch,
                                                                tmp_path):
    """The probe times PROBE_YEARS years of one replicate: the estimate is that time per
    year x years x replicates (3 years in 1.5 s -> 0.5 s a year x 40 years x 6 replicates =
    120 s = 2 min)."""
    model = model_of(make_scenario(scenario_text(years=40, replicates=6, fire=True)))
    before = sorted(p.name for p in tmp_path.iterdir())
    monkeypatch.setattr(check, "time", _Clock(100.0, 101.5))
    line = check.runtime_line(model)
    assert line.startswith("estimated run time: about 2 min in this process (a probe ran "
                           "3 years of replicate 0 in 1.5 s; x 40 years x 6 replicates")
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # nothing written here


def test_estimate_of_a_run_shorter_than_the_probe(make_scenario, monkeypatch):
    model = model_of(make_scenario(scenario_text(years=2, replicates=50)))
    monkeypatch.setattr(check, "time", _Clock(0.0, 0.4))
    line = check.runtime_line(model)
    assert "about 20 s" in line and "2 years of replicate 0 in 0.4 s" in line


def test_durations_read_as_a_planner_would():
    assert [check._duration(s) for s in (0.2, 42, 600, 7200)] == ["1 s", "42 s", "10 min",
                                                                  "2.0 h"]

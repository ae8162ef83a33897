"""Whole-simulator checks against published results (the engine through gridpop.run)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

import gridpop
from gridpop.analysis.metrics import quasi_extinction_diffusion

DENNIS = """
[run]
years = 100
replicates = 1200
seed = 2
batch_size = 400

[habitat]
suitability = "one.tif"
capacity_per_ha = 1e6

[initial]
raster = "start.tif"

[growth]
model = "exponential"
rate = 0.02
survival = 0.5
stochastic = false
env_sd = 0.2
env_correlation_m = 1e7

[risk]
quasi_extinction = 50.0

[output]
rasters = ["abundance"]
patches_csv = false
"""


@pytest.mark.slow
def test_quasi_extinction_matches_diffusion_approximation(make_raster, tmp_path):
    """Density-independent growth with environmental noise and no dispersal: ln N is a random
    walk with drift mu = r = 0.02 and sd sigma = 0.2 per year, N0 = 500, Nq = 50. The simulated
    probability of having fallen below Nq by t = 50 and t = 100 matches the diffusion
    approximation (Dennis, Munholland and Scott 1991, Ecological Monographs 61:115; Ginzburg et
    al. 1982, Risk Analysis 2:171) with the barrier moved out by 0.5826 sigma for a yearly
    census (Broadie, Glasserman and Kou 1997, Mathematical Finance 7:325, from memory; see
    ../shared/reference-checks.md section 4: 0.0223 and 0.0507 by annual-step Monte Carlo),
    within 4 binomial standard errors. Without the correction the continuous formula (0.0276,
    0.0597) overstates the yearly-census risk."""
    make_raster("one.tif", np.ones((2, 2)))
    start = np.zeros((2, 2))
    start[0, 0] = 500.0
    make_raster("start.tif", start, nodata=None)
    scen = tmp_path / "dennis.toml"
    scen.write_text(DENNIS)
    out = tmp_path / "r"
    gridpop.run(scen, out)
    risk = json.loads((out / "summary.json").read_text())["risk"]
    n = 1200
    for t in (50, 100):
        nq = 50.0 * math.exp(-0.5826 * 0.2)
        expected = float(quasi_extinction_diffusion(0.02, 0.2, 500.0, nq, t))
        got = risk["ever_below"][t]
        se = math.sqrt(expected * (1 - expected) / n)
        print(f"t={t}: simulated {got:.4f}, diffusion {expected:.4f}")
        assert abs(got - expected) < 4 * se, (t, got, expected)
        assert got > 0

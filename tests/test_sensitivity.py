"""gridpop sensitivity: the [uncertainty] section, the designs and analyses against published
values, the ranking of plans, and the command end to end (results, report, resume, Dask)."""

from __future__ import annotations

import math
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from conftest import read_rows

from gridpop.analysis.sensitivity import (
    draw_design,
    one_split,
    pairwise_ranking,
    prcc,
    sobol_indices,
)
from gridpop.cli import main
from gridpop.config import (
    ParameterRange,
    UncertaintyConfig,
    apply_parameters,
    load_scenario,
    load_study,
)
from gridpop.errors import ScenarioError

# A deterministic exponential model with no density dependence, no noise and no dispersal:
# N_T = N_0 exp(T r) in every cell, so log N_T = log N_0 + T r exactly.
EXPONENTIAL = """
[run]
years = {years}
replicates = 1
seed = 5

[habitat]
suitability = "{{suitability}}"
capacity_per_ha = 30.0
response = "threshold"
threshold = 0.3

[initial]
fraction_of_capacity = 0.5

[growth]
model = "exponential"
rate = 0.2
survival = 0.5
stochastic = false

[risk]
quasi_extinction = 5.0
"""

LOSS = """
[[action]]
kind = "habitat_loss"
area = "{suitability}"
target_suitability = 0.0
"""


def uncertainty(design, samples, **params) -> str:
    lines = [f'"{k.replace("__", ".")}" = {{{{ {d} = {list(a)} }}}}'
             for k, (d, a) in params.items()]
    return (f'\n[uncertainty]\nsamples = {samples}\ndesign = "{design}"\nseed = 11\n\n'
            "[uncertainty.parameters]\n" + "\n".join(lines) + "\n")


# ---------------------------------------------------------------- analyses against references

def test_ishigami_indices_through_the_sobol_path():
    """Ishigami function f = sin x1 + a sin^2 x2 + b x3^4 sin x1, x_i ~ U(-pi, pi), a = 7,
    b = 0.1 (Ishigami and Homma 1990): S1 = 0.3139, 0.4424, 0 and ST = 0.5576, 0.4424, 0.2437
    (analytic values, Saltelli et al. 2008, Global Sensitivity Analysis: The Primer, sec. 4.9).
    The design and the analysis are the ones gridpop sensitivity uses; each index must lie in
    its bootstrap interval."""
    params = tuple(ParameterRange(f"x{i}", "uniform", (-math.pi, math.pi)) for i in (1, 2, 3))
    design = draw_design(UncertaintyConfig(samples=2048, design="sobol", seed=2,
                                           parameters=params))
    x = design.values
    y = np.sin(x[:, 0]) + 7 * np.sin(x[:, 1]) ** 2 + 0.1 * x[:, 2] ** 4 * np.sin(x[:, 0])
    s = sobol_indices(design, y, seed=1)
    for name, exact in (("S1", (0.3139, 0.4424, 0.0)), ("ST", (0.5576, 0.4424, 0.2437))):
        for j in range(3):
            assert abs(s[name][j] - exact[j]) <= s[f"{name}_conf"][j], (name, j, s)


def test_prcc_ranks_the_inputs_of_a_monotone_function():
    """PRCC of y = 5 x1 + 2 x2^3 - x3 + 0 x4 + noise on a Latin hypercube (Marino et al. 2008,
    J. Theor. Biol. 254:178, sec. 2.3: PRCC measures monotone, not only linear, association):
    |PRCC| orders x1 > x2 > x3, the sign of x3 is negative, and the interval of the inert x4
    covers 0."""
    params = tuple(ParameterRange(f"x{i}", "uniform", (0.0, 1.0)) for i in range(4))
    design = draw_design(UncertaintyConfig(samples=300, seed=4, parameters=params))
    x = design.values
    y = 5 * x[:, 0] + 2 * x[:, 1] ** 3 - x[:, 2] + 0.1 * np.random.default_rng(0).normal(
        size=len(x))
    (e1, lo1, _), (e2, _, hi2), (e3, _, hi3), (e4, lo4, hi4) = prcc(x, y, seed=1)
    assert e1 > e2 > abs(e3) > abs(e4)
    assert lo1 > hi2  # the order is resolved by the intervals
    assert e3 < 0 and hi3 < 0
    assert lo4 < 0 < hi4


def test_designs_follow_the_distributions():
    """Inverse-CDF transforms through scipy.stats: a 1-D Latin hypercube puts exactly one point
    in each of n equal-probability strata (McKay, Beckman and Conover 1979), so its values are
    the distribution's quantiles stratum by stratum; Morris levels are the quantiles 1/8, 3/8,
    5/8, 7/8."""
    from scipy import stats

    p = ParameterRange("habitat.capacity_per_ha", "lognormal", (2.0, 0.3))
    d = draw_design(UncertaintyConfig(samples=50, seed=1, parameters=(p,)))
    u = np.sort(stats.lognorm(s=0.3, scale=2.0).cdf(d.values[:, 0]))
    assert np.all(np.floor(u * 50) == np.arange(50))
    t = ParameterRange("dispersal.mean_distance_m", "triangular", (200.0, 400.0, 900.0))
    m = draw_design(UncertaintyConfig(samples=6, design="morris", seed=1, parameters=(t, p)))
    q = stats.triang(c=200 / 700, loc=200, scale=700).cdf(m.values[:, 0])
    assert set(np.round(q, 9)) <= {0.125, 0.375, 0.625, 0.875}
    assert m.n == 6 * 3


def test_ranking_of_plans_whose_difference_does_not_depend_on_the_parameters():
    """When plan B's risk is plan A's plus a constant, A has the lower risk in every set: the
    fraction is 1 (and 0 the other way), the Wilson interval (Wilson 1927) reaches 1, and no
    one-split rule can predict a flip. With the same risk everywhere, the expected minimum
    decides; the same on both is a tie counted half."""
    params = (ParameterRange("growth.rate", "uniform", (0.1, 0.5)),
              ParameterRange("habitat.capacity_per_ha", "uniform", (10, 30)))
    d = draw_design(UncertaintyConfig(samples=40, seed=3, parameters=params))
    risk_a = 0.8 - d.values[:, 0]
    low = 100 * d.values[:, 1]
    ab, ba = pairwise_ranking(d, {"A": risk_a, "B": risk_a + 0.05}, {"A": low, "B": low})
    assert ab["first_better"] == 1.0 and ba["first_better"] == 0.0
    assert ab["first_better_hi"] == 1.0 and ab["first_better_lo"] > 0.9
    assert ab["flip_parameter"] is None and ab["ties"] == 0 and ab["same_risk"] == 0
    ab, _ = pairwise_ranking(d, {"A": risk_a, "B": risk_a}, {"A": low + 1, "B": low})
    assert ab["first_better"] == 1.0 and ab["same_risk"] == 40 and ab["ties"] == 0
    ab, _ = pairwise_ranking(d, {"A": risk_a, "B": risk_a}, {"A": low, "B": low})
    assert ab["first_better"] == 0.5 and ab["ties"] == 40
    assert (ab["first_better_lo"], ab["first_better_hi"]) == (0.0, 1.0)


def test_one_split_finds_the_threshold_where_the_ranking_flips():
    """A plan better exactly when growth.rate <= 0.3: the one-split rule names growth.rate with
    a threshold between the neighbouring sets around 0.3 and is right for every set (common
    practice: a depth-1 decision tree, Breiman et al. 1984, Classification and Regression
    Trees)."""
    rng = np.random.default_rng(1)
    x = rng.random((60, 3))
    x[:, 1] = np.linspace(0.1, 0.5, 60)
    score = (x[:, 1] <= 0.3).astype(float)
    rule = one_split(x, ("a", "growth.rate", "c"), score)
    below = x[:, 1][x[:, 1] <= 0.3].max()
    above = x[:, 1][x[:, 1] > 0.3].min()
    assert rule.parameter == "growth.rate" and below < rule.threshold < above
    assert rule.below == 1.0 and rule.above == 0.0 and rule.accuracy == 1.0
    assert one_split(x, ("a", "b", "c"), np.ones(60)) is None


# ---------------------------------------------------------------- the section and bad input

@pytest.mark.parametrize("params, message", [
    ({"growth__rat": ("uniform", (0.1, 0.3))}, r"'growth.rat' names no key.*no key 'rat'"),
    ({"run__years": ("uniform", (5, 9))}, r"'run.years'.*\[run\] keys cannot be uncertain"),
    ({"action__barrier__crossing_mortality": ("uniform", (0.5, 0.9))},
     r"'action.barrier.crossing_mortality' names no key.*no \[\[action\]\] of kind 'barrier'"),
    ({"action__3__target_suitability": ("uniform", (0.0, 0.1))},
     r"'action.3.target_suitability'.*1 \[\[action\]\] tables, no number 3"),
    ({"action__1__target_suitability": ("uniform", (0.0, 1.5))},
     r"'action.1.target_suitability' = uniform \[0.0, 1.5\] reaches values in \[0, 1.5\]"),
    ({"growth__survival": ("lognormal", (0.5, 0.2))},
     r"'growth.survival' = lognormal.*survival must be a number with 0 <= value <= 1"),
    ({"growth__rate": ("uniform", (0.5, 0.2))}, r"'growth.rate'.*expected \[low, high\]"),
    ({"growth__rate": ("triangular", (0.1, 0.2))}, r"expected \[min, mode, max\]"),
    ({"growth__rate": ("beta", (1, 2))}, r"distribution 'beta' is not known"),
    ({"dispersal__walk_length": ("uniform", (10, 20))}, r"only number keys"),
    ({"stages__transitions__adult__adult": ("uniform", (0.5, 0.9))},
     r"'stages.transitions.adult.adult' names no key.*has no \[stages\] section"),
])
def test_bad_parameters_exit_2_naming_the_key(make_scenario, params, message, capsys,
                                              tmp_path):
    """A parameter naming no key, a range outside the key's allowed values or a distribution
    with bad arguments: exit 2 before anything runs, the key named (common practice)."""
    path = make_scenario(EXPONENTIAL.format(years=3) + LOSS + uncertainty("latin-hypercube", 4,
                                                                          **params))
    with pytest.raises(ScenarioError, match=message):
        load_study([path])
    assert main(["sensitivity", str(path), "--out", str(tmp_path / "out"), "--quiet"]) == 2
    assert "gridpop: error:" in capsys.readouterr().err
    assert not (tmp_path / "out").exists() and not (tmp_path / ".out.partial").exists()


def test_section_checks(make_scenario):
    """Sobol needs a power of 2; [uncertainty] sections given twice must agree; a file holding
    only [uncertainty] is the design, not a plan (common practice)."""
    base = EXPONENTIAL.format(years=3)
    bad = make_scenario(base + uncertainty("sobol", 12, growth__rate=("uniform", (0.1, 0.3))),
                        "a.toml")
    with pytest.raises(ScenarioError, match=r"samples = 12: the sobol design needs a power"):
        load_study([bad])
    one = make_scenario(base + uncertainty("sobol", 8, growth__rate=("uniform", (0.1, 0.3))),
                        "b.toml")
    two = make_scenario(base + uncertainty("sobol", 16, growth__rate=("uniform", (0.1, 0.3))),
                        "c.toml")
    with pytest.raises(ScenarioError, match=r"the \[uncertainty\] sections differ"):
        load_study([one, two])
    design = make_scenario(uncertainty("morris", 4, growth__rate=("uniform", (0.1, 0.3))),
                           "design.toml")
    plain = make_scenario(base, "plan.toml")
    plans, u, file = load_study([design, plain])
    assert [s.path.name for s in plans] == ["plan.toml"] and u.design == "morris"
    assert file.name == "design.toml"


# ---------------------------------------------------------------- end to end

def test_small_run_writes_every_table_and_the_report(make_scenario, tmp_path):
    """Two plans, 4 Latin-hypercube sets, through the command line: every file of the contract,
    one results row per set and plan, and a report with the caveats. The plan that loses all
    habitat in year 0 has risk 1 in every set, the other (growing) plan 0, so the first has the
    lower risk in every set (fraction 1)."""
    body = EXPONENTIAL.format(years=3) + uncertainty(
        "latin-hypercube", 4, growth__rate=("uniform", (0.1, 0.3)),
        initial__fraction_of_capacity=("uniform", (0.3, 0.9)))
    keep = make_scenario(body, "keep.toml")
    lose = make_scenario(body + LOSS, "lose.toml")
    out = tmp_path / "sens"
    assert main(["sensitivity", str(keep), str(lose), "--out", str(out), "--quiet",
                 "--replicates", "2"]) == 0
    for name in ("samples.csv", "results.csv", "sensitivity.csv", "ranking.csv",
                 "sensitivity.json", "plots/tornado.png", "plots/risk_by_parameter.png",
                 "plots/ranking_matrix.png"):
        assert (out / name).is_file(), name
    results = read_rows(out / "results.csv")
    assert [(r["set"], r["plan"]) for r in results] == [
        (str(i), p) for i in range(4) for p in ("keep", "lose")]
    assert {r["risk"] for r in results if r["plan"] == "keep"} == {"0"}
    assert {r["risk"] for r in results if r["plan"] == "lose"} == {"1"}
    first = read_rows(out / "ranking.csv")[0]
    assert (first["first"], first["second"], first["first_better"]) == ("keep", "lose", "1")
    assert main(["report", str(out)]) == 0
    text = (out / "report.html").read_text()
    assert "Caveats" in text and "data:image/png;base64," in text
    assert "keep is better than lose in 100 %" in text


def _var_log_uniform(c: float, d: float) -> float:
    """Variance of log f for f ~ U(c, d), from E[log f] and E[(log f)^2] in closed form."""
    def m1(x):
        return x * math.log(x) - x

    def m2(x):
        return x * (math.log(x) ** 2 - 2 * math.log(x) + 2)

    mean = (m1(d) - m1(c)) / (d - c)
    return (m2(d) - m2(c)) / (d - c) - mean ** 2


@pytest.mark.slow
def test_sobol_indices_of_exponential_growth_match_the_closed_form(make_scenario, tmp_path):
    """Exponential growth without density dependence, noise or dispersal: log N_T = log N_0 +
    T r exactly, so with r ~ U(0.1, 0.5) and f = initial.fraction_of_capacity ~ U(0.2, 1)
    independent, S1 = ST = the variance share of each term: Var(T r) = T^2 (0.4)^2 / 12 and
    Var(log f) in closed form (Saltelli et al. 2008, Global Sensitivity Analysis: The Primer,
    ch. 4, additive models). The simulator runs every set; the indices of log(final median)
    from results.csv must lie within their bootstrap intervals."""
    years = 5
    body = EXPONENTIAL.format(years=years) + uncertainty(
        "sobol", 64, growth__rate=("uniform", (0.1, 0.5)),
        initial__fraction_of_capacity=("uniform", (0.2, 1.0)))
    path = make_scenario(body)
    out = tmp_path / "sobol"
    assert main(["sensitivity", str(path), "--out", str(out), "--quiet"]) == 0
    plans, u, _ = load_study([path])
    design = draw_design(u)
    samples = read_rows(out / "samples.csv")
    assert np.allclose([[float(r["growth.rate"]), float(r["initial.fraction_of_capacity"])]
                        for r in samples], design.values, rtol=1e-11)
    final = np.array([float(r["final_median"]) for r in read_rows(out / "results.csv")])
    r, f = design.values[:, 0], design.values[:, 1]
    # N_T = f K exp(T r): the ratio final / (f exp(T r)) is the same total K in every set
    ratio = final / (f * np.exp(years * r))
    assert np.allclose(ratio, ratio[0], rtol=1e-9)
    v_r, v_f = years ** 2 * 0.4 ** 2 / 12, _var_log_uniform(0.2, 1.0)
    exact = (v_r / (v_r + v_f), v_f / (v_r + v_f))
    s = sobol_indices(design, np.log(final), seed=u.seed)
    for name in ("S1", "ST"):
        for j in range(2):
            assert abs(s[name][j] - exact[j]) <= s[f"{name}_conf"][j], (name, j, s, exact)
    rows = [x for x in read_rows(out / "sensitivity.csv") if x["output"] == "final_median"]
    assert {x["index"] for x in rows} == {"S1", "ST"}


def _cli(*args) -> list[str]:
    return [sys.executable, "-m", "gridpop.cli", "sensitivity", *map(str, args), "--quiet"]


@pytest.mark.slow
def test_killed_run_resumes_on_dask_to_identical_outputs(make_scenario, tmp_path):
    """A run killed after some parameter sets resumes (--resume, here on 2 Dask workers) to
    the same tables as an uninterrupted in-process run: each set's results are checkpointed
    and sets share the run seed (common practice for reproducible simulation)."""
    from conftest import scenario_text

    body = scenario_text(years=4, replicates=2) + uncertainty(
        "latin-hypercube", 24, growth__rate=("uniform", (0.3, 0.8)),
        dispersal__mean_distance_m=("triangular", (40, 90, 150)))
    a = make_scenario(body, "a.toml")
    b = make_scenario(body.replace("fraction = 0.3", "fraction = 0.1"), "b.toml")
    ref = tmp_path / "ref"
    subprocess.run(_cli(a, b, "--out", ref), check=True, timeout=900)
    out = tmp_path / "out"
    proc = subprocess.Popen(_cli(a, b, "--out", out))
    sets = tmp_path / ".out.partial" / "sets"
    deadline = time.time() + 600
    while time.time() < deadline and not list(sets.glob("000*.json")):
        time.sleep(0.01)
    proc.kill()  # after the first finished set: most of the 24 are still to run
    proc.wait()
    assert not out.exists() and 1 <= len(list(sets.glob("000*.json"))) < 24
    again = subprocess.run(_cli(a, b, "--out", out), capture_output=True, text=True)
    assert again.returncode == 2 and "--resume" in again.stderr
    subprocess.run(_cli(a, b, "--out", out, "--resume", "--workers", "2"), check=True,
                   timeout=900)
    for name in ("samples.csv", "results.csv", "sensitivity.csv", "ranking.csv"):
        assert (out / name).read_bytes() == (ref / name).read_bytes(), name
    assert not Path(tmp_path / ".out.partial").exists()


STAGED = EXPONENTIAL.replace("rate = 0.2\nsurvival = 0.5\n", "") + (
    "\n[stages]\nnames = [\"young\", \"adult\"]\n"
    "transitions = [[0.0, 0.0], [0.4, 0.8]]\nfecundity = [[0.0, 1.2], [0.0, 0.0]]\n")

LESLIE = STAGED.replace('names = ["young", "adult"]\n', "").replace(
    "transitions = [[0.0, 0.0], [0.4, 0.8]]\nfecundity = [[0.0, 1.2], [0.0, 0.0]]\n",
    "ages = 4\nweibull_shape = 1.0\nmean_lifespan_years = 3.0\n"
    "fecundity_by_age = [0.0, 0.8, 1.2, 1.2]\n")

MOVING = STAGED + "dispersal_fraction = [0.3, 0.0]\n\n[dispersal]\nmean_distance_m = 60.0\n"


def test_growth_rate_of_a_stage_matrix_cannot_be_uncertain(make_scenario):
    """With [stages], the matrix sets [growth] rate and survival: a range on either is refused
    naming the key, rather than silently replaced by the matrix's lambda (common practice:
    refuse what cannot be meant)."""
    path = make_scenario(STAGED.format(years=3) + uncertainty(
        "latin-hypercube", 4, growth__rate=("uniform", (0.1, 0.3))))
    with pytest.raises(ScenarioError, match=r"'growth.rate'.*set by the plan's \[stages\]"):
        load_study([path])


@pytest.mark.parametrize("text, params, message", [
    (STAGED, {"stages__transitions__young__young": ("uniform", (0.5, 0.7))},
     r"'stages.transitions.young.young' = uniform \[0.5, 0.7\]: at 0.7, the plan fails.*"
     r"\[stages\] transitions"),  # the column of young sums to 0.4 + 0.7 > 1
    (STAGED, {"stages__transitions__adult__adult": ("uniform", (0.5, 1.2))},
     r"transitions\[adult\]\[adult\] must be a number with 0 <= value <= 1"),
    (STAGED, {"stages__fecundity__calf__adult": ("uniform", (0.5, 1.2))},
     r"'calf' is not a stage; the stages are young, adult"),
    (STAGED, {"stages__weibull_shape": ("uniform", (0.5, 1.2))},
     r"weibull_shape needs an age-structured plan"),
    (LESLIE, {"stages__fecundity__age0__age2": ("uniform", (0.5, 1.2))},
     r"built from its ages; make stages.weibull_shape"),
    (STAGED, {"stages__dispersal_fraction__young": ("uniform", (0.1, 0.2))},
     r"no \[stages\] dispersal_fraction"),
    (MOVING, {"stages__dispersal_fraction__young": ("uniform", (0.1, 1.2))},
     r"dispersal_fraction\[young\] must be a number with 0 <= value <= 1"),
    (STAGED, {"stages__fecundity__young": ("uniform", (0.5, 1.2))},
     r'expected "stages.transitions.TO.FROM"'),
])
def test_bad_stage_parameters_are_refused(make_scenario, text, params, message):
    """Stage parameters name a matrix entry by stage names (or a Weibull key of an age model);
    an entry whose range would break the matrix's own checks is refused before anything runs,
    naming the parameter (common practice: refuse what cannot be meant)."""
    path = make_scenario(text.format(years=3) + uncertainty("latin-hypercube", 4, **params))
    with pytest.raises(ScenarioError, match=message):
        load_study([path])


def test_uncertain_fecundity_grows_the_population_by_the_matrix_lambda(make_scenario, tmp_path):
    """No density dependence, no noise, no dispersal, started at the stable stage distribution:
    every stage grows by the dominant eigenvalue lambda of T + F each year, so N_T = N_0
    lambda^T (Caswell 2001, Matrix Population Models, ch. 4). With the adults' fecundity
    uncertain, results.csv's final totals divided by lambda(F)^T, lambda from numpy's
    eigenvalues of each set's matrix, are the same N_0 in every set. An age-structured plan
    with an uncertain mean lifespan b gets the survival exp(-1/b) on its sub-diagonal
    (Weibull shape 1: Pinder, Wiener and Smith 1978, Ecology 59:175)."""
    years = 4
    path = make_scenario(STAGED.format(years=years) + uncertainty(
        "latin-hypercube", 4, stages__fecundity__young__adult=("uniform", (0.6, 2.0))))
    out = tmp_path / "sens"
    assert main(["sensitivity", str(path), "--out", str(out), "--quiet"]) == 0
    fec = np.array([float(r["stages.fecundity.young.adult"])
                    for r in read_rows(out / "samples.csv")])
    lam = np.array([max(abs(np.linalg.eigvals([[0.0, f], [0.4, 0.8]]))) for f in fec])
    final = np.array([float(r["final_median"]) for r in read_rows(out / "results.csv")])
    ratio = final / lam ** years
    assert np.ptp(fec) > 0.5 and np.allclose(ratio, ratio[0], rtol=1e-9)
    plans, _, _ = load_study([make_scenario(LESLIE.format(years=years) + uncertainty(
        "latin-hypercube", 4, stages__mean_lifespan_years=("uniform", (2.0, 5.0))), "age.toml")])
    aged = apply_parameters(plans[0], {"stages.mean_lifespan_years": 5.0})
    moving = load_scenario(make_scenario(MOVING.format(years=years), "moving.toml"))
    assert apply_parameters(moving, {"stages.dispersal_fraction.young": 0.6}).stages \
        .dispersal_fraction == (0.6, 0.0)
    np.testing.assert_allclose(np.diag(np.array(aged.stages.transitions), -1),
                               math.exp(-1 / 5.0), rtol=1e-12)


@pytest.mark.slow
def test_a_plans_warning_is_said_once_not_once_per_set(make_scenario, tmp_path):
    """A plan whose cells hold few individuals is warned about once, in gridpop's one-line form,
    before the sets run: not again by each Dask worker that runs its sets (common practice:
    say a thing once)."""
    path = make_scenario(EXPONENTIAL.format(years=2).replace("stochastic = false",
                                                             "stochastic = true")
                         + uncertainty("latin-hypercube", 4,
                                       growth__rate=("uniform", (0.1, 0.3))))
    done = subprocess.run(_cli(path, "--out", tmp_path / "out", "--replicates", "2",
                               "--workers", "2"), capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    lines = [x for x in done.stderr.splitlines() if "arning" in x]
    assert len(lines) == 1 and lines[0].startswith("gridpop: warning: "), lines
    assert "capacity_per_ha" in lines[0]

"""Stage- and age-structured demography: the row kernel against eigen-analysis, closed forms and
scipy.stats; the scenario keys; whole runs against the stage-free model and the ledger."""

from __future__ import annotations

import csv
import math
import re

import numpy as np
import pytest
import rasterio
import scipy.stats
from conftest import scenario_text

import gridpop
from gridpop import rng
from gridpop.cli import main
from gridpop.config import load_scenario
from gridpop.demography import MODEL_CODES
from gridpop.errors import ScenarioError
from gridpop.movement import NO_RETENTION
from gridpop.simulation.cycle import grow_pass
from gridpop.simulation.model import Emigration, GrowthRates
from gridpop.stages import equilibrium_factor, stage_rates, stage_row

# Invented three-stage life history (juvenile, subadult, adult).
T3 = np.array([[0.0, 0.0, 0.0], [0.35, 0.0, 0.0], [0.0, 0.55, 0.82]])
F3 = np.array([[0.0, 0.9, 2.1], [0.0, 0.0, 0.0], [0.0, 0.0, 0.0]])
# /work/shared/reference-checks.md section 8 (invented Leslie example, Caswell 2001 formulas).
T_LESLIE = np.array([[0.0, 0.0, 0.0], [0.5, 0.0, 0.0], [0.0, 0.4, 0.0]])
F_LESLIE = np.array([[0.0, 1.5, 2.0], [0.0, 0.0, 0.0], [0.0, 0.0, 0.0]])


def project(st, n, *, k=1e300, model="exponential", years=1, stochastic=False, env=0.0,
            allee=0.0, seed=1):
    """Run the growth row kernel on one cell for some years; the counts per class each year."""
    n = np.asarray(n, np.float64).reshape(-1, 1).copy()
    out, births, deaths, dens = np.empty_like(n), np.empty(1), np.empty(1), np.empty(1)
    history = []
    for year in range(years):
        keys = np.array([rng.year_key(seed, 0, year, s) for s in
                         (rng.STREAM_SURVIVAL, rng.STREAM_BIRTHS, rng.STREAM_TRANSITION,
                          rng.STREAM_SEX)], np.uint64)
        stage_row(n, np.array([float(k)]), np.array([env]), out, births, deaths, dens,
                  MODEL_CODES[model], 1.0, allee, st, stochastic, keys, 0, 1)
        history.append((out[:, 0].copy(), births[0], deaths[0]))
        n[:] = out
    return history


def rates(t=T3, f=F3, **kw):
    kw.setdefault("model", "exponential")
    kw.setdefault("acts_on", "fecundity")
    kw.setdefault("density_stages", [True] * len(t))
    return stage_rates(t, f, **kw)


def test_projection_converges_to_dominant_eigenvector():
    """Without crowding, the one-cell projection grows by lambda with the stable stage
    distribution: the dominant eigenvalue and right eigenvector from numpy.linalg.eig (strong
    ergodic theorem, Caswell 2001, Matrix Population Models, ch. 4), and the published values
    of the invented Leslie example in reference-checks.md section 8 (lambda 1.0615173516, stable
    distribution 0.6066067, 0.2857262, 0.1076671)."""
    for t, f in ((T3, F3), (T_LESLIE, F_LESLIE)):
        hist = project(rates(t, f), [100.0, 0.0, 0.0], years=300)
        vals, vecs = np.linalg.eig(t + f)
        i = np.argmax(vals.real)
        w = np.abs(vecs[:, i].real) / np.abs(vecs[:, i].real).sum()
        last, prev = hist[-1][0], hist[-2][0]
        assert last.sum() / prev.sum() == pytest.approx(vals[i].real, rel=1e-9)
        np.testing.assert_allclose(last / last.sum(), w, rtol=1e-8)
    assert last.sum() / prev.sum() == pytest.approx(1.0615173516, abs=1e-9)
    np.testing.assert_allclose(last / last.sum(), [0.6066067, 0.2857262, 0.1076671], atol=1e-7)


def test_births_and_deaths_are_the_matrix_flows():
    """One deterministic year: births = F n, survivors = T n, deaths = n - survivors (the
    projection A n = T n + F n, Caswell 2001, ch. 2)."""
    n = np.array([10.0, 20.0, 30.0])
    (out, births, deaths), = project(rates(), n)
    np.testing.assert_allclose(out, (T3 + F3) @ n, rtol=1e-14)
    assert births == pytest.approx((F3 @ n).sum(), rel=1e-14)
    assert deaths == pytest.approx(n.sum() - (T3 @ n).sum(), rel=1e-14)


@pytest.mark.parametrize("model", ["beverton-holt", "ricker"])
@pytest.mark.parametrize("acts_on", ["fecundity", "survival", "all"])
def test_density_stage_total_settles_at_capacity(model, acts_on):
    """An isolated noise-free cell: the total of the density stages settles at K (at an
    equilibrium the matrix has dominant eigenvalue 1 by Perron-Frobenius, so the crowding factor
    equals c* and, c being strictly decreasing, D = K; closed-form derivation in
    gridpop.stages). c* itself: 1/R0 for fecundity (lambda = 1 iff R0 = 1, Caswell 2001,
    sec. 5.3.4), 1/lambda for all, checked with numpy eigenvalues."""
    density = [False, True, True]
    st = rates(model=model, acts_on=acts_on, density_stages=density)
    c = st.c_star
    scaled = {"fecundity": T3 + c * F3, "survival": c * T3 + F3, "all": c * (T3 + F3)}[acts_on]
    assert np.max(np.abs(np.linalg.eigvals(scaled))) == pytest.approx(1.0, abs=1e-9)
    last = project(st, [5.0, 5.0, 5.0], k=50.0, model=model, years=400)[-1][0]
    assert last[1] + last[2] == pytest.approx(50.0, rel=1e-6)


def test_environment_is_lognormal_on_fecundity_and_logit_normal_on_survival():
    """A deviation e multiplies fecundity by exp(e) and shifts survival by e on the logit scale
    (logit-normal survival, common practice: the scales on which rates stay in bounds), with the
    stage shares of the survivors unchanged."""
    n = np.array([10.0, 20.0, 30.0])
    e = 0.4
    (out, births, deaths), = project(rates(), n, env=e)
    assert births == pytest.approx((F3 @ n).sum() * math.exp(e), rel=1e-13)
    s = T3.sum(axis=0)
    logit = np.log(s / (1 - s)) + e
    s_e = 1 / (1 + np.exp(-logit))
    survivors = T3 / s * s_e
    np.testing.assert_allclose(out, survivors @ n + F3 @ n * math.exp(e), rtol=1e-13)
    assert deaths == pytest.approx(n.sum() - (survivors @ n).sum(), rel=1e-13)


def test_crowding_cannot_act_on_rates_that_alone_keep_lambda_above_one():
    """Survival alone with lambda >= 1 cannot be held at K by fecundity (R0 undefined), and the
    reverse (Caswell 2001, sec. 5.3.4)."""
    with pytest.raises(ValueError, match="density_acts_on"):
        equilibrium_factor(np.array([[1.0]]), np.array([[0.5]]), "fecundity")
    with pytest.raises(ValueError, match="density_acts_on"):
        equilibrium_factor(np.array([[0.5]]), np.array([[1.5]]), "survival")


def two_sex(system, harem=1.0, fraction=0.5):
    return rates(sexes=2, system=system, harem=harem, female_fraction=fraction)


def test_two_sex_at_birth_ratio_with_mates_in_excess_is_the_one_sex_model():
    """At a 1:1 sex ratio, monogamy (2FM/(F+M) = F) and polygyny with mates in excess
    (min(F, hM) = F) give the births of the one-sex model, and then its whole trajectory (the
    female-dominant model, Caswell and Weeks 1986, American Naturalist 128:707)."""
    n = np.array([10.0, 20.0, 30.0])
    one = project(rates(), n, years=5)
    for st in (two_sex("monogamous"), two_sex("polygynous", harem=4.0)):
        both = project(st, np.concatenate([n / 2, n / 2]), years=5)
        for (a, b_one, d_one), (b, b_two, d_two) in zip(one, both, strict=True):
            assert b_two == pytest.approx(b_one, rel=1e-12)
            assert d_two == pytest.approx(d_one, rel=1e-12)
            np.testing.assert_allclose(b[:3] + b[3:], a, rtol=1e-12)
            np.testing.assert_allclose(b[:3], b[3:], rtol=1e-12)


@pytest.mark.parametrize("fraction", [0.5, 0.4])
def test_two_sex_mating_functions_with_a_skewed_ratio(fraction):
    """30 breeding females and 10 males: monogamous births come from the harmonic mean
    2FM/(F+M) = 15 pairs (Caswell and Weeks 1986, American Naturalist 128:707); polygynous
    births from min(F, h M) (Caswell 2001, ch. 17, from memory), here 20 with h = 2 and 30 with
    h = 4; a female of stage j has F[i, j] / p_f offspring per mating."""
    fem = np.array([0.0, 0.0, 30.0])
    male = np.array([0.0, 0.0, 10.0])
    per_female = F3[0, 2] / fraction
    for st, mates in ((two_sex("monogamous", fraction=fraction), 2 * 30 * 10 / 40),
                      (two_sex("polygynous", 2.0, fraction), 20.0),
                      (two_sex("polygynous", 4.0, fraction), 30.0)):
        (out, births, _), = project(st, np.concatenate([fem, male]))
        assert births == pytest.approx(per_female * mates, rel=1e-12)
        assert out[0] == pytest.approx(births * fraction, rel=1e-12)
        assert out[3] == pytest.approx(births * (1 - fraction), rel=1e-12)


def test_stochastic_transitions_have_the_multinomial_moments():
    """1000 subadults: stay, grow to adult or die with the column of T; over 3000 independent
    years the counts have the mean and covariance of scipy.stats.multinomial (binomial survival
    then conditional binomial transitions), and births from 200 adults the mean and variance of
    scipy.stats.poisson. Tolerance about 4 standard errors."""
    t = np.array([[0.0, 0.0, 0.0], [0.35, 0.3, 0.0], [0.0, 0.5, 0.8]])
    f = np.array([[0.0, 0.0, 1.5], [0.0, 0.0, 0.0], [0.0, 0.0, 0.0]])
    st = rates(t, f)
    draws, births = [], []
    for seed in range(3000):
        (out, _, _), = project(st, [0.0, 1000.0, 0.0], stochastic=True, seed=seed)
        draws.append(out)
        births.append(project(st, [0.0, 0.0, 200.0], stochastic=True, seed=seed)[0][1])
    draws = np.array(draws)[:, 1:]
    ref = scipy.stats.multinomial(1000, [0.3, 0.5, 0.2])
    mean, cov = ref.mean()[:2], ref.cov()[:2, :2]
    se = np.sqrt(np.diag(cov) / len(draws))
    assert np.all(np.abs(draws.mean(axis=0) - mean) < 4 * se)
    got_cov = np.cov(draws.T)
    np.testing.assert_allclose(np.diag(got_cov), np.diag(cov), rtol=4 * math.sqrt(2 / 3000))
    assert got_cov[0, 1] == pytest.approx(cov[0, 1], rel=0.15)
    assert np.all(draws == np.rint(draws))
    pois = scipy.stats.poisson(300.0)
    assert np.mean(births) == pytest.approx(pois.mean(), abs=4 * pois.std() / math.sqrt(3000))
    assert np.var(births) == pytest.approx(pois.var(), rel=4 * math.sqrt(2 / 3000))


def test_only_dispersing_stages_leave():
    """The growth pass: a stage with dispersal fraction 0 has no emigrants; a dispersing one
    loses its fraction of the grown stage (expected values, common practice)."""
    ny, nx = 6, 7
    labels = np.ones((ny, nx), np.int32)
    n = np.full((3, ny, nx), 10.0)
    k = np.full((ny, nx), 1e9)
    out, leaving = np.empty_like(n), np.empty_like(n)
    keys = np.zeros(5, np.uint64)
    growth = GrowthRates(MODEL_CODES["exponential"], 0.0, 0.5, 1.0, 0.0, False)
    grow_pass(labels, 1, n, k, np.zeros((1, 1)), out, leaving, growth, rates(),
              np.array([0.0, 0.6, 0.0]), Emigration(0.6, 0.0), keys, NO_RETENTION)
    grown = (T3 + F3) @ np.full(3, 10.0)
    assert np.all(leaving[0] == 0) and np.all(leaving[2] == 0)
    np.testing.assert_allclose(leaving[1], 0.6 * grown[1], rtol=1e-14)
    np.testing.assert_allclose(out[1], 0.4 * grown[1], rtol=1e-14)


STAGES = """
[stages]
names = ["juvenile", "subadult", "adult"]
transitions = [[0.0, 0.0, 0.0], [0.35, 0.0, 0.0], [0.0, 0.55, 0.82]]
fecundity = [[0.0, 0.9, 2.1], [0.0, 0.0, 0.0], [0.0, 0.0, 0.0]]
density_stages = ["subadult", "adult"]
abundance_stages = ["subadult", "adult"]
"""


def stage_text(stochastic=True, extra="", dispersal="dispersal_fraction = [0.0, 0.6, 0.05]"):
    text = scenario_text(stochastic=stochastic).replace("rate = 0.6\n", "").replace(
        "survival = 0.4\n", "").replace("fraction = 0.3\n", "")
    return text + STAGES + dispersal + "\n" + extra


def test_stage_keys_are_checked(make_scenario):
    """Bad [stages] input is refused naming the key: non-square, a column of transitions above 1,
    negative entries, unknown stage names, lists of the wrong length, lambda = 0, [growth] rate
    given; the CLI exits 2 (common practice for usage errors)."""
    good = stage_text()
    cases = [
        (good.replace("[0.0, 0.55, 0.82]]", "[0.0, 0.55]]"), "[stages] transitions"),
        (good.replace("0.55, 0.82", "0.55, 1.2"), "[stages] transitions"),
        (good.replace("0.9, 2.1", "-0.9, 2.1"), "[stages] fecundity"),
        (good.replace('abundance_stages = ["subadult", "adult"]',
                      'abundance_stages = ["calf"]'), "[stages] abundance_stages"),
        (good.replace("[0.0, 0.6, 0.05]", "[0.0, 0.6]"), "[stages] dispersal_fraction"),
        (good.replace('names = ["juvenile", "subadult", "adult"]', 'names = ["a", "b"]'),
         "[stages] names"),
        (good.replace("[[0.0, 0.9, 2.1]", "[[0.0, 0.0, 0.0]").replace("0.55, 0.82", "0.55, 0.0"),
         "[stages] fecundity"),  # lambda = 0: no stage ever reproduces
        (good.replace('model = "ricker"', 'model = "ricker"\nrate = 0.3'), "[growth] rate"),
        (good + "initial_distribution = [0.5, 0.2]\n", "[stages] initial_distribution"),
        (good + "ages = 3\n", "[stages] transitions: give either"),
    ]
    for i, (text, where) in enumerate(cases):
        path = make_scenario(text, f"bad{i}.toml")
        with pytest.raises(ScenarioError, match=re.escape(where)):
            load_scenario(path)
    assert main(["check", str(path)]) == 2


def test_age_structured_alternative_builds_a_leslie_matrix(make_scenario, capsys):
    """ages with a Weibull survivorship of shape 1 (constant mortality, Pinder, Wiener and Smith
    1978, Ecology 59:175) gives a Leslie matrix with the survival exp(-1/b) on its sub-diagonal,
    b the mean lifespan; check prints the matrix diagnostics."""
    text = stage_text(dispersal="").replace(STAGES, """
[stages]
ages = 4
weibull_shape = 1.0
mean_lifespan_years = 3.0
fecundity_by_age = [0.0, 0.8, 1.2, 1.2]
""")
    s = load_scenario(make_scenario(text))
    assert s.stages.names == ("age0", "age1", "age2", "age3")
    t = np.array(s.stages.transitions)
    np.testing.assert_allclose(np.diag(t, -1), math.exp(-1 / 3.0), rtol=1e-12)
    assert main(["check", str(s.path)]) == 0
    assert "lambda" in capsys.readouterr().out


def read(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


@pytest.mark.parametrize("stochastic", [True, False])
def test_one_stage_matrix_is_the_stage_free_model_bit_for_bit(make_scenario, tmp_path,
                                                              stochastic):
    """[stages] with one stage, transitions [[0.5]] and fecundity [[1.0]], gives the outputs of
    [growth] rate = ln 1.5, survival = 0.5, bit for bit (the one-stage case of the same engine)."""
    free = scenario_text(stochastic=stochastic).replace("rate = 0.6", f"rate = {math.log(1.5)!r}"
                                                        ).replace("survival = 0.4",
                                                                  "survival = 0.5")
    one = free.replace(f"rate = {math.log(1.5)!r}\n", "").replace("survival = 0.5\n", "") + (
        '\n[stages]\nnames = ["adult"]\ntransitions = [[0.5]]\nfecundity = [[1.0]]\n')
    gridpop.run(make_scenario(free, "free.toml"), tmp_path / "free")
    gridpop.run(make_scenario(one, "one.toml"), tmp_path / "one")
    for name in ("timeseries.csv", "patches.csv"):
        a, b = read(tmp_path / "free" / name), read(tmp_path / "one" / name)
        assert [{k: rb[k] for k in ra} for ra, rb in zip(a, b, strict=True)] == a
        assert all(r["abundance_adult"] == r["abundance"] for r in b)
        assert len(a) > 0 and float(a[-1]["abundance"]) > 0
    for name in ("abundance.tif", "occupancy.tif", "colonised.tif"):
        assert (tmp_path / "free" / name).read_bytes() == (tmp_path / "one" / name).read_bytes()
    with rasterio.open(tmp_path / "free" / "abundance.tif") as x:
        assert x.read(masked=True).max() > 0


def ledger(path, columns):
    out = {}
    for r in read(path):
        key = (r["replicate"], r.get("patch", ""), int(r["year"]))
        out[key] = {c: float(r[c]) for c in columns}
    return out


MANAGED = """
[[action]]
kind = "release"
area = "west.tif"
stage = "subadult"
count = 25
years = [1, 3]

[[action]]
kind = "release"
area = "east.tif"
stage = "adult"
count = 10
years = [4]
source_area = "west.tif"

[[action]]
kind = "removal"
area = "east.tif"
stage = "adult"
fraction = 0.2
start_year = 2
"""


def areas(make_raster):
    west, east = np.zeros((40, 60)), np.zeros((40, 60))
    west[5:20, 5:25] = 1
    east[22:36, 35:55] = 1
    make_raster("west.tif", west, nodata=None)
    make_raster("east.tif", east, nodata=None)


@pytest.mark.parametrize("stochastic", [True, False])
def test_ledger_identity_over_every_stage(make_scenario, make_raster, tmp_path, stochastic):
    """N(t+1) = N(t) + births - deaths - disturbance_deaths + immigrants - emigrants + released -
    removed with N the sum over every stage and sex (the BIDE balance with harvest and
    translocation, common practice), for the landscape and every patch, exactly with whole
    individuals; two sexes, stage-specific dispersal, fire, environmental noise, releases, a
    translocation and a removal on. A release of 25 adds exactly 25 in its years."""
    areas(make_raster)
    text = stage_text(stochastic, extra='\n[sex]\nsystem = "monogamous"\n') + """
[[disturbance]]
kind = "fire"
return_interval_years = 3.0
mortality = 0.6
capacity_loss = 0.5
recovery_years = 3.0
""" + MANAGED
    out = tmp_path / "r"
    gridpop.run(make_scenario(text), out)
    stages = ["abundance_juvenile", "abundance_subadult", "abundance_adult"]
    cols = stages + ["births", "deaths", "disturbance_deaths", "immigrants", "emigrants",
                     "abundance", "females", "males", "released", "removed"]
    for name in ("timeseries.csv", "patches.csv"):
        rows = ledger(out / name, cols)
        checked = 0
        for (r, p, t), row in rows.items():
            if t == 0:
                continue
            prev = rows[(r, p, t - 1)]
            n0, n1 = sum(prev[c] for c in stages), sum(row[c] for c in stages)
            expected = n0 + row["births"] - row["deaths"] - row["disturbance_deaths"] + \
                row["immigrants"] - row["emigrants"] + row["released"] - row["removed"]
            assert n1 == pytest.approx(expected, rel=0 if stochastic else 1e-9, abs=1e-9)
            assert row["abundance"] == pytest.approx(
                row["abundance_subadult"] + row["abundance_adult"], rel=1e-9)
            assert row["females"] + row["males"] == pytest.approx(n1, rel=1e-9)
            checked += 1
        assert checked > 0
    land = ledger(out / "timeseries.csv", cols)
    assert sum(r["disturbance_deaths"] for r in land.values()) > 0
    assert sum(r["emigrants"] for r in land.values()) > 0
    for (_, _, t), r in land.items():
        plain = 25 if t in (2, 4) else 0  # release years 1 and 3 enter the census of 2 and 4
        if t == 5:
            assert 0 < r["released"] <= 10 + 1e-9
        else:
            assert r["released"] == pytest.approx(plain, abs=1e-9)
        assert r["removed"] == 0 or t >= 3  # the removal starts in year 2
    assert sum(r["removed"] for (_, _, t), r in land.items() if t == 3) > 0


def test_long_lived_species_is_sensitive_to_adult_survival(make_scenario, tmp_path):
    """A long-lived species (adult survival 0.9, low fecundity): a 10 % cut in adult survival
    lowers the simulated growth rate far more than a 10 % cut in fecundity, as its elasticities
    say (Caswell 2001, ch. 9: elasticities of lambda; de Kroon et al. 1986, Ecology 67:1427, from
    memory); the simulated rates match numpy's dominant eigenvalues of the cut matrices."""
    t = [[0.0, 0.0], [0.4, 0.9]]
    f = [[0.0, 0.3], [0.0, 0.0]]
    base = stage_text(False, dispersal="").replace('model = "ricker"', 'model = "exponential"')
    base = base.replace("env_sd = 0.3", "env_sd = 0.0").replace(STAGES, "")
    growth = {}
    for name, tt, ff in (("base", t, f), ("survival", [[0.0, 0.0], [0.4, 0.81]], f),
                         ("fecundity", t, [[0.0, 0.27], [0.0, 0.0]])):
        text = base + f"\n[stages]\ntransitions = {tt}\nfecundity = {ff}\n"
        gridpop.run(make_scenario(text, f"{name}.toml"), tmp_path / name)
        rows = [r for r in read(tmp_path / name / "timeseries.csv") if r["replicate"] == "0"]
        n = [float(r["abundance"]) for r in rows]
        growth[name] = n[-1] / n[-2]
        lam = np.max(np.abs(np.linalg.eigvals(np.array(tt) + np.array(ff))))
        assert growth[name] == pytest.approx(lam, rel=1e-3)
    from gridpop.matrices import diagnostics

    e = diagnostics(np.array(t), np.array(f)).elasticity
    survival_cut = math.log(growth["base"] / growth["survival"])
    fecundity_cut = math.log(growth["base"] / growth["fecundity"])
    assert e[1, 1] > 3 * e[0, 1]
    assert survival_cut > 3 * fecundity_cut > 0



def test_stage_outputs_plots_and_report(make_scenario, tmp_path):
    """A two-sex stage run writes abundance_<stage> stacks whose landscape sums are the mean of
    the ledger's abundance_<stage> column over replicates (GDAL via rasterio reading back what
    was written), the stage composition and sex ratio figure, and a report that lists the matrix
    with its diagnostics (lambda from numpy.linalg.eigvals)."""
    from gridpop.report.html import write_report
    from gridpop.report.plots import plot_run

    text = stage_text(False, extra='\n[sex]\nsystem = "polygynous"\nharem_size = 3\n') + \
        '\n[output]\nrasters = ["abundance", "occupancy", "colonised", "abundance_adult"]\n'
    out = tmp_path / "r"
    gridpop.run(make_scenario(text), out)
    rows = read(out / "timeseries.csv")
    assert {"abundance_juvenile", "abundance_subadult", "abundance_adult", "females",
            "males"} <= set(rows[0])
    with rasterio.open(out / "abundance_adult.tif") as ds:
        stack = ds.read(masked=True)
    for t in (0, 3, 8):
        mean = np.mean([float(r["abundance_adult"]) for r in rows if int(r["year"]) == t])
        assert stack[t].sum() == pytest.approx(mean, rel=1e-5)
    assert any(p.name == "stages.png" for p in plot_run(out))
    html = write_report(out).read_text()
    lam = np.max(np.abs(np.linalg.eigvals(T3 + F3)))
    assert "Life history" in html and f"lambda (dominant eigenvalue): {lam:.6g}" in html
    assert "elasticity of lambda to each entry" in html


def test_release_and_removal_keys_are_checked(make_scenario, make_raster):
    """A removal needs fraction or count, a stage of [stages] (none without it); release years
    are whole numbers (common practice: refuse what cannot be meant)."""
    areas(make_raster)
    good = stage_text() + MANAGED
    load_scenario(make_scenario(good, "good.toml"))
    cases = [(good.replace("fraction = 0.2", "fraction = 0.2\ncount = 3"),
              "(removal)]: give either"),
             (good.replace('stage = "subadult"', 'stage = "calf"'), "[action #1 (release)] stage"),
             (good.replace("years = [1, 3]", "years = [1.5]"), "[action #1 (release)] years"),
             (scenario_text() + MANAGED.replace('stage = "adult"\n', ""),
              "[action #1 (release)] stage")]
    for i, (text, where) in enumerate(cases):
        with pytest.raises(ScenarioError, match=re.escape(where)):
            load_scenario(make_scenario(text, f"bad{i}.toml"))


def test_stage_free_removal_by_count(make_scenario, make_raster, tmp_path):
    """Without [stages], a removal of 30 a year takes exactly 30 while more are present, and
    the ledger stays exact (common practice: the BIDE balance with harvest)."""
    areas(make_raster)
    text = scenario_text(stochastic=False) + """
[[action]]
kind = "removal"
area = "west.tif"
count = 30
"""
    gridpop.run(make_scenario(text), tmp_path / "r")
    rows = read(tmp_path / "r" / "timeseries.csv")
    assert [float(r["removed"]) for r in rows if r["year"] != "0"] == \
        pytest.approx([30.0] * 8 * 4)
    assert all(float(r["released"]) == 0 for r in rows)

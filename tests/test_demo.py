"""The demo planning case (scenarios/demo): its data regenerate from the committed script, every
scenario loads and checks, the plans are the base case plus actions, and the corridor question
has the answer the README reports, shown cheaply (expected walks, a short stochastic run) rather
than by the full comparison."""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import numpy as np
import pytest
import rasterio
import shapely
from conftest import read_rows

import gridpop
from gridpop import matrices
from gridpop.analysis.compare import compare
from gridpop.analysis.summary import parameters
from gridpop.cli import main as cli_main
from gridpop.io.vectors import read_cells
from gridpop.landscape import build_landscape
from gridpop.movement.walk import disperse_walk_deterministic
from gridpop.simulation.model import build_model

DEMO = Path(__file__).resolve().parents[1] / "scenarios" / "demo"
PLANS = ("reserve_one_block", "reserve_small_sites", "corridor_brook", "corridor_straight",
         "release_east")
CORRIDORS = {"corridor_brook": "BROOK", "corridor_straight": "STRAIGHT"}
DRAINED_YEAR = 10  # the drainage is complete from year 5
GENERATIONS = 40  # the planning horizon in years, one dispersal generation a year


@pytest.fixture(scope="module")
def gen():
    """The demo's generate.py, imported from its file."""
    spec = importlib.util.spec_from_file_location("demo_generate", DEMO / "generate.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _scenario(name):
    return gridpop.load_scenario(DEMO / f"{name}.toml")


def test_data_regenerate_byte_identical(tmp_path, gen):
    """generate.py rewrites every committed layer byte for byte (fixed seeds, fixed GeoPackage
    date), and writes nothing else."""
    gen.main(tmp_path)
    committed = sorted(p.name for p in (DEMO / "data").iterdir())
    assert sorted(p.name for p in tmp_path.iterdir()) == committed
    for name in committed:
        assert (tmp_path / name).read_bytes() == (DEMO / "data" / name).read_bytes(), name
    assert sum((DEMO / "data" / n).stat().st_size for n in committed) < 2_000_000


def test_every_demo_scenario_passes_check(capsys):
    """`gridpop check` exits 0 on the base case and every plan and reads the 160 x 120 grid of
    50 m cells; uncertainty.toml (only [uncertainty]: the design of gridpop sensitivity) is a
    valid design for every plan."""
    from gridpop.config import load_study

    paths = sorted(p for p in DEMO.glob("*.toml") if p.stem != "uncertainty")
    assert {p.stem for p in paths} == {"base", *PLANS}
    plans, design, _ = load_study([DEMO / "uncertainty.toml", *paths])
    assert len(plans) == len(paths) and design.samples == 32
    for path in paths:
        assert cli_main(["check", str(path)]) == 0, path.name
        out = capsys.readouterr().out
        assert "grid: 120 rows x 160 columns, cells 50 x 50 m (0.25 ha)" in out, path.name


def _unlabelled(actions):
    """Action tables without their label (which holds the table's position in the file)."""
    return [{k: v for k, v in a.items() if k != "label"} for a in actions]


def test_plans_are_the_base_case_plus_actions():
    """Every plan has the base case's landscape, seed, parameters and disturbances; it differs
    only in its description and in the actions it adds to the base case's (kept in order)."""
    base = _scenario("base")
    kinds = [a.kind for a in base.actions]
    assert kinds == ["reserve", "barrier", "habitat_loss"]
    expected = {k: v for k, v in parameters(base).items() if k not in ("plan", "action")}
    descriptions = {base.plan.description}
    for name in PLANS:
        plan = _scenario(name)
        got = parameters(plan)
        assert {k: v for k, v in got.items() if k not in ("plan", "action")} == expected, name
        base_actions = iter(_unlabelled(parameters(base)["action"]))
        wanted = next(base_actions)
        for action in _unlabelled(got["action"]):
            if wanted is not None and action == wanted:
                wanted = next(base_actions, None)
        assert wanted is None, f"{name}: the base case's actions are not all kept in order"
        descriptions.add(plan.plan.description)
    assert len(descriptions) == 1 + len(PLANS) and "" not in descriptions


def test_drier_future_is_each_plan_with_shrinking_fens(gen, capsys):
    """scenarios/demo/drier/ holds every plan under the drier future: the same scenario but for
    a linear change to suitability_dry_40.tif in the last year, in which the fens keep two
    thirds of their habitat cells (within one fen cell per fen of 2/3; an invented projection)
    and nothing else changes; gridpop check passes on each."""
    for name in ("base", *PLANS):
        now, dry = _scenario(name), gridpop.load_scenario(DEMO / "drier" / f"{name}.toml")
        a = parameters(now)
        b = json.loads(json.dumps(parameters(dry)).replace("/drier/../", "/"))
        assert b["habitat"].pop("future") == [
            {"year": now.run.years - 1, "suitability": str(DEMO / "data" /
                                                           "suitability_dry_40.tif")}]
        a["habitat"].pop("future")
        assert a == b, name
        assert cli_main(["check", str(DEMO / "drier" / f"{name}.toml")]) == 0
        capsys.readouterr()
    yy, xx = np.mgrid[0:gen.NY, 0:gen.NX]
    near = np.zeros((gen.NY, gen.NX), bool)
    for cx, cy, r in gen.FENS:
        near |= (yy - cy) ** 2 + (xx - cx) ** 2 <= (2.5 * r) ** 2
    s0, s1 = gen.suitability(), gen.suitability(gen.DRY_FEN_SCALE)
    h0, h1 = np.nan_to_num(s0) >= gen.THRESHOLD, np.nan_to_num(s1) >= gen.THRESHOLD
    assert abs((h1 & near).sum() - 2 / 3 * (h0 & near).sum()) <= len(gen.FENS)
    np.testing.assert_array_equal(s0[~near], s1[~near])


def test_reserve_layouts_have_equal_area():
    """The two reserve layouts protect the same number of cells (100 ha), inside the study
    area."""
    cells = []
    for name in ("reserve_one_block", "reserve_small_sites"):
        scenario = _scenario(name)
        model = build_model(scenario, build_landscape(scenario, stochastic=True))
        new = [c for c, a in zip(scenario.actions, model.actions.areas, strict=True)
               if c.kind == "reserve" and "east_reserve" not in str(c.area)]
        assert len(new) == 1
        area = model.actions.areas[scenario.actions.index(new[0])]
        assert (area <= model.landscape.mask).all()
        cells.append(int(area.sum()))
    assert cells == [400, 400]


def test_initial_population_whole_west_of_the_road_only():
    """Capacity gives whole individuals (20 in a cell of the best habitat); the year-0 population
    is whole numbers, sits on habitat (none dropped) and leaves the east block empty."""
    scenario = _scenario("base")
    assert scenario.habitat.capacity_per_ha * 0.25 >= 10
    landscape = build_landscape(scenario, stochastic=True)
    with rasterio.open(DEMO / "data" / "initial.tif") as src:
        raster = src.read(1, masked=True).filled(0.0)
    n = landscape.initial
    assert np.array_equal(n, np.rint(n)) and n.sum() == raster.sum() > 5000
    east = read_cells(DEMO / "data" / "east_reserve.gpkg", landscape.grid, file=scenario.path,
                      section="test", key="area")[0]
    assert n[east].sum() == 0 and landscape.capacity[east].sum() > 10_000


class Corridor:
    """A corridor plan after the drainage: its model, capacity, cells and the road's side."""

    def __init__(self, name, gen):
        self.scenario = _scenario(name)
        self.model = build_model(self.scenario, build_landscape(self.scenario, stochastic=True))
        self.k = self.model.actions.capacity_for_year(DRAINED_YEAR)
        grid, path = self.model.landscape.grid, self.scenario.path

        def cells(layer):
            return read_cells(DEMO / "data" / layer, grid, file=path, section="test",
                              key="area")[0] & (self.k > 0)

        self.reserve = cells("reserve_one_block.gpkg")
        self.east = cells("east_reserve.gpkg")
        self.corridor = cells(f"{name}.gpkg") & ~self.reserve & ~self.east
        rows, cols = np.mgrid[0:grid.shape[0], 0:grid.shape[1]]
        road_col = np.interp(rows + 0.5, [r + 0.5 for _, r in gen.ROAD],
                             [c + 0.5 for c, _ in gen.ROAD])
        self.east_of_road = cols + 0.5 > road_col
        self.centre = gen.line(getattr(gen, CORRIDORS[name]))
        self.xy = gen.xy

    def walk(self, start):
        """The expected one-year walk of ``start`` dispersers (the engine's walk surfaces and
        barrier survival)."""
        w = self.model.walk
        none = np.zeros(self.k.shape, np.int32)
        return disperse_walk_deterministic(start, w.permeability, w.quality(self.k), none, 0,
                                           w.params, entry_survival=w.entry_survival)

    def stretches(self, length_cells=6):
        """Labels: 1 the reserve, then stretches of the corridor ``length_cells`` long along
        its centre line (those west of the road first), last the east block."""
        ii, jj = np.nonzero(self.corridor)
        x, y = self.xy(jj + 0.5, ii + 0.5)
        along = (shapely.line_locate_point(self.centre, shapely.points(x, y))
                 / self.model.landscape.grid.cell_width_m)
        key = (along // length_cells).astype(np.int64) + 1000 * self.east_of_road[ii, jj]
        order = np.unique(key)
        labels = np.zeros(self.k.shape, np.int32)
        labels[self.reserve] = 1
        labels[ii, jj] = 2 + np.searchsorted(order, key)
        labels[self.east] = len(order) + 2
        return labels, len(order) + 2


@pytest.fixture(scope="module")
def corridors(gen):
    return {name: Corridor(name, gen) for name in CORRIDORS}


@pytest.mark.slow
def test_brook_corridor_carries_more_flow_across_the_road(corridors):
    """Issue 7, demo check (deterministic): with the reserve and the corridor west of the road at
    capacity, the expected walk of one year's dispersers (K times the stages' dispersal
    fractions weighted by the stable stage distribution) sends far more
    settlers across the road, and far more visits into the corridor's stretch east of it, along
    the brook (under the bridge) than along the straight corridor (over the road: resistance 60
    and a crossing mortality of 0.97). Exact expectations of the walk (a Markov chain), no
    sampling; a property of the demo, no outside reference."""
    flow = {}
    for name, c in corridors.items():
        st = c.scenario.stages
        stable = matrices.diagnostics(np.array(st.transitions), np.array(st.fecundity))
        fraction = stable.stable_distribution @ np.array(st.dispersal_fraction)
        source = (c.reserve | c.corridor) & ~c.east_of_road
        res = c.walk(np.where(source, c.k * fraction, 0.0))
        flow[name] = (res.arrivals[c.east_of_road].sum(),
                      res.visits[c.corridor & c.east_of_road].sum())
    brook, straight = flow["corridor_brook"], flow["corridor_straight"]
    assert brook[0] > 10 * straight[0] and brook[0] > 1.0
    assert brook[1] > 10 * straight[1]


@pytest.mark.slow
def test_brook_corridor_links_the_blocks_over_generations(corridors):
    """Issue 7, demo check (deterministic): the corridor as stepping stones. Connectivity between
    the reserve, stretches of the corridor and the east block is the probability that a
    disperser leaving one (started in proportion to K) settles in another within a year, by the
    expected walk; chaining it over 40 generations (an absorbing Markov chain, the east block
    absorbing) gives the probability that a line of dispersers from the reserve settles in the
    east block. The brook corridor's is higher than the straight one's, whose weakest link is
    the road crossing, far weaker than any link along the brook. Markov-chain absorption:
    Kemeny and Snell (1960), Finite Markov Chains, Van Nostrand (from memory)."""
    reach, weakest = {}, {}
    for name, c in corridors.items():
        labels, n = c.stretches()
        conn = np.zeros((n, n))
        for p in range(1, n + 1):
            start = np.where(labels == p, c.k, 0.0)
            arrivals = c.walk(start / start.sum()).arrivals
            conn[p - 1] = np.bincount(labels.ravel(), weights=arrivals.ravel(),
                                      minlength=n + 1)[1:]
        onward = [conn[i, i + 1:].sum() for i in range(1, n - 1)]  # from each stretch on
        weakest[name] = min(onward)
        conn[-1] = 0.0
        v, reached = np.eye(n)[0], 0.0
        for _ in range(GENERATIONS):
            v = v @ conn
            reached += v[-1]
        reach[name] = reached
    assert reach["corridor_brook"] > 3 * reach["corridor_straight"] > 0
    assert weakest["corridor_straight"] < 0.1 * weakest["corridor_brook"]


@pytest.mark.slow
def test_short_run_brook_corridor_colonises_the_east_block_more_often(tmp_path):
    """Issue 7, demo check (stochastic, short): 12 paired replicates of 30 years of the two
    corridor plans. The full comparison (100 replicates, 40 years) has the east block colonised
    by year 30 in 0.82 (brook) and 0.11 (straight) of the replicates: an expected difference of
    8.5 of 12, with a standard deviation of at most sqrt(12 (0.82 x 0.18 + 0.11 x 0.89)) = 1.7
    (binomial counts, unpaired; common random numbers only make it smaller). Asserted: at least
    2 more colonisations along the brook, 3.8 standard deviations below the expectation."""
    plans = [_scenario(n).replace("run", replicates=12, years=30)
             for n in ("corridor_straight", "corridor_brook")]
    out = compare(plans, tmp_path / "cmp")
    rows = {r["plan"]: r for r in json.loads((out / "comparison.json").read_text())["plans"]}
    brook = round(12 * rows["corridor_brook"]["colonisation_east_block"])
    straight = round(12 * rows["corridor_straight"]["colonisation_east_block"])
    assert brook >= straight + 2


def test_release_plan_moves_shrews_from_the_reserve_to_the_east_block(tmp_path):
    """release_east.toml: 120 subadults a year in steps 1-3 are caught in the one-block reserve
    (which holds far more) and released in the east block, so the landscape ledger shows 120
    released and 120 removed in those steps only, and the east block, empty in year 0, is
    colonised from the first release on."""
    out = tmp_path / "release"
    assert cli_main(["run", str(DEMO / "release_east.toml"), "--replicates", "2", "--years",
                     "5", "--out", str(out), "--quiet"]) == 0
    rows = read_rows(out / "timeseries.csv")
    for r in rows:
        moved = 120 if 2 <= int(r["year"]) <= 4 else 0  # row t: the step from t - 1 to t
        assert (int(float(r["released"])), int(float(r["removed"]))) == (moved, moved), r
    east = json.loads((out / "summary.json").read_text())["colonisation"]["east_block"]
    assert east["probability"][:3] == [0.0, 0.0, 1.0]

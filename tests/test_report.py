"""The HTML report of a run and of a comparison, on the fake folders of test_plots."""

from __future__ import annotations

import base64
import io
import os
import re
import shutil
import subprocess
from html.parser import HTMLParser

import matplotlib.image
import pytest
from conftest import scenario_text
from test_plots import make_compare, make_run

import gridpop
from gridpop.analysis.summary import CAUTIONS as RUN_CAUTIONS
from gridpop.cli import main
from gridpop.report.assumptions import assumptions
from gridpop.report.html import CAUTIONS, fmt, parameters_as_written, write_report
from gridpop.report.plots import read_run

VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
        "track", "wbr"}


class Document(HTMLParser):
    """Parses a page and checks every non-void element is closed in order; keeps the
    attributes of every tag and the text."""

    def __init__(self, text):
        super().__init__(convert_charrefs=True)
        self.stack, self.errors, self.tags, self.text = [], [], [], []
        self.feed(text)
        self.close()

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack.pop() != tag:
            self.errors.append(tag)

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture
def compare_dir(tmp_path):
    return make_compare(tmp_path / "cmp")


@pytest.fixture
def run_dir(tmp_path):
    return make_run(tmp_path / "run", "corridor")


def _parse(path):
    text = path.read_text(encoding="utf-8")
    doc = Document(text)
    assert doc.errors == [] and doc.stack == [], (doc.errors, doc.stack)
    return text, doc, " ".join(" ".join(doc.text).split())


def _self_contained(doc):
    """No external resource: every src and href is inline data, no scripts or links."""
    refs = [a[k] for _, a in doc.tags for k in ("src", "href") if k in a]
    assert all(r.startswith("data:image/png;base64,") for r in refs)
    assert not any("http" in r for r in refs)
    assert not {t for t, _ in doc.tags} & {"script", "link", "iframe", "object"}


def _no_local_paths(text, *folders):
    """No absolute path of the machine: neither the result folders nor any absolute file name."""
    for folder in folders:
        assert str(folder) not in text
    assert not re.search(r"(?<![\w.])/(tmp|home|work|root|plans)/", text)


def test_compare_report_contents(compare_dir):
    """The comparison report holds the question, the table values (intervals joined), the
    parameters with the differing rows marked (paths relative to the scenario), the assumptions
    and the cautions once; text from the results is escaped; it parses as balanced HTML (common
    practice)."""
    path = write_report(compare_dir)
    assert path == compare_dir / "report.html"
    text, doc, words = _parse(path)
    _self_contained(doc)
    for heading in ("The question", "Plans", "Results", "Figures", "Parameters as read",
                    "Model assumptions and limitations", "Cautions"):
        assert f"<h2>{heading}</h2>" in text
    assert "question &lt;of&gt; plan corridor &amp; more" in text and "<of>" not in text
    # comparison.csv values: risk with its interval, colonisation, capacity, rank
    for value in ("0.5 (0.25 \u2013 0.75)", "0.375 (0.25 \u2013 0.75)", "0.625", "0.875",
                  "12.75", "13.75", "14.75", "40.5", "60.5", "-0.25"):
        assert f">{value}<" in text, value
    assert "Replicates are paired by common random numbers (seed 7)." in words
    assert "probability focus area east colonised by the horizon" in words
    # parameters: one column per plan, the growth rate differs between plans
    rates = re.search(r'<tr class="differs"><th>growth\.rate</th>(.*?)</tr>', text).group(1)
    assert re.findall(r">([^<]+)</td>", rates) == ["0.35", "0.37", "0.39"]
    assert "<th>dispersal.kernel</th>" in text and "differs\"><th>dispersal.kernel" not in text
    assert "<th>disturbance[1].kind</th>" in text
    tables = re.search(r'<tr class="differs"><th>action: tables</th>(.*?)</tr>', text).group(1)
    assert re.findall(r">([^<]+)</td>", tables) == ["1", "4", "2"]
    assert "<th>habitat.suitability</th><td>suitability.tif</td>" in text
    assert "<th>action[1].area</th><td>road.gpkg</td>" in text
    _no_local_paths(text, compare_dir)
    _cautions_once(words)


def test_report_images_are_the_plots(compare_dir):
    """Every figure of plots/ is embedded once as a PNG that decodes (common practice)."""
    text, doc, _ = _parse(write_report(compare_dir))
    images = [a["src"] for t, a in doc.tags if t == "img"]
    pngs = sorted((compare_dir / "plots").glob("*.png"))
    assert len(images) == len(pngs) == 6
    embedded = {base64.b64decode(src.split(",", 1)[1]) for src in images}
    assert embedded == {p.read_bytes() for p in pngs}
    for data in embedded:
        assert matplotlib.image.imread(io.BytesIO(data), format="png").shape[0] > 300


def test_run_report_contents(run_dir, tmp_path):
    """A run's report shows its summary metrics with intervals at the horizon (year 12) and is
    written where --out says (common practice)."""
    out = write_report(run_dir, tmp_path / "elsewhere" / "r.html")
    assert out == tmp_path / "elsewhere" / "r.html"
    text, doc, words = _parse(out)
    _self_contained(doc)
    assert "risk of having fallen below it by year 12" in words
    for value in ("41.5 (30.25 \u2013 52.75)", "70.5", "66 (40 \u2013 90)", "10, 130", "2.5",
                  "12.75", "0.625"):
        assert f">{value}<" in text, value
    assert "question &lt;of&gt; plan corridor &amp; more" in text
    assert "barrier (road.gpkg); reserve (reserve.gpkg); corridor (corridor.geojson); " \
           "restoration (restoration.tif)" in text
    assert len([t for t, _ in doc.tags if t == "img"]) == 5
    assert "<p>Note: fake note &lt;b&gt;</p>" in text
    _no_local_paths(text, run_dir, tmp_path)
    _cautions_once(words)


def _cautions_once(words):
    """The cautions (decisions, field data, the wildlife agency, regulations, professional
    judgement) appear once: the run's own caution text, which says the same, is not repeated."""
    for phrase in ("support decisions", "do not replace field data", "responsible wildlife agency",
                   "local regulations", "licensed professional judgement"):
        assert words.count(phrase) == 1, phrase
    assert " ".join(CAUTIONS.split()) in words
    assert " ".join(RUN_CAUTIONS.split()) not in words


def _assumption_text(folder) -> dict[str, str]:
    """The assumptions section of a run's report as {title: text}."""
    _, doc, words = _parse(write_report(folder))
    part = words[words.index("Model assumptions and limitations"):words.index("Cautions These")]
    titles = [t for t, _ in assumptions(parameters_as_written(read_run(folder)))]
    out = {}
    for i, title in enumerate(titles):
        start = part.index(title) + len(title)
        end = part.index(titles[i + 1]) if i + 1 < len(titles) else len(part)
        out[title] = part[start:end].strip()
    return out


WALK = ("walk cell to cell over", "Corridors multiply resistance by 0.5 along them",
        "A walker entering a cell of a barrier with crossing mortality 0.9 dies",
        "Walkers never leave the grid")
KERNEL = ("jump to a cell drawn from a negative-exponential kernel with a mean distance of 300 m",
          "The kernel ignores the landscape between the two cells",
          "dies with the highest crossing mortality of any barrier cell (0.9",
          "their resistance multiplier has no effect with the kernel method")


def test_assumptions_describe_their_own_dispersal(tmp_path):
    """A walk run's report says its dispersers walk over resistance, follow corridors and meet
    barrier mortality on entry, and says nothing of a kernel; a kernel run's report says its
    dispersers jump, ignore the landscape in between (except the barrier crossing mortality)
    and do not follow corridors, and says nothing of walking."""
    walk = _assumption_text(make_run(tmp_path / "w", "walk", method="walk"))
    kernel = _assumption_text(make_run(tmp_path / "k", "kernel", method="kernel"))
    for phrase in WALK:
        assert phrase in walk["Dispersal"] and phrase not in kernel["Dispersal"], phrase
    for phrase in KERNEL:
        assert phrase in kernel["Dispersal"] and phrase not in walk["Dispersal"], phrase
    assert "jump" not in walk["Dispersal"] and "walk" not in kernel["Dispersal"]
    assert "memory while walking" in walk["Not modelled"]
    assert "following corridors, avoiding barriers" in kernel["Not modelled"]
    assert "following corridors" not in walk["Not modelled"]


def test_assumptions_describe_their_own_randomness(tmp_path):
    """A stochastic run's report speaks of demographic stochasticity in whole individuals; a
    deterministic one of expected numbers, and, without environmental variation or disturbance,
    that nothing is random; with a fire regime, that only the fires are."""
    sto = _assumption_text(make_run(tmp_path / "s", "sto", stochastic=True))
    det = _assumption_text(make_run(tmp_path / "d", "det", stochastic=False, fire=False))
    fire = _assumption_text(make_run(tmp_path / "f", "fire", stochastic=False, fire=True))
    assert "Stochastic: counts are whole individuals" in sto["Growth"]
    assert "Deterministic" not in sto["Growth"]
    for a in (det, fire):
        assert "Deterministic: expected numbers" in a["Growth"]
        assert "Stochastic:" not in a["Growth"]
    assert "nothing is random, so every replicate is the same" in det["Growth"]
    assert "only the disturbance events are random" in fire["Growth"]
    assert det["Disturbance"] == "None: no fires or floods are simulated."
    assert det["Randomness and paired replicates"].startswith("None is used")
    assert "Fire (return interval 25 years at hazard 1" in fire["Disturbance"]
    assert "Beverton-Holt density dependence" in sto["Growth"]
    assert sto["Environmental variation"] == "None: the multiplier depends on density only."


def test_compare_assumptions_once_where_shared(compare_dir):
    """In a comparison the assumptions the plans share are stated once, and those that differ
    (growth rate, actions, the corridor's part in dispersal) per plan, plans with the same text
    together."""
    text, _, words = _parse(write_report(compare_dir))
    section = text[text.index("<h2>Model assumptions"):text.index("<h2>Cautions")]
    dd = dict(re.findall(r"<dt>(.*?)</dt><dd>(.*?)</dd>", section, flags=re.S))
    assert "<b>" not in dd["Population"] and words.count("One number of individuals per") == 1
    assert re.findall(r"<b>([^<]+)</b>", dd["Management actions"]) == ["base", "corridor",
                                                                       "reserve"]
    assert re.findall(r"<b>([^<]+)</b>", dd["Dispersal"]) == ["base, reserve", "corridor"]
    assert "r = 0.37 a year" in dd["Growth"]


def test_capacity_explained(run_dir, tmp_path):
    """The report says what the metapopulation capacity measures (Hanski and Ovaskainen 2000,
    Nature 404:755, the leading eigenvalue of the matrix A_i A_j f_ij), its units (hectares
    squared, with gridpop's areas in hectares) and why a corridor can lower it, with the
    connection of the run's dispersal method (gridpop/summary.py)."""
    _, _, words = _parse(write_report(run_dir))
    assert "leading eigenvalue of the matrix with entries A_i A_j f_ij" in words
    assert "hectares squared" in words and "exp(-d_ij / mean dispersal distance)" in words
    assert "It can fall when a corridor is added" in words
    _, _, walk = _parse(write_report(make_run(tmp_path / "w", "walk", method="walk")))
    assert "settles in patch j within a year, by the walk" in walk
    assert "exp(-d_ij" not in walk


def test_report_of_a_real_walk_run(make_scenario, tmp_path):
    """End to end on a small simulated walk run: the report describes a walk (not a kernel),
    the maps rebuild the habitat from the scenario without a warning, and no local absolute path
    is written."""
    body = scenario_text(years=3, replicates=2).replace(
        'kernel = "exponential"\nmean_distance_m = 90.0', 'method = "walk"\nwalk_length = 12')
    out = gridpop.run(make_scenario(body, "walkers.toml"), tmp_path / "out")
    text, _, words = _parse(write_report(out))
    assert "walk cell to cell over a resistance derived from suitability" in words
    assert "jump to a cell" not in words and "kernel ignores" not in words
    assert "Ricker density dependence" in words
    assert "<th>habitat.suitability</th><td>suitability.tif</td>" in text
    _no_local_paths(text, tmp_path)
    _cautions_once(words)


@pytest.mark.parametrize("value, text", [(0.125, "0.125"), (2 / 3, "0.6667"), (12345.6, "12,346"),
                                         (3, "3"), (True, "yes"), (None, "\u2014"),
                                         ([1.5, 2], "1.5, 2"), ([], "none")])
def test_fmt(value, text):
    """Numbers to 4 significant digits, thousands separated from 10 000 (common practice)."""
    assert fmt(value) == text


@pytest.mark.slow
def test_cli_report(compare_dir, tmp_path, capsys):
    """`gridpop report DIR [--out FILE]`: exit 0 and the file; exit 2 with the folder named
    when DIR is not a result folder (common practice for command lines)."""
    assert main(["report", str(compare_dir)]) == 0
    assert (compare_dir / "report.html").is_file()
    assert str(compare_dir / "report.html") in capsys.readouterr().out
    assert main(["report", str(compare_dir / "base"), "--out", str(tmp_path / "b.html")]) == 0
    assert (tmp_path / "b.html").stat().st_size > 10_000
    assert main(["report", str(tmp_path)]) == 2
    assert "not a gridpop result folder" in capsys.readouterr().err


PROBE = """<img src="data:image/png;base64,AAAA" alt="broken on purpose">
<script>window.addEventListener('load', function () {
  var imgs = document.images, n = 0;
  for (var i = 0; i < imgs.length; i++) { if (imgs[i].naturalWidth > 0) { n++; } }
  var p = document.createElement('p'); p.id = 'probe';
  p.textContent = 'loaded ' + n + ' of ' + imgs.length; document.body.appendChild(p);
});</script>
</body>"""


@pytest.mark.slow
def test_report_opens_in_headless_browser(compare_dir, tmp_path):
    """The report opens in a real browser (Debian's chromium, headless) and all its images
    load: a probe counts the images with naturalWidth > 0 after the load event. One broken
    image is added to show the probe sees a failure (HTML Living Standard, WHATWG, the img
    element's naturalWidth is 0 when the image is not available)."""
    browser = shutil.which("chromium")
    if browser is None:
        if os.environ.get("CI"):
            pytest.fail("chromium is not installed; .ci/run installs it")
        pytest.skip("chromium is not installed (apt-get install chromium)")
    report = write_report(compare_dir)
    n = report.read_text(encoding="utf-8").count("<img ")
    page = tmp_path / "probe.html"
    page.write_text(report.read_text(encoding="utf-8").replace("</body>", PROBE),
                    encoding="utf-8")
    profile = tmp_path / "profile"
    cmd = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", f"--user-data-dir={profile}", "--dump-dom", page.as_uri()]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=180, check=False)
    probe = re.search(r'<p id="probe">loaded (\d+) of (\d+)</p>', done.stdout)
    assert probe is not None, done.stderr[-2000:]
    assert (int(probe.group(1)), int(probe.group(2))) == (n, n + 1)
    assert n == 6

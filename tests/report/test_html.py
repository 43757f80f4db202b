"""Tests for firstorder.report.html: the standalone report, read back as its analysis, and in
headless Chromium with no network."""

from __future__ import annotations

import contextlib
import json
import os
import re
import shutil
from html.parser import HTMLParser

import numpy as np
import pytest
from builders import relay_analysis

import firstorder as fo
from firstorder.analysis import EMBED_ID, Analysis
from firstorder.report import tables as report_tables

CHROMIUM = "/usr/bin/chromium"
CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--no-first-run"]


class _Elements(HTMLParser):
    """Collects start tags with their attributes, and the text of <style> blocks."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.styles: list[str] = []
        self._in_style = False

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        self._in_style = tag == "style"

    def handle_endtag(self, tag):
        self._in_style = False

    def handle_data(self, data):
        if self._in_style:
            self.styles.append(data)


def elements(html: str) -> _Elements:
    parser = _Elements()
    parser.feed(html)
    parser.close()
    return parser


@pytest.fixture(scope="module")
def report_html() -> str:
    return relay_analysis().to_html()


@contextlib.contextmanager
def _opened_offline(sync_playwright, url: str, ready: str):
    """A report opened in headless Chromium once `ready` is drawn and the network is idle:
    ``(page, requests, errors)``, every request and page error recorded; closed after."""
    requests, errors = [], []
    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_FLAGS)
        try:
            page = browser.new_page(viewport={"width": 1100, "height": 900})
            page.on("request", lambda request: requests.append(request.url))
            page.on("pageerror", lambda error: errors.append(str(error)))
            page.goto(url)
            page.wait_for_selector(ready, timeout=30_000)
            page.wait_for_load_state("networkidle")
            yield page, requests, errors
        finally:
            browser.close()


def _browser_or_skip():
    required = os.environ.get("FIRSTORDER_REQUIRE_BROWSER") == "1"
    if not shutil.which(CHROMIUM) and not os.path.exists(CHROMIUM):
        if required:
            pytest.fail(f"FIRSTORDER_REQUIRE_BROWSER=1 but {CHROMIUM} is missing")
        pytest.skip(f"no chromium at {CHROMIUM}; the browser test needs Debian's chromium")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        if required:
            raise
        pytest.skip("playwright is not installed")
    return sync_playwright


class TestReport:
    def test_writes_one_file(self, tmp_path):
        path = relay_analysis().report(tmp_path / "r.html")
        assert path.exists() and [p.name for p in tmp_path.iterdir()] == ["r.html"]

    def test_no_external_script_or_stylesheet(self, report_html):
        found = elements(report_html)
        scripts = [attrs for tag, attrs in found.tags if tag == "script"]
        assert scripts, "the page carries BokehJS inline"
        assert all("src" not in attrs for attrs in scripts)
        assert not [attrs for tag, attrs in found.tags if tag == "link"]
        for tag, attrs in found.tags:
            for name in ("src", "href", "data", "srcset", "poster", "action"):
                value = attrs.get(name) or ""
                assert not re.match(r"\s*(https?:)?//", value), (tag, name, value)
        for style in found.styles:
            assert "@import" not in style and not re.search(r"url\(\s*['\"]?(https?:)?//", style)

    def test_sections(self, report_html):
        for section in ("notes", "summary", "parts", "drive", "plot", "settling", "cautions", "derivations"):
            assert f"<section id={section}>" in report_html
        assert "<h1>Relay and hold capacitor</h1>" in report_html
        assert f"firstorder {fo.__version__}" in report_html
        assert re.search(r"on \d{4}-\d\d-\d\d \d\d:\d\d UTC", report_html)

    def test_parts_as_typed(self, report_html):
        assert "<td>&#x27;1k&#x27;</td><td>1 kΩ</td>" in report_html
        assert "<td>r_on &#x27;0.1&#x27;, r_off &#x27;1G&#x27;</td>" in report_html

    def test_time_constants_from_the_handbook(self, report_html):
        # tau = R C: (1 kΩ + 0.1 Ω) ∥ 10 MΩ with 100 nF while the relay is closed, and
        # (1 kΩ + 1 GΩ) ∥ 10 MΩ with 100 nF while it is open (series/parallel rules, handbook).
        closed = (1000.1 * 10e6 / (1000.1 + 10e6)) * 100e-9
        opened = ((1e9 + 1000) * 10e6 / (1e9 + 1000 + 10e6)) * 100e-9
        assert f"<td>time constant (k1 closed)</td><td>{fo.format_value(closed, 's')}</td>" in report_html
        assert f"<td>time constant (k1 open)</td><td>{fo.format_value(opened, 's')}</td>" in report_html

    def test_embedded_analysis_loads_back(self, tmp_path):
        a = relay_analysis(notes="ends with </script><!-- and & < >")
        path = a.report(tmp_path / "r.html")
        b = Analysis.load(path)
        assert b.notes == a.notes and b.fixture.parts == a.fixture.parts and b.drive == a.drive
        assert np.array_equal(a.response.boundary, b.response.boundary)
        html = path.read_text(encoding="utf-8")
        block = re.search(rf'<script type="application/json" id="{EMBED_ID}">(.*?)</script>', html, re.S).group(1)
        assert "<" not in block and ">" not in block and "&" not in block
        assert json.loads(block)["notes"] == a.notes

    def test_user_text_is_escaped(self, report_html):
        bad = "</script><script>alert(1)</script><b>"
        html = relay_analysis(title=bad, notes=bad).to_html()
        tags = [tag for tag, _ in elements(html).tags]
        clean_tags = [tag for tag, _ in elements(report_html).tags]
        assert tags.count("script") == clean_tags.count("script")
        assert tags.count("b") == clean_tags.count("b") == 0
        assert "<script>alert(1)" not in html
        assert "&lt;/script&gt;&lt;script&gt;alert(1)&lt;/script&gt;&lt;b&gt;" in html

    def test_short_drive_in_full(self, report_html):
        drive_section = report_html.split("<section id=drive>")[1].split("</section>")[0]
        assert drive_section.count("<tr>") == 1 + 3

    def test_long_drive_summarised(self):
        n = 5000
        levels = np.where(np.arange(n) % 2 == 0, 1.0, -1.0)
        a = Analysis(fo.Fixture.rc(r="1k", c="10n"), fo.Drive(np.arange(n) * 50e-6, n * 50e-6, vin=levels),
                     tolerance=fo.Tolerance.relative(0.01))
        html = a.to_html()
        drive_section = html.split("<section id=drive>")[1].split("</section>")[0]
        assert "5000 changes: the first 10 and the last 5 are listed" in drive_section
        assert "<td>vin</td><td class=num>-1</td><td class=num>1</td><td class=num>2</td>" in drive_section
        assert "each of 1500 columns is shaded from the lowest to the highest value" in html
        assert len(html) < 5_000_000

    def test_mathml_derivations(self, report_html):
        section = report_html.split("<section id=derivations>")[1].split("</section>")[0]
        assert section.count("<h3>") == 2  # k1 closed, then k1 open
        assert section.count("<math ") >= 20
        # tau = ch * (rs + k1_on) * rm / (rs + k1_on + rm), as sympy's presentation printer writes it.
        assert "<mi>&#964;</mi><mo>=</mo>" in section  # tau =


    def test_many_configurations_derive_only_the_first(self):
        # A resistor ladder selected by four relays (invented): 16 configurations in the drive.
        fx = fo.Fixture()
        fx.voltage_source("vref", "ref", "gnd")
        fx.resistor("r_in", "ref", "x", "1k")
        fx.capacitor("c_x", "x", "gnd", "1n")
        for j in range(4):
            fx.switch(f"k{j}", "x", f"n{j}", r_on="1")
            fx.resistor(f"r{j}", f"n{j}", "gnd", f"{2 ** j}k")
        states = [[(code >> j) & 1 for code in range(16)] for j in range(4)]
        drive = fo.Drive(np.arange(16) * 1e-5, 16e-5, vref=np.ones(16), **{f"k{j}": states[j] for j in range(4)})
        section = Analysis(fx, drive).to_html().split("<section id=derivations>")[1].split("</section>")[0]
        assert section.count("<h3>") == report_tables.MAX_DERIVATIONS == 8
        assert "8 further configurations are not shown" in section


class TestSettlingAndCautions:
    def test_settling_table(self, report_html):
        section = report_html.split("<section id=settling>")[1].split("</section>")[0]
        assert section.count("<tr") == 1 + 3
        assert "±38.15 µV (½ LSB of 16 bits on 5 V)" in section

    def test_cautions_for_high_voltage(self):
        a = relay_analysis(drive=fo.Drive([0, "1m"], end="6m", vdac=[0, 400.0], k1=[1, 1]))
        html = a.to_html()
        section = html.split("<section id=cautions>")[1].split("</section>")[0]
        assert "class=caution" in section and "400" in section and "local codes" in section


class TestInBrowser:
    def test_offline_plot_and_math(self, tmp_path):
        sync_playwright = _browser_or_skip()
        hostile = "</script><script>document.title='pwned'</script>"
        path = relay_analysis(notes=hostile).report(tmp_path / "report.html")
        url = path.resolve().as_uri()
        with _opened_offline(sync_playwright, url, "canvas") as (page, requests, errors):
            canvases = page.locator("canvas").count()
            plot_box = page.locator("canvas").first.bounding_box()
            maths = page.locator("math").count()
            math_box = page.locator("math").first.bounding_box()
            title = page.title()
            os.makedirs("build", exist_ok=True)
            page.screenshot(path="build/report.png", full_page=True)
        assert requests == [url], requests  # nothing but the file itself: no network
        assert errors == []
        assert canvases >= 1 and plot_box["width"] > 300 and plot_box["height"] > 100
        assert maths >= 20 and math_box["width"] > 10 and math_box["height"] > 5
        assert title == "Relay and hold capacitor"


class TestHostileNamesStayText:
    """Every piece of user text in the report (title, notes, parts, nodes, probes, drive columns) stays text."""

    @pytest.fixture(scope="class")
    @staticmethod
    def page():
        from builders import hostile_analysis

        return hostile_analysis().to_html()

    def test_no_element_or_handler_from_user_text(self, page):
        from builders import assert_inert

        assert_inert(page)

    def test_the_names_are_shown_escaped(self, page):
        assert page.count("&lt;img src=x onerror=") >= 5

    def test_the_page_title_is_escaped(self, page):
        import re

        title = re.search(r"<title>(.*?)</title>", page, re.DOTALL).group(1)
        assert "&lt;img" in title and "<img" not in title

    def test_round_trip_through_the_report_keeps_the_names(self, page, tmp_path):
        from builders import HOSTILE

        path = tmp_path / "r.html"
        path.write_text(page, encoding="utf-8")
        again = fo.Analysis.load(path)
        assert again.fixture.part_map["r" + HOSTILE].name == "r" + HOSTILE
        from builders import assert_inert

        assert_inert(again.to_html())


#: Printable widths in CSS pixels (96 per inch) with the report's 12 mm page margins:
#: A4 is 210 mm wide, Letter 8.5 in (ISO 216 and ANSI paper sizes, common practice).
PRINTABLE_WIDTH = {"A4": (210 - 2 * 12) / 25.4 * 96, "Letter": 8.5 * 96 - 2 * 12 / 25.4 * 96}

#: Every box on the page, in the light DOM and in bokeh's shadow roots, that reaches past
#: the page's width; and every bokeh toolbar still shown.
_OVERFLOW = """() => {
  const width = document.documentElement.clientWidth;
  const over = [], toolbars = [];
  const walk = (root) => {
    for (const el of root.querySelectorAll('*')) {
      const box = el.getBoundingClientRect();
      if (box.width > 0 && box.height > 0 && (box.right > width + 0.5 || box.left < -0.5)) {
        over.push(`${el.tagName}.${el.className} ${Math.round(box.left)}..${Math.round(box.right)}`);
      }
      if (el.classList && el.classList.contains('bk-Toolbar') && getComputedStyle(el).visibility !== 'hidden') {
        toolbars.push(el.className);
      }
      if (el.shadowRoot) walk(el.shadowRoot);
    }
  };
  walk(document);
  return {width, scroll: document.documentElement.scrollWidth, over, toolbars};
}"""


class TestPrint:
    """The report prints on A4 and Letter with nothing cut (Chromium's print media and PDF)."""

    @pytest.mark.parametrize("paper", ["A4", "Letter"])
    @pytest.mark.parametrize("which", ["demo", "relay", "study"])
    def test_nothing_overflows_the_printable_width(self, tmp_path, paper, which):
        from builders import study_analysis

        from firstorder.cli import demo_analysis

        sync_playwright = _browser_or_skip()
        analysis = {"demo": demo_analysis, "relay": relay_analysis, "study": study_analysis}[which]()
        url = analysis.report(tmp_path / "report.html").resolve().as_uri()
        width = int(PRINTABLE_WIDTH[paper])
        with sync_playwright() as playwright:
            browser = playwright.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_FLAGS)
            try:
                # Laid out on screen first, as a reader opens it, then printed.
                page = browser.new_page(viewport={"width": 1100, "height": 900})
                page.goto(url)
                page.wait_for_selector("canvas", timeout=30_000)
                page.emulate_media(media="print")
                pdf = page.pdf(format=paper)
                os.makedirs("build", exist_ok=True)
                with open(f"build/report-{which}-{paper}.pdf", "wb") as out:
                    out.write(pdf)
                page.set_viewport_size({"width": width, "height": 1000})
                page.wait_for_timeout(500)
                found = page.evaluate(_OVERFLOW)
            finally:
                browser.close()
        assert pdf.startswith(b"%PDF") and pdf.count(b"/Type /Page") >= 2
        assert found["width"] == width and found["scroll"] <= width, found
        assert found["over"] == [], found["over"][:10]
        assert found["toolbars"] == []  # the plot tools are not printed


def _section(html: str, name: str) -> str:
    return html.split(f"<section id={name}>")[1].split("</section>")[0]


class TestToleranceSection:
    """A report of an analysis with a spread has a tolerance section of the Study's numbers."""

    @pytest.fixture(scope="class")
    @staticmethod
    def made():
        from builders import study_analysis

        analysis = study_analysis()
        return analysis, analysis.study(progress=False), analysis.to_html()

    def test_the_section_sits_after_the_settling_table(self, made):
        html = made[2]
        assert html.index("<section id=settling>") < html.index("<section id=tolerance>") \
            < html.index("<section id=cautions>")
        section = _section(html, "tolerance")
        for heading in ("Tolerance study", "Passing", "Per segment", "Worst segment", "Uncertainty budget",
                        "Worst unit"):
            assert heading in section

    def test_the_numbers_are_the_studys(self, made):
        analysis, study, html = made
        section = _section(html, "tolerance")
        passing = study.passing(analysis.tolerance, analysis.sample_delay)
        assert f"{passing.passing:,} of {passing.units:,} have every sample inside ({passing.fraction:.4%})" in section
        assert f"{passing.low:.4%} to {passing.high:.4%}" in section
        table = study.settling(analysis.tolerance, analysis.sample_delay)
        for k in range(len(table)):
            yield_cell = f"{table['yield'][k]:.2%}"
            worst = str(table["worst_unit"][k])
            assert f"<td class=num>{yield_cell}</td><td class=num>{worst}</td></tr>" in section
            nominal = report_tables.settling_cell("nominal_settle_time", table["nominal_settle_time"][k], "V")
            assert f"<td>{k}</td><td class=num>{fo.format_value(table['start'][k], 's', digits=5)}</td>" \
                   f"<td class=num>{nominal}</td>" in section
        for key in analysis.spread.keys:
            assert f"<td>{key}</td>" in section
        assert "0 to 50 °C" in section and "<td>units</td><td>400</td>" in section and "<td>seed</td><td>11</td>" in section

    def test_two_plots_in_the_section(self, made):
        from firstorder.report.figure import STUDY_ROOT

        section = made[2].split("<section id=tolerance>")[1].split("</section>")[0]
        assert section.count("<div class=plot>") == 2
        assert STUDY_ROOT in made[2]

    def test_the_report_loads_back_with_its_spread(self, made, tmp_path):
        analysis, _, html = made
        path = tmp_path / "r.html"
        path.write_text(html, encoding="utf-8")
        again = Analysis.load(path)
        assert again.spread == analysis.spread and again.study_settings == analysis.study_settings
        assert again.to_json() == analysis.to_json()

    def test_without_a_spread_there_is_no_section(self, report_html):
        assert "<section id=tolerance>" not in report_html and "Tolerance study" not in report_html

    def test_a_spread_without_a_tolerance_shows_the_spread_and_says_why_no_units_are_judged(self):
        from builders import study_analysis

        section = _section(study_analysis(tolerance=None).to_html(), "tolerance")
        assert "<td>k1.r_on</td>" in section and "No tolerance was given" in section


#: A hostile name a spread can carry (no "." in it, which a spread key reads as part.field).
HOSTILE_SPREAD = "<img src=x onerror=alert(1)>"


class TestHostileNamesInTheStudy:
    @pytest.fixture(scope="class")
    @staticmethod
    def analysis():
        fx = fo.Fixture()
        fx.voltage_source("v" + HOSTILE_SPREAD, "in", "gnd")
        fx.resistor("r" + HOSTILE_SPREAD, "in", "out", "1k")
        fx.capacitor("c" + HOSTILE_SPREAD, "out", "gnd", "1u")
        spread = fo.Spread({"r" + HOSTILE_SPREAD: "1%", "c" + HOSTILE_SPREAD: "10%",
                            "v" + HOSTILE_SPREAD + ".gain": "0.1%"}, temperature=(0, 40),
                           tempco={"c" + HOSTILE_SPREAD: "100ppm"})
        return Analysis(fx, fo.Drive([0, "5m"], end="10m", **{"v" + HOSTILE_SPREAD: [1.0, 0.0]}),
                        tolerance=fo.Tolerance.absolute("1m"), sample_delay="4m", spread=spread, units=50,
                        title="t" + HOSTILE_SPREAD)

    def test_no_element_from_the_names(self, analysis):
        from builders import assert_inert

        html = analysis.to_html()
        assert_inert(html, HOSTILE_SPREAD)
        section = _section(html, "tolerance")
        assert section.count("&lt;img src=x onerror=alert(1)&gt;") >= 6  # spread, budget and unit tables

    def test_names_with_spaces_load_back_with_their_spread(self, analysis, tmp_path):
        again = Analysis.load(analysis.report(tmp_path / "r.html"))
        assert again.spread == analysis.spread and again.spread.keys == analysis.spread.keys


class TestToleranceSectionInBrowser:
    def test_the_section_renders_offline(self, tmp_path):
        from builders import study_analysis

        sync_playwright = _browser_or_skip()
        path = study_analysis().report(tmp_path / "report.html")
        url = path.resolve().as_uri()
        with _opened_offline(sync_playwright, url, "#tolerance canvas") as (page, requests, errors):
            boxes = [page.locator("#tolerance div.plot").nth(i).bounding_box() for i in range(2)]
            os.makedirs("build/reportlot", exist_ok=True)
            page.locator("#tolerance").screenshot(path="build/reportlot/tolerance-section.png")
        assert requests == [url], requests
        assert errors == []
        assert all(box["width"] > 300 and box["height"] > 150 for box in boxes), boxes

"""The Bench in Jupyter Notebook 7 and in Voilà, in headless Chromium (Debian's), driven by Playwright.

JupyterLab has tests of its own (test_browser.py); here each other front end an
engineer opens a notebook with serves a small notebook that builds a Bench of an
invented fixture, from a temporary folder on 127.0.0.1 (a free port, a random
token).  Notebook 7 runs every cell from its Run menu; Voilà runs the notebook
when the page is asked for and shows the outputs only (a colleague without
Python skills opens the Bench as a page).  In each:

* the Bench renders: its part fields and both plots' canvases, BokehJS from inline
  resources (no request leaves the machine from the Bench);
* a typed part value redraws: the time constant in the status line and the
  response curve BokehJS draws follow the new value (both against the handbook
  formula for the RC low-pass);
* a click on a segment of the response plot reaches Python: the Derivation tab
  shows that segment;
* the Export tab writes the report into the notebook's folder and hands it to the
  browser as a download.

Screenshots go to build/frontends/.  Skipped without chromium or Playwright,
failed instead with FIRSTORDER_REQUIRE_BROWSER=1 (set by .ci/run).
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import re
import secrets
import sys
import urllib.request
from pathlib import Path

import pytest

from browser_helpers import (CHROMIUM_ARGS, CURVE_DATA, LOCAL, PLOTS_DRAWN, RESPONSE_FRAME, chromium, free_port,
                             jupyter_env, port_open, server, write_notebook)

ROOT = Path(__file__).resolve().parents[2]
SHOTS = ROOT / "build" / "frontends"
WAIT_MS = 120_000
BIN = Path(sys.executable).parent

#: An invented channel: a reference DAC behind a 3.3 kΩ filter resistor and a mux relay
#: onto a 47 nF filter capacitor, read by an ADC input of 1 MΩ.  Segment 1 holds (relay open).
BENCH_CELL = """import firstorder as fo

fx = fo.Fixture()
fx.voltage_source("vref", "dac", "gnd")
fx.resistor("rf", "dac", "m", "3.3k")
fx.switch("mux", "m", "f", r_on="1.5")
fx.capacitor("cf", "f", "gnd", "47n")
fx.resistor("radc", "f", "gnd", "1M")
drive = fo.Drive([0, "1m", "2m", "3m"], end="4m", vref=[1.5, 1.5, 0.6, 0.0], mux=[1, 0, 1, 1])
bench = fo.Bench(fx, drive, tolerance=fo.Tolerance.absolute("1m"), sample_delay="0.4m")
bench
"""
R_ON, C_F, R_ADC, V_REF = 1.5, 47e-9, 1e6, 1.5


def _closed_tau_and_gain(rf: float) -> tuple[float, float]:
    """Handbook RC low-pass behind a divider (Thevenin): tau = C (Rs || Radc), gain Radc / (Rs + Radc)."""
    series = rf + R_ON
    return C_F * series * R_ADC / (series + R_ADC), R_ADC / (series + R_ADC)


def _notebook7(root: Path, name: str):
    port, token = free_port(), secrets.token_hex(16)
    command = [str(BIN / "jupyter"), "notebook", "--no-browser", "--ServerApp.ip=127.0.0.1",
               f"--ServerApp.port={port}", "--ServerApp.port_retries=0", f"--IdentityProvider.token={token}",
               f"--ServerApp.root_dir={root}"]
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        command.append("--ServerApp.allow_root=True")

    def ready() -> bool:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/api/status?token={token}", timeout=2) as reply:
            return "started" in json.load(reply)

    return command, ready, f"http://127.0.0.1:{port}/notebooks/{name}?token={token}"


def _voila(root: Path, name: str):
    port, token = free_port(), secrets.token_hex(16)
    command = [str(BIN / "voila"), "--no-browser", "--Voila.ip=127.0.0.1", f"--port={port}",
               "--Voila.port_retries=0", f"--token={token}", "--show_tracebacks=True", str(root / name)]
    # Voilà runs the notebook for each page asked for: readiness is the port answering.
    return command, lambda: port_open(port), f"http://127.0.0.1:{port}/?token={token}"


FRONT_ENDS = {"notebook7": _notebook7, "voila": _voila}


@contextlib.contextmanager
def _on_failure_shot(page, name: str):
    try:
        yield
    except BaseException:
        with contextlib.suppress(Exception):
            page.screenshot(path=str(SHOTS / f"{name}-failure.png"), full_page=True)
        raise


def _run_all_in_notebook7(page) -> None:
    """Notebook 7's Run menu, Run All Cells (again if the click came before the kernel was connected)."""
    from playwright.sync_api import TimeoutError as PlaywrightTimeout

    page.wait_for_selector(".jp-Notebook .jp-Cell", timeout=WAIT_MS)
    for _ in range(4):
        page.get_by_role("menuitem", name="Run", exact=True).click()
        page.get_by_role("menuitem", name="Run All Cells", exact=True).click()
        try:
            page.wait_for_function(
                "() => [...document.querySelectorAll('.jp-InputPrompt')].some(p => /\\[(\\*|\\d+)\\]/.test(p.textContent))",
                timeout=15_000)
            return
        except PlaywrightTimeout:
            continue
    raise AssertionError("Notebook 7 did not run the cells from Run > Run All Cells")


def _dismiss_news(page) -> None:
    for label in ("No", "Yes"):  # the question about Jupyter news; either answer closes it
        news = page.locator(".jp-toast-button", has_text=label)
        if news.count():
            news.first.click()
            return


@pytest.fixture(scope="module", params=sorted(FRONT_ENDS))
def opened(request, tmp_path_factory):
    """The Bench notebook open and run in one front end: yields (name, page, notes)."""
    from playwright.sync_api import sync_playwright

    name = request.param
    browser_path = chromium()
    root = tmp_path_factory.mktemp(name)
    home = tmp_path_factory.mktemp(f"{name}-home")
    write_notebook(root / "channel_filter.ipynb", BENCH_CELL)
    command, ready, url = FRONT_ENDS[name](root, "channel_filter.ipynb")
    SHOTS.mkdir(parents=True, exist_ok=True)
    with server(command, cwd=root, env=jupyter_env(home, ROOT), log=SHOTS / f"{name}-server.log", ready=ready), \
            sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=browser_path, args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1100})
            notes = {"errors": [], "blocked": [], "console": [], "root": root}
            page.on("pageerror", lambda error: notes["errors"].append(f"{error}\n{error.stack}"))
            page.on("console", lambda message: notes["console"].append(f"{message.type}: {message.text}"))
            # Nothing may come from the network: refuse (and record) any request off this machine.
            page.route("**/*", lambda route: route.continue_() if route.request.url.startswith(LOCAL) else (
                notes["blocked"].append(route.request.url), route.abort()))
            with _on_failure_shot(page, name):
                page.goto(url, timeout=WAIT_MS)
                if name == "notebook7":
                    _run_all_in_notebook7(page)
                page.locator(".fo-bench canvas").first.wait_for(timeout=WAIT_MS)
                page.wait_for_function(PLOTS_DRAWN, timeout=WAIT_MS)
                _dismiss_news(page)
                page.wait_for_timeout(1000)  # a frame or two for the plots to take their width
            yield name, page, notes
        finally:
            (SHOTS / f"{name}-console.log").write_text("\n".join(notes["console"] + notes["blocked"] + notes["errors"]),
                                                       encoding="utf-8")
            browser.close()


def _ours(errors: list[str]) -> list[str]:
    """The page errors but one of Notebook 7's own: its keyboard-shortcut settings code reads
    the schema of a plugin it holds no settings for, on opening a plain notebook too (no Bench)."""
    def notebook7_own(error: str) -> bool:
        lines = error.splitlines()
        top = next((line for line in lines if line.strip().startswith("at ")), "")
        return "reading 'schema'" in lines[0] and "/static/notebook/notebook_core." in top

    return [error for error in errors if not notebook7_own(error)]


def _tau_shown(page) -> float:
    """The shortest time constant in the status line under the plot, in seconds."""
    from quantiphy import Quantity

    text = page.locator(".fo-bench .fo-info").inner_text()
    found = re.search(r"τ ([^ ]+ ?[a-zµμ]*s)\b", text)
    assert found, text
    return float(Quantity(found.group(1)))


class TestBenchInOtherFrontEnds:
    def test_renders(self, opened):
        name, page, notes = opened
        with _on_failure_shot(page, name):
            page.locator(".fo-bench").screenshot(path=str(SHOTS / f"{name}-bench.png"))
            page.screenshot(path=str(SHOTS / f"{name}-page.png"))
            assert page.locator(".fo-bench [class*='fo-part-'] input").count() == 5  # rf, mux on/off, cf, radc
            wide = [box for box in (c.bounding_box() for c in page.locator(".fo-bench canvas").all())
                    if box and box["width"] > 300 and box["height"] > 100]
            assert len(wide) >= 2, wide  # the drive plot and the response plot
            frame = page.evaluate(RESPONSE_FRAME)
            assert frame["width"] > 300 and frame["height"] > 100, frame
            ours = [url for url in notes["blocked"] if "fontawesome" not in url]
            assert not ours, f"requests left the machine: {ours[:5]}"
            assert not _ours(notes["errors"]), notes["errors"]

    def test_typed_part_value_redraws(self, opened):
        name, page, notes = opened
        with _on_failure_shot(page, name):
            field = page.locator(".fo-bench .fo-part-rf input")
            old = field.input_value().replace(" ", "").rstrip("Ω")
            typed, rf = ("10k", 10e3) if old != "10k" else ("2.2k", 2.2e3)
            info = page.locator(".fo-bench .fo-info").inner_text()
            before = page.evaluate(CURVE_DATA, "total")
            field.fill(typed)
            field.press("Enter")
            page.wait_for_function("(old) => document.querySelector('.fo-bench .fo-info').innerText !== old",
                                   arg=info, timeout=60_000)
            page.wait_for_function(f"(old) => JSON.stringify(({CURVE_DATA})('total').y) !== JSON.stringify(old)",
                                   arg=before["y"], timeout=60_000)
            page.wait_for_timeout(500)
            page.locator(".fo-bench").screenshot(path=str(SHOTS / f"{name}-typed.png"))
            tau, gain = _closed_tau_and_gain(rf)
            # The status line rounds to a few digits.
            assert _tau_shown(page) == pytest.approx(tau, rel=2e-3)
            after = page.evaluate(CURVE_DATA, "total")
            # Segment 0 (relay closed, 1.5 V from 0 V) as BokehJS draws it, against the handbook
            # step response v(t) = V gain (1 - exp(-t / tau)).
            points = [(t, y) for t, y in zip(after["t"], after["y"]) if t < 1e-3 * (1 - 1e-9)]
            assert len(points) > 20, after
            for t, y in points:
                assert y == pytest.approx(V_REF * gain * (1 - math.exp(-t / tau)), rel=1e-9, abs=1e-12), t
            assert not _ours(notes["errors"]), notes["errors"]

    def test_clicked_segment_reaches_python(self, opened):
        name, page, notes = opened
        with _on_failure_shot(page, name):
            page.locator(".fo-bench .lm-TabBar-tab", has_text="Derivation").first.click()
            heading = page.locator(".fo-bench h4", has_text="Segment")
            heading.first.wait_for(timeout=60_000)
            assert heading.first.inner_text().startswith("Segment 0:")
            page.locator(".fo-bench canvas").first.scroll_into_view_if_needed()
            frame = page.evaluate(RESPONSE_FRAME)
            # Segment 1 lasts from 1 ms to 2 ms: click at 1.5 ms, by position (bokeh draws on
            # layered canvases in a shadow DOM; there is no element to click).
            x = frame["x"] + frame["width"] * (1.5e-3 - frame["start"]) / (frame["end"] - frame["start"])
            page.mouse.click(x, frame["y"] + frame["height"] * 0.5)
            page.locator(".fo-bench h4", has_text="Segment 1:").first.wait_for(timeout=60_000)
            page.wait_for_timeout(1000)  # the typeset maths
            page.locator(".fo-bench").screenshot(path=str(SHOTS / f"{name}-clicked.png"))
            panel = page.locator(".fo-bench .widget-htmlmath").first.inner_text()
            assert "mux open" in panel, panel  # segment 1 holds: its own configuration's derivation
            assert not _ours(notes["errors"]), notes["errors"]

    def test_export_writes_the_report_and_hands_it_to_the_browser(self, opened):
        import firstorder as fo

        name, page, notes = opened
        with _on_failure_shot(page, name):
            page.locator(".fo-bench .lm-TabBar-tab", has_text="Export").first.click()
            page.locator(".fo-bench button", has_text="Report (HTML)").click()
            link = page.locator(".fo-bench a.fo-download")
            link.wait_for(timeout=60_000)
            written = Path(page.locator(".fo-bench .fo-written").inner_text())
            # The kernel runs in the notebook's folder, on the machine that serves the page.
            assert written == notes["root"] / "bench_report.html", written
            page.locator(".fo-bench").screenshot(path=str(SHOTS / f"{name}-export.png"))
            with page.expect_download(timeout=60_000) as download:
                link.click()
            saved = SHOTS / f"{name}-report.html"
            download.value.save_as(saved)
            assert download.value.suggested_filename == "bench_report.html"
            assert saved.read_bytes() == written.read_bytes()
            analysis = fo.Analysis.load(saved)  # the report carries its analysis
            assert analysis.sample_delay == "0.4m" and len(analysis.drive) == 4
            assert not _ours(notes["errors"]), notes["errors"]

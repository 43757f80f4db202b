"""The Bench in a real browser: JupyterLab + headless Chromium (Debian's), driven by Playwright.

Python-side tests cannot see what the engineer sees: a bokeh view renders only
after BokehJS is in the page, loaded from inline resources since nothing may
come from the network.  This test opens the quickstart notebook in JupyterLab,
runs every cell, and checks the plot canvas and the part fields appear and
that typing a part value changes the plot.  Screenshots go to build/.

Without chromium (or Playwright) it is skipped, saying why; with
FIRSTORDER_REQUIRE_BROWSER=1 (set by .ci/run) it must run and fails instead.
"""

from __future__ import annotations

import contextlib
import json
import os
import secrets
import shutil
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

from browser_helpers import CHROMIUM_ARGS
from browser_helpers import chromium as _chromium
from browser_helpers import free_port as _free_port

ROOT = Path(__file__).resolve().parents[2]
BUILD = ROOT / "build"
#: The notebook that ends with a Bench (the tour stands in until the quickstart has one).
NOTEBOOKS = ("01_quickstart.ipynb", "06_bench_tour.ipynb")
STARTUP_SECONDS = 90
RUN_SECONDS = int(os.environ.get('FIRSTORDER_BROWSER_SECONDS', 180))


def _notebook_with_bench() -> Path | None:
    for name in NOTEBOOKS:
        path = ROOT / "notebooks" / name
        if path.exists() and "fo.Bench(" in path.read_text(encoding="utf-8"):
            return path
    return None


@pytest.fixture(scope="module")
def lab(tmp_path_factory):
    """JupyterLab on 127.0.0.1, a free port and a random token, serving a copy of notebooks/."""
    chromium = _chromium()
    notebook = _notebook_with_bench()
    if notebook is None:
        pytest.fail(f"no notebook among {NOTEBOOKS} shows a Bench")
    root = tmp_path_factory.mktemp("lab")
    # A copy: JupyterLab saves while it runs, and the repository's notebooks must not change.
    shutil.copytree(ROOT / "notebooks", root / "notebooks")
    home = tmp_path_factory.mktemp("jupyter-home")
    port, token = _free_port(), secrets.token_hex(16)
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""),
               JUPYTER_CONFIG_DIR=str(home / "config"), JUPYTER_RUNTIME_DIR=str(home / "runtime"),
               JUPYTERLAB_SETTINGS_DIR=str(home / "settings"), JUPYTERLAB_WORKSPACES_DIR=str(home / "workspaces"),
               IPYTHONDIR=str(home / "ipython"))
    jupyter = Path(sys.executable).parent / "jupyter"
    command = [str(jupyter), "lab", "--no-browser", "--ServerApp.ip=127.0.0.1", f"--ServerApp.port={port}",
               "--ServerApp.port_retries=0", f"--IdentityProvider.token={token}", f"--ServerApp.root_dir={root}",
               "--LabApp.news_url=None", "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate"]
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        command.append("--ServerApp.allow_root=True")
    BUILD.mkdir(exist_ok=True)
    log = open(BUILD / "browser-jupyterlab.log", "w")
    server = subprocess.Popen(command, env=env, stdout=log, stderr=subprocess.STDOUT, cwd=root)
    try:
        deadline = time.monotonic() + STARTUP_SECONDS
        while True:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/api/status?token={token}", timeout=2) as reply:
                    json.load(reply)
                break
            except OSError:
                if server.poll() is not None or time.monotonic() > deadline:
                    pytest.fail(f"JupyterLab did not start; see {BUILD / 'browser-jupyterlab.log'}")
                time.sleep(0.5)
        yield {"url": f"http://127.0.0.1:{port}", "token": token, "chromium": chromium,
               "notebook": f"notebooks/{notebook.name}", "root": root}
    finally:
        server.terminate()
        try:
            server.wait(timeout=20)
        except subprocess.TimeoutExpired:
            server.kill()
        log.close()


#: Page position of the drag handle of row 1 (BokehJS's own view of the handle renderer).
_HANDLE_POSITION = """() => {
    const view = Bokeh.index.query_one((v) => v.model.name === "firstorder-drive-handles");
    const data = view.model.data_source.data;
    const sx = view.coordinates.x_scale.compute(data.get ? data.get("t")[1] : data.t[1]);
    const sy = view.coordinates.y_scale.compute(data.get ? data.get("y")[1] : data.y[1]);
    const box = view.parent.canvas_view.el.getBoundingClientRect();
    return {x: box.left + sx, y: box.top + sy};
}"""


def _open_and_run_all(page, lab, notebook: str) -> None:
    """Open `notebook` in JupyterLab and run every cell."""
    from playwright.sync_api import TimeoutError as PlaywrightTimeout

    # A workspace of its own, reset: no tabs restored from an earlier test in the same server.
    workspace = Path(notebook).stem
    page.goto(f"{lab['url']}/lab/workspaces/{workspace}/tree/{notebook}?reset&token={lab['token']}")
    page.wait_for_selector(".jp-Notebook .jp-Cell", timeout=RUN_SECONDS * 1000)
    # A fresh JupyterLab may ask which kernel to start; the notebook's own is preselected.
    select = page.locator(".jp-Dialog button.jp-mod-accept")
    try:
        select.wait_for(timeout=5000)
        select.click()
    except PlaywrightTimeout:
        pass
    page.wait_for_selector("#jp-main-statusbar :text('Idle')", timeout=RUN_SECONDS * 1000)
    for _ in range(3):  # a click while the kernel still connects can be lost: try again
        page.get_by_role("menuitem", name="Run", exact=True).click()
        page.get_by_role("menuitem", name="Run All Cells", exact=True).click()
        try:
            page.wait_for_function(
                "() => [...document.querySelectorAll('.jp-InputPrompt')].some(p => /\\[(\\*|\\d+)\\]/.test(p.textContent))",
                timeout=20_000)
            break
        except PlaywrightTimeout:
            continue
    for label in ("No", "Yes"):  # JupyterLab's question about news; either answer closes it
        news = page.locator(".jp-toast-button", has_text=label)
        if news.count():
            news.first.click()
            break


#: A dashboard of our own: the Bench inside another widget, displayed as that widget.
_NESTED_CELL = """import ipywidgets as widgets
import firstorder as fo

fx = fo.Fixture.rc(r="2.2k", c="470n")
drive = fo.Drive.steps([(0, 0.0), ("2m", 3.3), ("6m", 1.2)], end="10m")
widgets.VBox([widgets.HTML("<b>Channel 3 input filter</b>"), fo.Bench(fx, drive)])
"""


#: A drive with far more changes than the plot has pixels: the Bench draws min/max bands.
_CROWDED_CELL = """import numpy as np
import firstorder as fo

rng = np.random.default_rng(7)
times = np.concatenate([[0.0], np.cumsum(rng.uniform(2e-6, 8e-6, 19_999))])
drive = fo.Drive(times, end=float(times[-1]) + 1e-5, vin=rng.choice([0.0, 5.0], 20_000))
fo.Bench(fo.Fixture.rc(r="1k", c="10n"), drive)
"""


def _write_notebook(lab, name: str, source: str) -> str:
    """A one-cell notebook in the served folder; its path for JupyterLab."""
    notebook = {"cells": [{"cell_type": "code", "execution_count": None, "id": "cell", "metadata": {},
                           "outputs": [], "source": source}],
                "metadata": {"kernelspec": {"display_name": "Python 3", "language": "python", "name": "python3"}},
                "nbformat": 4, "nbformat_minor": 5}
    (lab["root"] / "notebooks" / name).write_text(json.dumps(notebook), encoding="utf-8")
    return f"notebooks/{name}"


@contextlib.contextmanager
def _notebook_page(lab, name: str, source: str, viewport: tuple[int, int] = (1500, 1300), **context):
    """A one-cell notebook, run in JupyterLab in a fresh Chromium page: yields the page and
    its page errors; on failure a full-page screenshot goes to build/."""
    from playwright.sync_api import sync_playwright

    notebook = _write_notebook(lab, name, source)
    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=lab["chromium"], args=CHROMIUM_ARGS)
        page = browser.new_page(viewport={"width": viewport[0], "height": viewport[1]}, **context)
        messages: list[str] = []
        page.on("pageerror", lambda error: messages.append(f"pageerror: {error}"))
        try:
            _open_and_run_all(page, lab, notebook)
            yield page, messages
        except BaseException:
            page.screenshot(path=str(BUILD / f"{Path(name).stem}-failure.png"), full_page=True)
            raise
        finally:
            browser.close()


class TestBenchInBrowser:
    def test_renders_and_follows_a_part_edit(self, lab):
        from playwright.sync_api import sync_playwright

        with sync_playwright() as playwright:
            browser = playwright.chromium.launch(executable_path=lab["chromium"], args=CHROMIUM_ARGS)
            try:
                page = browser.new_page(viewport={"width": 1500, "height": 1300})
                messages: list[str] = []
                page.on("console", lambda message: messages.append(f"{message.type}: {message.text}"))
                page.on("pageerror", lambda error: messages.append(f"pageerror: {error}"))
                blocked: list[str] = []
                # Nothing may come from the network: refuse (and record) any request off this machine.
                page.route("**/*", lambda route: route.continue_() if route.request.url.startswith(
                    ("http://127.0.0.1", "ws://127.0.0.1", "data:", "blob:")) else (
                    blocked.append(route.request.url), route.abort()))
                _open_and_run_all(page, lab, lab["notebook"])
                field = page.locator("[class*='fo-part-'] input").first
                field.wait_for(timeout=RUN_SECONDS * 1000)
                canvas = page.locator(".jp-OutputArea-output canvas").first
                canvas.wait_for(timeout=RUN_SECONDS * 1000)
                page.wait_for_timeout(2500)
                bench = page.locator(".jp-OutputArea-output:has(canvas)").first
                bench.scroll_into_view_if_needed()
                page.wait_for_timeout(500)
                bench.screenshot(path=str(BUILD / "bench-browser-before.png"))
                def plots() -> bytes:
                    boxes = [box for box in (c.bounding_box() for c in page.locator(
                        ".jp-OutputArea-output canvas").all()) if box and box["width"] > 200]
                    left = min(b["x"] for b in boxes)
                    top = min(b["y"] for b in boxes)
                    right = max(b["x"] + b["width"] for b in boxes)
                    bottom = max(b["y"] + b["height"] for b in boxes)
                    return page.screenshot(clip={"x": left, "y": top, "width": right - left, "height": bottom - top})

                before = plots()

                value = field.input_value()
                field.fill("4.7k" if value.replace(" ", "") not in ("4.7kΩ", "4.7k") else "10k")
                field.press("Enter")
                changed = False
                for _ in range(40):
                    page.wait_for_timeout(250)
                    if plots() != before:
                        changed = True
                        break
                bench.screenshot(path=str(BUILD / "bench-browser-after.png"))
                # Drag the handle of the change in row 1 upward: the level there rises.
                cells_before = page.locator(".jp-OutputArea-output .slick-cell").all_inner_texts()
                handle = page.evaluate(_HANDLE_POSITION)
                page.mouse.move(handle["x"], handle["y"])
                page.mouse.down()
                page.mouse.move(handle["x"], handle["y"] - 30, steps=8)
                page.mouse.up()
                moved = False
                for _ in range(40):
                    page.wait_for_timeout(250)
                    if page.locator(".jp-OutputArea-output .slick-cell").all_inner_texts() != cells_before:
                        moved = True
                        break
                bench.screenshot(path=str(BUILD / "bench-browser-dragged.png"))
                assert moved, "dragging a handle on the drive plot did not change the drive table"
                # The derivation renders as typeset math (MathJax ships with JupyterLab, no network).
                page.locator(".lm-TabBar-tab", has_text="Derivation").first.click()
                page.locator(".jp-OutputArea-output mjx-container").first.wait_for(timeout=60_000)
                page.wait_for_timeout(1000)
                page.locator(".jp-OutputArea-output .widget-tab").first.screenshot(
                    path=str(BUILD / "bench-browser-derivation.png"))
                (BUILD / "bench-browser-console.log").write_text("\n".join(messages + blocked), encoding="utf-8")
                assert page.locator("[class*='fo-part-'] input").count() >= 2
                assert changed, "the response plot did not change after a new part value was typed"
                assert not blocked, f"requests left the machine: {blocked[:5]}"
                assert not [m for m in messages if m.startswith("pageerror")], messages
            except BaseException:
                page.screenshot(path=str(BUILD / "bench-browser-failure.png"), full_page=True)
                (BUILD / "bench-browser-console.log").write_text("\n".join(messages + blocked), encoding="utf-8")
                raise
            finally:
                browser.close()

    def test_renders_inside_another_widget(self, lab):
        with _notebook_page(lab, "nested_bench.ipynb", _NESTED_CELL) as (page, messages):
            page.locator("[class*='fo-part-'] input").first.wait_for(timeout=RUN_SECONDS * 1000)
            # The plots: BokehJS must have reached the page although the Bench was not
            # displayed itself, and its views must show the data set before they existed.
            page.locator(".jp-OutputArea-output canvas").first.wait_for(timeout=60_000)
            page.wait_for_timeout(2500)
            page.locator(".jp-OutputArea-output:has(canvas)").first.screenshot(
                path=str(BUILD / "bench-browser-nested.png"))
            assert not messages, messages

    def test_bands_of_a_crowded_drive_answer_the_pointer(self, lab):
        with _notebook_page(lab, "crowded_bench.ipynb", _CROWDED_CELL) as (page, _):
            page.locator(".jp-OutputArea-output canvas").first.wait_for(timeout=RUN_SECONDS * 1000)
            page.wait_for_timeout(2500)
            found = False
            # Sweep the pointer across the middle of each plot until a band's tooltip shows.
            for canvas in page.locator(".jp-OutputArea-output canvas").all():
                box = canvas.bounding_box()
                if not box or box["width"] < 200:
                    continue
                for fraction in (0.3, 0.45, 0.6):
                    page.mouse.move(box["x"] + box["width"] * fraction, box["y"] + box["height"] * 0.5)
                    page.wait_for_timeout(400)
                    if page.get_by_text("lowest").count():
                        found = True
                        break
                if found:
                    break
            page.locator(".jp-OutputArea-output:has(canvas)").first.screenshot(
                path=str(BUILD / "bench-browser-band-hover.png"))
            assert found, "no min/max band answered the pointer with its lowest and highest value"


#: A part, source, switch, probe and node named to run script if they reach the page as HTML.
_HOSTILE = '<img src=x onerror="window.__pwned=1">'
# The resistor and the probe carry the name: legends and axes (drawn by bokeh as text)
# would otherwise squeeze the plots too narrow to click (the Python tests cover every name).
_HOSTILE_CELL = f"""import firstorder as fo

H = {_HOSTILE!r}
fx = fo.Fixture()
fx.voltage_source("vin", "in", "gnd")
fx.switch("k1", "in", "mid" + H, r_on="10")
fx.resistor("r" + H, "mid" + H, "out", "1k")
fx.capacitor("c", "out", "gnd", "1u")
fx.probe("p" + H, through="r" + H)
drive = fo.Drive([0, "1m", "3m"], end="5m", vin=[0, 1, 1], k1=[1, 1, 0])
# Through a file, as a colleague's analysis would arrive.
fo.Analysis(fx, drive, tolerance=fo.Tolerance.absolute("1m")).save("hostile.json")
loaded = fo.Analysis.load("hostile.json")
fo.Bench(loaded.fixture, loaded.drive, tolerance=loaded.tolerance)
"""


#: How many elements under `selector` are <img> or carry an on... handler attribute.
_HANDLER_COUNT = """(selector) => [...document.querySelectorAll(selector + ' *')].filter(
    (e) => e.tagName === 'IMG' || [...e.attributes].some((a) => a.name.toLowerCase().startsWith('on'))).length"""


def _wide_canvases(page, within: str = "") -> list[dict]:
    boxes = [c.bounding_box() for c in page.locator(f"{within} canvas").all()]
    return [box for box in boxes if box and box["width"] > 200 and box["height"] > 100]


class TestHostileNamesInBrowser:
    def test_bench_clicked_segment_runs_no_injected_handler(self, lab):
        from playwright.sync_api import TimeoutError as PlaywrightTimeout

        with _notebook_page(lab, "hostile_bench.ipynb", _HOSTILE_CELL) as (page, messages):
            page.locator(".jp-OutputArea-output canvas").first.wait_for(timeout=RUN_SECONDS * 1000)
            page.wait_for_timeout(2500)
            page.locator(".lm-TabBar-tab", has_text="Derivation").first.click()
            page.locator(".jp-OutputArea-output mjx-container").first.wait_for(timeout=60_000)
            # Click segment 1 (1 ms to 3 ms) on the response plot, the tallest canvas, by position:
            # bokeh draws on layered canvases in a shadow DOM, so there is no element to click.
            box = max(_wide_canvases(page, ".jp-OutputArea-output"), key=lambda b: b["height"])
            page.mouse.move(box["x"] + box["width"] * 0.45, box["y"] + box["height"] * 0.5)
            page.mouse.down()
            page.wait_for_timeout(80)
            page.mouse.up()
            selected = page.locator(".jp-OutputArea-output h4", has_text="Segment 1")
            try:
                selected.first.wait_for(timeout=10_000)
            except PlaywrightTimeout:  # or pick the segment's row in the drive table
                page.locator(".lm-TabBar-tab", has_text="Drive table").first.click()
                page.locator(".jp-OutputArea-output .slick-row").nth(1).locator(".slick-cell").first.click()
                page.wait_for_timeout(1000)
                page.locator(".lm-TabBar-tab", has_text="Derivation").first.click()
                selected.first.wait_for(timeout=30_000)
            page.wait_for_timeout(1500)
            heading = page.locator(".jp-OutputArea-output h4", has_text="Segment").first.inner_text()
            panel = page.locator(".jp-OutputArea-output .widget-htmlmath").first.inner_text()
            page.locator(".jp-OutputArea-output:has(canvas)").first.screenshot(
                path=str(BUILD / "bench-browser-hostile.png"))
            assert page.evaluate("() => window.__pwned") is None, "an injected onerror handler ran"
            # Before the fix the derivation panel held five such elements (innerHTML from HTMLMath).
            assert page.evaluate(_HANDLER_COUNT, ".jp-OutputArea-output") == 0, "user text became elements"
            assert heading.startswith("Segment 1:"), heading
            assert "onerror" in panel, "the name should show as text in the derivation"
            assert not messages, messages  # a name with spaces once broke a field's CSS class

    def test_report_offline_runs_no_injected_handler(self, tmp_path):
        from playwright.sync_api import sync_playwright

        chromium = _chromium()
        from builders import hostile_analysis

        path = hostile_analysis().report(tmp_path / "hostile.html")
        with sync_playwright() as playwright:
            browser = playwright.chromium.launch(executable_path=chromium, args=CHROMIUM_ARGS)
            try:
                page = browser.new_page(viewport={"width": 1300, "height": 1200})
                blocked: list[str] = []
                page.route("**/*", lambda route: route.continue_() if route.request.url.startswith(
                    ("file://", "data:", "blob:")) else (blocked.append(route.request.url), route.abort()))
                page.goto(path.as_uri())
                page.locator("canvas").first.wait_for(timeout=60_000)
                page.wait_for_timeout(1500)
                for box in _wide_canvases(page)[:3]:
                    for fraction in (0.3, 0.6, 0.95):  # the plot, then its legend on the right
                        page.mouse.move(box["x"] + box["width"] * fraction, box["y"] + box["height"] * 0.4)
                        page.mouse.click(box["x"] + box["width"] * fraction, box["y"] + box["height"] * 0.4)
                        page.wait_for_timeout(300)
                page.screenshot(path=str(BUILD / "report-browser-hostile.png"), full_page=True)
                assert page.evaluate("() => window.__pwned") is None, "an injected onerror handler ran"
                assert page.evaluate(_HANDLER_COUNT, "body") == 0, "user text became elements"
                assert "onerror" in page.locator("#parts").inner_text()
                assert not blocked, blocked[:5]
            finally:
                browser.close()


# -- the Bench as an engineer uses it: layout, clicks, zooms, undo, export -------------------------
#: A switched fixture with a tolerance and a sample delay: every legend entry and mark drawn.
_TOUR_CELL = """import firstorder as fo

fx = fo.Fixture()
fx.voltage_source("vdac", "drv", "gnd")
fx.resistor("rs", "drv", "a", "1k")
fx.switch("k1", "a", "b", r_on="0.2")
fx.capacitor("ch", "b", "gnd", "100n")
fx.resistor("rin", "b", "gnd", "10M")
fx.probe("i_rs", through="rs")
drive = fo.Drive([0, "1m", "2m", "3m"], end="5m", vdac=[0, 2.5, 2.5, -1.2], k1=[1, 1, 0, 1])
bench = fo.Bench(fx, drive, tolerance=fo.Tolerance.lsb(bits=16, span=5.0), sample_delay="0.8m")
bench.overlays["natural"].value = True
bench
"""

#: 10,000 changes: drawn as min/max bands until zoomed in.
_LONG_CELL = """import numpy as np
import firstorder as fo

rng = np.random.default_rng(3)
times = np.arange(10_000) * 1e-4
drive = fo.Drive(times, end=1.0, vin=rng.choice([0.0, 5.0], 10_000))
bench = fo.Bench(fo.Fixture.rc(r="1k", c="10n"), drive)
bench
"""

#: Every element of the Bench (shadow roots too) that reaches past the output area, but for
#: what a scrolling box inside the Bench holds (the user scrolls to it): a part cut off by a
#: box that hides its overflow counts, as it is as lost as one past the edge.
_OUTSIDE = """() => {
    const bench = document.querySelector('.fo-bench');
    const area = bench.closest('.jp-OutputArea-output').getBoundingClientRect();
    const out = [];
    const visit = (root) => {
        for (const el of root.querySelectorAll('*')) {
            if (el.shadowRoot) visit(el.shadowRoot);
            let r = el.getBoundingClientRect();
            if (r.width < 1 || r.height < 1) continue;
            const own = getComputedStyle(el).overflowX;
            // A box inside the Bench that must be scrolled sideways to see all of it (a drive
            // table with many columns may: its rows are data, not layout).
            if ((own === 'auto' || own === 'scroll') && el.scrollWidth > el.clientWidth + 1
                    && !el.classList.contains('slick-viewport')) {
                out.push(`scrolls: ${el.tagName.toLowerCase()}.${[...el.classList].join('.')} ${el.scrollWidth} > ${el.clientWidth}`);
            }
            let left = r.left, right = r.right;
            for (let a = el.parentNode || el.host; a && a !== bench; a = a.parentNode || a.host) {
                if (!(a instanceof Element)) continue;
                const style = getComputedStyle(a);
                if (style.overflowX === 'auto' || style.overflowX === 'scroll') {
                    const c = a.getBoundingClientRect();
                    left = Math.max(left, c.left); right = Math.min(right, c.right);
                }
            }
            if (right - left < 1) continue;
            if (right > area.right + 1 || left < area.left - 1) {
                out.push(`${el.tagName.toLowerCase()}.${[...el.classList].join('.')} ${left.toFixed(0)}..${right.toFixed(0)}`);
            }
        }
    };
    visit(bench);
    return {area: {left: area.left, right: area.right, width: area.width}, outside: out.slice(0, 12),
            count: out.length};
}"""

#: The plot toolbars and legends (BokehJS's own views), in page coordinates: of the plots on
#: screen (a plot in a tab not shown, or a study's plot not drawn, is not displayed; a
#: toolbar squeezed to nothing on a shown plot still is, and is caught by its size).
_TOOLBARS_AND_LEGENDS = """() => {
    const views = [...Bokeh.index.query((v) => true)];
    const type = (v) => v.model.type || v.model.constructor.__name__;
    const shown = (v) => v.el && v.el.checkVisibility();
    const toolbars = views.filter((v) => type(v) === 'Toolbar' && shown(v)).map((v) => {
        const r = v.el.getBoundingClientRect();
        return {left: r.left, right: r.right, top: r.top, bottom: r.bottom,
                buttons: v.el.shadowRoot ? v.el.shadowRoot.querySelectorAll('.bk-tool-icon').length : -1};
    });
    const legends = views.filter((v) => type(v) === 'Legend' && v.model.items.length
                                 && v.parent.canvas_view.el.checkVisibility()).map((v) => {
        const canvas = v.parent.canvas_view.el.getBoundingClientRect();
        const b = v.bbox;
        return {left: canvas.left + b.x0, right: canvas.left + b.x1, top: canvas.top + b.y0,
                bottom: canvas.top + b.y1, canvas_right: canvas.right, canvas_bottom: canvas.bottom,
                labels: v.model.items.filter((i) => i.visible).map((i) => i.label.value)};
    });
    return {toolbars, legends};
}"""

#: Buttons of the Bench whose label does not fit them (cut with an ellipsis).
_CUT_LABELS = """() => [...document.querySelectorAll('.fo-bench button, .fo-bench .widget-label')]
    .filter((b) => b.offsetParent !== null && b.scrollWidth > b.clientWidth + 1).map((b) => b.textContent.trim())"""


def _open_file_browser(page) -> None:
    """The left sidebar's file browser open, as a user has it."""
    browser = page.locator("#filebrowser")
    if not browser.is_visible():
        page.locator(".jp-SideBar.jp-mod-left [data-id='filebrowser']").first.click()
    browser.wait_for(state="visible", timeout=20_000)


def _bench_ready(page) -> None:
    page.locator(".fo-bench canvas").first.wait_for(timeout=RUN_SECONDS * 1000)
    # BokehJS has drawn every plot: its views exist and the response has data.
    page.wait_for_function("() => window.Bokeh && [...Bokeh.index.query((v) => (v.model.type || '') === 'Toolbar')]"
                           ".length >= 2", timeout=60_000)


def _response_canvas(page) -> dict:
    """The response plot's frame (the tallest plot) in page coordinates."""
    return page.evaluate("""() => {
        const views = [...Bokeh.index.query((v) => v.model.title && v.model.title.text === 'Response')];
        const view = views[0];
        const c = view.canvas_view.el.getBoundingClientRect();
        const f = view.frame.bbox;
        return {x: c.left + f.x0, y: c.top + f.y0, width: f.width, height: f.height,
                start: view.model.x_range.start, end: view.model.x_range.end};
    }""")


def _tab(page, title: str) -> None:
    page.locator(".fo-bench .lm-TabBar-tab", has_text=title).first.click()


class TestBenchAsUsed:
    @pytest.mark.parametrize("width", [1400, 900])
    def test_fits_the_output_area_with_the_file_browser_open(self, lab, width):
        from playwright.sync_api import TimeoutError as PlaywrightTimeout

        with _notebook_page(lab, f"layout_{width}.ipynb", _TOUR_CELL, viewport=(width, 1000)) as (page, messages):
            _open_file_browser(page)
            _bench_ready(page)
            # The plots follow the width they are given: wait until they have settled on it
            # (or time out, and say below what lies outside).
            with contextlib.suppress(PlaywrightTimeout):
                page.wait_for_function(f"() => ({_OUTSIDE})().count === 0", timeout=20_000)
            page.screenshot(path=str(BUILD / f"bench-layout-{width}.png"))
            page.locator(".fo-bench").screenshot(path=str(BUILD / f"bench-layout-{width}-whole.png"))
            found = page.evaluate(_OUTSIDE)
            assert found["count"] == 0, found
            boxes = page.evaluate(_TOOLBARS_AND_LEGENDS)
            area = found["area"]
            assert len(boxes["toolbars"]) >= 2
            for bar in boxes["toolbars"]:
                assert area["left"] - 1 <= bar["left"] and bar["right"] <= area["right"] + 1, (bar, area)
                assert bar["right"] - bar["left"] > 10 and bar["bottom"] - bar["top"] > 10, bar
            labels = [label for legend in boxes["legends"] for label in legend["labels"]]
            assert {"tolerance band", "sample instants", "vdac"} <= set(labels), labels
            for legend in boxes["legends"]:
                # The whole legend on its canvas, and the canvas in the output area: no label cut.
                assert legend["right"] <= legend["canvas_right"] + 1 and legend["bottom"] <= legend["canvas_bottom"] + 1
                assert legend["right"] <= area["right"] + 1, (legend, area)
            assert page.evaluate(_CUT_LABELS) == []
            for title in ("Generators", "Export"):
                _tab(page, title)
                page.wait_for_timeout(300)  # a tab switch is a class change: one frame
                assert page.evaluate(_OUTSIDE)["count"] == 0, (title, page.evaluate(_OUTSIDE))
                assert page.evaluate(_CUT_LABELS) == [], title
                page.locator(".fo-bench").screenshot(path=str(BUILD / f"bench-layout-{width}-{title.lower()}.png"))
            assert not messages, messages

    def test_clicking_a_segment_shows_its_derivation(self, lab):
        with _notebook_page(lab, "click_segment.ipynb", _TOUR_CELL, viewport=(1400, 1000)) as (page, messages):
            _bench_ready(page)
            _tab(page, "Derivation")
            heading = page.locator(".fo-bench h4", has_text="Segment")
            heading.first.wait_for(timeout=60_000)
            assert heading.first.inner_text().startswith("Segment 0:")
            page.locator(".fo-bench canvas").first.scroll_into_view_if_needed()
            frame = _response_canvas(page)
            # Segment 2 lasts from 2 ms to 3 ms of the 5 ms drive: click at 2.5 ms, by position
            # (bokeh draws on layered canvases in a shadow DOM, there is no element to click).
            x = frame["x"] + frame["width"] * (2.5e-3 - frame["start"]) / (frame["end"] - frame["start"])
            page.mouse.click(x, frame["y"] + frame["height"] * 0.5)
            page.locator(".fo-bench h4", has_text="Segment 2:").first.wait_for(timeout=30_000)
            panel = page.locator(".fo-bench .widget-htmlmath").first.inner_text()
            assert "k1 open" in panel, panel  # segment 2 holds: its own configuration's derivation
            page.locator(".fo-bench").screenshot(path=str(BUILD / "bench-browser-clicked-segment.png"))
            assert not messages, messages

    def test_box_zoom_on_a_long_drive_draws_single_segments(self, lab):
        with _notebook_page(lab, "zoom_long.ipynb", _LONG_CELL, viewport=(1400, 1000)) as (page, messages):
            _bench_ready(page)
            info = page.locator(".fo-bench .fo-info", has_text="plot: min/max per pixel")
            info.first.wait_for(timeout=30_000)
            page.locator(".fo-bench canvas").first.scroll_into_view_if_needed()
            # The response plot's own box-zoom button, pressed as a user does.
            button = page.evaluate("""() => {
                const views = [...Bokeh.index.query((v) => true)];
                const plot = views.find((v) => v.model.title && v.model.title.text === 'Response');
                const bar = views.find((v) => v.model === plot.model.toolbar && v.el);
                const el = [...bar.el.shadowRoot.querySelectorAll('[title]')]
                    .find((b) => b.getAttribute('title').startsWith('Box Zoom'));
                const r = el.getBoundingClientRect();
                return {x: r.left + r.width / 2, y: r.top + r.height / 2};
            }""")
            page.mouse.click(button["x"], button["y"])
            # Three box zooms, each to a fifth of the view: 8 ms of the 1 s drive, 80 of its
            # 10,000 segments (one zoom that far would be a box a few pixels wide).
            for zoom in range(3):
                frame = _response_canvas(page)
                y = frame["y"] + frame["height"] * 0.5
                page.mouse.move(frame["x"] + frame["width"] * 0.4, y)
                page.mouse.down()
                page.mouse.move(frame["x"] + frame["width"] * 0.5, y, steps=5)
                page.mouse.move(frame["x"] + frame["width"] * 0.6, y, steps=5)
                page.mouse.up()
                page.wait_for_function("(span) => { const v = [...Bokeh.index.query((v) => v.model.title && "
                                       "v.model.title.text === 'Response')][0]; "
                                       "return v.model.x_range.end - v.model.x_range.start < span * 0.5; }",
                                       arg=frame["end"] - frame["start"], timeout=30_000)
            page.locator(".fo-bench .fo-info", has_text="plot: every segment drawn").first.wait_for(timeout=30_000)
            after = _response_canvas(page)
            assert after["end"] - after["start"] < 0.01, after
            page.locator(".fo-bench").screenshot(path=str(BUILD / "bench-browser-zoomed.png"))
            assert not messages, messages

    def test_undo_pressed_twice_goes_two_steps_back(self, lab):
        with _notebook_page(lab, "undo_twice.ipynb", _TOUR_CELL, viewport=(1400, 1000)) as (page, messages):
            _bench_ready(page)
            field = page.locator(".fo-bench .fo-part-rs input")
            status = page.locator(".fo-bench .fo-info")

            def edit(text: str) -> str:
                before = status.inner_text()
                field.fill(text)
                field.press("Enter")
                page.wait_for_function("(old) => document.querySelector('.fo-bench .fo-info').innerText !== old",
                                       arg=before, timeout=30_000)
                return status.inner_text()

            first = edit("2.2k")
            edit("3.3k")
            edit("4.7k")
            undo = page.locator(".fo-bench button", has_text="Undo last edit")
            for expected in ("3.3k", "2.2k"):
                undo.click()
                page.wait_for_function("(text) => document.querySelector('.fo-bench .fo-part-rs input').value === text",
                                       arg=expected, timeout=30_000)
            page.wait_for_function("(text) => document.querySelector('.fo-bench .fo-info').innerText === text",
                                   arg=first, timeout=30_000)
            assert field.input_value() == "2.2k"
            assert not messages, messages

    def test_export_hands_the_report_to_the_browser(self, lab):
        import firstorder as fo

        with _notebook_page(lab, "export_report.ipynb", _TOUR_CELL, viewport=(1400, 1000),
                            accept_downloads=True) as (page, messages):
            _bench_ready(page)
            _tab(page, "Export")
            title = page.locator(".fo-bench .fo-export-title input")
            title.fill("Channel 3 hold capacitor")
            title.press("Tab")
            page.locator(".fo-bench button", has_text="Report (HTML)").click()
            link = page.locator(".fo-bench a.fo-download")
            link.wait_for(timeout=60_000)
            written = page.locator(".fo-bench .fo-written").inner_text()
            assert Path(written).is_absolute() and written.endswith("bench_report.html"), written
            assert Path(written) == lab["root"] / "notebooks" / "bench_report.html"
            page.locator(".fo-bench").screenshot(path=str(BUILD / "bench-browser-export.png"))
            with page.expect_download(timeout=60_000) as download:
                link.click()
            saved = BUILD / "bench-browser-download.html"
            download.value.save_as(saved)
            assert download.value.suggested_filename == "bench_report.html"
            assert saved.read_bytes() == Path(written).read_bytes()
            analysis = fo.Analysis.load(saved)
            assert analysis.title == "Channel 3 hold capacitor" and analysis.sample_delay == "0.8m"
            # The downloaded report opens offline, titled as typed, its plots drawn.
            page.goto(saved.as_uri())
            page.locator("canvas").first.wait_for(timeout=60_000)
            assert "Channel 3 hold capacitor" in page.title() + page.locator("h1").first.inner_text()
            page.screenshot(path=str(BUILD / "bench-browser-downloaded-report.png"), full_page=True)
            assert not messages, messages


#: A Bench with a lot whose study, once its units are raised, runs on the worker thread.
#: The kernel stands for a machine several times slower than this one: each chunk of units
#: waits a moment, so the study lasts long enough to watch (the waits are this notebook's own).
_SLOW_LOT_CELL = """
import time
import numpy as np
import firstorder as fo
import firstorder.studies.study as study_module

_chunk_done = study_module.chunk_done
def slow_machine(done, total):
    time.sleep(0.7)
    _chunk_done(done, total)
study_module.chunk_done = slow_machine

fx = (fo.Fixture().voltage_source("vdac", "dac", "gnd").resistor("r_filter", "dac", "a", "4.99k")
      .switch("k1", "a", "b", r_on="0.2", r_off="1G").capacitor("c_filter", "b", "gnd", "330n")
      .resistor("r_in", "b", "gnd", "1M"))
n = 1000
levels = np.random.default_rng(1).uniform(0.0, 5.0, n)
drive = fo.Drive(np.arange(n) * 20e-3, n * 20e-3, vdac=levels, k1=(np.arange(n) % 4 != 3).astype(float))
bench = fo.Bench(fx, drive, tolerance=fo.Tolerance.lsb(bits=16, span=5.0), sample_delay="19m",
                 spread=fo.Spread({"r_filter": "1%", "c_filter": "10%"}), units=500, seed=1)
bench
"""

_PROGRESS_SHOWN = """() => {
    const box = document.querySelector('.fo-bench .fo-study-progress');
    return box !== null && getComputedStyle(box).display !== 'none' && box.getBoundingClientRect().height > 0;
}"""


class TestLongStudyInBrowser:
    def test_shows_progress_and_keeps_the_controls_live(self, lab):
        with _notebook_page(lab, "long_study.ipynb", _SLOW_LOT_CELL, viewport=(1400, 1100)) as (page, messages):
            _bench_ready(page)
            _tab(page, "Spread")
            units = page.locator(".fo-bench .fo-spread-lot-units input")
            units.fill("4000")  # 4,000,000 unit-segments: past what the Bench studies in line
            units.press("Enter")
            page.wait_for_function(_PROGRESS_SHOWN, timeout=60_000)
            label = page.locator(".fo-bench .fo-study-progress").inner_text()
            assert "4,000 units" in label, label
            page.locator(".fo-bench .fo-study-progress").scroll_into_view_if_needed()
            page.screenshot(path=str(BUILD / "bench-long-study-progress.png"))
            # While it runs, the controls answer: a part edit redraws the nominal response.
            canvas = _response_canvas(page)
            before = page.screenshot(clip={k: canvas[k] for k in ("x", "y", "width", "height")})
            part = page.locator(".fo-bench .fo-part-r_filter input")
            part.fill("10k")
            part.press("Enter")
            redrawn = False
            for _ in range(40):
                page.wait_for_timeout(250)
                if page.screenshot(clip={k: canvas[k] for k in ("x", "y", "width", "height")}) != before:
                    redrawn = True
                    break
            assert redrawn, "a part edit during the study did not redraw the response"
            assert page.evaluate(_PROGRESS_SHOWN), "the edit's new study shows no progress"
            page.screenshot(path=str(BUILD / "bench-long-study-edited.png"))
            # The bar moves on as chunks of units are done (the label says how far).
            page.wait_for_function("""() => /[1-9][0-9]* %/.test(
                (document.querySelector('.fo-bench .fo-study-progress') || {}).innerText || '')""", timeout=60_000)
            page.locator(".fo-bench .fo-study-progress").scroll_into_view_if_needed()
            page.screenshot(path=str(BUILD / "bench-long-study-moving.png"))
            # The study of the edited fixture ends: the bar goes and the lot table counts its units.
            page.wait_for_function(f"() => !({_PROGRESS_SHOWN})()", timeout=180_000)
            _tab(page, "Settling")
            page.locator(".fo-bench", has_text="4,000 units (seed 1)").first.wait_for(timeout=30_000)
            page.locator(".fo-bench .widget-tab").first.scroll_into_view_if_needed()
            page.screenshot(path=str(BUILD / "bench-long-study-done.png"))
            assert not messages, messages

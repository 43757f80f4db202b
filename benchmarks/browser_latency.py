"""Bench latency in a real browser: Enter on a part value to the redrawn response canvas.

JupyterLab on a free local port, headless Chromium (Debian's, /usr/bin/chromium) driven by
Playwright, a Bench on a 10,000-change drive.  Each repetition types a new resistance,
presses Enter and times, in the page, from the Enter key to the first paint of the response
plot after the last of its data sources' changes arrived (BokehJS's own paint, wrapped).  Run by hand, not a test:

    .venv/bin/python benchmarks/browser_latency.py [--repeats 21] [--changes 10000]

Prints every time and the median (target: under 300 ms).
"""

from __future__ import annotations

import argparse
import json
import os
import secrets
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]

CELL = """import numpy as np
import firstorder as fo

rng = np.random.default_rng(3)
times = np.arange({changes}) * 1e-4
drive = fo.Drive(times, end=float(times[-1]) + 1e-4, vin=rng.choice([0.0, 5.0], {changes}))
fo.Bench(fo.Fixture.rc(r="1k", c="10n"), drive, tolerance=fo.Tolerance.absolute("1m"), sample_delay="50u")
"""

#: In the page: the time of Enter in the part field, and of the first paint of the response
#: plot after one of its data sources changed.
INSTRUMENT = """() => {
    const views = [...Bokeh.index.query((v) => true)];
    const plot = views.find((v) => v.model.title && v.model.title.text === 'Response');
    const state = window.__latency = {enter: 0, painted: 0, changed: false, last_change: 0};
    for (const renderer of plot.model.renderers) {
        const source = renderer.data_source;
        if (source && source.properties.data) {
            source.properties.data.change.connect(() => {
                if (state.enter) { state.changed = true; state.last_change = performance.now(); }
            });
        }
    }
    const paint = plot.paint.bind(plot);
    plot.paint = (...args) => {
        const result = paint(...args);
        // The paint after the latest data change: the canvas as the edit leaves it.
        if (state.changed) { state.painted = performance.now(); state.changed = false; }
        return result;
    };
    const input = document.querySelector('.fo-part-r input');
    input.addEventListener('keydown', (event) => {
        if (event.key === 'Enter') { state.enter = performance.now(); state.painted = 0; state.changed = false; }
    }, true);
    return true;
}"""


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def _start_lab(root: Path, home: Path) -> tuple[subprocess.Popen, str, str]:
    port, token = _free_port(), secrets.token_hex(16)
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""),
               JUPYTER_CONFIG_DIR=str(home / "config"), JUPYTER_RUNTIME_DIR=str(home / "runtime"),
               JUPYTERLAB_SETTINGS_DIR=str(home / "settings"), JUPYTERLAB_WORKSPACES_DIR=str(home / "workspaces"),
               IPYTHONDIR=str(home / "ipython"))
    command = [str(Path(sys.executable).parent / "jupyter"), "lab", "--no-browser", "--ServerApp.ip=127.0.0.1",
               f"--ServerApp.port={port}", "--ServerApp.port_retries=0", f"--IdentityProvider.token={token}",
               f"--ServerApp.root_dir={root}", "--LabApp.news_url=None",
               "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate"]
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        command.append("--ServerApp.allow_root=True")
    server = subprocess.Popen(command, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, cwd=root)
    url = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 90
    while True:
        try:
            with urllib.request.urlopen(f"{url}/api/status?token={token}", timeout=2) as reply:
                json.load(reply)
            return server, url, token
        except OSError:
            if server.poll() is not None or time.monotonic() > deadline:
                raise SystemExit("JupyterLab did not start")
            time.sleep(0.5)


def measure(repeats: int, changes: int) -> list[float]:
    from playwright.sync_api import sync_playwright

    work = Path(tempfile.mkdtemp(prefix="fo-latency-"))
    notebook = {"cells": [{"cell_type": "code", "execution_count": None, "id": "cell", "metadata": {},
                           "outputs": [], "source": CELL.format(changes=changes)}],
                "metadata": {"kernelspec": {"display_name": "Python 3", "language": "python", "name": "python3"}},
                "nbformat": 4, "nbformat_minor": 5}
    (work / "lab").mkdir()
    (work / "lab" / "latency.ipynb").write_text(json.dumps(notebook), encoding="utf-8")
    server, url, token = _start_lab(work / "lab", work / "home")
    times = []
    try:
        with sync_playwright() as playwright:
            browser = playwright.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
            page = browser.new_page(viewport={"width": 1400, "height": 1000})
            page.goto(f"{url}/lab/workspaces/latency/tree/latency.ipynb?reset&token={token}")
            page.wait_for_selector(".jp-Notebook .jp-Cell", timeout=120_000)
            accept = page.locator(".jp-Dialog button.jp-mod-accept")
            try:
                accept.wait_for(timeout=5000)
                accept.click()
            except Exception:
                pass
            page.wait_for_selector("#jp-main-statusbar :text('Idle')", timeout=120_000)
            page.get_by_role("menuitem", name="Run", exact=True).click()
            page.get_by_role("menuitem", name="Run All Cells", exact=True).click()
            page.locator(".fo-bench canvas").first.wait_for(timeout=180_000)
            page.wait_for_function("() => window.Bokeh && [...Bokeh.index.query((v) => v.model.title && "
                                   "v.model.title.text === 'Response')].length === 1", timeout=60_000)
            page.wait_for_selector("#jp-main-statusbar :text('Idle')", timeout=120_000)
            page.evaluate(INSTRUMENT)
            field = page.locator(".fo-part-r input")
            for k in range(repeats + 1):  # the first is a warm-up (sympy-free, but caches fill)
                field.fill(f"{1 + 0.1 * (k % 7 + 1):.1f}k")
                field.press("Enter")
                page.wait_for_function("() => window.__latency.painted > window.__latency.enter", timeout=60_000)
                page.wait_for_selector("#jp-main-statusbar :text('Idle')", timeout=60_000)
                # Quiet: every message of the edit arrived and was painted (none for 300 ms).
                page.wait_for_function("() => { const s = window.__latency; return !s.changed && "
                                       "performance.now() - Math.max(s.painted, s.last_change) > 300; }",
                                       timeout=60_000)
                elapsed = page.evaluate("() => window.__latency.painted - window.__latency.enter")
                if k:
                    times.append(elapsed)
            browser.close()
    finally:
        server.terminate()
        try:
            server.wait(timeout=20)
        except subprocess.TimeoutExpired:
            server.kill()
        shutil.rmtree(work, ignore_errors=True)
    return times


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=21)
    parser.add_argument("--changes", type=int, default=10_000)
    args = parser.parse_args()
    times = measure(args.repeats, args.changes)
    print("Enter -> redrawn response canvas (ms):", " ".join(f"{t:.0f}" for t in times))
    print(f"median {statistics.median(times):.0f} ms over {len(times)} edits of a {args.changes:,}-change drive "
          f"(min {min(times):.0f}, max {max(times):.0f}); target under 300 ms")


if __name__ == "__main__":
    main()

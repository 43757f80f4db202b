"""What the browser tests share: Debian's Chromium, a Jupyter server on 127.0.0.1, BokehJS read back.

A server is started on a free port of 127.0.0.1 only, with a random token, in a
session (process group) of its own, and stopped when the test is done, passed or
failed: SIGTERM to its group (the server shuts its kernels down), then SIGKILL
if it has not gone within 20 s.  Without chromium (or Playwright) a browser test
is skipped, saying why; with FIRSTORDER_REQUIRE_BROWSER=1 (set by .ci/run) it
fails instead.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import socket
import subprocess
import time
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest

#: Headless, and nothing that reaches for the network on its own.
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]
#: Addresses a page may load from: this machine, and what the page makes itself.
LOCAL = ("http://127.0.0.1", "ws://127.0.0.1", "data:", "blob:")


def need(reason: str):
    """Skip (or fail, when the browser tests are required) for `reason`."""
    if os.environ.get("FIRSTORDER_REQUIRE_BROWSER") == "1":
        pytest.fail(f"browser test required (FIRSTORDER_REQUIRE_BROWSER=1) but {reason}")
    pytest.skip(reason)


def chromium() -> str:
    """The path of Debian's chromium, once Playwright is known to be importable."""
    found = shutil.which("chromium") or ("/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None)
    if found is None:
        need("no chromium on this machine (Debian: apt-get install chromium)")
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        need("the playwright Python package is not installed (pip install playwright)")
    return found


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def jupyter_env(home: Path, root: Path) -> dict[str, str]:
    """The environment of a server: this checkout importable, every Jupyter folder under `home`
    (no settings, workspaces or kernels' history of the user's own)."""
    return dict(os.environ, PYTHONPATH=str(root) + os.pathsep + os.environ.get("PYTHONPATH", ""),
                JUPYTER_CONFIG_DIR=str(home / "config"), JUPYTER_RUNTIME_DIR=str(home / "runtime"),
                JUPYTERLAB_SETTINGS_DIR=str(home / "settings"), JUPYTERLAB_WORKSPACES_DIR=str(home / "workspaces"),
                IPYTHONDIR=str(home / "ipython"))


def port_open(port: int) -> bool:
    with socket.socket() as probe:
        probe.settimeout(1)
        return probe.connect_ex(("127.0.0.1", port)) == 0


@contextlib.contextmanager
def server(command: list[str], *, cwd: Path, env: dict[str, str], log: Path, ready: Callable[[], bool],
           startup_seconds: float = 90) -> Iterator[subprocess.Popen]:
    """Run `command` until the block ends (however it ends); its output goes to `log`.

    `ready` is asked every half second until it answers True; the server failing
    first, or not ready within `startup_seconds`, fails the test (see `log`).
    """
    log.parent.mkdir(parents=True, exist_ok=True)
    with open(log, "w") as out:
        process = subprocess.Popen(command, env=env, stdout=out, stderr=subprocess.STDOUT, cwd=cwd,
                                   start_new_session=True)
        try:
            deadline = time.monotonic() + startup_seconds
            while not _ready(ready):
                if process.poll() is not None or time.monotonic() > deadline:
                    pytest.fail(f"{Path(command[0]).name} did not start; see {log}")
                time.sleep(0.5)
            yield process
        finally:
            stop(process)


def _ready(ready: Callable[[], bool]) -> bool:
    try:
        return bool(ready())
    except OSError:
        return False


def stop(process: subprocess.Popen, seconds: float = 20) -> None:
    """End `process` and what it started (its process group): politely, then for good."""
    if process.poll() is not None:
        return
    with contextlib.suppress(ProcessLookupError):
        os.killpg(process.pid, signal.SIGTERM)
    try:
        process.wait(timeout=seconds)
    except subprocess.TimeoutExpired:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(process.pid, signal.SIGKILL)
        process.wait(timeout=seconds)


def write_notebook(path: Path, *sources: str) -> Path:
    """A notebook of code cells (outputs empty) at `path`, for the Python 3 kernel."""
    import json

    cells = [{"cell_type": "code", "execution_count": None, "id": f"cell{k}", "metadata": {}, "outputs": [],
              "source": source} for k, source in enumerate(sources)]
    notebook = {"cells": cells, "nbformat": 4, "nbformat_minor": 5,
                "metadata": {"kernelspec": {"display_name": "Python 3", "language": "python", "name": "python3"}}}
    path.write_text(json.dumps(notebook), encoding="utf-8")
    return path


#: The response plot's frame in page coordinates, and its time range (BokehJS's own view).
RESPONSE_FRAME = """() => {
    const view = [...Bokeh.index.query((v) => v.model.title && v.model.title.text === 'Response')][0];
    const c = view.canvas_view.el.getBoundingClientRect();
    const f = view.frame.bbox;
    return {x: c.left + f.x0, y: c.top + f.y0, width: f.width, height: f.height,
            start: view.model.x_range.start, end: view.model.x_range.end};
}"""

#: The columns of the response plot's curve named by its legend label (the data BokehJS draws).
CURVE_DATA = """(label) => {
    const view = [...Bokeh.index.query((v) => v.model.title && v.model.title.text === 'Response')][0];
    const legend = view.model.below.find((m) => m.items !== undefined);
    const item = legend.items.find((i) => i.label.value === label);
    const data = item.renderers[0].data_source.data;
    const column = (name) => Array.from(data.get ? data.get(name) : data[name]);
    return {t: column('t'), y: column('y')};
}"""

#: BokehJS is in the page and has drawn both plots (their toolbars exist).
PLOTS_DRAWN = ("() => window.Bokeh !== undefined && Bokeh.index !== undefined && "
               "[...Bokeh.index.query((v) => (v.model.type || '') === 'Toolbar')].length >= 2")

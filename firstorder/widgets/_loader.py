"""Put BokehJS into the notebook page from inline resources, before a plot view is made.

jupyter_bokeh's views need ``window.Bokeh`` already present in the page, and
nothing may come from the network, so the Bench sends the library text itself
(bokeh's own inline resources) as an output just ahead of its widget view.  The
output is then replaced by a one-line note, so a saved notebook does not carry
two megabytes of JavaScript.

Voilà is the exception: it runs a cell to its end on the server before the page
shows the cell's outputs, so the note would be all that arrived, and its page has
no renderer for jupyter_bokeh's loader type (jupyter_bokeh registers it on
notebook panels only).  There BokehJS goes as plain JavaScript, which a Voilà page
runs, and stays: a Voilà page is never saved.
"""

from __future__ import annotations

import json
import os
import uuid

__all__ = ["in_voila", "live_kernel_cell", "loader_script", "publish_bokehjs"]

#: Mime type that jupyter_bokeh's JupyterLab extension runs as a script.
LOAD_MIME_TYPE = "application/vnd.bokehjs_load.v0+json"
#: BokehJS parts the Bench uses: plots and tools, widgets, the editable table.
COMPONENTS = ("bokeh", "bokeh-widgets", "bokeh-tables")


def loader_script() -> str:
    """JavaScript that evaluates BokehJS (inline text) unless this page already has it."""
    from bokeh import __version__
    from bokeh.resources import Resources

    resources = Resources(mode="inline", components=list(COMPONENTS))
    sources = json.dumps(resources.js_raw)
    flag = json.dumps(f"firstorder-bokehjs-{__version__}")
    # Indirect eval runs each file in the global scope, as a <script> would.
    return (
        "(function (root) {\n"
        f"  if (root[{flag}] === true && root.Bokeh !== undefined) {{ return; }}\n"
        f"  const sources = {sources};\n"
        "  for (const code of sources) { (0, eval)(code); }\n"
        f"  root[{flag}] = true;\n"
        "})(window);\n"
    )


def publish_bokehjs() -> None:
    """Send BokehJS to the page as an output, then shrink that output to a note."""
    from bokeh import __version__
    from IPython.display import display, update_display

    if in_voila():
        display({"application/javascript": loader_script(), "text/plain": ""}, raw=True)
        return
    display_id = f"firstorder-bokehjs-{uuid.uuid4().hex}"
    display({LOAD_MIME_TYPE: loader_script(), "text/plain": ""}, raw=True, display_id=display_id)
    update_display(
        {"text/plain": f"BokehJS {__version__} loaded from inline resources"},
        raw=True,
        display_id=display_id,
    )


def in_voila() -> bool:
    """True in a kernel that Voilà started (it marks the kernel's environment).

    Examples
    --------
    >>> in_voila()  # a plain interpreter
    False
    """
    # Voilà sets VOILA_PREHEAT in every kernel it starts ("True" for a kernel kept warm for
    # the next page), and VOILA_KERNEL_ID before the notebook's first cell.
    return "VOILA_PREHEAT" in os.environ or "VOILA_KERNEL_ID" in os.environ


def live_kernel_cell() -> int | None:
    """The execution count of the cell running now in a live notebook kernel, else None."""
    try:
        from IPython import get_ipython
    except ImportError:  # pragma: no cover - ipywidgets brings IPython
        return None
    shell = get_ipython()
    if shell is None or getattr(shell, "kernel", None) is None:
        return None
    return int(shell.execution_count)

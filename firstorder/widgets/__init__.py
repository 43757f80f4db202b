"""The notebook app and the report figure: the only package that imports ipywidgets or bokeh.

The Bench (``fo.Bench``) needs ipywidgets and jupyter_bokeh; the report figure
needs bokeh only.  Each is imported when first asked for, so importing one
does not load what only the other needs.
"""

from __future__ import annotations

__all__ = ["Bench"]


def __getattr__(name: str):
    if name == "Bench":
        from ._bench import Bench

        return Bench
    raise AttributeError(f"module 'firstorder.widgets' has no attribute {name!r}")

"""The Bench: a notebook app to edit parts and drives and see every response component.

This package is the only one in firstorder that imports ipywidgets, bokeh and
jupyter_bokeh; ``import firstorder`` loads it only when ``fo.Bench`` is asked for.
"""

from __future__ import annotations

from ._bench import Bench

__all__ = ["Bench"]

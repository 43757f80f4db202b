"""The notebook app, the Bench: the only package that imports ipywidgets and jupyter_bokeh.

:class:`Bench` (``fo.Bench``) wires a :class:`BenchSession` (the state, as
traitlets: observe it or link to it) to its panels and plots.  Both are
imported when first asked for, so ``import firstorder`` loads no UI library.
"""

from __future__ import annotations

__all__ = ["Bench", "BenchSession"]


def __getattr__(name: str):
    if name == "Bench":
        from ._bench import Bench

        return Bench
    if name == "BenchSession":
        from ._session import BenchSession

        return BenchSession
    raise AttributeError(f"module 'firstorder.widgets' has no attribute {name!r}")

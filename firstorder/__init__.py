"""firstorder: settling of first-order test fixtures under piecewise-constant drives.

``import firstorder`` loads numpy, quantiphy and pandas only; sympy, ipywidgets
and bokeh are imported when a derivation or the Bench is first asked for.
"""

from __future__ import annotations

from .drive import Drive
from .errors import InputError, TopologyError, ZeroTimeError
from .fixture import Fixture
from .response import Response, respond
from .settling import Tolerance
from .units import format_value, parse_value

__all__ = [
    "Bench",
    "Drive",
    "Fixture",
    "InputError",
    "Response",
    "Tolerance",
    "TopologyError",
    "ZeroTimeError",
    "format_value",
    "parse_value",
    "respond",
]

__version__ = "0.1.0"


def __getattr__(name: str):
    # The Bench needs ipywidgets and bokeh; load them only when it is asked for.
    if name == "Bench":
        from .widgets import Bench

        return Bench
    raise AttributeError(f"module 'firstorder' has no attribute {name!r}")

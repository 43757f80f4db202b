"""firstorder: settling of first-order test fixtures under piecewise-constant drives.

``import firstorder`` loads numpy and quantiphy only; pandas, scipy, sympy,
pydantic, numba, ipywidgets and bokeh are imported when a table, a fit, a
derivation, a file, a long drive or the Bench first needs them
(``tests/test_layers.py`` holds that, and the direction of every import).
"""

from __future__ import annotations

from ._version import __version__ as __version__
from .analysis import Analysis
from .cautions import Caution
from .drive import Drive
from .errors import InputError, TopologyError, ZeroTimeError
from .fixture import Fixture
from .response import Response, respond
from .settling import SettlingSummary, Tolerance, plan_dwells, plan_order, plan_table
from .studies import Normal, Spread, Uniform, sweep
from .traces import Trace, fit_trace, read_trace
from .units import format_value, parse_value

__all__ = [
    "Analysis",
    "Bench",
    "Caution",
    "Drive",
    "Fixture",
    "InputError",
    "Normal",
    "Response",
    "SettlingSummary",
    "Spread",
    "Tolerance",
    "TopologyError",
    "Trace",
    "Uniform",
    "ZeroTimeError",
    "fit_trace",
    "format_value",
    "parse_value",
    "plan_dwells",
    "plan_order",
    "plan_table",
    "read_trace",
    "respond",
    "sweep",
]



def __getattr__(name: str):
    # The Bench needs ipywidgets and bokeh; load them only when it is asked for.
    if name == "Bench":
        from .widgets import Bench

        return Bench
    raise AttributeError(f"module 'firstorder' has no attribute {name!r}")

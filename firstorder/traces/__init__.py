"""Captured waveforms: read a trace, fit every step, hold the bench against the model.

:mod:`.trace` (:class:`Trace`, :func:`read_trace`), :mod:`.statistics` (noise and
the tests of a fit), :mod:`.result` (:class:`TraceFit`) and :mod:`.fitting`
(:func:`fit_trace`).  scipy is imported inside the functions that fit.
"""

from __future__ import annotations

from .fitting import MIN_POINTS, fit_trace
from .result import TABLE_COLUMNS, TraceFit
from .trace import Trace, read_trace

__all__ = ["MIN_POINTS", "TABLE_COLUMNS", "Trace", "TraceFit", "fit_trace", "read_trace"]

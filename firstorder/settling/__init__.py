"""Settling: tolerances, settling tables and summaries, and the fastest plans.

:mod:`.tolerance` (what "settled" means, and its text form), :mod:`.table`
(per-segment settle times and sample errors, the summary, the one sample-delay
rule) and :mod:`.planning` (:func:`plan_dwells`, :func:`plan_table`), :mod:`.chain` (the walks and the exact
plan behind them) and :mod:`.order` (:func:`plan_order`: the order of the steps that takes
least time).
"""

from __future__ import annotations

from .order import Order, plan_order
from .planning import plan_dwells, plan_table
from .table import SAMPLE_COLUMNS, TABLE_COLUMNS, SettlingSummary, settling_summary, settling_table
from .tolerance import Tolerance, parse_tolerance, tolerance_text

__all__ = ["Order", "SAMPLE_COLUMNS", "TABLE_COLUMNS", "SettlingSummary", "Tolerance", "parse_tolerance", "plan_dwells",
           "plan_order", "plan_table", "settling_summary", "settling_table", "tolerance_text"]

"""Plotting without a plotting library: what to draw, in which colour and how it is written.

:mod:`.sampling` (screen-aware sample times, exact min/max envelopes),
:mod:`.format` (engineering notation for many numbers, and the same rules in
BokehJS) and :mod:`.palette` (the one palette and label set).  numpy only: the
Bench and the report's figure import bokeh themselves.
"""

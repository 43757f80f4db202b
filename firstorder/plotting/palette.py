"""The one palette and label set, for the Bench and the report alike.

A curve has the same colour, dash and name wherever it is drawn: the total dark
and solid, the splits in muted distinct hues, each source's contribution and
level in a colour of its own.  Readable on white and in grey print.
"""

from __future__ import annotations

__all__ = ["COMPONENT_COLOURS", "COMPONENT_LABELS", "LINE_DASH", "LOT_COLOUR", "SAMPLE_FAIL", "SAMPLE_NEUTRAL", "SAMPLE_PASS",
           "SELECTION_COLOUR", "SOURCE_COLOURS", "SWITCH_COLOURS", "TOLERANCE_COLOUR", "WORST_COLOUR", "component_label",
           "source_colour", "switch_colour"]

#: One colour per response component.
COMPONENT_COLOURS = {
    "total": "#17324d",
    "zero_input": "#c27c0e",
    "zero_state": "#0f7b6c",
    "forced": "#7d3c98",
    "natural": "#b03a2e",
}
#: What each component is called in legends and buttons.
COMPONENT_LABELS = {
    "total": "total",
    "zero_input": "zero-input",
    "zero_state": "zero-state",
    "forced": "forced",
    "natural": "natural",
}
#: Dashes set the piecewise-constant and the decaying parts apart from the rest.
LINE_DASH = {"forced": "dashed", "natural": "dotdash"}
#: Each source (its level, and its contribution to the response), in order.
SOURCE_COLOURS = ("#2874a6", "#ca6f1e", "#1e8449", "#884ea0", "#a93226", "#566573")
#: Each switch's lane, shaded while closed.
SWITCH_COLOURS = ("#5dade2", "#f5b041", "#58d68d", "#af7ac5", "#ec7063")
#: The band of each segment's tolerance around its final value.
TOLERANCE_COLOUR = "#82e0aa"
#: A study's envelope (the band of the central fraction of units), behind the curves.
LOT_COLOUR = "#a9cce3"
#: A study's worst unit, drawn over the nominal curves.
WORST_COLOUR = "#e91e63"
#: The selected segment.
SELECTION_COLOUR = "#f4d03f"
#: A sample inside its tolerance, outside it, and with no tolerance to judge it.
SAMPLE_PASS, SAMPLE_FAIL, SAMPLE_NEUTRAL = "#27ae60", "#e74c3c", "#5d6d7e"


def component_label(name: str) -> str:
    """The legend text of a component, or of a source's contribution (``"from vdac"``).

    Examples
    --------
    >>> component_label("zero_state"), component_label("vdac")
    ('zero-state', 'from vdac')
    """
    return COMPONENT_LABELS.get(name, f"from {name}")


def source_colour(index: int) -> str:
    """The colour of the source at `index` (in netlist order)."""
    return SOURCE_COLOURS[index % len(SOURCE_COLOURS)]


def switch_colour(index: int) -> str:
    """The colour of the switch lane at `index` (in netlist order)."""
    return SWITCH_COLOURS[index % len(SWITCH_COLOURS)]

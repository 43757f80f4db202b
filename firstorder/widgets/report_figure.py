"""The report's figure: drive and response on one time axis, as a standalone HTML page.

:mod:`firstorder._report` writes the report's text; this module adds the
interactive plot and assembles the page, with BokehJS inline (nothing is
fetched from the network).  It imports bokeh, which only this package may do,
and no ipywidgets, so a report needs bokeh but not a notebook.

How the plot samples a response: with up to :data:`MAX_DETAILED_SEGMENTS`
segments every segment gets :data:`POINTS_PER_SEGMENT` points, packed towards
its change where the exponential moves fastest, plus its exact end value.
Longer drives are drawn as a min/max band per screen column, which is exact:
within a segment a first-order state moves monotonically, so the extremes in
a column are at its edges or at the changes inside it.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
from bokeh.embed import file_html
from bokeh.layouts import column
from bokeh.models import ColumnDataSource, HoverTool
from bokeh.plotting import figure
from bokeh.resources import INLINE

if TYPE_CHECKING:
    from ..response import Response
    from ..settling import Tolerance

__all__ = ["response_figure", "standalone_page", "MAX_DETAILED_SEGMENTS"]

MAX_DETAILED_SEGMENTS = 2_000
POINTS_PER_SEGMENT = 24
ENVELOPE_COLUMNS = 1_500
_FRAME_WIDTH = 640

# Our own palette: one colour per component, readable on white and in grey print.
_COLOURS = {
    "total": "#1b3a5c",
    "zero_input": "#c0392b",
    "zero_state": "#2e8b57",
    "forced": "#7f7f7f",
    "natural": "#d68910",
}
_SOURCE_COLOURS = ("#6c3483", "#117a8b", "#a04000", "#196f3d", "#5d6d7e", "#922b21")
_LABELS = {
    "total": "total",
    "zero_input": "zero-input",
    "zero_state": "zero-state",
    "forced": "forced (final value)",
    "natural": "natural",
}

# The page around the plot; bokeh's own file template supplies <head> and the
# inline BokehJS bundle, and we fill its blocks.  Every variable is HTML made
# and escaped by firstorder._report.
_TEMPLATE = """
{% from macros import embed %}
{% block postamble %}{{ report_head }}{% endblock %}
{% block contents %}
{{ report_top }}
<section id=plot><h2>Response</h2>
{{ plot_caption }}
{% for doc in docs %}{% for root in doc.roots %}{{ embed(root) }}{% endfor %}{% endfor %}
</section>
{{ report_bottom }}
{% endblock %}
"""


def _time_scale(span: float) -> tuple[float, str]:
    """A factor and unit that put `span` seconds between 1 and 1000 on the axis."""
    for factor, unit in ((1.0, "s"), (1e3, "ms"), (1e6, "µs"), (1e9, "ns"), (1e12, "ps")):
        if span * factor >= 1.0:
            return factor, unit
    return 1e12, "ps"


def _detailed_times(response: "Response") -> np.ndarray:
    starts = response.starts
    ends = response.ends
    # Squared fractions crowd the points just after each change.
    fractions = np.linspace(0.0, 1.0, POINTS_PER_SEGMENT) ** 2
    grid = starts[:, None] + (ends - starts)[:, None] * fractions[None, :]
    # The last point of a segment sits just before the next change, so a probe
    # that jumps there is drawn as a jump, not a slope.
    grid[:-1, -1] = np.nextafter(ends[:-1], starts[:-1])
    grid[-1, -1] = ends[-1]
    return grid.reshape(-1)


def _column_edges(response: "Response") -> np.ndarray:
    return np.linspace(response.starts[0], response.drive.end, ENVELOPE_COLUMNS + 1)


def _column_of(times: np.ndarray, edges: np.ndarray) -> np.ndarray:
    return np.clip(np.searchsorted(edges, times, side="right") - 1, 0, edges.size - 2)


def _state_envelope(response: "Response", edges: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact min and max of the total state in every column between `edges`."""
    at_edges = np.asarray(response.total(edges))
    low = np.minimum(at_edges[:-1], at_edges[1:])
    high = np.maximum(at_edges[:-1], at_edges[1:])
    inside = _column_of(response.starts, edges)
    states = response.boundary[:-1]
    np.minimum.at(low, inside, states)
    np.maximum.at(high, inside, states)
    return low, high


def _step_envelope(values: np.ndarray, starts: np.ndarray, edges: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Min and max of a piecewise-constant column over every column between `edges`."""
    active = np.clip(np.searchsorted(starts, edges[:-1], side="right") - 1, 0, starts.size - 1)
    low = values[active].astype(float)
    high = low.copy()
    inside = _column_of(starts, edges)
    np.minimum.at(low, inside, values)
    np.maximum.at(high, inside, values)
    return low, high


def _drive_figure(response: "Response", factor: float, unit: str, detailed: bool, edges: np.ndarray):
    fixture = response.fixture
    drive = response.drive
    source_names = [p.name for p in fixture.sources]
    switch_names = [p.name for p in fixture.switches]
    panel = figure(
        height=200, frame_width=_FRAME_WIDTH, title="Drive: source levels",
        x_axis_label=f"time ({unit})", y_axis_label="level (V or A)",
        tools="pan,xwheel_zoom,box_zoom,reset,save",
    )
    x = np.append(drive.times, drive.end) * factor
    for j, name in enumerate(source_names):
        colour = _SOURCE_COLOURS[j % len(_SOURCE_COLOURS)]
        levels = drive.levels(name)
        if detailed:
            y = np.append(levels, levels[-1])
            panel.step(x, y, mode="after", line_width=2, color=colour, legend_label=name)
        else:
            low, high = _step_envelope(levels, drive.times, edges)
            centres = 0.5 * (edges[:-1] + edges[1:]) * factor
            panel.varea(centres, low, high, fill_color=colour, fill_alpha=0.5, legend_label=f"{name} (range per column)")
    if not source_names:
        panel.title.text = "Drive: no sources"
    switch_panel = None
    if switch_names:
        switch_panel = figure(
            height=60 + 30 * len(switch_names), frame_width=_FRAME_WIDTH, title="Switches: shaded while closed",
            x_axis_label=f"time ({unit})", tools="pan,xwheel_zoom,box_zoom,reset,save",
            y_range=(-0.2, len(switch_names)), x_range=panel.x_range,
        )
        switch_panel.yaxis.ticker = [j + 0.4 for j in range(len(switch_names))]
        switch_panel.yaxis.major_label_overrides = {j + 0.4: name for j, name in enumerate(switch_names)}
        for j, name in enumerate(switch_names):
            states = drive.levels(name)
            if detailed:
                y = np.append(states, states[-1])
                switch_panel.varea_step(x=x, y1=np.full(x.size, float(j)), y2=j + 0.8 * y,
                                        step_mode="after", fill_color="#5b7fa6", fill_alpha=0.6)
            else:
                low, high = _step_envelope(states, drive.times, edges)
                centres = 0.5 * (edges[:-1] + edges[1:]) * factor
                switch_panel.varea(centres, j + 0.8 * low, j + 0.8 * high, fill_color="#5b7fa6", fill_alpha=0.6)
    return panel, switch_panel


def response_figure(response: "Response", tolerance: "Tolerance | None" = None):
    """The report's figure: drive above, response below, sharing the time axis.

    Parameters
    ----------
    response : Response
    tolerance : Tolerance, optional
        Draws each segment's tolerance band around its final value.

    Returns
    -------
    bokeh layout, str
        The layout and a one-line description of how it was sampled.
    """
    drive = response.drive
    state_unit = response.fixture.state_unit
    span = float(drive.end - drive.times[0])
    factor, unit = _time_scale(span)
    detailed = len(drive) <= MAX_DETAILED_SEGMENTS
    edges = _column_edges(response)
    plot = figure(
        height=380, frame_width=_FRAME_WIDTH,
        title=f"Response: state of {response.fixture.storage.kind} '{response.fixture.storage.name}'",
        x_axis_label=f"time ({unit})", y_axis_label=f"state ({state_unit})",
        tools="pan,xwheel_zoom,box_zoom,reset,save",
    )
    drive_panel, switch_panel = _drive_figure(response, factor, unit, detailed, edges)
    plot.x_range = drive_panel.x_range
    source_names = [p.name for p in response.fixture.sources]
    if detailed:
        t = _detailed_times(response)
        components = ["forced", "natural", "zero_input", "zero_state", "total"]
        values = response.evaluate(t, tuple(components + (source_names if len(source_names) > 1 else [])))
        if tolerance is not None:
            step = np.abs(response.final - response.boundary[:-1])
            limit = tolerance.limit(step)
            x = np.append(drive.times, drive.end) * factor
            low = np.append(response.final - limit, (response.final - limit)[-1])
            high = np.append(response.final + limit, (response.final + limit)[-1])
            plot.varea_step(x=x, y1=low, y2=high, step_mode="after", fill_color="#9ecae1",
                            fill_alpha=0.45, legend_label="tolerance band")
        renderers = []
        for name in components:
            source = ColumnDataSource({"t": t * factor, "y": values[name]})
            dash = "dashed" if name in ("forced", "natural") else "solid"
            renderers.append(plot.line(
                "t", "y", source=source, color=_COLOURS[name], line_width=3 if name == "total" else 1.8,
                line_dash=dash, legend_label=_LABELS[name], name=_LABELS[name],
            ))
        if len(source_names) > 1:
            for j, name in enumerate(source_names):
                source = ColumnDataSource({"t": t * factor, "y": values[name]})
                renderers.append(plot.line(
                    "t", "y", source=source, color=_SOURCE_COLOURS[j % len(_SOURCE_COLOURS)],
                    line_width=1.5, line_dash="dotted", legend_label=f"from {name}", name=f"from {name}",
                ))
        plot.add_tools(HoverTool(
            renderers=renderers,
            tooltips=[("curve", "$name"), (f"time ({unit})", "$x{0.000000}"), (f"value ({state_unit})", "$y{0.000000}")],
        ))
        caption = (
            f"{len(drive)} segments, {POINTS_PER_SEGMENT} points each plus the value at every change. "
            f"Click a legend entry to show or hide a curve; natural and the source contributions start hidden."
        )
        for renderer in renderers:
            if renderer.name == "natural" or renderer.name.startswith("from "):
                renderer.visible = False
    else:
        centres = 0.5 * (edges[:-1] + edges[1:]) * factor
        low, high = _state_envelope(response, edges)
        forced_low, forced_high = _step_envelope(response.final, response.starts, edges)
        plot.varea(centres, forced_low, forced_high, fill_color=_COLOURS["forced"], fill_alpha=0.35,
                   legend_label="forced (range per column)")
        plot.varea(centres, low, high, fill_color=_COLOURS["total"], fill_alpha=0.6,
                   legend_label="total (range per column)")
        caption = (
            f"{len(drive)} segments, more than a screen shows: each of {ENVELOPE_COLUMNS} columns is "
            f"shaded from the lowest to the highest value in it (exact: the state is monotonic "
            f"between changes). Zoom with the tools; the settling table lists every segment."
        )
    plot.y_range.only_visible = True  # hidden curves do not stretch the axis
    for panel in (plot, drive_panel):
        if panel.legend:
            panel.legend.click_policy = "hide"
            panel.add_layout(panel.legend[0], "right")
    panels = [plot, drive_panel] + ([switch_panel] if switch_panel is not None else [])
    return column(*panels), caption


def standalone_page(
    response: "Response",
    *,
    title: str,
    head_html: str,
    top_html: str,
    bottom_html: str,
    caption_html_for: Any,
    tolerance: "Tolerance | None" = None,
) -> str:
    """One self-contained HTML page: the given HTML around the figure, BokehJS inline.

    `title` is plain text (escaped by bokeh's template); the ``*_html``
    arguments are HTML already escaped by the caller, and
    `caption_html_for` turns the figure's plain-text caption into HTML.
    """
    layout, caption = response_figure(response, tolerance)
    return file_html(
        layout,
        resources=INLINE,
        title=title,
        template=_TEMPLATE,
        template_variables={
            "report_head": head_html,
            "report_top": top_html,
            "report_bottom": bottom_html,
            "plot_caption": caption_html_for(caption),
        },
    )

"""The report's figure: drive and response on one time axis, as a standalone HTML page.

:mod:`firstorder.report.html` writes the report's text; this module adds the
interactive plot and assembles the page, with BokehJS inline (nothing is
fetched from the network).  It imports bokeh and no ipywidgets, so a report
needs bokeh but not a notebook.  Colours and names come from
:mod:`firstorder.plotting.palette`, as on the Bench.

How the plot samples a response: with up to :data:`MAX_DETAILED_SEGMENTS`
segments every segment gets :data:`POINTS_PER_SEGMENT` points, packed towards
its change where the exponential moves fastest, plus its exact end value.
Longer drives are drawn as a min/max band per screen column
(:func:`firstorder.plotting.sampling.envelope`), which is exact: within a
segment a first-order state moves monotonically, so the extremes in a column
are at its edges or at the changes inside it.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
from bokeh.embed import file_html
from bokeh.layouts import column
from bokeh.models import ColumnDataSource, HoverTool, Range1d
from bokeh.plotting import figure
from bokeh.resources import INLINE

from ..plotting.error_view import ErrorView
from ..units import format_value
from ..plotting.palette import (COMPONENT_COLOURS, LINE_DASH, SAMPLE_FAIL, SAMPLE_PASS, TOLERANCE_COLOUR,
                                component_label, source_colour, switch_colour)
from ..plotting.sampling import envelope, plan_samples, step_envelope

if TYPE_CHECKING:
    from ..report.tables import ToleranceSection
    from ..response import Response
    from ..settling.tolerance import Tolerance

__all__ = ["error_figure", "histogram_figure", "response_figure", "standalone_page", "time_scale", "value_scale",
           "yield_figure", "MAX_DETAILED_SEGMENTS", "STUDY_ROOT"]

MAX_DETAILED_SEGMENTS = 2_000
POINTS_PER_SEGMENT = 24
ENVELOPE_COLUMNS = 1_500
_FRAME_WIDTH = 640
#: The name of the tolerance section's plots: the page puts them in that section.
STUDY_ROOT = "tolerance-study"

# The page around the plot; bokeh's own file template supplies <head> and the
# inline BokehJS bundle, and we fill its blocks.  Every variable is HTML made
# and escaped by firstorder.report.html.
_TEMPLATE = """
{% from macros import embed %}
{% block postamble %}{{ report_head }}{% endblock %}
{% block contents %}
{{ report_top }}
<section id=plot><h2>Response</h2>
{{ plot_caption }}
<div class=plots>{% for doc in docs %}{% for root in doc.roots if root.name != study_root %}<div class=plot>{{ embed(root) }}</div>{% endfor %}{% endfor %}</div>
</section>
{{ report_middle }}
{% if study_top %}<section id=tolerance>{{ study_top }}
<div class=plots>{% for doc in docs %}{% for root in doc.roots if root.name == study_root %}<div class=plot>{{ embed(root) }}</div>{% endfor %}{% endfor %}</div>
{{ study_bottom }}</section>{% endif %}
{{ report_bottom }}
{% endblock %}
"""


def time_scale(span: float) -> tuple[float, str]:
    """A factor and unit that put `span` seconds between 1 and 1000 on the axis."""
    return value_scale(span, "s")


def value_scale(span: float, unit: str) -> tuple[float, str]:
    """A factor and prefixed `unit` that put `span` (in `unit`) between 1 and 1000 on an axis.

    Examples
    --------
    >>> value_scale(2.5e-4, "V")
    (1000000.0, 'µV')
    """
    for factor, prefix in ((1.0, ""), (1e3, "m"), (1e6, "µ"), (1e9, "n"), (1e12, "p")):
        if span * factor >= 1.0:
            return factor, prefix + unit
    return 1e12, "p" + unit


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


def _envelope_plan(response: "Response"):
    """Where to evaluate a long response so that each screen column's extremes are exact."""
    return plan_samples(response.starts, response.drive.end, response.tau, response.starts[0], response.drive.end,
                        ENVELOPE_COLUMNS)


def _drive_figure(response: "Response", factor: float, unit: str, detailed: bool, plan):
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
        colour = source_colour(j)
        levels = drive.levels(name)
        if detailed:
            y = np.append(levels, levels[-1])
            panel.step(x, y, mode="after", line_width=2, color=colour, legend_label=name)
        else:
            low, high = step_envelope(plan, drive.times, levels)
            panel.varea(plan.centres * factor, low, high, fill_color=colour, fill_alpha=0.5,
                        legend_label=f"{name} (range per column)")
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
            colour = switch_colour(j)
            if detailed:
                y = np.append(states, states[-1])
                switch_panel.varea_step(x=x, y1=np.full(x.size, float(j)), y2=j + 0.8 * y,
                                        step_mode="after", fill_color=colour, fill_alpha=0.6)
            else:
                low, high = step_envelope(plan, drive.times, states)
                switch_panel.varea(plan.centres * factor, j + 0.8 * low, j + 0.8 * high, fill_color=colour,
                                   fill_alpha=0.6)
    return panel, switch_panel


def error_figure(view: ErrorView, factor: float, unit: str, *, width: int = _FRAME_WIDTH, height: int = 300,
                 x_range: Any = None, lot: Any = None):
    """The error view: each segment's error against time on a log axis, its limit, its samples.

    Parameters
    ----------
    view : ErrorView
        From :func:`firstorder.plotting.error_view.error_view`.
    factor, unit : float, str
        Times are drawn as ``t * factor`` in `unit` (ms, µs, ...).
    width, height : int, optional
        The plot frame in pixels.
    x_range : bokeh Range, optional
        Share the time axis with another figure.
    lot : LotErrors, optional
        The lot's error at each sample per fraction of units
        (:func:`~firstorder.plotting.error_view.lot_errors`), drawn as small bars.

    Returns
    -------
    bokeh figure
    """
    value_unit = view.unit
    panel = figure(
        height=height, frame_width=width, y_axis_type="log",
        title=f"Error to the final value (a hold: to the value it holds), {value_unit}; log scale",
        x_axis_label=f"time ({unit})", y_axis_label=f"|error| ({value_unit})",
        tools="pan,xwheel_zoom,box_zoom,reset,save", **({"x_range": x_range} if x_range is not None else {}),
    )
    panel.line(view.t * factor, view.error, color=COMPONENT_COLOURS["total"], line_width=2, legend_label="error")
    panel.line(view.limit_t * factor, view.limit, color="#1e8449", line_width=2, line_dash="dashed",
               legend_label="tolerance")
    if view.sample_t.size:
        colours = np.where(view.sample_ok, SAMPLE_PASS, SAMPLE_FAIL).tolist()
        source = ColumnDataSource({"t": view.sample_t * factor, "error": view.sample_error,
                                   "limit": view.sample_limit, "colour": colours,
                                   "margin": view.sample_limit / view.sample_error})
        samples = panel.scatter("t", "error", source=source, size=9, color="colour", line_color="#1d2733",
                                legend_label="sample (green inside, red outside)")
        panel.add_tools(HoverTool(renderers=[samples], tooltips=[
            (f"time ({unit})", "@t{0.000000}"), (f"error ({value_unit})", "@error{0.000e}"),
            (f"limit ({value_unit})", "@limit{0.000e}"), ("limit / error", "@margin{0.00}")]))
    if lot is not None and lot.sample_t.size:
        # The lot's errors at each sample, a short dash per fraction of units (darker, larger).
        shades = np.linspace(0.35, 0.9, len(lot.labels))
        for label, errors, shade in zip(lot.labels, lot.errors, shades):
            grey = int(255 * (1 - shade))
            panel.scatter(lot.sample_t * factor, errors, marker="dash", size=14, line_width=3,
                          color=f"#{grey:02x}{grey:02x}{min(255, grey + 60):02x}",
                          legend_label=f"error at the sample: {label} of units" if label != "max" else
                          "error at the sample: worst unit")
    panel.add_layout(panel.legend[0], "right")  # beside the plot: inside it would hide errors near the floor
    return panel


def response_figure(response: "Response", tolerance: "Tolerance | None" = None, table: Any = None):
    """The report's figure: drive above, response below, sharing the time axis; the error
    view under them when there is a settling table.

    Parameters
    ----------
    response : Response
    tolerance : Tolerance, optional
        Draws each segment's tolerance band around its final value.
    table : pandas.DataFrame, optional
        The settling table of the state: the band is drawn around what each segment
        is judged against (a hold: the value it holds), the sample instants are
        marked, and the error view (:func:`error_figure`) is added.

    Returns
    -------
    bokeh layout, str
        The layout and a one-line description of how it was sampled.
    """
    drive = response.drive
    state_unit = response.fixture.state_unit
    span = float(drive.end - drive.times[0])
    factor, unit = time_scale(span)
    detailed = len(drive) <= MAX_DETAILED_SEGMENTS
    plan = None if detailed else _envelope_plan(response)
    plot = figure(
        height=380, frame_width=_FRAME_WIDTH,
        title=f"Response: state of {response.fixture.storage.kind} '{response.fixture.storage.name}'",
        x_axis_label=f"time ({unit})", y_axis_label=f"state ({state_unit})",
        tools="pan,xwheel_zoom,box_zoom,reset,save",
    )
    drive_panel, switch_panel = _drive_figure(response, factor, unit, detailed, plan)
    plot.x_range = drive_panel.x_range
    source_names = [p.name for p in response.fixture.sources]
    if detailed:
        t = _detailed_times(response)
        components = ["forced", "natural", "zero_input", "zero_state", "total"]
        values = response.evaluate(t, tuple(components + (source_names if len(source_names) > 1 else [])))
        if table is not None or tolerance is not None:
            if table is not None:
                from ..settling.table import judged_from  # one rule: a hold's band is on its held value

                centre, limit = judged_from(table), table["tolerance"].to_numpy()
            else:
                centre, limit = response.final, tolerance.limit(np.abs(response.final - response.boundary[:-1]))
            x = np.append(drive.times, drive.end) * factor
            low = np.append(centre - limit, (centre - limit)[-1])
            high = np.append(centre + limit, (centre + limit)[-1])
            plot.varea_step(x=x, y1=low, y2=high, step_mode="after", fill_color=TOLERANCE_COLOUR,
                            fill_alpha=0.45, legend_label="tolerance band")
        if table is not None and "sample_time" in table.columns:
            ok = table["ok"].to_numpy(dtype=bool)
            plot.scatter(table["sample_time"].to_numpy() * factor, table["value_at_sample"].to_numpy(), size=8,
                         color=np.where(ok, SAMPLE_PASS, SAMPLE_FAIL).tolist(), line_color="#1d2733",
                         legend_label="sample (green inside, red outside)")
        renderers = []
        for name in components:
            source = ColumnDataSource({"t": t * factor, "y": values[name]})
            renderers.append(plot.line(
                "t", "y", source=source, color=COMPONENT_COLOURS[name], line_width=3 if name == "total" else 1.8,
                line_dash=LINE_DASH.get(name, "solid"), legend_label=component_label(name), name=component_label(name),
            ))
        if len(source_names) > 1:
            for j, name in enumerate(source_names):
                source = ColumnDataSource({"t": t * factor, "y": values[name]})
                renderers.append(plot.line(
                    "t", "y", source=source, color=source_colour(j),
                    line_width=1.5, line_dash="dotted", legend_label=component_label(name), name=component_label(name),
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
        centres = plan.centres * factor
        low, high = envelope(plan, response.total(plan.times))
        forced_low, forced_high = step_envelope(plan, response.starts, response.final)
        plot.varea(centres, forced_low, forced_high, fill_color=COMPONENT_COLOURS["forced"], fill_alpha=0.35,
                   legend_label="forced (range per column)")
        plot.varea(centres, low, high, fill_color=COMPONENT_COLOURS["total"], fill_alpha=0.6,
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
    if table is not None and detailed:
        from ..plotting.error_view import error_view

        view = error_view(response, table)
        panels.append(error_figure(view, factor, unit, x_range=drive_panel.x_range))
        caption += (" The last plot is each segment's error on a log scale, with the tolerance dashed and each "
                    f"sample marked; an error below {format_value(view.floor, view.unit)} is drawn at it.")
    for panel in panels:
        # Shown while the pointer is over the plot: never printed, never covering the curves.
        panel.toolbar.autohide = True
    return column(*panels), caption


def histogram_figure(section: "ToleranceSection", *, width: int = _FRAME_WIDTH, height: int = 260):
    """The histogram of the worst segment's units (settle times, or errors at the sample),
    with the sample delay (or the limit) marked; its bins in a source named ``"histogram"``."""
    histogram, unit = section.histogram, section.value_unit
    edges = histogram.edges
    span = float(np.max(np.abs(edges))) if edges.size else 1.0
    factor, axis_unit = value_scale(span, unit)
    settle = section.quantity == "settle_time"
    what = "settle times after the change" if settle else "errors at the sample"
    panel = figure(height=height, frame_width=width, name=STUDY_ROOT, tools="pan,xwheel_zoom,box_zoom,reset,save",
                   title=f"Segment {section.worst_segment}: {what}, {section.values.size:,} units",
                   x_axis_label=f"{'settle time' if settle else '|error| at the sample'} ({axis_unit})",
                   y_axis_label="units")
    source = ColumnDataSource({"left": edges[:-1], "right": edges[1:], "count": histogram.counts,
                               "x0": edges[:-1] * factor, "x1": edges[1:] * factor}, name="histogram")
    bars = panel.quad(left="x0", right="x1", bottom=0, top="count", source=source,
                      fill_color=COMPONENT_COLOURS["total"], fill_alpha=0.7, line_color="white")
    panel.add_tools(HoverTool(renderers=[bars], tooltips=[(f"from ({axis_unit})", "@x0{0.0000}"),
                                                          (f"to ({axis_unit})", "@x1{0.0000}"), ("units", "@count")]))
    mark = section.sample_delay if settle else section.limit
    label = "sample delay" if settle else "limit (nominal unit)"
    low, high = float(edges[0]), float(edges[-1])
    width = high - low
    if low - width / 2 <= mark <= high + width / 2:
        top = max(int(histogram.counts.max(initial=0)), 1)
        # A line, not a Span: it then has a legend entry.
        panel.line([mark * factor] * 2, [0, top], line_color=SAMPLE_FAIL, line_width=2, line_dash="dashed",
                   legend_label=label)
        panel.add_layout(panel.legend[0], "right")
    else:  # far off the bins: drawn, it would squeeze them into a corner; the title says where it is
        panel.x_range = Range1d((low - 0.05 * width) * factor, (high + 0.05 * width) * factor)
        panel.title.text += (f"; {label} {format_value(mark, unit, digits=4)}, "
                             f"{'left' if mark < low else 'right'} of the plot")
    panel.y_range.start = 0
    panel.toolbar.autohide = True
    return panel


def yield_figure(section: "ToleranceSection", *, width: int = _FRAME_WIDTH, height: int = 260):
    """The fraction of the worst segment's units inside tolerance against the sample delay
    (:func:`~firstorder.report.tables.yield_curve`), with the sample delay and the segment's
    end marked; the step in a source named ``"yield"`` (delays in seconds)."""
    delays, fractions = section.delays, section.fractions
    right = max(float(delays[-1]), section.duration, section.sample_delay) * 1.05
    factor, unit = time_scale(right)
    x = np.append(delays, right)
    y = np.append(fractions, fractions[-1])
    panel = figure(height=height, frame_width=width, name=STUDY_ROOT, tools="pan,xwheel_zoom,box_zoom,reset,save",
                   title=f"Segment {section.worst_segment}: units inside tolerance against the sample delay",
                   x_axis_label=f"sample delay after the change ({unit})", y_axis_label="units inside (%)",
                   y_range=(0, 101))
    source = ColumnDataSource({"delay": delays, "fraction": fractions, "x": delays * factor,
                               "percent": fractions * 100}, name="yield")
    panel.step(x * factor, y * 100, mode="after", line_width=2, color=COMPONENT_COLOURS["total"],
               legend_label="units inside")
    points = panel.scatter("x", "percent", source=source, size=8, alpha=0)  # invisible: the hover's anchors
    panel.add_tools(HoverTool(renderers=[points], tooltips=[(f"delay ({unit})", "@x{0.000}"),
                                                            ("units inside", "@percent{0.000}%")]))
    for location, colour, dash, label in ((section.sample_delay, SAMPLE_FAIL, "dashed", "sample delay"),
                                          (section.duration, "#5a6877", "dotted", "segment ends")):
        panel.line([location * factor] * 2, [0, 100], color=colour, line_dash=dash, line_width=2,
                   legend_label=label)
    panel.add_layout(panel.legend[0], "right")  # beside the plot: inside it would hide the step
    panel.toolbar.autohide = True
    return panel


def standalone_page(
    response: "Response",
    *,
    title: str,
    head_html: str,
    top_html: str,
    bottom_html: str,
    caption_html_for: Any,
    tolerance: "Tolerance | None" = None,
    table: Any = None,
    middle_html: str = "",
    study: "ToleranceSection | None" = None,
    study_top_html: str = "",
    study_bottom_html: str = "",
) -> str:
    """One self-contained HTML page: the given HTML around the figure, BokehJS inline.

    `title` is plain text (escaped by bokeh's template); the ``*_html``
    arguments are HTML already escaped by the caller, and
    `caption_html_for` turns the figure's plain-text caption into HTML.  The page is
    `top_html`, the response plots, `middle_html`, with a `study` its tolerance section
    (`study_top_html`, the histogram and yield plots, `study_bottom_html`), then `bottom_html`.
    """
    layout, caption = response_figure(response, tolerance, table)
    roots = list(layout.children)
    if study is not None:
        roots += [histogram_figure(study), yield_figure(study)]
    # One root per plot (they share one document, so the time axes stay linked): each is
    # then a block of its own that a printed page does not cut in two.
    return file_html(
        roots,
        resources=INLINE,
        title=title,
        template=_TEMPLATE,
        template_variables={
            "report_head": head_html,
            "report_top": top_html,
            "report_middle": middle_html,
            "report_bottom": bottom_html,
            "plot_caption": caption_html_for(caption),
            "study_root": STUDY_ROOT,
            "study_top": study_top_html if study is not None else "",
            "study_bottom": study_bottom_html,
        },
    )

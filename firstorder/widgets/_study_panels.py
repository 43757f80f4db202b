"""The Bench's lot panels: the Spread tab's fields, the study's table in the Settling tab,
and its histogram and yield-against-delay figures (bokeh), filled from the study.

No maths here beyond picking what to show: the numbers are the study's
(:mod:`._lot` reads them), the cells are written by :func:`firstorder.report.tables.settling_cell`.
"""

from __future__ import annotations

import html
import re
from dataclasses import dataclass
from typing import Callable

import ipywidgets as widgets
import numpy as np
from bokeh.layouts import column
from bokeh.models import ColumnDataSource, CustomJSTickFormatter, HoverTool, Range1d, Span
from bokeh.plotting import figure

from ..plotting.format import TICK_CODE
from ..plotting.palette import COMPONENT_COLOURS, LOT_COLOUR, SAMPLE_FAIL
from ..report.tables import histogram, needed_delays, settling_cell, yield_curve
from ..units import format_value
from ._lot import BAND_PREFIX, MAX_UNITS, TEMPCO, TEMPERATURE, UNITS, quantity_units
from ._panels import FieldsPanel, error_html

__all__ = ["HISTOGRAM_QUANTITIES", "UPDATING", "SpreadPanel", "StudyFigures", "StudyProgress", "TABLE_ROWS",
           "spread_panel", "status_html", "study_html"]

_HINT = "color:#566573;font-size:0.85em;line-height:1.25;display:inline-block"
#: What the histogram can show, key to its label.
HISTOGRAM_QUANTITIES = {"settle_time": "settle time", "error_at_sample": "error at the sample"}
#: Rows of the study table shown (the least yield first; a short drive shows every row).
TABLE_ROWS = 12
#: What a lot's figure says while the study of the inputs shown runs on the worker thread.
UPDATING = "updating: the last study's figures until the new one is done"
#: How faint the last study's table is drawn meanwhile.
_STALE_STYLE = "opacity:0.45"


class StudyProgress:
    """A progress bar and its line (``Studying 20,000 units × 200 segments… 35 %``) above the
    plots, shown only while a study runs on the worker thread (``box``, ``bar``, ``label``)."""

    def __init__(self) -> None:
        self.bar = widgets.FloatProgress(value=0.0, min=0.0, max=1.0, bar_style="info",
                                         layout=widgets.Layout(width="240px"))
        self.label = widgets.HTML()
        self.box = widgets.HBox([self.bar, self.label], layout=widgets.Layout(display="none", align_items="center"))
        self.box.add_class("fo-study-progress")

    def show(self, studying) -> None:
        """Show `studying` (a :class:`~._lot_work.Studying`), or hide the bar when None."""
        if studying is None:
            self.box.layout.display = "none"
            return
        self.bar.value = studying.done
        self.label.value = f"<span style='{_HINT}'>{html.escape(str(studying))}</span>"
        self.box.layout.display = None


def _label(text: str) -> widgets.HTML:
    return widgets.HTML(f"<b>{html.escape(text)}</b>", layout=widgets.Layout(width="110px"))


@dataclass(frozen=True)
class SpreadPanel:
    """The Spread tab: its fields (a band per quantity, temperature, tempco, units), the
    envelope's fraction, the worst unit's toggle and a line on the study."""

    box: widgets.VBox
    fields: FieldsPanel
    fraction: widgets.Dropdown
    worst: widgets.ToggleButton
    status: widgets.HTML


def spread_panel(fixture, texts: dict[str, str], fractions: tuple[float, ...], on_edit: Callable[[str, str], None],
                 on_view: Callable[[], None]) -> SpreadPanel:
    """A field per quantity that can vary, the temperature, tempcos and units; `on_edit(key,
    text)` when one is typed, `on_view()` when the envelope's fraction or the worst unit's
    toggle changes."""
    fields: dict[str, widgets.Text] = {}
    errors: dict[str, widgets.HTML] = {}
    rows: list[widgets.Widget] = [widgets.HTML(
        f"<span style='{_HINT}'>A band per quantity, as a spread writes it: <code>±1%</code>, "
        "<code>-20% .. +80%</code>, <code>50m .. 300m</code> (absolute), <code>normal 3%</code>, "
        "<code>normal 3% within 9%</code>; empty: it does not vary. No band: no study. Every edit runs the "
        "study again.</span>")]
    specs = [(BAND_PREFIX + key, key, unit or "gain") for key, unit in quantity_units(fixture).items()]
    specs += [(TEMPERATURE, "temperature", "°C: low .. high, e.g. 0 .. 50"),
              (TEMPCO, "tempco", "per K from 25 °C: r 25ppm; c -750ppm"),
              (UNITS, "units", f"1 to {MAX_UNITS:,}")]
    for key, label, hint in specs:
        field = widgets.Text(value=texts[key], continuous_update=False, layout=widgets.Layout(width="180px"))
        field.tooltip = f"{label}: {hint}"
        field.add_class("fo-spread-" + re.sub(r"[^A-Za-z0-9_-]", "-", key.replace(" ", "-")))
        field.observe(lambda change, key=key: on_edit(key, change["new"]), names="value")
        fields[key], errors[key] = field, widgets.HTML()
        shown = widgets.HTML(f"<span style='{_HINT}'>{html.escape(hint)}</span>")
        rows.append(widgets.VBox([widgets.HBox([_label(label), field, shown]), errors[key]]))
    options = [(f"{f * 100:g} % of units", f) for f in sorted(set(fractions) | {1.0})]
    fraction = widgets.Dropdown(options=options, value=max(f for f in fractions), description="band holds",
                                layout=widgets.Layout(width="260px"))
    fraction.observe(lambda change: on_view(), names="value")
    worst = widgets.ToggleButton(value=False, description="Show the worst unit", icon="user",
                                 layout=widgets.Layout(width="200px"))
    worst.tooltip = "draw the worst unit of the segment shown in the Settling tab (its own response)"
    worst.observe(lambda change: on_view(), names="value")
    status = widgets.HTML()
    box = widgets.VBox([widgets.HTML("<b>Spread</b>"), *rows, widgets.HTML("<b>On the response plot</b>"),
                        widgets.HBox([fraction, worst], layout=widgets.Layout(flex_flow="row wrap")), status])
    return SpreadPanel(box, FieldsPanel(widgets.VBox(), fields, errors), fraction, worst, status)


def study_html(table, unit: str, segment: int, count: int, studying=None) -> str:
    """The study's per-segment table (:meth:`Study.settling <firstorder.studies.Study.settling>`):
    the rows with the least yield and the segment shown, each cell by ``settling_cell``; faint
    under a note while `studying` (the study of the inputs shown still runs)."""
    order = np.argsort(table["yield"].to_numpy(), kind="stable")[:TABLE_ROWS]
    rows = sorted(set(order.tolist()) | {segment})
    columns = [c for c in table.columns if c not in ("start", "sample_time")]
    head = "".join(f"<th style='padding:1px 6px;text-align:left'>{html.escape(c.replace('_', ' '))}</th>"
                   for c in ["segment", *columns])
    body = []
    for k in rows:
        cells = [str(k)] + [settling_cell(c, table[c].iloc[k], unit) for c in columns]
        style = " style='background:#fdf2e9'" if k == segment else ""
        body.append(f"<tr{style}>" + "".join(f"<td style='padding:1px 6px'>{html.escape(cell)}</td>" for cell in cells)
                    + "</tr>")
    attrs = table.attrs
    passing = attrs.get("passing", 0)
    left = len(table) - len(rows)
    caption = (f"{count:,} units (seed {attrs.get('seed')}): {passing:,} pass every sample "
               f"({passing / count:.2%}); tolerance {attrs.get('tolerance')}")
    more = f"; {left:,} more segments not shown (the least yield first)" if left > 0 else ""
    page = (f"<p><b>The lot, per segment</b> ({html.escape(caption + more)})</p>"
            f"<table style='font-size:0.85em'><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>")
    if studying is None:
        return page
    return (f"<p class='fo-lot-updating'><b>{html.escape(UPDATING.capitalize())}</b> "
            f"({html.escape(str(studying))})</p><div style='{_STALE_STYLE}'>{page}</div>")


class StudyFigures:
    """The histogram of one segment's settle times or errors over the units, and the
    fraction of units inside against the sample delay; ``sources`` ``"histogram"``
    (left, right, count), ``"yield"`` (delay, fraction) and ``"yield marks"`` (the delay
    each of the study's fractions needs)."""

    def __init__(self) -> None:
        self.sources = {"histogram": ColumnDataSource({"left": [], "right": [], "count": []}),
                        "yield": ColumnDataSource({"delay": [], "fraction": []}),
                        "yield marks": ColumnDataSource({"delay": [], "fraction": [], "label": []})}
        self.histogram_axis = CustomJSTickFormatter(code=TICK_CODE, args={"unit": "s"})
        counts = figure(width=560, height=220, sizing_mode="stretch_width", tools="xpan,xwheel_zoom,reset,save",
                        title="Units per bin")
        counts.quad(left="left", right="right", bottom=0, top="count", source=self.sources["histogram"],
                    fill_color=LOT_COLOUR, line_color=COMPONENT_COLOURS["total"], line_width=0.5)
        counts.xaxis.formatter = self.histogram_axis
        counts.yaxis.axis_label = "units"
        counts.add_tools(HoverTool(tooltips=[("units", "@count")]))
        self.delay_line = Span(location=0, dimension="height", line_color=SAMPLE_FAIL, line_dash="dashed",
                               visible=False)
        inside = figure(width=560, height=220, sizing_mode="stretch_width", y_range=Range1d(0, 1.02),
                        tools="xpan,xwheel_zoom,box_zoom,reset,save", title="Units inside against the sample delay")
        inside.step("delay", "fraction", source=self.sources["yield"], mode="after", line_width=2,
                    color=COMPONENT_COLOURS["total"])
        marks = inside.scatter("delay", "fraction", source=self.sources["yield marks"], size=8, marker="diamond",
                               fill_color=SAMPLE_FAIL, line_color="#17324d")
        inside.add_tools(HoverTool(renderers=[marks], tooltips=[("", "@label")]))
        inside.add_layout(self.delay_line)
        inside.xaxis.formatter = CustomJSTickFormatter(code=TICK_CODE, args={"unit": "s"})
        inside.xaxis.axis_label = "sample delay after the change"
        inside.yaxis.axis_label = "fraction of units inside"
        for fig in (counts, inside):
            fig.toolbar.logo = None
            fig.toolbar_location = "above"
            fig.min_border_left = 60
        self.counts, self.inside = counts, inside
        self.layout = column(counts, inside, sizing_mode="stretch_width")

    def update(self, values: np.ndarray, unit: str, quantity: str, settle_times: np.ndarray,
               fractions: tuple[float, ...], sample_delay: float | None, segment: int) -> None:
        """Fill from one segment's `values` of `quantity` (in `unit`) and its units' own
        settle times (past the segment's end too; NaN: never)."""
        # The report's rules (report.tables): the same bins, curve and needed delays as its tolerance section.
        counts = histogram(values)
        self.sources["histogram"].data = {"left": counts.edges[:-1], "right": counts.edges[1:],
                                          "count": counts.counts.astype(float)}
        self.histogram_axis.args = {"unit": unit}
        never = counts.missing
        self.counts.title.text = (f"Segment {segment}: {HISTOGRAM_QUANTITIES[quantity]} of {values.size:,} units"
                                  + (f" ({never:,} never settle)" if never else ""))
        self.counts.xaxis.axis_label = HISTOGRAM_QUANTITIES[quantity]
        delay, fraction = yield_curve(settle_times)
        self.sources["yield"].data = {"delay": delay, "fraction": fraction}
        delays, shown, labels = [], [], []
        for share, needed in needed_delays(settle_times, fractions):
            if np.isfinite(needed):  # that many units never settle: no delay to mark
                delays.append(needed)
                shown.append(float(fraction[np.searchsorted(delay, needed, side="right") - 1]))
                labels.append(f"{share * 100:g} % of units inside after {format_value(needed, 's')}")
        self.sources["yield marks"].data = {"delay": delays, "fraction": shown, "label": labels}
        self.inside.title.text = (f"Segment {segment}: units inside against the sample delay"
                                  + (f"; {labels[-1]}" if labels else ""))
        self.delay_line.update(location=sample_delay or 0.0, visible=sample_delay is not None)
        self._mute(False)

    def mark_updating(self) -> None:
        """Say on both figures that they hold the last study's numbers (:data:`UPDATING`) and
        fade them, until :meth:`update` fills them from the new study."""
        for fig in (self.counts, self.inside):
            if not fig.title.text.startswith("("):
                fig.title.text = f"({UPDATING}) {fig.title.text}"
        self._mute(True)

    def _mute(self, muted: bool) -> None:
        # A muted glyph is bokeh's own faint copy of it (alpha 0.2).
        for fig in (self.counts, self.inside):
            for renderer in fig.renderers:
                if renderer.muted != muted:
                    renderer.muted = muted


def status_html(study, error: str | None, worst_needs_tolerance: bool = False, studying=None) -> str:
    """A line on the study under the Spread fields: its units and seed, or its error; while
    `studying`, how far the study of the inputs shown is."""
    if studying is not None:
        return f"<span style='{_HINT}'><b>{html.escape(str(studying))}</b> ({html.escape(UPDATING)})</span>"
    if error:
        return error_html(error)
    if study is None:
        return f"<span style='{_HINT}'>No band given: no study.</span>"
    note = " The worst unit needs a tolerance (Setup)." if worst_needs_tolerance else ""
    return (f"<span style='{_HINT}'>{study.units:,} units, seed {study.seed}: spread "
            f"{html.escape(str(study.spread))}.{note}</span>")

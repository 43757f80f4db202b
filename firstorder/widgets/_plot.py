"""The Bench's two linked bokeh panels: the drive above, the response below.

Data flow is one way: the Bench hands in a response, a settling table and a
view; this module chooses the samples (:mod:`firstorder.plotting.sampling`),
evaluates every visible component on one shared time array, reads the
tolerance bands, sample instants and settle instants from the settling table,
and assigns whole new dicts to the data sources.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from bokeh.layouts import column
from bokeh.models import (
    ColumnDataSource, CustomJSHover, CustomJSTickFormatter, HoverTool, Legend, LegendItem,
    LinearAxis, PointDrawTool, Range1d, FixedTicker,
)
from bokeh.core.properties import value as fixed
from bokeh.plotting import figure

from ..plotting.format import HOVER_CODE, TICK_CODE
from ..plotting.palette import (COMPONENT_COLOURS, LINE_DASH, LOT_COLOUR, SAMPLE_FAIL, SAMPLE_NEUTRAL, SAMPLE_PASS,
                                SELECTION_COLOUR, TOLERANCE_COLOUR, WORST_COLOUR, component_label, source_colour,
                                switch_colour)
from ..settling.table import judged_from, sample_delays
from ..plotting.sampling import envelope, plan_samples, point_envelope, segments_in_view, step_envelope

__all__ = ["MAX_HANDLES", "PIXELS", "Plots", "View"]

#: Drag handles are offered up to this many changes (beyond it, edit the table).
MAX_HANDLES = 400
PLOT_WIDTH = 720  # the first width; the figures then take the width the page gives them
#: The narrowest the figures get (the Bench puts them under the side panel before that).
MIN_PLOT_WIDTH = 460
PIXELS = 520  # the plot area without axes, for sampling


_LEGEND = {"label_text_font_size": "11px", "glyph_width": 18, "spacing": 12, "padding": 4, "margin": 4,
           "label_standoff": 4, "border_line_alpha": 0}


def _formatter(unit: str) -> CustomJSTickFormatter:
    return CustomJSTickFormatter(code=TICK_CODE, args={"unit": unit})


def _hover(unit: str) -> CustomJSHover:
    return CustomJSHover(code=HOVER_CODE, args={"unit": unit})


def _band_hover(band, name: str, value_hover) -> HoverTool:
    """Hover for a min/max band (the plot drawn per pixel column when segments crowd):
    the lowest and highest value within the column under the pointer, and where."""
    return HoverTool(renderers=[band], tooltips=[(f"{name}, lowest", "@low{custom}"),
                                                 (f"{name}, highest", "@high{custom}"),
                                                 ("around", "@t{custom}")],
                     formatters={"@low": value_hover, "@high": value_hover, "@t": _hover("s")})


def _assign(source: ColumnDataSource, data: dict) -> None:
    """Replace `source`'s data, unless it is empty and stays empty: every assignment is a
    message to the browser, and most marks and hidden curves stay empty edit after edit."""
    if all(len(column) == 0 for column in data.values()) and all(len(column) == 0 for column in source.data.values()):
        return
    source.data = data


def _empty_curve() -> dict[str, np.ndarray]:
    empty = np.zeros(0)
    return {"t": empty, "y": empty, "low": empty, "high": empty}


@dataclass
class View:
    """The time span shown, in seconds."""

    start: float
    end: float


class Plots:
    """Figures and data sources; ``update_*`` methods fill them from results."""

    def __init__(self, curve_names: tuple[str, ...], contribution_names: tuple[str, ...],
                 level_names: tuple[str, ...], level_units: dict[str, str],
                 switch_names: tuple[str, ...], start: float, end: float, state_unit: str,
                 value_label: str, trace_name: str | None = None) -> None:
        self.curve_names = curve_names
        self.contribution_names = contribution_names
        self.level_names = level_names
        self.switch_names = switch_names
        self.x_range = Range1d(start, end)
        self.range_shown = (start, end)  # the time span the browser shows (it reports pans and zooms)
        self.sources: dict[str, ColumnDataSource] = {}
        self.line_renderers = {}
        self.band_renderers = {}
        self.legend_items = {}
        self.value_formatters = []  # response-value tick and hover formatters (their unit follows the probe)
        self.mode = "line"  # of the last sampling plan: "line" or "envelope"
        self.shown: tuple[str, ...] = ()  # the curves drawn last, in curve order
        self._lot_labels = ("units", "worst unit")  # the band's and worst unit's legend, as update_lot wrote them
        self._build_drive_figure(level_names, level_units, switch_names)
        self._build_response_figure(curve_names, contribution_names, state_unit, value_label, trace_name)
        figures = [self.drive_figure, self.response_figure]
        if trace_name is not None:
            figures.append(self.residual_figure)
        self.layout = column(*figures, sizing_mode="stretch_width")

    # -- building -----------------------------------------------------------------------
    def _style(self, fig, y_unit: str) -> None:
        fig.xaxis.formatter = _formatter("s")
        fig.yaxis.formatter = _formatter(y_unit)
        fig.toolbar.logo = None
        fig.toolbar_location = "above"  # a row has room for every tool; a short plot's column hides some
        fig.background_fill_color = "#fbfbf8"
        fig.grid.grid_line_color = "#e4e4dc"
        fig.outline_line_color = "#c8c8bd"
        fig.min_border_left = 70
        fig.min_border_right = 70  # room for the switch lanes' axis, so the time axes line up
        fig.min_width = MIN_PLOT_WIDTH

    def _build_drive_figure(self, names, units, switches) -> None:
        distinct_units = sorted({units.get(n, "") for n in names})
        unit = distinct_units[0] if len(distinct_units) == 1 else ""
        fig = figure(width=PLOT_WIDTH, height=210, sizing_mode="stretch_width", x_range=self.x_range, tools="xpan,xwheel_zoom,box_zoom,reset,tap,save",
                     active_scroll="xwheel_zoom", title="Drive")
        self._style(fig, unit)
        fig.yaxis.axis_label = "level"  # the tick labels carry the unit
        fig.xaxis.axis_label = None
        items = []
        if switches:
            fig.extra_y_ranges = {"lanes": Range1d(0, len(switches))}
            lane_axis = LinearAxis(y_range_name="lanes", ticker=FixedTicker(ticks=[j + 0.5 for j in range(len(switches))]),
                                   major_label_overrides={j + 0.5: name for j, name in enumerate(switches)},
                                   axis_label="switch lanes")
            fig.add_layout(lane_axis, "right")
            for j, name in enumerate(switches):
                source = ColumnDataSource({"left": [], "right": [], "bottom": [], "top": []})
                self.sources[f"switch.{name}"] = source
                renderer = fig.quad(left="left", right="right", bottom="bottom", top="top", source=source,
                                    y_range_name="lanes", fill_color=switch_colour(j),
                                    fill_alpha=0.28, line_alpha=0)
                items.append(LegendItem(label=f"{name} closed", renderers=[renderer]))
        for j, name in enumerate(names):
            source = ColumnDataSource(_empty_curve())
            self.sources[f"drive.{name}"] = source
            colour = source_colour(j)
            line = fig.step("t", "y", source=source, mode="after", line_width=2, color=colour)
            band = fig.varea("t", "low", "high", source=source, fill_color=colour, fill_alpha=0.45, visible=False)
            self.line_renderers[f"drive.{name}"] = line
            self.band_renderers[f"drive.{name}"] = band
            items.append(LegendItem(label=name, renderers=[line, band]))
            level = _hover(units.get(name, ""))
            fig.add_tools(HoverTool(renderers=[line], tooltips=[(name, "@y{custom}"), ("from", "@t{custom}")],
                                    formatters={"@y": level, "@t": _hover("s")}))
            fig.add_tools(_band_hover(band, name, level))
        handles = ColumnDataSource({"t": [], "y": [], "row": []})
        self.sources["handles"] = handles
        self.handle_renderer = fig.scatter("t", "y", source=handles, size=9, marker="square",
                                           fill_color="white", line_color="#17324d", line_width=2,
                                           name="firstorder-drive-handles")
        self.point_draw = PointDrawTool(renderers=[self.handle_renderer], add=False, drag=True,
                                        description="Drag a change: left/right moves its instant, up/down its level")
        fig.add_tools(self.point_draw)
        # Dragging on the drive panel moves handles; the response panel pans (the time axis is shared).
        fig.toolbar.active_drag = self.point_draw
        fig.toolbar.active_tap = self.point_draw
        self._add_selection(fig)
        # Legends under the plots, in columns: a legend beside a plot takes its width, and one
        # wider than the page is cut ("tolerance ba").
        fig.add_layout(Legend(items=items, click_policy="none", orientation="horizontal", ncols=4, **_LEGEND), "below")
        self.drive_figure = fig

    def _add_selection(self, fig) -> None:
        """A shaded column over the selected segment, full height (its own 0..1 range)."""
        if "selection" not in self.sources:
            self.sources["selection"] = ColumnDataSource({"left": [], "right": []})
        fig.extra_y_ranges = {**fig.extra_y_ranges, "full": Range1d(0, 1)}
        fig.quad(left="left", right="right", bottom=0, top=1, y_range_name="full",
                 source=self.sources["selection"], fill_color=SELECTION_COLOUR, fill_alpha=0.22, line_alpha=0)

    def _build_response_figure(self, curve_names, contributions, unit, label, trace_name) -> None:
        # The value axis is Python's: fitted to what is drawn in view (fit_values), so a zoom
        # or a new probe never leaves it on another quantity's span; box zoom picks a time span.
        self.y_range = Range1d(0.0, 1.0)
        fig = figure(width=PLOT_WIDTH, height=380, sizing_mode="stretch_width", x_range=self.x_range, y_range=self.y_range,
                     tools="xpan,xwheel_zoom,xbox_zoom,reset,tap,save", active_scroll="xwheel_zoom", title="Response")
        self._style(fig, unit)
        fig.xaxis.axis_label = "time"
        fig.yaxis.axis_label = label
        self.value_formatters.append(fig.yaxis[0].formatter)
        self._add_selection(fig)
        tolerance = ColumnDataSource({"left": [], "right": [], "bottom": [], "top": []})
        self.sources["tolerance"] = tolerance
        tolerance_renderer = fig.quad(left="left", right="right", bottom="bottom", top="top", source=tolerance,
                                      fill_color=TOLERANCE_COLOUR, fill_alpha=0.35, line_alpha=0)
        items = [LegendItem(label="tolerance band", renderers=[tolerance_renderer])]
        self.mark_items = {"tolerance": items[0]}  # shown in the legend only while drawn
        # A study's band of units, behind every curve (drawn first), and its worst unit.
        self.sources["envelope"] = ColumnDataSource({"t": [], "low": [], "high": []})
        lot = fig.varea("t", "low", "high", source=self.sources["envelope"], fill_color=LOT_COLOUR, fill_alpha=0.55)
        lot_hover = _hover(unit)
        self.value_formatters.append(lot_hover)
        fig.add_tools(_band_hover(lot, "units", lot_hover))
        self.band_renderers["envelope"] = lot
        self.mark_items["envelope"] = LegendItem(label="units", renderers=[lot], visible=False)
        items.append(self.mark_items["envelope"])
        for name in curve_names:
            colour = COMPONENT_COLOURS.get(name)
            if colour is None:
                colour = source_colour(contributions.index(name))
            source = ColumnDataSource(_empty_curve())
            self.sources[name] = source
            line = fig.line("t", "y", source=source, color=colour, line_width=2.4 if name == "total" else 1.6,
                            line_dash=LINE_DASH.get(name, "solid"))
            band = fig.varea("t", "low", "high", source=source, fill_color=colour, fill_alpha=0.5, visible=False)
            self.line_renderers[name] = line
            self.band_renderers[name] = band
            text = component_label(name)
            item = LegendItem(label=text, renderers=[line, band])
            self.legend_items[name] = item
            items.append(item)
            value_hover = _hover(unit)
            self.value_formatters.append(value_hover)
            fig.add_tools(HoverTool(renderers=[line], tooltips=[(text, "@y{custom}"), ("at", "@t{custom}")],
                                    formatters={"@y": value_hover, "@t": _hover("s")}))
            fig.add_tools(_band_hover(band, text, value_hover))
        self.sources["worst"] = ColumnDataSource(_empty_curve())
        self.line_renderers["worst"] = fig.line("t", "y", source=self.sources["worst"], color=WORST_COLOUR,
                                                line_width=1.6, line_dash="dotted", visible=False)
        self.band_renderers["worst"] = fig.varea("t", "low", "high", source=self.sources["worst"],
                                                 fill_color=WORST_COLOUR, fill_alpha=0.4, visible=False)
        self.mark_items["worst"] = LegendItem(label="worst unit", visible=False,
                                              renderers=[self.line_renderers["worst"], self.band_renderers["worst"]])
        items.append(self.mark_items["worst"])
        samples = ColumnDataSource({"t": [], "y": [], "colour": [], "error": [], "marker": [], "when": []})
        self.sources["samples"] = samples
        # A segment shorter than the sample delay is sampled at its end: a square there, a diamond elsewhere.
        sample_renderer = fig.scatter("t", "y", source=samples, size=8, marker="marker", fill_color="colour",
                                      line_color="#17324d")
        sample_value, sample_error = _hover(unit), _hover(unit)
        self.value_formatters += [sample_value, sample_error]
        fig.add_tools(HoverTool(renderers=[sample_renderer],
                                tooltips=[("sample at", "@t{custom}"), ("taken", "@when"), ("value", "@y{custom}"),
                                          ("error", "@error{custom}")],
                                formatters={"@t": _hover("s"), "@y": sample_value, "@error": sample_error}))
        self.mark_items["samples"] = LegendItem(label="sample instants", renderers=[sample_renderer])
        items.append(self.mark_items["samples"])
        settle = ColumnDataSource({"t": [], "y": []})
        self.sources["settle"] = settle
        settle_renderer = fig.scatter("t", "y", source=settle, size=10, marker="triangle", fill_color="#f8f9f9",
                                      line_color="#0f7b6c", line_width=2)
        fig.add_tools(HoverTool(renderers=[settle_renderer], tooltips=[("settled at", "@t{custom}")],
                                formatters={"@t": _hover("s")}))
        self.mark_items["settle"] = LegendItem(label="settled", renderers=[settle_renderer])
        items.append(self.mark_items["settle"])
        if trace_name is not None:
            trace = ColumnDataSource(_empty_curve())
            self.sources["trace"] = trace
            trace_line = fig.line("t", "y", source=trace, color="#7f8c8d", line_width=1.2, alpha=0.9)
            self.line_renderers["trace"] = trace_line
            self.band_renderers["trace"] = fig.varea("t", "low", "high", source=trace, fill_color="#7f8c8d",
                                                     fill_alpha=0.4, visible=False)
            items.append(LegendItem(label=f"measured: {trace_name}", renderers=[trace_line]))
            residual_fig = figure(width=PLOT_WIDTH, height=150, sizing_mode="stretch_width", x_range=self.x_range,
                                  tools="xpan,xwheel_zoom,box_zoom,reset,save", active_scroll="xwheel_zoom",
                                  title="Residual: measured - model (total)")
            self._style(residual_fig, unit)
            residual_fig.yaxis.axis_label = "residual"
            residual = ColumnDataSource({"t": [], "y": []})
            self.sources["residual"] = residual
            residual_fig.scatter("t", "y", source=residual, size=3, color="#b03a2e")
            residual_fig.add_layout(Legend(items=[], visible=False), "below")
            self.residual_figure = residual_fig
        self.legend = Legend(items=items, click_policy="none", orientation="horizontal", ncols=3, **_LEGEND)
        fig.add_layout(self.legend, "below")
        self.response_figure = fig

    # -- filling ------------------------------------------------------------------------------
    def set_value_unit(self, unit: str, label: str | None = None) -> None:
        """Axis ticks and hover text of the response panel in `unit` (V or A); the axis
        titled `label` when given."""
        for formatter in self.value_formatters:
            formatter.args = {"unit": unit}
        if label is not None:
            self.response_figure.yaxis[0].axis_label = label

    def update_response(self, response, probe, view: View, visible: set[str]) -> str:
        """Sample `response` for `view`; fill every visible curve; return the plan's mode."""
        plan = plan_samples(response.starts, response.drive.end, response.tau, view.start, view.end, PIXELS)
        shown = tuple(name for name in self.curve_names if name in visible)
        values = response.evaluate(plan.times, shown, probe) if shown else {}
        for name in self.curve_names:
            source = self.sources[name]
            self.legend_items[name].visible = name in values
            if name not in values:
                _assign(source, _empty_curve())
                self.line_renderers[name].visible = False
                self.band_renderers[name].visible = False
                continue
            y = values[name]
            if plan.mode == "line":
                source.data = {"t": plan.times, "y": y, "low": y, "high": y}
            else:
                low, high = envelope(plan, y)
                source.data = {"t": plan.centres, "y": 0.5 * (low + high), "low": low, "high": high}
            self.line_renderers[name].visible = plan.mode == "line"
            self.band_renderers[name].visible = plan.mode == "envelope"
        self.mode, self.shown = plan.mode, shown
        return plan.mode

    def fit_values(self) -> tuple[float, float]:
        """Fit the value axis to the curves, bands, samples and trace drawn (5 % margin)."""
        columns = [self.sources[name].data.get(key, ()) for name in (*self.curve_names, "trace", "envelope", "worst")
                   if name in self.sources for key in ("low", "high")]
        columns += [self.sources["tolerance"].data["bottom"], self.sources["tolerance"].data["top"],
                    self.sources["samples"].data["y"]]
        values = np.concatenate([np.asarray(c, dtype=float).reshape(-1) for c in columns] + [np.zeros(0)])
        values = values[np.isfinite(values)]
        if values.size == 0:
            low, high = 0.0, 1.0
        else:
            low, high = float(values.min()), float(values.max())
            margin = 0.05 * (high - low) or 0.05 * abs(high) or 1e-12
            low, high = low - margin, high + margin
        if (self.y_range.start, self.y_range.end) != (low, high):
            self.y_range.update(start=low, end=high, reset_start=low, reset_end=high)
        return low, high

    def update_drive(self, drive, view: View) -> None:
        """Fill the level steps (or their envelope) and the switch lanes."""
        plan = plan_samples(drive.times, drive.end, np.full(len(drive), np.inf), view.start, view.end, PIXELS)
        for name in self.level_names:
            levels = np.asarray(drive.levels(name), dtype=float)
            source = self.sources[f"drive.{name}"]
            if plan.mode == "line":
                first, last = plan.first, plan.last
                t = np.append(drive.times[first:last + 1], drive.ends[last])
                y = np.append(levels[first:last + 1], levels[last])
                source.data = {"t": t, "y": y, "low": y, "high": y}
            else:
                low, high = step_envelope(plan, drive.times, levels)
                source.data = {"t": plan.centres, "y": 0.5 * (low + high), "low": low, "high": high}
            self.line_renderers[f"drive.{name}"].visible = plan.mode == "line"
            self.band_renderers[f"drive.{name}"].visible = plan.mode == "envelope"
        for j, name in enumerate(self.switch_names):
            closed = np.asarray(drive.levels(name)) != 0
            left, right = _runs(drive.times, drive.ends, closed, plan, view)
            _assign(self.sources[f"switch.{name}"], {
                "left": left, "right": right,
                "bottom": np.full(left.size, j + 0.06), "top": np.full(left.size, j + 0.94),
            })

    def update_handles(self, drive, column_name: str | None) -> bool:
        """Put a drag handle on every change of `column_name`; False when there are too many."""
        if column_name is None or len(drive) > MAX_HANDLES:
            _assign(self.sources["handles"], {"t": [], "y": [], "row": []})
            return False
        self.sources["handles"].data = {
            "t": np.array(drive.times, dtype=float),
            "y": np.array(drive.levels(column_name), dtype=float),
            "row": np.arange(len(drive)),
        }
        return True

    def update_marks(self, response, probe, view: View, table, sample_delay: float | None) -> None:
        """Tolerance bands, sample instants and settle instants of the segments in view
        (when they fit the pixels).

        With a settling table every mark is read from it.  Without one (no
        tolerance) the sample instants are evaluated and drawn neutral.  A segment
        shorter than the sample delay is marked at its end, where the table judges it.
        """
        empty = np.zeros(0)
        first, last = segments_in_view(response.starts, response.drive.end, view.start, view.end)
        crowded = (last - first + 1) * 2 > PIXELS
        rows = slice(first, last + 1)
        starts, ends = response.starts[rows], response.ends[rows]
        # One rule (settling.table.sample_delays): a segment shorter than the delay is read at its end.
        delays = None if sample_delay is None or crowded else sample_delays(
            sample_delay, response.drive.durations[rows], ends=response.ends[rows], past_end="end")
        sampled = None if delays is None else slice(None)
        band = {"left": empty, "right": empty, "bottom": empty, "top": empty}
        samples = {"t": empty, "y": empty, "colour": [], "error": empty, "marker": [], "when": []}
        settle = {"t": empty, "y": empty}
        if crowded:
            pass
        elif table is not None:
            final = judged_from(table)[rows]  # a hold's band sits on the value it holds (droop)
            limit = table["tolerance"].to_numpy()[rows]
            band = {"left": starts, "right": ends, "bottom": final - limit, "top": final + limit}
            if sampled is not None and "sample_time" in table.columns:
                value = table["value_at_sample"].to_numpy()[rows][sampled]
                ok = table["ok"].to_numpy()[rows][sampled]
                samples = {"t": table["sample_time"].to_numpy()[rows][sampled], "y": value,
                           "colour": np.where(ok, SAMPLE_PASS, SAMPLE_FAIL).tolist(), "error": value - final[sampled],
                           **_sample_kinds(delays, response.drive.durations[rows])}
            settle_time = table["settle_time"].to_numpy()[rows]
            marked = np.isfinite(settle_time) & (settle_time > 0)
            # At its settle time a segment's error has fallen to its limit, on the side it came from.
            side = np.sign(table["start_value"].to_numpy()[rows][marked] - final[marked])
            settle = {"t": starts[marked] + settle_time[marked], "y": final[marked] + side * limit[marked]}
        elif sampled is not None:
            instants = starts + delays
            # A reading at a segment's end belongs to that segment (its forced value, not the next one's).
            inside = np.where(delays >= response.drive.durations[rows], np.nextafter(instants, -np.inf), instants)
            at = response.evaluate(inside, ("total", "forced"), probe)
            samples = {"t": instants, "y": at["total"], "colour": [SAMPLE_NEUTRAL] * instants.size,
                       "error": at["total"] - at["forced"], **_sample_kinds(delays, response.drive.durations[rows])}
        for name, data in (("tolerance", band), ("samples", samples), ("settle", settle)):
            _assign(self.sources[name], data)
            shown = len(next(iter(data.values()))) > 0
            if self.mark_items[name].visible != shown:
                self.mark_items[name].visible = shown

    def update_lot(self, study, probe, view: View, fraction: float, worst=None, worst_label: str = "") -> None:
        """The band holding the central `fraction` of `study`'s units
        (:meth:`Study.envelope <firstorder.studies.Study.envelope>`) at the view's samples
        (crowded: per pixel column the lowest low edge and the highest high edge), and
        `worst` (a unit's response) as a curve; nothing without a study."""
        empty = np.zeros(0)
        band, curve = {"t": empty, "low": empty, "high": empty}, _empty_curve()
        mode = "line"
        if study is not None:
            nominal = study.nominal
            plan = plan_samples(nominal.starts, nominal.drive.end, nominal.tau, view.start, view.end, PIXELS)
            mode = plan.mode
            low, high = study.envelope(plan.times, fraction, "total", probe)
            band = ({"t": plan.times, "low": low, "high": high} if mode == "line" else
                    {"t": plan.centres, "low": envelope(plan, low)[0], "high": envelope(plan, high)[1]})
            if worst is not None:
                y = worst.evaluate(plan.times, ("total",), probe)["total"]
                if mode == "line":
                    curve = {"t": plan.times, "y": y, "low": y, "high": y}
                else:
                    low, high = envelope(plan, y)
                    curve = {"t": plan.centres, "y": 0.5 * (low + high), "low": low, "high": high}
        _assign(self.sources["envelope"], band)
        _assign(self.sources["worst"], curve)
        items = self.mark_items
        # fixed(): a plain string set on a legend item would be read as a column's name.
        self._lot_labels = (f"{fraction * 100:g} % of units", worst_label or "worst unit")
        items["envelope"].update(visible=band["t"].size > 0, label=fixed(self._lot_labels[0]))
        items["worst"].update(visible=curve["t"].size > 0, label=fixed(self._lot_labels[1]))
        self.line_renderers["worst"].visible = curve["t"].size > 0 and mode == "line"
        self.band_renderers["worst"].visible = curve["t"].size > 0 and mode == "envelope"

    def mark_lot(self, updating: bool) -> None:
        """Draw the band of units and the worst unit faint (bokeh's muted glyphs), their legend
        saying "updating", while a newer study runs; as :meth:`update_lot` drew them otherwise."""
        note = " (updating)" if updating else ""
        envelope, worst = self._lot_labels
        self.mark_items["envelope"].label = fixed(envelope + note)
        self.mark_items["worst"].label = fixed(worst + note)
        for renderer in (self.band_renderers["envelope"], self.band_renderers["worst"], self.line_renderers["worst"]):
            renderer.muted = updating

    def update_trace(self, times: np.ndarray, values: np.ndarray, residual_times: np.ndarray,
                     residual: np.ndarray, view: View) -> None:
        """The measured trace in view (min/max per pixel column when dense) and its residual."""
        inside = (times >= view.start) & (times <= view.end)
        shown_t, shown_v = times[inside], values[inside]
        banded = shown_t.size > 4 * PIXELS
        if banded:
            centres, low, high = point_envelope(shown_t, shown_v, view.start, view.end, PIXELS)
            self.sources["trace"].data = {"t": centres, "y": 0.5 * (low + high), "low": low, "high": high}
        else:
            self.sources["trace"].data = {"t": shown_t, "y": shown_v, "low": shown_v, "high": shown_v}
        self.line_renderers["trace"].visible = not banded
        self.band_renderers["trace"].visible = banded
        keep = (residual_times >= view.start) & (residual_times <= view.end)
        step = max(int(keep.sum()) // (4 * PIXELS), 1)
        self.sources["residual"].data = {"t": residual_times[keep][::step], "y": residual[keep][::step]}

    def show_span(self, view: View, start: float, end: float) -> None:
        """Put the shared time axis on `view` (reset goes back to ``[start, end]``), unless
        the browser shows it already: the span it reported is not sent back to it, so a
        pan in progress is not pulled back by its own echo."""
        if (view.start, view.end) != self.range_shown or (self.x_range.reset_start, self.x_range.reset_end) != (start, end):
            self.x_range.update(start=view.start, end=view.end, reset_start=start, reset_end=end)
        self.range_shown = (view.start, view.end)

    def components_table(self, unit: str):
        """The curves drawn last as a pandas DataFrame (time, then each curve; min and max
        columns in envelope mode)."""
        import pandas as pd

        columns: dict[str, np.ndarray] = {}
        for name in self.shown:
            data = self.sources[name].data
            if "time (s)" not in columns:
                columns["time (s)"] = np.asarray(data["t"], dtype=float)
            if self.mode == "line":
                columns[f"{name} ({unit})"] = np.asarray(data["y"], dtype=float)
            else:
                columns[f"{name} min ({unit})"] = np.asarray(data["low"], dtype=float)
                columns[f"{name} max ({unit})"] = np.asarray(data["high"], dtype=float)
        return pd.DataFrame(columns)

    def update_selection(self, drive, segment: int | None) -> None:
        if segment is None:
            _assign(self.sources["selection"], {"left": [], "right": []})
        else:
            self.sources["selection"].data = {"left": [float(drive.times[segment])], "right": [float(drive.ends[segment])]}


def _sample_kinds(delays: np.ndarray, durations: np.ndarray) -> dict[str, list[str]]:
    """Each sample's marker and how it was taken: at the delay, or at the end of a segment
    shorter than the delay (a square, so the engineer sees which readings those are)."""
    at_end = delays >= durations
    return {"marker": np.where(at_end, "square", "diamond").tolist(),
            "when": np.where(at_end, "at the segment's end (shorter than the delay)", "after the delay").tolist()}


def _runs(starts, ends, closed, plan, view) -> tuple[np.ndarray, np.ndarray]:
    """Left and right edges of the stretches where `closed` holds (merged per pixel when crowded)."""
    if plan.mode == "envelope":
        edges = plan.edges
        low, high = step_envelope(plan, starts, closed.astype(float))
        marked = high > 0
        starts, ends, closed = edges[:-1], edges[1:], marked
    if not closed.any():
        return np.zeros(0), np.zeros(0)
    change = np.diff(closed.astype(np.int8), prepend=0, append=0)
    begin = np.flatnonzero(change == 1)
    finish = np.flatnonzero(change == -1) - 1
    return np.asarray(starts)[begin].astype(float), np.asarray(ends)[finish].astype(float)

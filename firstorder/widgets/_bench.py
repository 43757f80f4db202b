"""Bench: the notebook app, wired from a session, its panels and two linked bokeh plots.

The state lives in a :class:`~firstorder.widgets._session.BenchSession`
(``bench.session``).  Controls call its edit methods; one observer of the
session (:meth:`Bench._refresh`) redraws whatever a change made out of date,
each part at most once whatever number of traits the edit replaced.
"""

from __future__ import annotations

import html
from pathlib import Path
from typing import Any

import ipywidgets as widgets
from bokeh.events import RangesUpdate, Tap
from jupyter_bokeh import BokehModel

from ..drive import Drive
from ..errors import InputError
from ..fixture import Fixture
from ..io.atomic import write_atomic
from ..settling.tolerance import Tolerance
from . import _panels as panels
from . import _study_panels as lot_panels
from ._loader import live_kernel_cell, publish_bokehjs
from ._files import loaded_inputs
from ._generators import column_defaults
from ._lot import is_lot_key, lot_inputs, shown_segment
from ._plot import Plots, View
from ._session import SETUP_KEYS, BenchSession, part_fields

__all__ = ["Bench"]

_DERIVATION_TAB, _SETTLING_TAB = panels.TAB_TITLES.index("Derivation"), panels.TAB_TITLES.index("Settling")
_ERROR_TAB, _SPREAD_TAB = panels.TAB_TITLES.index("Error view"), panels.TAB_TITLES.index("Spread")
#: Every session trait a drawing depends on.
_WATCHED = ["texts", "errors", "notice", "table", "drive", "view", "probe", "response", "settling", "summary", "residual",
            "curves", "segment", "study", "study_table", "studying"]


def _same(old: tuple, new: tuple) -> bool:
    # The session replaces results, never edits them: a drawing is up to date while every
    # input is the same object (or an equal plain value, such as the view span).
    return all(a is b or (isinstance(a, (str, float, int, tuple)) and a == b) for a, b in zip(old, new))


class Bench(widgets.VBox):
    """An app for one fixture and drive: edit parts and the drive, see every component.

    Parameters
    ----------
    fixture : Fixture
        The fixture; each part value gets a text field.
    drive : Drive
        The drive; it becomes the editable table.
    initial : float, str, optional
        Starting state (V or A), ``"settled"`` or ``"periodic"``.
    tolerance : Tolerance, optional
        Draws a band around each final value and judges the sample instants.
    sample_delay : float or str, optional
        Time after each change at which the reading is taken (marked on the plot).
    trace : object, optional
        A measured waveform with ``.times``, ``.values`` and ``.name``; drawn over
        the model with its residual in a third panel.
    spread : Spread, optional
        The lot's spread: a study of `units` units (default 1,000, at most 100,000) drawn
        with `seed` (default 1), run again on every edit.  Its band of units is drawn behind
        the curves, its table (the `fractions` of units, default 0.5, 0.99 and 0.999) and a
        segment's histogram and yield against the sample delay are in the Settling tab;
        the bands, temperature, tempcos and units are fields of the Spread tab.

    Attributes
    ----------
    session : BenchSession
        The state: last good inputs and results, errors, undo, view, selection.
        Observe it or ``traitlets.link`` to it from other widgets.
    fixture, drive, response, settling, summary
        The last good ones (a bad entry never replaces them).
    error : str
        Every current error, one per line; ``""`` when all is well.
    fields : dict
        Part name to its text widget (a switch has ``"<name>.r_on"`` and
        ``"<name>.r_off"``).  Setting ``.value`` recomputes at once.
    setup_fields : dict
        ``"initial"``, ``"tolerance"`` and ``"sample_delay"`` text widgets.
    spread_fields : dict
        The Spread tab's text widgets: ``"band <quantity>"`` (``"band r"``, ``"band k1.r_on"``,
        ``"band vdac.gain"``), ``"lot temperature"``, ``"lot tempco"`` and ``"lot units"``.
    study_sources : dict
        The Settling tab's ``"histogram"``, ``"yield"`` and ``"yield marks"`` data sources
        (the response plot's ``sources`` hold ``"envelope"`` and ``"worst"``).
    sources : dict
        Curve name (``"total"``, ``"zero_input"``, a source name ...) to its
        bokeh ``ColumnDataSource``; also ``"drive.<column>"``, ``"switch.<name>"``,
        ``"tolerance"``, ``"samples"``, ``"settle"``, ``"handles"``, ``"selection"``.
    table_source : ColumnDataSource
        The drive table's text (``"time"`` and one column per source and switch).

    Examples
    --------
    >>> import firstorder as fo
    >>> bench = fo.Bench(fo.Fixture.rc(r="10k", c="100n"), fo.Drive.steps([(0, 0.0), ("1m", 5.0)], end="6m"))
    >>> bench.fields["r"].value = "20k"
    >>> print(fo.format_value(bench.response.tau[0], "s"))
    2 ms
    >>> bench.fields["r"].value = "twenty"
    >>> bench.error
    "r (value): 'twenty' is not a number (use a float or engineering notation such as '4.7k' or '100nF')"
    >>> bench.fixture.part_map["r"].value   # the last good value is kept
    20000.0
    """

    def __init__(self, fixture: Fixture, drive: Drive, initial: Any = 0.0, tolerance: Tolerance | None = None,
                 sample_delay: Any = None, trace: Any = None, spread: Any = None, units: Any = None,
                 seed: Any = None, fractions: Any = None) -> None:
        session = self.session = BenchSession(fixture, drive, initial, tolerance, sample_delay, trace, spread, units,
                                              seed, fractions)
        fixture = session.fixture
        self._syncing = False  # the Bench itself is setting a control: its callback stays quiet
        self._typed = False  # the table widget already holds the text the session took
        self._drawn: dict[str, tuple] = {}
        sources = tuple(p.name for p in fixture.sources)
        trace_name = None if session.trace is None else session.trace.name
        self.plots = Plots(session.curve_names, sources, sources, session.table.units,
                           tuple(p.name for p in fixture.switches), *session.view, fixture.state_unit,
                           panels.value_label(fixture, session.probe), trace_name=trace_name)
        self.sources = self.plots.sources
        # Before the wrap: a bokeh document routes a browser event only to the models that
        # had subscribed when they joined it, and BokehModel puts the figures into one.
        self.plots.response_figure.on_event(Tap, self._on_tap)
        self.plots.drive_figure.on_event(Tap, self._on_tap)
        self.plots.response_figure.on_event(RangesUpdate, self._on_ranges)
        self.plot_view = BokehModel(self.plots.layout, combine_events=True)
        # The plots take the width left beside the side panel, and go under it when too little is left.
        self.plot_view.layout = widgets.Layout(flex="1 1 460px", min_width="0", width="auto")
        self.sources["handles"].on_change("data", self._on_handles)

        parts = panels.parts_panel(part_fields(fixture), self._on_field)
        setup = panels.setup_panel(session.texts, fixture.state_unit, self._on_field, fixture.storage.kind)
        view = panels.view_panel(fixture, session.curve_names, session.curves, session.probe, self._on_probe,
                                 self._on_overlay, self.undo)
        editor = panels.drive_editor(session.table, self._on_row, self._on_end, lambda _: self._refresh())
        table = session.table
        generators = panels.generators_panel(table.names, table.switches, table.units,
                                             column_defaults(session.drive, table.switches, table.units), self._generate)
        storage = fixture.storage
        export = panels.export_panel([
            ("Plotted components (CSV)", "_components.csv", self.export_components),
            ("Drive (CSV)", "_drive.csv", self.export_drive),
            ("Analysis (JSON)", "_analysis.json", lambda path: self.save_analysis(path, *self._title_notes())),
            ("Report (HTML)", "_report.html", lambda path: self.report(path, *self._title_notes()))],
            f"{storage.kind.capitalize()} '{storage.name}': settling", self._on_load)
        lot = self.spread_panel = lot_panels.spread_panel(fixture, session.texts, session.lot.fractions,
                                                          self._on_field, lambda: self._refresh())
        self._panels = (parts, setup, view, editor)
        self.fields, self.setup_fields, self.spread_fields = parts.fields, setup.fields, lot.fields.fields
        self._field_errors = {**parts.errors, **setup.errors, **lot.fields.errors}
        self.probe_selector, self.overlays, self.undo_button = view.probe_selector, view.overlays, view.undo_button
        self.table_source, self.drive_table, self.table_view = editor.table_source, editor.drive_table, editor.table_view
        self.end_field, self.row_field, self.drag_column, self.drive_error = (
            editor.end_field, editor.row_field, editor.drag_column, editor.error)
        self.generators = generators
        self.generator_error = generators.error
        self.export = export
        self.export_name, self.export_message = export.name, export.message
        self.table_source.on_change("data", self._on_table)
        self.table_source.selected.on_change("indices", self._on_table_selection)
        self.status, self.info, self.cautions_panel = widgets.HTML(), widgets.HTML(), widgets.HTML()
        self.lot_progress = lot_panels.StudyProgress()
        self.info.add_class("fo-info")
        self.derivation, self.settling_panel = widgets.HTMLMath(value=""), widgets.HTML(value="")
        self.error_view = widgets.VBox()
        self.study_panel = widgets.HTML(value="")
        self.study_figures = lot_panels.StudyFigures()
        self.study_sources = self.study_figures.sources
        self.study_view = BokehModel(self.study_figures.layout, combine_events=True)
        self.study_view.layout = widgets.Layout(width="100%")
        self.histogram_of = widgets.ToggleButtons(options=[(label, key) for key, label in
                                                           lot_panels.HISTOGRAM_QUANTITIES.items()],
                                                  description="histogram of")
        self.histogram_of.observe(lambda change: self._refresh(), names="value")
        self._study_box = widgets.VBox([self.study_panel, self.histogram_of, self.study_view])
        settling_tab = widgets.VBox([self.settling_panel, self._study_box])
        self.tabs = panels.tab_panel([editor.box, generators.box, self.derivation, settling_tab, export.box,
                                      self.error_view, lot.box])
        self.tabs.observe(lambda change: self._refresh(), names="selected_index")
        left = widgets.VBox([parts.box, setup.box, view.box], layout=widgets.Layout(flex="0 0 320px", width="320px"))
        self.header = widgets.HTML()
        top = widgets.HBox([left, self.plot_view], layout=widgets.Layout(flex_flow="row wrap", width="100%"))
        super().__init__([self.header, self.status, self.lot_progress.box, self.cautions_panel, top, self.info, self.tabs],
                         layout=widgets.Layout(width="100%", max_width="100%"))
        self.add_class("fo-bench")
        session.observe(self._refresh, names=_WATCHED)
        self._refresh()
        # Shown inside another widget (a dashboard's VBox or Tab), the Bench is never asked
        # for a display bundle of its own: so BokehJS goes to the page now, in a live
        # notebook, and the views' bundles carry the data set above.
        self._bokehjs_cell: int | None = None
        if live_kernel_cell() is not None:
            self._publish_bokehjs()
            self._bring_views_up_to_date()

    # -- public reading ----------------------------------------------------------------------------
    fixture = property(lambda self: self.session.fixture, doc="The last good fixture.")
    drive = property(lambda self: self.session.drive, doc="The last good drive.")
    response = property(lambda self: self.session.response, doc="The last good response.")
    settling = property(lambda self: self.session.settling, doc="The settling table (None without a tolerance).")
    summary = property(lambda self: self.session.summary, doc="The settling summary (None without a tolerance).")
    probe = property(lambda self: self.session.probe, doc="The probe shown (None: the storage element's state).")
    tolerance = property(lambda self: self.session.tolerance, doc="The tolerance as given (it judges only a quantity in its unit).")
    sample_delay = property(lambda self: self.session.sample_delay, doc="The sample delay (s), or None.")
    error = property(lambda self: self.session.error, doc="Every current error, one per line (\"\" when all is well).")
    plot_mode = property(lambda self: self.plots.mode,
                         doc='``"line"`` (every segment drawn) or ``"envelope"`` (min/max per pixel column).')

    def __repr__(self) -> str:
        # Also the text a saved notebook shows where the live app was.
        storage = self.fixture.storage
        return (f"Bench({storage.kind} '{storage.name}', {len(self.drive)} changes; "
                f"run the cell in a live notebook to open the app)")

    def _repr_mimebundle_(self, **kwargs):
        # BokehJS must be in the page before jupyter_bokeh's view is created (once a cell).
        if self._bokehjs_cell is None or self._bokehjs_cell != live_kernel_cell():
            self._publish_bokehjs()
        self._bring_views_up_to_date()
        return super()._repr_mimebundle_(**kwargs)

    def _publish_bokehjs(self) -> None:
        publish_bokehjs()
        self._bokehjs_cell = live_kernel_cell()

    def _bring_views_up_to_date(self) -> None:
        # A view draws from the render bundle; patches sent before any view
        # existed reached no one, so the bundle is brought up to date first.
        self.plot_view.update_from_model(self.plots.layout)
        self.table_view.update_from_model(self.drive_table)
        self.study_view.update_from_model(self.study_figures.layout)

    # -- edits: each goes to the session ------------------------------------------------------------------
    def edit_cell(self, row: int, column: str, text: str) -> None:
        """Type `text` into the drive table (as a double-click edit in the browser does)."""
        names = self.session.table.names
        if column != "time" and column not in names:
            raise InputError(f"edit_cell: column {column!r} is not one of {['time', *names]}")
        if not 0 <= row < len(self.table_source.data["time"]):
            raise InputError(f"edit_cell: row {row!r} does not exist; rows are 0 to {len(self.session.table) - 1}")
        self.table_source.patch({column: [(row, str(text))]})

    def add_row(self) -> None:
        """Append a change at the end of the drive (the last levels held as long as the last segment)."""
        self.session.add_row()

    def insert_row(self, row: int) -> None:
        """Insert a change before `row`, halfway from the one before."""
        self.session.insert_row(row)

    def duplicate_row(self, row: int) -> None:
        """Repeat `row` halfway to the next change."""
        self.session.duplicate_row(row)

    def delete_row(self, row: int) -> None:
        """Remove the change in `row`."""
        self.session.delete_row(row)

    def set_drive(self, drive: Drive) -> None:
        """Replace the drive (undoable); it must have the same columns."""
        self.session.set_drive(drive)

    def set_view(self, start: float, end: float) -> None:
        """Show the time span [start, end] (s), resampled for the screen."""
        self.session.set_view(start, end)

    def select_segment(self, segment: int) -> None:
        """Show the derivation of `segment`'s configuration and shade it on the plot."""
        self.session.select_segment(segment)

    def undo(self) -> bool:
        """Take back the last edit; False when there is nothing to take back.

        A rejected entry (one showing an error) is the last edit: undo first
        puts back the last good text; the edit before it needs another undo.
        """
        return self.session.undo()

    def wait_study(self, timeout: float | None = None) -> bool:
        """Wait for a large lot's study, running on the worker thread while the controls stay
        live, and show it; False when `timeout` (s) passes first (:meth:`BenchSession.wait_study`)."""
        return self.session.wait_study(timeout)

    def _on_field(self, key: str, text: str) -> None:
        if not self._syncing:
            s = self.session
            (s.edit_setup if key in SETUP_KEYS else s.edit_spread if is_lot_key(key) else s.edit_part)(key, text)

    def _on_row(self, action: str, row: int) -> None:
        {"add": lambda: self.add_row(), "insert": lambda: self.insert_row(row),
         "duplicate": lambda: self.duplicate_row(row), "delete": lambda: self.delete_row(row)}[action]()

    def _typed_edit(self, columns: dict, end: str | None = None) -> None:
        if self._syncing:
            return
        self._typed = True
        try:
            self.session.edit_table(columns, end=end)
        finally:
            self._typed = False

    def _on_table(self, attr, old, new) -> None:
        self._typed_edit(dict(self.table_source.data))

    def _on_end(self, text: str) -> None:
        self._typed_edit({}, end=text)

    def _generate(self) -> None:
        self.session.generate(*self.generators.values())

    def generate(self, kind: str, column: str, columns: dict[str, str] | None = None, **fields: str) -> bool:
        """Fill the Generators tab and press its button: `kind` ``"pattern"``, ``"staircase"``
        or ``"ramp"`` on source `column`, its `fields` as text (those not given keep what the tab
        shows), `columns` the other columns' text.  False (and an error there) when refused."""
        panel = self.generators
        if kind not in panel.fields:
            raise InputError(f"generate: kind {kind!r} is not one of {list(panel.fields)}")
        unknown = set(fields) - set(panel.fields[kind]) or set(columns or {}) - set(panel.columns)
        if unknown:
            raise InputError(f"generate: {sorted(unknown)} are not fields of {kind!r}")
        panel.kind.value, panel.column.value = kind, column
        for key, text in fields.items():
            panel.fields[kind][key].value = str(text)
        for name, text in (columns or {}).items():
            panel.columns[name].value = str(text)
        return self.session.generate(*panel.values())

    def _on_handles(self, attr, old, new) -> None:
        if self._syncing:
            return
        data = self.sources["handles"].data
        if not self.session.drag(self.drag_column.value, data["t"], data["y"]):
            self._drawn.pop("handles", None)  # refused: the handles go back where the drive has them
            self._refresh()

    def _on_probe(self, name: str) -> None:
        if not self._syncing:
            self.session.probe = name or None

    def _on_overlay(self, name: str, shown: bool) -> None:
        if not self._syncing:
            curves = set(self.session.curves)
            self.session.curves = tuple(curves | {name} if shown else curves - {name})

    def _on_tap(self, event) -> None:
        if event.x is not None and self.drive.start <= event.x <= self.drive.end:
            self.select_segment(int(self.drive.segment_at(float(event.x))))

    def _on_ranges(self, event) -> None:
        if event.x0 is not None and event.x1 is not None:
            self.plots.range_shown = (float(event.x0), float(event.x1))
            self.set_view(event.x0, event.x1)

    def _on_table_selection(self, attr, old, new) -> None:
        if new:
            self.select_segment(int(new[0]))

    # -- drawing: whatever the session changed ---------------------------------------------------------
    def _refresh(self, change=None) -> None:
        with self.session.lock:  # the worker's answers, applied without a kernel loop, wait for this
            self._draw()

    def _draw(self) -> None:
        s = self.session
        updating = s.studying is not None  # the lot's figures are of the last inputs studied
        tab = self.tabs.selected_index
        shown_segment = self._drawn.get("derivation", (None, None, None))[2]
        view = View(*s.view)
        parts, setup, shown, editor = self._panels
        self._redraw("errors", (s.errors, s.notice), self._show_errors)
        self._redraw("header", (s.drive,), lambda: setattr(self.header, "value", panels.header_html(s.fixture, s.drive)))
        self._redraw("texts", (s.texts, s.errors), lambda: self._sync(lambda: [
            parts.show(s.texts, s.errors), setup.show(s.texts, s.errors), self.spread_panel.fields.show(s.texts, s.errors)]))
        self._redraw("table", (s.table,), lambda: self._sync(lambda: editor.show(s.table, not self._typed,
                                                                                   len(s.history))))
        self._redraw("handles", (s.drive, self.drag_column.value), lambda: self._sync(
            # The drag column offers the sources; with none it holds "" and there are no handles.
            lambda: self.plots.update_handles(s.drive, self.drag_column.value or None)))
        self._redraw("span", (s.view, s.drive), lambda: self.plots.show_span(view, float(s.drive.start),
                                                                             float(s.drive.end)))
        self._redraw("drive", (s.drive, s.view), lambda: self.plots.update_drive(s.drive, view))
        self._redraw("probe", (s.probe,), lambda: self.plots.set_value_unit(
            s.value_unit, panels.value_label(s.fixture, s.probe)))
        self._redraw("shown", (s.probe, s.curves), lambda: self._sync(lambda: shown.show(s.probe, s.curves)))
        self._redraw("curves", (s.response, s.probe, s.view, s.curves),
                     lambda: self.plots.update_response(s.response, s.probe, view, set(s.curves)))
        self._redraw("marks", (s.response, s.probe, s.view, s.settling, s.sample_delay),
                     lambda: self.plots.update_marks(s.response, s.probe, view, s.settling, s.sample_delay))
        if s.trace is not None:
            self._redraw("trace", (s.residual, s.view), lambda: self.plots.update_trace(
                s.trace.times, s.trace.values, s.residual.times, s.residual.values, view))
        lot = self.spread_panel
        worst = self._worst_unit() if lot.worst.value else None
        # While a newer study runs, the last band stays as drawn, faint: not computed again for a stale study.
        self._redraw("lot", (s.study, s.probe, s.view, lot.fraction.value, worst),
                     lambda: self.plots.update_lot(s.study, s.probe, view, lot.fraction.value, *(worst or (None, ""))),
                     when=not updating)
        self._redraw("lot updating", (updating, lot.fraction.value), lambda: self.plots.mark_lot(updating))
        self._redraw("progress", (s.studying,), lambda: self.lot_progress.show(s.studying))
        self._redraw("lot status", (s.study, s.errors.get("study"), s.study_table, lot.worst.value, s.studying),
                     lambda: setattr(lot.status, "value", lot_panels.status_html(
                         s.study, s.errors.get("study"), s.study_table is None and lot.worst.value, s.studying)))
        self._redraw("value axis", (s.response, s.probe, s.view, s.curves, s.settling, s.sample_delay, s.residual,
                                    s.study, lot.fraction.value, worst), self.plots.fit_values)
        self._redraw("info", (s.response, self.plots.mode, s.residual),
                     lambda: setattr(self.info, "value", panels.info_html(s, self.plots.mode)))
        self._redraw("cautions", (s.response,), lambda: setattr(
            self.cautions_panel, "value", panels.cautions_html(s.response.cautions)))
        self._redraw("selection", (s.drive, s.segment), lambda: [
            self.plots.update_selection(s.drive, s.segment), editor.select(s.segment)])
        # The text tabs are written only when someone looks (a derivation needs sympy);
        # a newly selected segment shows its derivation at once.
        self._redraw("settling panel", (s.settling, s.summary),
                     lambda: setattr(self.settling_panel, "value", panels.settling_html(s)), when=tab == _SETTLING_TAB)
        self._redraw("study", (s.study, s.study_table, s.segment, self.histogram_of.value, updating), self._show_study,
                     when=tab == _SETTLING_TAB)
        self._redraw("derivation", (s.fixture, s.response, s.segment, s.probe),
                     lambda: setattr(self.derivation, "value", panels.derivation_html(s)),
                     when=tab == _DERIVATION_TAB or s.segment != shown_segment)
        self._redraw("error view", (s.response, s.settling, s.probe, s.view, s.study_table, updating),
                     self._show_error_view, when=tab == _ERROR_TAB)

    def _worst_unit(self):
        """``(response, label)`` of the worst unit of the segment the Settling tab shows (None
        without a study table); the same object while the study and segment stay."""
        s = self.session
        if s.study_table is None:
            return None
        segment = shown_segment(s.study_table, self._lot_segment())
        unit = int(s.study_table["worst_unit"].iloc[segment])
        key = (s.study, unit)
        if getattr(self, "_worst", (None, None))[0] != key:
            self._worst = (key, (s.study.unit(unit), f"worst unit ({unit}, segment {segment})"))
        return self._worst[1]

    def _show_study(self) -> None:
        s = self.session
        table, study = s.study_table, s.study
        self._study_box.layout.display = None if study is not None else "none"
        if study is None or table is None:
            self.study_panel.value = "" if study is None else (
                "<p>Give a tolerance (Setup) to see the lot's settling per segment.</p>")
            return
        segment = shown_segment(table, self._lot_segment())
        self.study_panel.value = lot_panels.study_html(table, table.attrs["unit"], segment, study.units, s.studying)
        if s.studying is not None:  # the figures keep the last study's numbers, marked, until the new one is done
            self.study_figures.mark_updating()
            return
        tolerance = s.judged(s.tolerance, s.probe)
        quantity = self.histogram_of.value
        settle, _ = study.segment_values(segment, "settle_time", tolerance, None, s.probe)
        values, unit = (settle, "s") if quantity == "settle_time" else study.segment_values(
            segment, quantity, tolerance, s.sample_delay, s.probe)
        self.study_figures.update(values, unit, quantity, settle, s.lot.fractions, s.sample_delay, segment)

    def _lot_segment(self) -> int | None:
        """The selected segment, if the study shown has it (while a study of another drive runs, it may not)."""
        s = self.session
        return s.segment if s.segment is not None and s.study is not None and s.segment < len(s.study.drive) else None

    def _show_error_view(self) -> None:
        # A new figure each time it is looked at after a change (a few ms; it is not on the edit path).
        self.error_view.children = panels.error_view_children(self.session)

    def _redraw(self, part: str, inputs: tuple, draw, when: bool = True) -> None:
        drawn = self._drawn.get(part)
        if when and (drawn is None or not _same(drawn, inputs)):
            draw()
            self._drawn[part] = inputs

    def _sync(self, set_controls) -> None:
        self._syncing = True
        try:
            set_controls()
        finally:
            self._syncing = False

    def _show_errors(self) -> None:
        errors = self.session.errors
        self.status.value = panels.status_html(errors)
        self.drive_error.value = panels.error_html(errors.get("drive") or self.session.notice)
        self.generator_error.value = panels.error_html(errors.get("generator"))
        # A drive error gone (fixed, or taken back by undo): the table shows the last good text again.
        if "drive" in self._drawn.get("errors", ({},))[0] and "drive" not in errors and not self._typed:
            self._drawn.pop("table", None)

    # -- files ----------------------------------------------------------------------------------------
    @classmethod
    def from_analysis(cls, analysis, trace: Any = None) -> "Bench":
        """A Bench for an :class:`~firstorder.Analysis` (from :meth:`Analysis.load`): its fixture,
        drive, start, tolerance and sample delay, its title and notes in the Export tab."""
        delay = analysis.sample_delay
        if isinstance(delay, list):
            raise InputError("Bench.from_analysis: the analysis has one sample delay per segment; the Bench's "
                             "'sample at' takes one delay for every segment")
        bench = cls(analysis.fixture, analysis.drive, analysis.initial, analysis.tolerance, delay, trace,
                    **(analysis.study_settings or {}))
        bench.export.title.value, bench.export.notes.value = analysis.title or bench.export.title.value, analysis.notes
        return bench

    def load_analysis(self, source: Any) -> None:
        """Put an analysis into this Bench (undoable): an :class:`~firstorder.Analysis`, or the
        path of an analysis file or report.  It must be of a fixture with the same parts and
        probes (other values are fine); else open it with :meth:`from_analysis`."""
        from ..analysis import Analysis

        analysis = source if isinstance(source, Analysis) else Analysis.load(source)
        loaded = loaded_inputs(analysis, self.fixture, lambda fx: {f.key: f.text for f in part_fields(fx)})
        settings = analysis.study_settings
        lot = None if settings is None else lot_inputs(loaded.fixture, **settings)
        self.session.load(loaded.fixture, loaded.drive, loaded.initial, loaded.tolerance, loaded.sample_delay,
                          loaded.texts, lot)
        if loaded.title:
            self.export.title.value = loaded.title
        self.export.notes.value = loaded.notes

    def _on_load(self, path: str | None, content: bytes | None) -> str:
        from ..analysis import Analysis

        try:
            if path is not None:
                if not path:
                    return panels.error_html("load: type the path of an analysis (.json) or report (.html) file")
                self.load_analysis(path)
                where = str(Path(path).resolve())
            else:
                self.load_analysis(Analysis.from_json(content, source="uploaded file"))
                where = "the uploaded file"
        except (OSError, ValueError) as error:
            return panels.error_html(str(error))
        return f"loaded: <code>{html.escape(where)}</code>"

    def _title_notes(self) -> tuple[str, str]:
        return self.export.title.value.strip(), self.export.notes.value

    # -- export --------------------------------------------------------------------------------------------------
    def components_table(self):
        """The plotted curves as a pandas DataFrame (time, then each shown component).

        In envelope mode every curve gives two columns, ``<name> min`` and ``<name> max``.
        """
        return self.plots.components_table(self.session.value_unit)

    def export_components(self, path: Any) -> str:
        """Write the plotted components as CSV (atomically); return the path."""
        write_atomic(path, self.components_table().to_csv(index=False, float_format="%.17g"))
        return str(path)

    def export_drive(self, path: Any) -> str:
        """Write the last good drive as CSV (:meth:`Drive.to_csv`); return the path."""
        self.drive.to_csv(path)
        return str(path)

    def analysis(self, title: str = "", notes: str = ""):
        """The last good fixture, drive, start, tolerance and sample delay (and the study's
        spread, units, seed and fractions) as an :class:`~firstorder.Analysis`.

        The sample delay is kept as typed, one for every segment; a segment
        shorter than it is sampled at its end, in the analysis as here.
        """
        return self.session.analysis(title, notes)

    def save_analysis(self, path: Any, title: str = "", notes: str = "") -> str:
        """Save the analysis as JSON (:meth:`Analysis.save`, atomic); return the path."""
        return str(self.analysis(title, notes).save(path))

    def report(self, path: Any, title: str = "", notes: str = "") -> str:
        """Write the self-contained HTML report (:meth:`Analysis.report`); return the path."""
        return str(self.analysis(title, notes).report(path))

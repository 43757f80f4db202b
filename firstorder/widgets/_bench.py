"""Bench: the notebook app (ipywidgets around two bokeh panels and an editable drive table).

Every control feeds one path: read the text the engineer typed, build a new
fixture or drive (the layers below validate it), compute the response, and only
then replace the last good state and refresh the data sources.  A bad entry
leaves its error beside the field and changes nothing else.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass
from typing import Any

import ipywidgets as widgets
import numpy as np
from bokeh.events import RangesUpdate, Tap
from bokeh.models import ColumnDataSource, DataTable, SelectEditor, StringEditor, TableColumn
from jupyter_bokeh import BokehModel

from ..io.atomic import write_atomic
from ..drive import Drive
from ..errors import InputError
from ..fixture import Fixture
from ..netlist import PART_UNITS, SOURCE_UNITS
from ..response import COMPONENTS
from ..settling.tolerance import Tolerance, parse_tolerance, tolerance_text
from ..units import format_value, parse_value
from ._drive_table import DriveText
from ._loader import publish_bokehjs
from ..plotting.palette import component_label
from ._plot import MAX_HANDLES, PIXELS, Plots, View

__all__ = ["Bench"]

#: Curves shown when the Bench opens; the rest are one click away.
DEFAULT_VISIBLE = frozenset({"total", "forced"})
#: Tabs under the plot, in order.
TAB_TITLES = ("Drive table", "Generators", "Derivation", "Settling", "Export")
_DERIVATION_TAB, _SETTLING_TAB = TAB_TITLES.index("Derivation"), TAB_TITLES.index("Settling")
#: Rows of the settling table shown in the panel (the whole table is bench.settling).
SETTLING_ROWS = 40
#: How many edits `undo` can take back.
UNDO_DEPTH = 50
_ERROR_STYLE = "color:#b03a2e;font-size:0.85em"


@dataclass(frozen=True)
class _Snapshot:
    """Everything an edit can change, so undo can put it back."""

    fixture: Fixture
    table: DriveText
    field_text: dict[str, str]


def _field_label(text: str, width: str = "78px") -> widgets.HTML:
    return widgets.HTML(f"<b>{html.escape(text)}</b>", layout=widgets.Layout(width=width))


def _live_kernel_cell() -> int | None:
    """The execution count of the cell running now in a live notebook kernel, else None."""
    try:
        from IPython import get_ipython
    except ImportError:  # pragma: no cover - ipywidgets brings IPython
        return None
    shell = get_ipython()
    if shell is None or getattr(shell, "kernel", None) is None:
        return None
    return int(shell.execution_count)


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

    Attributes
    ----------
    fixture, drive, response
        The last good ones (a bad entry never replaces them).
    error : str
        Every current error, one per line; ``""`` when all is well.
    fields : dict
        Part name to its text widget (a switch has ``"<name>.r_on"`` and
        ``"<name>.r_off"``).  Setting ``.value`` recomputes at once.
    setup_fields : dict
        ``"initial"``, ``"tolerance"`` and ``"sample_delay"`` text widgets.
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
                 sample_delay: Any = None, trace: Any = None) -> None:
        if not isinstance(fixture, Fixture):
            raise InputError(f"Bench fixture: {fixture!r} is not a firstorder Fixture")
        if not isinstance(drive, Drive):
            raise InputError(f"Bench drive: {drive!r} is not a firstorder Drive")
        if tolerance is not None and not isinstance(tolerance, Tolerance):
            raise InputError(f"Bench tolerance: {tolerance!r} is not a firstorder Tolerance (or None)")
        self.fixture = fixture
        self.response = fixture.respond(drive, initial)
        self.drive = drive
        self._initial = initial
        self._tolerance = tolerance
        self._sample_delay = None if sample_delay is None else parse_value(
            sample_delay, field="sample_delay", unit="s", positive=True)
        self._trace = _check_trace(trace)
        self._probe: str | None = None
        if self._trace is not None and self._trace.name in {p.name for p in fixture.probes}:
            self._probe = self._trace.name
        self._errors: dict[str, str] = {}
        self._undo: list[_Snapshot] = []
        self._syncing = False
        self._segment: int | None = None
        self._derivation_stale = True
        self._settling_stale = True
        self.settling = None
        self.summary = None
        self._mode = "line"

        self._sources_names = tuple(p.name for p in fixture.sources)
        self._switch_names = tuple(p.name for p in fixture.switches)
        units = {p.name: SOURCE_UNITS[p.kind] for p in fixture.sources}
        self._table = DriveText.from_drive(drive, self._sources_names + self._switch_names,
                                           frozenset(self._switch_names), units)
        self._curve_names = COMPONENTS + self._sources_names
        self._visible = set(DEFAULT_VISIBLE)
        self._view = View(float(drive.start), float(drive.end))

        self.plots = Plots(self._curve_names, self._sources_names, self._sources_names, units,
                           self._switch_names, self._view.start, self._view.end, fixture.state_unit,
                           self._value_label(), trace_name=None if self._trace is None else self._trace.name)
        self.sources: dict[str, ColumnDataSource] = self.plots.sources
        self.plot_view = BokehModel(self.plots.layout, combine_events=True)
        self.plots.response_figure.on_event(Tap, self._on_tap)
        self.plots.drive_figure.on_event(Tap, self._on_tap)
        self.plots.response_figure.on_event(RangesUpdate, self._on_ranges)
        self.sources["handles"].on_change("data", self._on_handles)

        self.status = widgets.HTML()
        self.info = widgets.HTML()
        parts_panel = self._build_parts_panel()
        setup_panel = self._build_setup_panel()
        view_panel = self._build_view_panel()
        editor = self._build_drive_editor()
        self.derivation = widgets.HTMLMath(value="")
        self.settling_panel = widgets.HTML(value="")
        self.cautions_panel = widgets.HTML(value="")
        export = self._build_export_panel()
        self.tabs = widgets.Tab(children=[editor, self._build_generators(), self.derivation, self.settling_panel,
                                          export])
        for index, title in enumerate(TAB_TITLES):
            self.tabs.set_title(index, title)
        self.tabs.observe(self._on_tab, names="selected_index")

        left = widgets.VBox([parts_panel, setup_panel, view_panel], layout=widgets.Layout(width="320px", min_width="320px"))
        header = widgets.HTML(
            f"<div style='font-size:1.15em;font-weight:600'>Bench: {html.escape(fixture.storage.kind)} "
            f"'{html.escape(fixture.storage.name)}' under a {len(drive)}-change drive</div>")
        super().__init__([header, self.status, self.cautions_panel, widgets.HBox([left, self.plot_view]), self.info,
                          self.tabs])
        self._good_text = {key: field.value for key, field in {**self.fields, **self.setup_fields}.items()}
        self._refresh_drive(table=False)
        self._refresh_curves()
        self._show_cautions()
        self._show_status()
        # Shown inside another widget (a dashboard's VBox or Tab), the Bench is never asked
        # for a display bundle of its own: so BokehJS goes to the page now, in a live
        # notebook, and the views' bundles carry the data set above.
        self._bokehjs_cell: int | None = None
        if _live_kernel_cell() is not None:
            self._publish_bokehjs()
            self._bring_views_up_to_date()

    # -- public reading --------------------------------------------------------------------
    @property
    def error(self) -> str:
        """Every current error, one per line (``""`` when all is well)."""
        return "\n".join(self._errors.values())

    @property
    def probe(self) -> str | None:
        """The probe shown (None: the storage element's state)."""
        return self._probe

    @property
    def tolerance(self) -> Tolerance | None:
        return self._tolerance

    @property
    def sample_delay(self) -> float | None:
        return self._sample_delay

    @property
    def plot_mode(self) -> str:
        """``"line"`` (every segment drawn) or ``"envelope"`` (min/max per pixel column)."""
        return self._mode

    def __repr__(self) -> str:
        # Also the text a saved notebook shows where the live app was.
        storage = self.fixture.storage
        return (f"Bench({storage.kind} '{storage.name}', {len(self.drive)} changes; "
                f"run the cell in a live notebook to open the app)")

    def _repr_mimebundle_(self, **kwargs):
        # BokehJS must be in the page before jupyter_bokeh's view is created (once a cell).
        if self._bokehjs_cell is None or self._bokehjs_cell != _live_kernel_cell():
            self._publish_bokehjs()
        self._bring_views_up_to_date()
        return super()._repr_mimebundle_(**kwargs)

    def _publish_bokehjs(self) -> None:
        publish_bokehjs()
        self._bokehjs_cell = _live_kernel_cell()

    def _bring_views_up_to_date(self) -> None:
        # A view draws from the render bundle; patches sent before any view
        # existed reached no one, so the bundle is brought up to date first.
        self.plot_view.update_from_model(self.plots.layout)
        self.table_view.update_from_model(self.drive_table)

    # -- panels ---------------------------------------------------------------------------------
    def _build_parts_panel(self) -> widgets.VBox:
        self.fields: dict[str, widgets.Text] = {}
        self._field_errors: dict[str, widgets.HTML] = {}
        rows = [widgets.HTML("<b>Parts</b>")]
        for part in self.fixture.parts:
            if part.kind == "switch":
                entries = [(f"{part.name}.r_on", part.r_on, f"{part.name} on"),
                           (f"{part.name}.r_off", part.r_off, f"{part.name} off")]
            elif part.kind in PART_UNITS:
                entries = [(part.name, part.value, part.name)]
            else:
                continue
            unit = PART_UNITS[part.kind]
            for key, value, label in entries:
                field = widgets.Text(value=format_value(value, unit, digits=6), continuous_update=False,
                                     layout=widgets.Layout(width="120px"), description_allow_html=False)
                field.tooltip = f"{part.kind.replace('_', ' ')} {part.name} ({unit})"
                field.add_class(f"fo-part-{key.replace('.', '-')}")
                error = widgets.HTML(layout=widgets.Layout(width="auto"))
                field.observe(lambda change, key=key: self._on_part(key), names="value")
                self.fields[key] = field
                self._field_errors[key] = error
                rows.append(widgets.VBox([widgets.HBox([_field_label(label), field,
                                                        widgets.HTML(f"<span style='color:#566573'>{unit}</span>")]),
                                          error]))
        return widgets.VBox(rows)

    def _build_setup_panel(self) -> widgets.VBox:
        unit = self.fixture.state_unit
        initial = self._initial if isinstance(self._initial, str) else format_value(
            parse_value(self._initial, field="initial", unit=unit), unit, digits=6)
        delay = "" if self._sample_delay is None else format_value(self._sample_delay, "s", digits=6)
        specs = [
            ("initial", "start", initial, f"starting state ({unit}), 'settled' or 'periodic'"),
            ("tolerance", "tolerance", tolerance_text(self._tolerance),
             "e.g. 1 mV, 0.1 %, 10 ppm of 5 V, 0.5 LSB of 16 bits on 5 V"),
            ("sample_delay", "sample at", delay, "time after each change when the reading is taken"),
        ]
        self.setup_fields: dict[str, widgets.Text] = {}
        rows = [widgets.HTML("<b>Setup</b>")]
        for key, label, value, hint in specs:
            field = widgets.Text(value=value, placeholder=hint, continuous_update=False,
                                 layout=widgets.Layout(width="230px"))
            field.tooltip = hint
            field.add_class(f"fo-setup-{key.replace('_', '-')}")
            error = widgets.HTML()
            field.observe(lambda change, key=key: self._on_setup(key), names="value")
            self.setup_fields[key] = field
            self._field_errors[key] = error
            rows.append(widgets.VBox([widgets.HBox([_field_label(label), field]), error]))
        return widgets.VBox(rows)

    def _build_view_panel(self) -> widgets.VBox:
        storage = self.fixture.storage
        options = [(f"state {self._state_label()}", "")]
        options += [(f"{p.name}: {p.describe()}", p.name) for p in self.fixture.probes]
        self.probe_selector = widgets.Dropdown(options=options, value=self._probe or "",
                                               layout=widgets.Layout(width="300px"))
        self.probe_selector.observe(self._on_probe, names="value")
        self.overlays: dict[str, widgets.ToggleButton] = {}
        buttons = []
        for name in self._curve_names:
            label = component_label(name)
            button = widgets.ToggleButton(value=name in self._visible, description=label,
                                          layout=widgets.Layout(width="146px"))
            button.tooltip = f"show or hide the {label} curve"
            button.observe(lambda change, name=name: self._on_overlay(name, change["new"]), names="value")
            self.overlays[name] = button
            buttons.append(button)
        grid = widgets.GridBox(buttons, layout=widgets.Layout(grid_template_columns="repeat(2, 150px)"))
        self.undo_button = widgets.Button(description="Undo last edit", icon="undo",
                                          layout=widgets.Layout(width="300px"))
        self.undo_button.on_click(lambda _: self.undo())
        return widgets.VBox([widgets.HTML(f"<b>Show</b> ({html.escape(storage.kind)} '{html.escape(storage.name)}')"),
                             self.probe_selector, grid, self.undo_button])

    def _build_drive_editor(self) -> widgets.VBox:
        self.table_source = ColumnDataSource(self._table.as_columns())
        columns = [TableColumn(field="row", title="#", width=50),
                   TableColumn(field="time", title="change at", editor=StringEditor())]
        for name in self._sources_names:
            unit = self._table.units[name]
            columns.append(TableColumn(field=name, title=f"{name} ({unit})", editor=StringEditor()))
        for name in self._switch_names:
            columns.append(TableColumn(field=name, title=f"{name} (switch)",
                                       editor=SelectEditor(options=["closed", "open"])))
        self.drive_table = DataTable(source=self.table_source, columns=columns, editable=True, index_position=None,
                                     width=620, height=min(260, 34 + 26 * len(self._table)), selectable=True)
        self.table_view = BokehModel(self.drive_table, combine_events=True)
        self.table_source.on_change("data", self._on_table)
        self.table_source.selected.on_change("indices", self._on_table_selection)
        self.end_field = widgets.Text(value=self._table.end, description="end", continuous_update=False,
                                      layout=widgets.Layout(width="200px"))
        self.end_field.observe(lambda change: self._on_end(), names="value")
        self.row_field = widgets.BoundedIntText(value=0, min=0, max=max(len(self._table) - 1, 0), description="row",
                                                layout=widgets.Layout(width="150px"))
        buttons = []
        for label, action in [("Add at end", self.add_row), ("Insert before", lambda: self.insert_row(self.row_field.value)),
                              ("Duplicate", lambda: self.duplicate_row(self.row_field.value)),
                              ("Delete", lambda: self.delete_row(self.row_field.value))]:
            button = widgets.Button(description=label, layout=widgets.Layout(width="110px"))
            button.on_click(lambda _, action=action: action())
            buttons.append(button)
        drag_options = list(self._sources_names) or [""]
        self.drag_column = widgets.Dropdown(options=drag_options, value=drag_options[0], description="drag",
                                            layout=widgets.Layout(width="200px"))
        self.drag_column.observe(lambda change: self._refresh_handles(), names="value")
        self.drive_error = widgets.HTML()
        hint = widgets.HTML(
            "<span style='color:#566573;font-size:0.85em'>Double-click a cell to edit (times and levels in "
            "engineering notation, switches closed/open). On the drive plot, drag a square handle: sideways "
            f"moves the change, up or down sets the level (up to {MAX_HANDLES} changes).</span>")
        return widgets.VBox([widgets.HBox([self.end_field, self.row_field, *buttons]),
                             widgets.HBox([self.drag_column]), self.drive_error, self.table_view, hint])

    def _build_generators(self) -> widgets.VBox:
        names = list(self._sources_names) or [""]
        text = lambda value, label, width="160px": widgets.Text(value=value, description=label,  # noqa: E731
                                                                 layout=widgets.Layout(width=width))
        self.pulse_fields = {
            "column": widgets.Dropdown(options=names, value=names[0], description="source",
                                       layout=widgets.Layout(width="180px")),
            "period": text("1m", "period"), "duty": text("0.5", "duty"), "high": text("1", "high"),
            "low": text("0", "low"), "count": text("4", "count"),
        }
        self.stair_fields = {
            "column": widgets.Dropdown(options=names, value=names[0], description="source",
                                       layout=widgets.Layout(width="180px")),
            "levels": text("0, 1, 2, 3", "levels", "260px"), "dwell": text("1m", "dwell"),
        }
        pulse_button = widgets.Button(description="Make pulse train", layout=widgets.Layout(width="160px"))
        pulse_button.on_click(lambda _: self._generate("pulses"))
        stair_button = widgets.Button(description="Make staircase", layout=widgets.Layout(width="160px"))
        stair_button.on_click(lambda _: self._generate("staircase"))
        self.generator_error = widgets.HTML()
        note = widgets.HTML("<span style='color:#566573;font-size:0.85em'>A generator replaces the drive; other "
                            "columns keep the level they had at each new instant. Undo takes it back.</span>")
        return widgets.VBox([
            widgets.HTML("<b>Pulse train</b>"), widgets.HBox(list(self.pulse_fields.values())), pulse_button,
            widgets.HTML("<b>Staircase</b>"), widgets.HBox(list(self.stair_fields.values())), stair_button,
            self.generator_error, note])

    def _build_export_panel(self) -> widgets.VBox:
        self.export_name = widgets.Text(value="bench", description="file stem", layout=widgets.Layout(width="260px"))
        self.export_message = widgets.HTML()
        buttons = []
        for label, action in [("Plotted components (CSV)", self.export_components),
                              ("Drive (CSV)", self.export_drive), ("Analysis (JSON)", self.save_analysis),
                              ("Report (HTML)", self.report)]:
            button = widgets.Button(description=label, layout=widgets.Layout(width="190px"))
            button.on_click(lambda _, action=action: self._export(action))
            buttons.append(button)
        return widgets.VBox([self.export_name, widgets.HBox(buttons), self.export_message])

    # -- labels ------------------------------------------------------------------------------------
    def _state_label(self) -> str:
        storage = self.fixture.storage
        return f"v({storage.name})" if storage.kind == "capacitor" else f"i({storage.name})"

    def _value_label(self) -> str:
        return self._probe if self._probe else self._state_label()

    def _value_unit(self) -> str:
        if self._probe:
            return next(p.unit for p in self.fixture.probes if p.name == self._probe)
        return self.fixture.state_unit

    # -- edits -------------------------------------------------------------------------------------------
    def _snapshot(self) -> _Snapshot:
        return _Snapshot(self.fixture, self._table, dict(self._good_text))

    def _push_undo(self) -> None:
        self._undo.append(self._snapshot())
        del self._undo[:-UNDO_DEPTH]

    def _set_error(self, key: str, message: str | None) -> None:
        if message:
            self._errors[key] = message
        else:
            self._errors.pop(key, None)
        box = self._field_errors.get(key)
        if box is not None:
            box.value = f"<span style='{_ERROR_STYLE}'>{html.escape(message)}</span>" if message else ""
        if key == "drive":
            self.drive_error.value = f"<span style='{_ERROR_STYLE}'>{html.escape(message)}</span>" if message else ""
        if key == "generator":
            self.generator_error.value = f"<span style='{_ERROR_STYLE}'>{html.escape(message)}</span>" if message else ""
        self._show_status()

    def _show_status(self) -> None:
        if self._errors:
            lines = "<br>".join(html.escape(m) for m in self._errors.values())
            self.status.value = (f"<div style='background:#fdedec;border-left:4px solid #b03a2e;padding:4px 8px'>"
                                 f"{lines}<br><i>The plot shows the last good result.</i></div>")
        else:
            self.status.value = ""

    def _part_values(self, key: str) -> dict[str, Any]:
        """The with_values argument for the field `key` (a switch takes both of its fields)."""
        if "." in key:
            name = key.split(".")[0]
            return {name: (self.fields[f"{name}.r_on"].value, self.fields[f"{name}.r_off"].value)}
        return {key: self.fields[key].value}

    def _on_part(self, key: str) -> None:
        if self._syncing:
            return
        try:
            fixture = self.fixture.with_values(**self._part_values(key))
            response = fixture.respond(self.drive, self._initial)
        except ValueError as error:
            self._set_error(key, str(error))
            return
        self._push_undo()
        self.fixture = fixture
        self.response = response
        for name in ([f"{key.split('.')[0]}.r_on", f"{key.split('.')[0]}.r_off"] if "." in key else [key]):
            self._good_text[name] = self.fields[name].value
        self._set_error(key, None)
        self._after_response()

    def _on_setup(self, key: str) -> None:
        if self._syncing:
            return
        text = self.setup_fields[key].value
        try:
            if key == "initial":
                stripped = text.strip()
                initial: Any = stripped if stripped in ("settled", "periodic") else parse_value(
                    text, field="initial", unit=self.fixture.state_unit)
                response = self.fixture.respond(self.drive, initial)
                self._initial = initial
                self.response = response
            elif key == "tolerance":
                self._tolerance = parse_tolerance(text, unit=self._value_unit())
            else:
                self._sample_delay = None if not text.strip() else parse_value(
                    text, field="sample_delay", unit="s", positive=True)
        except ValueError as error:
            self._set_error(key, str(error))
            return
        self._push_undo()
        self._good_text[key] = text
        self._set_error(key, None)
        self._after_response()

    def _apply_table(self, table: DriveText, *, record: bool = True, refresh_table: bool = True) -> None:
        """Accept `table` if its drive and the response are good; else show the error."""
        try:
            drive = table.to_drive()
            response = self.fixture.respond(drive, self._initial)
        except ValueError as error:
            self._set_error("drive", str(error))
            if refresh_table:
                self._refresh_table()
            return
        if record:
            self._push_undo()
        self._table = table
        self.drive = drive
        self.response = response
        self._set_error("drive", None)
        if self._segment is not None and self._segment >= len(drive):
            self._segment = None
        self._refresh_drive(table=refresh_table)
        self._after_response()

    def _on_table(self, attr, old, new) -> None:
        if self._syncing:
            return
        try:
            table = self._table.with_text({k: v for k, v in self.table_source.data.items()})
        except ValueError as error:
            self._set_error("drive", str(error))
            return
        self._apply_table(table, refresh_table=False)

    def _on_end(self) -> None:
        if self._syncing:
            return
        try:
            table = self._table.with_text({}, end=self.end_field.value)
        except ValueError as error:
            self._set_error("drive", str(error))
            return
        self._apply_table(table, refresh_table=False)

    def edit_cell(self, row: int, column: str, text: str) -> None:
        """Type `text` into the drive table (as a double-click edit in the browser does)."""
        if column != "time" and column not in self._table.names:
            raise InputError(f"edit_cell: column {column!r} is not one of {['time', *self._table.names]}")
        if not 0 <= row < len(self.table_source.data["time"]):
            raise InputError(f"edit_cell: row {row!r} does not exist; rows are 0 to {len(self._table) - 1}")
        self.table_source.patch({column: [(row, str(text))]})

    def _structural(self, action, *args) -> None:
        try:
            table = action(*args)
        except ValueError as error:
            self._set_error("drive", str(error))
            return
        self._apply_table(table)

    def add_row(self) -> None:
        """Append a change at the end of the drive (the last levels held as long as the last segment)."""
        self._structural(self._table.add_row)

    def insert_row(self, row: int) -> None:
        """Insert a change before `row`, halfway from the one before."""
        self._structural(self._table.insert_row, row)

    def duplicate_row(self, row: int) -> None:
        """Repeat `row` halfway to the next change."""
        self._structural(self._table.duplicate_row, row)

    def delete_row(self, row: int) -> None:
        """Remove the change in `row`."""
        self._structural(self._table.delete_row, row)

    def set_drive(self, drive: Drive) -> None:
        """Replace the drive (undoable); it must have the same columns."""
        if not isinstance(drive, Drive):
            raise InputError(f"set_drive: {drive!r} is not a firstorder Drive")
        if set(drive.names) != set(self._table.names):
            raise InputError(f"set_drive: columns {list(drive.names)} differ from the fixture's {list(self._table.names)}")
        self._apply_table(DriveText.from_drive(drive, self._table.names, self._table.switches, self._table.units))

    def _generate(self, kind: str) -> None:
        try:
            if kind == "pulses":
                f = {k: w.value for k, w in self.pulse_fields.items()}
                count_text = f["count"].strip()
                if not count_text.isdigit():
                    raise InputError(f"pulses.count: {count_text!r} must be a whole number >= 1")
                made = Drive.pulses(period=f["period"], duty=parse_value(f["duty"], field="pulses.duty"),
                                    high=f["high"], low=f["low"], count=int(count_text), name=f["column"],
                                    start=self.drive.start)
            else:
                f = {k: w.value for k, w in self.stair_fields.items()}
                levels = [item.strip() for item in f["levels"].split(",") if item.strip()]
                made = Drive.staircase(levels, dwell=f["dwell"], name=f["column"], start=self.drive.start)
            drive = self._merge_generated(made)
        except ValueError as error:
            self._set_error("generator", str(error))
            return
        self._set_error("generator", None)
        self.set_drive(drive)

    def _merge_generated(self, made: Drive) -> Drive:
        """`made`'s column, with every other column at the level it had at each new instant."""
        index = np.clip(np.searchsorted(self.drive.times, made.times, side="right") - 1, 0, len(self.drive) - 1)
        columns = {name: np.asarray(self.drive.levels(name))[index] for name in self._table.names}
        columns.update(made.columns)
        return Drive(made.times, made.end, **columns)

    def undo(self) -> bool:
        """Take back the last edit; False when there is nothing to take back.

        A rejected entry (one showing an error) is the last edit: undo first
        puts back the last good text; the edit before it needs another undo.
        """
        if self._errors:
            self._restore(self._snapshot())
            return True
        if not self._undo:
            return False
        self._restore(self._undo.pop())
        return True

    def _restore(self, snapshot: _Snapshot) -> None:
        texts = snapshot.field_text
        self._syncing = True
        try:
            for key, field in {**self.fields, **self.setup_fields}.items():
                field.value = texts[key]
        finally:
            self._syncing = False
        self._good_text = dict(texts)
        self.fixture = snapshot.fixture
        self._table = snapshot.table
        self.drive = snapshot.table.to_drive()
        initial_text = texts["initial"].strip()
        self._initial = initial_text if initial_text in ("settled", "periodic") else parse_value(
            initial_text, field="initial", unit=self.fixture.state_unit)
        self._tolerance = parse_tolerance(texts["tolerance"], unit=self._value_unit())
        delay = texts["sample_delay"].strip()
        self._sample_delay = parse_value(delay, field="sample_delay", unit="s") if delay else None
        self.response = self.fixture.respond(self.drive, self._initial)
        for key in list(self._errors):
            self._set_error(key, None)
        if self._segment is not None and self._segment >= len(self.drive):
            self._segment = None
        self._refresh_drive(table=True)
        self._after_response()

    # -- plot events -----------------------------------------------------------------------------------
    def _on_tap(self, event) -> None:
        if event.x is None or not self.drive.start <= event.x <= self.drive.end:
            return
        self.select_segment(int(self.drive.segment_at(float(event.x))))

    def _on_ranges(self, event) -> None:
        if event.x0 is None or event.x1 is None:
            return
        self.set_view(event.x0, event.x1)

    def set_view(self, start: float, end: float) -> None:
        """Show the time span [start, end] (s), resampled for the screen."""
        low, high = float(start), float(end)
        if not high > low:
            raise InputError(f"set_view: end {end!r} must be later than start {start!r}")
        self._view = View(low, high)
        self._refresh_drive(table=False, handles=False)
        self._refresh_curves()

    def _on_table_selection(self, attr, old, new) -> None:
        if new:
            self.select_segment(int(new[0]))

    def select_segment(self, segment: int) -> None:
        """Show the derivation of `segment`'s configuration and shade it on the plot."""
        if not 0 <= segment < len(self.drive):
            raise InputError(f"select_segment: {segment!r} is not a segment; segments are 0 to {len(self.drive) - 1}")
        self._segment = segment
        self.row_field.value = segment
        if list(self.table_source.selected.indices) != [segment]:
            self.table_source.selected.indices = [segment]  # the row lights up in the table too
        self.plots.update_selection(self.drive, segment)
        self._render_derivation()

    def _on_handles(self, attr, old, new) -> None:
        if self._syncing:
            return
        column = self.drag_column.value
        data = self.sources["handles"].data
        times = np.asarray(data["t"], dtype=float)
        levels = np.asarray(data["y"], dtype=float)
        if column not in self._table.names or times.size != len(self.drive):
            self._refresh_handles()
            return
        old_times = np.asarray(self.drive.times)
        old_levels = np.asarray(self.drive.levels(column))
        moved = np.flatnonzero((times != old_times) | (levels != old_levels))
        table = self._table
        # A drag moves a change's instant or its level, whichever it moved more (as a share
        # of the view), so a level dragged by hand does not also shift its instant by a pixel.
        span_t = max(self._view.end - self._view.start, 1e-300)
        span_y = max(float(np.ptp(old_levels)), float(np.max(np.abs(old_levels))), 1e-300)
        try:
            for row in moved.tolist():
                sideways = abs(times[row] - old_times[row]) / span_t >= abs(levels[row] - old_levels[row]) / span_y
                if sideways:
                    table = table.move(row, time=float(times[row]))
                else:
                    table = table.move(row, column=column, level=float(levels[row]))
        except ValueError as error:
            self._set_error("drive", f"drag: {error}")
            self._refresh_handles()
            return
        if moved.size:
            self._apply_table(table)

    def _on_probe(self, change) -> None:
        self._probe = change["new"] or None
        if self._tolerance is not None and self._tolerance.unit != self._value_unit():
            # the same limit, read in the unit of what is now watched (V or A)
            self._tolerance = parse_tolerance(self._good_text["tolerance"], unit=self._value_unit())
        label = self._value_label()
        self.plots.response_figure.yaxis[0].axis_label = label
        self.plots.set_value_unit(self._value_unit())
        self._after_response()

    def _on_overlay(self, name: str, shown: bool) -> None:
        if shown:
            self._visible.add(name)
        else:
            self._visible.discard(name)
        self._refresh_curves()

    def _on_tab(self, change) -> None:
        if self.tabs.selected_index == _DERIVATION_TAB and self._derivation_stale:
            self._render_derivation()
        if self.tabs.selected_index == _SETTLING_TAB and self._settling_stale:
            self._render_settling()

    # -- refresh ---------------------------------------------------------------------------------------------
    def _after_response(self) -> None:
        self._refresh_curves()
        self._derivation_stale = True
        self._settling_stale = True
        if self.tabs.selected_index == _DERIVATION_TAB:
            self._render_derivation()
        if self.tabs.selected_index == _SETTLING_TAB:
            self._render_settling()
        self._show_cautions()

    def _refresh_curves(self) -> None:
        response, probe = self.response, self._probe
        self._mode = self.plots.update_response(response, probe, self._view, self._visible)
        self.plots.update_marks(response, probe, self._view, self._tolerance, self._sample_delay)
        self._update_settling()
        if self._trace is not None:
            self._refresh_trace()
        self._show_info()

    def _refresh_drive(self, table: bool = True, handles: bool = True) -> None:
        self._syncing = True
        try:
            if table:
                self._refresh_table()
            self.end_field.value = self._table.end
            self.row_field.max = max(len(self._table) - 1, 0)
        finally:
            self._syncing = False
        if self._view.start < self.drive.start or self._view.end > self.drive.end or table:
            self._view = View(max(self._view.start, self.drive.start), min(self._view.end, self.drive.end))
            if not self._view.end > self._view.start or table:
                self._view = View(float(self.drive.start), float(self.drive.end))
            self.plots.x_range.update(start=self._view.start, end=self._view.end,
                                      reset_start=float(self.drive.start), reset_end=float(self.drive.end))
        self.plots.update_drive(self.drive, self._view)
        self.plots.update_selection(self.drive, self._segment)
        if handles:
            self._refresh_handles()

    def _refresh_table(self) -> None:
        was = self._syncing
        self._syncing = True
        try:
            self.table_source.data = self._table.as_columns()
            # BokehJS redraws a table when its row indices change; with as many rows as
            # before they do not, so a change to the table model itself asks for the redraw.
            self.drive_table.tags = [len(self._undo), id(self._table)]
        finally:
            self._syncing = was

    def _refresh_handles(self) -> None:
        was = self._syncing
        self._syncing = True
        try:
            column = self.drag_column.value if self._sources_names else None
            self.plots.update_handles(self.drive, column)
        finally:
            self._syncing = was

    def _refresh_trace(self) -> None:
        trace = self._trace
        view = self._view
        times, values = trace.times, trace.values
        inside = (times >= view.start) & (times <= view.end)
        shown_t, shown_v = times[inside], values[inside]
        source = self.sources["trace"]
        if shown_t.size > 4 * PIXELS:
            edges = np.linspace(view.start, view.end, PIXELS + 1)
            bins = np.clip(np.searchsorted(edges, shown_t, side="right") - 1, 0, PIXELS - 1)
            cuts = np.flatnonzero(np.diff(bins, prepend=-1))
            low = np.minimum.reduceat(shown_v, cuts)
            high = np.maximum.reduceat(shown_v, cuts)
            centres = 0.5 * (edges[bins[cuts]] + edges[bins[cuts] + 1])
            source.data = {"t": centres, "y": 0.5 * (low + high), "low": low, "high": high}
            self.plots.line_renderers["trace"].visible = False
            self.plots.band_renderers["trace"].visible = True
        else:
            source.data = {"t": shown_t, "y": shown_v, "low": shown_v, "high": shown_v}
            self.plots.line_renderers["trace"].visible = True
            self.plots.band_renderers["trace"].visible = False
        within = (times >= self.drive.start) & (times <= self.drive.end)
        model = self.response.evaluate(times[within], ("total",), self._probe)["total"]
        residual = values[within] - model
        self._residual_rms = float(np.sqrt(np.mean(residual ** 2))) if residual.size else math.nan
        keep = (times[within] >= view.start) & (times[within] <= view.end)
        step = max(int(keep.sum()) // (4 * PIXELS), 1)
        self.sources["residual"].data = {"t": times[within][keep][::step], "y": residual[keep][::step]}

    def _show_info(self) -> None:
        response = self.response
        tau = response.tau
        finite = tau[np.isfinite(tau)]
        tau_text = "held (no resistive path)" if finite.size == 0 else (
            format_value(float(finite[0]), "s") if np.ptp(finite) == 0 else
            f"{format_value(float(finite.min()), 's')} to {format_value(float(finite.max()), 's')}")
        unit = self.fixture.state_unit
        parts = [f"τ {tau_text}", f"{len(self.drive)} segments",
                 f"start {format_value(response.initial, unit)}",
                 f"end {format_value(float(response.boundary[-1]), unit)}",
                 "plot: every segment drawn" if self._mode == "line" else
                 "plot: min/max per pixel (zoom in for single segments)"]
        if self._trace is not None:
            parts.append(f"residual rms {format_value(self._residual_rms, self._value_unit())}")
        self.info.value = "<span style='color:#34495e'>" + " · ".join(html.escape(p) for p in parts) + "</span>"

    def _sample_delays(self):
        """Per segment: the sample delay, or the segment's length where the delay is longer."""
        if self._sample_delay is None:
            return None
        return np.minimum(self._sample_delay, self.drive.durations)

    def _update_settling(self) -> None:
        """The settling table (kept as ``bench.settling``) and the settle marks in view."""
        self.settling = self.summary = None
        if self._tolerance is None:
            self.plots.update_settle_marks(None, None, None, self._view)
            self._set_error("settling", None)
            return
        try:
            delays = self._sample_delays()
            self.settling = self.response.settling(self._tolerance, sample_delay=delays, probe=self._probe)
            self.summary = self.response.summary(self._tolerance, sample_delay=delays, probe=self._probe)
        except ValueError as error:
            self._set_error("settling", str(error))
            self.plots.update_settle_marks(None, None, None, self._view)
            return
        self._set_error("settling", None)
        self.plots.update_settle_marks(self.response, self._probe, self.settling, self._view)

    def _render_settling(self) -> None:
        self._settling_stale = False
        if self.settling is None:
            self.settling_panel.value = ("<p>Give a tolerance (Setup) to see when each segment settles "
                                         "and the error left at each sample.</p>")
            return
        self.settling_panel.value = _settling_html(self.settling, self.summary, self._value_unit(),
                                                   self._sample_delay, self.drive)

    def _show_cautions(self) -> None:
        cautions = self.response.cautions
        if not cautions:
            self.cautions_panel.value = ""
            return
        items = "".join(f"<li>{html.escape(str(c))}</li>" for c in cautions)
        self.cautions_panel.value = (
            "<div style='background:#fef5e7;border-left:4px solid #d68910;padding:4px 8px'>"
            f"<b>⚠ Cautions</b><ul style='margin:2px 0'>{items}</ul></div>")

    def _render_derivation(self) -> None:
        segment = 0 if self._segment is None else self._segment
        self._derivation_stale = False
        self.derivation.value = _derivation_html(self.fixture, self.response, segment, self._probe)

    # -- export --------------------------------------------------------------------------------------------------
    def components_table(self):
        """The plotted curves as a pandas DataFrame (time, then each shown component).

        In envelope mode every curve gives two columns, ``<name> min`` and ``<name> max``.
        """
        import pandas as pd

        columns: dict[str, np.ndarray] = {}
        for name in self._curve_names:
            if name not in self._visible:
                continue
            data = self.sources[name].data
            if "time (s)" not in columns:
                columns["time (s)"] = np.asarray(data["t"], dtype=float)
            unit = self._value_unit()
            if self._mode == "line":
                columns[f"{name} ({unit})"] = np.asarray(data["y"], dtype=float)
            else:
                columns[f"{name} min ({unit})"] = np.asarray(data["low"], dtype=float)
                columns[f"{name} max ({unit})"] = np.asarray(data["high"], dtype=float)
        return pd.DataFrame(columns)

    def export_components(self, path: Any) -> str:
        """Write the plotted components as CSV (atomically); return the path."""
        write_atomic(path, self.components_table().to_csv(index=False, float_format="%.17g"))
        return str(path)

    def export_drive(self, path: Any) -> str:
        """Write the last good drive as CSV (:meth:`Drive.to_csv`); return the path."""
        self.drive.to_csv(path)
        return str(path)

    def analysis(self, title: str = "", notes: str = ""):
        """The last good fixture, drive, start, tolerance and sample delay as an :class:`~firstorder.Analysis`.

        A sample delay longer than some segments is kept per segment, cut to
        each segment's length (as the settling table here judges them).
        """
        from ..analysis import Analysis

        state_unit = self.fixture.state_unit
        tolerance = parse_tolerance(self._good_text["tolerance"], unit=state_unit)
        delay: Any = self._sample_delay
        if delay is not None and bool((self.drive.durations < delay).any()):
            delay = self._sample_delays().tolist()
        return Analysis(self.fixture, self.drive, initial=self._initial, tolerance=tolerance,
                        sample_delay=delay, title=title, notes=notes)

    def save_analysis(self, path: Any, title: str = "", notes: str = "") -> str:
        """Save the analysis as JSON (:meth:`Analysis.save`, atomic); return the path."""
        return str(self.analysis(title, notes).save(path))

    def report(self, path: Any, title: str = "", notes: str = "") -> str:
        """Write the self-contained HTML report (:meth:`Analysis.report`); return the path."""
        return str(self.analysis(title, notes).report(path))

    def _export(self, action) -> None:
        stem = self.export_name.value.strip() or "bench"
        suffix = {self.export_components: "_components.csv", self.export_drive: "_drive.csv",
                  self.save_analysis: "_analysis.json", self.report: "_report.html"}
        path = stem + next(s for a, s in suffix.items() if a == action)
        try:
            written = action(path)
        except (OSError, ValueError) as error:
            self.export_message.value = f"<span style='{_ERROR_STYLE}'>{html.escape(str(error))}</span>"
            return
        self.export_message.value = f"written: <code>{html.escape(written)}</code>"


def _settling_html(table, summary, unit: str, sample_delay, drive) -> str:
    """The summary, then the rows with the least margin (or every row of a short drive)."""
    limit = table["tolerance"].to_numpy()
    error = (table["error_at_sample"] if "error_at_sample" in table else table["residual_at_end"]).to_numpy()
    if len(table) <= SETTLING_ROWS:
        rows = np.arange(len(table))
        caption = "every segment"
    else:
        rows = np.sort(np.argsort(limit - error, kind="stable")[:SETTLING_ROWS])
        caption = f"the {SETTLING_ROWS} segments with the least margin, of {len(table)}"
    header = ["segment", "from", "final", "limit", "settles after", "error at sample" if "error_at_sample" in table
              else "error at end", "ok"]
    settle = table["settle_time"].to_numpy()
    body = []
    for k in rows.tolist():
        settled = math.isfinite(settle[k])
        ok = bool(error[k] <= limit[k])
        body.append("<tr>" + "".join(f"<td style='padding:1px 8px'>{html.escape(cell)}</td>" for cell in [
            str(k), format_value(float(table["start"].iloc[k]), "s"), format_value(float(table["final"].iloc[k]), unit),
            format_value(float(limit[k]), unit),
            format_value(float(settle[k]), "s") if settled else "not within its segment",
            format_value(float(error[k]), unit), "yes" if ok else "NO"]) + "</tr>")
    note = ""
    if sample_delay is not None and bool((drive.durations < sample_delay).any()):
        note = ("<p style='color:#566573'>Segments shorter than the sample delay are judged at their "
                "end.</p>")
    head = "".join(f"<th style='padding:1px 8px;text-align:left'>{h}</th>" for h in header)
    return (summary._repr_html_() + note + f"<p><b>Settling, {html.escape(caption)}</b></p>"
            f"<table style='font-size:0.9em'><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>")


def _check_trace(trace: Any):
    if trace is None:
        return None
    for attribute in ("times", "values", "name"):
        if not hasattr(trace, attribute):
            raise InputError(f"Bench trace: {trace!r} has no .{attribute}; a trace needs .times, .values and .name")

    @dataclass(frozen=True)
    class _Trace:
        times: np.ndarray
        values: np.ndarray
        name: str

    times = np.asarray(trace.times, dtype=float).reshape(-1)
    values = np.asarray(trace.values, dtype=float).reshape(-1)
    if times.size != values.size or times.size == 0:
        raise InputError(f"Bench trace: {times.size} times and {values.size} values; give one value per time")
    if not (np.isfinite(times).all() and np.isfinite(values).all()):
        raise InputError("Bench trace: times and values must be finite numbers")
    if times.size > 1 and not (np.diff(times) > 0).all():
        raise InputError("Bench trace: times must be strictly increasing")
    return _Trace(times, values, str(trace.name))


def _derivation_html(fixture: Fixture, response, segment: int, probe: str | None) -> str:
    """Symbols first (sympy), then this segment's numbers."""
    drive = response.drive
    states = dict(zip((p.name for p in fixture.switches),
                      (bool(drive.levels(p.name)[segment]) for p in fixture.switches)))
    derivation = fixture.derivation(**states)
    unit = fixture.state_unit
    start, end = float(drive.times[segment]), float(drive.ends[segment])
    levels = ", ".join(f"{p.name} = {format_value(float(drive.levels(p.name)[segment]), SOURCE_UNITS[p.kind])}"
                       for p in fixture.sources)
    out = [f"<h4 style='margin:4px 0'>Segment {segment}: {format_value(start, 's')} to {format_value(end, 's')}</h4>",
           f"<p>Configuration: {html.escape(derivation.configuration)}; levels: {html.escape(levels) or 'none'}</p>"]
    for caption, body in derivation.steps():
        out.append(f"<p style='margin:2px 0'><b>{html.escape(caption)}</b></p><p>$$ {body} $$</p>")
    from ..symbolic import _latex_name  # the same writing of names as the steps above

    x = _latex_name(derivation.state.func.__name__)
    tau = float(response.tau[segment])
    x0 = float(response.boundary[segment])
    final = float(response.final[segment])

    def number(value: float, unit_text: str) -> str:
        # engineering notation, as on the axes: 1.55 ms rather than 0.00155
        return r"\infty" if not math.isfinite(value) else r"\mathrm{" + format_value(value, unit_text).replace(" ", r"\ ") + "}"

    out.append("<p style='margin:2px 0'><b>This segment in numbers</b></p>")
    out.append(rf"<p>$$ \tau = {number(tau, 's')},\quad {x}(t_{{{segment}}}) = {number(x0, unit)},"
               rf"\quad {x}(\infty) = {number(final, unit)} $$</p>")
    if math.isfinite(tau):
        out.append(rf"<p>$$ {x}(t) = {number(final, unit)} + \left({number(x0, unit)} - {number(final, unit)}\right)"
                   rf"e^{{-(t - {number(start, 's')})/{number(tau, 's')}}} $$</p>")
    else:
        out.append(rf"<p>$$ {x}(t) = {number(x0, unit)} \quad\text{{(held: no resistive path)}} $$</p>")
    if probe is not None:
        out.append(f"<p>Shown on the plot: probe {html.escape(probe)}, from the probe expression above.</p>")
    return "\n".join(out)

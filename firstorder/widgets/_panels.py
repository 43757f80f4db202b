"""The Bench's panels: builders that return ipywidgets, and the HTML its text panels show.

Each builder takes what it shows and the callbacks its controls call, and
returns its widgets (in a small frozen record, so the Bench can reach the ones
it fills later).  No maths and no state here beyond the widgets themselves;
numbers are written by :mod:`firstorder.units` and the settling table's rows
by :mod:`firstorder.report.tables`, as everywhere else.
"""

from __future__ import annotations

import html
import math
import re
from dataclasses import dataclass
from typing import Callable

import ipywidgets as widgets
import numpy as np
from bokeh.models import ColumnDataSource, DataTable, SelectEditor, StringEditor, TableColumn
from jupyter_bokeh import BokehModel

from ..netlist import GROUND, SOURCE_UNITS
from ..plotting.palette import component_label
from ..report.tables import margin_rows
from ..units import format_value
from ._drive_table import DriveText
from ._files import download_html
from ._generators import GENERATORS
from ._plot import MAX_HANDLES
from ._session import BenchSession, PartField

__all__ = ["DriveEditor", "ERROR_VIEW_SEGMENTS", "ExportPanel", "FieldsPanel", "GeneratorsPanel", "TAB_TITLES",
           "ViewPanel", "cautions_html", "derivation_html", "drive_editor", "error_html", "error_view_children",
           "export_panel", "generators_panel", "header_html", "info_html", "parts_panel", "probe_label", "settling_html",
           "setup_panel", "status_html", "tab_panel",
           "value_label", "view_panel"]

#: Tabs under the plot, in order.
TAB_TITLES = ("Drive table", "Generators", "Derivation", "Settling", "Export", "Error view", "Spread")
_ERROR_STYLE = "color:#b03a2e;font-size:0.85em"
_HINT_STYLE = "color:#566573;font-size:0.85em;line-height:1.25;display:inline-block"


def _label(text: str, width: str = "78px") -> widgets.HTML:
    return widgets.HTML(f"<b>{html.escape(text)}</b>", layout=widgets.Layout(width=width))


# -- fields ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class FieldsPanel:
    """A column of text fields, each with an error line under it."""

    box: widgets.VBox
    fields: dict[str, widgets.Text]
    errors: dict[str, widgets.HTML]

    def show(self, texts: dict[str, str], errors: dict[str, str]) -> None:
        """Every field's error from `errors`, and its last good text from `texts` unless it
        shows a refused entry (left as typed, to be fixed)."""
        for key, field in self.fields.items():
            if key not in errors:
                field.value = texts[key]
            # Beside the field: its refused entry, or (the tolerance) a unit that is not the one shown.
            self.errors[key].value = error_html(errors.get(key) or errors.get(f"{key} unit"))


def parts_panel(fields: list[PartField], on_edit: Callable[[str, str], None]) -> FieldsPanel:
    """A text field per part value; `on_edit(key, text)` when one is typed (Enter or leaving it)."""
    texts: dict[str, widgets.Text] = {}
    errors: dict[str, widgets.HTML] = {}
    rows: list[widgets.Widget] = [widgets.HTML("<b>Parts</b>")]
    for spec in fields:
        field = widgets.Text(value=spec.text, continuous_update=False, layout=widgets.Layout(width="120px"),
                             description_allow_html=False)
        field.tooltip = f"{spec.kind.replace('_', ' ')} {spec.part} ({spec.unit})"
        # The part's key keeps its underscores in the class: tests and pages find fields by it.
        # A class is one token: a space (or any other character a class cannot hold) in a
        # part's name would make the browser refuse it and the field fail to show.
        field.add_class("fo-part-" + re.sub(r"[^A-Za-z0-9_-]", "-", spec.key))
        field.observe(lambda change, key=spec.key: on_edit(key, change["new"]), names="value")
        error = widgets.HTML(layout=widgets.Layout(width="auto"))
        texts[spec.key], errors[spec.key] = field, error
        unit = widgets.HTML(f"<span style='color:#566573'>{html.escape(spec.unit)}</span>")
        rows.append(widgets.VBox([widgets.HBox([_label(spec.label), field, unit]), error]))
    return FieldsPanel(widgets.VBox(rows), texts, errors)


def setup_panel(texts: dict[str, str], state_unit: str, on_edit: Callable[[str, str], None],
                storage_kind: str = "capacitor") -> FieldsPanel:
    """The start, tolerance and sample-delay fields, each with its unit and what it means;
    `on_edit(key, text)` when one is typed."""
    quantity = "voltage" if state_unit == "V" else "current"
    element = "capacitor" if storage_kind == "capacitor" else "coil"
    # (key, label, unit beside the field, what it is, written under it)
    specs = [
        ("initial", "start", state_unit, f"the {element}'s starting {quantity} ({state_unit}), or 'settled' or 'periodic'"),
        ("tolerance", "tolerance", "", "e.g. 1 mV, 0.1 %, 10 ppm of 5 V, 0.5 LSB of 16 bits on 5 V"),
        ("sample_delay", "sample at", "s", "time after each change when the reading is taken"),
    ]
    fields: dict[str, widgets.Text] = {}
    errors: dict[str, widgets.HTML] = {}
    rows: list[widgets.Widget] = [widgets.HTML("<b>Setup</b>")]
    for key, label, unit, hint in specs:
        field = widgets.Text(value=texts[key], placeholder=hint, continuous_update=False,
                             layout=widgets.Layout(width="200px"))
        field.tooltip = hint
        field.add_class(f"fo-setup-{key.replace('_', '-')}")
        field.observe(lambda change, key=key: on_edit(key, change["new"]), names="value")
        fields[key], errors[key] = field, widgets.HTML()
        shown_unit = widgets.HTML(f"<span style='color:#566573'>{html.escape(unit)}</span>")
        note = widgets.HTML(f"<span style='{_HINT_STYLE}'>{html.escape(hint)}</span>")
        rows.append(widgets.VBox([widgets.HBox([_label(label), field, shown_unit]), note, errors[key]]))
    return FieldsPanel(widgets.VBox(rows), fields, errors)


# -- what is shown -------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ViewPanel:
    box: widgets.VBox
    probe_selector: widgets.Dropdown
    overlays: dict[str, widgets.ToggleButton]
    undo_button: widgets.Button

    def show(self, probe: str | None, curves: tuple[str, ...]) -> None:
        """The probe watched and the curves shown."""
        self.probe_selector.value = probe or ""
        for name, button in self.overlays.items():
            button.value = name in curves


def probe_label(probe) -> str:
    """What a probe watches in plain words: ``voltage at out``, ``voltage sup → drain``,
    ``current through coil``.

    Examples
    --------
    >>> from firstorder.netlist import Probe
    >>> probe_label(Probe("v", node="sup", reference="drain")), probe_label(Probe("i", through="coil"))
    ('voltage sup → drain', 'current through coil')
    """
    if probe.node is None:
        return f"current through {probe.through}"
    return f"voltage at {probe.node}" if probe.reference == GROUND else f"voltage {probe.node} → {probe.reference}"


def value_label(fixture, probe: str | None = None) -> str:
    """What the response panel's value axis shows: the probe, or the storage element's state."""
    if probe:
        return f"{probe}: {probe_label(next(p for p in fixture.probes if p.name == probe))}"
    storage = fixture.storage
    return f"voltage across {storage.name}" if storage.kind == "capacitor" else f"current through {storage.name}"


def _look_on_or_off(button: widgets.ToggleButton) -> None:
    """A shown curve's button filled with a tick, a hidden one plain with an empty box: told
    apart at a glance, not by a slightly darker grey."""
    button.button_style = "info" if button.value else ""
    button.icon = "check-square" if button.value else "square-o"


def view_panel(fixture, curve_names: tuple[str, ...], shown: tuple[str, ...], probe: str | None,
               on_probe: Callable[[str], None], on_overlay: Callable[[str, bool], None],
               on_undo: Callable[[], None]) -> ViewPanel:
    """The quantity watched (the state or a probe), a toggle per curve, and undo."""
    storage = fixture.storage
    options = [(f"state: {value_label(fixture)}", "")] + [(value_label(fixture, p.name), p.name) for p in fixture.probes]
    selector = widgets.Dropdown(options=options, value=probe or "", layout=widgets.Layout(width="300px"))
    selector.observe(lambda change: on_probe(change["new"]), names="value")
    overlays = {}
    for name in curve_names:
        label = component_label(name)
        button = widgets.ToggleButton(value=name in shown, description=label, layout=widgets.Layout(width="146px"))
        button.tooltip = f"show or hide the {label} curve"
        _look_on_or_off(button)
        button.observe(lambda change: _look_on_or_off(change["owner"]), names="value")
        button.observe(lambda change, name=name: on_overlay(name, change["new"]), names="value")
        overlays[name] = button
    grid = widgets.GridBox(list(overlays.values()), layout=widgets.Layout(grid_template_columns="repeat(2, 150px)"))
    undo = widgets.Button(description="Undo last edit", icon="undo", layout=widgets.Layout(width="300px"))
    undo.on_click(lambda _: on_undo())
    title = widgets.HTML(f"<b>Show</b> ({html.escape(storage.kind)} '{html.escape(storage.name)}')")
    return ViewPanel(widgets.VBox([title, selector, grid, undo]), selector, overlays, undo)


# -- the drive ----------------------------------------------------------------------------------------
@dataclass(frozen=True)
class DriveEditor:
    box: widgets.VBox
    table_source: ColumnDataSource
    drive_table: DataTable
    table_view: BokehModel
    end_field: widgets.Text
    row_field: widgets.BoundedIntText
    drag_column: widgets.Dropdown
    error: widgets.HTML

    def show(self, table: DriveText, with_text: bool, revision: int) -> None:
        """`table`'s end and rows; its cells too `with_text` (not when they are what was typed)."""
        if with_text:
            self.table_source.data = table.as_columns()
            # BokehJS redraws a table when its row indices change; with as many rows as
            # before they do not, so a change to the table model itself asks for the redraw.
            self.drive_table.tags = [revision, id(table)]
        self.end_field.value = table.end
        self.row_field.max = max(len(table) - 1, 0)

    def select(self, segment: int | None) -> None:
        """Light up the row of `segment` (and put it in the row field)."""
        if segment is not None:
            self.row_field.value = segment
            if list(self.table_source.selected.indices) != [segment]:
                self.table_source.selected.indices = [segment]


def drive_editor(table: DriveText, on_row: Callable[[str, int], None], on_end: Callable[[str], None],
                 on_drag_column: Callable[[str], None]) -> DriveEditor:
    """The editable drive table (bokeh), its end, row buttons and the column drag handles move.

    `on_row(action, row)` for ``"add"``, ``"insert"``, ``"duplicate"`` and ``"delete"``;
    the table's own edits arrive through ``table_source.on_change("data", ...)``.
    """
    sources = [name for name in table.names if name not in table.switches]
    source = ColumnDataSource(table.as_columns())
    columns = [TableColumn(field="row", title="#", width=50),
               TableColumn(field="time", title="change at", editor=StringEditor())]
    # BokehJS's table writes a column's title into its header as HTML: escape the name.
    columns += [TableColumn(field=name, title=html.escape(f"{name} ({table.units[name]})"), editor=StringEditor())
                for name in sources]
    columns += [TableColumn(field=name, title=html.escape(f"{name} (switch)"),
                            editor=SelectEditor(options=["closed", "open"]))
                for name in table.names if name in table.switches]
    grid = DataTable(source=source, columns=columns, editable=True, index_position=None, width=620,
                     sizing_mode="stretch_width",
                     height=min(260, 34 + 26 * len(table)), selectable=True)
    end = widgets.Text(value=table.end, description="end", continuous_update=False, layout=widgets.Layout(width="200px"))
    end.observe(lambda change: on_end(change["new"]), names="value")
    row = widgets.BoundedIntText(value=0, min=0, max=max(len(table) - 1, 0), description="row",
                                 layout=widgets.Layout(width="150px"))
    buttons = []
    for label, action in [("Add at end", "add"), ("Insert before", "insert"), ("Duplicate", "duplicate"),
                          ("Delete", "delete")]:
        button = widgets.Button(description=label, layout=widgets.Layout(width="110px"))
        button.on_click(lambda _, action=action: on_row(action, row.value))
        buttons.append(button)
    options = sources or [""]
    drag = widgets.Dropdown(options=options, value=options[0], description="drag", layout=widgets.Layout(width="200px"))
    drag.observe(lambda change: on_drag_column(change["new"]), names="value")
    error = widgets.HTML()
    hint = widgets.HTML(
        f"<span style='{_HINT_STYLE}'>Double-click a cell to edit (times and levels in "
        "engineering notation, switches closed/open). On the drive plot, drag a square handle: sideways "
        f"moves the change, up or down sets the level (up to {MAX_HANDLES} changes).</span>")
    view = BokehModel(grid, combine_events=True)
    view.layout = widgets.Layout(width="100%")
    box = widgets.VBox([widgets.HBox([end, row, *buttons], layout=widgets.Layout(flex_flow="row wrap")), widgets.HBox([drag]), error, view, hint])
    return DriveEditor(box, source, grid, view, end, row, drag, error)


@dataclass(frozen=True)
class GeneratorsPanel:
    box: widgets.VBox
    kind: widgets.ToggleButtons
    column: widgets.Dropdown
    fields: dict[str, dict[str, widgets.Text]]  # generator key -> its fields
    columns: dict[str, widgets.Text]  # every column's own levels or states
    button: widgets.Button
    error: widgets.HTML

    def values(self) -> tuple[str, str, dict[str, str], dict[str, str]]:
        """What `on_generate` needs: the generator, the source it makes, its fields and every column's."""
        kind = self.kind.value
        return (kind, self.column.value, {key: w.value for key, w in self.fields[kind].items()},
                {name: w.value for name, w in self.columns.items()})


def generators_panel(names: tuple[str, ...], switches: frozenset[str], units: dict[str, str],
                     defaults: dict[str, str], on_generate: Callable[[], None]) -> GeneratorsPanel:
    """A repeated pattern, a staircase or a ramp of steps on one source, and a field for every
    other column (nothing kept from the drive it replaces); `on_generate()` on the button."""
    sources = [name for name in names if name not in switches] or [""]
    kind = widgets.ToggleButtons(options=[(g.title, g.key) for g in GENERATORS], value=GENERATORS[0].key,
                                 style={"button_width": "140px"})
    column = widgets.Dropdown(options=sources, value=sources[0], description="source",
                              layout=widgets.Layout(width="200px"))
    fields: dict[str, dict[str, widgets.Text]] = {}
    boxes = {}
    for generator in GENERATORS:
        fields[generator.key] = {}
        rows = []
        for key, label, text, hint in generator.fields:
            field = widgets.Text(value=text, description=label, placeholder=hint, tooltip=hint,
                                 layout=widgets.Layout(width="230px"))
            field.add_class(f"fo-gen-{generator.key}-{key}")
            fields[generator.key][key] = field
            rows.append(field)
        boxes[generator.key] = widgets.HBox(rows, layout=widgets.Layout(flex_flow="row wrap"))
    shown = widgets.Box([boxes[kind.value]])
    kind.observe(lambda change: setattr(shown, "children", [boxes[change["new"]]]), names="value")
    columns: dict[str, widgets.Text] = {}
    for name in names:
        label = f"{name} (switch)" if name in switches else f"{name} ({units.get(name, '')})"
        field = widgets.Text(value=defaults.get(name, ""), description=label, style={"description_width": "initial"},
                             tooltip="one value, or one per level of the pattern (closed/open for a switch)",
                             layout=widgets.Layout(width="230px"))
        field.add_class("fo-gen-column-" + re.sub(r"[^A-Za-z0-9_-]", "-", name))
        columns[name] = field

    def mark_generated(change=None) -> None:
        # The generated source's own field is the generator's: shown, but not typed in.
        for name, field in columns.items():
            field.disabled = name == column.value
            field.placeholder = "made by the generator" if field.disabled else ""

    mark_generated()
    column.observe(mark_generated, names="value")
    button = widgets.Button(description="Make drive", icon="magic", button_style="primary",
                            layout=widgets.Layout(width="160px"))
    button.on_click(lambda _: on_generate())
    error = widgets.HTML()
    note = widgets.HTML(f"<span style='{_HINT_STYLE}'>A generator replaces the whole drive: the source above "
                        "takes the generator's levels; every other column takes the value beside it (one value, "
                        "or one per level of the pattern; closed/open for a switch). Undo takes it back.</span>")
    column_box = widgets.HBox(list(columns.values()), layout=widgets.Layout(flex_flow="row wrap"))
    box = widgets.VBox([kind, widgets.HBox([column]), shown, widgets.HTML("<b>Every other column</b>"), column_box,
                        button, error, note])
    return GeneratorsPanel(box, kind, column, fields, columns, button, error)


@dataclass(frozen=True)
class ExportPanel:
    box: widgets.VBox
    name: widgets.Text
    title: widgets.Text
    notes: widgets.Textarea
    message: widgets.HTML
    load_path: widgets.Text
    load_button: widgets.Button
    upload: widgets.FileUpload
    load_message: widgets.HTML


def export_panel(actions: list[tuple[str, str, Callable[[str], str]]], title: str,
                 on_load: Callable[[str | None, bytes | None], str]) -> ExportPanel:
    """A file stem, the report's title and notes, a button per `(label, suffix, write)`, and
    loading an analysis file.  ``write(stem + suffix)`` returns the path written, shown in
    full with a link that downloads it (or the error that stopped it); ``on_load(path, None)``
    or ``on_load(None, content)`` loads one and returns what to show."""
    wide = widgets.Layout(width="95%", max_width="460px")
    name = widgets.Text(value="bench", description="file stem", layout=wide)
    name.add_class("fo-export-stem")
    title_field = widgets.Text(value=title, description="title", placeholder="the report's title", layout=wide)
    title_field.add_class("fo-export-title")
    notes = widgets.Textarea(value="", description="notes", placeholder="notes at the top of the report and in "
                             "the analysis file", layout=widgets.Layout(width="95%", max_width="460px", height="60px"))
    notes.add_class("fo-export-notes")
    message = widgets.HTML()
    message.add_class("fo-export-message")

    def run(suffix: str, write: Callable[[str], str]) -> None:
        try:
            written = write((name.value.strip() or "bench") + suffix)
            message.value = download_html(written)
        except (OSError, ValueError) as error:
            message.value = error_html(str(error))

    buttons = []
    for label, suffix, write in actions:
        # Wide enough for its whole label: a cut "Plotted components (CS…" says nothing.
        button = widgets.Button(description=label, icon="download", layout=widgets.Layout(width="auto"))
        button.add_class("fo-export-" + suffix.strip("_").replace(".", "-"))
        button.on_click(lambda _, suffix=suffix, write=write: run(suffix, write))
        buttons.append(button)
    load_path = widgets.Text(description="file", placeholder="path to an analysis (.json) or report (.html)",
                             layout=widgets.Layout(width="95%", max_width="460px"))
    load_path.add_class("fo-load-path")
    load_button = widgets.Button(description="Load", icon="folder-open", layout=widgets.Layout(width="auto"))
    upload = widgets.FileUpload(accept=".json,.html", multiple=False, description="Upload")
    load_message = widgets.HTML()
    load_message.add_class("fo-load-message")

    def load(path: str | None, content: bytes | None) -> None:
        load_message.value = on_load(path, content)

    load_button.on_click(lambda _: load(load_path.value.strip(), None))
    def uploaded(change) -> None:
        if change["new"]:
            load(None, bytes(change["new"][0]["content"]))
            upload.value = ()  # so the same file uploaded again loads again

    upload.observe(uploaded, names="value")
    hint = widgets.HTML(f"<span style='{_HINT_STYLE}'>Files are written in the notebook's folder; each also "
                        "downloads from the link shown. Loading puts an analysis's part values, drive and setup "
                        "into this Bench (undo takes it back).</span>")
    box = widgets.VBox([
        widgets.HTML("<b>Export</b>"), name, title_field, notes,
        widgets.HBox(buttons, layout=widgets.Layout(flex_flow="row wrap")), message,
        widgets.HTML("<b>Load an analysis</b>"), widgets.HBox([load_path, load_button, upload], layout=widgets.Layout(flex_flow="row wrap")),
        load_message, hint])
    return ExportPanel(box, name, title_field, notes, message, load_path, load_button, upload, load_message)


def tab_panel(children: list[widgets.Widget]) -> widgets.Tab:
    """The tabs under the plot, titled :data:`TAB_TITLES`."""
    tabs = widgets.Tab(children=children)
    for index, title in enumerate(TAB_TITLES):
        tabs.set_title(index, title)
    return tabs


def header_html(fixture, drive) -> str:
    """The Bench's title line: the storage element and how many changes the drive has now."""
    storage = fixture.storage
    return (
        f"<div style='font-size:1.15em;font-weight:600'>Bench: {html.escape(storage.kind)} "
        f"'{html.escape(storage.name)}' under a {len(drive)}-change drive</div>")


# -- text panels -------------------------------------------------------------------------------------
def error_html(message: str | None) -> str:
    """One error line beside a field ("" for none)."""
    return f"<span style='{_ERROR_STYLE}'>{html.escape(message)}</span>" if message else ""


def status_html(errors: dict[str, str]) -> str:
    """Every current error above the plot, which shows the last good result meanwhile."""
    if not errors:
        return ""
    lines = "<br>".join(html.escape(m) for m in errors.values())
    return (f"<div style='background:#fdedec;border-left:4px solid #b03a2e;padding:4px 8px'>"
            f"{lines}<br><i>The plot shows the last good result.</i></div>")


def cautions_html(cautions: list) -> str:
    """The cautions, compact: each one's finding on one line, what to do folded under it, and
    the reminder every caution ends with said once."""
    if not cautions:
        return ""
    items, reminders = [], []
    for caution in cautions:
        text = str(caution)
        # A caution's first sentence says what was found; the rest is advice.
        finding, _, advice = text.partition(". ")
        reminder = advice.find("These are reminders")
        if reminder >= 0:
            advice, tail = advice[:reminder].rstrip(), advice[reminder:]
            if tail not in reminders:
                reminders.append(tail)
        folded = (f"<details style='display:inline'><summary style='display:inline;cursor:pointer;"
                  f"color:#7e5109'> more</summary>{html.escape(advice)}</details>" if advice else "")
        items.append(f"<div>⚠ <b>{html.escape(finding.rstrip('.'))}.</b>{folded}</div>")
    note = "".join(f"<div style='{_HINT_STYLE}'>{html.escape(r)}</div>" for r in reminders)
    return ("<div class='fo-cautions' style='background:#fef5e7;border-left:4px solid #d68910;padding:2px 8px'>"
            + "".join(items) + note + "</div>")


def info_html(session: BenchSession, mode: str) -> str:
    """The line under the plot: time constants, segments, start and end, how the plot is
    drawn (`mode`), and the residual of a trace."""
    response, unit = session.response, session.fixture.state_unit
    tau = response.tau
    finite = tau[np.isfinite(tau)]
    tau_text = "held (no resistive path)" if finite.size == 0 else (
        format_value(float(finite[0]), "s") if np.ptp(finite) == 0 else
        f"{format_value(float(finite.min()), 's')} to {format_value(float(finite.max()), 's')}")
    parts = [f"τ {tau_text}", f"{len(response.drive)} segments", f"start {format_value(response.initial, unit)}",
             f"end {format_value(float(response.boundary[-1]), unit, scale=response.end_scale())}",
             "plot: every segment drawn" if mode == "line" else "plot: min/max per pixel (zoom in for single segments)"]
    if session.residual is not None:
        parts.append(f"residual rms {format_value(session.residual.rms, session.value_unit)}")
    return "<span style='color:#34495e'>" + " · ".join(html.escape(p) for p in parts) + "</span>"


def settling_html(session: BenchSession) -> str:
    """The summary, then the rows with the least margin (every row of a short drive)."""
    table = session.settling
    if table is None:
        return ("<p>Give a tolerance (Setup) to see when each segment settles "
                "and the error left at each sample.</p>")
    header, rows, caption = margin_rows(table, session.value_unit)
    head = "".join(f"<th style='padding:1px 8px;text-align:left'>{html.escape(h)}</th>" for h in header)
    body = "".join(
        "<tr>" + "".join(f"<td style='padding:1px 8px'>{html.escape(cell)}</td>" for cell in [str(k), *cells]) + "</tr>"
        for k, cells, _ in rows)
    short = session.short_segments
    listed = ", ".join(str(k) for k in short[:8]) + (f" and {short.size - 8} more" if short.size > 8 else "")
    note = (f"<p style='color:#566573'>{'Segment' if short.size == 1 else 'Segments'} {listed} "
            f"{'is' if short.size == 1 else 'are'} shorter than the sample delay "
            f"({html.escape(format_value(session.sample_delay, 's'))}): sampled at {'its' if short.size == 1 else 'their'} "
            "end (a square on the plot).</p>" if short.size else "")
    return (session.summary._repr_html_() + note + f"<p><b>Settling, {html.escape(caption)}</b></p>"
            f"<table style='font-size:0.9em'><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>")


#: Segments the error view draws at most (those in view, from the first).
ERROR_VIEW_SEGMENTS = 400


def error_view_children(session: BenchSession) -> tuple:
    """The Error view tab: each segment's error in view on a log axis, with the tolerance and
    the samples (:func:`firstorder.report.figure.error_figure`, as in the report)."""
    from ..plotting.error_view import error_view, lot_errors
    from ..report.figure import error_figure, time_scale

    table = session.settling
    if table is None:
        return (widgets.HTML("<p>Give a tolerance (Setup) to see each segment's error against it.</p>"),)
    start, end = session.view
    view = error_view(session.response, table, session.probe, start=start, end=end,
                      max_segments=ERROR_VIEW_SEGMENTS)
    factor, unit = time_scale(end - start)
    # While the study of the inputs shown runs, the last one's marks would be of other inputs: none, and a note.
    studying = session.studying
    lot = None if session.study_table is None or studying else lot_errors(view, session.study_table)
    figure = error_figure(view, factor, unit, width=560, height=260, lot=lot)
    note = (f"<p style='color:#566573;margin:2px 0'>The first {ERROR_VIEW_SEGMENTS} segments in view; zoom in for "
            f"the others.</p>" if view.segments.size == ERROR_VIEW_SEGMENTS else "")
    if studying is not None:
        note += (f"<p class='fo-lot-updating' style='color:#566573;margin:2px 0'>The lot's marks are being "
                 f"recomputed: {html.escape(str(studying))}</p>")
    return (widgets.HTML(note), BokehModel(figure))


def _display_math(latex: str) -> str:
    r"""`latex` as display maths for HTMLMath, escaped as HTML text.

    Examples
    --------
    >>> _display_math(r"r_{<b>} \cdot c")
    '$$ r_{&lt;b&gt;} \\cdot c $$'
    """
    return f"$$ {html.escape(latex, quote=False)} $$"


def derivation_html(session: BenchSession) -> str:
    """The selected segment's (or the first one's) derivation: symbols first (sympy, imported
    on first use), then its numbers."""
    from ..symbolic.names import latex_name  # the one writing of names, as in the steps above

    fixture, response, probe = session.fixture, session.response, session.probe
    segment = session.segment or 0
    drive = response.drive
    states = {p.name: bool(drive.levels(p.name)[segment]) for p in fixture.switches}
    derivation = fixture.derivation(**states)
    unit = fixture.state_unit
    start, end = float(drive.times[segment]), float(drive.ends[segment])
    levels = ", ".join(f"{p.name} = {format_value(float(drive.levels(p.name)[segment]), SOURCE_UNITS[p.kind])}"
                       for p in fixture.sources)
    # HTMLMath sets this as innerHTML before MathJax reads the text, so the LaTeX is
    # escaped like any other text: a name typed as "<img onerror=...>" must stay text
    # (the browser turns &lt; back into the < that MathJax then typesets).
    out = [f"<h4 style='margin:4px 0'>Segment {segment}: {html.escape(format_value(start, 's'))} to "
           f"{html.escape(format_value(end, 's'))}</h4>",
           f"<p>Configuration: {html.escape(derivation.configuration)}; levels: {html.escape(levels) or 'none'}</p>"]
    for caption, body in derivation.steps():
        out.append(f"<p style='margin:2px 0'><b>{html.escape(caption)}</b></p><p>{_display_math(body)}</p>")
    x = latex_name(derivation.state.func.__name__)
    tau, x0, final = float(response.tau[segment]), float(response.boundary[segment]), float(response.final[segment])

    def number(value: float, unit_text: str, bracket_negative: bool = False) -> str:
        # engineering notation, as on the axes: 1.55 ms rather than 0.00155
        if not math.isfinite(value):
            return r"\infty"
        text = r"\mathrm{" + format_value(value, unit_text).replace(" ", r"\ ") + "}"
        # "a - -19.8 mV" reads as a typing slip: a negative number after a minus goes in brackets.
        return rf"\left({text}\right)" if bracket_negative and value < 0 else text

    out.append("<p style='margin:2px 0'><b>This segment in numbers</b></p>")
    out.append("<p>" + _display_math(rf"\tau = {number(tau, 's')},\quad {x}(t_{{{segment}}}) = {number(x0, unit)},"
                                     rf"\quad {x}(\infty) = {number(final, unit)}") + "</p>")
    if math.isfinite(tau):
        out.append("<p>" + _display_math(
            rf"{x}(t) = {number(final, unit)} + \left({number(x0, unit)} - {number(final, unit, True)}\right)"
            rf"e^{{-(t - {number(start, 's')})/{number(tau, 's')}}}") + "</p>")
    else:
        out.append("<p>" + _display_math(rf"{x}(t) = {number(x0, unit)} \quad\text{{(held: no resistive path)}}")
                   + "</p>")
    if probe is not None:
        out.append(f"<p>Shown on the plot: probe {html.escape(probe)}, from the probe expression above.</p>")
    return "\n".join(out)

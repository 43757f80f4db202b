"""Rows and cells shared by every place that shows an analysis: HTML, Markdown, the CLI, the Bench.

Each function turns results into rows of text (engineering notation, words for
flags), and nothing else: no markup.  The HTML and Markdown reports, the
``firstorder settle`` table and the Bench's panels lay these rows out in their
own way, so a number reads the same everywhere.
"""

from __future__ import annotations

import datetime
import math
from typing import TYPE_CHECKING, Any

import numpy as np

from ..units import format_value, parse_value

if TYPE_CHECKING:
    import pandas as pd

    from ..analysis import Analysis
    from ..drive import Drive
    from ..fixture import Fixture

__all__ = ["FULL_DRIVE_ROWS", "FULL_SETTLING_ROWS", "HEAD_ROWS", "MARGIN_ROWS", "MAX_DERIVATIONS", "TAIL_ROWS",
           "drive_rows", "drive_summary_rows", "hold_cells", "margin_rows", "part_rows", "probe_rows", "row_scales", "settling_cell",
           "settling_rows", "states_text", "summary_rows", "timestamp", "version"]

#: A drive with at most this many changes is shown in full; longer ones are summarised.
FULL_DRIVE_ROWS = 40
HEAD_ROWS, TAIL_ROWS = 10, 5
#: A settling table with at most this many rows is shown in full.
FULL_SETTLING_ROWS = 200
#: Derivations shown, in order of first use (each switch configuration has one).
MAX_DERIVATIONS = 8
#: Rows of the short settling table (the Bench's panel): the segments with the least margin.
MARGIN_ROWS = 40

def timestamp() -> str:
    """The time now, as a report writes it (UTC, to the minute)."""
    return datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")


def version() -> str:
    """The firstorder version that writes the report."""
    from .._version import __version__

    return __version__


def states_text(fixture: "Fixture", states: tuple[bool, ...]) -> str:
    """``"k1 closed, k2 open"``, or ``"no switches"``."""
    return fixture.describe_states(states) or "no switches"


def summary_rows(analysis: "Analysis") -> list[tuple[str, str]]:
    """(label, text) pairs summarising an analysis."""
    response = analysis.response
    fixture = analysis.fixture
    drive = analysis.drive
    unit = fixture.state_unit
    storage = fixture.storage
    rows = [
        ("storage element", f"{storage.kind} '{storage.name}', {storage.describe_value()}; "
                            f"state {'v' if unit == 'V' else 'i'}_{storage.name} in {unit}"),
        ("starting state", f"{analysis.initial!r} → {format_value(response.initial, unit)}"),
        ("drive", f"{len(drive)} segments from {format_value(drive.start, 's')} to "
                  f"{format_value(drive.end, 's')}; columns {', '.join(drive.names)}"),
    ]
    configurations = response.configurations
    order = dict.fromkeys(response.segment_configuration.tolist())
    for index in order:
        states = configurations[index]
        tau = response.tau[response.segment_configuration == index][0]
        text = "holds its state (no resistive path)" if math.isinf(tau) else format_value(float(tau), "s")
        rows.append((f"time constant ({states_text(fixture, states)})", text))
    rows.append(("state at the end", format_value(float(response.boundary[-1]), unit, scale=response.end_scale())))
    rows.append(("tolerance", str(analysis.tolerance) if analysis.tolerance is not None else "none given"))
    delay = analysis.sample_delay
    if delay is None:
        delay_text = "none given"
    elif isinstance(delay, list):
        delay_text = (f"one per segment, {format_value(min(delay), 's')} to "
                      f"{format_value(max(delay), 's')} after the change")
    else:
        delay_text = f"{delay!r} after every change"
        if (drive.durations < parse_value(delay, field="sample_delay", unit="s")).any():
            delay_text += "; a segment shorter than that is sampled at its end"
    rows.append(("sample delay", delay_text))
    return rows


def part_rows(fixture: "Fixture") -> list[list[str]]:
    """One row per part: name, kind, nodes, value as typed, value."""
    rows = []
    for part in fixture.parts:
        typed = ", ".join(f"{key} {value!r}" if len(part.typed) > 1 else repr(value) for key, value in part.typed)
        rows.append([part.name, part.kind.replace("_", " "), f"{part.a} → {part.b}",
                     typed or "from the drive", part.describe_value()])
    return rows


def probe_rows(fixture: "Fixture") -> list[list[str]]:
    """One row per probe: name, what it watches."""
    return [[probe.name, probe.describe()] for probe in fixture.probes]


def drive_rows(drive: "Drive") -> tuple[list[str], list[list[str]], bool]:
    """Header and rows of the drive table, and whether rows were left out.

    A short drive is given in full; a long one as its first and last rows,
    with a row of ellipses between.
    """
    header = ["#", "change at", *drive.names]
    n = len(drive)
    shown = list(range(n)) if n <= FULL_DRIVE_ROWS else [*range(HEAD_ROWS), *range(n - TAIL_ROWS, n)]
    columns = list(drive.columns.values())
    rows = []
    previous = None
    for k in shown:
        if previous is not None and k != previous + 1:
            rows.append(["…"] * len(header))
        rows.append([str(k), format_value(float(drive.times[k]), "s", digits=7), *(f"{float(c[k]):.6g}" for c in columns)])
        previous = k
    return header, rows, n > FULL_DRIVE_ROWS


def drive_summary_rows(drive: "Drive") -> list[list[str]]:
    """Per column: lowest, highest and how many distinct levels."""
    rows = []
    for name, values in drive.columns.items():
        rows.append([name, f"{float(values.min()):.6g}", f"{float(values.max()):.6g}", str(np.unique(values).size)])
    return rows


_SETTLING_UNITS = {
    "start": "s", "end": "s", "settle_time": "s", "sample_time": "s",
    "start_value": None, "final": None, "tolerance": None, "residual_at_end": None,
    "value_at_sample": None, "error_at_sample": None,
}


#: Column headings that are not the column's name with spaces.
_HEADERS = {"hold": "judged by"}


#: Columns written against their segment's scale (a residual of 1e-117 A after a 60 mA step is 0 A).
_SCALED = frozenset({"start_value", "final", "residual_at_end", "value_at_sample", "error_at_sample"})


def row_scales(table: "pd.DataFrame") -> np.ndarray:
    """Per segment of a settling table, the size its values are written against: the
    larger of its start value and its final value (see ``format_value``'s `scale`); None
    for each row of a table without them (a study's table: its values are written as they are)."""
    if "start_value" not in table.columns or "final" not in table.columns:
        return np.full(len(table), None, dtype=object)
    return np.maximum(np.abs(table["start_value"].to_numpy()), np.abs(table["final"].to_numpy()))


def settling_cell(column: str, value: Any, unit: str, scale: float | None = None) -> str:
    """One cell of a settling table as text: engineering notation, "yes"/"NO", "ends first";
    the ``hold`` column says what the segment is judged by ("droop" or "settling").
    Values of the watched quantity below 1e-12 of `scale` (the segment's size,
    :func:`row_scales`) are written as 0.

    Examples
    --------
    >>> settling_cell("residual_at_end", 7.271e-115, "A", scale=0.06), settling_cell("settled", True, "A")
    ('0 A', 'yes')
    """
    if column == "hold":
        return "droop" if value else "settling"  # what the error is taken from
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "NO"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        number = float(value)
        settle_column = column == "settle_time" or column.startswith(("settle_time_", "nominal_settle_time"))
        if math.isnan(number):
            return "ends first" if settle_column else "—"
        if column == "yield":  # a study's fraction of units inside at the sample
            return f"{number:.2%}"
        if settle_column:
            return format_value(number, "s", digits=5)
        known = _SETTLING_UNITS.get(column, None if column.startswith("error_") else "")
        return format_value(number, known if known is not None else unit, digits=5,
                            scale=scale if column in _SCALED else None)
    return str(value)


def settling_rows(table: "pd.DataFrame", unit: str) -> tuple[list[str], list[tuple[int, list[str], bool]], int]:
    """Header, rows (segment, cells, bad) and how many rows were left out.

    A long table keeps its first rows and every segment that did not settle
    or failed at its sample, up to :data:`FULL_SETTLING_ROWS` in all.
    """
    header = ["segment", *[_HEADERS.get(str(c), str(c).replace("_", " ")) for c in table.columns]]
    bad = np.zeros(len(table), dtype=bool)
    if "settled" in table.columns:
        bad |= ~table["settled"].to_numpy(dtype=bool)
    if "ok" in table.columns:
        bad |= ~table["ok"].to_numpy(dtype=bool)
    if len(table) <= FULL_SETTLING_ROWS:
        keep = np.arange(len(table))
    else:
        first = np.arange(FULL_SETTLING_ROWS // 2)
        failing = np.flatnonzero(bad)
        keep = np.union1d(first, failing)[:FULL_SETTLING_ROWS]
    columns = list(table.columns)
    values = [table[c].to_numpy() for c in columns]
    scales = row_scales(table)
    hold = table["hold"].to_numpy(dtype=bool) if "hold" in table.columns else np.zeros(len(table), dtype=bool)
    rows = []
    for k in keep.tolist():
        cells = [settling_cell(c, v[k], unit, scales[k]) for c, v in zip(columns, values)]
        if hold[k]:
            hold_cells(cells, columns)
        rows.append((k, cells, bool(bad[k])))
    return header, rows, len(table) - len(keep)


def hold_cells(cells: list[str], columns: list[str]) -> None:
    """A hold whose droop leaves the tolerance before its end does not "end first": it droops out."""
    if "settle_time" in columns and cells[columns.index("settle_time")] == "ends first":
        cells[columns.index("settle_time")] = "droops out"


def margin_rows(table: "pd.DataFrame", unit: str,
                count: int = MARGIN_ROWS) -> tuple[list[str], list[tuple[int, list[str], bool]], str]:
    """A short settling table: header, rows (segment, cells, bad) and which rows they are.

    Every segment of a short table; of a long one the `count` segments with the
    least margin (limit minus the error at the sample, or at the end without
    sample columns), in segment order.  Cells as :func:`settling_cell` writes them;
    a hold's "final" cell is the value it holds ("held 2.5 V"), which its droop is
    taken from.

    Examples
    --------
    >>> import firstorder as fo
    >>> res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "1m"], end="3m", vin=[5, 0]))
    >>> header, rows, caption = margin_rows(res.settling(fo.Tolerance.absolute("1m")), "V")
    >>> header[-2:], rows[0], caption
    (['error at end', 'ok'], (0, ['0 s', '5 V', '1 mV', 'ends first', '1.8394 V', 'NO'], True), 'every segment')
    """
    sampled = "error_at_sample" in table.columns
    error_column, verdict_column = ("error_at_sample", "ok") if sampled else ("residual_at_end", "settled")
    columns = ["start", "final", "tolerance", "settle_time", error_column, verdict_column]
    header = ["segment", "from", "final", "limit", "settles after", "error at sample" if sampled else "error at end", "ok"]
    if len(table) <= count:
        keep = np.arange(len(table))
        caption = "every segment"
    else:
        margin = table["tolerance"].to_numpy() - table[error_column].to_numpy()
        keep = np.sort(np.argsort(margin, kind="stable")[:count])
        caption = f"the {count} segments with the least margin, of {len(table)}"
    values = [table[c].to_numpy() for c in columns]
    hold = table["hold"].to_numpy(dtype=bool) if "hold" in table.columns else np.zeros(len(table), dtype=bool)
    start_value = table["start_value"].to_numpy()
    scales = row_scales(table)
    rows = []
    for k in keep.tolist():
        cells = [settling_cell(c, v[k], unit, scales[k]) for c, v in zip(columns, values)]
        if hold[k]:  # judged as droop from the value it holds, not against the leak's final value
            cells[1] = "held " + settling_cell("start_value", start_value[k], unit, scales[k])
            hold_cells(cells, columns)
        rows.append((k, cells, not bool(values[-1][k])))
    return header, rows, caption

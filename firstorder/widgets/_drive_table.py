"""The drive as an editable table of text: parsing, row operations (no UI).

The table holds what the engineer typed ("1.5m", "2.5", "closed"); next to it
the numbers of the last successful parse, so an edit re-parses only the cells
that changed, which keeps a 100,000-row drive editable.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ..drive import Drive
from ..errors import InputError
from ..units import format_value, parse_value
from ..plotting.format import format_many

__all__ = ["DriveText", "switch_text", "parse_switch"]

_CLOSED_WORDS = {"closed": 1.0, "close": 1.0, "on": 1.0, "1": 1.0, "true": 1.0,
                 "open": 0.0, "off": 0.0, "0": 0.0, "false": 0.0}


def switch_text(states: np.ndarray) -> list[str]:
    """``"closed"`` or ``"open"`` for every 1/0 state."""
    return ["closed" if s else "open" for s in np.asarray(states).tolist()]


def parse_switch(text: str, *, field: str) -> float:
    """1.0 for closed, 0.0 for open.

    Examples
    --------
    >>> parse_switch(" Closed ", field="k1"), parse_switch("0", field="k1")
    (1.0, 0.0)
    """
    key = str(text).strip().lower()
    if key not in _CLOSED_WORDS:
        raise InputError(f"{field}: {text!r} is not a switch state; use closed/open (or 1/0, on/off)")
    return _CLOSED_WORDS[key]


#: The title of the time column on screen (errors name it as the engineer sees it).
TIME_TITLE = "change at"


def check_order(times: np.ndarray, end: float) -> None:
    """Refuse instants out of order, in the table's words (rows, "change at", engineering notation).

    Examples
    --------
    >>> check_order(np.array([0.0, 2.207882717923001e-3, 2e-3]), 5e-3)
    Traceback (most recent call last):
    ...
    firstorder.errors.InputError: drive table row 2, change at: 2 ms does not come after row 1's change at 2.20788 ms; the changes must be in time order
    """
    times = np.asarray(times, dtype=float)
    late = np.flatnonzero(~(np.diff(times) > 0))
    if late.size:
        k = int(late[0]) + 1
        raise InputError(f"drive table row {k}, {TIME_TITLE}: {format_value(times[k], 's', digits=6)} does not come "
                         f"after row {k - 1}'s change at {format_value(times[k - 1], 's', digits=6)}; the changes "
                         f"must be in time order")
    if times.size and not end > times[-1]:
        raise InputError(f"drive end: {format_value(end, 's', digits=6)} must be later than the last change "
                         f"(row {times.size - 1}, at {format_value(times[-1], 's', digits=6)})")


def _as_shown(value: float, unit: str) -> float:
    """`value` as the table writes it: a dragged handle lands on a number the table shows,
    not on one that differs from it in digits past the last shown.

    Examples
    --------
    >>> _as_shown(2.9999993413, "V"), _as_shown(2.0000001234e-3, "s")
    (3.0, 0.002)
    """
    return parse_value(format_many([value], unit)[0], field="drag", unit=unit)


@dataclass(frozen=True)
class DriveText:
    """A drive as table text, with the numbers parsed from it.

    Attributes
    ----------
    names : tuple of str
        Level columns, sources first, then switches.
    switches : frozenset of str
        Which of `names` are switches (shown as closed/open).
    units : dict
        Unit of each source column ("V" or "A").
    time, end : str / array of str
        Change instants and end as typed.
    cells : dict of str to ndarray of str
        Every column's text.
    numbers : dict of str to ndarray
        ``"time"`` and every column, parsed (NaN where a cell does not parse).
    """

    names: tuple[str, ...]
    switches: frozenset[str]
    units: dict[str, str]
    time: np.ndarray
    end: str
    cells: dict[str, np.ndarray]
    numbers: dict[str, np.ndarray] = field(repr=False)

    # -- building -------------------------------------------------------------------
    @classmethod
    def from_drive(cls, drive: Drive, names: tuple[str, ...], switches: frozenset[str],
                   units: dict[str, str]) -> "DriveText":
        """Text for every cell of `drive` (engineering notation, closed/open)."""
        cells = {}
        numbers = {"time": np.array(drive.times, dtype=float)}
        for name in names:
            levels = np.array(drive.levels(name), dtype=float)
            numbers[name] = levels
            text = switch_text(levels) if name in switches else format_many(levels, units.get(name, ""))
            cells[name] = np.array(text, dtype=object)
        return cls(names, switches, units, np.array(format_many(drive.times, "s"), dtype=object),
                   format_many([drive.end], "s")[0], cells, numbers)

    def __len__(self) -> int:
        return int(self.time.size)

    def as_columns(self) -> dict[str, list]:
        """Columns for the table widget: row number, time, then every level column."""
        data = {"row": list(range(len(self))), "time": self.time.tolist()}
        for name in self.names:
            data[name] = self.cells[name].tolist()
        return data

    # -- editing ----------------------------------------------------------------------
    def _parse_cell(self, column: str, row: int, text: str) -> float:
        where = f"drive table row {row}, {TIME_TITLE if column == 'time' else column}"
        if column == "time":
            return parse_value(text, field=where, unit="s")
        if column in self.switches:
            return parse_switch(text, field=where)
        return parse_value(text, field=where, unit=self.units.get(column, ""))

    def with_text(self, columns: dict[str, list[str]], end: str | None = None) -> "DriveText":
        """A copy holding new text; only cells whose text changed are parsed again.

        Raises
        ------
        InputError
            Naming the row and column of the first cell that does not parse.
        """
        if end is not None:
            parse_value(end, field="drive end", unit="s")
        new_numbers = dict(self.numbers)
        new_cells = dict(self.cells)
        new_time = self.time
        for column, values in columns.items():
            if column == "row":
                continue
            if column != "time" and column not in self.names:
                raise InputError(f"drive table: column {column!r} is not one of {['time', *self.names]}")
            text = np.array([str(v) for v in values], dtype=object)
            if text.size != len(self):
                raise InputError(f"drive table: column {column!r} has {text.size} rows, expected {len(self)}")
            old = self.time if column == "time" else self.cells[column]
            numbers = new_numbers[column].copy()
            for row in np.flatnonzero(text != old).tolist():
                numbers[row] = self._parse_cell(column, row, text[row])
            new_numbers[column] = numbers
            if column == "time":
                new_time = text
            else:
                new_cells[column] = text
        return replace(self, time=new_time, cells=new_cells, numbers=new_numbers,
                       end=self.end if end is None else str(end))

    def same_text(self, other: "DriveText") -> bool:
        """True when `other` holds the same text in every cell and the same end."""
        return (self.end == other.end and self.names == other.names and np.array_equal(self.time, other.time)
                and all(np.array_equal(self.cells[n], other.cells[n]) for n in self.names))

    def to_drive(self) -> Drive:
        """The drive these numbers make (validated by :class:`Drive`)."""
        end = parse_value(self.end, field="drive end", unit="s")
        check_order(self.numbers["time"], end)
        return Drive(self.numbers["time"], end, **{name: self.numbers[name] for name in self.names})

    # -- row operations (each returns a new table from numbers) -----------------------------
    def _rows_from_numbers(self, times: np.ndarray, end: float, levels: dict[str, np.ndarray]) -> "DriveText":
        check_order(times, end)
        drive = Drive(times, end, **levels)
        return DriveText.from_drive(drive, self.names, self.switches, self.units)

    def _check_row(self, row: int, what: str) -> int:
        if isinstance(row, bool) or not isinstance(row, (int, np.integer)) or not 0 <= row < len(self):
            raise InputError(f"{what}: row {row!r} does not exist; rows are 0 to {len(self) - 1}")
        return int(row)

    def _levels(self) -> dict[str, np.ndarray]:
        return {name: self.numbers[name] for name in self.names}

    def add_row(self) -> "DriveText":
        """Append a change at the present end, holding the last levels as long as the last segment."""
        drive = self.to_drive()
        last = float(drive.durations[-1])
        times = np.append(drive.times, drive.end)
        levels = {n: np.append(v, v[-1]) for n, v in self._levels().items()}
        return self._rows_from_numbers(times, drive.end + last, levels)

    def insert_row(self, row: int) -> "DriveText":
        """Insert a change before `row`, halfway from the previous change, with `row`'s levels."""
        row = self._check_row(row, "insert row")
        drive = self.to_drive()
        times = drive.times
        at = 0.5 * (times[row - 1] + times[row]) if row > 0 else times[0] - drive.durations[0]
        new_times = np.insert(times, row, at)
        levels = {n: np.insert(v, row, v[row]) for n, v in self._levels().items()}
        return self._rows_from_numbers(new_times, drive.end, levels)

    def duplicate_row(self, row: int) -> "DriveText":
        """Repeat `row`'s levels in a new change halfway to the next change (or the end)."""
        row = self._check_row(row, "duplicate row")
        drive = self.to_drive()
        at = 0.5 * (drive.times[row] + drive.ends[row])
        new_times = np.insert(drive.times, row + 1, at)
        levels = {n: np.insert(v, row + 1, v[row]) for n, v in self._levels().items()}
        return self._rows_from_numbers(new_times, drive.end, levels)

    def delete_row(self, row: int) -> "DriveText":
        """Remove the change in `row` (the segment before it then lasts longer)."""
        row = self._check_row(row, "delete row")
        if len(self) == 1:
            raise InputError("delete row: a drive needs at least one change; this is the only row")
        drive = self.to_drive()
        keep = np.ones(len(self), dtype=bool)
        keep[row] = False
        return self._rows_from_numbers(drive.times[keep], drive.end,
                                       {n: v[keep] for n, v in self._levels().items()})

    def move(self, row: int, time: float | None = None, column: str | None = None,
             level: float | None = None) -> "DriveText":
        """Move the change in `row` to `time`, or set `column`'s level there (a drag on the plot)."""
        row = self._check_row(row, "move")
        drive = self.to_drive()
        times = np.array(drive.times)
        if time is not None:
            times[row] = _as_shown(time, "s")
        levels = self._levels()
        if column is not None and level is not None:
            levels = dict(levels)
            levels[column] = np.array(levels[column])
            levels[column][row] = _as_shown(level, self.units.get(column, ""))
        return self._rows_from_numbers(times, drive.end, levels)

    def merged(self, made: Drive) -> "DriveText":
        """`made`'s columns (a generated drive), every other column at the level it had at
        each of `made`'s instants (the level at the first change before the first instant)."""
        drive = self.to_drive()
        index = np.clip(np.searchsorted(drive.times, made.times, side="right") - 1, 0, len(drive) - 1)
        levels = {name: self.numbers[name][index] for name in self.names}
        levels.update(made.columns)
        return self._rows_from_numbers(np.asarray(made.times), float(made.end), levels)

    def dragged(self, column: str, times: np.ndarray, levels: np.ndarray, time_span: float) -> "DriveText":
        """The table after drag handles moved to (`times`, `levels`) of `column` (one per row).

        Each moved handle moves its change's instant or its level, whichever it moved
        more as a share of the view (`time_span` wide) and of the column's range, so a
        level dragged by hand does not also shift its instant by a pixel.
        """
        if column not in self.names or column in self.switches:
            raise InputError(f"drag: column {column!r} is not a source of the drive; sources are "
                             f"{[n for n in self.names if n not in self.switches]}")
        if times.size != len(self) or levels.size != len(self):
            raise InputError(f"drag: {times.size} handles for {len(self)} rows")
        old_times, old_levels = self.numbers["time"], self.numbers[column]
        span_y = max(float(np.ptp(old_levels)), float(np.max(np.abs(old_levels))), 1e-300)
        span_t = max(float(time_span), 1e-300)
        table = self
        for row in np.flatnonzero((times != old_times) | (levels != old_levels)).tolist():
            sideways = abs(times[row] - old_times[row]) / span_t >= abs(levels[row] - old_levels[row]) / span_y
            if sideways:
                table = table.move(row, time=float(times[row]))
            else:
                table = table.move(row, column=column, level=float(levels[row]))
        return table

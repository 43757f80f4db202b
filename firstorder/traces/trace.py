"""A captured waveform: a measured quantity at increasing times, and how it is read from a file.

A :class:`Trace` is a node voltage from a scope, a current from a logging meter:
values sampled at strictly increasing times.  :func:`read_trace` reads the plain
CSV of our own described there.
"""

from __future__ import annotations

import csv
import math
import os
import re
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InputError
from ..units import format_value, parse_array, parse_value, shown

__all__ = ["Trace", "read_trace"]


def _finite_array(values: Any, field_name: str, unit: str = "") -> np.ndarray:
    """`values` as a 1-D float array, read as every array of numbers is
    (:func:`~firstorder.units.parse_array`: 2-D refused with its shape, booleans
    refused, timedelta64 times in seconds), each value finite."""
    if isinstance(values, np.ndarray) and values.dtype == np.float64 and values.ndim == 1:
        array = values.copy()
    else:
        array = parse_array(values, field=field_name, unit=unit, what="numbers")
    bad = ~np.isfinite(array)
    if bad.any():
        i = int(np.argmax(bad))
        raise InputError(f"{field_name}[{i}]: {float(array[i])!r} is not allowed; expected a finite number")
    return array


@dataclass(frozen=True, eq=False)
class Trace:
    """A captured waveform: values sampled at strictly increasing times.

    Parameters
    ----------
    times : array_like
        Sample instants (s), finite and strictly increasing; at least two.
    values : array_like
        The measured quantity at each instant, finite, as many as `times`.
    name : str
        What was measured (``"v_hold"``), for legends and tables.
    units : str
        Unit of `values` (``"V"``, ``"A"`` or empty).

    Attributes
    ----------
    times, values : ndarray
        Read-only float arrays.

    Examples
    --------
    >>> trace = Trace.from_arrays([0, 1e-6, 2e-6], [0.0, 0.5, 0.75], name="v_out", units="V")
    >>> trace
    Trace('v_out', 3 points from 0 s to 2 µs, V)
    >>> trace.sample_period
    1e-06
    """

    times: np.ndarray
    values: np.ndarray
    name: str = "trace"
    units: str = ""

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name.strip():
            raise InputError(f"trace.name: {self.name!r} must be a non-empty string")
        if not isinstance(self.units, str):
            raise InputError(f"trace.units: {self.units!r} must be a string such as 'V', 'A' or ''")
        times = _finite_array(self.times, "trace.times", unit="s")
        values = _finite_array(self.values, "trace.values", unit=("V", "A"))
        if times.size != values.size:
            raise InputError(
                f"trace.values: has {values.size} values but trace.times has {times.size}; give one value per time"
            )
        if times.size < 2:
            raise InputError(f"trace.times: {times.size} point(s); a trace needs at least 2")
        steps = np.diff(times)
        if not (steps > 0).all():
            i = int(np.argmax(~(steps > 0))) + 1
            raise InputError(
                f"trace.times[{i}]: {float(times[i])!r} does not come after trace.times[{i - 1}] = "
                f"{float(times[i - 1])!r}; "
                f"times must be strictly increasing"
            )
        times.setflags(write=False)
        values.setflags(write=False)
        object.__setattr__(self, "times", times)
        object.__setattr__(self, "values", values)

    @classmethod
    def from_arrays(cls, times: Any, values: Any, name: str = "trace", units: str = "",
                    time_scale: Any = 1.0, value_scale: Any = 1.0) -> "Trace":
        """A trace from arrays (synthetic data, or samples read by other means).

        `time_scale` turns the given times into seconds (``1e-3`` for milliseconds)
        and `value_scale` multiplies the values (a 10:1 probe's factor, say).
        """
        time_factor, value_factor = _scales(time_scale, value_scale)
        return cls(_finite_array(times, "trace.times", unit="s") * time_factor,
                   _finite_array(values, "trace.values", unit=("V", "A")) * value_factor, name, units)

    def __len__(self) -> int:
        return int(self.times.size)

    @property
    def sample_period(self) -> float:
        """The median spacing of the samples (s)."""
        return float(np.median(np.diff(self.times)))

    def to_csv(self, path: str | os.PathLike[str] | None = None) -> str:
        """Write ``time,<name> (<units>)`` rows (exact floats) and return the text.

        :func:`read_trace` reads it back with ``value=trace.name``.  With `path`
        the file is written atomically.
        """
        header = f"{self.name} ({self.units})" if self.units else self.name
        lines = [f"# firstorder trace '{self.name}'", f"time (s),{header}"]
        lines += [f"{t!r},{v!r}" for t, v in zip(self.times.tolist(), self.values.tolist())]
        text = "\n".join(lines) + "\n"
        if path is not None:
            from ..io.atomic import write_atomic

            write_atomic(path, text)
        return text

    def __repr__(self) -> str:
        unit = f", {self.units}" if self.units else ""
        return (
            f"Trace({self.name!r}, {len(self)} points from {format_value(float(self.times[0]), 's')} "
            f"to {format_value(float(self.times[-1]), 's')}{unit})"
        )


def _scales(time_scale: Any, value_scale: Any) -> tuple[float, float]:
    time_factor = parse_value(time_scale, field="time_scale", positive=True)
    value_factor = parse_value(value_scale, field="value_scale")
    if value_factor == 0.0:
        raise InputError("value_scale: 0 is not allowed; expected a finite number other than 0")
    return time_factor, value_factor


# -- reading ----------------------------------------------------------------------------
_UNIT_IN_HEADER = re.compile(r"^(?P<name>.*?)\s*[\(\[]\s*(?P<unit>[^\)\]]*?)\s*[\)\]]\s*$")


def _split_header_cell(cell: str) -> tuple[str, str]:
    """``"v_out (V)"`` or ``"v_out [V]"`` -> ``("v_out", "V")``; otherwise ``(cell, "")``."""
    match = _UNIT_IN_HEADER.match(cell.strip())
    if match and match.group("name"):
        return match.group("name"), match.group("unit")
    return cell.strip(), ""


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _pick_column(choice: Any, field_name: str, header: list[str], line: int) -> int:
    count = len(header)
    if isinstance(choice, bool) or not isinstance(choice, (int, np.integer, str)):
        raise InputError(f"{field_name}: {choice!r} must be a column name or an index from 0 to {count - 1}")
    if not isinstance(choice, str):
        if not 0 <= int(choice) < count:
            raise InputError(
                f"{field_name}: column index {int(choice)} does not exist; the header on line {line} has "
                f"{count} columns (0 to {count - 1}): {header}"
            )
        return int(choice)
    wanted = choice.strip().casefold()
    matches = [i for i, cell in enumerate(header)
               if cell.strip().casefold() == wanted or _split_header_cell(cell)[0].casefold() == wanted]
    if not matches:
        raise InputError(
            f"{field_name}: no column named {choice!r} in the header on line {line}; columns are {header}"
        )
    if len(matches) > 1:
        raise InputError(
            f"{field_name}: {choice!r} names columns {matches} of the header on line {line}; "
            f"choose one by index"
        )
    return matches[0]


def read_trace(path: str | os.PathLike[str], time: Any = "time", value: Any = "value",
               time_scale: Any = 1.0, value_scale: Any = 1.0) -> Trace:
    """Read a captured waveform from a plain CSV file.

    The format is deliberately plain: blank lines and lines starting with ``#``
    are skipped, the first other line is a header naming the columns
    (comma-separated), and every following line holds one sample.  A header cell
    may carry a unit in brackets, ``v_hold (V)`` or ``time [s]``; the value
    column's unit becomes the trace's :attr:`~Trace.units`.

    Parameters
    ----------
    path : str or path-like
        The file (UTF-8 text; a leading byte order mark is skipped).
    time, value : str or int
        The time column and the value column, by header name (case ignored, with
        or without the bracketed unit) or by 0-based index.
    time_scale : float or str
        Multiplies the times to give seconds (``1e-3`` when the file holds ms).
        A time column whose header gives a unit other than ``s`` needs one.
    value_scale : float or str
        Multiplies the values (a probe's attenuation, a shunt's 1/R).

    Returns
    -------
    Trace

    Raises
    ------
    InputError
        For a file without a header row, a header with one column, a cell that is
        not a finite number, times that do not increase or no data; the message
        names the line and the column.

    See Also
    --------
    Trace.from_arrays : a trace from arrays.
    firstorder.traces.fitting.fit_trace : fit it.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (folder / "step.csv").write_text(
    ...     "# simulated: 1 V step into 1 ms\\ntime (s),v_out (V)\\n0,0\\n0.001,0.632\\n0.002,0.865\\n")
    >>> trace = read_trace(folder / "step.csv", value="v_out")
    >>> trace.values, trace.units
    (array([0.   , 0.632, 0.865]), 'V')
    >>> _ = (folder / "bad.csv").write_text("time,v\\n0,0\\n1e-3,oops\\n")
    >>> read_trace(folder / "bad.csv", value="v")
    Traceback (most recent call last):
    ...
    firstorder.errors.InputError: bad.csv line 3, column 'v': 'oops' is not a number
    """
    if not isinstance(path, (str, bytes, os.PathLike)):
        raise InputError(f"path: {shown(path)} is not a file path; give the CSV file's path as text or a Path")
    time_factor, value_factor = _scales(time_scale, value_scale)
    label = os.path.basename(os.fsdecode(path))
    try:
        # utf-8-sig: a spreadsheet's byte order mark is not part of the first header cell.
        with open(path, encoding="utf-8-sig", newline="") as handle:
            text = handle.read()
    except UnicodeDecodeError as error:
        raise InputError(f"{label}: not UTF-8 text ({error.reason} at byte {error.start})") from None
    numbered = [(n, line) for n, line in enumerate(text.splitlines(), start=1)
                if line.strip() and not line.lstrip().startswith("#")]
    if not numbered:
        raise InputError(f"{label}: the file is empty (no header row and no samples)")
    header_line, header_text = numbered[0]
    header = next(csv.reader([header_text]))
    if len(header) < 2:
        raise InputError(
            f"{label} line {header_line}: the header has one column ({header_text.strip()!r}); a trace needs a "
            f"time column and a value column separated by commas"
        )
    if all(_is_number(cell) for cell in header):
        raise InputError(
            f"{label} line {header_line}: expected a header row naming the columns (such as 'time,value'), "
            f"found numbers; add a header line"
        )
    names_seen: dict[str, int] = {}
    for index, cell in enumerate(header):
        name = _split_header_cell(cell)[0].casefold()
        if name and name in names_seen:
            raise InputError(
                f"{label} line {header_line}: column {cell.strip()!r} (index {index}) repeats the name of column "
                f"{names_seen[name]}; each column needs its own name"
            )
        names_seen.setdefault(name, index)
    time_index = _pick_column(time, "time", header, header_line)
    value_index = _pick_column(value, "value", header, header_line)
    if time_index == value_index:
        raise InputError(f"value: {value!r} is the time column ({header[time_index]!r}); choose another column")
    time_name, time_unit = _split_header_cell(header[time_index])
    value_name, value_unit = _split_header_cell(header[value_index])
    if time_unit and time_unit not in ("s", "sec") and time_factor == 1.0:
        raise InputError(
            f"time_scale: column {header[time_index]!r} is in {time_unit!r}; give time_scale (for example "
            f"1e-3 for ms) to read it in seconds"
        )
    rows = numbered[1:]
    if not rows:
        raise InputError(f"{label}: no samples after the header on line {header_line}")
    times = np.empty(len(rows))
    values = np.empty(len(rows))
    names = (header[time_index].strip(), header[value_index].strip())
    for r, (number, row) in enumerate(zip((n for n, _ in rows), csv.reader(line for _, line in rows))):
        if len(row) != len(header):
            raise InputError(
                f"{label} line {number}: {len(row)} cells, but the header on line {header_line} has {len(header)}"
            )
        for target, index, name in ((times, time_index, names[0]), (values, value_index, names[1])):
            cell = row[index].strip()
            try:
                number_value = float(cell)
            except ValueError:
                what = "is empty" if not cell else f"{cell!r} is not a number"
                raise InputError(f"{label} line {number}, column {name!r}: {what}") from None
            if not math.isfinite(number_value):
                raise InputError(
                    f"{label} line {number}, column {name!r}: {cell!r} is not allowed; expected a finite number"
                )
            target[r] = number_value
    steps = np.diff(times)
    if not (steps > 0).all():
        r = int(np.argmax(~(steps > 0))) + 1
        raise InputError(
            f"{label} line {rows[r][0]}, column {names[0]!r}: {float(times[r])!r} does not come after "
            f"{float(times[r - 1])!r} on line {rows[r - 1][0]}; times must be strictly increasing"
        )
    if times.size < 2:
        raise InputError(f"{label}: one sample after the header on line {header_line}; a trace needs at least 2")
    return Trace(times * time_factor, values * value_factor, name=value_name or f"column {value_index}",
                 units=value_unit)

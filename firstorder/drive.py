"""Drive: piecewise-constant source levels and switch states.

A drive is a list of change instants ``times``, an ``end``, and one column per
source or switch.  Segment ``k`` holds on ``[times[k], times[k+1])``; the last one
on ``[times[-1], end]``.  Which columns are sources and which are switches is
decided when the drive meets a fixture.
"""

from __future__ import annotations

import csv
import io
import math
import operator
import os
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import numpy as np

from . import _kernels, _parallel
from .errors import InputError
from .units import format_value, parse_array, parse_value, shown

__all__ = ["Drive", "level_columns", "MEMORY_BUDGET"]

_CSV_MAGIC = "# firstorder drive v1"
_PREVIEW_ROWS = 8


class _Required:
    """Marks `times` or `end` not given by position (then taken from the keywords)."""

    def __repr__(self) -> str:
        return "<required>"


_MISSING = _Required()

#: The most memory a drive generator (:meth:`Drive.pulses`, :meth:`Drive.staircase`) may
#: allocate, in bytes: 2 GiB.  A change costs its instant and one level per column, 8 bytes
#: each, and about as much again in temporaries, so one column allows about 67 million
#: changes; a larger count is refused before anything is allocated.
MEMORY_BUDGET = 2 * 1024**3
_BYTES_PER_VALUE = 16  # the float64 stored and one temporary of the same size


def _check_budget(given: Any, changes: int, columns: int, field: str) -> None:
    """Refuse a generator whose `changes` (over `columns` level columns, from the `given`
    count) would need more than :data:`MEMORY_BUDGET`, before anything is allocated."""
    per_change = (1 + columns) * _BYTES_PER_VALUE
    needed = changes * per_change
    if needed > MEMORY_BUDGET:
        raise InputError(
            f"{field}: {shown(given)} would make {_big(changes)} changes needing about {_big(needed, 2**30)} GiB of "
            f"memory; the budget is {MEMORY_BUDGET / 2**30:g} GiB (at most {MEMORY_BUDGET // per_change:,} changes)"
        )


def _big(count: int, unit: int = 1) -> str:
    """``count / unit`` for a message: ``"59.6"``, ``"2,000,000,000"``, or ``"1e+400"`` past a float."""
    if count < 10**15 * unit:
        return f"{count / unit:,.3g}" if unit != 1 else f"{count:,}"
    digits = len(str(count // unit)) - 1
    return f"1e+{digits}" if str(count // unit).startswith("1") else f"{str(count // unit)[0]}e+{digits}"


def _as_float_array(values: Any, *, field: str, unit: str, increasing: bool = False, room: int = 0,
                    allow_bool: bool = False, what: str = "values") -> np.ndarray:
    """Return `values` as a new 1-D float64 array, parsing text only where needed.

    Every value must be finite and, with `increasing`, each must come after the
    one before; a float array is copied and checked in one compiled pass when it
    is long (:func:`_copy_checked`); anything else is read by
    :func:`~firstorder.units.parse_array` (1-D only, text parsed, timedelta64 in seconds).
    With `room`, the array has that many more (unset) elements after the values, for
    the caller to fill.
    """
    if isinstance(values, np.ndarray) and values.dtype == np.float64 and values.ndim == 1 and values.size:
        buffer, finite, in_order = _copy_checked(values, increasing, room)
        array = buffer[:buffer.size - room]
    else:
        array = parse_array(values, field=field, unit=unit, allow_bool=allow_bool, what=what)
        finite = _sum_is_finite(array)
        in_order = not increasing or _first_not_increasing(array) < 0
        buffer = np.concatenate([array, np.empty(room)]) if room else array
    if not finite:
        bad = ~np.isfinite(array)
        if bad.any():
            i = int(np.argmax(bad))
            raise InputError(f"{field}[{i}]: {float(array[i])!r} is not allowed; expected a finite number")
    if increasing and not in_order:
        i = _first_not_increasing(array)
        raise InputError(
            f"{field}[{i}]: {float(array[i])!r} does not come after {field}[{i - 1}] = "
            f"{float(array[i - 1])!r}; times must be strictly increasing"
        )
    return buffer


def level_columns(columns: Mapping[str, Any], count: int | None, field: str = "drive",
                  per: str = "drive.times has {count}; give one value per change") -> dict[str, np.ndarray]:
    """Every column as a read-only float array of `count` values (text parsed by the units layer).

    A single number stands for a constant column.  `field` names the columns in
    errors (``drive.vin[3]``); with `count` None every column must be as long as the
    longest.  This is the one reading of level columns, for drives and for plans.

    Examples
    --------
    >>> level_columns({"vin": [0, "2.5"], "k1": 1}, 2)
    {'vin': array([0. , 2.5]), 'k1': array([1., 1.])}
    """
    if not columns:
        raise InputError(f"{field}: no columns; give at least one source or switch column")
    if count is None:
        lengths = [len(v) for v in columns.values()
                   if not isinstance(v, (int, float, str, bool, np.number)) and hasattr(v, "__len__")]
        if not lengths or max(lengths) == 0:
            raise InputError(f"{field}: give at least one column as a list with one level per step")
        count = max(lengths)
    parsed: dict[str, np.ndarray] = {}
    for name, values in columns.items():
        if isinstance(values, (int, float, str, bool, np.number)):
            values = [values] * count  # a constant column
        array = _as_float_array(values, field=f"{field}.{name}", unit="", allow_bool=True, what="levels")
        if array.size != count:
            raise InputError(f"{field}.{name}: has {array.size} values but {per.format(count=count)}")
        array.setflags(write=False)
        parsed[name] = array
    return parsed


#: Up to this many values :func:`_copy_checked` checks them as Python floats.
_CHECKED_IN_PYTHON = 64


def _copy_checked(values: np.ndarray, increasing: bool, room: int = 0) -> tuple[np.ndarray, bool, bool]:
    """A copy of the 1-D float array `values` (followed by `room` unset elements), whether
    all are finite, and whether they strictly increase (checked only if `increasing`);
    long arrays in one compiled pass, in pieces on several threads."""
    kernels = _kernels.available(values.size)
    buffer = np.empty(values.size + room)
    if kernels is None:
        array = buffer[:values.size]
        np.copyto(array, values)
        if values.size <= _CHECKED_IN_PYTHON:
            # A few values: Python floats check them faster than numpy calls set up (the
            # same answers: inf or NaN anywhere makes the sum not finite, and for finite
            # values b > a is the strict order).
            listed = values.tolist()
            return buffer, math.isfinite(sum(listed)), not increasing or all(map(operator.lt, listed, listed[1:]))
        return buffer, _sum_is_finite(array), not increasing or _first_not_increasing(array) < 0
    flags = _parallel.run(lambda first, stop: kernels.copy_checked(values, buffer, first, stop),
                          _parallel.pieces(values.size))
    return buffer, all(finite for finite, _ in flags), all(ordered for _, ordered in flags)


def _sum_is_finite(array: np.ndarray) -> bool:
    """One cheap pass: NaN or inf anywhere makes the sum not finite (so does a sum past
    the largest float, which the caller's closer look then clears, without a warning)."""
    with np.errstate(over="ignore", invalid="ignore"):
        return math.isfinite(array.sum())


def _first_not_increasing(times: np.ndarray) -> int:
    """Index of the first time not after its predecessor, or -1."""
    # For finite times b - a > 0 exactly when b > a: one comparison, no array of steps.
    later = np.greater(times[1:], times[:-1])
    if later.all():
        return -1
    return int(np.argmin(later)) + 1


class Drive:
    """Change instants, an end time and one level column per source or switch.

    Parameters
    ----------
    times : sequence of float or str
        Change instants in seconds, strictly increasing; engineering notation
        such as ``"1m"`` is accepted.  A float array takes a fast path.
    end : float or str
        End of the last segment; must be later than the last change.  `times`
        and `end` may be given by position or by keyword; given by position, they
        leave the keywords ``times`` and ``end`` free to name columns.
    **columns : sequence of float, bool or str
        One column per source (volts or amps) or switch (1/True closed,
        0/False open), each as long as `times`.

    Examples
    --------
    >>> drive = Drive([0, "1m", "3m"], end="6m", vdac=[0, 2.5, -1.2], k1=[1, 1, 0])
    >>> drive.durations
    array([0.001, 0.002, 0.003])
    >>> drive.level_at("vdac", 0.002)
    2.5
    """

    # The change instants and the end share one buffer, so that `times` and `ends` are
    # both views of it (no copy for either).
    __slots__ = ("_instants", "_times", "_end", "_columns")

    def __init__(self, times: Any = _MISSING, end: Any = _MISSING, /, **columns: Any) -> None:
        # Positional-only, so that a column may be named "times" or "end" (given by
        # position, times and end leave those keywords to the columns).
        if times is _MISSING:
            times = columns.pop("times", _MISSING)
        if end is _MISSING:
            end = columns.pop("end", _MISSING)
        if times is _MISSING or end is _MISSING:
            missing = "drive.times" if times is _MISSING else "drive.end"
            raise InputError(f"{missing}: not given; a drive needs its change instants (times) and its end")
        instants = _as_float_array(times, field="drive.times", unit="s", increasing=True, room=1,
                                   what="change instants in seconds")
        time_array = instants[:-1]
        if time_array.size == 0:
            raise InputError("drive.times: at least one change instant is needed, got none")
        end_value = parse_value(end, field="drive.end", unit="s")
        if not end_value > time_array[-1]:
            raise InputError(
                f"drive.end: {end!r} must be later than the last change "
                f"({float(time_array[-1])!r} s)"
            )
        parsed = level_columns(columns, time_array.size)
        instants[-1] = end_value
        instants.setflags(write=False)
        self._instants = instants
        self._times = instants[:-1]  # sliced after the buffer is read-only, so read-only too
        self._end = end_value
        self._columns = parsed

    @classmethod
    def _of_instants(cls, instants: np.ndarray, columns: Mapping[str, np.ndarray]) -> "Drive":
        """A drive on `instants` (its changes, then its end) and `columns`, taken as they
        are: the library's own arrays, already checked (a plan's instants, strictly
        increasing and made for this drive alone; columns read by :func:`level_columns`,
        read-only).  Saves copying and checking a long plan's arrays again."""
        if not (instants.ndim == 1 and instants.size >= 2 and math.isfinite(float(instants[-1]))):
            raise ValueError("a drive's own instants must be finite, a change and an end at least")
        drive = cls.__new__(cls)
        instants.setflags(write=False)
        drive._instants = instants
        drive._times = instants[:-1]
        drive._end = float(instants[-1])
        drive._columns = dict(columns)
        return drive

    # -- construction helpers -------------------------------------------------
    @classmethod
    def steps(cls, steps: Iterable[tuple[Any, Any]], end: Any, name: str = "vin") -> "Drive":
        """Drive one source from ``(time, level)`` pairs.

        See Also
        --------
        pulses, staircase : other generators.

        Examples
        --------
        >>> Drive.steps([(0, 0.0), ("1m", 2.5)], end="4m").levels("vin")
        array([0. , 2.5])
        """
        if isinstance(steps, (str, bytes, dict)) or not hasattr(steps, "__iter__"):
            raise InputError(f"steps: {shown(steps)} is not a list of (time, level) pairs")
        pairs = list(steps)
        if not pairs:
            raise InputError("steps: at least one (time, level) pair is needed")
        for i, pair in enumerate(pairs):
            if not isinstance(pair, (tuple, list, np.ndarray)) or len(pair) != 2:
                raise InputError(f"steps[{i}]: expected a (time, level) pair, got {shown(pair)}")
        return cls([p[0] for p in pairs], end, **{name: [p[1] for p in pairs]})

    @classmethod
    def pulses(
        cls,
        period: Any,
        duty: float,
        high: Any,
        low: Any = 0.0,
        count: int = 1,
        name: str = "vin",
        start: Any = 0.0,
    ) -> "Drive":
        """A train of `count` pulses: `high` for ``duty * period``, then `low`.

        See Also
        --------
        steps, staircase : other generators.

        Examples
        --------
        >>> d = Drive.pulses(period="1m", duty=0.25, high=5, count=2)
        >>> d.times
        array([0.     , 0.00025, 0.001  , 0.00125])
        >>> float(d.end)
        0.002
        """
        period_value = parse_value(period, field="pulses.period", unit="s", positive=True)
        duty_value = parse_value(duty, field="pulses.duty")
        if not 0.0 < duty_value < 1.0:
            raise InputError(f"pulses.duty: {duty!r} must be between 0 and 1 (exclusive)")
        if isinstance(count, bool) or not isinstance(count, (int, np.integer)) or count < 1:
            raise InputError(f"pulses.count: {shown(count)} must be a whole number >= 1")
        count = int(count)
        _check_budget(count, 2 * count, 1, "pulses.count")
        high_value = parse_value(high, field="pulses.high")
        low_value = parse_value(low, field="pulses.low")
        start_value = parse_value(start, field="pulses.start", unit="s")
        edges = start_value + period_value * np.arange(count, dtype=np.float64)
        times = np.empty(2 * count)
        times[0::2] = edges
        times[1::2] = edges + duty_value * period_value
        levels = np.empty(2 * count)
        levels[0::2] = high_value
        levels[1::2] = low_value
        return cls(times, start_value + count * period_value, **{name: levels})

    @classmethod
    def staircase(cls, levels: Sequence[Any], dwell: Any, name: str = "vin", start: Any = 0.0) -> "Drive":
        """Step through `levels`, holding each for `dwell` seconds.

        See Also
        --------
        steps, pulses : other generators.

        Examples
        --------
        >>> Drive.staircase([0, 1, 2], dwell="10u").times
        array([0.e+00, 1.e-05, 2.e-05])
        """
        dwell_value = parse_value(dwell, field="staircase.dwell", unit="s", positive=True)
        start_value = parse_value(start, field="staircase.start", unit="s")
        if isinstance(levels, range):
            _check_budget(levels, len(levels), 1, "staircase.levels")
        level_array = _as_float_array(levels, field="staircase.levels", unit="", what="levels")
        if level_array.size == 0:
            raise InputError("staircase.levels: at least one level is needed")
        times = start_value + dwell_value * np.arange(level_array.size, dtype=np.float64)
        return cls(times, start_value + dwell_value * level_array.size, **{name: level_array})

    # -- reading ----------------------------------------------------------------
    @property
    def times(self) -> np.ndarray:
        """Change instants (s), read-only."""
        return self._times

    @property
    def end(self) -> float:
        """End of the last segment (s)."""
        return self._end

    @property
    def start(self) -> float:
        """The first change instant (s)."""
        return float(self._times[0])

    @property
    def names(self) -> tuple[str, ...]:
        """Column names in the order given."""
        return tuple(self._columns)

    @property
    def columns(self) -> dict[str, np.ndarray]:
        """Column name to read-only level array."""
        return dict(self._columns)

    @property
    def ends(self) -> np.ndarray:
        """End instant of every segment (s; read-only, like :attr:`times`)."""
        return self._instants[1:]

    @property
    def durations(self) -> np.ndarray:
        """Length of every segment (s)."""
        return np.diff(self._instants)  # the instants end with the drive's end

    def __len__(self) -> int:
        return int(self._times.size)

    def levels(self, name: str) -> np.ndarray:
        """The level column `name`."""
        try:
            return self._columns[name]
        except KeyError:
            raise InputError(
                f"drive column {name!r} does not exist; columns are {list(self._columns)}"
            ) from None

    def segment_at(self, time: Any) -> int:
        """Index of the segment that holds at `time`."""
        value = parse_value(time, field="time", unit="s")
        if not self._times[0] <= value <= self._end:
            raise InputError(
                f"time: {value!r} is outside the drive [{float(self._times[0])!r}, {self._end!r}] s"
            )
        return int(np.searchsorted(self._times, value, side="right") - 1)

    def level_at(self, name: str, time: Any) -> float:
        """The level of column `name` at `time`."""
        return float(self.levels(name)[self.segment_at(time)])

    def replace(self, *, times: Any = None, end: Any = None, **columns: Any) -> "Drive":
        """A new drive with some of times, end or columns replaced."""
        merged = dict(self._columns)
        merged.update(columns)
        return Drive(self._times if times is None else times, self._end if end is None else end, **merged)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Drive):
            return NotImplemented
        return (
            self._end == other._end
            and np.array_equal(self._times, other._times)
            and self._columns.keys() == other._columns.keys()
            and all(np.array_equal(v, other._columns[k]) for k, v in self._columns.items())
        )

    __hash__ = None  # type: ignore[assignment]

    # -- CSV ----------------------------------------------------------------------
    def to_csv(self, path: str | os.PathLike[str] | None = None) -> str:
        """Write the drive as CSV (exact floats) and return the text.

        The first line names the format, the second holds the end time, then a
        header ``time,<columns>`` and one row per change.  With `path`, the file
        is written atomically (temporary file, then rename).
        """
        buffer = io.StringIO()
        buffer.write(f"{_CSV_MAGIC}\n# end,{self._end!r}\n")
        writer = csv.writer(buffer, lineterminator="\n")
        writer.writerow(["time", *self._columns])
        columns = list(self._columns.values())
        for k, t in enumerate(self._times.tolist()):
            writer.writerow([repr(t), *(repr(float(c[k])) for c in columns)])
        text = buffer.getvalue()
        if path is not None:
            from .io.atomic import write_atomic

            write_atomic(path, text)
        return text

    @classmethod
    def from_csv(cls, source: str | os.PathLike[str]) -> "Drive":
        """Read a drive written by :meth:`to_csv` (a path, or the CSV text itself)."""
        if not isinstance(source, (str, os.PathLike)):
            raise InputError(f"drive CSV: {shown(source)} is neither a path nor CSV text")
        text = str(source).removeprefix("\ufeff")
        if not text.startswith(_CSV_MAGIC):
            with open(source, encoding="utf-8-sig") as handle:  # -sig: a byte order mark is not text
                text = handle.read()
        lines = text.splitlines()
        if not lines or lines[0].strip() != _CSV_MAGIC:
            raise InputError(f"drive CSV line 1: expected {_CSV_MAGIC!r}")
        if len(lines) < 3 or not lines[1].startswith("# end,"):
            raise InputError("drive CSV line 2: expected '# end,<seconds>'")
        end = parse_value(lines[1][len("# end,"):], field="drive CSV line 2 (end)", unit="s")
        rows = list(csv.reader(lines[2:]))
        header = rows[0]
        if not header or header[0] != "time" or len(header) < 2:
            raise InputError("drive CSV line 3: expected a header 'time,<column>,...'")
        repeated = sorted({name for name in header if header.count(name) > 1})
        if repeated:
            raise InputError(f"drive CSV line 3: column {repeated[0]!r} appears more than once; names must be unique")
        body = rows[1:]
        if not body:
            raise InputError("drive CSV: no change rows after the header")
        values = np.empty((len(body), len(header)))
        for r, row in enumerate(body):
            if len(row) != len(header):
                raise InputError(
                    f"drive CSV line {r + 4}: {len(row)} cells, expected {len(header)}"
                )
            for c, cell in enumerate(row):
                values[r, c] = parse_value(cell, field=f"drive CSV line {r + 4}, column {header[c]!r}")
        return cls(values[:, 0], end, **{name: values[:, c] for c, name in enumerate(header) if c})

    # -- display --------------------------------------------------------------------
    def __repr__(self) -> str:
        return (
            f"Drive({len(self)} changes from {format_value(self.start, 's')} to "
            f"{format_value(self._end, 's')}; columns: {', '.join(self._columns)})"
        )

    def _repr_html_(self) -> str:
        from ._html import table

        rows = []
        shown = range(len(self)) if len(self) <= _PREVIEW_ROWS else [*range(_PREVIEW_ROWS - 2), len(self) - 1]
        previous = None
        for k in shown:
            if previous is not None and k != previous + 1:
                rows.append(["…"] * (len(self._columns) + 1))
            rows.append([format_value(float(self._times[k]), "s"), *(f"{float(c[k]):.6g}" for c in self._columns.values())])
            previous = k
        caption = (
            f"Drive: {len(self)} segments, {format_value(self.start, 's')} to "
            f"{format_value(self._end, 's')}"
        )
        return table(["change at", *self._columns], rows, caption=caption)

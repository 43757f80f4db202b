"""The Bench's field and trace records: a part value's text field, the setup fields'
labels and readings, the view's and selection's checks, a measured trace drawn over the
model, and its residual (plain values, checked once; no UI)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from ..drive import Drive
from ..errors import InputError
from ..fixture import Fixture
from ..netlist import PART_UNITS
from ..units import format_value, parse_value

__all__ = ["SETUP_LABELS", "MeasuredTrace", "PartField", "Residual", "checked_segment", "checked_view", "labelled",
           "part_fields", "read_delay"]

#: Each setup field's label on screen: its errors begin with it.
SETUP_LABELS = {"initial": "start", "tolerance": "tolerance", "sample_delay": "sample at"}


def read_delay(value: Any) -> float | None:
    """A sample delay as typed ("" or None: none)."""
    if value is None or (isinstance(value, str) and not value.strip()):
        return None
    return parse_value(value, field=SETUP_LABELS["sample_delay"], unit="s", positive=True)


def labelled(key: str, read: Callable, *args: Any) -> Any:
    """`read(*args)`, its error (which names the keyword, ``initial: ...``) under the field's label."""
    try:
        return read(*args)
    except InputError as error:
        text = str(error)
        raise InputError(SETUP_LABELS[key] + text[len(key):] if text.startswith(key) else text) from None


def checked_view(start: Any, end: Any, drive: Drive) -> tuple[float, float]:
    """The span ``[start, end]`` within the drive (the whole drive when none of it is)."""
    low, high = float(start), float(end)
    if not high > low:
        raise InputError(f"view: end {end!r} must be later than start {start!r}")
    low, high = max(low, float(drive.start)), min(high, float(drive.end))
    return (low, high) if high > low else (float(drive.start), float(drive.end))


def checked_segment(segment: Any, drive: Drive) -> int | None:
    """`segment` as a segment of `drive` (None: no selection)."""
    if segment is None:
        return None
    if isinstance(segment, bool) or not isinstance(segment, (int, np.integer)) or not 0 <= segment < len(drive):
        raise InputError(f"segment: {segment!r} is not a segment; segments are 0 to {len(drive) - 1}")
    return int(segment)


@dataclass(frozen=True)
class PartField:
    """One text field of a part value: a switch has two (its on and off resistance)."""

    key: str  # "r_filter", or "k1.r_on" / "k1.r_off"
    label: str
    part: str
    kind: str
    unit: str
    text: str  # the value as the field first shows it


def part_fields(fixture: Fixture) -> list[PartField]:
    """The part-value fields of `fixture`, in building order (sources have none)."""
    fields = []
    for part in fixture.parts:
        if part.kind == "switch":
            entries = [(f"{part.name}.r_on", part.r_on, f"{part.name} on"),
                       (f"{part.name}.r_off", part.r_off, f"{part.name} off")]
        elif part.kind in PART_UNITS:
            entries = [(part.name, part.value, part.name)]
        else:
            continue
        unit = PART_UNITS[part.kind]
        fields += [PartField(key, label, part.name, part.kind, unit, format_value(value, unit, digits=6))
                   for key, value, label in entries]
    return fields


@dataclass(frozen=True)
class MeasuredTrace:
    """A measured waveform drawn over the model, checked once."""

    times: np.ndarray
    values: np.ndarray
    name: str

    @classmethod
    def read(cls, trace: Any) -> "MeasuredTrace":
        """Check an object with ``.times``, ``.values`` and ``.name`` (a :class:`~firstorder.Trace`, say)."""
        for attribute in ("times", "values", "name"):
            if not hasattr(trace, attribute):
                raise InputError(f"Bench trace: {trace!r} has no .{attribute}; a trace needs .times, .values and .name")
        times = np.asarray(trace.times, dtype=float).reshape(-1)
        values = np.asarray(trace.values, dtype=float).reshape(-1)
        if times.size != values.size or times.size == 0:
            raise InputError(f"Bench trace: {times.size} times and {values.size} values; give one value per time")
        if not (np.isfinite(times).all() and np.isfinite(values).all()):
            raise InputError("Bench trace: times and values must be finite numbers")
        if times.size > 1 and not (np.diff(times) > 0).all():
            raise InputError("Bench trace: times must be strictly increasing")
        return cls(times, values, str(trace.name))


@dataclass(frozen=True)
class Residual:
    """Measured minus model (total) at the trace's instants within the drive."""

    times: np.ndarray
    values: np.ndarray
    rms: float

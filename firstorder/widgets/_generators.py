"""The Bench's drive generators, from text fields: a repeated pattern, a staircase, a ramp of steps.

Each makes a whole drive.  The generated source takes its levels from the
generator's own fields; every other column, source or switch, takes them from
a field of its own (one value, or one per step of the pattern), so no column
silently keeps the levels or switch states of the drive it replaces.
No widgets here: :mod:`._panels` shows the fields, :mod:`._session` applies
the drive.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..drive import Drive
from ..errors import InputError
from ..units import format_value, parse_value
from ._drive_table import parse_switch, switch_text

__all__ = ["GENERATORS", "Generator", "column_defaults", "generated_drive"]

#: The most changes a generator may make in the Bench.  Every edit redraws the whole drive
#: (benchmarks/bench.py: about 40 ms at 100,000 changes), so ten times that keeps an edit
#: under about half a second; longer drives are built in code and shown whole.
MAX_GENERATED_CHANGES = 1_000_000


@dataclass(frozen=True)
class Generator:
    """One generator: its key, its title, and its fields as (key, label, first text, hint)."""

    key: str
    title: str
    fields: tuple[tuple[str, str, str, str], ...]


GENERATORS = (
    Generator("pattern", "Repeated pattern", (
        ("levels", "levels", "0, 5", "levels of one pattern, in order"),
        ("dwells", "dwells", "1m, 3m", "how long each level lasts (one, or one per level)"),
        ("repeats", "repeats", "3", "how many times the pattern runs"),
    )),
    Generator("staircase", "Staircase", (
        ("levels", "levels", "0, 1, 2, 3", "every level, in order"),
        ("dwell", "dwell", "1m", "how long each level lasts"),
    )),
    Generator("ramp", "Ramp of steps", (
        ("first", "from", "0", "the first level"),
        ("last", "to", "5", "the last level"),
        ("steps", "steps", "5", "equal steps from the first level to the last"),
        ("dwell", "dwell", "1m", "how long each level lasts"),
        ("back", "and back", "no", "yes: the same steps down again"),
    )),
)
_BY_KEY = {g.key: g for g in GENERATORS}


def column_defaults(drive: Drive, switches: frozenset[str], units: dict[str, str]) -> dict[str, str]:
    """What each column's field first shows: its level (or state) at the drive's first change."""
    out = {}
    for name in drive.names:
        first = np.asarray(drive.levels(name))[:1]
        out[name] = switch_text(first)[0] if name in switches else format_value(float(first[0]), units.get(name, ""))
    return out


def _items(text: str, field: str) -> list[str]:
    items = [item.strip() for item in str(text).split(",")]
    if not all(items):
        raise InputError(f"{field}: {text!r} is not a list; give values separated by commas, such as '0, 5'")
    return items


def _whole(text: str, field: str, least: int) -> int:
    text = str(text).strip()
    # ASCII digits only: str.isdigit also accepts '²' and other digits int() refuses.
    if not (text.isascii() and text.isdigit()) or int(text) < least:
        raise InputError(f"{field}: {text!r} must be a whole number >= {least}")
    return int(text)


def _pattern(kind: str, fields: dict[str, str], unit: str) -> tuple[np.ndarray, np.ndarray, int]:
    """One run of the generated source's levels, their dwells (s), and how many runs."""
    label = _BY_KEY[kind].title.lower()
    if kind == "ramp":
        steps = _whole(fields["steps"], f"{label}: steps", 1)
        if steps + 1 > MAX_GENERATED_CHANGES:
            raise InputError(f"{label}: steps: {steps:,} make more than {MAX_GENERATED_CHANGES:,} changes, "
                             "the most the Bench takes; build longer drives in code")
        first = parse_value(fields["first"], field=f"{label}: from", unit=unit)
        last = parse_value(fields["last"], field=f"{label}: to", unit=unit)
        levels = first + (last - first) * np.arange(steps + 1) / steps
        back = str(fields.get("back", "no")).strip().lower()
        if back not in ("yes", "no"):
            raise InputError(f"{label}: and back: {fields['back']!r} is not yes or no")
        if back == "yes":
            levels = np.concatenate([levels, levels[-2::-1]])
        dwell = parse_value(fields["dwell"], field=f"{label}: dwell", unit="s", positive=True)
        return levels, np.full(levels.size, dwell), 1
    levels_text = _items(fields["levels"], f"{label}: levels")
    levels = np.array([parse_value(v, field=f"{label}: levels", unit=unit) for v in levels_text])
    if kind == "staircase":
        dwell = parse_value(fields["dwell"], field=f"{label}: dwell", unit="s", positive=True)
        return levels, np.full(levels.size, dwell), 1
    dwell_text = _items(fields["dwells"], f"{label}: dwells")
    if len(dwell_text) not in (1, levels.size):
        raise InputError(f"{label}: dwells: {len(dwell_text)} dwells for {levels.size} levels; give one, "
                         "or one per level")
    dwells = np.array([parse_value(v, field=f"{label}: dwells", unit="s", positive=True) for v in dwell_text])
    repeats = _whole(fields["repeats"], f"{label}: repeats", 1)
    if repeats * levels.size > MAX_GENERATED_CHANGES:
        raise InputError(f"{label}: repeats: {repeats:,} runs of {levels.size} levels make "
                         f"{repeats * levels.size:,} changes; the Bench takes at most {MAX_GENERATED_CHANGES:,}; "
                         "build longer drives in code")
    return levels, np.broadcast_to(dwells, levels.shape).copy(), repeats


def generated_drive(kind: str, column: str, fields: dict[str, str], columns: dict[str, str], names: tuple[str, ...],
                    switches: frozenset[str], units: dict[str, str], start: float) -> Drive:
    """The drive `kind` makes from text: `column` gets the generator's levels, every other
    column its own field of `columns` (one value, or one per level of the pattern).

    Examples
    --------
    >>> d = generated_drive("pattern", "vin", {"levels": "0, 5", "dwells": "1m, 3m", "repeats": "2"},
    ...                     {"k1": "closed, open"}, ("vin", "k1"), frozenset({"k1"}), {"vin": "V"}, 0.0)
    >>> d.times.tolist(), d.levels("vin").tolist(), d.levels("k1").tolist(), d.end
    ([0.0, 0.001, 0.004, 0.005], [0.0, 5.0, 0.0, 5.0], [1.0, 0.0, 1.0, 0.0], 0.008)
    """
    if kind not in _BY_KEY:
        raise InputError(f"generator: {kind!r} is not one of {list(_BY_KEY)}")
    if column not in names or column in switches:
        raise InputError(f"generator: source {column!r} is not a source of the drive; sources are "
                         f"{[n for n in names if n not in switches]}")
    levels, dwells, repeats = _pattern(kind, fields, units.get(column, ""))
    n = levels.size
    made = {column: np.tile(levels, repeats)}
    for name in names:
        if name == column:
            continue
        what = f"{name} (switch)" if name in switches else name
        if name not in columns:
            raise InputError(f"generator: {what}: no value given; every column of the drive needs one")
        items = _items(columns[name], f"generator: {what}")
        if len(items) not in (1, n):
            raise InputError(f"generator: {what}: {len(items)} values for a pattern of {n} levels; give one, "
                             "or one per level")
        values = np.array([parse_switch(v, field=f"generator: {what}") if name in switches
                           else parse_value(v, field=f"generator: {what}", unit=units.get(name, "")) for v in items])
        made[name] = np.tile(np.broadcast_to(values, (n,)), repeats)
    edges = start + np.concatenate([[0.0], np.cumsum(np.tile(dwells, repeats))])
    return Drive(edges[:-1], float(edges[-1]), **made)

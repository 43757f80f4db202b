"""Cautions: hazards a fixture's response shows, in plain words.

Every :class:`~firstorder.response.Response` carries ``cautions``: a list of
:class:`Caution` found by :func:`check`.  Two checks, each against a limit the
user may change (:func:`set_limits`):

* a voltage anywhere in the fixture (a node against ground, or across a part)
  above 60 V DC, a limit many equipment-safety standards use for DC circuits
  that may be touched (from memory);
* energy stored in the capacitor (½CV²) or inductor (½LI²) above 0.35 J, a
  figure used in equipment-safety practice for stored energy that can hurt
  (from memory).

Within a segment every node voltage is an affine function of the state and the
source levels, and the state moves monotonically towards its final value, so
the extremes of a segment are at its ends: checking the value just after each
change and just before the next finds every peak, without a grid.

These checks are reminders, not a safety assessment.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .errors import InputError
from .netlist import GROUND
from .network import node_row
from .units import format_value, parse_value

__all__ = ["Caution", "Limits", "DEFAULT_LIMITS", "check", "current_limits", "set_limits"]

#: Segments checked per block, to bound memory on very long drives.
_BLOCK = 65536
#: How many other places above a limit a message names before it says "and N more".
_NAMED_PLACES = 4

_DEFER = (
    "These are reminders, not a safety assessment: follow local codes and licensed practice, "
    "and have the fixture reviewed by someone qualified for the voltages and energies involved."
)


@dataclass(frozen=True, slots=True)
class Caution:
    """One hazard, with what was found, where, when, and what to do.

    Attributes
    ----------
    kind : str
        ``"voltage"`` or ``"energy"``.
    message : str
        The whole caution in plain words; ``str(caution)`` gives it.
    """

    kind: str
    message: str

    def __str__(self) -> str:
        return self.message


@dataclass(frozen=True, slots=True)
class Limits:
    """Caution thresholds.

    Parameters
    ----------
    voltage : float or str
        Highest DC voltage (V) anywhere in the fixture before a caution (default
        60 V, a limit many equipment-safety standards use; from memory).
    energy : float or str
        Highest energy (J) in the capacitor or inductor before a caution
        (default 0.35 J, from memory of equipment-safety practice).

    Examples
    --------
    >>> Limits(voltage="30 V")
    Limits(voltage=30.0, energy=0.35)
    >>> Limits(energy=0)
    Traceback (most recent call last):
    ...
    firstorder.errors.InputError: limits.energy: 0 must be > 0
    """

    voltage: float = 60.0
    energy: float = 0.35

    def __post_init__(self) -> None:
        # Frozen: the parsed numbers are set through object.__setattr__, once, here.
        object.__setattr__(self, "voltage", parse_value(self.voltage, field="limits.voltage", unit="V", positive=True))
        object.__setattr__(self, "energy", parse_value(self.energy, field="limits.energy", unit="J", positive=True))


#: The limits firstorder starts with.
DEFAULT_LIMITS = Limits()

_current: list[Limits] = [DEFAULT_LIMITS]


def current_limits() -> Limits:
    """The limits used when :func:`check` is given none (and by ``Response.cautions``)."""
    return _current[0]


class set_limits:  # noqa: N801 - used like a function, and as a context manager
    """Change the caution limits for every response checked from now on.

    Used as a context manager it restores the previous limits on exit.  A
    response's ``cautions`` are checked once, when first read.

    Parameters
    ----------
    voltage, energy : float or str, optional
        New limits (V, J); one not given keeps its current value.

    Examples
    --------
    >>> with set_limits(voltage=30):
    ...     current_limits().voltage
    30.0
    >>> current_limits().voltage
    60.0
    """

    def __init__(self, voltage: Any = None, energy: Any = None) -> None:
        previous = _current[0]
        self._previous = previous
        _current[0] = Limits(
            voltage=previous.voltage if voltage is None else voltage,
            energy=previous.energy if energy is None else energy,
        )

    def __enter__(self) -> Limits:
        return _current[0]

    def __exit__(self, *exc: object) -> None:
        _current[0] = self._previous


def _when(response: Any, k: int, at_end: bool) -> str:
    """Plain words for "just after change k" or "at the end of segment k"."""
    if at_end:
        instant = float(response.ends[k])
        return f"at the end of segment {k} (t = {format_value(instant, 's')})"
    return f"at the start of segment {k} (t = {format_value(float(response.starts[k]), 's')})"


def _places(netlist: Any, layout: Any, reduced: Any) -> tuple[list[str], np.ndarray]:
    """Every node against ground and every part's two ends, as affine rows over [x, u...]."""
    labels, rows = [], []
    for node in layout.nodes:
        labels.append(f"at node '{node}' (against ground)")
        rows.append(node_row(reduced.solution, layout, node))
    for part in netlist.parts:
        if GROUND in (part.a, part.b):
            continue  # the same as its other node's voltage, already listed
        labels.append(f"across {part.kind.replace('_', ' ')} '{part.name}' ({part.a} to {part.b})")
        rows.append(node_row(reduced.solution, layout, part.a) - node_row(reduced.solution, layout, part.b))
    width = reduced.solution.shape[1]
    return labels, np.array(rows).reshape(len(rows), width)


def _voltage_caution(response: Any, limit: float) -> Caution | None:
    fixture = response.fixture
    segments = response.segments
    states = response.boundary
    levels = segments.levels
    inverse = segments.configuration_of
    worst = (0.0, "", 0, False, 0.0)  # |v|, place, segment, at end, signed v
    above: dict[str, None] = {}
    for c in range(len(segments.configurations)):
        layout, reduced = segments.configuration(c)
        labels, rows = _places(fixture.netlist, layout, reduced)
        if not labels:
            continue
        members = np.flatnonzero(inverse == c)
        for first in range(0, members.size, _BLOCK):
            block = members[first:first + _BLOCK]
            offset = levels[block] @ rows[:, 1:].T  # (segments, places)
            for at_end, state in ((False, states[block]), (True, states[block + 1])):
                volts = state[:, None] * rows[:, 0] + offset
                magnitude = np.abs(volts)
                over = (magnitude > limit).any(axis=0)
                for j in np.flatnonzero(over):
                    above.setdefault(labels[j])
                i, j = np.unravel_index(int(np.argmax(magnitude)), magnitude.shape)
                if magnitude[i, j] > worst[0]:
                    worst = (float(magnitude[i, j]), labels[j], int(block[i]), at_end, float(volts[i, j]))
    peak, place, k, at_end, signed = worst
    if not peak > limit:
        return None
    others = [p for p in above if p != place]
    also = ""
    if others:
        named = ", ".join(others[:_NAMED_PLACES])
        more = f" and {len(others) - _NAMED_PLACES} more" if len(others) > _NAMED_PLACES else ""
        also = f" Also above the limit: {named}{more}."
    coil = ""
    if fixture.storage.kind == "inductor":
        coil = (
            " Part of it may be the coil's current forced through a high resistance when a switch "
            "opens: give the coil a flyback path (a diode or a resistor across it)."
        )
    message = (
        f"High voltage: {format_value(signed, 'V')} {place} {_when(response, k, at_end)}, above the "
        f"{format_value(limit, 'V')} DC caution limit (a limit many equipment-safety standards use "
        f"for circuits that may be touched; from memory).{also} A voltage like this can drive a "
        f"dangerous current through a person. Treat the fixture as live: switch it off and let it "
        f"discharge through a discharge path (a bleeder resistor) before touching it, check with a "
        f"meter that it is dead, use insulated probes and leads rated for the voltage, and keep live "
        f"parts covered.{coil} {_DEFER}"
    )
    return Caution("voltage", message)


def _energy_caution(response: Any, limit: float) -> Caution | None:
    storage = response.fixture.storage
    states = response.boundary
    j = int(np.argmax(np.abs(states)))
    state = float(states[j])
    # Handbook formulas: a capacitor holds ½CV², an inductor ½LI².
    energy = 0.5 * storage.value * state * state
    if not energy > limit:
        return None
    n = len(response.starts)
    when = _when(response, n - 1, True) if j == n else _when(response, j, False)
    threshold = f"the {format_value(limit, 'J')} caution limit (from memory of equipment-safety practice)"
    if storage.kind == "capacitor":
        message = (
            f"Stored energy: capacitor '{storage.name}' holds {format_value(energy, 'J')} (½CV² at "
            f"{format_value(state, 'V')}) {when}, above {threshold}. A charged capacitor can burn, "
            f"arc or shock, and keeps its charge after the supply is switched off. Give it a "
            f"permanent bleeder resistor, discharge it through a resistor (never a bare short) "
            f"before handling, check with a meter that it is discharged, and use insulated probes. "
            f"{_DEFER}"
        )
    else:
        message = (
            f"Stored energy: inductor '{storage.name}' carries {format_value(state, 'A')} and holds "
            f"{format_value(energy, 'J')} (½LI²) {when}, above {threshold}. When its current is "
            f"interrupted a coil releases this energy as a high-voltage spike that can arc across "
            f"a switch and hurt someone: give it a flyback path (a diode or a resistor across it), "
            f"never open its circuit while current flows, and use insulated probes. {_DEFER}"
        )
    return Caution("energy", message)


def check(response: Any, limits: Limits | None = None) -> list[Caution]:
    """Look for high voltages and stored energy in `response`.

    Parameters
    ----------
    response : Response
    limits : Limits, optional
        Thresholds; :func:`current_limits` when not given.

    Returns
    -------
    list of Caution
        At most one per kind, naming the worst place and instant (and the other
        places above the limit); empty when nothing was found.

    Examples
    --------
    >>> import firstorder as fo
    >>> res = fo.Fixture.rc(r="10k", c="100n").respond(fo.Drive.steps([(0, 400.0)], end="5m"))
    >>> [c.kind for c in check(res)]
    ['voltage']
    >>> check(res, Limits(voltage=500))
    []
    """
    if limits is None:
        limits = current_limits()
    if not isinstance(limits, Limits):
        raise InputError(f"limits: {limits!r} is not a Limits; build one with Limits(voltage=..., energy=...)")
    found = [_voltage_caution(response, limits.voltage), _energy_caution(response, limits.energy)]
    return [c for c in found if c is not None]

"""A slice of a lot's units through the engine at once, and one chunk's summary from it.

:class:`UnitsRun` holds, for units ``first .. first + count - 1``, the (units, segments)
arrays of the engine: rates, decay factors, the scan for the state at every change, and
forms the settling columns, curves and probe values from them.  Each unit's row is bit
for bit what that unit alone gives (the batched reduction refines each system on its own
and the engine works element by element, its scan blocking by the number of segments
only), so a row does not depend on which units share its slice.

:func:`chunk_summary` is one chunk of a study as a pure function of plain values (the
fixture, drive and spread, the seed, the start, the chunk's index and size and what is
asked): it can run in any process, and its :class:`~.summary.SettlingSummary` merges
with the others' exactly.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from .. import engine
from ..errors import InputError
from ..response import read_initial
from ..segments import Segments
from ..settling.table import check_tolerance, check_unit, hold_segments, sample_delays
from ._fused import lot_summary
from .lot import Draw, Lot
from .summary import Ranked, SettlingSummary, Worst

if TYPE_CHECKING:
    from ..drive import Drive
    from ..fixture import Fixture
    from ..response import Response
    from ..settling.tolerance import Tolerance
    from .spread import Spread

__all__ = ["LotSettling", "Request", "UnitsRun", "chunk_summary", "summarize"]


@dataclass(frozen=True)
class LotSettling:
    """Per unit and segment: the settling columns of a study (each row is one unit's table).

    Attributes
    ----------
    settle_time, error_at_sample, limit : ndarray, shape (units, n)
        NaN settle time where the segment ends first.
    ok : ndarray of bool, shape (units, n)
        ``error_at_sample <= limit``.
    sample_time : ndarray, shape (n,)
        The sampling instants (each segment's end when no sample delay is given).
    unit, label : str
        The watched quantity's unit and name.
    """

    settle_time: np.ndarray
    error_at_sample: np.ndarray
    limit: np.ndarray
    ok: np.ndarray
    sample_time: np.ndarray
    unit: str
    label: str


@dataclass(frozen=True)
class Request:
    """What a settling summary is asked for: the tolerance, the sample delays (None: at each
    segment's end), the probe, the target (None: each unit's own final value; else one
    per segment), whether a settle time stops at its segment's end, and how many of the
    smallest and largest settle times and errors to keep per segment."""

    tolerance: Any
    delays: np.ndarray | None
    probe: str | None
    aim: np.ndarray | None
    within_segment: bool
    settle_sides: tuple[int, int]
    error_sides: tuple[int, int]


class UnitsRun:
    """Units ``draw.first ..`` of `lot` under `drive`, every (unit, segment) at once.

    Parameters
    ----------
    lot : Lot
    drive : Drive
    draw : Draw
        The units' values (:meth:`Lot.draw`).
    initial : float, str
        As for :meth:`Fixture.respond <firstorder.fixture.Fixture.respond>`, for every unit.
    nominal : Response
        The nominal unit's response (its units and names).
    """

    def __init__(self, lot: Lot, drive: "Drive", draw: Draw, initial: Any, nominal: "Response") -> None:
        self.lot, self.drive, self.draw, self.nominal = lot, drive, draw, nominal
        self.count = len(draw)
        self._initial = initial
        # Every unit's network at once, each unit bit for bit its own (Segments.of_lot).
        self.segments = Segments.of_lot(lot.fixture, drive, *lot.unit_values(drive, draw))
        self.rate = self.segments.rate
        self.holds = self.rate == 0.0
        self.source_final = self.segments.final
        shape = self.rate.shape
        durations = np.broadcast_to(drive.durations, shape)
        decay, growth = engine.decay_factors(durations.ravel(), self.rate.ravel())
        self.decay, self.growth = decay.reshape(shape), growth.reshape(shape)
        self.start = self._starts(initial)
        self.boundary = engine.relaxation_scan(self.decay, self.growth, self.source_final, self.start)
        self.final = np.where(self.holds, self.boundary[:, :-1], self.source_final)
        self._probes: dict[str, tuple[np.ndarray, np.ndarray, str]] = {}
        self._tau: np.ndarray | None = None
        self._holds: np.ndarray | None = None
        self._durations: np.ndarray | None = None
        self._scans: dict[str, tuple[np.ndarray, np.ndarray]] = {"total": (self.boundary[:, :-1], self.final)}

    def unit_response(self, row: int) -> "Response":
        """The unit in `row` built by hand: its fixture, its drive, ``respond``."""
        fixture = self.lot.unit_fixture(self.draw, row)
        return fixture.respond(self.lot.unit_drive(self.drive, self.draw, row), self._initial)

    # -- settling ---------------------------------------------------------------------------
    def columns(self, tolerance: "Tolerance", delays: np.ndarray | None, probe: str | None,
                aim: np.ndarray | None, within_segment: bool = True, segment: int | None = None) -> LotSettling:
        """Every unit's settling columns; `delays` None samples at each segment's end, `aim`
        None takes each unit's own final value as the target (see ``Study.columns``).  With
        `segment`, only that segment's column (the same numbers: every operation works
        element by element)."""
        unit, label, start, final, value, relative = self._checked(tolerance, probe)
        drive = self.drive
        if segment is not None:
            segment = range(self.rate.shape[1])[segment]  # from the end when negative; IndexError past it
        which = slice(None) if segment is None else slice(segment, segment + 1)
        start, final, rate, durations = start[:, which], final[:, which], self.rate[:, which], drive.durations[which]
        delays = None if delays is None else delays[which]
        shape = rate.shape
        sample_time = drive.ends[which] if delays is None else drive.times[which] + delays
        if aim is None:
            # The table's `ends - times` is each segment's duration, exactly (Drive.durations
            # is that difference), so a zero start and the durations give the same columns.
            size = shape[0] * shape[1]
            times = np.broadcast_to(0.0, (size,))
            if segment is None:
                ends, tau, decay = self._flat_durations(), self._flat_tau(), self.decay.ravel()
            else:
                ends = np.repeat(durations, shape[0])
                tau = self.tau()[:, which].ravel()
                decay = self.decay[:, which].ravel()
            if not within_segment:
                ends = np.broadcast_to(np.inf, (size,))
            limit, settle, _, residual = engine.settling_columns(
                start.ravel(), final.ravel(), tau, decay, times, ends, value, relative)
            limit = np.broadcast_to(limit, (size,)).reshape(shape)
            if delays is None:
                error = residual.reshape(shape)
            else:
                # As the settling table forms it: the step times the decay to the sample
                # (the same operations, in place: two arrays made, not four).
                error = np.subtract(final, start)
                np.abs(error, out=error)
                error *= engine.exp_in_place(np.multiply(-delays, rate))
            settle = settle.reshape(shape)
            hold = self.holds_judged_as_droop()[which]
            if hold.any():
                limit, settle, error = _droop(hold, start, final, rate, durations, limit, settle, error, delays, value,
                                              relative)
        else:
            aim = aim[which]
            step_delays = durations if delays is None else delays
            if not within_segment:
                durations = np.full(shape[1], np.inf)
            limit, settle, error = against_target(start, final, aim, rate, durations, step_delays, value, relative)
        return LotSettling(settle, error, limit, error <= limit, sample_time, unit, label)

    def _checked(self, tolerance: "Tolerance", probe: str | None) -> tuple:
        """The watched quantity (:meth:`watched`) with `tolerance` checked against its unit,
        and the tolerance's ``(value, relative)``."""
        check_tolerance(tolerance)
        unit, label, start, final = self.watched(probe)
        check_unit(tolerance, unit, label)
        return (unit, label, start, final, *tolerance._scale())

    def holds_judged_as_droop(self) -> np.ndarray:
        """(n,): the segments in which the capacitor holds, cut off from every source
        (:func:`~firstorder.settling.table.hold_segments`, structural: the same for every unit)."""
        if self._holds is None:
            self._holds = hold_segments(self.nominal)
        return self._holds

    def summary(self, request: Request) -> SettlingSummary:
        """This run's :class:`SettlingSummary` for `request` (the same numbers from the
        compiled passes of :mod:`._fused` when they are in use and the target is each
        unit's final value, else from :meth:`columns`)."""
        if request.aim is None:
            fused = self._fused_summary(request)
            if fused is not None:
                return fused
        lot = self.columns(request.tolerance, request.delays, request.probe, request.aim, request.within_segment)
        return summarize(lot, request, self.draw.first)

    def _fused_summary(self, request: Request) -> SettlingSummary | None:
        _, _, start, final, value, relative = self._checked(request.tolerance, request.probe)
        parts = lot_summary(start, final, self.rate, self.tau(), self.decay, self.drive.durations, request.delays,
                            self.holds_judged_as_droop(), value, relative, request.within_segment,
                            request.settle_sides, request.error_sides)
        if parts is None:
            return None
        settle, error, inside, passing, score, worst = parts
        return SettlingSummary(Ranked(self.count, *settle, *request.settle_sides),
                               Ranked(self.count, *error, *request.error_sides), inside, passing,
                               Worst(score, worst + self.draw.first))

    def tau(self) -> np.ndarray:
        """(units, n): every unit's time constant (inf where a segment holds)."""
        return self._flat_tau().reshape(self.rate.shape)

    def watched(self, probe: str | None) -> tuple[str, str, np.ndarray, np.ndarray]:
        """The watched quantity of every unit: unit, label, start and final (units, n)."""
        state_start = self.state_start
        if probe is None:
            segments = self.nominal.segments
            return (segments.state_unit, f"the state of {segments.storage_kind} '{segments.storage_name}'",
                    state_start, self.final)
        gain, offset, unit = self.probe_rows(probe)
        start = gain * state_start + offset
        # A probe is c*x + offset within a segment: it moves by c times the state's step.
        final = start + gain * (self.final - state_start)
        return unit, f"probe '{probe}'", start, final

    # -- curves -----------------------------------------------------------------------------
    def evaluate(self, segment: np.ndarray, flat: np.ndarray, component: str, probe: str | None) -> np.ndarray:
        """(units, len(flat)): `component` at times `flat`, each in its `segment`."""
        decay = self.drive.times[segment] - flat
        decay = decay * self.rate[:, segment]  # (s - t) * r, the exponents of every path
        engine.exp_in_place(decay, nonpositive=True)
        key = "total" if component in ("forced", "natural") else component
        start, final = self.component_scan(key)
        forced = final[:, segment]
        if component == "forced":
            values = forced.copy()
        else:
            values = (start - final)[:, segment]
            values *= decay
            values += forced
            if component == "natural":
                values -= forced
        if probe is not None:
            gain, offset, _ = self.probe_rows(probe)
            values *= gain[:, segment]
            if component in ("total", "zero_state", "forced"):
                values += offset[:, segment]
        return values

    def probe_rows(self, probe: str) -> tuple[np.ndarray, np.ndarray, str]:
        """(units, n) each: the probe's state coefficient and its offset from the sources,
        and its unit (the probe is ``gain * x + offset`` within a segment)."""
        if probe not in self._probes:
            the_probe = self.nominal.segments.probe(probe)  # an InputError naming the probes
            rows = self.segments.probe_rows(probe)  # (units, n, 1 + m)
            levels = self.segments.unit_levels
            # Each unit's offset as Response forms it (one einsum per unit, the same sums).
            offsets = np.stack([np.einsum("ij,ij->i", rows[u, :, 1:], levels[u]) for u in range(self.count)])
            self._probes[probe] = (rows[:, :, 0], offsets, the_probe.unit)
        return self._probes[probe]

    def component_scan(self, key: str) -> tuple[np.ndarray, np.ndarray]:
        """(units, n) each: the state component `key` just after each change, and the value
        it heads for in each segment (its held value where the segment holds)."""
        if key not in self._scans:
            if key == "zero_input":  # from the start, every source at zero
                target, start = np.zeros_like(self.source_final), self.start
            else:  # zero_state: from rest, the sources as scheduled
                target, start = self.source_final, np.zeros(self.count)
            boundary = engine.relaxation_scan(self.decay, self.growth, target, start)
            self._scans[key] = (boundary[:, :-1], np.where(self.holds, boundary[:, :-1], target))
        return self._scans[key]

    # -- inside -----------------------------------------------------------------------------
    def _starts(self, initial: Any) -> np.ndarray:
        """Every unit's starting state, read as :meth:`Response` reads it, one per unit."""
        start = read_initial(initial, self.nominal.state_unit)
        if start == "settled":
            if (self.rate[:, 0] == 0.0).any():
                raise InputError("initial: 'settled' needs a first segment that settles, but segment 0 holds its "
                                 "state (no resistive path); give the starting state as a number")
            return self.source_final[:, 0].copy()
        if start == "periodic":
            # Each unit's own periodic start, from its own response (the one reading of it).
            return np.array([self.unit_response(u).initial for u in range(self.count)])
        return np.full(self.count, float(start))

    @property
    def state_start(self) -> np.ndarray:
        """(units, n): the state just after every change, contiguous (made once: the settling
        columns read it flat)."""
        if "_state_start" not in self.__dict__:
            self._state_start = np.ascontiguousarray(self.boundary[:, :-1])
        return self._state_start

    def _flat_durations(self) -> np.ndarray:
        """Every segment's duration for every unit, flat, made once."""
        if self._durations is None:
            self._durations = np.tile(self.drive.durations, self.count)
        return self._durations

    def _flat_tau(self) -> np.ndarray:
        """Every unit's tau of every segment, flat (as Segments.tau forms it), made once."""
        if self._tau is None:
            rate = self.rate.ravel()
            self._tau = np.where(rate > 0, 1.0 / np.where(rate > 0, rate, 1.0), np.inf)
        return self._tau


def _droop(hold, start, final, rate, durations, limit, settle, error, delays, value, relative):
    """The settling table's rule for holds, on every unit at once: droop from the held
    value, ``|start - final| (1 - e^(-d/tau))``, against the limit (relative: of the
    held value); the same operations as the table, so each row is its unit's table.
    Only the hold segments' columns are formed (and written into `settle` and `error`)."""
    columns = np.flatnonzero(hold)
    held, rate = start[:, columns], rate[:, columns]
    step = np.abs(held - final[:, columns])
    droop_end = step * -np.expm1(-durations[columns] * rate)
    if relative:
        limit = np.array(limit)  # a broadcast of the fixed part until now
        limit[:, columns] = value * np.abs(held)
    within = droop_end <= limit[:, columns]
    # A hold that stays inside is settled at once; one that droops out never settles.
    settle[:, columns] = np.where(within, 0.0, np.nan)
    error[:, columns] = droop_end if delays is None else step * -np.expm1(-delays[columns] * rate)
    return limit, settle, error


def summarize(lot: LotSettling, request: Request, first: int) -> SettlingSummary:
    """The summary of units ``first ..`` from their settling columns."""
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(lot.limit > 0, lot.error_at_sample / lot.limit, np.inf)
    # A unit that never settles in a segment (NaN) is the slowest there: inf.
    return SettlingSummary(Ranked.of(lot.settle_time, *request.settle_sides, nan_as=np.inf),
                           Ranked.of(lot.error_at_sample, *request.error_sides),
                           lot.ok.sum(axis=0, dtype=np.int64), int(lot.ok.all(axis=1).sum()), Worst.of(ratio, first))


def against_target(start: np.ndarray, final: np.ndarray, aim: np.ndarray, rate: np.ndarray, durations: np.ndarray,
                   delays: np.ndarray, value: float, relative: bool) -> tuple[np.ndarray, ...]:
    """``(limit, settle_time, error_at_sample)`` of the error from `aim` (one per segment).

    Within a segment the value is ``final + s x`` with ``s = start - final`` and ``x =
    exp(-t / tau)`` falling from 1 to 0, so it moves monotonically and the times it lies
    within ``aim +- limit`` form one interval: a unit settles only if its final value is
    inside (``|d| <= limit`` with ``d = final - aim``), and then from 0 if its start is
    inside too, else from where it crosses the band's edge on its side, ``x = (limit -
    sign(s) d) / |s|``, at ``t = tau ln(|s| / (limit - sign(s) d))``.
    """
    d = final - aim
    s = start - final
    limit = value * np.abs(aim - start) if relative else np.full(start.shape, value)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        crossing = np.log(np.abs(s) / (limit - np.sign(s) * d)) / rate
    inside_at_start = np.abs(start - aim) <= limit
    settle = np.where(inside_at_start, 0.0, crossing)
    settle = np.where((np.abs(d) <= limit) & (settle <= durations), settle, np.nan)
    error = np.abs(d + s * engine.exp_in_place(-delays * rate))
    return limit, settle, error


def chunk_summary(fixture: "Fixture", drive: "Drive", spread: "Spread", seed: int, initial: Any, first: int,
                  count: int, request: Request) -> SettlingSummary:
    """Units ``first .. first + count - 1`` of the study of (`fixture`, `drive`, `spread`,
    `seed`, `initial`) summarized for `request`: a pure function of its arguments, the same
    in any process and for any grouping of units into chunks.

    Examples
    --------
    >>> import firstorder as fo
    >>> fx, drive = fo.Fixture.rc("10k", "100n"), fo.Drive([0, "20m"], end="40m", vin=[5.0, 0.0])
    >>> spread = fo.Spread({"c": "10%"})
    >>> ask = Request(fo.Tolerance.lsb(16, 5.0), None, None, None, True, (0, 1), (0, 1))
    >>> whole = chunk_summary(fx, drive, spread, 1, 0.0, 0, 100, ask)
    >>> parts = chunk_summary(fx, drive, spread, 1, 0.0, 0, 37, ask).merge(
    ...     chunk_summary(fx, drive, spread, 1, 0.0, 37, 63, ask))
    >>> whole == parts, whole.count
    (True, 100)
    """
    lot = Lot(fixture, spread, seed)
    nominal = fixture.respond(drive, initial)
    return UnitsRun(lot, drive, lot.draw(first, count), initial, nominal).summary(request)


def read_delays(sample_delay: Any, drive: "Drive") -> np.ndarray | None:
    """The sample delays of every segment (the one rule), or None for each segment's end."""
    if sample_delay is None:
        return None
    return sample_delays(sample_delay, drive.durations, field="sample_delay", what="segment", ends=drive.ends)

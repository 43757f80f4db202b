"""Response: a fixture's exact response to a drive, split every useful way.

Components of the state (and of every probe):

* ``total`` = ``zero_input`` + ``zero_state``;
* ``zero_input``: sources at zero, from the given starting state;
* ``zero_state``: from a zero state, with the sources as scheduled; it is the
  sum of the per-source ``contribution`` s;
* ``forced``: each segment's final value (piecewise constant); for a segment
  that holds its state it is that held state;
* ``natural`` = ``total`` - ``forced``.
"""

from __future__ import annotations

import math

from functools import cached_property
from typing import Any

import numpy as np

from . import engine
from .drive import Drive
from .errors import InputError
from .fixture import Fixture
from .segments import Segments
from .units import format_value, parse_array, parse_value, shown

__all__ = ["COMPONENTS", "Response", "read_initial", "respond"]

#: The component names every response offers besides per-source contributions.
COMPONENTS = ("total", "zero_input", "zero_state", "forced", "natural")
#: The starting states given by name rather than by number.
NAMED_STARTS = ("settled", "periodic")


def read_initial(initial: Any, unit: str, field: str = "initial") -> float | str:
    """The starting state as given: a number (V or A, text in engineering notation
    allowed), or ``"settled"`` or ``"periodic"``.  The one reading of a start.

    Examples
    --------
    >>> read_initial("50m", "V"), read_initial(" settled ", "V")
    (0.05, 'settled')
    >>> read_initial("warm", "V")
    Traceback (most recent call last):
    ...
    firstorder.errors.InputError: initial: 'warm' is not allowed; give a number (the starting state, in V), 'settled' or 'periodic'
    """
    if type(initial) is float and math.isfinite(initial):  # the common case, without the reader's checks
        return initial
    if isinstance(initial, str):
        word = initial.strip()
        if word in NAMED_STARTS:
            return word
        if word.isalpha():
            raise InputError(
                f"{field}: {initial!r} is not allowed; give a number (the starting state, in "
                f"{unit}), 'settled' or 'periodic'"
            )
    return parse_value(initial, field=field, unit=unit)


#: Unsorted time arrays at least this long are sorted first and evaluated on the sorted path.
SORT_FIRST = 4096


def _sorting_order(flat: np.ndarray, segments: int) -> np.ndarray | None:
    """The order that sorts a long, unsorted time array; None for one that is short (against
    `segments` too: a few points on a long drive are located by a search each) or sorted."""
    if flat.size < max(SORT_FIRST, segments // engine.RUNS_PER_POINT) or flat.dtype != np.float64:
        return None
    if not np.less(flat[1:], flat[:-1]).any():
        return None
    return np.argsort(flat)  # equal times give equal values: the order among them does not matter


def respond(fixture: "Fixture", drive: "Drive", initial: Any = 0.0) -> "Response":
    """Compute the response of `fixture` to `drive` (see :class:`Response`).

    See Also
    --------
    Fixture.respond : the same, as a method.
    Response.from_segments : a response of a measured model, without a fixture.
    """
    if not isinstance(fixture, Fixture):
        raise InputError(f"fixture: {shown(fixture)} is not a Fixture; build one with Fixture.rc(r, c) or Fixture()")
    if not isinstance(drive, Drive):
        raise InputError(f"drive: {shown(drive)} is not a Drive; build one with Drive(times, end, vin=[...]) "
                         f"or Drive.steps([(time, level), ...], end)")
    return Response(Segments.of_drive(fixture, drive), drive, initial, fixture=fixture)


class Response:
    """The exact response of a fixture (or of a measured model) to a drive.

    Do not build directly; call :meth:`Fixture.respond` or :func:`respond` (or
    :meth:`from_segments` for a measured model).

    Parameters
    ----------
    segments : Segments
        The drive's segments (configurations, rates, gains), one fixture or model.
    drive : Drive
    initial : float or str
        The starting state, ``"settled"`` or ``"periodic"`` (see :func:`read_initial`).
    fixture : Fixture, optional
        The fixture behind `segments` (None for a measured model).

    Examples
    --------
    >>> import firstorder as fo
    >>> res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive.steps([(0, 1.0)], end="5m"))
    >>> round(float(res.total(1e-3)), 4)   # one time constant: 63.2 %
    0.6321
    >>> res.boundary
    array([0.        , 0.99326205])
    """

    @classmethod
    def from_segments(cls, drive: "Drive", tau: Any, final: Any, initial: Any = 0.0,
                      unit: str = "", name: str = "fitted") -> "Response":
        """A response from per-segment time constants and final values, without a fixture.

        For models measured rather than designed (see :func:`firstorder.fit_trace`):
        segment ``k`` of `drive` relaxes with ``tau[k]`` towards ``final[k]``, and the
        state is continuous at every change.  Every component works as for
        :func:`respond`; the one pseudo-source is named ``"fitted"`` (its
        contribution is ``zero_state``), and there are no probes.

        Parameters
        ----------
        drive : Drive
            Supplies the change instants and the end; its columns are not used.
        tau : array_like, shape (n,)
            Time constant of every segment (s), > 0; ``inf`` holds the state
            (that segment's `final` is then ignored).
        final : array_like, shape (n,)
            The value every segment settles towards.
        initial : float or str
            The starting state, ``"settled"`` or ``"periodic"``.
        unit, name : str
            Unit and name of the modelled quantity, for display.

        Examples
        --------
        >>> import firstorder as fo
        >>> drive = fo.Drive.steps([(0, 0.0), ("1m", 1.0)], end="3m")
        >>> res = Response.from_segments(drive, tau=[1e-3, 1e-3], final=[0.0, 1.0], unit="V")
        >>> round(float(res.total(2e-3)), 4)   # one time constant into the step: 63.2 %
        0.6321
        >>> res.forced(2e-3), round(float(res.natural(2e-3)), 4)
        (1.0, -0.3679)

        See Also
        --------
        firstorder.segments.Segments.of_model : the segments it builds.
        """
        n = len(drive)
        for field, values in (("tau", tau), ("final", final)):
            size = np.asarray(values, dtype=np.float64).size
            if size != n:
                raise InputError(f"from_segments.{field}: has {size} values but the drive has {n} segments")
        try:
            segments = Segments.of_model(tau, final, unit=unit, name=name)
        except InputError as error:
            raise InputError(f"from_segments.{error}") from None
        return cls(segments, drive, initial)

    def __init__(self, segments: Segments, drive: "Drive", initial: Any = 0.0,
                 fixture: "Fixture | None" = None) -> None:
        if len(segments) != len(drive):
            raise InputError(f"segments: {len(segments)} of them for a drive of {len(drive)} segments")
        self.fixture = fixture
        self.drive = drive
        self.segments = segments
        self._levels = segments.levels
        self._rate = segments.rate
        self._starts = drive.times
        self._decay, self._growth = engine.segment_factors(drive.times, drive.ends, self._rate)
        self._scans: dict[str, np.ndarray] = {}
        self.initial = self._initial_state(initial)

    # -- per-segment data ------------------------------------------------------------
    @property
    def tau(self) -> np.ndarray:
        """Time constant of every segment (s); ``inf`` where the state is held (read-only)."""
        return self.segments.tau

    @property
    def starts(self) -> np.ndarray:
        return self._starts

    @property
    def ends(self) -> np.ndarray:
        return self.drive.ends

    @property
    def holds(self) -> np.ndarray:
        """True for segments whose configuration holds the state (read-only)."""
        return self.segments.holds

    @property
    def decay(self) -> np.ndarray:
        """``exp(-duration / tau)`` of every segment: how much of a step is left at its end."""
        return self._decay

    @property
    def state_unit(self) -> str:
        """V (a capacitor's voltage) or A (an inductor's current), or a model's unit."""
        return self.segments.state_unit

    @property
    def final(self) -> np.ndarray:
        """The value every segment settles towards (its held state where it holds)."""
        return self._finals("total")

    @property
    def configurations(self) -> list[tuple[bool, ...]]:
        return list(self.segments.configurations)

    @property
    def segment_configuration(self) -> np.ndarray:
        """Index into :attr:`configurations` for every segment."""
        return self.segments.configuration_of

    # -- starting state -------------------------------------------------------------
    def _initial_state(self, initial: Any) -> float:
        start = read_initial(initial, self.state_unit)
        if start == "settled":
            if self._rate[0] == 0.0:
                raise InputError(
                    "initial: 'settled' needs a first segment that settles, but segment 0 holds its "
                    "state (no resistive path); give the starting state as a number"
                )
            return float(self.segments.final[0])
        if start == "periodic":
            # x_end = A x0 + B, with 1 - A computed without cancellation.
            exponent = -float(np.sum(self.drive.durations * self._rate))
            drift = float(self._boundary("zero_state")[-1])  # cached: zero_state needs it again
            if exponent == 0.0:
                if drift != 0.0:
                    raise InputError(
                        "initial: 'periodic' has no solution; every segment holds the state, so "
                        "no start repeats at the end"
                    )
                # x_end = x0 for every x0: picking one (0) would be a silent guess.
                raise InputError(
                    "initial: 'periodic' names no one start here; every segment holds the state and "
                    f"nothing drifts, so any start repeats at the end; give the starting state as a "
                    f"number (in {self.state_unit})"
                )
            return drift / -np.expm1(exponent)
        return start

    # -- scans --------------------------------------------------------------------------
    def _component_key(self, component: str) -> str:
        if component in ("total", "zero_input", "zero_state"):
            return component
        names = list(self.segments.source_names)
        if component in names:
            return component
        raise InputError(
            f"component: {component!r} is not one of {list(COMPONENTS)} or a source {names}"
        )

    def _start(self, key: str) -> float:
        return self.initial if key in ("total", "zero_input") else 0.0

    def _source_final(self, key: str) -> np.ndarray:
        if key == "total" or key == "zero_state":
            return self.segments.final
        if key == "zero_input":
            return np.zeros(len(self.drive))
        return self.segments.source_final(key)

    def _scan_target(self, key: str) -> tuple[np.ndarray, float]:
        """`key`'s final value of every segment as ``scale * target`` (so that, for one
        source and no switch changes, the scan reads the level column directly)."""
        if key in ("total", "zero_state") and self.segments.one_gain is not None:
            return self._levels[:, 0], self.segments.one_gain  # as Segments.final
        return self._source_final(key), 1.0

    def _boundary(self, key: str) -> np.ndarray:
        scan = self._scans.get(key)
        if scan is None:
            target, scale = self._scan_target(key)
            scan = engine.relaxation_scan(self._decay, self._growth, target, self._start(key), scale)
            self._scans[key] = scan
        return scan

    def _finals(self, key: str) -> np.ndarray:
        final = self._source_final(key)
        if self.segments.any_holds:
            final = np.where(self.holds, self._boundary(key)[:-1], final)
        return final

    @property
    def boundary(self) -> np.ndarray:
        """The state at every change and at the end (length ``len(drive) + 1``)."""
        return self._boundary("total")

    # -- evaluation -------------------------------------------------------------------------
    def read_times(self, t: Any) -> np.ndarray:
        """`t` read as times in seconds (any shape; text in engineering notation and
        timedelta64 too), each checked to lie within the drive.

        Examples
        --------
        >>> import firstorder as fo
        >>> res = fo.Fixture.rc("1k", "1u").respond(fo.Drive([0], end="2m", vin=[1.0]))
        >>> res.read_times(["1m", 0.002])
        array([0.001, 0.002])
        """
        array = self._times(t)
        self._check_times(array.reshape(-1), is_sorted=False, no_nan=False)
        return array

    def _times(self, t: Any) -> np.ndarray:
        """`t` as a float array (:meth:`_check_times` checks the values)."""
        if type(t) is float or (isinstance(t, np.ndarray) and t.dtype.kind in "fiu"):
            return np.asarray(t, dtype=np.float64)
        if not isinstance(t, (np.ndarray, list, tuple)):
            return np.asarray(parse_value(t, field="t", unit="s", allow_infinite=True))
        array = t if isinstance(t, np.ndarray) else np.array(t, dtype=object)
        # Any shape is evaluated (the result has it); each item is read as a number is.
        return parse_array(array.reshape(-1), field="t", unit="s", what="times in seconds").reshape(array.shape)

    def _check_times(self, flat: np.ndarray, is_sorted: bool, no_nan: bool) -> None:
        """Refuse NaN, inf and times outside the drive.  A grid known to be sorted
        (and, with `no_nan`, proven free of NaN) is checked at its ends only."""
        if not flat.size:
            return
        if is_sorted:
            if not no_nan and not np.isfinite(flat.sum()):  # one cheap pass: NaN or inf shows in the sum
                if not np.isfinite(flat).all():
                    raise InputError("t: contains NaN or inf; times must be finite seconds")
            low, high = float(flat[0]), float(flat[-1])  # sorted: the ends are the extremes
        else:
            low, high = float(flat.min()), float(flat.max())  # NaN shows in both, inf in one
        if not (math.isfinite(low) and math.isfinite(high)):
            raise InputError("t: contains NaN or inf; times must be finite seconds")
        if low < self._starts[0] or high > self.drive.end:
            bad = low if low < self._starts[0] else high
            raise InputError(
                f"t: {bad!r} s is outside the drive, which runs from {float(self._starts[0])!r} "
                f"to {self.drive.end!r} s"
            )

    def _locator(self, array: np.ndarray) -> engine.SegmentLocator:
        """Where the times fall, with the times checked (a short grid before, as its
        order is not looked at, and a long one after the locator found its order)."""
        flat = array.reshape(-1)
        if flat.size <= engine.SMALL_GRID:
            self._check_times(flat, is_sorted=False, no_nan=False)
            return engine.SegmentLocator(flat, self._starts, self._rate, within=True)
        locator = engine.SegmentLocator(flat, self._starts, self._rate)
        self._check_times(flat, locator.is_sorted, no_nan=locator.compiled)
        return locator

    def evaluate(self, t: Any, components: tuple[str, ...] = ("total",), probe: str | None = None) -> dict[str, np.ndarray]:
        """Evaluate several components (of the state, or of `probe`) on one time array.

        See Also
        --------
        total, probe : one component.
        """
        array = self._times(t)
        if array.size > engine.SMALL_GRID:
            ordered = self._evaluate_long(array, components, probe)
            if ordered is not None:
                return ordered
        locator = self._locator(array)
        rows = self.segments.probe_rows(probe) if probe is not None else None
        out = {}
        consume = len(components) == 1 and rows is None
        for component in components:
            out[component] = self._component(component, locator, rows, consume).reshape(array.shape)
        return out

    def _evaluate_long(self, array: np.ndarray, components: tuple[str, ...],
                       probe: str | None) -> dict[str, np.ndarray] | None:
        """:meth:`evaluate` of a long grid by the compiled sweep or after sorting it; None
        when neither applies."""
        if probe is None and len(components) == 1 and components[0] not in ("forced", "natural"):
            # One state component: one compiled sweep if the grid is sorted and long.
            key = self._component_key(components[0])
            flat = array.reshape(-1)
            values = engine.evaluate_sorted(flat, self._starts, self._rate, self._finals(key),
                                            self._boundary(key)[:-1])
            if values is not None:
                self._check_times(flat, is_sorted=True, no_nan=True)
                return {components[0]: values.reshape(array.shape)}
        order = _sorting_order(array.reshape(-1), len(self.drive))
        if order is not None:
            # Scattered times cost a gather per point from arrays that do not stay in cache;
            # sorted, they take the sequential path. Every point is computed the same way in
            # either order, so the numbers are identical.
            ordered = self.evaluate(array.reshape(-1)[order], components, probe)
            for name, values in ordered.items():
                scattered = np.empty_like(values)
                scattered[order] = values
                ordered[name] = scattered.reshape(array.shape)
            return ordered
        return None

    def _component(self, component: str, locator: engine.SegmentLocator, rows, consume: bool = False) -> np.ndarray:
        if component in ("forced", "natural"):
            final = self._finals("total")
            state_forced = locator.spread(final)
            if component == "forced":
                return self._probe_value(state_forced, "total", locator, rows)
            state = locator.combine(final, self._boundary("total")[:-1])
            if rows is None:
                return state - state_forced
            return locator.spread(rows[:, 0]) * (state - state_forced)
        key = self._component_key(component)
        # A single state component may take over the locator's decay array.
        state = locator.combine(self._finals(key), self._boundary(key)[:-1], consume=consume)
        return self._probe_value(state, key, locator, rows)

    def _probe_value(self, state: np.ndarray, key: str, locator, rows) -> np.ndarray:
        if rows is None:
            return state
        state *= locator.spread(rows[:, 0])
        if key == "zero_input":
            return state
        if key in ("total", "zero_state"):
            offset = np.einsum("ij,ij->i", rows[:, 1:], self._levels)
        else:
            j = self.segments.source_names.index(key)
            offset = rows[:, 1 + j] * self._levels[:, j]
        state += locator.spread(offset)
        return state

    def _single(self, component: str, t: Any, probe: str | None = None):
        result = self.evaluate(t, (component,), probe)[component]
        return float(result) if result.ndim == 0 else result

    def total(self, t: Any):
        """The state at times `t` (V across the capacitor or A through the inductor).

        See Also
        --------
        zero_input, zero_state, forced, natural, contribution : the other components.
        evaluate : several at once on one time array.
        """
        return self._single("total", t)

    def zero_input(self, t: Any):
        """The response from the starting state with every source at zero."""
        return self._single("zero_input", t)

    def zero_state(self, t: Any):
        """The response from a zero state to the sources as scheduled."""
        return self._single("zero_state", t)

    def forced(self, t: Any):
        """Each segment's final value, piecewise constant."""
        return self._single("forced", t)

    def natural(self, t: Any):
        """``total - forced``: the decaying part."""
        return self._single("natural", t)

    def contribution(self, source: str, t: Any):
        """The zero-state response to one source alone (they add up to ``zero_state``)."""
        names = list(self.segments.source_names)
        if source not in names:
            raise InputError(f"contribution: {source!r} names no source; sources are {names}")
        return self._single(source, t)

    # -- probes --------------------------------------------------------------------------------
    def probe(self, name: str, t: Any, component: str = "total"):
        """A probe's value at times `t` (probes may jump at changes)."""
        return self._single(component, t, probe=name)

    def probe_boundary(self, name: str) -> tuple[np.ndarray, np.ndarray]:
        """A probe just after each change and just before the next (two arrays of length n)."""
        rows = self.segments.probe_rows(name)
        states = self.boundary
        offset = np.einsum("ij,ij->i", rows[:, 1:], self._levels)
        return rows[:, 0] * states[:-1] + offset, rows[:, 0] * states[1:] + offset

    # -- settling ---------------------------------------------------------------------------------
    def settling(self, tolerance, sample_delay: Any = None, probe: str | None = None):
        """Per-segment settle times, residuals and sample errors (a pandas DataFrame).

        See :func:`firstorder.settling.table.settling_table` for the columns.

        Examples
        --------
        >>> import firstorder as fo
        >>> res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive.steps([(0, 5.0)], end="20m"))
        >>> round(float(res.settling(fo.Tolerance.relative(0.01))["settle_time"].iloc[0]) / 1e-3, 3)
        4.605
        """
        from .settling.table import settling_table

        return settling_table(self, tolerance, sample_delay=sample_delay, probe=probe)

    def summary(self, tolerance, sample_delay: Any = None, probe: str | None = None):
        """The worst segment, how many did not settle, total time, smallest margin at the samples.

        See :func:`firstorder.settling.table.settling_summary`.
        """
        from .settling.table import settling_summary

        return settling_summary(self, tolerance, sample_delay=sample_delay, probe=probe)

    @cached_property
    def cautions(self) -> list:
        """Hazards found in this response (high voltage, stored energy), as :class:`Caution` s.

        Checked against the limits in force when first read (see
        :func:`firstorder.cautions.set_limits`); call
        :func:`firstorder.cautions.check` for other limits.  A measured model
        (:meth:`from_segments`) has no network to check: none.
        """
        if self.fixture is None:
            return []
        from .cautions import check

        return check(self)

    # -- display ---------------------------------------------------------------------------------
    def end_scale(self, k: int = -1) -> float:
        """The size of segment `k`'s values (its start, final and step): what its numbers
        are written against (:func:`~firstorder.units.format_value`'s `scale`)."""
        start, final = abs(float(self.boundary[:-1][k])), abs(float(self.final[k]))
        return max(start, final, abs(float(self.boundary[:-1][k]) - float(self.final[k])))

    def __repr__(self) -> str:
        return (
            f"Response({len(self.drive)} segments, start {format_value(self.initial, self.state_unit)}, "
            f"end {format_value(float(self.boundary[-1]), self.state_unit, scale=self.end_scale())})"
        )

    def _repr_html_(self) -> str:
        from ._html import table

        unit = self.state_unit
        n = len(self.drive)
        shown = list(range(n)) if n <= 8 else [*range(6), n - 1]
        rows = []
        for k in shown:
            rows.append([
                k, format_value(float(self._starts[k]), "s"), format_value(float(self.tau[k]), "s"),
                format_value(float(self.boundary[k]), unit), format_value(float(self.final[k]), unit),
                format_value(float(self.boundary[k + 1]), unit, scale=self.end_scale(k)),
            ])
        caption = (
            f"Response of {self.segments.storage_kind} '{self.segments.storage_name}': {n} segments, "
            f"start {format_value(self.initial, unit)}"
        )
        html = table(["segment", "from", "τ", "start value", "final", "value at end"], rows, caption=caption)
        cautions = self.cautions
        if cautions:
            from ._html import paragraph

            html += "".join(paragraph(f"⚠ {c}", color="#a33") for c in cautions)
        return html

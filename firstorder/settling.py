"""Settling: tolerances, settling tables, errors at sample instants, fastest plans.

A :class:`Tolerance` turns each segment's step into the absolute error limit the
engineer accepts at the sample instant.  Everything else here is closed form: in
segment ``k`` the watched quantity (the state, or a probe ``c*x + offset``) moves
from its value just after the change, ``start``, towards ``final`` as

    value(t) = final + (start - final) * exp(-(t - s_k) / tau_k),

so its error ``|start - final| * exp(-(t - s_k) / tau_k)`` falls monotonically and
the settle time is ``tau_k * ln(|start - final| / limit)`` (zero when the step is
already within the limit).  No search, no sampling grid.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from numbers import Integral
from typing import Any

import numpy as np

from .errors import InputError
from .units import format_value, parse_value

__all__ = ["Tolerance", "SettlingSummary", "settling_table", "settling_summary", "plan_dwells", "plan_table"]

_KINDS = ("absolute", "relative", "ppm", "lsb")
_FRACTION_WORDS = {0.5: "½", 0.25: "¼", 1.0: "1"}


@dataclass(frozen=True, slots=True)
class Tolerance:
    """How close to its final value a node must be.

    Build with one of the factories: :meth:`absolute`, :meth:`relative`,
    :meth:`ppm` or :meth:`lsb`.

    Examples
    --------
    >>> Tolerance.lsb(bits=16, span=5.0)
    Tolerance.lsb(bits=16, span=5.0, fraction=0.5)
    >>> print(Tolerance.lsb(bits=16, span=5.0))
    ±38.15 µV (½ LSB of 16 bits on 5 V)
    >>> float(Tolerance.relative(0.01).limit(np.array([2.0]))[0])
    0.02
    """

    kind: str
    value: float
    span: float = math.nan
    bits: int = 0
    fraction: float = 0.5
    unit: str = "V"

    def __post_init__(self) -> None:
        if self.kind not in _KINDS:
            raise InputError(f"tolerance kind: {self.kind!r} is not one of {list(_KINDS)}")
        if self.unit not in ("V", "A"):
            raise InputError(f"tolerance.unit: {self.unit!r} must be 'V' or 'A'")

    # -- factories ------------------------------------------------------------------
    @classmethod
    def absolute(cls, value: Any, unit: str = "V") -> "Tolerance":
        """A fixed limit, in the unit of the watched quantity (V or A)."""
        limit = parse_value(value, field="tolerance.value", unit=("V", "A"), positive=True)
        return cls("absolute", limit, unit=unit)

    @classmethod
    def relative(cls, fraction: Any, unit: str = "V") -> "Tolerance":
        """A fraction of each segment's step ``|final - start value|`` (0 < fraction < 1)."""
        number = parse_value(fraction, field="tolerance.fraction", positive=True)
        if not number < 1.0:
            raise InputError(f"tolerance.fraction: {fraction!r} must be < 1 (0.01 is 1 %)")
        return cls("relative", number, unit=unit)

    @classmethod
    def ppm(cls, ppm: Any, span: Any, unit: str = "V") -> "Tolerance":
        """`ppm` parts per million of `span` (the full scale, V or A)."""
        parts = parse_value(ppm, field="tolerance.ppm", positive=True)
        full = parse_value(span, field="tolerance.span", unit=("V", "A"), positive=True)
        return cls("ppm", parts, span=full, unit=unit)

    @classmethod
    def lsb(cls, bits: Any, span: Any, fraction: Any = 0.5, unit: str = "V") -> "Tolerance":
        """`fraction` of one LSB of a `bits`-bit converter over `span` (V or A)."""
        if isinstance(bits, bool) or not isinstance(bits, Integral) or not 1 <= bits <= 32:
            raise InputError(f"tolerance.bits: {bits!r} must be a whole number from 1 to 32")
        full = parse_value(span, field="tolerance.span", unit=("V", "A"), positive=True)
        part = parse_value(fraction, field="tolerance.fraction", positive=True)
        if not part <= 1.0:
            raise InputError(f"tolerance.fraction: {fraction!r} must be in (0, 1]")
        return cls("lsb", part * full / 2.0 ** int(bits), span=full, bits=int(bits), fraction=part, unit=unit)

    # -- use -----------------------------------------------------------------------------
    def limit(self, step: np.ndarray) -> np.ndarray:
        """The absolute limit for segments whose steps are `step` (``|final - start|``)."""
        step = np.abs(np.asarray(step, dtype=float))
        if self.kind == "relative":
            return self.value * step
        if self.kind == "ppm":
            return np.full(step.shape, self.value * 1e-6 * self.span)
        return np.full(step.shape, self.value)

    def _scale(self) -> tuple[float, bool]:
        """``(value, relative)``: the limit is ``value * step`` if relative, else ``value``."""
        if self.kind == "relative":
            return self.value, True
        return (self.value * 1e-6 * self.span if self.kind == "ppm" else self.value), False

    def to_dict(self) -> dict[str, Any]:
        """Plain data for saving (see :meth:`from_dict`)."""
        if self.kind == "absolute":
            data: dict[str, Any] = {"kind": "absolute", "value": self.value}
        elif self.kind == "relative":
            data = {"kind": "relative", "fraction": self.value}
        elif self.kind == "ppm":
            data = {"kind": "ppm", "ppm": self.value, "span": self.span}
        else:
            data = {"kind": "lsb", "bits": self.bits, "span": self.span, "fraction": self.fraction}
        if self.unit != "V":
            data["unit"] = self.unit
        return data

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "Tolerance":
        """Rebuild a tolerance saved by :meth:`to_dict`."""
        kind = data.get("kind")
        arguments = {k: v for k, v in data.items() if k != "kind"}
        factory = {"absolute": cls.absolute, "relative": cls.relative, "ppm": cls.ppm, "lsb": cls.lsb}.get(kind)
        if factory is None:
            raise InputError(f"tolerance.kind: {kind!r} is not one of {list(_KINDS)}")
        try:
            return factory(**arguments)
        except TypeError as error:
            raise InputError(f"tolerance: {arguments!r} do not fit kind {kind!r} ({error})") from None

    def __repr__(self) -> str:
        arguments = ", ".join(f"{k}={v!r}" for k, v in self.to_dict().items() if k != "kind")
        return f"Tolerance.{self.kind}({arguments})"

    def __str__(self) -> str:
        unit = self.unit
        if self.kind == "absolute":
            return f"±{format_value(self.value, unit)}"
        if self.kind == "relative":
            return f"±{self.value * 100:g} % of each step"
        if self.kind == "ppm":
            return f"±{format_value(self.value * 1e-6 * self.span, unit)} ({self.value:g} ppm of {format_value(self.span, unit)})"
        share = _FRACTION_WORDS.get(self.fraction, f"{self.fraction:g}")
        return f"±{format_value(self.value, unit)} ({share} LSB of {self.bits} bits on {format_value(self.span, unit)})"


# -- settling tables ------------------------------------------------------------------------

#: Columns of :func:`settling_table`, in order; the sample columns follow with a delay.
TABLE_COLUMNS = ("start", "end", "start_value", "final", "tolerance", "settle_time", "settled", "residual_at_end")
SAMPLE_COLUMNS = ("sample_time", "value_at_sample", "error_at_sample", "ok")


@dataclass(frozen=True, slots=True)
class _Watched:
    """The watched quantity, per segment: where it starts, where it heads, how fast."""

    label: str
    unit: str
    start: np.ndarray
    final: np.ndarray
    rate: np.ndarray  # 1/tau, zero where the state is held

    @property
    def step(self) -> np.ndarray:
        """``|final - start|``: the error just after each change."""
        return np.abs(self.final - self.start)


def _check_unit(tolerance: Tolerance, unit: str, label: str) -> None:
    # A relative tolerance is a pure fraction; the others carry the unit they were built in.
    if tolerance.kind != "relative" and tolerance.unit != unit:
        raise InputError(
            f"tolerance: {tolerance} is in {tolerance.unit}, but {label} is in {unit}; "
            f"build the tolerance with unit={unit!r}"
        )


def _watched(response: Any, probe: str | None) -> _Watched:
    """The state, or `probe`, of `response` as start/final/rate arrays."""
    rate = response._rate
    state_start = response.boundary[:-1]
    if probe is None:
        storage = response.fixture.storage
        return _Watched(f"the state of {storage.kind} '{storage.name}'", response.fixture.state_unit,
                        state_start, response.final, rate)
    rows = response._probe_rows(probe)  # raises InputError naming the probe
    start, _ = response.probe_boundary(probe)
    # The probe is c*x + offset within a segment, so it moves by c times the state's step;
    # written this way the step has no cancellation from the offset.
    final = start + rows[:, 0] * (response.final - state_start)
    unit = next(p.unit for p in response.fixture.probes if p.name == probe)
    return _Watched(f"probe '{probe}'", unit, start, final, rate)


def _sample_delays(sample_delay: Any, durations: np.ndarray, *, field: str, what: str,
                   ends: np.ndarray | None = None) -> np.ndarray:
    """Delays after each change (s), one per segment, checked to lie inside their segments.

    A delay past its segment's end by no more than the rounding of the instants (a few
    units in the last place of `ends`) is taken as the end: a drive stores instants, so
    its durations can differ by that much from the dwells it was built from.
    """
    n = durations.size
    if isinstance(sample_delay, (str, int, float, np.number)) and not isinstance(sample_delay, bool):
        delays = np.full(n, parse_value(sample_delay, field=field, unit="s"))
    else:
        array = np.asarray(sample_delay) if not isinstance(sample_delay, bool) else None
        if array is None or array.dtype.kind == "b" or array.size != n:
            count = "a bool" if array is None or array.dtype.kind == "b" else f"{array.size} values"
            raise InputError(
                f"{field}: got {count}; give one delay in seconds for all {what}s or one per {what} ({n})"
            )
        if array.dtype.kind in "iuf":
            delays = array.astype(np.float64).reshape(-1)
        else:  # text such as "12u" among the numbers
            delays = np.array([
                float(item) if isinstance(item, (float, int, np.number)) and not isinstance(item, bool)
                else parse_value(item, field=f"{field}[{k}]", unit="s", allow_infinite=True)
                for k, item in enumerate(array.reshape(-1).tolist())
            ])
    if ends is not None and (delays > durations).any():
        slack = 4.0 * np.spacing(np.abs(ends))
        delays = np.where((delays > durations) & (delays <= durations + slack), durations, delays)
    bad = ~np.isfinite(delays) | (delays < 0) | (delays > durations)
    if bad.any():
        k = int(np.argmax(bad))
        value, length = float(delays[k]), float(durations[k])
        if not math.isfinite(value) or value < 0:
            reason = "must be a finite time >= 0"
        else:
            reason = f"falls after the {what}'s end ({what} {k} lasts {format_value(length, 's')})"
        inside = (f"; a sample must fall inside its {what}, from 0 to {format_value(length, 's')} "
                  f"after the change") if math.isfinite(length) else ""
        raise InputError(f"{field} for {what} {k}: {value!r} s {reason}{inside}")
    return delays


def settling_table(response: Any, tolerance: Tolerance, sample_delay: Any = None, probe: str | None = None):
    """Per segment: when the state (or a probe) is within `tolerance`, and its error at a sample.

    Parameters
    ----------
    response : Response
    tolerance : Tolerance
        The limit; a relative one is taken of each segment's own step
        ``|final - start_value|``.  An absolute, ppm or LSB tolerance must be in
        the unit of the watched quantity (V for a capacitor or a node probe, A
        for an inductor or a current probe).
    sample_delay : float, str or sequence, optional
        Seconds after each change at which the sample is taken: one value for
        every segment, or one per segment.  Each must lie within its segment (a
        delay equal to the segment's length samples just before the next change;
        one past it by only the rounding of the change instants counts as that).
    probe : str, optional
        Settle this probe instead of the state.  Within a segment a probe is
        ``c*x + offset``, so it settles with the same tau; its error is ``|c|``
        times the state's.  ``start_value`` is the probe just after the change
        (probes may jump at changes).

    Returns
    -------
    pandas.DataFrame
        One row per segment (index ``segment``) with columns ``start``, ``end``,
        ``start_value``, ``final``, ``tolerance`` (the absolute limit used),
        ``settle_time`` (seconds after the change from which the error stays
        within the limit; NaN when the segment ends first), ``settled``,
        ``residual_at_end`` (``|value at the end - final|``) and, with
        `sample_delay`, ``sample_time``, ``value_at_sample``,
        ``error_at_sample`` and ``ok`` (``error_at_sample <= tolerance``).

    Raises
    ------
    InputError
        An unknown probe, a tolerance in the wrong unit, or a sample delay that
        is negative, not finite or past its segment's end (naming the segment).

    Notes
    -----
    Closed form: the error after a change is ``|start_value - final| *
    exp(-t/tau)``, which only falls, so the settle time is ``tau *
    ln(|start_value - final| / limit)`` where that is positive and 0 otherwise.  A
    segment that holds its state (tau = inf) does not move and is settled at 0.

    Examples
    --------
    >>> import firstorder as fo
    >>> res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive.steps([(0, 0.0), ("1m", 5.0)], end="15m"))
    >>> table = settling_table(res, fo.Tolerance.lsb(bits=12, span=5.0), sample_delay="12m", probe=None)
    Traceback (most recent call last):
    ...
    firstorder.errors.InputError: sample_delay for segment 0: 0.012 s falls after the segment's end (segment 0 lasts 1 ms); a sample must fall inside its segment, from 0 to 1 ms after the change
    >>> table = settling_table(res, fo.Tolerance.lsb(bits=12, span=5.0), sample_delay=[0.0, "12m"])
    >>> round(float(table.loc[1, "settle_time"]) / 1e-3, 3)    # (12 + 1) ln 2 time constants
    9.011
    >>> table[["settled", "ok"]]
             settled    ok
    segment
    0           True  True
    1           True  True
    """
    import pandas as pd

    if not isinstance(tolerance, Tolerance):
        raise InputError(f"tolerance: {tolerance!r} is not a Tolerance; build one with Tolerance.absolute(...), .relative(...), .ppm(...) or .lsb(...)")
    from .engine import settling_columns

    watched = _watched(response, probe)
    _check_unit(tolerance, watched.unit, watched.label)
    # A probe within a segment is c*x + offset: it settles at the state's rate, and its
    # error decays by the same factor as the state's (the response's decay over the segment).
    value, relative = tolerance._scale()
    limit, settle_time, settled, residual = settling_columns(
        watched.start, watched.final, response.tau, response._decay, response.starts, response.ends,
        value, relative)
    columns: dict[str, Any] = {
        "start": response.starts,
        "end": response.ends,
        "start_value": watched.start,
        "final": watched.final,
        "tolerance": limit,
        "settle_time": settle_time,
        "settled": settled,
        "residual_at_end": residual,
    }
    if sample_delay is not None:
        durations = response.drive.durations
        delays = _sample_delays(sample_delay, durations, field="sample_delay", what="segment", ends=response.ends)
        decay = np.exp(-delays * watched.rate)
        error = watched.step * decay
        columns["sample_time"] = response.starts + delays
        # final + (start - final) * decay, the left limit at a delay that reaches the next change.
        columns["value_at_sample"] = watched.final + (watched.start - watched.final) * decay
        columns["error_at_sample"] = error
        columns["ok"] = error <= limit
    # Every column is a fresh array, the response's read-only per-segment data, or (a fixed
    # tolerance) a read-only broadcast: no copy needed.
    table = pd.DataFrame(columns, index=pd.RangeIndex(settled.size, name="segment"), copy=False)
    table.attrs.update(tolerance=str(tolerance), unit=watched.unit, watched=watched.label)
    return table


# -- summary ----------------------------------------------------------------------------------

@dataclass(frozen=True, slots=True)
class SettlingSummary:
    """The few numbers a test engineer reads first from a settling table.

    Attributes
    ----------
    tolerance : str
        The tolerance, as text.
    unit : str
        Unit of the watched quantity (V or A).
    segments : int
        Number of segments.
    unsettled : int
        Segments that end before they settle.
    failing_samples : int
        Samples outside the tolerance (the samples are at each segment's end
        when no sample delay is given, so then this equals `unsettled`).
    worst_segment : int
        The segment whose sample is worst relative to its limit.
    worst_ratio : float
        Its error at the sample divided by its limit (above 1 fails).
    smallest_margin : float
        The smallest ``limit - error`` over the samples (negative: a failure).
    slowest_segment : int
        The segment with the longest settle time (-1 when none settles).
    longest_settle_time : float
        That settle time (s; NaN when no segment settles).
    total_time : float
        From the first change to the end of the drive (s).
    sampled_at_end : bool
        True when no sample delay was given and the samples are the segment ends.
    """

    tolerance: str
    unit: str
    segments: int
    unsettled: int
    failing_samples: int
    worst_segment: int
    worst_ratio: float
    smallest_margin: float
    slowest_segment: int
    longest_settle_time: float
    total_time: float
    sampled_at_end: bool

    def _rows(self) -> list[tuple[str, str]]:
        where = "at each segment's end" if self.sampled_at_end else "at the sample instants"
        return [
            ("tolerance", self.tolerance),
            ("segments", str(self.segments)),
            ("not settled by their end", str(self.unsettled)),
            (f"samples outside tolerance ({where})", str(self.failing_samples)),
            ("worst segment", f"{self.worst_segment} (error {self.worst_ratio:.3g} × its limit)"),
            ("smallest margin", format_value(self.smallest_margin, self.unit)),
            ("longest settle time", "none settles" if self.slowest_segment < 0 else
             f"{format_value(self.longest_settle_time, 's')} (segment {self.slowest_segment})"),
            ("total time", format_value(self.total_time, "s")),
        ]

    def __str__(self) -> str:
        return "\n".join(f"{name}: {value}" for name, value in self._rows())

    def _repr_html_(self) -> str:
        from ._html import table

        verdict = "all samples within tolerance" if self.failing_samples == 0 else (
            f"{self.failing_samples} of {self.segments} samples outside tolerance")
        return table(["", ""], self._rows(), caption=f"Settling summary: {verdict}")


def settling_summary(response: Any, tolerance: Tolerance, sample_delay: Any = None,
                     probe: str | None = None) -> SettlingSummary:
    """Summarise :func:`settling_table`: the worst segment, failures, margins, total time.

    Without `sample_delay` each segment is judged at its end (the latest
    instant it could be sampled).

    Examples
    --------
    >>> import firstorder as fo
    >>> res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "2m", "12m"], end="22m", vin=[5, 0, 5]))
    >>> s = settling_summary(res, fo.Tolerance.lsb(bits=12, span=5.0))
    >>> s.unsettled, s.worst_segment, s.slowest_segment
    (1, 0, 2)
    >>> print(s)   # doctest: +NORMALIZE_WHITESPACE
    tolerance: ±610.4 µV (½ LSB of 12 bits on 5 V)
    segments: 3
    not settled by their end: 1
    samples outside tolerance (at each segment's end): 1
    worst segment: 0 (error 1.11e+03 × its limit)
    smallest margin: -676.1 mV
    longest settle time: 9.011 ms (segment 2)
    total time: 22 ms
    """
    table = settling_table(response, tolerance, sample_delay=sample_delay, probe=probe)
    limit = table["tolerance"].to_numpy()
    error = (table["error_at_sample"] if sample_delay is not None else table["residual_at_end"]).to_numpy()
    with np.errstate(divide="ignore", invalid="ignore"):
        # A zero limit with a zero error (a relative tolerance on no step) is exactly met.
        ratio = np.where(error == 0.0, 0.0, error / limit)
    settle = table["settle_time"].to_numpy()
    any_settles = bool(np.isfinite(settle).any())
    slowest = int(np.nanargmax(settle)) if any_settles else -1
    return SettlingSummary(
        tolerance=str(tolerance),
        unit=table.attrs["unit"],
        segments=len(table),
        unsettled=int((~table["settled"]).sum()),
        failing_samples=int((error > limit).sum()),
        worst_segment=int(np.argmax(ratio)),
        worst_ratio=float(np.max(ratio)),
        smallest_margin=float(np.min(limit - error)),
        slowest_segment=slowest,
        longest_settle_time=float(settle[slowest]) if any_settles else math.nan,
        total_time=float(response.drive.end - response.drive.start),
        sampled_at_end=sample_delay is None,
    )


# -- fastest plans ----------------------------------------------------------------------------

#: Each planned sample aims this fraction inside its limit, plus a few ulps of the state, so
#: that evaluating the planned drive again (another rounding path) never fails by rounding alone.
_AIM_INSIDE = 1e-9
_ROUNDING_ULPS = 8.0


def _plan_inputs(fixture: Any, levels: Any, tolerance: Any, min_dwell: Any, start: Any):
    """Check the plan's arguments; return a provisional drive, levels, states and checked numbers."""
    from collections.abc import Mapping

    from .drive import Drive
    from .response import _match_columns

    if not isinstance(tolerance, Tolerance):
        raise InputError(
            f"tolerance: {tolerance!r} is not a Tolerance; build one with Tolerance.absolute(...), "
            f".relative(...), .ppm(...) or .lsb(...)"
        )
    if not isinstance(levels, Mapping) or not levels:
        raise InputError(
            f"levels: {levels!r} must be a dict of columns, one per source and switch, "
            f"such as {{'vin': [0, 2.5, 5]}}"
        )
    lengths = [len(v) for v in levels.values() if not isinstance(v, (str, bytes, int, float, bool, np.number))]
    if not lengths or max(lengths) == 0:
        raise InputError("levels: give at least one column as a list with one level per step")
    count = max(lengths)
    start_time = parse_value(start, field="start", unit="s")
    shortest = parse_value(min_dwell, field="min_dwell", unit="s")
    if shortest < 0:
        raise InputError(f"min_dwell: {min_dwell!r} must be >= 0 s")
    try:
        # Placeholder instants: the Drive checks the columns (lengths, numbers) exactly as it
        # will for the planned drive.
        provisional = Drive(np.arange(count, dtype=float), float(count), **dict(levels))
        level_array, states = _match_columns(fixture, provisional)
    except InputError as error:
        raise InputError(str(error).replace("drive.", "levels.").replace("drive:", "levels:")) from None
    return provisional, level_array, states, start_time, shortest


#: Rounds of the search for a plan's repeating start (it usually takes two or three).
_PERIODIC_ROUNDS = 100


def _periodic(greedy, guess: float, coefficient: np.ndarray, rate: np.ndarray):
    """The greedy plan whose start is the state it leaves at its end, so it can repeat.

    A secant search on ``end(x) - x``: where the first dwell settles, the state after
    it no longer depends on the start, so two or three rounds find it; where
    `min_dwell` rules, the map is affine and the secant lands on it.  The start is
    found to well inside the margin every sample keeps from its limit.
    """
    if (rate == 0.0).all():
        raise InputError(
            "initial: 'periodic' has no solution; every step holds the state, so no start repeats at the end"
        )
    start, previous = guess, None
    for _ in range(_PERIODIC_ROUNDS):
        rows, limited_by, end, time = greedy(start)
        gap = end - start
        # The samples aim _AIM_INSIDE of their limit inside it: a start off by far less moves no sample out.
        allowed = 0.25 * _AIM_INSIDE * float(np.min(rows["tolerance"] / np.maximum(np.abs(coefficient), 1e-300)))
        if abs(gap) <= allowed:
            return rows, limited_by, end, time
        if previous is not None and gap != previous[1]:
            following = start - gap * (start - previous[0]) / (gap - previous[1])
        else:
            following = end  # the plain round: start where this plan ended
        previous = (start, gap)
        start = following
    raise InputError(
        f"initial: 'periodic' found no repeating start in {_PERIODIC_ROUNDS} rounds (last gap "
        f"{format_value(abs(gap), '')}); give the starting state as a number"
    )


def _plan(fixture: Any, levels: Any, tolerance: Any, initial: Any, min_dwell: Any, start: Any,
          sample_delay: Any, probe: str | None):
    """The greedy plan: its drive and its per-step table (see :func:`plan_dwells`)."""
    import pandas as pd

    from ._network import probe_row
    from .drive import Drive
    from .errors import TopologyError
    from .response import _configurations

    fixture.check()
    provisional, level_array, states, start_time, shortest = _plan_inputs(fixture, levels, tolerance, min_dwell, start)
    count = len(provisional)
    configs, inverse = _configurations(states)
    first_use = np.zeros(len(configs), dtype=np.intp)
    first_use[inverse[::-1]] = np.arange(count)[::-1]

    probes = {p.name: p for p in fixture.probes}
    if probe is not None and probe not in probes:
        raise InputError(f"probe: {probe!r} is not a probe of the fixture; probes are {list(probes)}")
    storage = fixture.storage
    unit = probes[probe].unit if probe is not None else fixture.state_unit
    label = f"probe '{probe}'" if probe is not None else f"the state of {storage.kind} '{storage.name}'"
    _check_unit(tolerance, unit, label)

    rates, gains, drifts, probe_rows = [], [], [], []
    for c, config in enumerate(configs):
        k = int(first_use[c])
        where = f"step {k}" + (f" ({fixture.describe_states(config)})" if config else "")
        layout, reduced = fixture.configuration(config, where=where)
        rates.append(0.0 if math.isinf(reduced.tau) else 1.0 / reduced.tau)
        gains.append(reduced.gain)
        drifts.append(reduced.drift)
        if probe is not None:
            probe_rows.append(probe_row(layout, fixture, reduced, probes[probe]))
    rate = np.array(rates)[inverse]
    gain = np.array(gains).reshape(len(configs), -1)[inverse]
    drift = np.array(drifts).reshape(len(configs), -1)[inverse]
    if probe is not None:
        # The probe is c*x + offset in each step: it settles with the state, |c| times its error.
        by_step = np.array(probe_rows)[inverse]
        coefficient, offset = by_step[:, 0], np.einsum("ij,ij->i", by_step[:, 1:], level_array)
    else:
        coefficient, offset = np.ones(count), np.zeros(count)
    ramps = (rate == 0.0) & (drift * level_array != 0).any(axis=1)
    if ramps.any():
        k = int(np.argmax(ramps))
        raise TopologyError(
            f"step {k}: {storage.kind} '{storage.name}' sees no resistance, yet sources drive it, so "
            f"its state would ramp without limit; add a resistance in its path"
        )
    finals = (gain * level_array).sum(axis=1)

    hold_after = np.zeros(count)
    if sample_delay is not None:
        hold_after = _sample_delays(sample_delay, np.full(count, np.inf), field="sample_delay", what="step")

    eps = np.finfo(float).eps

    def greedy(state: float):
        """Each step as fast as its sample allows, from `state`: the rows, what limited
        each dwell, the state left at the end and the end instant."""
        rows = {name: np.empty(count) for name in
                ("start", "dwell", "settle_time", "sample_delay", "sample_time", "start_value", "final",
                 "tolerance", "error_at_sample")}
        limited_by = []
        time = start_time
        for k in range(count):
            r, c = float(rate[k]), abs(float(coefficient[k]))
            final = state if r == 0.0 else float(finals[k])
            step = c * abs(final - state)
            limit = float(tolerance.limit(np.array([step]))[0])
            aim = limit * (1.0 - _AIM_INSIDE) - _ROUNDING_ULPS * eps * c * max(abs(state), abs(final))
            if aim <= 0.0:
                aim = limit * (1.0 - _AIM_INSIDE)
            # Already within the limit: no wait (aiming inside matters only for steps that move).
            settle = math.log(step / aim) / r if (r > 0.0 and step > limit) else 0.0
            need = settle + float(hold_after[k])
            dwell = max(shortest, need)
            if not dwell > 0.0:
                raise InputError(
                    f"step {k}: needs no settling (its start is already within {tolerance}) and min_dwell "
                    f"and sample_delay are 0, so its dwell would be 0 s, which no drive segment can be; "
                    f"give min_dwell > 0 (for example the time one sample takes)"
                )
            following = time + dwell
            while following - time < dwell:  # the drive keeps instants, not dwells: never round short
                following = math.nextafter(following, math.inf)
            dwell = following - time
            delay = dwell - float(hold_after[k])
            decay = math.exp(-delay * r)
            rows["start"][k] = time
            rows["dwell"][k] = dwell
            rows["settle_time"][k] = settle
            rows["sample_delay"][k] = delay
            rows["sample_time"][k] = time + delay
            rows["start_value"][k] = coefficient[k] * state + offset[k]
            rows["final"][k] = coefficient[k] * final + offset[k]
            rows["tolerance"][k] = limit
            rows["error_at_sample"][k] = step * decay
            limited_by.append("settling" if need >= shortest else "min_dwell")
            state = final + (state - final) * math.exp(-dwell * r)
            time = following
        return rows, limited_by, state, time

    if isinstance(initial, str) and initial.strip() == "periodic":
        rows, limited_by, _, time = _periodic(greedy, float(finals[-1]), coefficient, rate)
    else:
        if isinstance(initial, str) and initial.strip() == "settled":
            if rate[0] == 0.0:
                raise InputError("initial: 'settled' needs a first step that settles, but step 0 holds its state")
            state = float(finals[0])
        elif isinstance(initial, str) and initial.strip().isalpha():
            raise InputError(
                f"initial: {initial!r} is not allowed for a plan; give a number (the starting state, "
                f"in {fixture.state_unit}), 'settled' or 'periodic'"
            )
        else:
            state = parse_value(initial, field="initial", unit=fixture.state_unit)
        rows, limited_by, _, time = greedy(state)
    drive = Drive(rows["start"].copy(), time, **provisional.columns)
    table = pd.DataFrame(rows, index=pd.RangeIndex(count, name="step"))
    table["limited_by"] = limited_by
    table.attrs.update(tolerance=str(tolerance), unit=unit, watched=label, total_time=time - start_time)
    return drive, table


def plan_dwells(fixture: Any, levels: Any, tolerance: Tolerance, initial: Any = 0.0, min_dwell: Any = 0.0,
                start: Any = 0.0, sample_delay: Any = None, probe: str | None = None):
    """The fastest drive that steps through `levels` with every sample within `tolerance`.

    Parameters
    ----------
    fixture : Fixture
    levels : dict of str to sequence
        One column per source and per switch, one value per step (like a
        :class:`~firstorder.drive.Drive`'s columns, without the times).  Switch
        columns may change the configuration, and so tau, from step to step.
    tolerance : Tolerance
        The limit each step's sample must meet (a relative one is taken of that
        step's own ``|final - start value|``).
    initial : float or str, optional
        The state before the first step (V or A), ``"settled"`` for the state
        the first step's configuration would hold forever, or ``"periodic"`` for
        a sequence that repeats: the start is then the state the plan itself
        leaves at its end (run it with ``respond(..., initial="periodic")``).
    min_dwell : float or str, optional
        No step is shorter than this (s): the time a sample takes, or the
        fastest the scanner or relay may switch.
    start : float or str, optional
        The first change instant (s).
    sample_delay : float, str or sequence, optional
        How long before the next change each sample is taken (s), one value or
        one per step: a converter's conversion or aperture time, or the
        controller's latency before it commands the next step.  The step must
        hold that long after its sample, so its dwell is ``settle_time +
        sample_delay`` (or `min_dwell` if longer), and the sample instant is
        ``dwell - sample_delay`` after the change; :func:`plan_table` lists
        those instants as delays after each change, ready for
        :meth:`Response.settling`'s own `sample_delay`.  Without it each step is
        sampled at the end of its dwell.
    probe : str, optional
        Plan for this probe instead of the state (its error is ``|c|`` times
        the state's, with ``c`` its coefficient of the state in each step).

    Returns
    -------
    Drive
        Changes at the planned instants, with the columns of `levels`.  The
        dwell per step is ``drive.durations`` and the total time ``drive.end -
        drive.start``; :func:`plan_table` gives the per-step detail.

    Raises
    ------
    InputError
        Bad columns, a negative `min_dwell` or `sample_delay`, an unknown probe,
        a tolerance in the wrong unit, or a step whose dwell would be 0 s (give
        `min_dwell` > 0).

    Notes
    -----
    Greedy and closed form: step ``k`` starts from the state ``x_k`` that the
    step before left, heads for its final value ``f_k`` with time constant
    ``tau_k`` and needs ``settle_k = tau_k * ln(|f_k - x_k| / limit_k)`` (0 when
    already within the limit); its dwell is ``max(min_dwell, settle_k +
    sample_delay_k)``.  So no dwell can be shortened without its sample failing
    (a test shortens each by 0.1 % and watches it fail).  When tau is the same in
    every step the plan is also the fastest overall: lingering in one step never
    brings the state closer to the next level than heading straight for it
    would (a test lengthens dwells and re-plans the rest).  When switches change
    tau, lingering in a fast configuration can occasionally shorten a following
    slow step, so the plan is then fastest step by step, not always in total.

    Each sample is aimed a few parts per billion inside its limit (plus a few
    units of rounding of the state), so that evaluating the planned drive again
    never shows a failure by rounding alone.

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = fo.Fixture.rc(r="1k", c="1u")                       # tau = 1 ms
    >>> drive = plan_dwells(fx, {"vin": [5.0, 0.0, 5.0]}, fo.Tolerance.lsb(bits=12, span=5.0))
    >>> (drive.durations / 1e-3).round(3)                        # (12 + 1) ln 2 = 9.011 tau per full step
    array([9.011, 9.011, 9.011])
    >>> res = fx.respond(drive)
    >>> bool(res.settling(fo.Tolerance.lsb(bits=12, span=5.0), sample_delay=drive.durations)["ok"].all())
    True
    """
    return _plan(fixture, levels, tolerance, initial, min_dwell, start, sample_delay, probe)[0]


def plan_table(fixture: Any, levels: Any, tolerance: Tolerance, initial: Any = 0.0, min_dwell: Any = 0.0,
               start: Any = 0.0, sample_delay: Any = None, probe: str | None = None):
    """The plan of :func:`plan_dwells`, one row per step (same arguments).

    Returns
    -------
    pandas.DataFrame
        Index ``step``; columns ``start`` (its change instant), ``dwell``,
        ``settle_time`` (needed after the change), ``sample_delay`` (the sample
        instant after the change), ``sample_time``, ``start_value``, ``final``,
        ``tolerance`` (the limit used), ``error_at_sample`` and ``limited_by``
        (``"settling"`` or ``"min_dwell"``).  ``table.attrs["total_time"]`` is
        the length of the whole plan.

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = fo.Fixture.rc(r="1k", c="1u")
    >>> table = plan_table(fx, {"vin": [5.0, 5.0, 0.0]}, fo.Tolerance.absolute("1m"), min_dwell="2m")
    >>> table[["dwell", "limited_by"]].round(6)
             dwell limited_by
    step
    0     0.008517   settling
    1     0.002000  min_dwell
    2     0.008517   settling
    >>> round(table.attrs["total_time"], 6)
    0.019034
    """
    return _plan(fixture, levels, tolerance, initial, min_dwell, start, sample_delay, probe)[1]

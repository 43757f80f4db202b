"""Settling tables: when each segment is within tolerance, and its error at a sample.

Closed form throughout: in segment ``k`` the watched quantity (the state, or a
probe ``c*x + offset``) moves from its value just after the change, ``start``,
towards ``final`` as

    value(t) = final + (start - final) * exp(-(t - s_k) / tau_k),

so its error ``|start - final| * exp(-(t - s_k) / tau_k)`` falls monotonically and
the settle time is ``tau_k * ln(|start - final| / limit)`` (zero when the step is
already within the limit).  No search, no sampling grid.

A hold (:func:`hold_segments`: open switches cut the capacitor off from every
source, and only leakage moves it) is judged as droop: its error is the change
from the value it started holding, ``|start - final| * (1 - exp(-(t - s_k) / tau_k))``,
which only grows (see DESIGN.md, Semantics).

:func:`sample_delays` is the one rule for what a sample delay may be; the
settling table, the plans, the analysis file and the Bench all use it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ..engine import exp_in_place, settling_columns
from ..errors import InputError
from ..units import format_value, parse_array, parse_value, shown
from .tolerance import Tolerance

__all__ = ["SAMPLE_COLUMNS", "TABLE_COLUMNS", "SettlingSummary", "check_tolerance", "check_unit", "constant_probe",
           "hold_segments", "judged_from", "sample_delays", "Watched", "settling_summary", "settling_table",
           "table_summary", "watched"]


#: Columns of :func:`settling_table`, in order; the sample columns follow with a delay.
TABLE_COLUMNS = ("start", "end", "start_value", "final", "tolerance", "settle_time", "settled", "residual_at_end",
                 "hold")
SAMPLE_COLUMNS = ("sample_time", "value_at_sample", "error_at_sample", "ok")


@dataclass(frozen=True, slots=True)
class Watched:
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


def check_unit(tolerance: Tolerance, unit: str, label: str) -> None:
    # A relative tolerance is a pure fraction; the others carry the unit they were built in.
    if tolerance.kind != "relative" and tolerance.unit != unit:
        raise InputError(
            f"tolerance: {tolerance} is in {tolerance.unit}, but {label} is in {unit}; "
            f"build the tolerance with unit={unit!r}"
        )


def watched(response: Any, probe: str | None) -> Watched:
    """The state, or `probe`, of `response` as start/final/rate arrays."""
    segments = response.segments
    rate = segments.rate
    state_start = response.boundary[:-1]
    if probe is None:
        return Watched(f"the state of {segments.storage_kind} '{segments.storage_name}'", segments.state_unit,
                       state_start, response.final, rate)
    rows = segments.probe_rows(probe)  # raises InputError naming the probe
    start, _ = response.probe_boundary(probe)
    # The probe is c*x + offset within a segment, so it moves by c times the state's step;
    # written this way the step has no cancellation from the offset.
    final = start + rows[:, 0] * (response.final - state_start)
    return Watched(f"probe '{probe}'", segments.probe(probe).unit, start, final, rate)


#: Probes whose coefficient of the state is zero whatever the part values, per configuration.
def constant_probe(segments: Any, probe: str) -> np.ndarray:
    """Per segment: True where `probe` does not depend on the state whatever the part
    values (a probe behind an open relay), so it is constant in that segment.

    A relative tolerance of rounding noise there (1e-17 of the state, say) would never be
    met; the network layer's probe rows hold such a coefficient as exactly 0, because it
    decides structural zeros from a generic solve, not from the numbers.

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = (fo.Fixture().voltage_source("vin", "in", "gnd").resistor("r", "in", "a", "1k")
    ...       .capacitor("c", "a", "gnd", "1u").switch("k", "a", "b").resistor("rl", "b", "gnd", "1k")
    ...       .probe("v_b", node="b"))
    >>> res = fx.respond(fo.Drive([0, "1m"], end="2m", vin=[1.0, 2.0], k=[1, 0]))
    >>> constant_probe(res.segments, "v_b").tolist()
    [False, True]
    """
    # The network layer makes a coefficient that is zero by structure exactly 0 (decided by
    # a generic solve, see firstorder.network.mna), so no tolerance of noise is needed here.
    return segments.probe_rows(probe)[:, 0] == 0.0


def sample_delays(sample_delay: Any, durations: np.ndarray, *, field: str = "sample_delay", what: str = "segment",
                  ends: np.ndarray | None = None, past_end: str | None = None) -> np.ndarray:
    """Delays after each change (s), one per segment, checked against their segments.

    The one rule for a sample delay, wherever one is given (settling tables, plans,
    analysis files, the Bench): one value for every segment, or one per segment;
    each a finite time >= 0 after its change.

    One delay for every segment is the converter's fixed delay after each
    change: a segment that ends before it (a short dwell) is sampled at its
    end, the last instant it holds, and its ``sample_time`` in the settling
    table is then its ``end`` (the Bench marks it so).  A delay given per
    segment is meant for that segment: past its end it is refused, naming the
    segment, except by no more than the rounding of the instants (a few units
    in the last place of `ends`), taken as the end: a drive stores instants,
    so its durations can differ by that much from the dwells it was built
    from.  `past_end` overrides the choice: ``"refuse"`` or ``"end"``.

    Examples
    --------
    >>> sample_delays("2m", np.array([1e-3, 5e-3]))
    array([0.001, 0.002])
    >>> sample_delays(["2m", "2m"], np.array([1e-3, 5e-3]))
    Traceback (most recent call last):
    ...
    firstorder.errors.InputError: sample_delay[0]: '2m' is past the end of segment 0, which lasts 1 ms; a sample must fall inside its segment, from 0 to 1 ms after the change
    """
    n = durations.size
    if isinstance(sample_delay, (str, int, float, np.number)) and not isinstance(sample_delay, bool):
        delays = np.full(n, parse_value(sample_delay, field=field, unit="s", allow_infinite=True))
        typed: Any = None
    elif isinstance(sample_delay, np.ndarray) and sample_delay.dtype.kind in "iufm" and sample_delay.shape == (n,):
        # Numbers already, one per segment: a million delays need no Python loop (not even
        # the check for booleans below, which a numeric dtype rules out); timedelta64 in seconds.
        delays = parse_array(sample_delay, field=field, unit="s")
        typed = sample_delay
    else:
        array = None if isinstance(sample_delay, (bool, str, bytes, dict)) else np.asarray(sample_delay, dtype=object)
        if array is None or array.ndim != 1 or any(isinstance(v, (bool, np.bool_)) for v in array.tolist()) \
                or array.size != n:
            count = (f"{array.size} delays" if array is not None and array.ndim == 1 and array.size != n
                     else f"a {array.ndim}-D array of shape {array.shape}" if array is not None and array.ndim > 1
                     else shown(sample_delay))
            raise InputError(
                f"{field}: got {count} for {n} {what}s; give one delay in seconds for every {what}, "
                f"or one per {what}"
            )
        typed = array.tolist()
        delays = np.array([
            float(item) if isinstance(item, (float, np.floating))
            else parse_value(item, field=f"{field}[{k}]", unit="s", allow_infinite=True)
            for k, item in enumerate(typed)
        ], dtype=np.float64)
    if past_end is None:
        past_end = "end" if typed is None else "refuse"
    late = delays > durations
    if late.any():
        if past_end == "end":
            delays = np.where(late & np.isfinite(delays), durations, delays)
        elif ends is not None:
            slack = 4.0 * np.spacing(np.abs(ends))
            delays = np.where(late & (delays <= durations + slack), durations, delays)
    bad = ~np.isfinite(delays) | (delays < 0) | (delays > durations)
    if bad.any():
        k = int(np.argmax(bad))
        where = f"{field}[{k}]" if typed is not None else field
        given = typed[k] if typed is not None else sample_delay
        given = float(given) if isinstance(given, np.number) else given
        value, length = float(delays[k]), float(durations[k])
        if not math.isfinite(value) or value < 0:
            raise InputError(f"{where}: {given!r} is not allowed for {what} {k}; a sample delay is a finite time "
                             f">= 0 after the change")
        raise InputError(
            f"{where}: {given!r} is past the end of {what} {k}, which lasts {format_value(length, 's')}; a sample "
            f"must fall inside its {what}, from 0 to {format_value(length, 's')} after the change"
        )
    return delays


def hold_segments(response: Any) -> np.ndarray:
    """Per segment: True where the capacitor holds, cut off from every source by open switches.

    The rule: the storage element is a capacitor, the segment has a switch open, and with
    every open switch taken as an open circuit (its leakage ``r_off`` removed) no source
    level reaches the capacitor's final value (each gain is an exact zero: the network
    layer decides structural zeros from a generic solve, not from the numbers).  What then
    moves the held voltage is leakage only (an open relay's ``r_off``, a meter's input
    resistance), so the segment is judged as droop from the value at its change, not
    against the value the leakage would end at.  A configuration with no resistive path at
    all (tau = inf) holds too.  A discharge through a closed switch to ground with no
    source in reach counts as a hold as well: give a target to judge it against 0 V.

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = (fo.Fixture().voltage_source("vdac", "dac", "gnd").resistor("rs", "dac", "sw", "1k")
    ...       .switch("k", "sw", "h", r_on="0.1", r_off="1G").capacitor("ch", "h", "gnd", "10n")
    ...       .resistor("r_meter", "h", "gnd", "10M"))
    >>> res = fx.respond(fo.Drive([0, "1m"], end="2m", vdac=[2.5, 2.5], k=[1, 0]))
    >>> hold_segments(res).tolist()
    [False, True]
    """
    segments = response.segments
    fixture = getattr(response, "fixture", None)
    n = len(segments)
    if fixture is None or segments.storage_kind != "capacitor" or not fixture.switches:
        return np.zeros(n, dtype=bool)
    # The same parts with ideal open switches: only what the closed switches connect remains.
    ideal = fixture.with_values(**{p.name: (p.r_on, math.inf) for p in fixture.switches})
    per_configuration = np.array([
        not all(states) and not np.any(ideal.configuration(states)[1].gain != 0.0)
        for states in segments.configurations
    ], dtype=bool)
    return per_configuration[segments.configuration_of]


def judged_from(table: Any) -> np.ndarray:
    """Per segment of a settling table, the value its error is taken from: the final value,
    or for a hold (column ``hold``) the value it started holding.  The plots centre the
    tolerance band on it.

    Examples
    --------
    >>> import pandas as pd
    >>> judged_from(pd.DataFrame({"start_value": [0.0, 2.0], "final": [1.0, 0.5], "hold": [False, True]})).tolist()
    [1.0, 2.0]
    """
    final = table["final"].to_numpy()
    if "hold" not in table.columns:
        return final
    return np.where(table["hold"].to_numpy(dtype=bool), table["start_value"].to_numpy(), final)


def check_tolerance(tolerance: Any) -> Tolerance:
    """`tolerance` if it is a :class:`Tolerance`; else an InputError saying how to build one."""
    if not isinstance(tolerance, Tolerance):
        raise InputError(
            f"tolerance: {tolerance!r} is not a Tolerance; build one with Tolerance.absolute(...), "
            f".relative(...), .ppm(...) or .lsb(...)"
        )
    return tolerance


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
        ``residual_at_end`` (``|value at the end - final|``), ``hold`` (judged as
        droop, :func:`hold_segments`) and, with
        `sample_delay`, ``sample_time``, ``value_at_sample``,
        ``error_at_sample`` and ``ok`` (``error_at_sample <= tolerance``).

    Raises
    ------
    InputError
        An unknown probe, a tolerance in the wrong unit, or a sample delay that
        is negative, not finite or past its segment's end (naming the segment).

    See Also
    --------
    settling_summary : the few numbers read first.
    sample_delays : what a sample delay may be.
    firstorder.settling.planning.plan_dwells : the fastest drive that passes.

    Notes
    -----
    Closed form: the error after a change is ``|start_value - final| *
    exp(-t/tau)``, which only falls, so the settle time is ``tau *
    ln(|start_value - final| / limit)`` where that is positive and 0 otherwise.  A
    segment that holds its state (tau = inf) does not move and is settled at 0.

    A hold (``hold`` True) is judged as droop from ``start_value``: its error
    ``|start_value - final| * (1 - exp(-t/tau))`` only grows, so it is settled at 0
    when the droop at its end is within the limit and never otherwise (NaN, "ends
    first"); ``residual_at_end`` and ``error_at_sample`` are the droop there.  A
    relative tolerance of a hold is taken of the held value ``|start_value|``.

    Examples
    --------
    >>> import firstorder as fo
    >>> res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive.steps([(0, 0.0), ("1m", 5.0)], end="15m"))
    >>> table = settling_table(res, fo.Tolerance.lsb(bits=12, span=5.0), sample_delay="12m", probe=None)
    >>> [fo.format_value(t, "s") for t in table["sample_time"]]   # segment 0 lasts 1 ms: read at its end
    ['1 ms', '13 ms']
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

    check_tolerance(tolerance)
    quantity = watched(response, probe)
    check_unit(tolerance, quantity.unit, quantity.label)
    if probe is not None and tolerance.kind == "relative" and response.fixture is not None:
        # A relative limit is taken of the step itself: of rounding noise where the probe
        # cannot move.  The structure decides it does not move (constant_probe).
        still = constant_probe(response.segments, probe)
        if still.any():
            quantity = replace(quantity, final=np.where(still, quantity.start, quantity.final))
    # A probe within a segment is c*x + offset: it settles at the state's rate, and its
    # error decays by the same factor as the state's (the response's decay over the segment).
    value, relative = tolerance._scale()
    limit, settle_time, settled, residual = settling_columns(
        quantity.start, quantity.final, response.tau, response.decay, response.starts, response.ends,
        value, relative)
    hold = hold_segments(response)
    any_hold = bool(hold.any())
    if any_hold:
        # Droop from the held value: |start - final| (1 - e^(-d/tau)), -expm1 for short delays.
        durations = response.ends - response.starts
        droop_end = quantity.step * -np.expm1(-durations * quantity.rate)
        if relative:
            limit = np.where(hold, value * np.abs(quantity.start), limit)
        within = droop_end <= limit
        settle_time = np.where(hold, np.where(within, 0.0, np.nan), settle_time)
        settled = np.where(hold, within, settled)
        residual = np.where(hold, droop_end, residual)
    columns: dict[str, Any] = {
        "start": response.starts,
        "end": response.ends,
        "start_value": quantity.start,
        "final": quantity.final,
        "tolerance": limit,
        "settle_time": settle_time,
        "settled": settled,
        "residual_at_end": residual,
        "hold": hold,
    }
    if sample_delay is not None:
        durations = response.drive.durations
        delays = sample_delays(sample_delay, durations, field="sample_delay", what="segment", ends=response.ends)
        decay = exp_in_place(-delays * quantity.rate)
        error = quantity.step * decay
        if any_hold:
            error = np.where(hold, quantity.step * -np.expm1(-delays * quantity.rate), error)
        columns["sample_time"] = response.starts + delays
        # final + (start - final) * decay, the left limit at a delay that reaches the next change.
        columns["value_at_sample"] = quantity.final + (quantity.start - quantity.final) * decay
        columns["error_at_sample"] = error
        columns["ok"] = error <= limit
    # Every column is a fresh array, the response's read-only per-segment data, or (a fixed
    # tolerance) a read-only broadcast: no copy needed.
    table = pd.DataFrame(columns, index=pd.RangeIndex(settled.size, name="segment"), copy=False)
    table.attrs.update(tolerance=str(tolerance), unit=quantity.unit, watched=quantity.label)
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
        from .._html import table

        verdict = "all samples within tolerance" if self.failing_samples == 0 else (
            f"{self.failing_samples} of {self.segments} samples outside tolerance")
        return table(["", ""], self._rows(), caption=f"Settling summary: {verdict}")


def settling_summary(response: Any, tolerance: Tolerance, sample_delay: Any = None,
                     probe: str | None = None) -> SettlingSummary:
    """Summarise :func:`settling_table`: the worst segment, failures, margins, total time.

    Without `sample_delay` each segment is judged at its end (the latest
    instant it could be sampled).

    See Also
    --------
    settling_table : every segment.

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
    return table_summary(settling_table(response, tolerance, sample_delay=sample_delay, probe=probe))


def table_summary(table) -> SettlingSummary:
    """Summarise a table made by :func:`settling_table`, without making it again.

    A table without sample columns (no sample delay) is judged at each
    segment's end.

    Examples
    --------
    >>> import firstorder as fo
    >>> res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "2m", "12m"], end="22m", vin=[5, 0, 5]))
    >>> table = settling_table(res, fo.Tolerance.lsb(bits=12, span=5.0))
    >>> table_summary(table) == settling_summary(res, fo.Tolerance.lsb(bits=12, span=5.0))
    True
    """
    sampled_at_end = "error_at_sample" not in table.columns
    limit = table["tolerance"].to_numpy()
    error = table["residual_at_end" if sampled_at_end else "error_at_sample"].to_numpy()
    with np.errstate(divide="ignore", invalid="ignore"):
        # A zero limit with a zero error (a relative tolerance on no step) is exactly met.
        ratio = np.where(error == 0.0, 0.0, error / limit)
    settle = table["settle_time"].to_numpy()
    any_settles = bool(np.isfinite(settle).any())
    slowest = int(np.nanargmax(settle)) if any_settles else -1
    start, end = table["start"].to_numpy(), table["end"].to_numpy()
    return SettlingSummary(
        tolerance=table.attrs["tolerance"],
        unit=table.attrs["unit"],
        segments=len(table),
        unsettled=int((~table["settled"]).sum()),
        failing_samples=int((error > limit).sum()),
        worst_segment=int(np.argmax(ratio)),
        worst_ratio=float(np.max(ratio)),
        smallest_margin=float(np.min(limit - error)),
        slowest_segment=slowest,
        longest_settle_time=float(settle[slowest]) if any_settles else math.nan,
        total_time=float(end[-1] - start[0]),
        sampled_at_end=sampled_at_end,
    )



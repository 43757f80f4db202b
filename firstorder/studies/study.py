"""Tolerance studies: every unit of a lot at once, and the per-segment answers for the lot.

A :class:`Study` draws units of a fixture from a spread (:class:`~.lot.Lot`), reduces
each unit's network, and runs the engine over (units, segments) at once: the decay
factors, the scan for the state at every change, and the settling columns.  Each unit's
row is bit for bit what that unit alone gives (:meth:`Study.unit` builds it by hand), as
the engine's operations work element by element and its scan blocks by the number of
segments only.

Fractions of units are exact order statistics of the drawn units: the settle time "met
by 99.9 % of units" is the ``ceil(0.999 * units)``-th smallest, never an interpolation.
A unit whose segment ends before it settles counts as not meeting any time there.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from .. import engine
from ..drive import MEMORY_BUDGET
from ..errors import InputError
from ..response import COMPONENTS, read_initial
from ..segments import Segments
from ..settling.table import check_tolerance, check_unit, sample_delays, watched
from ..units import format_value, parse_array, parse_value, shown
from .lot import Lot
from .spread import Spread

if TYPE_CHECKING:
    from ..drive import Drive
    from ..fixture import Fixture
    from ..response import Response
    from ..settling.tolerance import Tolerance

__all__ = ["LotSettling", "Passing", "Study", "order_statistic", "order_statistics", "rank"]

#: Bytes a study holds per unit and segment (rates, factors, finals, the scan, a probe's
#: values and the settling columns), for the memory check before anything is drawn.
BYTES_PER_UNIT_SEGMENT = 12 * 8


def rank(fraction: float, count: int) -> int:
    """The 0-based rank of the smallest value that `fraction` of `count` values do not
    exceed: ``ceil(fraction * count) - 1`` (0.999 of 1,000 is rank 998, the 999th smallest).

    Examples
    --------
    >>> rank(0.999, 1000), rank(0.5, 3), rank(1.0, 7), rank(1e-9, 7)
    (998, 1, 6, 0)
    """
    # fraction * count is rounded: 0.999 * 1000 is 999.0000000000001, which means 999 here.
    return max(1, math.ceil(fraction * count - 1e-9 * count)) - 1


def order_statistics(values: np.ndarray, fractions: tuple[float, ...]) -> tuple[list[np.ndarray], np.ndarray]:
    """For (units, n) `values`: per column, the value at each fraction's :func:`rank` and the
    largest, from one partial sort (NaN counts as larger than every number).

    Examples
    --------
    >>> at, largest = order_statistics(np.array([[3.0], [1.0], [2.0], [np.nan]]), (0.5, 0.75))
    >>> at, largest
    ([array([2.]), array([3.])], array([nan]))
    """
    count = values.shape[0]
    ranks = sorted({rank(f, count) for f in fractions} | {count - 1})
    by_column = np.ascontiguousarray(values.T)  # each column's units side by side for the partition
    by_column.partition(ranks, axis=1)
    return [by_column[:, rank(f, count)] for f in fractions], by_column[:, count - 1]


def order_statistic(values: np.ndarray, fraction: float) -> np.ndarray:
    """:func:`order_statistics` of one fraction.

    Examples
    --------
    >>> order_statistic(np.array([[3.0], [1.0], [2.0], [np.nan]]), 0.5)
    array([2.])
    """
    return order_statistics(values, (fraction,))[0][0]


@dataclass(frozen=True)
class Passing:
    """The fraction of units whose every sample is inside tolerance, with its interval.

    Attributes
    ----------
    fraction : float
    low, high : float
        The Clopper-Pearson (exact binomial) interval at `confidence`.
    passing, units : int
    confidence : float
    """

    fraction: float
    low: float
    high: float
    passing: int
    units: int
    confidence: float

    def __str__(self) -> str:
        return (f"{self.passing} of {self.units} units pass ({self.fraction:.4%}); "
                f"{self.confidence:.0%} interval {self.low:.4%} to {self.high:.4%} (Clopper-Pearson)")


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


class Study:
    """A lot of units of `fixture` under `drive`, drawn from `spread`; see the module docstring.

    Build with :meth:`firstorder.fixture.Fixture.study`.

    Parameters
    ----------
    fixture : Fixture
    drive : Drive
    spread : Spread
    units : int
        How many units to draw (1 or more).
    seed : int
        Unit k's values depend only on (seed, k).
    initial : float, str
        The starting state of every unit, ``"settled"`` (each unit settled to its own first
        final value) or ``"periodic"`` (each unit's own periodic start).

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = fo.Fixture.rc("10k", "100n")
    >>> drive = fo.Drive([0, "20m"], end="40m", vin=[5.0, 0.0])
    >>> study = fx.study(drive, fo.Spread({"r": "1%", "c": "10%"}), units=2000, seed=7)
    >>> half_lsb = fo.Tolerance.lsb(bits=16, span=5.0)
    >>> table = study.settling(half_lsb)
    >>> print(fo.format_value(table.loc[0, "nominal_settle_time"], "s"), "|",
    ...       fo.format_value(table.loc[0, "settle_time_99.9%"], "s"))
    11.78 ms | 13.05 ms
    >>> print(study.passing(half_lsb, sample_delay="12m"))
    1183 of 2000 units pass (59.1500%); 95% interval 56.9586% to 61.3146% (Clopper-Pearson)
    """

    def __init__(self, fixture: "Fixture", drive: "Drive", spread: Spread, *, units: Any, seed: Any,
                 initial: Any = 0.0) -> None:
        from ..drive import Drive

        if not isinstance(drive, Drive):
            raise InputError(f"drive: {shown(drive)} is not a firstorder Drive")
        count = _count(units, len(drive))
        self.fixture = fixture
        self.drive = drive
        self.spread = spread
        self.units = count
        self.seed = seed
        self.nominal: "Response" = fixture.respond(drive, initial)
        self._initial = initial
        self._lot = Lot(fixture, spread, seed)
        self._draw = self._lot.draw(0, count)
        # Every unit's network at once, each unit bit for bit its own (Segments.of_lot).
        self._segments = Segments.of_lot(fixture, drive, *self._lot.unit_values(drive, self._draw))
        # Everything below runs over (units, segments) at once.
        self._rate = self._segments.rate
        self._holds = self._rate == 0.0
        source_final = self._segments.final
        durations = np.broadcast_to(drive.durations, self._rate.shape)
        self._decay, self._growth = engine.decay_factors(durations.ravel(), self._rate.ravel())
        self._decay = self._decay.reshape(self._rate.shape)
        self._growth = self._growth.reshape(self._rate.shape)
        self._source_final = source_final
        self._start = self._starts(initial, source_final)
        self._boundary = engine.relaxation_scan(self._decay, self._growth, source_final, self._start)
        self._final = np.where(self._holds, self._boundary[:, :-1], source_final)
        self._probes: dict[str, tuple[np.ndarray, np.ndarray, str]] = {}
        self._tau: np.ndarray | None = None
        self._durations: np.ndarray | None = None
        self._scans: dict[str, tuple[np.ndarray, np.ndarray]] = {"total": (self._boundary[:, :-1], self._final)}

    # -- the units --------------------------------------------------------------------------
    @property
    def values(self):
        """A pandas DataFrame: a row per unit (index ``unit``), a column per varied quantity
        (SI units; a gain as a fraction) and the temperature (°C) when the spread has a range."""
        import pandas as pd

        columns = {key: self._draw.values[:, j] for j, key in enumerate(self._lot.keys)}
        if self._draw.temperature is not None:
            columns["temperature"] = self._draw.temperature
        return pd.DataFrame(columns, index=pd.RangeIndex(self.units, name="unit"))

    def unit(self, k: Any) -> "Response":
        """Unit `k`'s response, built by hand: its fixture with its values, its drive with its
        sources' gain and offset, and ``respond``."""
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or not 0 <= k < self.units:
            raise InputError(f"unit: {shown(k)} is not a unit of this study; units are 0 to {self.units - 1}")
        fixture = self._lot.unit_fixture(self._draw, int(k))
        return fixture.respond(self._lot.unit_drive(self.drive, self._draw, int(k)), self._initial)

    @property
    def boundary(self) -> np.ndarray:
        """(units, n + 1): every unit's state at every change and at the end."""
        return self._boundary

    # -- settling ---------------------------------------------------------------------------
    def columns(self, tolerance: "Tolerance", sample_delay: Any = None, probe: str | None = None,
                target: Any = "final", within_segment: bool = True) -> LotSettling:
        """Every unit's settling columns (its settling table's ``settle_time``,
        ``error_at_sample``, ``tolerance`` and ``ok``), as (units, n) arrays.

        `target` is what the error is taken from: ``"final"`` (each unit's own final value:
        settling alone; each row then equals that unit's settling table), ``"nominal"``
        (the nominal unit's final value: the spread of the final value counts), a source's
        name (its level as scheduled: loading and gain error count) or numbers (one, or one
        per segment).  Against another target than ``"final"`` a unit settles only if its
        final value lies within the limit of it, and a relative tolerance is taken of each
        unit's step from its start to the target.  With `within_segment` False a settle time
        may run past its segment's end (the time the unit would need were the segment to
        hold on), rather than NaN there.
        """
        check_tolerance(tolerance)
        unit, label, start, final = self._watched(probe)
        check_unit(tolerance, unit, label)
        value, relative = tolerance._scale()
        shape = self._rate.shape
        if sample_delay is None:
            delays, sample_time = self.drive.durations, self.drive.ends
        else:
            delays = sample_delays(sample_delay, self.drive.durations, field="sample_delay", what="segment",
                                   ends=self.drive.ends)
            sample_time = self.drive.times + delays
        if isinstance(target, str) and target == "final":
            # The table's `ends - times` is each segment's duration, exactly (Drive.durations
            # is that difference), so a zero start and the durations give the same columns.
            size = shape[0] * shape[1]
            times = np.broadcast_to(0.0, (size,))
            ends = self._flat_durations() if within_segment else np.broadcast_to(np.inf, (size,))
            limit, settle, _, residual = engine.settling_columns(
                start.ravel(), final.ravel(), self._flat_tau(), self._decay.ravel(), times, ends, value, relative)
            limit = np.broadcast_to(limit, (shape[0] * shape[1],)).reshape(shape)
            if sample_delay is None:
                error = residual.reshape(shape)
            else:
                # As the settling table forms it: the step times the decay to the sample.
                error = np.abs(final - start) * engine.exp_in_place(-delays * self._rate)
            settle = settle.reshape(shape)
        else:
            aim = self._target(target, probe, unit)
            durations = self.drive.durations if within_segment else np.full(shape[1], np.inf)
            limit, settle, error = _against_target(start, final, aim, self._rate, durations, delays, value, relative)
        return LotSettling(settle, error, limit, error <= limit, sample_time, unit, label)

    def _target(self, target: Any, probe: str | None, unit: str) -> np.ndarray:
        """The target of every segment, (n,), from what `target` names."""
        n = len(self.drive)
        if isinstance(target, str):
            if target == "nominal":
                return np.asarray(watched(self.nominal, probe).final, dtype=np.float64)
            sources = {p.name: p for p in self.fixture.netlist.sources}
            if target in sources:
                source_unit = "V" if sources[target].kind == "voltage_source" else "A"
                if source_unit != unit:
                    raise InputError(f"target: source '{target}' gives {source_unit}, but the watched quantity is "
                                     f"in {unit}; name a source in {unit}, or give the target in numbers")
                return np.asarray(self.drive.levels(target), dtype=np.float64)
            try:
                number = parse_value(target, field="target", unit=unit)
            except InputError:
                raise InputError(f"target: {shown(target)} is not allowed; give 'final', 'nominal', a source of the "
                                 f"fixture {list(sources)}, or numbers ({unit}), one or one per segment") from None
            return np.full(n, number)
        if isinstance(target, (int, float, np.number)) and not isinstance(target, bool):
            return np.full(n, parse_value(target, field="target", unit=unit))
        values = parse_array(target, field="target", unit=unit, what=f"targets in {unit}")
        if values.size != n or not np.isfinite(values).all():
            raise InputError(f"target: got {values.size} values for {n} segments; give one finite target in {unit}, "
                             f"or one per segment")
        return values

    def settling(self, tolerance: "Tolerance", sample_delay: Any = None, probe: str | None = None,
                 target: Any = "final", fractions: Any = (0.5, 0.99, 0.999)):
        """Per segment, for the lot: the nominal settle time, the settle time met by each
        fraction of units and the longest, the error at the sample at each fraction and the
        largest, the fraction of units inside tolerance at the sample (``yield``) and the
        worst unit (the largest error relative to its limit).  A pandas DataFrame.

        The sample is at `sample_delay` after each change, or at each segment's end;
        `target` as in :meth:`columns`.
        """
        import pandas as pd

        chosen = _fractions(fractions)
        lot = self.columns(tolerance, sample_delay, probe, target)
        nominal = self.nominal.settling(tolerance, sample_delay=sample_delay, probe=probe)
        settle = np.where(np.isnan(lot.settle_time), np.inf, lot.settle_time)
        data: dict[str, Any] = {"start": self.drive.times, "sample_time": lot.sample_time,
                                "nominal_settle_time": nominal["settle_time"].to_numpy()}
        at, largest = order_statistics(settle, chosen)
        for fraction, values in zip(chosen, at):
            data[f"settle_time_{_percent(fraction)}"] = _never_as_nan(values)
        data["settle_time_max"] = _never_as_nan(largest)
        at, largest = order_statistics(lot.error_at_sample, chosen)
        for fraction, values in zip(chosen, at):
            data[f"error_{_percent(fraction)}"] = values
        data["error_max"] = largest
        data["yield"] = lot.ok.mean(axis=0)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(lot.limit > 0, lot.error_at_sample / lot.limit, np.inf)
        data["worst_unit"] = np.argmax(ratio, axis=0)
        table = pd.DataFrame(data, index=pd.RangeIndex(len(self.drive), name="segment"))
        table.attrs.update(tolerance=str(tolerance), unit=lot.unit, watched=lot.label, units=self.units, target=target,
                           seed=self.seed, spread=str(self.spread))
        return table

    def passing(self, tolerance: "Tolerance", sample_delay: Any = None, probe: str | None = None,
                target: Any = "final", confidence: Any = 0.95) -> Passing:
        """The fraction of units whose every sample is inside tolerance, with its
        Clopper-Pearson interval at `confidence`."""
        level = _fraction(confidence, "confidence", open_top=True)
        lot = self.columns(tolerance, sample_delay, probe, target)
        passing = int(lot.ok.all(axis=1).sum())
        low, high = clopper_pearson(passing, self.units, level)
        return Passing(passing / self.units, low, high, passing, self.units, level)

    def delay_for(self, tolerance: "Tolerance", fraction: Any = 0.999, probe: str | None = None,
                  target: Any = "final") -> np.ndarray:
        """Per segment, the sample delay that `fraction` of units needs after the change:
        the exact order statistic of each unit's own settle time, which may run past the
        segment's end (the dwell must then grow; each unit starts from where this drive
        leaves it), NaN where that many units never settle (a final value outside the limit
        of the target, or a held state outside it)."""
        chosen = _fraction(fraction, "fraction")
        lot = self.columns(tolerance, None, probe, target, within_segment=False)
        settle = np.where(np.isnan(lot.settle_time), np.inf, lot.settle_time)
        return _never_as_nan(order_statistic(settle, chosen))

    # -- curves -----------------------------------------------------------------------------
    def evaluate(self, t: Any, component: str = "total", probe: str | None = None) -> np.ndarray:
        """(units, len(t)): every unit's `component` (of the state, or of `probe`) at times
        `t`, each row what ``study.unit(k).evaluate(t, (component,), probe)`` gives."""
        if component not in COMPONENTS:
            raise InputError(f"component: {shown(component)} is not one of {list(COMPONENTS)}")
        times = self.nominal.read_times(t)
        flat = times.reshape(-1)
        need = self.units * flat.size * 4 * 8
        if need > MEMORY_BUDGET:
            raise InputError(f"t: {flat.size:,} times for {self.units:,} units would need about "
                             f"{need / 2**30:.1f} GiB; the budget is {MEMORY_BUDGET / 2**30:.0f} GiB")
        segment = engine.SegmentLocator(flat, self.drive.times, self.nominal.segments.rate, within=True).segment
        decay = self.drive.times[segment] - flat
        decay = decay * self._rate[:, segment]  # (s - t) * r, the exponents of every path
        engine.exp_in_place(decay, nonpositive=True)
        key = "total" if component in ("forced", "natural") else component
        start, final = self._component_scan(key)
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
            gain, offset, _ = self._probe_rows(probe)
            values *= gain[:, segment]
            if component in ("total", "zero_state", "forced"):
                values += offset[:, segment]
        return values.reshape((self.units,) + times.shape)

    def envelope(self, t: Any, fraction: Any = 0.998, component: str = "total",
                 probe: str | None = None) -> tuple[np.ndarray, np.ndarray]:
        """``(low, high)`` at times `t`: the band holding the central `fraction` of units
        (at least that many units lie within it at every time; each edge an exact order
        statistic of the units)."""
        chosen = _fraction(fraction, "fraction")
        values = self.evaluate(t, component, probe)
        flat = values.reshape(self.units, -1)
        tail = math.floor((1.0 - chosen) / 2.0 * self.units + 1e-9 * self.units)
        by_time = np.ascontiguousarray(flat.T)
        by_time.partition(sorted({tail, self.units - 1 - tail}), axis=1)
        shape = values.shape[1:]
        return by_time[:, tail].reshape(shape), by_time[:, self.units - 1 - tail].reshape(shape)

    # -- display ----------------------------------------------------------------------------
    def __repr__(self) -> str:
        return (f"<Study: {self.units} units, seed {self.seed}, {len(self.drive)} segments; "
                f"spread {self.spread}>")

    def _repr_html_(self) -> str:
        from html import escape

        rows = [("units", str(self.units)), ("seed", str(self.seed)), ("spread", str(self.spread)),
                ("segments", str(len(self.drive))),
                ("nominal time constant", format_value(float(np.min(self.nominal.tau)), "s"))]
        body = "".join(f"<tr><th style='text-align:left'>{escape(k)}</th><td>{escape(v)}</td></tr>" for k, v in rows)
        return f"<table><caption>Tolerance study</caption>{body}</table>"

    # -- inside -----------------------------------------------------------------------------
    def _starts(self, initial: Any, source_final: np.ndarray) -> np.ndarray:
        """Every unit's starting state, read as :meth:`Response` reads it, one per unit."""
        start = read_initial(initial, self.nominal.state_unit)
        if start == "settled":
            if (self._rate[:, 0] == 0.0).any():
                raise InputError("initial: 'settled' needs a first segment that settles, but segment 0 holds its "
                                 "state (no resistive path); give the starting state as a number")
            return source_final[:, 0].copy()
        if start == "periodic":
            # Each unit's own periodic start, from its own response (the one reading of it).
            return np.array([self.unit(u).initial for u in range(self.units)])
        return np.full(self.units, float(start))

    def _watched(self, probe: str | None) -> tuple[str, str, np.ndarray, np.ndarray]:
        """The watched quantity of every unit: unit, label, start and final (units, n)."""
        state_start = self._boundary[:, :-1]
        if probe is None:
            segments = self.nominal.segments
            return (segments.state_unit, f"the state of {segments.storage_kind} '{segments.storage_name}'",
                    state_start, self._final)
        gain, offset, unit = self._probe_rows(probe)
        start = gain * state_start + offset
        # A probe is c*x + offset within a segment: it moves by c times the state's step.
        final = start + gain * (self._final - state_start)
        return unit, f"probe '{probe}'", start, final


    def _flat_tau(self) -> np.ndarray:
        """Every unit's tau of every segment, flat (as Segments.tau forms it), made once."""
        if self._tau is None:
            rate = self._rate.ravel()
            self._tau = np.where(rate > 0, 1.0 / np.where(rate > 0, rate, 1.0), np.inf)
        return self._tau

    def _flat_durations(self) -> np.ndarray:
        """Every segment's duration for every unit, flat, made once."""
        if self._durations is None:
            self._durations = np.tile(self.drive.durations, self.units)
        return self._durations

    def _probe_rows(self, probe: str) -> tuple[np.ndarray, np.ndarray, str]:
        """(units, n) each: the probe's state coefficient and its offset from the sources,
        and its unit (the probe is ``gain * x + offset`` within a segment)."""
        if probe not in self._probes:
            the_probe = self.nominal.segments.probe(probe)  # an InputError naming the probes
            rows = self._segments.probe_rows(probe)  # (units, n, 1 + m)
            levels = self._segments.unit_levels
            # Each unit's offset as Response forms it (one einsum per unit, the same sums).
            offsets = np.stack([np.einsum("ij,ij->i", rows[u, :, 1:], levels[u]) for u in range(self.units)])
            self._probes[probe] = (rows[:, :, 0], offsets, the_probe.unit)
        return self._probes[probe]

    def _component_scan(self, key: str) -> tuple[np.ndarray, np.ndarray]:
        """(units, n) each: the state component `key` just after each change, and the value
        it heads for in each segment (its held value where the segment holds)."""
        if key not in self._scans:
            if key == "zero_input":  # from the start, every source at zero
                target, start = np.zeros_like(self._source_final), self._start
            else:  # zero_state: from rest, the sources as scheduled
                target, start = self._source_final, np.zeros(self.units)
            boundary = engine.relaxation_scan(self._decay, self._growth, target, start)
            self._scans[key] = (boundary[:, :-1], np.where(self._holds, boundary[:, :-1], target))
        return self._scans[key]

    # -- budget -----------------------------------------------------------------------------
    def budget(self, segment: Any, quantity: Any = "settle_time", tolerance: Any = None, sample_delay: Any = None,
               probe: str | None = None, interval: Any = "symmetric"):
        """The uncertainty budget (JCGM 100) of `quantity` (``"settle_time"``, ``"tau"``,
        ``"final"`` or ``"error_at_sample"``) in `segment`, beside this study's Monte Carlo
        result and the check of linear propagation (JCGM 101, clause 8).

        See Also
        --------
        firstorder.studies.budget.budget : what this calls, and its rules.
        """
        from .budget import budget

        return budget(self, segment, quantity, tolerance, sample_delay, probe, interval)


def _against_target(start: np.ndarray, final: np.ndarray, aim: np.ndarray, rate: np.ndarray, durations: np.ndarray,
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


def clopper_pearson(passing: int, units: int, confidence: float) -> tuple[float, float]:
    """The exact (Clopper-Pearson) binomial interval for `passing` of `units`.

    Examples
    --------
    >>> low, high = clopper_pearson(0, 100, 0.95)
    >>> low, round(high, 4)
    (0.0, 0.0362)
    """
    from scipy.stats import beta

    tail = (1.0 - confidence) / 2.0
    low = 0.0 if passing == 0 else float(beta.ppf(tail, passing, units - passing + 1))
    high = 1.0 if passing == units else float(beta.ppf(1.0 - tail, passing + 1, units - passing))
    return low, high


def _count(units: Any, segments: int) -> int:
    if isinstance(units, bool) or not isinstance(units, (int, np.integer)) or units < 1:
        raise InputError(f"units: {shown(units)} is not allowed; give a whole number of units >= 1")
    need = int(units) * segments * BYTES_PER_UNIT_SEGMENT
    if need > MEMORY_BUDGET:
        raise InputError(
            f"units: {int(units):,} units of {segments:,} segments would need about {need / 2**30:.1f} GiB; the "
            f"budget is {MEMORY_BUDGET / 2**30:.0f} GiB: study fewer units or a shorter drive")
    return int(units)


def _fraction(value: Any, field: str, open_top: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.number)) or not (
            0.0 < float(value) < 1.0 or (not open_top and float(value) == 1.0)):
        allowed = "between 0 and 1 (both excluded)" if open_top else "in (0, 1]"
        raise InputError(f"{field}: {shown(value)} is not allowed; give a fraction of units {allowed}")
    return float(value)


def _fractions(fractions: Any) -> tuple[float, ...]:
    if isinstance(fractions, (int, float, np.number)) and not isinstance(fractions, bool):
        fractions = (fractions,)
    if not isinstance(fractions, (tuple, list)) or not fractions:
        raise InputError(f"fractions: {shown(fractions)} is not allowed; give fractions of units such as (0.5, 0.99)")
    return tuple(_fraction(f, f"fractions[{i}]") for i, f in enumerate(fractions))


def _percent(fraction: float) -> str:
    return f"{fraction * 100:g}%"


def _never_as_nan(times: np.ndarray) -> np.ndarray:
    """Settle times with 'never within the segment' (inf in the order statistics) as NaN."""
    return np.where(np.isinf(times), np.nan, times)

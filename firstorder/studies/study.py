"""Tolerance studies: the units of a lot a chunk at a time, and the per-segment answers.

A :class:`Study` draws units of a fixture from a spread (:class:`~.lot.Lot`) and runs
them through the engine a chunk of units at a time (:class:`~.run.UnitsRun`: every unit's
network reduced in one batched solve, the decay factors, the scan and the settling
columns over (units, segments) at once).  Each unit's row is bit for bit what that unit
alone gives (:meth:`Study.unit` builds it by hand), so no number depends on the chunks.

A study holds one chunk's (units, segments) arrays at a time, unless it is asked to keep
them (``keep=True``) or has only one chunk; each question then runs the chunks again and
merges their small summaries (:mod:`.summary`).  Fractions of units are exact order
statistics of the drawn units: the settle time "met by 99.9 % of units" is the
``ceil(0.999 * units)``-th smallest, never an interpolation; a summary keeps per segment
the few largest (or smallest) values that rank needs.  A unit whose segment ends before
it settles counts as not meeting any time there.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from .. import engine
from ..drive import MEMORY_BUDGET
from ..errors import InputError
from ..response import COMPONENTS
from ..settling.table import check_tolerance, check_unit, watched
from ..units import parse_array, parse_value, shown
from .lot import Lot
from .progress import chunk_done
from .run import LotSettling, Request, UnitsRun, read_delays
from .spread import Spread
from .summary import Ranked, SettlingSummary, merge_all, rank, sides

if TYPE_CHECKING:
    from ..drive import Drive
    from ..fixture import Fixture
    from ..response import Response
    from ..settling.tolerance import Tolerance

__all__ = ["CHUNK_ELEMENTS", "LotSettling", "Passing", "Study", "order_statistic", "order_statistics", "rank"]

#: Bytes a study holds per unit and segment (rates, factors, finals, the scan, a probe's
#: values and the settling columns), for the memory check of a kept study.
BYTES_PER_UNIT_SEGMENT = 12 * 8

#: Unit-segments per chunk when a study does not keep its units (about 400 MB of arrays at
#: most, at BYTES_PER_UNIT_SEGMENT); a size of the drive, never of threads or workers.
CHUNK_ELEMENTS = 2 ** 22

#: A study of at least this many unit-segments over several chunks shows a progress bar.
PROGRESS_ELEMENTS = 2 ** 24

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


class Study:
    """A lot of units of `fixture` under `drive`, drawn from `spread`; see the module docstring.

    Build with :meth:`firstorder.fixture.Fixture.study`.

    Parameters
    ----------
    fixture : Fixture
    drive : Drive
    spread : Spread
    units : int or "adaptive"
        How many units to draw (1 or more), or ``"adaptive"``: batches of `batch` units
        until every figure is within `numerical_tolerance` (JCGM 101, 7.9; see
        :mod:`.adaptive`), which needs `tolerance`.
    seed : int
        Unit k's values depend only on (seed, k).
    initial : float, str
        The starting state of every unit, ``"settled"`` (each unit settled to its own first
        final value) or ``"periodic"`` (each unit's own periodic start).
    keep : bool
        Keep every unit's (units, segments) arrays (faster repeated questions, memory
        proportional to units x segments); by default a study holds one chunk of
        :data:`CHUNK_ELEMENTS` unit-segments at a time and runs the chunks again for each
        question.  The numbers are the same either way, bit for bit.
    chunk : int, optional
        Units per chunk (default: as many as fit :data:`CHUNK_ELEMENTS`, or every unit in
        one when kept); it changes memory and speed, never a number.  A kept study given a
        chunk holds its units in runs of that many, so building it passes chunk by chunk
        (:func:`~.progress.each_chunk` hears each one).
    progress : bool
        Show a progress bar (tqdm) while a long study runs its chunks; False silences it.
    tolerance, sample_delay, probe, target, fractions
        The figures the study is about: what its notebook display shows, and what
        ``units="adaptive"`` holds within `numerical_tolerance` (as for :meth:`settling`).
    numerical_tolerance : float or str
        With ``units="adaptive"``: the relative numerical tolerance of each figure
        (``0.01`` or ``"1%"``).
    batch : int
        With ``units="adaptive"``: units per batch (JCGM 101 7.9.4 takes 10^4).

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
                 initial: Any = 0.0, keep: Any = False, chunk: Any = None, progress: Any = True,
                 tolerance: Any = None, sample_delay: Any = None, probe: str | None = None, target: Any = "final",
                 fractions: Any = (0.5, 0.99, 0.999), numerical_tolerance: Any = None, batch: Any = 10_000,
                 client: Any = None) -> None:
        from ..drive import Drive

        if not isinstance(drive, Drive):
            raise InputError(f"drive: {shown(drive)} is not a firstorder Drive")
        for name, flag in (("keep", keep), ("progress", progress)):
            if not isinstance(flag, (bool, np.bool_)):
                raise InputError(f"{name}: {shown(flag)} is not allowed; give True or False")
        adaptive = isinstance(units, str) and units == "adaptive"
        if numerical_tolerance is not None and not adaptive:
            raise InputError(f"numerical_tolerance: {shown(numerical_tolerance)} is given, but units is "
                             f"{shown(units)}; a numerical tolerance goes with units='adaptive'")
        self.fixture, self.drive, self.spread, self.seed = fixture, drive, spread, seed
        self._client = None
        if client is not None:
            from ..cluster import check_client

            self._client = check_client(client)
        self.keep, self.progress = bool(keep), bool(progress)
        self.nominal: "Response" = fixture.respond(drive, initial)
        self._initial = initial
        self._lot = Lot(fixture, spread, seed)
        self._figures = None
        if tolerance is not None:
            self._figures = (tolerance, sample_delay, probe, target, _fractions(fractions))
            self._read(tolerance, sample_delay, probe, target)  # checked now, not at the first display
        self._chunk_units = _chunk(chunk)
        self._runs: dict[tuple[int, int], UnitsRun] = {}
        self._cache = False
        self._shown: dict[str, Any] = {}
        self.adaptive = None
        if adaptive:
            from .adaptive import run_adaptive

            if tolerance is None:
                raise InputError("tolerance: units='adaptive' needs the tolerance of the figures it holds within "
                                 "numerical_tolerance, such as fo.Tolerance.lsb(16, 5.0)")
            self.units = 0  # while the batches run
            self.adaptive = run_adaptive(self, numerical_tolerance, batch)
            units = self.adaptive.units
        self.units = _count(units, len(drive), self.keep)
        chunks = self._chunks()
        # Held: every unit when kept, else the one chunk of a study that has only one.
        self._cache = self.keep or len(chunks) == 1
        for done, (first, size) in enumerate(chunks, 1):
            if self._cache:
                self._run(first, size)
                chunk_done(done, len(chunks))
            else:  # refuses a bad unit now, naming it, as a run would
                self._lot.unit_values(drive, self._lot.draw(first, size))

    # -- the units --------------------------------------------------------------------------
    @property
    def values(self):
        """A pandas DataFrame: a row per unit (index ``unit``), a column per varied quantity
        (SI units; a gain as a fraction) and the temperature (°C) when the spread has a range."""
        import pandas as pd

        draws = [self._lot.draw(first, size) for first, size in self._chunks()]
        columns = {key: np.concatenate([d.values[:, j] for d in draws]) for j, key in enumerate(self._lot.keys)}
        if self.spread.temperature is not None:
            columns["temperature"] = np.concatenate([d.temperature for d in draws])
        return pd.DataFrame(columns, index=pd.RangeIndex(self.units, name="unit"))

    def unit(self, k: Any) -> "Response":
        """Unit `k`'s response, built by hand: its fixture with its values, its drive with its
        sources' gain and offset, and ``respond``."""
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or not 0 <= k < self.units:
            raise InputError(f"unit: {shown(k)} is not a unit of this study; units are 0 to {self.units - 1}")
        draw = self._lot.draw(int(k), 1)
        return self._lot.unit_fixture(draw, 0).respond(self._lot.unit_drive(self.drive, draw, 0), self._initial)

    @property
    def boundary(self) -> np.ndarray:
        """(units, n + 1): every unit's state at every change and at the end (every unit's
        row at once, whether kept or not)."""
        return np.concatenate([run.boundary for run in self._each_run()])

    # -- settling ---------------------------------------------------------------------------
    def columns(self, tolerance: "Tolerance", sample_delay: Any = None, probe: str | None = None,
                target: Any = "final", within_segment: bool = True) -> LotSettling:
        """Every unit's settling columns (its settling table's ``settle_time``,
        ``error_at_sample``, ``tolerance`` and ``ok``), as (units, n) arrays (every unit at
        once, whether kept or not; the other questions hold a chunk at a time).

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
        delays, aim = self._read(tolerance, sample_delay, probe, target)
        parts = [run.columns(tolerance, delays, probe, aim, within_segment) for run in self._each_run()]
        first = parts[0]
        return LotSettling(*(np.concatenate([getattr(p, name) for p in parts])
                             for name in ("settle_time", "error_at_sample", "limit", "ok")),
                           first.sample_time, first.unit, first.label)

    def summary(self, tolerance: "Tolerance", sample_delay: Any = None, probe: str | None = None,
                target: Any = "final", fractions: Any = (0.5, 0.99, 0.999), within_segment: bool = True,
                units: int | None = None, first: int = 0) -> SettlingSummary:
        """The merged :class:`~.summary.SettlingSummary` of units ``first .. first + units - 1``
        (default: every unit from `first`), keeping per segment what the `fractions` and the
        largest need (a chunk of units at a time)."""
        count = self.units - first if units is None else units
        delays, aim = self._read(tolerance, sample_delay, probe, target)
        ranks = [rank(f, count) for f in _fractions(fractions)] + [count - 1]
        keep = sides(ranks, count)
        need = 2 * sum(keep) * len(self.drive) * 8 * 3  # both columns; a merge holds three summaries
        if need > MEMORY_BUDGET:
            raise InputError(f"fractions: {shown(fractions)} of {count:,} units keep {sum(keep):,} values per "
                             f"segment, about {need / 2**30:.1f} GiB; the budget is {MEMORY_BUDGET / 2**30:.0f} GiB: "
                             f"ask fractions nearer 0 or 1, or study fewer units")
        request = Request(tolerance, delays, probe, aim, within_segment, keep, keep)
        if self._client is not None and not self._cache:
            # Each chunk a task on the cluster; only its summary comes back.
            from ..cluster import summary_on

            return summary_on(self._client, self, request, self._chunks(first, count), self.progress)
        return merge_all(run.summary(request) for run in self._each_run(first, count))

    @property
    def initial(self) -> Any:
        """The starting state of every unit, as given."""
        return self._initial

    def settling(self, tolerance: "Tolerance", sample_delay: Any = None, probe: str | None = None,
                 target: Any = "final", fractions: Any = (0.5, 0.99, 0.999), units: int | None = None,
                 first: int = 0):
        """Per segment, for the lot: the nominal settle time, the settle time met by each
        fraction of units and the longest, the error at the sample at each fraction and the
        largest, the fraction of units inside tolerance at the sample (``yield``) and the
        worst unit (the largest error relative to its limit; of equals, the lowest unit).
        A pandas DataFrame.

        The sample is at `sample_delay` after each change, or at each segment's end;
        `target` as in :meth:`columns`.  `first` and `units` take a range of the units.
        """
        import pandas as pd

        chosen = _fractions(fractions)
        merged = self.summary(tolerance, sample_delay, probe, target, chosen, units=units, first=first)
        count = merged.count
        nominal = self.nominal.settling(tolerance, sample_delay=sample_delay, probe=probe)
        delays = read_delays(sample_delay, self.drive)
        data: dict[str, Any] = {"start": self.drive.times,
                                "sample_time": self.drive.ends if delays is None else self.drive.times + delays,
                                "nominal_settle_time": nominal["settle_time"].to_numpy()}
        for fraction in chosen:
            data[f"settle_time_{_percent(fraction)}"] = _never_as_nan(merged.settle.at(rank(fraction, count)))
        data["settle_time_max"] = _never_as_nan(merged.settle.at(count - 1))
        for fraction in chosen:
            data[f"error_{_percent(fraction)}"] = merged.error.at(rank(fraction, count))
        data["error_max"] = merged.error.at(count - 1)
        data["yield"] = merged.inside / count
        data["worst_unit"] = merged.worst.unit
        table = pd.DataFrame(data, index=pd.RangeIndex(len(self.drive), name="segment"))
        unit = self.nominal.state_unit if probe is None else self.nominal.segments.probe(probe).unit
        table.attrs.update(tolerance=str(tolerance), unit=unit, watched=_label(self.nominal, probe), units=count,
                           target=target, seed=self.seed, spread=str(self.spread), passing=merged.passing)
        return table

    def passing(self, tolerance: "Tolerance", sample_delay: Any = None, probe: str | None = None,
                target: Any = "final", confidence: Any = 0.95) -> Passing:
        """The fraction of units whose every sample is inside tolerance, with its
        Clopper-Pearson interval at `confidence`."""
        level = _fraction(confidence, "confidence", open_top=True)
        return self.passing_of(self.summary(tolerance, sample_delay, probe, target, (1.0,)).passing, level)

    def passing_of(self, passing: int, confidence: float = 0.95) -> Passing:
        """:meth:`passing` from a count of passing units (``settling(...).attrs["passing"]``
        has it, for the same question), without running the units again."""
        low, high = clopper_pearson(passing, self.units, confidence)
        return Passing(passing / self.units, low, high, passing, self.units, confidence)

    def delay_for(self, tolerance: "Tolerance", fraction: Any = 0.999, probe: str | None = None,
                  target: Any = "final") -> np.ndarray:
        """Per segment, the sample delay that `fraction` of units needs after the change:
        the exact order statistic of each unit's own settle time, which may run past the
        segment's end (the dwell must then grow; each unit starts from where this drive
        leaves it), NaN where that many units never settle (a final value outside the limit
        of the target, or a held state outside it)."""
        chosen = _fraction(fraction, "fraction")
        merged = self.summary(tolerance, None, probe, target, (chosen,), within_segment=False)
        return _never_as_nan(merged.settle.at(rank(chosen, self.units)))

    def segment_values(self, segment: int, quantity: str, tolerance: Any = None, sample_delay: Any = None,
                       probe: str | None = None) -> tuple[np.ndarray, str]:
        """Every unit's `quantity` in one `segment` (``"tau"``, ``"final"``, ``"settle_time"``
        (past the segment's end too) or ``"error_at_sample"``), and its unit; a chunk at a time."""
        parts, unit = [], "s"
        if quantity in ("settle_time", "error_at_sample"):
            delays, aim = self._read(tolerance, sample_delay if quantity == "error_at_sample" else None, probe, "final")
        for run in self._each_run():
            if quantity == "tau":
                parts.append(run.tau()[:, segment])
            elif quantity == "final":
                unit, _, _, final = run.watched(probe)
                parts.append(np.array(final[:, segment]))
            else:
                lot = run.columns(tolerance, delays, probe, aim, within_segment=quantity == "error_at_sample",
                                  segment=segment)
                column = lot.settle_time if quantity == "settle_time" else lot.error_at_sample
                parts.append(np.array(column[:, 0]))
                unit = "s" if quantity == "settle_time" else lot.unit
        return np.concatenate(parts), unit

    # -- curves -----------------------------------------------------------------------------
    def evaluate(self, t: Any, component: str = "total", probe: str | None = None) -> np.ndarray:
        """(units, len(t)): every unit's `component` (of the state, or of `probe`) at times
        `t`, each row what ``study.unit(k).evaluate(t, (component,), probe)`` gives."""
        times, flat, segment = self._times(t, component, self.units)
        values = np.concatenate([run.evaluate(segment, flat, component, probe) for run in self._each_run()])
        return values.reshape((self.units,) + times.shape)

    def envelope(self, t: Any, fraction: Any = 0.998, component: str = "total",
                 probe: str | None = None) -> tuple[np.ndarray, np.ndarray]:
        """``(low, high)`` at times `t`: the band holding the central `fraction` of units
        (at least that many units lie within it at every time; each edge an exact order
        statistic of the units), a chunk of units at a time."""
        chosen = _fraction(fraction, "fraction")
        times, flat, segment = self._times(t, component, min(self._chunk_size(), self.units))
        tail = math.floor((1.0 - chosen) / 2.0 * self.units + 1e-9 * self.units)
        low, high = sides([tail, self.units - 1 - tail], self.units)
        merged = merge_all(Ranked.of(run.evaluate(segment, flat, component, probe), low, high)
                           for run in self._each_run())
        return merged.at(tail).reshape(times.shape), merged.at(self.units - 1 - tail).reshape(times.shape)

    # -- display ----------------------------------------------------------------------------
    def __repr__(self) -> str:
        return (f"<Study: {self.units} units, seed {self.seed}, {len(self.drive)} segments; "
                f"spread {self.spread}>")

    def _repr_html_(self) -> str:
        from .display import study_html

        return study_html(self)

    def _repr_markdown_(self) -> str:
        from .display import study_markdown

        return study_markdown(self)

    # -- inside -----------------------------------------------------------------------------
    def _read(self, tolerance: Any, sample_delay: Any, probe: str | None, target: Any):
        """The sample delays (None: at each end) and the target (None: each unit's own final)
        of a question, checked once for the whole study."""
        check_tolerance(tolerance)
        unit = self.nominal.state_unit if probe is None else self.nominal.segments.probe(probe).unit
        check_unit(tolerance, unit, _label(self.nominal, probe))
        delays = read_delays(sample_delay, self.drive)
        aim = None if isinstance(target, str) and target == "final" else self._target(target, probe, unit)
        return delays, aim

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

    def _times(self, t: Any, component: str, units: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if component not in COMPONENTS:
            raise InputError(f"component: {shown(component)} is not one of {list(COMPONENTS)}")
        times = self.nominal.read_times(t)
        flat = times.reshape(-1)
        need = units * flat.size * 4 * 8
        if need > MEMORY_BUDGET:
            raise InputError(f"t: {flat.size:,} times for {units:,} units would need about "
                             f"{need / 2**30:.1f} GiB; the budget is {MEMORY_BUDGET / 2**30:.0f} GiB")
        segment = engine.SegmentLocator(flat, self.drive.times, self.nominal.segments.rate, within=True).segment
        return times, flat, segment

    def _chunk_size(self) -> int:
        if self.keep and self.units and self._chunk_units is None:
            return self.units
        return self._chunk_units or max(1, CHUNK_ELEMENTS // max(len(self.drive), 1))

    def _chunks(self, first: int = 0, count: int | None = None) -> list[tuple[int, int]]:
        """``(first, size)`` of every chunk of units ``first .. first + count - 1``; chunks
        start at multiples of the chunk size, so held runs of the whole study are reused."""
        count = self.units - first if count is None else count
        size, stop = self._chunk_size(), first + count
        return [(max(a, first), min(a + size, stop) - max(a, first)) for a in range(first - first % size, stop, size)]

    def _run(self, first: int, size: int) -> UnitsRun:
        """The run of units ``first .. first + size - 1`` (held when the study holds its runs)."""
        run = self._runs.get((first, size))
        if run is None:
            run = UnitsRun(self._lot, self.drive, self._lot.draw(first, size), self._initial, self.nominal)
            if self._cache:
                self._runs[(first, size)] = run
        return run

    def _each_run(self, first: int = 0, count: int | None = None):
        """Every chunk's run in turn, with a progress bar on a long study."""
        chunks = self._chunks(first, count)
        bar = None
        if self.progress and len(chunks) > 1 and sum(n for _, n in chunks) * len(self.drive) >= PROGRESS_ELEMENTS:
            from tqdm.auto import tqdm

            bar = tqdm(total=len(chunks), desc="study chunks", unit="chunk", leave=False)
        try:
            for done, (a, n) in enumerate(chunks, 1):
                yield self._run(a, n)
                chunk_done(done, len(chunks))
                if bar is not None:
                    bar.update(1)
        finally:
            if bar is not None:
                bar.close()

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


def _label(nominal: "Response", probe: str | None) -> str:
    if probe is None:
        segments = nominal.segments
        return f"the state of {segments.storage_kind} '{segments.storage_name}'"
    return f"probe '{probe}'"


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


def _count(units: Any, segments: int, keep: bool) -> int:
    if isinstance(units, bool) or not isinstance(units, (int, np.integer)) or units < 1:
        raise InputError(f"units: {shown(units)} is not allowed; give a whole number of units >= 1, or 'adaptive'")
    need = int(units) * segments * BYTES_PER_UNIT_SEGMENT
    if keep and need > MEMORY_BUDGET:
        raise InputError(
            f"units: {int(units):,} units of {segments:,} segments kept (keep=True) would need about "
            f"{need / 2**30:.1f} GiB; the budget is {MEMORY_BUDGET / 2**30:.0f} GiB: leave keep=False (a chunk at a "
            f"time), or study fewer units or a shorter drive")
    return int(units)


def _chunk(chunk: Any) -> int | None:
    if chunk is None:
        return None
    if isinstance(chunk, bool) or not isinstance(chunk, (int, np.integer)) or chunk < 1:
        raise InputError(f"chunk: {shown(chunk)} is not allowed; give a whole number of units per chunk >= 1, "
                         f"or leave it out")
    return int(chunk)


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

"""Worst case: per segment, the longest settle time and the largest error at the sample that
a fixture's bands allow, and the values of every quantity that give them.

The box is every varied quantity between its band's extremes (before its tempco) and the
temperature over its range; a normal band without ``within`` has no extremes, so it is
bounded at ±3 standard deviations (:data:`NORMAL_SPAN`; the table's ``attrs`` say which).
The search, per segment and for each of the two results:

1. every corner of the box (at most 2**16), in batches of :data:`BATCH` units run through
   the engine at once as the units of a study are (:class:`~.run.UnitsRun`: every
   corner's network in one batched solve, ``Segments.of_lot``; each bit for bit the unit
   built by hand with ``Lot.unit_fixture`` and ``Lot.unit_drive``);
2. from the worst corner, each quantity on its own across the box at :data:`LINE` points:
   where the result is not monotonic along it, its influence is not monotonic;
3. over those quantities only (the others stay at the corner), a bounded local search
   (``scipy.optimize.minimize``, Powell's method: it needs no derivative, and a settle time
   has kinks where a unit starts to settle at once), from the best point found so far.

The quantities searched are named in the columns ``searched (settle_time)`` and
``searched (error_at_sample)``.  An influence that turns back between two of the
:data:`LINE` points along the axis, or only off the axes, is not seen.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import InputError
from ..response import read_initial
from ..settling.table import check_tolerance, check_unit, sample_delays
from ..units import shown
from .budget import unit_draw
from .lot import Draw, Lot
from .run import UnitsRun
from .spread import Normal, Spread, _number

if TYPE_CHECKING:
    from ..drive import Drive
    from ..fixture import Fixture

__all__ = ["BATCH", "LINE", "MAX_CORNERS", "NORMAL_SPAN", "box", "worst_case"]

#: Corners are 2**d for d quantities (the temperature counts as one): at most this many.
MAX_CORNERS = 2 ** 16
#: Units run through the engine at once.
BATCH = 4096
#: Points across the box, per quantity, to see whether its influence is monotonic.
LINE = 9
#: A normal band without ``within`` is searched within this many standard deviations.
NORMAL_SPAN = 3.0


def box(lot: Lot) -> tuple[list[str], np.ndarray, np.ndarray, list[str]]:
    """The keys, low and high ends of the search box, and the keys bounded at ±3 sd."""
    keys, lows, highs, normal = [], [], [], []
    for quantity in lot.quantities:
        low, high = quantity.extremes(None)
        band = quantity.band
        if isinstance(band, Normal) and band.within is None:
            scale = 1.0 if quantity.field == "gain" else abs(quantity.nominal)
            sd = _number(band.sd, quantity.key).value * (scale if band.relative else 1.0)
            low, high = quantity.nominal - NORMAL_SPAN * sd, quantity.nominal + NORMAL_SPAN * sd
            normal.append(quantity.key)
            if (quantity.field in ("value", "r_off") and not low > 0) or (quantity.field == "r_on" and low < 0):
                raise InputError(f"spread {quantity.key}: {band} reaches {low:.6g} {quantity.unit} at -3 sd; the "
                                 f"value must stay positive: truncate it with within=")
        keys.append(quantity.key)
        lows.append(low)
        highs.append(high)
    if lot.spread.temperature is not None:
        keys.append("temperature")
        lows.append(lot.spread.temperature[0])
        highs.append(lot.spread.temperature[1])
    return keys, np.array(lows, dtype=float), np.array(highs, dtype=float), normal


class _Runner:
    """Units at given points of the box, run through the engine together."""

    def __init__(self, fixture: "Fixture", drive: "Drive", lot: Lot, tolerance: Any, sample_delay: Any,
                 probe: str | None, initial: Any) -> None:
        self.fixture, self.drive, self.lot, self.probe = fixture, drive, lot, probe
        self.nominal = fixture.respond(drive, initial)  # checks the drive and the start
        self.initial = read_initial(initial, self.nominal.state_unit)
        self.raw_initial = initial
        check_tolerance(tolerance)
        if probe is None:
            unit, label = self.nominal.state_unit, "the state"
        else:
            unit, label = self.nominal.segments.probe(probe).unit, f"probe '{probe}'"
        check_unit(tolerance, unit, label)
        self.unit, self.label = unit, label
        self.tolerance = tolerance
        self.delays = None if sample_delay is None else sample_delays(
            sample_delay, drive.durations, field="sample_delay", what="segment", ends=drive.ends)

    def run(self, points: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(settle time, error at the sample, limit), each (points, segments); a settle time
        of inf where the segment ends first."""
        out = [self._batch(points[i:i + BATCH]) for i in range(0, len(points), BATCH)]
        return tuple(np.concatenate(parts) for parts in zip(*out))  # type: ignore[return-value]

    def _batch(self, points: np.ndarray):
        """Every point as a unit of one batched run (Segments.of_lot, each unit bit for bit its
        own hand-built response)."""
        draws = [unit_draw(self.lot, p) for p in points]
        temperature = None if draws[0].temperature is None else np.concatenate([d.temperature for d in draws])
        draw = Draw(0, np.concatenate([d.values for d in draws]), temperature)
        run = UnitsRun(self.lot, self.drive, draw, self.raw_initial, self.nominal)
        lot = run.columns(self.tolerance, self.delays, self.probe, None)
        return np.where(np.isnan(lot.settle_time), np.inf, lot.settle_time), np.array(lot.error_at_sample), \
            np.array(lot.limit)


def worst_case(fixture: "Fixture", drive: "Drive", spread: Spread, tolerance: Any, sample_delay: Any = None,
               probe: str | None = None, initial: Any = 0.0):
    """Per segment, the worst settle time and the worst error at the sample within the
    bands of `spread`, and the values giving each; see the module docstring.

    Returns
    -------
    pandas.DataFrame
        A row per segment: ``settle_time`` (NaN where the worst unit does not settle
        within the segment; of those, the one with the largest error at the sample),
        each quantity's value for it (``"<key> (settle_time)"``),
        ``error_at_sample`` with its ``limit`` and each quantity's value
        (``"<key> (error_at_sample)"``), and the quantities searched inside the box for
        each.  ``attrs``: the box, the keys bounded at ±3 sd, the number of corners.

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = fo.Fixture.rc("10k", "100n")
    >>> drive = fo.Drive([0, "20m"], end="40m", vin=[5.0, 0.0])
    >>> table = fx.worst_case(drive, fo.Spread({"r": "1%", "c": "10%"}), fo.Tolerance.lsb(bits=16, span=5.0))
    >>> print(fo.format_value(table.loc[0, "settle_time"], "s"), table.loc[0, "c (settle_time)"],
    ...       table.loc[0, "searched (settle_time)"] == "")
    13.09 ms 1.1e-07 True
    """
    from ..drive import Drive

    if not isinstance(drive, Drive):
        raise InputError(f"drive: {shown(drive)} is not a firstorder Drive")
    lot = Lot(fixture, spread, 0)
    keys, lows, highs, normal = box(lot)
    dims = len(keys)
    if 2 ** dims > MAX_CORNERS:
        raise InputError(f"spread: {dims} varied quantities make 2^{dims} corners; a worst case searches at most "
                         f"2^16 ({MAX_CORNERS:,}): vary fewer quantities")
    runner = _Runner(fixture, drive, lot, tolerance, sample_delay, probe, initial)
    bits = (np.arange(2 ** dims)[:, None] >> np.arange(dims)[None, :]) & 1
    corners = np.where(bits == 1, highs, lows)
    settle, error, _ = runner.run(corners)
    segments = len(drive)
    results = {}
    for name, values in (("settle_time", settle), ("error_at_sample", error)):
        best = np.argmax(values, axis=0)
        if name == "settle_time":
            # Where some corners never settle within the segment, the worst of them is the
            # one furthest from settled: the largest error at the sample.
            never = np.isinf(settle)
            best = np.where(never.any(axis=0), np.argmax(np.where(never, error, -np.inf), axis=0), best)
        worst = values[best, np.arange(segments)]
        points = corners[best].copy()
        searched = [""] * segments
        for corner in np.unique(best):
            where = np.flatnonzero(best == corner)
            _search(runner, name, corners[corner], lows, highs, keys, where, worst, points, searched)
        results[name] = (worst, points, searched)
    return _table(drive, keys, results, runner, lows, highs, normal, 2 ** dims)


def _line_points(corner: np.ndarray, lows: np.ndarray, highs: np.ndarray) -> np.ndarray:
    """Each quantity on its own across the box from `corner`: (dims * LINE, dims)."""
    dims = corner.size
    points = np.repeat(corner[None, :], dims * LINE, axis=0)
    for j in range(dims):
        points[j * LINE:(j + 1) * LINE, j] = np.linspace(lows[j], highs[j], LINE)
    return points


def _monotonic(values: np.ndarray) -> bool:
    steps = np.diff(values)
    if not np.isfinite(values).all():
        return not (np.isinf(values[1:-1]).any() and np.isfinite(values[[0, -1]]).all())
    noise = 1e-12 * np.max(np.abs(values))
    return bool((steps >= -noise).all() or (steps <= noise).all())


def _search(runner: _Runner, name: str, corner: np.ndarray, lows: np.ndarray, highs: np.ndarray,
            keys: list[str], where: np.ndarray, worst: np.ndarray, points: np.ndarray, searched: list[str]) -> None:
    """Steps 2 and 3 for the segments `where` whose worst corner is `corner` (in place)."""
    from scipy.optimize import minimize

    column = 0 if name == "settle_time" else 1
    line = _line_points(corner, lows, highs)
    along = runner.run(line)[column]  # (dims * LINE, segments)
    dims = corner.size
    for s in where:
        if np.isinf(worst[s]):
            continue  # a unit that never settles in the segment: nothing is worse
        free = [j for j in range(dims) if not _monotonic(along[j * LINE:(j + 1) * LINE, s])]
        if not free:
            continue
        searched[s] = ", ".join(keys[j] for j in free)
        start = points[s].copy()
        best_line = int(np.argmax(along[:, s]))
        if along[best_line, s] > worst[s]:
            worst[s], start = along[best_line, s], line[best_line].copy()
            points[s] = start
        width = highs[free] - lows[free]

        def negative(x: np.ndarray, s: int = s, start: np.ndarray = start) -> float:
            point = start.copy()
            point[free] = lows[free] + np.clip(x, 0.0, 1.0) * width
            value = runner.run(point[None, :])[column][0, s]
            return -value if np.isfinite(value) else -math.inf

        x0 = (start[free] - lows[free]) / width
        found = minimize(negative, x0, method="Powell", bounds=[(0.0, 1.0)] * len(free),
                         options={"xtol": 1e-10, "ftol": 1e-15, "maxfev": 400 * len(free)})
        if -found.fun > worst[s]:
            point = start.copy()
            point[free] = lows[free] + np.clip(found.x, 0.0, 1.0) * width
            worst[s], points[s] = -found.fun, point


def _table(drive: "Drive", keys: list[str], results: dict, runner: _Runner, lows: np.ndarray, highs: np.ndarray,
           normal: list[str], corners_count: int):
    import pandas as pd

    data: dict[str, Any] = {"start": drive.times}
    worst, points, searched = results["settle_time"]
    data["settle_time"] = np.where(np.isinf(worst), np.nan, worst)
    for j, key in enumerate(keys):
        data[f"{key} (settle_time)"] = points[:, j]
    data["searched (settle_time)"] = searched
    worst, points, searched = results["error_at_sample"]
    data["error_at_sample"] = worst
    # The limit of the worst unit (a relative tolerance's limit moves with the unit).
    data["limit"] = runner.run(points)[2][np.arange(len(drive)), np.arange(len(drive))]
    for j, key in enumerate(keys):
        data[f"{key} (error_at_sample)"] = points[:, j]
    data["searched (error_at_sample)"] = searched
    table = pd.DataFrame(data, index=pd.RangeIndex(len(drive), name="segment"))
    table.attrs.update(unit=runner.unit, watched=runner.label, corners=corners_count,
                       box={k: (float(lo), float(hi)) for k, lo, hi in zip(keys, lows, highs)},
                       normal_at_3_sd=normal,
                       search=f"every corner, then {LINE} points along each quantity from the worst corner, then "
                              f"scipy.optimize.minimize (Powell, bounded) over the quantities not monotonic")
    return table

"""Plans: the fastest drive through given levels with every sample within tolerance.

Greedy and closed form (see :func:`plan_dwells`): each step's dwell is the
shortest that puts its sample inside the tolerance, given where the step before
left the state.  The steps are :class:`~firstorder.segments.Segments` built from
the level columns alone (:meth:`Segments.of_columns
<firstorder.segments.Segments.of_columns>`): no drive is made until the instants
are known.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping
from typing import Any

import numpy as np

from .._arrays import repeated
from ..drive import Drive
from ..errors import InputError
from ..response import read_initial
from ..segments import Segments
from ..units import format_value, parse_value, shown
from .chain import AIM_INSIDE, LIMITS, Chain, Walk, exact_aims, walk, walk_fast
from .settled import walk_settled
from .table import check_tolerance, check_unit, constant_probe, sample_delays
from .tolerance import Tolerance

__all__ = ["METHODS", "plan_dwells", "plan_frame", "plan_inputs", "plan_options", "plan_rows", "plan_table"]



def plan_inputs(fixture: Any, levels: Any, tolerance: Any, min_dwell: Any, start: Any):
    """Check the plan's arguments; return its steps and the checked numbers."""
    check_tolerance(tolerance)
    if not isinstance(levels, Mapping) or not levels:
        raise InputError(
            f"levels: {levels!r} must be a dict of columns, one per source and switch, "
            f"such as {{'vin': [0, 2.5, 5]}}"
        )
    start_time = parse_value(start, field="start", unit="s")
    shortest = parse_value(min_dwell, field="min_dwell", unit="s")
    if shortest < 0:
        raise InputError(f"min_dwell: {min_dwell!r} must be >= 0 s")
    steps = Segments.of_columns(fixture, levels, field="levels")
    return steps, start_time, shortest


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
            "initial: 'periodic' names no one start here; every step holds the state, so any start "
            "repeats at the end; give the starting state as a number"
        )
    start, previous = guess, None
    for _ in range(_PERIODIC_ROUNDS):
        rows, walked, end, time = greedy(start)
        gap = end - start
        # The samples aim AIM_INSIDE of their limit inside it: a start off by far less moves no sample out.
        allowed = 0.25 * AIM_INSIDE * float(np.min(rows["tolerance"] / np.maximum(np.abs(coefficient), 1e-300)))
        if abs(gap) <= allowed:
            return start, (rows, walked, end, time)
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


#: How much longer than planned a dwell may come out when the plan is moved to its start
#: instant (floats far from 0 are coarse); beyond it the start is refused.
_SHIFT_STRETCH = 1e-4


def _shifted(greedy, state: float, rows: dict, walked: Any, length: float, start_time: float, start: Any):
    """The plan made from 0, moved to start at `start_time`.

    Each instant ``start_time + t`` is the float at or just after it such that no dwell
    comes out shorter than planned (the drive keeps instants, not dwells); the samples
    are judged again at the dwells the drive will really have.  Far from 0 the floats
    are too coarse for short dwells (0.125 s apart at 1e15 s): a dwell that would grow
    by more than ``_SHIFT_STRETCH`` of itself is refused, not silently planned longer.
    """
    planned = rows["dwell"]
    relative = np.append(rows["start"], length)
    instants = np.empty(relative.size)
    instants[0] = start_time
    for k in range(planned.size):
        following = start_time + float(relative[k + 1])
        while following - instants[k] < planned[k]:
            following = math.nextafter(following, math.inf)
        instants[k + 1] = following
    dwells = np.diff(instants)
    moved = rows
    if not np.array_equal(dwells, planned):
        if (dwells <= planned * (1.0 + _SHIFT_STRETCH)).all():
            moved, _, _, _ = greedy(state, dwells)
        if moved is rows or (moved["error_at_sample"] > moved["tolerance"]).any():
            worst = int(np.argmax(dwells / planned))
            raise InputError(
                f"start: {start!r} is too far from 0 s for this plan: floats there are "
                f"{format_value(float(np.spacing(abs(instants).max())), 's')} apart, so step {worst}'s "
                f"dwell of {format_value(float(planned[worst]), 's')} would grow by "
                f"{float(dwells[worst] / planned[worst] - 1.0):.2g} of itself (at most {_SHIFT_STRETCH:g} "
                f"is kept); give a start nearer 0 s (the plan's dwells do not depend on it)"
            )
    moved["instants"], moved["start"] = instants, instants[:-1]
    moved["sample_time"] = moved["start"] + moved["sample_delay"]
    return moved, walked, float(instants[-1])


def _renamed(sample_delay: Any, hold_after: Any) -> tuple[Any, str]:
    """`hold_after`, or the deprecated `sample_delay` of a plan taken as it (with a warning)."""
    if sample_delay is None:
        return hold_after, "hold_after"
    if hold_after is not None:
        raise InputError(f"sample_delay: {shown(sample_delay)} and hold_after: {shown(hold_after)} are both "
                         f"given; give hold_after (the time a step holds after its sample) alone")
    warnings.warn(
        "plan_dwells: sample_delay= here meant the time each step holds after its sample; that is now "
        "hold_after= (sample_delay means the time from a change to its sample everywhere else, and will "
        "mean it here in the next release); taken as hold_after for now", FutureWarning, stacklevel=4)
    return sample_delay, "sample_delay"


def plan_options(margin: Any, clock: Any, method: Any) -> tuple[float, float | None, str]:
    """Check the plan's options; return (margin, tick or None, method)."""
    if isinstance(margin, bool) or not isinstance(margin, (int, float, np.number, str)):
        raise InputError(f"margin: {shown(margin)} is not allowed; give the fraction of each tolerance kept in "
                         f"reserve, from 0 (none) up to but not including 1 (such as 0.2)")
    reserve = parse_value(margin, field="margin")
    if not 0.0 <= reserve < 1.0:
        raise InputError(f"margin: {shown(margin)} is not allowed; give the fraction of each tolerance kept in "
                         f"reserve, from 0 (none) up to but not including 1 (such as 0.2)")
    tick = None
    if clock is not None:
        tick = parse_value(clock, field="clock", unit="s")
        if not (tick > 0.0 and math.isfinite(tick)):
            raise InputError(f"clock: {shown(clock)} is not allowed; give the sequencer's tick, a time > 0 "
                             f"(such as '10u')")
    if method not in METHODS:
        raise InputError(f"method: {shown(method)} is not allowed; give one of {list(METHODS)}")
    return reserve, tick, method


#: The plans: ``"greedy"`` (each step as fast as it may be, in turn) or ``"exact"`` (the
#: least total time for the given order, see :func:`~firstorder.settling.chain.exact_aims`).
METHODS = ("greedy", "exact")


def _plan(fixture: Any, levels: Any, tolerance: Any, initial: Any, min_dwell: Any, start: Any,
          sample_delay: Any, probe: str | None, hold_after: Any = None, margin: Any = 0.0, clock: Any = None,
          method: Any = "greedy", table: bool = True):
    """The plan: its drive and its per-step table (see :func:`plan_dwells`); `sample_delay`
    is the name the user gave the hold (see :func:`_renamed`)."""
    reserve, tick, method = plan_options(margin, clock, method)
    fixture.check()
    steps, start_time, shortest = plan_inputs(fixture, levels, tolerance, min_dwell, start)
    count = len(steps)
    if probe is not None:
        unit, label = steps.probe(probe).unit, f"probe '{probe}'"
    else:
        unit, label = steps.state_unit, f"the state of {steps.storage_kind} '{steps.storage_name}'"
    check_unit(tolerance, unit, label)
    rate = np.asarray(steps.rate, dtype=np.float64)
    if probe is not None:
        # The probe is c*x + offset in each step: it settles with the state, |c| times its error.
        by_step = steps.probe_rows(probe)
        coefficient, offset = by_step[:, 0], np.einsum("ij,ij->i", by_step[:, 1:], steps.levels)
        if tolerance.kind == "relative":
            # Not rounding noise where the structure holds the probe still: a limit relative to
            # that noise would be waited for (see settling.table.constant_probe).
            coefficient = np.where(constant_probe(steps, probe), 0.0, coefficient)
    else:
        # The state itself: a coefficient of 1 and no offset in every step, stored once.
        coefficient, offset = repeated(1.0, count), repeated(0.0, count)
    finals = np.asarray(steps.final, dtype=np.float64)
    hold = repeated(0.0, count)
    if hold_after is not None:
        hold = sample_delays(hold_after, np.full(count, np.inf), field=sample_delay, what="step")
    value, relative = tolerance._scale()
    gain = coefficient if probe is None else np.abs(coefficient)
    chain = Chain(rate, finals, gain, value, relative, reserve, hold, shortest)
    proven: np.ndarray | None = None  # per step, whether the exact plan is proven least there

    def greedy(state: float, dwells: np.ndarray | None = None):
        """The plan from `state` (or for the given `dwells`): its rows, what limited each
        dwell, the state left at the end and the end instant.

        Times run from 0 at the first change, not from `start`: far from 0 the spacing of
        floats (0.125 s at 1e15 s) would otherwise round every dwell up to it."""
        nonlocal proven
        aims = None
        if method == "exact" and dwells is None:
            aims, proven = exact_aims(chain, state)
        walked = None
        if dwells is None and tick is None and count >= _FAST_FROM:
            walked = walk_settled(chain, state, aims) or walk_fast(chain, state, aims)
        if walked is None:
            walked = walk(chain, state, aims, tick, dwells)
        rows = _Rows(lambda: plan_rows(walked.whole(), coefficient, offset, hold, finals, rate))
        rows["instants"] = walked.instants  # the changes and the end: the drive's own array
        rows["start"] = walked.instants[:-1]
        return rows, walked, walked.end_state, float(walked.instants[-1])

    start_state = read_initial(initial, steps.state_unit)
    if start_state == "periodic":
        start_state, (rows, walked, _, time) = _periodic(greedy, float(finals[-1]), coefficient, rate)
    else:
        if start_state == "settled":
            if rate[0] == 0.0:
                raise InputError("initial: 'settled' needs a first step that settles, but step 0 holds its state")
            start_state = float(finals[0])
        rows, walked, _, time = greedy(start_state)
    if start_time != 0.0:
        rows, walked, time = _shifted(greedy, start_state, rows, walked, time, start_time, start)
    drive = Drive._of_instants(rows["instants"], steps.columns)
    if not table:
        return drive, None
    rows = {name: rows[name] for name in _COLUMNS}
    return drive, plan_frame(rows, walked.whole().limited, tolerance, unit, label, time - start_time, method,
                             proven is None or bool(proven.all()), start_state)


#: Plans this long or longer are walked with whole-array operations (chain.walk_fast).
_FAST_FROM = 64

_COLUMNS = ("start", "dwell", "settle_time", "sample_delay", "sample_time", "start_value", "final", "tolerance",
            "error_at_sample")


class _Rows(dict):
    """A plan's columns, made when first asked for (a drive alone needs only the instants);
    columns set before then are kept."""

    def __init__(self, make) -> None:
        super().__init__()
        self._make = make

    def __missing__(self, key: str):
        for name, column in self._make().items():
            self.setdefault(name, column)
        return dict.__getitem__(self, key)


def plan_rows(walked: Walk, coefficient: np.ndarray, offset: np.ndarray, hold: np.ndarray, finals: np.ndarray,
          rate: np.ndarray) -> dict:
    """The table's columns of a walked chain, in times from 0."""
    delay = walked.dwell - hold
    final_state = np.where(rate == 0.0, walked.state, finals)
    return {"start": walked.instants[:-1].copy(), "dwell": walked.dwell, "settle_time": walked.settle,
            "sample_delay": delay, "sample_time": walked.instants[:-1] + delay,
            "start_value": coefficient * walked.state + offset, "final": coefficient * final_state + offset,
            "tolerance": walked.limit, "error_at_sample": walked.error}


def plan_frame(rows: dict, limited: np.ndarray, tolerance: Tolerance, unit: str, label: str, total: float,
           method: str, proven: bool, start_state: float, fraction: np.ndarray | None = None):
    """The plan's table (see :func:`plan_table`)."""
    import pandas as pd

    count = rows["dwell"].size
    table = pd.DataFrame(rows, index=pd.RangeIndex(count, name="step"))
    with np.errstate(divide="ignore", invalid="ignore"):
        table["margin_left"] = np.where(rows["tolerance"] > 0, 1.0 - rows["error_at_sample"] / rows["tolerance"],
                                        np.nan)
    table["limited_by"] = np.array(LIMITS, dtype=object)[np.asarray(limited, dtype=np.intp)]
    table["fraction_inside"] = np.full(count, np.nan) if fraction is None else fraction
    table.attrs.update(tolerance=str(tolerance), unit=unit, watched=label, total_time=total, method=method,
                       exact=proven if method == "exact" else None, initial=start_state)
    return table


def plan_dwells(fixture: Any, levels: Any, tolerance: Tolerance, initial: Any = 0.0, min_dwell: Any = 0.0,
                start: Any = 0.0, sample_delay: Any = None, probe: str | None = None, *, hold_after: Any = None,
                margin: Any = 0.0, clock: Any = None, method: str = "greedy", spread: Any = None, units: Any = None,
                seed: Any = None, fraction: Any = 0.999):
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
        The first change instant (s).  The plan is made in times from it, so
        the dwells do not depend on it; a start so far from 0 that the floats
        there cannot keep the dwells (0.125 s apart at 1e15 s) is refused.
    sample_delay : optional
        Deprecated here: it meant what `hold_after` now means, and is taken as
        that for one release, with a ``FutureWarning``.  Everywhere else (and
        in :func:`plan_table`'s column) a sample delay is the time from a
        change to its sample.
    probe : str, optional
        Plan for this probe instead of the state (its error is ``|c|`` times
        the state's, with ``c`` its coefficient of the state in each step).
    hold_after : float, str or sequence, optional
        How long each step must still hold after its sample (s), one value or
        one per step: a converter's conversion time, or the controller's
        latency before it commands the next step.  The dwell is then
        ``settle_time + hold_after`` (or `min_dwell` if longer) and the
        sample is ``hold_after`` before the next change.
    margin : float, optional
        Fraction of each step's tolerance kept in reserve: with 0.2 every
        sample aims at 80 % of its limit.
    clock : float or str, optional
        The sequencer's tick (s, such as ``"10u"``): every dwell is rounded up
        to whole ticks (each step still planned from the state the rounded
        steps before it leave, so every sample stays inside).
    method : {"greedy", "exact"}, optional
        ``"greedy"``: each step as fast as its sample allows, in turn.
        ``"exact"``: the least total time over all choices of dwells for this
        order of steps (see Notes); the same as greedy when tau is the same
        in every step.
    spread : Spread, optional
        Plan for a lot: `units` units drawn from `spread` with `seed`, each
        dwell long enough that `fraction` of them (each from its own state
        left by the step before) is inside at the sample (``fraction=1.0``:
        every drawn unit).  See :func:`firstorder.studies.plan.plan_lot`.
    units, seed, fraction : optional
        The lot's size, its seed, and the fraction of units inside at each
        sample (with `spread` only).

    Returns
    -------
    Drive
        Changes at the planned instants, with the columns of `levels`.  The
        dwell per step is ``drive.durations`` and the total time ``drive.end -
        drive.start``; :func:`plan_table` gives the per-step detail.

    Raises
    ------
    InputError
        Bad columns, a negative `min_dwell` or `hold_after`, an unknown probe,
        a tolerance in the wrong unit, a step whose dwell would be 0 s (give
        `min_dwell` > 0), a `start` too far from 0 for the dwells, a `margin`
        outside [0, 1), a `clock` not > 0, an unknown `method`.

    See Also
    --------
    plan_table : the same plan, one row per step.
    plan_order : the order of the steps that takes least time.
    firstorder.settling.table.settling_table : judge any drive, planned or not.

    Notes
    -----
    Greedy and closed form: step ``k`` starts from the state ``x_k`` that the
    step before left, heads for its final value ``f_k`` with time constant
    ``tau_k`` and needs ``settle_k = tau_k * ln(|f_k - x_k| / limit_k)`` (0 when
    already within the limit); its dwell is ``max(min_dwell, settle_k +
    hold_after_k)``.  So no dwell can be shortened without its sample failing
    (a test shortens each by 0.1 % and watches it fail).  When tau is the same in
    every step the plan is also the fastest overall.  When switches change tau,
    lingering in a fast step can shorten a following slow one: ``method="exact"``
    then picks each step's residual at its end, within its tolerance, to make
    the total least (where each step lands on a known side and must settle
    longer than its least dwell, the chain separates into one variable per step,
    each with a closed-form best; the other stretches are solved by dynamic
    programming over the state; see :func:`firstorder.settling.chain.exact_aims`,
    and ``plan_table(...).attrs["exact"]`` says whether every step was solved).

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
    >>> ticked = plan_dwells(fx, {"vin": [5.0, 0.0, 5.0]}, fo.Tolerance.lsb(bits=12, span=5.0), clock="1m")
    >>> (ticked.durations / 1e-3).round(6)
    array([10., 10.,  9.])
    """
    return _planned(fixture, levels, tolerance, initial, min_dwell, start, sample_delay, probe, hold_after, margin,
                    clock, method, spread, units, seed, fraction, table=False)[0]


def plan_table(fixture: Any, levels: Any, tolerance: Tolerance, initial: Any = 0.0, min_dwell: Any = 0.0,
               start: Any = 0.0, sample_delay: Any = None, probe: str | None = None, *, hold_after: Any = None,
               margin: Any = 0.0, clock: Any = None, method: str = "greedy", spread: Any = None, units: Any = None,
               seed: Any = None, fraction: Any = 0.999):
    """The plan of :func:`plan_dwells`, one row per step (same arguments).

    Returns
    -------
    pandas.DataFrame
        Index ``step``; columns ``start`` (its change instant), ``dwell``,
        ``settle_time`` (needed after the change by the nominal unit),
        ``sample_delay`` (from the change to the sample), ``sample_time``,
        ``start_value``, ``final``, ``tolerance`` (the limit),
        ``error_at_sample``, ``margin_left`` (the fraction of the limit the
        sample leaves unused), ``limited_by`` (``"settling"``,
        ``"min_dwell"``, ``"clock"``: rounded up to a tick, or ``"the lot"``:
        the units of a lot plan) and ``fraction_inside`` (of a lot's units at
        the sample; NaN for a plan of one unit).  ``table.attrs["total_time"]``
        is the length of the whole plan, ``attrs["method"]`` and
        ``attrs["exact"]`` (for ``method="exact"``: whether every step met the
        conditions of the proof); a lot plan adds ``attrs["passing"]`` (the
        fraction of the drawn units with every sample inside, with its
        interval).

    See Also
    --------
    plan_dwells : the planned drive itself.

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
    return _planned(fixture, levels, tolerance, initial, min_dwell, start, sample_delay, probe, hold_after, margin,
                    clock, method, spread, units, seed, fraction, table=True)[1]


def _planned(fixture, levels, tolerance, initial, min_dwell, start, sample_delay, probe, hold_after, margin, clock,
             method, spread, units, seed, fraction, table: bool):
    """(drive, table) of :func:`plan_dwells` and :func:`plan_table`: the old name of the hold
    read, then the lot's plan or the one unit's (the table made only when asked)."""
    hold_after, field = _renamed(sample_delay, hold_after)
    sample_delay = field  # from here on, only the name the user gave the hold
    if spread is not None:
        return _for_the_lot(fixture, levels, tolerance, initial, min_dwell, start, sample_delay, probe, hold_after,
                            margin, clock, method, spread, units, seed, fraction)
    _no_lot(units, seed)
    return _plan(fixture, levels, tolerance, initial, min_dwell, start, sample_delay, probe, hold_after, margin,
                 clock, method, table=table)


def _no_lot(units: Any, seed: Any) -> None:
    for name, value in (("units", units), ("seed", seed)):
        if value is not None:
            raise InputError(f"{name}: {shown(value)} is given without spread; a lot plan needs spread= (the "
                             f"bands of the parts), units= and seed=")


def _for_the_lot(fixture: Any, levels: Any, tolerance: Any, initial: Any, min_dwell: Any, start: Any,
                 sample_delay: Any, probe: Any, hold_after: Any, margin: Any, clock: Any, method: Any, spread: Any,
                 units: Any, seed: Any, fraction: Any):
    """The lot plan (a one-call shortcut into the studies layer)."""
    from ..studies.plan import plan_lot

    return plan_lot(fixture, levels, tolerance, spread, units=units, seed=seed, fraction=fraction, initial=initial,
                    min_dwell=min_dwell, start=start, sample_delay=sample_delay, probe=probe, hold_after=hold_after,
                    margin=margin, clock=clock, method=method)

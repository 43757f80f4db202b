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
from collections.abc import Mapping
from typing import Any

import numpy as np

from ..drive import Drive
from ..errors import InputError
from ..response import read_initial
from ..segments import Segments
from ..units import format_value, parse_value
from .table import check_tolerance, check_unit, constant_probe, sample_delays
from .tolerance import Tolerance

__all__ = ["plan_dwells", "plan_table"]

#: Each planned sample aims this fraction inside its limit, plus a few ulps of the state, so
#: that evaluating the planned drive again (another rounding path) never fails by rounding alone.
_AIM_INSIDE = 1e-9
_ROUNDING_ULPS = 8.0


def _plan_inputs(fixture: Any, levels: Any, tolerance: Any, min_dwell: Any, start: Any):
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
        rows, limited_by, end, time = greedy(start)
        gap = end - start
        # The samples aim _AIM_INSIDE of their limit inside it: a start off by far less moves no sample out.
        allowed = 0.25 * _AIM_INSIDE * float(np.min(rows["tolerance"] / np.maximum(np.abs(coefficient), 1e-300)))
        if abs(gap) <= allowed:
            return start, (rows, limited_by, end, time)
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


def _shifted(greedy, state: float, rows: dict, limited_by: list, length: float, start_time: float, start: Any):
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
    moved["start"] = instants[:-1]
    moved["sample_time"] = moved["start"] + moved["sample_delay"]
    return moved, limited_by, float(instants[-1])


def _plan(fixture: Any, levels: Any, tolerance: Any, initial: Any, min_dwell: Any, start: Any,
          sample_delay: Any, probe: str | None):
    """The greedy plan: its drive and its per-step table (see :func:`plan_dwells`)."""
    import pandas as pd

    fixture.check()
    steps, start_time, shortest = _plan_inputs(fixture, levels, tolerance, min_dwell, start)
    count = len(steps)
    if probe is not None:
        unit, label = steps.probe(probe).unit, f"probe '{probe}'"
    else:
        unit, label = steps.state_unit, f"the state of {steps.storage_kind} '{steps.storage_name}'"
    check_unit(tolerance, unit, label)
    rate = np.asarray(steps.rate)
    if probe is not None:
        # The probe is c*x + offset in each step: it settles with the state, |c| times its error.
        by_step = steps.probe_rows(probe)
        coefficient, offset = by_step[:, 0], np.einsum("ij,ij->i", by_step[:, 1:], steps.levels)
        if tolerance.kind == "relative":
            # Not rounding noise where the structure holds the probe still: a limit relative to
            # that noise would be waited for (see settling.table.constant_probe).
            coefficient = np.where(constant_probe(steps, probe), 0.0, coefficient)
    else:
        coefficient, offset = np.ones(count), np.zeros(count)
    finals = steps.final

    hold_after = np.zeros(count)
    if sample_delay is not None:
        hold_after = sample_delays(sample_delay, np.full(count, np.inf), field="sample_delay", what="step")

    eps = np.finfo(float).eps

    def greedy(state: float, dwells: np.ndarray | None = None):
        """Each step as fast as its sample allows, from `state` (or for the given `dwells`):
        the rows, what limited each dwell, the state left at the end and the end instant.

        Times run from 0 at the first change, not from `start`: far from 0 the spacing of
        floats (0.125 s at 1e15 s) would otherwise round every dwell up to it."""
        rows = {name: np.empty(count) for name in
                ("start", "dwell", "settle_time", "sample_delay", "sample_time", "start_value", "final",
                 "tolerance", "error_at_sample")}
        limited_by = []
        time = 0.0
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
            dwell = max(shortest, need) if dwells is None else float(dwells[k])
            if not dwell > 0.0:
                raise InputError(
                    f"step {k}: needs no settling (its start is already within {tolerance}) and min_dwell "
                    f"and sample_delay are 0, so its dwell would be 0 s, which no drive segment can be; "
                    f"give min_dwell > 0 (for example the time one sample takes)"
                )
            following = time + dwell
            while dwells is None and following - time < dwell:  # instants, not dwells: never round short
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

    start_state = read_initial(initial, steps.state_unit)
    if start_state == "periodic":
        start_state, (rows, limited_by, _, time) = _periodic(greedy, float(finals[-1]), coefficient, rate)
    else:
        if start_state == "settled":
            if rate[0] == 0.0:
                raise InputError("initial: 'settled' needs a first step that settles, but step 0 holds its state")
            start_state = float(finals[0])
        rows, limited_by, _, time = greedy(start_state)
    if start_time != 0.0:
        rows, limited_by, time = _shifted(greedy, start_state, rows, limited_by, time, start_time, start)
    drive = Drive(rows["start"].copy(), time, **steps.columns)
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
        The first change instant (s).  The plan is made in times from it, so
        the dwells do not depend on it; a start so far from 0 that the floats
        there cannot keep the dwells (0.125 s apart at 1e15 s) is refused.
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
        a tolerance in the wrong unit, a step whose dwell would be 0 s (give
        `min_dwell` > 0), or a `start` too far from 0 for the dwells.

    See Also
    --------
    plan_table : the same plan, one row per step.
    firstorder.settling.table.settling_table : judge any drive, planned or not.

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
    return _plan(fixture, levels, tolerance, initial, min_dwell, start, sample_delay, probe)[1]

"""Plans for a lot: dwells long enough for a fraction of the units, each from its own state.

``fo.plan_dwells(..., spread=spread, units=N, seed=S, fraction=0.999)`` comes here (a
one-call shortcut of :mod:`firstorder.settling.planning`).  The units are drawn as a
:class:`~firstorder.studies.study.Study` draws them (unit k depends only on (seed, k))
and reduced at once (:meth:`Segments.of_lot <firstorder.segments.Segments.of_lot>`);
the steps are then walked in turn, every unit at once: step k's dwell is the order
statistic, at `fraction`, of the units' own settle times from the states step k - 1
left them in.  The plan's passing fraction over the whole sequence is then measured by
a :class:`~firstorder.studies.study.Study` of the planned drive (the engine's own scan).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

from ..drive import Drive
from ..errors import InputError
from ..response import read_initial
from ..segments import Segments
from ..settling.chain import AIM_INSIDE, Walk, tick_up
from ..settling.planning import plan_frame, plan_inputs, plan_options, plan_rows
from ..settling.table import check_unit, sample_delays
from .lot import Lot
from .study import Study, _count, _fraction, order_statistic

if TYPE_CHECKING:
    from ..fixture import Fixture
    from ..settling.tolerance import Tolerance
    from .spread import Spread

__all__ = ["plan_lot"]

_ROUNDING_ULPS = 8.0
_EPS = float(np.finfo(float).eps)
#: Code of "the lot" in :data:`firstorder.settling.chain.LIMITS`.
_THE_LOT, _MIN_DWELL, _CLOCK = 3, 1, 2


def plan_lot(fixture: "Fixture", levels: Any, tolerance: "Tolerance", spread: "Spread", *, units: Any, seed: Any,
             fraction: Any = 0.999, initial: Any = 0.0, min_dwell: Any = 0.0, start: Any = 0.0,
             sample_delay: Any = "hold_after", probe: str | None = None, hold_after: Any = None, margin: Any = 0.0,
             clock: Any = None, method: Any = "greedy"):
    """The fastest drive through `levels` that `fraction` of a lot's units follow within
    `tolerance` at every sample; returns ``(drive, table)``.

    Parameters
    ----------
    fixture, levels, tolerance, initial, min_dwell, start, probe, hold_after, margin, clock
        As for :func:`~firstorder.settling.planning.plan_dwells`.
    spread : Spread
    units : int
        How many units are drawn to plan with.
    seed : int
    fraction : float, optional
        The fraction of the units inside at each sample, in (0, 1]; 1.0: every drawn unit.
    sample_delay : str
        The name the user gave the hold (``"sample_delay"`` for the deprecated one), for errors.
    method : str
        Only ``"greedy"`` (the exact plan is for one unit).

    Returns
    -------
    drive : Drive
    table : pandas.DataFrame
        :func:`~firstorder.settling.planning.plan_table`'s columns; ``settle_time``,
        ``start_value``, ``final``, ``error_at_sample`` and ``margin_left`` are the nominal
        unit's, ``fraction_inside`` the lot's, and ``limited_by`` ``"the lot"`` where the
        units' settling set the dwell.  ``attrs["passing"]``: the
        :class:`~firstorder.studies.study.Passing` of the drawn units over the whole plan.

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = fo.Fixture.rc("1k", "1u")
    >>> half_lsb = fo.Tolerance.lsb(bits=12, span=5.0)
    >>> table = fo.plan_table(fx, {"vin": [5.0, 0.0]}, half_lsb, spread=fo.Spread({"c": "10%"}), units=1000,
    ...                       seed=3, fraction=0.99)
    >>> (table["dwell"] / 1e-3).round(3).tolist(), table["limited_by"].tolist()
    ([9.893, 9.893], ['the lot', 'the lot'])
    >>> float(table["fraction_inside"].min()) >= 0.99, table.attrs["passing"].fraction >= 0.98
    (True, True)
    """
    reserve, tick, method = plan_options(margin, clock, method)
    if method != "greedy":
        raise InputError(f"method: {method!r} is not allowed with spread; a lot plan is greedy (the exact plan is "
                         f"for one unit)")
    fixture.check()
    steps, start_time, shortest = plan_inputs(fixture, levels, tolerance, min_dwell, start)
    n = len(steps)
    count = _count(units, n, keep=True)  # every unit is walked at once
    share = _fraction(fraction, "fraction")
    if probe is not None:
        unit, label = steps.probe(probe).unit, f"probe '{probe}'"
    else:
        unit, label = steps.state_unit, f"the state of {steps.storage_kind} '{steps.storage_name}'"
    check_unit(tolerance, unit, label)
    hold = np.zeros(n)
    if hold_after is not None:
        hold = sample_delays(hold_after, np.full(n, np.inf), field=sample_delay, what="step")
    first = read_initial(initial, steps.state_unit)
    if first == "periodic":
        raise InputError("initial: 'periodic' is not allowed with spread; every unit would repeat from its own "
                         "start; give the starting state as a number or 'settled'")

    lot = Lot(fixture, spread, seed)
    draw = lot.draw(0, count)
    # The units' networks do not depend on the instants: any drive with these columns will do.
    provisional = Drive(np.arange(n, dtype=np.float64), float(n), **steps.columns)
    lot_steps = Segments.of_lot(fixture, provisional, *lot.unit_values(provisional, draw))
    rate, final = np.asarray(lot_steps.rate), np.asarray(lot_steps.final)
    nominal_rate, nominal_final = np.asarray(steps.rate, dtype=np.float64), np.asarray(steps.final, dtype=np.float64)
    if probe is not None:
        gain = np.abs(lot_steps.probe_rows(probe)[:, :, 0])
        rows = steps.probe_rows(probe)
        coefficient, offset = rows[:, 0], np.einsum("ij,ij->i", rows[:, 1:], steps.levels)
    else:
        gain, coefficient, offset = np.ones((count, n)), np.ones(n), np.zeros(n)
    if first == "settled":
        if (rate[:, 0] == 0.0).any():
            raise InputError("initial: 'settled' needs a first step that settles, but step 0 holds its state")
        x, x_nominal = final[:, 0].copy(), float(nominal_final[0])
    else:
        x, x_nominal = np.full(count, float(first)), float(first)
    value, relative = tolerance._scale()
    keep = 1.0 - reserve

    dwell, settle_nominal, error_nominal, limit_nominal, state_nominal = (np.empty(n) for _ in range(5))
    inside = np.empty(n)
    limited = np.zeros(n, dtype=np.int8)
    instants = np.empty(n + 1)
    instants[0] = time = start_time
    for k in range(n):
        r, c, h = rate[:, k], gain[:, k], float(hold[k])
        f = np.where(r == 0.0, x, final[:, k])
        step = c * np.abs(f - x)
        limit = value * step if relative else np.full(count, value)
        allowed = limit * keep
        aim = allowed * (1.0 - AIM_INSIDE) - _ROUNDING_ULPS * _EPS * c * np.maximum(np.abs(x), np.abs(f))
        aim = np.where(aim <= 0.0, allowed * (1.0 - AIM_INSIDE), aim)
        moving = (r > 0.0) & (step > allowed)
        with np.errstate(divide="ignore", invalid="ignore"):
            settle = np.where(moving, np.log(step / aim) / np.where(moving, r, 1.0), 0.0)
        need = float(order_statistic(settle[:, None], share)[0]) + h
        length = max(shortest, need)
        code = _THE_LOT if need >= shortest else _MIN_DWELL
        if tick is not None:
            rounded = tick_up(length, tick)
            code = _CLOCK if rounded > length else code
            length = rounded
        if not length > 0.0:
            raise InputError(f"step {k}: needs no settling in any unit and min_dwell and hold_after are 0, so its "
                             f"dwell would be 0 s, which no drive segment can be; give min_dwell > 0")
        following = time + length
        while following - time < length:  # instants, not dwells: never round short
            following = math.nextafter(following, math.inf)
        length = following - time
        error = step * np.exp(-r * (length - h))
        inside[k] = float(np.mean(error <= limit))
        dwell[k], limited[k] = length, code
        x = f + (x - f) * np.exp(-r * length)
        # The nominal unit, for the table's nominal columns.
        r0, c0 = float(nominal_rate[k]), abs(float(coefficient[k]))
        f0 = x_nominal if r0 == 0.0 else float(nominal_final[k])
        step0 = c0 * abs(f0 - x_nominal)
        limit0 = value * step0 if relative else value
        state_nominal[k], limit_nominal[k] = x_nominal, limit0
        settle_nominal[k] = math.log(step0 / (limit0 * keep)) / r0 if (r0 > 0.0 and step0 > limit0 * keep) else 0.0
        error_nominal[k] = step0 * math.exp(-r0 * (length - h))
        x_nominal = f0 + (x_nominal - f0) * math.exp(-r0 * length)
        time = following
        instants[k + 1] = time

    drive = Drive(instants[:-1].copy(), float(instants[-1]), **steps.columns)
    walked = Walk(state_nominal, dwell, settle_nominal, limit_nominal, error_nominal, limited, instants - start_time,
                  x_nominal)
    rows = plan_rows(walked, coefficient, offset, hold, nominal_final, nominal_rate)
    rows["start"] += start_time
    rows["sample_time"] += start_time
    # The whole sequence, judged by the engine over the same units (not this walk).
    study = Study(fixture, drive, spread, units=count, seed=seed, initial=initial)
    passing = study.passing(tolerance, sample_delay=np.minimum(rows["sample_delay"], drive.durations), probe=probe)
    table = plan_frame(rows, limited, tolerance, unit, label, float(instants[-1] - start_time), "greedy", True,
                       first if first != "settled" else float(nominal_final[0]), fraction=inside)
    table.attrs.update(passing=passing, units=count, seed=seed, fraction=share, spread=str(spread))
    return drive, table

"""The order of a plan's steps that takes least time, when the order is free (a scan).

A greedy plan's step ``j`` that settles ends ``rho_j = aim_j e^(-r_j hold_j) / c_j`` from
its final value, on the side it came from; so the dwell of a step depends only on the
step before it and the side that one was approached from.  The least total over all
orders is then a travelling-salesman path over (step, side): exact by Held–Karp dynamic
programming up to :data:`EXACT_UP_TO` steps, and a local search (moves of one step, and
reversals of a stretch) beyond it, with the gap to a lower bound (every step entered at
its cheapest) stated.  The chosen order is planned again by
:func:`~firstorder.settling.planning.plan_dwells`, whose total is the one reported.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InputError
from ..response import read_initial
from ..units import format_value, shown
from .chain import AIM_INSIDE
from .planning import plan_dwells, plan_inputs, plan_options
from .table import check_unit, sample_delays

__all__ = ["EXACT_UP_TO", "Order", "plan_order"]

#: Held–Karp (2^n n states) up to this many steps; a local search beyond.
EXACT_UP_TO = 13
#: Rounds of the local search at most (each tries every move once).
_ROUNDS = 60


@dataclass(frozen=True)
class Order:
    """The order of the steps with the least total time.

    Attributes
    ----------
    order : tuple of int
        The given steps' indices, in the order to run them.
    levels : dict of str to ndarray
        The level columns in that order (ready for ``plan_dwells``).
    total_time, given_time : float
        The plan's total time in this order and in the given one (s).
    lower_bound : float
        No order can take less (s): every step entered from its cheapest predecessor.
    exact : bool
        True when the order is proven least: found by Held–Karp, with every step of
        every order limited by its settling (the premise of the module docstring).
    method : str
        ``"held-karp"`` or ``"local search"``.
    """

    order: tuple[int, ...]
    levels: dict
    total_time: float
    given_time: float
    lower_bound: float
    exact: bool
    method: str

    @property
    def saving(self) -> float:
        """Time saved against the given order (s)."""
        return self.given_time - self.total_time

    @property
    def gap(self) -> float:
        """How far the total may be above the least, as a fraction of the lower bound."""
        return (self.total_time - self.lower_bound) / self.lower_bound if self.lower_bound > 0 else 0.0

    def __str__(self) -> str:
        how = "exact" if self.exact else f"within {self.gap:.1%} of the lower bound {format_value(self.lower_bound, 's')}"
        return (f"order {list(self.order)}: {format_value(self.total_time, 's')} against "
                f"{format_value(self.given_time, 's')} as given ({self.method}, {how})")


def plan_order(fixture: Any, levels: Any, tolerance: Any, initial: Any = 0.0, min_dwell: Any = 0.0, *,
               hold_after: Any = None, probe: str | None = None, margin: Any = 0.0, exact_up_to: Any = EXACT_UP_TO
               ) -> Order:
    """The order of the steps of `levels` whose greedy plan takes least time.

    Parameters
    ----------
    fixture, levels, tolerance, initial, min_dwell, hold_after, probe, margin
        As for :func:`~firstorder.settling.planning.plan_dwells` (``initial`` a number or
        ``"settled"``: the state before the first step of whichever order).
    exact_up_to : int, optional
        Held–Karp up to this many steps (at most 16), a local search beyond.

    Returns
    -------
    Order

    See Also
    --------
    plan_dwells : the plan of one order.

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = fo.Fixture.rc("1k", "1u")
    >>> best = plan_order(fx, {"vin": [5.0, 1.0, 4.0, 0.5]}, fo.Tolerance.absolute("1m"), initial=0.0)
    >>> print(best)
    order [3, 1, 2, 0]: 27.35 ms against 32.98 ms as given (held-karp, exact)
    """
    keep = 1.0 - plan_options(margin, None, "greedy")[0]
    if isinstance(exact_up_to, bool) or not isinstance(exact_up_to, (int, np.integer)) or not 0 <= exact_up_to <= 16:
        raise InputError(f"exact_up_to: {shown(exact_up_to)} is not allowed; give a whole number of steps from 0 "
                         f"to 16 (Held–Karp needs 2^n n states)")
    fixture.check()
    steps, _, shortest = plan_inputs(fixture, levels, tolerance, min_dwell, 0.0)
    n = len(steps)
    if probe is not None:
        unit, label = steps.probe(probe).unit, f"probe '{probe}'"
        gain = np.abs(steps.probe_rows(probe)[:, 0])
    else:
        unit, label = steps.state_unit, f"the state of {steps.storage_kind} '{steps.storage_name}'"
        gain = np.ones(n)
    check_unit(tolerance, unit, label)
    hold = np.zeros(n) if hold_after is None else sample_delays(hold_after, np.full(n, np.inf), field="hold_after",
                                                                 what="step")
    start = read_initial(initial, steps.state_unit)
    if start == "periodic":
        raise InputError("initial: 'periodic' is not allowed for plan_order; give the state before the first step "
                         "as a number")
    rate, final = np.asarray(steps.rate, dtype=np.float64), np.asarray(steps.final, dtype=np.float64)
    value, relative = tolerance._scale()
    if start == "settled":
        if rate[0] == 0.0:
            raise InputError("initial: 'settled' needs a first step that settles, but step 0 holds its state")
        start = float(final[0])
    start = float(start)

    model = _Model(rate, final, gain, value, relative, keep, hold, shortest, start)
    if n <= exact_up_to:
        order, method = _held_karp(model), "held-karp"
    else:
        order, method = _local_search(model), "local search"
    columns = steps.columns
    arranged = {name: np.asarray(column)[list(order)] for name, column in columns.items()}
    options = dict(initial=start, min_dwell=min_dwell, hold_after=hold_after, probe=probe, margin=margin)
    planned = plan_dwells(fixture, arranged, tolerance, **options)
    given = plan_dwells(fixture, columns, tolerance, **options)
    total, given_time = planned.end - planned.start, given.end - given.start
    if given_time < total:  # the model's premise failed somewhere: never return worse than given
        order, arranged, total = tuple(range(n)), {k: np.asarray(v) for k, v in columns.items()}, given_time
    return Order(tuple(int(k) for k in order), arranged, float(total), float(given_time), model.lower_bound(),
                 model.settles_always and method == "held-karp", method)


class _Model:
    """Dwell of step j after step i approached from side s, from the greedy rule."""

    def __init__(self, rate, final, gain, value, relative, keep, hold, shortest, start) -> None:
        n = rate.size
        self.n = n
        eps = float(np.finfo(float).eps)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            aim = value * keep * (1.0 - AIM_INSIDE)
            reach = aim * np.exp(-rate * hold) / gain  # rho_i
            sides = np.array([-1.0, 1.0])
            # Where each step leaves the state: (i, s); a held step is not modelled (below).
            ends = final[:, None] + sides[None, :] * reach[:, None]

            def dwell(x):  # x (..., n): entering states of every step j
                step = gain * np.abs(final - x)
                limit = value * step if relative else np.full(step.shape, value)
                allowed = limit * keep
                goal = allowed * (1.0 - AIM_INSIDE) - 8.0 * eps * gain * np.maximum(np.abs(x), np.abs(final))
                goal = np.where(goal <= 0.0, allowed * (1.0 - AIM_INSIDE), goal)
                moving = (rate > 0.0) & (step > allowed)
                settle = np.where(moving, np.log(step / goal) / np.where(rate > 0, rate, 1.0), 0.0)
                need = settle + hold
                return np.maximum(shortest, need), moving & (need >= shortest)

            self.cost, settles = dwell(ends[:, :, None])  # (i, s, j)
            self.side = (ends[:, :, None] > final[None, None, :]).astype(np.intp)  # side j is approached from
            self.first, first_settles = dwell(np.full(n, start))
            self.first_side = (start > final).astype(np.intp)
        off_diagonal = ~np.eye(n, dtype=bool)[:, None, :]
        self.settles_always = bool(first_settles.all() and settles[np.broadcast_to(off_diagonal, settles.shape)].all()
                                   and not relative and (rate > 0).all())

    def total(self, order) -> float:
        j = order[0]
        time, s = float(self.first[j]), int(self.first_side[j])
        for k in order[1:]:
            time += float(self.cost[j, s, k])
            j, s = k, int(self.side[j, s, k])
        return time

    def lower_bound(self) -> float:
        """Every step entered at its cheapest: the first from the start, the others from
        some other step, whichever step is first."""
        cost = self.cost.copy()
        cost[np.arange(self.n), :, np.arange(self.n)] = np.inf
        entering = cost.min(axis=(0, 1)) if self.n > 1 else np.zeros(1)
        return float(entering.sum() + (self.first - entering).min())


def _held_karp(model: _Model) -> tuple[int, ...]:
    """The least-total order by dynamic programming over (visited set, last step, its side)."""
    n = model.n
    if n == 1:
        return (0,)
    full = 1 << n
    best = np.full((full, n, 2), np.inf)
    parent = np.full((full, n, 2), -1, dtype=np.int16)  # previous step * 2 + its side
    index = np.arange(n)
    best[1 << index, index, model.first_side] = model.first
    bits = 1 << index
    for mask in range(1, full):
        here = best[mask]
        if not np.isfinite(here).any():
            continue
        outside = (mask & bits) == 0
        if not outside.any():
            continue
        reach = here[:, :, None] + model.cost  # (i, s, j)
        for side in (0, 1):
            candidate = np.where(model.side == side, reach, np.inf).reshape(2 * n, n)
            where = np.argmin(candidate, axis=0)
            value = candidate[where, index]
            targets = index[outside & np.isfinite(value)]
            if targets.size == 0:
                continue
            masks = mask | bits[targets]
            better = value[targets] < best[masks, targets, side]
            targets, masks = targets[better], masks[better]
            best[masks, targets, side] = value[targets]
            parent[masks, targets, side] = where[targets]
    last = best[full - 1]
    flat = int(np.argmin(last))
    j, s = divmod(flat, 2)
    order, mask = [], full - 1
    while j >= 0:
        order.append(j)
        previous = int(parent[mask, j, s])
        mask &= ~(1 << j)
        if previous < 0:
            break
        j, s = divmod(previous, 2)
    return tuple(reversed(order))


def _local_search(model: _Model) -> tuple[int, ...]:
    """Nearest-neighbour start, then moves of one step and reversals of a stretch while any helps."""
    n = model.n
    # Nearest neighbour on the model, from the start.
    j = int(np.argmin(model.first))
    s = int(model.first_side[j])
    order, left = [j], set(range(n)) - {j}
    while left:
        choices = sorted(left)
        k = choices[int(np.argmin(model.cost[j, s, choices]))]
        order.append(k)
        left.remove(k)
        j, s = k, int(model.side[j, s, k])
    candidates = [order, list(range(n))]
    best, best_time = None, math.inf
    for order in candidates:
        time = model.total(order)
        for _ in range(_ROUNDS):
            improved = False
            for a, b in itertools.combinations(range(n), 2):
                trial = order[:a] + order[a:b + 1][::-1] + order[b + 1:]  # a reversal
                t = model.total(trial)
                if t < time * (1 - 1e-12):
                    order, time, improved = trial, t, True
                moved = order[:a] + order[a + 1:b + 1] + [order[a]] + order[b + 1:]  # step a moved to b
                t = model.total(moved)
                if t < time * (1 - 1e-12):
                    order, time, improved = moved, t, True
            if not improved:
                break
        if time < best_time:
            best, best_time = order, time
    return tuple(best)

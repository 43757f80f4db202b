"""The chain of a plan: dwells from per-step numbers alone (no fixture, no drive).

Step ``k`` starts from the state ``x_k`` the step before left, heads for its final value
``f_k`` at rate ``r_k = 1 / tau_k`` (0: the state is held), and its watched quantity moves
``c_k`` times the state (``c_k = 1`` for the state itself, a probe's coefficient
otherwise).  Its sample, ``hold_k`` before the next change, must lie within the
tolerance's limit.  :func:`walk` gives the dwells one step after the other (the
reference, and the path for a clock or given dwells); :func:`walk_fast` gives the same
plan with whole-array operations; :func:`exact_aims` the aims that make the total the
least (see its docstring for the proof).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .. import _kernels, _parallel
from ..engine import affine_scan
from ..errors import InputError
from .stretch import stretch_aims

__all__ = ["AIM_INSIDE", "LIMITS", "Chain", "Walk", "exact_aims", "tick_up", "walk", "walk_fast"]

#: Each planned sample aims this fraction inside its limit, plus a few ulps of the state, so
#: that evaluating the planned drive again (another rounding path) never fails by rounding alone.
AIM_INSIDE = 1e-9
_ROUNDING_ULPS = 8.0
_EPS = float(np.finfo(float).eps)

#: What set each dwell, by code (``Walk.limited``).
LIMITS = ("settling", "min_dwell", "clock", "the lot")

#: Rounds of :func:`walk_fast`'s search for which steps settle (two or three suffice; a
#: chain needing more is walked step by step).
_FAST_ROUNDS = 8


@dataclass(frozen=True)
class Chain:
    """The per-step numbers of a plan.

    Attributes
    ----------
    rate, final, gain : ndarray, shape (n,)
        ``r_k`` (1/s; 0 holds), ``f_k`` (ignored where held) and ``|c_k|``.
    value : float
        The tolerance's limit, or its fraction of each step when `relative`.
    relative : bool
    margin : float
        Fraction of each limit kept in reserve (the sample aims at ``(1 - margin)`` of it).
    hold : ndarray, shape (n,)
        Time each step holds after its sample (s).
    shortest : float
        The least dwell (s).
    """

    rate: np.ndarray
    final: np.ndarray
    gain: np.ndarray
    value: float
    relative: bool
    margin: float
    hold: np.ndarray
    shortest: float


@dataclass(frozen=True)
class Walk:
    """A walked chain: per step its start state, dwell, settle time, the limit and the
    error at its sample, what limited it (codes into :data:`LIMITS`); the relative
    instants of the changes (``n + 1``, from 0) and the state left at the end."""

    state: np.ndarray
    dwell: np.ndarray
    settle: np.ndarray
    limit: np.ndarray
    error: np.ndarray
    limited: np.ndarray
    instants: np.ndarray
    end_state: float

    def whole(self) -> "Walk":
        """The walk itself (a :class:`~firstorder.settling.settled.Settled` makes its own from
        its instants)."""
        return self


def tick_up(dwell: float, tick: float) -> float:
    """`dwell` rounded up to whole ticks, never below it.

    Examples
    --------
    >>> tick_up(0.95e-5, 1e-5), tick_up(2e-5, 1e-5), tick_up(2.00001e-5, 1e-5)
    (1e-05, 2e-05, 3e-05)
    """
    ticks = math.ceil(dwell / tick)
    while ticks * tick < dwell:  # the division rounded down
        ticks += 1
    while ticks > 1 and (ticks - 1) * tick >= dwell:
        ticks -= 1
    return ticks * tick


def _zero_dwell(k: int) -> InputError:
    return InputError(
        f"step {k}: needs no settling (its start is already within the tolerance) and min_dwell "
        f"and hold_after are 0, so its dwell would be 0 s, which no drive segment can be; "
        f"give min_dwell > 0 (for example the time one sample takes)")


def walk(chain: Chain, x0: float, aims: np.ndarray | None = None, tick: float | None = None,
         dwells: np.ndarray | None = None) -> Walk:
    """Each step as fast as its sample allows (or for the given `dwells`), step by step.

    `aims` caps each step's error at its sample below the greedy aim (the exact plan);
    `tick` rounds each dwell up to whole ticks.  Instants are sums of dwells from 0, each
    the float at or just after its sum, so no dwell rounds short.
    """
    n = chain.rate.size
    state_at, dwell_at, settle_at, limit_at, error_at = (np.empty(n) for _ in range(5))
    limited = np.zeros(n, dtype=np.int8)
    instants = np.empty(n + 1)
    instants[0] = time = 0.0
    state = float(x0)
    keep = 1.0 - chain.margin
    for k in range(n):
        r, c, h = float(chain.rate[k]), float(chain.gain[k]), float(chain.hold[k])
        final = state if r == 0.0 else float(chain.final[k])
        step = c * abs(final - state)
        limit = chain.value * step if chain.relative else chain.value
        allowed = limit * keep
        aim = allowed * (1.0 - AIM_INSIDE) - _ROUNDING_ULPS * _EPS * c * max(abs(state), abs(final))
        if aim <= 0.0:
            aim = allowed * (1.0 - AIM_INSIDE)
        threshold = allowed
        if aims is not None and aims[k] < aim:
            aim = threshold = float(aims[k])
        settle = math.log(step / aim) / r if (r > 0.0 and step > threshold) else 0.0
        need = settle + h
        if dwells is None:
            dwell = max(chain.shortest, need)
            code = 0 if need >= chain.shortest else 1
            if tick is not None:
                rounded = tick_up(dwell, tick)
                code = 2 if rounded > dwell else code
                dwell = rounded
        else:
            dwell, code = float(dwells[k]), 0 if need >= chain.shortest else 1
        if not dwell > 0.0:
            raise _zero_dwell(k)
        following = time + dwell
        while dwells is None and following - time < dwell:  # instants, not dwells: never round short
            following = math.nextafter(following, math.inf)
        dwell = following - time
        state_at[k], dwell_at[k], settle_at[k], limit_at[k] = state, dwell, settle, limit
        error_at[k] = step * math.exp(-(dwell - h) * r)
        limited[k] = code
        state = final + (state - final) * math.exp(-dwell * r)
        time = following
        instants[k + 1] = time
    return Walk(state_at, dwell_at, settle_at, limit_at, error_at, limited, instants, state)


def _instants(dwell: np.ndarray) -> np.ndarray | None:
    """Sums of `dwell` from 0 such that no difference of neighbours is shorter than its dwell
    (None if that cannot be had in a few rounds: the caller walks step by step).

    Each sum rounds by at most half a unit in the last place of the instant, so each
    dwell is padded by one unit of the sum before it is added: the differences are then
    the dwells or up to about two units of the instant longer (the step-by-step walk:
    up to one).
    """
    instants = np.empty(dwell.size + 1)
    instants[0] = 0.0
    kernels = _kernels.available(dwell.size)
    if kernels is not None:
        kernels.plan_instants(np.ascontiguousarray(dwell), instants)
    else:
        np.cumsum(dwell, out=instants[1:])
        np.cumsum(dwell + np.spacing(instants[1:]), out=instants[1:])
    return instants if _fix_short(instants, dwell) else None


def _fix_short(instants: np.ndarray, dwell: np.ndarray) -> bool:
    """Move each instant that ends a dwell short of `dwell` one float later, in a few
    rounds; False if some are still short after them."""
    for _ in range(4):
        short = np.flatnonzero(np.diff(instants) < dwell)
        if short.size == 0:
            return True
        instants[short + 1] = np.nextafter(instants[short + 1], np.inf)
    return False


def _round(chain: Chain, x: np.ndarray, aims, holds, some_hold, with_hold, hold_decay, edge, kernels):
    """Every step from the starts `x`: ``(final, step, aim, moving, settles, side,
    following)``: its final value, size, aim, whether it moves and needs more than
    `min_dwell`, the side of its start and where it ends if it settles (the numpy path
    and the kernel ``plan_round`` do the same operations)."""
    n = x.size
    rate, gain, levels, keep = chain.rate, chain.gain, chain.final, 1.0 - chain.margin
    final = np.where(holds, x, levels) if some_hold else levels
    if kernels is not None:
        step, aim, side, following = np.empty(n), np.empty(n), np.empty(n), np.empty(n)
        moving, settles = np.empty(n, dtype=bool), np.empty(n, dtype=bool)
        arguments = (x, np.ascontiguousarray(levels), holds, some_hold, rate, gain, chain.value * keep,
                     chain.relative, aims if aims is not None else x, aims is not None,
                     edge if edge is not None else x, edge is not None, hold_decay if with_hold else x, with_hold,
                     1.0 - AIM_INSIDE, _ROUNDING_ULPS * _EPS, step, aim, moving, settles, side, following)
        _parallel.run(lambda first, stop: kernels.plan_round(*arguments, first, stop), _parallel.pieces(n))
        return final, step, aim, moving, settles, side, following
    offset = x - final
    step = np.abs(offset)
    step *= gain
    allowed = chain.value * keep * step if chain.relative else chain.value * keep
    size = np.maximum(np.abs(x), np.abs(final))
    size *= (_ROUNDING_ULPS * _EPS) * gain
    aim = allowed * (1.0 - AIM_INSIDE) - size
    aim = np.where(aim <= 0.0, allowed * (1.0 - AIM_INSIDE), aim)
    threshold = allowed
    if aims is not None:
        capped = aims < aim
        aim = np.where(capped, aims, aim)
        threshold = np.where(capped, aims, allowed)
    moving = step > threshold
    if some_hold:
        moving &= ~holds
    settles = moving if edge is None else moving & (step >= aim * edge)
    side = np.sign(offset)
    reach = aim / gain
    if with_hold:
        reach *= hold_decay
    following = final + side * reach
    return final, step, aim, moving, settles, side, following


#: Passes of walk_fast's last stage at most: dwells from the states the dwells before them
#: really leave (the instants round them up a little), until every sample is inside.
_FINAL_PASSES = 4


def walk_fast(chain: Chain, x0: float, aims: np.ndarray | None = None) -> Walk | None:
    """:func:`walk` with whole-array operations, or None where it cannot tell (then walk).

    A step that settles ends ``aim e^(-r hold) / c`` from its final value, on the side it
    came from, whatever its start (under a relative limit: a fixed fraction of its
    start); every other step's dwell is ``max(min_dwell, hold)`` and its end affine in
    its start.  So, once it is known which steps settle and from which side, the states
    at the changes follow at once (one affine scan where some step does not settle).  A
    guess (each step starting at the level before) is refined until that pattern no
    longer changes.  The dwells then follow from the states; the instants round them up
    by a unit or two of the instant, which moves the states they leave a little (a fast
    step late in a long plan: 1e-8 of its residual), so the states of the real dwells
    are scanned and the dwells taken again from them until every sample is inside, as
    the step-by-step walk has it.  Any state on another side of its final value than
    assumed returns None.
    """
    n = chain.rate.size
    rate, hold, levels = chain.rate, chain.hold, chain.final
    holds = rate == 0.0
    some_hold, with_hold = bool(holds.any()), bool((hold != 0.0).any())
    if holds.all():
        return None
    keep = 1.0 - chain.margin
    kernels = _kernels.available(n)
    x = np.empty(n)
    x[0] = x0
    x[1:] = np.where(holds[:-1], x0, levels[:-1]) if some_hold else levels[:-1]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        hold_decay = np.exp(-rate * hold) if with_hold else None
        least = np.maximum(chain.shortest, hold) if with_hold else chain.shortest
        # A moving step needs more than min_dwell when its step exceeds aim * edge.
        edge = np.exp(rate * np.maximum(chain.shortest - hold, 0.0)) if (chain.shortest > 0.0 or with_hold) else None
        context = (aims, holds, some_hold, with_hold, hold_decay, edge, kernels)
        other_decay = None
        pattern = None
        for _ in range(_FAST_ROUNDS):
            final, step, aim, moving, settles, side, following = _round(chain, x, *context)
            if pattern is not None and np.array_equal(pattern[0], settles) and np.array_equal(pattern[1], side):
                break
            pattern = (settles, side)
            if chain.relative or not settles.all():
                if other_decay is None:
                    other_decay = np.exp(-rate * least)
                if chain.relative:
                    reach = (following - final) * side  # aim / gain (times the hold's decay)
                    decay = np.where(settles, reach / np.where(step > 0, step / chain.gain, 1.0), other_decay)
                    shift = final * (1.0 - decay)
                else:
                    decay = np.where(settles, 0.0, other_decay)
                    shift = np.where(settles, following, final * (1.0 - decay))
                if some_hold:
                    decay = np.where(holds, 1.0, decay)
                    shift = np.where(holds, 0.0, shift)
                x = affine_scan(decay, shift, float(x0))[:-1]
            else:
                x = np.concatenate(([x0], following[:-1]))
        else:
            return None
        for _ in range(_FINAL_PASSES):
            need = np.log(step / aim)
            need /= rate
            need = np.where(moving, need, 0.0)
            settle = need
            if with_hold:
                need = need + hold
            dwell = np.maximum(chain.shortest, need)
            bad = np.flatnonzero(~(dwell > 0.0))
            if bad.size:
                raise _zero_dwell(int(bad[0]))
            instants = _instants(dwell)
            if instants is None:
                return None
            real = np.diff(instants)
            decay = np.exp(-rate * real)
            states = affine_scan(decay, final * (1.0 - decay), float(x0))
            # Held steps keep their state exactly: a = 1, b = 0 above.
            start = states[:-1]
            if some_hold:
                final = np.where(holds, start, final)
            distance = final - start
            error = np.abs(distance)
            error *= chain.gain
            limit_now = chain.value * error if chain.relative else np.full(n, chain.value)
            error *= np.exp(-rate * (real - hold)) if with_hold else decay
            # The real states must fall on the sides the pattern assumed.
            moved = ~holds if some_hold else slice(None)
            if not np.array_equal(np.sign(-distance)[moved], side[moved]):
                return None
            if (error <= limit_now * keep).all():
                limited = (need < chain.shortest).astype(np.int8)
                return Walk(start, real, settle, limit_now, error, limited, instants, float(states[-1]))
            final, step, aim, moving, settles, side, following = _round(chain, start, *context)
            if not np.array_equal(pattern[0], settles):
                return None
    return None


def exact_aims(chain: Chain, x0: float) -> tuple[np.ndarray | None, np.ndarray]:
    """The aims (errors at each sample) that make the chain's total time the least.

    Returns ``(aims, proven)``: `aims` None where nothing can be gained (every aim is
    greedy's), and per step whether the formulation below holds for it.

    Notes
    -----
    Let ``a_k = x_k - f_k`` be step ``k``'s offset at its change, ``u_k`` its offset at
    its end (its residual) and ``D_k = f_k - f_(k+1)``, so ``a_(k+1) = u_k + D_k``.  The
    step's sample, ``hold_k`` before its end, is inside when ``|u_k| <= R_k = aim_k
    e^(-r_k hold_k) / c_k``, and its dwell is ``tau_k ln(|a_k| / |u_k|)``; ``u_k`` has
    the sign of ``a_k``.  Call step ``k`` *free* when, for every residual the step
    before may leave, (i) it lands on a known side of ``f_k``: ``|D_(k-1)| > R_(k-1)``
    (for step 0, ``a_0 != 0``), and (ii) it must settle longer than `min_dwell` and its
    hold: ``(|D_(k-1)| - R_(k-1)) e^(-r_k dmin_k) >= R_k`` with ``dmin_k = max(min_dwell,
    hold_k)``; also ``r_k > 0``, ``c_k > 0`` and the tolerance is not relative.  If every
    step is free, the total is

        ``T = tau_0 ln|a_0| + sum_k phi_k(v_k) + const``,
        ``phi_k(v) = -tau_k ln v + tau_(k+1) ln(|D_k| + s_k v)``  (no second term for the last step)

    over ``v_k = |u_k|`` in ``(0, R_k]``, each independently: the sides ``s_k = +1`` when
    the residual lies beyond ``f_k`` as seen from ``f_(k+1)`` (the sign of ``a_k``, fixed
    by (i), equals that of ``D_k``), else ``-1``.  ``T`` is a sum of functions of one
    variable each on a box, so it is least where each ``phi_k`` is.  For ``s_k = -1``
    ``phi_k`` falls throughout (``phi' = -tau_k / v - tau_(k+1) / (|D_k| - v) < 0``): take
    ``v_k = R_k``, greedy's choice.  For ``s_k = +1``, ``phi' = ((tau_(k+1) - tau_k) v -
    tau_k |D_k|) / (v (|D_k| + v))``: it falls throughout if ``tau_(k+1) <= tau_k``, else
    down to ``v* = tau_k |D_k| / (tau_(k+1) - tau_k)`` and rises after it, so ``v_k =
    min(R_k, v*)``: lingering in a fast step before a slow one in the same direction.
    With one tau throughout ``v* = inf`` and the plan is greedy's.  A relative
    tolerance makes every dwell ``tau_k ln(1 / fraction)`` whatever the start, so greedy
    is least there too.  Where steps are not free, the total no longer separates; each
    stretch of such steps (with the free step before it, whose residual it may want) is
    solved by dynamic programming over the state (:mod:`firstorder.settling.stretch`),
    and the free step after it closes it: its time is ``tau ln|a|`` plus a constant
    whatever its start.  A stretch with a step whose watched quantity does not see the
    state (a probe's coefficient of 0) gets the least plan that does not linger there;
    one past the module's budget keeps greedy's residuals.  Neither is reported as
    proven, and the plan is never slower than greedy.

    Examples
    --------
    A fast step (tau 1 µs) to 1 V, then a slow one (1 ms) that creeps 0.5 mV on, within the
    1 mV tolerance: greedy leaves the fast step 1 mV short and the slow one settles 1.5 mV
    for 405 µs; the least plan lingers in the fast step so the slow one has no wait.

    >>> chain = Chain(np.array([1e6, 1e3]), np.array([1.0, 1.0005]), np.ones(2), 1e-3, False, 0.0,
    ...               np.zeros(2), 1e-6)
    >>> aims, proven = exact_aims(chain, 0.0)
    >>> bool(proven.all()), bool(aims[0] < 1e-3), bool(aims[1] == np.inf)
    (True, True, True)
    >>> greedy, least = walk(chain, 0.0), walk(chain, 0.0, aims)
    >>> (greedy.dwell * 1e6).round(2), (least.dwell * 1e6).round(2)
    (array([  6.91, 405.47]), array([7.6, 1. ]))
    """
    n = chain.rate.size
    rate, gain = chain.rate, chain.gain
    proven = np.zeros(n, dtype=bool)
    if chain.relative or n < 2:
        return None, np.ones(n, dtype=bool)  # greedy is least: see the notes
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        aim = chain.value * (1.0 - chain.margin) * (1.0 - AIM_INSIDE)
        reach = aim * np.exp(-rate * chain.hold) / gain  # R_k
        least = np.maximum(chain.shortest, chain.hold)
        jump = chain.final[:-1] - chain.final[1:]  # D_k
        entering = np.empty(n)  # the least |a_k| any allowed residual before it leaves
        entering[0] = abs(x0 - chain.final[0])
        entering[1:] = np.abs(jump) - reach[:-1]
        free = (rate > 0.0) & (gain > 0.0) & np.isfinite(reach) & (entering > 0.0)
        free &= entering * np.exp(-rate * least) >= reach
        side = np.empty(n)
        side[0] = np.sign(x0 - chain.final[0])
        side[1:] = np.sign(jump)
        tau = 1.0 / rate
        same = side[:-1] == np.sign(jump)
        slower = tau[1:] > tau[:-1]
        lingering = np.where(same & slower, tau[:-1] * np.abs(jump) / (tau[1:] - tau[:-1]), np.inf)
    proven[:] = free
    both = free[:-1] & free[1:]
    target = np.minimum(reach[:-1], lingering)
    chosen = both & (target < reach[:-1])
    aims = np.full(n, np.inf)
    # Back to an error at the sample: c v e^(r hold).
    aims[:-1][chosen] = target[chosen] * gain[:-1][chosen] * np.exp(rate[:-1][chosen] * chain.hold[:-1][chosen])
    if not free.all():
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            reach = np.where(gain > 0.0, reach, np.inf)
        stretch_aims(chain, float(x0), free, reach, least, side, aims, proven)
    if not np.isfinite(aims).any():
        return None, proven
    return aims, proven

"""The greedy walk of a long chain whose steps settle, with no step-by-step dependence.

A step that settles ends ``aim e^(-r hold) / c`` from its final value, on the side it
came from, whatever its start (:mod:`firstorder.settling.chain`).  So when nearly every
step settles, each step's start is known from the levels alone: the end of the step
before it.  Only the side needs the step before's side, and only where two levels lie
within twice a step's reach of each other; that is looked up a few steps back.  The
aim's allowance for rounding then takes a bound of every state of the walk instead of
the state (a few units in the last place of it: at most that much more cautious), so
that every step's aim, start, ``step / aim`` and settle time are
independent whole-array passes (or compiled pieces on several threads).

The few steps that do not settle this way (their start already within the limit, or
`min_dwell` longer than their settling) are walked one at a time, as :func:`walk
<firstorder.settling.chain.walk>` does, from the end of the step before, until the walk
lands where the passes assumed.  The instants are then summed and every sample judged
again from the states the real dwells leave (one blocked scan that judges each step on
the way); any sample outside its limit, or any start on another side than assumed,
returns None and the caller walks the chain the slower way.  The compiled pieces and
the numpy path perform the same operations, so both give the same plan to the last bit.

The passes' temporaries are working arrays (:mod:`firstorder._scratch`): a plan of a
million steps touches no fresh memory but its instants.  The rest of the walk (states,
errors, settle times: the plan's table) is made from the instants when first asked for.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .. import _kernels, _parallel
from .._scratch import working
from ..engine import affine_scan, scan_blocks
from .chain import _EPS, _ROUNDING_ULPS, AIM_INSIDE, Chain, Walk, _fix_short, _instants, _zero_dwell

__all__ = ["LOOKBACK", "Settled", "walk_settled"]

#: Steps looked back for a side (levels this close in a row are rare; past it, None).
LOOKBACK = 16

_ONE, _INF = np.ones(1), np.full(1, np.inf)
_ONE.setflags(write=False)
_INF.setflags(write=False)

#: Codes of the passes: a regular step, one whose side is not known within LOOKBACK, one
#: that does not settle (walked one at a time).
_REGULAR, _UNKNOWN, _IRREGULAR = 0, 8, 9


def _irregular_allowed(n: int) -> int:
    """Steps walked one at a time before the pattern search of walk_fast is the better path."""
    return max(64, n // 256)


@dataclass(frozen=True)
class Settled:
    """A chain walked by :func:`walk_settled`: its instants (``n + 1``, from 0) and end
    state; :meth:`whole` makes the rest of its :class:`~firstorder.settling.chain.Walk`
    from the instants."""

    instants: np.ndarray
    end_state: float
    chain: Chain = field(repr=False)
    x0: float
    aims: np.ndarray | None = field(repr=False)

    def whole(self) -> Walk:
        """The walk: each step judged from the state the real dwells leave before it (the
        settle time of that start, its error at the sample, whether `min_dwell` set it)."""
        chain, instants = self.chain, self.instants
        rate, levels, gain = chain.rate, chain.final, chain.gain
        n = rate.size
        allowed = chain.value * (1.0 - chain.margin)
        base = allowed * (1.0 - AIM_INSIDE)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
            real = np.diff(instants)
            decay = np.exp(-rate * real)
            with_hold = not _all_equal(chain.hold, 0.0)
            held = np.exp(-rate * (real - chain.hold)) if with_hold else decay
            start = affine_scan(decay, levels * (1.0 - decay), self.x0)[:-1]
            step = np.abs(levels - start) * gain
            error = step * held
            # walk's aim and threshold, from this start
            aim = base - (_ROUNDING_ULPS * _EPS) * gain * np.maximum(np.abs(start), np.abs(levels))
            aim = np.where(aim <= 0.0, base, aim)
            threshold: np.ndarray | float = allowed
            if self.aims is not None:
                capped = self.aims < aim
                aim, threshold = np.where(capped, self.aims, aim), np.where(capped, self.aims, allowed)
            moving = step > threshold
            settle = np.where(moving, np.log(step / aim) / rate, 0.0)
        limited = (settle + chain.hold < chain.shortest).astype(np.int8)
        return Walk(start, real, settle, np.full(n, chain.value), error, limited, instants, self.end_state)


def walk_settled(chain: Chain, x0: float, aims: np.ndarray | None = None) -> Settled | None:
    """:func:`~firstorder.settling.chain.walk` for a chain whose steps (nearly all) settle,
    or None where this path does not apply or cannot tell (see the module's notes).

    Examples
    --------
    >>> from firstorder.settling.chain import walk
    >>> n = 200
    >>> levels = np.where(np.arange(n) % 2 == 0, 1.0, -1.0)
    >>> chain = Chain(np.full(n, 1e3), levels, np.ones(n), 1e-3, False, 0.0, np.zeros(n), 0.0)
    >>> fast, slow = walk_settled(chain, 0.0).whole(), walk(chain, 0.0)
    >>> bool(np.allclose(fast.dwell, slow.dwell, rtol=1e-12)), round(float(fast.dwell[1]) * 1e3, 4)  # tau ln(1.999 / 1m)
    (True, 7.6004)
    """
    n = chain.rate.size
    if chain.relative or n < 2 or not _all_positive(chain.rate):
        return None
    kernels = _kernels.available(n)
    allowed = chain.value * (1.0 - chain.margin)
    with_hold = not _all_equal(chain.hold, 0.0)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
        hold_decay = np.exp(-chain.rate * chain.hold) if with_hold else None
        allowance = _allowance(chain, x0, allowed, kernels)
        settle, side, codes, unknown = _steps(chain, x0, allowed, aims, hold_decay, kernels, allowance)
        if unknown:
            return None
        _logarithm(settle, kernels)
        dwell = working("settled.dwell", n)
        irregular, not_positive = _dwells(chain, settle, dwell, codes, with_hold, kernels)
        if irregular > _irregular_allowed(n):
            return None
        if irregular:
            odd = np.flatnonzero(codes == _IRREGULAR)
            _walk_odd(chain, x0, allowed, allowance, aims, hold_decay, odd, settle, dwell, side, codes)
            not_positive = not dwell.min() > 0.0  # the odd steps' dwells are new (a reduction; NaN too)
        if not_positive:
            raise _zero_dwell(int(np.flatnonzero(~(dwell > 0.0))[0]))
        for _ in range(_REPAIRS):
            judged = _judged(chain, x0, allowed, dwell, side, with_hold, kernels)
            if judged is not None:
                return Settled(judged[0], judged[1], chain, float(x0), aims)
            # A step a hair beyond the one before it (its start within a few reaches of its
            # final value) sees the rounding of the real dwells before it magnified: walk
            # the failing ones again from their real starts.
            states, failing = _failures(chain, x0, allowed, dwell, side, with_hold)
            if failing is None or failing.size > _irregular_allowed(n):
                return None
            _walk_odd(chain, x0, allowed, allowance, aims, hold_decay, failing, settle, dwell, side, codes, states)
    return None


#: Rounds of walking failing steps again from their real starts (one is usual).
_REPAIRS = 4


def _failures(chain: Chain, x0: float, allowed: float, dwell: np.ndarray, side: np.ndarray, with_hold: bool):
    """The states the real dwells leave and the steps whose sample (or side) fails from
    them (numpy, the judge's operations; None if the instants cannot be had)."""
    instants = _instants(dwell)
    if instants is None:
        return None, None
    rate, levels = chain.rate, chain.final
    real = np.diff(instants)
    decay = np.exp(-rate * real)
    held = np.exp(-rate * (real - chain.hold)) if with_hold else decay
    states = affine_scan(decay, levels * (1.0 - decay), float(x0))
    distance = levels - states[:-1]
    error = np.abs(distance) * chain.gain * held
    return states, np.flatnonzero(~(error <= allowed) | ((side != 0) & ~(side * distance < 0.0)))


def _all_positive(values: np.ndarray) -> bool:
    """Whether every element is > 0 (at once for a value stored once, stride 0; else a
    reduction, no array of flags; NaN is not)."""
    if values.size == 0:
        return True
    return bool(values[0] > 0.0) if values.strides == (0,) else bool(values.min() > 0.0)


def _all_equal(values: np.ndarray, value: float) -> bool:
    """Whether every element is `value` (at once for a value stored once, stride 0)."""
    if values.strides == (0,):
        return values.size == 0 or float(values[0]) == value
    return bool((values == value).all())


def _allowance(chain: Chain, x0: float, allowed: float, kernels) -> float:
    """The aims' rounding allowance: a few units in the last place of a bound of
    ``|state|`` over the whole walk (a state lies between the start, the finals and a
    reach, at most ``allowed / gain``, beyond a final).  Formed once per walk."""
    gain = chain.gain[:1] if chain.gain.strides == (0,) else chain.gain
    seen = gain[gain > 0.0]
    reach = allowed / float(seen.min()) if seen.size else 0.0
    levels = chain.final
    if kernels is not None:  # one pass over the levels for the largest |level|, in pieces
        largest = max(_parallel.run(lambda first, stop: kernels.largest_magnitude(levels, first, stop),
                                    _parallel.pieces(levels.size)))
    else:  # max and min, not abs: no array as long as the levels for one number
        largest = max(float(levels.max()), -float(levels.min()))
    return _ROUNDING_ULPS * _EPS * (max(abs(float(x0)), largest) + reach)


def _sign(value: float) -> float:
    return 1.0 if value > 0.0 else (-1.0 if value < 0.0 else 0.0)


def _steps(chain: Chain, x0: float, allowed: float, aims, hold_decay, kernels, allowance: float):
    """Per step ``step / aim`` (1 where not regular), the side of its start (int8), its
    code (the operations of the kernel ``settled_steps``) and how many are unknown."""
    n = chain.rate.size
    quotient = working("settled.quotient", n)
    side = working("settled.side", n, np.int8)
    codes = working("settled.codes", n, np.int8)
    levels, gain = chain.final, chain.gain
    base = allowed * (1.0 - AIM_INSIDE)
    if kernels is not None:
        unit_gain = _all_equal(gain, 1.0)
        # An absent per-step array is one element the kernel reads at index 0 (see settled_steps).
        arguments = (np.ascontiguousarray(levels), _ONE if unit_gain else np.ascontiguousarray(gain), unit_gain,
                     float(x0), allowed, base, allowance, _INF if aims is None else aims, aims is not None,
                     _ONE if hold_decay is None else hold_decay, hold_decay is not None, LOOKBACK,
                     quotient, side, codes)
        unknown = _parallel.run(lambda first, stop: kernels.settled_steps(*arguments, first, stop), _parallel.pieces(n))
        return quotient, side, codes, sum(unknown)
    goal = base - allowance * gain
    goal = np.where(goal <= 0.0, base, goal)
    threshold: np.ndarray | float = allowed
    if aims is not None:
        capped = aims < goal
        goal, threshold = np.where(capped, aims, goal), np.where(capped, aims, allowed)
    reach = goal / gain
    if hold_decay is not None:
        reach *= hold_decay
    # The side of each step: certain where its jump passes twice the reach of the step before.
    sides = np.empty(n)
    sides[0] = _sign(x0 - levels[0])
    jump = levels[:-1] - levels[1:]
    certain = np.abs(jump) > 2.0 * reach[:-1]
    sides[1:] = np.where(certain, np.sign(jump), np.nan)
    run = 0
    for j in (np.flatnonzero(~certain) + 1).tolist():  # in order: each from the side before it
        run = run + 1 if (j > 1 and not certain[j - 2]) else 1
        previous = float(sides[j - 1])
        if run > LOOKBACK or math.isnan(previous):
            sides[j] = np.nan  # as the kernel: not looked that far back
            continue
        sides[j] = _sign((float(levels[j - 1]) + previous * float(reach[j - 1])) - float(levels[j]))
    start = np.empty(n)
    start[0] = x0
    start[1:] = levels[:-1] + sides[:-1] * reach[:-1]
    offset = start - levels
    step = np.abs(offset) * gain
    regular = step > threshold
    # The quotient and side of a step that is not regular are not used (as the kernel's).
    np.divide(step, goal, out=quotient)
    signs = np.sign(offset)
    signs[np.isnan(signs)] = 0.0  # an unknown side (its step is not used), not a NaN cast to int8
    side[:] = signs
    codes[:] = np.where(regular, _REGULAR, _IRREGULAR)
    codes[1:][np.isnan(sides[:-1])] = _UNKNOWN
    return quotient, side, codes, int(np.count_nonzero(codes == _UNKNOWN))


def _logarithm(quotient: np.ndarray, kernels) -> None:
    """``log`` in place (numpy's on both paths; in pieces on several threads when long)."""
    spans = _parallel.pieces(quotient.size) if kernels is not None else [(0, quotient.size)]
    _parallel.run(lambda first, stop: np.log(quotient[first:stop], out=quotient[first:stop]), spans)


def _dwells(chain: Chain, settle: np.ndarray, dwell: np.ndarray, codes: np.ndarray, with_hold: bool,
            kernels) -> tuple[int, int]:
    """Settle times (in place of their logarithms) and dwells; code 9 where `min_dwell` rules.
    Returns how many steps have code 9 and how many dwells are not > 0."""
    if kernels is not None:
        arguments = (settle, chain.rate, chain.hold, with_hold, float(chain.shortest), dwell, codes)
        counts = _parallel.run(lambda first, stop: kernels.settled_dwells(*arguments, first, stop),
                               _parallel.pieces(settle.size))
        return sum(c[0] for c in counts), sum(c[1] for c in counts)
    np.divide(settle, chain.rate, out=settle)
    need = settle + chain.hold if with_hold else settle
    np.maximum(chain.shortest, need, out=dwell)
    codes[(codes == _REGULAR) & ~(need >= chain.shortest)] = _IRREGULAR
    return int(np.count_nonzero(codes == _IRREGULAR)), int(np.count_nonzero(~(dwell > 0.0)))


def _walk_odd(chain: Chain, x0: float, allowed: float, allowance: float, aims, hold_decay, odd: np.ndarray,
              settle: np.ndarray, dwell: np.ndarray, side: np.ndarray, codes: np.ndarray,
              starts: np.ndarray | None = None) -> None:
    """Walk the steps that do not settle (and those after them, until the walk lands where
    the passes assumed) one at a time, as :func:`~firstorder.settling.chain.walk` does;
    their settle times, dwells and codes are written in place and their sides cleared
    (the judging scan then checks their samples, not their sides).  Each walk starts at
    the end the passes assume for the step before, or at ``starts[k]`` when given (the
    states the real dwells leave)."""
    n = chain.rate.size
    levels, gain, rate, hold = chain.final, chain.gain, chain.rate, chain.hold
    base = allowed * (1.0 - AIM_INSIDE)
    ulps = _ROUNDING_ULPS * _EPS

    def reach(i: int) -> float:  # the passes' reach of step i (the kernel's operations)
        goal = base - allowance * float(gain[i])
        if goal <= 0.0:
            goal = base
        if aims is not None and float(aims[i]) < goal:
            goal = float(aims[i])
        value = goal / float(gain[i])
        return value * float(hold_decay[i]) if hold_decay is not None else value

    def side_of(i: int) -> float:  # the passes' side of step i: a look back, then forward
        j = i
        while j > 0 and not abs(float(levels[j - 1]) - float(levels[j])) > 2.0 * reach(j - 1):
            j -= 1
        sign = _sign(x0 - float(levels[0])) if j == 0 else _sign(float(levels[j - 1]) - float(levels[j]))
        for m in range(j, i):
            sign = _sign((float(levels[m]) + sign * reach(m)) - float(levels[m + 1]))
        return sign

    done = -1
    for k in odd.tolist():
        if k <= done:
            continue
        if starts is not None:
            state = float(starts[k])
        else:
            state = float(x0) if k == 0 else float(levels[k - 1]) + side_of(k - 1) * reach(k - 1)
        j = k
        while j < n:
            r, c, h, final = float(rate[j]), float(gain[j]), float(hold[j]), float(levels[j])
            step = c * abs(final - state)
            aim = base - ulps * c * max(abs(state), abs(final))
            if aim <= 0.0:
                aim = base
            threshold = allowed
            if aims is not None and float(aims[j]) < aim:
                aim = threshold = float(aims[j])
            moving = step > threshold
            now = math.log(step / aim) / r if moving else 0.0
            need = now + h
            settle[j], dwell[j] = now, max(chain.shortest, need)
            codes[j] = 0 if need >= chain.shortest else 1
            side[j] = 0
            landed = moving and need >= chain.shortest
            came_from = _sign(state - final)
            state = final + (state - final) * math.exp(-float(dwell[j]) * r)
            done = j
            j += 1
            if j < n and landed and codes[j] == _REGULAR and came_from == side_of(j - 1):
                break


def _judged(chain: Chain, x0: float, allowed: float, dwell: np.ndarray, side: np.ndarray, with_hold: bool,
            kernels) -> tuple[np.ndarray, float] | None:
    """The instants and the end state, every sample judged from the states the real dwells
    leave (None where one is outside its limit or a start on another side than planned)."""
    n = dwell.size
    rate, levels, gain = chain.rate, np.ascontiguousarray(chain.final), chain.gain
    if kernels is None:
        instants = _instants(dwell)
        if instants is None:
            return None
        real = np.diff(instants)
        decay = np.exp(-rate * real)
        held = np.exp(-rate * (real - chain.hold)) if with_hold else decay
        states = affine_scan(decay, levels * (1.0 - decay), float(x0))
        distance = levels - states[:-1]
        error = np.abs(distance) * gain * held
        wrong_side = (side != 0) & ~(side * distance < 0.0)
        if (~(error <= allowed) | wrong_side).any():
            return None
        return instants, float(states[-1])
    instants = np.empty(n + 1)
    kernels.plan_instants(dwell, instants)
    decay = working("settled.decay", n)
    held = working("settled.held", n) if with_hold else decay
    spans = _parallel.pieces(n)
    arguments = (instants, dwell, rate, chain.hold, with_hold, decay, held)
    if sum(_parallel.run(lambda first, stop: kernels.settled_exponents(*arguments, first, stop), spans)):
        if not _fix_short(instants, dwell):
            return None
        _parallel.run(lambda first, stop: kernels.settled_exponents(*arguments, first, stop), spans)
    for exponent in (decay, held) if with_hold else (decay,):
        _parallel.run(lambda first, stop, e=exponent: np.exp(e[first:stop], out=e[first:stop]), spans)
    width, blocks, starts = scan_blocks(kernels, decay, None, levels, 1.0, float(x0))
    end = np.empty(1)
    unit_gain = _all_equal(gain, 1.0)
    arguments = (decay, levels, width, starts, _ONE if unit_gain else np.ascontiguousarray(gain), not unit_gain, held,
                 side, allowed, end)
    if sum(_parallel.run(lambda first, stop: kernels.settled_check(*arguments, first, stop), blocks)):
        return None
    return instants, float(end[0])

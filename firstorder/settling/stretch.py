"""The least plan over the steps where the closed form of the exact plan does not hold.

:func:`~firstorder.settling.chain.exact_aims` separates the total time into one variable
per step when every step is *free* (it lands on a known side of its final value and must
settle longer than its least dwell).  Where a step is not free (a jump within the
tolerance of the step before, `min_dwell` or a hold that may rule, a step that holds its
state, a probe that does not see the state), the steps around it are coupled.  This
module solves such a stretch exactly by dynamic programming over the state.

Let ``J_k(x)`` be the least time from step ``k`` to the end of the stretch, starting
step ``k`` at state ``x``.  With ``a = x - f_k`` and ``e = e^(r_k dmin_k)``, step ``k``
ends at ``f_k + s t`` (``s`` the sign of ``a``) for any ``t`` in ``(0, U(a)]``, ``U(a) =
min(R_k, |a| / e)``, taking ``tau_k ln(|a| / t)``, so

    ``J_k(x) = tau_k ln|a| + M(U(a))``,  ``M(U) = min over 0 < t <= U of g(t)``,
    ``g(t) = -tau_k ln t + J_(k+1)(f_k + s t)``.

Every ``J`` is a continuous function made of pieces ``A ln|x - p| + B`` (``A = 0``: a
constant): the end of the stretch is one (``tau ln|x - f|`` at a free step, or 0 at the
plan's end), and the recursion keeps the form.  ``M`` is the running minimum of ``g``:
on each piece ``g`` has at most one stationary point (``g' = 0`` is linear in ``t``), so
``M`` follows ``g`` where ``g`` falls to a new least value and is flat elsewhere; where
``g`` falls back below a flat stretch the crossing is found by bisection to adjacent
floats.  A flat piece of ``M`` maps to ``tau_k ln|x - f_k| + m``; a piece that follows
``g`` maps, through ``t = |a| / e``, to ``A ln|x - p'| + B + dmin_k - A r_k dmin_k`` with
``p' = f_k - (f_k - p) e``.  So each ``J`` is exact up to the rounding of its pieces'
constants and crossings, and the forward pass picks each step's residual: where ``M``
follows ``g`` at ``U(a)`` the step is as short as allowed (greedy's choice), where it is
flat the step lingers to the ``t`` at which the flat value was reached.

Only the states each step can reach are kept (an interval per step, the stretch's first
start a point or the residuals the free step before it may leave).  A stretch whose
pieces would exceed :data:`MOST_PIECES`, or steps past :data:`MOST_STEPS` in all, keep
greedy's residuals (and are reported as not proven).
"""

from __future__ import annotations

import bisect
import math

import numpy as np

__all__ = ["MOST_PIECES", "MOST_STEPS", "stretch_aims"]

#: Pieces of one step's value function beyond which its stretch keeps greedy's residuals.
MOST_PIECES = 256
#: Steps solved this way in one plan at most (each costs tens of µs in Python).
MOST_STEPS = 20_000

#: Exponents beyond which e^(-r dmin) is taken as 0 (a residual far below any float state's spacing).
_DEEPEST = 700.0

#: Residuals below this many units in the last place of the final value are not resolved.
_UNSEEN = 64

def _at(A: float, p: float, B: float, x: float) -> float:
    return B if A == 0.0 else A * math.log(abs(x - p)) + B


def _value(pieces: list, starts: list, x: float) -> float:
    """A value function at `x` (the piece holding it; the nearest at an edge's rounding)."""
    index = min(max(bisect.bisect_right(starts, x) - 1, 0), len(pieces) - 1)
    _, _, A, p, B = pieces[index]
    return _at(A, p, B, x)


class _Unsolved(Exception):
    """A stretch the pieces could not follow (rounding at the scale of the state's floats):
    it keeps greedy's residuals and is not reported as proven."""


class _Side:
    """``g`` and its running minimum ``M`` on one side of a step's final value.

    ``segments`` are ``(t0, t1, flat, A, p, B, m, t_at)``: over ``t`` in ``[t0, t1]``,
    ``M`` follows the piece ``(A, p, B)`` of ``J_(k+1)`` (``flat`` False) or is ``m``,
    first reached at ``t_at``.
    """

    def __init__(self, following: list, f: float, s: float, tau: float, top: float) -> None:
        self.f, self.s, self.tau = f, s, tau
        self.segments: list = []
        least, at = math.inf, 0.0
        for t0, t1, A, p, B in self._pieces(following, top):
            for u0, u1 in self._monotone(t0, t1, A, p):
                h0, h1 = self.g(u0, A, p, B), self.g(u1, A, p, B)
                if h1 < h0:  # falling over [u0, u1]
                    if h0 <= least:
                        self._follow(u0, u1, A, p, B)
                    elif h1 < least:
                        crossing = self._crossing(u0, u1, A, p, B, least)
                        self._flat(u0, crossing, least, at)
                        self._follow(crossing, u1, A, p, B)
                    else:
                        self._flat(u0, u1, least, at)
                    if h1 < least:
                        least, at = h1, u1
                else:
                    if h0 < least:
                        least, at = h0, u0
                    self._flat(u0, u1, least, at)

    def g(self, t: float, A: float, p: float, B: float) -> float:
        """``g(t)`` on the piece ``(A, p, B)`` of ``J_(k+1)`` (+inf at 0: no step ends on f)."""
        if t <= 0.0:
            return math.inf
        return -self.tau * math.log(t) + _at(A, p, B, self.f + self.s * t)

    def _pieces(self, following: list, top: float):
        """The pieces of ``J_(k+1)`` over ``f + s t``, ``0 <= t <= top``, in rising ``t``."""
        f, s = self.f, self.s
        if top <= _UNSEEN * math.ulp(f):
            # Residuals the state's floats cannot tell apart: J_(k+1) is its value at f.
            return [(0.0, top, 0.0, 0.0, _value(following, [piece[0] for piece in following], f))]
        found = []
        for lo, hi, A, p, B in following:
            t0, t1 = ((lo - f), (hi - f)) if s > 0 else ((f - hi), (f - lo))
            t0, t1 = max(t0, 0.0), min(t1, top)
            if t1 > t0 or (t1 == t0 == top):
                found.append((t0, t1, A, p, B))
        if not found:
            raise _Unsolved
        found.sort()
        return found

    def _monotone(self, t0: float, t1: float, A: float, p: float):
        """[t0, t1] split where ``g`` is stationary (``-tau / t + A s / (f + s t - p) = 0``)."""
        if A != 0.0 and A != self.tau:
            t = self.tau * (self.f - p) / (self.s * (A - self.tau))
            if t0 < t < t1:
                return ((t0, t), (t, t1))
        return ((t0, t1),)

    def _crossing(self, u0: float, u1: float, A: float, p: float, B: float, level: float) -> float:
        """Where ``g``, falling over [u0, u1] from above `level` to below it, meets it."""
        for _ in range(200):
            middle = 0.5 * (u0 + u1)
            if middle <= u0 or middle >= u1:
                break
            if self.g(middle, A, p, B) > level:
                u0 = middle
            else:
                u1 = middle
        return u1

    def _follow(self, t0: float, t1: float, A: float, p: float, B: float) -> None:
        self.segments.append((t0, t1, False, A, p, B, 0.0, 0.0))

    def _flat(self, t0: float, t1: float, m: float, at: float) -> None:
        last = self.segments[-1] if self.segments else None
        if last is not None and last[2] and last[6] == m and last[7] == at:
            self.segments[-1] = (last[0], t1, True, 0.0, 0.0, 0.0, m, at)
        else:
            self.segments.append((t0, t1, True, 0.0, 0.0, 0.0, m, at))

    def _at_limit(self, limit: float) -> tuple:
        """The segment of ``M`` holding `limit` (the nearest at an edge's rounding)."""
        starts = [segment[0] for segment in self.segments]
        return self.segments[min(max(bisect.bisect_right(starts, limit) - 1, 0), len(self.segments) - 1)]

    def choice(self, limit: float) -> tuple[float, bool]:
        """The residual to leave when at most `limit` is allowed, and whether it is the
        largest allowed (greedy's choice)."""
        segment = self._at_limit(limit)
        if not segment[2] or segment[7] >= limit:
            return limit, True
        return segment[7], False

    def least(self, limit: float) -> float:
        """``M(limit)``."""
        _, _, flat, A, p, B, m, _ = self._at_limit(limit)
        return m if flat else self.g(limit, A, p, B)


def _back(following: list, window: tuple, f: float, rate: float, reach: float, least: float):
    """``J_k`` over `window` from ``J_(k+1)`` (`following`), and the sides' running minima."""
    lo, hi = window
    if rate == 0.0:  # the state is held: the same value, least dwell later
        return [(a, b, A, p, B + least) for a, b, A, p, B in following], {}
    starts = [piece[0] for piece in following]
    if rate * least > _DEEPEST:  # settled within the least dwell: it ends on f (e^(-r dmin) underflows)
        return [(lo, hi, 0.0, 0.0, least + _value(following, starts, f))], {}
    tau = 1.0 / rate
    grow = math.exp(rate * least)  # e
    if reach == math.inf:
        # The watched quantity does not see the state here (a probe's coefficient of 0): the
        # walk's aims are errors at the sample, so this step cannot be told to linger; it
        # leaves |a| / e, and J_k follows J_(k+1) through that map.
        return _through(following, lo, hi, f, grow, rate, least), {}
    pieces, sides = [], {}
    for s, (near, far) in ((1.0, (max(lo - f, 0.0), hi - f)), (-1.0, (max(f - hi, 0.0), f - lo))):
        if not far > 0.0:
            continue
        top = min(reach, far / grow)
        side = _Side(following, f, s, tau, top)
        sides[s] = side
        found = []
        settled_from = reach * grow  # |a| from which U(a) = reach
        if far >= settled_from:
            found.append((max(near, settled_from), far, tau, f, side.least(reach)))
        for index, (t0, t1, flat, A, p, B, m, _) in enumerate(side.segments):
            a1 = t1 * grow if index + 1 < len(side.segments) else math.inf  # the last: to the edge, whatever rounding
            a0, a1 = max(t0 * grow, near), min(a1, far, settled_from)
            if a1 < a0:
                continue
            if flat:
                found.append((a0, a1, tau, f, m))
            else:
                found.append((a0, a1) + _moved(A, p, B, f, grow, rate, least))
        for a0, a1, A, p, B in found:
            pieces.append((f + a0, f + a1, A, p, B) if s > 0 else (f - a1, f - a0, A, p, B))
    if lo <= f <= hi:
        pieces.append((f, f, 0.0, 0.0, least + _value(following, starts, f)))
    pieces.sort()
    return pieces, sides


def _moved(A: float, p: float, B: float, f: float, grow: float, rate: float, least: float) -> tuple:
    """A piece ``A ln|y - p| + B`` of ``J_(k+1)`` seen from the start ``x`` of a step that
    ends at ``y = f + (x - f) / grow`` after its least dwell: ``least + A ln|x - p'| + B -
    A r least`` with ``p' = f - (f - p) grow``."""
    return A, f - (f - p) * grow, B + least - A * rate * least


def _through(following: list, lo: float, hi: float, f: float, grow: float, rate: float, least: float) -> list:
    """``least + J_(k+1)(f + (x - f) / grow)`` over [lo, hi]: the pieces of `following` the
    map meets, each moved back through it (the outermost stretched to the window's edges,
    which the map's rounding may not reach)."""
    y0, y1 = f + (lo - f) / grow, f + (hi - f) / grow
    found = [(max(f + (a - f) * grow, lo), min(f + (b - f) * grow, hi)) + _moved(A, p, B, f, grow, rate, least)
             for a, b, A, p, B in following if b >= y0 and a <= y1]
    if not found:
        raise _Unsolved
    found.sort()
    found[0] = (lo,) + found[0][1:]
    found[-1] = found[-1][:1] + (hi,) + found[-1][2:]
    return found


def _windows(first: tuple, finals, rate, reach, least) -> list:
    """The states each step of a stretch can start from, from the first step's."""
    windows = [first]
    for f, r, R, d in zip(finals, rate, reach, least):
        lo, hi = windows[-1]
        if r == 0.0:
            windows.append((lo, hi))
            continue
        decay = math.exp(-r * d)
        below = min(R, max(f - lo, 0.0) * decay)
        above = min(R, max(hi - f, 0.0) * decay)
        windows.append((f - below, f + above))
    return windows


def stretch_aims(chain, x0: float, free: np.ndarray, reach: np.ndarray, least: np.ndarray, side: np.ndarray,
                 aims: np.ndarray, proven: np.ndarray) -> None:
    """Solve every stretch of steps that are not free (see the module's notes), in place:
    `aims` gets the errors at the sample of the steps that linger (np.inf: greedy's) and
    `proven` True for the steps of each stretch solved.

    `reach` is each step's largest residual ``R_k`` (inf where no limit applies), `least`
    its least dwell, `side` the sign of its start's offset where it is free.  The value
    functions are lists of pieces ``(lo, hi, A, p, B)``: ``A ln|x - p| + B`` over states
    ``[lo, hi]``.

    Examples
    --------
    A fast step (tau 1 µs) to 1 V, then a slow one (1 ms) that creeps 0.5 mV on, within
    the 1 mV tolerance (so step 1 is not free): the fast step is told to linger.

    >>> from firstorder.settling.chain import Chain
    >>> chain = Chain(np.array([1e6, 1e3]), np.array([1.0, 1.0005]), np.ones(2), 1e-3, False, 0.0,
    ...               np.zeros(2), 1e-6)
    >>> free, aims = np.array([True, False]), np.full(2, np.inf)
    >>> proven = free.copy()
    >>> stretch_aims(chain, 0.0, free, np.full(2, 1e-3), np.full(2, 1e-6), np.array([-1.0, -1.0]), aims, proven)
    >>> proven.tolist(), bool(aims[0] < 1e-3), bool(aims[1] == np.inf)
    ([True, True], True, True)
    """
    n = free.size
    rate, finals, gain, hold = chain.rate, chain.final, chain.gain, chain.hold
    bad = np.flatnonzero(~free)
    budget = MOST_STEPS
    k = 0
    while k < bad.size:
        first = int(bad[k])
        last = first
        while k + 1 < bad.size and bad[k + 1] == last + 1:
            k += 1
            last = int(bad[k])
        k += 1
        steps = last - first + 1
        if steps > budget:
            continue  # past the budget: greedy's residuals there, not proven
        budget -= steps
        try:
            lingering = _solve(first, last, n, x0, rate, finals, gain, hold, reach, least, side)
        except _Unsolved:
            continue
        if lingering is None:
            continue
        chosen, solved = lingering
        for step, aim in chosen.items():
            aims[step] = aim
        if solved:
            proven[first:last + 1] = True
            if first > 0:
                proven[first - 1] = True


def _solve(first, last, n, x0, rate, finals, gain, hold, reach, least, side) -> tuple[dict, bool] | None:
    """The aims of the steps that linger in the stretch ``first:last + 1`` and the free
    step before it ({step: error at its sample}) and whether that is the least plan;
    None where the pieces grow past MOST_PIECES.  With a step that cannot be told to
    linger the plan is the least of those that do not linger there (greedy among them),
    so never slower than greedy, but not proven least."""
    aims = {}
    head = first - 1  # a free step whose residual the stretch may want (none before step 0)
    if head >= 0:
        ends = (finals[head], finals[head] + side[head] * reach[head])
        window = (min(ends), max(ends))
    else:
        window = (x0, x0)
    span = slice(first, last + 1)
    windows = _windows(window, finals[span], rate[span], reach[span], least[span])
    if last + 1 < n:  # a free step: tau ln|x - f| and a constant that moves no choice
        following = [(-math.inf, math.inf, 1.0 / rate[last + 1], float(finals[last + 1]), 0.0)]
    else:
        following = [(-math.inf, math.inf, 0.0, 0.0, 0.0)]
    solved = [None] * (last - first + 1)
    for step in range(last, first - 1, -1):
        following, sides = _back(following, windows[step - first], float(finals[step]), float(rate[step]),
                                 float(reach[step]), float(least[step]))
        if len(following) > MOST_PIECES:
            return None
        solved[step - first] = sides
    if head >= 0:
        s = float(side[head])
        choice, largest = _Side(following, float(finals[head]), s, 1.0 / rate[head], float(reach[head])).choice(
            float(reach[head]))
        if not largest:
            aims[head] = _error(choice, head, rate, gain, hold)
        x = float(finals[head]) + s * choice
    else:
        x = float(x0)
    for step in range(first, last + 1):
        r, f = float(rate[step]), float(finals[step])
        if r == 0.0:
            continue
        offset = x - f
        if offset == 0.0:
            continue  # nothing to settle: the least dwell, the state stays
        s = math.copysign(1.0, offset)
        limit = min(float(reach[step]), abs(offset) * math.exp(-r * float(least[step])))
        sides = solved[step - first]
        choice, largest = sides[s].choice(limit) if s in sides else (limit, True)
        if not largest:
            aims[step] = _error(choice, step, rate, gain, hold)
        x = f + s * choice
    return aims, bool(np.isfinite(reach[span][rate[span] > 0.0]).all())


def _error(residual: float, k: int, rate, gain, hold) -> float:
    """The error at the sample of step `k` that leaves `residual` at its end."""
    return float(residual * gain[k] * math.exp(rate[k] * hold[k]))

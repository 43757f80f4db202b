"""Optional compiled kernels (numba) for long drives and dense time grids.

Each kernel performs exactly the floating-point operations of the numpy path in
:mod:`firstorder.engine`, in the same order (and without fused multiply-adds,
which numba only emits under ``fastmath``), so its results are identical to the
last bit; ``tests/test_kernels.py`` checks that.  The transcendental functions
(exp, expm1, log) stay in numpy on both paths for the same reason.  Every kernel
works on a piece ``first:stop`` of its arrays, so the engine can run pieces on
several threads (:mod:`firstorder._parallel`).

numba is optional: without it, or with ``FIRSTORDER_KERNELS=0`` in the
environment, everything runs on numpy.  It is imported only when an array is
large enough (:data:`THRESHOLD`) for the compiled loop to pay for itself, so small
analyses never load it.
"""

from __future__ import annotations

import math
import os
import types

import numpy as np

#: Arrays shorter than this stay on the numpy path (no numba import, no compile).
THRESHOLD = 20_000

#: Blocks of the scan worked on together (independent chains in flight).
LANES = 8

#: Below this magnitude a negative exponent's ``1 - exp`` is taken from ``expm1`` (see
#: :func:`firstorder.engine.decay_factors`).
SMALL_EXPONENT = 1.0 / 16.0

#: Exponents below this are "deep": numpy's ``exp`` leaves its vectorised path for them
#: (results near or below the smallest normal double) and runs 7 to 60 times slower, so the
#: engine exponentiates them apart (see :func:`firstorder.engine.exp_in_place`).
DEEP_EXPONENT = -708.0

_loaded: object = None  # None: not tried yet; False: unavailable; else the module


def available(size: int) -> object:
    """The kernel module for an array of `size`, or None to use numpy."""
    global _loaded
    if size < THRESHOLD or os.environ.get("FIRSTORDER_KERNELS", "1") == "0":
        return None
    if _loaded is None:
        try:
            _loaded = _compile()
        except ImportError:
            _loaded = False
    return _loaded or None


def _compile():
    import numba

    jit = numba.njit(cache=True, nogil=True)

    # The scan's blocks are walked eight at a time, element by element, with the
    # innermost loop across those eight: each block sees the operations of the numpy
    # path in the same order, there are eight independent chains to hide the
    # multiply-add latency, and each block is still read sequentially.  Both scan
    # kernels work on blocks ``first:stop`` only, so pieces can run on several threads.
    #
    # Indices are unsigned (or loops run over views from 0) because a signed index
    # makes numba check for negative indices on every access, which costs time and
    # keeps LLVM from vectorising the loop.
    lanes = LANES
    u = np.uint64

    # The shift of map k is ``growth[k] * (scale * target[k])``, formed where it is used
    # (numpy: scale * target, then growth * that) so it is never stored.  With
    # `complement`, `growth` holds the decay factors and ``1 - growth[k]`` is used (numpy:
    # 1 - decay), so that array need not be stored either.  (Written out in each place:
    # a jitted helper defined here would be a closure, which numba cannot cache.)

    @jit
    def block_totals(a, growth, complement, target, scale, width, gain, shift, first, stop):
        """Compose each block's maps in order: the per-block (gain, shift) of blocks first:stop."""
        n = a.size
        full = min(stop, n // width)  # blocks without the short last one
        w = u(width)
        g = np.empty(lanes)
        s = np.empty(lanes)
        c0 = first
        while c0 + lanes <= full:
            base = u(c0) * w
            for lane in range(lanes):
                k = base + u(lane) * w
                g[lane] = a[k]
                s[lane] = (1.0 - growth[k] if complement else growth[k]) * (scale * target[k])
            for j in range(1, width):
                row = base + u(j)
                for lane in range(lanes):
                    k = row + u(lane) * w
                    # numpy: block_shift = block_shift * gain[j] + shift[j]; block_gain *= gain[j]
                    x = a[k]
                    s[lane] = (1.0 - growth[k] if complement else growth[k]) * (scale * target[k]) + x * s[lane]
                    g[lane] = x * g[lane]
            for lane in range(lanes):
                gain[c0 + lane] = g[lane]
                shift[c0 + lane] = s[lane]
            c0 += lanes
        for c in range(c0, stop):  # the rest, one block at a time
            k0 = u(c) * w
            total_gain = a[k0]
            total_shift = (1.0 - growth[k0] if complement else growth[k0]) * (scale * target[k0])
            for k in range(k0 + u(1), min(k0 + w, u(n))):
                total_shift = (1.0 - growth[k] if complement else growth[k]) * (scale * target[k]) + a[k] * total_shift
                total_gain = a[k] * total_gain
            gain[c] = total_gain
            shift[c] = total_shift

    @jit
    def block_states(a, growth, complement, target, scale, width, starts, out, first, stop):
        """Each element's state in blocks first:stop: the recurrence run from the block's
        start (numpy: ``x = gain[j] * x + shift[j]`` row by row), written to ``out[k + 1]``."""
        n = a.size
        full = min(stop, n // width)
        w = u(width)
        x = np.empty(lanes)
        c0 = first
        while c0 + lanes <= full:
            base = u(c0) * w
            for lane in range(lanes):
                x[lane] = starts[c0 + lane]
            for j in range(width):
                row = base + u(j)
                for lane in range(lanes):
                    k = row + u(lane) * w
                    state = a[k] * x[lane] + (1.0 - growth[k] if complement else growth[k]) * (scale * target[k])
                    x[lane] = state
                    out[k + u(1)] = state
            c0 += lanes
        for c in range(c0, stop):
            state = starts[c]
            k0 = u(c) * w
            for k in range(k0, min(k0 + w, u(n))):
                state = a[k] * state + (1.0 - growth[k] if complement else growth[k]) * (scale * target[k])
                out[k + u(1)] = state

    @jit
    def segment_exponents(times, ends, rate, out, first, stop):
        """``-((end - start) * rate)`` of segments first:stop (numpy: the drive's durations,
        multiply, negate); returns how many lie in ``(-SMALL_EXPONENT, 0)`` and how many
        below ``DEEP_EXPONENT``."""
        begins = times[first:stop]
        finishes = ends[first:stop]
        rates = rate[first:stop]
        target = out[first:stop]
        small = 0
        deep = 0
        for k in range(target.size):
            e = -((finishes[k] - begins[k]) * rates[k])
            target[k] = e
            small += (e > -SMALL_EXPONENT) & (e < 0.0)
            deep += e < DEEP_EXPONENT
        return small, deep

    @jit
    def copy_checked(source, target, first, stop):
        """Copy ``source[first:stop]`` into `target`; return whether every value is finite
        and whether each is greater than the one before (``source[first - 1]`` included)."""
        start = max(first, 1)
        values = source[start:stop]
        before = source[start - 1:stop - 1]
        copy = target[start:stop]
        not_finite = 0
        not_increasing = 0
        for i in range(values.size):  # one pass, vectorised: no early exit
            value = values[i]
            copy[i] = value
            not_finite |= not (value - value == 0.0)  # NaN and inf give NaN
            not_increasing |= not (value > before[i])
        if first == 0 and stop > 0:
            value = source[0]
            target[0] = value
            not_finite |= not (value - value == 0.0)
        return not_finite == 0, not_increasing == 0

    @jit
    def largest_magnitude(values, first, stop):
        """``max |values[first:stop]|`` in one pass (0 for no values; finite values: the
        levels are checked at the boundary)."""
        piece = values[first:stop]
        largest = 0.0
        for i in range(piece.size):
            largest = max(largest, abs(piece[i]))
        return largest

    @jit
    def walk(t, first, stop, starts, rate, k, k_stop, out, bounds):
        """Walk ``t[first:stop]`` (from segment `k`): ``(t - start) * -rate`` of each point's
        segment into `out` (numpy: repeat, subtract, multiply), and into `bounds` the first
        point of every segment met, then `stop` up to segment `k_stop` (``bounds[j]:bounds[j + 1]``
        are segment j's points).  Returns the segment of the last point, whether the
        points never decrease (``t[first - 1]`` included) and none is NaN (if they do,
        `out` and `bounds` hold nothing useful), and how many exponents lie below
        ``DEEP_EXPONENT``."""
        n = starts.size
        points = t[first:stop]
        target = out[first:stop]
        following = t[max(first, 1):stop]
        before = t[max(first, 1) - 1:stop - 1]
        out_of_order = 0
        deep = 0
        for i in range(following.size):
            out_of_order |= not (following[i] >= before[i])  # also catches NaN
        if points.size and not points[0] == points[0]:
            out_of_order = 1
        if out_of_order:  # the caller takes another path: the walk would be wasted
            return k, False, deep
        upcoming = starts[k + 1] if k + 1 < n else np.inf
        begin = starts[k]
        factor = -rate[k]
        for i in range(points.size):
            value = points[i]
            if value >= upcoming:  # one mispredicted branch per segment, not per point
                while k + 1 < n and value >= starts[k + 1]:
                    k += 1
                    bounds[k] = first + i
                upcoming = starts[k + 1] if k + 1 < n else np.inf
                begin = starts[k]
                factor = -rate[k]
            e = (value - begin) * factor
            target[i] = e
            deep += e < DEEP_EXPONENT
        for j in range(k + 1, k_stop + 1):
            bounds[j] = stop
        return k, out_of_order == 0, deep

    @jit
    def combine(difference, final, bounds, decay, out, first, stop, k, k_last):
        """``difference * decay + final`` of each point's segment over ``first:stop``, from
        segment `k` to segment `k_last` (numpy: repeat, multiply, add)."""
        decays = decay[first:stop]
        target = out[first:stop]
        upcoming = bounds[k + 1] - first if k < k_last else target.size
        d = difference[k]
        f = final[k]
        for i in range(target.size):
            if i >= upcoming:
                while i >= upcoming:
                    k += 1
                    upcoming = bounds[k + 1] - first if k < k_last else target.size
                d = difference[k]
                f = final[k]
            target[i] = d * decays[i] + f

    # Settling kernels divide by limits and rates that may be zero: numpy's rules
    # (inf, NaN) rather than Python's ZeroDivisionError, as on the numpy path.
    jit_dividing = numba.njit(cache=True, nogil=True, error_model="numpy")

    @jit_dividing
    def settle_quotients(start, final, decay, relative, value, limit, quotient, residual, first, stop):
        """Segments first:stop: with ``step = |final - start|``, the limit (``value * step`` if
        `relative`, else `value`; written to `limit` only if relative), ``step / limit``
        (``step * (1 / value)`` for a fixed limit) and the residual ``step * decay``."""
        starts = start[first:stop]
        finals = final[first:stop]
        decays = decay[first:stop]
        quotients = quotient[first:stop]
        residuals = residual[first:stop]
        if relative:
            limits = limit[first:stop]
            for k in range(quotients.size):
                step = abs(finals[k] - starts[k])
                bound = value * step
                limits[k] = bound
                quotients[k] = step / bound
                residuals[k] = step * decays[k]
        else:
            inverse = 1.0 / value
            for k in range(quotients.size):
                step = abs(finals[k] - starts[k])
                quotients[k] = step * inverse
                residuals[k] = step * decays[k]

    @jit_dividing
    def settle_times(logarithm, tau, uniform, times, ends, settled, first, stop):
        """Segments first:stop, from ``log(step / limit)`` (overwritten with the settle time,
        NaN where the segment ends first): whether each settles.  numpy: times tau (one
        value if `uniform`), 0 where held (tau inf) or not positive, compare with the
        durations."""
        logs = logarithm[first:stop]
        begins = times[first:stop]
        finishes = ends[first:stop]
        flags = settled[first:stop]
        taus = tau[:1] if uniform else tau[first:stop]
        for k in range(logs.size):  # selects, not branches: the loop vectorises
            t = taus[0] if uniform else taus[k]
            time = 0.0 if t == np.inf else logs[k] * t
            time = time if time >= 0.0 else 0.0
            inside = time <= finishes[k] - begins[k]
            flags[k] = inside
            logs[k] = time if inside else np.nan


    # -- plans (settling/chain.py's walk_fast): the same operations as its numpy path ----
    @jit_dividing
    def plan_round(x, levels, holds, some_hold, rate, gain, scale, relative, aims, has_aims, edge, has_edge,
                   hold_decay, with_hold, inside, ulps, step, aim, moving, settles, side, following, first, stop):
        """Steps first:stop of one round of the plan's pattern, from the guessed starts `x`:
        each step's size, aim, whether it moves and settles, its side and where it ends if
        it settles.  ``scale`` is value * keep, ``inside`` 1 - AIM_INSIDE, ``ulps`` the
        rounding allowance per unit of the state."""
        for k in range(first, stop):
            final = x[k] if (some_hold and holds[k]) else levels[k]
            offset = x[k] - final
            size_k = abs(offset) * gain[k]
            allowed = scale * size_k if relative else scale
            bigger = max(abs(x[k]), abs(final)) * (ulps * gain[k])
            goal = allowed * inside - bigger
            if goal <= 0.0:
                goal = allowed * inside
            threshold = allowed
            if has_aims and aims[k] < goal:
                goal = aims[k]
                threshold = aims[k]
            move = size_k > threshold
            if some_hold and holds[k]:
                move = False
            settle = move and (size_k >= goal * edge[k]) if has_edge else move
            sign = 1.0 if offset > 0.0 else (-1.0 if offset < 0.0 else offset)
            reach = goal / gain[k]
            if with_hold:
                reach = reach * hold_decay[k]
            step[k] = size_k
            aim[k] = goal
            moving[k] = move
            settles[k] = settle
            side[k] = sign
            following[k] = final + sign * reach

    @jit_dividing
    def plan_instants(dwell, instants):
        """Sums of the dwells from 0, then again with each dwell padded by the spacing of
        the first sum at it (numpy: two cumsums and np.spacing).  The spacing of a sum >= 0
        is read from its bits (the next float up is its bits + 1), not from nextafter,
        which numba calls out to one element at a time."""
        n = dwell.size
        scratch = np.empty(2)
        scratch_bits = scratch.view(np.int64)
        plain = 0.0
        padded = 0.0
        instants[0] = 0.0
        # One loop: the plain sum and the padded one are two independent chains of additions
        # (the padding reads only the plain sum), so the processor overlaps them.
        for k in range(u(n)):
            plain = plain + dwell[k]
            scratch[0] = plain
            scratch_bits[1] = scratch_bits[0] + 1
            padded = padded + (dwell[k] + (scratch[1] - plain))
            instants[k + u(1)] = padded

    # -- plans whose steps settle (settling/settled.py): the same operations as its numpy path --
    @jit_dividing
    def settled_steps(levels, gain, unit_gain, x0, allowed, base, allowance, aims, has_aims, hold_decay, with_hold,
                      depth, quotient, side, codes, first, stop):
        """Steps first:stop, each started where the step before it ends if it settles (on
        the side it came from): ``step / aim``, the side of the start (int8) and the code
        (0 regular, 8 the side of the step before not known within `depth` steps back, 9
        not moving; the quotient and side of a step that is not regular are not used).
        Returns how many got code 8.

        Each step's aim is ``base - allowance * gain`` (``base`` if that is not > 0),
        capped by `aims`; its reach is ``aim / gain`` (no division with `unit_gain`: the
        same number) times the hold's decay.  A step's side is certain where its jump
        passes twice the reach of the step before it; else it follows from the side
        before it (looked up at most `depth` steps back).  A first loop takes every step
        whose step before has a certain side (the reach of each step carried to the next
        two), a second the rest (the first two steps, from `x0`, and a few more: a look
        back each).  Without `with_hold` or `has_aims` (or with `unit_gain`) the arrays
        `hold_decay`, `aims` (or `gain`) hold one element, read at index 0 (an index
        times 0, not a branch: the first loop then has none on its flags).
        """
        hold_on = u(1) if with_hold else u(0)
        aims_on = u(1) if has_aims else u(0)
        gain_on = u(0) if unit_gain else u(1)
        reach_before = 0.0  # of step k - 1
        reach_two = 0.0  # of step k - 2
        begin = first - 2 if first >= 2 else 0
        for k in range(u(begin), u(stop)):
            c = gain[k * gain_on]
            goal = base - allowance * c
            if goal <= 0.0:
                goal = base
            cap = aims[k * aims_on]  # inf without aims
            threshold = cap if cap < goal else allowed
            goal = cap if cap < goal else goal
            reach = goal if unit_gain else goal / c
            reach = reach * hold_decay[k * hold_on]  # 1.0 without a hold
            if k >= u(first):
                if k < u(2):
                    codes[k] = 7  # from x0: the second loop
                else:
                    jump = levels[k - u(2)] - levels[k - u(1)]
                    # jump != 0 where it counts; copysign has no branch (random levels
                    # would mispredict one time in two)
                    start = levels[k - u(1)] + math.copysign(1.0, jump) * reach_before
                    offset = start - levels[k]
                    size_k = abs(offset) * c
                    quotient[k] = size_k / goal
                    side[k] = int(math.copysign(1.0, offset))
                    codes[k] = 7 if not abs(jump) > 2.0 * reach_two else (0 if size_k > threshold else 9)
            reach_two = reach_before
            reach_before = reach
        unknown = 0  # steps given code 8, returned
        for k in range(u(first), u(stop)):
            if codes[k] != 7:
                continue
            # Back to the nearest step j whose side is certain, then forward to step k - 1.
            start = x0
            known = True
            if k >= u(1):
                j = k - u(1)
                back = 0
                while j > u(0) and back <= depth:
                    i = j - u(1)
                    c = gain[i * gain_on]
                    goal_i = base - allowance * c
                    if goal_i <= 0.0:
                        goal_i = base
                    if aims[i * aims_on] < goal_i:
                        goal_i = aims[i * aims_on]
                    reach_i = (goal_i if unit_gain else goal_i / c) * hold_decay[i * hold_on]
                    if abs(levels[i] - levels[j]) > 2.0 * reach_i:
                        break
                    back += 1
                    j = j - u(1)
                if back > depth:
                    known = False
                else:
                    offset = x0 - levels[0] if j == u(0) else levels[j - u(1)] - levels[j]
                    sign = 1.0 if offset > 0.0 else (-1.0 if offset < 0.0 else 0.0)
                    while True:
                        c = gain[j * gain_on]
                        goal_j = base - allowance * c
                        if goal_j <= 0.0:
                            goal_j = base
                        if aims[j * aims_on] < goal_j:
                            goal_j = aims[j * aims_on]
                        reach_j = (goal_j if unit_gain else goal_j / c) * hold_decay[j * hold_on]
                        end = levels[j] + sign * reach_j
                        if j + u(1) == k:
                            start = end
                            break
                        offset = end - levels[j + u(1)]
                        sign = 1.0 if offset > 0.0 else (-1.0 if offset < 0.0 else 0.0)
                        j = j + u(1)
            if not known:
                quotient[k] = 1.0
                side[k] = 0
                codes[k] = 8
                unknown += 1
                continue
            c = gain[k * gain_on]
            goal = base - allowance * c
            if goal <= 0.0:
                goal = base
            threshold = allowed
            if aims[k * aims_on] < goal:
                goal = aims[k * aims_on]
                threshold = aims[k * aims_on]
            offset = start - levels[k]
            size_k = abs(offset) * c
            if size_k > threshold:
                quotient[k] = size_k / goal
                side[k] = 1 if offset > 0.0 else -1
                codes[k] = 0
            else:
                quotient[k] = 1.0
                side[k] = 0
                codes[k] = 9
        return unknown

    @jit_dividing
    def settled_dwells(logarithm, rate, hold, with_hold, shortest, dwell, codes, first, stop):
        """Steps first:stop: the settle time ``log(step / aim) / rate`` (in place of the
        logarithm) and the dwell ``max(shortest, settle + hold)``; a regular step that
        needs less than `shortest` gets code 9 (its end then depends on its start).
        Returns how many steps have code 9 (these and earlier ones) and how many dwells
        are not > 0."""
        irregular = 0
        not_positive = 0
        for k in range(u(first), u(stop)):
            settle = logarithm[k] / rate[k]
            need = settle + hold[k] if with_hold else settle
            logarithm[k] = settle
            dwell[k] = max(shortest, need)
            if codes[k] == 0 and not need >= shortest:
                codes[k] = 9
            irregular += codes[k] == 9
            not_positive += not dwell[k] > 0.0
        return irregular, not_positive

    @jit_dividing
    def settled_exponents(instants, dwell, rate, hold, with_hold, exponent, held_exponent, first, stop):
        """Steps first:stop: ``-rate * real`` of each real dwell (``instants[k + 1] -
        instants[k]``; with a hold also ``-rate * (real - hold)``); returns how many real
        dwells came out shorter than planned."""
        short = 0
        for k in range(u(first), u(stop)):
            real = instants[k + u(1)] - instants[k]
            short += real < dwell[k]
            exponent[k] = -rate[k] * real
            if with_hold:
                held_exponent[k] = -rate[k] * (real - hold[k])
        return short

    @jit
    def settled_check(a, levels, width, starts, gain, gain_on, held, side, allowed, end, first, stop):
        """Blocks first:stop of the scan ``x = a[k] x + (1 - a[k]) levels[k]`` (block_states'
        operations with ``complement``, ``scale`` 1), each step judged from its start on
        the way: its error at the sample ``|levels[k] - x| gain[k] held[k]`` against
        `allowed`, and its side against `side` (0: not checked).  Returns how many fail;
        the state after the last step goes to ``end[0]``.  Without `gain_on` (a gain of
        1), `gain` is one element read at index 0."""
        on = u(1) if gain_on else u(0)
        last = -(-a.size // width) - 1  # the block that ends with the last step
        n = a.size
        full = min(stop, n // width)
        w = u(width)
        x = np.empty(lanes)
        bad = 0
        c0 = first
        while c0 + lanes <= full:
            base = u(c0) * w
            for lane in range(lanes):
                x[lane] = starts[c0 + lane]
            for j in range(width):
                row = base + u(j)
                for lane in range(lanes):
                    k = row + u(lane) * w
                    distance = levels[k] - x[lane]
                    e = abs(distance) * gain[k * on] * held[k]
                    planned = side[k]
                    # no branch: the sides are random
                    bad += (not e <= allowed) | ((planned != 0) & (planned * distance >= 0.0))
                    x[lane] = a[k] * x[lane] + (1.0 - a[k]) * (1.0 * levels[k])
            for lane in range(lanes):
                if c0 + lane == last:
                    end[0] = x[lane]
            c0 += lanes
        for c in range(c0, stop):
            state = starts[c]
            k0 = u(c) * w
            for k in range(k0, min(k0 + w, u(n))):
                distance = levels[k] - state
                e = abs(distance) * gain[k * on] * held[k]
                planned = side[k]
                bad += (not e <= allowed) | ((planned != 0) & (planned * distance >= 0.0))
                state = a[k] * state + (1.0 - a[k]) * (1.0 * levels[k])
            if c == last:
                end[0] = state
        return bad

    return types.SimpleNamespace(
        block_totals=block_totals,
        block_states=block_states,
        segment_exponents=segment_exponents,
        copy_checked=copy_checked,
        largest_magnitude=largest_magnitude,
        walk=walk,
        combine=combine,
        settle_quotients=settle_quotients,
        settle_times=settle_times,
        plan_round=plan_round,
        plan_instants=plan_instants,
        settled_steps=settled_steps,
        settled_dwells=settled_dwells,
        settled_exponents=settled_exponents,
        settled_check=settled_check,
    )

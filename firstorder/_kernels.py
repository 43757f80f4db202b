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
        the first sum at it (numpy: two cumsums and np.spacing)."""
        plain = 0.0
        padded = 0.0
        instants[0] = 0.0
        for k in range(dwell.size):
            plain = plain + dwell[k]
            padded = padded + (dwell[k] + (np.nextafter(plain, np.inf) - plain))
            instants[k + 1] = padded

    return types.SimpleNamespace(
        block_totals=block_totals,
        block_states=block_states,
        segment_exponents=segment_exponents,
        copy_checked=copy_checked,
        walk=walk,
        combine=combine,
        settle_quotients=settle_quotients,
        settle_times=settle_times,
        plan_round=plan_round,
        plan_instants=plan_instants,
    )

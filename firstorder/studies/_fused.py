"""A study's settling summary for a slice of units in compiled passes (numba).

The numpy path (:mod:`.run`: ``UnitsRun.columns``, then ``summarize``) forms every
(unit, segment) column as an array of its own, takes the hold segments' droop on
fancy-indexed copies, and then transposes the settle times and errors to pick each
segment's order statistics: about thirty passes over (units, segments) arrays.  Here:

1. :func:`lot_summary` runs ``exponents`` over the units' rows: the quotient whose
   logarithm is the settle time over tau, and the exponents of the decay to the sample
   (the hold segments' two ``expm1`` exponents into small arrays of their own);
2. numpy takes ``log``, ``exp`` and ``expm1`` of those, in place (the transcendental
   functions stay numpy's, as in :mod:`firstorder._kernels`; ``exp`` through the engine's
   rule for deep exponents);
3. ``finish`` walks the segments a tile at a time: each unit's settle time, error at the
   sample and limit, with the operations of the numpy path in the same order, so every
   number is that path's to the last bit; it counts the units inside, marks the units
   that fail a sample, keeps each segment's worst unit, and writes the settle times and
   errors transposed (a segment's units side by side, canonical) for
   :func:`firstorder._select.kept_rows` to pick the order statistics from.

``tests/studies/test_fused.py`` checks the summary against the numpy path's, bit for bit.
Only the target ``"final"`` (each unit's own final value) takes this path.
"""

from __future__ import annotations

import functools

import numpy as np

from .. import _kernels, _parallel, _select
from ..engine import exp_in_place

__all__ = ["lot_summary"]

def lot_summary(start: np.ndarray, final: np.ndarray, rate: np.ndarray, tau: np.ndarray, decay: np.ndarray,
                durations: np.ndarray, delays: np.ndarray | None, hold: np.ndarray, value: float, relative: bool,
                within_segment: bool, settle_sides: tuple[int, int], error_sides: tuple[int, int]) -> tuple | None:
    """The parts of a settling summary of (units, n) units, or None when the compiled
    kernels are not in use.

    Parameters
    ----------
    start, final, rate, tau, decay : ndarray, shape (units, n)
        The watched quantity just after each change and the value it heads for, each
        unit's rate, time constant (``1 / rate``, inf where it holds) and decay factor over
        its whole segment.
    durations : ndarray, shape (n,)
    delays : ndarray, shape (n,), or None
        The sample delays; None samples at each segment's end.
    hold : ndarray of bool, shape (n,)
        The segments judged by their droop (cut off from every source).
    value, relative : float, bool
        The tolerance, as ``Tolerance._scale`` gives it.
    within_segment : bool
        Whether a settle time must fall within its segment.
    settle_sides, error_sides : (int, int)
        How many of the smallest and largest settle times and errors to keep.

    Returns
    -------
    tuple
        ``((settle smallest, settle largest), (error smallest, error largest), inside,
        passing, worst score, worst unit)``; the unit is the row (add the slice's first).
    """
    units, n = rate.shape
    if _kernels.available(rate.size) is None or units == 0:
        return None
    exponents, finish = _compile()
    # Any strides (the state at each change is a view of the scan's boundary): numba reads them.
    start, final, rate, tau, decay = (np.asarray(a, dtype=np.float64) for a in (start, final, rate, tau, decay))
    has_delays = delays is not None
    sample = np.ascontiguousarray(delays if has_delays else durations, dtype=np.float64)
    ends = np.ascontiguousarray(durations if within_segment else np.full(n, np.inf), dtype=np.float64)
    hold_columns = np.flatnonzero(hold)
    hold_at = np.full(n, -1, dtype=np.int64)
    hold_at[hold_columns] = np.arange(hold_columns.size)
    settle_t, error_t = np.empty((n, units)), np.empty((n, units))  # a segment's units side by side
    failing = np.empty(units, dtype=np.bool_)
    block = max(1, BLOCK // n)

    def rows(first: int, stop: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        # A block of units at a time through all three steps, its temporaries in the cache.
        quotient, step = np.empty((block, n)), np.empty((block, n))
        exponent = np.empty((block, n)) if has_delays else quotient[:0]
        held_end = np.empty((block, hold_columns.size))
        held_sample = np.empty((block, hold_columns.size)) if has_delays else held_end[:0]
        inside, worst_score, worst_unit = np.zeros(n, dtype=np.int64), np.full(n, -np.inf), np.zeros(n, dtype=np.int64)
        largest = np.full(n, -np.inf)  # the largest error seen in each column
        for top in range(first, stop, block):
            end = min(top + block, stop)
            m = end - top
            exponents(start, final, rate, durations, sample, has_delays, hold_at, value, relative, step, quotient,
                      exponent, held_end, held_sample, top, end)
            with np.errstate(all="ignore"):  # log 0 and 0/0 as on the numpy path
                np.log(quotient[:m], out=quotient[:m])
            if has_delays:
                exp_in_place(exponent[:m].ravel())  # a view: the rows are contiguous
                np.expm1(held_sample[:m], out=held_sample[:m])
            np.expm1(held_end[:m], out=held_end[:m])
            finish(start, tau, decay, step, quotient, exponent, held_end, held_sample, hold_at, ends, has_delays,
                   value, relative, settle_t, error_t, inside, worst_score, largest, worst_unit, failing, top, end)
        return inside, worst_score, worst_unit

    parts = _parallel.run(rows, _parallel.pieces(units, min_piece=max(1, _parallel.MIN_PIECE // max(n, 1))))
    inside, worst_score, worst_unit = parts[0]
    for more, score, unit in parts[1:]:  # later pieces hold later units: equals stay
        inside = inside + more
        take = score > worst_score
        worst_score, worst_unit = np.where(take, score, worst_score), np.where(take, unit, worst_unit)
    worst_score = worst_score + 0.0

    settle_kept = _select.sides_for(n, units, *settle_sides)
    error_kept = _select.sides_for(n, units, *error_sides)

    def columns(first: int, stop: int) -> None:
        _select.kept_rows(settle_t, *settle_kept, first, stop)
        _select.kept_rows(error_t, *error_kept, first, stop)

    _parallel.run(columns, _select.column_pieces(n, units))
    return settle_kept, error_kept, inside, units - int(failing.sum()), worst_score, worst_unit


#: Values of a block of units worked through together (its temporaries stay in the cache).
BLOCK = 32_768


@functools.cache  # compiled (or loaded from numba's cache) once, on first use
def _compile():
    import numba

    # numpy's rules for dividing by zero (inf, NaN), as on the numpy path.
    jit = numba.njit(cache=True, nogil=True, error_model="numpy")
    tile = _select.TILE
    nan, inf = np.nan, np.inf

    @jit
    def exponents(start, final, rate, durations, sample, has_delays, hold_at, value, relative, step, quotient,
                  exponent, held_end, held_sample, first, stop):
        # Units first:stop into rows 0.. of the block: |final - start|, and for settling
        # segments step / limit (settling_columns) and -delay * rate (columns); for holds
        # -duration * rate and -delay * rate (_droop).  A hold's slots in the full rows get 1
        # and 0, whose log and exp nobody reads.
        n = start.shape[1]
        inverse = 1.0 / value
        for r in range(first, stop):
            b = r - first
            for j in range(n):
                h = hold_at[j]
                k = rate[r, j]
                size = abs(final[r, j] - start[r, j])
                step[b, j] = size
                if h < 0:
                    quotient[b, j] = size / (value * size) if relative else size * inverse
                    if has_delays:
                        exponent[b, j] = -sample[j] * k
                else:
                    quotient[b, j] = 1.0
                    held_end[b, h] = -durations[j] * k
                    if has_delays:
                        exponent[b, j] = 0.0
                        held_sample[b, h] = -sample[j] * k

    @jit
    def finish(start, tau, decay, step, logarithm, decayed, held_end, held_sample, hold_at, ends, has_delays, value,
               relative, settle_t, error_t, inside, worst_score, largest, worst_unit, failing, first, stop):
        # Units first:stop (rows 0.. of the block), a tile of columns at a time: each unit's
        # row is read along the tile and written down the transposed arrays (a segment's
        # units side by side; the tile keeps those writes within a few cache lines).
        n = step.shape[1]
        # With one limit for all, error / limit rises with the error (rounding is monotonic),
        # so the quotient is formed only for an error above the largest seen: a division
        # saved on nearly every value.
        same_limit = not relative and value > 0
        for r in range(first, stop):
            failing[r] = False
        for c0 in range(0, n, tile):
            c1 = min(c0 + tile, n)
            for r in range(first, stop):
                b = r - first
                fails = False
                for c in range(c0, c1):
                    h = hold_at[c]
                    size = step[b, c]
                    if h < 0:
                        # settling_columns: the settle time from log(step / limit) and tau
                        limit = value * size if relative else value
                        t = tau[r, c]
                        time = 0.0 if t == inf else logarithm[b, c] * t
                        time = time if time >= 0.0 else 0.0
                        settle = time if time <= ends[c] - 0.0 else nan
                        # columns: |final - start| times the decay to the sample
                        error = size * decayed[b, c] if has_delays else size * decay[r, c]
                    else:
                        # _droop: a hold that stays inside is settled at once
                        droop = size * -held_end[b, h]
                        limit = value * abs(start[r, c]) if relative else value
                        settle = 0.0 if droop <= limit else nan
                        error = size * -held_sample[b, h] if has_delays else droop
                    ok = error <= limit
                    inside[c] += ok
                    fails |= not ok
                    # summarize: the error over its limit (inf for no limit; NaN as inf); the
                    # lowest unit of equals stays
                    seen = inf if error != error else error
                    if not same_limit or seen > largest[c]:
                        largest[c] = seen
                        ratio = error / limit if limit > 0 else inf
                        ratio = inf if ratio != ratio else ratio
                        if ratio > worst_score[c]:
                            worst_score[c], worst_unit[c] = ratio, r
                    # Ranked.of: canonical (a never-settling unit as inf; -0.0 as 0.0; one NaN)
                    settle_t[c, r] = (inf if settle != settle else settle) + 0.0
                    error_t[c, r] = (nan if error != error else error) + 0.0
                failing[r] |= fails

    return exponents, finish

"""Numbers: exact piecewise-exponential responses over any number of segments.

Within segment ``k`` (start ``s_k``, time constant ``tau_k``, final value ``f_k``)
a first-order state obeys the closed form

    x(t) = f_k + (x_k - f_k) * exp(-(t - s_k) / tau_k),

so the whole response is fixed by the state ``x_k`` at every change.  Those
follow from the affine recurrence ``x_{k+1} = a_k x_k + b_k`` with
``a_k = exp(-d_k / tau_k)`` and ``b_k = (1 - a_k) f_k`` (``1 - a_k`` from ``expm1``
where it would cancel), solved here by a blocked scan: about sqrt(n) blocks of
sqrt(n) maps; a first pass composes each block's maps, a short scan gives every
block's starting state, and a second pass runs the recurrence inside all blocks
at once.  That is numpy work proportional to the number of segments, a Python
loop of only about sqrt(n) steps, and only products of numbers in [0, 1] (no
division by small products, so no overflow however long the drive).

Long arrays run on compiled kernels that repeat these operations exactly
(:mod:`firstorder._kernels`), in pieces on several threads
(:mod:`firstorder._parallel`); the results are the same to the last bit.

Everything works in segment-relative time and with ``rate = 1/tau`` (zero for a
held state), so tau from 1e-12 s to 1e12 s and segments from 1e-15 s to 1e9 s
give neither NaN nor inf.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from . import _kernels, _parallel

__all__ = ["decay_factors", "segment_factors", "affine_scan", "scan_blocks", "relaxation_scan", "SegmentLocator",
           "evaluate", "evaluate_sorted", "exp_in_place", "settling_columns"]

#: Below this many maps a plain loop is quicker than the blocked scan.
_LOOP_LIMIT = 64

#: A sorted grid with fewer points than segments / this is located by a search per point
#: rather than by run lengths over every segment.
RUNS_PER_POINT = 16

#: Grids up to this many points are located by a search per point whatever their order:
#: on arrays this short the gathers cost less than finding out whether the grid is sorted
#: and forming run lengths (the numbers are the same either way).
SMALL_GRID = 1024


def decay_factors(durations: np.ndarray, rate: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(a, 1 - a)`` with ``a = exp(-durations * rate)``, both accurate.

    ``1 - a`` is taken from ``expm1`` where the exponent is small (between
    ``-1/16`` and 0), where subtracting from 1 would cancel; elsewhere ``1 - a`` loses
    nothing that matters (relative error below 2e-15) and saves a transcendental
    per segment.

    Examples
    --------
    >>> a, one_minus_a = decay_factors(np.array([1e-15]), np.array([1.0]))
    >>> float(one_minus_a[0])
    1e-15
    """
    exponent = _exponents(durations, rate)
    return _factors_in_place(exponent, _small(exponent))


def _exponents(durations: np.ndarray, rate: np.ndarray) -> np.ndarray:
    """``-(durations * rate)``, the exponent of every segment's decay."""
    exponent = np.multiply(durations, rate)
    return np.negative(exponent, out=exponent)


def _small(exponent: np.ndarray) -> np.ndarray:
    """Where ``1 - exp`` would cancel: negative exponents above ``-SMALL_EXPONENT``
    (at zero, 1 - exp is exactly 0 anyway)."""
    within = np.greater(exponent, -_kernels.SMALL_EXPONENT)
    within &= exponent < 0.0
    return within.nonzero()[0]  # flat already (flatnonzero's wrappers cost more than the work here)


def _factors_in_place(exponent: np.ndarray, small: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(exp, 1 - exp)`` of `exponent`, whose storage becomes the first; `small`
    indexes the exponents whose ``1 - exp`` comes from ``expm1``."""
    small_growth = np.negative(np.expm1(exponent[small]))
    decay = exp_in_place(exponent, nonpositive=True)
    growth = np.subtract(1.0, decay)
    growth[small] = small_growth
    return decay, growth


def segment_factors(times: np.ndarray, ends: np.ndarray, rate: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
    """:func:`decay_factors` of the segments from `times` to `ends`.

    The second array is None where it would be exactly ``1 - decay`` (no exponent
    is small), which saves storing it; :func:`relaxation_scan` takes it either way.

    Examples
    --------
    >>> a, one_minus_a = segment_factors(np.array([0.0, 1.0]), np.array([1.0, 3.0]), np.array([1.0, 0.5]))
    >>> a.round(6).tolist(), one_minus_a
    ([0.367879, 0.367879], None)
    >>> segment_factors(np.array([0.0]), np.array([1e-9]), np.array([1.0]))[1]
    array([1.e-09])
    """
    n = times.size
    kernels = _kernels.available(n)
    if kernels is None:
        exponent = _exponents(ends - times, rate)
        if exponent.max() <= -_kernels.SMALL_EXPONENT:
            # The usual case, every segment longer than a sliver of its time constant, told
            # by one reduction (a short drive's fixed cost is made of such calls).
            return exp_in_place(exponent, nonpositive=True), None
        small = _small(exponent)
        if small.size == 0:
            return exp_in_place(exponent, nonpositive=True), None
        return _factors_in_place(exponent, small)
    exponent = np.empty(n)

    def piece(first: int, stop: int) -> tuple[np.ndarray, np.ndarray] | None:
        # decay_factors' operations on segments first:stop; the expm1 of small exponents
        # is handed back, for the caller to place once it knows 1 - decay is needed.
        part = exponent[first:stop]
        small_count, deep = kernels.segment_exponents(times, ends, rate, exponent, first, stop)
        if not small_count:
            exp_in_place(part, deep)
            return None
        small = _small(part)
        small_growth = np.negative(np.expm1(part[small]))
        exp_in_place(part, deep)
        return first + small, small_growth

    spans = _parallel.pieces(n)
    smalls = [found for found in _parallel.run(piece, spans) if found is not None]
    if not smalls:
        return exponent, None
    growth = np.empty(n)
    _parallel.run(lambda first, stop: np.subtract(1.0, exponent[first:stop], out=growth[first:stop]), spans)
    for where, small_growth in smalls:
        growth[where] = small_growth
    return exponent, growth


def affine_scan(a: np.ndarray, b: np.ndarray, x0: Any) -> np.ndarray:
    """Return ``x`` with ``x[0] = x0`` and ``x[k+1] = a[k] * x[k] + b[k]``.

    A leading unit axis is taken as it comes: each row is scanned with exactly the
    operations a row alone would get (the blocking depends on the length only), so unit
    ``u`` of a lot is bit for bit its own scan.

    Parameters
    ----------
    a, b : ndarray, shape (n,) or (units, n)
    x0 : float, or ndarray of shape (units,)

    Returns
    -------
    ndarray, shape (n + 1,) or (units, n + 1)

    Examples
    --------
    >>> affine_scan(np.array([0.5, 0.5]), np.array([1.0, 0.0]), 2.0)
    array([2., 2., 1.])
    >>> affine_scan(np.array([[0.5, 0.5], [1.0, 1.0]]), np.array([[1.0, 0.0], [1.0, 1.0]]), np.array([2.0, 0.0]))
    array([[2., 2., 1.],
           [0., 1., 2.]])
    """
    n = a.shape[-1]
    lead = a.shape[:-1]
    if n <= _LOOP_LIMIT:
        if not lead:
            x = float(x0)
            out = [x]
            for ak, bk in zip(a.tolist(), b.tolist()):
                x = ak * x + bk
                out.append(x)
            return np.array(out)
        rows = np.empty(lead + (n + 1,))
        rows[..., 0] = x = np.broadcast_to(np.asarray(x0, dtype=np.float64), lead)
        for k in range(n):
            x = a[..., k] * x + b[..., k]  # a multiply, then an add: a lone row's operations
            rows[..., k + 1] = x
        return rows
    kernels = _kernels.available(n) if not lead else None
    if kernels is not None:
        # b[k] * (1.0 * 1.0) is b[k] exactly.
        return _compiled_scan(kernels, a, b, np.broadcast_to(1.0, (n,)), 1.0, x0)
    width = math.isqrt(n - 1) + 1
    blocks = -(-n // width)
    full = n // width
    # Element k goes to row k % width, column k // width: row j then holds element j
    # of every block, so each step below is one contiguous vector operation across all
    # blocks.  The inputs are written through a transposed view, so no extra copy.
    gain = np.empty(lead + (width, blocks))
    shift = np.empty(lead + (width, blocks))
    by_block, shift_by_block = np.swapaxes(gain, -1, -2), np.swapaxes(shift, -1, -2)
    by_block[..., :full, :] = a[..., : full * width].reshape(lead + (full, width))
    shift_by_block[..., :full, :] = b[..., : full * width].reshape(lead + (full, width))
    if full < blocks:
        rest = n - full * width
        by_block[..., full, :rest] = a[..., full * width:]
        by_block[..., full, rest:] = 1.0  # identity maps pad the last block
        shift_by_block[..., full, :rest] = b[..., full * width:]
        shift_by_block[..., full, rest:] = 0.0
    # First pass: compose each block's maps, (a_j, b_j) after (A, B) being (a_j A, a_j B + b_j).
    block_gain = gain[..., 0, :].copy()
    block_shift = shift[..., 0, :].copy()
    for j in range(1, width):
        block_shift *= gain[..., j, :]
        block_shift += shift[..., j, :]
        block_gain *= gain[..., j, :]
    # Second pass: from each block's start, the recurrence itself, all blocks at once.
    x = affine_scan(block_gain, block_shift, x0)[..., :-1]
    out = np.empty(lead + (blocks * width + 1,))
    out[..., 0] = x0
    states = np.swapaxes(out[..., 1:].reshape(lead + (blocks, width)), -1, -2)
    for j in range(width):
        x *= gain[..., j, :]
        x += shift[..., j, :]
        states[..., j, :] = x
    return out[..., : n + 1]


def relaxation_scan(decay: np.ndarray, growth: np.ndarray | None, target: np.ndarray, x0: float,
                    scale: float = 1.0) -> np.ndarray:
    """:func:`affine_scan` with shifts ``growth * (scale * target)``: the state at every
    change of segments that relax, each towards its ``scale * target[k]``.

    `growth` None stands for ``1 - decay`` (see :func:`segment_factors`).  The
    numbers are those of forming the shifts first; when compiled, they are formed
    as they are used instead of being stored.

    Examples
    --------
    >>> relaxation_scan(np.array([0.5, 0.5]), None, np.array([1.0, 0.0]), 2.0, scale=2.0)
    array([2., 2., 1.])

    Every argument may carry a leading unit axis (`x0` then one start per unit).
    """
    if decay.ndim == 1 and decay.size <= _LOOP_LIMIT:
        # A few segments: the shifts formed as the loop goes, with the same operations as
        # the arrays below (1 - a, then growth * (scale * target)), one float at a time.
        x = float(x0)
        out = [x]
        targets = np.asarray(target, dtype=np.float64).tolist()
        if growth is None:
            for a, t in zip(decay.tolist(), targets):
                x = a * x + (1.0 - a) * (scale * t)
                out.append(x)
        else:
            for a, g, t in zip(decay.tolist(), growth.tolist(), targets):
                x = a * x + g * (scale * t)
                out.append(x)
        return np.array(out)
    # A lot (a leading unit axis) takes the numpy path, whose numbers the kernels repeat.
    kernels = _kernels.available(decay.size) if decay.ndim == 1 else None
    if kernels is None:
        if growth is None:
            growth = np.subtract(1.0, decay)
        return affine_scan(decay, growth * (scale * target), x0)
    return _compiled_scan(kernels, decay, growth, target, float(scale), x0)


def scan_blocks(kernels, a: np.ndarray, growth: np.ndarray | None, target: np.ndarray, scale: float,
                x0: float) -> tuple[int, list[tuple[int, int]], np.ndarray]:
    """The compiled scan's first half: block width, pieces of blocks, each block's start state
    (for ``block_states``, or a kernel judging each step); `growth` None: ``1 - a``."""
    width = math.isqrt(a.size - 1) + 1
    complement, growth = growth is None, a if growth is None else growth
    block_gain, block_shift = np.empty(-(-a.size // width)), np.empty(-(-a.size // width))
    spans = _parallel.pieces(block_gain.size, align=_kernels.LANES, min_piece=max(1, _parallel.MIN_PIECE // width))
    _parallel.run(lambda first, stop: kernels.block_totals(a, growth, complement, target, scale, width, block_gain,
                                                           block_shift, first, stop), spans)
    return width, spans, affine_scan(block_gain, block_shift, x0)


def _compiled_scan(kernels, a: np.ndarray, growth: np.ndarray | None, target: np.ndarray, scale: float,
                   x0: float) -> np.ndarray:
    """The blocked scan of :func:`affine_scan`, compiled, with shifts ``growth * (scale * target)``
    (`growth` None: ``1 - a``): its blocks and operations (firstorder._kernels), on threads."""
    a = np.ascontiguousarray(a, dtype=np.float64)
    complement = growth is None
    growth = a if complement else np.ascontiguousarray(growth, dtype=np.float64)
    target = np.asarray(target, dtype=np.float64)
    width, spans, block_starts = scan_blocks(kernels, a, None if complement else growth, target, scale, x0)
    out = np.empty(a.size + 1)
    out[0] = x0
    _parallel.run(lambda first, stop: kernels.block_states(a, growth, complement, target, scale, width,
                                                           block_starts, out, first, stop), spans)
    return out


def settling_columns(start: np.ndarray, final: np.ndarray, tau: np.ndarray, decay: np.ndarray,
                     times: np.ndarray, ends: np.ndarray, value: float, relative: bool) -> tuple[np.ndarray, ...]:
    """Per segment, in closed form: ``(limit, settle_time, settled, residual)``.

    With ``step = |final - start|``: the limit is ``value * step`` if `relative`,
    else `value` (then a read-only broadcast); the settle time is ``tau *
    ln(step / limit)`` (0 where the step is within the limit or the state is held,
    ``tau = inf``; NaN where the segment ends first); the residual at the end is
    ``step * decay``.

    Examples
    --------
    >>> limit, settle, settled, residual = settling_columns(
    ...     np.array([0.0, 1.0]), np.array([1.0, 1.0]), np.array([1.0, 1.0]), np.exp([-1.0, -9.0]),
    ...     np.array([0.0, 1.0]), np.array([1.0, 10.0]), 0.01, relative=True)
    >>> settle.round(4).tolist(), settled.tolist(), residual.round(4).tolist()
    ([nan, 0.0], [False, True], [0.3679, 0.0])
    """
    n = start.size
    kernels = _kernels.available(n)
    if kernels is None:
        step = np.subtract(final, start)
        np.abs(step, out=step)
        with np.errstate(all="ignore"):  # 0/0, log 0 and 0 * inf all end as 0 below
            if relative:
                limit = value * step
                settle = np.divide(step, limit)
            else:
                limit = np.broadcast_to(float(value), (n,))
                settle = np.multiply(step, 1.0 / value)
            np.log(settle, out=settle)
            np.multiply(settle, tau, out=settle)
        np.copyto(settle, 0.0, where=tau == np.inf)
        np.copyto(settle, 0.0, where=~(settle >= 0.0))  # within the limit already (or NaN)
        settled = settle <= ends - times
        np.copyto(settle, np.nan, where=~settled)
        return limit, settle, settled, step * decay
    limit = np.empty(n) if relative else np.broadcast_to(float(value), (n,))
    settle = np.empty(n)
    settled = np.empty(n, dtype=bool)
    residual = np.empty(n)
    start = np.ascontiguousarray(start, dtype=np.float64)
    final = np.ascontiguousarray(final, dtype=np.float64)
    decay = np.ascontiguousarray(decay, dtype=np.float64)
    tau = np.asarray(tau, dtype=np.float64)
    uniform = tau.strides == (0,)

    def piece(first: int, stop: int) -> None:
        # The step itself is not kept (it is not a column): each kernel forms what it needs.
        kernels.settle_quotients(start, final, decay, relative, float(value), limit if relative else settle[:0],
                                 settle, residual, first, stop)
        with np.errstate(all="ignore"):
            np.log(settle[first:stop], out=settle[first:stop])
        kernels.settle_times(settle, tau, uniform, times, ends, settled, first, stop)

    _parallel.run(piece, _parallel.pieces(n))
    return limit, settle, settled, residual


#: Below this ``exp`` is exactly 0 in double precision (it underflows below -745.13).
_ZERO_BELOW = -745.2


def exp_in_place(exponent: np.ndarray, deep: int | None = None, nonpositive: bool = False) -> np.ndarray:
    """``exp`` of every element, in place; the same numbers as ``np.exp``, bit for bit.

    numpy's ``exp`` leaves its vectorised loop for exponents below about -708 (results
    near or below the smallest normal double) and is then 7 to 60 times slower; a
    segment of more than about 709 time constants has such an exponent.  Those few are
    taken out first: below -745.2 the result is exactly 0, and between, numpy's own
    ``exp`` of the subset gives the subnormals.  `deep` is how many exponents lie below
    :data:`~firstorder._kernels.DEEP_EXPONENT` when a kernel has counted them already.

    Inside the drive every exponent is <= 0; a time before the first change overflows
    here, harmlessly, and is refused by the caller's range check, which needs the
    locator's finding of whether the grid is sorted.  With `nonpositive` the caller
    vouches that no exponent is above 0 (a segment's duration times its rate), which
    spares the floating-point state's context (a few microseconds on a short array).

    Examples
    --------
    >>> exponent = np.array([-1.0, -720.0, -800.0])
    >>> np.array_equal(exp_in_place(exponent.copy()), np.exp(exponent))
    True
    """
    # One reduction (vectorised, no temporary) tells most arrays they have none; a short
    # array is not worth it (numpy's slow path on a few hundred elements is still quick, and
    # its numbers are the same).
    if deep if deep is not None else (exponent.size > SMALL_GRID and not exponent.min() >= _kernels.DEEP_EXPONENT):
        where = np.flatnonzero(exponent < _kernels.DEEP_EXPONENT)
        if where.size:
            values = exponent[where]
            exponent[where] = 0.0
            with np.errstate(over="ignore"):
                np.exp(exponent, out=exponent)
            result = np.zeros(values.size)
            band = values >= _ZERO_BELOW
            result[band] = np.exp(values[band])
            exponent[where] = result
            return exponent
    if nonpositive:
        return np.exp(exponent, out=exponent)
    with np.errstate(over="ignore"):
        return np.exp(exponent, out=exponent)


class SegmentLocator:
    """Where each time falls among the segments, and the decay since that segment began.

    Building this once per time array lets every response component (they share
    the segments and time constants) be evaluated with one multiply-add each.

    Parameters
    ----------
    t : ndarray
        Times, sorted or not, all within ``[starts[0], end]`` (not checked here).
    starts : ndarray, shape (n,)
        Segment start instants.
    rate : ndarray, shape (n,)
        ``1 / tau`` per segment (zero where the state is held).
    is_sorted : bool, optional
        Whether `t` is non-decreasing, when the caller knows already; found out
        otherwise (except for grids of up to :data:`SMALL_GRID` points, which are not
        looked at) and kept in the attribute of the same name, True only when known.
    within : bool, optional
        True when the caller checked already that no time comes before ``starts[0]``
        (so no exponent is positive).

    Attributes
    ----------
    compiled : bool
        True when the compiled walk ran, which also proves `t` sorted and free of NaN.
    """

    __slots__ = ("_bounds", "_counts", "_index", "_kernels", "_pieces", "_starts", "_t", "compiled", "decay",
                 "is_sorted", "size")

    def __init__(self, t: np.ndarray, starts: np.ndarray, rate: np.ndarray,
                 is_sorted: bool | None = None, within: bool = False) -> None:
        self.size = t.size
        self._kernels = None
        self._counts = None
        self._index = None
        self._bounds = None
        self._pieces = None
        self._t = t
        self._starts = starts
        self.compiled = False
        if is_sorted is not False and t.size > SMALL_GRID and t.dtype == np.float64:
            kernels = _kernels.available(t.size)
            if kernels is not None:
                self._t = t = np.ascontiguousarray(t)
                self._starts = starts = np.ascontiguousarray(starts, dtype=np.float64)
                walked = _compiled_walk(kernels, t, starts, np.ascontiguousarray(rate, dtype=np.float64))
                if walked is not None:
                    # The compiled walk, which also proved the grid sorted and free of NaN.
                    self.decay, self._bounds, self._pieces = walked
                    self._kernels = kernels
                    self.is_sorted = self.compiled = True
                    return
                is_sorted = False
        if t.size <= SMALL_GRID and is_sorted is None:
            is_sorted = t.size < 2  # not looked at: the search below needs no order
        elif is_sorted is None:
            is_sorted = t.size < 2 or not np.greater(t[:-1], t[1:]).any()
        self.is_sorted = bool(is_sorted)
        if is_sorted and t.size > SMALL_GRID and t.size * RUNS_PER_POINT >= starts.size:
            # Sorted times: a run-length per segment, then repeats instead of gathers (for a
            # few points on a long drive a search per point is cheaper than a pass over every
            # segment, so those take the path below).
            counts = self._run_lengths()
            elapsed = np.repeat(starts, counts)
            np.subtract(t, elapsed, out=elapsed)
            elapsed *= np.repeat(-rate, counts)
        else:
            # Counting the later starts at or before each time gives its segment, with times
            # before the first change in segment 0, in one search.
            self._index = starts[1:].searchsorted(t, side="right")
            # (s - t) * r is -((t - s) * r) exactly: rounding is symmetric in sign, so these
            # are the exponents of the other paths, bit for bit.
            elapsed = starts[self._index]
            elapsed -= t
            elapsed *= rate[self._index]
        self.decay = exp_in_place(elapsed, nonpositive=within)

    def _run_lengths(self) -> np.ndarray:
        """Points per segment of a sorted grid (computed on first use)."""
        if self._counts is None:
            first = np.searchsorted(self._t, self._starts, side="left")
            counts = np.empty_like(first)
            np.subtract(first[1:], first[:-1], out=counts[:-1])
            counts[-1] = self._t.size - first[-1]
            counts[0] += first[0]  # points at the very start belong to segment 0
            self._counts = counts
        return self._counts

    def spread(self, per_segment: np.ndarray) -> np.ndarray:
        """Each point's value of a per-segment array."""
        if self._index is not None:
            return per_segment[self._index]
        return np.repeat(per_segment, self._run_lengths())

    def combine(self, final: np.ndarray, start_state: np.ndarray, consume: bool = False) -> np.ndarray:
        """``final + (start_state - final) * decay`` at every point.

        With `consume`, the result is written over :attr:`decay` (one fewer
        array of the grid's size; the locator is spent afterwards).
        """
        if self._kernels is not None:
            out = self.decay if consume else np.empty(self.size)
            difference = np.ascontiguousarray(start_state - final, dtype=np.float64)
            final = np.ascontiguousarray(final, dtype=np.float64)
            _parallel.run(lambda first, stop, k, k_last: self._kernels.combine(
                difference, final, self._bounds, self.decay, out, first, stop, k, k_last), self._pieces)
            return out
        out = self.spread(start_state - final)
        out *= self.decay
        out += self.spread(final)
        return out

    @property
    def segment(self) -> np.ndarray:
        """Segment index of every point."""
        if self._index is not None:
            return self._index
        counts = self._run_lengths()
        return np.repeat(np.arange(counts.size), counts)


def _pieces_by_segment(t: np.ndarray, starts: np.ndarray) -> list[tuple[int, int, int, int]]:
    """Pieces ``(first, stop, k, k_stop)`` of a grid for the threads: each starts in
    segment k, the one holding its first point, and fills in segment bounds up to
    k_stop, where the next piece starts (the grid is taken to be sorted)."""
    n = starts.size
    spans = _parallel.pieces(t.size)
    segments = [0] + [min(n - 1, max(0, int(np.searchsorted(starts, t[first], side="right")) - 1))
                      for first, _ in spans[1:]]
    stops = segments[1:] + [n]
    return [(first, stop, k, k_stop) for (first, stop), k, k_stop in zip(spans, segments, stops)]


def evaluate_sorted(t: np.ndarray, starts: np.ndarray, rate: np.ndarray, final: np.ndarray,
                    start_state: np.ndarray) -> np.ndarray | None:
    """:func:`evaluate` in one compiled sweep over a sorted grid, or None (then use
    :func:`evaluate`) if the grid turns out unsorted or is too short for the kernels.

    Each thread takes a piece of the grid through exponents, ``exp`` and the final
    multiply-add, with exactly the operations of the numpy path.
    """
    kernels = _kernels.available(t.size) if t.dtype == np.float64 and t.ndim == 1 else None
    if kernels is None or t.size < 2:
        return None
    final = np.ascontiguousarray(final, dtype=np.float64)
    start_state = np.asarray(start_state, dtype=np.float64)
    # Each piece forms the differences of its own segments once its points proved sorted, so
    # an unsorted grid (refused by the walk) costs no pass over every segment.  Pieces that
    # share a segment write the same number there.
    difference = np.empty(final.size)

    def combine(first: int, stop: int, k: int, k_last: int, decay: np.ndarray, bounds: np.ndarray) -> None:
        np.subtract(start_state[k:k_last + 1], final[k:k_last + 1], out=difference[k:k_last + 1])
        kernels.combine(difference, final, bounds, decay, decay, first, stop, k, k_last)

    walked = _compiled_walk(kernels, np.ascontiguousarray(t), np.ascontiguousarray(starts, dtype=np.float64),
                            np.ascontiguousarray(rate, dtype=np.float64), then=combine)
    return None if walked is None else walked[0]


def _compiled_walk(kernels, t: np.ndarray, starts: np.ndarray, rate: np.ndarray, then=None):
    """The compiled walk over a grid that proves sorted (the same operations as the numpy
    path), in pieces on several threads: ``(decay, bounds, pieces)``, or None if the grid
    is not sorted.  Each piece is ``(first, stop, k, k_last)``, its points and first and
    last segments.  `then(first, stop, k, k_last, decay, bounds)` runs in each piece right
    after its ``exp``, while the piece is still at hand."""
    n = starts.size
    decay = np.empty(t.size)
    bounds = np.empty(n + 1, dtype=np.int64)
    bounds[0] = 0

    def piece(first: int, stop: int, k: int, k_stop: int) -> tuple[int, bool]:
        k_last, in_order, deep = kernels.walk(t, first, stop, starts, rate, k, k_stop, decay, bounds)
        if in_order:
            exp_in_place(decay[first:stop], deep)
            if then is not None:
                then(first, stop, k, k_last, decay, bounds)
        return k_last, in_order

    work = _pieces_by_segment(t, starts)
    walked = _parallel.run(piece, work)
    if not all(in_order for _, in_order in walked):
        return None
    return decay, bounds, [(first, stop, k, k_last) for (first, stop, k, _), (k_last, _) in zip(work, walked)]


def evaluate(t: np.ndarray, starts: np.ndarray, rate: np.ndarray, final: np.ndarray,
             start_state: np.ndarray) -> np.ndarray:
    """Evaluate the piecewise-exponential state at times `t`.

    Examples
    --------
    >>> starts = np.array([0.0, 1.0]); rate = np.array([1.0, 0.0])
    >>> evaluate(np.array([0.0, 1.0, 2.0]), starts, rate, np.array([1.0, 0.0]), np.array([0.0, 0.5]))
    array([0. , 0.5, 0.5])
    """
    return SegmentLocator(t, starts, rate).combine(final, start_state)

"""Numbers: exact piecewise-exponential responses over any number of segments.

Within segment ``k`` (start ``s_k``, time constant ``tau_k``, final value ``f_k``)
a first-order state obeys the closed form

    x(t) = f_k + (x_k - f_k) * exp(-(t - s_k) / tau_k),

so the whole response is fixed by the state ``x_k`` at every change.  Those
follow from the affine recurrence ``x_{k+1} = a_k x_k + b_k`` with
``a_k = exp(-d_k / tau_k)`` and ``b_k = -expm1(-d_k / tau_k) f_k``, solved here by
a blocked scan: numpy work proportional to the number of segments, no Python
loop per segment, and only products of numbers in [0, 1] (no division by small
products, so no overflow however long the drive).

Everything works in segment-relative time and with ``rate = 1/tau`` (zero for a
held state), so tau from 1e-12 s to 1e12 s and segments from 1e-15 s to 1e9 s
give neither NaN nor inf.
"""

from __future__ import annotations

import math

import numpy as np

from . import _kernels

__all__ = ["decay_factors", "affine_scan", "SegmentLocator", "evaluate"]

#: Below this many maps a plain loop is quicker than the blocked scan.
_LOOP_LIMIT = 64


def decay_factors(durations: np.ndarray, rate: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(a, 1 - a)`` with ``a = exp(-durations * rate)``, both accurate.

    Examples
    --------
    >>> a, one_minus_a = decay_factors(np.array([1e-15]), np.array([1.0]))
    >>> float(one_minus_a[0])
    1e-15
    """
    exponent = np.multiply(durations, rate)
    np.negative(exponent, out=exponent)
    growth = np.expm1(exponent)
    np.negative(growth, out=growth)
    return np.exp(exponent, out=exponent), growth


def affine_scan(a: np.ndarray, b: np.ndarray, x0: float) -> np.ndarray:
    """Return ``x`` with ``x[0] = x0`` and ``x[k+1] = a[k] * x[k] + b[k]``.

    Parameters
    ----------
    a, b : ndarray, shape (n,)
    x0 : float

    Returns
    -------
    ndarray, shape (n + 1,)

    Examples
    --------
    >>> affine_scan(np.array([0.5, 0.5]), np.array([1.0, 0.0]), 2.0)
    array([2., 2., 1.])
    """
    n = a.size
    if n <= _LOOP_LIMIT:
        out = np.empty(n + 1)
        out[0] = x = x0
        for k, (ak, bk) in enumerate(zip(a.tolist(), b.tolist())):
            x = ak * x + bk
            out[k + 1] = x
        return out
    width = math.isqrt(n - 1) + 1
    kernels = _kernels.available(n)
    if kernels is not None:
        # The same blocks and the same operations, compiled (see firstorder._kernels).
        a = np.ascontiguousarray(a, dtype=np.float64)
        b = np.ascontiguousarray(b, dtype=np.float64)
        block_gain, block_shift = kernels.block_totals(a, b, width)
        block_starts = affine_scan(block_gain, block_shift, x0)
        out = np.empty(n + 1)
        kernels.block_states(a, b, width, block_starts, out)
        return out
    blocks = -(-n // width)
    full = n // width
    # Element k goes to row k % width, column k // width: row j then holds element j
    # of every block, so each step below is one contiguous vector operation across all
    # blocks.  The inputs are written through a transposed view, so no extra copy.
    gain = np.empty((width, blocks))
    shift = np.empty((width, blocks))
    gain.T[:full] = a[: full * width].reshape(full, width)
    shift.T[:full] = b[: full * width].reshape(full, width)
    if full < blocks:
        rest = n - full * width
        gain.T[full, :rest] = a[full * width:]
        gain.T[full, rest:] = 1.0  # identity maps pad the last block
        shift.T[full, :rest] = b[full * width:]
        shift.T[full, rest:] = 0.0
    for j in range(1, width):
        # compose: (a_j, b_j) after (A, B) is (a_j A, a_j B + b_j)
        shift[j] += gain[j] * shift[j - 1]
        gain[j] *= gain[j - 1]
    block_starts = affine_scan(gain[-1].copy(), shift[-1].copy(), x0)
    gain *= block_starts[:-1]
    gain += shift
    out = np.empty(blocks * width + 1)
    out[0] = x0
    out[1:].reshape(blocks, width)[...] = gain.T
    return out[: n + 1]


def _exp(exponent: np.ndarray) -> np.ndarray:
    """``exp`` in place.  Inside the drive every exponent is <= 0; a time before the
    first change overflows here, harmlessly, and is refused by the caller's range
    check, which needs the locator's finding of whether the grid is sorted."""
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
        otherwise and kept in the attribute of the same name.
    """

    __slots__ = ("_bounds", "_counts", "_index", "_kernels", "_starts", "_t", "decay", "is_sorted", "size")

    def __init__(self, t: np.ndarray, starts: np.ndarray, rate: np.ndarray,
                 is_sorted: bool | None = None) -> None:
        self.size = t.size
        self._kernels = None
        self._counts = None
        self._index = None
        self._bounds = None
        self._t = t
        self._starts = starts
        if is_sorted is not False and t.size > 1 and t.dtype == np.float64:
            kernels = _kernels.available(t.size)
            if kernels is not None:
                self._t = np.ascontiguousarray(t)
                self._starts = np.ascontiguousarray(starts, dtype=np.float64)
                elapsed = np.empty(t.size)
                bounds, in_order = kernels.walk_exponent(self._t, self._starts, np.ascontiguousarray(rate), elapsed)
                if in_order:
                    # Compiled walk over the sorted grid (the same operations as below).
                    self.is_sorted = True
                    self._kernels = kernels
                    self._bounds = bounds
                    self.decay = _exp(elapsed)
                    return
                is_sorted = False
        if is_sorted is None:
            is_sorted = t.size < 2 or not np.greater(t[:-1], t[1:]).any()
        self.is_sorted = bool(is_sorted)
        if is_sorted and t.size > 1:
            # Sorted times: a run-length per segment, then repeats instead of gathers.
            counts = self._run_lengths()
            elapsed = np.repeat(starts, counts)
            np.subtract(t, elapsed, out=elapsed)
            elapsed *= np.repeat(-rate, counts)
        else:
            self._index = np.searchsorted(starts, t, side="right") - 1
            np.clip(self._index, 0, starts.size - 1, out=self._index)
            elapsed = t - starts[self._index]
            elapsed *= -rate[self._index]
        self.decay = _exp(elapsed)

    def _run_lengths(self) -> np.ndarray:
        """Points per segment of a sorted grid (computed on first use)."""
        if self._counts is None:
            first = np.searchsorted(self._t, self._starts, side="left")
            counts = np.diff(first, append=self._t.size)
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
            self._kernels.sorted_combine(np.ascontiguousarray(start_state - final),
                                         np.ascontiguousarray(final, dtype=np.float64), self.decay,
                                         self._bounds, out)
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

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
    exponent = -(durations * rate)
    return np.exp(exponent), -np.expm1(exponent)


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
        Whether `t` is non-decreasing, when the caller knows already.
    """

    __slots__ = ("_counts", "_index", "decay", "size")

    def __init__(self, t: np.ndarray, starts: np.ndarray, rate: np.ndarray,
                 is_sorted: bool | None = None) -> None:
        self.size = t.size
        if is_sorted is None:
            is_sorted = t.size > 1 and not np.greater(t[:-1], t[1:]).any()
        if is_sorted and t.size > 1:
            # Sorted times: a run-length per segment, then repeats instead of gathers.
            first = np.searchsorted(t, starts, side="left")
            self._counts = np.diff(first, append=t.size)
            self._counts[0] += first[0]  # points at the very start belong to segment 0
            self._index = None
            elapsed = np.repeat(starts, self._counts)
            np.subtract(t, elapsed, out=elapsed)
            elapsed *= np.repeat(-rate, self._counts)
        else:
            self._counts = None
            self._index = np.searchsorted(starts, t, side="right") - 1
            np.clip(self._index, 0, starts.size - 1, out=self._index)
            elapsed = t - starts[self._index]
            elapsed *= -rate[self._index]
        self.decay = np.exp(elapsed, out=elapsed)

    def spread(self, per_segment: np.ndarray) -> np.ndarray:
        """Each point's value of a per-segment array."""
        if self._counts is not None:
            return np.repeat(per_segment, self._counts)
        return per_segment[self._index]

    def combine(self, final: np.ndarray, start_state: np.ndarray) -> np.ndarray:
        """``final + (start_state - final) * decay`` at every point."""
        out = self.spread(start_state - final)
        out *= self.decay
        out += self.spread(final)
        return out

    @property
    def segment(self) -> np.ndarray:
        """Segment index of every point."""
        if self._index is not None:
            return self._index
        return np.repeat(np.arange(self._counts.size), self._counts)


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

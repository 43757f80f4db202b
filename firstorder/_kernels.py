"""Optional compiled kernels (numba) for long drives and dense time grids.

Each kernel performs exactly the floating-point operations of the numpy path in
:mod:`firstorder.engine`, in the same order (and without fused multiply-adds,
which numba only emits under ``fastmath``), so its results are identical to the
last bit; ``tests/test_kernels.py`` checks that.  The transcendental functions
(exp, expm1) stay in numpy on both paths for the same reason.

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
    # multiply-add latency, and each block is still read sequentially.
    lanes = 8

    @jit
    def block_totals(a, b, width):
        """Compose each block's maps in order; return the per-block (gain, shift)."""
        n = a.size
        blocks = (n + width - 1) // width
        gain = np.empty(blocks)
        shift = np.empty(blocks)
        for first in range(0, blocks, lanes):
            last = min(first + lanes, blocks)
            for c in range(first, last):
                gain[c] = a[c * width]
                shift[c] = b[c * width]
            for j in range(1, width):
                for c in range(first, last):
                    k = c * width + j
                    if k < n:
                        # numpy: shift[j] += gain[j] * shift[j - 1]; gain[j] *= gain[j - 1]
                        shift[c] = b[k] + a[k] * shift[c]
                        gain[c] = a[k] * gain[c]
        return gain, shift

    @jit
    def block_states(a, b, width, starts, out):
        """Each element's state: its block's partial map applied to the block's start."""
        n = a.size
        blocks = (n + width - 1) // width
        out[0] = starts[0]
        gain = np.empty(lanes)
        shift = np.empty(lanes)
        for first in range(0, blocks, lanes):
            last = min(first + lanes, blocks)
            for c in range(first, last):
                k = c * width
                gain[c - first] = a[k]
                shift[c - first] = b[k]
                out[k + 1] = gain[c - first] * starts[c] + shift[c - first]
            for j in range(1, width):
                for c in range(first, last):
                    k = c * width + j
                    if k < n:
                        g = a[k] * gain[c - first]
                        s = b[k] + a[k] * shift[c - first]
                        gain[c - first] = g
                        shift[c - first] = s
                        out[k + 1] = g * starts[c] + s

    @jit
    def walk_exponent(t, starts, rate, out):
        """Walk a grid: ``(t - start) * -rate`` of each point's segment into `out` (numpy:
        repeat, subtract, multiply), the first point of every segment (``bounds[k]:bounds[k + 1]``
        are segment k's points), and whether the grid is finite and never decreases (if
        not, `out` holds nothing useful and the caller takes the general path)."""
        n = starts.size
        size = t.size
        bounds = np.empty(n + 1, dtype=np.int64)
        bounds[0] = 0
        k = 0
        begin = starts[0]
        factor = -rate[0]
        good = True
        previous = -np.inf
        for i in range(size):
            value = t[i]
            if not value >= previous:  # also catches NaN
                good = False
            previous = value
            while k + 1 < n and value >= starts[k + 1]:
                k += 1
                bounds[k] = i
                begin = starts[k]
                factor = -rate[k]
            out[i] = (value - begin) * factor
        for j in range(k + 1, n + 1):
            bounds[j] = size
        good = good and np.isfinite(previous)
        return bounds, good

    @jit
    def sorted_combine(difference, final, decay, bounds, out):
        """``difference * decay + final`` of each point's segment (numpy: repeat, multiply, add)."""
        for k in range(final.size):
            d = difference[k]
            f = final[k]
            for i in range(bounds[k], bounds[k + 1]):
                out[i] = d * decay[i] + f

    @jit
    def first_not_increasing(times):
        """Index of the first time not after its predecessor, or -1."""
        for i in range(1, times.size):
            if not times[i] > times[i - 1]:
                return i
        return -1

    return types.SimpleNamespace(
        block_totals=block_totals,
        block_states=block_states,
        walk_exponent=walk_exponent,
        sorted_combine=sorted_combine,
        first_not_increasing=first_not_increasing,
    )

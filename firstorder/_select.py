"""The smallest and largest few values of every column, chosen by radix selection (numba).

A study keeps, per segment, the ``low`` smallest and ``high`` largest of its units'
values (:class:`firstorder.studies.summary.Ranked`), from a (units, segments) array.
With numpy that is a transposed copy and an introselect per segment (``np.partition``,
8 to 14 ns a value on one core).  Here :func:`kept_sides` copies the array transposed a
tile at a time (``transposed``: each value made canonical, -0.0 as 0.0 and every NaN as
the caller's `nan_as`), and :func:`kept_rows` finds each side's cut in a segment's row by
counting instead of moving data (a caller that writes the rows itself, as
:mod:`firstorder.studies._fused` does, calls it directly):

1. each value becomes an unsigned key in the same order (the sign bit flipped for
   positive numbers, every bit for negative ones; NaN, stored positive, comes last,
   above +inf, as in ``np.partition``);
2. the keys between the row's smallest and largest are counted into at most
   :data:`BUCKETS` buckets of equal width, the bucket holding the wanted rank is kept and
   counted again, until it holds at most :data:`GATHERED` keys (sorted then) or one value;
3. one last pass copies every value below the low cut and above the high cut, and as
   many copies of each cut as the rank needs.

Nothing is computed from the values, only compared and copied, so the kept multisets
are exactly those a partition of the canonical values keeps (``tests/test_select.py``
checks them against ``np.sort``).  Rows are shared out among threads.

numba is optional, as for :mod:`firstorder._kernels` (the same switch and threshold):
:func:`kept_sides` returns None without it and the caller partitions.
"""

from __future__ import annotations

import functools

import numpy as np

from . import _kernels, _parallel

__all__ = ["BUCKETS", "GATHERED", "TILE", "column_pieces", "kept_rows", "kept_sides", "sides_for"]

#: Buckets per counting pass (a power of two; 16 KiB of counts stay in the L1 cache).
BUCKETS = 2048

#: A bucket with at most this many keys is gathered and sorted instead of counted again.
GATHERED = 48

#: Values and columns of a tile of the transposing copy (32 x 32 values: 8 KiB).
TILE = 32

def kept_sides(values: np.ndarray, low: int, high: int, nan_as: float = np.nan) -> tuple[np.ndarray, np.ndarray] | None:
    """``(smallest, largest)``, each (columns, kept): the `low` smallest and `high` largest
    values of each column of the (count, columns) float64 array `values` (each side in no
    particular order; -0.0 kept as 0.0, NaN as `nan_as`), or None when the compiled kernels
    are not in use (numba missing, switched off, or an array too small to pay for them).

    Examples
    --------
    >>> values = np.array([[4.0, 1.0, 3.0, 2.0, np.nan]] * 5000).T
    >>> picked = kept_sides(values, 2, 1, nan_as=np.inf)
    >>> picked is None or (np.sort(picked[0][0]).tolist(), picked[1][0].tolist()) == ([1.0, 2.0], [np.inf])
    True
    """
    count, columns = values.shape
    if _kernels.available(values.size) is None or count == 0:
        return None
    transposed, _ = _compile()
    source = np.asarray(values, dtype=np.float64)
    by_column = np.empty((columns, count))
    smallest, largest = sides_for(columns, count, low, high)

    def piece(first: int, stop: int) -> None:
        transposed(source, float(nan_as), by_column, first, stop)
        kept_rows(by_column, smallest, largest, first, stop)

    _parallel.run(piece, column_pieces(columns, count))
    return smallest, largest


def sides_for(columns: int, count: int, low: int, high: int) -> tuple[np.ndarray, np.ndarray]:
    """Empty (columns, min(low, count)) and (columns, min(high, count)) arrays for :func:`kept_rows`."""
    return np.empty((columns, min(low, count))), np.empty((columns, min(high, count)))


def kept_rows(by_column: np.ndarray, smallest: np.ndarray, largest: np.ndarray, first: int, stop: int) -> None:
    """Rows ``first:stop`` of `smallest` and `largest` (:func:`sides_for`): the smallest and
    largest values of those rows of the C-ordered (columns, count) array `by_column` of
    canonical values (-0.0 as 0.0, every NaN positive), compiled."""
    _compile()[1](by_column.view(np.uint64), smallest.shape[1], largest.shape[1], smallest.view(np.uint64),
                 largest.view(np.uint64), first, stop)


def column_pieces(columns: int, count: int) -> list[tuple[int, int]]:
    """Pieces of `columns` columns of `count` values each, one per thread, whole tiles."""
    return _parallel.pieces(columns, align=TILE, min_piece=max(1, _parallel.MIN_PIECE // max(count, 1)))


@functools.cache  # compiled (or loaded from numba's cache) once, on first use
def _compile():
    import numba

    # Keys, shifts and counts are unsigned 64-bit throughout: numba turns a mix of
    # signed and unsigned integers into a float, which would lose the low bits of a key.
    u = np.uint64
    sign = u(1 << 63)
    ones = u(0xFFFFFFFFFFFFFFFF)
    bucket_bits = u(int(BUCKETS).bit_length() - 1)
    gathered, tile = GATHERED, TILE

    jit = numba.njit(cache=True, nogil=True)

    @jit
    def transposed(source, nan_as, out, first, stop):
        # Columns first:stop of the (count, columns) `source` as rows of `out`, a tile at a
        # time, each value made canonical: NaN as `nan_as`, -0.0 as 0.0 (adding 0.0 does it).
        count = source.shape[0]
        for c0 in range(first, stop, tile):
            c1 = min(c0 + tile, stop)
            for r0 in range(0, count, tile):
                r1 = min(r0 + tile, count)
                for c in range(c0, c1):
                    for r in range(r0, r1):
                        v = source[r, c]
                        out[c, r] = (nan_as if v != v else v) + 0.0

    @jit
    def kept_rows(bits, low, high, smallest, largest, first, stop):
        count = bits.shape[1]
        row = np.empty(count, dtype=np.uint64)
        shared = np.zeros(BUCKETS + 1, dtype=np.int64)  # the first count, of both sides
        counts = np.zeros(BUCKETS + 1, dtype=np.int64)
        small = np.empty(gathered, dtype=np.uint64)
        low_side = np.empty(count + 1, dtype=np.uint64)  # one spare: each key is written
        high_side = np.empty(count + 1, dtype=np.uint64)
        cuts = np.empty(2, dtype=np.uint64)
        for column in range(first, stop):
            highest, lowest = u(0), ones
            for i in range(count):
                b = bits[column, i]
                k = (b ^ ones) if b >= sign else (b | sign)
                row[i] = k
                highest = k if k > highest else highest
                lowest = k if k < lowest else lowest
            # The two cuts: the key at rank low - 1 and the key at rank count - high.
            for side in range(2):
                if (low if side == 0 else high) == 0:
                    cuts[side] = ones if side == 1 else u(0)
                    continue
                wanted = low - 1 if side == 0 else count - high
                lo, hi, less, first_round = lowest, highest, 0, True
                while lo != hi:
                    span = hi - lo
                    shift = u(0)
                    rest = span >> bucket_bits
                    while rest:
                        rest >>= u(1)
                        shift += u(1)
                    buckets = (span >> shift) + u(1)
                    h = shared if first_round else counts
                    if not first_round or side == 0 or low == 0:
                        for c in range(buckets + u(1)):
                            h[c] = 0
                        for i in range(count):
                            # Keys outside lo..hi fall into the spare bucket past the last,
                            # with no branch (the keys come in no order: a branch would miss).
                            offset = row[i] - lo  # wraps round above span when below lo
                            h[(offset >> shift) if offset <= span else buckets] += 1
                    first_round = False
                    c = 0
                    while less + h[c] <= wanted:
                        less += h[c]
                        c += 1
                    start = lo + (u(c) << shift)
                    step = (u(1) << shift) - u(1)
                    hi = hi if hi - start <= step else start + step
                    lo = start
                    if h[c] <= gathered:
                        m = 0
                        for i in range(count):
                            k = row[i]
                            if lo <= k <= hi:
                                small[m] = k
                                m += 1
                        small[:m].sort()
                        lo = hi = small[wanted - less]
                cuts[side] = lo
            # One pass copies the keys beyond each cut, then as many copies of each cut
            # as fill the side.  Every key is written and the position moves on only past
            # a kept one (a branch here would miss on about every other key near a median).
            at_low, at_high = 0, 0
            low_cut, high_cut = cuts[0], cuts[1]
            for i in range(count):
                k = row[i]
                low_side[at_low] = k
                at_low += k < low_cut
                high_side[at_high] = k
                at_high += k > high_cut
            for i in range(at_low, low):
                low_side[i] = low_cut
            for i in range(at_high, high):
                high_side[i] = high_cut
            # Back from keys to the values' bits.
            for i in range(low):
                k = low_side[i]
                smallest[column, i] = (k ^ sign) if k >= sign else (k ^ ones)
            for i in range(high):
                k = high_side[i]
                largest[column, i] = (k ^ sign) if k >= sign else (k ^ ones)

    return transposed, kept_rows

"""Small plain-data summaries of a chunk of units, merged exactly in any order.

A study runs its units a chunk at a time and keeps, per chunk, only what its answers
need: per column (a segment, or a time of an envelope) the smallest and the largest few
values (:class:`Ranked`; exact order statistics, never a sketch), counts of units inside
tolerance, and the worst unit with its index.  Every ``merge`` is associative and
commutative and picks values rather than adding floating-point numbers, so merged
results are bit for bit the same for any grouping of the units into chunks and any
order of merging (a chunk can run anywhere: the summaries are numpy arrays and ints).

Which values to keep: the value at 0-based rank ``r`` of ``count`` values is the
``r + 1``-th smallest or the ``count - r``-th largest; :func:`sides` keeps, for each rank
asked, the shorter of the two sides.  A rank near the middle (a median) thus keeps half
the units of each column; ranks near the top (99 %, 99.9 %, the largest) keep few.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import reduce
from typing import Iterable, Sequence

import numpy as np

from .._select import kept_sides

__all__ = ["Ranked", "SettlingSummary", "Worst", "merge_all", "rank", "sides"]


def rank(fraction: float, count: int) -> int:
    """The 0-based rank of the smallest value that `fraction` of `count` values do not
    exceed: ``ceil(fraction * count) - 1`` (0.999 of 1,000 is rank 998, the 999th smallest).

    Examples
    --------
    >>> rank(0.999, 1000), rank(0.5, 3), rank(1.0, 7), rank(1e-9, 7)
    (998, 1, 6, 0)
    """
    # fraction * count is rounded: 0.999 * 1000 is 999.0000000000001, which means 999 here.
    return max(1, math.ceil(fraction * count - 1e-9 * count)) - 1


def sides(ranks: Sequence[int], count: int) -> tuple[int, int]:
    """``(low, high)``: how many of the smallest and of the largest values per column to
    keep so that every rank in `ranks` (0-based, of `count` values) is among them.

    Examples
    --------
    >>> sides([998, 999], 1000), sides([499, 989, 999], 1000), sides([0], 10)
    ((0, 2), (500, 11), (1, 0))
    """
    low = high = 0
    for r in ranks:
        if r + 1 < count - r:
            low = max(low, r + 1)
        else:
            high = max(high, count - r)
    return low, high


#: Columns of a transposed view copied together (see _canonical).
_BAND = 256


def _canonical(values: np.ndarray, nan_as: float = np.nan) -> np.ndarray:
    """A C-ordered copy of `values` in which equal values are equal in bits, NaN as `nan_as`.

    -0.0 sorts equal to 0.0 and NaNs may carry payloads: made one (adding +0.0 turns -0.0
    into 0.0), which copy a partition keeps cannot depend on the grouping."""
    out = np.empty(values.shape)
    if values.ndim == 2 and values.strides[0] < values.strides[1]:
        # A transposed view: copied a band of columns at a time (about 1.8x faster than one
        # copy, which reads the source across its rows).
        for j in range(0, values.shape[1], _BAND):
            np.add(values[:, j:j + _BAND], 0.0, out=out[:, j:j + _BAND])
    else:
        np.add(values, 0.0, out=out)
    nan = np.isnan(out)
    if nan.any():
        out[nan] = nan_as
    return out


@dataclass(frozen=True)
class Ranked:
    """Per column, the `low` smallest and `high` largest values of `count` values.

    The kept values are a multiset per column, in no particular order (a partition keeps
    them; sorting them would cost more than the rest of a summary): :meth:`at` picks a rank
    from them, and equality compares them sorted.

    Attributes
    ----------
    count : int
        Values seen per column.
    smallest : ndarray, shape (columns, min(low, count))
        The smallest values of each column (NaN counts as larger than every number).
    largest : ndarray, shape (columns, min(high, count))
        The largest values of each column.
    low, high : int
        How many to keep of each side.
    """

    count: int
    smallest: np.ndarray
    largest: np.ndarray
    low: int
    high: int

    @classmethod
    def of(cls, values: np.ndarray, low: int, high: int, nan_as: float = np.nan) -> "Ranked":
        """The summary of (units, columns) `values` (a NaN taken as `nan_as`).

        Examples
        --------
        >>> r = Ranked.of(np.array([[3.0], [1.0], [2.0]]), 1, 2)
        >>> r.smallest.tolist(), sorted(r.largest[0].tolist()), float(r.at(1)[0])
        ([[1.0]], [2.0, 3.0], 2.0)
        """
        values = np.asarray(values, dtype=np.float64)
        picked = kept_sides(values, low, high, nan_as)  # compiled, when in use
        if picked is not None:
            return cls(values.shape[0], *picked, low, high)
        by_column = _canonical(values.T, nan_as)  # each column's units side by side, a new array
        return cls._kept(values.shape[0], by_column, low, high)

    @classmethod
    def _kept(cls, count: int, by_column: np.ndarray, low: int, high: int) -> "Ranked":
        """From (columns, units) values that this may reorder in place."""
        a, b = min(low, count), min(high, count)
        if a + b < count:  # the two sides apart: one partition places both
            by_column.partition([r for r in (a - 1, count - b) if r >= 0], axis=1)
            return cls(count, _own(by_column[:, :a], by_column), _own(by_column[:, count - b:], by_column), low, high)
        smallest = np.partition(by_column, a - 1, axis=1)[:, :a] if a else by_column[:, :0].copy()
        largest = np.partition(by_column, count - b, axis=1)[:, count - b:] if b else by_column[:, :0].copy()
        return cls(count, smallest, largest, low, high)

    def merge(self, other: "Ranked") -> "Ranked":
        """Both summaries as one (the same multisets whichever is first).

        Examples
        --------
        >>> a, b = Ranked.of(np.array([[5.0], [1.0]]), 1, 1), Ranked.of(np.array([[3.0]]), 1, 1)
        >>> m = a.merge(b)
        >>> m.count, m.smallest.tolist(), m.largest.tolist(), m == b.merge(a)
        (3, [[1.0]], [[5.0]], True)
        """
        if (self.low, self.high) != (other.low, other.high):
            raise ValueError("Ranked.merge: summaries keep different numbers of values")
        smallest = np.concatenate([self.smallest, other.smallest], axis=1)
        if smallest.shape[1] > self.low:
            smallest.partition(self.low - 1, axis=1)
            smallest = smallest[:, :self.low].copy()
        largest = np.concatenate([self.largest, other.largest], axis=1)
        if largest.shape[1] > self.high:
            cut = largest.shape[1] - self.high
            largest.partition(cut, axis=1)
            largest = largest[:, cut:].copy()
        return Ranked(self.count + other.count, smallest, largest, self.low, self.high)

    def at(self, r: int) -> np.ndarray:
        """Per column, the value of 0-based rank `r` among all `count` values."""
        # The kept values' own largest or smallest is a reduction, not a partition: NaN
        # counts as the largest (np.max keeps a NaN, np.fmin passes one over).
        if r < self.smallest.shape[1]:
            if r == self.smallest.shape[1] - 1:
                return self.smallest.max(axis=1)
            return np.partition(self.smallest, r, axis=1)[:, r]
        from_top = self.count - r  # 1 is the largest
        kept = self.largest.shape[1]
        if from_top == 1 and kept:
            return self.largest.max(axis=1)
        if from_top == kept and kept:
            return np.fmin.reduce(self.largest, axis=1)
        if 1 <= from_top <= kept:
            return np.partition(self.largest, kept - from_top, axis=1)[:, kept - from_top]
        raise ValueError(f"Ranked.at: rank {r} of {self.count} is not kept (low {self.low}, high {self.high})")

    def __eq__(self, other: object) -> bool:
        return (isinstance(other, Ranked) and (self.count, self.low, self.high) == (other.count, other.low, other.high)
                and _same(np.sort(self.smallest, axis=1), np.sort(other.smallest, axis=1))
                and _same(np.sort(self.largest, axis=1), np.sort(other.largest, axis=1)))

    __hash__ = None  # type: ignore[assignment]


@dataclass(frozen=True)
class Worst:
    """Per column, the largest `score` and the unit giving it (ties: the lowest unit).

    Examples
    --------
    >>> a = Worst.of(np.array([[1.0, 4.0], [3.0, 4.0]]), first=0)
    >>> b = Worst.of(np.array([[3.0, 9.0]]), first=2)
    >>> m = a.merge(b)
    >>> m.unit.tolist(), m.score.tolist(), m == b.merge(a)
    ([1, 2], [3.0, 9.0], True)
    """

    score: np.ndarray
    unit: np.ndarray

    @classmethod
    def of(cls, score: np.ndarray, first: int) -> "Worst":
        """From (units, columns) `score` of units ``first, first + 1, ...`` (NaN as inf)."""
        nan = np.isnan(score)
        if nan.any():
            score = np.where(nan, np.inf, score)
        # The largest by a reduction down the units, then the first unit that reaches it
        # (an argmax down a float array would copy it transposed first).
        largest = score.max(axis=0)
        best = np.argmax(score == largest, axis=0)
        return cls(largest + 0.0, best.astype(np.int64) + first)

    def merge(self, other: "Worst") -> "Worst":
        take = (other.score > self.score) | ((other.score == self.score) & (other.unit < self.unit))
        return Worst(np.where(take, other.score, self.score), np.where(take, other.unit, self.unit))

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Worst) and _same(self.score, other.score) and np.array_equal(self.unit, other.unit)

    __hash__ = None  # type: ignore[assignment]


@dataclass(frozen=True)
class SettlingSummary:
    """What a study's settling answers need from a chunk of units.

    Attributes
    ----------
    settle, error : Ranked
        Per segment: settle times (inf where a unit never settles there) and errors at
        the sample.
    inside : ndarray of int64, shape (n,)
        Units inside tolerance at each segment's sample.
    passing : int
        Units inside tolerance at every sample.
    worst : Worst
        The largest error relative to its limit, per segment, and its unit.
    """

    settle: Ranked
    error: Ranked
    inside: np.ndarray
    passing: int
    worst: Worst

    @property
    def count(self) -> int:
        return self.settle.count

    def merge(self, other: "SettlingSummary") -> "SettlingSummary":
        return SettlingSummary(self.settle.merge(other.settle), self.error.merge(other.error),
                               self.inside + other.inside, self.passing + other.passing, self.worst.merge(other.worst))

    def __eq__(self, other: object) -> bool:
        return (isinstance(other, SettlingSummary) and self.settle == other.settle and self.error == other.error
                and np.array_equal(self.inside, other.inside) and self.passing == other.passing
                and self.worst == other.worst)

    __hash__ = None  # type: ignore[assignment]


def _own(kept: np.ndarray, whole: np.ndarray) -> np.ndarray:
    """`kept`, a view of the summary's own array `whole`: copied when it is a small part of
    it (so the summary does not hold the chunk), else kept as the view (a copy would cost
    more time than the memory it frees)."""
    return kept.copy() if 2 * kept.size < whole.size else kept


def merge_all(summaries: Iterable):
    """Every summary merged into one (any order gives the same)."""
    return reduce(lambda a, b: a.merge(b), summaries)


def _same(a: np.ndarray, b: np.ndarray) -> bool:
    return a.shape == b.shape and bool(np.array_equal(a, b, equal_nan=True))

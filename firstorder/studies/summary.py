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

from dataclasses import dataclass
from functools import reduce
from typing import Iterable, Sequence

import numpy as np

__all__ = ["Ranked", "SettlingSummary", "Worst", "merge_all", "sides"]


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


def _canonical(values: np.ndarray) -> np.ndarray:
    # -0.0 sorts equal to 0.0 and NaNs may carry payloads: make equal values equal in bits,
    # so which copy a sort keeps cannot depend on the grouping.
    out = np.where(np.isnan(values), np.nan, values) + 0.0
    return out


@dataclass(frozen=True)
class Ranked:
    """Per column, the `low` smallest and `high` largest values of `count` values.

    Attributes
    ----------
    count : int
        Values seen per column.
    smallest : ndarray, shape (min(low, count), columns)
        Ascending.
    largest : ndarray, shape (min(high, count), columns)
        Ascending (the largest value last; NaN counts as larger than every number).
    low, high : int
        How many to keep of each side.
    """

    count: int
    smallest: np.ndarray
    largest: np.ndarray
    low: int
    high: int

    @classmethod
    def of(cls, values: np.ndarray, low: int, high: int) -> "Ranked":
        """The summary of (units, columns) `values`.

        Examples
        --------
        >>> r = Ranked.of(np.array([[3.0], [1.0], [2.0]]), 1, 1)
        >>> r.smallest.tolist(), r.largest.tolist()
        ([[1.0]], [[3.0]])
        """
        values = np.asarray(values, dtype=np.float64)
        count = values.shape[0]
        a, b = min(low, count), min(high, count)
        if a + b >= count:
            ordered = np.sort(_canonical(values), axis=0)
            return cls(count, ordered[:a], ordered[count - b:], low, high)
        # One partition (each column's units side by side), then a sort of the kept values only.
        by_column = _canonical(np.ascontiguousarray(values.T))
        kth = sorted({r for r in (a - 1, count - b) if 0 <= r < count})
        if kth:
            by_column.partition(kth, axis=1)
        smallest = np.ascontiguousarray(np.sort(by_column[:, :a], axis=1).T)
        largest = np.ascontiguousarray(np.sort(by_column[:, count - b:], axis=1).T)
        return cls(count, smallest, largest, low, high)

    def merge(self, other: "Ranked") -> "Ranked":
        """Both summaries as one (the same whichever is first).

        Examples
        --------
        >>> a, b = Ranked.of(np.array([[5.0], [1.0]]), 1, 1), Ranked.of(np.array([[3.0]]), 1, 1)
        >>> m = a.merge(b)
        >>> m.count, m.smallest.tolist(), m.largest.tolist(), m == b.merge(a)
        (3, [[1.0]], [[5.0]], True)
        """
        if (self.low, self.high) != (other.low, other.high):
            raise ValueError("Ranked.merge: summaries keep different numbers of values")
        smallest = np.sort(np.concatenate([self.smallest, other.smallest]), axis=0)[:self.low]
        largest = np.sort(np.concatenate([self.largest, other.largest]), axis=0)
        largest = largest[max(0, largest.shape[0] - self.high):]
        return Ranked(self.count + other.count, smallest, largest, self.low, self.high)

    def at(self, r: int) -> np.ndarray:
        """Per column, the value of 0-based rank `r` among all `count` values."""
        if r < self.smallest.shape[0]:
            return self.smallest[r].copy()
        from_top = self.count - r  # 1 is the largest
        if 1 <= from_top <= self.largest.shape[0]:
            return self.largest[self.largest.shape[0] - from_top].copy()
        raise ValueError(f"Ranked.at: rank {r} of {self.count} is not kept (low {self.low}, high {self.high})")

    def __eq__(self, other: object) -> bool:
        return (isinstance(other, Ranked) and (self.count, self.low, self.high) == (other.count, other.low, other.high)
                and _same(self.smallest, other.smallest) and _same(self.largest, other.largest))

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
        score = np.where(np.isnan(score), np.inf, score)
        best = np.argmax(score, axis=0)  # the first of equal maxima: the lowest unit
        return cls(score[best, np.arange(score.shape[1])] + 0.0, best.astype(np.int64) + first)

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


def merge_all(summaries: Iterable):
    """Every summary merged into one (any order gives the same)."""
    return reduce(lambda a, b: a.merge(b), summaries)


def _same(a: np.ndarray, b: np.ndarray) -> bool:
    return a.shape == b.shape and bool(np.array_equal(a, b, equal_nan=True))

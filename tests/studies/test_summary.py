"""Tests for firstorder.studies.summary: merged summaries against np.sort over every value,
for any grouping into chunks and any order of merging (bit for bit)."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from firstorder.studies.study import rank
from firstorder.studies.summary import Ranked, Worst, merge_all, sides


def values(units=997, columns=5, seed=0):
    rng = np.random.default_rng(seed)
    out = rng.lognormal(0.0, 0.3, (units, columns))
    out[rng.random((units, columns)) < 0.02] = np.inf  # never settled
    out[:, 1] = np.round(out[:, 1], 1)  # many ties
    out[rng.random(units) < 0.01, 2] = np.nan
    out[:, 3] = 0.0
    out[::7, 3] = -0.0  # equal to 0.0, other bits
    return out


def groupings(units, rng, count=6):
    """Random cuts of range(units) into chunks, one of single units, and one chunk."""
    yield [units]
    yield [1] * units
    for _ in range(count):
        cuts = np.sort(rng.choice(np.arange(1, units), rng.integers(1, 30), replace=False))
        yield np.diff(np.concatenate([[0], cuts, [units]])).tolist()


def chunked(data, sizes):
    first = 0
    for size in sizes:
        yield first, data[first:first + size]
        first += size


FRACTIONS = (0.5, 0.9, 0.99, 0.999, 1e-3, 1.0)


class TestRanked:
    def test_merged_order_statistics_equal_sorting_every_value(self):
        data = values()
        count = data.shape[0]
        ranks = [rank(f, count) for f in FRACTIONS] + [count - 1]
        low, high = sides(ranks, count)
        ordered = np.sort(data, axis=0)  # numpy's sort: NaN after inf, the reference
        rng = np.random.default_rng(1)
        for sizes in groupings(count, rng):
            merged = merge_all(Ranked.of(part, low, high) for _, part in chunked(data, sizes))
            assert merged.count == count
            for r in ranks:
                assert np.array_equal(merged.at(r), ordered[r], equal_nan=True), (sizes[:5], r)

    def test_any_grouping_and_order_gives_the_same_bits(self):
        data = values(300, 4, seed=4)
        low, high = sides([rank(0.95, 300), 299], 300)
        rng = np.random.default_rng(2)
        reference = Ranked.of(data, low, high)
        for sizes in groupings(300, rng):
            parts = [Ranked.of(part, low, high) for _, part in chunked(data, sizes)]
            order = rng.permutation(len(parts))
            linear = merge_all(parts[i] for i in order)
            tree = parts
            while len(tree) > 1:  # pairwise, as a cluster would merge
                tree = [tree[i].merge(tree[i + 1]) if i + 1 < len(tree) else tree[i] for i in range(0, len(tree), 2)]
            assert linear == reference == tree[0]
            assert np.array_equal(np.signbit(linear.smallest), np.signbit(reference.smallest))
            assert np.array_equal(np.signbit(linear.largest), np.signbit(reference.largest))

    def test_a_rank_not_kept_is_refused(self):
        merged = Ranked.of(values(100, 4), *sides([98, 99], 100))
        with pytest.raises(ValueError, match="rank 50 of 100 is not kept"):
            merged.at(50)

    def test_summaries_keeping_other_counts_do_not_merge(self):
        with pytest.raises(ValueError, match="different numbers"):
            Ranked.of(values(10, 4), 0, 2).merge(Ranked.of(values(10, 4), 0, 3))

    @pytest.mark.parametrize("count", [1, 2, 3, 10, 1000, 1001])
    def test_sides_keep_every_rank_asked(self, count):
        for fractions in itertools.combinations(FRACTIONS, 2):
            ranks = [rank(f, count) for f in fractions] + [count - 1]
            low, high = sides(ranks, count)
            assert all(r < low or r >= count - high for r in ranks)
            assert low + high <= count + 1


class TestWorst:
    def test_the_largest_score_and_of_equals_the_lowest_unit_for_any_grouping(self):
        rng = np.random.default_rng(3)
        score = np.round(rng.random((500, 4)), 1)  # many ties
        score[17, 2] = np.nan  # counts as the worst
        expected = np.argmax(np.where(np.isnan(score), np.inf, score), axis=0)  # first of the maxima
        for sizes in groupings(500, rng):
            parts = [Worst.of(part, first) for first, part in chunked(score, sizes)]
            merged = merge_all(parts[i] for i in rng.permutation(len(parts)))
            assert merged.unit.tolist() == expected.tolist(), sizes[:5]
            assert merged.unit[2] == 17 and np.isinf(merged.score[2])

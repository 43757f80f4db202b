"""Tests for firstorder._select: the compiled radix selection keeps, per column, exactly the
multisets of the smallest and largest values that numpy's sort gives (the reference), for
ties, infinities, NaN, signed zeros, subnormals and values one ulp apart."""

from __future__ import annotations

import numpy as np
import pytest

from firstorder import _kernels, _select
from firstorder.studies.summary import Ranked, _canonical

pytest.importorskip("numba")


def canonical_sorted(values, nan_as):
    """numpy's sort of each column, after the canonical form (-0.0 as 0.0, NaN as nan_as)."""
    return np.sort(_canonical(values.T, nan_as), axis=1)


def hard_columns(kind, rng, count, columns):
    if kind == "normal":
        return rng.normal(size=(count, columns))
    if kind == "few integers":
        return rng.integers(-3, 3, size=(count, columns)).astype(float)
    if kind == "specials":
        pool = [np.nan, -np.nan, np.inf, -np.inf, 0.0, -0.0, 1e-300, -1e-300, 5e-324, -5e-324, 1.0]
        return rng.choice(pool, size=(count, columns))
    if kind == "ulps apart":
        return 1.0 + rng.integers(0, 5, size=(count, columns)) * np.finfo(float).eps
    if kind == "all equal":
        return np.full((count, columns), 2.5)
    # every binade from 1e-39 to 1e39, both signs
    return np.exp(rng.normal(scale=30, size=(count, columns))) * rng.choice([-1.0, 1.0], size=(count, columns))


KINDS = ["normal", "few integers", "specials", "ulps apart", "all equal", "wide"]


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("count", [1, 2, 47, 49, 1000, 4099])
def test_sides_are_the_sorted_ends(kind, count):
    rng = np.random.default_rng([KINDS.index(kind), count])
    columns = max(40, -(-_kernels.THRESHOLD // count))  # large enough for the kernels
    values = hard_columns(kind, rng, count, columns)
    for nan_as in (np.nan, np.inf):
        ordered = canonical_sorted(values, nan_as)
        for low, high in [(1, 1), (count // 2, count // 100 + 1), (count, 0), (0, count), (count // 3, count),
                          (0, 1), (7, 3), (0, 0), (count + 5, count + 5)]:
            smallest, largest = _select.kept_sides(values, low, high, nan_as)
            a, b = min(low, count), min(high, count)
            assert np.array_equal(np.sort(smallest, axis=1), ordered[:, :a], equal_nan=True), (low, high)
            assert np.array_equal(np.sort(largest, axis=1), ordered[:, count - b:], equal_nan=True), (low, high)
            # equal in bits too: one zero (no -0.0) and one NaN
            assert not np.signbit(smallest[smallest == 0.0]).any()
            assert np.array_equal(np.sort(smallest.view(np.uint64)[np.isnan(smallest)]),
                                  np.sort(ordered[:, :a].view(np.uint64)[np.isnan(ordered[:, :a])]))


def test_a_transposed_view_and_threads(monkeypatch):
    rng = np.random.default_rng(3)
    values = rng.lognormal(size=(300, 5000)).T  # (5000, 300), not C-ordered
    expected = _select.kept_sides(np.ascontiguousarray(values), 2500, 60)
    monkeypatch.setenv("FIRSTORDER_THREADS", "1")
    alone = _select.kept_sides(values, 2500, 60)
    for one, other in zip(expected, alone):
        assert np.array_equal(np.sort(one, axis=1), np.sort(other, axis=1))


def test_ranked_is_the_same_with_or_without_the_kernels(monkeypatch):
    rng = np.random.default_rng(8)
    values = rng.lognormal(0.0, 0.3, (4000, 12))
    values[rng.random(values.shape) < 0.02] = np.nan
    values[:, 3] = -0.0
    compiled = Ranked.of(values, 2000, 41, nan_as=np.inf)
    monkeypatch.setenv("FIRSTORDER_KERNELS", "0")
    assert _select.kept_sides(values, 2000, 41) is None
    assert Ranked.of(values, 2000, 41, nan_as=np.inf) == compiled


def test_small_arrays_stay_on_numpy():
    assert _select.kept_sides(np.ones((10, 10)), 3, 3) is None

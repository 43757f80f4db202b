"""Tests for firstorder.engine: the scan and the evaluation, against plain references."""

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from firstorder import engine


def sequential(a, b, x0):
    """The recurrence written the obvious way, as the reference for the blocked scan."""
    out = [x0]
    for ak, bk in zip(a, b):
        out.append(ak * out[-1] + bk)
    return np.array(out)


class TestAffineScan:
    @pytest.mark.parametrize("n", [0, 1, 2, 63, 64, 65, 1000, 4097, 20_001])
    def test_matches_sequential_loop(self, n):
        rng = np.random.default_rng(n)
        a = rng.random(n)
        b = rng.normal(size=n)
        np.testing.assert_allclose(engine.affine_scan(a, b, 0.7), sequential(a, b, 0.7), rtol=1e-12, atol=1e-12)

    def test_no_overflow_when_products_underflow(self):
        # a product of a million factors near 1e-3 underflows to zero; the scan
        # must not divide by it.
        n = 1_000_000
        a = np.full(n, 1e-3)
        b = np.ones(n)
        x = engine.affine_scan(a, b, 5.0)
        assert np.isfinite(x).all()
        assert x[-1] == pytest.approx(1 / (1 - 1e-3))

    @given(st.lists(st.tuples(st.floats(0, 1), st.floats(-1e6, 1e6)), min_size=0, max_size=300),
           st.floats(-1e6, 1e6))
    def test_property_sequential(self, maps, x0):
        a = np.array([m[0] for m in maps])
        b = np.array([m[1] for m in maps])
        np.testing.assert_allclose(engine.affine_scan(a, b, x0), sequential(a, b, x0), rtol=1e-9, atol=1e-6)


class TestDecayFactors:
    def test_tiny_and_huge_exponents(self):
        a, growth = engine.decay_factors(np.array([1e-15, 1e9, 0.0]), np.array([1e-12, 1e12, 5.0]))
        assert growth[0] == pytest.approx(1e-27, rel=1e-12)  # expm1 keeps it, 1 - exp would give 0
        assert a[1] == 0.0 and growth[1] == 1.0
        assert a[2] == 1.0 and growth[2] == 0.0

    def test_one_minus_decay_accurate_everywhere(self):
        # Reference: C99 expm1 through Python's math module.  Beyond -1/16 the engine
        # takes 1 - exp; its documented bound is a relative error below 2e-15.
        exponents = np.concatenate([np.geomspace(1e-300, 1 / 16, 300), np.geomspace(1 / 16, 745.0, 600)])
        decay, growth = engine.decay_factors(exponents, np.ones_like(exponents))
        reference = np.array([-math.expm1(-x) for x in exponents])
        np.testing.assert_allclose(growth, reference, rtol=2e-15, atol=0)
        np.testing.assert_allclose(decay, [math.exp(-x) for x in exponents], rtol=4.5e-16, atol=0)


class TestSegmentLocator:
    def test_sorted_and_unsorted_agree(self):
        rng = np.random.default_rng(1)
        starts = np.sort(rng.random(50)) * 10
        starts[0] = 0.0
        rate = rng.random(50) * 3
        rate[::7] = 0.0  # held segments
        final = rng.normal(size=50)
        start_state = rng.normal(size=50)
        t = np.sort(rng.random(3000) * 10)
        sorted_values = engine.evaluate(t, starts, rate, final, start_state)
        order = rng.permutation(t.size)
        unsorted_values = engine.evaluate(t[order], starts, rate, final, start_state)
        np.testing.assert_array_equal(unsorted_values, sorted_values[order])

    def test_against_closed_form(self):
        starts = np.array([0.0, 2.0])
        rate = np.array([0.5, 0.0])
        t = np.array([0.0, 1.0, 1.999, 2.0, 3.0])
        values = engine.evaluate(t, starts, rate, np.array([4.0, 9.0]), np.array([1.0, -1.0]))
        expected = [1.0, 4 - 3 * np.exp(-0.5), 4 - 3 * np.exp(-0.9995), -1.0, -1.0]
        np.testing.assert_allclose(values, expected, rtol=1e-15)

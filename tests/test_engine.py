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


class TestDeepExponents:
    """Segments of hundreds to thousands of time constants: exponents below -709, where
    numpy's exp leaves its fast loop.  Results must stay numpy's own, to the last bit."""

    @pytest.mark.parametrize("size", [50, 30_000])  # the numpy path and the compiled one
    def test_exp_in_place_is_numpys_exp(self, size):
        rng = np.random.default_rng(size)
        exponent = np.concatenate([rng.uniform(-800, -700, size), rng.uniform(-50, 0, size),
                                   [-745.13, -745.14, -745.2, -708.4, -708.3, -1e300, -np.inf, 0.0]])
        rng.shuffle(exponent)
        # Reference: numpy's exp itself, over the whole array (bit patterns compared).
        expected = np.exp(exponent)
        assert np.array_equal(engine.exp_in_place(exponent.copy()).view(np.int64), expected.view(np.int64))
        counted = int((exponent < -708.0).sum())  # as a kernel counts them
        assert np.array_equal(engine.exp_in_place(exponent.copy(), deep=counted), expected)

    @pytest.mark.parametrize("count", [100, 40_000])
    def test_long_segments_give_numpys_numbers(self, count):
        rng = np.random.default_rng(count)
        durations = 10 ** rng.uniform(-1, 4, count)  # rate 1: 0.1 to 10,000 time constants
        times = np.concatenate([[0.0], np.cumsum(durations)[:-1]])
        ends = times + durations
        rate = np.ones(count)
        decay, growth = engine.segment_factors(times, ends, rate)
        reference = np.exp(-((ends - times) * rate))
        assert np.array_equal(decay, reference)
        grid = np.sort(rng.uniform(0.0, float(ends[-1]), 3 * count))
        got = engine.evaluate(grid, times, rate, np.ones(count), np.zeros(count))
        segment = np.searchsorted(times, grid, side="right") - 1
        expected = np.ones(count)[segment] + (np.zeros(count) - np.ones(count))[segment] * np.exp(
            (grid - times[segment]) * -rate[segment])
        assert np.array_equal(got, expected)


class TestUnsortedGrids:
    def test_long_unsorted_grid_gives_the_sorted_numbers(self):
        # A long unsorted grid is sorted, evaluated on the sorted path and scattered back;
        # every point must get the number the unsorted path gives it (the same operations).
        import firstorder as fo
        from firstorder import response as response_module

        rng = np.random.default_rng(5)
        fixture = fo.Fixture()
        fixture.voltage_source("vin", "in", "gnd").resistor("r", "in", "a", "1k").switch("k", "a", "b", r_on="5")
        fixture.capacitor("c", "b", "gnd", "100n").probe("v_a", node="a")
        count = 3_000
        durations = 1e-4 * 10 ** rng.uniform(-1, 1, count)
        times = np.concatenate([[0.0], np.cumsum(durations)[:-1]])
        drive = fo.Drive(times, end=float(durations.sum()), vin=rng.uniform(-5, 5, count),
                         k=rng.integers(0, 2, count).astype(float))
        response = fixture.respond(drive, initial=0.3)
        grid = rng.uniform(0.0, drive.end, 60_000)
        components = ("total", "zero_input", "zero_state", "forced", "natural")
        sorted_first = response.evaluate(grid, components, probe="v_a")
        state = response.evaluate(grid, ("total",))["total"]
        original = response_module.SORT_FIRST
        response_module.SORT_FIRST = 10**12  # the unsorted path, point by point
        try:
            direct = response.evaluate(grid, components, probe="v_a")
            direct_state = response.evaluate(grid, ("total",))["total"]
        finally:
            response_module.SORT_FIRST = original
        for name in components:
            assert np.array_equal(sorted_first[name], direct[name]), name
        assert np.array_equal(state, direct_state)


class TestShortGrids:
    """Grids of up to SMALL_GRID points are located by a search per point, longer ones by
    run lengths: every point must come out the same, bit for bit, either way."""

    def test_a_short_grid_equals_its_points_in_a_long_one(self):
        rng = np.random.default_rng(7)
        starts = np.cumsum(rng.uniform(1e-4, 1e-3, 40)) - 1e-4
        starts[0] = 0.0
        rate = rng.uniform(1e2, 1e4, 40)
        rate[5] = 0.0  # a held segment
        final, start = rng.normal(size=40), rng.normal(size=40)
        long = np.sort(rng.uniform(0.0, starts[-1] * 1.01, 5 * engine.SMALL_GRID))
        locator = engine.SegmentLocator(long, starts, rate)
        assert locator.is_sorted and locator._index is None  # the run-length path
        whole = locator.combine(final, start)
        for piece in (long[:engine.SMALL_GRID], long[1000:1100], long[-3:]):
            short = engine.SegmentLocator(piece, starts, rate)
            assert short._index is not None  # the search path
            where = np.searchsorted(long, piece)
            assert np.array_equal(short.combine(final, start), whole[where])

    def test_a_scan_of_a_few_maps_equals_the_sequential_recurrence(self):
        a, b = np.array([0.25, 0.5, 1.0]), np.array([1.0, -2.0, 0.5])
        assert engine.affine_scan(a, b, 3.0).tolist() == sequential(a, b, 3.0).tolist()

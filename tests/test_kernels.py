"""The compiled kernels give results identical to the numpy path, bit for bit."""

import numpy as np
import pytest

from firstorder import _kernels, engine

pytest.importorskip("numba")


@pytest.fixture
def numpy_only(monkeypatch):
    def run(function, *args):
        monkeypatch.setenv("FIRSTORDER_KERNELS", "0")
        result = function(*args)
        monkeypatch.setenv("FIRSTORDER_KERNELS", "1")
        return result

    return run


class TestScan:
    @pytest.mark.parametrize("n", [_kernels.THRESHOLD, 65_537, 400_001])
    def test_identical(self, n, numpy_only):
        rng = np.random.default_rng(n)
        a = rng.random(n)
        b = rng.normal(size=n) * 1e3
        a[::11] = 1.0  # held segments
        a[::13] = 0.0  # segments long against tau
        reference = numpy_only(engine.affine_scan, a, b, -0.25)
        assert _kernels.available(n) is not None
        np.testing.assert_array_equal(engine.affine_scan(a, b, -0.25), reference)


class TestEvaluation:
    def setup_method(self):
        rng = np.random.default_rng(4)
        self.starts = np.sort(rng.random(30_000)) * 10
        self.starts[0] = 0.0
        self.rate = rng.random(30_000) * 50
        self.rate[::9] = 0.0
        self.final = rng.normal(size=30_000)
        self.start_state = rng.normal(size=30_000)

    def test_sorted_grid_identical(self, numpy_only):
        t = np.linspace(0.0, 10.0, 200_003)
        args = (t, self.starts, self.rate, self.final, self.start_state)
        np.testing.assert_array_equal(engine.evaluate(*args), numpy_only(engine.evaluate, *args))

    def test_unsorted_grid_falls_back(self, numpy_only):
        t = np.random.default_rng(1).random(100_000) * 10
        args = (t, self.starts, self.rate, self.final, self.start_state)
        np.testing.assert_array_equal(engine.evaluate(*args), numpy_only(engine.evaluate, *args))

    def test_walk_bounds_match_searchsorted(self):
        kernels = _kernels.available(_kernels.THRESHOLD)
        t = np.linspace(0.0, 10.0, 50_000)
        out = np.empty(t.size)
        bounds, in_order = kernels.walk_exponent(t, self.starts, self.rate, out)
        assert in_order
        expected = np.searchsorted(t, self.starts, side="left")
        expected[0] = 0
        np.testing.assert_array_equal(bounds[:-1], expected)
        assert bounds[-1] == t.size

    def test_walk_notices_disorder_and_nan(self):
        kernels = _kernels.available(_kernels.THRESHOLD)
        t = np.linspace(0.0, 10.0, 50_000)
        out = np.empty(t.size)
        swapped = t.copy()
        swapped[[100, 101]] = swapped[[101, 100]]
        assert not kernels.walk_exponent(swapped, self.starts, self.rate, out)[1]
        t[-1] = np.nan
        assert not kernels.walk_exponent(t, self.starts, self.rate, out)[1]

    def test_small_arrays_stay_on_numpy(self):
        assert _kernels.available(_kernels.THRESHOLD - 1) is None

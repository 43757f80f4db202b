"""The compiled kernels give results identical to the numpy path, bit for bit."""

import numpy as np
import pytest

import firstorder as fo
from firstorder import _kernels, engine
from firstorder.errors import InputError

pytest.importorskip("numba")


@pytest.fixture
def numpy_only(monkeypatch):
    def run(function, *args):
        monkeypatch.setenv("FIRSTORDER_KERNELS", "0")
        try:
            return function(*args)
        finally:
            monkeypatch.setenv("FIRSTORDER_KERNELS", "1")

    return run


@pytest.fixture
def kernels():
    found = _kernels.available(_kernels.THRESHOLD)
    assert found is not None
    return found


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

    @pytest.mark.parametrize("with_growth", [True, False])
    @pytest.mark.parametrize("n", [_kernels.THRESHOLD + 3, 250_007])
    def test_relaxation_identical(self, n, with_growth, numpy_only):
        rng = np.random.default_rng(n + with_growth)
        decay = rng.random(n)
        growth = -np.expm1(np.log(decay)) if with_growth else None
        target = rng.normal(size=n)
        args = (decay, growth, target, 0.75, -2.5)
        np.testing.assert_array_equal(engine.relaxation_scan(*args), numpy_only(engine.relaxation_scan, *args))


class TestSegmentFactors:
    @pytest.mark.parametrize("short_segments", [False, True])
    def test_identical(self, short_segments, numpy_only):
        rng = np.random.default_rng(7)
        n = 300_001
        times = np.cumsum(10 ** rng.uniform(-3, -1, n))
        rate = np.full(n, 1e3)  # exponents from -1 to -100
        if short_segments:
            rate[::5] = 1e-2  # exponents above -1/16: 1 - exp comes from expm1 there
        rate[::17] = 0.0  # held: exponent 0, and 1 - exp exactly 0 either way
        ends = np.append(times[1:], times[-1] + 1e-3)
        decay, growth = engine.segment_factors(times, ends, rate)
        reference_decay, reference_growth = numpy_only(engine.segment_factors, times, ends, rate)
        np.testing.assert_array_equal(decay, reference_decay)
        if short_segments:
            np.testing.assert_array_equal(growth, reference_growth)
        else:
            assert growth is None and reference_growth is None


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
        reference = numpy_only(engine.evaluate, *args)
        np.testing.assert_array_equal(engine.evaluate(*args), reference)
        np.testing.assert_array_equal(engine.evaluate_sorted(*args), reference)

    def test_grid_with_repeats_and_empty_segments(self, numpy_only):
        # Repeated times, points exactly on changes, and runs of segments with no point.
        t = np.repeat(np.sort(np.concatenate([self.starts[::3], np.linspace(0.0, 10.0, 30_000)])), 2)
        args = (t, self.starts, self.rate, self.final, self.start_state)
        np.testing.assert_array_equal(engine.evaluate_sorted(*args), numpy_only(engine.evaluate, *args))

    def test_unsorted_grid_falls_back(self, numpy_only):
        t = np.random.default_rng(1).random(100_000) * 10
        args = (t, self.starts, self.rate, self.final, self.start_state)
        assert engine.evaluate_sorted(*args) is None
        np.testing.assert_array_equal(engine.evaluate(*args), numpy_only(engine.evaluate, *args))

    def test_walk_bounds_match_searchsorted(self, kernels):
        t = np.linspace(0.0, 10.0, 50_000)
        out = np.empty(t.size)
        bounds = np.empty(self.starts.size + 1, dtype=np.int64)
        bounds[0] = 0
        last, in_order, _ = kernels.walk(t, 0, t.size, self.starts, self.rate, 0, self.starts.size, out, bounds)
        assert in_order
        assert last == np.searchsorted(self.starts, t[-1], side="right") - 1
        expected = np.searchsorted(t, self.starts, side="left")
        expected[0] = 0
        np.testing.assert_array_equal(bounds[:-1], expected)
        assert bounds[-1] == t.size

    def test_walk_in_two_pieces_matches_one(self, kernels):
        t = np.linspace(0.0, 10.0, 50_000)
        whole = np.empty(self.starts.size + 1, dtype=np.int64)
        kernels.walk(t, 0, t.size, self.starts, self.rate, 0, self.starts.size, np.empty(t.size), whole)
        split = np.empty_like(whole)
        middle = 20_011
        k = int(np.searchsorted(self.starts, t[middle], side="right")) - 1
        out = np.empty(t.size)
        kernels.walk(t, 0, middle, self.starts, self.rate, 0, k, out, split)
        kernels.walk(t, middle, t.size, self.starts, self.rate, k, self.starts.size, out, split)
        np.testing.assert_array_equal(split[1:], whole[1:])

    @pytest.mark.parametrize("where", [100, 25_000])  # inside a piece; at the junction of two
    def test_walk_notices_disorder_and_nan(self, kernels, where):
        t = np.linspace(0.0, 10.0, 50_000)
        out = np.empty(t.size)
        bounds = np.empty(self.starts.size + 1, dtype=np.int64)
        k = int(np.searchsorted(self.starts, t[25_000], side="right")) - 1

        def in_order(grid):
            first = kernels.walk(grid, 0, 25_000, self.starts, self.rate, 0, k, out, bounds)[1]
            second = kernels.walk(grid, 25_000, grid.size, self.starts, self.rate, k, self.starts.size, out, bounds)[1]
            return first and second

        assert in_order(t)
        swapped = t.copy()
        swapped[[where - 1, where]] = swapped[[where, where - 1]]
        assert not in_order(swapped)
        with_nan = t.copy()
        with_nan[where] = np.nan
        assert not in_order(with_nan)

    def test_small_arrays_stay_on_numpy(self):
        assert _kernels.available(_kernels.THRESHOLD - 1) is None


class TestSettlingColumns:
    @pytest.mark.parametrize("relative", [False, True])
    @pytest.mark.parametrize("uniform", [False, True])
    def test_identical(self, numpy_only, relative, uniform):
        rng = np.random.default_rng(3 + relative + 2 * uniform)
        n = 100_003
        times = np.cumsum(10 ** rng.uniform(-6, -3, n))
        start = rng.normal(size=n)
        final = rng.normal(size=n)
        final[::7] = start[::7]  # no step: 0/0 for a relative limit
        if uniform:
            tau = np.broadcast_to(2e-4, (n,))
        else:
            tau = 10 ** rng.uniform(-6, -3, n)
            tau[::11] = np.inf  # held
        decay = np.exp(-np.diff(times, append=times[-1] + 1e-4) / tau)
        args = (start, final, tau, decay, times, np.append(times[1:], times[-1] + 1e-4), 0.01 if relative else 1e-3,
                relative)
        for got, expected in zip(engine.settling_columns(*args), numpy_only(engine.settling_columns, *args)):
            np.testing.assert_array_equal(got, expected)


class TestDriveCopy:
    """Drive's compiled copy-and-check pass takes the same decisions as numpy's."""

    def make(self, n=60_000):
        times = np.cumsum(np.full(n, 1e-6))
        return times, np.sin(times * 1e4)

    def test_arrays_identical_and_private(self, numpy_only):
        times, levels = self.make()
        drive = fo.Drive(times, end=1.0, vin=levels)
        reference = numpy_only(lambda: fo.Drive(times, end=1.0, vin=levels))
        np.testing.assert_array_equal(drive.times, reference.times)
        np.testing.assert_array_equal(drive.levels("vin"), levels)
        times[0] = -5.0  # the drive keeps its own copy
        assert drive.times[0] == reference.times[0]

    @pytest.mark.parametrize("field, index, value, message", [
        ("times", 31_234, np.nan, "drive.times[31234]: nan is not allowed"),
        ("times", 59_999, np.inf, "drive.times[59999]: inf is not allowed"),
        ("times", 40_000, 0.0, "drive.times[40000]: 0.0 does not come after drive.times[39999]"),
        ("times", 1, 1e-6, "drive.times[1]: 1e-06 does not come after drive.times[0]"),
        ("vin", 12, -np.inf, "drive.vin[12]: -inf is not allowed"),
    ])
    def test_errors_identical(self, numpy_only, field, index, value, message):
        times, levels = self.make()
        (times if field == "times" else levels)[index] = value
        with pytest.raises(InputError) as compiled:
            fo.Drive(times, end=1.0, vin=levels)
        with pytest.raises(InputError) as plain:
            numpy_only(lambda: fo.Drive(times, end=1.0, vin=levels))
        assert str(compiled.value) == str(plain.value)
        assert str(compiled.value).startswith(message)


class TestGridErrors:
    """Long grids take the compiled sweep; bad times are refused with the numpy path's words."""

    @pytest.mark.parametrize("index, value, message", [
        (50_000, np.nan, "t: contains NaN or inf"),
        (-1, np.inf, "t: contains NaN or inf"),
        (0, -np.inf, "t: contains NaN or inf"),
        (-1, 2.5e-3, "t: 0.0025 s is outside the drive"),
        (0, -1e-9, "t: -1e-09 s is outside the drive"),
    ])
    def test_same_message(self, numpy_only, index, value, message):
        response = fo.Fixture.rc("1k", "1u").respond(fo.Drive.steps([(0, 0.0), ("1m", 1.0)], end="2m"))
        grid = np.linspace(0.0, 2e-3, 100_001)
        grid[index] = value
        with pytest.raises(InputError) as compiled:
            response.total(grid)
        with pytest.raises(InputError) as plain:
            numpy_only(response.total, grid)
        assert str(compiled.value) == str(plain.value)
        assert str(compiled.value).startswith(message)


class TestPlanWalk:
    """A long plan's whole-array walk (settling/chain.py) gives the same plan on both paths."""

    @pytest.mark.parametrize("case", ["plain", "min_dwell", "hold", "holding", "relative", "aims"])
    def test_identical(self, case, numpy_only):
        from firstorder.settling.chain import Chain, walk_fast

        rng = np.random.default_rng(len(case))
        n = 60_001
        rate = rng.choice([1e3, 1e6, 3e4], n)
        final = rng.uniform(-2, 2, n)
        gain = rng.uniform(0.5, 1.5, n)
        hold = np.full(n, 2e-6 if case == "hold" else 0.0)
        if case == "holding":
            rate[rng.integers(1, n, 300)] = 0.0
        value, relative = (0.01, True) if case == "relative" else (1e-3, False)
        chain = Chain(rate, final, gain, value, relative, 0.1, hold, 4e-5 if case in ("min_dwell", "holding") else 1e-9)
        aims = np.where(rng.uniform(size=n) < 0.3, 1e-5, np.inf) if case == "aims" else None
        compiled = walk_fast(chain, 0.3, aims)
        plain = numpy_only(walk_fast, chain, 0.3, aims)
        assert compiled is not None and plain is not None
        for name in ("state", "dwell", "settle", "limit", "error", "limited", "instants"):
            np.testing.assert_array_equal(getattr(compiled, name), getattr(plain, name), err_msg=name)


class TestPlanSettled:
    """A long plan's settled walk (settling/settled.py): the same plan on both paths."""

    @pytest.mark.parametrize("case", ["plain", "min_dwell", "hold", "aims", "probe", "close levels"])
    def test_identical(self, case, numpy_only):
        from firstorder.settling.chain import Chain
        from firstorder.settling.settled import walk_settled

        rng = np.random.default_rng(len(case) + 3)
        n = 60_001
        rate = rng.choice([1e3, 1e6, 3e4], n)
        final = rng.uniform(-2, 2, n)
        final[rng.integers(0, n, 100)] = 0.5
        if case == "close levels":
            final[1000:1012] = 0.5 + 1e-4 * np.arange(12)
        gain = rng.uniform(0.5, 1.5, n) if case == "probe" else np.ones(n)
        hold = np.full(n, 2e-6 if case == "hold" else 0.0)
        chain = Chain(rate, final, gain, 1e-3, False, 0.1, hold, 3e-6 if case == "min_dwell" else 1e-9)
        aims = np.where(rng.uniform(size=n) < 0.3, 1e-5, np.inf) if case == "aims" else None
        compiled = walk_settled(chain, 0.3, aims)
        plain = numpy_only(walk_settled, chain, 0.3, aims)
        assert compiled is not None and plain is not None
        np.testing.assert_array_equal(compiled.instants, plain.instants)
        assert compiled.end_state == plain.end_state
        for name in ("state", "dwell", "settle", "error", "limited"):
            np.testing.assert_array_equal(getattr(compiled.whole(), name), getattr(plain.whole(), name), err_msg=name)

    @pytest.mark.parametrize("case", ["plain", "unknown sides", "min_dwell", "zero dwells"])
    def test_the_counts_the_walk_trusts(self, case, numpy_only):
        """The settled walk skips its whole-array checks on the kernels' counts: steps whose
        side is not known, steps that do not settle, dwells that are not > 0; both paths
        count what their codes and dwells hold."""
        from firstorder.settling import settled
        from firstorder.settling.chain import Chain

        rng = np.random.default_rng(len(case))
        n = 50_000
        final = rng.uniform(-2, 2, n)
        if case == "unknown sides":
            final[2000:2000 + 3 * settled.LOOKBACK] = 0.25  # no jump: sides not known that far back
        if case == "zero dwells":
            final[3000:3010] = final[2999]  # steps that do not move, with no min_dwell
        shortest = {"min_dwell": 2e-3, "zero dwells": 0.0}.get(case, 1e-9)
        chain = Chain(np.full(n, 1e3), final, np.ones(n), 1e-3, False, 0.0, np.zeros(n), shortest)
        allowed = chain.value

        def counted():
            kernels = _kernels.available(n)
            allowance = settled._allowance(chain, 0.1, allowed, kernels)
            quotient, side, codes, unknown = settled._steps(chain, 0.1, allowed, None, None, kernels, allowance)
            codes_before = codes.copy()
            np.log(quotient, out=quotient)
            dwell = np.empty(n)
            irregular, not_positive = settled._dwells(chain, quotient, dwell, codes, False, _kernels.available(n))
            return (unknown, int(np.count_nonzero(codes_before == settled._UNKNOWN)), irregular,
                    int(np.count_nonzero(codes == settled._IRREGULAR)), not_positive,
                    int(np.count_nonzero(~(dwell > 0.0))), codes.copy())

        compiled, plain = counted(), numpy_only(counted)
        for found in (compiled, plain):  # each path counts what it holds
            assert found[0] == found[1] and found[2] == found[3] and found[4] == found[5], found[:6]
        # The codes are the same on both paths; the dwells of steps that are not regular are
        # not used (the walk returns None, or walks those steps again), so they may differ.
        np.testing.assert_array_equal(compiled[6], plain[6])
        assert compiled[:4] == plain[:4]
        if compiled[2] == 0 and compiled[0] == 0:
            assert compiled[4] == plain[4]
        if case == "unknown sides":
            assert compiled[0] > 0
        if case in ("min_dwell", "zero dwells"):
            assert compiled[2] > 0
        if case == "zero dwells":
            assert compiled[4] > 0

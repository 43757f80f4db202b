"""Tests for firstorder.studies.study: the lot at once against each unit built by hand, the
lot's fractions against exact distributions (scipy.stats), intervals against scipy's
binomial test, reproducibility, and bad arguments."""

from __future__ import annotations

import math

import numpy as np
import pytest

import firstorder as fo
from firstorder.errors import InputError
from firstorder.studies import Normal, Spread, Uniform
from firstorder.studies.study import clopper_pearson, order_statistic

from builders import general_drive, general_fixture

HALF_LSB_16 = fo.Tolerance.lsb(bits=16, span=5.0)


def rc_study(spread, units, seed=1, initial="settled", end="40m", **options):
    """A 1 ms RC (10 kΩ, 100 nF) stepped 0 -> 5 V -> 0 from rest, 20 ms a step."""
    fx = fo.Fixture.rc("10k", "100n")
    drive = fo.Drive([0, "20m"], end=end, vin=[5.0, 0.0])
    return fx.study(drive, spread, units=units, seed=seed, initial=0.0 if initial == "settled" else initial,
                    **options)


def general_spread() -> Spread:
    return Spread({"rs": "1%", "ch": Normal("3%", within="9%"), "k1.r_on": Uniform("50m", "300m"),
                   "rm": Uniform("-20%", "+5%"), "vdac.gain": "0.05%", "vdac.offset": "1m", "ibias.gain": "2%"},
                  temperature=(0, 50), tempco={"rs": "25ppm", "ch": "-750ppm"})


@pytest.fixture(scope="module")
def study():
    return general_fixture().study(general_drive(), general_spread(), units=300, seed=11, initial=0.25)


class TestEveryUnitIsItsOwnResponse:
    """study.unit(k) is built by hand (its fixture with its values, its drive with its gain
    and offset); the lot's arrays must hold exactly that unit's numbers."""

    def test_the_state_at_every_change(self, study):
        for k in np.random.default_rng(0).choice(study.units, 60, replace=False):
            assert np.array_equal(study.boundary[k], study.unit(int(k)).boundary), k

    @pytest.mark.parametrize("probe", [None, "v_b", "v_ab", "i_rs"])
    def test_the_settling_columns_state_and_probes(self, study, probe):
        tolerance = fo.Tolerance.relative(1e-3) if probe == "i_rs" else fo.Tolerance.absolute("1m")
        delays = 0.6 * general_drive().durations
        lot = study.columns(tolerance, sample_delay=delays, probe=probe)
        for k in np.random.default_rng(1).choice(study.units, 40, replace=False):
            table = study.unit(int(k)).settling(tolerance, sample_delay=delays, probe=probe)
            assert np.array_equal(lot.settle_time[k], table["settle_time"].to_numpy(), equal_nan=True), k
            assert np.array_equal(lot.error_at_sample[k], table["error_at_sample"].to_numpy()), k
            assert np.array_equal(lot.ok[k], table["ok"].to_numpy()), k

    @pytest.mark.parametrize("tolerance", [fo.Tolerance.absolute("1m"), fo.Tolerance.relative(1e-3)])
    @pytest.mark.parametrize("delay", [None, "150u"])
    def test_holds_are_judged_as_droop_as_each_units_table_judges_them(self, tolerance, delay):
        # The demo's last segment opens the relay: the capacitor holds, drooping into the
        # meter. Each unit's row is its own settling table's, hold rule included.
        from firstorder.cli import demo_analysis

        demo = demo_analysis()
        study = demo.fixture.study(demo.drive, demo.spread, units=60, seed=3, initial=demo.initial)
        lot = study.columns(tolerance, sample_delay=delay)
        for k in range(0, 60, 7):
            table = study.unit(k).settling(tolerance, sample_delay=delay)
            assert table["hold"].tolist() == [False] * 4 + [True]
            error = table["error_at_sample"] if delay is not None else table["residual_at_end"]
            assert np.array_equal(lot.error_at_sample[k], error.to_numpy()), k
            assert np.array_equal(lot.settle_time[k], table["settle_time"].to_numpy(), equal_nan=True), k
            assert np.array_equal(lot.limit[k], np.broadcast_to(table["tolerance"].to_numpy(), (5,))), k
        settling = study.settling(tolerance, sample_delay=delay)
        # A held -2 V drooping through the meter (10 MΩ ± 1 %, 10 nF ± 10 % and its tempco) for at
        # most 600 µs: below 2.1 V (1 - e^(-600 µs / tau_min)) (handbook exponential decay).
        assert 0 < settling["error_max"].iloc[-1] < 2.1 * -math.expm1(-600e-6 / (0.99 * 10e6 * 0.9 * 10e-9 * 0.95))

    def test_the_drawn_values_are_the_units_values(self, study):
        values = study.values
        assert list(values.columns) == ["rs", "ch", "k1.r_on", "rm", "vdac.gain", "vdac.offset", "ibias.gain",
                                        "temperature"]
        unit = study.unit(7).fixture.part_map
        assert unit["rs"].value == values.loc[7, "rs"] and unit["ch"].value == values.loc[7, "ch"]

    @pytest.mark.parametrize("initial", ["settled", "periodic"])
    def test_named_starts_per_unit(self, initial):
        fx = fo.Fixture.rc("10k", "100n")
        drive = fo.Drive([0, "1m", "3m"], end="4m", vin=[1.0, 4.0, -2.0])
        study = fx.study(drive, Spread({"r": "5%", "c": "10%"}), units=50, seed=3, initial=initial)
        for k in range(0, 50, 7):
            assert np.array_equal(study.boundary[k], study.unit(k).boundary), k


class TestAgainstExactDistributions:
    """With only C varied, tau = R C has C's distribution scaled, and the settle time after a
    full step is tau * ln(step / limit) (common practice: (N + 1) ln 2 time constants to half an
    LSB of N bits after a full-span step).  Reference quantiles from scipy.stats; each order
    statistic of U draws may miss its quantile by about sqrt(p (1 - p) / U) / density, and the
    bound here is five times that."""

    UNITS = 20_000
    SETTLE_PER_TAU = 17 * math.log(2)  # (16 + 1) ln 2

    def check(self, table, distribution, fractions):
        for p in fractions:
            expected = distribution.ppf(p) * self.SETTLE_PER_TAU
            density = distribution.pdf(distribution.ppf(p)) / self.SETTLE_PER_TAU
            bound = 5 * math.sqrt(p * (1 - p) / self.UNITS) / density
            got = table.loc[0, f"settle_time_{p * 100:g}%"]
            assert abs(got - expected) < bound, (p, got, expected, bound)

    def test_uniform_capacitor_gives_uniform_settle_times(self):
        from scipy.stats import uniform

        study = rc_study(Spread({"c": "10%"}), self.UNITS, seed=5)
        table = study.settling(HALF_LSB_16, fractions=(0.1, 0.5, 0.9, 0.99))
        self.check(table, uniform(loc=0.9e-3, scale=0.2e-3), (0.1, 0.5, 0.9, 0.99))

    def test_normal_capacitor_gives_normal_settle_times(self):
        from scipy.stats import norm

        study = rc_study(Spread({"c": Normal("3%")}), self.UNITS, seed=6)
        table = study.settling(HALF_LSB_16, fractions=(0.05, 0.5, 0.95, 0.999))
        self.check(table, norm(loc=1e-3, scale=0.03e-3), (0.05, 0.5, 0.95, 0.999))

    def test_the_yield_at_a_sample_is_the_uniform_cdf(self):
        # Inside at a delay d exactly when tau <= d / (17 ln 2): scipy.stats.uniform's CDF there.
        from scipy.stats import uniform

        delay = 12e-3
        study = rc_study(Spread({"c": "10%"}), self.UNITS, seed=8)
        table = study.settling(HALF_LSB_16, sample_delay=delay)
        expected = uniform(loc=0.9e-3, scale=0.2e-3).cdf(delay / self.SETTLE_PER_TAU)
        bound = 5 * math.sqrt(expected * (1 - expected) / self.UNITS)
        assert abs(table.loc[0, "yield"] - expected) < bound
        assert table.loc[0, "nominal_settle_time"] == pytest.approx(self.SETTLE_PER_TAU * 1e-3, rel=1e-12)

    def test_the_delay_for_a_fraction_is_its_settle_time_column(self):
        study = rc_study(Spread({"c": "10%", "r": "1%"}), 3000, seed=9)
        table = study.settling(HALF_LSB_16, fractions=(0.999,))
        assert np.array_equal(study.delay_for(HALF_LSB_16, 0.999), table["settle_time_99.9%"].to_numpy(),
                              equal_nan=True)

    def test_the_delay_for_a_fraction_may_run_past_a_short_segment(self):
        # 10 ms steps are short of the 11.8 ms half an LSB needs: the delay is still the
        # closed form's uniform quantile (scipy.stats.uniform), not NaN.
        from scipy.stats import uniform

        fx = fo.Fixture.rc("10k", "100n")
        short = fx.study(fo.Drive([0, "10m"], end="20m", vin=[5.0, 0.0]), Spread({"c": "10%"}), units=self.UNITS,
                         seed=10)
        needed = short.delay_for(HALF_LSB_16, 0.9)[0]
        expected = uniform(loc=0.9e-3, scale=0.2e-3).ppf(0.9) * self.SETTLE_PER_TAU
        assert needed > 10e-3 and abs(needed - expected) < 5 * math.sqrt(0.09 / self.UNITS) * 0.2e-3 * 12
        assert math.isnan(short.settling(HALF_LSB_16).loc[0, "settle_time_50%"])


class TestPassing:
    def test_the_interval_is_scipys_exact_binomial_interval(self):
        from scipy.stats import binomtest

        study = rc_study(Spread({"c": "10%"}), 2000, seed=2)
        passing = study.passing(HALF_LSB_16, sample_delay="12m")
        reference = binomtest(passing.passing, passing.units).proportion_ci(0.95, method="exact")
        assert passing.low == pytest.approx(reference.low, rel=1e-9)
        assert passing.high == pytest.approx(reference.high, rel=1e-9)
        lot = study.columns(HALF_LSB_16, sample_delay="12m")
        assert passing.passing == int(lot.ok.all(axis=1).sum())

    @pytest.mark.parametrize("passing, units", [(0, 10), (10, 10), (3, 1000), (997, 1000)])
    def test_clopper_pearson_at_the_edges(self, passing, units):
        from scipy.stats import binomtest

        reference = binomtest(passing, units).proportion_ci(0.95, method="exact")
        low, high = clopper_pearson(passing, units, 0.95)
        assert low == pytest.approx(reference.low, abs=1e-12) and high == pytest.approx(reference.high, abs=1e-12)


class TestOrderStatistics:
    def test_against_sorting_every_unit(self):
        rng = np.random.default_rng(4)
        values = rng.normal(size=(1000, 3))
        ordered = np.sort(values, axis=0)
        assert np.array_equal(order_statistic(values, 0.999), ordered[998])
        assert np.array_equal(order_statistic(values, 0.5), ordered[499])
        assert np.array_equal(order_statistic(values, 1.0), ordered[-1])
        assert np.array_equal(order_statistic(values, 0.0001), ordered[0])

    def test_units_that_never_settle_count_as_slowest(self):
        study = rc_study(Spread({"c": "10%"}), 1000, seed=3, end="32m")  # the last step gets 12 ms
        table = study.settling(HALF_LSB_16, fractions=(0.5, 0.999))
        lot = study.columns(HALF_LSB_16)
        never = np.isnan(lot.settle_time[:, 1]).mean()
        assert 0.01 < never < 0.99
        assert math.isnan(table.loc[1, "settle_time_99.9%"]) and math.isnan(table.loc[1, "settle_time_max"])


class TestReproducible:
    def test_unit_k_depends_only_on_seed_and_k(self):
        small = rc_study(Spread({"c": "10%", "r": "1%"}), 100, seed=12)
        large = rc_study(Spread({"c": "10%", "r": "1%"}), 5000, seed=12)
        assert np.array_equal(small.values.to_numpy(), large.values.to_numpy()[:100])
        assert np.array_equal(small.boundary, large.boundary[:100])

    def test_the_same_seed_repeats_and_another_differs(self):
        spread = Spread({"c": "10%"})
        one, again, other = (rc_study(spread, 200, seed=s).settling(HALF_LSB_16) for s in (1, 1, 2))
        assert one.equals(again)
        assert not one.equals(other)


class TestBadArguments:
    @pytest.mark.parametrize("units, message", [
        (0, "units: 0"), (-5, "units: -5"), (2.5, "units: 2.5"), (True, "units: True"), ("100", "units: '100'"),
        (None, "units: None"), ("many", "units: 'many'"),
    ])
    def test_units(self, units, message):
        with pytest.raises(InputError, match=message.replace("(", r"\(")):
            rc_study(Spread({"c": "10%"}), units)

    def test_more_units_kept_than_memory_holds(self):
        with pytest.raises(InputError, match=r"units: 1,000,000,000 units .* kept \(keep=True\) .* GiB"):
            rc_study(Spread({"c": "10%"}), 10**9, keep=True)

    @pytest.mark.parametrize("fractions", [0.0, 1.5, -0.1, "0.5", (), (0.5, 2.0), True, [None], float("nan")])
    def test_fractions(self, fractions):
        study = rc_study(Spread({"c": "10%"}), 10)
        with pytest.raises(InputError, match="fraction"):
            study.settling(HALF_LSB_16, fractions=fractions)

    @pytest.mark.parametrize("confidence", [0.0, 1.0, 95, "95%", None])
    def test_confidence(self, confidence):
        with pytest.raises(InputError, match="confidence"):
            rc_study(Spread({"c": "10%"}), 10).passing(HALF_LSB_16, confidence=confidence)

    @pytest.mark.parametrize("k", [-1, 10, 2.0, "3", True, None])
    def test_unit_index(self, k):
        with pytest.raises(InputError, match="unit: .* units are 0 to 9"):
            rc_study(Spread({"c": "10%"}), 10).unit(k)

    def test_probe_tolerance_drive_spread_and_seed(self):
        study = rc_study(Spread({"c": "10%"}), 10)
        with pytest.raises(InputError, match="probe: 'v_x'"):
            study.settling(HALF_LSB_16, probe="v_x")
        with pytest.raises(InputError, match="in A"):
            study.settling(fo.Tolerance.absolute("1 mA"))
        with pytest.raises(InputError, match="sample_delay"):
            study.settling(HALF_LSB_16, sample_delay="-30m")
        fx = fo.Fixture.rc("10k", "100n")
        with pytest.raises(InputError, match="drive: "):
            fx.study([0, 1], Spread({"c": "1%"}), units=5, seed=1)
        with pytest.raises(InputError, match="spread: "):
            fx.study(fo.Drive([0], end="1m", vin=[1.0]), {"c": "1%"}, units=5, seed=1)
        with pytest.raises(InputError, match="seed: -1"):
            fx.study(fo.Drive([0], end="1m", vin=[1.0]), Spread({"c": "1%"}), units=5, seed=-1)
        with pytest.raises(InputError, match="spread q"):
            fx.study(fo.Drive([0], end="1m", vin=[1.0]), Spread({"q": "1%"}), units=5, seed=1)


class TestCurves:
    """Every unit's curve is the hand-built unit's, bit for bit; the envelope's edges are
    order statistics of them (checked against sorting every unit)."""

    @pytest.mark.parametrize("component", ["total", "zero_input", "zero_state", "forced", "natural"])
    @pytest.mark.parametrize("probe", [None, "v_b", "i_rs"])
    def test_each_row_is_the_units_own_curve(self, study, component, probe):
        drive = general_drive()
        t = np.linspace(drive.start, drive.end, 333)
        lot = study.evaluate(t, component, probe)
        for k in (0, 17, 299):
            alone = study.unit(k).evaluate(t, (component,), probe)[component]
            assert np.array_equal(lot[k], alone), (k, component, probe)

    def test_a_long_grid_too(self, study):
        drive = general_drive()
        t = np.linspace(drive.start, drive.end, 3000)  # past the short-grid search: run lengths alone
        lot = study.evaluate(t)
        assert np.array_equal(lot[5], study.unit(5).total(t))

    def test_the_envelope_holds_the_central_fraction(self, study):
        drive = general_drive()
        t = np.linspace(drive.start, drive.end, 50)
        low, high = study.envelope(t, fraction=0.9)
        ordered = np.sort(study.evaluate(t), axis=0)
        tail = math.floor(0.05 * study.units)  # 15 units below, 15 above
        assert np.array_equal(low, ordered[tail]) and np.array_equal(high, ordered[-1 - tail])
        inside = ((study.evaluate(t) >= low) & (study.evaluate(t) <= high)).mean(axis=0)
        assert (inside >= 0.9).all()

    def test_bad_component_fraction_and_times(self, study):
        with pytest.raises(InputError, match="component: 'ripple'"):
            study.evaluate([0.0], "ripple")
        with pytest.raises(InputError, match="fraction"):
            study.envelope([0.0], fraction=1.5)
        with pytest.raises(InputError, match="outside the drive"):
            study.evaluate([-1.0])


class TestTargets:
    """Against a target other than each unit's own final value, the error is |value - target|;
    the reference is a dense grid of every unit's own curve (brute force, 20,001 points a
    segment), whose last entry into the band must agree with the closed form."""

    def brute_force(self, study, target, limit, k, segment):
        drive = study.drive
        t = np.linspace(drive.times[segment], drive.ends[segment], 20_001)[:-1]
        error = np.abs(study.unit(k).total(t) - target[segment])
        outside = np.flatnonzero(error > limit)
        if outside.size == 0:
            return 0.0
        if outside[-1] == t.size - 1:
            return math.nan
        return t[outside[-1] + 1] - drive.times[segment]

    @pytest.mark.parametrize("target", ["nominal", "vin", [5.0, 0.0], 2.5])
    def test_settle_times_against_a_dense_grid(self, target):
        fx = fo.Fixture.rc("10k", "100n")
        fx.resistor("r_in", "out", "gnd", "1M") if "out" in fx.netlist.nodes else None
        drive = fo.Drive([0, "20m"], end="40m", vin=[5.0, 0.0])
        study = fx.study(drive, Spread({"c": "10%", "r": "1%", "vin.gain": "0.02%"}), units=40, seed=4)
        tolerance = fo.Tolerance.absolute("2m")
        lot = study.columns(tolerance, target=target)
        aim = study._target(target, None, "V")
        step = (drive.ends[0] - drive.times[0]) / 20_000
        for k in (0, 13, 39):
            for segment in (0, 1):
                expected = self.brute_force(study, aim, 2e-3, k, segment)
                got = lot.settle_time[k, segment]
                if math.isnan(expected):
                    assert math.isnan(got), (k, segment, got)
                else:
                    assert abs(got - expected) <= 1.01 * step, (k, segment, got, expected)

    def test_the_final_target_is_each_units_own_table_and_gain_error_counts_against_the_source(self):
        fx = fo.Fixture.rc("10k", "100n")
        drive = fo.Drive([0, "20m"], end="40m", vin=[5.0, 0.0])
        study = fx.study(drive, Spread({"vin.gain": Uniform("0.1%", "0.2%")}), units=20, seed=1)
        half_lsb = fo.Tolerance.lsb(bits=16, span=5.0)
        own = study.columns(half_lsb)
        against_source = study.columns(half_lsb, target="vin")
        # Every unit's gain is 0.1-0.2 % high: 5-10 mV off 5 V, far past 38 µV; 0 V is still 0 V.
        assert own.ok.all()
        assert not against_source.ok[:, 0].any() and against_source.ok[:, 1].all()
        assert np.isnan(against_source.settle_time[:, 0]).all()

    @pytest.mark.parametrize("target, message", [
        ("typical", "target: 'typical'"), ([1.0, 2.0, 3.0], "3 values for 2 segments"), (True, "target"),
        ({"vin": 1}, "target"),
    ])
    def test_bad_targets(self, target, message):
        study = rc_study(Spread({"c": "10%"}), 5)
        with pytest.raises(InputError, match=message):
            study.columns(HALF_LSB_16, target=target)

    def test_a_source_in_another_unit_is_refused(self):
        fx = fo.Fixture().current_source("ib", "gnd", "a").resistor("r", "a", "gnd", "1k").capacitor("c", "a", "gnd", "1u")
        study = fx.study(fo.Drive([0], end="10m", ib=[1e-3]), Spread({"c": "1%"}), units=5, seed=1)
        with pytest.raises(InputError, match="gives A, but the watched quantity is in V"):
            study.columns(fo.Tolerance.absolute("1m"), target="ib")


@pytest.fixture(scope="module")
def kept():
    return general_fixture().study(general_drive(), general_spread(), units=130, seed=5, initial=0.25, keep=True)


class TestChunks:
    """A study holds one chunk of units at a time unless it keeps them; its numbers must not
    depend on that, on the chunk size or on the thread count (bit for bit)."""

    @staticmethod
    def answers(study):
        delays = 0.6 * general_drive().durations
        tolerance = fo.Tolerance.absolute("1m")
        t = np.linspace(0.0, float(general_drive().end), 57)
        return (study.settling(tolerance, sample_delay=delays, probe="v_b"),
                study.settling(tolerance, fractions=(0.1, 0.5, 0.97), target="nominal"),
                study.passing(tolerance, sample_delay=delays),
                study.delay_for(tolerance, fraction=0.9),
                study.envelope(t, fraction=0.9),
                (lambda b: np.array([b.mc_sd, b.mc_low, b.mc_high, b.units]))(study.budget(segment=2, quantity="tau")),
                study.boundary)

    @pytest.mark.parametrize("chunk, threads, keep", [(1, "1", False), (7, "4", False), (64, "1", False),
                                                      (129, "4", False), (None, "2", False), (7, "1", True),
                                                      (64, "2", True)])
    def test_the_same_numbers_kept_or_a_chunk_at_a_time(self, kept, chunk, threads, keep, monkeypatch):
        monkeypatch.setenv("FIRSTORDER_THREADS", threads)
        study = general_fixture().study(general_drive(), general_spread(), units=130, seed=5, initial=0.25,
                                        chunk=chunk, keep=keep)
        assert study._cache == (keep or chunk is None or chunk >= 130)
        if keep:  # held in runs of `chunk` units, each built once
            assert sorted(study._runs) == [(a, min(chunk, 130 - a)) for a in range(0, 130, chunk)]
        for mine, reference in zip(self.answers(study), self.answers(kept)):
            if hasattr(mine, "equals"):
                assert mine.equals(reference)
            elif isinstance(mine, fo.studies.Passing):
                assert mine == reference
            elif isinstance(mine, tuple):
                assert all(np.array_equal(a, b) for a, b in zip(mine, reference))
            else:
                assert np.array_equal(mine, reference, equal_nan=True)

    def test_order_statistics_are_those_of_every_unit_sorted(self, kept):
        study = general_fixture().study(general_drive(), general_spread(), units=130, seed=5, initial=0.25, chunk=9)
        lot = kept.columns(HALF_LSB_16, sample_delay="0.2m")
        table = study.settling(HALF_LSB_16, sample_delay="0.2m", fractions=(0.05, 0.5, 0.9))
        settle = np.sort(np.where(np.isnan(lot.settle_time), np.inf, lot.settle_time), axis=0)
        error = np.sort(lot.error_at_sample, axis=0)
        for f in (0.05, 0.5, 0.9):
            r = math.ceil(f * 130) - 1
            assert np.array_equal(table[f"error_{f * 100:g}%"].to_numpy(), error[r])
            assert np.array_equal(table[f"settle_time_{f * 100:g}%"].to_numpy(),
                                  np.where(np.isinf(settle[r]), np.nan, settle[r]), equal_nan=True)
        assert np.array_equal(table["error_max"].to_numpy(), error[-1])
        ratio = lot.error_at_sample / lot.limit
        assert table["worst_unit"].tolist() == np.argmax(ratio, axis=0).tolist()
        assert np.array_equal(table["yield"].to_numpy(), lot.ok.mean(axis=0))

    def test_a_chunk_is_a_pure_function_of_plain_values(self, kept):
        from firstorder.studies.run import Request, chunk_summary

        delays = 0.6 * general_drive().durations
        request = Request(fo.Tolerance.absolute("1m"), delays, None, None, True, (0, 14), (0, 14))
        parts = [chunk_summary(general_fixture(), general_drive(), general_spread(), 5, 0.25, a, n, request)
                 for a, n in ((0, 50), (50, 13), (63, 67))]
        merged = parts[2].merge(parts[0]).merge(parts[1])
        assert merged == kept.summary(fo.Tolerance.absolute("1m"), delays, fractions=(0.9,))

    def test_a_chunk_and_its_summary_travel_between_processes(self, kept):
        # What a worker would receive and send back (pickled, as a task scheduler sends it).
        import pickle

        from firstorder.studies.run import Request, chunk_summary
        from firstorder.studies.summary import rank, sides

        keep = sides([rank(0.95, 60), 59], 60)
        request = Request(fo.Tolerance.absolute("1m"), None, "v_b", None, True, keep, keep)
        arguments = pickle.loads(pickle.dumps((general_fixture(), general_drive(), general_spread(), request)))
        summary = pickle.loads(pickle.dumps(chunk_summary(*arguments[:3], 5, 0.25, 40, 60, arguments[3])))
        assert summary == kept.summary(fo.Tolerance.absolute("1m"), probe="v_b", fractions=(0.95,), units=60, first=40)

    def test_memory_holds_a_chunk_not_the_lot(self):
        import tracemalloc

        fx = fo.Fixture.rc("10k", "100n")
        segments, units = 400, 8000
        drive = fo.Drive(np.arange(segments) * 1e-3, segments * 1e-3, vin=np.resize([5.0, 0.0], segments))
        kept_bytes = units * segments * 12 * 8  # a kept study's arrays (BYTES_PER_UNIT_SEGMENT)
        # Imports and compiled kernels first (loaded for long arrays only), so the peak is the study's.
        fx.study(drive, Spread({"r": "1%", "c": "10%"}), units=300, seed=1).settling(HALF_LSB_16)
        tracemalloc.start()
        try:
            study = fx.study(drive, Spread({"r": "1%", "c": "10%"}), units=units, seed=1, chunk=250, progress=False)
            table = study.settling(HALF_LSB_16, fractions=(0.99, 0.999))
            passing = study.passing(HALF_LSB_16)
            _, peak = tracemalloc.get_traced_memory()
        finally:
            tracemalloc.stop()
        assert peak < kept_bytes / 10, (peak, kept_bytes)  # measured: about 15 MB against 307 MB
        # and the numbers are those of the kept study
        kept = fx.study(drive, Spread({"r": "1%", "c": "10%"}), units=units, seed=1, keep=True)
        assert table.equals(kept.settling(HALF_LSB_16, fractions=(0.99, 0.999)))
        assert passing == kept.passing(HALF_LSB_16)


class TestEnvelopeMemory:
    def test_a_small_unkept_study_is_sized_by_its_own_units(self):
        # The memory check counts the units a chunk holds: a 300-unit study is never a
        # whole default chunk (about 4 million unit-segments' worth of units).
        fx = fo.Fixture.rc("10k", "100n")
        study = fx.study(fo.Drive([0, "1m"], end="2m", vin=[1.0, 0.0]), Spread({"c": "10%"}), units=300, seed=1,
                         progress=False)
        t = np.linspace(0, 2e-3, 20_000)
        low, high = study.envelope(t, 0.9)
        every = study.evaluate(t)
        assert np.all(low <= np.quantile(every, 0.5, axis=0)) and np.all(high >= np.quantile(every, 0.5, axis=0))

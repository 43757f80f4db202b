"""Tests for firstorder.settling.planning's options: margin, clock, hold_after (and the old
sample_delay), the table's new columns and long plans, each judged by the engine."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import firstorder as fo
from builders import scanner
from firstorder.errors import InputError


LEVELS = {"v0": [1.0] * 6, "v1": [4.0] * 6, "v2": [-2.0] * 6,
          "k0": [1, 0, 0, 1, 1, 0], "k1": [0, 1, 0, 0, 0, 1], "k2": [0, 0, 1, 0, 0, 0]}
TOLERANCE = fo.Tolerance.lsb(bits=14, span=5.0)


def judged(fx, levels, drive, table, tolerance):
    """The engine's settling table of the planned drive at the plan's sample instants."""
    return fx.respond(drive).settling(tolerance, sample_delay=table["sample_delay"].to_numpy())


class TestMargin:
    def test_margin_keeps_a_fifth_of_each_tolerance(self):
        fx = scanner()
        table = fo.plan_table(fx, LEVELS, TOLERANCE, margin=0.2, min_dwell="1u")
        drive = fo.plan_dwells(fx, LEVELS, TOLERANCE, margin=0.2, min_dwell="1u")
        # 80 % of the tolerance, judged by the engine.
        assert judged(fx, LEVELS, drive, table, fo.Tolerance.absolute(0.8 * TOLERANCE.value))["ok"].all()
        assert (table["margin_left"] >= 0.2).all()
        settling = np.flatnonzero(table["limited_by"].to_numpy() == "settling")
        assert table.loc[settling, "margin_left"].to_numpy() == pytest.approx(0.2, abs=1e-6)
        # No more than asked: 0.1 % shorter and the sample leaves less than 20 %.
        for k in settling:
            shorter = drive.durations.copy()
            shorter[k] *= 0.999
            trial = fo.Drive(np.concatenate([[0.0], np.cumsum(shorter)[:-1]]), float(shorter.sum()), **LEVELS)
            check = fx.respond(trial).settling(fo.Tolerance.absolute(0.8 * TOLERANCE.value), sample_delay=shorter)
            assert not check.loc[k, "ok"]

    def test_margin_0_is_the_plan_of_old(self):
        fx = scanner()
        np.testing.assert_array_equal(fo.plan_dwells(fx, LEVELS, TOLERANCE, margin=0.0, min_dwell="1u").durations,
                                      fo.plan_dwells(fx, LEVELS, TOLERANCE, min_dwell="1u").durations)


class TestClock:
    @pytest.mark.parametrize("clock", ["10u", 1e-5, "10µs"])
    def test_every_dwell_is_whole_ticks_and_the_plan_holds(self, clock):
        fx = scanner()
        table = fo.plan_table(fx, LEVELS, TOLERANCE, clock=clock, hold_after="2u")
        drive = fo.plan_dwells(fx, LEVELS, TOLERANCE, clock=clock, hold_after="2u")
        ticks = drive.durations / 1e-5
        np.testing.assert_allclose(ticks, np.round(ticks), rtol=0, atol=1e-6)
        assert judged(fx, LEVELS, drive, table, TOLERANCE)["ok"].all()
        # The smallest whole number of ticks that covers what each step needs.
        need = np.maximum(table["settle_time"].to_numpy() + 2e-6, 0.0)
        assert (drive.durations >= need).all()
        assert (drive.durations - 1e-5 < need).all()
        assert set(table["limited_by"]) <= {"clock", "settling"}
        assert (table["limited_by"] == "clock").any()

    def test_a_clock_costs_at_most_a_tick_a_step(self):
        fx = scanner()
        fine = fo.plan_dwells(fx, LEVELS, TOLERANCE, clock="1u", min_dwell="1u")
        plain = fo.plan_dwells(fx, LEVELS, TOLERANCE, min_dwell="1u")
        assert (fine.end - fine.start) >= (plain.end - plain.start)
        assert (fine.end - fine.start) <= (plain.end - plain.start) + len(plain) * 1e-6

    @pytest.mark.parametrize("clock, message", [
        ("10,0u", "clock: .*comma"), (0.0, "clock: 0.0 is not allowed.*> 0"), ("-1u", "clock: '-1u'"),
        ("fast", "clock: 'fast'"), (float("inf"), "clock"),
    ])
    def test_bad_clock(self, clock, message):
        with pytest.raises(InputError, match=message):
            fo.plan_dwells(scanner(), LEVELS, TOLERANCE, clock=clock)


class TestNames:
    def test_sample_delay_is_taken_as_hold_after_with_a_warning_saying_what_changed(self):
        fx = scanner()
        new = fo.plan_table(fx, LEVELS, TOLERANCE, hold_after="2u")
        with pytest.warns(FutureWarning, match=r"sample_delay= here meant the time each step holds after its "
                                               r"sample; that is now hold_after="):
            old = fo.plan_table(fx, LEVELS, TOLERANCE, sample_delay="2u")
        with pytest.warns(FutureWarning, match="hold_after"):
            fo.plan_dwells(fx, LEVELS, TOLERANCE, sample_delay="2u")
        np.testing.assert_array_equal(old["dwell"], new["dwell"])
        # The table's sample_delay is change-to-sample, as everywhere else.
        np.testing.assert_allclose(new["dwell"] - new["sample_delay"], 2e-6, rtol=1e-9)

    def test_hold_after_gives_no_warning(self):
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            fo.plan_dwells(scanner(), LEVELS, TOLERANCE, hold_after="2u")

    def test_the_old_name_in_errors_is_the_one_the_user_wrote(self):
        with pytest.warns(FutureWarning), pytest.raises(InputError, match="sample_delay: .* step 0"):
            fo.plan_dwells(fo.Fixture.rc("1k", "1u"), {"vin": [1.0]}, TOLERANCE, sample_delay=-1e-6)

    @pytest.mark.parametrize("arguments, message", [
        (dict(sample_delay="1u", hold_after="1u"), "sample_delay: '1u' and hold_after: '1u' are both given"),
        (dict(margin=1.0), r"margin: 1.0 is not allowed.*up to but not including 1"),
        (dict(margin=-0.1), "margin: -0.1"),
        (dict(margin="2,0"), "margin: .*comma"),
        (dict(margin=True), "margin: True"),
        (dict(method="fastest"), r"method: 'fastest' is not allowed; give one of \['greedy', 'exact'\]"),
        (dict(units=100), "units: 100 is given without spread"),
        (dict(seed=1), "seed: 1 is given without spread"),
    ])
    def test_bad_options(self, arguments, message):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", FutureWarning)
            with pytest.raises(InputError, match=message):
                fo.plan_dwells(scanner(), LEVELS, TOLERANCE, **arguments)


class TestTable:
    def test_columns_for_one_unit(self):
        table = fo.plan_table(scanner(), LEVELS, TOLERANCE, min_dwell="20u")
        assert table["fraction_inside"].isna().all()
        assert table.loc[4, "limited_by"] == "min_dwell"
        np.testing.assert_allclose(table["margin_left"], 1 - table["error_at_sample"] / table["tolerance"])
        assert table.attrs["method"] == "greedy" and table.attrs["exact"] is None


class TestLongPlans:
    @pytest.mark.parametrize("options", [{}, {"min_dwell": "30u"}, {"hold_after": "1u", "margin": 0.1},
                                         {"method": "exact"}])
    def test_a_long_plan_holds_judged_by_the_engine(self, options):
        # Long enough for the whole-array walk; every sample judged by the engine.
        rng = np.random.default_rng(4)
        n = 3000
        channel = rng.integers(0, 3, n)
        levels = {"v0": rng.uniform(-2, 2, n), "v1": rng.uniform(-2, 2, n), "v2": rng.uniform(-2, 2, n)}
        levels.update({f"k{j}": (channel == j).astype(int) for j in range(3)})
        fx = scanner()
        table = fo.plan_table(fx, levels, TOLERANCE, **options)
        drive = fo.plan_dwells(fx, levels, TOLERANCE, **options)
        np.testing.assert_array_equal(drive.durations, np.diff(np.append(table["start"], drive.end)))
        checked = fx.respond(drive).settling(TOLERANCE, sample_delay=table["sample_delay"].to_numpy())
        assert checked["ok"].all()
        if "min_dwell" in options:
            assert (drive.durations >= 30e-6).all()

"""Tests for firstorder.studies.plan: lot plans, checked in sample by the engine's study of the
planned drive and out of sample by a fresh study with another seed (Clopper-Pearson)."""

from __future__ import annotations

import numpy as np
import pytest

import firstorder as fo
from firstorder.errors import InputError


def relay_rc() -> fo.Fixture:
    """A DAC behind 1 kΩ, a relay (10 Ω on) into 100 nF, 4.7 kΩ to ground (our own scenario)."""
    fx = fo.Fixture()
    fx.voltage_source("vdac", "drv", "gnd")
    fx.resistor("rs", "drv", "a", "1k")
    fx.switch("k1", "a", "b", r_on="10")
    fx.capacitor("ch", "b", "gnd", "100n")
    fx.resistor("rl", "b", "gnd", "4.7k")
    return fx


SPREAD = fo.Spread({"rs": "1%", "ch": "10%", "rl": "5%", "k1.r_on": fo.Uniform("5", "30"), "vdac.gain": "0.1%"},
                   temperature=("0", "50"), tempco={"ch": "-750ppm"})
LEVELS = {"vdac": [2.0, -1.0, 3.0, 3.0, 0.5], "k1": [1, 1, 1, 1, 1]}
TOLERANCE = fo.Tolerance.lsb(bits=12, span=5.0)


@pytest.fixture(scope="module")
def planned():
    """A lot plan of 4,000 units (seed 1) at 0.999: its table and drive."""
    options = dict(spread=SPREAD, units=4000, seed=1, fraction=0.999, min_dwell="20u")
    return fo.plan_table(relay_rc(), LEVELS, TOLERANCE, **options), fo.plan_dwells(relay_rc(), LEVELS, TOLERANCE,
                                                                                    **options)


class TestPlanLot:
    def test_each_step_holds_the_fraction_in_sample(self, planned):
        table, drive = planned
        np.testing.assert_array_equal(drive.durations, table["dwell"].to_numpy())
        # The engine's study of the same units at the planned samples (not the plan's walk).
        study = relay_rc().study(drive, SPREAD, units=4000, seed=1)
        by_step = study.settling(TOLERANCE, sample_delay=table["sample_delay"].to_numpy())["yield"].to_numpy()
        assert (by_step >= 0.999).all()
        np.testing.assert_allclose(by_step, table["fraction_inside"], atol=1 / 4000)
        passing = table.attrs["passing"]
        assert passing.units == 4000 and passing.fraction == pytest.approx(
            study.passing(TOLERANCE, sample_delay=table["sample_delay"].to_numpy()).fraction)
        assert set(table["limited_by"]) <= {"the lot", "min_dwell"}
        assert table.loc[3, "limited_by"] == "min_dwell"  # the level repeats

    def test_out_of_sample_a_fresh_lot_meets_the_fraction(self, planned):
        # A fresh draw (another seed): per step, the fraction inside is at least the target
        # within its exact binomial interval (scipy.stats.binomtest, Clopper-Pearson).
        from scipy.stats import binomtest

        table, drive = planned
        fresh = relay_rc().study(drive, SPREAD, units=20_000, seed=99)
        lot = fresh.columns(TOLERANCE, sample_delay=table["sample_delay"].to_numpy())
        for k in range(len(drive)):
            inside = int(lot.ok[:, k].sum())
            interval = binomtest(inside, 20_000).proportion_ci(confidence_level=0.95, method="exact")
            assert interval.high >= 0.999, f"step {k}: {inside} of 20000 inside"
        whole = int(lot.ok.all(axis=1).sum())
        interval = binomtest(whole, 20_000).proportion_ci(confidence_level=0.95, method="exact")
        assert interval.high >= table.attrs["passing"].fraction - 0.002

    def test_the_nominal_plan_fails_the_lot(self, planned):
        # The same check catches a plan for the nominal unit only: about half the lot fails.
        nominal = fo.plan_dwells(relay_rc(), LEVELS, TOLERANCE, min_dwell="20u")
        passing = relay_rc().study(nominal, SPREAD, units=4000, seed=99).passing(TOLERANCE)
        assert passing.high < 0.9
        assert planned[1].end > nominal.end

    def test_fraction_1_covers_every_drawn_unit_and_no_more(self):
        fx = relay_rc()
        table = fo.plan_table(fx, LEVELS, TOLERANCE, spread=SPREAD, units=500, seed=3, fraction=1.0, min_dwell="20u")
        drive = fo.plan_dwells(fx, LEVELS, TOLERANCE, spread=SPREAD, units=500, seed=3, fraction=1.0, min_dwell="20u")
        delays = table["sample_delay"].to_numpy()
        study = fx.study(drive, SPREAD, units=500, seed=3)
        assert study.passing(TOLERANCE, sample_delay=delays).passing == 500
        # Each dwell the lot set is the shortest: 0.1 % shorter and some drawn unit fails there.
        for k in np.flatnonzero(table["limited_by"].to_numpy() == "the lot"):
            shorter = drive.durations.copy()
            shorter[k] *= 0.999
            trial = fo.Drive(np.concatenate([[0.0], np.cumsum(shorter)[:-1]]), float(shorter.sum()), **LEVELS)
            lot = fx.study(trial, SPREAD, units=500, seed=3).columns(TOLERANCE, sample_delay=shorter)
            assert not lot.ok[:, k].all()

    def test_margin_clock_and_hold_after_with_a_lot(self):
        fx = relay_rc()
        options = dict(spread=SPREAD, units=1000, seed=5, fraction=0.99, margin=0.2, clock="10u", hold_after="3u")
        table = fo.plan_table(fx, LEVELS, TOLERANCE, **options)
        drive = fo.plan_dwells(fx, LEVELS, TOLERANCE, **options)
        ticks = drive.durations / 1e-5
        np.testing.assert_allclose(ticks, np.round(ticks), atol=1e-6)
        tighter = fo.Tolerance.absolute(0.8 * TOLERANCE.value)
        yields = fx.study(drive, SPREAD, units=1000, seed=5).settling(
            tighter, sample_delay=table["sample_delay"].to_numpy())["yield"]
        assert (yields >= 0.99).all()
        np.testing.assert_allclose(drive.durations - table["sample_delay"], 3e-6, rtol=1e-6)

    @pytest.mark.parametrize("arguments, message", [
        (dict(units=0, seed=1), "units: 0"),
        (dict(units=10, seed=1, fraction=0.0), r"fraction: 0.0 is not allowed.*\(0, 1\]"),
        (dict(units=10, seed=1, fraction=1.5), "fraction: 1.5"),
        (dict(units=10, seed=1, initial="periodic"), "initial: 'periodic' is not allowed with spread"),
        (dict(units=10, seed=1, method="exact"), "method: 'exact' is not allowed with spread"),
        (dict(units=10, seed=1, spread={"rs": "1%"}), "spread: .* is not a firstorder Spread"),
    ])
    def test_bad_input(self, arguments, message):
        arguments.setdefault("spread", SPREAD)
        with pytest.raises(InputError, match=message):
            fo.plan_dwells(relay_rc(), LEVELS, TOLERANCE, min_dwell="20u", **arguments)

"""Tests for firstorder.studies.budget: the combined standard
uncertainty against the `uncertainties` package (linear propagation, JCGM 100) on the same
model, sensitivities against handbook formulas and the RC closed forms, the coverage interval rules of
JCGM 101 7.7, and bad arguments."""

from __future__ import annotations

import math

import numpy as np
import pytest

import firstorder as fo
from firstorder.errors import InputError
from firstorder.studies import Normal, Spread
from firstorder.studies.budget import coverage_interval, numerical_tolerance

HALF_LSB_16 = fo.Tolerance.lsb(bits=16, span=5.0)


def rc_study(spread, units=500, seed=2):
    fx = fo.Fixture.rc("10k", "100n")
    drive = fo.Drive([0, "20m"], end="40m", vin=[5.0, 0.0])
    return fx.study(drive, spread, units=units, seed=seed)


def shunted_divider() -> fo.Fixture:
    """vin -> r -> out, rs from out to ground, c across rs: final = vin rs / (r + rs)."""
    fx = fo.Fixture()
    fx.voltage_source("vin", "in", "gnd")
    fx.resistor("r", "in", "out", "10k")
    fx.resistor("rs", "out", "gnd", "30k")
    fx.capacitor("c", "out", "gnd", "100n")
    return fx


def truncated_normal_sd(sd: float, within: float) -> float:
    """The standard deviation of a normal truncated at ±within (handbook: the variance of a
    normal truncated to [-a, a] in units of sd is 1 - 2 a phi(a) / (2 Phi(a) - 1))."""
    a = within / sd
    phi = math.exp(-a * a / 2.0) / math.sqrt(2.0 * math.pi)
    mass = math.erf(a / math.sqrt(2.0))
    return sd * math.sqrt(1.0 - 2.0 * a * phi / mass)


class TestAgainstTheUncertaintiesPackage:
    """Reference: the `uncertainties` package's linear propagation (first-order Taylor
    series, JCGM 100 5.1.2) of the same model, with the same standard uncertainties."""

    def test_the_time_constant_of_an_rc(self):
        from uncertainties import ufloat

        study = rc_study(Spread({"r": "0.1%", "c": "0.2%"}))
        b = study.budget(segment=0, quantity="tau")
        r = ufloat(10e3, 10e3 * 0.001 / math.sqrt(3.0))   # rectangular: a / sqrt(3), JCGM 100 4.3.7
        c = ufloat(100e-9, 100e-9 * 0.002 / math.sqrt(3.0))
        reference = r * c
        assert b.estimate == pytest.approx(reference.nominal_value, rel=1e-12)
        assert b.combined == pytest.approx(reference.std_dev, rel=1e-9)
        assert b.expanded == pytest.approx(2.0 * reference.std_dev, rel=1e-9)
        assert [row.method for row in b.rows] == ["symbolic", "symbolic"]

    def test_the_final_value_of_a_divider_with_gain_offset_and_a_tempco(self):
        from uncertainties import ufloat

        spread = Spread({"r": "0.1%", "rs": Normal("0.05%", within="0.15%"), "vin.gain": "0.01%",
                         "vin.offset": "100u"}, temperature=(0, 50), tempco={"r": "50ppm"})
        fx = shunted_divider()
        drive = fo.Drive([0, "20m"], end="40m", vin=[5.0, 0.0])
        b = fx.study(drive, spread, units=300, seed=5).budget(segment=0, quantity="final")
        r0 = ufloat(10e3, 10e3 * 0.001 / math.sqrt(3.0))
        rs = ufloat(30e3, truncated_normal_sd(30e3 * 0.0005, 30e3 * 0.0015))
        gain = ufloat(0.0, 1e-4 / math.sqrt(3.0))
        offset = ufloat(0.0, 100e-6 / math.sqrt(3.0))
        temperature = ufloat(25.0, 50.0 / math.sqrt(12.0))
        r = r0 * (1.0 + 50e-6 * (temperature - 25.0))
        reference = (5.0 * (1.0 + gain) + offset) * rs / (r + rs)
        assert b.estimate == pytest.approx(reference.nominal_value, rel=1e-12)
        assert b.combined == pytest.approx(reference.std_dev, rel=1e-6)
        by_key = {row.key: row for row in b.rows}
        assert by_key["r"].method == by_key["rs"].method == "symbolic"
        assert by_key["vin.gain"].method.startswith("central difference")
        for key, variable in (("r", r0), ("rs", rs), ("vin.gain", gain), ("vin.offset", offset),
                              ("temperature", temperature)):
            assert by_key[key].contribution == pytest.approx(abs(reference.error_components()[variable]),
                                                             rel=1e-6), key
        assert sum(row.share for row in b.rows) == pytest.approx(1.0, rel=1e-12)

    def test_the_final_value_of_a_current_probe(self):
        from uncertainties import ufloat

        fx = shunted_divider()
        fx.probe("i_r", through="r")
        drive = fo.Drive([0], end="20m", vin=[5.0])
        b = fx.study(drive, Spread({"r": "0.1%", "rs": "0.2%"}), units=50, seed=1).budget(
            segment=0, quantity="final", probe="i_r")
        r = ufloat(10e3, 10e3 * 0.001 / math.sqrt(3.0))
        rs = ufloat(30e3, 30e3 * 0.002 / math.sqrt(3.0))
        reference = 5.0 / (r + rs)  # settled: the capacitor carries nothing, r and rs in series
        assert b.unit == "A"
        assert b.estimate == pytest.approx(reference.nominal_value, rel=1e-12)
        assert b.combined == pytest.approx(reference.std_dev, rel=1e-6)

    def test_the_monte_carlo_spread_of_a_nearly_linear_model_matches(self):
        # For small bands the model is nearly linear, so the units' standard deviation is the
        # combined standard uncertainty within its Monte Carlo error (about 1/sqrt(2M) of it:
        # 1.6 % for M = 2000; the bound is over 3 of those).
        b = rc_study(Spread({"r": "0.5%", "c": "1%"}), units=2000).budget(
            segment=0, quantity="settle_time", tolerance=HALF_LSB_16)
        assert b.mc_sd == pytest.approx(b.combined, rel=0.05)
        assert b.mc_mean == pytest.approx(b.estimate, rel=0.002)
        assert b.mc_low < b.estimate < b.mc_high

    def test_a_strongly_nonlinear_model_fails_the_clause_8_check(self):
        # tau = r c with both +-50 %: the product's distribution is far from the Gaussian of
        # y +- 1.96 u (its interval ends differ by a few percent of u, many tolerances).
        b = rc_study(Spread({"r": "50%", "c": "50%"}), units=4000).budget(segment=0, quantity="tau")
        assert not b.linear_holds
        assert max(abs(b.linear_low - b.mc_low), abs(b.linear_high - b.mc_high)) > 10 * b.numerical_tolerance


class TestNumericSensitivities:
    """The central differences on units built by hand, against the handbook's closed forms
    of a step into an RC: T = R C ln(step / limit), E(d) = step exp(-d / (R C))."""

    def test_the_settle_time_to_r_is_c_times_the_log(self):
        b = rc_study(Spread({"r": "1%", "c": "1%"}), units=20).budget(
            segment=0, quantity="settle_time", tolerance=HALF_LSB_16)
        by_key = {row.key: row for row in b.rows}
        step_over_limit = 2.0 ** 17  # a 5 V step to half an LSB of 16 bits over 5 V
        assert by_key["r"].method.startswith("central difference, h = ")
        assert by_key["r"].sensitivity == pytest.approx(100e-9 * math.log(step_over_limit), rel=1e-7)
        assert by_key["c"].sensitivity == pytest.approx(10e3 * math.log(step_over_limit), rel=1e-7)

    def test_the_error_at_the_sample_to_r(self):
        b = rc_study(Spread({"r": "1%"}), units=20).budget(
            segment=0, quantity="error_at_sample", tolerance=HALF_LSB_16, sample_delay="3m")
        tau = 10e3 * 100e-9
        error = 5.0 * math.exp(-3e-3 / tau)
        assert b.estimate == pytest.approx(error, rel=1e-12)
        assert b.rows[0].sensitivity == pytest.approx(error * 3e-3 / (10e3 ** 2 * 100e-9), rel=1e-7)

    def test_a_settle_time_past_a_short_segment_is_still_budgeted(self):
        # Steps of 10 ms are shorter than the 11.8 ms half an LSB needs (common practice:
        # (N + 1) ln 2 tau): the budget is of the time each unit needs, as delay_for gives it.
        fx = fo.Fixture.rc("10k", "100n")
        study = fx.study(fo.Drive([0, "10m"], end="20m", vin=[5.0, 0.0]), Spread({"r": "1%", "c": "1%"}),
                         units=200, seed=3)
        b = study.budget(segment=0, quantity="settle_time", tolerance=HALF_LSB_16)
        step_over_limit = 2.0 ** 17
        assert b.estimate == pytest.approx(1e-3 * math.log(step_over_limit), rel=1e-12)
        assert {row.key: row for row in b.rows}["c"].sensitivity == pytest.approx(
            10e3 * math.log(step_over_limit), rel=1e-7)
        assert math.isfinite(b.combined) and b.combined > 0


class TestCoverageInterval:
    def test_the_symmetric_interval_of_normal_quantiles_is_plus_minus_1_96(self):
        from scipy.stats import norm

        # Reference: scipy.stats.norm, the values at the mid-ranks of 100,000 units.
        count = 100_000
        values = norm.ppf((np.arange(count) + 0.5) / count)
        low, high = coverage_interval(values, 0.95)
        assert low == pytest.approx(-1.959964, abs=1e-3) and high == pytest.approx(1.959964, abs=1e-3)
        assert coverage_interval(values, 0.95, "shortest") == pytest.approx((low, high), abs=1e-3)

    def test_the_shortest_interval_of_a_skewed_sample_is_shorter(self):
        values = np.random.default_rng(3).exponential(size=20_000)
        symmetric = coverage_interval(values, 0.95)
        shortest = coverage_interval(values, 0.95, "shortest")
        assert shortest[1] - shortest[0] < symmetric[1] - symmetric[0]
        assert shortest[0] == values.min()  # the exponential's shortest interval starts at its mode, 0

    def test_the_numerical_tolerance_is_half_the_last_of_two_digits(self):
        # JCGM 101 7.9.2 (from memory): u = 0.000 63 written with two digits is 63 x 10^-5, so the
        # tolerance is 0.5 x 10^-5.
        assert numerical_tolerance(0.00063) == pytest.approx(0.5e-5)
        assert numerical_tolerance(12.0) == pytest.approx(0.5)


@pytest.fixture(scope="module")
def small_study():
    return rc_study(Spread({"r": "1%", "c": "1%"}), units=50)


class TestBudgetArguments:

    @pytest.mark.parametrize("kwargs, field", [
        ({"segment": 2}, "segment"), ({"segment": -1}, "segment"), ({"segment": True}, "segment"),
        ({"segment": 0, "quantity": "rise_time"}, "quantity"),
        ({"segment": 0, "quantity": "settle_time"}, "tolerance"),
        ({"segment": 0, "quantity": "error_at_sample"}, "tolerance"),
        ({"segment": 0, "quantity": "tau", "interval": "widest"}, "interval"),
        ({"segment": 0, "quantity": "tau", "probe": "v_out"}, "probe"),
        ({"segment": 0, "quantity": "final", "probe": "v_nope"}, "probe"),
    ])
    def test_bad_arguments_name_the_field(self, small_study, kwargs, field):
        with pytest.raises(InputError, match=field):
            small_study.budget(**kwargs)

    def test_the_displays(self, small_study):
        b = small_study.budget(segment=1, quantity="error_at_sample", tolerance=HALF_LSB_16, sample_delay="5m")
        table = b.table()
        assert list(table.index) == ["r", "c"]
        assert table.attrs["combined"] == b.combined
        assert "linear propagation holds" in str(b)
        html = b._repr_html_()
        assert "<table" in html and "±" in html and "<script" not in html

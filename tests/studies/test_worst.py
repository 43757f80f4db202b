"""Tests for firstorder.studies.worst: the worst case against every corner built by hand,
against scipy.optimize.differential_evolution where a part's influence turns back inside its
band, the ±3 sd box of an untruncated normal, and bad arguments."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

import firstorder as fo
from firstorder.errors import InputError
from firstorder.studies import Normal, Spread, Uniform

HALF_LSB_16 = fo.Tolerance.lsb(bits=16, span=5.0)


def by_hand(fixture, drive, tolerance, sample_delay=None, probe=None, gain=0.0, **values):
    """One unit built by hand: its fixture, its drive, respond and the settling table."""
    unit_drive = drive if not gain else drive.replace(vin=drive.levels("vin") * (1.0 + gain))
    return fixture.with_values(**values).respond(unit_drive, 0.0).settling(
        tolerance, sample_delay=sample_delay, probe=probe)


class TestAgainstEveryCornerByHand:
    def test_a_monotonic_rc_is_worst_at_a_corner(self):
        fx = fo.Fixture.rc("10k", "100n")
        fx.probe("i_r", through="r")
        drive = fo.Drive([0, "15m", "30m"], end="45m", vin=[5.0, 1.0, 3.0])
        spread = Spread({"r": "1%", "c": Uniform("-10%", "+20%"), "vin.gain": "0.5%"})
        table = fx.worst_case(drive, spread, HALF_LSB_16, sample_delay="9m")
        # Reference: every corner (2^3) built by hand, respond + settling.
        corners = list(itertools.product((9.9e3, 10.1e3), (90e-9, 120e-9), (-0.005, 0.005)))
        tables = [by_hand(fx, drive, HALF_LSB_16, "9m", gain=g, r=r, c=c) for r, c, g in corners]
        settle = np.array([t["settle_time"].to_numpy() for t in tables])
        error = np.array([t["error_at_sample"].to_numpy() for t in tables])
        np.testing.assert_allclose(table["settle_time"], settle.max(axis=0), rtol=1e-13)
        np.testing.assert_allclose(table["error_at_sample"], error.max(axis=0), rtol=1e-13)
        for s in range(len(drive)):
            r, c, g = corners[int(np.argmax(settle[:, s]))]
            assert (table.loc[s, "r (settle_time)"], table.loc[s, "c (settle_time)"],
                    table.loc[s, "vin.gain (settle_time)"]) == (r, c, g)
        assert (table["searched (settle_time)"] == "").all() and (table["searched (error_at_sample)"] == "").all()
        assert table.attrs["corners"] == 8 and table.attrs["normal_at_3_sd"] == []

    def test_a_probe_and_a_temperature_corner(self):
        fx = fo.Fixture.rc("10k", "100n")
        fx.probe("i_r", through="r")
        drive = fo.Drive([0, "15m"], end="30m", vin=[5.0, 0.0])
        spread = Spread({"r": "1%", "c": "5%"}, temperature=(0, 50), tempco={"c": "-750ppm"})
        tolerance = fo.Tolerance.absolute("1u", unit="A")
        table = fx.worst_case(drive, spread, tolerance, probe="i_r")
        worst = []
        for r, c, t in itertools.product((9.9e3, 10.1e3), (95e-9, 105e-9), (0.0, 50.0)):
            worst.append(by_hand(fx, drive, tolerance, probe="i_r", r=r, c=c * (1 - 750e-6 * (t - 25.0)))
                         ["settle_time"].to_numpy())
        np.testing.assert_allclose(table["settle_time"], np.max(worst, axis=0), rtol=1e-13)
        assert (table["temperature (settle_time)"] == 0.0).all()  # the negative tempco: c largest when cold


class TestNeverSettling:
    def test_of_the_units_that_do_not_settle_the_worst_is_furthest_from_it(self):
        fx = fo.Fixture.rc("10k", "100n")
        drive = fo.Drive([0, "2m"], end="40m", vin=[5.0, 0.0])  # 2 tau: no unit settles to half an LSB
        table = fx.worst_case(drive, Spread({"r": "1%", "c": "10%"}), HALF_LSB_16)
        assert math.isnan(table.loc[0, "settle_time"])
        # The slowest unit (both parts at their tops) is left furthest from its final value.
        assert table.loc[0, "r (settle_time)"] == pytest.approx(10.1e3, rel=1e-15)
        assert table.loc[0, "c (settle_time)"] == pytest.approx(110e-9, rel=1e-15)
        assert table.loc[1, "settle_time"] > 0


def shunted_divider() -> fo.Fixture:
    """vin -> r -> out, rs (1 kΩ) and c (1 µF) from out to ground, stepped 0 -> 1 V.

    With u = r / (r + rs):  final F = V (1 - u),  tau = C rs u.
    Settle time to an absolute limit L:  T(u) = C rs u ln(V (1 - u) / L), which is 0 at
    u = 0 and falls again as F approaches L: dT/du = C rs (ln(V (1 - u) / L) - u / (1 - u))
    vanishes inside (0, 1) -- for V / L = 1000 near u = 0.83, r about 4.9 rs.
    Error at a sample after d:  E(u) = V (1 - u) exp(-a / u) with a = d / (C rs);
    dE/du = 0 gives a (1 - u) = u^2: for a = 3, u = (sqrt(21) - 3) / 2 = 0.791, r about 3.8 rs.
    Both inside r's band 1 kΩ .. 100 kΩ, whose corners give less.
    """
    fx = fo.Fixture()
    fx.voltage_source("vin", "in", "gnd")
    fx.resistor("r", "in", "out", "10k")
    fx.resistor("rs", "out", "gnd", "1k")
    fx.capacitor("c", "out", "gnd", "1u")
    return fx


class TestAnInfluenceThatTurnsBack:
    SPREAD = Spread({"r": Uniform("1k", "100k"), "rs": "1%", "c": "1%"})
    DRIVE = fo.Drive([0], end="50m", vin=[1.0])
    LIMIT = fo.Tolerance.absolute("1m")

    @pytest.fixture(scope="class")
    @classmethod
    def table(cls):
        return shunted_divider().worst_case(cls.DRIVE, cls.SPREAD, cls.LIMIT, sample_delay="3.03m")

    def _objective(self, column, sample_delay):
        fx = shunted_divider()

        def negative(x):
            table = by_hand(fx, self.DRIVE, self.LIMIT, sample_delay, r=x[0], rs=x[1], c=x[2])
            return -float(table[column].iloc[0])
        return negative

    @pytest.mark.parametrize("column", ["settle_time", "error_at_sample"])
    def test_against_differential_evolution(self, table, column):
        from scipy.optimize import differential_evolution

        # Reference: scipy.optimize.differential_evolution over the whole box, each point a
        # unit built by hand.
        found = differential_evolution(self._objective(column, "3.03m"), [(1e3, 100e3), (990, 1010), (0.99e-6, 1.01e-6)],
                                       seed=4, tol=1e-12, maxiter=200, polish=True)
        assert table.loc[0, column] == pytest.approx(-found.fun, rel=1e-7)
        assert table.loc[0, column] >= -found.fun * (1 - 1e-9)
        assert table.loc[0, f"searched ({column})"] == "r"

    def test_the_worst_is_inside_the_band_where_the_maths_puts_it(self, table):
        from scipy.optimize import brentq

        v_over_l = 1.0 / 1e-3
        u_settle = brentq(lambda u: math.log(v_over_l * (1 - u)) - u / (1 - u), 0.5, 0.99)
        rs = table.loc[0, "rs (settle_time)"]
        assert rs == pytest.approx(1010.0, rel=1e-15)  # rs and c both raise T: their tops
        assert table.loc[0, "c (settle_time)"] == pytest.approx(1.01e-6, rel=1e-15)
        assert table.loc[0, "r (settle_time)"] == pytest.approx(rs * u_settle / (1 - u_settle), rel=1e-4)
        # The error: with a = d / (C rs), dE/du = 0 gives a (1 - u) = u^2.
        rs, c = table.loc[0, "rs (error_at_sample)"], table.loc[0, "c (error_at_sample)"]
        a = 3.03e-3 / (c * rs)
        u_error = (math.sqrt(a * a + 4.0 * a) - a) / 2.0
        assert table.loc[0, "r (error_at_sample)"] == pytest.approx(rs * u_error / (1 - u_error), rel=1e-4)

    def test_the_worst_reported_is_that_unit_by_hand(self, table):
        values = {k: table.loc[0, f"{k} (settle_time)"] for k in ("r", "rs", "c")}
        by = by_hand(shunted_divider(), self.DRIVE, self.LIMIT, "3.03m", **values)
        assert by["settle_time"].iloc[0] == table.loc[0, "settle_time"]

    def test_more_than_every_corner(self, table):
        corners = [by_hand(shunted_divider(), self.DRIVE, self.LIMIT, "3.03m", r=r, rs=rs, c=c)
                   for r, rs, c in itertools.product((1e3, 100e3), (990, 1010), (0.99e-6, 1.01e-6))]
        assert table.loc[0, "settle_time"] > 1.3 * max(t["settle_time"].iloc[0] for t in corners)


class TestTheBox:
    def test_an_untruncated_normal_is_bounded_at_3_sd_and_says_so(self):
        fx = fo.Fixture.rc("10k", "100n")
        drive = fo.Drive([0], end="20m", vin=[5.0])
        table = fx.worst_case(drive, Spread({"r": Normal("1%"), "c": Normal("2%", within="4%")}), HALF_LSB_16)
        assert table.attrs["normal_at_3_sd"] == ["r"]
        assert table.attrs["box"]["r"] == pytest.approx((9.7e3, 10.3e3), rel=1e-12)
        assert table.attrs["box"]["c"] == pytest.approx((96e-9, 104e-9), rel=1e-12)
        assert table.loc[0, "r (settle_time)"] == pytest.approx(10.3e3, rel=1e-12)

    @pytest.mark.parametrize("make, field", [
        (lambda fx, d: fx.worst_case(d, Spread({"r": Normal("40%")}), HALF_LSB_16), "spread r"),
        (lambda fx, d: fx.worst_case(d, Spread({"r": "1%"}), "half an lsb"), "tolerance"),
        (lambda fx, d: fx.worst_case("drive", Spread({"r": "1%"}), HALF_LSB_16), "drive"),
        (lambda fx, d: fx.worst_case(d, {"r": "1%"}, HALF_LSB_16), "spread"),
        (lambda fx, d: fx.worst_case(d, Spread({"r": "1%"}), HALF_LSB_16, sample_delay="-1m"), "sample_delay"),
        (lambda fx, d: fx.worst_case(d, Spread({"r": "1%"}), HALF_LSB_16, probe="nope"), "probe"),
    ])
    def test_bad_arguments_name_the_field(self, make, field):
        fx = fo.Fixture.rc("10k", "100n")
        with pytest.raises(InputError, match=field):
            make(fx, fo.Drive([0], end="20m", vin=[5.0]))

    def test_more_than_2_to_the_16_corners_is_refused(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "a0", "gnd")
        for k in range(17):
            fx.resistor(f"r{k}", f"a{k}", f"a{k + 1}", "1k")
        fx.capacitor("c", "a17", "gnd", "1u")
        spread = Spread({f"r{k}": "1%" for k in range(17)})
        with pytest.raises(InputError, match=r"spread: 17 varied quantities make 2\^17 corners"):
            fx.worst_case(fo.Drive([0], end="20m", vin=[1.0]), spread, HALF_LSB_16)


@pytest.mark.parametrize("probe, initial", [(None, 0.25), ("v_b", "periodic")])
def test_every_corner_of_the_batch_is_its_unit_built_by_hand(probe, initial):
    """The corners run as one batched lot (Segments.of_lot); each must be, bit for bit, the
    unit built by hand (its fixture and drive, respond, settling)."""
    from builders import general_drive, general_fixture
    from firstorder.studies.budget import unit_draw
    from firstorder.studies.lot import Lot
    from firstorder.studies.worst import _Runner, box

    fx, drive = general_fixture(), general_drive()
    spread = Spread({"rs": "1%", "ch": Normal("3%", within="9%"), "k1.r_on": Uniform("50m", "300m"),
                     "vdac.gain": "0.05%"}, temperature=(0, 50), tempco={"ch": "-750ppm"})
    lot = Lot(fx, spread, 0)
    keys, lows, highs, _ = box(lot)
    bits = (np.arange(2 ** len(keys))[:, None] >> np.arange(len(keys))[None, :]) & 1
    corners = np.where(bits == 1, highs, lows)
    tolerance, delays = fo.Tolerance.absolute("1m"), 0.6 * drive.durations
    settle, error, limit = _Runner(fx, drive, lot, tolerance, delays, probe, initial).run(corners)
    for k, corner in enumerate(corners):
        draw = unit_draw(lot, corner)
        table = lot.unit_fixture(draw, 0).respond(lot.unit_drive(drive, draw, 0), initial).settling(
            tolerance, sample_delay=delays, probe=probe)
        assert np.array_equal(settle[k], np.where(np.isnan(table["settle_time"]), np.inf, table["settle_time"])), k
        assert np.array_equal(error[k], table["error_at_sample"].to_numpy()), k
        assert np.array_equal(limit[k], table["tolerance"].to_numpy()), k

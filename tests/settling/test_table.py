"""Tests for firstorder.settling.table: settle times, residuals and sample errors against
brute force on dense grids, scipy's solve_ivp event crossings and closed forms of the trade."""

from __future__ import annotations

import math

import numpy as np
import pytest
from builders import switched_fixture

import firstorder as fo
from firstorder.errors import InputError
from firstorder.settling import SAMPLE_COLUMNS, TABLE_COLUMNS, settling_table
from firstorder.settling.table import constant_probe, sample_delays, table_summary

GRID = 4001  # points per segment in the brute-force searches


# -- helpers --------------------------------------------------------------------------------

def random_rc_drive(rng: np.random.Generator, count: int, tau: float) -> fo.Drive:
    durations = tau * rng.uniform(0.3, 12.0, count)
    times = np.concatenate([[0.0], np.cumsum(durations)[:-1]])
    return fo.Drive(times, float(np.sum(durations)), vin=rng.uniform(-5.0, 5.0, count))


def brute_force_settle(t: np.ndarray, error: np.ndarray, tolerance: float) -> float:
    """First grid time from which the error stays within tolerance (NaN if never)."""
    outside = np.flatnonzero(error > tolerance)
    if outside.size == 0:
        return float(t[0])
    if outside[-1] == t.size - 1:
        return math.nan
    return float(t[outside[-1] + 1])


def check_against_grid(res, table, values_of, tolerance_limit_column="tolerance"):
    """Compare settle_time and residual_at_end with a dense grid of the watched quantity."""
    checked = 0
    for k, row in table.iterrows():
        start, end = row["start"], row["end"]
        grid = np.linspace(start, end, GRID)
        # Probes may jump at a change: stay strictly inside the segment, then add the left limit.
        inside = grid[:-1] if k < len(table) - 1 else grid
        values = values_of(inside)
        error = np.abs(values - row["final"])
        spacing = grid[1] - grid[0]
        found = brute_force_settle(inside, error, row[tolerance_limit_column])
        closed = row["settle_time"]
        if math.isnan(closed):
            # The segment ends first: the residual at its end is above the limit.
            assert row["residual_at_end"] > row["tolerance"]
            if not math.isnan(found):
                # Only possible when the crossing falls within the last grid step.
                assert end - found <= spacing * 1.0001
        else:
            assert row["residual_at_end"] <= row["tolerance"]
            if math.isnan(found):
                assert end - (start + closed) <= spacing * 1.0001
            else:
                # The grid finds the first grid point at or after the crossing.
                assert start + closed <= found + 1e-12 * max(1.0, abs(found))
                assert found - (start + closed) <= spacing * 1.0001
        checked += 1
    return checked


# -- Tolerance --------------------------------------------------------------------------------

class TestSettlingTable:
    def test_columns_are_exactly_the_documented_ones(self):
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "3m"], end="8m", vin=[1.0, -1.0]))
        tolerance = fo.Tolerance.absolute("1m")
        assert tuple(res.settling(tolerance).columns) == (
            "start", "end", "start_value", "final", "tolerance", "settle_time", "settled", "residual_at_end", "hold")
        with_samples = res.settling(tolerance, sample_delay="2m")
        assert tuple(with_samples.columns) == TABLE_COLUMNS + SAMPLE_COLUMNS
        assert tuple(SAMPLE_COLUMNS) == ("sample_time", "value_at_sample", "error_at_sample", "ok")
        assert with_samples["settled"].dtype == bool and with_samples["ok"].dtype == bool

    @pytest.mark.parametrize("bits", [8, 12, 16, 20])
    def test_half_lsb_after_full_span_step_takes_n_plus_one_ln2_time_constants(self, bits):
        # Common practice in converter-driver design (from memory): a full-span step settles
        # to half an LSB of an N-bit converter in (N + 1) ln 2 time constants.
        tau = 2.2e-6
        fx = fo.Fixture.rc(r="2.2k", c="1n")
        res = fx.respond(fo.Drive.steps([(0, 4.096)], end=40 * tau))
        table = res.settling(fo.Tolerance.lsb(bits=bits, span=4.096))
        assert table.loc[0, "settle_time"] == pytest.approx((bits + 1) * math.log(2) * tau, rel=1e-12)

    def test_relative_one_percent_takes_ln100_time_constants(self):
        # Common practice: 1 % settling takes ln(100) = 4.61 time constants, whatever the step.
        fx = fo.Fixture.rc(r="10k", c="100n")  # tau = 1 ms
        res = fx.respond(fo.Drive([0, "10m", "20m"], end="30m", vin=[3.0, -7.0, -6.5]), initial=1.0)
        table = res.settling(fo.Tolerance.relative(0.01))
        assert table["settle_time"].to_numpy() / 1e-3 == pytest.approx([4.61] * 3, abs=0.005)
        assert table["settle_time"].to_numpy() == pytest.approx([math.log(100) * 1e-3] * 3, rel=1e-12)
        # The limit is 1 % of each segment's own step |final - start value|.
        steps = np.abs(table["final"] - table["start_value"]).to_numpy()
        assert table["tolerance"].to_numpy() == pytest.approx(0.01 * steps, rel=1e-12)

    def test_settle_time_matches_solve_ivp_crossing(self):
        # scipy.integrate.solve_ivp on C dv/dt = (vin - v)/R, with an event at |v - final| = tol,
        # finds the crossing independently of the closed form.
        from scipy.integrate import solve_ivp

        r, c, level, start_state, tol = 3.3e3, 47e-9, 2.5, -1.0, 1e-4
        fx = fo.Fixture.rc(r=r, c=c)
        res = fx.respond(fo.Drive.steps([(0, level)], end=30 * r * c), initial=start_state)
        closed = res.settling(fo.Tolerance.absolute(tol)).loc[0, "settle_time"]

        def crossing(t, v):
            return abs(v[0] - level) - tol

        crossing.terminal = True
        solution = solve_ivp(lambda t, v: (level - v) / (r * c), (0, 30 * r * c), [start_state],
                             events=crossing, rtol=1e-11, atol=1e-14)
        assert closed == pytest.approx(solution.t_events[0][0], rel=1e-6)

    @pytest.mark.parametrize("seed", range(4))
    def test_settle_time_and_residual_against_dense_grid_search(self, seed):
        # Brute force: search a dense grid of total(t) for the first instant from which the
        # error stays within the limit; it must bracket the closed form within one grid step.
        rng = np.random.default_rng(seed)
        tau = float(rng.uniform(1e-6, 1e-3))
        fx = fo.Fixture.rc(r=tau / 1e-7, c=1e-7)
        res = fx.respond(random_rc_drive(rng, 12, tau), initial=float(rng.uniform(-5, 5)))
        tolerance = fo.Tolerance.absolute(float(rng.choice([1e-3, 1e-2, 0.2])))
        table = res.settling(tolerance)
        assert check_against_grid(res, table, res.total) == 12
        # Some segments end first (NaN) and some settle, so both branches were checked.
        assert table["settled"].any() or seed != 0
        # residual_at_end is |total(end) - final|.
        assert table["residual_at_end"].to_numpy() == pytest.approx(
            np.abs(res.total(table["end"].to_numpy()) - table["final"].to_numpy()), rel=1e-9, abs=1e-13)

    def test_unsettled_segments_give_nan_and_a_residual(self):
        fx = fo.Fixture.rc(r="1k", c="1u")  # tau = 1 ms
        res = fx.respond(fo.Drive([0, "2m"], end="20m", vin=[5.0, 0.0]))
        table = res.settling(fo.Tolerance.absolute("1m"))
        assert math.isnan(table.loc[0, "settle_time"]) and not table.loc[0, "settled"]
        # After two time constants 13.5 % of the step is left (common practice: e^-2 = 0.135).
        assert table.loc[0, "residual_at_end"] == pytest.approx(5.0 * 0.1353352832, rel=1e-9)
        assert table.loc[1, "settled"]

    def test_switches_and_a_held_segment_against_dense_grid(self):
        fx = switched_fixture()
        drive = fo.Drive([0, "0.3m", "0.5m", "2m", "2.2m"], end="4m",
                         vdac=[2.0, 4.0, -1.0, -1.0, 3.0], k1=[1, 1, 0, 1, 1])
        res = fx.respond(drive, initial=0.5)
        table = res.settling(fo.Tolerance.absolute("5m"))
        assert check_against_grid(res, table, res.total) == 5
        # The open relay holds the capacitor: tau = inf, nothing moves, settled at 0.
        assert math.isinf(res.tau[2])
        assert table.loc[2, "settle_time"] == 0.0 and table.loc[2, "settled"]
        assert table.loc[2, "residual_at_end"] == 0.0

    def test_probe_settles_with_the_state_tau_and_a_scaled_error(self):
        fx = switched_fixture()
        drive = fo.Drive([0, "0.6m", "1.4m", "1.6m"], end="3m", vdac=[2.0, 4.0, 0.5, 0.5], k1=[1, 1, 1, 0])
        res = fx.respond(drive, initial=-1.0)
        tolerance = fo.Tolerance.absolute("2m")
        for probe, unit_tolerance in (("v_a", tolerance), ("i_rs", fo.Tolerance.absolute("2u", unit="A"))):
            table = res.settling(unit_tolerance, probe=probe)
            # Brute force on a dense grid of the probe itself.
            assert check_against_grid(res, table, lambda t, p=probe: res.probe(p, t)) == 4
            # start_value is the probe just after the change (probes jump at changes).
            after, before = res.probe_boundary(probe)
            assert table["start_value"].to_numpy() == pytest.approx(after, rel=1e-12, abs=1e-15)
            # The same tau and a scaled error: the probe c*x + offset meets tol exactly when the
            # state meets tol / |c| (c, the probe's coefficient of the state, is one number while
            # the relay stays closed).
            rows = res.segments.probe_rows(probe)
            scale = abs(rows[0, 0])
            assert np.allclose(np.abs(rows[:3, 0]), scale)
            state = res.settling(fo.Tolerance.absolute(unit_tolerance.value / scale))
            compared = 0
            for k in range(3):
                if table.loc[k, "settled"]:
                    assert table.loc[k, "settle_time"] == pytest.approx(state.loc[k, "settle_time"], rel=1e-9)
                    compared += 1
            assert compared == 2  # segments 0 and 1 settle; segment 2 ends first
            assert not table.loc[2, "settled"]
            # The open relay (segment 3) leaves node a on the 1k/4k divider alone: c = 0, no step
            # at all (handbook divider: 0.5 V x 4k / 5k = 0.4 V, 0.5 V / 5k = 100 µA).
            assert table.loc[3, "start_value"] == table.loc[3, "final"] == pytest.approx(
                0.4 if probe == "v_a" else 1e-4)

    def test_error_at_sample_equals_distance_of_total_from_final(self):
        rng = np.random.default_rng(7)
        fx = fo.Fixture.rc(r="4.7k", c="10n")
        drive = random_rc_drive(rng, 20, 47e-6)
        res = fx.respond(drive, initial="settled")
        delays = drive.durations * rng.uniform(0.0, 0.999, 20)
        table = res.settling(fo.Tolerance.lsb(bits=10, span=10.0), sample_delay=delays)
        # error_at_sample is |total(sample_time) - final|, total evaluated by the engine.
        sample_times = drive.times + delays
        assert table["sample_time"].to_numpy() == pytest.approx(sample_times, rel=1e-15)
        expected = np.abs(res.total(sample_times) - table["final"].to_numpy())
        assert table["error_at_sample"].to_numpy() == pytest.approx(expected, rel=1e-8, abs=1e-12)
        assert table["value_at_sample"].to_numpy() == pytest.approx(res.total(sample_times), rel=1e-9, abs=1e-12)
        assert (table["ok"] == (table["error_at_sample"] <= table["tolerance"])).all()
        assert not table["ok"].all() and table["ok"].any()

    def test_scalar_delay_and_delay_at_the_very_end(self):
        fx = switched_fixture()
        drive = fo.Drive([0, "1m"], end="2m", vdac=[1.0, 3.0], k1=[1, 1])
        res = fx.respond(drive)
        table = res.settling(fo.Tolerance.absolute("1m"), sample_delay="1m", probe="v_a")
        # A delay equal to the segment's length samples just before the next change: the
        # probe's left limit, not its value after the jump.
        _, before = res.probe_boundary("v_a")
        assert table["value_at_sample"].to_numpy() == pytest.approx(before, rel=1e-12)

    def test_dwells_as_delays_survive_the_rounding_of_instants(self):
        # Instants built by summing dwells can make a duration an ulp shorter than its dwell;
        # such a delay is the segment's end, while a real overshoot is still refused.
        dwells = np.full(40, 0.1)
        times = np.concatenate([[0.0], np.cumsum(dwells)[:-1]])
        drive = fo.Drive(times, float(np.sum(dwells)), vin=np.resize([1.0, -1.0], 40))
        assert (drive.durations < dwells).any()
        res = fo.Fixture.rc(r="1k", c="1u").respond(drive)
        table = res.settling(fo.Tolerance.absolute("1m"), sample_delay=dwells)
        assert table["sample_time"].to_numpy() == pytest.approx(drive.ends, rel=1e-15)
        with pytest.raises(InputError, match="segment 0"):
            res.settling(fo.Tolerance.absolute("1m"), sample_delay=dwells * (1 + 1e-12))

    @pytest.mark.parametrize("delay, message", [
        (-1e-6, "segment 0"),
        ("inf", "segment 0"),
        ([0.0, "1.5m"], "segment 1"),
        ([0.0, math.nan], "segment 1"),
        ([math.inf, 0.0], "segment 0"),
        ([0.0, 0.0, 0.0], "one per segment"),
        (True, "sample_delay"),
        ("soon", "sample_delay"),
    ])
    def test_bad_delays_are_rejected_naming_the_segment(self, delay, message):
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "1m"], end="2m", vin=[1.0, 0.0]))
        with pytest.raises(ValueError, match=message):
            res.settling(fo.Tolerance.absolute("1m"), sample_delay=delay)

    def test_one_delay_past_a_short_dwell_samples_it_at_its_end(self):
        # One delay for every segment: the 1 ms segment is read at its end, the 3 ms one after
        # 2 ms; the value there is the handbook step response 1 - exp(-t/RC) (common practice).
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "1m"], end="4m", vin=[1.0, 0.0]))
        table = res.settling(fo.Tolerance.absolute("1m"), sample_delay="2m")
        np.testing.assert_allclose(table["sample_time"].to_numpy(), [1e-3, 3e-3], rtol=1e-15)
        v1 = 1.0 - math.exp(-1.0)
        np.testing.assert_allclose(table["value_at_sample"].to_numpy(), [v1, v1 * math.exp(-2.0)], rtol=1e-12)

    def test_unknown_probe_is_rejected(self):
        res = switched_fixture().respond(fo.Drive([0], end="1m", vdac=[1.0], k1=[1]))
        with pytest.raises(InputError, match="probe: 'v_x'"):
            res.settling(fo.Tolerance.absolute("1m"), probe="v_x")

    def test_tolerance_in_the_wrong_unit_is_rejected(self):
        res = fo.Fixture.rl(r="10", l="1m").respond(fo.Drive.steps([(0, 1.0)], end="1m"))
        with pytest.raises(InputError, match="unit='A'"):
            res.settling(fo.Tolerance.absolute("1m"))
        table = res.settling(fo.Tolerance.absolute("1m", unit="A"))
        # Inductor current heads for 1 V / 10 Ω = 100 mA with tau = L/R = 100 µs.
        assert table.loc[0, "final"] == pytest.approx(0.1)
        assert table.loc[0, "settle_time"] == pytest.approx(1e-4 * math.log(0.1 / 1e-3), rel=1e-12)
        # A relative tolerance has no unit and fits either.
        assert res.settling(fo.Tolerance.relative(0.01)).loc[0, "settled"]

    def test_not_a_tolerance(self):
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive.steps([(0, 1.0)], end="1m"))
        with pytest.raises(InputError, match="tolerance"):
            res.settling(1e-3)

    def test_int_and_float_levels_agree(self):
        fx = fo.Fixture.rc(r="1k", c="1u")
        ints = fx.respond(fo.Drive([0, 1], end=2, vin=[1, 0])).settling(fo.Tolerance.absolute(1e-3))
        floats = fx.respond(fo.Drive([0.0, 1.0], end=2.0, vin=[1.0, 0.0])).settling(fo.Tolerance.absolute(1e-3))
        assert ints.equals(floats)

    def test_function_and_method_agree(self):
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "1m"], end="9m", vin=[1.0, 0.0]))
        tolerance = fo.Tolerance.ppm(100, 5.0)
        assert settling_table(res, tolerance, "0.5m").equals(res.settling(tolerance, sample_delay="0.5m"))


# -- Response.summary ---------------------------------------------------------------------------------

def relay_cut_fixture() -> fo.Fixture:
    """A source, a capacitor behind 52 GΩ, and a relay k1 that cuts off a far side (n5, n6) whose
    parts span 22 mΩ to 490 GΩ (values drawn at random once; an invented scenario)."""
    fx = fo.Fixture()
    fx.voltage_source("v1", "n1", "gnd")
    for name, a, b, value in [
        ("r0", "n1", "n2", 52223527736.692444), ("r1", "n2", "n3", 1.052350427728936),
        ("r2", "n3", "n4", 491606330515.90155), ("r3", "n5", "n6", 96.36915496854003),
        ("r4", "n6", "gnd", 202607154906.23093), ("r5", "n1", "n6", 0.022097368480340544),
        ("r6", "n5", "n6", 18923026048.598892), ("r7", "n4", "n1", 119817.01431467895),
    ]:
        fx.resistor(name, a, b, value)
    fx.switch("k1", "n4", "n5")
    fx.capacitor("c", "n2", "gnd", 1e-6)
    # With k1 open, n5 hangs on n6 through r3 and r6 and nothing else: exactly 0 V between them.
    fx.probe("v_far", node="n6", reference="n5")
    return fx


class TestStructurallyConstant:
    def test_a_probe_the_structure_holds_still_settles_at_once(self):
        # The numeric rows leave 1e-60 of the state where the structure says 0; a relative
        # tolerance of that noise was never met ("never settles" in a 1000 s segment).
        fx = relay_cut_fixture()
        res = fx.respond(fo.Drive([0, 1e-3], end=1e3, v1=[1, 2], k1=[1, 0]))
        table = res.settling(fo.Tolerance.relative(1e-3), probe="v_far")
        assert table.loc[1, "settled"] and table.loc[1, "settle_time"] == 0.0
        assert table.loc[1, "final"] == table.loc[1, "start_value"] and table.loc[1, "tolerance"] == 0.0
        # The closed relay's segment is judged as before: it does move with the state.
        assert table.loc[0, "final"] != table.loc[0, "start_value"]

    def test_constant_probe_is_read_from_the_structure(self):
        fx = relay_cut_fixture()
        res = fx.respond(fo.Drive([0, 1e-3, 2e-3], end=3e-3, v1=[1, 2, 3], k1=[1, 0, 1]))
        assert constant_probe(res.segments, "v_far").tolist() == [False, True, False]
        # Any values of the same structure give the same answer (it never reads them).
        other = fx.with_values(r3="1", r6="1")
        assert constant_probe(other.respond(res.drive).segments, "v_far").tolist() == [False, True, False]

    def test_a_plan_for_such_a_probe_does_not_wait_for_noise(self):
        fx = relay_cut_fixture()
        table = fo.plan_table(fx, {"v1": [1.0, 2.0], "k1": [0, 0]}, fo.Tolerance.relative(1e-3), probe="v_far",
                              min_dwell="1u", initial=0.0)
        assert (table["dwell"] == 1e-6).all() and (table["limited_by"] == "min_dwell").all()


class TestSummary:
    def test_summary_agrees_with_the_table(self):
        rng = np.random.default_rng(3)
        fx = fo.Fixture.rc(r="1k", c="100n")
        drive = random_rc_drive(rng, 15, 1e-4)
        res = fx.respond(drive)
        tolerance = fo.Tolerance.absolute("20m")
        delays = drive.durations * 0.8
        summary = res.summary(tolerance, sample_delay=delays)
        table = res.settling(tolerance, sample_delay=delays)
        assert summary.segments == 15
        assert summary.unsettled == int((~table["settled"]).sum())
        assert summary.failing_samples == int((~table["ok"]).sum())
        margin = table["tolerance"] - table["error_at_sample"]
        assert summary.smallest_margin == pytest.approx(margin.min())
        assert summary.worst_segment == int(margin.idxmin())  # one absolute limit: ratio order = margin order
        assert summary.longest_settle_time == pytest.approx(table["settle_time"].max())
        assert summary.total_time == pytest.approx(drive.end)
        assert not summary.sampled_at_end

    def test_without_delay_the_samples_are_the_segment_ends(self):
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "2m"], end="20m", vin=[5.0, 0.0]))
        summary = res.summary(fo.Tolerance.absolute("1m"))
        assert summary.sampled_at_end and summary.unsettled == summary.failing_samples == 1
        assert summary.worst_segment == 0
        assert summary.worst_ratio == pytest.approx(5.0 * math.exp(-2.0) / 1e-3)

    def test_display(self):
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "20m"], end="40m", vin=[5.0, 0.0]))
        summary = res.summary(fo.Tolerance.lsb(bits=12, span=5.0))
        html = summary._repr_html_()
        assert "all samples within tolerance" in html and "<table" in html
        assert "total time: 40 ms" in str(summary)
        with pytest.raises(AttributeError):
            summary.segments = 3  # frozen

    def test_a_table_made_once_gives_the_same_summary(self):
        rng = np.random.default_rng(5)
        res = fo.Fixture.rc(r="1k", c="100n").respond(random_rc_drive(rng, 12, 1e-4))
        tolerance = fo.Tolerance.relative(0.01)
        for delays in (None, res.drive.durations * 0.5):
            table = res.settling(tolerance, sample_delay=delays)
            assert table_summary(table) == res.summary(tolerance, sample_delay=delays)

    def test_numeric_delays_read_as_the_same_list(self):
        durations = np.array([1e-3, 2e-3, 5e-4])
        given = np.array([2e-4, 2e-3, 1e-3])
        # The array path and the list path are one rule: the same delays, the same refusal.
        np.testing.assert_array_equal(sample_delays(given, durations, past_end="end"),
                                      sample_delays(given.tolist(), durations, past_end="end"))
        with pytest.raises(InputError, match=r"sample_delay\[2\]: 0.001 is past the end of segment 2"):
            sample_delays(given, durations)
        with pytest.raises(InputError, match="got 2 delays for 3 segments"):
            sample_delays(given[:2], durations)

    def test_nothing_settles(self):
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0], end="1m", vin=[5.0]))
        summary = res.summary(fo.Tolerance.absolute("1m"))
        assert summary.slowest_segment == -1 and math.isnan(summary.longest_settle_time)
        assert "none settles" in str(summary)


# -- plan_dwells / plan_table -------------------------------------------------------------------------


class TestHoldJudgedAsDroop:
    """A hold (source cut off by an open switch, a leak to ground) is judged by its droop."""

    R_S, R_LEAK, C = 1e3, 10e6, 10e-9
    V = 2.5

    def hold_fixture(self, r_off="inf"):
        return (fo.Fixture().voltage_source("vdac", "dac", "gnd").resistor("rs", "dac", "sw", self.R_S)
                .switch("k", "sw", "h", r_on="0.1", r_off=r_off).capacitor("ch", "h", "gnd", self.C)
                .resistor("r_leak", "h", "gnd", self.R_LEAK))

    def test_droop_of_an_rc_hold_is_the_handbook_decay(self):
        # Charge for 100 time constants (k closed), then hold for 2 ms through r_leak.
        drive = fo.Drive([0, "1m"], end="3m", vdac=[self.V, self.V], k=[1, 0])
        res = self.hold_fixture().respond(drive, initial=0.0)
        tolerance = fo.Tolerance.absolute("100u")
        table = res.settling(tolerance, sample_delay=[0.9e-3, 0.5e-3])
        assert table["hold"].tolist() == [False, True]
        # Handbook: a divider sets the held value, v0 = V R_leak / (R_leak + R_s); an RC holding
        # into R_leak decays as v0 exp(-t / (R_leak C)), so its droop is v0 (1 - exp(-t / (R_leak C))).
        tau_charge = self.C * (self.R_S + 0.1) * self.R_LEAK / (self.R_S + 0.1 + self.R_LEAK)
        v0 = self.V * self.R_LEAK / (self.R_LEAK + self.R_S + 0.1) * (1 - math.exp(-1e-3 / tau_charge))
        tau_hold = self.R_LEAK * self.C
        droop_at_sample = v0 * (1 - math.exp(-0.5e-3 / tau_hold))
        droop_at_end = v0 * (1 - math.exp(-2e-3 / tau_hold))
        assert table.loc[1, "start_value"] == pytest.approx(v0, rel=1e-12)
        assert table.loc[1, "error_at_sample"] == pytest.approx(droop_at_sample, rel=1e-9)
        assert table.loc[1, "residual_at_end"] == pytest.approx(droop_at_end, rel=1e-9)
        # 12.5 mV at the sample against 100 µV: the hold fails on its droop, not on a final of 0 V.
        assert not table.loc[1, "ok"] and not table.loc[1, "settled"] and math.isnan(table.loc[1, "settle_time"])
        loose = res.settling(fo.Tolerance.absolute("60m"), sample_delay=[0.9e-3, 0.5e-3])
        assert loose.loc[1, "ok"] and loose.loc[1, "settled"] and loose.loc[1, "settle_time"] == 0.0

    def test_a_leaky_relay_still_makes_a_hold(self):
        # r_off = 1 GΩ lets the source through a little: the gain with r_off removed is zero.
        drive = fo.Drive([0, "1m"], end="3m", vdac=[self.V, self.V], k=[1, 0])
        res = self.hold_fixture(r_off="1G").respond(drive, initial=0.0)
        table = res.settling(fo.Tolerance.absolute("100u"), sample_delay=[0.9e-3, 0.5e-3])
        assert table["hold"].tolist() == [False, True]
        # The droop is the distance the state moved from the held value, read off the response.
        moved = abs(float(res.total(np.array([1.5e-3]))[0]) - table.loc[1, "start_value"])
        assert table.loc[1, "error_at_sample"] == pytest.approx(moved, rel=1e-9)

    def test_a_relative_tolerance_of_a_hold_is_taken_of_the_held_value(self):
        drive = fo.Drive([0, "1m"], end="3m", vdac=[self.V, self.V], k=[1, 0])
        res = self.hold_fixture(r_off="1G").respond(drive, initial=0.0)  # the leak ends at 25 mV, not 0
        table = res.settling(fo.Tolerance.relative(0.01))
        assert abs(table.loc[1, "final"]) > 0.02
        assert table.loc[1, "tolerance"] == pytest.approx(0.01 * abs(table.loc[1, "start_value"]), rel=1e-12)

    def test_no_switch_or_a_source_in_reach_is_no_hold(self):
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "3m"], end="8m", vin=[1.0, 0.0]))
        assert not res.settling(fo.Tolerance.absolute("1m"))["hold"].any()
        drive = fo.Drive([0, "1m"], end="3m", vdac=[self.V, 0.0], k=[1, 1])
        assert not self.hold_fixture().respond(drive).settling(fo.Tolerance.absolute("1m"))["hold"].any()

    def test_the_demo_hold_passes_or_fails_on_its_droop(self):
        from firstorder.cli import demo_analysis

        table = demo_analysis().settling()
        assert table["hold"].tolist() == [False, False, False, False, True]
        row = table.loc[4]
        assert row["error_at_sample"] == pytest.approx(abs(row["value_at_sample"] - row["start_value"]), rel=1e-9)

"""Tests for firstorder.settling: tolerances, settling tables, summaries and dwell plans.

Outside references are named beside each check: facts of the trade (marked
"common practice", and "from memory" where they are), scipy.integrate.solve_ivp,
and brute-force searches on dense time grids of the response, which find the
answer by looking rather than by the closed form under test.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import firstorder as fo
from firstorder.errors import InputError
from firstorder.settling import SAMPLE_COLUMNS, TABLE_COLUMNS, settling_table

GRID = 4001  # points per segment in the brute-force searches


# -- helpers --------------------------------------------------------------------------------

def switched_fixture() -> fo.Fixture:
    """A DAC behind 1 kΩ, a relay with 10 Ω on, a 100 nF hold capacitor (scenario of our own).

    With k1 closed tau = 1.01 kΩ x 100 nF; with k1 open the capacitor holds (tau = inf).
    Probes: the node before the relay (jumps at changes) and the current in the 1 kΩ.
    """
    fx = fo.Fixture()
    fx.voltage_source("vdac", "drv", "gnd")
    fx.resistor("rs", "drv", "a", "1k")
    fx.resistor("rload", "a", "gnd", "4k")
    fx.switch("k1", "a", "b", r_on="10")
    fx.capacitor("ch", "b", "gnd", "100n")
    fx.probe("v_a", node="a")
    fx.probe("i_rs", through="rs")
    return fx


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

class TestTolerance:
    def test_engineering_notation(self):
        assert fo.Tolerance.absolute("38.1µ").limit(np.array([1.0]))[0] == pytest.approx(38.1e-6)
        assert fo.Tolerance.ppm("10", span="5 V").limit(np.array([1.0]))[0] == pytest.approx(50e-6)
        assert fo.Tolerance.lsb(bits=16, span="5V").value == pytest.approx(5.0 / 2**17)

    def test_readable_text(self):
        assert str(fo.Tolerance.lsb(bits=16, span=5.0)) == "±38.15 µV (½ LSB of 16 bits on 5 V)"
        assert repr(fo.Tolerance.relative(0.01)) == "Tolerance.relative(fraction=0.01)"

    @pytest.mark.parametrize("tolerance", [
        fo.Tolerance.absolute("1m"), fo.Tolerance.relative(0.02), fo.Tolerance.ppm(3, 10.0),
        fo.Tolerance.lsb(bits=18, span=4.096, fraction=0.25), fo.Tolerance.absolute(1e-3, unit="A"),
    ])
    def test_round_trip(self, tolerance):
        assert fo.Tolerance.from_dict(tolerance.to_dict()) == tolerance

    @pytest.mark.parametrize("build, field", [
        (lambda: fo.Tolerance.absolute(0), "tolerance.value"),
        (lambda: fo.Tolerance.absolute(-1e-3), "tolerance.value"),
        (lambda: fo.Tolerance.absolute("-1m"), "tolerance.value"),
        (lambda: fo.Tolerance.relative(0), "tolerance.fraction"),
        (lambda: fo.Tolerance.relative(-0.1), "tolerance.fraction"),
        (lambda: fo.Tolerance.relative(1.0), "tolerance.fraction"),
        (lambda: fo.Tolerance.ppm(0, 5.0), "tolerance.ppm"),
        (lambda: fo.Tolerance.ppm(-3, 5.0), "tolerance.ppm"),
        (lambda: fo.Tolerance.ppm(3, 0), "tolerance.span"),
        (lambda: fo.Tolerance.lsb(bits=0, span=5.0), "tolerance.bits"),
        (lambda: fo.Tolerance.lsb(bits=33, span=5.0), "tolerance.bits"),
        (lambda: fo.Tolerance.lsb(bits=12.5, span=5.0), "tolerance.bits"),
        (lambda: fo.Tolerance.lsb(bits=True, span=5.0), "tolerance.bits"),
        (lambda: fo.Tolerance.lsb(bits=16, span=0), "tolerance.span"),
        (lambda: fo.Tolerance.lsb(bits=16, span=-5.0), "tolerance.span"),
        (lambda: fo.Tolerance.lsb(bits=16, span=5.0, fraction=0), "tolerance.fraction"),
        (lambda: fo.Tolerance.lsb(bits=16, span=5.0, fraction=1.5), "tolerance.fraction"),
        (lambda: fo.Tolerance.lsb(bits=16, span=5.0, fraction=-0.5), "tolerance.fraction"),
    ])
    def test_bad_input_names_the_field(self, build, field):
        with pytest.raises(ValueError, match=field.replace(".", r"\.")):
            build()

    def test_bits_at_the_edges_are_allowed(self):
        assert fo.Tolerance.lsb(bits=1, span=1.0).value == 0.25
        assert fo.Tolerance.lsb(bits=32, span=1.0, fraction=1).value == 2.0**-32


# -- settling_table / Response.settling ----------------------------------------------------------

class TestSettlingTable:
    def test_columns_are_exactly_the_documented_ones(self):
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "3m"], end="8m", vin=[1.0, -1.0]))
        tolerance = fo.Tolerance.absolute("1m")
        assert tuple(res.settling(tolerance).columns) == (
            "start", "end", "start_value", "final", "tolerance", "settle_time", "settled", "residual_at_end")
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
        ("2m", "segment 0"),
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

    def test_nothing_settles(self):
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0], end="1m", vin=[5.0]))
        summary = res.summary(fo.Tolerance.absolute("1m"))
        assert summary.slowest_segment == -1 and math.isnan(summary.longest_settle_time)
        assert "none settles" in str(summary)


# -- plan_dwells / plan_table -------------------------------------------------------------------------

def sample_errors(fx, drive, delays, initial=0.0):
    """|total(sample) - final| for every step, evaluated by the engine (not the plan's formula)."""
    res = fx.respond(drive, initial=initial)
    # A sample at the very end of a segment: the state is continuous, so total() there is
    # exact; keep the last one inside the drive despite rounding of times + delays.
    times = np.minimum(drive.times + delays, drive.end)
    return np.abs(res.total(times) - res.final), res


class TestPlanDwells:
    def scanner(self) -> fo.Fixture:
        """Three channels with different source resistances behind a multiplexer (our own scenario)."""
        fx = fo.Fixture()
        for j, rs in enumerate(["100", "2.2k", "10k"]):
            fx.voltage_source(f"v{j}", f"s{j}", "gnd")
            fx.resistor(f"rs{j}", f"s{j}", f"m{j}", rs)
            fx.switch(f"k{j}", f"m{j}", "mux", r_on="50")
        fx.resistor("rf", "mux", "adc", "500")
        fx.capacitor("cf", "adc", "gnd", "10n")
        return fx

    @pytest.mark.parametrize("seed", range(3))
    def test_every_dwell_is_minimal_shortening_by_0_1_percent_fails(self, seed):
        rng = np.random.default_rng(seed)
        fx = fo.Fixture.rc(r="1k", c="10n")
        levels = rng.uniform(-5, 5, 8)
        tolerance = fo.Tolerance.lsb(bits=16, span=10.0)
        drive = fo.plan_dwells(fx, {"vin": levels}, tolerance)
        dwells = drive.durations
        # The planned samples (at the end of each dwell) pass, judged by the engine.
        errors, res = sample_errors(fx, drive, dwells)
        assert (errors <= tolerance.value).all()
        for k in range(len(dwells)):
            shorter = dwells.copy()
            shorter[k] *= 0.999
            times = np.concatenate([[0.0], np.cumsum(shorter)[:-1]])
            trial = fo.Drive(times, float(np.sum(shorter)), vin=levels)
            errors, _ = sample_errors(fx, trial, shorter)
            assert errors[k] > tolerance.value, f"step {k} still passes with a 0.1 % shorter dwell"

    def test_min_dwell_and_sample_delay(self):
        fx = self.scanner()
        tolerance = fo.Tolerance.lsb(bits=14, span=5.0)
        levels = {"v0": [1.0, 1.0, 1.0, 1.0, 1.0, 1.0], "v1": [4.0] * 6, "v2": [-2.0] * 6,
                  "k0": [1, 0, 0, 1, 1, 0], "k1": [0, 1, 0, 0, 0, 1], "k2": [0, 0, 1, 0, 0, 0]}
        hold_after, shortest = 2e-6, 20e-6
        table = fo.plan_table(fx, levels, tolerance, min_dwell=shortest, sample_delay=hold_after)
        drive = fo.plan_dwells(fx, levels, tolerance, min_dwell=shortest, sample_delay=hold_after)
        assert drive.durations == pytest.approx(table["dwell"].to_numpy(), rel=1e-15)
        # Step 4 repeats step 3's channel: nothing to settle, so min_dwell rules it.
        assert table.loc[4, "limited_by"] == "min_dwell"
        assert table.loc[4, "dwell"] == pytest.approx(shortest, rel=1e-12)
        assert (table["dwell"] >= shortest * (1 - 1e-12)).all()
        # The samples sit sample_delay before each change and pass, judged by the engine.
        delays = table["sample_delay"].to_numpy()
        assert drive.durations - delays == pytest.approx(np.full(6, hold_after), rel=1e-9)
        errors, res = sample_errors(fx, drive, delays)
        assert (errors <= tolerance.value).all()
        assert res.settling(tolerance, sample_delay=delays)["ok"].all()
        for k in np.flatnonzero(table["limited_by"].to_numpy() == "settling"):
            shorter = drive.durations.copy()
            shorter[k] *= 0.999
            times = np.concatenate([[0.0], np.cumsum(shorter)[:-1]])
            trial = fo.Drive(times, float(np.sum(shorter)), **levels)
            errors, _ = sample_errors(fx, trial, shorter - hold_after)
            assert errors[k] > tolerance.value, f"step {k} still passes with a 0.1 % shorter dwell"

    def test_switch_columns_set_each_steps_tau(self):
        fx = self.scanner()
        levels = {"v0": [5.0, 5.0, 5.0], "v1": [0.0] * 3, "v2": [5.0] * 3,
                  "k0": [1, 0, 0], "k1": [0, 1, 0], "k2": [0, 0, 1]}
        tolerance = fo.Tolerance.absolute("1m")
        table = fo.plan_table(fx, levels, tolerance, initial=0.0)
        # Handbook series resistance: tau = (rs + r_on + rf) * cf for the selected channel.
        taus = [(100 + 50 + 500) * 10e-9, (2200 + 50 + 500) * 10e-9, (10e3 + 50 + 500) * 10e-9]
        steps = np.abs(table["final"] - table["start_value"]).to_numpy()
        assert table["settle_time"].to_numpy() == pytest.approx(
            [tau * math.log(step / 1e-3) for tau, step in zip(taus, steps)], rel=1e-6)
        assert steps[0] == pytest.approx(5.0) and steps[1] == pytest.approx(5.0, rel=1e-3)

    def test_full_span_steps_need_n_plus_one_ln2_each(self):
        # Common practice (from memory): (N + 1) ln 2 time constants per full-span step.
        fx = fo.Fixture.rc(r="1k", c="1n")
        drive = fo.plan_dwells(fx, {"vin": [0.0, 2.5, 0.0, 2.5]}, fo.Tolerance.lsb(bits=16, span=2.5),
                               initial=2.5)
        # Step 0 starts exactly a full span away; every later step starts where the one before
        # stopped, half an LSB short of its level and so half an LSB closer to the next one.
        half_lsb = 2.5 / 2**17
        assert drive.durations[0] == pytest.approx(17 * math.log(2) * 1e-6, rel=1e-7)
        later = 1e-6 * math.log((2.5 - half_lsb) / half_lsb)
        assert drive.durations[1:] == pytest.approx([later] * 3, rel=1e-7)

    def test_relative_tolerance_dwells_are_ln100_tau(self):
        # Common practice: 1 % settling takes ln(100) time constants.
        fx = fo.Fixture.rc(r="1k", c="1u")
        drive = fo.plan_dwells(fx, {"vin": [1.0, 3.0, -2.0]}, fo.Tolerance.relative(0.01), start="1m")
        assert drive.durations == pytest.approx([math.log(100) * 1e-3] * 3, rel=1e-7)
        assert drive.start == pytest.approx(1e-3)

    @pytest.mark.parametrize("hold_after", [0.0, 3e-6])
    def test_with_one_tau_lingering_never_shortens_the_plan(self, hold_after):
        # The optimality claim for a fixed tau: lengthen one dwell, re-plan the rest greedily from
        # the state it leaves, and the whole sequence is never shorter than the plan.
        rng = np.random.default_rng(11)
        fx = fo.Fixture.rc(r="1k", c="10n")
        tolerance = fo.Tolerance.absolute("1m")
        levels = rng.uniform(-5, 5, 6)
        delay = None if hold_after == 0 else hold_after
        best = fo.plan_dwells(fx, {"vin": levels}, tolerance, sample_delay=delay)
        best_total = best.end - best.start
        for k in range(len(levels) - 1):
            for factor in (1.01, 1.3, 3.0):
                dwells = best.durations[:k + 1].copy()
                dwells[k] *= factor
                head = fo.Drive(np.concatenate([[0.0], np.cumsum(dwells)[:-1]]), float(dwells.sum()),
                                vin=levels[:k + 1])
                state = float(fx.respond(head).boundary[-1])
                rest = fo.plan_dwells(fx, {"vin": levels[k + 1:]}, tolerance, initial=state, sample_delay=delay)
                assert head.end + (rest.end - rest.start) >= best_total * (1 - 1e-12)

    def test_when_tau_changes_lingering_can_help(self):
        # The limit stated in plan_dwells' notes, shown: a fast step (1 µs) followed by a slow
        # one (1 ms) just past its level.  Lingering 5 µs in the fast step brings the state
        # nearer to the slow step's level than the greedy plan leaves it, and saves more than
        # it costs.
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("r", "in", "out", "1M")
        fx.switch("k", "in", "out", r_on="1k")
        fx.capacitor("c", "out", "gnd", "1n")
        tolerance = fo.Tolerance.absolute("1m")
        levels = {"vin": [1.0, 1.01], "k": [1, 0]}
        greedy = fo.plan_dwells(fx, levels, tolerance)
        first = fo.Drive([0.0], greedy.durations[0] + 5e-6, vin=[1.0], k=[1])
        state = float(fx.respond(first).boundary[-1])
        rest = fo.plan_dwells(fx, {"vin": [1.01], "k": [0]}, tolerance, initial=state)
        assert first.end + (rest.end - rest.start) < (greedy.end - greedy.start) - 50e-6

    def test_plan_for_a_probe(self):
        fx = switched_fixture()
        levels = {"vdac": [1.0, 4.0, 4.0], "k1": [1, 1, 0]}
        tolerance = fo.Tolerance.absolute("1m")
        table = fo.plan_table(fx, levels, tolerance, probe="v_a", min_dwell="1u")
        drive = fo.plan_dwells(fx, levels, tolerance, probe="v_a", min_dwell="1u")
        res = fx.respond(drive)
        check = res.settling(tolerance, sample_delay=drive.durations, probe="v_a")
        assert check["ok"].all()
        assert check["start_value"].to_numpy() == pytest.approx(table["start_value"].to_numpy(), rel=1e-9)
        assert check["final"].to_numpy() == pytest.approx(table["final"].to_numpy(), rel=1e-9)
        # The relay opens in step 2: node a then follows the DAC alone and needs no settling.
        assert table.loc[2, "limited_by"] == "min_dwell"

    def test_table_attributes(self):
        fx = fo.Fixture.rc(r="1k", c="1u")
        table = fo.plan_table(fx, {"vin": [1.0, 2.0]}, fo.Tolerance.absolute("1m"), start=0.5)
        assert list(table.columns) == ["start", "dwell", "settle_time", "sample_delay", "sample_time",
                                       "start_value", "final", "tolerance", "error_at_sample", "limited_by"]
        assert table.attrs["total_time"] == pytest.approx(table["dwell"].sum(), rel=1e-12)
        assert (table["error_at_sample"] <= table["tolerance"]).all()
        assert table.loc[0, "start"] == 0.5

    def test_initial_settled(self):
        fx = fo.Fixture.rc(r="1k", c="1u")
        table = fo.plan_table(fx, {"vin": [2.0, 3.0]}, fo.Tolerance.absolute("1m"), initial="settled",
                              min_dwell="10u")
        assert table.loc[0, "start_value"] == 2.0 and table.loc[0, "limited_by"] == "min_dwell"

    # -- repeating sequences ---------------------------------------------------------------

    @pytest.mark.parametrize("bits", [8, 12, 16])
    def test_periodic_square_wave_needs_ln_of_2_to_the_n_plus_1_minus_1(self, bits):
        # Derived by hand: a sequence alternating 0 and V that repeats starts each step
        # half an LSB from the other level, so it moves V - limit and must fall to the
        # limit: tau * ln((V - limit) / limit) = tau * ln(2^(N+1) - 1), a hair under
        # the (N+1) ln 2 of a step from rest (common practice).
        fx = fo.Fixture.rc(r="1k", c="1u")  # tau = 1 ms
        tolerance = fo.Tolerance.lsb(bits=bits, span=5.0)
        table = fo.plan_table(fx, {"vin": [5.0, 0.0]}, tolerance, initial="periodic")
        expected = 1e-3 * math.log(2.0 ** (bits + 1) - 1)
        np.testing.assert_allclose(table["dwell"], expected, rtol=1e-8)
        assert table.loc[0, "start_value"] == pytest.approx(tolerance.value, rel=1e-6)

    @pytest.mark.parametrize("case", ["settling", "min_dwell", "switched", "sample_delay"])
    def test_periodic_plan_repeats_and_every_sample_passes(self, case):
        # Reference: the response's own periodic start, a closed-form fixed point
        # (x0 = B / (1 - A) of the whole drive's affine map), not the plan's search.
        tolerance = fo.Tolerance.lsb(bits=16, span=10.0)
        options = {}
        if case == "switched":
            fx, levels = self.scanner(), {"v0": [1.0] * 3, "v1": [-2.0] * 3, "v2": [4.5] * 3,
                                           "k0": [1, 0, 0], "k1": [0, 1, 0], "k2": [0, 0, 1]}
        else:
            fx, levels = fo.Fixture.rc(r="1k", c="10n"), {"vin": [3.0, -1.0, 4.0, 0.5]}
        if case == "min_dwell":
            options["min_dwell"] = "40u"  # four tau: every dwell is the minimum, none settles fully
            tolerance = fo.Tolerance.absolute("0.2")
        if case == "sample_delay":
            options["sample_delay"] = "3u"
        table = fo.plan_table(fx, levels, tolerance, initial="periodic", **options)
        drive = fo.plan_dwells(fx, levels, tolerance, initial="periodic", **options)
        response = fx.respond(drive, initial="periodic")
        assert response.initial == pytest.approx(table.loc[0, "start_value"], abs=1e-9 * tolerance.value)
        checked = response.settling(tolerance, sample_delay=table["sample_delay"].to_numpy())
        assert checked["ok"].all()
        if case == "min_dwell":
            assert (table["limited_by"] == "min_dwell").all()

    def test_periodic_with_every_step_holding_is_refused(self):
        fx = (fo.Fixture().voltage_source("vin", "in", "gnd").switch("k", "in", "out")
              .capacitor("ch", "out", "gnd", "1n"))
        with pytest.raises(InputError, match="initial: 'periodic' has no solution"):
            fo.plan_dwells(fx, {"vin": [1.0, 2.0], "k": [0, 0]}, fo.Tolerance.absolute("1m"), initial="periodic",
                           min_dwell="1u")

    @pytest.mark.parametrize("arguments, message", [
        (dict(levels={"vin": [1.0, 1.0]}), "step 1"),
        (dict(levels={"vin": [1.0], "vx": [0.0]}), "vx"),
        (dict(levels={}), "levels"),
        (dict(levels={"vin": []}), "levels"),
        (dict(levels={"vin": [1.0, "x"]}), r"levels\.vin\[1\]"),
        (dict(levels={"vin": [1.0]}, min_dwell=-1e-6), "min_dwell"),
        (dict(levels={"vin": [1.0]}, sample_delay=-1e-6), "sample_delay: .* step 0"),
        (dict(levels={"vin": [1.0, 2.0]}, sample_delay=[0.0]), "sample_delay"),
        (dict(levels={"vin": [1.0]}, initial="cyclic"), "initial"),
        (dict(levels={"vin": [1.0]}, probe="nothing"), "probe"),
        (dict(levels={"vin": [1.0]}, tolerance=1e-3), "tolerance"),
        (dict(levels={"vin": [1.0]}, tolerance=fo.Tolerance.absolute(1e-3, unit="A")), "unit='V'"),
    ])
    def test_bad_input(self, arguments, message):
        fx = fo.Fixture.rc(r="1k", c="1u")
        arguments.setdefault("tolerance", fo.Tolerance.absolute("1m"))
        with pytest.raises(ValueError, match=message):
            fo.plan_dwells(fx, **arguments)

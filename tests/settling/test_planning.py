"""Tests for firstorder.settling.planning: fastest plans, checked by evaluating the planned drive
and by shortening every dwell."""

from __future__ import annotations

import math

import numpy as np
import pytest
from builders import scanner, switched_fixture

import firstorder as fo
from firstorder.errors import InputError


def sample_errors(fx, drive, delays, initial=0.0):
    """|total(sample) - final| for every step, evaluated by the engine (not the plan's formula)."""
    res = fx.respond(drive, initial=initial)
    # A sample at the very end of a segment: the state is continuous, so total() there is
    # exact; keep the last one inside the drive despite rounding of times + delays.
    times = np.minimum(drive.times + delays, drive.end)
    return np.abs(res.total(times) - res.final), res


class TestPlanDwells:
    def scanner(self) -> fo.Fixture:
        return scanner()

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

    def test_min_dwell_and_hold_after(self):
        fx = self.scanner()
        tolerance = fo.Tolerance.lsb(bits=14, span=5.0)
        levels = {"v0": [1.0, 1.0, 1.0, 1.0, 1.0, 1.0], "v1": [4.0] * 6, "v2": [-2.0] * 6,
                  "k0": [1, 0, 0, 1, 1, 0], "k1": [0, 1, 0, 0, 0, 1], "k2": [0, 0, 1, 0, 0, 0]}
        hold_after, shortest = 2e-6, 20e-6
        table = fo.plan_table(fx, levels, tolerance, min_dwell=shortest, hold_after=hold_after)
        drive = fo.plan_dwells(fx, levels, tolerance, min_dwell=shortest, hold_after=hold_after)
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
        best = fo.plan_dwells(fx, {"vin": levels}, tolerance, hold_after=delay)
        best_total = best.end - best.start
        for k in range(len(levels) - 1):
            for factor in (1.01, 1.3, 3.0):
                dwells = best.durations[:k + 1].copy()
                dwells[k] *= factor
                head = fo.Drive(np.concatenate([[0.0], np.cumsum(dwells)[:-1]]), float(dwells.sum()),
                                vin=levels[:k + 1])
                state = float(fx.respond(head).boundary[-1])
                rest = fo.plan_dwells(fx, {"vin": levels[k + 1:]}, tolerance, initial=state, hold_after=delay)
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
                                       "start_value", "final", "tolerance", "error_at_sample", "margin_left",
                                       "limited_by", "fraction_inside"]
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
            options["hold_after"] = "3u"
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
        # Every step holds: any start repeats, so "periodic" names no one start (not "no solution").
        with pytest.raises(InputError, match="initial: 'periodic' names no one start.*any start repeats"):
            fo.plan_dwells(fx, {"vin": [1.0, 2.0], "k": [0, 0]}, fo.Tolerance.absolute("1m"), initial="periodic",
                           min_dwell="1u")

    @pytest.mark.parametrize("start", [1e3, -1e4, 1e5])
    @pytest.mark.parametrize("initial", [0.0, "periodic"])
    def test_dwells_do_not_depend_on_the_start(self, start, initial):
        # Planned in times from the first change: a later start moves the instants and
        # nothing else, so each dwell is the start-0 dwell to the spacing of floats there.
        fx = self.scanner()
        levels = {"v0": [1.0, 1.0, 1.0, 1.0], "v1": [4.0] * 4, "v2": [-2.0] * 4,
                  "k0": [1, 0, 0, 1], "k1": [0, 1, 0, 0], "k2": [0, 0, 1, 0]}
        tolerance = fo.Tolerance.lsb(bits=14, span=5.0)
        options = dict(initial=initial, min_dwell="1u", hold_after="200n")
        at_zero = fo.plan_table(fx, levels, tolerance, **options)
        moved = fo.plan_table(fx, levels, tolerance, start=start, **options)
        drive = fo.plan_dwells(fx, levels, tolerance, start=start, **options)
        spacing = np.spacing(abs(start) + 1.0)
        assert np.abs(moved["dwell"] - at_zero["dwell"]).max() <= 4 * spacing
        assert np.abs(drive.durations - at_zero["dwell"].to_numpy()).max() <= 4 * spacing
        assert drive.start == start and (drive.durations >= at_zero["dwell"].to_numpy()).all()
        assert moved.attrs["total_time"] == pytest.approx(at_zero.attrs["total_time"], abs=8 * spacing)
        checked = fx.respond(drive, initial=options["initial"]).settling(
            tolerance, sample_delay=moved["sample_delay"].to_numpy())
        assert checked["ok"].all()

    @pytest.mark.parametrize("start", [1e12, 1e15])
    def test_a_start_where_floats_are_coarser_than_the_dwells_is_refused(self, start):
        # At 1e15 s floats are 0.125 s apart: the 8.5 ms dwells cannot be kept, and a plan
        # of 0.125 s dwells would be silently 15 times slower than the one asked for.
        fx = fo.Fixture.rc(r="1k", c="1u")
        with pytest.raises(InputError, match=r"start: .* too far from 0 s .* apart"):
            fo.plan_dwells(fx, {"vin": [5.0, 5.0, 0.0]}, fo.Tolerance.absolute("1m"), min_dwell="2m",
                           start=start)

    @pytest.mark.parametrize("arguments, message", [
        (dict(levels={"vin": [1.0, 1.0]}), "step 1"),
        (dict(levels={"vin": [1.0], "vx": [0.0]}), "vx"),
        (dict(levels={}), "levels"),
        (dict(levels={"vin": []}), "levels"),
        (dict(levels={"vin": [1.0, "x"]}), r"levels\.vin\[1\]"),
        (dict(levels={"vin": [1.0]}, min_dwell=-1e-6), "min_dwell"),
        (dict(levels={"vin": [1.0]}, hold_after=-1e-6), "hold_after: .* step 0"),
        (dict(levels={"vin": [1.0, 2.0]}, hold_after=[0.0]), "hold_after"),

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

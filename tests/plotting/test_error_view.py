"""The error view's data against closed forms of the trade and the response's own values."""

from __future__ import annotations

import math

import numpy as np
import pytest

import firstorder as fo
from firstorder.plotting.error_view import FLOOR_FRACTION, error_view


def finite(view):
    keep = np.isfinite(view.t)
    return view.t[keep], view.error[keep]


class TestErrorView:
    def test_settling_error_is_the_step_times_the_decay(self):
        # RC (tau = 1 ms) stepping 0 -> 2 V -> -1 V: in each segment the error to the final
        # value is |step| e^(-(t - s)/tau) (handbook first-order step response).
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "3m"], end="8m", vin=[2.0, -1.0]))
        table = res.settling(fo.Tolerance.absolute("1m"), sample_delay="2.5m")
        view = error_view(res, table)
        t, error = finite(view)
        tau = 1e-3
        start_1 = 2.0 * (1 - math.exp(-3.0))  # where segment 1 starts
        expected = np.where(t < 3e-3, 2.0 * np.exp(-t / tau), abs(start_1 + 1.0) * np.exp(-(t - 3e-3) / tau))
        np.testing.assert_allclose(error, np.maximum(expected, view.floor), rtol=1e-9, atol=1e-15)
        # ... and the response's own values: |total(t) - final of the segment|.
        final = np.where(t < 3e-3, 2.0, -1.0)
        np.testing.assert_allclose(error, np.maximum(np.abs(res.total(t) - final), view.floor), rtol=1e-12)

    def test_samples_and_limits_are_the_tables(self):
        res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "3m", "5m"], end="8m", vin=[2.0, -1.0, 0.5]))
        table = res.settling(fo.Tolerance.lsb(bits=12, span=5.0), sample_delay="1.5m")
        view = error_view(res, table)
        np.testing.assert_array_equal(view.sample_t, table["sample_time"].to_numpy())
        np.testing.assert_array_equal(view.sample_error, table["error_at_sample"].to_numpy())
        np.testing.assert_array_equal(view.sample_ok, table["ok"].to_numpy())
        np.testing.assert_array_equal(view.limit, np.repeat(table["tolerance"].to_numpy(), 2))
        np.testing.assert_array_equal(view.limit_t, np.stack([res.starts, res.ends], axis=1).reshape(-1))
        # The sample sits on the curve: the error there from the response is the table's.
        at = res.total(view.sample_t)
        np.testing.assert_allclose(np.abs(at - table["final"].to_numpy()), view.sample_error, rtol=1e-9)
        assert view.unit == "V" and list(view.segments) == [0, 1, 2]

    def test_a_hold_shows_its_droop(self):
        # A relay (no leakage) opens on 10 nF with 10 MΩ across it: from the held value v0 the
        # droop is v0 (1 - e^(-t/(R C))) (handbook exponential decay of an RC hold).
        fx = (fo.Fixture().voltage_source("vdac", "dac", "gnd").resistor("rs", "dac", "sw", "1k")
              .switch("k", "sw", "h", r_on="0.1").capacitor("ch", "h", "gnd", "10n")
              .resistor("r_leak", "h", "gnd", "10M"))
        res = fx.respond(fo.Drive([0, "1m"], end="3m", vdac=[2.5, 2.5], k=[1, 0]))
        table = res.settling(fo.Tolerance.absolute("100u"), sample_delay=[0.9e-3, 0.5e-3])
        view = error_view(res, table)
        t, error = finite(view)
        hold = t >= 1e-3
        v0 = float(res.boundary[1])
        droop = v0 * (1 - np.exp(-(t[hold] - 1e-3) / (10e6 * 10e-9)))
        np.testing.assert_allclose(error[hold], np.maximum(droop, view.floor), rtol=1e-9)
        assert view.sample_error[1] == pytest.approx(v0 * (1 - math.exp(-0.5e-3 / 0.1)), rel=1e-9)

    def test_a_probe_error_is_the_probes(self):
        fx = fo.Fixture.rc(r="1k", c="1u").probe("i_r", through="r")
        res = fx.respond(fo.Drive([0, "3m"], end="6m", vin=[2.0, 0.0]))
        table = res.settling(fo.Tolerance.absolute("1u", unit="A"), sample_delay="2m", probe="i_r")
        view = error_view(res, table, probe="i_r")
        t, error = finite(view)
        # i = (vin - v) / R heads for 0 A in both segments (the capacitor charges, then discharges).
        np.testing.assert_allclose(error, np.maximum(np.abs(res.probe("i_r", t)), view.floor), rtol=1e-9)
        np.testing.assert_allclose(view.sample_error[0], 2.0 / 1e3 * math.exp(-2.0), rtol=1e-9)  # 2 mA e^-2
        assert view.unit == "A"

    def test_zero_error_sits_on_the_floor_and_the_window_is_kept(self):
        drive = fo.Drive(np.arange(10) * 1e-3, end=10e-3, vin=[0.0] * 5 + [1.0] * 5)
        res = fo.Fixture.rc(r="1k", c="100n").respond(drive)
        table = res.settling(fo.Tolerance.absolute("1m"))
        view = error_view(res, table, start=2.5e-3, end=6.2e-3)
        assert list(view.segments) == [2, 3, 4, 5, 6]
        assert view.floor == pytest.approx(FLOOR_FRACTION * 1e-3)
        _, error = finite(view)
        assert error.min() == view.floor  # segments 2-4 never leave 0 V
        assert view.sample_t.size == 0
        assert list(error_view(res, table, max_segments=3).segments) == [0, 1, 2]

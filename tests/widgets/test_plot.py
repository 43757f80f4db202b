"""The Bench's plot data: curves, tolerance bands, sample and settle marks, envelopes, the trace.

Numbers on the plot are checked against the handbook RC formulas (common
practice): charging, v(t) = V (1 - exp(-t / RC)); tau = R C; a 50 % square
wave into an RC swings V tanh(T / 4 tau) peak to peak.
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest

import firstorder as fo
from firstorder.widgets import Bench

from benches import charging, rc_bench, switched_bench


class TestCurves:
    def test_plot_matches_handbook_charging(self):
        bench = rc_bench()
        data = bench.sources["total"].data
        t, y = np.asarray(data["t"]), np.asarray(data["y"])
        window = (t >= 1e-3) & (t < 4e-3)
        expected = charging(t[window], 1e-3, 5.0, 1e-3)
        np.testing.assert_allclose(y[window], expected, rtol=1e-12, atol=1e-12)

    def test_every_change_is_sampled_exactly(self):
        bench = rc_bench()
        t = np.asarray(bench.sources["total"].data["t"])
        assert {0.0, 1e-3, 4e-3} <= set(t.tolist())


class TestMarks:
    def test_tolerance_band_and_samples(self):
        bench = rc_bench(tolerance=fo.Tolerance.absolute("10m"), sample_delay="2m")
        band = bench.sources["tolerance"].data
        np.testing.assert_allclose(np.asarray(band["top"]) - np.asarray(band["bottom"]), 0.02)
        samples = bench.sources["samples"].data
        # segment 0 lasts 1 ms, shorter than the delay: read at its end, where the table judges it
        np.testing.assert_allclose(samples["t"], [1e-3, 3e-3, 6e-3])
        np.testing.assert_allclose(samples["t"], bench.settling["sample_time"], rtol=1e-15)
        # 2 ms after the step to 5 V with tau 1 ms: 5 (1 - e^-2) (common practice)
        assert samples["y"][1] == pytest.approx(5 * (1 - math.exp(-2)), rel=1e-12)
        assert samples["colour"][1] == "#e74c3c"  # 0.68 V short of 5 V: outside 10 mV

    def test_samples_without_a_tolerance_are_neutral(self):
        bench = rc_bench(sample_delay="2m")
        samples = bench.sources["samples"].data
        # segment 0 (1 ms, at 0 V throughout) is read at its end, as the settling table would
        np.testing.assert_allclose(samples["t"], [1e-3, 3e-3, 6e-3])
        # 2 ms into each step, tau 1 ms: 5 (1 - e^-2) and 1 + (v(4m) - 1) e^-2 (common practice)
        v4 = 5 * (1 - math.exp(-3))
        np.testing.assert_allclose(samples["y"], [0.0, 5 * (1 - math.exp(-2)), 1 + (v4 - 1) * math.exp(-2)],
                                   rtol=1e-12, atol=1e-15)
        np.testing.assert_allclose(samples["error"], [0.0, -5 * math.exp(-2), (v4 - 1) * math.exp(-2)], rtol=1e-12,
                                   atol=1e-15)
        assert set(samples["colour"]) == {"#5d6d7e"}
        assert len(bench.sources["tolerance"].data["left"]) == 0 and len(bench.sources["settle"].data["t"]) == 0

    def test_settle_marks_lie_on_the_curve_of_a_probe(self):
        # Read from the settling table (final and limit), not evaluated: they must still lie on the curve.
        bench = switched_bench(tolerance=fo.Tolerance.absolute("1u", unit="A"), sample_delay="0.9m")
        bench.probe_selector.value = "i_rs"
        marks = bench.sources["settle"].data
        assert len(marks["t"]) >= 2
        np.testing.assert_allclose(marks["y"], bench.response.probe("i_rs", np.asarray(marks["t"])), rtol=1e-9, atol=1e-15)
        samples = bench.sources["samples"].data
        np.testing.assert_allclose(samples["y"], bench.response.probe("i_rs", np.asarray(samples["t"])), rtol=1e-9,
                                   atol=1e-15)

    def test_an_empty_source_is_not_sent_again(self):
        bench = rc_bench()  # no tolerance, no delay: bands, samples and settle marks stay empty
        sent = []
        for name in ("tolerance", "samples", "settle", "zero_input", "total"):
            bench.sources[name].on_change("data", lambda attr, old, new, name=name: sent.append(name))
        bench.fields["r"].value = "20k"
        assert sent == ["total"]


class TestViewAndEnvelope:
    def test_long_drive_draws_an_envelope_then_lines_when_zoomed(self):
        fixture = fo.Fixture.rc(r="1k", c="10n")  # tau 10 us
        drive = fo.Drive.pulses(period="20u", duty=0.5, high=1.0, count=5000)
        bench = Bench(fixture, drive)
        assert bench.plot_mode == "envelope"
        low = np.asarray(bench.sources["total"].data["low"])
        high = np.asarray(bench.sources["total"].data["high"])
        assert low.size < 2000 and (low <= high).all()
        # A 50 % square wave into an RC swings V tanh(T / 4 tau) peak to peak (common practice):
        # in the periodic steady state; after 5000 periods the start-up has long died away.
        ripple = math.tanh(20e-6 / (4 * 10e-6))
        assert high[-1] - low[-1] == pytest.approx(ripple, rel=1e-6)
        bench.set_view(0.05, 0.05 + 100e-6)
        assert bench.plot_mode == "line"
        t = np.asarray(bench.sources["total"].data["t"])
        assert 0.05 + 20e-6 in set(np.round(t, 12).tolist())

    def test_components_table_follows_the_mode(self):
        bench = Bench(fo.Fixture.rc(r="1k", c="10n"), fo.Drive.pulses(period="20u", duty=0.5, high=1.0, count=5000))
        assert list(bench.components_table().columns) == ["time (s)", "total min (V)", "total max (V)",
                                                          "forced min (V)", "forced max (V)"]
        bench.overlays["forced"].value = False
        bench.set_view(0.05, 0.05 + 100e-6)
        assert list(bench.components_table().columns) == ["time (s)", "total (V)"]
        # A programmatic view moves the plot's time axis too.
        assert (bench.plots.x_range.start, bench.plots.x_range.end) == pytest.approx((0.05, 0.05 + 100e-6))


class TestTrace:
    def test_residual_against_model(self):
        fixture = fo.Fixture.rc(r="10k", c="100n")
        drive = fo.Drive.steps([(0, 0.0), ("1m", 5.0)], end="6m")
        times = np.linspace(0, 6e-3, 601)
        measured = fixture.respond(drive).total(times) + 1e-3
        bench = Bench(fixture, drive, trace=SimpleNamespace(times=times, values=measured, name="scope ch1"))
        np.testing.assert_allclose(bench.sources["residual"].data["y"], 1e-3, atol=1e-12)
        assert "residual rms 1 mV" in bench.info.value

    def test_a_dense_trace_is_drawn_as_bands(self):
        fixture = fo.Fixture.rc(r="10k", c="100n")
        drive = fo.Drive.steps([(0, 0.0), ("1m", 5.0)], end="6m")
        times = np.linspace(0, 6e-3, 20_001)
        measured = fixture.respond(drive).total(times) + np.random.default_rng(2).normal(0, 1e-3, times.size)
        bench = Bench(fixture, drive, trace=SimpleNamespace(times=times, values=measured, name="scope ch1"))
        data = bench.sources["trace"].data
        assert bench.plots.band_renderers["trace"].visible and not bench.plots.line_renderers["trace"].visible
        low, high = np.asarray(data["low"]), np.asarray(data["high"])
        assert low.size <= 520 and (low <= high).all()
        assert low.min() == measured.min() and high.max() == measured.max()
        assert len(bench.sources["residual"].data["t"]) < times.size  # thinned for the screen

    def test_trace_must_have_fields(self):
        with pytest.raises(ValueError, match="times"):
            rc_bench(trace=SimpleNamespace(values=[1.0], name="x"))


class TestLegend:
    def test_marks_are_in_the_legend_only_while_drawn(self):
        from benches import rc_bench
        import firstorder as fo

        bench = rc_bench()
        items = {item.label.value: item.visible for item in bench.plots.legend.items}
        assert not items["tolerance band"] and not items["sample instants"] and not items["settled"]
        bench.setup_fields["tolerance"].value = "300m"  # 5 V e^-3 = 249 mV: both steps settle
        bench.setup_fields["sample_delay"].value = "0.5m"
        items = {item.label.value: item.visible for item in bench.plots.legend.items}
        assert items["tolerance band"] and items["sample instants"] and items["settled"]
        assert isinstance(bench.tolerance, fo.Tolerance)

"""The Bench, Python side (no browser): fields, drive table, undo, plot data, export.

Numbers on the plot are checked against the handbook RC formulas (common
practice): charging, v(t) = V (1 - exp(-t / RC)); tau = R C.  Envelopes are
checked against brute-force dense sampling.
"""

from __future__ import annotations

import math
import subprocess
import sys
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import firstorder as fo
from firstorder.widgets import Bench
from firstorder.widgets._drive_table import DriveText, parse_switch
from firstorder.plotting.format import format_many
from firstorder.plotting.sampling import envelope, plan_samples
from firstorder.settling.tolerance import parse_tolerance, tolerance_text
from firstorder.units import parse_value


def rc_bench(**kwargs) -> Bench:
    fixture = fo.Fixture.rc(r="10k", c="100n")
    drive = fo.Drive.steps([(0, 0.0), ("1m", 5.0), ("4m", 1.0)], end="8m")
    return Bench(fixture, drive, **kwargs)


def switched_bench(**kwargs) -> Bench:
    fixture = fo.Fixture()
    fixture.voltage_source("vdac", "drv", "gnd")
    fixture.resistor("rs", "drv", "a", "1k")
    fixture.switch("k1", "a", "b", r_on="0.2")
    fixture.capacitor("ch", "b", "gnd", "100n")
    fixture.resistor("rin", "b", "gnd", "10M")
    fixture.probe("i_rs", through="rs")
    drive = fo.Drive([0, "1m", "2m", "3m"], end="5m", vdac=[0, 2.5, 2.5, -1.2], k1=[1, 1, 0, 1])
    return Bench(fixture, drive, **kwargs)


def charging(t, start, level, tau):
    """Handbook RC step response from 0 V (common practice)."""
    return level * (1.0 - np.exp(-(np.asarray(t) - start) / tau))


class TestLazyImport:
    def test_import_firstorder_loads_no_ui(self):
        code = ("import sys, firstorder as fo\n"
                "print(sorted(m for m in ('sympy', 'bokeh', 'ipywidgets', 'jupyter_bokeh') if m in sys.modules))\n"
                "fo.Bench\n"
                "print('bokeh' in sys.modules and 'ipywidgets' in sys.modules)\n")
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.split("\n")
        assert out[0] == "[]"
        assert out[1] == "True"

    def test_unknown_attribute_still_raises(self):
        with pytest.raises(AttributeError, match="no attribute 'Bnech'"):
            fo.Bnech  # noqa: B018


class TestBenchConstruction:
    def test_attributes(self):
        bench = rc_bench()
        assert bench.error == ""
        assert set(bench.fields) == {"r", "c"}
        assert {"total", "zero_input", "zero_state", "forced", "natural", "vin"} <= set(bench.sources)
        assert bench.response.drive is bench.drive
        assert isinstance(bench.fixture, fo.Fixture)

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

    def test_switch_gets_two_fields_and_probe_choice(self):
        bench = switched_bench()
        assert {"rs", "k1.r_on", "k1.r_off", "ch", "rin"} == set(bench.fields)
        bench.probe_selector.value = "i_rs"
        assert bench.probe == "i_rs"
        assert bench.plots.response_figure.yaxis[0].formatter.args == {"unit": "A"}
        # Just after the change at 1 ms the current through rs is (2.5 V - 0 V) / (1k + 0.2): Ohm's law.
        t = np.asarray(bench.sources["total"].data["t"])
        y = np.asarray(bench.sources["total"].data["y"])
        assert y[t == 1e-3][0] == pytest.approx(2.5 / 1000.2, rel=1e-9)

    def test_refuses_wrong_types(self):
        with pytest.raises(ValueError, match="Fixture"):
            Bench("rc", fo.Drive.steps([(0, 1.0)], end=1))
        with pytest.raises(ValueError, match="Tolerance"):
            rc_bench(tolerance="1 mV")


class TestPartFields:
    def test_new_value_recomputes(self):
        bench = rc_bench()
        bench.fields["r"].value = "20k"
        assert bench.error == ""
        assert bench.fixture.part_map["r"].value == 20e3
        assert bench.response.tau[0] == pytest.approx(2e-3)  # tau = R C (common practice)
        data = bench.sources["total"].data
        t, y = np.asarray(data["t"]), np.asarray(data["y"])
        window = (t >= 1e-3) & (t < 4e-3)
        np.testing.assert_allclose(y[window], charging(t[window], 1e-3, 5.0, 2e-3), rtol=1e-12, atol=1e-12)

    def test_bad_value_keeps_last_good(self):
        bench = rc_bench()
        before = np.array(bench.sources["total"].data["y"])
        response = bench.response
        bench.fields["r"].value = "twenty"
        assert "r" in bench.error and "'twenty'" in bench.error
        assert "twenty" in bench._field_errors["r"].value
        assert bench.response is response
        assert bench.fixture.part_map["r"].value == 10e3
        np.testing.assert_array_equal(bench.sources["total"].data["y"], before)

    def test_negative_and_wrong_unit_are_refused(self):
        bench = rc_bench()
        bench.fields["c"].value = "-1u"
        assert "must be > 0" in bench.error
        bench.fields["c"].value = "1uH"
        assert "unit" in bench.error
        assert bench.fixture.part_map["c"].value == 100e-9

    def test_fixing_the_value_clears_the_error(self):
        bench = rc_bench()
        bench.fields["r"].value = "x"
        bench.fields["r"].value = "1k"
        assert bench.error == ""
        assert bench.response.tau[0] == pytest.approx(1e-4)

    def test_switch_on_resistance(self):
        bench = switched_bench()
        bench.fields["k1.r_on"].value = "1k"
        # closed: tau = (rs + r_on) || rin times ch (handbook series/parallel, common practice)
        expected = (2000.0 * 10e6 / (2000.0 + 10e6)) * 100e-9
        assert bench.response.tau[0] == pytest.approx(expected, rel=1e-12)


class TestSetupFields:
    def test_initial_settled_and_number(self):
        bench = rc_bench()
        bench.setup_fields["initial"].value = "2.5"
        assert bench.response.initial == 2.5
        bench.setup_fields["initial"].value = "periodic"
        periodic = bench.response
        assert periodic.initial == pytest.approx(periodic.boundary[-1], rel=1e-12)
        bench.setup_fields["initial"].value = "warm"
        assert "initial" in bench.error and bench.response is periodic  # the last good one stays

    def test_tolerance_band_and_samples(self):
        bench = rc_bench(tolerance=fo.Tolerance.absolute("10m"), sample_delay="2m")
        band = bench.sources["tolerance"].data
        np.testing.assert_allclose(np.asarray(band["top"]) - np.asarray(band["bottom"]), 0.02)
        samples = bench.sources["samples"].data
        # segment 0 lasts 1 ms, shorter than the delay: no reading there
        np.testing.assert_allclose(samples["t"], [3e-3, 6e-3])
        # 2 ms after the step to 5 V with tau 1 ms: 5 (1 - e^-2) (common practice)
        assert samples["y"][0] == pytest.approx(5 * (1 - math.exp(-2)), rel=1e-12)
        assert samples["colour"][0] == "#e74c3c"  # 0.68 V short of 5 V: outside 10 mV

    def test_tolerance_text_field(self):
        bench = rc_bench()
        bench.setup_fields["tolerance"].value = "0.5 LSB of 16 bits on 5 V"
        assert bench.tolerance == fo.Tolerance.lsb(16, 5.0)
        bench.setup_fields["tolerance"].value = "loose"
        assert "tolerance" in bench.error
        assert bench.tolerance == fo.Tolerance.lsb(16, 5.0)


class TestDriveTable:
    def test_level_edit(self):
        bench = rc_bench()
        bench.edit_cell(1, "vin", "3")
        assert bench.error == ""
        np.testing.assert_array_equal(bench.drive.levels("vin"), [0.0, 3.0, 1.0])
        assert bench.response.final[1] == 3.0

    def test_time_edit_in_engineering_notation(self):
        bench = rc_bench()
        bench.edit_cell(1, "time", "1.5m")
        np.testing.assert_array_equal(bench.drive.times, [0.0, 1.5e-3, 4e-3])

    def test_out_of_order_time_keeps_last_good(self):
        bench = rc_bench()
        drive = bench.drive
        bench.edit_cell(1, "time", "9m")
        assert "strictly increasing" in bench.error
        assert bench.drive is drive
        assert bench.table_source.data["time"][1] == "9m"  # what was typed stays to be fixed

    def test_messages_show_plain_numbers(self):
        # numpy 2 writes a scalar's repr as np.float64(...); the engineer should read 0.004
        bench = rc_bench()
        bench.edit_cell(1, "time", "9m")
        assert "np.float64" not in bench.error
        assert "drive.times[2]: 0.004 does not come after drive.times[1] = 0.009" in bench.error

    def test_unparsable_cell_names_row_and_column(self):
        bench = rc_bench()
        bench.edit_cell(2, "vin", "one volt")
        assert "row 2" in bench.error and "vin" in bench.error
        bench.edit_cell(1, "vin", "4")  # another edit: the bad cell is still reported
        assert "row 2" in bench.error
        np.testing.assert_array_equal(bench.drive.levels("vin"), [0.0, 5.0, 1.0])

    def test_switch_column(self):
        bench = switched_bench()
        bench.edit_cell(2, "k1", "closed")
        np.testing.assert_array_equal(bench.drive.levels("k1"), [1, 1, 1, 1])
        bench.edit_cell(2, "k1", "half")
        assert "switch state" in bench.error

    def test_end_field(self):
        bench = rc_bench()
        bench.end_field.value = "10m"
        assert bench.drive.end == 10e-3
        bench.end_field.value = "3m"
        assert "end" in bench.error and bench.drive.end == 10e-3

    def test_row_operations(self):
        bench = rc_bench()
        bench.add_row()
        np.testing.assert_allclose(bench.drive.times, [0, 1e-3, 4e-3, 8e-3])
        assert bench.drive.end == pytest.approx(12e-3)
        bench.insert_row(1)
        np.testing.assert_allclose(bench.drive.times, [0, 0.5e-3, 1e-3, 4e-3, 8e-3])
        assert bench.drive.levels("vin")[1] == 5.0
        bench.duplicate_row(3)
        np.testing.assert_allclose(bench.drive.times, [0, 0.5e-3, 1e-3, 4e-3, 6e-3, 8e-3])
        bench.delete_row(0)
        np.testing.assert_allclose(bench.drive.times, [0.5e-3, 1e-3, 4e-3, 6e-3, 8e-3])
        assert len(bench.table_source.data["time"]) == 5
        bench.delete_row(9)
        assert "row 9" in bench.error

    def test_generators(self):
        bench = rc_bench()
        bench.pulse_fields["period"].value = "2m"
        bench.pulse_fields["duty"].value = "0.25"
        bench.pulse_fields["high"].value = "5"
        bench.pulse_fields["count"].value = "3"
        bench._generate("pulses")
        expected = fo.Drive.pulses(period="2m", duty=0.25, high=5, count=3)
        assert bench.drive == expected
        bench.stair_fields["levels"].value = "0, 1, 2"
        bench.stair_fields["dwell"].value = "1m"
        bench._generate("staircase")
        assert bench.drive == fo.Drive.staircase([0, 1, 2], dwell="1m")
        bench.pulse_fields["duty"].value = "2"
        bench._generate("pulses")
        assert "duty" in bench.error

    def test_drag_a_handle(self):
        bench = rc_bench()
        handles = bench.sources["handles"]
        np.testing.assert_array_equal(handles.data["t"], bench.drive.times)
        t = np.array(handles.data["t"])
        y = np.array(handles.data["y"])
        t[1] = 2e-3  # sideways: the instant moves
        handles.data = {"t": t, "y": y, "row": handles.data["row"]}
        np.testing.assert_allclose(bench.drive.times, [0, 2e-3, 4e-3])
        y[1] = 4.0  # up and down, with a sideways slip too small to count: the level moves
        t[1] = 2e-3 + 1e-6
        handles.data = {"t": t, "y": y, "row": handles.data["row"]}
        np.testing.assert_allclose(bench.drive.times, [0, 2e-3, 4e-3])
        np.testing.assert_allclose(bench.drive.levels("vin"), [0, 4.0, 1.0])
        t, y = np.array(bench.sources["handles"].data["t"]), np.array(bench.sources["handles"].data["y"])
        t[1] = 5e-3  # past the next change: refused, handles put back
        handles.data = {"t": t, "y": y, "row": handles.data["row"]}
        assert "drag" in bench.error
        np.testing.assert_allclose(bench.sources["handles"].data["t"], [0, 2e-3, 4e-3])


class TestUndo:
    def test_undo_level_edit(self):
        bench = rc_bench()
        bench.edit_cell(1, "vin", "3")
        assert bench.undo()
        np.testing.assert_array_equal(bench.drive.levels("vin"), [0.0, 5.0, 1.0])
        assert bench.table_source.data["vin"][1] == "5 V"

    def test_undo_a_rejected_entry_first(self):
        bench = rc_bench()
        bench.edit_cell(1, "vin", "3")
        bench.edit_cell(1, "time", "9m")
        assert bench.undo()  # takes back the rejected time, keeps the accepted level
        assert bench.error == ""
        assert bench.table_source.data["time"][1] == "1 ms"
        np.testing.assert_array_equal(bench.drive.levels("vin"), [0.0, 3.0, 1.0])
        assert bench.undo()
        np.testing.assert_array_equal(bench.drive.levels("vin"), [0.0, 5.0, 1.0])
        assert not bench.undo()

    def test_undo_part_value(self):
        bench = rc_bench()
        bench.fields["r"].value = "20k"
        bench.undo()
        assert bench.fields["r"].value == "10 kΩ"
        assert bench.response.tau[0] == pytest.approx(1e-3)

    def test_undo_row_delete(self):
        bench = rc_bench()
        bench.delete_row(1)
        bench.undo()
        np.testing.assert_allclose(bench.drive.times, [0, 1e-3, 4e-3])


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


class TestSampling:
    def test_envelope_is_exact_against_dense_sampling(self):
        rng = np.random.default_rng(7)
        durations = rng.uniform(1e-6, 3e-5, 3000)
        times = np.concatenate([[0.0], np.cumsum(durations)[:-1]])
        drive = fo.Drive(times, float(np.sum(durations)), vin=rng.uniform(-1, 1, 3000))
        response = fo.Fixture.rc(r="1k", c="5n").respond(drive)
        plan = plan_samples(response.starts, drive.end, response.tau, 0.0, drive.end, 300)
        assert plan.mode == "envelope"
        low, high = envelope(plan, response.total(plan.times))
        dense = np.linspace(0.0, drive.end, 1_000_001)
        values = response.total(dense)
        bins = np.clip(np.searchsorted(plan.edges, dense, side="right") - 1, 0, 299)
        dense_low = np.full(300, np.inf)
        dense_high = np.full(300, -np.inf)
        np.minimum.at(dense_low, bins, values)
        np.maximum.at(dense_high, bins, values)
        assert (low <= dense_low + 1e-12).all() and (high >= dense_high - 1e-12).all()
        # Dense sampling with 3 points per microsecond approaches the exact extremes closely.
        assert np.max(dense_low - low) < 0.05 and np.max(high - dense_high) < 0.05

    def test_line_plan_holds_changes_and_left_limits(self):
        starts = np.array([0.0, 1.0, 2.0])
        plan = plan_samples(starts, 3.0, np.array([0.1, np.inf, 0.5]), 0.0, 3.0, 500)
        assert plan.mode == "line"
        assert {0.0, 1.0, 2.0, 3.0 - 2 ** -51 * 1.5} & set(plan.times.tolist()) >= {0.0, 1.0, 2.0}
        assert np.nextafter(1.0, 0) in plan.times and np.nextafter(3.0, 0) in plan.times
        assert (np.diff(plan.times) > 0).all()


class TestDriveText:
    def test_round_trip_and_partial_parse(self):
        drive = fo.Drive([0, "1m"], end="2m", vin=[0, 2.5])
        table = DriveText.from_drive(drive, ("vin",), frozenset(), {"vin": "V"})
        assert table.to_drive() == drive
        edited = table.with_text({"vin": ["0", "2.6"]})
        assert edited.to_drive().levels("vin")[1] == 2.6

    def test_parse_switch(self):
        assert parse_switch("on", field="k") == 1.0
        with pytest.raises(ValueError, match="k: 'maybe'"):
            parse_switch("maybe", field="k")


class TestFormatMany:
    def test_reads_back(self):
        values = np.array([0.0, 1e-12, 4.7e3, -2.5e-6, 999.99999999, 0.1])
        texts = format_many(values, "s")
        back = [parse_value(t, field="t", unit="s") for t in texts]
        np.testing.assert_allclose(back, values, rtol=1e-6)


class TestToleranceText:
    @pytest.mark.parametrize("tolerance", [fo.Tolerance.absolute("1m"), fo.Tolerance.relative(0.001),
                                           fo.Tolerance.ppm(10, 5.0), fo.Tolerance.lsb(16, 5.0)])
    def test_round_trip(self, tolerance):
        assert parse_tolerance(tolerance_text(tolerance)) == tolerance

    def test_bad_text_names_forms(self):
        with pytest.raises(ValueError, match="LSB of 16 bits"):
            parse_tolerance("tight")


class TestDerivationPanel:
    def test_segment_shows_symbols_then_numbers(self):
        bench = switched_bench()
        bench.select_segment(2)  # k1 open: the capacitor discharges into rin alone
        text = bench.derivation.value
        assert "Segment 2" in text and "k1 open" in text
        assert text.index("Time constant") < text.index("This segment in numbers")
        assert "ch" in text and "rin" in text
        # tau = rin * ch = 1 s (handbook, common practice)
        assert r"\tau = 1.0" in text
        np.testing.assert_allclose(bench.sources["selection"].data["left"], [2e-3])


class TestExport:
    def test_components_and_drive(self, tmp_path):
        bench = rc_bench()
        path = bench.export_components(tmp_path / "c.csv")
        frame = pd.read_csv(path)
        np.testing.assert_array_equal(frame["total (V)"].to_numpy(), np.asarray(bench.sources["total"].data["y"]))
        drive_path = bench.export_drive(tmp_path / "d.csv")
        assert fo.Drive.from_csv(drive_path) == bench.drive


class TestAnalysisExport:
    def test_saved_analysis_reads_back(self, tmp_path):
        bench = switched_bench(tolerance=fo.Tolerance.lsb(16, 5.0), sample_delay="0.8m")
        bench.fields["rs"].value = "2.2k"
        bench.edit_cell(3, "vdac", "-1.5")
        path = bench.save_analysis(tmp_path / "a.json", title="hold capacitor")
        again = fo.Analysis.load(path)
        assert again.fixture.part_map["rs"].value == 2200.0
        assert again.drive == bench.drive
        assert again.tolerance == fo.Tolerance.lsb(16, 5.0)
        assert again.sample_delay == 0.8e-3
        np.testing.assert_allclose(again.response.boundary, bench.response.boundary, rtol=0, atol=0)

    def test_long_delay_is_kept_per_segment(self, tmp_path):
        bench = rc_bench(tolerance=fo.Tolerance.absolute("10m"), sample_delay="2m")
        analysis = bench.analysis()
        np.testing.assert_allclose(analysis.sample_delay, [1e-3, 2e-3, 2e-3])

    def test_report_is_written(self, tmp_path):
        bench = rc_bench(tolerance=fo.Tolerance.absolute("10m"))
        path = bench.report(tmp_path / "r.html")
        assert fo.Analysis.load(path).drive == bench.drive


class TestTrace:
    def test_residual_against_model(self):
        fixture = fo.Fixture.rc(r="10k", c="100n")
        drive = fo.Drive.steps([(0, 0.0), ("1m", 5.0)], end="6m")
        times = np.linspace(0, 6e-3, 601)
        measured = fixture.respond(drive).total(times) + 1e-3
        bench = Bench(fixture, drive, trace=SimpleNamespace(times=times, values=measured, name="scope ch1"))
        np.testing.assert_allclose(bench.sources["residual"].data["y"], 1e-3, atol=1e-12)
        assert "residual rms 1 mV" in bench.info.value

    def test_trace_must_have_fields(self):
        with pytest.raises(ValueError, match="times"):
            rc_bench(trace=SimpleNamespace(values=[1.0], name="x"))


class TestSettlingPanel:
    def test_settle_mark_and_table(self):
        fixture = fo.Fixture.rc(r="10k", c="100n")
        drive = fo.Drive.steps([(0, 0.0), ("1m", 5.0)], end="15m")
        bench = Bench(fixture, drive, tolerance=fo.Tolerance.absolute("10m"), sample_delay="9m")
        # First order: within 10 mV of a 5 V step after tau ln(5 / 0.01) (handbook closed form, common practice)
        expected = 1e-3 * math.log(5.0 / 0.01)
        assert bench.settling.loc[1, "settle_time"] == pytest.approx(expected, rel=1e-12)
        marks = bench.sources["settle"].data
        np.testing.assert_allclose(marks["t"], [1e-3 + expected], rtol=1e-12)
        np.testing.assert_allclose(marks["y"], [4.99], rtol=1e-12)
        bench.tabs.selected_index = 3
        assert "Settling summary" in bench.settling_panel.value
        assert "6.215 ms" in bench.settling_panel.value

    def test_no_tolerance_no_table(self):
        bench = rc_bench()
        assert bench.settling is None
        bench.tabs.selected_index = 3
        assert "Give a tolerance" in bench.settling_panel.value

    def test_tolerance_in_wrong_unit_for_a_current_probe(self):
        bench = switched_bench(tolerance=fo.Tolerance.absolute("1m"))
        bench.probe_selector.value = "i_rs"
        # The tolerance field is re-read in amps for a current probe.
        assert bench.tolerance.unit == "A"
        assert bench.error == ""


class TestCautionsPanel:
    def test_high_voltage_is_flagged(self):
        fixture = fo.Fixture.rc(r="1k", c="10u")
        bench = Bench(fixture, fo.Drive.steps([(0, 0.0), ("1m", 100.0)], end="100m"))
        # 100 V is above the 60 V DC limit the cautions use (from memory of safety practice)
        assert "Cautions" in bench.cautions_panel.value
        assert "60 V" in bench.cautions_panel.value
        bench.edit_cell(1, "vin", "5")
        assert bench.cautions_panel.value == ""


class TestLoader:
    def test_bokehjs_is_inline(self):
        from bokeh import __version__

        from firstorder.widgets._loader import loader_script

        script = loader_script()
        # The library text itself travels with the page: nothing to fetch.
        assert "cdn.bokeh.org" not in script
        assert f"firstorder-bokehjs-{__version__}" in script
        assert len(script) > 1_000_000  # bokeh, widgets and tables, minified

    def test_display_sends_bokehjs_then_a_short_note(self):
        from IPython.core.interactiveshell import InteractiveShell
        from IPython.utils.capture import capture_output

        InteractiveShell.instance()
        bench = rc_bench()
        with capture_output() as captured:
            bundle = bench._repr_mimebundle_()
        assert "application/vnd.jupyter.widget-view+json" in bundle
        kinds = [list(output.data) for output in captured.outputs]
        assert "application/vnd.bokehjs_load.v0+json" in kinds[0]
        assert captured.outputs[-1].data["text/plain"].startswith("BokehJS")


class TestEnvelopeProperty:
    @given(segments=st.integers(2, 400), pixels=st.integers(16, 120), seed=st.integers(0, 2**31 - 1))
    @settings(max_examples=25)
    def test_every_value_lies_within_its_column(self, segments, pixels, seed):
        # Containment: at any instant the curve lies within its pixel column's [min, max].
        rng = np.random.default_rng(seed)
        durations = rng.uniform(1e-7, 1e-4, segments)
        times = np.concatenate([[0.0], np.cumsum(durations)[:-1]])
        drive = fo.Drive(times, float(durations.sum()), vin=rng.uniform(-5, 5, segments))
        response = fo.Fixture.rc(r="1k", c=float(rng.uniform(1e-9, 1e-7))).respond(drive, initial=float(rng.uniform(-5, 5)))
        plan = plan_samples(response.starts, drive.end, response.tau, 0.0, drive.end, pixels)
        if plan.mode != "envelope":
            return
        low, high = envelope(plan, response.total(plan.times))
        probes = np.sort(rng.uniform(0.0, drive.end, 500))
        values = response.total(probes)
        column = np.clip(np.searchsorted(plan.edges, probes, side="right") - 1, 0, pixels - 1)
        slack = 1e-12 * 5
        assert (values >= low[column] - slack).all() and (values <= high[column] + slack).all()


class TestSegmentSelection:
    def test_plot_and_table_selection_follow_each_other(self):
        bench = rc_bench()
        bench.select_segment(2)
        assert list(bench.table_source.selected.indices) == [2]
        bench.table_source.selected.indices = [1]
        np.testing.assert_allclose(bench.sources["selection"].data["left"], [1e-3])
        assert "Segment 1" in bench.derivation.value
        with pytest.raises(ValueError, match="segments are 0 to 2"):
            bench.select_segment(3)


class TestInductorBench:
    def test_rl_current_in_amps(self):
        bench = Bench(fo.Fixture.rl(r="47", l="10m"), fo.Drive.steps([(0, 0.0), ("1m", 5.0)], end="3m"),
                      tolerance=fo.Tolerance.relative(0.01))
        # i(t) = V/R (1 - exp(-t R / L)) (handbook RL step, common practice)
        t = np.asarray(bench.sources["total"].data["t"])
        y = np.asarray(bench.sources["total"].data["y"])
        after = t >= 1e-3
        np.testing.assert_allclose(y[after], 5 / 47 * (1 - np.exp(-(t[after] - 1e-3) * 47 / 10e-3)), rtol=1e-12, atol=1e-15)
        assert bench.plots.response_figure.yaxis[0].formatter.args == {"unit": "A"}
        # within 1 % of the step after ln(100) time constants (common practice)
        assert bench.settling.loc[1, "settle_time"] == pytest.approx(math.log(100) * 10e-3 / 47, rel=1e-12)

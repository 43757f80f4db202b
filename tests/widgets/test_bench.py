"""The Bench, Python side (no browser): fields, drive table, undo, export; what the user types and reads.

Numbers are checked against handbook formulas (common practice): tau = R C,
and tau = L / R for a coil; series and parallel resistance.
"""

from __future__ import annotations

import math
from pathlib import Path
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import firstorder as fo
from firstorder.widgets import Bench
from firstorder.widgets._panels import settling_html

from benches import charging, rc_bench, switched_bench


class TestLazyImport:
    def test_bench_loads_bokeh_and_ipywidgets_when_first_asked_for(self):
        # `import firstorder` loading none of them is tests/test_layers.py's check.
        code = ("import sys, firstorder as fo\n"
                "before = 'bokeh' in sys.modules or 'ipywidgets' in sys.modules\n"
                "fo.Bench\n"
                "print(before, 'bokeh' in sys.modules and 'ipywidgets' in sys.modules)\n")
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.split()
        assert out == ["False", "True"]

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
        assert bench.error.startswith("start:") and bench.response is periodic  # the last good one stays

    def test_tolerance_text_field(self):
        bench = rc_bench()
        bench.setup_fields["tolerance"].value = "0.5 LSB of 16 bits on 5 V"
        assert bench.tolerance == fo.Tolerance.lsb(16, 5.0)
        bench.setup_fields["tolerance"].value = "loose"
        assert "tolerance" in bench.error
        assert bench.tolerance == fo.Tolerance.lsb(16, 5.0)


class TestToleranceBelongsToAQuantity:
    def test_a_voltage_limit_is_refused_beside_the_field_on_a_current_probe(self):
        bench = switched_bench()
        bench.setup_fields["tolerance"].value = "0.5 LSB of 16 bits on 5 V"
        assert bench.settling is not None
        bench.probe_selector.value = "i_rs"
        message = bench._field_errors["tolerance"].value
        assert "5 V" in message and "i_rs" in message and "A" in message
        assert bench.settling is None  # judged against no limit rather than a silently converted one
        assert bench.sources["tolerance"].data["top"].size == 0
        assert bench.setup_fields["tolerance"].value == "0.5 LSB of 16 bits on 5 V"
        bench.probe_selector.value = ""  # back on the capacitor voltage: the limit holds again
        assert bench.error == "" and bench._field_errors["tolerance"].value == ""
        assert bench.tolerance == fo.Tolerance.lsb(16, 5.0) and bench.settling is not None

    def test_a_current_limit_is_refused_on_the_capacitor_voltage(self):
        bench = switched_bench()
        bench.probe_selector.value = "i_rs"
        bench.setup_fields["tolerance"].value = "1 mA"
        assert bench.tolerance == fo.Tolerance.absolute("1m", unit="A") and bench.settling is not None
        bench.probe_selector.value = ""
        assert "1 mA" in bench._field_errors["tolerance"].value
        assert bench.settling is None and bench.setup_fields["tolerance"].value == "1 mA"
        with pytest.raises(ValueError, match="tolerance"):
            bench.analysis()  # the saved analysis judges the capacitor voltage: no silent 1 mV

    def test_a_share_of_each_step_follows_the_quantity_shown(self):
        bench = switched_bench()
        bench.setup_fields["tolerance"].value = "0.1 %"
        bench.probe_selector.value = "i_rs"
        assert bench.error == "" and bench.summary.unit == "A" and bench.settling is not None

    def test_undo_keeps_the_rule(self):
        bench = switched_bench()
        bench.probe_selector.value = "i_rs"
        bench.setup_fields["tolerance"].value = "1 mA"
        bench.probe_selector.value = ""
        bench.fields["rs"].value = "2k"
        assert bench.undo()  # the part value goes back; the limit is still a current
        assert bench.fixture.part_map["rs"].value == 1e3
        assert "1 mA" in bench._field_errors["tolerance"].value and bench.settling is None


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
        assert "time order" in bench.error
        assert bench.drive is drive
        assert bench.table_source.data["time"][1] == "9m"  # what was typed stays to be fixed

    def test_messages_show_plain_numbers(self):
        # numpy 2 writes a scalar's repr as np.float64(...); the engineer reads the table's 4 ms
        bench = rc_bench()
        bench.edit_cell(1, "time", "9m")
        assert "np.float64" not in bench.error
        assert "row 2, change at: 4 ms does not come after row 1's change at 9 ms" in bench.error

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

    def test_generators_make_the_whole_drive_and_keep_nothing_silently(self):
        bench = switched_bench()
        # The old drive has k1 closed at its first change and vdac at 0 V; the pattern says
        # otherwise for k1 (closed while high, open while low): that is what the drive gets.
        assert bench.generate("pattern", "vdac", levels="0, 2.5", dwells="1m, 3m", repeats="3",
                              columns={"k1": "open, closed"})
        expected = fo.Drive(np.array([0, 1, 4, 5, 8, 9]) * 1e-3, 12e-3, vdac=[0, 2.5] * 3, k1=[0, 1] * 3)
        assert bench.drive == expected
        assert bench.generate("staircase", "vdac", levels="0, 1, 2", dwell="1m", columns={"k1": "closed"})
        assert bench.drive == fo.Drive([0, 1e-3, 2e-3], 3e-3, vdac=[0, 1, 2], k1=[1, 1, 1])
        assert bench.generate("ramp", "vdac", first="0", last="2", steps="4", dwell="500u", back="yes")
        np.testing.assert_array_equal(bench.drive.levels("vdac"), [0, 0.5, 1, 1.5, 2, 1.5, 1, 0.5, 0])
        np.testing.assert_allclose(bench.drive.times, np.arange(9) * 0.5e-3, rtol=0, atol=1e-18)
        assert len(bench.drive) == 9 and "9-change drive" in bench.header.value
        assert not bench.generate("pattern", "vdac", dwells="1m, 2m, 3m", levels="0, 1")
        assert "repeated pattern: dwells: 3 dwells for 2 levels" in bench.error
        assert not bench.generate("pattern", "vdac", dwells="1m", columns={"k1": "open, closed, open"})
        assert "k1 (switch): 3 values for a pattern of 2 levels" in bench.error
        assert not bench.generate("ramp", "vdac", steps="0")
        assert "ramp of steps: steps: '0' must be a whole number >= 1" in bench.error
        assert len(bench.drive) == 9  # refused: the drive stays

    def test_the_generated_source_field_is_the_generators(self):
        bench = switched_bench()
        columns = bench.generators.columns
        assert columns["vdac"].disabled and not columns["k1"].disabled
        assert columns["k1"].value == "closed"  # the old drive's first state, shown, to be changed

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
        # Refused, said beside the drive; no error banner, for nothing shown is invalid.
        assert bench.error == "" and bench.status.value == ""
        assert "drag" in bench.drive_error.value and "row 1" in bench.drive_error.value
        np.testing.assert_allclose(bench.sources["handles"].data["t"], [0, 2e-3, 4e-3])
        t, y = np.array(bench.sources["handles"].data["t"]), np.array(bench.sources["handles"].data["y"])
        y[1] = 3.0
        handles.data = {"t": t, "y": y, "row": handles.data["row"]}
        assert bench.drive_error.value == ""  # the next good edit clears the notice

    def test_a_dragged_level_is_what_the_table_shows(self):
        bench = rc_bench()
        handles = bench.sources["handles"]
        t, y = np.array(handles.data["t"]), np.array(handles.data["y"])
        y[1] = 2.9999993413  # where the pointer let go
        handles.data = {"t": t, "y": y, "row": handles.data["row"]}
        assert bench.table_source.data["vin"][1] == "3 V"
        assert bench.drive.levels("vin")[1] == 3.0  # the number the table shows, no hidden digits
        t[1] = 2.0000001234e-3
        handles.data = {"t": t, "y": np.array(bench.sources["handles"].data["y"]), "row": handles.data["row"]}
        assert bench.table_source.data["time"][1] == "2 ms" and bench.drive.times[1] == 2e-3

    def test_the_header_counts_the_changes_of_the_drive_shown(self):
        bench = rc_bench()
        assert "3-change drive" in bench.header.value
        bench.generate("pattern", "vin", levels="0, 5", dwells="1m", repeats="3")
        assert len(bench.drive) == 6 and "6-change drive" in bench.header.value


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

    def test_undo_twice_goes_two_steps_back_though_the_table_echoes(self):
        bench = rc_bench()
        for level in ("3", "4", "2"):
            bench.edit_cell(1, "vin", level)
        assert len(bench.session.history) == 3
        for expected, depth in (("4", 2), ("3", 1)):  # the text as typed
            bench.undo_button.click()
            # The browser sends the table it was just given back, as an edit of its own.
            bench.table_source.data = dict(bench.table_source.data)
            assert len(bench.session.history) == depth
            assert bench.table_source.data["vin"][1] == expected

    def test_an_edit_that_changes_nothing_is_not_recorded(self):
        bench = rc_bench()
        bench.fields["r"].value = "20k"
        bench.session.edit_part("r", "20k")
        bench.session.edit_setup("initial", bench.session.texts["initial"])
        bench.session.edit_table(dict(bench.table_source.data))
        assert len(bench.session.history) == 1

    def test_undo_row_delete(self):
        bench = rc_bench()
        bench.delete_row(1)
        bench.undo()
        np.testing.assert_allclose(bench.drive.times, [0, 1e-3, 4e-3])


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
        assert again.sample_delay == "0.8m"  # as typed
        np.testing.assert_allclose(again.response.boundary, bench.response.boundary, rtol=0, atol=0)

    def test_long_delay_is_kept_as_typed_and_judged_alike(self, tmp_path):
        # Segment 0 lasts 1 ms, shorter than the 2 ms typed: the Bench, the saved analysis and
        # its report sample it at its end, and the file keeps the delay as typed.
        bench = rc_bench(tolerance=fo.Tolerance.absolute("10m"), sample_delay="2m")
        bench.setup_fields["sample_delay"].value = "1.5m"
        analysis = fo.Analysis.load(bench.save_analysis(tmp_path / "a.json"))
        assert analysis.sample_delay == "1.5m"
        for column in ("sample_time", "error_at_sample", "ok"):
            np.testing.assert_array_equal(analysis.settling()[column].to_numpy(), bench.settling[column].to_numpy())
        assert bench.settling["sample_time"].to_numpy()[0] == 1e-3  # the end of segment 0
        samples = bench.sources["samples"].data
        assert list(samples["marker"]) == ["square", "diamond", "diamond"]
        assert "Segment 0 is shorter than the sample delay (1.5 ms): sampled at its end" in settling_html(bench.session)
        html = bench.analysis().to_html()
        assert "a segment shorter than that is sampled at its end" in html

    def test_report_is_written(self, tmp_path):
        bench = rc_bench(tolerance=fo.Tolerance.absolute("10m"))
        path = bench.report(tmp_path / "r.html")
        assert fo.Analysis.load(path).drive == bench.drive


def _click(bench, label: str) -> None:
    button = next(b for b in bench.export.box.children[4].children if b.description == label)
    button.click()


class TestExportTab:
    def test_each_file_is_written_shown_in_full_and_offered_as_a_download(self, tmp_path, monkeypatch):
        import base64
        import re

        monkeypatch.chdir(tmp_path)
        bench = switched_bench(tolerance=fo.Tolerance.lsb(16, 5.0), sample_delay="0.8m")
        bench.export.title.value = "Channel 3 hold capacitor"
        bench.export.notes.value = "relay K1 from lot 7"
        for label, suffix in [("Plotted components (CSV)", "_components.csv"), ("Drive (CSV)", "_drive.csv"),
                              ("Analysis (JSON)", "_analysis.json"), ("Report (HTML)", "_report.html")]:
            _click(bench, label)
            message = bench.export.message.value
            path = tmp_path / f"bench{suffix}"
            assert f"<code class='fo-written'>{path.resolve()}</code>" in message  # the full path
            link = re.search(r'download="([^"]+)" href="data:([^;]+);base64,([^"]+)"', message)
            assert link and link.group(1) == path.name
            assert base64.b64decode(link.group(3)) == path.read_bytes()  # the file itself, to the browser
        analysis = fo.Analysis.load(tmp_path / "bench_analysis.json")
        assert (analysis.title, analysis.notes) == ("Channel 3 hold capacitor", "relay K1 from lot 7")
        report = (tmp_path / "bench_report.html").read_text(encoding="utf-8")
        assert "Channel 3 hold capacitor" in report and "relay K1 from lot 7" in report
        assert "<title>firstorder analysis" not in report

    def test_labels_are_whole(self):
        bench = rc_bench()
        for button in bench.export.box.children[4].children:
            assert button.layout.width == "auto", button.description  # never cut to a fixed width

    def test_plots_carry_a_save_tool(self):
        from bokeh.models import SaveTool

        bench = rc_bench()
        for fig in (bench.plots.drive_figure, bench.plots.response_figure):
            assert any(isinstance(tool, SaveTool) for tool in fig.toolbar.tools)


class TestLoadAnalysis:
    def test_a_saved_analysis_loads_back_and_undo_takes_it_back(self, tmp_path):
        saved = switched_bench(tolerance=fo.Tolerance.absolute("2m"), sample_delay="0.5m", initial="0.3")
        saved.fields["rs"].value = "2.2k"
        saved.edit_cell(3, "vdac", "-1.5")
        saved.export.title.value = "after rework"
        path = saved.save_analysis(tmp_path / "a.json", *saved._title_notes())
        bench = switched_bench()
        before = bench.drive
        bench.export.load_path.value = str(path)
        bench.export.load_button.click()
        assert "loaded:" in bench.export.load_message.value and str(Path(path).resolve()) in bench.export.load_message.value
        assert bench.drive == saved.drive and bench.fields["rs"].value == "2.2 kΩ"
        assert bench.setup_fields["sample_delay"].value == "0.5m" and bench.setup_fields["initial"].value == "0.3"
        assert bench.tolerance == fo.Tolerance.absolute("2m") and bench.export.title.value == "after rework"
        np.testing.assert_array_equal(bench.response.boundary, saved.response.boundary)
        assert bench.undo() and bench.drive == before

    def test_an_uploaded_report_loads_and_the_same_file_loads_again(self, tmp_path):
        import datetime

        saved = switched_bench(tolerance=fo.Tolerance.absolute("2m"))
        saved.edit_cell(1, "vdac", "1.25")
        path = saved.report(tmp_path / "r.html")
        bench = switched_bench()
        original = bench.drive
        upload = {"name": "r.html", "type": "text/html", "size": Path(path).stat().st_size,
                  "content": memoryview(Path(path).read_bytes()), "last_modified": datetime.datetime.now()}
        bench.export.upload.value = (upload,)  # as the browser's upload sets it
        assert bench.drive == saved.drive and "loaded: <code>the uploaded file" in bench.export.load_message.value
        assert bench.export.upload.value == ()
        bench.undo()
        assert bench.drive == original
        bench.export.upload.value = (upload,)
        assert bench.drive == saved.drive

    def test_another_fixture_is_refused_naming_the_way_to_open_it(self, tmp_path):
        path = rc_bench().save_analysis(tmp_path / "rc.json")
        bench = switched_bench()
        drive = bench.drive
        bench.export.load_path.value = str(path)
        bench.export.load_button.click()
        assert "another fixture" in bench.export.load_message.value
        assert "Bench.from_analysis" in bench.export.load_message.value and bench.drive is drive
        again = Bench.from_analysis(fo.Analysis.load(path))
        assert again.drive == rc_bench().drive

    def test_a_missing_file_is_an_error_there(self, tmp_path):
        bench = rc_bench()
        bench.export.load_path.value = str(tmp_path / "none.json")
        bench.export.load_button.click()
        assert "none.json" in bench.export.load_message.value


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


class TestRefusedEntries:
    def test_a_refused_entry_stays_as_typed_until_fixed_or_undone(self):
        bench = rc_bench()
        bench.fields["r"].value = "twenty"
        bench.fields["c"].value = "220n"  # another field accepted meanwhile
        assert bench.fields["r"].value == "twenty" and "twenty" in bench._field_errors["r"].value
        assert bench.response.tau[0] == pytest.approx(10e3 * 220e-9)  # tau = R C (common practice)
        bench.undo()  # takes back the refused entry: the field shows its last good text
        assert bench.fields["r"].value == "10 kΩ" and bench._field_errors["r"].value == ""
        assert bench.fields["c"].value == "220n"


class TestBrowserEvents:
    """What the browser sends: jupyter_bokeh hands a plot event to the document
    (``callbacks.trigger_event``), which calls only the models subscribed when they
    joined it; a handler attached after the figure was wrapped never ran."""

    @staticmethod
    def _from_browser(bench, event) -> None:
        # The path of a "MessageSent"/"bokeh_event" message in BokehModel._sync_model.
        bench.plot_view._document.callbacks.trigger_event(event)

    def test_a_click_on_a_segment_selects_it(self):
        from bokeh.events import Tap

        bench = switched_bench()
        bench.tabs.selected_index = bench.tabs.children.index(bench.derivation)
        before = bench.derivation.value
        self._from_browser(bench, Tap(bench.plots.response_figure, x=2.5e-3, y=1.0))
        assert bench.session.segment == 2
        assert bench.derivation.value != before and "Segment 2:" in bench.derivation.value

    def test_a_box_zoom_resamples_a_long_drive(self):
        from bokeh.events import RangesUpdate

        rng = np.random.default_rng(3)
        times = np.concatenate([[0.0], np.cumsum(rng.uniform(20e-6, 80e-6, 9_999))])
        drive = fo.Drive(times, end=float(times[-1]) + 1e-4, vin=rng.choice([0.0, 5.0], 10_000))
        bench = Bench(fo.Fixture.rc(r="1k", c="10n"), drive)
        assert bench.plot_mode == "envelope"
        self._from_browser(bench, RangesUpdate(bench.plots.response_figure, x0=0.2, x1=0.201, y0=0.0, y1=5.0))
        assert bench.session.view == pytest.approx((0.2, 0.201))
        assert bench.plot_mode == "line"
        assert "zoom in" not in bench.info.value

    def test_the_value_axis_follows_the_quantity_shown_after_a_zoom(self):
        from bokeh.events import RangesUpdate

        bench = switched_bench()
        y_range = bench.plots.response_figure.y_range
        self._from_browser(bench, RangesUpdate(bench.plots.response_figure, x0=0.9e-3, x1=1.5e-3, y0=0.0, y1=1.0))
        bench.probe_selector.value = "i_rs"
        # The current through rs peaks at 2.5 V / 1000.2 Ω just after 1 ms (Ohm's law): the
        # axis spans the probe's curve, not the volts shown before.
        peak = 2.5 / 1000.2
        assert y_range.start <= 0.0 and peak <= y_range.end < 1.5 * peak
        bench.set_view(bench.drive.start, bench.drive.end)  # reset
        assert y_range.start <= 0.0 and peak <= y_range.end < 1.5 * peak
        bench.probe_selector.value = ""
        assert 2.5 <= y_range.end < 4.0

"""Tests for firstorder.traces.trace: traces from arrays and from CSV files, and every bad file."""

from __future__ import annotations

import numpy as np
import pytest

import firstorder as fo
from firstorder.errors import InputError
from firstorder.traces.trace import Trace, read_trace


# ---------------------------------------------------------------------------------------
class TestTrace:
    def test_from_arrays_scales_and_freezes(self):
        trace = fo.Trace.from_arrays([0, 1, 2], [1, 2, 3], name="v", units="V", time_scale="1m", value_scale=10)
        np.testing.assert_allclose(trace.times, [0.0, 1e-3, 2e-3])
        np.testing.assert_allclose(trace.values, [10.0, 20.0, 30.0])
        assert not trace.times.flags.writeable
        with pytest.raises(AttributeError):
            trace.name = "other"

    def test_has_what_an_overlay_needs(self):
        trace = fo.Trace.from_arrays([0, 1e-6], [0.0, 1.0], name="v_hold", units="V")
        assert (trace.name, trace.units, len(trace.times), len(trace.values)) == ("v_hold", "V", 2, 2)

    @pytest.mark.parametrize(
        "times, values, name, match",
        [
            ([0, 1, 2], [0, 1], "v", r"trace\.values: has 2 values but trace\.times has 3"),
            ([0, 1, 1], [0, 1, 2], "v", r"trace\.times\[2\]: 1\.0 does not come after"),
            ([0, 2, 1], [0, 1, 2], "v", r"trace\.times\[2\]"),
            ([0, 1], [0, float("nan")], "v", r"trace\.values\[1\]: nan"),
            ([0, float("inf")], [0, 1], "v", r"trace\.times\[1\]: inf"),
            ([0], [0], "v", r"trace\.times: 1 point"),
            ([0, 1], [0, 1], "", r"trace\.name"),
            ("0,1", [0, 1], "v", r"trace\.times: '0,1' is not a list"),
        ],
    )
    def test_bad_arrays_name_the_field(self, times, values, name, match):
        with pytest.raises(fo.InputError, match=match):
            fo.Trace(times, values, name=name)

    @pytest.mark.parametrize(
        "scale, match", [({"time_scale": 0}, "time_scale"), ({"time_scale": -1e-3}, "time_scale"),
                         ({"value_scale": 0}, "value_scale"), ({"value_scale": "x"}, "value_scale")],
    )
    def test_bad_scales_name_the_field(self, scale, match):
        with pytest.raises(fo.InputError, match=match):
            fo.Trace.from_arrays([0, 1], [0, 1], **scale)

    def test_csv_round_trip_is_exact(self, tmp_path):
        rng = np.random.default_rng(3)
        trace = fo.Trace.from_arrays(np.cumsum(rng.uniform(1e-7, 2e-7, 50)), rng.normal(size=50),
                                     name="i_coil", units="A")
        path = tmp_path / "capture.csv"
        trace.to_csv(path)
        back = fo.read_trace(path, value="i_coil")
        np.testing.assert_array_equal(back.times, trace.times)
        np.testing.assert_array_equal(back.values, trace.values)
        assert (back.name, back.units) == ("i_coil", "A")


# ---------------------------------------------------------------------------------------
class TestReadTrace:
    def write(self, tmp_path, text, name="capture.csv"):
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        return path

    def test_comments_blank_lines_units_and_index(self, tmp_path):
        path = self.write(tmp_path, "# bench 3, simulated\n\ntime [s], marker, v_a (V)\n0, start, 1.5\n"
                                    "# a comment inside\n1e-3, x, 2.5\n")
        by_name = fo.read_trace(path, value="v_a")
        by_index = fo.read_trace(path, time=0, value=2)
        for trace in (by_name, by_index):
            np.testing.assert_array_equal(trace.times, [0.0, 1e-3])
            np.testing.assert_array_equal(trace.values, [1.5, 2.5])
            assert trace.units == "V" and trace.name == "v_a"

    def test_names_match_without_case_and_units_scale(self, tmp_path):
        path = self.write(tmp_path, "Time (ms),Value\n0,1\n2,3\n")
        trace = fo.read_trace(path, time_scale=1e-3, value_scale=-2)
        np.testing.assert_allclose(trace.times, [0.0, 2e-3])
        np.testing.assert_allclose(trace.values, [-2.0, -6.0])

    @pytest.mark.parametrize(
        "text, match",
        [
            ("", r"the file is empty"),
            ("# only a comment\n\n", r"the file is empty"),
            ("0,1\n1,2\n", r"line 1: expected a header row"),
            ("# c\ntime\n0\n1\n", r"line 2: the header has one column"),
            ("time,value\n0,1\n1e-3,abc\n", r"line 3, column 'value': 'abc' is not a number"),
            ("time,value\n0,1\n1e-3,nan\n", r"line 3, column 'value': 'nan' is not allowed"),
            ("time,value\n0,1\n1e-3,inf\n", r"line 3, column 'value': 'inf' is not allowed"),
            ("time,value\n0,1\n1e-3,\n", r"line 3, column 'value': is empty"),
            ("time,value\n0,1\nlate,2\n", r"line 3, column 'time': 'late' is not a number"),
            ("time,value\n0,1\n2e-3,2\n1e-3,3\n", r"line 4, column 'time': 0\.001 does not come after 0\.002 on line 3"),
            ("time,value\n0,1\n0,2\n", r"line 3, column 'time': 0\.0 does not come after"),
            ("time,value\n0,1\n1e-3,2,9\n", r"line 3: 3 cells, but the header on line 1 has 2"),
            ("time,value\n", r"no samples after the header on line 1"),
            ("time,value\n0,1\n", r"one sample after the header"),
            ("time,volts\n0,1\n1,2\n", r"value: no column named 'value' in the header on line 1"),
            ("time (ms),value\n0,1\n1,2\n", r"time_scale: column 'time \(ms\)' is in 'ms'"),
            ("time,value,value\n0,1,2\n1,2,3\n", r"line 1: column 'value' \(index 2\) repeats the name of column 1"),
        ],
    )
    def test_bad_files_name_line_and_column(self, tmp_path, text, match):
        with pytest.raises(fo.InputError, match=match):
            fo.read_trace(self.write(tmp_path, text))

    def test_not_text(self, tmp_path):
        path = tmp_path / "binary.csv"
        path.write_bytes(b"time,value\n0,\xff\xfe\n")
        with pytest.raises(fo.InputError, match=r"binary\.csv: not UTF-8"):
            fo.read_trace(path)

    @pytest.mark.parametrize(
        "arguments, match",
        [
            ({"value": 5}, r"value: column index 5 does not exist"),
            ({"value": -1}, r"value: column index -1 does not exist"),
            ({"value": True}, r"value: True must be a column name or an index"),
            ({"value": 1.5}, r"value: 1\.5 must be a column name"),
            ({"value": "time"}, r"value: 'time' is the time column"),
            ({"time_scale": 0}, r"time_scale: 0 must be > 0"),
            ({"value_scale": 0}, r"value_scale: 0 is not allowed"),
            ({"time_scale": "fast"}, r"time_scale: 'fast' is not a number"),
        ],
    )
    def test_bad_arguments_name_the_field(self, tmp_path, arguments, match):
        path = self.write(tmp_path, "time,value\n0,1\n1,2\n")
        with pytest.raises(fo.InputError, match=match):
            fo.read_trace(path, **arguments)


class TestTraceArrays:
    @pytest.mark.parametrize("field", ["times", "values"])
    def test_two_d_arrays_are_refused_with_their_shape(self, field):
        arrays = {"times": [0.0, 1.0, 2.0, 3.0], "values": [0.0, 1.0, 2.0, 3.0]}
        arrays[field] = np.array([[0.0, 1.0], [2.0, 3.0]])
        with pytest.raises(InputError, match=rf"^trace\.{field}: a 2-D array of shape \(2, 2\)"):
            Trace.from_arrays(arrays["times"], arrays["values"])

    def test_timedelta_times_are_seconds(self):
        trace = Trace.from_arrays(np.array([0, 1, 2], dtype="timedelta64[ms]"), [0.0, 0.5, 0.75])
        # 1 ms and 2 ms: the correctly rounded floats of 1/1000 and 2/1000.
        assert trace.times.tolist() == [0.0, 1 / 1000, 2 / 1000]

    def test_booleans_are_not_values(self):
        with pytest.raises(InputError, match=r"^trace\.values"):
            Trace.from_arrays([0.0, 1.0], [True, False])


class TestReadTraceFiles:
    def test_a_byte_order_mark_is_skipped(self, tmp_path):
        path = tmp_path / "bom.csv"
        path.write_text("time (s),v (V)\n0,0\n1e-3,0.5\n", encoding="utf-8-sig")
        trace = read_trace(path, value="v")
        assert trace.values.tolist() == [0.0, 0.5] and trace.units == "V"

    @pytest.mark.parametrize("header", ["time,v,v", "time,v (V),V [V]", "time,v,time"])
    def test_a_repeated_column_name_is_refused(self, tmp_path, header):
        path = tmp_path / "dup.csv"
        path.write_text(f"{header}\n0,1,2\n1,3,4\n")
        with pytest.raises(InputError, match=r"^dup\.csv line 1: column .* repeats the name of column"):
            read_trace(path, value=1)

    @pytest.mark.parametrize("path", [None, 3, ["a.csv"]])
    def test_what_is_not_a_path_is_refused(self, path):
        with pytest.raises(InputError, match=r"^path: .* is not a file path"):
            read_trace(path)

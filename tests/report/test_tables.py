"""Rows and cells shared by the reports, the CLI and the Bench (report/tables.py)."""

from __future__ import annotations

import numpy as np

import firstorder as fo
from firstorder.report import tables as report_tables


class TestMarginRows:
    def test_the_least_margin_rows_in_segment_order(self):
        # Steps of 1..8 V, each 2 tau long (tau 1 ms): what is left at a segment's end is its
        # step, plus what the last one left, times e^-2 (common practice); it grows with k.
        drive = fo.Drive(np.arange(8) * 2e-3, end=16e-3, vin=np.cumsum(np.arange(1.0, 9.0)))
        table = fo.Fixture.rc(r="1k", c="1u").respond(drive).settling(fo.Tolerance.absolute("1m"))
        header, rows, caption = report_tables.margin_rows(table, "V", count=3)
        assert caption == "the 3 segments with the least margin, of 8"
        assert [k for k, _, _ in rows] == [5, 6, 7]
        assert header == ["segment", "from", "final", "limit", "settles after", "error at end", "ok"]
        left = 0.0
        for step in range(1, 9):
            left = (step + left) * np.exp(-2.0)
        assert rows[-1][1][4] == report_tables.settling_cell("residual_at_end", left, "V")
        assert all(bad for _, _, bad in rows)

    def test_a_short_table_is_shown_whole_with_its_sample_columns(self):
        drive = fo.Drive([0, "1m"], end="3m", vin=[5.0, 0.0])
        table = fo.Fixture.rc(r="1k", c="1u").respond(drive).settling(fo.Tolerance.absolute("1m"), sample_delay="0.9m")
        header, rows, caption = report_tables.margin_rows(table, "V")
        assert caption == "every segment" and [k for k, _, _ in rows] == [0, 1]
        assert header[-2] == "error at sample"
        # 0.9 tau into a 5 V step, 5 V e^-0.9 is left (common practice): outside 1 mV.
        assert rows[0][1][4] == report_tables.settling_cell("error_at_sample", 5.0 * np.exp(-0.9), "V")
        assert rows[0][1][5] == "NO" and rows[0][2]

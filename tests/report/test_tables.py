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


class TestNegligibleValues:
    """A state decayed for hundreds of time constants is written as 0, not as 727.1e-117 A."""

    def coil_off(self):
        # 60 mA, then off for 20 ms with tau = 76.9 µs: 260 time constants, e^-260 of 60 mA is left.
        fx = fo.Fixture.rl(r="130", l="10m")
        return fx.respond(fo.Drive([0, "20m"], end="40m", vin=[7.8, 0.0]))

    def test_the_end_value_in_every_display(self):
        res = self.coil_off()
        assert 0.0 < abs(float(res.boundary[-1])) < 1e-100  # the case: a tiny, non-zero end
        assert repr(res).endswith("end 0 A)")
        assert "e-1" not in res._repr_html_() and "e-" not in repr(res)

    def test_settling_cells_against_their_segment(self):
        table = self.coil_off().settling(fo.Tolerance.absolute("1u", unit="A"), sample_delay="19m")
        _, rows, _ = report_tables.settling_rows(table, "A")
        text = " ".join(cell for _, cells, _ in rows for cell in cells)
        assert "e-" not in text
        assert rows[1][1][table.columns.get_loc("residual_at_end")] == "0 A"
        _, short, _ = report_tables.margin_rows(table, "A")
        assert "e-" not in " ".join(cell for _, cells, _ in short for cell in cells)


class TestHoldRows:
    def test_a_hold_is_judged_by_droop_in_the_rows(self):
        from firstorder.cli import demo_analysis

        table = demo_analysis().settling()
        header, rows, _ = report_tables.settling_rows(table, "V")
        judged = header.index("judged by") - 1
        assert [cells[judged] for _, cells, _ in rows] == ["settling"] * 4 + ["droop"]
        settle = header.index("settle time") - 1
        assert rows[4][1][settle] == "droops out" and rows[3][1][settle] == "ends first"
        _, short, _ = report_tables.margin_rows(table, "V")
        assert short[4][1][1] == "held -1.9988 V" and short[4][1][3] == "droops out"

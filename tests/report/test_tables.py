"""Rows and cells shared by the reports, the CLI and the Bench (report/tables.py)."""

from __future__ import annotations

import numpy as np
import pytest

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


class TestToleranceSection:
    """The report's tolerance section: every number the Study's own (report/tables.py
    ``tolerance_section``), the histogram and the yield curve recomputed here from
    ``Study.segment_values``."""

    @pytest.fixture(scope="class", params=["demo", "relay"])
    @staticmethod
    def made(request):
        from builders import study_analysis

        from firstorder.cli import demo_analysis

        analysis = demo_analysis() if request.param == "demo" else study_analysis()
        study = analysis.study(progress=False)
        return analysis, study, report_tables.study_section(analysis)

    def test_the_tables_are_the_studys_settling_table(self, made):
        import pandas as pd

        analysis, study, section = made
        fractions = analysis.study_settings["fractions"]
        table = study.settling(analysis.tolerance, analysis.sample_delay, fractions=fractions)
        pd.testing.assert_frame_equal(section.table, table)
        unit = analysis.fixture.state_unit
        (settle_header, settle_rows), (sample_header, sample_rows) = section.settle, section.sample
        assert [k for k, _, _ in settle_rows] == list(range(len(table))) == [k for k, _, _ in sample_rows]
        for k, cells, bad in settle_rows:
            assert cells[1] == report_tables.settling_cell("nominal_settle_time", table["nominal_settle_time"][k], unit)
            assert cells[-1] == report_tables.settling_cell("settle_time_max", table["settle_time_max"][k], unit)
            assert bad == (table["yield"][k] < 1)
        for k, cells, _ in sample_rows:
            assert cells[-2] == f"{table['yield'][k]:.2%}" and cells[-1] == str(table["worst_unit"][k])
            assert cells[-3] == fo.format_value(table["error_max"][k], unit, digits=5)
        assert len(settle_header) == 3 + len(fractions) + 1 and sample_header[-2:] == ["yield", "worst unit"]

    def test_passing_is_the_studys_with_its_interval(self, made):
        analysis, study, section = made
        passing = study.passing(analysis.tolerance, analysis.sample_delay)
        assert section.passing == passing
        # Clopper-Pearson from scipy's beta quantiles (the exact binomial interval, its definition).
        from scipy.stats import beta

        k, n = passing.passing, passing.units
        low = 0.0 if k == 0 else beta.ppf(0.025, k, n - k + 1)
        high = 1.0 if k == n else beta.ppf(0.975, k + 1, n - k)
        assert section.passing_rows[1][1] == f"{low:.4%} to {high:.4%}"
        assert section.passing_rows[0][1].startswith(f"{k:,} of {n:,} ")

    def test_the_worst_segment_and_unit(self, made):
        _, study, section = made
        table = section.table
        worst = min(range(len(table)), key=lambda k: (table["yield"][k], -table["error_max"][k], k))
        assert section.worst_segment == worst and section.worst_unit == table["worst_unit"][worst]
        values = study.values.loc[section.worst_unit]
        quantities = study.spread.quantities(study.fixture)
        for row, q in zip(section.unit_values, quantities):
            assert row[0] == q.key and row[2] == report_tables.quantity_cell(values[q.key], q.field, q.unit)

    def test_the_histogram_counts_every_unit_of_the_worst_segment(self, made):
        analysis, study, section = made
        worst = section.worst_segment
        settle, _ = study.segment_values(worst, "settle_time", analysis.tolerance)
        if np.isfinite(settle).all():
            assert section.quantity == "settle_time"
            values = settle
        else:
            assert section.quantity == "error_at_sample"
            values, _ = study.segment_values(worst, "error_at_sample", analysis.tolerance, analysis.sample_delay)
        counts, edges = np.histogram(values, bins=report_tables.HISTOGRAM_BINS)
        assert np.array_equal(section.histogram.counts, counts) and np.array_equal(section.histogram.edges, edges)
        assert section.histogram.counts.sum() == study.units and section.histogram.missing == 0

    def test_the_yield_curve_is_the_share_of_units_settled_by_each_delay(self, made):
        analysis, study, section = made
        settle, _ = study.segment_values(section.worst_segment, "settle_time", analysis.tolerance)
        delays, fractions = section.delays, section.fractions
        assert delays[0] == 0 and np.all(np.diff(delays) > 0)
        for d, f in zip(delays, fractions):
            assert f == np.mean(settle <= d)
        # A step: flat between the delays, so halfway to the next one it has not risen yet.
        for d, following, f in zip(delays[:-1], delays[1:], fractions[:-1]):
            assert np.mean(settle <= (d + following) / 2) == f

    def test_the_needed_delays_are_the_studys_delay_for(self, made):
        analysis, study, section = made
        for fraction, delay in section.needed:
            expected = study.delay_for(analysis.tolerance, fraction)[section.worst_segment]
            assert delay == expected or (np.isnan(delay) and np.isnan(expected))
        assert [f for f, _ in section.needed] == list(analysis.study_settings["fractions"])

    def test_the_budget_is_the_studys(self, made):
        analysis, study, section = made
        delay = analysis.sample_delay if section.quantity == "error_at_sample" else None
        budget = study.budget(section.worst_segment, section.quantity, analysis.tolerance, delay)
        assert section.budget == budget


class TestStudyPieces:
    def test_yield_curve_counts_ties_once_and_never_a_unit_that_does_not_settle(self):
        delays, fractions = report_tables.yield_curve(np.array([2e-3, 1e-3, np.nan, 1e-3, 0.0]))
        assert delays.tolist() == [0.0, 1e-3, 2e-3] and fractions.tolist() == [0.2, 0.6, 0.8]

    def test_a_histogram_of_equal_values_is_one_narrow_bin_around_them(self):
        h = report_tables.histogram(np.full(5, 2e-4))
        assert h.counts.sum() == 5 and h.edges[0] < 2e-4 < h.edges[-1] and h.edges[-1] - h.edges[0] < 1e-6

    def test_gains_in_percent_and_values_in_their_unit(self):
        assert report_tables.quantity_cell(2e-4, "gain", "") == "+0.02 %"
        assert report_tables.quantity_cell(1.05e-8, "value", "F") == "10.5 nF"

    def test_a_sample_delay_per_segment(self):
        from builders import study_analysis

        delays = [0.5e-3, 0.9e-3, 1e-3]
        analysis = study_analysis(sample_delay=delays)
        section = report_tables.study_section(analysis)
        assert np.array_equal(section.table["sample_time"], analysis.drive.times + np.array(delays))
        assert section.sample_delay == delays[section.worst_segment]
        assert section.settings[4] == ("sample delay", "one per segment, 500 µs to 1 ms after the change")

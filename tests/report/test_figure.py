"""Tests for firstorder.report.figure: a report needs bokeh, never ipywidgets."""

from __future__ import annotations

import ast
from pathlib import Path

import numpy as np
import pytest

import firstorder as fo

PACKAGE = Path(fo.__file__).parent


def _libraries(path: Path) -> set[str]:
    """Top-level names of the libraries a module imports (anywhere in it)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found = {alias.name.split(".")[0] for node in ast.walk(tree) if isinstance(node, ast.Import)
             for alias in node.names}
    found |= {node.module.split(".")[0] for node in ast.walk(tree)
              if isinstance(node, ast.ImportFrom) and node.module and node.level == 0}
    return found


class TestImports:
    def test_report_figure_imports_bokeh_but_not_ipywidgets(self):
        # Reports need bokeh, not a notebook: the figure module stays free of ipywidgets.
        imported = _libraries(PACKAGE / "report" / "figure.py")
        assert "bokeh" in imported and "ipywidgets" not in imported

    def test_only_the_figure_and_the_bench_import_bokeh_and_only_the_bench_ipywidgets(self):
        for path in PACKAGE.rglob("*.py"):
            where = path.relative_to(PACKAGE).as_posix()
            imported = _libraries(path)
            if "bokeh" in imported or "jupyter_bokeh" in imported:
                assert where.startswith("widgets/") or where == "report/figure.py", where
            if "ipywidgets" in imported or "traitlets" in imported:
                assert where.startswith("widgets/"), where


class TestHoldsAndErrorView:
    """The report's plot draws a hold's band on the value it holds, and the error view."""

    def figure(self):
        from bokeh.models import LogScale

        from firstorder.cli import demo_analysis
        from firstorder.report.figure import response_figure

        analysis = demo_analysis()
        table = analysis.settling()
        layout, caption = response_figure(analysis.response, analysis.tolerance, table)
        return analysis, table, layout, caption, LogScale

    def test_the_band_of_a_hold_is_around_its_held_value(self):
        from bokeh.models import VAreaStep

        analysis, table, layout, _, _ = self.figure()
        response_plot = layout.children[0]
        (band,) = [r for r in response_plot.renderers if isinstance(r.glyph, VAreaStep)]
        low, high = np.asarray(band.data_source.data["y1"]), np.asarray(band.data_source.data["y2"])
        centre = (low + high)[:-1] / 2
        assert table["hold"].tolist() == [False, False, False, False, True]
        # Segment 4 holds: its band sits on the value at its change, not on the leak's final value.
        assert centre[4] == pytest.approx(table.loc[4, "start_value"], abs=1e-12)
        assert centre[3] == pytest.approx(table.loc[3, "final"], abs=1e-12)

    def test_the_error_view_is_the_last_plot_on_a_log_axis(self):
        from bokeh.models import Scatter

        analysis, table, layout, caption, LogScale = self.figure()
        errors = layout.children[-1]
        assert isinstance(errors.y_scale, LogScale) and "log scale" in errors.title.text
        (samples,) = [r for r in errors.renderers if isinstance(r.glyph, Scatter)]
        from firstorder.plotting.error_view import FLOOR_FRACTION

        floor = FLOOR_FRACTION * table["tolerance"].min()
        np.testing.assert_array_equal(samples.data_source.data["error"],
                                      np.maximum(table["error_at_sample"].to_numpy(), floor))
        assert "log scale" in caption


class TestToleranceFigures:
    """The tolerance section's histogram and yield curve draw the worst segment's units, recomputed
    here from ``Study.segment_values`` (numpy's histogram; the share of units with settle <= d)."""

    @pytest.fixture(scope="class")
    @staticmethod
    def made():
        from firstorder.cli import demo_analysis
        from firstorder.report.tables import study_section

        analysis = demo_analysis()
        return analysis, analysis.study(progress=False), study_section(analysis)

    @staticmethod
    def source(panel, name):
        from bokeh.models import ColumnDataSource

        (found,) = [s for s in panel.select(type=ColumnDataSource) if s.name == name]
        return {key: np.asarray(value) for key, value in found.data.items()}

    def test_the_histogram_bins_every_unit(self, made):
        from firstorder.report.figure import STUDY_ROOT, histogram_figure

        analysis, study, section = made
        panel = histogram_figure(section)
        data = self.source(panel, "histogram")
        values, _ = study.segment_values(section.worst_segment, section.quantity, analysis.tolerance,
                                         analysis.sample_delay if section.quantity == "error_at_sample" else None)
        counts, edges = np.histogram(values, bins=40)
        assert np.array_equal(data["count"], counts)
        assert np.array_equal(data["left"], edges[:-1]) and np.array_equal(data["right"], edges[1:])
        assert panel.name == STUDY_ROOT and f"Segment {section.worst_segment}" in panel.title.text

    def test_the_yield_curve_is_the_share_of_units_settled_by_each_delay(self, made):
        from firstorder.report.figure import yield_figure

        analysis, study, section = made
        data = self.source(yield_figure(section), "yield")
        settle, _ = study.segment_values(section.worst_segment, "settle_time", analysis.tolerance)
        assert data["delay"].size >= 2
        for d, f in zip(data["delay"], data["fraction"]):
            assert f == np.mean(settle <= d)
        assert data["fraction"][-1] == np.mean(np.isfinite(settle))

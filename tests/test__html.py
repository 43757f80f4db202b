"""Tests for firstorder._html and every notebook display built on it: user text stays text."""

from __future__ import annotations

import numpy as np
import pytest
from builders import HOSTILE, assert_inert, hostile_analysis

import firstorder as fo
from firstorder._html import paragraph, table


class TestHelpers:
    def test_table_and_paragraph_escape_every_cell_and_caption(self):
        assert_inert(table([HOSTILE], [[HOSTILE, 1]], caption=HOSTILE))
        assert_inert(paragraph(HOSTILE))


class TestReprHtmlOfEveryObject:
    """Each ``_repr_html_`` (what a notebook shows) with a hostile part, source, probe and title."""

    @pytest.fixture(scope="class")
    @staticmethod
    def analysis():
        return hostile_analysis()

    def test_fixture_drive_response_analysis(self, analysis):
        for shown in (analysis.fixture, analysis.drive, analysis.response, analysis):
            text = shown._repr_html_()
            assert_inert(text)
            assert "&lt;img" in text, type(shown).__name__

    def test_settling_summary(self, analysis):
        from firstorder.settling.table import settling_summary

        assert_inert(settling_summary(analysis.response, analysis.tolerance)._repr_html_())

    def test_trace_fit(self, analysis):
        t = np.linspace(0, 5e-3, 2001)
        trace = fo.Trace(t, analysis.response.total(t), name="m" + HOSTILE)
        text = fo.fit_trace(trace, analysis.drive)._repr_html_()
        assert_inert(text)
        assert "&lt;img" in text

"""The Bench's panels: the field builders, the derivation, the settling table and summary, the cautions.

Numbers are checked against handbook closed forms (common practice): tau = R C;
a first-order step is within `tol` of its final value after tau ln(step / tol).
"""

from __future__ import annotations

import html
import math

import numpy as np
import pytest

import firstorder as fo
from firstorder.widgets import Bench
from firstorder.widgets import _panels as panels
from firstorder.widgets._session import part_fields

from benches import rc_bench, switched_bench, switched_fixture


class TestBuilders:
    def test_parts_panel_gives_a_field_per_value_and_calls_back(self):
        typed = []
        panel = panels.parts_panel(part_fields(switched_fixture()), lambda key, text: typed.append((key, text)))
        assert list(panel.fields) == ["rs", "k1.r_on", "k1.r_off", "ch", "rin"]
        assert panel.fields["k1.r_on"].value == "200 mΩ" and "fo-part-k1-r_on" in panel.fields["k1.r_on"]._dom_classes
        panel.fields["rin"].value = "1M"
        assert typed == [("rin", "1M")]

    def test_view_panel_offers_the_state_and_every_probe(self):
        panel = panels.view_panel(switched_fixture(), ("total", "forced"), ("total",), None, print, print, print)
        assert [value for _, value in panel.probe_selector.options] == ["", "i_rs"]
        assert panel.overlays["total"].value and not panel.overlays["forced"].value

    def test_status_is_escaped_and_empty_when_all_is_well(self):
        assert panels.status_html({}) == ""
        text = panels.status_html({"r": "r: '<b>' is not a number"})
        assert "&lt;b&gt;" in text and "last good result" in text


class TestSettlingTable:
    def test_a_long_table_shows_the_least_margin_rows(self):
        # 60 steps alternately short (0.5 tau) and long (20 tau): only the short ones fail.
        fixture = fo.Fixture.rc(r="1k", c="1u")
        times = np.cumsum([0.0] + [0.5e-3 if k % 2 == 0 else 20e-3 for k in range(59)])
        drive = fo.Drive(times, end=float(times[-1]) + 20e-3, vin=[5.0 * (k % 2) for k in range(60)])
        bench = Bench(fixture, drive, tolerance=fo.Tolerance.absolute("1m"))
        bench.tabs.selected_index = 3
        text = bench.settling_panel.value
        assert "the 40 segments with the least margin, of 60" in text
        # Every short segment after a step (ends first: e^-0.5 of 5 V is left) is listed: 29, since
        # segment 0 starts at its own level.
        assert text.count("ends first") == 29 and text.count(">NO<") == 29
        assert "3.0327 V" in text  # 5 V e^-0.5 (common practice)


class TestDerivationPanel:
    def test_segment_shows_symbols_then_numbers(self):
        bench = switched_bench()
        bench.select_segment(2)  # k1 open: the capacitor discharges into rin alone
        text = bench.derivation.value
        assert "Segment 2" in text and "k1 open" in text
        assert text.index("Time constant") < text.index("This segment in numbers")
        assert "ch" in text and "rin" in text
        # tau = rin * ch = 1 s (handbook, common practice)
        assert r"\tau = 1\ \mathrm{s}" in text  # in engineering notation with its unit
        np.testing.assert_allclose(bench.sources["selection"].data["left"], [2e-3])

    def test_a_negative_final_value_is_bracketed_after_a_minus(self):
        bench = Bench(fo.Fixture.rc(r="1k", c="1u"), fo.Drive([0, "1m"], end="3m", vin=[2.0, -1.0]))
        bench.select_segment(1)
        text = html.unescape(bench.derivation.value)
        assert r"- \mathrm{-" not in text  # "2 V - -1 V" reads as a slip
        assert r"- \left(\mathrm{-1\ V}\right)" in text


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
        # A limit in volts does not become one in amps: an error beside the field says so.
        assert bench.settling is None
        assert "tolerance" in bench.error and "i_rs" in bench.error


class TestCautionsPanel:
    def test_high_voltage_is_flagged(self):
        fixture = fo.Fixture.rc(r="1k", c="10u")
        bench = Bench(fixture, fo.Drive.steps([(0, 0.0), ("1m", 100.0)], end="100m"))
        # 100 V is above the 60 V DC limit the cautions use (from memory of safety practice)
        assert "fo-cautions" in bench.cautions_panel.value
        assert "60 V" in bench.cautions_panel.value
        bench.edit_cell(1, "vin", "5")
        assert bench.cautions_panel.value == ""


    def test_cautions_are_compact_and_the_reminder_is_said_once(self):
        # 100 V on 10 µF: a voltage caution and (½CV² = 0.05 J, below 0.35 J) no energy one;
        # 400 V on 10 µF: both (½CV² = 0.8 J), each ending with the same reminder.
        bench = Bench(fo.Fixture.rc(r="1k", c="10u"), fo.Drive.steps([(0, 0.0), ("1m", 400.0)], end="200m"))
        assert len(bench.response.cautions) == 2
        text = bench.cautions_panel.value
        assert text.count("These are reminders") == 1
        assert text.count("<details") == 2  # the advice folded, one line per finding shown
        assert all(str(c).split(". ")[0] in html.unescape(text) for c in bench.response.cautions)


class TestCurveButtons:
    def test_shown_and_hidden_curves_look_different_and_follow_a_click(self):
        bench = rc_bench()
        on, off = bench.overlays["total"], bench.overlays["natural"]
        assert on.value and not off.value
        assert (on.button_style, on.icon) != (off.button_style, off.icon)
        assert on.button_style and not off.button_style
        off.value = True
        assert (off.button_style, off.icon) == (on.button_style, on.icon)
        bench.session.curves = ("forced",)  # set elsewhere (a linked widget): the buttons follow
        assert not bench.overlays["total"].button_style and bench.overlays["forced"].button_style


class TestHostileNamesStayText:
    """A part named like an HTML tag shows as its name on every panel, never as HTML."""

    @pytest.fixture(scope="class")
    @staticmethod
    def bench():
        from builders import hostile_drive, hostile_fixture

        bench = Bench(hostile_fixture(), hostile_drive(), tolerance=fo.Tolerance.absolute("1m"), sample_delay="0.5m")
        bench.select_segment(1)
        return bench

    def test_derivation_panel(self, bench):
        from builders import HOSTILE, assert_inert

        text = panels.derivation_html(bench.session)
        assert_inert(text)
        assert html_escape(HOSTILE, quote=False)[:20] in text or html_escape(HOSTILE)[:20] in text

    def test_info_settling_status_cautions_and_header(self, bench):
        from builders import HOSTILE, assert_inert

        for text in (panels.info_html(bench.session, "line"), panels.settling_html(bench.session),
                     panels.status_html({"r": f"r{HOSTILE}: 'x' is not a number"}),
                     panels.cautions_html([f"{HOSTILE} holds 1 kV"]), panels.error_html(HOSTILE),
                     panels.header_html(bench.session.fixture, bench.session.drive)):
            assert_inert(text)

    def test_every_html_widget_of_the_bench(self, bench):
        import ipywidgets as widgets

        from builders import assert_inert

        seen = 0
        stack = [bench]
        while stack:
            widget = stack.pop()
            if isinstance(widget, (widgets.HTML, widgets.HTMLMath)):
                assert_inert(widget.value)
                seen += 1
            stack.extend(getattr(widget, "children", ()))
        assert seen >= 8

    def test_drive_table_titles_are_escaped(self, bench):
        from builders import HOSTILE

        editor = panels.drive_editor(bench.session.table, print, print, print)
        titles = [column.title for column in editor.drive_table.columns]
        # BokehJS writes a title into the table's header as HTML.
        assert not any(HOSTILE in title for title in titles)
        assert any(html_escape(f"v{HOSTILE} (V)") == title for title in titles), titles


def html_escape(text: str, quote: bool = True) -> str:
    import html

    return html.escape(text, quote=quote)


def test_a_part_name_with_spaces_gives_a_field_one_css_class():
    from builders import hostile_fixture

    panel = panels.parts_panel(part_fields(hostile_fixture()), print)
    for field in panel.fields.values():
        classes = [c for c in field._dom_classes if c.startswith("fo-part-")]
        # The browser refuses a class with a space in it, and the Bench then fails to show.
        assert len(classes) == 1 and not any(ch.isspace() or ch in "<>\"'" for ch in classes[0]), classes


class TestSetupPanelWords:
    def test_fields_show_their_units_and_start_says_what_it_is(self):
        bench = rc_bench()
        text = html.unescape(" ".join(w.value for w in _html_widgets(bench._panels[1].box)))
        assert "the capacitor's starting voltage (V)" in text and ">V<" in text
        coil = Bench(fo.Fixture.rl(r="10", l="1m"), fo.Drive.steps([(0, 0.0), ("1m", 1.0)], end="5m"))
        text = html.unescape(" ".join(w.value for w in _html_widgets(coil._panels[1].box)))
        assert "the coil's starting current (A)" in text

    def test_errors_name_the_fields_as_labelled(self):
        bench = rc_bench()
        bench.setup_fields["initial"].value = "warm"
        bench.setup_fields["sample_delay"].value = "-1m"
        assert bench.session.errors["initial"].startswith("start: ")
        assert bench.session.errors["sample_delay"].startswith("sample at: ")
        bench.undo(), bench.undo()
        bench.edit_cell(1, "time", "9m")
        # the table's words and engineering notation, not drive.times[2]: 0.004
        assert bench.session.errors["drive"] == (
            "drive table row 2, change at: 4 ms does not come after row 1's change at 9 ms; "
            "the changes must be in time order")


def _html_widgets(box):
    import ipywidgets as widgets

    found = []
    for child in getattr(box, "children", ()):
        found += [child] if isinstance(child, widgets.HTML) else _html_widgets(child)
    return found


class TestErrorViewTab:
    def test_the_tab_draws_the_error_view_of_the_segments_in_view(self):
        from bokeh.models import LogScale, Scatter

        from firstorder.cli import demo_analysis
        from firstorder.plotting.error_view import error_view

        analysis = demo_analysis()
        bench = Bench(analysis.fixture, analysis.drive, initial=analysis.initial, tolerance=analysis.tolerance,
                      sample_delay="150u")
        assert bench.error_view.children == ()  # drawn only when someone looks
        bench.tabs.selected_index = panels.TAB_TITLES.index("Error view")
        figure = bench.error_view.children[-1]._model
        assert isinstance(figure.y_scale, LogScale)
        (samples,) = [r for r in figure.renderers if isinstance(r.glyph, Scatter)]
        expected = error_view(bench.response, bench.settling)
        np.testing.assert_array_equal(samples.data_source.data["error"], expected.sample_error)
        # The hold (segment 4) is judged as droop in the tab as in the table.
        assert bench.settling["hold"].tolist()[-1] and not bench.settling["ok"].tolist()[-1]
        before = bench.error_view.children[-1]
        bench.set_view(0.0, 0.5e-3)
        assert bench.error_view.children[-1] is not before
        (samples,) = [r for r in bench.error_view.children[-1]._model.renderers if isinstance(r.glyph, Scatter)]
        assert len(samples.data_source.data["error"]) == 3  # segments 0-2 reach into the view

    def test_without_a_tolerance_the_tab_says_what_to_give(self):
        bench = Bench(fo.Fixture.rc(r="1k", c="1u"), fo.Drive([0, "1m"], end="3m", vin=[1.0, 0.0]))
        bench.tabs.selected_index = panels.TAB_TITLES.index("Error view")
        assert "Give a tolerance" in bench.error_view.children[0].value


class TestPlainLabels:
    def test_probes_read_in_plain_words_in_show_and_on_the_axis(self):
        fixture = fo.Fixture()
        fixture.voltage_source("vsup", "sup", "gnd")
        fixture.inductor("coil", "sup", "mid", "200m")
        fixture.resistor("rcoil", "mid", "drain", "400")
        fixture.resistor("rdrv", "drain", "gnd", "10")
        fixture.probe("v_coil", node="sup", reference="drain")
        fixture.probe("v_drain", node="drain")
        fixture.probe("i_r", through="rcoil")
        bench = Bench(fixture, fo.Drive.steps([(0, 0.0), ("1m", 24.0)], end="5m", name="vsup"))
        labels = [label for label, _ in bench.probe_selector.options]
        assert labels == ["state: current through coil", "v_coil: voltage sup → drain", "v_drain: voltage at drain",
                          "i_r: current through rcoil"]
        bench.probe_selector.value = "v_coil"
        assert bench.plots.response_figure.yaxis[0].axis_label == "v_coil: voltage sup → drain"

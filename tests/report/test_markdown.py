"""Tests for firstorder.report.markdown and the derivation's LaTeX in it."""

from __future__ import annotations

import re

from builders import relay_analysis

import firstorder as fo
from firstorder.analysis import Analysis


class TestMarkdown:
    def test_sections(self):
        text = relay_analysis().markdown()
        for heading in ("# Relay and hold capacitor", "## Notes", "## Summary", "## Fixture", "## Drive",
                        "## Settling", "## Cautions", "## Derivations", "### k1 closed", "### k1 open"):
            assert f"\n{heading}\n" in f"\n{text}"
        assert "| rs | resistor | drv → a | '1k' | 1 kΩ |" in text
        assert "$$" in text

    def test_without_derivations(self):
        assert "## Derivations" not in relay_analysis().markdown(derivations=False)

    def test_cells_cannot_break_the_table(self):
        fx = fo.Fixture.rc(r="1k", c="1n")
        a = Analysis(fx, fo.Drive.steps([(0, 1.0)], end="1m"), title="a | b\nc")
        assert "# a \\| b c" in a.markdown(derivations=False)


class TestDerivationLatex:
    def test_names_with_underscores_are_escaped_in_text(self):
        # LaTeX reads "_" in \text{} as an error; part names like c_hold are common.  The
        # underscore is set in math mode, between two \text{} pieces.
        from firstorder.cli import demo_analysis

        latex = demo_analysis().derivations()[0][1].latex()
        pieces = re.findall(r"\\text\{([^}]*)\}", latex)
        assert pieces and not [piece for piece in pieces if "_" in piece]
        assert r"\text{Equivalent seen by capacitor c}\_\text{hold (k}\_\text{hold closed):}" in latex

    def test_final_value_written_at_infinity(self):
        latex = relay_analysis().derivations()[0][1].latex()
        # the state is named as typed (upright "ch"), see tests/symbolic/test_names.py
        assert r"v_{\mathrm{ch}}{\left(\infty \right)}" in latex and r"{\left(t \right)}(\infty)" not in latex


def test_hostile_names_stay_text_outside_the_maths():
    from builders import assert_inert, hostile_analysis

    text = hostile_analysis().markdown(derivations=False)
    # Markdown passes inline HTML through to the page it becomes: the names must be entities.
    assert_inert(text)
    assert "&lt;img src=x" in text


class TestToleranceStudy:
    def test_the_section_with_the_studys_numbers(self):
        from builders import study_analysis

        analysis = study_analysis()
        text = analysis.markdown(derivations=False)
        study = analysis.study(progress=False)
        passing = study.passing(analysis.tolerance, analysis.sample_delay)
        table = study.settling(analysis.tolerance, analysis.sample_delay)
        assert text.index("## Settling") < text.index("## Tolerance study") < text.index("## Cautions")
        assert f"| passing units | {passing.passing:,} of {passing.units:,} have every sample inside" in text
        assert f"{passing.low:.4%} to {passing.high:.4%}" in text
        for k in range(len(table)):
            assert f"| {table['yield'][k]:.2%} | {table['worst_unit'][k]} |" in text
        for heading in ("### Worst segment", "### Worst unit"):
            assert f"\n{heading}" in text
        assert "| k1.r_on | 100 mΩ | 50m .. 300m | — |" in text and "| ch | 100 nF | ±5% | -750ppm/K |" in text

    def test_without_a_spread_no_section(self):
        assert "Tolerance study" not in relay_analysis().markdown(derivations=False)

    def test_hostile_names_in_the_spread_stay_text(self):
        from builders import assert_inert

        hostile = "<img src=x onerror=alert(1)>"
        fx2 = fo.Fixture()
        fx2.voltage_source("vin", "in", "gnd")
        fx2.resistor("r" + hostile, "in", "out", "1k")
        fx2.capacitor("c", "out", "gnd", "1u")
        analysis = Analysis(fx2, fo.Drive([0], end="10m", vin=[1.0]), tolerance=fo.Tolerance.absolute("1m"),
                            spread=fo.Spread({"r" + hostile: "1%"}), units=20)
        text = analysis.markdown(derivations=False)
        assert_inert(text, hostile)
        assert "r&lt;img src=x onerror=alert(1)&gt;" in text

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

"""Tests for firstorder.report.mathml: presentation markup only, every name escaped."""

from __future__ import annotations

import pytest
import sympy as sp

from firstorder.report import mathml as report_mathml


class TestMathml:
    def test_presentation_markup(self):
        r, c = sp.symbols("r c", positive=True)
        text = report_mathml.mathml(sp.Eq(sp.Symbol("tau"), r * c))
        assert text.startswith('<math xmlns="http://www.w3.org/1998/Math/MathML" display="block">')
        # Without a derivation's names a symbol "tau" is a name as typed (as in to_latex).
        assert "<mi>tau</mi><mo>=</mo><mrow><mi>c</mi><mo>&#xB7;</mo><mi>r</mi></mrow>" in text

    @pytest.mark.parametrize("name", ["<script>alert(1)</script>", "a&b", "x\"><img src=x onerror=alert(1)>"])
    def test_names_are_escaped(self, name):
        t = sp.Symbol("t")
        text = report_mathml.mathml(sp.Eq(sp.Function(name)(t), sp.Symbol(name) + 1))
        assert "<script" not in text and "<img" not in text
        check = report_mathml._MathMLCheck()
        check.feed(text)
        assert check.clean

    def test_falls_back_to_latex_text_if_markup_is_not_mathml(self, monkeypatch):
        monkeypatch.setattr(report_mathml, "_body", lambda *a, **k: "<mi>x</mi><iframe></iframe>")
        assert report_mathml.mathml(sp.Symbol("x")) == "<code>x</code>"


def test_mathml_writes_decay_as_a_power_of_e():
    # Engineers write v * e^(-t/tau); sympy's MathML printer alone gives v / e^(t/tau).
    import sympy as sp

    from firstorder.report.mathml import mathml

    t, tau, v = sp.symbols("t tau v", positive=True)
    text = mathml(v * sp.exp(-t / tau))
    assert "<msup><mi>e</mi><mrow><mo>&#x2212;</mo>" in text
    assert "<mfrac><mi>v</mi>" not in text

"""Derivation text: names of parts and sources appear as the engineer typed them."""

from __future__ import annotations

import firstorder as fo


class TestDerivationLatex:
    def test_names_are_not_read_as_accents_or_fonts(self):
        # sympy by itself writes a symbol "vcal" as a calligraphic v and "vbar" as v with a bar
        # (its naming convention for accents, from sympy's printing docs); a source named
        # vcal must stay vcal in the derivation.
        fixture = fo.Fixture()
        fixture.voltage_source("vcal", "src", "gnd")
        fixture.resistor("r_filter", "src", "node", "4.99k")
        fixture.capacitor("c_filter", "node", "gnd", "330n")
        text = fixture.derivation().latex()
        assert r"\mathcal" not in text
        assert r"\mathrm{vcal}" in text
        assert r"r_{\mathrm{filter}}" in text

    def test_switch_symbol_keeps_its_digit(self):
        fixture = fo.Fixture()
        fixture.voltage_source("vin", "a", "gnd")
        fixture.switch("k1", "a", "b", r_on="1")
        fixture.resistor("r", "b", "c", "1k")
        fixture.capacitor("c", "c", "gnd", "1u")
        text = fixture.derivation(k1=True).latex()
        assert r"\mathrm{k1}_{\mathrm{on}}" in text
        assert "k_{1 on}" not in text

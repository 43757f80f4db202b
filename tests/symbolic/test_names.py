"""symbolic.names: one symbol namespace per derivation, and names written in LaTeX as typed.

The expected LaTeX is written by hand; sympy's own naming conventions (which these
names must not fall into) are from sympy's printing documentation.
"""

import pytest
import sympy as sp
from builders import relay_fixture

import firstorder as fo
from firstorder.symbolic.names import derivation_names, latex_name, latex_text


class TestLatexName:
    @pytest.mark.parametrize(("name", "expected"), [
        ("c", "c"),
        ("r_bus_leak", r"r_{\mathrm{bus\_leak}}"),  # the first underscore starts the subscript (upright: a word)
        ("vcal", r"\mathrm{vcal}"),           # not sympy's calligraphic v
        ("rbar", r"\mathrm{rbar}"),           # not sympy's r with a bar
        ("k1_on", r"\mathrm{k1}_{\mathrm{on}}"),  # not k with subscript "1 on"
        ("v_c_hold", r"v_{\mathrm{c\_hold}}"),
        ("r#1", r"\mathrm{r\#1}"),
        ("i_50%", r"i_{\mathrm{50\%}}"),
        ("a^b", r"\mathrm{a\hat{}b}"),
        ("v_0'", r"v_{0}'"),                 # a prime after the subscript, as by hand
        ("t''", r"t''"),
        ("a_", r"\mathrm{a\_}"),              # not the same as "a"
        ("'", r"'"),
    ])
    def test_names_as_typed(self, name, expected):
        assert latex_name(name) == expected

    def test_names_are_not_read_as_latex_modifiers(self):
        # sympy would print a symbol named "vcal" as a calligraphic v and "rbar" as r-bar.
        fx = fo.Fixture()
        fx.voltage_source("vcal", "src", "gnd")
        fx.resistor("rbar", "src", "n", "1k")
        fx.capacitor("c", "n", "gnd", "1u")
        text = fx.derivation().latex()
        assert r"\mathrm{vcal}" in text and r"\mathrm{rbar}" in text
        assert r"\mathcal" not in text and r"\bar" not in text


class TestLatexText:
    def test_special_characters_leave_the_text(self):
        # LaTeX refuses "_" (and the others) inside \text{}: each is set between two pieces.
        text = latex_text("c_hold at 5% & {k1}")
        pieces = text.split(r"\text{")
        assert all(c not in piece.split("}")[0] for piece in pieces for c in "_%&{")
        assert text == r"c}\_\text{hold at 5}\%\text{ }\&\text{ }\{\text{k1}\}\text{"

    def test_plain_text_is_unchanged(self):
        assert latex_text("Equivalent seen by capacitor c (no switches)") == \
            "Equivalent seen by capacitor c (no switches)"


class TestDerivationNamesAsTyped:
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
        # A switch's resistance is written as a resistance named for its switch: R_{k1,on}.
        assert r"R_{\mathrm{k1,on}}" in text
        assert "k_{1 on}" not in text and r"\mathrm{k1}_{on}" not in text


class TestDerivationNames:
    def test_every_symbol_of_a_configuration(self):
        relay = relay_fixture()
        names = derivation_names(relay.netlist, (True, False))
        s = names.symbols
        assert list(s) == ["vdac", "ib", "rs", "k1", "ch", "r_leak", "k2", "r_meter", "t", "initial", "state"]
        # A switch is its resistance in the configuration; parts are positive, levels and states real.
        assert s["k1"] == sp.Symbol("k1_on", positive=True) and s["k2"] == sp.Symbol("k2_off", positive=True)
        assert s["rs"].is_positive and s["vdac"].is_real and s["vdac"].is_positive is None
        assert s["t"] == sp.Symbol("t", nonnegative=True) and s["initial"] == sp.Symbol("v_0", real=True)
        assert names.state == sp.Symbol("v_ch", real=True) and s["state"] is names.state
        assert names.state_function == sp.Function("v_ch")(s["t"])
        assert (names.resistance, names.equivalent) == (sp.Symbol("R_th"), sp.Symbol("V_th"))
        assert list(names.probes) == [p.name for p in relay.probes]

    def test_an_inductor_is_named_by_its_current_and_norton(self):
        names = derivation_names(fo.Fixture.rl(r="47", l="10m").netlist, ())
        assert names.state == sp.Symbol("i_l", real=True) and names.start == sp.Symbol("i_0", real=True)
        assert (names.resistance, names.equivalent) == (sp.Symbol("R_N"), sp.Symbol("I_N"))

    def test_the_derivation_carries_its_names(self):
        relay = relay_fixture()
        d = relay.derivation(k1=False, k2=True)
        assert d.symbols is d.names.symbols and d.state == d.names.state_function
        assert d.names == derivation_names(relay.netlist, (False, True))

    def test_tau_is_written_as_tau_but_a_part_named_tau_as_typed(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("tau", "in", "a", "1k")
        fx.capacitor("c", "a", "gnd", "1n")
        names = derivation_names(fx.netlist, ())
        assert names.latex(names.time_constant) == r"\tau"
        assert names.latex(names.symbols["tau"]) == r"\mathrm{tau}"

    def test_one_state_per_switch(self):
        relay = relay_fixture()
        with pytest.raises(ValueError, match=r"1 given for 2 switches \['k1', 'k2'\]"):
            derivation_names(relay.netlist, (True,))

    def test_a_source_named_like_the_start_is_another_symbol(self):
        fx = fo.Fixture()
        fx.voltage_source("v_0", "in", "gnd")
        fx.resistor("r", "in", "a", "1k")
        fx.capacitor("c", "a", "gnd", "1n")
        names = derivation_names(fx.netlist, ())
        assert names.symbols["v_0"] != names.start
        assert names.start.name == "v_0'" and names.latex(names.start) == "v_{0}'"


def colliding_fixture() -> fo.Fixture:
    """Every part and probe named like a symbol the derivation makes (our own scenario)."""
    fx = fo.Fixture()
    fx.voltage_source("v_0", "in", "gnd")           # the start's name
    fx.voltage_source("v_c", "ref", "gnd")          # the state's name
    fx.resistor("k1_on", "in", "a", "1k")           # switch k1's resistance, closed
    fx.switch("k1", "a", "c_node", r_on="10", r_off="1G")
    fx.resistor("k1_off", "ref", "c_node", "100k")  # ... and open
    fx.resistor("tau", "c_node", "gnd", "1M")
    fx.resistor("R_th", "ref", "gnd", "10")
    fx.resistor("V_th", "in", "gnd", "20")
    fx.resistor("state", "ref", "b", "3k")
    fx.resistor("v_0'", "b", "gnd", "4k")           # the start's name with a prime, too
    fx.capacitor("c", "c_node", "gnd", "1u")
    fx.probe("k1_on", through="k1")                 # a probe named like a part
    fx.probe("v_c'", node="c_node")
    return fx


class TestOneNamespace:
    @pytest.mark.parametrize("closed", [True, False])
    def test_no_two_symbols_share_a_name_or_a_latex_form(self, closed):
        # sympy symbols with the same name are the same symbol: every name must be apart.
        names = derivation_names(colliding_fixture().netlist, (closed,))
        made = [*names.symbols.values(), *names.probes.values(), names.time_constant, names.resistance,
                names.equivalent]
        assert len({symbol.name for symbol in made}) == len(made)
        assert len(set(made)) == len(made)
        assert len({names.latex(symbol) for symbol in made}) == len(made)
        s = names.symbols
        assert s["v_0"] != names.start and s["v_c"] != names.state and s["state"] != names.state
        assert s["k1"] != s["k1_on"] and s["k1"] != s["k1_off"]
        # Typed names first: the probe k1_on yields to the resistor, the switch to both.
        assert names.probes["k1_on"].name == "k1_on'" and names.probes["v_c'"].name == "v_c'"
        assert s["k1"].name == ("k1_on''" if closed else "k1_off'")
        assert (names.start.name, names.state.name) == ("v_0''", "v_c''")  # "v_0'" a part, "v_c'" a probe
        assert s["state'"] is names.state and names.state_function.func.__name__ == names.state.name
        assert (names.time_constant.name, names.resistance.name, names.equivalent.name) == ("tau'", "R_th'", "V_th'")

    def test_the_derivation_uses_the_parts_as_parts(self):
        # Before: tau came out as 2 c k1_on (the resistor taken for the switch), the natural
        # response as 0 (the source v_0 taken for the start).
        fx = colliding_fixture()
        d = fx.derivation(k1=True)
        s = d.symbols
        assert d.natural != 0 and d.natural.has(d.names.start) and not d.natural.has(d.names.symbols["state"])
        assert d.tau.has(s["k1"]) and d.tau.has(s["k1_on"])
        assert float(d.substitute(d.tau)) == pytest.approx(fx.time_constant(k1=True), rel=1e-12)
        assert s["v_0"] in d.final.free_symbols and s["v_c"] in d.final.free_symbols

"""symbolic.steps: the steps written once, checked against sympy.dsolve and nodal equations by hand,
and printed the same way everywhere (LaTeX, Markdown, the report's MathML).

Every network here is a scenario of our own invention.
"""

import html
import itertools
import re

import pytest
import sympy as sp
from builders import relay_fixture

import firstorder as fo
from firstorder.analysis import Analysis
from firstorder.symbolic.steps import PowerOfE, Step, derivation_steps, step_latex, to_latex


def by_caption(derivation):
    return {step.caption: step.equations for step in derivation_steps(derivation)}


def in_full(derivation, expression):
    """A step's expression with R, the equivalent and tau written out, and e^x as exp."""
    names = derivation.names
    full = expression.subs({names.resistance: derivation.resistance, names.equivalent: derivation.equivalent,
                            names.time_constant: derivation.tau})
    return full.replace(PowerOfE, sp.exp)


class TestText:
    def test_latex_steps(self):
        d = relay_fixture().derivation(k1=True, k2=False)
        text = d.latex()
        assert r"v_{ch}{\left(\infty \right)} =" in text  # not v_ch(t)(∞)
        assert r"{\left(t \right)}{\left(\infty" not in text
        assert r"r_{leak}" in text and "i_{k1}" in text
        for caption in ("Equivalent seen by capacitor ch", "The ODE", "Time constant", "Zero-input + zero-state",
                        "Natural + forced", "Probe i", "With the part values"):
            assert caption in text or caption.replace("_", r"}\_\text{") in text
        assert d._repr_latex_().startswith("$$") and "**The ODE**" in d._repr_markdown_()

    def test_holding_configuration_says_so(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("r", "in", "a", "1k")
        fx.switch("k", "a", "b")
        fx.capacitor("c_hold", "b", "gnd", "1n")
        text = fx.derivation(k=False).latex()
        assert "No resistive path" in text and "nan" not in text
        assert r"v_{c\_hold}" in text


class TestToLatex:
    t = sp.Symbol("t", nonnegative=True)
    v = sp.Function("v_ch")(t)

    def test_the_state_its_final_value_and_its_rate(self):
        assert to_latex(self.v) == r"v_{ch}{\left(t \right)}"
        assert to_latex(self.v.subs(self.t, sp.oo)) == r"v_{ch}{\left(\infty \right)}"
        assert to_latex(sp.Derivative(self.v, self.t)) == r"\frac{d v_{ch}}{dt}"
        # A second derivative is left to sympy's own form.
        assert to_latex(sp.Derivative(self.v, (self.t, 2))) == r"\frac{d^{2}}{d t^{2}} v_{ch}{\left(t \right)}"

    def test_decay_as_a_power_of_e(self):
        names = fo.Fixture.rc(r="1k", c="1u").derivation().names
        assert to_latex(PowerOfE(-self.t / names.time_constant), names) == r"e^{-t/\tau}"
        assert to_latex(PowerOfE(-self.t / (sp.Symbol("r") * sp.Symbol("c")))) == r"e^{-t/\left(c \, r\right)}"
        assert to_latex(PowerOfE(-self.t)) == r"e^{- t}"

    def test_factors_are_set_apart_but_not_before_a_bracket(self):
        rbar, vcal, r = sp.Symbol("rbar"), sp.Symbol("vcal"), sp.Symbol("r")
        assert to_latex(rbar * vcal) == r"\mathrm{rbar} \, \mathrm{vcal}"  # not one word "rbarvcal"
        assert to_latex(vcal * (r + rbar)) == r"\mathrm{vcal} \left(r + \mathrm{rbar}\right)"
        assert to_latex(sp.Float(2.5e-9, 4) * vcal) == r"2.5 \cdot 10^{-9} \, \mathrm{vcal}"

    def test_sums_keep_the_order_they_were_built_in(self):
        a, b = sp.symbols("a b")
        assert to_latex(sp.Add(b, a, evaluate=False)) == "b + a"
        assert to_latex(sp.Add(a, 0, evaluate=False)) == "a + 0"


class TestStepLatex:
    def test_equations_side_by_side_and_chained(self):
        r, c, tau, x = sp.symbols("r c tau x")
        step = Step("any", (sp.Eq(tau, r * c), sp.Eq(tau, sp.Float(1e-3, 4)), sp.Eq(x, 1, evaluate=False)))
        # Written by hand: one chain for tau, then x beside it.
        assert step_latex(step) == r"\mathrm{tau} = c \, r = 0.001,\quad x = 1"


class TestStepsAgainstTheOutside:
    @pytest.mark.parametrize("states", [(True, True), (True, False), (False, True)])
    def test_written_solution_solves_the_ode_by_dsolve(self, states):
        relay = relay_fixture()
        d = relay.derivation(k1=states[0], k2=states[1])
        x = d.state.func
        # Reference: sympy.dsolve of the derivation's ODE with x(0) = initial.
        solved = sp.dsolve(d.ode, d.state, ics={x(0): d.symbols["initial"]}).rhs
        steps = by_caption(d)
        for caption in ("Zero-input + zero-state", "Natural + forced"):
            (equation,) = steps[caption]
            assert equation.lhs == d.state
            assert sp.simplify(in_full(d, equation.rhs) - solved) == 0, caption

    def test_law_and_ode_are_kcl_written_by_hand(self):
        relay = relay_fixture()
        d = relay.derivation(k1=True, k2=True)
        s, v = d.symbols, d.state
        # By hand: node a is rs -> k1 (r_on); ch sees (vdac - v)/(rs + k1_on) + ib - v/r_leak - v/r_meter.
        current = (s["vdac"] - v) / (s["rs"] + s["k1"]) + s["ib"] - v / s["r_leak"] - v / s["r_meter"]
        steps = by_caption(d)
        (law,) = steps["Circuit law: KCL at the capacitor, with the Thevenin equivalent"]
        (ode,) = steps["The ODE"]
        assert law.lhs == s["ch"] * sp.Derivative(v, s["t"]) and ode.lhs == sp.Derivative(v, s["t"])
        assert sp.simplify(in_full(d, law.rhs) - current) == 0
        assert sp.simplify(in_full(d, ode.rhs) - current / s["ch"]) == 0

    def test_inductor_law_is_kvl_written_by_hand(self):
        d = fo.Fixture.rl(r="47", l="10m").derivation()
        s, i = d.symbols, d.state
        (law,) = by_caption(d)["Circuit law: KVL around the inductor, with the Norton equivalent"]
        # By hand: l di/dt = vin - r i.
        assert sp.simplify(in_full(d, law.rhs) - (s["vin"] - s["r"] * i)) == 0
        assert [e.lhs for e in by_caption(d)["Equivalent seen by inductor l (no switches)"]] == [
            sp.Symbol("R_N"), sp.Symbol("I_N")]

    def test_time_constant_step_and_numbers(self):
        relay = relay_fixture()
        d = relay.derivation(k1=True, k2=False)
        rule, full = by_caption(d)["Time constant"]
        assert sp.simplify(in_full(d, rule.rhs) - full.rhs) == 0
        *parts, tau = by_caption(d)["With the part values (SI units)"]
        # The numeric path (solved independently by the MNA) to the 4 digits shown.
        assert float(tau.rhs) == pytest.approx(relay.time_constant(k1=True, k2=False), rel=1e-3)
        assert {e.lhs for e in parts} == set(d.values)

    def test_holding_steps_keep_the_zero_term(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("r", "in", "a", "1k")
        fx.switch("k", "a", "b")
        fx.capacitor("c_hold", "b", "gnd", "1n")
        d = fx.derivation(k=False)
        captions = [step.caption for step in derivation_steps(d)]
        assert captions[0] == "No resistive path for capacitor c_hold (k open): the state holds"
        assert "Final value with the part values" not in captions
        text = dict(d.steps())
        assert text["Zero-input + zero-state"].endswith(r"= v_{0} + 0")
        assert text["Natural + forced"].endswith(r"= 0 + v_{0}")
        assert text["Time constant"] == r"\tau = \infty"


class TestOneSourceForEveryForm:
    def test_latex_markdown_and_steps_agree(self):
        relay = relay_fixture()
        for states in itertools.product([True, False], repeat=2):
            d = relay.derivation(k1=states[0], k2=states[1])
            captions = [step.caption for step in derivation_steps(d)]
            assert [caption for caption, _ in d.steps()] == captions
            # Markdown's captions escape its own marks (\_ shows as _).
            shown = [re.sub(r"\\(.)", r"\1", c) for c in re.findall(r"^\*\*(.*)\*\*$", d.markdown(), re.M)]
            assert shown == captions
            assert d.latex().count(r"&\quad") == len(captions)

    def test_the_report_mathml_has_the_same_steps(self):
        from firstorder.cli import demo_analysis

        analysis = demo_analysis()
        section = analysis.to_html().split("<section id=derivations>")[1].split("</section>")[0]
        items = [html.unescape(item) for item in re.findall(r"<li>(.*?)</li>", section, re.S)]
        expected = [step for _, d in analysis.derivations() for step in derivation_steps(d)]
        assert [item.split("<div class=eq>")[0] for item in items] == [step.caption for step in expected]
        assert [item.count("<div class=eq>") for item in items] == [len(step.equations) for step in expected]
        latex_captions = [caption for _, d in analysis.derivations() for caption, _ in d.steps()]
        assert latex_captions == [step.caption for step in expected]

    def test_the_report_writes_the_decay_as_a_power_of_e(self):
        relay = relay_fixture()
        analysis = Analysis(relay, fo.Drive([0], end="1m", vdac=[1.0], ib=[0.0], k1=[1], k2=[0]))
        section = analysis.to_html().split("<section id=derivations>")[1].split("</section>")[0]
        zero_input = section.split("Zero-input + zero-state")[1].split("</li>")[0]
        assert "<msup><mi>e</mi><mrow><mo>-</mo>" in zero_input and "exp" not in zero_input


#: Names the netlist allows that printers have to take care of (LaTeX comments, braces, markup).
HOSTILE = ["c_5%", "c%s", "r%d%%", "r_{x}", "r\\y", "r#1", "r&b", "v$", "r^2", "r~", "<img src=x>", "r*b*", "v_0"]


def unescaped(text: str, character: str) -> int:
    """How many times `character` stands in `text` without a backslash before it."""
    return len(re.findall(r"(?<!\\)" + re.escape(character), text.replace("\\\\", "")))


class TestAnyNamePrints:
    @pytest.mark.parametrize("inductor", [False, True])
    @pytest.mark.parametrize("closed", [True, False])
    def test_every_printer_takes_every_name(self, closed, inductor):
        from firstorder.report.mathml import mathml

        fx = fo.Fixture()
        fx.voltage_source(HOSTILE[0], "in", "gnd")
        fx.current_source(HOSTILE[1], "gnd", "a")
        fx.resistor(HOSTILE[2], "in", "a", "1k")
        fx.switch(HOSTILE[3], "a", "b", r_on="1")
        for k, name in enumerate(HOSTILE[4:9]):
            fx.resistor(name, "b", "gnd", f"{k + 1}M")
        if inductor:
            fx.inductor("l%", "b", "gnd", "1m")
        else:
            fx.capacitor("c%", "b", "gnd", "1n")
        fx.probe(HOSTILE[9], node="a")
        fx.probe(HOSTILE[10], through=HOSTILE[2])
        fx.probe(HOSTILE[11], node="a", reference="b")
        d = fx.derivation(**{HOSTILE[3]: closed})
        latex, markdown, steps = d.latex(), d.markdown(), d.steps()
        for text in (latex, *(body for _, body in steps)):
            # "%" starts a LaTeX comment and "#", "$", "&" are special: each must be escaped.
            assert all(unescaped(text, c) == 0 for c in "%#$"), text
            assert unescaped(text, "{") == unescaped(text, "}"), text
        assert "<img" not in markdown and "&lt;img src=x&gt;" in markdown  # captions are text, not markup
        assert repr(d).startswith("Derivation(")
        for step in derivation_steps(d):
            for equation in step.equations:
                assert mathml(equation).startswith("<math"), (step.caption, equation)

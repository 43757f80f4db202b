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
        assert r"v_{\mathrm{ch}}{\left(\infty \right)} =" in text  # not v_ch(t)(∞)
        assert r"{\left(t \right)}{\left(\infty" not in text
        assert r"r_{\mathrm{leak}}" in text and r"i_{\mathrm{k1}}" in text
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
        assert r"v_{\mathrm{c\_hold}}" in text


class TestToLatex:
    t = sp.Symbol("t", nonnegative=True)
    v = sp.Function("v_ch")(t)

    def test_the_state_its_final_value_and_its_rate(self):
        assert to_latex(self.v) == r"v_{\mathrm{ch}}{\left(t \right)}"
        assert to_latex(self.v.subs(self.t, sp.oo)) == r"v_{\mathrm{ch}}{\left(\infty \right)}"
        assert to_latex(sp.Derivative(self.v, self.t)) == r"\frac{\mathrm{d} v_{\mathrm{ch}}}{\mathrm{d}t}"  # upright d
        # A second derivative is left to sympy's own form.
        assert to_latex(sp.Derivative(self.v, (self.t, 2))) == r"\frac{d^{2}}{d t^{2}} v_{\mathrm{ch}}{\left(t \right)}"

    def test_decay_as_a_power_of_e(self):
        names = fo.Fixture.rc(r="1k", c="1u").derivation().names
        assert to_latex(PowerOfE(-self.t / names.time_constant), names) == r"e^{-t/\tau}"
        assert to_latex(PowerOfE(-self.t / (sp.Symbol("r") * sp.Symbol("c")))) == r"e^{-t/\left(c \cdot r\right)}"
        assert to_latex(PowerOfE(-self.t)) == r"e^{- t}"

    def test_factors_are_set_apart_by_a_dot(self):
        # A product of names of several letters runs together ("rinvdac") without a sign;
        # the same dot as the report's MathML, before a bracket too ("chrin(k1on+rs)").
        rbar, vcal, r = sp.Symbol("rbar"), sp.Symbol("vcal"), sp.Symbol("r")
        assert to_latex(rbar * vcal) == r"\mathrm{rbar} \cdot \mathrm{vcal}"
        assert to_latex(vcal * (r + rbar)) == r"\mathrm{vcal} \cdot \left(r + \mathrm{rbar}\right)"
        assert to_latex(sp.Float(2.5e-9, 4) * vcal) == r"2.5 \cdot 10^{-9} \cdot \mathrm{vcal}"

    def test_sums_keep_the_order_they_were_built_in(self):
        a, b = sp.symbols("a b")
        assert to_latex(sp.Add(b, a, evaluate=False)) == "b + a"
        assert to_latex(sp.Add(a, 0, evaluate=False)) == "a + 0"


class TestStepLatex:
    def test_equations_side_by_side_and_chained(self):
        r, c, tau, x = sp.symbols("r c tau x")
        step = Step("any", (sp.Eq(tau, r * c), sp.Eq(tau, sp.Float(1e-3, 4)), sp.Eq(x, 1, evaluate=False)))
        # Written by hand: one chain for tau, then x beside it.
        assert step_latex(step) == r"\mathrm{tau} = c \cdot r = 0.001,\quad x = 1"


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
        *parts, tau = by_caption(d)["With the part values"]
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
        assert "<msup><mi>e</mi><mrow><mo>&#x2212;</mo>" in zero_input and "exp" not in zero_input


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


def inner(math: str) -> str:
    """The markup inside a <math> element."""
    return math.split('display="block">', 1)[1].rsplit("</math>", 1)[0]


def sample_and_hold() -> fo.Fixture:
    """A DAC through a series resistor and relay k_hold onto c_hold, a meter across it (our own)."""
    fx = fo.Fixture()
    fx.voltage_source("vdac", "dac", "gnd")
    fx.resistor("r_series", "dac", "sw", "2.2k")
    fx.switch("k_hold", "sw", "hold", r_on="0.15", r_off="1G")
    fx.capacitor("c_hold", "hold", "gnd", "10n")
    fx.resistor("r_meter", "hold", "gnd", "10M")
    fx.probe("v_hold", node="hold")
    fx.probe("i_series", through="r_series")
    return fx


class TestOneWritingOfEachName:
    """Each name is written one way in every line and every printer (LaTeX, Markdown, MathML)."""

    @pytest.mark.parametrize("closed", [True, False])
    def test_the_state_and_the_switch_in_every_line(self, closed):
        from firstorder.report.mathml import mathml

        d = sample_and_hold().derivation(k_hold=closed)
        state = "v_{\\mathrm{c\\_hold}}"
        switch = rf"R_{{\mathrm{{k\_hold,{'on' if closed else 'off'}}}}}"
        lines = dict(d.steps())
        for caption in ("Circuit law: KCL at the capacitor, with the Thevenin equivalent", "The ODE",
                        "Final value", "Zero-input + zero-state", "Natural + forced", "Probe v_hold",
                        "Probe i_series"):
            assert state in lines[caption], caption
        for caption in ("Equivalent seen by capacitor c_hold (k_hold closed)" if closed else
                        "Equivalent seen by capacitor c_hold (k_hold open)", "Time constant", "With the part values"):
            assert switch in lines[caption], caption
        text = d.latex() + d.markdown()
        assert "v_c_hold" not in text and "k_hold_on" not in text and "k_hold_off" not in text
        # MathML: the same subscripted state (v with subscript c_hold) in the ODE, the solution
        # and the probes; the switch as R with subscript k_hold,on; a plain d/dt, never ⅆ.
        state_ml = "<msub><mi>v</mi><mi>c_hold</mi></msub>"
        switch_ml = f"<msub><mi>R</mi><mi>k_hold,{'on' if closed else 'off'}</mi></msub>"
        by = {step.caption: "".join(mathml(e, d.names) for e in step.equations) for step in derivation_steps(d)}
        for caption in ("The ODE", "Final value", "Zero-input + zero-state", "Natural + forced", "Probe v_hold",
                        "Probe i_series"):
            assert state_ml in by[caption], caption
        assert switch_ml in by["Time constant"] and switch_ml in by["With the part values"]
        every = "".join(by.values())
        assert "&dd;" not in every and "ⅆ" not in every and "v_c_hold" not in every
        assert "<mi>hold</mi><mo> </mo>" not in every  # sympy's own split of "k_hold_on"
        assert '<mfrac><mrow><mi mathvariant="normal">d</mi>' + state_ml in by["The ODE"]

    def test_products_of_long_names_have_a_dot(self):
        from firstorder.report.mathml import mathml

        d = sample_and_hold().derivation(k_hold=True)
        (_, full) = by_caption(d)["Time constant"]
        latex = to_latex(full.rhs, d.names)
        # By hand: c_hold · r_meter · (R_k_hold,on + r_series) over the sum of the three.
        assert (r"c_{\mathrm{hold}} \cdot r_{\mathrm{meter}} \cdot \left(R_{\mathrm{k\_hold,on}} + "
                r"r_{\mathrm{series}}\right)") in latex
        ml = inner(mathml(full.rhs, d.names))
        assert ("<msub><mi>c</mi><mi>hold</mi></msub><mo>&#xB7;</mo><msub><mi>r</mi><mi>meter</mi></msub>"
                "<mo>&#xB7;</mo><mrow><mo>(</mo>") in ml
        # No two names side by side without an operator between them, in any step.
        for step in derivation_steps(d):
            for equation in step.equations:
                body = inner(mathml(equation, d.names))
                body = body.replace('<mi mathvariant="normal">d</mi>', "").replace("<mi>e</mi>", "")  # d/dt, e^x
                tokens = re.sub(r"<mi>[^<]*</mi>", "<N/>", re.sub(r"<msub><mi>[^<]*</mi><mi>[^<]*</mi></msub>", "<N/>", body))
                assert "<N/><N/>" not in tokens, (step.caption, body)

    def test_the_exponent_is_folded_in_every_printer(self):
        from firstorder.report.mathml import mathml

        d = sample_and_hold().derivation(k_hold=True)
        (equation,) = by_caption(d)["Zero-input + zero-state"]
        assert r"e^{-t/\tau}" in to_latex(equation, d.names)
        body = inner(mathml(equation, d.names))
        # e to the power (minus t over tau) on one line: no stacked fraction in the exponent.
        assert '<msup><mi>e</mi><mrow><mo>&#x2212;</mo><mi>t</mi><mo lspace="0" rspace="0">/</mo><mi>&#964;</mi>' \
               '</mrow></msup>' in body
        assert "<msup><mi>e</mi><mrow><mfrac>" not in body

    def test_part_values_in_engineering_notation_with_units(self):
        from firstorder.report.mathml import mathml

        d = sample_and_hold().derivation(k_hold=True)
        line = dict(d.steps())["With the part values"]
        for text in (r"r_{\mathrm{series}} = 2.2\ \mathrm{k\Omega}", r"c_{\mathrm{hold}} = 10\ \mathrm{nF}",
                     r"r_{\mathrm{meter}} = 10\ \mathrm{M\Omega}", r"R_{\mathrm{k\_hold,on}} = 150\ \mathrm{m\Omega}",
                     r"\tau = 22\ \mathrm{\mu{}s}"):
            assert text in line
        assert "2200.0" not in line and "10^{" not in line
        ml = "".join(mathml(e, d.names) for e in by_caption(d)["With the part values"])
        assert '<mn>2.2</mn><mspace width="0.25em"/><mi mathvariant="normal">k&#937;</mi>' in ml
        assert "2200.0" not in ml

    @pytest.mark.parametrize("closed", [True, False])
    def test_hostile_names_are_written_one_way_too(self, closed):
        from firstorder.report.mathml import _MathMLCheck, mathml

        fx = fo.Fixture()
        fx.voltage_source("v<b>", "in", "gnd")
        fx.resistor("r_%&", "in", "a", "1k")
        fx.switch("k_{x}", "a", "b", r_on="1", r_off="1G")
        fx.capacitor("c_<i>", "b", "gnd", "1n")
        fx.resistor("R_k_{x},on", "b", "gnd", "1M")  # the written form of the switch's resistance
        fx.probe("p_'x", node="a")
        d = fx.derivation(**{"k_{x}": closed})
        names = d.names
        state_latex = names.latex(names.state)
        switch = names.symbols["k_{x}"]
        # Named apart from the resistor typed like its written form: a prime.
        assert names.latex(switch) != names.latex(names.symbols["R_k_{x},on"])
        lines = dict(d.steps())
        for caption in ("The ODE", "Zero-input + zero-state", "Natural + forced", "Final value"):
            assert state_latex in lines[caption]
        state_ml = inner(mathml(names.state, names))
        switch_ml = inner(mathml(switch, names))
        assert "&lt;i&gt;" in state_ml and "<i>" not in state_ml
        for step in derivation_steps(d):
            body = "".join(mathml(e, names) for e in step.equations)
            check = _MathMLCheck()
            check.feed(body)
            assert check.clean and "<b>" not in body, step.caption
            if step.caption in ("The ODE", "Zero-input + zero-state", "Natural + forced"):
                assert state_ml in body
            if step.caption == "Time constant":
                assert switch_ml in body

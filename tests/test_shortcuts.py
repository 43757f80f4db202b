"""Fixture.rc / Fixture.rl: tau and derivations against sympy.dsolve and handbook formulas."""

import numpy as np
import pytest
import sympy as sp

import firstorder as fo


class TestTau:
    def test_rc(self):
        # Handbook: tau = R C.
        assert fo.Fixture.rc(r="10k", c="100n").tau == pytest.approx(1e-3, rel=1e-15)

    def test_rl(self):
        # Handbook: tau = L / R.
        assert fo.Fixture.rl(r="47", l="10m").tau == pytest.approx(10e-3 / 47, rel=1e-15)


class TestDerivationAgainstDsolve:
    @pytest.mark.parametrize("fixture", [fo.Fixture.rc("10k", "100n"), fo.Fixture.rl("47", "10m")])
    def test_solution_solves_the_ode(self, fixture):
        derivation = fixture.derivation()
        t = derivation.symbols["t"]
        x = derivation.state.func
        # Reference: sympy.dsolve of the derivation's own ODE with x(0) = initial.
        solved = sp.dsolve(derivation.ode, derivation.state, ics={x(0): derivation.symbols["initial"]})
        assert sp.simplify(solved.rhs - (derivation.zero_input + derivation.zero_state)) == 0
        assert sp.simplify(derivation.natural + derivation.forced - solved.rhs) == 0
        assert derivation.zero_input.subs(t, 0) == derivation.symbols["initial"]
        assert derivation.zero_state.subs(t, 0) == 0

    def test_ode_is_the_circuit_law(self):
        # Written by hand from KCL at the capacitor: C dv/dt = (vin - v) / R.
        derivation = fo.Fixture.rc("10k", "100n").derivation()
        s = derivation.symbols
        v = derivation.state
        by_hand = (s["vin"] - v) / (s["r"] * s["c"])
        assert sp.simplify(derivation.ode.rhs - by_hand) == 0
        # And KVL around the inductor: L di/dt = vin - R i.
        derivation = fo.Fixture.rl("47", "10m").derivation()
        s = derivation.symbols
        i = derivation.state
        assert sp.simplify(derivation.ode.rhs - (s["vin"] - s["r"] * i) / s["l"]) == 0

    def test_symbols_cover_every_part(self):
        derivation = fo.Fixture.rc("10k", "100n").derivation()
        assert set(derivation.symbols) == {"vin", "r", "c", "t", "initial", "state"}

    def test_numbers_match_the_engine(self):
        fixture = fo.Fixture.rc("4.7k", "220n")
        derivation = fixture.derivation()
        s = derivation.symbols
        expression = derivation.substitute(derivation.zero_input + derivation.zero_state)
        f = sp.lambdify(s["t"], expression.subs({s["vin"]: 2.0, s["initial"]: -0.5}), "numpy")
        times = np.linspace(0, 5e-3, 11)
        response = fixture.respond(fo.Drive.steps([(0, 2.0)], end="5m"), initial=-0.5)
        np.testing.assert_allclose(f(times), response.total(times), rtol=1e-13)

    def test_text_forms(self):
        derivation = fo.Fixture.rc("10k", "100n").derivation()
        latex = derivation.latex()
        assert r"\tau" in latex and "aligned" in latex
        markdown = derivation.markdown()
        assert markdown.count("$$") >= 12
        assert derivation._repr_latex_().startswith("$$")

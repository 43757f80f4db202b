"""symbolic.derivation: derivations against handbook formulas, sympy.dsolve and the numeric path.

Every network here is a scenario of our own invention.
"""

import itertools

import numpy as np
import pytest
import sympy as sp
from builders import divider_fixture, relay_fixture

import firstorder as fo
from firstorder.errors import InputError
from firstorder.network import probe_row
from firstorder.symbolic import derivation


class TestDerive:
    def test_loaded_divider_matches_the_handbook(self):
        d = divider_fixture().derivation()
        s = d.symbols
        lower = s["r2"] * s["rm"] / (s["r2"] + s["rm"])
        # Handbook series/parallel: R_th = rf + r1 || r2 || rm, V_th = vin (r2 || rm) / (r1 + r2 || rm).
        assert sp.simplify(d.resistance - (s["rf"] + 1 / (1 / s["r1"] + 1 / s["r2"] + 1 / s["rm"]))) == 0
        assert sp.simplify(d.equivalent - s["vin"] * lower / (s["r1"] + lower)) == 0
        assert sp.simplify(d.tau - s["c"] * d.resistance) == 0

    def test_wheatstone_bridge_matches_the_handbook(self):
        fx = fo.Fixture()
        fx.voltage_source("vx", "top", "gnd")
        fx.resistor("r1", "top", "a", 1.0)
        fx.resistor("r2", "a", "gnd", 2.0)
        fx.resistor("r3", "top", "b", 3.0)
        fx.resistor("r4", "b", "gnd", 4.0)
        fx.capacitor("c", "a", "b", 1.0)
        d = fx.derivation()
        r1, r2, r3, r4, vx = (d.symbols[n] for n in ("r1", "r2", "r3", "r4", "vx"))
        # Handbook bridge: R_th = r1 || r2 + r3 || r4, V_th = vx (r2/(r1 + r2) - r4/(r3 + r4)).
        assert sp.simplify(d.resistance - (r1 * r2 / (r1 + r2) + r3 * r4 / (r3 + r4))) == 0
        assert sp.simplify(d.equivalent - vx * (r2 / (r1 + r2) - r4 / (r3 + r4))) == 0

    @pytest.mark.parametrize("states", list(itertools.product([True, False], repeat=2)))
    def test_solution_solves_its_ode_by_dsolve(self, states):
        fx = relay_fixture()
        d = fx.derivation(k1=states[0], k2=states[1])
        if d.holds:
            assert d.tau == sp.oo and d.zero_input == d.symbols["initial"]
            return
        x = d.state.func
        # Reference: sympy.dsolve of the derivation's ODE with x(0) = initial.
        solved = sp.dsolve(d.ode, d.state, ics={x(0): d.symbols["initial"]})
        assert sp.simplify(solved.rhs - (d.zero_input + d.zero_state)) == 0
        assert sp.simplify(solved.rhs - (d.natural + d.forced)) == 0

    def test_ode_is_kcl_at_the_capacitor_written_by_hand(self):
        d = relay_fixture().derivation(k1=True, k2=True)
        s = d.symbols
        v = d.state
        # By hand: node a is rs -> k1 (r_on); ch sees (vdac - v)/(rs + k1_on) + ib - v/r_leak - v/r_meter.
        current = (s["vdac"] - v) / (s["rs"] + s["k1"]) + s["ib"] - v / s["r_leak"] - v / s["r_meter"]
        assert sp.simplify(d.ode.rhs - current / s["ch"]) == 0

    def test_numbers_agree_with_the_numeric_path_in_every_configuration(self):
        fx = relay_fixture()
        for states in itertools.product([True, False], repeat=2):
            d = fx.derivation(k1=states[0], k2=states[1])
            layout, reduced = fx.configuration(states)
            tau = d.substitute(d.tau)
            assert (tau == sp.oo and reduced.tau == np.inf) or float(tau) == pytest.approx(reduced.tau, rel=1e-12)
            excitation = [sp.Symbol("v_ch", real=True), d.symbols["vdac"], d.symbols["ib"]]
            for probe in fx.probes:
                expression = d.substitute(d.probes[probe.name])
                got = [float(expression.diff(e)) for e in excitation]
                np.testing.assert_allclose(got, probe_row(layout, fx.netlist, reduced, probe), rtol=1e-10, atol=1e-18,
                                           err_msg=f"{probe.name} {states}")

    def test_flyback_probe_is_minus_current_times_flyback_resistor(self):
        fx = fo.Fixture()
        fx.voltage_source("v", "sup", "gnd")
        fx.switch("k", "sup", "a")
        fx.inductor("l", "a", "m", "0.1")
        fx.resistor("r_coil", "m", "gnd", "50")
        fx.resistor("r_fly", "a", "gnd", "1k")
        fx.probe("v_coil", node="a")  # the coil (l and r_coil) runs from a to gnd
        fx.probe("i_coil", through="l")
        d = fx.derivation(k=False)
        assert d.probes["i_coil"] == sp.Symbol("i_l", real=True)
        s = d.symbols
        # Common practice: L / (R_coil + R_flyback), and the coil voltage is -i R_flyback.
        assert sp.simplify(d.tau - s["l"] / (s["r_coil"] + s["r_fly"])) == 0
        assert sp.simplify(d.probes["v_coil"] + sp.Symbol("i_l", real=True) * s["r_fly"]) == 0

    def test_floating_island_probe_and_tau(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("r", "in", "a", "1k")
        fx.capacitor("c", "a", "gnd", "1n")
        fx.switch("k", "a", "m")
        fx.resistor("r_meter", "m", "mlo", "10M")
        fx.resistor("r_lead", "mlo", "m", "1")
        fx.probe("i_meter", through="r_meter")
        open_ = fx.derivation(k=False)
        # The meter loop floats when k is open: no current, and tau is the bare R C.
        assert open_.probes["i_meter"] == 0
        assert open_.tau == open_.symbols["r"] * open_.symbols["c"]


class TestRandomNetworks:
    """Symbolic and numeric reductions of varied random networks agree.

    The two paths share only the topology plan: the numeric one solves the full
    modified nodal system with numpy, the symbolic one eliminates supernodes.
    """

    @pytest.mark.parametrize("seed", range(8))
    def test_symbolic_matches_numeric(self, seed):
        rng = np.random.default_rng(seed)
        nodes = ["gnd", "n1", "n2", "n3", "n4", "n5"]
        fx = fo.Fixture()
        fx.voltage_source("v1", "n1", "gnd")
        fx.voltage_source("v2", "n2", str(rng.choice(["gnd", "n3"])))  # sometimes floating
        fx.current_source("i1", str(rng.choice(nodes[2:])), "gnd")
        for k in range(7):
            a, b = rng.choice(nodes, size=2, replace=False)
            fx.resistor(f"r{k}", str(a), str(b), float(10 ** rng.uniform(1, 5)))
        fx.switch("k1", "n4", "n5", r_on=float(rng.choice([0.0, 2.0])), r_off=float(rng.choice([np.inf, 1e7])))
        fx.resistor("r_tie", "n5", "n3", 100.0)
        if seed % 2:
            fx.capacitor("c", "n4", str(rng.choice(["gnd", "n1", "n3"])), 1e-6)
        else:
            fx.inductor("l", "n4", str(rng.choice(["gnd", "n1", "n3"])), 1e-3)
        fx.probe("v4", node="n4", reference="n2")
        fx.probe("i_k1", through="k1")
        fx.probe("i_v2", through="v2")
        checked = 0
        for closed in (True, False):
            try:
                layout, reduced = fx.configuration((closed,))
            except (fo.TopologyError, np.linalg.LinAlgError):
                continue
            d = fx.derivation(k1=closed)
            tau = d.substitute(d.tau)
            if reduced.tau == np.inf:
                assert tau == sp.oo
            else:
                assert float(tau) == pytest.approx(reduced.tau, rel=1e-9)
                for j, source in enumerate(fx.sources):
                    gain = float(d.substitute(d.final).diff(d.symbols[source.name]))
                    assert gain == pytest.approx(reduced.gain[j], rel=1e-9, abs=1e-12)
            state = sp.Symbol(f"{'v' if fx.storage.kind == 'capacitor' else 'i'}_{fx.storage.name}", real=True)
            excitation = [state, *(d.symbols[p.name] for p in fx.sources)]
            for probe in fx.probes:
                expression = d.substitute(d.probes[probe.name])
                got = [float(expression.diff(e)) for e in excitation]
                np.testing.assert_allclose(got, probe_row(layout, fx.netlist, reduced, probe), rtol=1e-9, atol=1e-12,
                                           err_msg=f"seed {seed}, k1 {closed}, {probe.name}")
            checked += 1
        assert checked  # every seed here builds at least one solvable configuration


#: Names a derivation makes for itself, and near misses of them: parts and probes named so.
ADVERSARIAL = ["v_0", "v_c", "i_0", "i_l", "x_0", "k1_on", "k1_off", "tau", "R_th", "V_th", "R_N", "I_N",
               "state", "v_0'", "t'", "tau'", "c_5%", "c%s", "r_{x}"]


class TestAdversarialNames:
    """Random networks whose parts and probes are named like the derivation's own symbols,
    derived, given numbers and held against the numeric path (network.reduce, respond)."""

    @pytest.mark.parametrize("seed", range(12))
    def test_symbolic_matches_numeric_whatever_the_names(self, seed):
        rng = np.random.default_rng(100 + seed)
        names = iter(rng.permutation(ADVERSARIAL).tolist())
        inductor = bool(seed % 3 == 2)
        # A capacitor "0" has the state v_0, the start's name; "on" the state v_on beside a switch "v".
        storage = str(rng.choice(["0", "c", "l", "th", "on"]))
        nodes = ["gnd", "n1", "n2", "n3", "n4"]
        fx = fo.Fixture()
        sources = [next(names), next(names)]
        fx.voltage_source(sources[0], "n1", "gnd")
        fx.current_source(sources[1], str(rng.choice(nodes[2:])), "gnd")
        pairs = [("n1", "n2"), ("n2", "n3"), *(rng.choice(nodes, size=2, replace=False) for _ in range(3))]
        for a, b in pairs:  # a chain through every node, then three resistors anywhere
            fx.resistor(next(names), str(a), str(b), float(10 ** rng.uniform(1, 5)))
        fx.switch("k1", "n2", "n4", r_on=float(rng.choice([1.0, 20.0])), r_off=float(rng.choice([np.inf, 1e7])))
        fx.resistor(next(names), "n4", "n3", 150.0)
        if inductor:
            fx.inductor(storage, "n4", "gnd", 1e-3)
        else:
            fx.capacitor(storage, "n4", "gnd", 1e-6)
        fx.probe(next(names), node="n2", reference="n3")
        fx.probe(next(names), through="k1")
        checked = 0
        for closed in (True, False):
            try:
                layout, reduced = fx.configuration((closed,))
            except (fo.TopologyError, np.linalg.LinAlgError):
                continue
            d = fx.derivation(k1=closed)
            n = d.names
            symbols = [*d.symbols.values(), *n.probes.values(), n.time_constant, n.resistance, n.equivalent]
            assert len(set(symbols)) == len({x.name for x in symbols}) == len(symbols)
            # Reference: the numeric path (modified nodal analysis in numpy), which names nothing.
            tau = d.substitute(d.tau)
            if reduced.tau == np.inf:
                assert tau == sp.oo
                continue
            assert float(tau) == pytest.approx(reduced.tau, rel=1e-9)
            levels = {d.symbols[p.name]: float(v) for p, v in zip(fx.sources, rng.uniform(-2, 2, 2))}
            start = float(rng.uniform(-1, 1))
            numbers = {**levels, n.start: start}
            final = float(d.substitute(d.final).subs(numbers))
            assert final == pytest.approx(float(np.dot(reduced.gain, list(levels.values()))), rel=1e-9, abs=1e-12)
            excitation = [n.state, *(d.symbols[p.name] for p in fx.sources)]
            for probe in fx.probes:
                expression = d.substitute(d.probes[probe.name])
                got = [float(expression.diff(e)) for e in excitation]
                np.testing.assert_allclose(got, probe_row(layout, fx.netlist, reduced, probe), rtol=1e-9, atol=1e-12,
                                           err_msg=f"seed {seed}, k1 {closed}, {probe.name}")
            # The response with numbers put in, against respond on a one-segment drive.
            drive = fo.Drive([0.0], end=3 * reduced.tau, k1=[int(closed)],
                             **{p.name: [levels[d.symbols[p.name]]] for p in fx.sources})
            response = fx.respond(drive, initial=start)
            when = 0.7 * reduced.tau
            for part, expected in (("total", response.total), ("natural", response.natural)):
                expression = d.zero_input + d.zero_state if part == "total" else d.natural
                value = float(d.substitute(expression).subs({**numbers, n.t: when}))
                assert value == pytest.approx(float(expected(when)), rel=1e-9, abs=1e-12), part
            checked += 1
        assert checked


class TestCache:
    def test_derived_once_per_structure(self, monkeypatch):
        fx = relay_fixture()
        first = fx.derivation(k1=True, k2=False)
        calls = []
        original = derivation._derive
        monkeypatch.setattr(derivation, "_derive", lambda *a: calls.append(a) or original(*a))
        again = fx.derivation(k1=True, k2=False)
        other_values = fx.with_values(rs="2k").derivation(k1=True, k2=False)
        assert calls == []
        assert again.tau == first.tau
        assert float(other_values.substitute(other_values.tau)) == pytest.approx(
            fx.with_values(rs="2k").time_constant(k1=True, k2=False), rel=1e-12)


class TestSensitivity:
    """Derivation.sensitivity against handbook formulas and sympy written here."""

    def test_tau_of_an_rc_to_r_is_c_and_to_c_is_r(self):
        # Handbook: tau = R C, so d tau / d R = C and d tau / d C = R.
        d = fo.Fixture.rc(r="4.7k", c="220n").derivation()
        assert d.sensitivity("r") == pytest.approx(220e-9, rel=1e-15)
        assert d.sensitivity("c") == pytest.approx(4.7e3, rel=1e-15)

    def test_a_divider_final_value_against_sympy(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("r1", "in", "out", "12k")
        fx.resistor("r2", "out", "gnd", "33k")
        fx.capacitor("c", "out", "gnd", "1u")
        d = fx.derivation()
        # Reference: sympy's derivative of the handbook divider V r2 / (r1 + r2), written here.
        v, r1, r2 = sp.symbols("v r1 r2", positive=True)
        divider = v * r2 / (r1 + r2)
        at = {v: 5, r1: 12000, r2: 33000}
        for part, symbol in (("r1", r1), ("r2", r2)):
            expected = float(sp.diff(divider, symbol).subs(at))
            assert d.sensitivity(part, of="final", levels={"vin": 5.0}) == pytest.approx(expected, rel=1e-13)
        symbolic = d.sensitivity("r1", of="final")  # in the source level when none is given
        assert float(symbolic.subs(d.symbols["vin"], 5)) == pytest.approx(float(sp.diff(divider, r1).subs(at)))

    def test_a_switch_resistance_in_and_out_of_circuit(self):
        fx = fo.Fixture()
        fx.voltage_source("v", "a", "gnd")
        fx.switch("k1", "a", "b", r_on="10", r_off="1M")
        fx.resistor("rs", "b", "gnd", "1k")
        fx.capacitor("c", "b", "gnd", "1u")
        closed = fx.derivation(k1=True)
        # Handbook: final = v rs / (r_on + rs), so d final / d r_on = -v rs / (r_on + rs)^2.
        assert closed.sensitivity("k1.r_on", of="final", levels={"v": 2.0}) == pytest.approx(
            -2.0 * 1e3 / (1010.0 ** 2), rel=1e-13)
        assert closed.sensitivity("k1.r_off", of="final", levels={"v": 2.0}) == 0.0
        assert closed.sensitivity("k1", of="tau") == closed.sensitivity("k1.r_on", of="tau")

    @pytest.mark.parametrize("part, of, field", [("nope", "tau", "part"), ("rs.r_on", "tau", "part"),
                                                  ("k1.gain", "tau", "part"), ("rs", "settle", "of"),
                                                  (3, "tau", "part")])
    def test_bad_arguments_name_the_field(self, part, of, field):
        fx = fo.Fixture()
        fx.voltage_source("v", "a", "gnd")
        fx.switch("k1", "a", "b", r_on="10", r_off="1M")
        fx.resistor("rs", "b", "gnd", "1k")
        fx.capacitor("c", "b", "gnd", "1u")
        with pytest.raises(InputError, match=f"sensitivity {field}"):
            fx.derivation(k1=True).sensitivity(part, of=of)

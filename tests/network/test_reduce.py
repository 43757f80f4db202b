"""Tests for firstorder.network.reduce and .mna: the reduction of each switch configuration.

Every number is checked against a formula written here by hand (handbook series/parallel,
voltage divider and bridge formulas; Ohm's and Kirchhoff's laws) or exact rational nodal
analysis with fractions, never against the reduction itself."""

import math
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

import firstorder as fo
from firstorder import network
from firstorder.errors import InputError, TopologyError, ZeroTimeError


def parallel(*resistances):
    """Handbook: resistors in parallel, 1 / sum(1 / R)."""
    return 1.0 / sum(1.0 / r for r in resistances)


def reduced(fixture, **states):
    """The numeric reduction of one configuration."""
    return fixture.configuration(fixture.switch_states(**states))


# ------------------------------------------------------------------------------------------

def _nodal_matrix(index, branches):
    """Textbook nodal analysis, written independently of firstorder: the conductance
    matrix over the inner nodes in `index`, and the injection per volt of the source
    node "s" (ground and "s" are not unknowns)."""
    G = np.zeros((len(index), len(index)))
    per_volt = np.zeros(len(index))
    for a, b, r in branches:
        g = 1.0 / r
        for here, there in ((a, b), (b, a)):
            if here in index:
                G[index[here], index[here]] += g
                if there in index:
                    G[index[here], index[there]] -= g
                elif there == "s":
                    per_volt[index[here]] += g
    return G, per_volt


def _exact_nodal(index, branches):
    """The conductance matrix of :func:`_nodal_matrix` in exact rationals (fractions)."""
    G = [[Fraction(0)] * len(index) for _ in index]
    for a, b, r in branches:
        g = 1 / Fraction(r)
        for here, there in ((a, b), (b, a)):
            if here in index:
                G[index[here]][index[here]] += g
                if there in index:
                    G[index[here]][index[there]] -= g
    return G


def _unit_injection(index, into, out_of):
    """A unit current into node `into` and out of node `out_of` (ground is not an unknown)."""
    d = np.zeros(len(index))
    for node, sign in ((into, 1.0), (out_of, -1.0)):
        if node in index:
            d[index[node]] += sign
    return d


@st.composite
def resistive_networks(draw):
    """A random connected resistor network, a source from 's' to ground, and a capacitor."""
    count = draw(st.integers(1, 5))
    inner = [f"n{k}" for k in range(count)]
    placed = ["gnd", "s"]
    edges = []
    for node in inner:  # a spanning tree: every node joins one placed before it
        edges.append((draw(st.sampled_from(placed)), node))
        placed.append(node)
    for _ in range(draw(st.integers(0, 6))):
        a, b = draw(st.sampled_from(placed)), draw(st.sampled_from(placed))
        if a != b and {a, b} != {"gnd", "s"}:
            edges.append((a, b))
    values = [draw(st.floats(1.0, 1e6)) for _ in edges]
    cap_a, cap_b = draw(st.sampled_from([("gnd", n) for n in inner] + [(a, b) for a in inner for b in inner if a < b]))
    return inner, edges, values, (cap_a, cap_b)


def _network_fixture(network) -> fo.Fixture:
    """The fixture of a drawn network: its resistors, a source at 's', a 1 µF capacitor."""
    _, edges, values, (cap_a, cap_b) = network
    fx = fo.Fixture()
    fx.voltage_source("v", "s", "gnd")
    for k, ((a, b), r) in enumerate(zip(edges, values)):
        fx.resistor(f"r{k}", a, b, r)
    fx.capacitor("c", cap_a, cap_b, 1e-6)
    try:
        fx.check()
    except TopologyError:
        assume(False)  # a node on one part only: not these tests' subject
    return fx


def _exact_solve(matrix, rhs):
    """Gauss-Jordan elimination in exact rational arithmetic (Python's fractions module)."""
    n = len(matrix)
    rows = [list(matrix[i]) + [rhs[i]] for i in range(n)]
    for col in range(n):
        pivot = next(r for r in range(col, n) if rows[r][col] != 0)
        rows[col], rows[pivot] = rows[pivot], rows[col]
        for r in range(n):
            if r != col and rows[r][col] != 0:
                factor = rows[r][col] / rows[col][col]
                rows[r] = [x - factor * y for x, y in zip(rows[r], rows[col])]
    return [rows[i][n] / rows[i][i] for i in range(n)]


@st.composite
def extreme_networks(draw):
    """Like resistive_networks, with values from 0.1 Ω to 1 TΩ: a relay contact beside
    board leakage, thirteen decades in one network."""
    inner, edges, _, capacitor = draw(resistive_networks())
    values = [10.0 ** draw(st.floats(-1.0, 12.0)) for _ in edges]
    return inner, edges, values, capacitor


@st.composite
def switched_networks(draw):
    """A random network as above where some branches are switches, plus a current source."""
    inner, edges, values, cap = draw(resistive_networks())
    kinds = [draw(st.sampled_from(["resistor", "switch"])) for _ in edges]
    r_off = [draw(st.sampled_from([math.inf, 1e7, 1e9])) for _ in edges]
    closed = [draw(st.booleans()) for _ in edges]
    inject = draw(st.sampled_from(inner))
    return inner, edges, values, cap, kinds, r_off, closed, inject


class TestReduceNumeric:
    """Thevenin / Norton equivalents seen by the storage element, against handbook formulas."""

    R1, R2, R_METER, R_SERIES, C = 4.7e3, 10e3, 1e6, 220.0, 47e-9

    def loaded_divider(self):
        # An invented scenario: a 4.7k/10k divider read by a 1 MΩ meter through 220 Ω into 47 nF.
        fx = fo.Fixture()
        fx.voltage_source("vin", "top", "gnd")
        fx.resistor("r1", "top", "mid", self.R1)
        fx.resistor("r2", "mid", "gnd", self.R2)
        fx.resistor("rm", "mid", "gnd", self.R_METER)
        fx.resistor("rs", "mid", "out", self.R_SERIES)
        fx.capacitor("c", "out", "gnd", self.C)
        return fx

    def test_loaded_divider_thevenin(self):
        fx = self.loaded_divider()
        _, red = fx.configuration(())
        # Handbook: R_th = R_series + R1 || R2 || R_meter; V_th = V * (R2 || Rm) / (R1 + R2 || Rm).
        r_th = self.R_SERIES + parallel(self.R1, self.R2, self.R_METER)
        lower = parallel(self.R2, self.R_METER)
        assert red.resistance == pytest.approx(r_th, rel=1e-12)
        assert red.gain[0] == pytest.approx(lower / (self.R1 + lower), rel=1e-12)
        assert red.tau == pytest.approx(r_th * self.C, rel=1e-12)

    def test_loaded_divider_from_the_response(self):
        fx = self.loaded_divider()
        res = fx.respond(fo.Drive([0], end=1.0, vin=[3.3]))
        lower = parallel(self.R2, self.R_METER)
        # Handbook divider: final value V * (R2 || Rm) / (R1 + R2 || Rm); tau = R_th * C.
        assert res.final[0] == pytest.approx(3.3 * lower / (self.R1 + lower), rel=1e-12)
        r_th = self.R_SERIES + parallel(self.R1, self.R2, self.R_METER)
        assert res.tau[0] / self.C == pytest.approx(r_th, rel=1e-12)

    def wheatstone(self, r1, r2, r3, r4, c):
        fx = fo.Fixture()
        fx.voltage_source("vex", "exc", "gnd")
        fx.resistor("r1", "exc", "a", r1)
        fx.resistor("r2", "a", "gnd", r2)
        fx.resistor("r3", "exc", "b", r3)
        fx.resistor("r4", "b", "gnd", r4)
        fx.capacitor("cf", "a", "b", c)  # a filter capacitor across the bridge output
        return fx

    @pytest.mark.parametrize("r1, r2, r3, r4", [
        (350.0, 350.0, 350.0, 351.2),      # a strain-gauge bridge slightly off balance (invented)
        (1e3, 2.2e3, 4.7e3, 10e3),
        (120.0, 120.0, 120.0, 120.0),      # balanced: zero output
    ])
    def test_wheatstone_bridge(self, r1, r2, r3, r4):
        c = 1e-6
        fx = self.wheatstone(r1, r2, r3, r4, c)
        _, red = fx.configuration(())
        # Handbook bridge formulas: R_th = R1 || R2 + R3 || R4,
        # V_th = V_ex * (R2 / (R1 + R2) - R4 / (R3 + R4)).
        r_th = parallel(r1, r2) + parallel(r3, r4)
        v_th_per_volt = r2 / (r1 + r2) - r4 / (r3 + r4)
        assert red.resistance == pytest.approx(r_th, rel=1e-12)
        assert red.gain[0] == pytest.approx(v_th_per_volt, rel=1e-9, abs=1e-15)
        res = fx.respond(fo.Drive([0], end=1.0, vex=[5.0]))
        assert res.tau[0] / c == pytest.approx(r_th, rel=1e-12)
        assert res.boundary[-1] == pytest.approx(5.0 * v_th_per_volt, rel=1e-9, abs=1e-12)

    def test_norton_resistance_of_a_coil(self):
        # A coil (10 mH) fed from 24 V through 33 Ω, with 470 Ω across it (invented).
        fx = fo.Fixture()
        fx.voltage_source("vs", "s", "gnd")
        fx.resistor("rsrc", "s", "a", 33.0)
        fx.resistor("rp", "a", "gnd", 470.0)
        fx.inductor("l", "a", "gnd", 10e-3)
        _, red = fx.configuration(())
        # Handbook: Norton resistance R = Rsrc || Rp; Norton current (the coil shorts a) V / Rsrc.
        assert red.resistance == pytest.approx(parallel(33.0, 470.0), rel=1e-12)
        assert red.gain[0] == pytest.approx(1.0 / 33.0, rel=1e-12)
        assert red.tau == pytest.approx(10e-3 / parallel(33.0, 470.0), rel=1e-12)

    def test_switch_resistances(self):
        fx = fo.Fixture()
        fx.voltage_source("vdac", "d", "gnd")
        fx.resistor("rs", "d", "a", 1e3)
        fx.switch("k1", "a", "b", r_on=25.0, r_off=1e9)
        fx.capacitor("ch", "b", "gnd", 1e-9)
        # Series resistances add (handbook): closed R + r_on, open R + r_off.
        assert reduced(fx, k1=True)[1].tau == pytest.approx((1e3 + 25.0) * 1e-9, rel=1e-12)
        assert reduced(fx, k1=False)[1].tau == pytest.approx((1e3 + 1e9) * 1e-9, rel=1e-12)

    def test_open_switch_without_leakage_holds(self):
        fx = fo.Fixture()
        fx.voltage_source("vdac", "d", "gnd")
        fx.resistor("rs", "d", "a", 1e3)
        fx.switch("k1", "a", "b")
        fx.capacitor("ch", "b", "gnd", 1e-9)
        layout, red = reduced(fx, k1=False)
        assert layout.holds
        assert red.tau == math.inf
        assert np.all(red.gain == 0.0)

    def test_coil_shorted_by_a_closed_switch_holds(self):
        fx = fo.Fixture()
        fx.voltage_source("vs", "s", "gnd")
        fx.resistor("r", "s", "a", 10.0)
        fx.inductor("l", "a", "gnd", 1e-3)
        fx.switch("kshort", "a", "gnd")
        layout, red = reduced(fx, kshort=True)
        # An ideal short keeps an ideal coil's current (L / 0: no decay).
        assert layout.holds and red.tau == math.inf


# ------------------------------------------------------------------------------------------
class TestProbeRow:
    """Every kind of probe against its own hand formula (Ohm's law, KCL) in one network."""

    V, I, RS, RON, RLOAD, C = 2.0, 1e-4, 1e3, 100.0, 10e3, 1e-6

    @pytest.fixture
    def fixture(self):
        # An invented hold stage: a source behind rs, a switch with r_on, the hold capacitor
        # with a load resistor, and a bias current injected into the hold node.
        fx = fo.Fixture()
        fx.voltage_source("vs", "drv", "gnd")
        fx.resistor("rs", "drv", "a", self.RS)
        fx.switch("k1", "a", "b", r_on=self.RON)
        fx.capacitor("ch", "b", "gnd", self.C)
        fx.resistor("rload", "b", "gnd", self.RLOAD)
        fx.current_source("ib", "gnd", "b")
        fx.probe("v_b", node="b")
        fx.probe("v_ab", node="a", reference="b")
        fx.probe("i_rs", through="rs")
        fx.probe("i_k1", through="k1")
        fx.probe("i_vs", through="vs")
        fx.probe("i_ch", through="ch")
        fx.probe("i_ib", through="ib")
        fx.probe("i_load", through="rload")
        return fx

    def hand(self, v, closed):
        """The probes from Ohm's law and KCL, with v the capacitor voltage."""
        series = (self.V - v) / (self.RS + self.RON) if closed else 0.0  # drv -> rs -> k1 -> b
        v_a = v + series * self.RON if closed else self.V  # open: no current in rs
        return {
            "v_b": v,
            "v_ab": v_a - v,
            "i_rs": series,
            "i_k1": series,
            "i_vs": -series,                               # counted from p through the source to n
            "i_ch": series + self.I - v / self.RLOAD,      # KCL at b
            "i_ib": self.I,
            "i_load": v / self.RLOAD,
        }

    @pytest.mark.parametrize("closed", [True, False])
    def test_each_probe(self, fixture, closed):
        drive = fo.Drive([0, 1e-3], end=4e-3, vs=[self.V] * 2, ib=[self.I] * 2, k1=[1, int(closed)])
        res = fixture.respond(drive, initial=0.3)
        t = np.array([1e-3, 1.2e-3, 2.5e-3, 4e-3])
        v = res.total(t)
        expected = self.hand(v, closed)
        for name, value in expected.items():
            np.testing.assert_allclose(res.probe(name, t), value, rtol=1e-10, atol=1e-15, err_msg=name)

    def test_rows_are_affine_in_state_and_levels(self, fixture):
        layout, red = reduced(fixture, k1=True)
        probes = {p.name: p for p in fixture.probes}
        row = network.probe_row(layout, fixture.netlist, red, probes["i_ch"])
        # KCL at b: i_ch = (vs - x) / (RS + RON) + ib - x / RLOAD; sources in fixture order (vs, ib).
        g = 1.0 / (self.RS + self.RON)
        np.testing.assert_allclose(row, [-g - 1.0 / self.RLOAD, g, 1.0], rtol=1e-12)

    def test_inductor_probes(self):
        # An invented coil driver: 12 V behind 47 Ω, coil 22 mH with 150 Ω across it.
        fx = fo.Fixture()
        fx.voltage_source("vs", "s", "gnd")
        fx.resistor("rsrc", "s", "a", 47.0)
        fx.inductor("l", "a", "gnd", 22e-3)
        fx.resistor("rp", "a", "gnd", 150.0)
        fx.probe("i_l", through="l")
        fx.probe("v_l", node="a")
        fx.probe("i_rp", through="rp")
        res = fx.respond(fo.Drive([0], end=2e-3, vs=[12.0]), initial=0.05)
        t = np.linspace(0, 2e-3, 7)
        i = res.total(t)
        # KCL at a: (12 - v)/47 = i + v/150  ->  v = (12/47 - i) / (1/47 + 1/150).
        v = (12.0 / 47.0 - i) / (1 / 47.0 + 1 / 150.0)
        np.testing.assert_allclose(res.probe("i_l", t), i, rtol=1e-12)
        np.testing.assert_allclose(res.probe("v_l", t), v, rtol=1e-10)
        np.testing.assert_allclose(res.probe("i_rp", t), v / 150.0, rtol=1e-10)


# ------------------------------------------------------------------------------------------
class TestStamp:
    def test_sizes_follow_the_layout(self):
        fx = fo.Fixture.rc(r=1e3, c=1e-6)
        layout, _ = fx.configuration(())
        A, B = network.stamp(layout, lambda name, key: 1.0, 0.0, 1.0, 2)
        assert len(A) == layout.size == len(layout.nodes) + len(layout.voltage_branches)
        assert len(B) == layout.size and len(B[0]) == 2


def test_errors_are_value_errors():
    # DESIGN.md: every error a user can trigger is a ValueError subclass.
    assert issubclass(ZeroTimeError, TopologyError)
    assert issubclass(TopologyError, InputError)
    assert issubclass(InputError, ValueError)


class TestCancellation:
    def test_supply_cut_off_from_the_coil_has_exactly_zero_gain(self):
        # Found while writing the relay notebook: with the driver open the supply cannot drive
        # the coil (v(sup) - v(mid) does not depend on it), yet the reduced gain came out at
        # about 1e-20 A/V from rounding, and the response ended at -2 aA instead of decaying to 0.
        fx = fo.Fixture()
        fx.voltage_source("vsup", "sup", "gnd")
        fx.inductor("coil", "sup", "mid", 0.2)
        fx.resistor("rcoil", "mid", "drain", 400.0)
        fx.switch("kdrv", "drain", "gnd")
        fx.resistor("rfb", "sup", "drain", 2.2e3)
        _, red = reduced(fx, kdrv=False)
        assert red.gain[0] == 0.0
        # KVL round the loop coil-rcoil-rfb: tau = L / (400 + 2200).
        assert red.tau == pytest.approx(0.2 / 2600.0, rel=1e-12)
        res = fx.respond(fo.Drive([0, 20e-3], end=40e-3, vsup=[24.0, 24.0], kdrv=[1, 0]))
        assert res.final[1] == 0.0
        assert 0.0 <= res.boundary[-1] < 1e-100  # 60 mA after 260 time constants


class TestRandomResistiveNetworks:
    @settings(max_examples=60)
    @given(resistive_networks())
    def test_thevenin_against_nodal_analysis(self, network):
        inner, edges, values, (cap_a, cap_b) = network
        fx = _network_fixture(network)
        # Reference: textbook nodal analysis, written here.  G v = i over the inner nodes with
        # the source node held at V; V_th is the open-circuit v(a) - v(b) per volt, and
        # R_th = d^T G^-1 d with d the unit injection at a and out of b (sources zeroed).
        index = {n: k for k, n in enumerate(inner)}
        G, drive = _nodal_matrix(index, [(a, b, r) for (a, b), r in zip(edges, values)])
        d = _unit_injection(index, cap_a, cap_b)
        assume(np.linalg.cond(G) < 1e9)
        r_th = float(d @ np.linalg.solve(G, d))
        v_th = float(d @ np.linalg.solve(G, drive))
        _, red = fx.configuration(())
        assert red.resistance == pytest.approx(r_th, rel=1e-8)
        # abs: a zero open-circuit voltage comes out as rounding (~1e-12 V/V) in both solutions.
        assert red.gain[0] == pytest.approx(v_th, rel=1e-8, abs=1e-10)
        assert red.tau == pytest.approx(r_th * 1e-6, rel=1e-8)


class TestExtremeRatios:
    @settings(max_examples=60, deadline=None)
    @given(extreme_networks())
    def test_thevenin_to_full_precision(self, network):
        inner, edges, values, (cap_a, cap_b) = network
        fx = _network_fixture(network)
        # Reference: the textbook nodal analysis of TestRandomResistiveNetworks, in exact
        # rational arithmetic from the very conductances the fixture uses (1/R rounded once).
        index = {n: k for k, n in enumerate(inner)}
        size = len(index)
        G = [[Fraction(0)] * size for _ in range(size)]
        drive = [Fraction(0)] * size
        for (a, b), r in zip(edges, values):
            g = Fraction(1.0 / r)
            for here, there in ((a, b), (b, a)):
                if here in index:
                    G[index[here]][index[here]] += g
                    if there in index:
                        G[index[here]][index[there]] -= g
                    elif there == "s":
                        drive[index[here]] += g
        d = [Fraction(int(n == cap_a) - int(n == cap_b)) for n in inner]
        r_th = sum(x * y for x, y in zip(d, _exact_solve(G, d)))
        v_th = sum(x * y for x, y in zip(d, _exact_solve(G, drive)))
        _, red = fx.configuration(())
        # A plain double-precision solve was up to 5e-6 off here; the refined one is exact
        # to a few units in the last place.
        assert abs(Fraction(red.resistance) - r_th) <= 1e-14 * r_th
        assert abs(Fraction(float(red.gain[0])) - v_th) <= 1e-14 * abs(v_th) + Fraction(1, 10**18)


class TestFloatingNodes:
    def fixture(self):
        # Two relays in series with a resistor between them (invented): with both open, the
        # resistor floats.
        fx = fo.Fixture()
        fx.voltage_source("v", "x", "gnd")
        fx.resistor("rs", "x", "a", 1e3)
        fx.switch("k1", "a", "m")
        fx.resistor("rmid", "m", "n", 10.0)
        fx.switch("k2", "n", "b")
        fx.capacitor("c", "b", "gnd", 1e-6)
        fx.probe("v_m", node="m")
        fx.probe("v_mn", node="m", reference="n")
        fx.probe("i_mid", through="rmid")
        return fx

    def drive(self):
        return fo.Drive([0, 1e-3, 2e-3], end=3e-3, v=[1, 1, 1], k1=[1, 0, 0], k2=[1, 1, 0])

    def test_voltage_of_a_floating_node_is_refused(self):
        # Found while writing these tests: the floating node was pinned at 0 V for the solve,
        # and a probe against ground read that arbitrary 0 V as if it were measured.
        res = self.fixture().respond(self.drive())
        with pytest.raises(TopologyError, match=r"segment 2 .*k1 open, k2 open.*probe 'v_m': node 'm' floats"):
            res.probe("v_m", [0.5e-3])

    def test_quantities_inside_the_island_are_defined(self):
        res = self.fixture().respond(self.drive())
        t = np.array([0.5e-3, 1.5e-3, 2.5e-3])
        # Ohm's law in the series loop while k1 and k2 are closed: i = (v - x) / (1k + 10).
        x = res.total(t[0])
        i = (1.0 - x) / 1010.0
        np.testing.assert_allclose(res.probe("i_mid", t), [i, 0.0, 0.0], rtol=1e-12, atol=1e-18)
        np.testing.assert_allclose(res.probe("v_mn", t), [10.0 * i, 0.0, 0.0], rtol=1e-12, atol=1e-15)

    def test_leakage_defines_it(self):
        # 1 MΩ: a node held only by a leakage conductance next to a far larger one (here
        # 10 Ω) is solved to full precision (the refined solve; see TestExtremeRatios).
        fx = self.fixture().with_values(k1=("0", "1M"))
        res = fx.respond(self.drive())
        # k1 leaks: no current flows once k2 is open too, so m sits at the source's 1 V.
        assert res.probe("v_m", 2.5e-3) == pytest.approx(1.0, rel=1e-15)


class TestRandomSwitchedNetworks:
    @settings(max_examples=60)
    @given(switched_networks())
    def test_thevenin_against_nodal_analysis(self, network):
        inner, edges, values, (cap_a, cap_b), kinds, r_off, closed, inject = network
        fx = fo.Fixture()
        fx.voltage_source("v", "s", "gnd")
        fx.current_source("i", "gnd", inject)  # injects into `inject`
        states = {}
        for k, ((a, b), r, kind, off, on) in enumerate(zip(edges, values, kinds, r_off, closed)):
            if kind == "resistor":
                fx.resistor(f"r{k}", a, b, r)
            else:
                fx.switch(f"k{k}", a, b, r_on=r, r_off=max(off, 2 * r))
                states[f"k{k}"] = on
        fx.capacitor("c", cap_a, cap_b, 1e-6)
        try:
            fx.check()
        except TopologyError:
            assume(False)
        # Reference: nodal analysis written here, each branch as its present resistance
        # (an open switch without leakage is no branch); nodes cut off from ground and the
        # source are left out, and the case is skipped when that leaves the capacitor or the
        # current source without a path.
        branches = []
        for k, ((a, b), r, kind, off, on) in enumerate(zip(edges, values, kinds, r_off, closed)):
            resistance = r if kind == "resistor" or on else max(off, 2 * r)
            if math.isfinite(resistance):
                branches.append((a, b, resistance))
        reach, frontier = {"gnd", "s"}, ["gnd", "s"]
        while frontier:
            here = frontier.pop()
            for a, b, _ in branches:
                for x, y in ((a, b), (b, a)):
                    if x == here and y not in reach:
                        reach.add(y)
                        frontier.append(y)
        assume({cap_a, cap_b, inject} <= reach)
        live = [n for n in inner if n in reach]
        index = {n: k for k, n in enumerate(live)}
        G, by_volt = _nodal_matrix(index, branches)
        by_amp = np.zeros(len(live))
        by_amp[index[inject]] = 1.0
        d = _unit_injection(index, cap_a, cap_b)
        assume(np.linalg.cond(G) < 1e8)
        # The same nodal analysis solved exactly (fractions): a float solve of a system with
        # a 1 GΩ leakage beside 1 Ω is itself a few 1e-7 off.
        exact_G = _exact_nodal(index, branches)

        def through(rhs):
            solution = _exact_solve(exact_G, [Fraction(v) for v in rhs])
            return float(sum(Fraction(x) * y for x, y in zip(d, solution)))

        exact_by_volt = [sum((1 / Fraction(r) for a, b, r in branches if {a, b} == {n, "s"}), Fraction(0))
                         for n in live]
        r_th = through(d)
        _, red = fx.configuration(fx.switch_states(**states))
        assert red.resistance == pytest.approx(r_th, rel=1e-7)
        solution = _exact_solve(exact_G, exact_by_volt)
        assert red.gain[0] == pytest.approx(float(sum(Fraction(x) * y for x, y in zip(d, solution))),
                                            rel=1e-7, abs=1e-10)
        assert red.gain[1] == pytest.approx(through(by_amp), rel=1e-7, abs=1e-10 * r_th)


class TestUnrepresentableValues:
    """Values whose products or ratios leave double precision are refused, naming the part."""

    @pytest.mark.parametrize("r, c", [(1e-300, 1e-300), (1e300, 1e300), (1e-200, 1e-200)])
    def test_tau_that_underflows_or_overflows_is_refused_naming_the_parts(self, r, c):
        # Handbook tau = R C: 1e-600 s or 1e600 s has no double (IEEE 754 range 1e-308..1e308).
        with pytest.raises(InputError, match=r"\b(r|c)\b.*cannot be"):
            fo.Fixture.rc(r, c).tau

    @pytest.mark.parametrize("r", [5e-324, 1e-310])
    def test_resistance_whose_conductance_overflows_is_refused_naming_the_resistor(self, r):
        with pytest.raises(InputError, match=r"^r: .* Ω cannot be computed with"):
            fo.Fixture.rc(r, 1e-6).tau

    def test_wide_but_representable_values_still_reduce(self):
        # tau = R C exactly as a hand calculation rounds it (handbook).
        assert fo.Fixture.rc(1e-100, 1e-100).tau == 1e-100 * 1e-100


# ------------------------------------------------------------------------------------------
class TestReduceBatch:
    """A batch of value sets reduced at once equals each set reduced alone, bit for bit
    (the one-set path is the batch of one; the reference here is a fresh fixture per set)."""

    @staticmethod
    def bridge() -> fo.Fixture:
        fx = fo.Fixture()
        fx.voltage_source("v", "s", "gnd")
        fx.current_source("i", "b", "gnd")
        fx.resistor("r1", "s", "a", "1k")
        fx.resistor("r2", "a", "b", "1m")
        fx.resistor("r3", "b", "gnd", "1T")
        fx.resistor("r4", "s", "b", "47k")
        fx.inductor("l", "a", "gnd", "10m")
        return fx

    def test_each_entry_equals_the_one_set_reduction(self):
        fx = self.bridge()
        rng = np.random.default_rng(5)
        count = 50
        values = {name: fx.part_map[name].value * 10.0 ** rng.uniform(-2, 2, count) for name in ("r1", "r2", "r3", "r4")}
        storage = 1e-2 * 10.0 ** rng.uniform(-1, 1, count)
        layout = network.plan(fx.netlist, ())
        order = [name for name, _, _, _ in layout.conductances]
        batch = network.reduce_batch(layout, fx.netlist, np.column_stack([values[n] for n in order]), storage)
        for k in range(count):
            unit = fx.with_values(l=float(storage[k]), **{n: float(v[k]) for n, v in values.items()})
            one_layout, one = unit.configuration()
            entry = batch.item(k)
            assert entry.tau == one.tau
            for field in ("gain", "drift", "solution", "low"):
                assert np.array_equal(getattr(entry, field), getattr(one, field)), field
            probe = fo.netlist.Probe("p", node="b", reference="a")
            assert np.array_equal(network.probe_row(one_layout, unit.netlist, entry, probe),
                                  network.probe_row(one_layout, unit.netlist, one, probe))

    def test_an_unrepresentable_entry_is_marked_and_a_tiny_resistance_named(self):
        fx = fo.Fixture.rc("1k", "1u")
        layout = network.plan(fx.netlist, ())
        batch = network.reduce_batch(layout, fx.netlist, np.array([[1e3], [1e3]]), np.array([1e-6, 0.0]))  # tau 0: not a number to run
        assert batch.fine.tolist() == [True, False]
        with pytest.raises(InputError, match=r"^r: 5e-324 Ω cannot be computed"):
            network.reduce_batch(layout, fx.netlist, np.array([[1e3], [5e-324]]), np.array([1e-6, 1e-6]))

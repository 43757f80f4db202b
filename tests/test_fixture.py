"""Tests for firstorder.fixture: the builder, its validation, and networks with switches.

Responses of networks are checked against scipy.integrate.solve_ivp of nodal equations
written in this file by hand (Kirchhoff's current law per network, not firstorder's
modified nodal analysis), against Thevenin/Norton equivalence, and against trade facts
marked as such.
"""

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import firstorder as fo
from firstorder.errors import InputError, TopologyError, ZeroTimeError


def integrate(rhs, drive, columns, initial, grid, scale):
    """Reference: solve_ivp (DOP853, rtol 1e-12) of `rhs(x, levels)`, segment by segment.

    Each segment is integrated in its own time (the equations do not depend on t), from the
    state the previous segment ended in.  Returns the state at every change and at the end,
    and the state on `grid`.
    """
    states = [initial]
    on_grid = np.full(grid.shape, np.nan)
    starts, ends = drive.times, drive.ends
    x = initial
    for k in range(len(drive)):
        levels = {name: float(drive.levels(name)[k]) for name in columns}
        solution = solve_ivp(lambda t, y: [rhs(y[0], levels)], (0.0, ends[k] - starts[k]), [x],
                             method="DOP853", rtol=1e-12, atol=1e-15 * scale, dense_output=True)
        inside = (grid >= starts[k]) & ((grid < ends[k]) | ((k == len(drive) - 1) & (grid <= ends[k])))
        if inside.any():
            on_grid[inside] = solution.sol(grid[inside] - starts[k])[0]
        x = float(solution.y[0, -1])
        states.append(x)
    return np.array(states), on_grid


# Three invented fixtures, each with two sources and switches, and its KCL written by hand.
class HoldWithBias:
    """A DAC behind rs and a relay (r_on, leaking r_off) into a hold capacitor read by a
    1 MΩ meter, with a reference pulling the node through rb."""

    RS, RON, ROFF, C, RIN, RB = 1e3, 50.0, 1e8, 100e-9, 1e6, 100e3

    def fixture(self):
        fx = fo.Fixture()
        fx.voltage_source("vdac", "d", "gnd")
        fx.resistor("rs", "d", "a", self.RS)
        fx.switch("k1", "a", "b", r_on=self.RON, r_off=self.ROFF)
        fx.capacitor("ch", "b", "gnd", self.C)
        fx.resistor("rin", "b", "gnd", self.RIN)
        fx.voltage_source("vref", "r", "gnd")
        fx.resistor("rb", "r", "b", self.RB)
        fx.probe("v_a", node="a")
        return fx

    def drive(self):
        return fo.Drive([0, 0.2e-3, 0.5e-3, 0.9e-3, 1.4e-3, 2.0e-3], end=3.0e-3,
                        vdac=[1.0, 4.0, 4.0, -2.5, -2.5, 3.0], vref=[2.5, 2.5, 1.0, 1.0, 0.0, 2.5],
                        k1=[1, 1, 0, 1, 0, 0])

    def rhs(self, x, u):
        # KCL at b: C dx/dt = (vdac - x) / (rs + r_k1) + (vref - x) / rb - x / rin.
        r_k1 = self.RON if u["k1"] else self.ROFF
        return ((u["vdac"] - x) / (self.RS + r_k1) + (u["vref"] - x) / self.RB - x / self.RIN) / self.C

    def probe(self, x, u):
        # v(a): the source minus the drop across rs of the series current.
        r_k1 = self.RON if u["k1"] else self.ROFF
        return u["vdac"] - self.RS * (u["vdac"] - x) / (self.RS + r_k1)

    probe_name, scale, initial = "v_a", 1.0, 0.7


class CoilWithTestCurrent:
    """A 24 V supply switched (r_on 0.5 Ω, ideal open) onto a relay coil (L, rcoil) with a
    flyback resistor across supply side and ground, and a test current injected into the coil's
    low end."""

    RON, L, RCOIL, RFB = 0.5, 50e-3, 120.0, 680.0

    def fixture(self):
        fx = fo.Fixture()
        fx.voltage_source("vsup", "sup", "gnd")
        fx.switch("k1", "sup", "top", r_on=self.RON)
        fx.inductor("lc", "top", "mid", self.L)
        fx.resistor("rcoil", "mid", "gnd", self.RCOIL)
        fx.resistor("rfb", "top", "gnd", self.RFB)
        fx.current_source("itest", "gnd", "mid")
        fx.probe("v_coil", node="top", reference="mid")
        return fx

    def drive(self):
        return fo.Drive([0, 0.3e-3, 1.0e-3, 1.2e-3, 2.0e-3], end=3.0e-3,
                        vsup=[24.0, 24.0, 12.0, 12.0, 24.0], itest=[0.0, 0.01, 0.01, -0.02, 0.0],
                        k1=[1, 1, 0, 1, 0])

    def tops(self, i, u):
        # KCL at top: (vsup - v_top) / r_on = i + v_top / rfb when closed; v_top = -i rfb open.
        if u["k1"]:
            return (u["vsup"] / self.RON - i) / (1 / self.RON + 1 / self.RFB)
        return -i * self.RFB

    def rhs(self, i, u):
        # KCL at mid: the coil current plus the test current leave through rcoil.
        v_mid = (i + u["itest"]) * self.RCOIL
        return (self.tops(i, u) - v_mid) / self.L

    def probe(self, i, u):
        return self.tops(i, u) - (i + u["itest"]) * self.RCOIL

    probe_name, scale, initial = "v_coil", 1e-3, 0.05


class SampleWithDischarge:
    """An input behind r1 and a sampling switch into a capacitor, a bias current into it, a
    discharge switch through rdis, and a leakage resistance."""

    R1, RON1, C, RON2, RDIS, RLEAK = 2.2e3, 10.0, 10e-9, 100.0, 1e3, 1e6

    def fixture(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "i", "gnd")
        fx.resistor("r1", "i", "a", self.R1)
        fx.switch("ksample", "a", "b", r_on=self.RON1)
        fx.capacitor("cs", "b", "gnd", self.C)
        fx.current_source("ibias", "gnd", "b")
        fx.switch("kdump", "b", "d", r_on=self.RON2)
        fx.resistor("rdis", "d", "gnd", self.RDIS)
        fx.resistor("rleak", "b", "gnd", self.RLEAK)
        fx.probe("i_dump", through="kdump")
        return fx

    def drive(self):
        return fo.Drive([0, 20e-6, 60e-6, 70e-6, 150e-6], end=400e-6,
                        vin=[3.0, 3.0, -1.0, -1.0, 2.0], ibias=[1e-6, 5e-6, 5e-6, 0.0, -2e-6],
                        ksample=[1, 0, 0, 1, 0], kdump=[0, 0, 1, 0, 0])

    def rhs(self, x, u):
        # KCL at b.
        into = u["ksample"] * (u["vin"] - x) / (self.R1 + self.RON1) + u["ibias"]
        out = u["kdump"] * x / (self.RON2 + self.RDIS) + x / self.RLEAK
        return (into - out) / self.C

    def probe(self, x, u):
        return u["kdump"] * x / (self.RON2 + self.RDIS)

    probe_name, scale, initial = "i_dump", 1.0, -0.4


class BridgeWithShuntCalibration:
    """A strain-gauge bridge (invented values) with switched excitation, a shunt-calibration
    resistor switched across one arm, a filter capacitor across the output, and a test current
    injected into one output node.  Four nodal unknowns: solved here as a small linear system."""

    RON, R1, R2, R3, R4, RSHUNT, C = 2.0, 350.0, 350.0, 350.0, 350.7, 100e3, 220e-9

    def fixture(self):
        fx = fo.Fixture()
        fx.voltage_source("vex", "s", "gnd")
        fx.switch("kexc", "s", "exc", r_on=self.RON)
        fx.resistor("r1", "exc", "a", self.R1)
        fx.resistor("r2", "a", "gnd", self.R2)
        fx.resistor("r3", "exc", "b", self.R3)
        fx.resistor("r4", "b", "gnd", self.R4)
        fx.switch("kcal", "a", "sh")
        fx.resistor("rshunt", "sh", "gnd", self.RSHUNT)
        fx.capacitor("cf", "a", "b", self.C)
        fx.current_source("ical", "gnd", "b")
        fx.probe("v_b", node="b")
        return fx

    def drive(self):
        return fo.Drive([0, 0.1e-3, 0.4e-3, 0.6e-3, 0.8e-3], end=1.2e-3,
                        vex=[5.0, 5.0, 5.0, 10.0, 10.0], ical=[0.0, 0.0, 1e-5, 1e-5, -2e-5],
                        kexc=[1, 1, 1, 1, 0], kcal=[0, 1, 0, 1, 1])

    def nodes(self, x, u):
        """[v_exc, v_a, v_b, i_c] from KCL at exc, a, b and the capacitor's voltage x = v_a - v_b."""
        g_on = u["kexc"] / self.RON
        g_cal = u["kcal"] / self.RSHUNT
        matrix = np.array([
            [-g_on - 1 / self.R1 - 1 / self.R3, 1 / self.R1, 1 / self.R3, 0.0],     # node exc
            [1 / self.R1, -1 / self.R1 - 1 / self.R2 - g_cal, 0.0, -1.0],           # node a
            [1 / self.R3, 0.0, -1 / self.R3 - 1 / self.R4, 1.0],                    # node b
            [0.0, 1.0, -1.0, 0.0],                                                  # the capacitor
        ])
        rhs = np.array([-g_on * u["vex"], 0.0, -u["ical"], x])
        return np.linalg.solve(matrix, rhs)

    def rhs(self, x, u):
        return self.nodes(x, u)[3] / self.C

    def probe(self, x, u):
        return self.nodes(x, u)[2]

    probe_name, scale, initial = "v_b", 1e-3, 0.002


NETWORKS = [HoldWithBias(), CoilWithTestCurrent(), SampleWithDischarge(), BridgeWithShuntCalibration()]


class TestRespondAgainstSolveIvp:
    @pytest.mark.parametrize("network", NETWORKS, ids=lambda n: type(n).__name__)
    def test_boundary_total_and_probe(self, network):
        fx, drive = network.fixture(), network.drive()
        res = fx.respond(drive, initial=network.initial)
        grid = np.linspace(drive.times[0], drive.end, 301)
        reference_states, reference_grid = integrate(network.rhs, drive, drive.names, network.initial,
                                                     grid, network.scale)
        size = np.abs(reference_states).max()
        # Reference: scipy.integrate.solve_ivp of the KCL right-hand side written above.
        np.testing.assert_allclose(res.boundary, reference_states, rtol=1e-9, atol=1e-9 * size)
        np.testing.assert_allclose(res.total(grid), reference_grid, rtol=1e-8, atol=1e-9 * size)
        segment = np.clip(np.searchsorted(drive.times, grid, side="right") - 1, 0, len(drive) - 1)
        expected_probe = np.array([
            network.probe(x, {n: float(drive.levels(n)[k]) for n in drive.names})
            for x, k in zip(reference_grid, segment)
        ])
        probe = res.probe(network.probe_name, grid)
        np.testing.assert_allclose(probe, expected_probe, rtol=1e-8, atol=1e-8 * np.abs(expected_probe).max())

    @pytest.mark.parametrize("network", NETWORKS, ids=lambda n: type(n).__name__)
    def test_periodic_start_repeats_under_solve_ivp(self, network):
        fx, drive = network.fixture(), network.drive()
        res = fx.respond(drive, initial="periodic")
        grid = np.array([drive.times[0]])
        reference_states, _ = integrate(network.rhs, drive, drive.names, res.initial, grid, network.scale)
        # Reference: solve_ivp from the periodic start ends where it began (one period).
        size = max(np.abs(reference_states).max(), network.scale)
        assert reference_states[-1] == pytest.approx(res.initial, rel=1e-9, abs=1e-9 * size)

    @pytest.mark.parametrize("network", NETWORKS, ids=lambda n: type(n).__name__)
    def test_contributions_add_up_for_state_and_probe(self, network):
        fx, drive = network.fixture(), network.drive()
        res = fx.respond(drive, initial=network.initial)
        grid = np.linspace(drive.times[0], drive.end, 97)
        sources = [p.name for p in fx.sources]
        # DESIGN.md semantics: the contributions of the sources add up to zero_state (linearity).
        total = sum(res.contribution(s, grid) for s in sources)
        np.testing.assert_allclose(total, res.zero_state(grid), rtol=1e-12, atol=1e-15)
        probe_sum = sum(res.probe(network.probe_name, grid, component=s) for s in sources)
        np.testing.assert_allclose(probe_sum, res.probe(network.probe_name, grid, component="zero_state"),
                                   rtol=1e-12, atol=1e-15)
        np.testing.assert_allclose(
            res.probe(network.probe_name, grid),
            res.probe(network.probe_name, grid, component="zero_input")
            + res.probe(network.probe_name, grid, component="zero_state"),
            rtol=1e-12, atol=1e-15)


class TestTheveninNortonEquivalence:
    """Handbook: a current source I with R in parallel is the same as a source I·R with R in series."""

    R, LEVELS = 2.2e3, [0.0, 1.5e-3, -0.5e-3, 2e-3]
    TIMES = [0, 0.5e-3, 1.7e-3, 2.2e-3]

    def pair(self, store_kind, value):
        thevenin = fo.Fixture()
        thevenin.voltage_source("src", "s", "gnd")
        thevenin.resistor("r", "s", "out", self.R)
        norton = fo.Fixture()
        norton.current_source("src", "gnd", "out")
        norton.resistor("r", "out", "gnd", self.R)
        for fx in (thevenin, norton):
            getattr(fx, store_kind)("x", "out", "gnd", value)
        return thevenin, norton

    @pytest.mark.parametrize("store_kind, value", [("capacitor", 470e-9), ("inductor", 1.0)])
    def test_same_response(self, store_kind, value):
        thevenin, norton = self.pair(store_kind, value)
        amps = np.array(self.LEVELS)
        res_v = thevenin.respond(fo.Drive(self.TIMES, end=4e-3, src=amps * self.R), initial=0.0)
        res_i = norton.respond(fo.Drive(self.TIMES, end=4e-3, src=amps), initial=0.0)
        grid = np.linspace(0, 4e-3, 41)
        scale = np.abs(res_v.boundary).max()
        np.testing.assert_allclose(res_i.boundary, res_v.boundary, rtol=1e-12, atol=1e-12 * scale)
        np.testing.assert_allclose(res_i.total(grid), res_v.total(grid), rtol=1e-12, atol=1e-12 * scale)
        np.testing.assert_allclose(res_i.tau, res_v.tau, rtol=1e-12)


class TestFlyback:
    """A relay coil switched on its low side, with a flyback resistor across it (invented values)."""

    V, L, RCOIL, RFB = 24.0, 0.2, 400.0, 2.2e3
    T_OPEN = 5e-3

    def coil(self, flyback=True):
        fx = fo.Fixture()
        fx.voltage_source("vsup", "sup", "gnd")
        fx.inductor("coil", "sup", "mid", self.L)
        fx.resistor("rcoil", "mid", "drain", self.RCOIL)
        fx.switch("kdrv", "drain", "gnd")
        if flyback:
            fx.resistor("rfb", "sup", "drain", self.RFB)
        fx.probe("v_coil", node="sup", reference="drain")
        fx.probe("v_switch", node="drain")
        return fx

    def drive(self):
        return fo.Drive([0, self.T_OPEN], end=10e-3, vsup=[self.V, self.V], kdrv=[1, 0])

    def test_current_decays_with_l_over_r_coil_plus_r_flyback(self):
        res = self.coil().respond(self.drive(), initial="settled")
        i0 = self.V / self.RCOIL  # Ohm's law: the settled coil current
        assert res.boundary[1] == pytest.approx(i0, rel=1e-12)
        # Common practice: after opening, the coil current decays with tau = L / (R_coil + R_flyback).
        tau = self.L / (self.RCOIL + self.RFB)
        assert res.tau[1] == pytest.approx(tau, rel=1e-12)
        t = self.T_OPEN + np.array([0.0, 0.5, 1.0, 3.0]) * tau
        np.testing.assert_allclose(res.total(t), i0 * np.exp(-(t - self.T_OPEN) / tau), rtol=1e-10)

    def test_coil_voltage_jumps_to_minus_i0_times_r_flyback(self):
        res = self.coil().respond(self.drive(), initial="settled")
        i0 = self.V / self.RCOIL
        after, before_end = res.probe_boundary("v_coil")
        # Closed: the whole supply is across the coil (ideal switch).
        assert before_end[0] == pytest.approx(self.V, rel=1e-12)
        # Common practice: at the opening the coil voltage jumps to -I0 * R_flyback.
        assert after[1] == pytest.approx(-i0 * self.RFB, rel=1e-12)
        assert res.probe("v_coil", self.T_OPEN) == pytest.approx(-i0 * self.RFB, rel=1e-12)
        assert res.probe("v_coil", self.T_OPEN * (1 - 1e-9)) == pytest.approx(self.V, rel=1e-6)
        # KVL: the switch node sits at the supply plus the flyback drop.
        assert after[1] == pytest.approx(self.V - res.probe("v_switch", self.T_OPEN), rel=1e-12)

    def test_settling_of_the_coil_voltage(self):
        res = self.coil().respond(self.drive(), initial="settled")
        table = res.settling(fo.Tolerance.absolute(1.0), probe="v_coil")
        spike = self.V / self.RCOIL * self.RFB
        tau = self.L / (self.RCOIL + self.RFB)
        # Hand formula: |-I0 Rfb e^(-t/tau)| falls below 1 V at t = tau ln(I0 Rfb / 1 V).
        assert table["start_value"].iloc[1] == pytest.approx(-spike, rel=1e-12)
        assert table["settle_time"].iloc[1] == pytest.approx(tau * math.log(spike / 1.0), rel=1e-12)

    def test_no_flyback_path_is_refused_with_the_caution(self):
        with pytest.raises(ZeroTimeError) as caught:
            self.coil(flyback=False).respond(self.drive(), initial="settled")
        message = str(caught.value)
        assert "segment 1" in message and "kdrv open" in message
        assert "inductor 'coil'" in message
        assert "spike" in message and "flyback" in message
        assert "local codes" in message and "licensed practice" in message

    def test_high_spike_is_cautioned(self):
        # 60 mA into 2.2 kΩ is 132 V at the opening: above the 60 V caution limit.
        res = self.coil().respond(self.drive(), initial="settled")
        kinds = [c.kind for c in res.cautions]
        assert "voltage" in kinds
        text = " ".join(str(c) for c in res.cautions)
        assert "flyback" in text and "licensed practice" in text


class TestHoldAndSwitchResistance:
    C = 1e-9

    def track_and_hold(self, r_on=0.0, r_off=math.inf, r_leak=None):
        fx = fo.Fixture()
        fx.voltage_source("vin", "d", "gnd")
        fx.resistor("rs", "d", "a", 1e3)
        fx.switch("ktrack", "a", "b", r_on=r_on, r_off=r_off)
        fx.capacitor("ch", "b", "gnd", self.C)
        if r_leak is not None:
            fx.resistor("rleak", "b", "gnd", r_leak)
        return fx

    def test_open_switch_holds_exactly(self):
        fx = self.track_and_hold()
        drive = fo.Drive([0, 2e-6, 5e-6], end=9e-6, vin=[1.0, -3.0, 4.0], ktrack=[1, 0, 0])
        res = fx.respond(drive, initial=0.25)
        assert np.isinf(res.tau[1]) and np.isinf(res.tau[2])
        assert res.boundary[2] == res.boundary[1] == res.boundary[3]
        t = np.linspace(2e-6, 9e-6, 15)
        assert np.all(res.total(t) == res.boundary[1])

    def test_r_on_adds_to_the_charging_path(self):
        fx = self.track_and_hold(r_on=330.0)
        drive = fo.Drive([0], end=10e-6, vin=[2.0], ktrack=[1])
        res = fx.respond(drive)
        # Series resistances add (handbook): tau = (R + r_on) C.
        tau = (1e3 + 330.0) * self.C
        assert res.tau[0] == pytest.approx(tau, rel=1e-12)
        # Common practice: one time constant reaches 63.2 % of the step.
        assert res.total(tau) == pytest.approx(2.0 * (1 - math.exp(-1)), rel=1e-12)

    def test_r_off_leakage_is_the_droop_when_it_is_the_only_path(self):
        # The switch straight at the source: open, only r_off joins the capacitor to anything.
        fx = fo.Fixture()
        fx.voltage_source("vin", "d", "gnd")
        fx.switch("ktrack", "d", "b", r_on=100.0, r_off=1e10)
        fx.capacitor("ch", "b", "gnd", self.C)
        res = fx.respond(fo.Drive([0, 5e-6], end=20.0, vin=[1.0, 0.0], ktrack=[1, 0]))
        assert res.tau[0] == pytest.approx(100.0 * self.C, rel=1e-12)
        assert res.tau[1] == pytest.approx(1e10 * self.C, rel=1e-12)
        held = res.boundary[1]
        # The droop towards the (now 0 V) source: x(t) = x0 exp(-t / (r_off C)).
        assert res.boundary[2] == pytest.approx(held * math.exp(-(20.0 - 5e-6) / (1e10 * self.C)), rel=1e-12)

    def test_leakage_resistor_droop(self):
        fx = self.track_and_hold(r_leak=1e9)
        res = fx.respond(fo.Drive([0, 50e-6], end=1.0, vin=[5.0, 5.0], ktrack=[1, 0]))
        assert res.tau[1] == pytest.approx(1e9 * self.C, rel=1e-12)
        droop = res.boundary[1] - res.boundary[2]
        assert droop == pytest.approx(res.boundary[1] * -math.expm1(-(1.0 - 50e-6) / 1.0), rel=1e-12)


class TestBuilderValidation:
    """Every builder and topology error: its type, and that it names the parts or nodes."""

    def test_duplicate_part_name(self):
        fx = fo.Fixture()
        fx.resistor("r1", "a", "gnd", 1e3)
        with pytest.raises(InputError, match="'r1' is used twice"):
            fx.capacitor("r1", "a", "b", 1e-9)

    def test_duplicate_probe_name(self):
        fx = fo.Fixture.rc(r=1e3, c=1e-9)
        fx.probe("v", node="out")
        with pytest.raises(InputError, match="'v' is used twice"):
            fx.probe("v", through="r")

    def test_part_connected_to_itself(self):
        with pytest.raises(TopologyError, match="part 'rx': both ends are on node 'n1'"):
            fo.Fixture().resistor("rx", "n1", "n1", 1e3)

    def test_no_storage_element(self):
        fx = fo.Fixture()
        fx.voltage_source("v", "a", "gnd")
        fx.resistor("r", "a", "gnd", 1e3)
        with pytest.raises(TopologyError, match="not first order: the fixture has no capacitor or inductor"):
            fx.respond(fo.Drive([0], end=1.0, v=[1.0]))

    def test_second_storage_element(self):
        fx = fo.Fixture.rc(r=1e3, c=1e-9)
        with pytest.raises(TopologyError, match="not first order: 'l2' .*capacitor 'c'"):
            fx.inductor("l2", "out", "gnd", 1e-3)

    def test_node_with_one_part(self):
        fx = fo.Fixture.rc(r=1e3, c=1e-9)
        fx.resistor("rdangle", "out", "stub", 1e3)
        with pytest.raises(TopologyError, match="node 'stub' connects only to 'rdangle'"):
            fx.check()

    def test_no_ground(self):
        fx = fo.Fixture()
        fx.voltage_source("v", "a", "b")
        fx.resistor("r", "a", "c", 1e3)
        fx.capacitor("c1", "c", "b", 1e-9)
        with pytest.raises(TopologyError, match="'gnd'"):
            fx.check()

    def test_probe_unknown_node(self):
        fx = fo.Fixture.rc(r=1e3, c=1e-9)
        fx.probe("v_x", node="nowhere")
        with pytest.raises(TopologyError, match="probe 'v_x': node 'nowhere' does not exist"):
            fx.respond(fo.Drive([0], end=1e-3, vin=[1.0]))

    def test_probe_unknown_reference(self):
        fx = fo.Fixture.rc(r=1e3, c=1e-9)
        fx.probe("v_diff", node="out", reference="elsewhere")
        with pytest.raises(TopologyError, match="probe 'v_diff': node 'elsewhere'"):
            fx.check()

    def test_probe_through_unknown_part(self):
        fx = fo.Fixture.rc(r=1e3, c=1e-9)
        with pytest.raises(InputError, match="probe 'i_x': through='rx' names no part"):
            fx.probe("i_x", through="rx")

    def test_probe_needs_node_or_through(self):
        fx = fo.Fixture.rc(r=1e3, c=1e-9)
        with pytest.raises(InputError, match="probe 'p'"):
            fx.probe("p", node="out", through="r")

    @pytest.mark.parametrize("r_on, r_off, field", [(-1.0, math.inf, "k.r_on"), (10.0, 10.0, "k.r_off")])
    def test_switch_resistances(self, r_on, r_off, field):
        with pytest.raises(InputError, match=field):
            fo.Fixture().switch("k", "a", "b", r_on=r_on, r_off=r_off)

    def test_reserved_name(self):
        with pytest.raises(InputError, match="'end' is reserved"):
            fo.Fixture().voltage_source("end", "a", "gnd")

    def test_bad_value_names_the_part(self):
        with pytest.raises(InputError, match="r9"):
            fo.Fixture().resistor("r9", "a", "gnd", "-4.7k")


class TestDriveColumns:
    def fixture(self):
        fx = fo.Fixture.rc(r=1e3, c=1e-9)
        fx.switch("kmux", "out", "gnd", r_on=10.0)
        return fx

    def test_switch_column_missing(self):
        with pytest.raises(InputError, match=r"no column for \['kmux'\]"):
            self.fixture().respond(fo.Drive([0], end=1e-3, vin=[1.0]))

    def test_column_naming_no_source_or_switch(self):
        with pytest.raises(InputError, match=r"\['kmx'\] name no source or switch") as caught:
            self.fixture().respond(fo.Drive([0], end=1e-3, vin=[1.0], kmux=[0], kmx=[1]))
        assert "'kmux'" in str(caught.value) and "'vin'" in str(caught.value)

    def test_switch_state_must_be_zero_or_one(self):
        with pytest.raises(InputError, match=r"drive.kmux\[1\]"):
            self.fixture().respond(fo.Drive([0, 1e-4], end=1e-3, vin=[1.0, 1.0], kmux=[0, 0.5]))


class TestTimeConstant:
    def test_per_configuration(self):
        fx = fo.Fixture.rc(r=1e3, c=1e-9)
        fx.switch("kload", "out", "load", r_on=0.0)
        fx.resistor("rload", "load", "gnd", 1e3)
        # Handbook: closed, 1k || 1k = 500 Ω; open, 1 kΩ.
        assert fx.time_constant(kload=True) == pytest.approx(500.0 * 1e-9, rel=1e-12)
        assert fx.time_constant(kload=False) == pytest.approx(1e3 * 1e-9, rel=1e-12)

    def test_tau_needs_states_when_switches_exist(self):
        fx = fo.Fixture.rc(r=1e3, c=1e-9)
        fx.switch("k", "out", "gnd", r_on=10.0)
        with pytest.raises(InputError, match=r"tau: depends on switches \['k'\]"):
            fx.tau

    def test_unknown_and_missing_switch_states(self):
        fx = fo.Fixture.rc(r=1e3, c=1e-9)
        fx.switch("k", "out", "gnd", r_on=10.0)
        with pytest.raises(InputError, match="'q'"):
            fx.time_constant(k=True, q=False)
        with pytest.raises(InputError, match="'k'"):
            fx.time_constant()


class TestShortcuts:
    def test_rc_is_the_general_builder(self):
        fx = fo.Fixture.rc(r="10k", c="100n")
        assert [(p.kind, p.name, p.a, p.b) for p in fx.parts] == [
            ("voltage_source", "vin", "in", "gnd"), ("resistor", "r", "in", "out"), ("capacitor", "c", "out", "gnd")]
        assert fx.tau == pytest.approx(1e-3, rel=1e-12)  # handbook: tau = RC

    def test_rl_is_the_general_builder(self):
        fx = fo.Fixture.rl(r="47", l="10m")
        assert fx.storage.kind == "inductor"
        assert fx.tau == pytest.approx(10e-3 / 47, rel=1e-12)  # handbook: tau = L / R


class TestDisplay:
    def test_html_lists_parts_nodes_and_probes(self):
        fx = CoilWithTestCurrent().fixture()
        html = fx._repr_html_()
        for text in ("vsup", "k1", "lc", "rcoil", "rfb", "itest", "v_coil", "top", "mid", "sup"):
            assert text in html
        assert "<table" in html

    def test_with_values_keeps_the_original(self):
        fx = HoldWithBias().fixture()
        other = fx.with_values(rs="2k", k1=("10", "1G"))
        assert fx.part_map["rs"].value == 1e3 and other.part_map["rs"].value == 2e3
        assert other.part_map["k1"].r_on == 10.0 and other.part_map["k1"].r_off == 1e9
        assert [p.name for p in other.probes] == ["v_a"]


class TestProbeArguments:
    def test_current_probe_takes_no_reference(self):
        # Found while writing these tests: the reference of a current probe was silently ignored.
        fx = fo.Fixture.rc(r=1e3, c=1e-9)
        with pytest.raises(InputError, match="probe 'i_r': reference='out'"):
            fx.probe("i_r", through="r", reference="out")
        assert fx.probes == ()


class TestRampWithoutResistance:
    def test_coil_across_an_ideal_source(self):
        # Faraday's law, v = L di/dt: a coil held at a fixed voltage ramps without limit, and a
        # resistor across it changes nothing.  Found while writing these tests: the advice was
        # "add a resistance across the inductor", which does not help; it must be in series.
        fx = fo.Fixture()
        fx.voltage_source("vs", "a", "gnd")
        fx.inductor("lcoil", "a", "gnd", 1e-3)
        fx.resistor("racross", "a", "gnd", 1e3)
        with pytest.raises(TopologyError, match=r"segment 0.*inductor 'lcoil'.*\['vs'\]") as caught:
            fx.respond(fo.Drive([0], end=1e-3, vs=[1.0]))
        assert "in series with the inductor" in str(caught.value)
        assert "across the inductor" not in str(caught.value)

    def test_at_zero_volts_the_coil_holds(self):
        fx = fo.Fixture()
        fx.voltage_source("vs", "a", "gnd")
        fx.inductor("lcoil", "a", "gnd", 1e-3)
        fx.resistor("racross", "a", "gnd", 1e3)
        res = fx.respond(fo.Drive([0], end=1e-3, vs=[0.0]), initial=0.25)
        assert np.isinf(res.tau[0]) and res.boundary[-1] == 0.25


class TestContributionsWithHolds:
    def test_two_sources_in_series_through_a_track_and_hold(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "x", "gnd")
        fx.voltage_source("voff", "src", "x")   # an offset in series with the input
        fx.resistor("rs", "src", "a", 1e3)
        fx.switch("k", "a", "b")
        fx.capacitor("ch", "b", "gnd", 1e-9)
        fx.probe("v_a", node="a")
        fx.probe("i_k", through="k")
        res = fx.respond(fo.Drive([0, 2e-6, 5e-6], end=9e-6, vin=[1, 2, 3], voff=[0.1, -0.2, 0.3], k=[1, 0, 1]),
                         initial=0.5)
        grid = np.linspace(0, 9e-6, 37)
        # DESIGN.md semantics (linearity): contributions add up to zero_state, also while holding.
        np.testing.assert_allclose(res.contribution("vin", grid) + res.contribution("voff", grid),
                                   res.zero_state(grid), rtol=1e-12, atol=1e-15)
        for probe in ("v_a", "i_k"):
            parts = res.probe(probe, grid, component="vin") + res.probe(probe, grid, component="voff")
            np.testing.assert_allclose(parts, res.probe(probe, grid, component="zero_state"), rtol=1e-12, atol=1e-15)
        # Superposition by hand: with k open the source sees no load, so v(a) = vin + voff.
        np.testing.assert_allclose(res.probe("v_a", [3e-6, 4.9e-6]), [1.8, 1.8], rtol=1e-12)

"""Tests for firstorder.network.topology: every ill-posed configuration is named by its parts,
and layouts are planned once per structure."""

import pytest

import firstorder as fo
from firstorder import network
from firstorder.network import topology
from firstorder.errors import TopologyError, ZeroTimeError


# ------------------------------------------------------------------------------------------
class TestPlan:
    """Topology checks of one configuration: errors name the parts, nodes and segment."""

    def test_loop_of_voltage_sources(self):
        fx = fo.Fixture()
        fx.voltage_source("v1", "a", "gnd")
        fx.voltage_source("v2", "a", "gnd")
        fx.resistor("r", "a", "b", 1e3)
        fx.capacitor("c", "b", "gnd", 1e-6)
        with pytest.raises(TopologyError, match="'v1' and 'v2' form a loop of ideal voltage elements"):
            fx.configuration(())

    def test_loop_closed_by_a_switch_in_one_configuration_only(self):
        fx = fo.Fixture()
        fx.voltage_source("vhi", "a", "gnd")
        fx.voltage_source("vlo", "b", "gnd")
        fx.switch("ksel", "a", "b")          # ideal: zero ohms when closed
        fx.resistor("r", "b", "c", 1e3)
        fx.capacitor("ch", "c", "gnd", 1e-6)
        drive = fo.Drive([0, 1e-3, 2e-3], end=3e-3, vhi=[5, 5, 5], vlo=[1, 1, 1], ksel=[0, 0, 1])
        with pytest.raises(TopologyError) as caught:
            fx.respond(drive)
        message = str(caught.value)
        assert not isinstance(caught.value, ZeroTimeError)
        assert "segment 2" in message and "ksel closed" in message
        assert "'ksel', 'vhi' and 'vlo'" in message
        assert "r_on" in message  # suggests the remedy
        # The open configuration is fine on its own.
        assert fx.time_constant(ksel=False) == pytest.approx(1e-3, rel=1e-12)

    def test_cut_set_of_current_sources(self):
        fx = fo.Fixture()
        fx.current_source("i1", "gnd", "a")
        fx.current_source("i2", "a", "b")
        fx.resistor("r", "b", "gnd", 1e3)
        fx.capacitor("c", "b", "gnd", 1e-6)
        with pytest.raises(TopologyError, match="current sources 'i1' and 'i2' form a cut set") as caught:
            fx.configuration(())
        assert "'a'" in str(caught.value)

    def test_current_source_cut_by_an_open_switch(self):
        fx = fo.Fixture()
        fx.current_source("ibias", "gnd", "a")
        fx.switch("k", "a", "b")
        fx.resistor("r", "b", "gnd", 1e3)
        fx.capacitor("c", "b", "gnd", 1e-6)
        drive = fo.Drive([0, 1e-3], end=2e-3, ibias=[1e-3, 1e-3], k=[1, 0])
        with pytest.raises(TopologyError, match=r"segment 1 .*k open.*current source 'ibias' is a cut set"):
            fx.respond(drive)

    def test_capacitor_across_an_ideal_voltage_loop(self):
        fx = fo.Fixture()
        fx.voltage_source("vref", "a", "gnd")
        fx.switch("kcharge", "a", "b")
        fx.capacitor("cs", "b", "gnd", 1e-9)
        fx.resistor("rbleed", "b", "gnd", 1e6)
        drive = fo.Drive([0, 1e-3], end=2e-3, vref=[2.5, 2.5], kcharge=[0, 1])
        with pytest.raises(ZeroTimeError) as caught:
            fx.respond(drive)
        message = str(caught.value)
        assert "segment 1" in message and "kcharge closed" in message
        assert "'cs', 'kcharge' and 'vref'" in message
        assert "resistance" in message  # suggests a realistic resistance

    def test_inductor_cut_names_the_parts_and_cautions(self):
        fx = fo.Fixture()
        fx.voltage_source("vsup", "sup", "gnd")
        fx.inductor("coil", "sup", "mid", 0.1)
        fx.resistor("rcoil", "mid", "drain", 200.0)
        fx.switch("kdrv", "drain", "gnd")
        drive = fo.Drive([0, 5e-3], end=10e-3, vsup=[24, 24], kdrv=[1, 0])
        with pytest.raises(ZeroTimeError) as caught:
            fx.respond(drive)
        message = str(caught.value)
        assert "segment 1" in message and "kdrv open" in message
        assert "inductor 'coil'" in message
        assert "(open: 'kdrv')" in message  # the switch that cuts the path, by name
        assert "flyback" in message
        assert "local codes and licensed practice" in message

    def test_inductor_in_series_with_a_current_source(self):
        # Found while writing these tests: this was reported as a "cut set of current
        # sources" that listed the inductor among them, as a plain TopologyError.  The coil's
        # current would be forced to the source's level in zero time: a zero-time configuration.
        fx = fo.Fixture()
        fx.current_source("itest", "gnd", "a")
        fx.inductor("l", "a", "gnd", 1e-3)
        fx.voltage_source("vaux", "x", "gnd")
        fx.resistor("raux", "x", "gnd", 1e3)
        with pytest.raises(ZeroTimeError) as caught:
            fx.configuration(())
        message = str(caught.value)
        assert "inductor 'l'" in message and "'itest'" in message
        assert "current sources 'itest' and 'l'" not in message
        assert "local codes and licensed practice" in message

    def test_island_pins_carry_no_current(self):
        # A capacitor whose charging switch is open floats with its series resistor; the
        # node between them must read the capacitor voltage (no current flows in the resistor).
        fx = fo.Fixture()
        fx.voltage_source("v", "x", "gnd")
        fx.resistor("r", "x", "a", 1e3)
        fx.switch("k", "a", "b")
        fx.capacitor("c", "b", "m", 1e-6)
        fx.resistor("rm", "m", "gnd", 1e3)
        fx.probe("v_b", node="b")
        res = fx.respond(fo.Drive([0, 1e-3], end=2e-3, v=[1.0, 1.0], k=[1, 0]))
        after, before_end = res.probe_boundary("v_b")
        # Ohm's law: with k open nothing flows through rm, so v(b) = v(m) + x = x.
        assert after[1] == pytest.approx(res.boundary[1], rel=1e-12)
        # With k closed at t=0: x = 0, divider 1k/1k gives v(b) = 0.5 V.
        assert after[0] == pytest.approx(0.5, rel=1e-12)


class TestPlanLayouts:
    def test_holding_configuration(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("r", "in", "a", "1k")
        fx.switch("k", "a", "b")
        fx.capacitor("c", "b", "gnd", "1n")
        assert network.plan(fx.netlist, (False,), "here").holds
        assert not network.plan(fx.netlist, (True,), "here").holds

    def test_floating_island_is_pinned(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("r", "in", "a", "1k")
        fx.capacitor("c", "a", "gnd", "1n")
        fx.switch("k", "a", "m")
        fx.resistor("r_meter", "m", "mlo", "10M")
        fx.resistor("r_lead", "mlo", "m", "1")
        layout = network.plan(fx.netlist, (False,), "here")
        assert any(label.startswith("pin:") for label, *_ in layout.voltage_branches)
        assert fx.time_constant(k=False) == pytest.approx(1e-6, rel=1e-14)


class TestPlanCache:
    def test_a_copy_with_other_values_plans_nothing_again(self, monkeypatch):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd").resistor("r", "in", "a", "1k").switch("k", "a", "b", r_on="0.2")
        fx.capacitor("c", "b", "gnd", "1u")
        calls = []
        original = topology._plan
        monkeypatch.setattr(topology, "_plan", lambda *a: calls.append(a) or original(*a))
        topology._cache.clear()
        first = fx.configuration((True,))[0]
        again = fx.with_values(r="2k", c="10n", k="0.3").configuration((True,))[0]
        assert again is first and len(calls) == 1
        # An ideal switch is another structure: planned anew.
        assert fx.with_values(k="0").configuration((True,))[0] is not first and len(calls) == 2

    def test_the_text_naming_a_configuration_is_made_only_for_an_error(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd").switch("k", "in", "b").capacitor("c", "b", "gnd", "1u")
        asked = []

        def where():
            asked.append(True)
            return "segment 7 (k closed)"

        topology.plan(fx.netlist, (False,), where)
        assert asked == []
        with pytest.raises(ZeroTimeError, match=r"^segment 7 \(k closed\): capacitor 'c' sits across a loop"):
            topology.plan(fx.netlist, (True,), where)
        assert asked == [True]


# ------------------------------------------------------------------------------------------
class TestStructuralHolding:
    """Whether sources move a held state is read from the graph, not from float residues."""

    @pytest.mark.parametrize("seed", range(120))
    def test_coil_shorted_by_an_ideal_switch_holds_its_current_with_sources_on(self, seed):
        # Handbook: an ideal short holds the coil's voltage at 0, so L di/dt = 0 and the
        # current stays where it was, whatever the sources around it do.
        import random

        rng = random.Random(seed)
        fx = fo.Fixture()
        fx.voltage_source("v", "s", "gnd")
        x = rng.choice(["a", "b", "s"])
        fx.current_source("i", x, rng.choice([n for n in ["gnd", "b"] if n != x]))
        for name, a, b in (("r1", "s", "a"), ("r2", "b", "gnd"), ("r3", "s", "b")):
            fx.resistor(name, a, b, 10.0 ** rng.uniform(-3, 12))
        fx.inductor("l", "a", "b", 1e-3)
        fx.switch("k", "a", "b")
        drive = fo.Drive([0, 1e-3], end=2e-3, v=[1.0, 2.0], i=[1e-3, 1.0], k=[0, 1])
        response = fx.respond(drive)
        _, reduced = fx.configuration(fx.switch_states(k=True))
        assert reduced.tau == float("inf")
        assert (reduced.drift == 0.0).all()
        assert response.segments.tau[1] == float("inf")

    def test_held_drift_is_the_exact_source_coefficient(self):
        # Kirchhoff's current law: a capacitor cut off from every resistance takes exactly
        # what the current source brings, C dv/dt = i (handbook).
        fx = fo.Fixture()
        fx.current_source("i", "gnd", "a")
        fx.capacitor("c", "a", "b", 2e-6)
        fx.resistor("r", "b", "gnd", 1e3)
        fx.switch("k", "a", "gnd")
        fx.resistor("ra", "a", "gnd", 1e12)
        _, reduced = fx.configuration(fx.switch_states(k=False))
        assert reduced.tau < float("inf")
        fx2 = fo.Fixture()
        fx2.current_source("i", "gnd", "a")
        fx2.capacitor("c", "a", "b", 2e-6)
        fx2.resistor("r", "b", "gnd", 1e3)
        fx2.resistor("rx", "a", "x", 1e3)
        fx2.switch("k", "x", "gnd")
        layout, reduced = fx2.configuration(fx2.switch_states(k=False))
        assert layout.holds and layout.held_by == (0, 1)
        assert reduced.drift.tolist() == [1 / 2e-6]


class TestParallelIdealSwitches:
    """Zero-ohm switches in parallel define every voltage; only their currents are undefined."""

    def fixture(self):
        fx = fo.Fixture()
        fx.voltage_source("v", "s", "gnd")
        fx.resistor("r", "s", "a", 1e3)
        fx.capacitor("c", "a", "b", 1e-6)
        fx.switch("k1", "b", "gnd")
        fx.switch("k2", "b", "gnd")
        fx.resistor("rb", "b", "gnd", 1e3)
        fx.probe("ik1", through="k1")
        fx.probe("vb", node="b")
        return fx

    def test_two_ideal_switches_in_parallel_give_the_handbook_tau(self):
        fx = self.fixture()
        # Handbook: with b shorted to ground the capacitor charges through r alone, tau = R C.
        assert fx.time_constant(k1=True, k2=True) == pytest.approx(1e3 * 1e-6, rel=1e-15)
        response = fx.respond(fo.Drive([0], end=1e-3, v=[1.0], k1=[1], k2=[1]))
        assert response.segments.probe_rows("vb").tolist() == [[0.0, 0.0]]

    def test_probe_of_the_current_through_one_of_two_parallel_ideal_switches_is_refused(self):
        fx = self.fixture()
        response = fx.respond(fo.Drive([0], end=1e-3, v=[1.0], k1=[1], k2=[1]))
        with pytest.raises(TopologyError, match=r"segment 0 .*probe 'ik1': the current through 'k1' is not defined"):
            response.segments.probe_rows("ik1")

    def test_a_source_in_a_loop_of_ideal_switches_is_still_refused(self):
        fx = self.fixture()
        fx.switch("k3", "s", "b")
        with pytest.raises(TopologyError, match="form a loop of ideal voltage elements"):
            fx.time_constant(k1=True, k2=True, k3=True)


class TestSharedPlans:
    """Configurations that differ only in relays with finite r_on and r_off share one plan and
    one term layout; the shared path gives what planning each one afresh gives, exactly."""

    def relay_bank(self, switches=4):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("rs", "in", "a", 1e3)
        fx.capacitor("c", "a", "gnd", 1e-7)
        for j in range(switches):
            fx.switch(f"k{j}", "a", f"n{j}", r_on=0.5, r_off=1e9)
            fx.resistor(f"r{j}", f"n{j}", "gnd", 1e3 * (j + 1))
        fx.switch("kx", "a", "gnd")  # ideal: its state does change the topology
        fx.probe("va", node="a")
        return fx

    def test_shared_plan_equals_a_fresh_plan_of_every_configuration(self):
        import importlib
        import itertools

        import numpy as np

        reduce_module = importlib.import_module("firstorder.network.reduce")  # the module, not the function

        fx = self.relay_bank()
        netlist = fx.netlist
        for states in itertools.product([False, True], repeat=len(netlist.switches)):
            if states[-1]:
                continue  # kx closed shorts the capacitor: refused either way
            shared = network.plan(netlist, states)
            fresh = topology._plan(netlist, states, "")
            assert shared == fresh
            reduce_module._BY_SHAPE.clear()
            one = network.reduce(fresh, netlist)
            other = network.reduce(shared, netlist)
            assert one.tau == other.tau
            assert np.array_equal(one.solution, other.solution) and np.array_equal(one.low, other.low)
            assert np.array_equal(one.gain, other.gain)

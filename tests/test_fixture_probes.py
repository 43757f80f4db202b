"""Fixture: building, validation errors that name parts and nodes, probes, holding,
switch resistance and the interrupted coil.

Every network here is a scenario of our own invention.
"""

import numpy as np
import pytest

import firstorder as fo


def probed_network(r1=1e3, r_on=10.0, r_leak=100e3, c=1e-6):
    fx = fo.Fixture()
    fx.voltage_source("v1", "s1", "gnd")
    fx.resistor("r1", "s1", "a", r1)
    fx.current_source("i1", "gnd", "a")
    fx.switch("k1", "a", "b", r_on=r_on)
    fx.capacitor("c", "b", "gnd", c)
    fx.resistor("r_leak", "b", "gnd", r_leak)
    for name, kwargs in {
        "v_a": dict(node="a"), "v_ab": dict(node="a", reference="b"), "i_r1": dict(through="r1"),
        "i_k1": dict(through="k1"), "i_c": dict(through="c"), "i_v1": dict(through="v1"),
        "i_i1": dict(through="i1"), "i_leak": dict(through="r_leak"),
    }.items():
        fx.probe(name, **kwargs)
    return fx


class TestProbe:
    def test_each_probe_against_its_hand_formula(self):
        r1, r_on, r_leak = 1e3, 10.0, 100e3
        fx = probed_network(r1, r_on, r_leak)
        drive = fo.Drive([0, "2m", "5m"], end="9m", v1=[2.0, 2.0, -1.0], i1=[0.0, 1e-3, 1e-3], k1=[1, 0, 1])
        res = fx.respond(drive, initial=0.4)
        t = np.linspace(0, 9e-3, 181)
        v = res.total(t)
        v1 = np.array([drive.level_at("v1", x) for x in t])
        i1 = np.array([drive.level_at("i1", x) for x in t])
        closed = np.array([drive.level_at("k1", x) for x in t]) == 1
        # By hand, KCL at a with the switch closed: (v1 - va)/r1 + i1 + (v - va)/r_on = 0;
        # open (no leakage): (v1 - va)/r1 + i1 = 0.
        va = np.where(closed, (v1 / r1 + i1 + v / r_on) / (1 / r1 + 1 / r_on), v1 + i1 * r1)
        i_k1 = np.where(closed, (va - v) / r_on, 0.0)
        expected = {
            "v_a": va,
            "v_ab": va - v,
            "i_r1": (v1 - va) / r1,
            "i_k1": i_k1,
            "i_c": i_k1 - v / r_leak,  # KCL at b
            "i_v1": -(v1 - va) / r1,  # through the source from s1 to gnd: what leaves s1 into r1 comes back
            "i_i1": i1,
            "i_leak": v / r_leak,
        }
        for name, hand in expected.items():
            np.testing.assert_allclose(res.probe(name, t), hand, rtol=1e-11, atol=1e-14, err_msg=name)

    def test_probe_through_an_inductor_is_the_state(self):
        fx = fo.Fixture.rl("47", "10m").probe("i_l", through="l")
        res = fx.respond(fo.Drive.steps([(0, 1.0)], end="1m"))
        t = np.linspace(0, 1e-3, 11)
        np.testing.assert_array_equal(res.probe("i_l", t), res.total(t))

    def test_node_probe_reference_defaults_to_ground(self):
        fx = fo.Fixture.rc("1k", "1u").probe("v_out", node="out").probe("v_r", node="in", reference="out")
        res = fx.respond(fo.Drive.steps([(0, 3.0)], end="5m"))
        t = np.linspace(0, 5e-3, 11)
        np.testing.assert_allclose(res.probe("v_out", t), res.total(t), rtol=1e-15)
        np.testing.assert_allclose(res.probe("v_r", t), 3.0 - res.total(t), rtol=1e-13, atol=1e-15)


class TestSwitch:
    def test_opening_leaves_the_capacitor_holding_exactly(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("r", "in", "a", "1k")
        fx.switch("k", "a", "b", r_on="5")
        fx.capacitor("c", "b", "gnd", "100n")
        res = fx.respond(fo.Drive([0, "0.1m"], end="10m", vin=[2.5, 2.5], k=[1, 0]))
        held = res.boundary[1]
        assert 0 < held < 2.5
        assert res.boundary[2] == held  # exactly, not approximately
        np.testing.assert_array_equal(res.total(np.linspace(0.1e-3, 10e-3, 50)), held)
        assert fx.time_constant(k=False) == np.inf

    def test_r_on_adds_to_the_charging_path(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("r", "in", "a", "10k")
        fx.switch("k", "a", "b", r_on="100")
        fx.capacitor("c", "b", "gnd", "100n")
        # Series resistances add (handbook): tau = C (R + r_on).
        assert fx.time_constant(k=True) == pytest.approx(100e-9 * 10.1e3, rel=1e-14)

    def test_leakage_when_open(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.switch("k", "in", "b", r_on="1", r_off="1G")
        fx.capacitor("c", "b", "gnd", "1n")
        assert fx.time_constant(k=False) == pytest.approx(1.0, rel=1e-12)


class TestFlyback:
    def coil(self, r_fly="1k"):
        fx = fo.Fixture()
        fx.voltage_source("vcoil", "sup", "gnd")
        fx.switch("k_drv", "sup", "a", r_on="0.5")
        fx.inductor("l_coil", "a", "m", "200m")
        fx.resistor("r_coil", "m", "b", "100")
        if r_fly is not None:
            fx.resistor("r_fly", "a", "b", r_fly)
        fx.resistor("r_ret", "b", "gnd", "0.01")
        fx.probe("v_coil", node="a", reference="b")
        return fx

    def test_current_decays_with_l_over_coil_plus_flyback_resistance(self):
        fx = self.coil()
        # Common practice: with the drive open the coil current circulates through
        # the flyback resistor, tau = L / (R_coil + R_flyback).
        assert fx.time_constant(k_drv=False) == pytest.approx(0.2 / 1100, rel=1e-13)
        res = fx.respond(fo.Drive([0, "20m"], end="22m", vcoil=[12, 12], k_drv=[1, 0]), initial="settled")
        i0 = res.boundary[1]
        t = 20e-3 + np.linspace(0, 2e-3, 21)
        np.testing.assert_allclose(res.total(t), i0 * np.exp(-(t - 20e-3) * 1100 / 0.2), rtol=1e-12)

    def test_coil_voltage_jumps_to_minus_i0_times_r_flyback(self):
        fx = self.coil()
        res = fx.respond(fo.Drive([0, "20m"], end="22m", vcoil=[12, 12], k_drv=[1, 0]), initial="settled")
        i0 = res.boundary[1]
        after, _ = res.probe_boundary("v_coil")
        # Common practice: at the instant the switch opens the coil keeps its current
        # I0, which now flows back through the flyback resistor: v = -I0 * R_flyback.
        assert after[1] == pytest.approx(-i0 * 1e3, rel=1e-12)
        assert after[0] > 0  # while driven, the coil's a end is the positive one

    def test_no_flyback_path_is_refused_with_the_spike_caution(self):
        fx = self.coil(r_fly=None)
        drive = fo.Drive([0, "20m"], end="22m", vcoil=[12, 12], k_drv=[1, 0])
        with pytest.raises(fo.ZeroTimeError) as caught:
            fx.respond(drive, initial="settled")
        message = str(caught.value)
        for needed in ("segment 1", "k_drv open", "l_coil", "flyback", "spike", "CAUTION",
                       "local codes and licensed practice"):
            assert needed in message


class TestValidation:
    def rc(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("r", "in", "out", "1k")
        fx.capacitor("c", "out", "gnd", "1u")
        return fx

    def test_duplicate_part_name(self):
        with pytest.raises(fo.InputError, match="'r'.*used twice"):
            self.rc().resistor("r", "out", "gnd", "1k")

    def test_duplicate_probe_name(self):
        fx = self.rc().probe("p", node="out")
        with pytest.raises(fo.InputError, match="'p'.*used twice"):
            fx.probe("p", node="in")

    def test_unknown_probe_node(self):
        fx = self.rc().probe("p", node="nowhere")
        with pytest.raises(fo.TopologyError, match="probe 'p': node 'nowhere' does not exist"):
            fx.check()
        fx = self.rc().probe("q", node="out", reference="elsewhere")
        with pytest.raises(fo.TopologyError, match="probe 'q': node 'elsewhere'"):
            fx.respond(fo.Drive.steps([(0, 1.0)], end="1m"))

    def test_probe_node_must_be_a_name_and_differ_from_its_reference(self):
        with pytest.raises(fo.InputError, match="probe 'p' node: node 5"):
            self.rc().probe("p", node=5)
        with pytest.raises(fo.InputError, match="probe 'p': node and reference are both 'out'"):
            self.rc().probe("p", node="out", reference="out")

    def test_probe_through_unknown_part(self):
        with pytest.raises(fo.InputError, match="through='rx' names no part"):
            self.rc().probe("p", through="rx")

    def test_part_connected_to_itself(self):
        with pytest.raises(fo.TopologyError, match="part 'r2': both ends are on node 'out'"):
            self.rc().resistor("r2", "out", "out", "1k")

    def test_no_storage_element(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("r", "in", "gnd", "1k")
        with pytest.raises(fo.TopologyError, match="not first order: .*no capacitor or inductor"):
            fx.check()

    def test_second_storage_element(self):
        with pytest.raises(fo.TopologyError, match="not first order: 'l2'.*capacitor 'c'"):
            self.rc().inductor("l2", "out", "gnd", "1m")

    def test_node_connected_to_nothing_else(self):
        fx = self.rc().resistor("r_stub", "out", "stub", "1k")
        with pytest.raises(fo.TopologyError, match="node 'stub' connects only to 'r_stub'"):
            fx.check()

    def test_loop_of_ideal_voltage_sources(self):
        fx = self.rc()
        fx.voltage_source("v2", "x", "gnd")
        fx.switch("k", "in", "x")  # ideal when closed
        with pytest.raises(fo.TopologyError, match="'k', 'v2' and 'vin' form a loop of ideal voltage"):
            fx.time_constant(k=True)
        assert fx.time_constant(k=False) == pytest.approx(1e-3)

    def test_cut_set_of_current_sources(self):
        fx = self.rc()
        fx.current_source("i1", "gnd", "x")
        fx.current_source("i2", "x", "out")
        with pytest.raises(fo.TopologyError, match="current sources 'i1' and 'i2' form a cut set"):
            fx.respond(fo.Drive([0], end="1m", vin=[1], i1=[1e-3], i2=[1e-3]))

    def test_capacitor_across_ideal_voltage_elements(self):
        fx = self.rc()
        fx.switch("k", "out", "in")
        with pytest.raises(fo.ZeroTimeError, match="capacitor 'c'.*'c', 'k' and 'vin'"):
            fx.time_constant(k=True)

    def test_switch_column_missing_from_the_drive(self):
        fx = self.rc().switch("k9", "out", "gnd", r_on="1k")
        with pytest.raises(fo.InputError, match=r"no column for \['k9'\]"):
            fx.respond(fo.Drive.steps([(0, 1.0)], end="1m"))

    def test_drive_column_naming_no_source_or_switch(self):
        with pytest.raises(fo.InputError, match=r"drive columns \['vx'\] name no source or switch"):
            self.rc().respond(fo.Drive([0], end="1m", vin=[1.0], vx=[2.0]))

    def test_with_values_checks_and_copies(self):
        fx = self.rc().probe("p", node="out")
        faster = fx.with_values(r="500")
        assert faster.tau == pytest.approx(0.5e-3)
        assert fx.tau == pytest.approx(1e-3)
        assert [p.name for p in faster.probes] == ["p"]
        with pytest.raises(fo.InputError, match=r"\['rz'\] name no part"):
            fx.with_values(rz="1k")
        with pytest.raises(fo.InputError, match="r \\(value\\)"):
            fx.with_values(r="-5")


class TestDisplay:
    def test_html_lists_parts_nodes_and_probes(self):
        fx = probed_network()
        html = fx._repr_html_()
        for text in ("r_leak", "a → b", "k1", "v_ab", "capacitor", "nodes s1, gnd, a, b"):
            assert text in html

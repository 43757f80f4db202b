"""Tests for firstorder.netlist: the frozen parts and probes of a fixture, and their checks."""

from __future__ import annotations

import dataclasses

import pytest

import firstorder as fo
from firstorder.errors import InputError, TopologyError
from firstorder.netlist import GROUND, Netlist, Part, Probe, check_name


def divider() -> Netlist:
    """vin -> r1 -> out -> r2 -> gnd, with c across r2 and a probe on out (a scenario of our own)."""
    netlist = Netlist()
    for part in (Part("voltage_source", "vin", "in", GROUND), Part("resistor", "r1", "in", "out", value=1e3),
                 Part("resistor", "r2", "out", GROUND, value=2e3), Part("capacitor", "c", "out", GROUND, value=1e-6)):
        netlist = netlist.with_part(part)
    return netlist.with_probe(Probe("v_out", node="out"))


class TestBuilding:
    def test_each_addition_is_a_new_netlist(self):
        first = Netlist()
        second = first.with_part(Part("resistor", "r", "a", "b", value=1.0))
        assert first.parts == () and len(second.parts) == 1

    def test_it_is_frozen(self):
        with pytest.raises(dataclasses.FrozenInstanceError):
            divider().parts = ()  # type: ignore[misc]

    @pytest.mark.parametrize("part, error, match", [
        (Part("resistor", "r1", "x", "y", value=1.0), InputError, "'r1' is used twice"),
        (Part("resistor", "r9", "x", "x", value=1.0), TopologyError, "both ends are on node 'x'"),
        (Part("inductor", "l", "x", GROUND, value=1e-3), TopologyError, "second storage element beside capacitor 'c'"),
    ])
    def test_refuses_what_a_part_alone_shows(self, part, error, match):
        with pytest.raises(error, match=match):
            divider().with_part(part)

    def test_refuses_a_probe_twice_or_of_no_part(self):
        with pytest.raises(InputError, match="'v_out' is used twice"):
            divider().with_probe(Probe("v_out", node="in"))
        with pytest.raises(InputError, match="through='rx' names no part"):
            divider().with_probe(Probe("i_x", through="rx"))

    def test_names(self):
        assert check_name("r_filter", "resistor") == "r_filter"
        for bad, match in (("", "non-empty"), (3, "non-empty"), ("times", "reserved"), (GROUND, "reserved")):
            with pytest.raises(InputError, match=match):
                check_name(bad, "resistor")


class TestReading:
    def test_lookups_follow_the_parts(self):
        netlist = divider()
        assert netlist.nodes == ("in", GROUND, "out")
        assert [p.name for p in netlist.sources] == ["vin"] and netlist.source_names == ("vin",)
        assert netlist.switches == () and netlist.storage.name == "c" and netlist.state_unit == "V"
        assert netlist.part_map["r2"].value == 2e3

    def test_structure_leaves_out_values_but_not_what_changes_the_topology(self):
        # Part values flow through a planned topology; which switches are ideal (r_on = 0) or
        # free of leakage (r_off = inf) decides which branches exist, so that is structure.
        base = fo.Fixture()
        base.voltage_source("vin", "in", GROUND).resistor("r", "in", "a", "1k").switch("k", "a", "b", r_on="0.1")
        base.capacitor("c", "b", GROUND, "1u")
        assert base.with_values(r="2k", c="10n", k="0.5").netlist.structure == base.netlist.structure
        assert base.with_values(k="0").netlist.structure != base.netlist.structure
        assert base.with_values(k=("0.1", "1G")).netlist.structure != base.netlist.structure

    def test_switch_states_and_their_text(self):
        netlist = Netlist((Part("switch", "k1", "a", "b"), Part("switch", "k2", "b", "c")))
        assert netlist.switch_states(k1=1, k2=False) == (True, False)
        assert netlist.describe_states((True, False)) == "k1 closed, k2 open"
        with pytest.raises(InputError, match=r"give a state for \['k2'\]"):
            netlist.switch_states(k1=True)
        with pytest.raises(InputError, match="switch state k2: 2"):
            netlist.switch_states(k1=True, k2=2)


class TestCheck:
    def test_a_good_netlist_passes(self):
        divider().check()

    @pytest.mark.parametrize("parts, match", [
        ((Part("voltage_source", "vin", "in", GROUND), Part("resistor", "r", "in", GROUND, value=1.0)),
         "no capacitor or inductor"),
        ((Part("resistor", "r1", "a", "b", value=1.0), Part("capacitor", "c", "a", "b", value=1.0)),
         "no part touches the ground node"),
        ((Part("resistor", "r1", "a", GROUND, value=1.0), Part("capacitor", "c", "a", GROUND, value=1.0),
          Part("resistor", "r2", "a", "dangling", value=1.0)),
         "node 'dangling' connects only to 'r2'"),
    ])
    def test_refuses_what_only_the_whole_shows(self, parts, match):
        with pytest.raises(TopologyError, match=match):
            Netlist(parts).check()

    def test_a_probe_on_a_node_that_does_not_exist(self):
        netlist = divider().with_probe(Probe("v_x", node="nowhere"))
        with pytest.raises(TopologyError, match="probe 'v_x': node 'nowhere' does not exist"):
            netlist.check()


class TestPartValuesAsTyped:
    # Part values go through the units layer: every rule of a number holds for them too.
    @pytest.mark.parametrize("value", ["1,5k", "4,7k", ",5", "1,5 kΩ"])
    def test_comma_in_a_part_value_is_refused(self, value):
        with pytest.raises(InputError, match=r"^r \(value\): .* has a comma; a comma is never a decimal"):
            fo.Fixture.rc(r=value, c="1u")

    # Expected values written out by hand from IEC 60062's letter-code rule.
    @pytest.mark.parametrize(("r", "c", "r_ohms", "c_farads"), [
        ("4k7", "1n5", 4700.0, 1.5e-9), ("4R7", "4u7", 4.7, 4.7e-6), ("2M2", "p68", 2.2e6, 0.68e-12),
        ("R47", "2µ2", 0.47, 2.2e-6), ("2.2K", "100n", 2200.0, 100e-9),
    ])
    def test_iec_60062_codes_as_part_values(self, r, c, r_ohms, c_farads):
        fixture = fo.Fixture.rc(r=r, c=c)
        assert fixture.part_map["r"].value == r_ohms and fixture.part_map["c"].value == c_farads

    def test_iec_code_for_a_switch_resistance(self):
        fixture = fo.Fixture().voltage_source("v", "a", GROUND).switch("k", "a", "b", r_on="0R5", r_off="10M")
        fixture = fixture.resistor("r", "b", "o", "1k").capacitor("c", "o", GROUND, "1u")
        assert fixture.part_map["k"].r_on == 0.5 and fixture.part_map["k"].r_off == 1e7

    @pytest.mark.parametrize("value", [True, False, 10**400])
    def test_booleans_and_huge_integers_are_not_part_values(self, value):
        with pytest.raises(InputError, match=r"^r \(value\): "):
            fo.Fixture.rc(r=value, c="1u")

    @pytest.mark.parametrize("state", [np_array for np_array in ([1, 0], "1", 2)])
    def test_switch_state_of_another_kind_is_refused(self, state):
        fixture = fo.Fixture().voltage_source("v", "a", GROUND).switch("k", "a", "b").resistor("r", "b", "o", "1k")
        fixture = fixture.capacitor("c", "o", GROUND, "1u")
        with pytest.raises(InputError, match="^switch state k: "):
            fixture.netlist.switch_states(k=__import__("numpy").array(state) if isinstance(state, list) else state)


class TestNamesWithPercent:
    # Names are free text (check_name); a percent sign is no format directive anywhere numbers are made.
    @pytest.mark.parametrize("name", ["c_5%", "c%s", "%d", "r_%(x)s"])
    def test_percent_names_respond_settle_and_probe(self, name):
        fixture = (fo.Fixture().voltage_source("v%s", "in", GROUND).resistor(f"r{name}", "in", "out", "1k")
                   .capacitor(name, "out", GROUND, "1u").probe(f"i{name}", through=f"r{name}"))
        response = fixture.respond(fo.Drive([0], end="5m", **{"v%s": [1.0]}))
        # The RC step 1 - exp(-t/tau) at t = tau (handbook first-order step response).
        assert float(response.total(1e-3)) == pytest.approx(1 - 0.36787944117144233, rel=1e-12)
        assert "%" in repr(fixture.part_map[name].name)
        table = response.settling(fo.Tolerance.relative(0.01))
        assert len(table) == 1
        assert float(response.probe(f"i{name}", 0.0)) == pytest.approx(1e-3, rel=1e-12)

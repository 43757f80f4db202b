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

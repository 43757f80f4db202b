"""Tests for firstorder.cautions: high voltage and stored energy.

Outside references: the handbook energy formulas ½CV² and ½LI², the 60 V DC and
0.35 J thresholds (from memory of common equipment-safety practice), and
brute-force searches on dense time grids of probed node voltages.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

import firstorder as fo
from firstorder.cautions import DEFAULT_LIMITS, Caution, Limits, check, current_limits, set_limits
from firstorder.errors import InputError


def kinds(cautions):
    return sorted(c.kind for c in cautions)


class TestCheck:
    def test_a_400_volt_drive_gives_a_voltage_caution(self):
        fx = fo.Fixture.rc(r="100k", c="10n")
        res = fx.respond(fo.Drive([0, "5m"], end="10m", vin=[0.0, 400.0]))
        cautions = res.cautions
        assert kinds(cautions) == ["voltage"]  # ½ x 10 nF x (400 V)² = 0.8 mJ: no energy caution
        text = str(cautions[0])
        assert "400 V" in text and "node 'in'" in text
        assert "segment 1" in text and "5 ms" in text          # where and when
        assert "60 V" in text and "from memory" in text          # the limit and its source
        for advice in ("bleeder", "insulated probes", "discharge", "local codes", "licensed practice"):
            assert advice in text

    def test_a_charged_1_mF_capacitor_gives_an_energy_caution(self):
        # Handbook: a capacitor holds ½CV²; 1 mF at 30 V holds 0.45 J, above 0.35 J (from memory).
        fx = fo.Fixture.rc(r="1k", c="1m")
        res = fx.respond(fo.Drive.steps([(0, 5.0)], end="10"), initial=30.0)
        cautions = res.cautions
        assert kinds(cautions) == ["energy"]
        text = str(cautions[0])
        assert "capacitor 'c'" in text and "450 mJ" in text and "30 V" in text
        assert "segment 0" in text and "t = 0 s" in text
        for advice in ("bleeder", "discharge", "insulated probes", "local codes", "licensed practice"):
            assert advice in text

    def test_a_5_volt_100_nF_fixture_gives_none(self):
        fx = fo.Fixture.rc(r="10k", c="100n")
        res = fx.respond(fo.Drive([0, "1m", "2m"], end="5m", vin=[5.0, -5.0, 0.0]), initial=5.0)
        assert res.cautions == []
        assert "⚠" not in res._repr_html_()

    def test_energy_at_the_limit_edges(self):
        # ½CV² = 0.35 J exactly at V = sqrt(0.7 / C); just above and just below.
        c = 1e-3
        edge = float(np.sqrt(2 * 0.35 / c))
        fx = fo.Fixture.rc(r="1k", c=c)
        below = fx.respond(fo.Drive.steps([(0, 0.0)], end="1"), initial=edge * 0.999)
        above = fx.respond(fo.Drive.steps([(0, 0.0)], end="1"), initial=edge * 1.001)
        assert below.cautions == [] and kinds(above.cautions) == ["energy"]

    def test_inductor_energy_and_the_coil_advice(self):
        # Handbook: an inductor holds ½LI²; 100 mH at 3 A (30 V / 10 Ω) holds 0.45 J.
        fx = fo.Fixture.rl(r="10", l="100m")
        res = fx.respond(fo.Drive.steps([(0, 30.0)], end="1"))
        cautions = res.cautions
        assert kinds(cautions) == ["energy"]
        text = str(cautions[0])
        assert "inductor 'l'" in text and "flyback" in text and "local codes" in text
        assert "450 mJ" in text

    def test_voltage_peak_agrees_with_a_dense_grid_of_node_probes(self):
        # An interrupted coil current through a switch's 10 kΩ off-resistance: the peak node
        # voltage sits just after the switch opens.  Brute force: a dense grid of every node.
        fx = fo.Fixture()
        fx.voltage_source("vs", "p", "gnd")
        fx.resistor("r", "p", "a", "20")
        fx.switch("k", "a", "b", r_on="0.5", r_off="10k")
        fx.inductor("l", "b", "gnd", "10m")
        fx.resistor("rleak", "a", "gnd", "100k")
        for node in ("p", "a", "b"):
            fx.probe(f"v_{node}", node=node)
        drive = fo.Drive([0, "5m"], end="6m", vs=[12.0, 12.0], k=[1, 0])
        res = fx.respond(drive)
        grid = np.concatenate([np.linspace(0, 5e-3, 20001)[:-1], np.linspace(5e-3, 6e-3, 20001)])
        peak = max(float(np.max(np.abs(res.probe(f"v_{n}", grid)))) for n in ("p", "a", "b"))
        assert peak > 60.0
        assert kinds(check(res, Limits(voltage=peak * 0.999, energy=1.0))) == ["voltage"]
        assert check(res, Limits(voltage=peak * 1.001, energy=1.0)) == []
        text = str(check(res)[0])
        assert "segment 1" in text and "flyback" in text

    def test_voltage_across_a_part_between_two_live_nodes(self):
        # +40 V and -40 V nodes: each node is below 60 V, the resistor between them sees 80 V.
        fx = fo.Fixture()
        fx.voltage_source("vp", "p", "gnd")
        fx.voltage_source("vn", "n", "gnd")
        fx.resistor("rbridge", "p", "n", "10k")
        fx.resistor("r", "p", "out", "1k")
        fx.capacitor("c", "out", "gnd", "1n")
        res = fx.respond(fo.Drive([0], end="1m", vp=[40.0], vn=[-40.0]))
        cautions = res.cautions
        assert kinds(cautions) == ["voltage"]
        assert "across resistor 'rbridge'" in str(cautions[0]) and "80 V" in str(cautions[0])

    def test_other_places_above_the_limit_are_named(self):
        fx = fo.Fixture.rc(r="1k", c="1n")
        res = fx.respond(fo.Drive.steps([(0, 100.0)], end="1m"))
        text = str(res.cautions[0])
        assert "Also above the limit" in text and "node 'out'" in text

    def test_long_drives_are_checked_in_blocks(self):
        # More segments than one block: the peak sits in the last one.
        count = 70000
        levels = np.zeros(count)
        levels[-1] = 75.0
        fx = fo.Fixture.rc(r="1k", c="1n")
        res = fx.respond(fo.Drive(np.arange(count) * 1e-5, count * 1e-5, vin=levels))
        text = str(res.cautions[0])
        assert f"segment {count - 1}" in text and "75 V" in text


class TestLimits:
    def test_defaults(self):
        # From memory: 60 V DC and 0.35 J, thresholds used in equipment-safety practice.
        assert DEFAULT_LIMITS == Limits(voltage=60.0, energy=0.35)
        assert current_limits() == DEFAULT_LIMITS

    def test_set_limits_changes_and_restores(self):
        fx = fo.Fixture.rc(r="10k", c="100n")
        drive = fo.Drive.steps([(0, 48.0)], end="5m")
        assert fx.respond(drive).cautions == []
        with set_limits(voltage="42 V") as limits:
            assert limits.voltage == 42.0 and limits.energy == 0.35
            assert kinds(fx.respond(drive).cautions) == ["voltage"]
        assert current_limits() == DEFAULT_LIMITS
        try:
            set_limits(energy="1m")
            assert current_limits() == Limits(voltage=60.0, energy=1e-3)
        finally:
            set_limits(voltage=60.0, energy=0.35)
        assert current_limits() == DEFAULT_LIMITS

    @pytest.mark.parametrize("arguments, field", [
        (dict(voltage=0), "limits.voltage"),
        (dict(voltage=-60), "limits.voltage"),
        (dict(voltage="sixty"), "limits.voltage"),
        (dict(energy=0), "limits.energy"),
        (dict(energy="0.35 V"), "limits.energy"),
        (dict(energy=float("nan")), "limits.energy"),
    ])
    def test_bad_limits_name_the_field(self, arguments, field):
        with pytest.raises(InputError, match=field.replace(".", r"\.")):
            Limits(**arguments)
        with pytest.raises(InputError, match=field.replace(".", r"\.")):
            set_limits(**arguments)
        assert current_limits() == DEFAULT_LIMITS  # a refused change leaves the limits alone

    def test_check_refuses_other_limit_types(self):
        res = fo.Fixture.rc(r="1k", c="1n").respond(fo.Drive.steps([(0, 1.0)], end="1m"))
        with pytest.raises(InputError, match="limits"):
            check(res, {"voltage": 10})


class TestCaution:
    def test_str_is_the_message_and_it_is_frozen(self):
        caution = Caution("voltage", "High voltage: ...")
        assert str(caution) == "High voltage: ..."
        with pytest.raises(dataclasses.FrozenInstanceError):
            caution.kind = "energy"

    def test_response_carries_and_shows_its_cautions(self):
        res = fo.Fixture.rc(r="10k", c="100n").respond(fo.Drive.steps([(0, 230.0)], end="5m"))
        assert res.cautions is res.cautions  # checked once
        assert isinstance(res.cautions[0], fo.Caution)
        html = res._repr_html_()
        assert "⚠" in html and "local codes" in html

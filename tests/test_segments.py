"""Tests for firstorder.segments: a drive matched to a fixture, segment by segment.

Rates and gains are checked against handbook formulas written here (tau = R C with series
and parallel resistances, the divider ratio), never against the reduction itself.
"""

from __future__ import annotations

import numpy as np
import pytest

import firstorder as fo
from firstorder import segments as segments_module
from firstorder.errors import InputError, TopologyError
from firstorder.segments import Segments, rates


def relay_filter() -> fo.Fixture:
    """A DAC behind 1 kΩ, a relay (0.5 Ω on, 1 GΩ off) into 100 nF, 10 kΩ to ground (our own scenario)."""
    fx = fo.Fixture()
    fx.voltage_source("vdac", "drv", "gnd")
    fx.resistor("rs", "drv", "a", "1k")
    fx.switch("k1", "a", "b", r_on="0.5", r_off="1G")
    fx.capacitor("c", "b", "gnd", "100n")
    fx.resistor("rl", "b", "gnd", "10k")
    fx.probe("v_a", node="a")
    return fx


def parallel(*resistances: float) -> float:
    """Handbook: resistors in parallel, 1 / sum(1 / R)."""
    return 1.0 / sum(1.0 / r for r in resistances)


DRIVE = fo.Drive([0, "1m", "2m", "3m"], end="5m", vdac=[1.0, 2.0, 2.0, -1.0], k1=[1, 0, 1, 1])


class TestOfDrive:
    def test_configurations_and_which_segment_has_which(self):
        segments = Segments.of_drive(relay_filter(), DRIVE)
        assert segments.configurations == ((False,), (True,))
        assert segments.configuration_of.tolist() == [1, 0, 1, 1]
        assert segments.first_use.tolist() == [1, 0]

    def test_rates_and_finals_are_the_handbook_ones(self):
        segments = Segments.of_drive(relay_filter(), DRIVE)
        closed = parallel(1e3 + 0.5, 10e3) * 100e-9   # Thevenin resistance seen by c, times c
        opened = parallel(1e3 + 1e9, 10e3) * 100e-9
        np.testing.assert_allclose(segments.tau, [closed, opened, closed, closed], rtol=1e-13)
        np.testing.assert_allclose(rates(segments.tau), segments.rate, rtol=0)
        divider = 10e3 / (10e3 + 1e3 + 0.5)            # handbook voltage divider
        leaky = 10e3 / (10e3 + 1e3 + 1e9)
        np.testing.assert_allclose(segments.final, [divider, 2 * leaky, 2 * divider, -divider], rtol=1e-13)
        assert not segments.any_holds

    def test_one_configuration_is_a_read_only_broadcast(self):
        segments = Segments.of_drive(fo.Fixture.rc("1k", "1u"), fo.Drive.steps([(0, 1.0), ("1m", 0.0)], end="2m"))
        assert segments.rate.strides == (0,) and not segments.rate.flags.writeable
        assert segments.one_gain == 1.0 and segments.final is not None

    def test_probe_rows_are_built_once_per_configuration(self, monkeypatch):
        calls = []
        original = segments_module.probe_row
        monkeypatch.setattr(segments_module, "probe_row", lambda *a, **k: calls.append(a) or original(*a, **k))
        segments = Segments.of_drive(relay_filter(), DRIVE)
        first = segments.probe_rows("v_a")
        assert segments.probe_rows("v_a") is first and len(calls) == len(segments.configurations) == 2
        # Handbook two-source divider (Millman): with k1 open, node a sits between the DAC through
        # 1 kΩ and the capacitor's voltage x through 1 GΩ: v_a = (vdac 1 GΩ + x 1 kΩ) / (1 kΩ + 1 GΩ).
        assert first[1, 0] == pytest.approx(1e3 / (1e3 + 1e9), rel=1e-13)
        assert first[1, 1] == pytest.approx(1e9 / (1e3 + 1e9), rel=1e-13)

    def test_an_unknown_probe_names_the_probes(self):
        with pytest.raises(InputError, match=r"probe: 'v_z' is not a probe of the fixture; probes are \['v_a'\]"):
            Segments.of_drive(relay_filter(), DRIVE).probe_rows("v_z")

    def test_no_text_is_made_unless_an_error_needs_it(self, monkeypatch):
        # Engineering notation costs tens of microseconds a call: a response must not pay for
        # labels nobody reads (the segment labels are made only for error messages).
        def refuse(*args, **kwargs):
            raise AssertionError("text was formatted on the quiet path")

        monkeypatch.setattr(segments_module, "format_value", refuse)
        fx = relay_filter()
        response = fx.respond(DRIVE)
        assert response.segments.probe_rows("v_a").shape == (4, 2)

    def test_a_ramp_names_the_earliest_segment_and_its_configuration(self):
        fx = fo.Fixture()
        fx.current_source("ichg", "gnd", "a")
        fx.switch("k", "a", "b", r_on="1")
        fx.resistor("r", "b", "gnd", "1k")
        fx.capacitor("c", "a", "gnd", "1u")
        drive = fo.Drive([0, "1m", "2m"], end="3m", ichg=[0.0, 1e-3, 1e-3], k=[0, 0, 0])
        with pytest.raises(TopologyError, match=r"^segment 1 \(from 1 ms; k open\): capacitor 'c' sees no resistance"):
            Segments.of_drive(fx, drive)

    def test_of_several_ill_posed_configurations_the_earliest_segment_is_named(self):
        # k2 closed shorts the capacitor (segment 1), k1 closed shorts the source (segment 2);
        # k1's configuration sorts first, but segment 1 comes first in time.
        fx = fo.Fixture()
        fx.voltage_source("v", "s", "gnd")
        fx.resistor("r", "s", "a", 1e3)
        fx.capacitor("c", "a", "gnd", 1e-6)
        fx.switch("k1", "s", "gnd")
        fx.switch("k2", "a", "gnd")
        drive = fo.Drive([0, 1e-3, 2e-3], end=3e-3, v=[1.0] * 3, k1=[0, 0, 1], k2=[0, 1, 0])
        with pytest.raises(TopologyError, match=r"^segment 1 \(from 1 ms; k1 open, k2 closed\)"):
            fx.respond(drive)

    def test_columns_are_matched_to_the_fixture(self):
        with pytest.raises(InputError, match=r"drive columns \['vx'\] name no source or switch"):
            Segments.of_drive(relay_filter(), DRIVE.replace(vx=[0, 0, 0, 0]))


class TestOfColumns:
    def test_steps_without_instants(self):
        steps = Segments.of_columns(relay_filter(), {"vdac": [1.0, "2.5"], "k1": [1, 0]})
        assert len(steps) == 2 and steps.columns["vdac"].tolist() == [1.0, 2.5]
        assert steps.label(1) == "step 1 (k1 open)"

    def test_errors_name_the_levels(self):
        with pytest.raises(InputError, match=r"levels\.vdac\[1\]: 'x' is not a number"):
            Segments.of_columns(relay_filter(), {"vdac": [1.0, "x"], "k1": [1, 1]})
        with pytest.raises(InputError, match=r"levels\.k1: has 1 values but the longest column has 2"):
            Segments.of_columns(relay_filter(), {"vdac": [1.0, 2.0], "k1": [1]})


class TestOfModel:
    def test_a_held_segment_has_no_final(self):
        model = Segments.of_model([1e-3, np.inf], [2.0, 7.0], unit="A", name="coil")
        assert model.final.tolist() == [2.0, 0.0] and model.holds.tolist() == [False, True]
        assert (model.state_unit, model.storage_name, model.source_names) == ("A", "coil", ("fitted",))

    @pytest.mark.parametrize("tau, final, match", [
        ([0.0], [1.0], r"tau\[0\]: 0.0"), ([np.nan], [1.0], r"tau\[0\]"), ([1.0], [np.inf], r"final\[0\]"),
        ([1.0, 1.0], [1.0], "final: has 1 values but tau has 2"),
    ])
    def test_bad_models_are_refused(self, tau, final, match):
        with pytest.raises(InputError, match=match):
            Segments.of_model(tau, final)


class TestUnitAxis:
    def test_stacked_units_keep_their_own_numbers(self):
        lot = [Segments.of_drive(relay_filter().with_values(c=c), DRIVE) for c in ("90n", "100n", "110n")]
        stacked = Segments.stack(lot)
        assert stacked.units == 3 and stacked.rate.shape == (3, 4)
        assert stacked.gain_by_configuration.shape == (3, 2, 1)
        for k, unit in enumerate(lot):
            assert stacked.unit(k) is unit
            np.testing.assert_array_equal(stacked.rate[k], unit.rate)
        # tau scales with C (handbook tau = R C): 110 nF over 90 nF
        assert stacked.rate[0, 0] / stacked.rate[2, 0] == pytest.approx(110 / 90, rel=1e-13)

    def test_a_single_fixture_has_no_unit_axis(self):
        segments = Segments.of_drive(relay_filter(), DRIVE)
        assert segments.units is None
        with pytest.raises(InputError, match="no unit axis"):
            segments.unit(0)

    def test_units_of_another_structure_are_refused(self):
        other = DRIVE.replace(k1=[1, 1, 1, 1])
        with pytest.raises(InputError, match="differ in structure"):
            Segments.stack([Segments.of_drive(relay_filter(), DRIVE), Segments.of_drive(relay_filter(), other)])


def relay_bank(switches: int) -> fo.Fixture:
    """A source behind 1 kΩ, a capacitor, and relays (0.5 Ω on, 1 GΩ off) to loads of their own."""
    fx = fo.Fixture()
    fx.voltage_source("vin", "in", "gnd")
    fx.voltage_source("vref", "ref", "gnd")
    fx.resistor("rs", "in", "a", "1k")
    fx.resistor("rr", "ref", "a", "47k")
    fx.capacitor("c", "a", "gnd", "100n")
    for j in range(switches):
        fx.switch(f"k{j}", "a", f"n{j}", r_on="0.5", r_off="1G")
        fx.resistor(f"r{j}", f"n{j}", "gnd", 1e3 * (j + 1))
    fx.switch("kz", "a", "z", r_on=0)  # ideal: its state changes the topology
    fx.resistor("rz", "z", "gnd", "2k")
    fx.probe("va", node="a")
    fx.probe("i0", through="k0")
    return fx


class TestManyConfigurations:
    def test_configurations_reduced_together_equal_each_reduced_alone(self):
        switches = 5
        codes = np.arange(2 ** (switches + 1))
        states = (codes[:, None] >> np.arange(switches + 1)) & 1
        columns = {f"k{j}": states[:, j] for j in range(switches)}
        n = codes.size
        drive = fo.Drive(np.arange(n) * 1e-3, end=n * 1e-3, vin=np.ones(n), vref=np.linspace(0, 1, n),
                         kz=states[:, switches], **columns)
        segments = Segments.of_drive(relay_bank(switches), drive)
        alone = relay_bank(switches)  # a fresh fixture: every configuration reduced on its own
        for c, config in enumerate(segments.configurations):
            layout, one = alone.configuration(config)
            k = int(segments.first_use[c])
            assert segments.rate[k] == rates(np.array([one.tau]))[0]
            assert np.array_equal(segments.gain_by_configuration[c], one.gain)
            for probe in ("va", "i0"):
                row = fo.network.probe_row(layout, alone.netlist, one, segments.probe(probe))
                assert np.array_equal(segments.probe_rows(probe)[k], row)


class TestOfLot:
    @staticmethod
    def lot(units: int, seed: int = 3):
        fx = relay_filter()
        fx.voltage_source("vref", "ref", "gnd")
        fx.resistor("rr", "ref", "b", "47k")
        fx.probe("i_k1", through="k1")
        rng = np.random.default_rng(seed)
        n = 12
        drive = fo.Drive(np.arange(n) * 1e-3, end=n * 1e-3, vdac=rng.uniform(-5, 5, n), vref=rng.uniform(0, 2, n),
                         k1=rng.integers(0, 2, n))
        values = {"rs": 1e3 * (1 + 0.01 * rng.uniform(-1, 1, units)), "c": 1e-7 * (1 + 0.1 * rng.uniform(-1, 1, units)),
                  "k1.r_on": rng.uniform(0.1, 1.0, units), "rl": 1e4 * (1 + 0.01 * rng.uniform(-1, 1, units))}
        gain = rng.uniform(-1e-3, 1e-3, units)
        levels = {"vdac": drive.levels("vdac")[None, :] * (1.0 + gain[:, None])}
        return fx, drive, values, gain, levels

    def test_200_random_units_equal_their_hand_built_fixtures_bit_for_bit(self):
        units = 200
        fx, drive, values, gain, levels = self.lot(units)
        lot = Segments.of_lot(fx, drive, values, levels)
        assert lot.units == units and lot.rate.shape == (units, len(drive))
        for u in range(units):
            unit = fx.with_values(rs=values["rs"][u], c=values["c"][u], rl=values["rl"][u],
                                  k1=(values["k1.r_on"][u], "1G"))
            alone = Segments.of_drive(unit, drive.replace(vdac=drive.levels("vdac") * (1.0 + gain[u])))
            for c, config in enumerate(lot.configurations):
                layout, one = unit.configuration(config)
                assert np.array_equal(rates(np.array([one.tau])), lot.rate[u, lot.first_use[c]:lot.first_use[c] + 1])
                assert np.array_equal(lot.gain_by_configuration[u, c], one.gain)
            assert np.array_equal(lot.final[u], alone.final)
            for probe in ("v_a", "i_k1"):
                assert np.array_equal(lot.probe_rows(probe)[u], alone.probe_rows(probe))

    def test_bad_values_are_refused_naming_the_key(self):
        fx, drive, values, _, _ = self.lot(3)
        with pytest.raises(InputError, match=r"^values: 'k9.r_on' names no part value"):
            Segments.of_lot(fx, drive, {"k9.r_on": np.ones(3)})
        with pytest.raises(InputError, match=r"^values: 'vdac' names no part value"):
            Segments.of_lot(fx, drive, {"vdac": np.ones(3)})
        with pytest.raises(InputError, match=r"same number of units"):
            Segments.of_lot(fx, drive, {"rs": np.ones(3), "c": np.ones(2)})
        with pytest.raises(InputError, match=r"^levels\['vdac'\]: has shape \(3,\)"):
            Segments.of_lot(fx, drive, values, {"vdac": np.ones(3)})

    def test_a_lot_keeps_no_units_own_segments(self):
        fx, drive, values, _, _ = self.lot(2)
        with pytest.raises(InputError, match="of_lot"):
            Segments.of_lot(fx, drive, values).unit(0)


class TestReducedBefore:
    """A fixture without switches that has reduced its one configuration takes a short path;
    its segments must be those of the general path, bit for bit."""

    def test_the_short_path_equals_the_first_reduction(self):
        import firstorder as fo
        from firstorder.segments import Segments

        drive = fo.Drive([0, "1m", "3m"], end="4m", vin=[1.0, -2.0, 0.5])
        fresh = fo.Fixture().voltage_source("vin", "in", "gnd").resistor("r", "in", "a", "4.7k") \
            .capacitor("c", "a", "gnd", "220n").resistor("rl", "a", "gnd", "47k")
        first = Segments.of_drive(fresh, drive)   # reduces: the general path
        again = Segments.of_drive(fresh, drive)   # reduced before: the short path
        for name in ("rate", "gain_by_configuration", "final", "tau", "configuration_of"):
            assert np.array_equal(getattr(first, name), getattr(again, name)), name
        assert first.configurations == again.configurations
        assert np.array_equal(first.first_use, again.first_use)
        assert fresh.respond(drive).boundary.tolist() == fresh.respond(drive).boundary.tolist()

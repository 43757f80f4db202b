"""Tests for firstorder.studies.lot: every unit's values at once, against each unit built by hand."""

import numpy as np
import pytest

import firstorder as fo
from firstorder.errors import InputError
from firstorder.studies.lot import Lot


def relay_filter() -> fo.Fixture:
    fx = fo.Fixture()
    fx.voltage_source("vdac", "d", "gnd")
    fx.resistor("rs", "d", "a", "1k")
    fx.switch("k1", "a", "b", r_on="0.5", r_off="1k")
    fx.capacitor("c", "b", "gnd", "100n")
    return fx


def test_every_units_values_are_its_hand_built_fixture_and_drive():
    fx = relay_filter()
    lot = Lot(fx, fo.Spread({"rs": "1%", "c": "10%", "k1.r_on": "20%", "vdac.gain": "0.1%"}), seed=4)
    draw = lot.draw(0, 20)
    drive = fo.Drive([0, "1m"], end="2m", vdac=[1.0, 3.0], k1=[1, 0])
    values, levels = lot.unit_values(drive, draw)
    for u in range(20):
        unit = lot.unit_fixture(draw, u)
        assert values["rs"][u] == unit.part_map["rs"].value and values["c"][u] == unit.part_map["c"].value
        assert values["k1.r_on"][u] == unit.part_map["k1"].r_on
        assert np.array_equal(levels["vdac"][u], lot.unit_drive(drive, draw, u).levels("vdac"))


def test_an_on_resistance_drawn_above_the_off_resistance_is_refused_naming_the_unit():
    fx = relay_filter().with_values(k1=("900", "1k"))
    lot = Lot(fx, fo.Spread({"k1.r_on": "50%"}), seed=1)
    draw = lot.draw(0, 200)
    with pytest.raises(InputError, match=r"^spread k1.r_off: unit \d+ draws an off resistance not above"):
        lot.unit_values(fo.Drive([0], end="1m", vdac=[1.0], k1=[1]), draw)

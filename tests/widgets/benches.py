"""Benches the widget tests share (invented fixtures), and the handbook step response they check against."""

from __future__ import annotations

import numpy as np

import firstorder as fo
from firstorder.widgets import Bench


def rc_fixture() -> fo.Fixture:
    return fo.Fixture.rc(r="10k", c="100n")


def rc_drive() -> fo.Drive:
    return fo.Drive.steps([(0, 0.0), ("1m", 5.0), ("4m", 1.0)], end="8m")


def rc_bench(**kwargs) -> Bench:
    """10 kΩ and 100 nF (tau 1 ms), stepped to 5 V at 1 ms and to 1 V at 4 ms."""
    return Bench(rc_fixture(), rc_drive(), **kwargs)


def switched_fixture() -> fo.Fixture:
    """A DAC behind 1 kΩ, a relay (0.2 Ω on), a 100 nF hold capacitor and a 10 MΩ meter."""
    fixture = fo.Fixture()
    fixture.voltage_source("vdac", "drv", "gnd")
    fixture.resistor("rs", "drv", "a", "1k")
    fixture.switch("k1", "a", "b", r_on="0.2")
    fixture.capacitor("ch", "b", "gnd", "100n")
    fixture.resistor("rin", "b", "gnd", "10M")
    fixture.probe("i_rs", through="rs")
    return fixture


def switched_drive() -> fo.Drive:
    return fo.Drive([0, "1m", "2m", "3m"], end="5m", vdac=[0, 2.5, 2.5, -1.2], k1=[1, 1, 0, 1])


def switched_bench(**kwargs) -> Bench:
    return Bench(switched_fixture(), switched_drive(), **kwargs)


def charging(t, start, level, tau):
    """Handbook RC step response from 0 V (common practice)."""
    return level * (1.0 - np.exp(-(np.asarray(t) - start) / tau))

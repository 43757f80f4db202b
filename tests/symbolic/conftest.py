"""Fixtures shared by the tests of firstorder.symbolic (scenarios of our own invention)."""

import pytest

import firstorder as fo


@pytest.fixture
def divider():
    """A loaded divider behind an RC: rf + r1 || r2 || rm, the handbook's series/parallel case."""
    fx = fo.Fixture()
    fx.voltage_source("vin", "in", "gnd")
    fx.resistor("r1", "in", "a", "10k")
    fx.resistor("r2", "a", "gnd", "4.7k")
    fx.resistor("rm", "a", "gnd", "1M")
    fx.resistor("rf", "a", "out", "1k")
    fx.capacitor("c", "out", "gnd", "100n")
    fx.probe("v_a", node="a")
    return fx


@pytest.fixture
def relay():
    """A DAC through a relay onto a hold capacitor, a bias current, leakage and a switched meter;
    a probe of every kind."""
    fx = fo.Fixture()
    fx.voltage_source("vdac", "dac", "gnd")
    fx.current_source("ib", "gnd", "h")
    fx.resistor("rs", "dac", "a", "1k")
    fx.switch("k1", "a", "h", r_on="2", r_off="1G")
    fx.capacitor("ch", "h", "gnd", "10n")
    fx.resistor("r_leak", "h", "gnd", "100M")
    fx.switch("k2", "h", "m")
    fx.resistor("r_meter", "m", "gnd", "10M")
    fx.probe("v_a", node="a")
    fx.probe("i_k1", through="k1")
    fx.probe("i_ch", through="ch")
    fx.probe("i_dac", through="vdac")
    fx.probe("v_m", node="m", reference="a")
    fx.probe("i_ib", through="ib")
    fx.probe("i_rs", through="rs")
    return fx

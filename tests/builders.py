"""Fixtures and drives that several test modules build: scenarios of our own invention.

Imported by test modules as ``from builders import ...`` (pytest puts tests/ on
the path for its conftest.py).
"""

from __future__ import annotations

import json

import firstorder as fo
from firstorder.analysis import Analysis


def switched_fixture() -> fo.Fixture:
    """A DAC behind 1 kΩ, a relay with 10 Ω on, a 100 nF hold capacitor (scenario of our own).

    With k1 closed tau = 1.01 kΩ x 100 nF; with k1 open the capacitor holds (tau = inf).
    Probes: the node before the relay (jumps at changes) and the current in the 1 kΩ.
    """
    fx = fo.Fixture()
    fx.voltage_source("vdac", "drv", "gnd")
    fx.resistor("rs", "drv", "a", "1k")
    fx.resistor("rload", "a", "gnd", "4k")
    fx.switch("k1", "a", "b", r_on="10")
    fx.capacitor("ch", "b", "gnd", "100n")
    fx.probe("v_a", node="a")
    fx.probe("i_rs", through="rs")
    return fx


def general_fixture() -> fo.Fixture:
    """A fixture with two sources, a switch with leakage, a meter load and probes (invented)."""
    fx = fo.Fixture()
    fx.voltage_source("vdac", "drv", "gnd")
    fx.current_source("ibias", "gnd", "b")
    fx.resistor("rs", "drv", "a", "1k")
    fx.switch("k1", "a", "b", r_on="0.1", r_off="1G")
    fx.capacitor("ch", "b", "gnd", "100 nF")
    fx.resistor("rm", "b", "gnd", 10e6)
    fx.probe("v_b", node="b")
    fx.probe("v_ab", node="a", reference="b")
    fx.probe("i_rs", through="rs")
    return fx


def general_drive() -> fo.Drive:
    return fo.Drive(
        [0, "1m", "3m", "3.5m"], end="6m",
        vdac=[0, 2.5, -1.2, -1.2], ibias=[0, 0, 1e-6, 0], k1=[1, 1, 0, 1],
    )


def general_analysis(**changes) -> Analysis:
    arguments = dict(
        fixture=general_fixture(), drive=general_drive(), initial="settled",
        tolerance=fo.Tolerance.lsb(bits=16, span=5.0), sample_delay="0.4m",
        title="Hold capacitor behind a relay (invented)", notes="line one\nline two",
    )
    arguments.update(changes)
    return Analysis(**arguments)


def valid_data() -> dict:
    return json.loads(general_analysis().to_json())


def write_json(path, data) -> str:
    path.write_text(json.dumps(data), encoding="utf-8")
    return str(path)


def relay_analysis(**changes) -> Analysis:
    """A DAC, a relay and a hold capacitor loaded by a meter (an invented scenario)."""
    fx = fo.Fixture()
    fx.voltage_source("vdac", "drv", "gnd")
    fx.resistor("rs", "drv", "a", "1k")
    fx.switch("k1", "a", "b", r_on="0.1", r_off="1G")
    fx.capacitor("ch", "b", "gnd", "100n")
    fx.resistor("rm", "b", "gnd", "10M")
    fx.probe("v_b", node="b")
    fx.probe("i_rs", through="rs")
    arguments = dict(
        fixture=fx,
        drive=fo.Drive([0, "1m", "3m"], end="6m", vdac=[0, 2.5, -1.2], k1=[1, 1, 0]),
        initial="settled", tolerance=fo.Tolerance.lsb(bits=16, span=5.0), sample_delay="0.9m",
        title="Relay and hold capacitor", notes="First line.\nSecond line.",
    )
    arguments.update(changes)
    return Analysis(**arguments)


def divider_fixture() -> fo.Fixture:
    """A loaded divider behind an RC: R_th = rf + r1 || r2 || rm (handbook series/parallel; invented)."""
    fx = fo.Fixture()
    fx.voltage_source("vin", "in", "gnd")
    fx.resistor("r1", "in", "a", "10k")
    fx.resistor("r2", "a", "gnd", "4.7k")
    fx.resistor("rm", "a", "gnd", "1M")
    fx.resistor("rf", "a", "out", "1k")
    fx.capacitor("c", "out", "gnd", "100n")
    fx.probe("v_a", node="a")
    return fx


def relay_fixture() -> fo.Fixture:
    """A DAC through relay k1 onto a hold capacitor, a bias current, leakage and a meter behind
    relay k2; a probe of every kind (an invented scenario)."""
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


#: A name that runs script if it reaches a page as HTML (in a tag or an attribute).
HOSTILE = '<img src=x onerror="window.__pwned=1">'


def hostile_fixture() -> fo.Fixture:
    """Every part, node and probe named with :data:`HOSTILE` in it."""
    fx = fo.Fixture()
    fx.voltage_source("v" + HOSTILE, "in" + HOSTILE, "gnd")
    fx.switch("k" + HOSTILE, "in" + HOSTILE, "mid" + HOSTILE, r_on="10")
    fx.resistor("r" + HOSTILE, "mid" + HOSTILE, "out" + HOSTILE, "1k")
    fx.capacitor("c" + HOSTILE, "out" + HOSTILE, "gnd", "1u")
    fx.probe("p" + HOSTILE, through="r" + HOSTILE)
    return fx


def hostile_drive() -> fo.Drive:
    return fo.Drive([0, "1m", "3m"], end="5m", **{"v" + HOSTILE: [0, 1, 1], "k" + HOSTILE: [1, 1, 0]})


def hostile_analysis() -> Analysis:
    return Analysis(hostile_fixture(), hostile_drive(), tolerance=fo.Tolerance.absolute("1m"),
                    sample_delay="0.5m", title="t" + HOSTILE, notes="n" + HOSTILE)


def assert_inert(page: str, hostile: str = HOSTILE) -> None:
    """`page` (HTML) holds no element or attribute made from `hostile`: no <img>, no on... handler.

    Parsed as a browser would (html.parser): the name may appear only as text.
    """
    from html.parser import HTMLParser

    found: list[str] = []

    class Elements(HTMLParser):
        def handle_starttag(self, tag, attrs):
            if tag == "img" or any(name.startswith("on") for name, _ in attrs):
                found.append(f"<{tag} {attrs}>")

    parser = Elements(convert_charrefs=True)
    parser.feed(page)
    parser.close()
    assert not found, f"user text became HTML: {found[:3]}"
    assert hostile not in page, "the hostile name appears unescaped"


def scanner() -> fo.Fixture:
    """Three channels with different source resistances behind a multiplexer into an RC
    filter (our own scenario)."""
    fx = fo.Fixture()
    for j, rs in enumerate(["100", "2.2k", "10k"]):
        fx.voltage_source(f"v{j}", f"s{j}", "gnd")
        fx.resistor(f"rs{j}", f"s{j}", f"m{j}", rs)
        fx.switch(f"k{j}", f"m{j}", "mux", r_on="50")
    fx.resistor("rf", "mux", "adc", "500")
    fx.capacitor("cf", "adc", "gnd", "10n")
    return fx


def with_value_at(data: dict, path: list, value) -> dict:
    """A deep copy of `data` with the item at `path` (keys and indices) set to `value`."""
    import copy

    data = copy.deepcopy(data)
    target = data
    for step in path[:-1]:
        target = target[step]
    target[path[-1]] = value
    return data


def study_analysis(**changes) -> Analysis:
    """:func:`relay_analysis` with a lot: 5 % hold capacitors, 1 % resistors, relay contacts of
    50 to 300 mΩ, 0 to 50 °C (an invented scenario); 400 units."""
    from firstorder.studies import Spread, Uniform

    arguments = dict(spread=Spread({"ch": "5%", "rs": "1%", "rm": "1%", "k1.r_on": Uniform("50m", "300m")},
                                   temperature=(0, 50), tempco={"ch": "-750ppm"}),
                     units=400, seed=11)
    arguments.update(changes)
    return relay_analysis(**arguments)


def three_speeds() -> fo.Fixture:
    """A source behind 1 GΩ, with two relays that bypass it through 1 MΩ or 1 kΩ, into 1 nF
    (our own scenario): tau is 1 s with both open, ~1 ms with k1, ~1 µs with k2."""
    fx = fo.Fixture()
    fx.voltage_source("vin", "in", "gnd")
    fx.resistor("r", "in", "out", "1G")
    fx.switch("k1", "in", "out", r_on="1M")
    fx.switch("k2", "in", "out", r_on="1k")
    fx.capacitor("c", "out", "gnd", "1n")
    return fx

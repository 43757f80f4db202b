"""Bad spreads and study arguments (split from test_study.py): each refused with an
InputError (a ValueError) whose message names the key as the user wrote it and the value."""

from __future__ import annotations

import pytest

import firstorder as fo
from firstorder.errors import InputError
from firstorder.studies import Normal, Spread, Uniform

HALF_LSB_16 = fo.Tolerance.lsb(bits=16, span=5.0)


def fixture():
    return (fo.Fixture().voltage_source("vdac", "dac", "gnd").resistor("r_filter", "dac", "a", "4.99k")
            .switch("k1", "a", "b", r_on="0.2", r_off="1G").capacitor("c_filter", "b", "gnd", "330n"))


DRIVE = fo.Drive([0, "2m"], end="4m", vdac=[5.0, 0.0], k1=[1, 1])
GOOD = Spread({"r_filter": "1%", "c_filter": "10%"})


def study(**options):
    arguments = dict(units=20, seed=1)
    arguments.update(options)
    return fixture().study(DRIVE, arguments.pop("spread", GOOD), **arguments)


def on_fixture(bands, **extra):
    return lambda: Spread(bands, **extra).quantities(fixture())


#: (what to call, the key the message must name, the value it must show)
CASES = [
    # spreads, on construction
    (lambda: Spread({"r_filter": "abc"}), "spread r_filter", "'abc'"),
    (lambda: Spread({"r_filter": "0%"}), "spread r_filter", "'0%'"),
    (lambda: Spread({"r_filter": "-1%"}), "spread r_filter", "'-1%'"),
    (lambda: Spread({"r_filter": True}), "spread r_filter", "True"),
    (lambda: Spread({"r_filter": None}), "spread r_filter", "None"),
    (lambda: Spread({"r_filter": [1, 2]}), "spread r_filter", "[1, 2]"),
    (lambda: Spread({"r_filter": -3.0}), "spread r_filter", "-3.0"),
    (lambda: Spread({3: "1%"}), "spread: key", "3"),
    (lambda: Spread("r 1%"), "spread", "'r 1%'"),
    (lambda: Spread({"r_filter": "1%"}, temperature=25), "spread temperature", "25"),
    (lambda: Spread({"r_filter": "1%"}, temperature=(50, 0)), "spread temperature", "50"),
    (lambda: Spread({"r_filter": "1%"}, temperature=(-300, 0)), "spread temperature low", "-300"),
    (lambda: Spread({"r_filter": "1%"}, temperature=("cold", 0)), "spread temperature low", "'cold'"),
    (lambda: Spread({"r_filter": "1%"}, tempco={"r_filter": "25ppm"}), "spread tempco r_filter", "'25ppm'"),
    (lambda: Spread({"r_filter": "1%"}, temperature=(0, 50), tempco={"r_filter": "25"}), "spread tempco r_filter",
     "'25'"),
    (lambda: Uniform("1%", "-1%"), "Uniform", "'-1%'"),
    (lambda: Uniform("a", "1"), "Uniform low", "'a'"),
    (lambda: Normal("0%"), "Normal sd", "'0%'"),
    (lambda: Normal("1%", within="-2%"), "Normal within", "'-2%'"),
    # spreads, against the fixture
    (on_fixture({"r_x": "1%"}), "spread r_x", "names no part"),
    (on_fixture({"k1": "1%"}), "spread k1", "'k1.r_on'"),
    (on_fixture({"vdac.offset": "1%"}), "spread vdac.offset", "an offset has no nominal"),
    (on_fixture({"r_filter": "5k"}), "spread r_filter", "±5k"),
    (on_fixture({"c_filter": Normal("50%", within="120%")}), "spread c_filter", "within 120%"),
    (on_fixture({"r_filter": "1%"}, temperature=(0, 50), tempco={"c_filter": "1%"}), "tempco", "'c_filter'"),
    # study arguments
    (lambda: study(units=0), "units", "0"),
    (lambda: study(units=2.5), "units", "2.5"),
    (lambda: study(units="many"), "units", "'many'"),
    (lambda: study(seed=-1), "seed", "-1"),
    (lambda: study(spread={"c_filter": "1%"}), "spread", "{'c_filter': '1%'}"),
    (lambda: study(keep="yes"), "keep", "'yes'"),
    (lambda: study(progress=2), "progress", "2"),
    (lambda: study(chunk=0), "chunk", "0"),
    (lambda: study(chunk=1.5), "chunk", "1.5"),
    (lambda: study(numerical_tolerance=0.01), "numerical_tolerance", "0.01"),
    (lambda: study(units="adaptive", numerical_tolerance="x", tolerance=HALF_LSB_16), "numerical_tolerance", "'x'"),
    (lambda: study(units="adaptive", numerical_tolerance=0.01, tolerance=HALF_LSB_16, batch=0), "batch", "0"),
    # One delay for every segment samples a shorter one at its end; one per segment must lie inside it.
    (lambda: study(tolerance=HALF_LSB_16, sample_delay=["1m", "9m"]), "sample_delay", "9m"),
    (lambda: study(tolerance=HALF_LSB_16, probe="v_x"), "probe", "'v_x'"),
    (lambda: study(tolerance=HALF_LSB_16, target="x"), "target", "'x'"),
    (lambda: study().settling(HALF_LSB_16, fractions=(0.5, 2.0)), "fractions[1]", "2.0"),
    (lambda: study().settling(HALF_LSB_16, fractions="0.5"), "fractions", "'0.5'"),
    (lambda: study().settling(HALF_LSB_16, target=[1.0]), "target", "1 values"),
    (lambda: study().passing(HALF_LSB_16, confidence=95), "confidence", "95"),
    (lambda: study().delay_for(HALF_LSB_16, fraction=0.0), "fraction", "0.0"),
    (lambda: study().envelope([0.0], fraction=1.5), "fraction", "1.5"),
    (lambda: study().evaluate([0.0], "ripple"), "component", "'ripple'"),
    (lambda: study().unit(20), "unit", "20"),
    (lambda: study().budget(segment=5, quantity="tau"), "segment", "5"),
    (lambda: fixture().worst_case(DRIVE, GOOD, HALF_LSB_16, sample_delay="-1m"), "sample_delay", "-1m"),
]


def test_there_are_at_least_30_distinct_cases():
    assert len(CASES) >= 30


@pytest.mark.parametrize("call, key, value", CASES, ids=[f"{k}={v}" for _, k, v in CASES])
def test_a_bad_spread_or_study_argument_names_its_key_and_value(call, key, value):
    with pytest.raises(InputError) as caught:  # an InputError is a ValueError
        call()
    message = str(caught.value)
    assert key in message and value in message, message

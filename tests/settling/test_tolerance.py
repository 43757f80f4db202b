"""Tests for firstorder.settling.tolerance: limits from each kind of tolerance, and their text."""

from __future__ import annotations

import numpy as np
import pytest

import firstorder as fo


class TestTolerance:
    def test_engineering_notation(self):
        assert fo.Tolerance.absolute("38.1µ").limit(np.array([1.0]))[0] == pytest.approx(38.1e-6)
        assert fo.Tolerance.ppm("10", span="5 V").limit(np.array([1.0]))[0] == pytest.approx(50e-6)
        assert fo.Tolerance.lsb(bits=16, span="5V").value == pytest.approx(5.0 / 2**17)

    def test_readable_text(self):
        assert str(fo.Tolerance.lsb(bits=16, span=5.0)) == "±38.15 µV (½ LSB of 16 bits on 5 V)"
        assert repr(fo.Tolerance.relative(0.01)) == "Tolerance.relative(fraction=0.01)"

    @pytest.mark.parametrize("tolerance", [
        fo.Tolerance.absolute("1m"), fo.Tolerance.relative(0.02), fo.Tolerance.ppm(3, 10.0),
        fo.Tolerance.lsb(bits=18, span=4.096, fraction=0.25), fo.Tolerance.absolute(1e-3, unit="A"),
    ])
    def test_round_trip(self, tolerance):
        assert fo.Tolerance.from_dict(tolerance.to_dict()) == tolerance

    @pytest.mark.parametrize("build, field", [
        (lambda: fo.Tolerance.absolute(0), "tolerance.value"),
        (lambda: fo.Tolerance.absolute(-1e-3), "tolerance.value"),
        (lambda: fo.Tolerance.absolute("-1m"), "tolerance.value"),
        (lambda: fo.Tolerance.relative(0), "tolerance.fraction"),
        (lambda: fo.Tolerance.relative(-0.1), "tolerance.fraction"),
        (lambda: fo.Tolerance.relative(1.0), "tolerance.fraction"),
        (lambda: fo.Tolerance.ppm(0, 5.0), "tolerance.ppm"),
        (lambda: fo.Tolerance.ppm(-3, 5.0), "tolerance.ppm"),
        (lambda: fo.Tolerance.ppm(3, 0), "tolerance.span"),
        (lambda: fo.Tolerance.lsb(bits=0, span=5.0), "tolerance.bits"),
        (lambda: fo.Tolerance.lsb(bits=33, span=5.0), "tolerance.bits"),
        (lambda: fo.Tolerance.lsb(bits=12.5, span=5.0), "tolerance.bits"),
        (lambda: fo.Tolerance.lsb(bits=True, span=5.0), "tolerance.bits"),
        (lambda: fo.Tolerance.lsb(bits=16, span=0), "tolerance.span"),
        (lambda: fo.Tolerance.lsb(bits=16, span=-5.0), "tolerance.span"),
        (lambda: fo.Tolerance.lsb(bits=16, span=5.0, fraction=0), "tolerance.fraction"),
        (lambda: fo.Tolerance.lsb(bits=16, span=5.0, fraction=1.5), "tolerance.fraction"),
        (lambda: fo.Tolerance.lsb(bits=16, span=5.0, fraction=-0.5), "tolerance.fraction"),
    ])
    def test_bad_input_names_the_field(self, build, field):
        with pytest.raises(ValueError, match=field.replace(".", r"\.")):
            build()

    def test_bits_at_the_edges_are_allowed(self):
        assert fo.Tolerance.lsb(bits=1, span=1.0).value == 0.25
        assert fo.Tolerance.lsb(bits=32, span=1.0, fraction=1).value == 2.0**-32


# -- settling_table / Response.settling ----------------------------------------------------------


class TestOneWriting:
    @pytest.mark.parametrize("tolerance", [
        fo.Tolerance.absolute("1.5m"), fo.Tolerance.absolute("20u", unit="A"), fo.Tolerance.relative(0.001),
        fo.Tolerance.ppm(10, 5.0), fo.Tolerance.lsb(bits=16, span=5.0), fo.Tolerance.lsb(bits=12, span=10.0, fraction=1.0),
        fo.Tolerance.lsb(bits=24, span=2.5, fraction=0.25),
    ])
    def test_what_is_shown_and_what_is_edited_read_back(self, tolerance):
        from firstorder.settling.tolerance import parse_tolerance, tolerance_text

        assert parse_tolerance(tolerance_text(tolerance), unit=tolerance.unit) == tolerance
        assert parse_tolerance(str(tolerance), unit=tolerance.unit) == tolerance

    def test_the_shown_text_leads_with_the_limit(self):
        assert str(fo.Tolerance.lsb(bits=16, span=5.0)) == "±38.15 µV (½ LSB of 16 bits on 5 V)"
        assert str(fo.Tolerance.ppm(10, 5.0)) == "±50 µV (10 ppm of 5 V)"
        assert str(fo.Tolerance.relative(0.001)) == "±0.1 % of each step"


def _rc_response():
    return fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive.steps([(0, 1.0)], end="5m"))


class TestToleranceCarriesItsUnit:
    @pytest.mark.parametrize("tolerance", [
        lambda: fo.Tolerance.absolute("1 mA"),
        lambda: fo.Tolerance.ppm(10, "5 A"),
        lambda: fo.Tolerance.lsb(bits=12, span="5 A"),
    ])
    def test_a_current_tolerance_on_a_voltage_is_refused(self, tolerance):
        built = tolerance()
        assert built.unit == "A"
        with pytest.raises(fo.errors.InputError, match=r"^tolerance: .* is in A, but the state of capacitor 'c' is in V"):
            _rc_response().settling(built)

    def test_text_against_the_unit_given_is_refused(self):
        with pytest.raises(fo.errors.InputError, match=r"^tolerance\.value: '1 mA' is in A, but .* in V"):
            fo.Tolerance.absolute("1 mA", unit="V")
        with pytest.raises(fo.errors.InputError, match=r"^tolerance\.span: '5 V' is in V, but .* in A"):
            fo.Tolerance.ppm(10, "5 V", unit="A")

    def test_unit_round_trips_through_a_dict(self):
        tolerance = fo.Tolerance.absolute("2 mA")
        assert fo.Tolerance.from_dict(tolerance.to_dict()) == tolerance


class TestToleranceRefusesNonsense:
    @pytest.mark.parametrize(("kind", "value", "span", "field"), [
        ("absolute", float("nan"), float("nan"), "value"), ("absolute", -1e-3, float("nan"), "value"),
        ("absolute", 0.0, float("nan"), "value"), ("relative", 1.5, float("nan"), "fraction"),
        ("ppm", 10.0, float("nan"), "span"), ("ppm", 10.0, -5.0, "span"), ("lsb", float("inf"), 5.0, "value"),
        ("absolute", True, float("nan"), "value"),
    ])
    def test_nan_negative_or_zero_refused_when_built_directly(self, kind, value, span, field):
        with pytest.raises(fo.errors.InputError, match=rf"^tolerance\.{field}: "):
            fo.Tolerance(kind, value, span=span)

    @pytest.mark.parametrize("data", [None, [], "1 mV", 3])
    def test_from_dict_of_something_else(self, data):
        with pytest.raises(fo.errors.InputError, match=r"^tolerance: .* is not a mapping"):
            fo.Tolerance.from_dict(data)

    def test_comma_in_a_tolerance_value_is_refused(self):
        with pytest.raises(fo.errors.InputError, match="has a comma"):
            fo.Tolerance.absolute("1,5m")

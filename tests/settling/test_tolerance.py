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

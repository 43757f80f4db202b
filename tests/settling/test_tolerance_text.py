"""A tolerance as text: every kind reads back from the text it is written as."""

from __future__ import annotations

import pytest

import firstorder as fo
from firstorder.settling.tolerance import parse_tolerance, tolerance_text


class TestToleranceText:
    @pytest.mark.parametrize("tolerance", [fo.Tolerance.absolute("1m"), fo.Tolerance.relative(0.001),
                                           fo.Tolerance.ppm(10, 5.0), fo.Tolerance.lsb(16, 5.0)])
    def test_round_trip(self, tolerance):
        assert parse_tolerance(tolerance_text(tolerance)) == tolerance

    def test_bad_text_names_forms(self):
        with pytest.raises(ValueError, match="LSB of 16 bits"):
            parse_tolerance("tight")


class TestTextNumbers:
    @pytest.mark.parametrize("text", ["1,5 %", "1,5m", "10 ppm of 5,0 V", "0,5 LSB of 16 bits on 5 V"])
    def test_comma_is_refused_not_read_as_fifteen(self, text):
        with pytest.raises(fo.errors.InputError, match="has a comma; a comma is never a decimal or thousands mark"):
            parse_tolerance(text)

    def test_text_in_amps_for_a_voltage_is_refused(self):
        with pytest.raises(fo.errors.InputError, match=r"'1 mA' is in A, but the tolerance is for a quantity in V"):
            parse_tolerance("1 mA", unit="V")
        assert parse_tolerance("1 mA", unit="A") == fo.Tolerance.absolute(1e-3, unit="A")

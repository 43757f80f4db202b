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

"""Tests for firstorder.units."""

import math

import pytest

from firstorder.errors import InputError
from firstorder.units import format_value, parse_value


class TestParseValue:
    @pytest.mark.parametrize(
        ("text", "unit", "expected"),
        [
            ("4.7k", "Ω", 4700.0),
            ("4.7µ", "F", 4.7e-6),  # micro sign U+00B5
            ("4.7μ", "F", 4.7e-6),  # Greek mu U+03BC
            ("4.7u", "F", 4.7e-6),
            ("100nF", "F", 100e-9),
            ("100 nF", "F", 100e-9),
            ("2.2 MΩ", "Ω", 2.2e6),
            ("1m", "s", 1e-3),  # milli, not mega
            ("1 ms", "s", 1e-3),
            ("47R", "Ω", 47.0),  # the trade's resistor marking, not ronna (1e27)
            ("10 ohm", "Ω", 10.0),
            ("1e-3", "", 1e-3),
            ("-2.5", "", -2.5),
        ],
    )
    def test_engineering_notation(self, text, unit, expected):
        assert parse_value(text, field="x", unit=unit) == pytest.approx(expected, rel=1e-15)

    def test_numbers_pass_through(self):
        assert parse_value(3, field="x") == 3.0
        assert parse_value(2.5, field="x") == 2.5
        assert parse_value(True, field="x") == 1.0

    @pytest.mark.parametrize("bad", ["abc", "1.2.3", "", "4.7 kF", "__import__('os')", "1+1"])
    def test_bad_text_names_field_and_value(self, bad):
        with pytest.raises(InputError, match="^r"):
            parse_value(bad, field="r", unit="Ω")

    @pytest.mark.parametrize("bad", [math.nan, math.inf, "nan", "inf"])
    def test_non_finite_refused_unless_allowed(self, bad):
        with pytest.raises(InputError, match="r_off"):
            parse_value(bad, field="r_off", unit="Ω")

    def test_infinite_allowed_where_asked(self):
        assert parse_value("inf", field="r_off", unit="Ω", allow_infinite=True) == math.inf

    @pytest.mark.parametrize("bad", [0, -1, "-4.7k"])
    def test_positive(self, bad):
        with pytest.raises(InputError, match="must be > 0"):
            parse_value(bad, field="c", positive=True)

    def test_not_a_number_type(self):
        with pytest.raises(InputError, match="level"):
            parse_value([1], field="level")


class TestFormatValue:
    def test_round_trip(self):
        for value, unit in [(4.7e3, "Ω"), (1e-7, "F"), (2.5, "V"), (3.3e-12, "s")]:
            assert parse_value(format_value(value, unit), field="x", unit=unit) == pytest.approx(value)

    def test_micro_sign(self):
        assert format_value(4.7e-6, "F") == "4.7 µF"

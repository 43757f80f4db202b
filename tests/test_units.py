"""Tests for firstorder.units."""

import math

import pytest

from firstorder.errors import InputError
import numpy as np

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

    @pytest.mark.parametrize("flag", [True, False])
    def test_booleans_are_not_numbers(self, flag):
        import numpy as np

        for value in (flag, np.bool_(flag)):
            with pytest.raises(InputError, match=r"^c: (True|False) is not a number; write 1 or 0"):
                parse_value(value, field="c", unit="F")

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


class TestCommas:
    # A comma is never a decimal or a thousands mark: "1,5k" read as 15 k would be silently wrong.
    @pytest.mark.parametrize("text", ["1,5k", "4,7k", ",5", "1,5m", "1,5 %", "1,000", "1,5,0", " 2,2 MΩ "])
    def test_text_with_a_comma_is_refused(self, text):
        with pytest.raises(InputError, match=r"^r: .* has a comma; a comma is never a decimal or thousands mark"):
            parse_value(text, field="r", unit="Ω")

    def test_the_message_shows_the_point(self):
        with pytest.raises(InputError, match=r"write '1\.5k'"):
            parse_value("1,5k", field="r", unit="Ω")


class TestIecLetterCodes:
    # Expected values written out by hand from IEC 60062's letter-code rule (the letter stands
    # for the decimal point and the multiplier: R = 1, K = 1e3, M = 1e6, G = 1e9, T = 1e12 for
    # resistance; p, n, µ, m for capacitance), not computed by the code under test.
    @pytest.mark.parametrize(("text", "unit", "expected"), [
        ("4R7", "Ω", 4.7), ("R47", "Ω", 0.47), ("0R1", "Ω", 0.1), ("47R", "Ω", 47.0),
        ("4K7", "Ω", 4700.0), ("4k7", "Ω", 4700.0), ("2M2", "Ω", 2.2e6), ("1G5", "Ω", 1.5e9),
        ("1T0", "Ω", 1e12), ("4k7Ω", "Ω", 4700.0), ("4k7 ohm", "Ω", 4700.0),
        ("2.2K", "Ω", 2200.0), ("10K", "Ω", 1e4), ("2.2 KΩ", "Ω", 2200.0),
        ("1n5", "F", 1.5e-9), ("4u7", "F", 4.7e-6), ("4µ7", "F", 4.7e-6), ("p68", "F", 0.68e-12),
        ("6n8F", "F", 6.8e-9), ("2m2", "F", 2.2e-3), ("10u", "F", 10e-6),
        ("4u7", "H", 4.7e-6), ("1m5", "H", 1.5e-3),
    ])
    def test_codes_read_where_the_unit_makes_them_unambiguous(self, text, unit, expected):
        assert parse_value(text, field="x", unit=unit) == expected

    def test_milli_and_mega_keep_their_case(self):
        assert parse_value("1m", field="r", unit="Ω") == 1e-3
        assert parse_value("1M", field="r", unit="Ω") == 1e6

    @pytest.mark.parametrize(("text", "unit"), [("1n5", "Ω"), ("4k7", "F"), ("4R7", "H")])
    def test_a_letter_of_another_unit_is_named(self, text, unit):
        with pytest.raises(InputError, match=r"IEC 60062 letter code, but '.' is not a letter for"):
            parse_value(text, field="x", unit=unit)

    @pytest.mark.parametrize(("text", "unit"), [("1meg", "Ω"), ("4k7", "V"), ("1m5", "s"), ("2.2K", "F"),
                                                 ("2.2K", "")])
    def test_no_codes_elsewhere(self, text, unit):
        with pytest.raises(InputError, match="^x: "):
            parse_value(text, field="x", unit=unit)


class TestHugeAndOdd:
    def test_huge_integer_refused_and_shortened(self):
        with pytest.raises(InputError, match=r"^c: 1000000000000000000000000…0000000000 \(401 characters\) is too large"):
            parse_value(10**400, field="c", unit="F")

    def test_huge_text_refused(self):
        with pytest.raises(InputError, match=r"too large for a number"):
            parse_value("1" + "0" * 400, field="c", unit="F")

    def test_representable_integer_converted(self):
        assert parse_value(10**300, field="c") == 1e300

    def test_timedelta_scalar_in_seconds(self):
        import numpy as np

        assert parse_value(np.timedelta64(1500, "ms"), field="end", unit="s") == 1.5
        with pytest.raises(InputError, match="level"):
            parse_value(np.timedelta64(1500, "ms"), field="level", unit="V")


class TestParseArray:
    def test_timedelta_converted_exactly(self):
        import numpy as np
        from fractions import Fraction

        from firstorder.units import parse_array

        counts = np.array([0, 1, 3, 7, 123456789], dtype=np.int64)
        for unit, seconds in [("ms", Fraction(1, 1000)), ("us", Fraction(1, 10**6)), ("ns", Fraction(1, 10**9)),
                              ("m", Fraction(60)), ("s", Fraction(1))]:
            got = parse_array(counts.astype(f"timedelta64[{unit}]"), field="t", unit="s")
            # The correctly rounded float of each exact rational (fractions as the reference).
            assert got.tolist() == [float(int(c) * seconds) for c in counts]

    @pytest.mark.parametrize("bad", [np_bad for np_bad in ("2d", "bool", "complex", "datetime", "months")])
    def test_refused_arrays_name_the_field(self, bad):
        import numpy as np

        from firstorder.units import parse_array

        values = {"2d": np.zeros((2, 2)), "bool": np.array([True, False]), "complex": np.array([1 + 0j]),
                  "datetime": np.array(["2024-01-01"], dtype="datetime64[s]"),
                  "months": np.array([1], dtype="timedelta64[M]")}[bad]
        with pytest.raises(InputError, match="^drive.times: "):
            parse_array(values, field="drive.times", unit="s")


class TestFormatValue:
    def test_round_trip(self):
        for value, unit in [(4.7e3, "Ω"), (1e-7, "F"), (2.5, "V"), (3.3e-12, "s")]:
            assert parse_value(format_value(value, unit), field="x", unit=unit) == pytest.approx(value)

    def test_micro_sign(self):
        assert format_value(4.7e-6, "F") == "4.7 µF"

    def test_a_value_negligible_against_its_scale_is_zero(self):
        # 60 mA decayed for 260 time constants: 60 mA * e^-260 = 7.3e-115 A, rounding left over.
        tiny = 0.06 * np.exp(-260.0)
        assert format_value(tiny, "A", scale=0.06) == "0 A"
        assert format_value(-tiny, "A", scale=0.06) == "0 A"
        # At and above 1e-12 of the scale a value is a reading and keeps its prefix.
        assert format_value(1e-12 * 0.06, "A", scale=0.06) == "60 fA"
        assert format_value(3e-6, "V", scale=5.0) == "3 µV"
        assert format_value(0.5, "V", scale=float("inf")) == "500 mV"


# -- every public reader answers with an InputError ---------------------------------------
# Each reproducer raised a TypeError, AttributeError or OverflowError (a traceback) before;
# each must now be an InputError whose message names the field, shows the value (shortened
# when long) and says what is allowed.
def _reproducers():
    import numpy as np

    import firstorder as fo
    from firstorder.settling.table import sample_delays

    def response():
        return fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive.steps([(0, 1.0)], end="5m"))

    huge = 10**400
    short = r"1000000000000000000000000…0000000000 \(401 characters\)"
    return [
        ("Drive(0, ...)", lambda: fo.Drive(0, 1, vin=[1]), r"^drive\.times: 0 is not a list; give a 1-D list"),
        ("Drive(None, ...)", lambda: fo.Drive(None, 1, vin=[1]), r"^drive\.times: None is not a list"),
        ("level column None", lambda: fo.Drive([0], 1, vin=None), r"^drive\.vin: None is not a list; give .* levels"),
        ("Drive.steps([0, 1])", lambda: fo.Drive.steps([0, 1], end=2), r"^steps\[0\]: expected a \(time, level\) pair, got 0"),
        ("Drive.steps(None)", lambda: fo.Drive.steps(None, end=2), r"^steps: None is not a list of \(time, level\) pairs"),
        ("respond(None)", lambda: fo.Fixture.rc(r="1k", c="1u").respond(None), r"^drive: None is not a Drive; build one"),
        ("respond(dict)", lambda: fo.Fixture.rc(r="1k", c="1u").respond({"vin": [1]}), r"^drive: \{'vin': \[1\]\} is not a Drive"),
        ("respond(None, drive)", lambda: fo.respond(None, fo.Drive([0], 1, vin=[1])), r"^fixture: None is not a Fixture"),
        ("total(dict)", lambda: response().total({1: 2}), r"^t: \{1: 2\} is not a number \(use a float"),
        ("total(complex)", lambda: response().total(1e-3 + 0j), r"^t: \(0\.001\+0j\) is not a number"),
        ("total(None)", lambda: response().total(None), r"^t: None is not a number"),
        ("strings in total's times", lambda: response().total(["1m", "x"]), r"^t\[1\]: 'x' is not a number"),
        ("strings in a numpy time array", lambda: response().total(np.array(["1m", "x"])), r"^t\[1\]: 'x' is not a number"),
        ("strings in drive times", lambda: fo.Drive(np.array(["0", "x"]), 1, vin=[0, 1]), r"^drive\.times\[1\]: 'x' is not"),
        ("Tolerance.from_dict(None)", lambda: fo.Tolerance.from_dict(None), r"^tolerance: None is not a mapping"),
        ("read_trace(None)", lambda: fo.read_trace(None), r"^path: None is not a file path"),
        ("huge part value", lambda: fo.Fixture.rc(r=huge, c="1u"), rf"^r \(value\): {short} is too large for a number"),
        ("huge level", lambda: fo.Drive([0], 1, vin=[huge]), rf"^drive\.vin\[0\]: {short} is too large"),
        ("huge constant level", lambda: fo.Drive([0], 1, vin=huge), rf"^drive\.vin\[0\]: {short} is too large"),
        ("huge time", lambda: fo.Drive([0, huge], huge, vin=[0, 1]), rf"^drive\.times\[1\]: {short} is too large"),
        ("huge end", lambda: fo.Drive([0], huge, vin=[1]), rf"^drive\.end: {short} is too large"),
        ("huge start", lambda: fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0], 1, vin=[1]), initial=huge),
         rf"^initial: {short} is too large"),
        ("huge total time", lambda: response().total(huge), rf"^t: {short} is too large"),
        ("huge tolerance", lambda: fo.Tolerance.absolute(huge), rf"^tolerance\.value: {short} is too large"),
        ("huge sample delay", lambda: sample_delays([huge], np.array([1.0])), rf"^sample_delay\[0\]: {short} is too"),
        ("huge pulse count", lambda: fo.Drive.pulses(period=1, duty=0.5, high=1, count=huge),
         rf"^pulses\.count: {short} would make .* changes needing about .* GiB of memory; the budget is 2 GiB"),
        ("huge trace value", lambda: fo.Trace.from_arrays([0, 1], [0, huge]), rf"^trace\.values\[1\]: {short} is too"),
    ]


@pytest.mark.parametrize(("call", "match"), [pytest.param(c, m, id=i) for i, c, m in _reproducers()])
def test_every_reproducer_is_an_input_error_naming_field_value_and_rule(call, match):
    with pytest.raises(InputError, match=match):
        call()


@pytest.mark.parametrize("where", ["drive level", "drive time", "tolerance", "percent", "sample delay", "part"])
def test_comma_refused_wherever_a_number_is_read(where):
    import numpy as np

    import firstorder as fo
    from firstorder.settling.table import sample_delays
    from firstorder.settling.tolerance import parse_tolerance

    calls = {
        "drive level": lambda: fo.Drive([0], 1, vin=["1,5"]),
        "drive time": lambda: fo.Drive([0, "0,5"], 1, vin=[0, 1]),
        "tolerance": lambda: fo.Tolerance.absolute("1,5m"),
        "percent": lambda: parse_tolerance("1,5 %"),
        "sample delay": lambda: sample_delays("0,5m", np.array([1e-3])),
        "part": lambda: fo.Fixture.rc(r="4,7k", c="1u"),
    }
    with pytest.raises(InputError, match="has a comma; a comma is never a decimal or thousands mark"):
        calls[where]()


def test_infinity_with_a_unit_is_still_infinity():
    assert parse_value("inf Ω", field="r_off", unit="Ω", allow_infinite=True) == math.inf
    with pytest.raises(InputError, match=r"^r: 'inf Ω' is not allowed; expected a finite number"):
        parse_value("inf Ω", field="r", unit="Ω")


class TestTimedeltaEverywhere:
    # numpy timedelta64 counts were read as seconds (1 ms as 1 s, 1 ns as 1 s): each reader of
    # times converts them exactly (the correctly rounded float of count/1000, count/1e9).
    def test_response_times(self):
        import numpy as np

        import firstorder as fo

        response = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive.steps([(0, 1.0)], end="5m"))
        grid = np.array([[0, 1], [2, 3]], dtype="timedelta64[ms]")
        expected = response.total(np.array([[0.0, 1 / 1000], [2 / 1000, 3 / 1000]]))
        assert np.array_equal(response.total(grid), expected)

    def test_sample_delays(self):
        import numpy as np

        from firstorder.settling.table import sample_delays

        delays = sample_delays(np.array([1, 250], dtype="timedelta64[ns]"), np.array([1e-3, 1e-3]))
        assert delays.tolist() == [1 / 10**9, 250 / 10**9]

    def test_sample_delays_of_two_dimensions_name_the_shape(self):
        import numpy as np

        from firstorder.settling.table import sample_delays

        with pytest.raises(InputError, match=r"^sample_delay: got a 2-D array of shape \(1, 2\)"):
            sample_delays(np.zeros((1, 2)), np.array([1e-3, 1e-3]))

"""Tests for firstorder.drive."""

import numpy as np
import pytest

import firstorder as fo
from firstorder.errors import InputError


class TestDrive:
    def test_contract_example(self):
        drive = fo.Drive([0, "1m", "3m"], end="6m", vdac=[0, 2.5, -1.2], k1=[1, 1, 0])
        np.testing.assert_array_equal(drive.times, [0.0, 1e-3, 3e-3])
        assert drive.end == 6e-3
        np.testing.assert_array_equal(drive.levels("k1"), [1.0, 1.0, 0.0])
        np.testing.assert_allclose(drive.durations, [1e-3, 2e-3, 3e-3])

    def test_int_and_float_agree(self):
        assert fo.Drive([0, 1, 2], end=3, vin=[0, 1, 2]) == fo.Drive([0.0, 1.0, 2.0], end=3.0, vin=[0.0, 1.0, 2.0])

    def test_numpy_fast_path_matches_list(self):
        times = np.arange(5) * 1e-3
        assert fo.Drive(times, end=1, vin=np.ones(5)) == fo.Drive(times.tolist(), end=1, vin=[1] * 5)

    def test_arrays_are_read_only_copies(self):
        times = np.arange(3.0)
        drive = fo.Drive(times, end=5, vin=np.zeros(3))
        times[0] = -1
        assert drive.times[0] == 0
        with pytest.raises(ValueError):
            drive.times[0] = 1

    def test_constant_column(self):
        drive = fo.Drive([0, 1], end=2, vin=[0, 1], k1=True)
        np.testing.assert_array_equal(drive.levels("k1"), [1.0, 1.0])

    def test_segment_at(self):
        drive = fo.Drive([0, 1, 2], end=3, vin=[0, 1, 2])
        assert [drive.segment_at(t) for t in (0, 0.99, 1, 2.5, 3)] == [0, 0, 1, 2, 2]


class TestGenerators:
    def test_steps(self):
        drive = fo.Drive.steps([(0, 0.0), ("1m", 2.5)], end="4m")
        assert drive.names == ("vin",)
        np.testing.assert_array_equal(drive.levels("vin"), [0.0, 2.5])

    def test_pulses(self):
        drive = fo.Drive.pulses(period="2m", duty=0.25, high=5, low=-1, count=3)
        np.testing.assert_allclose(drive.times, [0, 0.5e-3, 2e-3, 2.5e-3, 4e-3, 4.5e-3])
        np.testing.assert_array_equal(drive.levels("vin"), [5, -1] * 3)
        assert drive.end == pytest.approx(6e-3)

    def test_staircase(self):
        drive = fo.Drive.staircase([0, 1, 2, 3], dwell="5u", name="vdac")
        np.testing.assert_allclose(drive.times, [0, 5e-6, 10e-6, 15e-6])
        assert drive.end == pytest.approx(20e-6)

    def test_million_changes_fast_path(self):
        n = 1_000_000
        drive = fo.Drive(np.arange(n, dtype=float), end=float(n), vin=np.zeros(n))
        assert len(drive) == n


class TestCsv:
    def test_round_trip_exact(self, tmp_path):
        drive = fo.Drive([0, 1e-3 / 3, 0.1], end=0.25, vdac=[0.1, -2 / 3, 1e-9], k1=[1, 0, 1])
        path = tmp_path / "d.csv"
        drive.to_csv(path)
        assert fo.Drive.from_csv(path) == drive

    def test_bad_cell_names_line_and_column(self, tmp_path):
        path = tmp_path / "d.csv"
        path.write_text("# firstorder drive v1\n# end,1\ntime,vin\n0,1\n0.5,abc\n")
        with pytest.raises(InputError, match=r"line 5, column 'vin'"):
            fo.Drive.from_csv(path)


BAD_DRIVES = [
    (lambda: fo.Drive([], end=1, vin=[]), "drive.times"),
    (lambda: fo.Drive([0, 1, 1], end=2, vin=[0, 1, 2]), r"drive.times\[2\]"),
    (lambda: fo.Drive([0, 2, 1], end=3, vin=[0, 1, 2]), r"drive.times\[2\]"),
    (lambda: fo.Drive([0, 1], end=1, vin=[0, 1]), "drive.end"),
    (lambda: fo.Drive([0, 1], end=0.5, vin=[0, 1]), "drive.end"),
    (lambda: fo.Drive([0, float("nan")], end=1, vin=[0, 1]), r"drive.times\[1\]"),
    (lambda: fo.Drive([0, 1], end=float("inf"), vin=[0, 1]), "drive.end"),
    (lambda: fo.Drive([0, 1], end=2, vin=[0, float("inf")]), r"drive.vin\[1\]"),
    (lambda: fo.Drive([0, 1], end=2, vin=[0]), "drive.vin"),
    (lambda: fo.Drive([0, 1], end=2), "no columns"),
    (lambda: fo.Drive([0, "1x"], end=2, vin=[0, 1]), r"drive.times\[1\]"),
    (lambda: fo.Drive([0, 1], end=2, vin=[0, "lots"]), r"drive.vin\[1\]"),
    (lambda: fo.Drive.pulses(period=0, duty=0.5, high=1), "pulses.period"),
    (lambda: fo.Drive.pulses(period=1, duty=1.5, high=1), "pulses.duty"),
    (lambda: fo.Drive.pulses(period=1, duty=0.5, high=1, count=0), "pulses.count"),
    (lambda: fo.Drive.staircase([], dwell=1), "staircase.levels"),
    (lambda: fo.Drive.staircase([1], dwell=-1), "staircase.dwell"),
    (lambda: fo.Drive.steps([], end=1), "steps"),
]


@pytest.mark.parametrize(("build", "field"), BAD_DRIVES)
def test_bad_drive_names_field(build, field):
    with pytest.raises(ValueError, match=field):
        build()


@pytest.mark.parametrize(
    "build, text",
    [
        (lambda: fo.Drive([0, 1, 1], end=2, vin=[0, 1, 2]), "drive.times[2]: 1.0 does not come after drive.times[1] = 1.0;"),
        (lambda: fo.Drive([0, 1], end=2, vin=[0, float("nan")]), "drive.vin[1]: nan is not allowed"),
        (lambda: fo.Drive([0, 1], end=1, vin=[0, 1]), "must be later than the last change (1.0 s)"),
        (lambda: fo.Drive([0, 1], end=2, vin=[0, 1]).segment_at(5), "outside the drive [0.0, 2.0] s"),
    ],
)
def test_messages_show_plain_numbers(build, text):
    with pytest.raises(fo.InputError) as caught:
        build()
    assert text in str(caught.value) and "np.float64" not in str(caught.value)


class TestNumbersRead:
    @pytest.mark.parametrize("text", ["1,5", "0,5m"])
    def test_comma_in_a_level_or_time_is_refused(self, text):
        with pytest.raises(InputError, match=r"^drive\.vin\[1\]: .* has a comma"):
            fo.Drive([0, 1], end=2, vin=[0, text])
        with pytest.raises(InputError, match=r"^drive\.times\[1\]: .* has a comma"):
            fo.Drive([0, text], end=2, vin=[0, 1])

    def test_timedelta_times_converted_exactly_to_seconds(self):
        drive = fo.Drive(np.array([0, 5, 1500], dtype="timedelta64[ms]"), end=np.timedelta64(2, "s"), vin=[0, 1, 0])
        # 5 ms and 1.5 s as the correctly rounded floats of the rationals 5/1000 and 1500/1000.
        assert drive.times.tolist() == [0.0, 5 / 1000, 1.5]
        assert drive.end == 2.0

    @pytest.mark.parametrize("field", ["times", "vin"])
    def test_two_d_arrays_are_refused_with_their_shape(self, field):
        grid = np.array([[0.0, 1.0], [2.0, 3.0]])
        kwargs = {"times": [0, 1, 2, 3], "vin": [0, 1, 0, 1]}
        kwargs[field] = grid
        with pytest.raises(InputError, match=rf"^drive\.{field}: a 2-D array of shape \(2, 2\)"):
            fo.Drive(kwargs.pop("times"), 5, **kwargs)

    def test_huge_integer_level_refused(self):
        with pytest.raises(InputError, match=r"^drive\.vin\[0\]: 1000000000000000000000000…0000000000 \(401 characters\) is too large"):
            fo.Drive([0], end=1, vin=[10**400])

    def test_switch_columns_still_take_booleans(self):
        assert fo.Drive([0, 1], end=2, k1=[True, False]).levels("k1").tolist() == [1.0, 0.0]


class TestColumnNames:
    @pytest.mark.parametrize("name", ["end", "times"])
    def test_a_column_named_like_an_argument(self, name):
        drive = fo.Drive([0, 1], 2, **{name: [0.0, 3.0]})
        assert drive.levels(name).tolist() == [0.0, 3.0] and drive.end == 2.0
        assert fo.Drive.steps([(0, 1.0)], end=1, name=name).levels(name).tolist() == [1.0]

    def test_keywords_still_name_times_and_end(self):
        assert fo.Drive(times=[0], end=1, vin=[1]).end == 1.0

    def test_csv_with_a_repeated_column_is_refused(self):
        text = "# firstorder drive v1\n# end,2.0\ntime,vin,vin\n0.0,1.0,2.0\n"
        with pytest.raises(InputError, match="column 'vin' appears more than once"):
            fo.Drive.from_csv(text)

    def test_csv_with_a_byte_order_mark(self, tmp_path):
        path = tmp_path / "d.csv"
        path.write_text(fo.Drive([0], end=1, vin=[1]).to_csv(), encoding="utf-8-sig")
        assert fo.Drive.from_csv(path) == fo.Drive([0], end=1, vin=[1])


class TestMemoryBudget:
    def test_pulse_count_over_the_budget_refused_up_front(self):
        from firstorder.drive import MEMORY_BUDGET

        assert MEMORY_BUDGET == 2 * 1024**3
        with pytest.raises(InputError, match=r"^pulses\.count: 1000000000 would make 2,000,000,000 changes needing "
                                             r"about 59\.6 GiB of memory; the budget is 2 GiB"):
            fo.Drive.pulses(period=1, duty=0.5, high=1, count=10**9)

    def test_staircase_over_a_huge_range_refused(self):
        with pytest.raises(InputError, match=r"^staircase\.levels: range\(0, 1000000000\) would make"):
            fo.Drive.staircase(range(10**9), dwell=1)


class TestBooleansAreNotNumbers:
    @pytest.mark.parametrize("call", [
        lambda: fo.Drive([0, True], 2, vin=[0, 1]),
        lambda: fo.Drive([0], True, vin=[1]),
        lambda: fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0], 1, vin=[1]), initial=True),
        lambda: fo.Tolerance.absolute(True),
        lambda: fo.Drive.pulses(period=True, duty=0.5, high=1),
    ], ids=["time", "end", "start", "tolerance", "period"])
    def test_true_is_refused_where_a_number_is_read(self, call):
        with pytest.raises(InputError, match="True is not a number; write 1 or 0"):
            call()


class TestShortAndLongChecksAgree:
    """Short float arrays are checked as Python floats, longer ones by numpy: the same
    refusals either side of the boundary, at the last position too."""

    @pytest.mark.parametrize("n", [2, 63, 64, 65, 200])
    @pytest.mark.parametrize("bad, message", [(np.nan, "is not allowed"), (np.inf, "is not allowed"),
                                              (-np.inf, "is not allowed"), ("repeat", "does not come after")])
    def test_the_last_time_refused(self, n, bad, message):
        times = np.arange(n, dtype=float)
        times[-1] = times[-2] if bad == "repeat" else bad
        with pytest.raises(InputError, match=rf"drive\.times\[{n - 1}\]: .*{message}"):
            fo.Drive(times, n + 1.0, vin=np.zeros(n))

    @pytest.mark.parametrize("n", [63, 64, 65])
    def test_a_sum_that_overflows_is_not_a_bad_value(self, n):
        # Finite values whose float sum is inf (the cheap check's false alarm) are accepted.
        levels = np.full(n, 1.5e308)
        drive = fo.Drive(np.arange(n, dtype=float), float(n), vin=levels)
        assert drive.columns["vin"][-1] == 1.5e308

"""The drive as table text: parsing, round trips, row operations, generated drives and drags."""

from __future__ import annotations

import numpy as np
import pytest

import firstorder as fo
from firstorder.widgets._drive_table import DriveText, parse_switch


class TestDriveText:
    def test_round_trip_and_partial_parse(self):
        drive = fo.Drive([0, "1m"], end="2m", vin=[0, 2.5])
        table = DriveText.from_drive(drive, ("vin",), frozenset(), {"vin": "V"})
        assert table.to_drive() == drive
        edited = table.with_text({"vin": ["0", "2.6"]})
        assert edited.to_drive().levels("vin")[1] == 2.6

    def test_parse_switch(self):
        assert parse_switch("on", field="k") == 1.0
        with pytest.raises(ValueError, match="k: 'maybe'"):
            parse_switch("maybe", field="k")


def two_column_table() -> DriveText:
    drive = fo.Drive([0, "1m", "2m"], end="3m", vin=[0.0, 2.0, 1.0], k1=[1, 0, 1])
    return DriveText.from_drive(drive, ("vin", "k1"), frozenset({"k1"}), {"vin": "V"})


class TestMerged:
    def test_other_columns_keep_their_level_at_each_new_instant(self):
        made = fo.Drive.staircase([5, 6, 7, 8], dwell="0.75m", name="vin")  # changes at 0, 0.75, 1.5, 2.25 ms
        table = two_column_table().merged(made)
        merged = table.to_drive()
        np.testing.assert_array_equal(merged.levels("vin"), [5, 6, 7, 8])
        # k1 was closed on [0, 1m), open on [1m, 2m), closed from 2m: read at each new instant.
        np.testing.assert_array_equal(merged.levels("k1"), [1, 1, 0, 1])
        assert table.cells["k1"].tolist() == ["closed", "closed", "open", "closed"]  # the text follows
        assert merged.times.tolist() == made.times.tolist() and merged.end == made.end


class TestDragged:
    def test_sideways_moves_the_instant(self):
        table = two_column_table()
        times = np.array([0.0, 1.5e-3, 2e-3])
        dragged = table.dragged("vin", times, np.array([0.0, 2.0, 1.0]), time_span=3e-3)
        np.testing.assert_array_equal(dragged.to_drive().times, times)
        np.testing.assert_array_equal(dragged.to_drive().levels("vin"), [0.0, 2.0, 1.0])

    def test_a_level_drag_with_a_small_slip_moves_only_the_level(self):
        table = two_column_table()
        # 1 µs of 3 ms sideways is far less than 0.5 V of a 2 V range up.
        dragged = table.dragged("vin", np.array([0.0, 1e-3 + 1e-6, 2e-3]), np.array([0.0, 2.5, 1.0]), time_span=3e-3)
        np.testing.assert_array_equal(dragged.to_drive().times, [0.0, 1e-3, 2e-3])
        np.testing.assert_array_equal(dragged.to_drive().levels("vin"), [0.0, 2.5, 1.0])

    def test_past_the_next_change_is_refused_and_a_switch_is_no_drag_column(self):
        table = two_column_table()
        with pytest.raises(ValueError, match="time order"):
            table.dragged("vin", np.array([0.0, 2.5e-3, 2e-3]), np.array([0.0, 2.0, 1.0]), time_span=3e-3)
        with pytest.raises(ValueError, match="not a source"):
            table.dragged("k1", np.zeros(3), np.zeros(3), time_span=3e-3)

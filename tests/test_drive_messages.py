"""Drive error messages show plain numbers (numpy 2 prints scalars as np.float64(...))."""

from __future__ import annotations

import pytest

import firstorder as fo


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

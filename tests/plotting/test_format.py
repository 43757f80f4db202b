"""Engineering notation for many numbers: the text reads back through the units parser."""

from __future__ import annotations

import numpy as np

from firstorder.plotting.format import format_many
from firstorder.units import parse_value


class TestFormatMany:
    def test_reads_back(self):
        values = np.array([0.0, 1e-12, 4.7e3, -2.5e-6, 999.99999999, 0.1])
        texts = format_many(values, "s")
        back = [parse_value(t, field="t", unit="s") for t in texts]
        np.testing.assert_allclose(back, values, rtol=1e-6)

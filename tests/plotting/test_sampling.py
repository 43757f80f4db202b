"""Screen-aware sampling: envelopes checked against brute-force dense sampling of the response,
and the measured-sample envelope against a plain loop over the pixel columns."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

import firstorder as fo
from firstorder.plotting.sampling import envelope, plan_samples, point_envelope


class TestSampling:
    def test_envelope_is_exact_against_dense_sampling(self):
        rng = np.random.default_rng(7)
        durations = rng.uniform(1e-6, 3e-5, 3000)
        times = np.concatenate([[0.0], np.cumsum(durations)[:-1]])
        drive = fo.Drive(times, float(np.sum(durations)), vin=rng.uniform(-1, 1, 3000))
        response = fo.Fixture.rc(r="1k", c="5n").respond(drive)
        plan = plan_samples(response.starts, drive.end, response.tau, 0.0, drive.end, 300)
        assert plan.mode == "envelope"
        low, high = envelope(plan, response.total(plan.times))
        dense = np.linspace(0.0, drive.end, 1_000_001)
        values = response.total(dense)
        bins = np.clip(np.searchsorted(plan.edges, dense, side="right") - 1, 0, 299)
        dense_low = np.full(300, np.inf)
        dense_high = np.full(300, -np.inf)
        np.minimum.at(dense_low, bins, values)
        np.maximum.at(dense_high, bins, values)
        assert (low <= dense_low + 1e-12).all() and (high >= dense_high - 1e-12).all()
        # Dense sampling with 3 points per microsecond approaches the exact extremes closely.
        assert np.max(dense_low - low) < 0.05 and np.max(high - dense_high) < 0.05

    def test_line_plan_holds_changes_and_left_limits(self):
        starts = np.array([0.0, 1.0, 2.0])
        plan = plan_samples(starts, 3.0, np.array([0.1, np.inf, 0.5]), 0.0, 3.0, 500)
        assert plan.mode == "line"
        assert {0.0, 1.0, 2.0, 3.0 - 2 ** -51 * 1.5} & set(plan.times.tolist()) >= {0.0, 1.0, 2.0}
        assert np.nextafter(1.0, 0) in plan.times and np.nextafter(3.0, 0) in plan.times
        assert (np.diff(plan.times) > 0).all()


class TestEnvelopeProperty:
    @given(segments=st.integers(2, 400), pixels=st.integers(16, 120), seed=st.integers(0, 2**31 - 1))
    @settings(max_examples=25)
    def test_every_value_lies_within_its_column(self, segments, pixels, seed):
        # Containment: at any instant the curve lies within its pixel column's [min, max].
        rng = np.random.default_rng(seed)
        durations = rng.uniform(1e-7, 1e-4, segments)
        times = np.concatenate([[0.0], np.cumsum(durations)[:-1]])
        drive = fo.Drive(times, float(durations.sum()), vin=rng.uniform(-5, 5, segments))
        response = fo.Fixture.rc(r="1k", c=float(rng.uniform(1e-9, 1e-7))).respond(drive, initial=float(rng.uniform(-5, 5)))
        plan = plan_samples(response.starts, drive.end, response.tau, 0.0, drive.end, pixels)
        if plan.mode != "envelope":
            return
        low, high = envelope(plan, response.total(plan.times))
        probes = np.sort(rng.uniform(0.0, drive.end, 500))
        values = response.total(probes)
        column = np.clip(np.searchsorted(plan.edges, probes, side="right") - 1, 0, pixels - 1)
        slack = 1e-12 * 5
        assert (values >= low[column] - slack).all() and (values <= high[column] + slack).all()


class TestPointEnvelope:
    def test_each_column_holds_the_extremes_of_its_samples(self):
        rng = np.random.default_rng(11)
        times = np.sort(rng.uniform(2.0, 7.0, 5000))
        values = rng.normal(0.0, 1.0, times.size)
        centres, low, high = point_envelope(times, values, 2.0, 7.0, 40)
        # The same by a loop over the columns: edges at 2 + k/8, the last column closed on the right.
        width = 5.0 / 40
        expected = []
        for k in range(40):
            inside = (times >= 2.0 + k * width) & ((times < 2.0 + (k + 1) * width) if k < 39 else (times <= 7.0))
            if inside.any():
                expected.append((2.0 + (k + 0.5) * width, values[inside].min(), values[inside].max()))
        np.testing.assert_allclose(centres, [e[0] for e in expected], rtol=1e-12)
        np.testing.assert_array_equal(low, [e[1] for e in expected])
        np.testing.assert_array_equal(high, [e[2] for e in expected])

    def test_empty_columns_are_left_out(self):
        centres, low, high = point_envelope(np.array([0.05, 0.95]), np.array([1.0, 2.0]), 0.0, 1.0, 10)
        np.testing.assert_allclose(centres, [0.05, 0.95])
        assert low.tolist() == [1.0, 2.0] and high.tolist() == [1.0, 2.0]

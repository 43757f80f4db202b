"""Tests for firstorder.traces.statistics: the noise estimate against numpy's sample deviation."""

from __future__ import annotations

import numpy as np
import pytest

from firstorder.traces.statistics import noise as sample_noise


# ---------------------------------------------------------------------------------------
class TestNoise:
    def test_matches_the_sample_deviation_of_pure_noise(self):
        # Reference: numpy's sample standard deviation of the same white noise.
        noise = np.random.default_rng(11).normal(0.0, 2.5e-3, 50_000)
        assert sample_noise(noise) == pytest.approx(np.std(noise, ddof=1), rel=0.02)

    def test_ignores_level_slope_and_a_steep_start(self):
        # A fast exponential sampled coarsely curves strongly over its first samples;
        # the estimate must still be the noise alone (numpy's deviation of the noise added).
        x = np.arange(2000.0)
        noise = np.random.default_rng(12).normal(0.0, 1e-3, x.size)
        signal = 5.0 + 1e-4 * x - 4.0 * np.exp(-x / 3.0)
        assert sample_noise(signal + noise) == pytest.approx(np.std(noise, ddof=1), rel=0.05)

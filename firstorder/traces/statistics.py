"""Statistics of one fitted segment: noise from the samples alone, and the tests of a fit.

Nothing here fits a model: :func:`noise` estimates the sample-to-sample noise
from second differences, :func:`residual_test` asks whether a fit's residuals
are as small as that noise allows, :func:`f_test` whether a larger nested model
fits significantly better; :func:`linear_fit` is least squares for a fixed basis.
"""

from __future__ import annotations

import math
from statistics import NormalDist

import numpy as np

__all__ = ["RESIDUAL_LEVEL", "SECOND_TAU_LEVEL", "STEP_LEVEL", "f_test", "linear_fit", "noise", "residual_test"]

#: Nominal chance of calling a true single exponential "not first order" by the residual
#: test.  The test uses a normal approximation whose right tail is a little light: in
#: simulations of white noise (20 to 1000 points) 1.4 % to 2.2 % of pure exponentials fail.
RESIDUAL_LEVEL = 0.01
#: Chance of reporting a second time constant where there is none (F-test level; kept
#: small because the search over the slower tau makes large F values commoner than
#: the F distribution says when there is no second exponential).
SECOND_TAU_LEVEL = 0.001
#: Level of the F-test "an exponential fits better than a constant" (else no step).
STEP_LEVEL = 0.001
#: Robust trimming of second differences for the noise estimate (in robust sigmas):
#: wide enough that Gaussian noise loses almost nothing (6e-7 of its samples).
_TRIM = 5.0
#: Second differences of white noise, e[i+1] - 2 e[i] + e[i-1], have variance 6 sigma^2
#: (1 + 4 + 1), and covariances -4 sigma^2 and sigma^2 at lags 1 and 2.
_SECOND_DIFFERENCE_VARIANCE = 6.0
#: Variance of log(residual variance / noise estimate), times n, under white noise:
#: 2 (sum of squared residuals) + 140/36 (sum of squared second differences: variance
#: 2 n (36 + 2*16 + 2*1) sigma^4 over mean 6 n sigma^2, squared) - 2 * 2 (their
#: covariance, 2 n (4 + 1 + 1) sigma^4 over n sigma^2 * 6 n sigma^2) = 1.889.
_LOG_RATIO_VARIANCE = 2.0 + 140.0 / 36.0 - 4.0
#: Mean of that log ratio, times n: each log of a mean square sits below 0 by half
#: its variance, -2/2 and -(140/36)/2.
_LOG_RATIO_BIAS = (140.0 / 36.0 - 2.0) / 2.0


def noise(values: np.ndarray) -> float:
    """Sample-to-sample noise (standard deviation), estimated without any model.

    Second differences ``y[i+1] - 2 y[i] + y[i-1]`` cancel any level and any
    slope, and leave curvature that is small wherever the signal is sampled
    finely; of white noise they keep ``6 sigma^2`` of variance.  Differences
    beyond five robust standard deviations (the median absolute deviation times
    1.4826, for Gaussian noise) are dropped, which removes the few samples where
    a fast step still curves strongly; the mean square of the rest, corrected for
    the trimmed Gaussian tails, gives sigma.  Noise that is correlated from
    sample to sample (a capture filtered to far below its sample rate) is
    underestimated: decimate such a capture first.

    Examples
    --------
    >>> round(noise(np.random.default_rng(1).normal(0.0, 0.5, 20000)), 2)
    0.5
    """
    second = values[2:] - 2.0 * values[1:-1] + values[:-2]
    if second.size < 3:
        return math.nan
    centre = float(np.median(second))
    robust = 1.4826 * float(np.median(np.abs(second - centre)))
    if robust == 0.0:
        return float(np.sqrt(np.mean(second**2) / _SECOND_DIFFERENCE_VARIANCE))
    kept = second[np.abs(second - centre) <= _TRIM * robust]
    # E[x^2 | |x| < c s] = s^2 (1 - 2 c phi(c) / (2 Phi(c) - 1)) for Gaussian x.
    c = _TRIM
    inside = math.erf(c / math.sqrt(2.0))
    shrink = 1.0 - 2.0 * c * math.exp(-c * c / 2.0) / math.sqrt(2.0 * math.pi) / inside
    return float(np.sqrt(np.mean(kept**2) / shrink / _SECOND_DIFFERENCE_VARIANCE))


def residual_test(residuals: np.ndarray, parameters: int, noise: float) -> bool:
    """True when the residuals are consistent with the noise.

    The statistic is ``log(s^2 / noise^2)`` with ``s^2 = sum(r^2) / (n - p)``.
    For white Gaussian noise it is close to normal with mean 0 and variance
    ``1.889 / n``: the residual variance and the second-difference noise estimate
    come from the same noise and are correlated (see ``_LOG_RATIO_VARIANCE``).
    A model that misses part of the signal leaves smooth residuals, which raise
    ``s^2`` but hardly the second differences; the test is one-sided at
    ``RESIDUAL_LEVEL``.
    """
    n = residuals.size
    if not noise > 0.0:
        return bool(np.all(residuals == 0.0))
    variance = float(residuals @ residuals) / (n - parameters)
    if variance == 0.0:
        return True
    z = (math.log(variance / noise**2) - _LOG_RATIO_BIAS / n) / math.sqrt(_LOG_RATIO_VARIANCE / n)
    return bool(z <= NormalDist().inv_cdf(1.0 - RESIDUAL_LEVEL))


def f_test(ssr_small: float, ssr_large: float, extra: int, dof: int, level: float) -> bool:
    """True when the larger model (``extra`` more parameters) fits significantly better."""
    from scipy import stats

    if not (ssr_large > 0.0 and dof > 0):
        return ssr_small > ssr_large
    f_value = (ssr_small - ssr_large) / extra / (ssr_large / dof)
    return bool(f_value > stats.f.isf(level, extra, dof))


def linear_fit(basis: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares coefficients of `basis` (columns) for `y`, and the residuals ``y - basis @ c``."""
    coefficients = np.linalg.lstsq(basis, y, rcond=None)[0]
    return coefficients, y - basis @ coefficients

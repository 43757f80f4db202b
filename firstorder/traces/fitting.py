"""Fit every segment of a captured trace with a first-order step.

:func:`fit_trace` cuts a :class:`~firstorder.traces.trace.Trace` at the change
instants of the :class:`~firstorder.Drive` that produced it and fits every
segment with the first-order law

    y(t) = final + (start - final) * exp(-(t - t_k) / tau),

reporting the time constant and final value with standard errors, whether the
residuals are consistent with the noise, and a slower second time constant where
one is hiding in the tail (dielectric absorption in a capacitor, a second pole
in a buffer, leakage).  scipy is imported inside the functions that use it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any

import numpy as np

from .. import engine
from ..drive import Drive
from ..errors import InputError
from ..fixture import Fixture
from ..response import Response
from ..segments import Segments
from ..units import format_value, parse_value
from .result import TABLE_COLUMNS, TraceFit, check_probe
from .statistics import SECOND_TAU_LEVEL, STEP_LEVEL, f_test, linear_fit, noise, residual_test
from .trace import Trace

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["MIN_POINTS", "MIN_POINTS_SECOND", "fit_trace"]

#: Fewest points for a one-exponential fit (3 parameters, and some left to judge the fit).
MIN_POINTS = 8
#: Fewest points for the two-exponential check behind ``second_tau`` (5 parameters).
MIN_POINTS_SECOND = 20
#: Segments (from the first) over which ``offset="fit"`` fits the common delay.
_OFFSET_SEGMENTS = 12

def _tau_grid(low: float, high: float, count: int) -> np.ndarray:
    return np.exp(np.linspace(math.log(low), math.log(high), count))


def _best_tau_on_grid(x: np.ndarray, y: np.ndarray, taus: np.ndarray) -> tuple[float, float]:
    """The tau of a grid whose exponential, with the best level and amplitude, fits best,
    and that fit's sum of squared residuals.

    For fixed tau the model ``a + b exp(-x / tau)`` is linear in ``a, b``; the
    2x2 normal equations for every grid tau are solved at once.
    """
    decay = np.exp(-x[:, None] / taus[None, :])
    n = x.size
    s1, s2 = decay.sum(axis=0), (decay * decay).sum(axis=0)
    sy, sey = y.sum(), decay.T @ y
    det = n * s2 - s1 * s1
    with np.errstate(divide="ignore", invalid="ignore"):
        a = (s2 * sy - s1 * sey) / det
        b = (n * sey - s1 * sy) / det
        explained = a * sy + b * sey
    explained = np.where(np.isfinite(explained) & (det > 1e-12 * n * n), explained, -np.inf)
    best = int(np.argmax(explained))
    return float(taus[best]), max(float(y @ y - explained[best]), 0.0)


@dataclass(frozen=True)
class _SegmentResult:
    status: str
    points: int
    start_value: float = math.nan
    final: float = math.nan
    final_stderr: float = math.nan
    tau: float = math.nan
    tau_stderr: float = math.nan
    rms_residual: float = math.nan
    noise: float = math.nan
    first_order: bool = False
    second_tau: float = math.nan
    curve: np.ndarray | None = field(default=None, repr=False)

    @property
    def has_tau(self) -> bool:
        return self.status == "fitted"

    def scaled(self, scale: float) -> "_SegmentResult":
        """The result for values `scale` times those fitted (tau is unchanged)."""
        return replace(
            self, start_value=self.start_value * scale, final=self.final * scale,
            final_stderr=self.final_stderr * scale, rms_residual=self.rms_residual * scale,
            noise=self.noise * scale, curve=None if self.curve is None else self.curve * scale,
        )


def _scale_of(values: np.ndarray) -> float:
    """The power of two at or above the largest finite ``|values|`` (1 if there is none).

    Fits run on ``values / scale``: sums of squares of values near 1e-160 underflow
    to 0 and near 1e155 overflow, and a power of two scales every value exactly.
    """
    finite = np.abs(values[np.isfinite(values)])
    largest = float(finite.max()) if finite.size else 0.0
    return math.ldexp(1.0, math.frexp(largest)[1]) if largest > 0.0 else 1.0


def _fit_exponential(x: np.ndarray, y: np.ndarray, tau_guess: float):
    """Least squares of ``final + (start - final) exp(-x / tau)`` (scipy.optimize.least_squares).

    Parameters are ``start, final, log(tau)``; log keeps tau positive, and the
    covariance of tau follows exactly from the chain rule (tau * d log tau).
    Returns ``(start, final, tau, covariance in (start, final, tau), residuals)``.
    """
    from scipy.optimize import least_squares

    def model(p):
        return p[1] + (p[0] - p[1]) * np.exp(-x * math.exp(-p[2]))

    def residuals(p):
        return model(p) - y

    def jacobian(p):
        tau = math.exp(p[2])
        decay = np.exp(-x / tau)
        return np.column_stack([decay, 1.0 - decay, (p[0] - p[1]) * decay * (x / tau)])

    decay = np.exp(-x / tau_guess)
    (final0, amplitude0), _ = linear_fit(np.column_stack([np.ones_like(x), decay]), y)
    start = np.array([final0 + amplitude0, final0, math.log(tau_guess)])
    solution = least_squares(residuals, start, jac=jacobian, method="lm", xtol=1e-10, ftol=1e-10)
    p = solution.x
    tau = math.exp(p[2])
    jac = jacobian(p)
    jac[:, 2] /= tau  # d/d tau = (d/d log tau) / tau
    r = residuals(p)
    variance = float(r @ r) / (x.size - 3)
    covariance = variance * np.linalg.pinv(jac.T @ jac)
    return float(p[0]), float(p[1]), tau, covariance, r


def _two_taus(p: np.ndarray) -> tuple[float, float]:
    """``(tau1, tau2)`` from ``(log tau1, q)`` with ``tau2 = tau1 (1 + e^q)``: never swapped."""
    return math.exp(p[0]), math.exp(p[0] + float(np.logaddexp(0.0, p[1])))


def _two_exponential_ssr(x: np.ndarray, y: np.ndarray, tau: float, longest: float) -> tuple[float, float]:
    """Best ``level + a exp(-x/tau1) + b exp(-x/tau2)``, tau2 > tau1: ``(ssr, tau2)``.

    Variable projection: for given time constants the rest is linear, so only
    ``log tau1, log tau2`` are searched (scipy.optimize.least_squares), started
    from the single fit's tau and the best of a grid of slower ones.
    """
    from scipy.optimize import least_squares

    ones = np.ones_like(x)

    def projected(p):
        tau1, tau2 = _two_taus(p)
        basis = np.column_stack([ones, np.exp(-x / tau1), np.exp(-x / tau2)])
        return linear_fit(basis, y)[1]

    best, best_ssr = None, math.inf
    for ratio in _tau_grid(2.0, max(4.0, longest / tau), 6):
        p = np.array([math.log(tau), math.log(ratio - 1.0)])
        r = projected(p)
        ssr = float(r @ r)
        if ssr < best_ssr:
            best, best_ssr = p, ssr
    solution = least_squares(projected, best, method="lm", xtol=1e-8, ftol=1e-8, max_nfev=40)
    ssr = float(solution.fun @ solution.fun)
    tau2 = _two_taus(solution.x)[1]
    if not (math.isfinite(ssr) and math.isfinite(tau2)):
        return best_ssr, math.nan
    return ssr, tau2


def _fit_segment(x: np.ndarray, y: np.ndarray, duration: float, spacing: float) -> _SegmentResult:
    """Fit one segment; `x` is the time since the change (s).  Scale-free: the fit runs on
    the values divided by their scale (:func:`_scale_of`), and its levels are scaled back."""
    scale = _scale_of(y)
    return _fit_normalised(x, y / scale, duration, spacing).scaled(scale)


def _fit_normalised(x: np.ndarray, y: np.ndarray, duration: float, spacing: float) -> _SegmentResult:
    """Fit one segment whose values are at most 1 in size."""
    n = x.size
    if n < MIN_POINTS:
        return _SegmentResult(f"not fitted: too few points ({n}; at least {MIN_POINTS} needed)", n)
    sigma = noise(y)
    span = max(float(x[-1]), spacing)
    tau_guess, ssr_grid = _best_tau_on_grid(x, y, _tau_grid(spacing / 4.0, 20.0 * max(span, duration), 48))
    constant = y - y.mean()
    ssr_constant = float(constant @ constant)
    # The best exponential on the tau grid decides whether there is a step at all: without
    # one, tau is undefined and an iterative fit would wander along a flat valley.
    if not f_test(ssr_constant, ssr_grid, 2, n - 3, STEP_LEVEL):
        return _SegmentResult(
            "no step: a constant fits as well as an exponential, so tau cannot be measured", n,
            start_value=float(y.mean()), final=float(y.mean()), final_stderr=float(y.std(ddof=1) / math.sqrt(n)),
            rms_residual=float(np.sqrt(np.mean(constant**2))), noise=sigma,
            first_order=residual_test(constant, 1, sigma), curve=np.full(n, float(y.mean())),
        )
    start, final, tau, covariance, residuals = _fit_exponential(x, y, tau_guess)  # model - y
    ssr_one = float(residuals @ residuals)
    second_tau = math.nan
    if n >= MIN_POINTS_SECOND:
        ssr_two, tau_slow = _two_exponential_ssr(x, y, tau, 3.0 * span)
        if math.isfinite(tau_slow) and f_test(ssr_one, ssr_two, 2, n - 5, SECOND_TAU_LEVEL):
            second_tau = tau_slow
    stderr = np.sqrt(np.clip(np.diag(covariance), 0.0, None))
    return _SegmentResult(
        "fitted", n, start_value=start, final=final, final_stderr=float(stderr[1]), tau=tau,
        tau_stderr=float(stderr[2]), rms_residual=float(np.sqrt(np.mean(residuals**2))), noise=sigma,
        first_order=residual_test(residuals, 3, sigma) and math.isnan(second_tau), second_tau=second_tau,
        curve=y + residuals,
    )


def _segment_groups(drive: "Drive", fixture: "Fixture | None") -> tuple[list[str], np.ndarray]:
    """Configuration labels and, per segment, which one holds."""
    if fixture is None or not fixture.switches:
        return ["all segments"], np.zeros(len(drive), dtype=np.intp)
    segments = Segments.of_drive(fixture, drive)
    return [fixture.describe_states(c) for c in segments.configurations], segments.configuration_of


def _fit_segments(times: np.ndarray, values: np.ndarray, drive: "Drive", offset: float,
                  spacing: float) -> list[_SegmentResult]:
    starts = drive.times + offset
    ends = drive.ends + offset
    first = np.searchsorted(times, starts, side="left")
    last = np.searchsorted(times, ends, side="left")
    last[-1] = np.searchsorted(times, ends[-1], side="right")  # the last segment includes its end
    return [
        _fit_segment(times[i:j] - starts[k], values[i:j], float(ends[k] - starts[k]), spacing)
        for k, (i, j) in enumerate(zip(first.tolist(), last.tolist()))
    ]


def _pool(results: list[_SegmentResult], labels: list[str], inverse: np.ndarray) -> "pd.DataFrame":
    """Inverse-variance weighted tau per configuration, error scaled by the Birge ratio.

    Where segments disagree by more than their errors allow (Birge ratio
    ``sqrt(chi^2 / (m - 1)) > 1``), the pooled error is scaled up by that
    ratio, as particle-data compilations do (from memory).
    """
    import pandas as pd

    rows = []
    for c, label in enumerate(labels):
        members = [r for r, group in zip(results, inverse.tolist()) if group == c and r.has_tau and r.tau_stderr > 0]
        chosen = [r for r in members if r.first_order] or members
        if not chosen:
            rows.append((label, 0, math.nan, math.nan, math.nan))
            continue
        tau = np.array([r.tau for r in chosen])
        weight = 1.0 / np.array([r.tau_stderr for r in chosen]) ** 2
        mean = float(weight @ tau / weight.sum())
        stderr = float(1.0 / math.sqrt(weight.sum()))
        birge = math.sqrt(float(weight @ (tau - mean) ** 2) / (len(chosen) - 1)) if len(chosen) > 1 else math.nan
        if birge > 1.0:
            stderr *= birge
        rows.append((label, len(chosen), mean, stderr, birge))
    frame = pd.DataFrame(rows, columns=["configuration", "segments", "tau", "tau_stderr", "birge_ratio"])
    return frame.set_index("configuration")


def _model_parameters(results: list[_SegmentResult], pooled_tau: np.ndarray, inverse: np.ndarray,
                      ) -> tuple[np.ndarray, np.ndarray, float]:
    """Per-segment tau and final for a continuous model, and its starting state.

    Segments without a fitted tau take their configuration's pooled tau (a step
    too small to measure moves the state by little); segments without samples
    hold the state.
    """
    fallback = float(np.nanmean(pooled_tau)) if np.isfinite(pooled_tau).any() else math.inf
    taus, finals = [], []
    for r, group in zip(results, inverse.tolist()):
        if r.has_tau:
            taus.append(r.tau)
        elif math.isfinite(r.final):
            tau = float(pooled_tau[group])
            taus.append(tau if math.isfinite(tau) else fallback)
        else:
            taus.append(math.inf)
        finals.append(r.final if math.isfinite(r.final) else 0.0)
    known = [r.start_value for r in results if math.isfinite(r.start_value)]
    initial = known[0] if known else 0.0
    return np.array(taus), np.array(finals), initial


def _fit_offset(trace: Trace, drive: "Drive", taus: np.ndarray, finals: np.ndarray, initial: float,
                free_tau: np.ndarray, free_final: np.ndarray, skip: np.ndarray | None = None,
                guess: float | None = None) -> tuple[float, float]:
    """Fit one delay between drive and trace, with a continuous piecewise-exponential model.

    A single exponential's shape does not say when it began (shifted, it is the
    same curve scaled), so a delay shows only where one segment's curve hands
    over to the next: the model keeps the measured quantity continuous at every
    change (the state of a capacitor or inductor), as the engine does.  Its
    parameters are the delay, the starting state, and every segment's final
    value and log tau; scipy.optimize.least_squares fits them, from the best
    delay on a grid of sample periods within half the shortest segment, or from
    `guess`.  Only the first ``_OFFSET_SEGMENTS`` segments take part.  Segments in `skip` (those a single exponential does not describe)
    keep their parameters and lend no samples (placed with `guess`), so that a
    slow tail cannot pull the delay.  Returns ``(offset, standard error)``.
    """
    from scipy.optimize import least_squares

    spacing = trace.sample_period
    # One delay is common to all changes, so the first few segments fix it; the cost of
    # the fit grows with the square of the segments it spans.
    used = min(len(drive), _OFFSET_SEGMENTS)
    starts, durations = drive.times[:used], drive.durations[:used]
    taus, finals = taus[:used], finals[:used]
    free_tau, free_final = free_tau[:used], free_final[:used]
    inside = (trace.times >= starts[0]) & (trace.times <= starts[-1] + durations[-1])
    if skip is not None and skip[:used].any():
        skip = skip[:used]
        segment = np.searchsorted(starts + (guess or 0.0), trace.times, side="right") - 1
        inside &= ~skip[np.clip(segment, 0, used - 1)]
        free_tau, free_final = free_tau & ~skip, free_final & ~skip
    t, y = trace.times[inside], trace.values[inside]
    # Levels in units of the values' scale, as in _fit_segment: the delay does not depend on it.
    scale = _scale_of(y)
    y, initial, finals = y / scale, initial / scale, finals / scale
    reach = 0.5 * float(drive.durations.min())
    tau_index, final_index = np.flatnonzero(free_tau), np.flatnonzero(free_final)
    if tau_index.size == 0:
        raise InputError(
            f"offset: 'fit' needs a measurable first-order step among the first {used} segments; none was found"
        )

    def unpack(p):
        delay = p[0] * spacing
        tau = taus.copy()
        tau[tau_index] = np.exp(p[2:2 + tau_index.size])
        final = finals.copy()
        final[final_index] = p[2 + tau_index.size:]
        return delay, p[1], tau, final

    def model(p):
        delay, start, tau, final = unpack(p)
        with np.errstate(divide="ignore"):
            rate = np.where(np.isinf(tau), 0.0, 1.0 / tau)
        decay, growth = engine.decay_factors(durations, rate)
        held = rate == 0.0
        boundary = engine.affine_scan(decay, np.where(held, 0.0, growth * final), start)
        final = np.where(held, boundary[:-1], final)
        return engine.evaluate(t, starts + delay, rate, final, boundary[:-1])

    def residuals(p):
        return model(p) - y

    base = np.concatenate([[0.0, initial], np.log(taus[tau_index]), finals[final_index]])
    shifts = np.array([guess / spacing]) if guess is not None else np.arange(-math.floor(reach / spacing), math.floor(reach / spacing) + 1, dtype=float)
    if shifts.size > 801:
        shifts = np.linspace(shifts[0], shifts[-1], 801)
    costs = []
    for shift in shifts:
        trial = base.copy()
        trial[0] = shift
        r = residuals(trial)
        costs.append(float(r @ r))
    base[0] = shifts[int(np.argmin(costs))]
    solution = least_squares(residuals, base, method="lm", x_scale="jac", xtol=1e-10, ftol=1e-10)
    if abs(solution.x[0]) * spacing > reach:
        raise InputError(
            f"offset: the fitted delay {format_value(solution.x[0] * spacing, 's')} is beyond half the shortest "
            f"segment ({format_value(reach, 's')}); shift the trace's times first or give the offset"
        )
    jac = solution.jac
    dof = max(y.size - base.size, 1)
    variance = float(solution.fun @ solution.fun) / dof
    covariance = variance * np.linalg.pinv(jac.T @ jac)
    return float(solution.x[0] * spacing), float(math.sqrt(max(covariance[0, 0], 0.0)) * spacing)


def fit_trace(trace: Trace, drive: "Drive", fixture: "Fixture | None" = None, probe: str | None = None,
              offset: Any = "fixed") -> TraceFit:
    """Fit every segment of a captured trace with a first-order step.

    Segment ``k`` of `drive` (shifted by the offset) holds the samples with
    ``times[k] + offset <= t < times[k + 1] + offset``; they are fitted with
    ``final + (start - final) * exp(-(t - t_k) / tau)`` by least squares
    (scipy.optimize.least_squares, Levenberg-Marquardt), and standard errors
    come from the Jacobian at the solution scaled by the residual variance.

    Parameters
    ----------
    trace : Trace
        The capture (see :func:`read_trace`).
    drive : Drive
        The sequence that produced it, on its own clock.
    fixture : Fixture, optional
        Groups the segments by switch configuration for the pooled tau (without
        it every segment shares one), and is the default model for
        :meth:`TraceFit.compare`.
    probe : str, optional
        The fixture's probe the trace measures (None: its state).
    offset : "fixed", "fit" or float
        ``"fixed"``: the trace and the drive share one clock.  A number (s or
        engineering notation): the trace lags the drive by that much.
        ``"fit"``: fit one common delay too (a trigger delay); the measured
        quantity must then be continuous at the changes, as a capacitor's
        voltage or an inductor's current is (see :func:`_fit_offset`).

    Returns
    -------
    TraceFit

    See Also
    --------
    TraceFit.compare : hold the fit against a fixture's model.
    firstorder.response.Response.from_segments : the fitted model as a response.

    Notes
    -----
    ``noise`` is estimated from the samples alone, never from the fit: from
    second differences, which cancel the signal's level and slope (see
    :func:`_noise`).  ``first_order`` is False when the residuals are larger
    than that noise allows (a one-sided test at 1 %, see
    :func:`_residual_test`) or when a second exponential is found.
    ``second_tau``: the segment is also fitted with ``level + a exp(-x/tau1) +
    b exp(-x/tau2)``, ``tau2 > tau1``; the slower time constant is kept when the
    F-test of the two nested least-squares fits (2 extra parameters) is
    significant at 0.1 %.  A segment with fewer than ``MIN_POINTS`` samples, or
    whose step a constant fits as well (F-test at 0.1 %), has no tau; its
    ``status`` says why.  Both noise and residual tests assume noise that is
    uncorrelated from sample to sample.

    Examples
    --------
    >>> import numpy as np, firstorder as fo
    >>> drive = fo.Drive.steps([(0, 0.0), ("1m", 1.0)], end="6m")
    >>> model = fo.Fixture.rc(r="1k", c="1u").respond(drive)
    >>> t = np.arange(0, 6e-3, 5e-6)
    >>> noisy = model.total(t) + np.random.default_rng(7).normal(0, 1e-3, t.size)
    >>> fit = fo.fit_trace(fo.Trace.from_arrays(t, noisy, name="v_out", units="V"), drive)
    >>> round(fit.tau * 1e3, 2), bool(fit.table["first_order"].all())
    (1.0, True)
    """
    import pandas as pd

    if not isinstance(trace, Trace):
        raise InputError(f"trace: expected a Trace (see read_trace), got {type(trace).__name__}")
    if not isinstance(drive, Drive):
        raise InputError(f"drive: expected a Drive, got {type(drive).__name__}")
    if fixture is not None and not isinstance(fixture, Fixture):
        raise InputError(f"fixture: expected a Fixture or None, got {type(fixture).__name__}")
    probe = check_probe(probe, fixture, "probe")
    fit_delay = isinstance(offset, str) and offset.strip() == "fit"
    if isinstance(offset, str) and offset.strip() in ("fixed", "fit"):
        delay = 0.0
    else:
        if isinstance(offset, str) and offset.strip().isalpha():
            raise InputError(f"offset: {offset!r} is not allowed; use 'fixed', 'fit' or a time in seconds")
        delay = parse_value(offset, field="offset", unit="s")
    labels, inverse = _segment_groups(drive, fixture)
    spacing = trace.sample_period
    results = _fit_segments(trace.times, trace.values, drive, delay, spacing)
    pooled = _pool(results, labels, inverse)
    delay_stderr = 0.0
    if fit_delay:
        if not any(r.has_tau for r in results):
            raise InputError("offset: 'fit' needs at least one segment with a measurable step; none was fitted")
        if probe is not None:
            raise InputError(
                f"offset: 'fit' needs a quantity that is continuous at the changes, and probe {probe!r} may "
                f"jump; fit the fixture's state, or give the offset in seconds"
            )
        taus, finals, initial = _model_parameters(results, pooled["tau"].to_numpy(), inverse)
        free_tau = np.array([r.has_tau for r in results])
        free_final = np.array([math.isfinite(r.final) for r in results])
        delay, delay_stderr = _fit_offset(trace, drive, taus, finals, initial, free_tau, free_final)
        results = _fit_segments(trace.times, trace.values, drive, delay, spacing)
        pooled = _pool(results, labels, inverse)
        skip = np.array([r.has_tau and not r.first_order for r in results])
        first = slice(0, _OFFSET_SEGMENTS)
        if skip[first].any() and (free_tau & ~skip)[first].any():
            # Once more without the segments that hide a second exponential.
            taus, finals, initial = _model_parameters(results, pooled["tau"].to_numpy(), inverse)
            delay, delay_stderr = _fit_offset(trace, drive, taus, finals, initial, free_tau, free_final,
                                              skip=skip, guess=delay)
            results = _fit_segments(trace.times, trace.values, drive, delay, spacing)
            pooled = _pool(results, labels, inverse)
    table = pd.DataFrame(
        {
            "start": drive.times, "end": drive.ends, "points": [r.points for r in results],
            **{name: [getattr(r, name) for r in results] for name in TABLE_COLUMNS[3:]},
        },
        index=pd.RangeIndex(len(drive), name="segment"),
    )
    table["points"] = table["points"].astype(int)
    table["first_order"] = table["first_order"].astype(bool)
    fitted = np.full(len(trace), np.nan)
    first = np.searchsorted(trace.times, drive.times + delay, side="left")
    for i, r in zip(first.tolist(), results):
        if r.curve is not None:
            fitted[i:i + r.curve.size] = r.curve
    fitted.setflags(write=False)
    residuals = trace.values - fitted
    residuals.setflags(write=False)
    taus, finals, initial = _model_parameters(results, pooled["tau"].to_numpy(), inverse)
    shifted = drive if delay == 0.0 else drive.replace(times=drive.times + delay, end=drive.end + delay)
    response = Response.from_segments(shifted, taus, finals, initial, unit=trace.units, name=trace.name)
    return TraceFit(trace, drive, fixture, probe, table, tuple(r.status for r in results), pooled,
                    delay, delay_stderr, response, fitted, residuals)

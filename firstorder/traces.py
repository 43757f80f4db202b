"""Captured waveforms: read a trace, fit every step, hold the bench against the model.

A :class:`Trace` is a measured quantity (a node voltage from a scope, a current
from a logging meter) sampled at increasing times.  :func:`fit_trace` cuts it at
the change instants of the :class:`~firstorder.Drive` that produced it and fits
every segment with the first-order law

    y(t) = final + (start - final) * exp(-(t - t_k) / tau),

reporting the time constant and final value with standard errors, whether the
residuals are consistent with the noise, and a slower second time constant where
one is hiding in the tail (dielectric absorption in a capacitor, a second pole
in a buffer, leakage).

scipy is imported inside the functions that use it, so ``import firstorder``
does not load it.
"""

from __future__ import annotations

import csv
import math
import os
import re
from dataclasses import dataclass, field
from statistics import NormalDist
from typing import TYPE_CHECKING, Any

import numpy as np

from .errors import InputError
from .units import format_value, parse_value

if TYPE_CHECKING:
    import pandas as pd

    from .drive import Drive
    from .fixture import Fixture
    from .response import Response

__all__ = ["Trace", "TraceFit", "read_trace", "fit_trace", "TABLE_COLUMNS"]

#: The columns of :attr:`TraceFit.table`, in order.
TABLE_COLUMNS = (
    "start", "end", "points", "start_value", "final", "final_stderr", "tau", "tau_stderr",
    "rms_residual", "noise", "first_order", "second_tau",
)

#: Fewest points for a one-exponential fit (3 parameters, and some left to judge the fit).
MIN_POINTS = 8
#: Fewest points for the two-exponential check behind ``second_tau`` (5 parameters).
MIN_POINTS_SECOND = 20
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
#: Segments (from the first) over which ``offset="fit"`` fits the common delay.
_OFFSET_SEGMENTS = 12
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


# ---------------------------------------------------------------------------------
# Trace
# ---------------------------------------------------------------------------------
def _finite_array(values: Any, field_name: str) -> np.ndarray:
    try:
        array = np.array(values, dtype=np.float64).reshape(-1) if not isinstance(values, str) else None
    except (TypeError, ValueError):
        array = None
    if array is None:
        raise InputError(f"{field_name}: expected a list or array of numbers, got {type(values).__name__}")
    bad = ~np.isfinite(array)
    if bad.any():
        i = int(np.argmax(bad))
        raise InputError(f"{field_name}[{i}]: {float(array[i])!r} is not allowed; expected a finite number")
    return array


@dataclass(frozen=True, eq=False)
class Trace:
    """A captured waveform: values sampled at strictly increasing times.

    Parameters
    ----------
    times : array_like
        Sample instants (s), finite and strictly increasing; at least two.
    values : array_like
        The measured quantity at each instant, finite, as many as `times`.
    name : str
        What was measured (``"v_hold"``), for legends and tables.
    units : str
        Unit of `values` (``"V"``, ``"A"`` or empty).

    Attributes
    ----------
    times, values : ndarray
        Read-only float arrays.

    Examples
    --------
    >>> trace = Trace.from_arrays([0, 1e-6, 2e-6], [0.0, 0.5, 0.75], name="v_out", units="V")
    >>> trace
    Trace('v_out', 3 points from 0 s to 2 µs, V)
    >>> trace.sample_period
    1e-06
    """

    times: np.ndarray
    values: np.ndarray
    name: str = "trace"
    units: str = ""

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name.strip():
            raise InputError(f"trace.name: {self.name!r} must be a non-empty string")
        if not isinstance(self.units, str):
            raise InputError(f"trace.units: {self.units!r} must be a string such as 'V', 'A' or ''")
        times = _finite_array(self.times, "trace.times")
        values = _finite_array(self.values, "trace.values")
        if times.size != values.size:
            raise InputError(
                f"trace.values: has {values.size} values but trace.times has {times.size}; give one value per time"
            )
        if times.size < 2:
            raise InputError(f"trace.times: {times.size} point(s); a trace needs at least 2")
        steps = np.diff(times)
        if not (steps > 0).all():
            i = int(np.argmax(~(steps > 0))) + 1
            raise InputError(
                f"trace.times[{i}]: {float(times[i])!r} does not come after trace.times[{i - 1}] = "
                f"{float(times[i - 1])!r}; "
                f"times must be strictly increasing"
            )
        times.setflags(write=False)
        values.setflags(write=False)
        object.__setattr__(self, "times", times)
        object.__setattr__(self, "values", values)

    @classmethod
    def from_arrays(cls, times: Any, values: Any, name: str = "trace", units: str = "",
                    time_scale: Any = 1.0, value_scale: Any = 1.0) -> "Trace":
        """A trace from arrays (synthetic data, or samples read by other means).

        `time_scale` turns the given times into seconds (``1e-3`` for milliseconds)
        and `value_scale` multiplies the values (a 10:1 probe's factor, say).
        """
        time_factor, value_factor = _scales(time_scale, value_scale)
        return cls(_finite_array(times, "trace.times") * time_factor,
                   _finite_array(values, "trace.values") * value_factor, name, units)

    def __len__(self) -> int:
        return int(self.times.size)

    @property
    def sample_period(self) -> float:
        """The median spacing of the samples (s)."""
        return float(np.median(np.diff(self.times)))

    def to_csv(self, path: str | os.PathLike[str] | None = None) -> str:
        """Write ``time,<name> (<units>)`` rows (exact floats) and return the text.

        :func:`read_trace` reads it back with ``value=trace.name``.  With `path`
        the file is written atomically.
        """
        header = f"{self.name} ({self.units})" if self.units else self.name
        lines = [f"# firstorder trace '{self.name}'", f"time (s),{header}"]
        lines += [f"{t!r},{v!r}" for t, v in zip(self.times.tolist(), self.values.tolist())]
        text = "\n".join(lines) + "\n"
        if path is not None:
            from .io.atomic import write_atomic

            write_atomic(path, text)
        return text

    def __repr__(self) -> str:
        unit = f", {self.units}" if self.units else ""
        return (
            f"Trace({self.name!r}, {len(self)} points from {format_value(float(self.times[0]), 's')} "
            f"to {format_value(float(self.times[-1]), 's')}{unit})"
        )


def _scales(time_scale: Any, value_scale: Any) -> tuple[float, float]:
    time_factor = parse_value(time_scale, field="time_scale", positive=True)
    value_factor = parse_value(value_scale, field="value_scale")
    if value_factor == 0.0:
        raise InputError("value_scale: 0 is not allowed; expected a finite number other than 0")
    return time_factor, value_factor


# ---------------------------------------------------------------------------------
# Reading
# ---------------------------------------------------------------------------------
_UNIT_IN_HEADER = re.compile(r"^(?P<name>.*?)\s*[\(\[]\s*(?P<unit>[^\)\]]*?)\s*[\)\]]\s*$")


def _split_header_cell(cell: str) -> tuple[str, str]:
    """``"v_out (V)"`` or ``"v_out [V]"`` -> ``("v_out", "V")``; otherwise ``(cell, "")``."""
    match = _UNIT_IN_HEADER.match(cell.strip())
    if match and match.group("name"):
        return match.group("name"), match.group("unit")
    return cell.strip(), ""


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _pick_column(choice: Any, field_name: str, header: list[str], line: int) -> int:
    count = len(header)
    if isinstance(choice, bool) or not isinstance(choice, (int, np.integer, str)):
        raise InputError(f"{field_name}: {choice!r} must be a column name or an index from 0 to {count - 1}")
    if not isinstance(choice, str):
        if not 0 <= int(choice) < count:
            raise InputError(
                f"{field_name}: column index {int(choice)} does not exist; the header on line {line} has "
                f"{count} columns (0 to {count - 1}): {header}"
            )
        return int(choice)
    wanted = choice.strip().casefold()
    matches = [i for i, cell in enumerate(header)
               if cell.strip().casefold() == wanted or _split_header_cell(cell)[0].casefold() == wanted]
    if not matches:
        raise InputError(
            f"{field_name}: no column named {choice!r} in the header on line {line}; columns are {header}"
        )
    if len(matches) > 1:
        raise InputError(
            f"{field_name}: {choice!r} names columns {matches} of the header on line {line}; "
            f"choose one by index"
        )
    return matches[0]


def read_trace(path: str | os.PathLike[str], time: Any = "time", value: Any = "value",
               time_scale: Any = 1.0, value_scale: Any = 1.0) -> Trace:
    """Read a captured waveform from a plain CSV file.

    The format is deliberately plain: blank lines and lines starting with ``#``
    are skipped, the first other line is a header naming the columns
    (comma-separated), and every following line holds one sample.  A header cell
    may carry a unit in brackets, ``v_hold (V)`` or ``time [s]``; the value
    column's unit becomes the trace's :attr:`~Trace.units`.

    Parameters
    ----------
    path : str or path-like
        The file (UTF-8 text).
    time, value : str or int
        The time column and the value column, by header name (case ignored, with
        or without the bracketed unit) or by 0-based index.
    time_scale : float or str
        Multiplies the times to give seconds (``1e-3`` when the file holds ms).
        A time column whose header gives a unit other than ``s`` needs one.
    value_scale : float or str
        Multiplies the values (a probe's attenuation, a shunt's 1/R).

    Returns
    -------
    Trace

    Raises
    ------
    InputError
        For a file without a header row, a header with one column, a cell that is
        not a finite number, times that do not increase or no data; the message
        names the line and the column.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (folder / "step.csv").write_text(
    ...     "# simulated: 1 V step into 1 ms\\ntime (s),v_out (V)\\n0,0\\n0.001,0.632\\n0.002,0.865\\n")
    >>> trace = read_trace(folder / "step.csv", value="v_out")
    >>> trace.values, trace.units
    (array([0.   , 0.632, 0.865]), 'V')
    >>> _ = (folder / "bad.csv").write_text("time,v\\n0,0\\n1e-3,oops\\n")
    >>> read_trace(folder / "bad.csv", value="v")
    Traceback (most recent call last):
    ...
    firstorder.errors.InputError: bad.csv line 3, column 'v': 'oops' is not a number
    """
    time_factor, value_factor = _scales(time_scale, value_scale)
    label = os.path.basename(os.fspath(path))
    try:
        with open(path, encoding="utf-8", newline="") as handle:
            text = handle.read()
    except UnicodeDecodeError as error:
        raise InputError(f"{label}: not UTF-8 text ({error.reason} at byte {error.start})") from None
    numbered = [(n, line) for n, line in enumerate(text.splitlines(), start=1)
                if line.strip() and not line.lstrip().startswith("#")]
    if not numbered:
        raise InputError(f"{label}: the file is empty (no header row and no samples)")
    header_line, header_text = numbered[0]
    header = next(csv.reader([header_text]))
    if len(header) < 2:
        raise InputError(
            f"{label} line {header_line}: the header has one column ({header_text.strip()!r}); a trace needs a "
            f"time column and a value column separated by commas"
        )
    if all(_is_number(cell) for cell in header):
        raise InputError(
            f"{label} line {header_line}: expected a header row naming the columns (such as 'time,value'), "
            f"found numbers; add a header line"
        )
    time_index = _pick_column(time, "time", header, header_line)
    value_index = _pick_column(value, "value", header, header_line)
    if time_index == value_index:
        raise InputError(f"value: {value!r} is the time column ({header[time_index]!r}); choose another column")
    time_name, time_unit = _split_header_cell(header[time_index])
    value_name, value_unit = _split_header_cell(header[value_index])
    if time_unit and time_unit not in ("s", "sec") and time_factor == 1.0:
        raise InputError(
            f"time_scale: column {header[time_index]!r} is in {time_unit!r}; give time_scale (for example "
            f"1e-3 for ms) to read it in seconds"
        )
    rows = numbered[1:]
    if not rows:
        raise InputError(f"{label}: no samples after the header on line {header_line}")
    times = np.empty(len(rows))
    values = np.empty(len(rows))
    names = (header[time_index].strip(), header[value_index].strip())
    for r, (number, row) in enumerate(zip((n for n, _ in rows), csv.reader(line for _, line in rows))):
        if len(row) != len(header):
            raise InputError(
                f"{label} line {number}: {len(row)} cells, but the header on line {header_line} has {len(header)}"
            )
        for target, index, name in ((times, time_index, names[0]), (values, value_index, names[1])):
            cell = row[index].strip()
            try:
                number_value = float(cell)
            except ValueError:
                what = "is empty" if not cell else f"{cell!r} is not a number"
                raise InputError(f"{label} line {number}, column {name!r}: {what}") from None
            if not math.isfinite(number_value):
                raise InputError(
                    f"{label} line {number}, column {name!r}: {cell!r} is not allowed; expected a finite number"
                )
            target[r] = number_value
    steps = np.diff(times)
    if not (steps > 0).all():
        r = int(np.argmax(~(steps > 0))) + 1
        raise InputError(
            f"{label} line {rows[r][0]}, column {names[0]!r}: {float(times[r])!r} does not come after "
            f"{float(times[r - 1])!r} on line {rows[r - 1][0]}; times must be strictly increasing"
        )
    if times.size < 2:
        raise InputError(f"{label}: one sample after the header on line {header_line}; a trace needs at least 2")
    return Trace(times * time_factor, values * value_factor, name=value_name or f"column {value_index}",
                 units=value_unit)


# ---------------------------------------------------------------------------------
# Statistics of one segment
# ---------------------------------------------------------------------------------
def _noise(values: np.ndarray) -> float:
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
    >>> round(_noise(np.random.default_rng(1).normal(0.0, 0.5, 20000)), 2)
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


def _residual_test(residuals: np.ndarray, parameters: int, noise: float) -> bool:
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


def _f_test(ssr_small: float, ssr_large: float, extra: int, dof: int, level: float) -> bool:
    """True when the larger model (``extra`` more parameters) fits significantly better."""
    from scipy import stats

    if not (ssr_large > 0.0 and dof > 0):
        return ssr_small > ssr_large
    f_value = (ssr_small - ssr_large) / extra / (ssr_large / dof)
    return bool(f_value > stats.f.isf(level, extra, dof))


def _linear_fit(basis: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    coefficients = np.linalg.lstsq(basis, y, rcond=None)[0]
    return coefficients, y - basis @ coefficients


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
    (final0, amplitude0), _ = _linear_fit(np.column_stack([np.ones_like(x), decay]), y)
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
        return _linear_fit(basis, y)[1]

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
    """Fit one segment; `x` is the time since the change (s)."""
    n = x.size
    if n < MIN_POINTS:
        return _SegmentResult(f"not fitted: too few points ({n}; at least {MIN_POINTS} needed)", n)
    noise = _noise(y)
    span = max(float(x[-1]), spacing)
    tau_guess, ssr_grid = _best_tau_on_grid(x, y, _tau_grid(spacing / 4.0, 20.0 * max(span, duration), 48))
    constant = y - y.mean()
    ssr_constant = float(constant @ constant)
    # The best exponential on the tau grid decides whether there is a step at all: without
    # one, tau is undefined and an iterative fit would wander along a flat valley.
    if not _f_test(ssr_constant, ssr_grid, 2, n - 3, STEP_LEVEL):
        return _SegmentResult(
            "no step: a constant fits as well as an exponential, so tau cannot be measured", n,
            start_value=float(y.mean()), final=float(y.mean()), final_stderr=float(y.std(ddof=1) / math.sqrt(n)),
            rms_residual=float(np.sqrt(np.mean(constant**2))), noise=noise,
            first_order=_residual_test(constant, 1, noise), curve=np.full(n, float(y.mean())),
        )
    start, final, tau, covariance, residuals = _fit_exponential(x, y, tau_guess)  # model - y
    ssr_one = float(residuals @ residuals)
    second_tau = math.nan
    if n >= MIN_POINTS_SECOND:
        ssr_two, tau_slow = _two_exponential_ssr(x, y, tau, 3.0 * span)
        if math.isfinite(tau_slow) and _f_test(ssr_one, ssr_two, 2, n - 5, SECOND_TAU_LEVEL):
            second_tau = tau_slow
    stderr = np.sqrt(np.clip(np.diag(covariance), 0.0, None))
    return _SegmentResult(
        "fitted", n, start_value=start, final=final, final_stderr=float(stderr[1]), tau=tau,
        tau_stderr=float(stderr[2]), rms_residual=float(np.sqrt(np.mean(residuals**2))), noise=noise,
        first_order=_residual_test(residuals, 3, noise) and math.isnan(second_tau), second_tau=second_tau,
        curve=y + residuals,
    )


# ---------------------------------------------------------------------------------
# The fit of a whole trace
# ---------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class TraceFit:
    """Every segment of a trace fitted with a first-order step; see :func:`fit_trace`.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per drive segment (index ``segment``) with the columns of
        ``TABLE_COLUMNS``: ``start``, ``end`` (the segment on the drive's clock,
        s), ``points`` (samples in it), ``start_value`` (the fitted curve at the
        change), ``final``, ``final_stderr``, ``tau``, ``tau_stderr`` (s),
        ``rms_residual`` (root mean square of measured minus fitted), ``noise``
        (estimated from the samples alone, see below), ``first_order`` (the
        residuals are consistent with the noise and no slower exponential is
        found) and ``second_tau`` (the slower time constant of a two-exponential
        model where it fits significantly better, else NaN).
    status : tuple of str
        Per segment: ``"fitted"``, or why not (too few points; no step).
    pooled : pandas.DataFrame
        One row per switch configuration: the inverse-variance weighted tau of its
        first-order segments (all fitted ones when none is first order), its
        standard error, how many segments were pooled and their Birge ratio.
    offset, offset_stderr : float
        Delay of the trace behind the drive (s): a change at drive time ``s``
        shows in the trace at ``s + offset``.  The standard error is 0 for a
        given offset.
    response : Response
        The fitted model (per-segment tau and final value, continuous state) on
        the trace's clock, for overlays.
    fitted : ndarray
        The per-segment fitted curves at the trace's times (NaN outside the
        drive and in segments that were not fitted).
    residuals : ndarray
        ``trace.values - fitted``.
    """

    trace: Trace
    drive: "Drive"
    fixture: "Fixture | None"
    probe: str | None
    table: "pd.DataFrame"
    status: tuple[str, ...]
    pooled: "pd.DataFrame"
    offset: float
    offset_stderr: float
    response: "Response"
    fitted: np.ndarray = field(repr=False)
    residuals: np.ndarray = field(repr=False)

    @property
    def tau(self) -> float:
        """The pooled time constant (s) when every segment shares one configuration."""
        return float(self._single_configuration("tau")["tau"])

    @property
    def tau_stderr(self) -> float:
        """Standard error of :attr:`tau` (s)."""
        return float(self._single_configuration("tau_stderr")["tau_stderr"])

    def _single_configuration(self, name: str):
        if len(self.pooled) != 1:
            raise InputError(
                f"{name}: the segments have {len(self.pooled)} switch configurations "
                f"({'; '.join(self.pooled.index)}), each with its own tau; read fit.pooled"
            )
        return self.pooled.iloc[0]

    def compare(self, fixture: "Fixture", probe: str | None = None, initial: Any = None) -> "pd.DataFrame":
        """Hold the measurement against a fixture's model, segment by segment.

        Parameters
        ----------
        fixture : Fixture
            The model (its nominal part values, say).
        probe : str, optional
            The probe the trace measures; by default the one given to
            :func:`fit_trace` (None: the fixture's state).
        initial : float or str, optional
            Starting state of the model; only segments that hold their state
            depend on it.  By default the first segment's fitted start value
            (for the state) or 0.

        Returns
        -------
        pandas.DataFrame
            Per segment: ``tau``, ``tau_stderr``, ``tau_model``, ``tau_ratio``
            (measured over model), ``tau_deviation`` (measured minus model in
            standard errors), the same for ``final``, and ``agrees``: both
            deviations within 3 standard errors (common practice; a segment
            without a measured tau is judged on its final value).  A deviation
            of many standard errors with a ratio close to 1 is a real, small
            difference (a part's tolerance), measured precisely.
        """
        import pandas as pd

        from .fixture import Fixture
        from .response import respond

        if not isinstance(fixture, Fixture):
            raise InputError(f"compare.fixture: expected a Fixture, got {type(fixture).__name__}")
        probe = self.probe if probe is None else _check_probe(probe, fixture, "compare.probe")
        if initial is None:
            first = float(self.table["start_value"].iloc[0])
            initial = first if probe is None and math.isfinite(first) else 0.0
        model = respond(fixture, self.drive, initial)
        middles = 0.5 * (self.drive.times + self.drive.ends)
        if probe is None:
            final_model = np.asarray(model.final, dtype=float)
        else:
            final_model = np.asarray(model.probe(probe, middles, component="forced"), dtype=float)
        table = self.table
        tau_model = np.asarray(model.tau, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            tau_deviation = (table["tau"].to_numpy() - tau_model) / table["tau_stderr"].to_numpy()
            final_deviation = (table["final"].to_numpy() - final_model) / table["final_stderr"].to_numpy()
            out = pd.DataFrame({
                "start": table["start"], "end": table["end"],
                "tau": table["tau"], "tau_stderr": table["tau_stderr"], "tau_model": tau_model,
                "tau_ratio": table["tau"].to_numpy() / tau_model, "tau_deviation": tau_deviation,
                "final": table["final"], "final_stderr": table["final_stderr"], "final_model": final_model,
                "final_deviation": final_deviation,
            }, index=table.index)
        tau_agrees = np.isnan(table["tau"].to_numpy()) | (np.abs(tau_deviation) <= 3.0)
        out["agrees"] = tau_agrees & (np.abs(final_deviation) <= 3.0)
        return out

    def __repr__(self) -> str:
        fitted = sum(s == "fitted" for s in self.status)
        flagged = int((~self.table["first_order"]).sum())
        return (
            f"TraceFit({self.trace.name!r}: {fitted} of {len(self.status)} segments fitted, "
            f"{flagged} not first order, offset {format_value(self.offset, 's')})"
        )

    def _repr_html_(self) -> str:
        from ._html import paragraph, table

        unit = self.trace.units
        rows = []
        for k, row in self.table.iterrows():
            rows.append([
                k, format_value(row["start"], "s"), int(row["points"]), _pm(row["final"], row["final_stderr"], unit),
                _pm(row["tau"], row["tau_stderr"], "s"), format_value(row["rms_residual"], unit),
                format_value(row["noise"], unit), "yes" if row["first_order"] else "no",
                "" if math.isnan(row["second_tau"]) else format_value(row["second_tau"], "s"),
            ])
        caption = f"Fit of trace '{self.trace.name}' ({len(self.trace)} points), offset {format_value(self.offset, 's')}"
        html = table(["segment", "from", "points", "final", "τ", "rms residual", "noise", "first order",
                      "slower τ"], rows, caption=caption)
        notes = [f"segment {k}: {s}" for k, s in enumerate(self.status) if s != "fitted"]
        return html + "".join(paragraph(note, color="#a33") for note in notes)


def _pm(value: float, stderr: float, unit: str) -> str:
    if math.isnan(value):
        return "—"
    return f"{format_value(value, unit)} ± {format_value(stderr, unit)}"


def _check_probe(probe: Any, fixture: "Fixture | None", field_name: str) -> str | None:
    if probe is None:
        return None
    if fixture is None:
        raise InputError(f"{field_name}: {probe!r} needs the fixture that defines it; pass fixture=")
    names = [p.name for p in fixture.probes]
    if probe not in names:
        raise InputError(f"{field_name}: {probe!r} is not a probe of the fixture; probes are {names}")
    return probe


def _segment_groups(drive: "Drive", fixture: "Fixture | None") -> tuple[list[str], np.ndarray]:
    """Configuration labels and, per segment, which one holds."""
    if fixture is None or not fixture.switches:
        return ["all segments"], np.zeros(len(drive), dtype=np.intp)
    from .segments import Segments

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

    from . import engine

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

    from .drive import Drive
    from .fixture import Fixture

    if not isinstance(trace, Trace):
        raise InputError(f"trace: expected a Trace (see read_trace), got {type(trace).__name__}")
    if not isinstance(drive, Drive):
        raise InputError(f"drive: expected a Drive, got {type(drive).__name__}")
    if fixture is not None and not isinstance(fixture, Fixture):
        raise InputError(f"fixture: expected a Fixture or None, got {type(fixture).__name__}")
    probe = _check_probe(probe, fixture, "probe")
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
    from .response import Response

    shifted = drive if delay == 0.0 else drive.replace(times=drive.times + delay, end=drive.end + delay)
    response = Response.from_segments(shifted, taus, finals, initial, unit=trace.units, name=trace.name)
    return TraceFit(trace, drive, fixture, probe, table, tuple(r.status for r in results), pooled,
                    delay, delay_stderr, response, fitted, residuals)

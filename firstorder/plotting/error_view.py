"""The error view's data: each segment's error against time, its limit and its samples.

A half-LSB band is invisible on a full-scale plot of the response; on a log axis
the error to what the segment is judged against (its final value, or for a hold
the value it holds: :func:`firstorder.settling.table.judged_from`) is a straight
line falling through the tolerance, and each sample's margin is the gap between
its marker and the line.  :func:`error_view` computes the numbers from the
response itself (the total, or a probe, minus that value); the report's figure
and the Bench draw them (:func:`firstorder.report.figure.error_figure`).

numpy only: the drawing imports bokeh.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from ..settling.table import judged_from

__all__ = ["ErrorView", "FLOOR_FRACTION", "LotErrors", "POINTS_PER_SEGMENT", "error_view", "lot_errors"]

#: Points per segment.  Linear in time: on a log axis an exponential is then a straight line.
POINTS_PER_SEGMENT = 48
#: An error of exactly 0 cannot sit on a log axis: it is drawn at this fraction of the
#: smallest limit (the figure's caption says so), and so is any error below that: three
#: decades under the limit show every margin without squashing the axis.
FLOOR_FRACTION = 1e-3


@dataclass(frozen=True)
class ErrorView:
    """What the error view draws (times in seconds, errors in the watched quantity's unit).

    Attributes
    ----------
    t, error : ndarray
        The error ``|value(t) - judged_from|`` of each segment, NaN between segments
        (a line breaks at each change); errors below `floor` are raised to it.
    limit_t, limit : ndarray
        The limit of each segment as a step: two points per segment (start, end).
    sample_t, sample_error, sample_limit : ndarray
        Each sample instant, the error there (raised to `floor` like the curve), its
        segment's limit; empty without sample columns in the table.
    sample_ok : ndarray of bool
        Each sample within its limit (from the table's ``ok``).
    segments : ndarray of int
        The segments drawn.
    floor : float
        Where errors of 0 are drawn.
    unit : str
        The watched quantity's unit.
    """

    t: np.ndarray
    error: np.ndarray
    limit_t: np.ndarray
    limit: np.ndarray
    sample_t: np.ndarray
    sample_error: np.ndarray
    sample_limit: np.ndarray
    sample_ok: np.ndarray
    segments: np.ndarray
    floor: float
    unit: str


def error_view(response: Any, table: Any, probe: str | None = None, start: float | None = None,
               end: float | None = None, max_segments: int = 2_000,
               points: int = POINTS_PER_SEGMENT) -> ErrorView:
    """The error of every segment in ``[start, end]`` against time, with limits and samples.

    Parameters
    ----------
    response : Response
    table : pandas.DataFrame
        Its settling table (:func:`~firstorder.settling.table.settling_table`) for the
        same `probe`: the limits, the samples and what each segment is judged against.
    probe : str, optional
        The probe the table watches (None: the state).
    start, end : float, optional
        The time window (s); by default the whole drive.
    max_segments : int, optional
        At most this many segments are drawn, the first ones in the window (a longer
        drive is read in its settling table).
    points : int, optional
        Points per segment, evenly spaced from the change to just before the next one.

    Returns
    -------
    ErrorView

    Examples
    --------
    >>> import firstorder as fo
    >>> res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "5m"], end="10m", vin=[1.0, 0.0]))
    >>> table = res.settling(fo.Tolerance.absolute("1m"), sample_delay="4m")
    >>> view = error_view(res, table, points=3)
    >>> view.t.tolist()[:4]   # segment 0 from its change to just before the next one, then a break
    [0.0, 0.0025, 0.005, nan]
    >>> [round(float(e), 4) for e in view.error[:3]]  # 1 V e^(-t/1 ms)
    [1.0, 0.0821, 0.0067]
    >>> round(float(view.sample_error[1]), 5), bool(view.sample_ok[1])   # 0.9933 V e^-4
    (0.01819, False)
    """
    starts, ends = response.starts, response.ends
    lo = float(starts[0]) if start is None else float(start)
    hi = float(response.drive.end) if end is None else float(end)
    inside = np.flatnonzero((ends >= lo) & (starts <= hi))[:max_segments]
    reference = judged_from(table)
    limits = table["tolerance"].to_numpy()
    count = int(inside.size)
    fractions = np.linspace(0.0, 1.0, points)
    s, e = starts[inside], ends[inside]
    grid = s[:, None] + (e - s)[:, None] * fractions[None, :]
    last = len(response.drive) - 1
    # The last point of a segment is its left limit before the next change (probes may jump).
    grid[:, -1] = np.where(inside < last, np.nextafter(e, s), e)
    value = response.evaluate(grid.reshape(-1), ("total",), probe)["total"].reshape(count, points)
    error = np.abs(value - reference[inside][:, None])
    positive = limits[inside][limits[inside] > 0]
    floor = FLOOR_FRACTION * (float(positive.min()) if positive.size else 1.0)
    error = np.maximum(error, floor)
    # A NaN after every segment: the line breaks at the change instead of jumping.
    t = np.concatenate([grid, np.full((count, 1), np.nan)], axis=1).reshape(-1)
    error = np.concatenate([error, np.full((count, 1), np.nan)], axis=1).reshape(-1)
    limit_t = np.stack([s, e], axis=1).reshape(-1)
    limit = np.repeat(limits[inside], 2)
    if "sample_time" in table.columns and count:
        sample_t = table["sample_time"].to_numpy()[inside]
        sample_error = np.maximum(table["error_at_sample"].to_numpy()[inside], floor)
        sample_limit = limits[inside]
        sample_ok = table["ok"].to_numpy(dtype=bool)[inside]
    else:
        sample_t = sample_error = sample_limit = np.zeros(0)
        sample_ok = np.zeros(0, dtype=bool)
    return ErrorView(t=t, error=error, limit_t=limit_t, limit=limit, sample_t=sample_t, sample_error=sample_error,
                     sample_limit=sample_limit, sample_ok=sample_ok, segments=inside, floor=floor,
                     unit=str(table.attrs.get("unit", "")))


@dataclass(frozen=True)
class LotErrors:
    """The lot's error at each sample of the segments an :class:`ErrorView` draws: per
    fraction of units, the error that fraction does not exceed (raised to the view's floor).

    Attributes
    ----------
    labels : tuple of str
        ``"50%"``, ``"99.9%"``, ``"max"``: the study table's ``error_<label>`` columns.
    sample_t : ndarray, shape (segments,)
    errors : ndarray, shape (len(labels), segments)
    """

    labels: tuple[str, ...]
    sample_t: np.ndarray
    errors: np.ndarray


def lot_errors(view: ErrorView, study_table: Any) -> LotErrors:
    """The study table's errors at the sample (``error_<fraction>`` and ``error_max``,
    :meth:`Study.settling <firstorder.studies.study.Study.settling>`) of the segments in
    `view`, so the error view shows each sample's margin for the lot, not only for the
    nominal unit.

    Examples
    --------
    >>> import pandas as pd
    >>> import firstorder as fo
    >>> res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "5m"], end="10m", vin=[1.0, 0.0]))
    >>> view = error_view(res, res.settling(fo.Tolerance.absolute("1m"), sample_delay="4m"), points=3)
    >>> table = pd.DataFrame({"sample_time": [4e-3, 9e-3], "error_50%": [0.02, 0.0], "error_max": [0.03, 0.02]})
    >>> lot = lot_errors(view, table)
    >>> lot.labels, lot.errors.tolist()
    (('50%', 'max'), [[0.02, 1e-06], [0.03, 0.02]])
    """
    labels = tuple(str(c)[len("error_"):] for c in study_table.columns if str(c).startswith("error_"))
    segments = view.segments
    errors = np.array([study_table[f"error_{label}"].to_numpy()[segments] for label in labels]).reshape(
        len(labels), segments.size)
    return LotErrors(labels, study_table["sample_time"].to_numpy()[segments], np.maximum(errors, view.floor))

"""Screen-aware sampling of piecewise-exponential curves (numpy only, no UI).

A plot is a few hundred pixels wide, a drive may hold a million segments.  Two
plans cover every zoom level:

* **line**: when there are fewer segments in view than half the pixels, every
  segment gets its exact start value, dense points just after its change
  (spaced in time constants, where the curve bends) and an even fill across
  the part of it in view, then its value just before the next change, so steps
  and probe jumps are drawn as they are;
* **envelope**: otherwise, each pixel column gets the exact minimum and maximum
  of the curve over its time span.  Within one segment every response
  component is ``a + b * exp(-t / tau)``, monotonic, so its extremes over an
  interval lie at the interval's ends: the values at the pixel edges, at every
  change and just before every change are all that is needed.

Measured samples (a trace) follow no formula between them: :func:`point_envelope`
takes the lowest and highest sample in each pixel column.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["SamplePlan", "envelope", "plan_samples", "point_envelope", "segments_in_view", "step_envelope"]

#: Offsets after each change, in time constants, where the curve bends most.
DENSE_TAUS = np.array([1 / 64, 1 / 32, 1 / 16, 1 / 8, 1 / 4, 1 / 2, 3 / 4, 1, 1.5, 2, 3, 4, 6, 9, 14])
#: Bounds on the even fill per segment in line mode.
MIN_FILL, MAX_FILL = 2, 256


@dataclass(frozen=True)
class SamplePlan:
    """Where to evaluate a response for one view.

    Attributes
    ----------
    mode : str
        ``"line"`` or ``"envelope"``.
    times : ndarray
        Sorted times to evaluate (line mode: the curve's points).
    bins : ndarray or None
        Envelope mode: the pixel column of every entry of `times`.
    edges : ndarray or None
        Envelope mode: the pixel edges (``pixels + 1`` of them).
    first, last : int
        The segments overlapping the view are ``first .. last`` inclusive.
    """

    mode: str
    times: np.ndarray
    bins: np.ndarray | None
    edges: np.ndarray | None
    first: int
    last: int

    @property
    def centres(self) -> np.ndarray:
        """Envelope mode: the middle of every pixel column."""
        return 0.5 * (self.edges[:-1] + self.edges[1:])


def segments_in_view(starts: np.ndarray, end: float, view_start: float, view_end: float) -> tuple[int, int]:
    """First and last index of the segments that overlap ``[view_start, view_end]``.

    Examples
    --------
    >>> segments_in_view(np.array([0.0, 1.0, 2.0]), 3.0, 1.5, 2.5)
    (1, 2)
    """
    first = max(int(np.searchsorted(starts, view_start, side="right")) - 1, 0)
    last = max(int(np.searchsorted(starts, view_end, side="left")) - 1, first)
    return first, min(last, starts.size - 1)


def _clip_view(starts: np.ndarray, end: float, view_start: float, view_end: float) -> tuple[float, float]:
    low = max(float(view_start), float(starts[0]))
    high = min(float(view_end), float(end))
    if not high > low:
        low, high = float(starts[0]), float(end)
    return low, high


def plan_samples(starts: np.ndarray, end: float, tau: np.ndarray, view_start: float,
                 view_end: float, pixels: int) -> SamplePlan:
    """Choose the times at which to evaluate a response for a view `pixels` wide.

    Parameters
    ----------
    starts : ndarray, shape (n,)
        Change instants (s), strictly increasing.
    end : float
        End of the last segment (s).
    tau : ndarray, shape (n,)
        Time constant of every segment (s); ``inf`` where the state is held.
    view_start, view_end : float
        The time span shown (clipped to the drive).
    pixels : int
        Width of the plot in pixels.

    Returns
    -------
    SamplePlan

    Examples
    --------
    >>> plan = plan_samples(np.array([0.0, 1.0]), 2.0, np.array([0.1, 0.1]), 0.0, 2.0, 400)
    >>> plan.mode, float(plan.times[0]), bool(1.0 in plan.times)
    ('line', 0.0, True)
    >>> plan = plan_samples(np.arange(1000.0), 1000.0, np.ones(1000), 0.0, 1000.0, 400)
    >>> plan.mode, plan.edges.size
    ('envelope', 401)
    """
    pixels = max(int(pixels), 16)
    low, high = _clip_view(starts, end, view_start, view_end)
    first, last = segments_in_view(starts, end, low, high)
    count = last - first + 1
    segment_starts = starts[first:last + 1]
    segment_ends = np.append(starts[first + 1:last + 1], starts[last + 1] if last + 1 < starts.size else end)
    # Just before each change: the left-hand limit, so a jump is drawn vertically.
    before_ends = np.nextafter(segment_ends, -np.inf)
    if count * 2 > pixels:
        edges = np.linspace(low, high, pixels + 1)
        inside = (segment_starts >= low) & (segment_starts <= high)
        ends_inside = (before_ends >= low) & (before_ends <= high)
        times = np.concatenate([edges, segment_starts[inside], before_ends[ends_inside]])
        order = np.argsort(times, kind="stable")
        times = times[order]
        bins = np.clip(np.searchsorted(edges, times, side="right") - 1, 0, pixels - 1)
        return SamplePlan("envelope", times, bins, edges, first, last)
    fill = int(np.clip(pixels // max(count, 1), MIN_FILL, MAX_FILL))
    shown_from = np.maximum(segment_starts, low)
    shown_to = np.minimum(before_ends, high)
    shown_to = np.maximum(shown_to, shown_from)
    even = shown_from[:, None] + (shown_to - shown_from)[:, None] * (np.arange(fill) / fill)[None, :]
    with np.errstate(invalid="ignore", over="ignore"):
        bends = segment_starts[:, None] + tau[first:last + 1, None] * DENSE_TAUS[None, :]
    bends = np.where(bends < before_ends[:, None], bends, np.nan)
    points = np.concatenate([segment_starts[:, None], even, bends, before_ends[:, None]], axis=1)
    points = np.sort(points, axis=1).reshape(-1)
    points = points[np.isfinite(points)]
    points = points[(points >= starts[0]) & (points <= end)]
    return SamplePlan("line", np.unique(points), None, None, first, last)


def envelope(plan: SamplePlan, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per pixel column, the minimum and maximum of `values` (evaluated at ``plan.times``).

    Every column holds at least its left edge, so none is empty; the right edge
    is shared with the next column and counted in both.

    See Also
    --------
    step_envelope : the same for a piecewise-constant column.
    plan_samples : where to evaluate first.

    Examples
    --------
    >>> plan = plan_samples(np.arange(100.0), 100.0, np.ones(100), 0.0, 100.0, 16)
    >>> low, high = envelope(plan, plan.times)
    >>> bool((low <= high).all()), low.size
    (True, 16)
    """
    bins = plan.bins
    cuts = np.flatnonzero(np.diff(bins, prepend=-1))
    low = np.minimum.reduceat(values, cuts)
    high = np.maximum.reduceat(values, cuts)
    # The right edge of column j is the left edge of column j + 1.
    edge_positions = cuts[1:]
    low[:-1] = np.minimum(low[:-1], values[edge_positions])
    high[:-1] = np.maximum(high[:-1], values[edge_positions])
    return low, high


def step_envelope(plan: SamplePlan, starts: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """:func:`envelope` of a piecewise-constant column (a drive's levels, each segment's
    final value): ``values[k]`` holds from ``starts[k]`` to the next start.

    See Also
    --------
    envelope : for any curve evaluated at the plan's times.

    Examples
    --------
    >>> starts = np.arange(100.0)
    >>> plan = plan_samples(starts, 100.0, np.ones(100), 0.0, 100.0, 16)
    >>> low, high = step_envelope(plan, starts, starts % 2)
    >>> low.tolist() == [0.0] * 16, high.tolist() == [1.0] * 16
    (True, True)
    """
    index = np.clip(np.searchsorted(starts, plan.times, side="right") - 1, 0, starts.size - 1)
    return envelope(plan, np.asarray(values, dtype=float)[index])


def point_envelope(times: np.ndarray, values: np.ndarray, view_start: float, view_end: float,
                   pixels: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per pixel column of ``[view_start, view_end]``, the lowest and highest of the samples in it.

    For measured samples (a trace), which follow no formula between them.
    Columns holding no sample are left out.

    Parameters
    ----------
    times : ndarray, shape (n,)
        Sample instants (s), increasing, all within the view.
    values : ndarray, shape (n,)
        The sample at each instant.
    view_start, view_end : float
        The time span shown.
    pixels : int
        Width of the plot in pixels.

    Returns
    -------
    centres, low, high : ndarray
        The middle of every column that holds a sample, and its lowest and highest sample.

    Examples
    --------
    >>> centres, low, high = point_envelope(np.array([0.1, 0.2, 0.6, 0.7, 0.8]),
    ...                                     np.array([3.0, 1.0, 5.0, 9.0, 7.0]), 0.0, 1.0, 2)
    >>> centres.tolist(), low.tolist(), high.tolist()
    ([0.25, 0.75], [1.0, 5.0], [3.0, 9.0])
    """
    edges = np.linspace(view_start, view_end, pixels + 1)
    bins = np.clip(np.searchsorted(edges, times, side="right") - 1, 0, pixels - 1)
    cuts = np.flatnonzero(np.diff(bins, prepend=-1))
    low = np.minimum.reduceat(values, cuts)
    high = np.maximum.reduceat(values, cuts)
    centres = 0.5 * (edges[bins[cuts]] + edges[bins[cuts] + 1])
    return centres, low, high

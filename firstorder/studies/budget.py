"""The uncertainty budget of one segment's result (JCGM 100) beside the study's Monte Carlo
result (JCGM 101).

For one segment and one output (``"tau"``, ``"final"``, ``"settle_time"``,
``"error_at_sample"``), :func:`budget` lists every varied input quantity of the study, and
the temperature when the spread has a range, with

* its estimate: the expectation of its band (the nominal for a symmetric band, the
  middle of a :class:`~.spread.Uniform`, the middle of the temperature range);
* its standard uncertainty: a rectangular band's half-width over sqrt(3) (JCGM 100,
  4.3.7), a normal's standard deviation, a truncated normal's truncated standard
  deviation (``scipy.stats.truncnorm``);
* its sensitivity coefficient, the derivative of the output at the estimates: from the
  symbolic layer (:meth:`~firstorder.symbolic.Derivation.sensitivity`) for the time
  constant and the state's final value of a part value or a switch resistance, else a
  central difference on units built by hand, with the step :data:`STEP` standard
  uncertainties of that input (a truncation error of order ``STEP**2``);
* its contribution ``|c| u`` and its share of the combined variance.

The inputs are the quantities a unit draws independently: each part's value before its
tempco, and the temperature; a tempco makes the output depend on the temperature through
every part that has one.  The combined standard uncertainty is the root sum of squares of
the contributions (JCGM 100, 5.1.2: uncorrelated inputs), the expanded one is that times
:data:`COVERAGE_FACTOR` (k = 2).

Beside it, the Monte Carlo result of the study's own units: their standard deviation and
a 95 % coverage interval (JCGM 101, 7.7: probabilistically symmetric by default, or the
shortest), and the check of JCGM 101, clause 8: the linear interval ``y ± 1.96 u``
(a Gaussian output, infinite effective degrees of freedom) holds when both its end points
agree with the Monte Carlo ones within the numerical tolerance of ``u`` (JCGM 101, 7.9.2:
``u = c · 10**l`` with `c` of two significant digits, tolerance ``10**l / 2``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import InputError
from ..units import format_value, shown
from .lot import Draw, Lot
from .spread import REFERENCE_TEMPERATURE, Normal, _number

if TYPE_CHECKING:
    from .study import Study

__all__ = ["COVERAGE_FACTOR", "OUTPUTS", "STEP", "Budget", "BudgetRow", "budget"]

#: The outputs a budget is made for.
OUTPUTS = ("settle_time", "tau", "final", "error_at_sample")
#: The coverage factor of the expanded uncertainty (JCGM 100, 6.2).
COVERAGE_FACTOR = 2.0
#: The normal distribution's 97.5 % point: the linear 95 % interval of JCGM 101, 8.1.
COVERAGE_95 = 1.959963984540054
#: Central-difference step, in standard uncertainties of the input varied.
STEP = 1e-3
#: Significant digits of u(y) that set the numerical tolerance (JCGM 101, 7.9.2).
DIGITS = 2
_INTERVALS = ("symmetric", "shortest")


@dataclass(frozen=True)
class BudgetRow:
    """One input of a budget (SI units; a gain as a fraction; the temperature in °C)."""

    key: str
    estimate: float
    unit: str
    distribution: str
    standard_uncertainty: float
    sensitivity: float
    method: str
    contribution: float
    share: float


@dataclass(frozen=True)
class Budget:
    """An uncertainty budget (JCGM 100) and the Monte Carlo result beside it (JCGM 101).

    Attributes
    ----------
    segment : int
    output, unit : str
        What the budget is of, and its unit.
    estimate : float
        The output at the inputs' estimates.
    rows : tuple of BudgetRow
    combined, expanded, coverage_factor : float
        u_c(y), U = k u_c(y) and k.
    units : int
        Monte Carlo units (the study's).
    mc_mean, mc_sd, mc_low, mc_high : float
        Their mean, standard deviation and 95 % coverage interval.
    interval : str
        ``"probabilistically symmetric"`` or ``"shortest"`` (JCGM 101, 7.7).
    linear_low, linear_high, numerical_tolerance : float
        ``y ± 1.96 u_c(y)`` and the tolerance its end points are held to (JCGM 101, 8.2).
    linear_holds : bool
        Whether both end points agree.  The Monte Carlo end points carry their own sampling
        error, which JCGM 101 (7.9) drives below the tolerance by adding units: with a fixed
        number of units, a "no" may be that error rather than the model's curvature.
    """

    segment: int
    output: str
    unit: str
    estimate: float
    rows: tuple[BudgetRow, ...]
    combined: float
    expanded: float
    coverage_factor: float
    units: int
    mc_mean: float
    mc_sd: float
    mc_low: float
    mc_high: float
    interval: str
    linear_low: float
    linear_high: float
    numerical_tolerance: float
    linear_holds: bool

    def table(self):
        """The budget as a pandas DataFrame, a row per input (index ``input``); the totals in
        ``attrs``."""
        import pandas as pd

        frame = pd.DataFrame([{k: getattr(r, k) for k in BudgetRow.__dataclass_fields__} for r in self.rows])
        frame = frame.rename(columns={"key": "input"}).set_index("input")
        frame.attrs.update({k: getattr(self, k) for k in Budget.__dataclass_fields__ if k != "rows"})
        return frame

    def lines(self) -> list[tuple[str, str]]:
        """The totals as ``(label, text)``: estimate, u_c, U, the Monte Carlo result, the check."""
        u = self.unit
        return [
            ("output", f"{self.output} of segment {self.segment}"),
            ("estimate", format_value(self.estimate, u)),
            ("combined standard uncertainty", format_value(self.combined, u)),
            (f"expanded uncertainty (k = {self.coverage_factor:g})", format_value(self.expanded, u)),
            (f"Monte Carlo ({self.units} units) mean, sd", f"{format_value(self.mc_mean, u)}, "
                                                           f"{format_value(self.mc_sd, u)}"),
            (f"Monte Carlo 95 % interval ({self.interval})", f"{format_value(self.mc_low, u)} .. "
                                                            f"{format_value(self.mc_high, u)}"),
            ("linear 95 % interval (y ± 1.96 u)", f"{format_value(self.linear_low, u)} .. "
                                                  f"{format_value(self.linear_high, u)}"),
            ("linear propagation holds (JCGM 101, 8)",
             f"{'yes' if self.linear_holds else 'no'} (end points within {format_value(self.numerical_tolerance, u)})"),
        ]

    def cells(self, row: BudgetRow) -> list[str]:
        """One input's row as text, under :attr:`HEADER`."""
        return [row.key, format_value(row.estimate, row.unit), row.distribution,
                format_value(row.standard_uncertainty, row.unit), f"{row.sensitivity:.6g}", row.method,
                format_value(row.contribution, self.unit), f"{row.share:.1%}"]

    #: The headings of :meth:`cells`.
    HEADER = ("input", "estimate", "distribution", "u(x)", "c", "c from", "|c| u(x)", "share")

    def __str__(self) -> str:
        cells = [list(self.HEADER)] + [self.cells(r) for r in self.rows]
        widths = [max(len(c[i]) for c in cells) for i in range(len(self.HEADER))]
        table = ["  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip() for row in cells]
        return "\n".join(table + [f"{k}: {v}" for k, v in self.lines()])

    def _repr_html_(self) -> str:
        from html import escape

        from .._html import table

        summary = "".join(f"<tr><th style='text-align:left'>{escape(k)}</th><td>{escape(v)}</td></tr>"
                          for k, v in self.lines())
        return (table(self.HEADER, [self.cells(r) for r in self.rows], caption="Uncertainty budget (JCGM 100)")
                + f"<table>{summary}</table>")


@dataclass(frozen=True)
class _Input:
    key: str
    estimate: float
    uncertainty: float
    unit: str
    distribution: str


def inputs(lot: Lot) -> list[_Input]:
    """Every input quantity of `lot` with its estimate and standard uncertainty."""
    from scipy.stats import truncnorm

    found = []
    for quantity in lot.quantities:
        band = quantity.band
        if isinstance(band, Normal):
            scale = 1.0 if quantity.field == "gain" else quantity.nominal
            sd = _number(band.sd, quantity.key).value * (abs(scale) if band.relative else 1.0)
            if band.within is None:
                found.append(_Input(quantity.key, quantity.nominal, sd, quantity.unit, f"normal, sd {band.sd}"))
            else:
                limit = _number(band.within, quantity.key).value / _number(band.sd, quantity.key).value
                found.append(_Input(quantity.key, quantity.nominal, sd * float(truncnorm(-limit, limit).std()),
                                    quantity.unit, f"normal {band.sd} within {band.within}"))
        else:
            low, high = quantity.extremes(None)
            found.append(_Input(quantity.key, (low + high) / 2.0, (high - low) / math.sqrt(12.0), quantity.unit,
                                f"rectangular {band}"))
    if lot.spread.temperature is not None:
        low, high = lot.spread.temperature
        found.append(_Input("temperature", (low + high) / 2.0, (high - low) / math.sqrt(12.0), "°C",
                            f"rectangular {low:g} .. {high:g}"))
    return found


def unit_draw(lot: Lot, point: np.ndarray) -> Draw:
    """One unit at `point` (a value per quantity before its tempco, then the temperature)."""
    count = len(lot.quantities)
    values = np.array(point[:count], dtype=float)
    temperature = None
    if lot.spread.temperature is not None:
        temperature = np.array([float(point[count])])
        for j, quantity in enumerate(lot.quantities):
            if quantity.tempco:
                values[j] *= 1.0 + quantity.tempco * (temperature[0] - REFERENCE_TEMPERATURE)
    return Draw(0, values[None, :], temperature)


def budget(study: "Study", segment: Any, output: Any = "settle_time", tolerance: Any = None,
           sample_delay: Any = None, probe: str | None = None, interval: Any = "symmetric") -> Budget:
    """The budget of `output` in `segment` of `study`; see the module docstring.

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = fo.Fixture.rc("10k", "100n")
    >>> drive = fo.Drive([0, "20m"], end="40m", vin=[5.0, 0.0])
    >>> study = fx.study(drive, fo.Spread({"r": "1%", "c": "2%"}), units=4000, seed=3)
    >>> b = study.budget(segment=0, quantity="tau")
    >>> print(fo.format_value(b.combined, "s"), [round(r.share, 3) for r in b.rows], b.rows[0].method)
    12.91 µs [0.2, 0.8] symbolic
    >>> b.interval, b.units
    ('probabilistically symmetric', 4000)
    """
    if isinstance(segment, bool) or not isinstance(segment, (int, np.integer)) or not 0 <= segment < len(study.drive):
        raise InputError(f"segment: {shown(segment)} is not a segment of the drive; segments are 0 to "
                         f"{len(study.drive) - 1}")
    segment = int(segment)
    if output not in OUTPUTS:
        raise InputError(f"quantity: {shown(output)} is not allowed; give one of {list(OUTPUTS)}")
    if interval not in _INTERVALS:
        raise InputError(f"interval: {shown(interval)} is not allowed; give one of {list(_INTERVALS)}")
    if output in ("settle_time", "error_at_sample") and tolerance is None:
        raise InputError(f"tolerance: a budget of {output!r} needs a tolerance, such as fo.Tolerance.lsb(16, 5.0)")
    if output == "tau" and (probe is not None or sample_delay is not None):
        raise InputError("probe, sample_delay: a time constant does not depend on them; leave them out")
    # The study's own units first: this checks the tolerance, probe and sample delay.
    monte_carlo, unit = _monte_carlo(study, segment, output, tolerance, sample_delay, probe)
    lot = Lot(study.fixture, study.spread, study.seed)
    found = inputs(lot)
    point = np.array([i.estimate for i in found])

    def evaluate(at: np.ndarray) -> float:
        return _unit_output(study, lot, unit_draw(lot, at), segment, output, tolerance, sample_delay, probe)

    estimate = evaluate(point)
    symbolic = _symbolic(study, lot, point, segment, output, probe)
    rows, variances = [], []
    for j, item in enumerate(found):
        if item.key in symbolic:
            coefficient, method = symbolic[item.key], "symbolic"
        else:
            step = STEP * item.uncertainty
            up, down = point.copy(), point.copy()
            up[j] += step
            down[j] -= step
            coefficient = (evaluate(up) - evaluate(down)) / (2.0 * step) if step > 0 else 0.0
            method = f"central difference, h = {format_value(step, item.unit)}"
        variances.append((coefficient * item.uncertainty) ** 2)
        rows.append((item, coefficient, method))
    total = float(sum(variances))
    combined = math.sqrt(total)
    budget_rows = tuple(BudgetRow(i.key, i.estimate, i.unit, i.distribution, i.uncertainty, float(c), m,
                                  abs(c) * i.uncertainty, v / total if total > 0 else 0.0)
                        for (i, c, m), v in zip(rows, variances))
    low, high = coverage_interval(monte_carlo, 0.95, interval)
    tolerance_numeric = numerical_tolerance(combined)
    linear_low, linear_high = estimate - COVERAGE_95 * combined, estimate + COVERAGE_95 * combined
    holds = bool(abs(linear_low - low) <= tolerance_numeric and abs(linear_high - high) <= tolerance_numeric)
    return Budget(segment, output, unit, estimate, budget_rows, combined, COVERAGE_FACTOR * combined,
                  COVERAGE_FACTOR, int(monte_carlo.size), float(np.mean(monte_carlo)),
                  float(np.std(monte_carlo, ddof=1)) if monte_carlo.size > 1 else math.nan, low, high,
                  "probabilistically symmetric" if interval == "symmetric" else "shortest",
                  linear_low, linear_high, tolerance_numeric, holds)


def coverage_interval(values: np.ndarray, p: float, kind: str = "symmetric") -> tuple[float, float]:
    """The 100p % coverage interval of Monte Carlo `values` (JCGM 101, 7.7.1 and 7.7.2):
    ``q = pM`` (rounded as there), from the sorted values ``[y_(r), y_(r+q)]`` with ``r``
    the middle (probabilistically symmetric) or the one of least width (shortest).  The
    rounding of ``q`` and ``r`` is that of JCGM 101:2008, 7.7.1 (from memory): ``q = pM`` if
    that is whole, else ``int(pM + 1/2)``; ``r = (M - q) / 2`` if whole, else ``int((M - q + 1) / 2)``.

    Examples
    --------
    >>> coverage_interval(np.arange(1.0, 101.0), 0.9)
    (5.0, 95.0)
    >>> coverage_interval(np.array([0.0, 0.1, 0.2, 0.3, 9.0, 10.0]), 0.5, "shortest")
    (0.0, 0.3)
    """
    count = values.size
    if count == 0 or np.isnan(values).any():
        return math.nan, math.nan
    ordered = np.sort(values)
    q = p * count
    q = int(round(q)) if abs(q - round(q)) < 1e-9 else int(q + 0.5)
    if q >= count:
        return float(ordered[0]), float(ordered[-1])
    if kind == "symmetric":
        r = (count - q) // 2 if (count - q) % 2 == 0 else (count - q + 1) // 2
    else:
        widths = ordered[q:] - ordered[:count - q]
        r = int(np.argmin(widths)) + 1
    return float(ordered[r - 1]), float(ordered[r - 1 + q])


def numerical_tolerance(u: float, digits: int = DIGITS) -> float:
    """Half a unit in the last of `digits` significant digits of `u` (JCGM 101, 7.9.2).

    Examples
    --------
    >>> numerical_tolerance(1.234e-4)
    5e-06
    """
    if not (u > 0 and math.isfinite(u)):
        return 0.0
    return 0.5 * 10.0 ** (math.floor(math.log10(u)) - (digits - 1))


def _monte_carlo(study: "Study", segment: int, output: str, tolerance: Any, sample_delay: Any,
                 probe: str | None) -> tuple[np.ndarray, str]:
    """Every unit's output in `segment`, and its unit (a settle time even past the segment's
    end, as ``Study.delay_for``: one cut off at the end would leave no spread to budget)."""
    return study.segment_values(segment, output, tolerance, sample_delay, probe)


def _unit_output(study: "Study", lot: Lot, draw: Draw, segment: int, output: str, tolerance: Any,
                 sample_delay: Any, probe: str | None) -> float:
    """The output of one unit built by hand (its fixture, its drive, respond, settling)."""
    fixture = lot.unit_fixture(draw, 0)
    response = fixture.respond(lot.unit_drive(study.drive, draw, 0), study._initial)
    if output == "tau":
        return float(response.tau[segment])
    if output == "final" and probe is None:
        return float(response.final[segment])
    from ..settling.tolerance import Tolerance

    # A final value does not depend on the tolerance; a relative one fits any unit.
    table = response.settling(tolerance if tolerance is not None else Tolerance.relative(0.5),
                              sample_delay=sample_delay, probe=probe)
    if output == "settle_time":
        # tau ln(step / limit), the table's closed form, without its cut at the segment's end.
        row = table.iloc[segment]
        step, limit, tau = abs(row["final"] - row["start_value"]), row["tolerance"], float(response.tau[segment])
        return 0.0 if not (step > limit) or math.isinf(tau) else tau * math.log(step / limit)
    column = "final" if output == "final" else ("error_at_sample" if "error_at_sample" in table else "residual_at_end")
    return float(table[column].iloc[segment])


def _symbolic(study: "Study", lot: Lot, point: np.ndarray, segment: int, output: str,
              probe: str | None) -> dict[str, float]:
    """Sensitivities from the derivation of the segment's configuration, where one applies:
    the time constant, and the state's final value, to a part value or switch resistance
    (times ``1 + tempco (T - 25)``, the chain rule through the tempco)."""
    if output not in ("tau", "final") or (output == "final" and probe is not None):
        return {}
    draw = unit_draw(lot, point)
    fixture = lot.unit_fixture(draw, 0)
    drive = lot.unit_drive(study.drive, draw, 0)
    response = fixture.respond(drive, study._initial)
    if response.holds[segment]:
        return {}
    states = response.configurations[int(response.segment_configuration[segment])]
    derivation = fixture.derivation(**dict(zip((p.name for p in fixture.switches), states)))
    levels = {p.name: float(drive.levels(p.name)[segment]) for p in fixture.sources}
    found = {}
    for j, quantity in enumerate(lot.quantities):
        if quantity.field in ("gain", "offset"):
            continue
        key = quantity.part if quantity.field == "value" else quantity.key
        factor = 1.0
        if quantity.tempco and draw.temperature is not None:
            factor = 1.0 + quantity.tempco * (float(draw.temperature[0]) - REFERENCE_TEMPERATURE)
        found[quantity.key] = float(derivation.sensitivity(key, of=output, levels=levels)) * factor
    return found

"""Rows and cells shared by every place that shows an analysis: HTML, Markdown, the CLI, the Bench.

Each function turns results into rows of text (engineering notation, words for
flags), and nothing else: no markup.  The HTML and Markdown reports, the
``firstorder settle`` table and the Bench's panels lay these rows out in their
own way, so a number reads the same everywhere.
"""

from __future__ import annotations

import datetime
import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..units import format_value, parse_value

if TYPE_CHECKING:
    import pandas as pd

    from ..analysis import Analysis
    from ..drive import Drive
    from ..fixture import Fixture

__all__ = ["FULL_DRIVE_ROWS", "FULL_SETTLING_ROWS", "HEAD_ROWS", "MARGIN_ROWS", "MAX_DERIVATIONS", "TAIL_ROWS",
           "drive_rows", "drive_summary_rows", "hold_cells", "margin_rows", "part_rows", "probe_rows", "row_scales", "settling_cell",
           "settling_rows", "states_text", "summary_rows", "timestamp", "version",
           "HISTOGRAM_BINS", "Histogram", "ToleranceSection", "histogram", "needed_delays", "needed_text", "passing_rows", "quantity_cell",
           "sample_delay_text", "spread_rows", "study_rows", "study_section", "temperature_text",
           "tolerance_section", "unit_rows", "worst_unit_text", "yield_curve"]

#: A drive with at most this many changes is shown in full; longer ones are summarised.
FULL_DRIVE_ROWS = 40
HEAD_ROWS, TAIL_ROWS = 10, 5
#: A settling table with at most this many rows is shown in full.
FULL_SETTLING_ROWS = 200
#: Derivations shown, in order of first use (each switch configuration has one).
MAX_DERIVATIONS = 8
#: Rows of the short settling table (the Bench's panel): the segments with the least margin.
MARGIN_ROWS = 40

def timestamp() -> str:
    """The time now, as a report writes it (UTC, to the minute)."""
    return datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")


def version() -> str:
    """The firstorder version that writes the report."""
    from .._version import __version__

    return __version__


def states_text(fixture: "Fixture", states: tuple[bool, ...]) -> str:
    """``"k1 closed, k2 open"``, or ``"no switches"``."""
    return fixture.describe_states(states) or "no switches"


def summary_rows(analysis: "Analysis") -> list[tuple[str, str]]:
    """(label, text) pairs summarising an analysis."""
    response = analysis.response
    fixture = analysis.fixture
    drive = analysis.drive
    unit = fixture.state_unit
    storage = fixture.storage
    rows = [
        ("storage element", f"{storage.kind} '{storage.name}', {storage.describe_value()}; "
                            f"state {'v' if unit == 'V' else 'i'}_{storage.name} in {unit}"),
        ("starting state", f"{analysis.initial!r} → {format_value(response.initial, unit)}"),
        ("drive", f"{len(drive)} segments from {format_value(drive.start, 's')} to "
                  f"{format_value(drive.end, 's')}; columns {', '.join(drive.names)}"),
    ]
    configurations = response.configurations
    order = dict.fromkeys(response.segment_configuration.tolist())
    for index in order:
        states = configurations[index]
        tau = response.tau[response.segment_configuration == index][0]
        text = "holds its state (no resistive path)" if math.isinf(tau) else format_value(float(tau), "s")
        rows.append((f"time constant ({states_text(fixture, states)})", text))
    rows.append(("state at the end", format_value(float(response.boundary[-1]), unit, scale=response.end_scale())))
    rows.append(("tolerance", str(analysis.tolerance) if analysis.tolerance is not None else "none given"))
    rows.append(("sample delay", sample_delay_text(analysis.sample_delay, drive)))
    return rows


def sample_delay_text(delay: Any, drive: "Drive") -> str:
    """A sample delay as given (None, one value, or a list of seconds per segment), in words.

    Examples
    --------
    >>> import firstorder as fo
    >>> sample_delay_text("150u", fo.Drive([0, "100u"], end="1m", vin=[0.0, 1.0]))
    "'150u' after every change; a segment shorter than that is sampled at its end"
    """
    if delay is None:
        return "none given"
    if isinstance(delay, (list, tuple, np.ndarray)):
        return (f"one per segment, {format_value(float(np.min(delay)), 's')} to "
                f"{format_value(float(np.max(delay)), 's')} after the change")
    text = f"{delay!r} after every change"
    if (drive.durations < parse_value(delay, field="sample_delay", unit="s")).any():
        text += "; a segment shorter than that is sampled at its end"
    return text


def part_rows(fixture: "Fixture") -> list[list[str]]:
    """One row per part: name, kind, nodes, value as typed, value."""
    rows = []
    for part in fixture.parts:
        typed = ", ".join(f"{key} {value!r}" if len(part.typed) > 1 else repr(value) for key, value in part.typed)
        rows.append([part.name, part.kind.replace("_", " "), f"{part.a} → {part.b}",
                     typed or "from the drive", part.describe_value()])
    return rows


def probe_rows(fixture: "Fixture") -> list[list[str]]:
    """One row per probe: name, what it watches."""
    return [[probe.name, probe.describe()] for probe in fixture.probes]


def drive_rows(drive: "Drive") -> tuple[list[str], list[list[str]], bool]:
    """Header and rows of the drive table, and whether rows were left out.

    A short drive is given in full; a long one as its first and last rows,
    with a row of ellipses between.
    """
    header = ["#", "change at", *drive.names]
    n = len(drive)
    shown = list(range(n)) if n <= FULL_DRIVE_ROWS else [*range(HEAD_ROWS), *range(n - TAIL_ROWS, n)]
    columns = list(drive.columns.values())
    rows = []
    previous = None
    for k in shown:
        if previous is not None and k != previous + 1:
            rows.append(["…"] * len(header))
        rows.append([str(k), format_value(float(drive.times[k]), "s", digits=7), *(f"{float(c[k]):.6g}" for c in columns)])
        previous = k
    return header, rows, n > FULL_DRIVE_ROWS


def drive_summary_rows(drive: "Drive") -> list[list[str]]:
    """Per column: lowest, highest and how many distinct levels."""
    rows = []
    for name, values in drive.columns.items():
        rows.append([name, f"{float(values.min()):.6g}", f"{float(values.max()):.6g}", str(np.unique(values).size)])
    return rows


_SETTLING_UNITS = {
    "start": "s", "end": "s", "settle_time": "s", "sample_time": "s",
    "start_value": None, "final": None, "tolerance": None, "residual_at_end": None,
    "value_at_sample": None, "error_at_sample": None,
}


#: Column headings that are not the column's name with spaces.
_HEADERS = {"hold": "judged by"}


#: Columns written against their segment's scale (a residual of 1e-117 A after a 60 mA step is 0 A).
_SCALED = frozenset({"start_value", "final", "residual_at_end", "value_at_sample", "error_at_sample"})


def row_scales(table: "pd.DataFrame") -> np.ndarray:
    """Per segment of a settling table, the size its values are written against: the
    larger of its start value and its final value (see ``format_value``'s `scale`); None
    for each row of a table without them (a study's table: its values are written as they are)."""
    if "start_value" not in table.columns or "final" not in table.columns:
        return np.full(len(table), None, dtype=object)
    return np.maximum(np.abs(table["start_value"].to_numpy()), np.abs(table["final"].to_numpy()))


def settling_cell(column: str, value: Any, unit: str, scale: float | None = None) -> str:
    """One cell of a settling table as text: engineering notation, "yes"/"NO", "ends first";
    the ``hold`` column says what the segment is judged by ("droop" or "settling").
    Values of the watched quantity below 1e-12 of `scale` (the segment's size,
    :func:`row_scales`) are written as 0.

    Examples
    --------
    >>> settling_cell("residual_at_end", 7.271e-115, "A", scale=0.06), settling_cell("settled", True, "A")
    ('0 A', 'yes')
    """
    if column == "hold":
        return "droop" if value else "settling"  # what the error is taken from
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "NO"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        number = float(value)
        settle_column = column == "settle_time" or column.startswith(("settle_time_", "nominal_settle_time"))
        if math.isnan(number):
            return "ends first" if settle_column else "—"
        if column == "yield":  # a study's fraction of units inside at the sample
            return f"{number:.2%}"
        if settle_column:
            return format_value(number, "s", digits=5)
        known = _SETTLING_UNITS.get(column, None if column.startswith("error_") else "")
        return format_value(number, known if known is not None else unit, digits=5,
                            scale=scale if column in _SCALED else None)
    return str(value)


def settling_rows(table: "pd.DataFrame", unit: str) -> tuple[list[str], list[tuple[int, list[str], bool]], int]:
    """Header, rows (segment, cells, bad) and how many rows were left out.

    A long table keeps its first rows and every segment that did not settle
    or failed at its sample, up to :data:`FULL_SETTLING_ROWS` in all.
    """
    header = ["segment", *[_HEADERS.get(str(c), str(c).replace("_", " ")) for c in table.columns]]
    bad = np.zeros(len(table), dtype=bool)
    if "settled" in table.columns:
        bad |= ~table["settled"].to_numpy(dtype=bool)
    if "ok" in table.columns:
        bad |= ~table["ok"].to_numpy(dtype=bool)
    if len(table) <= FULL_SETTLING_ROWS:
        keep = np.arange(len(table))
    else:
        first = np.arange(FULL_SETTLING_ROWS // 2)
        failing = np.flatnonzero(bad)
        keep = np.union1d(first, failing)[:FULL_SETTLING_ROWS]
    columns = list(table.columns)
    values = [table[c].to_numpy() for c in columns]
    scales = row_scales(table)
    hold = table["hold"].to_numpy(dtype=bool) if "hold" in table.columns else np.zeros(len(table), dtype=bool)
    rows = []
    for k in keep.tolist():
        cells = [settling_cell(c, v[k], unit, scales[k]) for c, v in zip(columns, values)]
        if hold[k]:
            hold_cells(cells, columns)
        rows.append((k, cells, bool(bad[k])))
    return header, rows, len(table) - len(keep)


def hold_cells(cells: list[str], columns: list[str]) -> None:
    """A hold whose droop leaves the tolerance before its end does not "end first": it droops out."""
    if "settle_time" in columns and cells[columns.index("settle_time")] == "ends first":
        cells[columns.index("settle_time")] = "droops out"


def margin_rows(table: "pd.DataFrame", unit: str,
                count: int = MARGIN_ROWS) -> tuple[list[str], list[tuple[int, list[str], bool]], str]:
    """A short settling table: header, rows (segment, cells, bad) and which rows they are.

    Every segment of a short table; of a long one the `count` segments with the
    least margin (limit minus the error at the sample, or at the end without
    sample columns), in segment order.  Cells as :func:`settling_cell` writes them;
    a hold's "final" cell is the value it holds ("held 2.5 V"), which its droop is
    taken from.

    Examples
    --------
    >>> import firstorder as fo
    >>> res = fo.Fixture.rc(r="1k", c="1u").respond(fo.Drive([0, "1m"], end="3m", vin=[5, 0]))
    >>> header, rows, caption = margin_rows(res.settling(fo.Tolerance.absolute("1m")), "V")
    >>> header[-2:], rows[0], caption
    (['error at end', 'ok'], (0, ['0 s', '5 V', '1 mV', 'ends first', '1.8394 V', 'NO'], True), 'every segment')
    """
    sampled = "error_at_sample" in table.columns
    error_column, verdict_column = ("error_at_sample", "ok") if sampled else ("residual_at_end", "settled")
    columns = ["start", "final", "tolerance", "settle_time", error_column, verdict_column]
    header = ["segment", "from", "final", "limit", "settles after", "error at sample" if sampled else "error at end", "ok"]
    if len(table) <= count:
        keep = np.arange(len(table))
        caption = "every segment"
    else:
        margin = table["tolerance"].to_numpy() - table[error_column].to_numpy()
        keep = np.sort(np.argsort(margin, kind="stable")[:count])
        caption = f"the {count} segments with the least margin, of {len(table)}"
    values = [table[c].to_numpy() for c in columns]
    hold = table["hold"].to_numpy(dtype=bool) if "hold" in table.columns else np.zeros(len(table), dtype=bool)
    start_value = table["start_value"].to_numpy()
    scales = row_scales(table)
    rows = []
    for k in keep.tolist():
        cells = [settling_cell(c, v[k], unit, scales[k]) for c, v in zip(columns, values)]
        if hold[k]:  # judged as droop from the value it holds, not against the leak's final value
            cells[1] = "held " + settling_cell("start_value", start_value[k], unit, scales[k])
            hold_cells(cells, columns)
        rows.append((k, cells, not bool(values[-1][k])))
    return header, rows, caption


# -- the tolerance study -----------------------------------------------------------------------------
#: Bins of the histogram of one segment's units.
HISTOGRAM_BINS = 40


@dataclass(frozen=True)
class Histogram:
    """Counts of a segment's units per bin (``edges`` has one more entry than ``counts``); units
    without a value (a settle time that never comes) are counted in ``missing``."""

    counts: np.ndarray
    edges: np.ndarray
    missing: int


def histogram(values: np.ndarray, bins: int = HISTOGRAM_BINS) -> Histogram:
    """The units' `values` in `bins` equal bins from the least to the largest; NaN counted apart.

    Examples
    --------
    >>> h = histogram(np.array([1.0, 2.0, 2.0, np.nan]), bins=2)
    >>> h.counts.tolist(), h.edges.tolist(), h.missing
    ([1, 2], [1.0, 1.5, 2.0], 1)
    """
    values = np.asarray(values, dtype=np.float64)
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return Histogram(np.zeros(0, dtype=np.int64), np.zeros(0), int(values.size))
    low, high = float(finite.min()), float(finite.max())
    if low == high:  # every unit alike: one narrow bin, not numpy's ±0.5 around it
        half = abs(low) * 1e-3 or 1e-15
        low, high = low - half, high + half
    counts, edges = np.histogram(finite, bins=bins, range=(low, high))
    return Histogram(counts, edges, int(values.size - finite.size))


def yield_curve(settle_times: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The fraction of units inside tolerance against the sample delay, exact from the units'
    own settle times: ``(delays, fractions)``, a step that rises at each settle time, with
    ``fractions[i]`` the share of units whose settle time is at most ``delays[i]`` (a unit that
    never settles, NaN, never counts).  It starts at delay 0.

    Examples
    --------
    >>> yield_curve(np.array([3.0, 1.0, 1.0, np.nan]))
    (array([0., 1., 3.]), array([0.  , 0.5 , 0.75]))
    """
    times = np.asarray(settle_times, dtype=np.float64)
    delays, counts = np.unique(times[np.isfinite(times)], return_counts=True)
    fractions = np.cumsum(counts) / times.size
    if delays.size == 0 or delays[0] > 0:
        delays, fractions = np.append(0.0, delays), np.append(0.0, fractions)
    return delays, fractions


def needed_delays(settle_times: np.ndarray, fractions: Any) -> list[tuple[float, float]]:
    """Per fraction, the delay that many of the units need: the order statistic of rank
    ``ceil(fraction * units) - 1`` of their settle times (NaN, never settling, sorts last).

    Examples
    --------
    >>> needed_delays(np.array([3.0, 1.0, 2.0, np.nan]), (0.5, 0.75, 1.0))
    [(0.5, 2.0), (0.75, 3.0), (1.0, nan)]
    """
    from ..studies.summary import rank

    ordered = np.sort(np.asarray(settle_times, dtype=np.float64))
    return [(float(f), float(ordered[rank(float(f), ordered.size)])) for f in fractions]


def quantity_cell(value: float, field: str, unit: str) -> str:
    """A varied quantity's value as text: a gain (error) in %, a temperature in °C, else
    engineering notation in its unit."""
    if field == "gain":
        return f"{value * 100:+.6g} %" if value else "0 %"
    if field == "temperature":
        return f"{value:.6g} °C"
    return format_value(float(value), unit, digits=6)


def spread_rows(spread: Any, fixture: "Fixture") -> list[list[str]]:
    """One row per varied quantity: key, nominal, band, tempco (per kelvin from 25 °C)."""
    tempco = spread.tempco_text
    return [[q.key, quantity_cell(q.nominal, q.field, q.unit), str(q.band),
             f"{tempco[q.key]}/K" if q.key in tempco else "—"] for q in spread.quantities(fixture)]


def temperature_text(spread: Any) -> str:
    """The spread's temperature range in words."""
    if spread.temperature is None:
        return "none: every unit at 25 °C, tempcos do not apply"
    low, high = spread.temperature
    return f"{low:g} to {high:g} °C, uniform, one draw per unit (tempcos from 25 °C)"


def passing_rows(passing: Any) -> list[tuple[str, str]]:
    """A :class:`~firstorder.studies.study.Passing` as (label, text) rows."""
    return [("passing units", f"{passing.passing:,} of {passing.units:,} have every sample inside "
                              f"({passing.fraction:.4%})"),
            (f"{passing.confidence:.0%} interval (Clopper-Pearson)", f"{passing.low:.4%} to {passing.high:.4%}")]


def _study_keep(table: "pd.DataFrame") -> np.ndarray:
    """Every segment of a short study table; of a long one the least yields, in segment order."""
    if len(table) <= FULL_SETTLING_ROWS:
        return np.arange(len(table))
    return np.sort(np.argsort(table["yield"].to_numpy(), kind="stable")[:FULL_SETTLING_ROWS])


def study_rows(table: "pd.DataFrame", unit: str) -> tuple[tuple[list[str], list[tuple[int, list[str], bool]]],
                                                          tuple[list[str], list[tuple[int, list[str], bool]]], int]:
    """A study's settling table (:meth:`~firstorder.studies.study.Study.settling`) as two
    tables that fit a page, each ``(header, rows)`` with rows ``(segment, cells, bad)`` (bad:
    some unit is outside at its sample), and how many segments were left out.

    The first holds the settle times (the nominal unit's, at each fraction of units, the
    slowest unit's), the second the sample: its time, the error at each fraction and the
    largest, the yield and the worst unit.
    """
    settle = [c for c in table.columns if c.startswith("settle_time_")]
    errors = [c for c in table.columns if c.startswith("error_")]
    settle_header = ["segment", "from", "nominal", *[f"{c[12:]} of units" if c[12:] != "max" else "slowest unit"
                                                     for c in settle]]
    sample_header = ["segment", "sample at", *[f"error {c[6:]}" if c[6:] != "max" else "largest error"
                                               for c in errors], "yield", "worst unit"]
    keep = _study_keep(table)
    bad = table["yield"].to_numpy() < 1.0
    first_columns, second_columns = ["start", "nominal_settle_time", *settle], ["sample_time", *errors, "yield",
                                                                                 "worst_unit"]
    tables = []
    for columns, header in ((first_columns, settle_header), (second_columns, sample_header)):
        values = [table[c].to_numpy() for c in columns]
        rows = [(k, [settling_cell(c, v[k], unit) for c, v in zip(columns, values)], bool(bad[k]))
                for k in keep.tolist()]
        tables.append((header, rows))
    return tables[0], tables[1], len(table) - len(keep)


def unit_rows(values: "pd.Series", quantities: Any, spread: Any) -> list[list[str]]:
    """One unit's drawn values (a row of :attr:`Study.values <firstorder.studies.study.Study.values>`)
    beside the nominal: quantity, nominal, this unit, its deviation."""
    rows = []
    for q in quantities:
        value = float(values[q.key])
        deviation = f"{(value - q.nominal) / q.nominal:+.4%}" if q.nominal else "—"
        rows.append([q.key, quantity_cell(q.nominal, q.field, q.unit), quantity_cell(value, q.field, q.unit),
                     deviation])
    if spread.temperature is not None:
        rows.append(["temperature", "25 °C", quantity_cell(float(values["temperature"]), "temperature", "°C"), "—"])
    return rows


@dataclass(frozen=True)
class ToleranceSection:
    """Everything a report shows of a study, as rows of text and plain arrays
    (:func:`tolerance_section`).

    Attributes
    ----------
    spread : list of rows
        Quantity, nominal, band, tempco (:func:`spread_rows`).
    temperature : str
    settings, passing_rows : list of (label, text)
        Units, seed, fractions, tolerance and sample delay; the passing fraction and its interval.
    settle, sample : (header, rows)
        The per-segment study table, in two (:func:`study_rows`); `left_out` segments not shown.
    table : pandas.DataFrame
        The study's settling table itself (:meth:`Study.settling`).
    passing : Passing
    worst_segment, worst_unit : int
        The segment of least yield (:func:`firstorder.studies.display.worst_segment`) and its worst unit.
    quantity, value_unit : str
        What the histogram counts: ``"settle_time"`` (every unit settles in the worst segment,
        within it or after its end), else ``"error_at_sample"``; and its unit.
    values : ndarray
        That quantity for every unit in the worst segment (:meth:`Study.segment_values`).
    histogram : Histogram
    settle_times : ndarray
        Every unit's settle time in the worst segment, past its end too (NaN: never).
    delays, fractions : ndarray
        The yield against the sample delay (:func:`yield_curve` of `settle_times`).
    needed : list of (fraction, float)
        Per fraction of units, the sample delay after the change that many need in the worst
        segment (the exact order statistic of `settle_times`, as :meth:`Study.delay_for`; NaN
        where that many never settle).
    sample_delay, duration, limit : float
        The worst segment's sample delay (after its change), its length, and the nominal
        unit's limit there.
    budget : Budget or None
        Of `quantity` in the worst segment (:meth:`Study.budget`); None, with `budget_error`
        saying why, when it cannot be made.
    unit_values : list of rows
        The worst unit's drawn values beside the nominal (:func:`unit_rows`).
    """

    spread: list[list[str]]
    temperature: str
    settings: list[tuple[str, str]]
    passing: Any
    passing_rows: list[tuple[str, str]]
    table: Any
    settle: tuple[list[str], list[tuple[int, list[str], bool]]]
    sample: tuple[list[str], list[tuple[int, list[str], bool]]]
    left_out: int
    worst_segment: int
    worst_unit: int
    quantity: str
    value_unit: str
    values: np.ndarray
    histogram: Histogram
    settle_times: np.ndarray
    delays: np.ndarray
    fractions: np.ndarray
    needed: list[tuple[float, float]]
    sample_delay: float
    duration: float
    limit: float
    budget: Any
    budget_error: str
    unit_values: list[list[str]]


def tolerance_section(study: Any, tolerance: Any, sample_delay: Any = None,
                      fractions: Any = (0.5, 0.99, 0.999)) -> ToleranceSection:
    """The tolerance section of a report (or a panel) for `study` judged by `tolerance` at
    `sample_delay` (as given to an analysis: None, one value or one per segment).

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = fo.Fixture.rc("10k", "100n")
    >>> study = fx.study(fo.Drive([0, "20m"], end="40m", vin=[5.0, 0.0]), fo.Spread({"c": "10%"}),
    ...                  units=200, seed=7)
    >>> section = tolerance_section(study, fo.Tolerance.lsb(bits=16, span=5.0), "12m")
    >>> section.passing_rows[0][1], section.quantity, int(section.histogram.counts.sum())
    ('117 of 200 have every sample inside (58.5000%)', 'settle_time', 200)
    """
    from ..studies.display import worst_segment

    fractions = tuple(fractions)
    table = study.settling(tolerance, sample_delay, fractions=fractions)
    unit = table.attrs["unit"]
    passing = study.passing(tolerance, sample_delay)
    settle, sample, left_out = study_rows(table, unit)
    worst = worst_segment(table)
    worst_unit = int(table["worst_unit"].iloc[worst])
    settle_times, _ = study.segment_values(worst, "settle_time", tolerance)
    if np.isfinite(settle_times).all():
        quantity, values, value_unit = "settle_time", settle_times, "s"
    else:
        quantity = "error_at_sample"
        values, value_unit = study.segment_values(worst, quantity, tolerance, sample_delay)
    delays, shares = yield_curve(settle_times)
    budget, budget_error = None, ""
    try:
        budget = study.budget(worst, quantity, tolerance, sample_delay if quantity == "error_at_sample" else None)
    except ValueError as error:  # an InputError, or numbers a budget cannot take
        budget_error = str(error)
    start = float(study.drive.times[worst])
    nominal = study.nominal.settling(tolerance, sample_delay=sample_delay)
    quantities = study.spread.quantities(study.fixture)
    settings = [("units", f"{study.units:,}"), ("seed", str(study.seed)),
                ("fractions of units", ", ".join(f"{f * 100:g} %" for f in fractions)),
                ("tolerance", str(tolerance)), ("sample delay", sample_delay_text(sample_delay, study.drive)),
                ("temperature", temperature_text(study.spread))]
    return ToleranceSection(
        spread=spread_rows(study.spread, study.fixture), temperature=temperature_text(study.spread),
        settings=settings, passing=passing, passing_rows=passing_rows(passing), table=table,
        settle=settle, sample=sample, left_out=left_out, worst_segment=worst, worst_unit=worst_unit,
        quantity=quantity, value_unit=value_unit, values=values, histogram=histogram(values),
        settle_times=settle_times, delays=delays, fractions=shares, needed=needed_delays(settle_times, fractions),
        sample_delay=float(table["sample_time"].iloc[worst]) - start,
        duration=float(study.drive.ends[worst]) - start, limit=float(nominal["tolerance"].iloc[worst]),
        budget=budget, budget_error=budget_error,
        unit_values=unit_rows(study.values.loc[worst_unit], quantities, study.spread))


def needed_text(section: ToleranceSection) -> str:
    """The worst segment's needed delays in words ("how long must I wait for 99.9 %")."""
    timing = (f"it is sampled {format_value(section.sample_delay, 's', digits=5)} after its change and lasts "
              f"{format_value(section.duration, 's', digits=5)}.")
    if not np.isfinite(section.settle_times).any():
        return (f"No unit settles within the tolerance in segment {section.worst_segment}, whatever the sample "
                f"delay; {timing}")
    parts = [f"{f * 100:g} % after {format_value(d, 's', digits=5)}" if math.isfinite(d)
             else f"{f * 100:g} % never (fewer settle)" for f, d in section.needed]
    return (f"Sample delay the units of segment {section.worst_segment} need: {', '.join(parts)}; {timing}")


def worst_unit_text(section: ToleranceSection) -> str:
    """What the worst unit's table shows, in words."""
    unit = section.worst_unit
    warm = (" at its own temperature (tempcos applied, so a value may lie outside its band)"
            if any(row[3] != "—" for row in section.spread) else "")
    return (f"The values unit {unit} drew{warm}: it has the largest error against its limit in segment "
            f"{section.worst_segment}; study.unit({unit}) rebuilds it.")


def study_section(analysis: "Analysis") -> ToleranceSection | None:
    """The tolerance section of `analysis` (its own study), or None without a spread or a tolerance."""
    settings = analysis.study_settings
    if settings is None or analysis.tolerance is None:
        return None
    study = analysis.study(progress=False)
    return tolerance_section(study, analysis.tolerance, analysis.sample_delay, settings["fractions"])

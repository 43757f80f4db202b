"""The report as one standalone, offline HTML page.

Styles inline, BokehJS inline (:mod:`.figure`), the derivations' steps
(:func:`firstorder.symbolic.steps.derivation_steps`) as MathML
(:mod:`.mathml`), the rows from :mod:`.tables`, and the analysis JSON in a
``<script type="application/json">`` block that :meth:`Analysis.load
<firstorder.analysis.Analysis.load>` reads back.  Everything the user typed
(title, notes, names, values) is escaped before it reaches the page.
"""

from __future__ import annotations

from html import escape
from typing import TYPE_CHECKING

import numpy as np

from ..units import format_value
from .mathml import mathml
from .tables import (HEAD_ROWS, MAX_DERIVATIONS, TAIL_ROWS, ToleranceSection, drive_rows, drive_summary_rows,
                     needed_text, part_rows, probe_rows, settling_rows, spread_rows, states_text, study_section,
                     summary_rows, temperature_text, timestamp, version, worst_unit_text)

if TYPE_CHECKING:
    from ..analysis import Analysis
    from ..drive import Drive

__all__ = ["html_report"]

_CSS = """
<style>
  body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; color: #1d2733;
         max-width: 980px; margin: 0 auto; padding: 1.2em 1.5em 3em; line-height: 1.45;
         height: auto; display: block; }
  h1 { font-size: 1.7em; margin-bottom: 0.1em; color: #14324f; }
  h2 { font-size: 1.25em; border-bottom: 2px solid #d5dee8; padding-bottom: 0.15em; margin-top: 1.8em; color: #14324f; }
  h3 { font-size: 1.05em; margin-bottom: 0.3em; }
  .meta { color: #5a6877; font-size: 0.9em; }
  .notes { white-space: pre-wrap; background: #f5f8fb; border-left: 4px solid #8fa9c4; padding: 0.6em 0.9em; }
  table.fo { border-collapse: collapse; font-size: 0.88em; margin: 0.4em 0 0.8em; }
  table.fo th, table.fo td { padding: 2px 9px; text-align: left; border-bottom: 1px solid #dde3ea; }
  table.fo th { background: #eef2f6; }
  table.fo td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
  tr.bad td { background: #fbeaea; }
  .caution { border-left: 4px solid #b03a2e; background: #fdf2f1; padding: 0.5em 0.8em; margin: 0.4em 0; }
  .fine { color: #2e6b3f; }
  ol.steps li { margin-bottom: 0.6em; }
  /* Display-style maths, set flush left under its caption (block math is centred). */
  div.eq { margin: 0.35em 0 0.35em 1.5em; }
  div.eq math { display: inline math; math-style: normal; font-size: 1.12em; }
  footer { margin-top: 2.5em; font-size: 0.85em; color: #5a6877; border-top: 1px solid #d5dee8; padding-top: 0.6em; }
  code { background: #eef2f6; padding: 0 0.25em; }
  /* Print on A4 or Letter with nothing cut: the page is the printable width, the plots (drawn
     at a fixed pixel width, about 1000 px with legend and toolbar) scale down to it, the toolbars hide
     (shown only under the pointer), wide tables wrap their cells in a smaller type, and
     headings, rows, equations and plots are not split across pages. */
  /* On screen a table wider than the page scrolls in its own box (print shrinks it instead). */
  @media screen { table.fo { display: block; max-width: 100%; overflow-x: auto; } }
  @page { margin: 12mm; }
  @media print {
    body { max-width: none; margin: 0; padding: 0; font-size: 10pt; line-height: 1.35; }
    h2 { margin-top: 1.1em; break-after: avoid; page-break-after: avoid; }
    h3 { break-after: avoid; page-break-after: avoid; }
    table.fo { font-size: 7pt; width: 100%; }
    table.fo th, table.fo td { padding: 1px 3px; }
    table.fo td.num { white-space: nowrap; }
    tr, li, div.eq, .caution, .notes { break-inside: avoid; page-break-inside: avoid; }
    div.plots { zoom: 0.66; }
    div.plot { break-inside: avoid; page-break-inside: avoid; }
    div.eq math { font-size: 1em; }
    footer, .meta { color: #333; }
  }
</style>
"""


def _html_table(header: list[str] | None, rows: list[list[str]], numeric_from: int | None = None,
                numeric: frozenset[int] | None = None) -> str:
    """An escaped table; columns from `numeric_from` on (or those in `numeric`) right-aligned, unbroken."""
    head = "<thead><tr>" + "".join(f"<th>{escape(h)}</th>" for h in header) + "</tr></thead>" if header else ""
    body = []
    columns = set(numeric or ()) | set(range(numeric_from, max(map(len, rows), default=0))
                                        if numeric_from is not None else ())
    for row in rows:
        cells = "".join(f"<td{' class=num' if i in columns else ''}>{escape(str(c))}</td>" for i, c in enumerate(row))
        body.append(f"<tr>{cells}</tr>")
    return f"<table class=fo>{head}<tbody>{''.join(body)}</tbody></table>"


def _settling_html(analysis: "Analysis") -> str:
    if analysis.tolerance is None:
        return ("<p>No tolerance was given, so there is no settling table. Give one with "
                "<code>tolerance=fo.Tolerance.lsb(bits=16, span=5.0)</code> (for example).</p>")
    table = analysis.settling()
    unit = analysis.fixture.state_unit
    header, rows, left_out = settling_rows(table, unit)
    head = "".join(f"<th>{escape(h)}</th>" for h in header)
    body = "".join(
        f"<tr{' class=bad' if bad else ''}><td>{k}</td>"
        + "".join(f"<td class=num>{escape(c)}</td>" for c in cells) + "</tr>"
        for k, cells, bad in rows
    )
    not_settled = int((~table["settled"].to_numpy(dtype=bool)).sum()) if "settled" in table.columns else 0
    failed = int((~table["ok"].to_numpy(dtype=bool)).sum()) if "ok" in table.columns else 0
    verdict = (f"{not_settled} of {len(table)} segments do not settle within the tolerance before they end "
               "(settle time \"ends first\")"
               + (f"; {failed} fail at their sample instant" if "ok" in table.columns else "") + ".")
    holds = int(table["hold"].to_numpy(dtype=bool).sum()) if "hold" in table.columns else 0
    if holds:
        verdict += (f" {holds} {'segment holds' if holds == 1 else 'segments hold'} (open switches cut the "
                    f"capacitor off from every source): judged by droop, the change from the value held at the "
                    f"change, against the tolerance (\"judged by\" column).")
    note = f" {left_out} rows that settled are left out; the CLI's <code>settle</code> lists them all." if left_out else ""
    return (f"<p>Tolerance {escape(str(analysis.tolerance))}. {escape(verdict)}{note}</p>"
            f"<table class=fo><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>")


def _rows_html(header: list[str], rows: list[tuple[int, list[str], bool]]) -> str:
    """A table of (segment, cells, bad) rows, numbers right-aligned, bad rows marked."""
    head = "".join(f"<th>{escape(h)}</th>" for h in header)
    body = "".join(f"<tr{' class=bad' if bad else ''}><td>{k}</td>"
                   + "".join(f"<td class=num>{escape(c)}</td>" for c in cells) + "</tr>" for k, cells, bad in rows)
    return f"<table class=fo><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


_SPREAD_HEADER = ["quantity", "nominal", "band", "tempco"]


def _study_html(analysis: "Analysis", section: ToleranceSection | None) -> tuple[str, str]:
    """The tolerance section's HTML before its plots and after them."""
    spread = analysis.spread
    spread_table = _html_table(_SPREAD_HEADER, spread_rows(spread, analysis.fixture))
    if section is None:  # a spread but no tolerance to judge the units by
        return ("<h2>Tolerance study</h2>" + spread_table
                + f"<p>Temperature: {escape(temperature_text(spread))}.</p><p>No tolerance was given, so the "
                  f"units are not judged. Give one with <code>tolerance=fo.Tolerance.lsb(bits=16, span=5.0)</code> "
                  f"(for example).</p>", "")
    worst, unit = section.worst_segment, section.worst_unit
    left_out = (f" The {len(section.settle[1])} segments of least yield are listed of {len(section.table)}; "
                f"<code>firstorder study</code> lists them all." if section.left_out else "")
    top = [
        "<h2>Tolerance study</h2>",
        "<p>The lot: every unit draws each quantity from its band (and its temperature once); a unit is judged "
        "like the nominal fixture above, by the same tolerance at the same sample instants.</p>",
        spread_table,
        _html_table(None, [list(r) for r in section.settings]),
        "<h3>Passing</h3>",
        _html_table(None, [list(r) for r in section.passing_rows]),
        "<h3>Per segment</h3>",
        f"<p>Settle time after the change: of the nominal unit, met by each fraction of units, and of the "
        f"slowest unit (\"ends first\": the segment ends before that many settle; a hold that droops out of "
        f"the tolerance never settles).{left_out}</p>",
        _rows_html(*section.settle),
        "<p>At the sample: the error met by each fraction of units and the largest, the yield (units inside "
        "at this sample) and the worst unit (the largest error against its limit). Rows where a unit fails "
        "are shaded.</p>",
        _rows_html(*section.sample),
        f"<h3>Worst segment: {worst}</h3>",
        f"<p>Segment {worst} (the least yield; of equal yields the largest error at the sample) from {escape(format_value(float(section.table['start'].iloc[worst]), 's'))}: "
        f"{escape(_histogram_caption(section))} The curve is the share of units inside tolerance if the sample "
        f"were taken that long after the change, from each unit's own settle time; past the segment's end "
        f"(dotted) it is the dwell the segment would need.</p>",
        f"<p>{escape(needed_text(section))}</p>",
    ]
    bottom = [f"<h3>Uncertainty budget of segment {worst}</h3>"]
    if section.budget is None:
        bottom.append(f"<p>No budget: {escape(section.budget_error)}</p>")
    else:
        budget = section.budget
        bottom.append(f"<p>JCGM 100 budget of the {escape(budget.output.replace('_', ' '))}, beside the "
                      f"Monte Carlo result of the study's units (JCGM 101).</p>")
        # Distribution and method are words that may wrap; the numbers are not.
        bottom.append(_html_table(list(budget.HEADER), [budget.cells(r) for r in budget.rows],
                                  numeric=frozenset({1, 3, 4, 6, 7})))
        bottom.append(_html_table(None, [list(r) for r in budget.lines()]))
    bottom.append(f"<h3>Worst unit: {unit}</h3>")
    bottom.append(f"<p>{escape(worst_unit_text(section))}</p>")
    bottom.append(_html_table(["quantity", "nominal", f"unit {unit}", "deviation"], section.unit_values, 1))
    return "".join(top), "".join(bottom)


def _histogram_caption(section: ToleranceSection) -> str:
    missing = section.histogram.missing
    if section.quantity == "settle_time":
        text = (f"the histogram counts the units' settle times, with the sample delay "
                f"({format_value(section.sample_delay, 's')}) dashed, or named in the title when it lies far "
                f"off the bins.")
    else:
        never = int((~np.isfinite(section.settle_times)).sum())
        text = (f"the histogram counts the units' errors at the sample, with the nominal unit's limit "
                f"({format_value(section.limit, section.value_unit)}) dashed, or named in the title when it lies "
                f"far off the bins ({never:,} units never settle "
                f"within the tolerance here, so their settle times cannot be counted).")
    return text + (f" {missing:,} units have no value." if missing else "")


def _cautions_html(analysis: "Analysis") -> str:
    cautions = analysis.cautions
    if not cautions:
        return ("<p class=fine>No hazard was found by the checks firstorder makes (voltage and "
                "stored energy); that is not a safety assessment.</p>")
    items = []
    for caution in cautions:
        kind = getattr(caution, "kind", "")
        label = f"<strong>{escape(str(kind).replace('_', ' '))}:</strong> " if kind else ""
        items.append(f"<div class=caution>⚠ {label}{escape(str(caution))}</div>")
    return "".join(items)


def _derivations_html(analysis: "Analysis") -> str:
    from ..symbolic.steps import derivation_steps  # the same steps as the LaTeX and Markdown

    shown = analysis.derivations(limit=MAX_DERIVATIONS)
    total = len(analysis.response.configurations)
    parts = [
        "<p>One derivation per switch configuration the drive uses. Within a segment, t is the "
        "time since its change and the 0 subscript marks the state at that change.</p>"
    ]
    for states, derivation in shown:
        parts.append(f"<h3>{escape(states_text(analysis.fixture, states))}</h3><ol class=steps>")
        for caption, equations in derivation_steps(derivation):
            maths = "".join(f"<div class=eq>{mathml(equation, derivation.names)}</div>" for equation in equations)
            parts.append(f"<li>{escape(caption)}{maths}</li>")
        parts.append("</ol>")
    if total > len(shown):
        parts.append(f"<p>{total - len(shown)} further configurations are not shown; "
                     f"<code>firstorder derive</code> prints them all.</p>")
    return "".join(parts)


def _drive_html(drive: "Drive") -> str:
    header, rows, shortened = drive_rows(drive)
    text = []
    if shortened:
        text.append(
            f"<p>{len(drive)} changes: the first {HEAD_ROWS} and the last {TAIL_ROWS} are listed, "
            f"and each column is summarised. The whole drive is in the analysis embedded in this "
            f"page.</p>"
        )
        text.append(_html_table(["column", "lowest", "highest", "distinct levels"], drive_summary_rows(drive), 1))
    text.append(_html_table(header, rows, 2))
    text.append(f"<p class=meta>The last segment ends at {escape(format_value(drive.end, 's'))}. "
                f"Switch columns: 1 closed, 0 open.</p>")
    return "".join(text)


def html_report(analysis: "Analysis", now: str | None = None) -> str:
    """The standalone HTML page for `analysis` (see :meth:`Analysis.report`)."""
    try:
        from .figure import standalone_page
    except ImportError as error:
        from ..errors import InputError

        raise InputError(
            f"report: needs bokeh for its plot ({error}); install it with "
            f"pip install 'firstorder[widgets]'"
        ) from None
    from ..io.analysis_format import EMBED_ID, FORMAT_VERSION

    stamp = now or timestamp()
    title = analysis.title or "firstorder analysis"
    fixture = analysis.fixture
    top = [
        f"<header><h1>{escape(title)}</h1>",
        f"<p class=meta>Written by firstorder {escape(version())} on {escape(stamp)}. "
        f"This page needs no network; reload the analysis with "
        f"<code>firstorder.Analysis.load(&quot;this-file.html&quot;)</code>.</p></header>",
    ]
    if analysis.notes:
        top.append(f"<section id=notes><h2>Notes</h2><div class=notes>{escape(analysis.notes)}</div></section>")
    top.append("<section id=summary><h2>Summary</h2>"
               + _html_table(None, [list(r) for r in summary_rows(analysis)]) + "</section>")
    top.append("<section id=parts><h2>Fixture</h2>"
               + _html_table(["name", "kind", "nodes", "as typed", "value"], part_rows(fixture)))
    if fixture.probes:
        top.append("<h3>Probes</h3>" + _html_table(["name", "watches"], probe_rows(fixture)))
    top.append("</section>")
    top.append(f"<section id=drive><h2>Drive</h2>{_drive_html(analysis.drive)}</section>")
    middle = f"<section id=settling><h2>Settling</h2>{_settling_html(analysis)}</section>"
    section = study_section(analysis)
    study_top, study_bottom = _study_html(analysis, section) if analysis.spread is not None else ("", "")
    if section is None and study_top:  # no plots to put between: the section in one piece
        middle += f"<section id=tolerance>{study_top}</section>"
    bottom = [
        f"<section id=cautions><h2>Cautions</h2>{_cautions_html(analysis)}</section>",
        f"<section id=derivations><h2>Derivations</h2>{_derivations_html(analysis)}</section>",
        f"<footer>firstorder {escape(version())} · report written {escape(stamp)} · the analysis "
        f"below this line is the whole input, in the firstorder-analysis JSON format, version "
        f"{FORMAT_VERSION}.</footer>",
        f'<script type="application/json" id="{EMBED_ID}">{analysis.embedded_json()}</script>',
    ]
    return standalone_page(
        analysis.response,
        title=title,
        head_html=_CSS,
        top_html="".join(top),
        bottom_html="".join(bottom),
        caption_html_for=lambda caption: f"<p class=meta>{escape(caption)}</p>",
        tolerance=analysis.tolerance,
        table=analysis.settling() if analysis.tolerance is not None else None,
        middle_html=middle,
        study=section,
        study_top_html=study_top,
        study_bottom_html=study_bottom,
    )

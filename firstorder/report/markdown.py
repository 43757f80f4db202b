"""The report as Markdown, for lab records (derivations as LaTeX display math)."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any


from ..units import format_value
from .tables import (HEAD_ROWS, MAX_DERIVATIONS, TAIL_ROWS, drive_rows, drive_summary_rows, part_rows,
                     needed_text, probe_rows, settling_rows, spread_rows, states_text, study_section, summary_rows,
                     temperature_text, timestamp, version, worst_unit_text)

if TYPE_CHECKING:
    from ..analysis import Analysis

__all__ = ["markdown_report"]


def _md_text(value: Any) -> str:
    """Text that Markdown shows as written: inline HTML (a part named ``<img ...>``) stays text."""
    return str(value).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def _md_cell(value: Any) -> str:
    return _md_text(value).replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def _md_table(header: list[str], rows: list[list[str]]) -> str:
    lines = ["| " + " | ".join(_md_cell(h) for h in header) + " |",
             "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(_md_cell(c) for c in row) + " |" for row in rows]
    return "\n".join(lines)


def markdown_report(analysis: "Analysis", derivations: bool = True, now: str | None = None) -> str:
    """A Markdown summary of `analysis` for lab records (see :meth:`Analysis.markdown`)."""
    stamp = now or timestamp()
    fixture = analysis.fixture
    out = [f"# {_md_cell(analysis.title or 'firstorder analysis')}",
           f"_Written by firstorder {version()} on {stamp}._"]
    if analysis.notes:
        out += ["## Notes", _md_text(analysis.notes)]
    out += ["## Summary", _md_table(["", ""], [list(r) for r in summary_rows(analysis)])]
    out += ["## Fixture", _md_table(["name", "kind", "nodes", "as typed", "value"], part_rows(fixture))]
    if fixture.probes:
        out += ["Probes:", _md_table(["name", "watches"], probe_rows(fixture))]
    header, rows, shortened = drive_rows(analysis.drive)
    out.append("## Drive")
    if shortened:
        out += [f"{len(analysis.drive)} changes; the first {HEAD_ROWS} and the last {TAIL_ROWS} are listed.",
                _md_table(["column", "lowest", "highest", "distinct levels"], drive_summary_rows(analysis.drive))]
    out += [_md_table(header, rows), f"The last segment ends at {format_value(analysis.drive.end, 's')}."]
    out.append("## Settling")
    if analysis.tolerance is None:
        out.append("No tolerance was given.")
    else:
        table = analysis.settling()
        header, rows, left_out = settling_rows(table, fixture.state_unit)
        out.append(f"Tolerance {_md_text(analysis.tolerance)}.")
        out.append(_md_table(header, [[str(k), *cells] for k, cells, _ in rows]))
        if left_out:
            out.append(f"{left_out} rows that settled are left out.")
    if analysis.spread is not None:
        out += _study_markdown(analysis)
    out.append("## Cautions")
    cautions = analysis.cautions
    out.append("\n".join(f"- ⚠ {_md_text(c)}" for c in cautions) if cautions else "None raised by firstorder's checks.")
    if derivations:
        out.append("## Derivations")
        for states, derivation in analysis.derivations(limit=MAX_DERIVATIONS):
            out += [f"### {_md_text(states_text(fixture, states))}", derivation.markdown()]
    return "\n\n".join(out) + "\n"


def _study_markdown(analysis: "Analysis") -> list[str]:
    """The tolerance section: the same rows as the HTML report's (:func:`~.tables.tolerance_section`),
    the histogram and the yield curve as the few numbers they are read for."""
    out = ["## Tolerance study", _md_table(["quantity", "nominal", "band", "tempco"],
                                           spread_rows(analysis.spread, analysis.fixture))]
    section = study_section(analysis)
    if section is None:
        return out + [f"Temperature: {_md_text(temperature_text(analysis.spread))}.",
                      "No tolerance was given, so the units are not judged."]
    out += [_md_table(["", ""], [list(r) for r in section.settings + section.passing_rows])]
    captions = ("Settle time after the change: of the nominal unit, met by each fraction of units, of the slowest "
                "unit (\"ends first\": the segment ends before that many settle).",
                "At the sample: the error met by each fraction of units and the largest, the yield (units inside "
                "at this sample) and the worst unit (the largest error against its limit).")
    for caption, (header, rows) in zip(captions, (section.settle, section.sample)):
        out += [caption, _md_table(header, [[str(k), *cells] for k, cells, _ in rows])]
    if section.left_out:
        out.append(f"{section.left_out} segments of higher yield are left out.")
    worst = section.worst_segment
    out.append(f"### Worst segment: {worst}")
    out.append(needed_text(section))
    if section.budget is None:
        out.append(f"No uncertainty budget: {_md_text(section.budget_error)}")
    else:
        budget = section.budget
        out += [f"Uncertainty budget (JCGM 100) of the {budget.output.replace('_', ' ')}:",
                _md_table(list(budget.HEADER), [budget.cells(r) for r in budget.rows]),
                _md_table(["", ""], [list(r) for r in budget.lines()])]
    unit = section.worst_unit
    out += [f"### Worst unit: {unit}", _md_text(worst_unit_text(section)), _md_table(["quantity", "nominal", f"unit {unit}", "deviation"],
                                                 section.unit_values)]
    return out

"""A study's notebook display: units, seed, spread, the passing yield and the worst segment.

The yield and the worst segment need a tolerance: the study's own (``tolerance=`` when it
was built), else the display says how to give one.  Every text is escaped
(:mod:`firstorder._html`).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from .._html import paragraph, table
from ..units import format_value

if TYPE_CHECKING:
    from .study import Study

__all__ = ["study_html", "study_markdown", "study_rows", "worst_segment"]


def worst_segment(table) -> int:
    """The worst segment of a study's settling table (:meth:`Study.settling`): the least
    yield; of equal yields, the largest error at the sample (the worst unit's); of equals,
    the first.

    Examples
    --------
    >>> import pandas as pd
    >>> worst_segment(pd.DataFrame({"yield": [1.0, 0.0, 0.0], "error_max": [1e-6, 2e-3, 5e-3]}))
    2
    """
    order = np.lexsort((-table["error_max"].to_numpy(dtype=float), table["yield"].to_numpy(dtype=float)))
    return int(order[0])


def study_rows(study: "Study") -> list[tuple[str, str]]:
    """The display's rows as ``(name, text)``; the figures are computed once per study."""
    rows = [("units", f"{study.units:,}"), ("seed", str(study.seed)), ("spread", str(study.spread)),
            ("segments", f"{len(study.drive):,}"),
            ("units held", "every unit (keep=True)" if study.keep else "every unit (one chunk)" if study._cache
             else f"a chunk of {study._chunk_size():,} units at a time")]
    if study.adaptive is not None:
        rows.append(("adaptive", str(study.adaptive)))
    figures = study._figures
    if figures is None:
        rows.append(("yield", "give tolerance= to fx.study(...) to show the passing yield and the worst segment"))
        return rows
    if "table" not in study._shown:
        tolerance, sample_delay, probe, target, fractions = figures
        study._shown["table"] = study.settling(tolerance, sample_delay, probe, target, fractions)
    settled = study._shown["table"]
    tolerance = figures[0]
    passing = settled.attrs["passing"]
    delay = figures[1]
    if delay is not None and not isinstance(delay, (str, int, float)):
        delay = "one per segment"  # not a list of a million numbers
    rows.append(("tolerance", str(tolerance) + ("" if delay is None else f", sample delay {delay}")))
    rows.append(("passing yield", f"{passing:,} of {study.units:,} units ({passing / study.units:.4%}) have every "
                                  f"sample inside"))
    worst = worst_segment(settled)
    row = settled.iloc[worst]
    rows.append(("worst segment", f"segment {worst} (from {format_value(float(row['start']), 's')}): yield "
                                  f"{float(row['yield']):.4%}, largest error "
                                  f"{format_value(float(row['error_max']), settled.attrs['unit'])}, worst unit "
                                  f"{int(row['worst_unit'])}"))
    return rows


def study_html(study: "Study") -> str:
    """The display as an escaped HTML table.

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = fo.Fixture.rc("10k", "100n")
    >>> drive = fo.Drive([0, "20m"], end="40m", vin=[5.0, 0.0])
    >>> study = fx.study(drive, fo.Spread({"c": "10%"}), units=100, seed=1, tolerance=fo.Tolerance.lsb(16, 5.0),
    ...                  sample_delay="12m")
    >>> "worst segment" in study._repr_html_() and "<script" not in study._repr_html_()
    True
    """
    try:
        rows = study_rows(study)
    except ValueError as error:
        return paragraph(f"Tolerance study: {error}", color="#a00")
    return table(["", ""], rows, caption="Tolerance study")


def study_markdown(study: "Study") -> str:
    """The display as a Markdown table (``|`` and line breaks in texts escaped)."""
    def cell(text: str) -> str:
        return text.replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")

    try:
        rows = study_rows(study)
    except ValueError as error:
        return f"Tolerance study: {cell(str(error))}"
    lines = ["**Tolerance study**", "", "| | |", "|---|---|"]
    lines += [f"| {cell(name)} | {cell(text)} |" for name, text in rows]
    return "\n".join(lines)

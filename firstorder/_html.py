"""Small HTML helpers for notebook displays (escaped, no scripts)."""

from __future__ import annotations

from html import escape
from collections.abc import Sequence

_STYLE = "border-collapse:collapse;font-size:0.9em"
_CELL = "padding:2px 8px;text-align:left;border-bottom:1px solid #ddd"


def table(header: Sequence[str], rows: Sequence[Sequence[object]], caption: str = "") -> str:
    """Return a small escaped HTML table."""
    head = "".join(f"<th style='{_CELL}'>{escape(str(h))}</th>" for h in header)
    body = "".join(
        "<tr>" + "".join(f"<td style='{_CELL}'>{escape(str(c))}</td>" for c in row) + "</tr>"
        for row in rows
    )
    cap = f"<caption style='text-align:left;font-weight:bold'>{escape(caption)}</caption>" if caption else ""
    return f"<table style='{_STYLE}'>{cap}<thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def paragraph(text: str, color: str = "") -> str:
    style = f" style='color:{color}'" if color else ""
    return f"<p{style}>{escape(text)}</p>"

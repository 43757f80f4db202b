"""The Bench's files: a written file handed to the browser as a download, and an analysis
file read back into a Bench's inputs.

A download is an ``<a download>`` link whose address carries the file (a ``data:`` URL),
so it works whatever folder the kernel runs in and whatever the server serves: the
browser saves the bytes it already has.  No widgets here (:mod:`._panels` shows the
link, :mod:`._bench` calls both).
"""

from __future__ import annotations

import base64
import html
import mimetypes
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..analysis import Analysis
from ..errors import InputError
from ..fixture import Fixture
from ..response import read_initial
from ..settling.tolerance import Tolerance, tolerance_text
from ..units import format_value, parse_value

__all__ = ["DOWNLOAD_LIMIT", "LoadedInputs", "download_html", "loaded_inputs"]

#: Files up to this size are offered as a download link (a report with BokehJS inline is
#: about 1.5 MB; a data: URL travels in the widget's state, so not without bound).
DOWNLOAD_LIMIT = 32 * 1024 * 1024
_TYPES = {".csv": "text/csv", ".json": "application/json", ".html": "text/html"}


def download_html(path: Any) -> str:
    """The full path written, and a link that saves the file in the browser.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (folder / "a.csv").write_text("t,v\\n0,1\\n")
    >>> text = download_html(folder / "a.csv")
    >>> 'download="a.csv"' in text, "data:text/csv;base64,dCx2CjAsMQo=" in text
    (True, True)
    """
    written = Path(path).resolve()
    size = written.stat().st_size
    shown = f"written: <code class='fo-written'>{html.escape(str(written))}</code>"
    if size > DOWNLOAD_LIMIT:
        return shown + f" ({format_value(size, 'B')}: too large to hand to the browser; open it from that folder)"
    kind = _TYPES.get(written.suffix.lower()) or mimetypes.guess_type(written.name)[0] or "application/octet-stream"
    data = base64.b64encode(written.read_bytes()).decode("ascii")
    return (f"{shown}<br><a class='fo-download' download=\"{html.escape(written.name)}\" "
            f"href=\"data:{kind};base64,{data}\" style='font-weight:600;color:#1a5fb4;text-decoration:underline'>⬇ Download {html.escape(written.name)}</a>")


@dataclass(frozen=True)
class LoadedInputs:
    """What a Bench takes from an analysis file: every input and each field's text."""

    fixture: Fixture
    drive: Any
    initial: float | str
    tolerance: Tolerance | None
    sample_delay: float | None
    texts: dict[str, str]
    title: str
    notes: str


def _shape(fixture: Fixture) -> tuple:
    # What the Bench's fields, curves and Show menu were built for: names and kinds.
    return (tuple((p.name, p.kind) for p in fixture.parts), tuple(p.name for p in fixture.probes), fixture.state_unit)


def loaded_inputs(analysis: Analysis, fixture: Fixture, texts_of: Any) -> LoadedInputs:
    """`analysis`'s inputs for a Bench built for `fixture` (the same parts, kinds and probes,
    any values); `texts_of(fixture)` gives the part fields' texts.  Refused, naming what
    differs, for an analysis of another fixture or with one delay per segment."""
    if not isinstance(analysis, Analysis):
        raise InputError(f"load: {analysis!r} is not a firstorder Analysis")
    new = analysis.fixture
    if _shape(new) != _shape(fixture):
        names = ", ".join(p.name for p in new.parts)
        raise InputError(f"load: the analysis is of another fixture (parts {names}); this Bench shows "
                         f"{', '.join(p.name for p in fixture.parts)}; open it in a Bench of its own: "
                         "fo.Bench.from_analysis(fo.Analysis.load(path))")
    delay = analysis.sample_delay
    if isinstance(delay, list):
        raise InputError("load: the analysis has one sample delay per segment; the Bench's 'sample at' takes one "
                         "delay for every segment")
    seconds = None if delay is None else parse_value(delay, field="sample at", unit="s")
    unit = new.state_unit
    initial = read_initial(analysis.initial, unit, field="start")
    texts = dict(texts_of(new))
    texts.update(initial=analysis.initial if isinstance(analysis.initial, str) else format_value(initial, unit, digits=6),
                 tolerance=tolerance_text(analysis.tolerance),
                 sample_delay="" if delay is None else delay if isinstance(delay, str) else format_value(seconds, "s",
                                                                                                         digits=6))
    return LoadedInputs(new, analysis.drive, initial, analysis.tolerance, seconds, texts, analysis.title,
                        analysis.notes)

"""Analysis: a fixture, a drive, a starting state and a tolerance, kept together.

An analysis is what an engineer hands to a colleague or reloads months later:
it saves to a JSON file of our own format (``"format": "firstorder-analysis"``,
``"version": 1``), writes a self-contained HTML report and a Markdown summary.

Part values are saved exactly as they were typed (``"4.7k"`` stays ``"4.7k"``);
drive times and levels are saved as exact floats.  Reading a file validates it
against a strict schema (:mod:`firstorder._schema`, pydantic, imported only
then) and rebuilds the fixture through its public builder methods, so every
check the builders make applies to files as well.  Nothing in a file is ever
executed or evaluated: numbers written as text go through
:func:`firstorder.units.parse_value` only.

Examples
--------
>>> import firstorder as fo
>>> fx = fo.Fixture.rc(r="10k", c="100n")
>>> drive = fo.Drive.steps([(0, 0.0), ("1m", 2.5)], end="8m")
>>> analysis = fo.Analysis(fx, drive, tolerance=fo.Tolerance.absolute("1m"), title="RC step")
>>> again = fo.Analysis.from_json(analysis.to_json())
>>> again.fixture.part_map["r"].typed
(('value', '10k'),)
>>> float(again.response.boundary[-1]) == float(analysis.response.boundary[-1])
True
"""

from __future__ import annotations

import contextlib
import json
import os
import re
from collections.abc import Iterator, Sequence
from numbers import Integral, Real
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from .io.atomic import write_atomic
from .drive import Drive
from .errors import InputError
from .fixture import Fixture
from .settling.tolerance import Tolerance
from .units import format_value, parse_value

if TYPE_CHECKING:
    import pandas as pd

    from .response import Response
    from .symbolic import Derivation

__all__ = ["Analysis", "FORMAT_NAME", "FORMAT_VERSION", "MAX_FILE_BYTES", "EMBED_ID"]

FORMAT_NAME = "firstorder-analysis"
FORMAT_VERSION = 1
#: Files larger than this are refused before they are parsed (50 MB).
MAX_FILE_BYTES = 50_000_000
#: Most changes a drive in a file may have.
MAX_CHANGES = 1_000_000
#: The id of the ``<script type="application/json">`` block that carries the
#: analysis inside a report, so that :meth:`Analysis.load` reads reports too.
EMBED_ID = "firstorder-analysis"

_EMBEDDED = re.compile(
    r"<script\b[^>]*\bid\s*=\s*[\"']" + re.escape(EMBED_ID) + r"[\"'][^>]*>(.*?)</script\s*>",
    re.DOTALL | re.IGNORECASE,
)
_IDENTIFIER = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")


# -- plain values ----------------------------------------------------------------------
def _as_typed(value: Any, field: str) -> Any:
    """`value` as JSON can hold it, as close as possible to what was typed.

    Text stays text, whole numbers stay whole, other reals become floats; an
    infinite float (a switch's default ``r_off``) is written as ``"inf"``,
    because JSON has no infinity and the units layer reads ``"inf"``.
    """
    if isinstance(value, str):
        return value
    if isinstance(value, bool):
        return float(value)
    if isinstance(value, Integral):
        return int(value)
    if isinstance(value, Real):
        number = float(value)
        if number != number:
            raise InputError(f"{field}: {value!r} is not allowed; expected a number")
        if number in (float("inf"), float("-inf")):
            return "inf" if number > 0 else "-inf"
        return number
    raise InputError(
        f"{field}: {value!r} cannot be saved; give a number or engineering notation such as '4.7k'"
    )


def _check_delay(value: Any, drive: Drive) -> Any:
    """Check a sample delay against the drive; return it in a form JSON can hold."""
    if value is None:
        return None
    durations = drive.durations
    if isinstance(value, (str, Real)):
        delay = parse_value(value, field="sample_delay", unit="s")
        if delay < 0:
            raise InputError(f"sample_delay: {value!r} must be >= 0 (seconds after each change)")
        too_long = np.flatnonzero(durations < delay)
        if too_long.size:
            k = int(too_long[0])
            raise InputError(
                f"sample_delay: {value!r} is past the end of segment {k}, which lasts "
                f"{format_value(float(durations[k]), 's')}; sample within every segment"
            )
        return _as_typed(value, "sample_delay")
    if isinstance(value, (bytes, dict)) or not isinstance(value, (Sequence, np.ndarray)):
        raise InputError(
            f"sample_delay: {value!r} must be None, one delay (seconds) or one delay per segment"
        )
    items = list(value)
    if len(items) != len(drive):
        raise InputError(
            f"sample_delay: has {len(items)} delays but the drive has {len(drive)} segments; "
            f"give one delay, or one per segment"
        )
    if isinstance(value, np.ndarray) and value.dtype.kind in "iuf":
        delays = value.astype(np.float64).reshape(-1)  # a million delays need no Python loop
    else:
        delays = np.array([parse_value(item, field=f"sample_delay[{k}]", unit="s")
                           for k, item in enumerate(items)], dtype=np.float64)
    bad = ~(np.isfinite(delays) & (delays >= 0) & (delays <= durations))
    if bad.any():
        k = int(np.argmax(bad))
        item = float(delays[k]) if isinstance(value, np.ndarray) else items[k]
        if not np.isfinite(delays[k]):
            raise InputError(f"sample_delay[{k}]: {item!r} is not allowed; expected a finite number")
        if delays[k] < 0:
            raise InputError(f"sample_delay[{k}]: {item!r} must be >= 0")
        raise InputError(
            f"sample_delay[{k}]: {item!r} is past the end of segment {k}, which lasts "
            f"{format_value(float(durations[k]), 's')}"
        )
    return delays.tolist()


def _delay_seconds(value: Any) -> float | np.ndarray | None:
    if value is None:
        return None
    if isinstance(value, list):
        return np.asarray(value, dtype=np.float64)
    return parse_value(value, field="sample_delay", unit="s")


# -- JSON text ------------------------------------------------------------------------------
def _dumps(value: Any, depth: int = 0) -> str:
    """JSON with one field per line, but each list of numbers and each flat record on one line.

    A drive of a million changes stays a few lines long, a part is one line,
    and saving the same analysis twice gives the same bytes (friendly to
    version control).
    """
    pad = "  " * (depth + 1)
    nested = isinstance(value, dict) and any(isinstance(v, (dict, list)) for v in value.values())
    if nested or (depth == 0 and isinstance(value, dict)):
        fields = [f"{pad}{json.dumps(k, ensure_ascii=False)}: {_dumps(v, depth + 1)}" for k, v in value.items()]
        return "{\n" + ",\n".join(fields) + "\n" + "  " * depth + "}"
    if isinstance(value, list) and any(isinstance(v, (dict, list)) for v in value):
        items = [f"{pad}{_dumps(v, depth + 1)}" for v in value]
        return "[\n" + ",\n".join(items) + "\n" + "  " * depth + "]"
    return json.dumps(value, ensure_ascii=False, allow_nan=False)


def _refuse_constant(name: str) -> Any:
    raise InputError(f"{name} is not allowed in an analysis file; every number must be finite")


def _refuse_duplicates(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    result: dict[str, Any] = {}
    for key, value in pairs:
        if key in result:
            raise InputError(f"field {key!r} appears twice in one object; give it once")
        result[key] = value
    return result


def _parse_json(text: str, source: str) -> Any:
    try:
        return json.loads(text, parse_constant=_refuse_constant, object_pairs_hook=_refuse_duplicates)
    except json.JSONDecodeError as error:
        # An unterminated string, or an error at the very end, means the text stops too soon.
        ends_early = error.pos >= len(text.rstrip()) or error.msg.startswith("Unterminated string")
        hint = " (the file ends early; was it cut short?)" if ends_early else ""
        raise InputError(
            f"{source}: not valid JSON at line {error.lineno}, column {error.colno}: {error.msg}{hint}"
        ) from None
    except RecursionError:
        raise InputError(f"{source}: nested too deeply to be an analysis file") from None
    except InputError as error:
        raise InputError(f"{source}: {error}") from None
    except ValueError as error:  # for example an integer with more digits than Python reads
        reason = "it holds a number with thousands of digits" if "digits" in str(error) else str(error)
        raise InputError(f"{source}: not a readable analysis file: {reason}") from None


def _embed_safe(text: str) -> str:
    """JSON text that cannot close or open an HTML tag: ``<``, ``>`` and ``&`` escaped.

    They can only occur inside JSON strings, where ``\\u003c`` means the same.
    """
    return text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")


def _read_limited(path: str | os.PathLike[str]) -> str:
    source = os.fspath(path)
    size = os.stat(source).st_size
    if size > MAX_FILE_BYTES:
        raise InputError(
            f"{source}: is {size / 1e6:.1f} MB; an analysis file may hold at most "
            f"{MAX_FILE_BYTES / 1e6:.0f} MB, so it was not read"
        )
    with open(source, "rb") as stream:
        # Read one byte past the limit: a file that grows, or a device, is refused too.
        data = stream.read(MAX_FILE_BYTES + 1)
    if len(data) > MAX_FILE_BYTES:
        raise InputError(
            f"{source}: holds more than {MAX_FILE_BYTES / 1e6:.0f} MB; an analysis file may "
            f"hold at most that, so it was not read"
        )
    return _decode(data, source)


def _decode(data: bytes, source: str) -> str:
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        raise InputError(
            f"{source}: byte {error.start} is not UTF-8 text; an analysis file is UTF-8 JSON"
        ) from None


# -- validation errors ------------------------------------------------------------------------
def _path_text(path: Sequence[str | int]) -> str:
    text = ""
    for element in path:
        if isinstance(element, int):
            text += f"[{element}]"
        elif _IDENTIFIER.match(element):
            text += f".{element}" if text else element
        else:
            text += f"[{json.dumps(element, ensure_ascii=False)}]"
    return text or "the top level"


def _data_path(data: Any, location: tuple[Any, ...], error_type: str) -> list[str | int]:
    """The part of a pydantic error location that indexes into the data itself.

    Pydantic adds the names of union members and discriminator tags to its
    locations; walking the data keeps only the steps a reader can follow.
    """
    path: list[str | int] = []
    current = data
    tag_seen = False
    for i, step in enumerate(location):
        if (isinstance(current, dict) and not tag_seen and step == current.get("kind")
                and i < len(location) - 1):
            # The tag of a part or tolerance union, once per object: a tolerance of kind
            # "ppm" also has a field "ppm".
            tag_seen = True
            continue
        if isinstance(current, dict) and isinstance(step, str) and step in current:
            current = current[step]
            path.append(step)
            tag_seen = False
        elif isinstance(current, list) and isinstance(step, int) and 0 <= step < len(current):
            current = current[step]
            path.append(step)
            tag_seen = False
        elif step == "[key]":
            continue
        elif error_type == "missing" and i == len(location) - 1:
            path.append(step)
    return path


_EXPECTED = {
    "int_type": "a whole number",
    "float_type": "a number",
    "string_type": "text",
    "bool_type": "true or false",
    "list_type": "a list",
    "dict_type": "an object",
    "model_type": "an object",
    "model_attributes_type": "an object",
    "none_required": "null",
}


def _short(value: Any, limit: int = 60) -> str:
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _describe_validation(error: Any, data: Any) -> str:
    """One line naming the JSON path of the first bad field and what is allowed."""
    found = []
    for item in error.errors(include_url=False):
        path = _data_path(data, item["loc"], item["type"])
        found.append((path, item))
    deepest = max(len(path) for path, _ in found)
    # A failed union reports one error per member; the member that got furthest
    # into the data is the one the writer meant.
    candidates = [(path, item) for path, item in found if len(path) == deepest]
    path, first = candidates[0]
    same = [item for p, item in candidates if p == path]
    kinds = [item["type"] for item in same]
    # A broken limit (too long, not finite) says more than "not an int" from another member.
    constraints = [item for item in same if item["type"] not in _EXPECTED]
    if constraints:
        first = constraints[0]
    value = first.get("input")
    where = _path_text(path)
    if first["type"] == "missing":
        return f"{where}: is missing; this field is required"
    if first["type"] == "extra_forbidden":
        return f"{where}: is not a field of this format; remove it (its value: {_short(value)})"
    context = first.get("ctx", {})
    if first["type"] in ("too_long", "too_short"):
        limit = f"at most {context.get('max_length')}" if first["type"] == "too_long" else f"at least {context.get('min_length')}"
        return f"{where}: has {context.get('actual_length')} items; {limit} are allowed"
    if first["type"] in ("string_too_long", "string_too_short"):
        limit = f"at most {context.get('max_length')}" if first["type"] == "string_too_long" else f"at least {context.get('min_length')}"
        return f"{where}: is {len(value) if isinstance(value, str) else '?'} characters long; {limit} are allowed"
    if first["type"] == "finite_number":
        return f"{where}: {_short(value)} is not allowed; numbers must be finite (a too-large number reads as inf)"
    if first["type"] in ("union_tag_invalid", "union_tag_not_found"):
        expected = first.get("ctx", {}).get("expected_tags", "")
        return f"{where}.kind: {_short(value.get('kind') if isinstance(value, dict) else value)} is not one of {expected}"
    if first["type"] == "value_error":
        message = str(first.get("ctx", {}).get("error", first["msg"]))
        if path and isinstance(path[-1], str) and message.startswith(f"{path[-1]}: "):
            message = message[len(path[-1]) + 2:]
        elif message.startswith("value: "):
            message = message[len("value: "):]
        return f"{where}: {message}"
    if all(kind in _EXPECTED for kind in kinds):
        options = list(dict.fromkeys(_EXPECTED[kind] for kind in kinds))
        allowed = ", ".join(options[:-1]) + " or " + options[-1] if len(options) > 1 else options[0]
        return f"{where}: {_short(value)} is the wrong type; expected {allowed}"
    if first["type"] == "literal_error":
        return f"{where}: {_short(value)} is not allowed; expected {first.get('ctx', {}).get('expected', '')}"
    return f"{where}: {_short(value)}: {first['msg']}"


@contextlib.contextmanager
def _at(prefix: str, columns: Sequence[str] = ()) -> Iterator[None]:
    """Put the JSON path in front of errors raised by the builders.

    The drive names its columns ``drive.<name>``; a file holds them under
    ``drive.columns``, so messages about `columns` are given that path.
    """
    try:
        yield
    except InputError as error:
        message = str(error)
        for name in columns:
            if message.startswith((f"drive.{name}:", f"drive.{name}[")):
                message = _path_text(["drive", "columns", name]) + message[len(f"drive.{name}"):]
                break
        raise type(error)(f"{prefix}: {message}") from None


# -- the analysis ----------------------------------------------------------------------------------
class Analysis:
    """A fixture, a drive, a starting state and a tolerance, to save, reload and report.

    Parameters
    ----------
    fixture : Fixture
        The fixture; the analysis keeps its own copy, so later edits to
        `fixture` do not change it.
    drive : Drive
    initial : float, str, optional
        Starting state (V across the capacitor or A through the inductor),
        ``"settled"`` or ``"periodic"``; kept as given.
    tolerance : Tolerance, optional
        The limit for the settling table.
    sample_delay : float, str or sequence, optional
        Seconds after each change at which the converter samples: one value,
        or one per segment.
    title, notes : str, optional
        Shown at the top of the report.

    Attributes
    ----------
    response : Response
        The response, computed when the analysis is made (so a bad analysis
        is refused at once, not when it is reported).

    Examples
    --------
    >>> import firstorder as fo
    >>> a = fo.Analysis(fo.Fixture.rc(r="1k", c="1u"), fo.Drive.steps([(0, 1.0)], end="5m"))
    >>> a
    Analysis('', 1 segments, fixture r, c; start 0.0)
    """

    def __init__(
        self,
        fixture: Fixture,
        drive: Drive,
        initial: Any = 0.0,
        tolerance: Tolerance | None = None,
        sample_delay: Any = None,
        title: str = "",
        notes: str = "",
    ) -> None:
        if not isinstance(fixture, Fixture):
            raise InputError(f"fixture: expected a firstorder.Fixture, got {type(fixture).__name__}")
        if not isinstance(drive, Drive):
            raise InputError(f"drive: expected a firstorder.Drive, got {type(drive).__name__}")
        if tolerance is not None and not isinstance(tolerance, Tolerance):
            raise InputError(
                f"tolerance: expected a firstorder.Tolerance or None, got {type(tolerance).__name__}"
            )
        for field, text in (("title", title), ("notes", notes)):
            if not isinstance(text, str):
                raise InputError(f"{field}: expected text, got {type(text).__name__}")
        self._fixture = fixture.with_values()  # a copy: parts are frozen, the list is not
        self._drive = drive
        self._initial = _as_typed(initial, "initial")
        self._response = self._fixture.respond(drive, self._initial)
        if tolerance is not None and tolerance.unit != self._fixture.state_unit:
            storage = self._fixture.storage
            raise InputError(
                f"tolerance.unit: {tolerance.unit!r}, but the state of {storage.kind} "
                f"'{storage.name}' is in {self._fixture.state_unit!r}; give the tolerance with "
                f"unit={self._fixture.state_unit!r}"
            )
        self._tolerance = tolerance
        self._sample_delay = _check_delay(sample_delay, drive)
        self._title = title
        self._notes = notes

    # -- reading -------------------------------------------------------------------------------
    @property
    def fixture(self) -> Fixture:
        return self._fixture

    @property
    def drive(self) -> Drive:
        return self._drive

    @property
    def initial(self) -> Any:
        """The starting state as given (a number, engineering text, ``"settled"`` or ``"periodic"``)."""
        return self._initial

    @property
    def tolerance(self) -> Tolerance | None:
        return self._tolerance

    @property
    def sample_delay(self) -> Any:
        """The sample delay as given (None, one value, or a list of seconds per segment)."""
        return self._sample_delay

    @property
    def title(self) -> str:
        return self._title

    @property
    def notes(self) -> str:
        return self._notes

    @property
    def response(self) -> "Response":
        return self._response

    @property
    def cautions(self) -> list[Any]:
        """The response's safety cautions (empty when there is nothing to warn about)."""
        return list(self._response.cautions)

    def settling(self) -> "pd.DataFrame":
        """The settling table of the state for the analysis's tolerance and sample delay.

        Raises
        ------
        InputError
            When the analysis has no tolerance.
        """
        if self._tolerance is None:
            raise InputError("settling: this analysis has no tolerance; give tolerance=fo.Tolerance...(...)")
        return self._response.settling(self._tolerance, sample_delay=_delay_seconds(self._sample_delay))

    def derivations(self, limit: int | None = None) -> list[tuple[tuple[bool, ...], "Derivation"]]:
        """The derivation of every switch configuration the drive uses, in order of first use.

        Each is a sympy derivation (a second or so the first time); `limit`
        stops after that many configurations.
        """
        response = self._response
        order = list(dict.fromkeys(response.segment_configuration.tolist()))
        names = [p.name for p in self._fixture.switches]
        result = []
        for index in order[:limit]:
            states = response.configurations[index]
            result.append((states, self._fixture.derivation(**dict(zip(names, states)))))
        return result

    def replace(self, **changes: Any) -> "Analysis":
        """A new analysis with some of its arguments replaced."""
        arguments = {
            "fixture": self._fixture, "drive": self._drive, "initial": self._initial,
            "tolerance": self._tolerance, "sample_delay": self._sample_delay,
            "title": self._title, "notes": self._notes,
        }
        unknown = sorted(set(changes) - set(arguments))
        if unknown:
            raise InputError(f"replace: {unknown} are not arguments of Analysis; they are {list(arguments)}")
        arguments.update(changes)
        return Analysis(**arguments)

    # -- plain data and JSON -----------------------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        """The analysis as plain data in the file format (see the README for its fields)."""
        from . import __version__

        parts = []
        for part in self._fixture.parts:
            record: dict[str, Any] = {"kind": part.kind, "name": part.name, "a": part.a, "b": part.b}
            for key, typed in part.typed:
                record[key] = _as_typed(typed, f"{part.name}.{key}")
            parts.append(record)
        probes = []
        for probe in self._fixture.probes:
            if probe.node is not None:
                probes.append({"name": probe.name, "node": probe.node, "reference": probe.reference})
            else:
                probes.append({"name": probe.name, "through": probe.through})
        drive = self._drive
        return {
            "format": FORMAT_NAME,
            "version": FORMAT_VERSION,
            "saved_with": f"firstorder {__version__}",
            "title": self._title,
            "notes": self._notes,
            "fixture": {"parts": parts, "probes": probes},
            "drive": {
                "times": drive.times.tolist(),
                "end": float(drive.end),
                "columns": {name: column.tolist() for name, column in drive.columns.items()},
            },
            "initial": self._initial,
            "tolerance": None if self._tolerance is None else self._tolerance.to_dict(),
            "sample_delay": self._sample_delay,
        }

    def to_json(self) -> str:
        """The analysis as JSON text in the file format (what :meth:`save` writes).

        Raises
        ------
        InputError
            When the text would exceed the size a file may have, so that
            nothing is saved that could not be read back.
        """
        text = _dumps(self.to_dict()) + "\n"
        size = len(text.encode("utf-8"))
        if size > MAX_FILE_BYTES:
            raise InputError(
                f"analysis: would take {size / 1e6:.1f} MB, more than the "
                f"{MAX_FILE_BYTES / 1e6:.0f} MB an analysis file may hold; shorten the drive"
            )
        return text

    @classmethod
    def from_dict(cls, data: Any, source: str = "analysis") -> "Analysis":
        """Validate plain data in the file format and rebuild the analysis.

        Errors name `source` and the JSON path of the bad field, for example
        ``a.json: fixture.parts[2].value: '-5' must be > 0``.
        """
        from pydantic import ValidationError

        from . import _schema

        try:
            model = _schema.AnalysisFile.model_validate(data)
        except ValidationError as error:
            raise InputError(f"{source}: {_describe_validation(error, data)}") from None
        return cls._from_model(model, source)

    @classmethod
    def from_json(cls, text: str | bytes, source: str = "analysis JSON") -> "Analysis":
        """Read an analysis from JSON text, or from a report's HTML text (see :meth:`from_dict`).

        Bytes (from an upload widget, say) are read as UTF-8.
        """
        if isinstance(text, (bytes, bytearray)):
            if len(text) > MAX_FILE_BYTES:
                raise InputError(f"{source}: more than {MAX_FILE_BYTES / 1e6:.0f} MB; not read")
            text = _decode(bytes(text), source)
        if not isinstance(text, str):
            raise InputError(f"{source}: expected JSON text, got {type(text).__name__}")
        if len(text) > MAX_FILE_BYTES:
            raise InputError(f"{source}: more than {MAX_FILE_BYTES / 1e6:.0f} MB of text; not read")
        if text.lstrip()[:1] == "<":
            match = _EMBEDDED.search(text)
            if match is None:
                raise InputError(
                    f"{source}: an HTML file without an embedded analysis (no <script "
                    f"id=\"{EMBED_ID}\"> block); give a file written by Analysis.report or Analysis.save"
                )
            text, source = match.group(1), f"{source} (embedded analysis)"
        return cls.from_dict(_parse_json(text, source), source)

    @classmethod
    def _from_model(cls, model: Any, source: str) -> "Analysis":
        fixture = Fixture()
        for i, part in enumerate(model.fixture.parts):
            with _at(f"{source}: fixture.parts[{i}]"):
                if part.kind in ("resistor", "capacitor", "inductor"):
                    getattr(fixture, part.kind)(part.name, part.a, part.b, part.value)
                elif part.kind == "switch":
                    fixture.switch(part.name, part.a, part.b, r_on=part.r_on, r_off=part.r_off)
                else:
                    getattr(fixture, part.kind)(part.name, part.a, part.b)
        for j, probe in enumerate(model.fixture.probes):
            with _at(f"{source}: fixture.probes[{j}]"):
                fixture.probe(probe.name, node=probe.node, through=probe.through, reference=probe.reference)
        with _at(f"{source}: fixture"):
            fixture.check()
        drive_data = model.drive
        columns = list(drive_data.columns)
        with _at(source, columns):
            drive = Drive(drive_data.times, drive_data.end, **drive_data.columns)
        tolerance = None
        if model.tolerance is not None:
            with _at(source):
                tolerance = Tolerance.from_dict(model.tolerance.model_dump())
        with _at(source, columns):
            return cls(
                fixture,
                drive,
                initial=model.initial,
                tolerance=tolerance,
                sample_delay=model.sample_delay,
                title=model.title,
                notes=model.notes,
            )

    # -- files -----------------------------------------------------------------------------------------
    def save(self, path: str | os.PathLike[str]) -> Path:
        """Write the analysis to `path` as JSON, atomically; return the path.

        The text goes to a temporary file in the same folder, which is then
        renamed over `path`: an interrupted save leaves the old file intact.
        """
        write_atomic(path, self.to_json())
        return Path(path)

    @classmethod
    def load(cls, path: str | os.PathLike[str]) -> "Analysis":
        """Read an analysis file, or the analysis embedded in a report written by :meth:`report`.

        Files over 50 MB are refused before they are parsed; everything else
        is validated (see :meth:`from_dict`).
        """
        source = os.fspath(path)
        return cls.from_json(_read_limited(source), source=source)

    def embedded_json(self) -> str:
        """The analysis JSON, escaped to sit inside an HTML ``<script>`` block."""
        return _embed_safe(self.to_json())

    # -- reports ---------------------------------------------------------------------------------------
    def to_html(self) -> str:
        """The report as one self-contained HTML page (see :meth:`report`)."""
        from ._report import html_report

        return html_report(self)

    def report(self, path: str | os.PathLike[str]) -> Path:
        """Write a self-contained, offline HTML report to `path`; return the path.

        The page holds the title and notes, the parts, the drive (in full when
        short, summarised when long), an interactive plot (bokeh, with its
        JavaScript inline), the derivations as MathML, the settling table, the
        cautions, the package version and date, and the analysis itself, so
        that :meth:`load` can read the report back.  Needs bokeh
        (``pip install firstorder[widgets]``).
        """
        write_atomic(path, self.to_html())
        return Path(path)

    def markdown(self, derivations: bool = True) -> str:
        """A Markdown summary for lab records (derivations as LaTeX display math)."""
        from ._report import markdown_report

        return markdown_report(self, derivations=derivations)

    # -- display -----------------------------------------------------------------------------------------
    def _repr_html_(self) -> str:
        from ._html import table
        from ._report import summary_rows

        caption = f"Analysis: {self._title}" if self._title else "Analysis"
        return table(["", ""], summary_rows(self), caption=caption)

    def __repr__(self) -> str:
        parts = ", ".join(p.name for p in self._fixture.parts if not p.is_source)
        return (
            f"Analysis({self._title!r}, {len(self._drive)} segments, fixture {parts}; "
            f"start {self._initial!r})"
        )

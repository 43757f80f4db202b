"""The analysis file format's mechanics: its name, version and limits, JSON text, embedding.

An analysis file is JSON of our own format (``"format": "firstorder-analysis"``,
``"version": 1``).  This module writes and reads its text: one field per line
but each list of numbers on one line (a million changes stay a few lines), no
NaN or infinity, no duplicate keys, at most :data:`MAX_FILE_BYTES`; a report
carries the same text in a ``<script type="application/json">`` block, escaped
so that it cannot close or open an HTML tag.  What the fields may hold is the
schema's business (:mod:`.schema`); errors from it are turned into one line
naming the JSON path (:func:`describe_validation`).
"""

from __future__ import annotations

import contextlib
import json
import os
import re
from collections.abc import Iterator, Sequence
from numbers import Integral, Real
from typing import Any

from ..errors import InputError

__all__ = ["EMBED_ID", "FORMAT_NAME", "FORMAT_VERSION", "MAX_CHANGES", "MAX_COLUMNS", "MAX_FILE_BYTES", "MAX_FRACTIONS",
           "MAX_NAME", "MAX_NOTES", "MAX_NUMBER_TEXT", "MAX_PARTS", "MAX_TITLE", "MAX_UNITS", "READ_VERSIONS", "as_typed",
           "at", "check_lengths",
           "describe_validation", "embed_safe", "file_text", "json_text_of", "parse_json", "path_text",
           "read_limited"]

FORMAT_NAME = "firstorder-analysis"
FORMAT_VERSION = 2
#: Versions this firstorder reads (version 1 has no tolerance study).
READ_VERSIONS = (1, 2)
#: Files larger than this are refused before they are parsed (50 MB).
MAX_FILE_BYTES = 50_000_000
#: Most changes a drive in a file may have.
MAX_CHANGES = 1_000_000
#: Limits that keep a hostile or corrupt file from exhausting memory or time; the
#: schema applies them when a file is read, :func:`check_lengths` when one is written.
MAX_PARTS = 10_000
MAX_COLUMNS = 1_000
MAX_NAME = 200
MAX_NUMBER_TEXT = 100
MAX_TITLE = 1_000
MAX_NOTES = 100_000
#: Units of a study kept in a file (a cluster study may run more; the file holds its settings).
MAX_UNITS = 1_000_000_000
MAX_FRACTIONS = 20
#: The id of the ``<script type="application/json">`` block that carries the
#: analysis inside a report, so that :meth:`Analysis.load` reads reports too.
EMBED_ID = "firstorder-analysis"

_EMBEDDED = re.compile(
    r"<script\b[^>]*\bid\s*=\s*[\"']" + re.escape(EMBED_ID) + r"[\"'][^>]*>(.*?)</script\s*>",
    re.DOTALL | re.IGNORECASE,
)
_IDENTIFIER = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")



# -- plain values ----------------------------------------------------------------------
def as_typed(value: Any, field: str) -> Any:
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


def parse_json(text: str, source: str) -> Any:
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


# Fields of text that hold a name (a part, node, probe or the program that saved the file).
_NAME_FIELDS = frozenset({"name", "a", "b", "node", "reference", "through", "saved_with"})
# Fields whose text is one of a few fixed words (checked by the schema, never long).
_FIXED_FIELDS = frozenset({"format", "kind", "unit"})


def too_long(where: str, length: int, limit: int) -> str:
    """The one message for text over its limit, on reading and on writing."""
    return f"{where}: is {length} characters long; at most {limit} are allowed"


def check_lengths(data: dict[str, Any]) -> None:
    """Refuse text in `data` (what a save writes) that reading the file back would refuse.

    The title, the notes, every name and every value typed as text have the
    same limits as in :mod:`.schema`, and the same message.

    Examples
    --------
    >>> check_lengths({"title": "RC step", "notes": "", "fixture": {"parts": [{"name": "r", "value": "10k"}]}})
    >>> check_lengths({"title": "x" * 1001})
    Traceback (most recent call last):
    ...
    firstorder.errors.InputError: title: is 1001 characters long; at most 1000 are allowed
    """
    def limit_of(field: str | int | None) -> int | None:
        if field == "title":
            return MAX_TITLE
        if field == "notes":
            return MAX_NOTES
        if field in _NAME_FIELDS:
            return MAX_NAME
        if field in _FIXED_FIELDS:
            return None
        return MAX_NUMBER_TEXT

    def walk(value: Any, path: list[str | int]) -> None:
        if isinstance(value, str):
            limit = limit_of(path[-1] if path else None)
            if limit is not None and len(value) > limit:
                raise InputError(too_long(path_text(path), len(value), limit))
        elif isinstance(value, dict):
            for key, item in value.items():
                if path in (["drive", "columns"], ["spread", "bands"], ["spread", "tempco"]) and len(key) > MAX_NAME:
                    raise InputError(too_long(path_text(path), len(key), MAX_NAME).replace(
                        ": is", f": the name {_short(key)} is", 1))
                walk(item, [*path, key])
        elif isinstance(value, list) and any(isinstance(item, (str, dict, list)) for item in value[:1]):
            # Lists of numbers (a million drive times) are skipped; a list of text is
            # checked item by item, as values typed as text.
            for index, item in enumerate(value):
                walk(item, [*path, index])

    walk(data, [])


def embed_safe(text: str) -> str:
    """JSON text that cannot close or open an HTML tag: ``<``, ``>`` and ``&`` escaped.

    They can only occur inside JSON strings, where ``\\u003c`` means the same.
    """
    return text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")


def read_limited(path: str | os.PathLike[str]) -> str:
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
def path_text(path: Sequence[str | int]) -> str:
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
    """`value` as a reader of the file wrote it (JSON's ``null``, ``true``), shortened."""
    if value is None or isinstance(value, bool):
        return json.dumps(value)
    if isinstance(value, int) and len(str(abs(value))) > 20:
        return f"a whole number of {len(str(abs(value)))} digits"
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def describe_validation(error: Any, data: Any, tags: dict[str, Sequence[str]] | None = None) -> str:
    """One line naming the JSON path of the first bad field and what is allowed.

    `tags` gives, per field holding kinds of objects (``"parts"``,
    ``"tolerance"``), the kinds allowed, to name them when a ``kind`` is missing.
    """
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
    where = path_text(path)
    if first["type"] == "missing":
        return f"{where}: is missing; this field is required"
    if first["type"] == "extra_forbidden":
        return f"{where}: is not a field of this format; remove it (its value: {_short(value)})"
    context = first.get("ctx", {})
    if first["type"] in ("too_long", "too_short"):
        limit = f"at most {context.get('max_length')}" if first["type"] == "too_long" else f"at least {context.get('min_length')}"
        count = context.get("actual_length")
        if count is None and hasattr(value, "__len__"):
            count = len(value)
        what = "entries" if isinstance(value, dict) else "items"
        if count is None:  # pydantic stops counting a mapping once it is over the limit
            return f"{where}: has more {what} than allowed; {limit} are allowed"
        return f"{where}: has {count} {what}; {limit} are allowed"
    if first["type"] in ("string_too_long", "string_too_short"):
        limit = f"at most {context.get('max_length')}" if first["type"] == "string_too_long" else f"at least {context.get('min_length')}"
        if first["type"] == "string_too_long" and isinstance(value, str):
            return too_long(where, len(value), context.get("max_length"))
        return f"{where}: is {len(value) if isinstance(value, str) else '?'} characters long; {limit} are allowed"
    if first["type"] == "finite_number":
        return f"{where}: {_short(value)} is not allowed; numbers must be finite (a too-large number reads as inf)"
    if first["type"] in ("union_tag_invalid", "union_tag_not_found"):
        expected = first.get("ctx", {}).get("expected_tags", "")
        if not expected:
            holder = next((step for step in reversed(path) if isinstance(step, str)), "")
            expected = ", ".join(repr(kind) for kind in (tags or {}).get(holder, ()))
        allowed = f"one of {expected}" if expected else "the kind of this object"
        if first["type"] == "union_tag_not_found" or not isinstance(value, dict) or "kind" not in value:
            return f"{where}.kind: is missing; give {allowed}"
        return f"{where}.kind: {_short(value.get('kind'))} is not one of {expected or 'the kinds allowed'}"
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
def at(prefix: str, columns: Sequence[str] = ()) -> Iterator[None]:
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
                message = path_text(["drive", "columns", name]) + message[len(f"drive.{name}"):]
                break
        raise type(error)(f"{prefix}: {message}") from None


def file_text(data: dict[str, Any]) -> str:
    """The JSON text of a file holding `data` (what a save writes).

    Raises
    ------
    InputError
        When the text would exceed the size a file may have, so that nothing is
        saved that could not be read back.
    """
    check_lengths(data)
    text = _dumps(data) + "\n"
    size = len(text.encode("utf-8"))
    if size > MAX_FILE_BYTES:
        raise InputError(
            f"analysis: would take {size / 1e6:.1f} MB, more than the "
            f"{MAX_FILE_BYTES / 1e6:.0f} MB an analysis file may hold; shorten the drive"
        )
    return text


def json_text_of(text: str | bytes, source: str) -> tuple[str, str]:
    """The JSON text in `text` (a file's text or bytes, or a report's HTML) and the source
    to name in errors (``"a.html (embedded analysis)"`` for a report)."""
    if isinstance(text, (bytes, bytearray)):
        if len(text) > MAX_FILE_BYTES:
            raise InputError(f"{source}: more than {MAX_FILE_BYTES / 1e6:.0f} MB; not read")
        text = _decode(bytes(text), source)
    if not isinstance(text, str):
        raise InputError(f"{source}: expected JSON text, got {type(text).__name__}")
    if len(text) > MAX_FILE_BYTES:
        raise InputError(f"{source}: more than {MAX_FILE_BYTES / 1e6:.0f} MB of text; not read")
    if text.lstrip()[:1] == "<":
        blocks = _EMBEDDED.findall(text)
        if len(blocks) > 1:
            raise InputError(
                f"{source}: holds {len(blocks)} embedded analyses (<script id=\"{EMBED_ID}\"> blocks); a "
                f"report written by firstorder holds exactly one, so it is not clear which to read; keep "
                f"one block, or give the analysis file itself"
            )
        if not blocks:
            raise InputError(
                f"{source}: an HTML file without an embedded analysis (no <script "
                f"id=\"{EMBED_ID}\"> block); give a file written by Analysis.report or Analysis.save"
            )
        return blocks[0], f"{source} (embedded analysis)"
    return text, source


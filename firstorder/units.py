"""Engineering notation in and out, on top of quantiphy.

Part values, levels and times may be given as floats in SI base units or as
text such as ``"4.7k"``, ``"4.7µ"``, ``"100nF"`` or ``"2.2 MΩ"``.  Text is parsed
by quantiphy's number grammar only; nothing is ever evaluated.

Rules every number read by firstorder follows (:func:`parse_value` for one,
:func:`parse_array` for many; API, files and the Bench all come here):

- A comma is never a decimal or a thousands mark: text with a comma is refused
  (``"1,5k"`` is not guessed at; write ``1.5k``).
- ``True`` and ``False`` are not numbers (a switch state is read elsewhere).
- An integer too large for a float (``10**400``) is refused, not rounded to inf.
- Where the field's unit makes it unambiguous, the IEC 60062 letter code of a
  part value is read: the letter stands for the decimal point and the scale.
  For ohms ``R`` (1), ``k`` or ``K`` (1e3), ``M`` (1e6), ``G`` (1e9), ``T``
  (1e12): ``4R7``, ``R47``, ``4k7``, ``2M2``; and a capital ``K`` after a number
  is kilo (``2.2K``).  For farads and henries ``p``, ``n``, ``u``/``µ``, ``m``:
  ``1n5``, ``4u7``, ``p68``.  ``m`` is always milli and ``M`` always mega (a
  written-out ``meg`` is refused); volts, amps, seconds and plain numbers take
  no letter codes.
- A time may be a numpy ``timedelta64`` (a fixed unit, ``D`` down to ``fs``):
  its count is converted to seconds with one correctly rounded division.

Examples
--------
>>> parse_value("4.7k", field="r", unit="Ω")
4700.0
>>> parse_value("100 nF", field="c", unit="F")
1e-07
>>> parse_value("1m", field="end", unit="s")
0.001
>>> parse_value("4k7", field="r", unit="Ω")
4700.0
>>> format_value(4.7e3, "Ω")
'4.7 kΩ'
"""

from __future__ import annotations

import math
import re
from numbers import Integral, Real
from typing import Any

import numpy as np

from quantiphy import InvalidNumber, Quantity

from .errors import InputError

__all__ = ["parse_value", "parse_with_unit", "parse_array", "format_value", "shown", "UNIT_ALIASES", "LETTER_CODES"]

#: Accepted spellings of each unit, mapped to the symbol we display.
UNIT_ALIASES: dict[str, frozenset[str]] = {
    "Ω": frozenset({"Ω", "Ω", "ohm", "ohms", "Ohm", "Ohms", "R"}),
    "F": frozenset({"F"}),
    "H": frozenset({"H"}),
    "s": frozenset({"s", "sec"}),
    "V": frozenset({"V"}),
    "A": frozenset({"A"}),
    "J": frozenset({"J"}),
    "W": frozenset({"W"}),
}

# Only the scale factors an engineer writes on a schematic.  quantiphy also
# knows R (ronna, 1e27) and Q, which would turn the trade's "47R" (47 ohm) into
# 4.7e28 without a word; restricted, "47R" reads as 47 with the unit R (ohm).
_INPUT_SCALE_FACTORS = "TGMkmunpfaµμ"
_OUTPUT_SCALE_FACTORS = "TGMkmunpfa"

#: The IEC 60062 letter codes read for each unit: letter -> decimal exponent.  The letter
#: takes the place of the decimal point (``4k7`` is 4.7e3, ``R47`` is 0.47).  IEC 60062
#: writes kilo as ``K`` in resistance; ``k`` is the common practice of parts lists.
LETTER_CODES: dict[str, dict[str, int]] = {
    "Ω": {"R": 0, "k": 3, "K": 3, "M": 6, "G": 9, "T": 12},
    "F": {"p": -12, "n": -9, "u": -6, "µ": -6, "μ": -6, "m": -3},
    "H": {"p": -12, "n": -9, "u": -6, "µ": -6, "μ": -6, "m": -3},
}
_LETTER_CODE = re.compile(r"^(?P<whole>[0-9]*)(?P<letter>[A-Za-zµμ])(?P<fraction>[0-9]+)\s*(?P<unit>\S*)$")
_CAPITAL_KILO = re.compile(r"^(?P<number>[0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*K\s*(?P<unit>\S*)$")
#: Seconds in one count of each fixed numpy timedelta64 unit, as numerator and denominator.
_TIMEDELTA_SECONDS = {"W": (604800, 1), "D": (86400, 1), "h": (3600, 1), "m": (60, 1), "s": (1, 1),
                      "ms": (1, 10**3), "us": (1, 10**6), "ns": (1, 10**9), "ps": (1, 10**12),
                      "fs": (1, 10**15)}
_INFINITY = re.compile(r"^[-+]?inf(inity)?(\s|$)", re.IGNORECASE)
_SHOWN_LIMIT = 60
_PLAIN_NUMBERS = frozenset({float, int, np.float64, np.float32, np.int64, np.int32})
_FLAGS = frozenset({bool, np.bool_})
_NOT_A_NUMBER = "use a float or engineering notation such as '4.7k' or '100nF'"


def shown(value: object, limit: int = _SHOWN_LIMIT) -> str:
    """``repr(value)`` for an error message, shortened in the middle when it is long.

    Examples
    --------
    >>> shown("4.7k")
    "'4.7k'"
    >>> shown(10**400)
    '1000000000000000000000000…0000000000 (401 characters)'
    """
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) > 10**_SHOWN_LIMIT:
        text = str(value)  # repr of a huge int is limited (and slow) in recent Pythons
    else:
        text = repr(value)
    if len(text) <= limit:
        return text
    return f"{text[:25]}…{text[-10:]} ({len(text)} characters)"


def parse_value(value: object, *, field: str, unit: str | tuple[str, ...] = "", positive: bool = False,
                allow_infinite: bool = False) -> float:
    """Return ``value`` as a float in SI base units.

    Parameters
    ----------
    value : float, int or str
        A number, or engineering notation with an optional unit.
    field : str
        Name used in error messages (for example ``"r"`` or ``"drive.end"``).
    unit : str or tuple of str, optional
        The unit expected, such as ``"Ω"`` (or several allowed units); text
        carrying another unit is refused.
    positive : bool, optional
        Require ``value > 0``.
    allow_infinite : bool, optional
        Accept ``inf`` (an open switch with no leakage, say).

    Returns
    -------
    float

    Raises
    ------
    InputError
        Naming `field`, the value and what is allowed.

    See Also
    --------
    parse_with_unit : the same, and the unit the text gave.
    format_value : the other way.

    Examples
    --------
    >>> parse_value("2.2 MΩ", field="r_leak", unit="Ω")
    2200000.0
    >>> parse_value(-1.5, field="level")
    -1.5
    >>> parse_value("abc", field="r")
    Traceback (most recent call last):
    ...
    firstorder.errors.InputError: r: 'abc' is not a number (use a float or engineering notation such as '4.7k' or '100nF')
    """
    return parse_with_unit(value, field=field, unit=unit, positive=positive, allow_infinite=allow_infinite)[0]


def parse_with_unit(
    value: object,
    *,
    field: str,
    unit: str | tuple[str, ...] = "",
    positive: bool = False,
    allow_infinite: bool = False,
) -> tuple[float, str]:
    """Return ``value`` as a float in SI base units, and the unit its text gave (or ``""``).

    The one reading of a number; :func:`parse_value` keeps only the float.

    Parameters are those of :func:`parse_value`.

    Examples
    --------
    >>> parse_with_unit("1 mA", field="tolerance", unit=("V", "A"))
    (0.001, 'A')
    >>> parse_with_unit(0.5, field="tolerance", unit=("V", "A"))
    (0.5, '')
    """
    if type(value) is float:  # the common case first: the checks below cost more than the rest of a call
        number = value
        if math.isnan(number) or (math.isinf(number) and not allow_infinite) or (positive and not number > 0):
            return _checked(number, value, field, positive, allow_infinite), ""
        return number, ""
    if isinstance(value, (bool, np.bool_)):
        raise InputError(f"{field}: {bool(value)!r} is not a number; write 1 or 0 (True and False are switch "
                         f"states)")
    found = ""
    if isinstance(value, np.timedelta64):  # before Integral: numpy registers it as one
        if "s" not in _units(unit):
            raise InputError(f"{field}: {shown(value)} is a duration; give a number ({_NOT_A_NUMBER})")
        number = float(_timedelta_seconds(np.asarray(value), field)[()])
    elif isinstance(value, Integral):
        number = _integer(value, field)
    elif isinstance(value, Real):
        number = float(value)
    elif isinstance(value, str):
        number, found = _parse_text(value, field=field, unit=unit)
    else:
        raise InputError(f"{field}: {shown(value)} is not a number ({_NOT_A_NUMBER})")
    return _checked(number, value, field, positive, allow_infinite), found


def _checked(number: float, value: object, field: str, positive: bool, allow_infinite: bool) -> float:
    """`number` (read from `value`) if it is allowed: not NaN, finite unless
    `allow_infinite`, > 0 if `positive`."""
    if math.isnan(number) or (math.isinf(number) and not allow_infinite):
        allowed = "a finite number" if not allow_infinite else "a number or inf"
        raise InputError(f"{field}: {shown(value)} is not allowed; expected {allowed}")
    if positive and not number > 0:
        raise InputError(f"{field}: {shown(value)} must be > 0")
    return number


def _units(unit: str | tuple[str, ...]) -> tuple[str, ...]:
    return tuple(u for u in ((unit,) if isinstance(unit, str) else unit) if u)


def _integer(value: Integral, field: str) -> float:
    try:
        return float(value)
    except OverflowError:
        raise InputError(
            f"{field}: {shown(value)} is too large for a number (a float reaches about 1.8e308)"
        ) from None


def _parse_text(text: str, *, field: str, unit: str | tuple[str, ...]) -> tuple[float, str]:
    stripped = text.strip()
    if "," in stripped:
        example = repr(stripped.replace(",", ".")) if stripped.count(",") == 1 else "1.5k, not 1,5k"
        raise InputError(
            f"{field}: {shown(text)} has a comma; a comma is never a decimal or thousands mark here: "
            f"write {example}"
        )
    if stripped.lower() in {"inf", "+inf", "infinity"}:
        return math.inf, ""
    if stripped.lower() in {"-inf", "-infinity"}:
        return -math.inf, ""
    allowed = _units(unit)
    coded = _letter_code(stripped, allowed, field)
    if coded is not None:
        stripped = coded
    try:
        with Quantity.prefs(input_sf=_INPUT_SCALE_FACTORS):
            quantity = Quantity(stripped)
    except (InvalidNumber, ValueError) as error:
        raise InputError(f"{field}: {shown(text)} is not a number ({_NOT_A_NUMBER})") from error
    found = quantity.units or ""
    if found:
        symbol = next((u for u in allowed if found in UNIT_ALIASES.get(u, frozenset({u}))), None)
        if symbol is None:
            expected = " or ".join(f"'{u}'" for u in allowed) + " or no unit" if allowed else "no unit"
            raise InputError(f"{field}: {shown(text)} has unit {found!r}; expected {expected}")
        found = symbol
    number = float(quantity.real)
    if math.isinf(number) and not _INFINITY.match(stripped):  # inf written out is read as such
        raise InputError(f"{field}: {shown(text)} is too large for a number (a float reaches about 1.8e308)")
    return number, found


def _letter_code(text: str, allowed: tuple[str, ...], field: str) -> str | None:
    """`text` in plain engineering notation if it is an IEC 60062 letter code (or a capital K
    for kilo) of one of the `allowed` units, else None (quantiphy then reads it as it is)."""
    codes = [LETTER_CODES[u] for u in allowed if u in LETTER_CODES]
    if not codes:
        return None
    match = _LETTER_CODE.match(text)
    if match and any(match["letter"] in code for code in LETTER_CODES.values()):  # not 1e3's exponent
        exponents = {code.get(match["letter"]) for code in codes}
        if len(exponents) != 1 or None in exponents:
            letters = ", ".join(dict.fromkeys(letter for code in codes for letter in code))
            raise InputError(
                f"{field}: {shown(text)} reads as an IEC 60062 letter code, but {match['letter']!r} is not a "
                f"letter for {' or '.join(allowed)}; the letters are {letters} (or write it out, such as '4.7k')"
            )
        number = f"{match['whole'] or '0'}.{match['fraction']}e{exponents.pop()}"
        return f"{number} {match['unit']}".strip()
    match = _CAPITAL_KILO.match(text)
    if match and all(code.get("K") == 3 for code in codes):
        return f"{match['number']}e3 {match['unit']}".strip()
    return None


def _timedelta_seconds(array: np.ndarray, field: str) -> np.ndarray:
    """A timedelta64 array in seconds: each count times the unit's seconds, one correctly
    rounded division (exact counts only: beyond 2**53 a count has no exact float)."""
    unit, step = np.datetime_data(array.dtype)
    if unit not in _TIMEDELTA_SECONDS:
        raise InputError(
            f"{field}: timedelta64[{unit}] has no fixed length in seconds; use a unit from weeks (W) "
            f"down to femtoseconds (fs)"
        )
    counts = array.astype(np.int64)
    if np.isnat(array).any():
        raise InputError(f"{field}: contains NaT; times must be finite")
    numerator, denominator = _TIMEDELTA_SECONDS[unit]
    numerator *= step
    if counts.size and int(np.abs(counts).max()) * numerator > 2**53:
        raise InputError(f"{field}: a timedelta64[{unit}] count beyond 2**53 has no exact value in seconds")
    scaled = counts.astype(np.float64) * numerator  # exact: below 2**53
    return scaled / denominator if denominator != 1 else scaled


def parse_array(values: Any, *, field: str, unit: str | tuple[str, ...] = "", allow_bool: bool = False,
                what: str = "values") -> np.ndarray:
    """`values` as a new 1-D float64 array, each item read as :func:`parse_value` reads one.

    Numeric arrays are converted at once; a list of numbers too; other items (text,
    huge integers) one by one, named ``field[i]`` in errors.  Refused, naming `field`:
    anything that is not a list or 1-D array (a number, a dict, None, a 2-D array, named
    with its shape), booleans unless `allow_bool` (a switch column), complex numbers,
    datetime64, and timedelta64 unless `unit` is seconds (then converted exactly).
    Finiteness is left to the caller (one pass over the result).

    Examples
    --------
    >>> parse_array([0, "1m", 2.5e-3], field="times", unit="s")
    array([0.    , 0.001 , 0.0025])
    >>> parse_array(np.array([0, 5], dtype="timedelta64[ms]"), field="times", unit="s")
    array([0.   , 0.005])
    >>> parse_array(np.zeros((2, 3)), field="times")
    Traceback (most recent call last):
    ...
    firstorder.errors.InputError: times: a 2-D array of shape (2, 3); give a 1-D list or array of values
    """
    if isinstance(values, np.ndarray) and not (values.dtype.kind == "O" and values.ndim == 1):
        array = values
    elif isinstance(values, (str, bytes, dict, set, frozenset)) or not hasattr(values, "__iter__"):
        raise InputError(f"{field}: {shown(values)} is not a list; give a 1-D list or array of {what}")
    else:
        items = list(values)
        types = set(map(type, items))
        if types <= (_PLAIN_NUMBERS | _FLAGS if allow_bool else _PLAIN_NUMBERS):  # converted at once
            try:
                return np.array(items, dtype=np.float64)
            except OverflowError:
                pass  # an integer past a float: read one by one below, to name it
        array = np.array(items, dtype=object)
        if array.ndim == 1 and array.size == len(items) and not any(
                isinstance(item, (list, tuple, np.ndarray)) for item in items):
            return _object_items(items, field, unit, allow_bool)
    if array.ndim != 1:
        raise InputError(f"{field}: a {array.ndim}-D array of shape {array.shape}; give a 1-D list or array of {what}")
    kind = array.dtype.kind
    if kind in "iuf" or (kind == "b" and allow_bool):
        return array.astype(np.float64, copy=True)
    if kind == "m" and "s" in _units(unit):
        return _timedelta_seconds(array, field)
    if kind in "OUS":
        return _object_items(array.tolist(), field, unit, allow_bool)
    described = {"b": "booleans (True and False are not numbers)", "c": "complex numbers",
                 "M": "absolute dates (datetime64); give times in seconds", "m": "durations (timedelta64)"}
    raise InputError(f"{field}: an array of {described.get(kind, str(array.dtype))}; give {what} as numbers")


def _object_items(items: list, field: str, unit: str | tuple[str, ...], allow_bool: bool) -> np.ndarray:
    out = np.empty(len(items))
    for i, item in enumerate(items):
        if allow_bool and isinstance(item, (bool, np.bool_)):
            out[i] = float(item)
        elif type(item) is float:
            out[i] = item
        else:
            out[i] = parse_value(item, field=f"{field}[{i}]", unit=unit, allow_infinite=True)
    return out


#: A value below this fraction of the scale it belongs to (the step of its segment, say)
#: is rounding left over, not a reading: :func:`format_value` writes it as 0.
NEGLIGIBLE = 1e-12


def format_value(value: float, unit: str = "", digits: int = 4, scale: float | None = None) -> str:
    """Return `value` in engineering notation, for display.

    Parameters
    ----------
    value : float
    unit : str, optional
    digits : int, optional
        Significant digits kept (trailing zeros are dropped).
    scale : float, optional
        The size of what `value` belongs to (a segment's step, the largest value of
        its column): a value smaller than :data:`NEGLIGIBLE` (1e-12) times it is
        written as 0.  A decaying state is exactly 0 only in the limit; 60 mA decayed
        for 260 time constants is 7e-115 A, which no reader takes as a current.

    See Also
    --------
    parse_value : the other way.
    firstorder.plotting.format.format_many : many values at once.

    Examples
    --------
    >>> format_value(1e-7, "F")
    '100 nF'
    >>> format_value(0.0, "V")
    '0 V'
    >>> format_value(float("inf"), "s")
    'inf s'
    >>> format_value(7.271e-115, "A"), format_value(7.271e-115, "A", scale=0.06)
    ('727.1e-117 A', '0 A')
    """
    if scale is not None and math.isfinite(scale) and abs(value) < NEGLIGIBLE * abs(scale):
        value = 0.0
    if math.isinf(value) or math.isnan(value):
        text = repr(float(value))
        return f"{text} {unit}".strip()
    with Quantity.prefs(map_sf=Quantity.map_sf_to_greek, output_sf=_OUTPUT_SCALE_FACTORS):
        return Quantity(value, unit).render(prec=digits - 1, strip_zeros=True)

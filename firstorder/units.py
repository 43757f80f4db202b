"""Engineering notation in and out, on top of quantiphy.

Part values, levels and times may be given as floats in SI base units or as
text such as ``"4.7k"``, ``"4.7µ"``, ``"100nF"`` or ``"2.2 MΩ"``.  Text is parsed
by quantiphy's number grammar only; nothing is ever evaluated.

Examples
--------
>>> parse_value("4.7k", field="r", unit="Ω")
4700.0
>>> parse_value("100 nF", field="c", unit="F")
1e-07
>>> parse_value("1m", field="end", unit="s")
0.001
>>> format_value(4.7e3, "Ω")
'4.7 kΩ'
"""

from __future__ import annotations

import math
from numbers import Real

from quantiphy import InvalidNumber, Quantity

from .errors import InputError

__all__ = ["parse_value", "format_value", "UNIT_ALIASES"]

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


def parse_value(
    value: object,
    *,
    field: str,
    unit: str | tuple[str, ...] = "",
    positive: bool = False,
    allow_infinite: bool = False,
) -> float:
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
    if isinstance(value, bool):
        number = float(value)
    elif isinstance(value, Real):
        number = float(value)
    elif isinstance(value, str):
        number = _parse_text(value, field=field, unit=unit)
    else:
        raise InputError(
            f"{field}: {value!r} is not a number "
            f"(use a float or engineering notation such as '4.7k')"
        )
    if math.isnan(number) or (math.isinf(number) and not allow_infinite):
        allowed = "a finite number" if not allow_infinite else "a number or inf"
        raise InputError(f"{field}: {value!r} is not allowed; expected {allowed}")
    if positive and not number > 0:
        raise InputError(f"{field}: {value!r} must be > 0")
    return number


def _parse_text(text: str, *, field: str, unit: str | tuple[str, ...]) -> float:
    stripped = text.strip()
    if stripped.lower() in {"inf", "+inf", "infinity"}:
        return math.inf
    if stripped.lower() in {"-inf", "-infinity"}:
        return -math.inf
    try:
        with Quantity.prefs(input_sf=_INPUT_SCALE_FACTORS):
            quantity = Quantity(stripped)
    except (InvalidNumber, ValueError) as error:
        raise InputError(
            f"{field}: {text!r} is not a number (use a float or engineering "
            f"notation such as '4.7k' or '100nF')"
        ) from error
    found = quantity.units or ""
    if found:
        allowed = (unit,) if isinstance(unit, str) else unit
        allowed = tuple(u for u in allowed if u)
        if not any(found in UNIT_ALIASES.get(u, frozenset({u})) for u in allowed):
            expected = " or ".join(f"'{u}'" for u in allowed) + " or no unit" if allowed else "no unit"
            raise InputError(f"{field}: {text!r} has unit {found!r}; expected {expected}")
    return float(quantity.real)


def format_value(value: float, unit: str = "", digits: int = 4) -> str:
    """Return `value` in engineering notation, for display.

    Parameters
    ----------
    value : float
    unit : str, optional
    digits : int, optional
        Significant digits kept (trailing zeros are dropped).

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
    """
    if math.isinf(value) or math.isnan(value):
        text = repr(float(value))
        return f"{text} {unit}".strip()
    with Quantity.prefs(map_sf=Quantity.map_sf_to_greek, output_sf=_OUTPUT_SCALE_FACTORS):
        return Quantity(value, unit).render(prec=digits - 1, strip_zeros=True)

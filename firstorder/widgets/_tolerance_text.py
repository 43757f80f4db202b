"""Tolerance typed as text ("1 mV", "0.1 %", "10 ppm of 5 V", "0.5 LSB of 16 bits on 5 V").

Read with regular expressions and :func:`firstorder.units.parse_value` only;
nothing is evaluated.
"""

from __future__ import annotations

import re

from ..errors import InputError
from ..settling import Tolerance

__all__ = ["parse_tolerance", "tolerance_text"]

_PERCENT = re.compile(r"^\s*(?P<number>[^%]+?)\s*%\s*$")
_PPM = re.compile(r"^\s*(?P<ppm>\S+)\s*ppm\s+of\s+(?P<span>.+?)\s*$", re.IGNORECASE)
_LSB = re.compile(r"^\s*(?P<fraction>\S+)\s*LSB\s+of\s+(?P<bits>\d+)\s*bits?\s+on\s+(?P<span>.+?)\s*$", re.IGNORECASE)
_HELP = "'1 mV' (absolute), '0.1 %' (of each step), '10 ppm of 5 V' or '0.5 LSB of 16 bits on 5 V'"


def parse_tolerance(text: str, unit: str = "V") -> Tolerance | None:
    """A :class:`Tolerance` from text, or None for an empty field.

    Examples
    --------
    >>> parse_tolerance("0.5 LSB of 16 bits on 5 V")
    Tolerance.lsb(bits=16, span=5.0, fraction=0.5)
    >>> parse_tolerance("0.1 %")
    Tolerance.relative(fraction=0.001)
    >>> parse_tolerance("2m")
    Tolerance.absolute(value=0.002)
    """
    stripped = str(text).strip()
    if not stripped:
        return None
    try:
        match = _LSB.match(stripped)
        if match:
            return Tolerance.lsb(int(match["bits"]), match["span"], _fraction(match["fraction"]), unit=unit)
        match = _PPM.match(stripped)
        if match:
            return Tolerance.ppm(match["ppm"], match["span"], unit=unit)
        match = _PERCENT.match(stripped)
        if match:
            from ..units import parse_value

            return Tolerance.relative(parse_value(match["number"], field="tolerance (percent)") / 100.0, unit=unit)
        return Tolerance.absolute(stripped, unit=unit)
    except InputError as error:
        raise InputError(f"tolerance: {text!r} is not understood ({error}); write {_HELP}") from None


def _fraction(text: str) -> float:
    from ..units import parse_value

    return {"½": 0.5, "¼": 0.25}.get(text) or parse_value(text, field="tolerance (LSB fraction)")


def tolerance_text(tolerance: Tolerance | None) -> str:
    """Text that :func:`parse_tolerance` reads back to `tolerance`.

    Examples
    --------
    >>> tolerance_text(Tolerance.ppm(10, 5.0))
    '10 ppm of 5 V'
    """
    if tolerance is None:
        return ""
    from ..units import format_value

    unit = tolerance.unit
    if tolerance.kind == "absolute":
        return format_value(tolerance.value, unit, digits=6)
    if tolerance.kind == "relative":
        return f"{tolerance.value * 100:g} %"
    if tolerance.kind == "ppm":
        return f"{tolerance.value:g} ppm of {format_value(tolerance.span, unit, digits=6)}"
    return f"{tolerance.fraction:g} LSB of {tolerance.bits} bits on {format_value(tolerance.span, unit, digits=6)}"

"""Tolerance: how close to its final value a node must be, and its text form.

A :class:`Tolerance` turns each segment's step into the absolute error limit the
engineer accepts at the sample instant: a fixed value, a fraction of the step,
parts per million of a span, or a fraction of a converter's LSB.  Its text form
("1 mV", "0.1 %", "10 ppm of 5 V", "0.5 LSB of 16 bits on 5 V") is read with
regular expressions and :func:`firstorder.units.parse_value` only; nothing is
evaluated.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import lru_cache
from numbers import Integral
from typing import Any

import numpy as np

from ..errors import InputError
from ..units import format_value, parse_value, parse_with_unit, shown

__all__ = ["Tolerance", "parse_tolerance", "tolerance_text"]

_KINDS = ("absolute", "relative", "ppm", "lsb")
_FRACTION_WORDS = {0.5: "½", 0.25: "¼", 1.0: "1"}


@dataclass(frozen=True, slots=True)
class Tolerance:
    """How close to its final value a node must be.

    Build with one of the factories: :meth:`absolute`, :meth:`relative`,
    :meth:`ppm` or :meth:`lsb`.

    Examples
    --------
    >>> Tolerance.lsb(bits=16, span=5.0)
    Tolerance.lsb(bits=16, span=5.0, fraction=0.5)
    >>> print(Tolerance.lsb(bits=16, span=5.0))
    ±38.15 µV (½ LSB of 16 bits on 5 V)
    >>> float(Tolerance.relative(0.01).limit(np.array([2.0]))[0])
    0.02
    """

    kind: str
    value: float
    span: float = math.nan
    bits: int = 0
    fraction: float = 0.5
    unit: str = "V"

    def __post_init__(self) -> None:
        if self.kind not in _KINDS:
            raise InputError(f"tolerance kind: {shown(self.kind)} is not one of {list(_KINDS)}")
        if self.unit not in ("V", "A"):
            raise InputError(f"tolerance.unit: {shown(self.unit)} must be 'V' or 'A'")
        # Built directly or by a factory, a tolerance holds only numbers that make sense:
        # a NaN or negative limit would pass or fail every sample without a word.
        for name, number in (("value", self.value), ("span", self.span), ("fraction", self.fraction)):
            if name == "span" and self.kind in ("absolute", "relative"):
                continue
            if isinstance(number, bool) or not isinstance(number, (int, float)) or not 0 < number < math.inf:
                raise InputError(f"tolerance.{name}: {shown(number)} is not allowed; expected a finite number > 0")
        if self.kind == "relative" and not self.value < 1.0:
            raise InputError(f"tolerance.fraction: {self.value!r} must be < 1 (0.01 is 1 %)")

    # -- factories ------------------------------------------------------------------
    # A tolerance carries its unit: the one its text gives ("1 mA" is in A), else `unit`
    # (V by default); a text in one unit with `unit` naming the other is refused.  Where it
    # meets the watched quantity (settling.table.check_unit) a unit mismatch is refused too.
    @classmethod
    def absolute(cls, value: Any, unit: str | None = None) -> "Tolerance":
        """A fixed limit, in the unit of the watched quantity (V or A).

        Examples
        --------
        >>> Tolerance.absolute("1 mA").unit, Tolerance.absolute(1e-3).unit
        ('A', 'V')
        """
        limit, found = parse_with_unit(value, field="tolerance.value", unit=("V", "A"), positive=True)
        return cls("absolute", limit, unit=_unit(value, found, unit, "tolerance.value"))

    @classmethod
    def relative(cls, fraction: Any, unit: str | None = None) -> "Tolerance":
        """A fraction of each segment's step ``|final - start value|`` (0 < fraction < 1)."""
        number = parse_value(fraction, field="tolerance.fraction", positive=True)
        if not number < 1.0:
            raise InputError(f"tolerance.fraction: {shown(fraction)} must be < 1 (0.01 is 1 %)")
        return cls("relative", number, unit=_unit(fraction, "", unit, "tolerance.fraction"))

    @classmethod
    def ppm(cls, ppm: Any, span: Any, unit: str | None = None) -> "Tolerance":
        """`ppm` parts per million of `span` (the full scale, V or A)."""
        parts = parse_value(ppm, field="tolerance.ppm", positive=True)
        full, found = parse_with_unit(span, field="tolerance.span", unit=("V", "A"), positive=True)
        return cls("ppm", parts, span=full, unit=_unit(span, found, unit, "tolerance.span"))

    @classmethod
    def lsb(cls, bits: Any, span: Any, fraction: Any = 0.5, unit: str | None = None) -> "Tolerance":
        """`fraction` of one LSB of a `bits`-bit converter over `span` (V or A)."""
        if isinstance(bits, bool) or not isinstance(bits, Integral) or not 1 <= bits <= 32:
            raise InputError(f"tolerance.bits: {shown(bits)} must be a whole number from 1 to 32")
        full, found = parse_with_unit(span, field="tolerance.span", unit=("V", "A"), positive=True)
        unit = _unit(span, found, unit, "tolerance.span")
        part = parse_value(fraction, field="tolerance.fraction", positive=True)
        if not part <= 1.0:
            raise InputError(f"tolerance.fraction: {shown(fraction)} must be in (0, 1]")
        return cls("lsb", part * full / 2.0 ** int(bits), span=full, bits=int(bits), fraction=part, unit=unit)

    def in_unit(self, unit: str) -> "Tolerance":
        """The same numbers for a quantity in `unit` (V or A): the Bench keeps a limit while
        what it watches changes from a voltage to a current.

        Examples
        --------
        >>> Tolerance.absolute("1m").in_unit("A")
        Tolerance.absolute(value=0.001, unit='A')
        """
        return self if unit == self.unit else Tolerance(self.kind, self.value, self.span, self.bits, self.fraction, unit)

    # -- use -----------------------------------------------------------------------------
    def limit(self, step: np.ndarray) -> np.ndarray:
        """The absolute limit for segments whose steps are `step` (``|final - start|``)."""
        step = np.abs(np.asarray(step, dtype=float))
        if self.kind == "relative":
            return self.value * step
        if self.kind == "ppm":
            return np.full(step.shape, self.value * 1e-6 * self.span)
        return np.full(step.shape, self.value)

    def _scale(self) -> tuple[float, bool]:
        """``(value, relative)``: the limit is ``value * step`` if relative, else ``value``."""
        if self.kind == "relative":
            return self.value, True
        return (self.value * 1e-6 * self.span if self.kind == "ppm" else self.value), False

    def to_dict(self) -> dict[str, Any]:
        """Plain data for saving (see :meth:`from_dict`)."""
        if self.kind == "absolute":
            data: dict[str, Any] = {"kind": "absolute", "value": self.value}
        elif self.kind == "relative":
            data = {"kind": "relative", "fraction": self.value}
        elif self.kind == "ppm":
            data = {"kind": "ppm", "ppm": self.value, "span": self.span}
        else:
            data = {"kind": "lsb", "bits": self.bits, "span": self.span, "fraction": self.fraction}
        if self.unit != "V":
            data["unit"] = self.unit
        return data

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "Tolerance":
        """Rebuild a tolerance saved by :meth:`to_dict`."""
        if not isinstance(data, dict):
            raise InputError(f"tolerance: {shown(data)} is not a mapping; expected one such as "
                             f"{{'kind': 'absolute', 'value': 0.001}} (kind one of {list(_KINDS)})")
        kind = data.get("kind")
        arguments = {k: v for k, v in data.items() if k != "kind"}
        factory = {"absolute": cls.absolute, "relative": cls.relative, "ppm": cls.ppm, "lsb": cls.lsb}.get(kind)
        if factory is None:
            raise InputError(f"tolerance.kind: {shown(kind)} is not one of {list(_KINDS)}")
        try:
            return factory(**arguments)
        except TypeError as error:
            raise InputError(f"tolerance: {arguments!r} do not fit kind {kind!r} ({error})") from None

    def __repr__(self) -> str:
        arguments = ", ".join(f"{k}={v!r}" for k, v in self.to_dict().items() if k != "kind")
        return f"Tolerance.{self.kind}({arguments})"

    def __str__(self) -> str:
        return _described(self)

    def _describe(self) -> str:
        if self.kind == "absolute":
            return f"±{_phrase(self, digits=4)}"
        if self.kind == "relative":
            return f"±{_phrase(self, digits=4)} of each step"
        limit = self.value * 1e-6 * self.span if self.kind == "ppm" else self.value
        return f"±{format_value(limit, self.unit)} ({_phrase(self, digits=4, glyphs=True)})"


def _unit(given: Any, found: str, unit: str | None, field: str) -> str:
    """The unit of a tolerance: the one its text gave (`found`), else `unit`, else V."""
    if unit is not None and unit not in ("V", "A"):
        raise InputError(f"tolerance.unit: {shown(unit)} must be 'V' or 'A'")
    if found and unit is not None and found != unit:
        raise InputError(f"{field}: {shown(given)} is in {found}, but the tolerance is for a quantity in {unit}; "
                         f"give it in {unit}")
    return found or unit or "V"


def _phrase(tolerance: Tolerance, digits: int, glyphs: bool = False) -> str:
    """The tolerance in the words :func:`parse_tolerance` reads: ``"1 mV"``, ``"0.1 %"``,
    ``"10 ppm of 5 V"``, ``"0.5 LSB of 16 bits on 5 V"`` (``"½ LSB ..."`` with `glyphs`).
    The one writing of a tolerance, shown (``str``) and editable (:func:`tolerance_text`)."""
    unit = tolerance.unit
    if tolerance.kind == "absolute":
        return format_value(tolerance.value, unit, digits=digits)
    if tolerance.kind == "relative":
        return f"{tolerance.value * 100:g} %"
    span = format_value(tolerance.span, unit, digits=digits)
    if tolerance.kind == "ppm":
        return f"{tolerance.value:g} ppm of {span}"
    share = _FRACTION_WORDS.get(tolerance.fraction, f"{tolerance.fraction:g}") if glyphs else f"{tolerance.fraction:g}"
    return f"{share} LSB of {tolerance.bits} bits on {span}"


@lru_cache(maxsize=256)
def _described(tolerance: Tolerance) -> str:
    # Engineering notation costs tens of microseconds; a table or a plot asks for the same
    # tolerance's text again and again.
    return tolerance._describe()


_PERCENT = re.compile(r"^\s*(?P<number>[^%]+?)\s*%\s*$")
_PPM = re.compile(r"^\s*(?P<ppm>\S+)\s*ppm\s+of\s+(?P<span>.+?)\s*$", re.IGNORECASE)
_LSB = re.compile(r"^\s*(?P<fraction>\S+)\s*LSB\s+of\s+(?P<bits>\d+)\s*bits?\s+on\s+(?P<span>.+?)\s*$", re.IGNORECASE)
_HELP = "'1 mV' (absolute), '0.1 %' (of each step), '10 ppm of 5 V' or '0.5 LSB of 16 bits on 5 V'"


def parse_tolerance(text: str, unit: str = "V") -> Tolerance | None:
    """A :class:`Tolerance` from text, or None for an empty field.

    See Also
    --------
    tolerance_text : the other way.
    Tolerance : the factories.

    Examples
    --------
    >>> parse_tolerance("0.5 LSB of 16 bits on 5 V")
    Tolerance.lsb(bits=16, span=5.0, fraction=0.5)
    >>> parse_tolerance("0.1 %")
    Tolerance.relative(fraction=0.001)
    >>> parse_tolerance("2m")
    Tolerance.absolute(value=0.002)
    >>> tolerance = Tolerance.lsb(bits=16, span=5.0)
    >>> parse_tolerance(str(tolerance)) == tolerance    # what str() shows reads back too
    True
    """
    stripped = _as_written(str(text).strip())
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
            return Tolerance.relative(parse_value(match["number"], field="tolerance (percent)") / 100.0, unit=unit)
        return Tolerance.absolute(stripped, unit=unit)
    except InputError as error:
        raise InputError(f"tolerance: {text!r} is not understood ({error}); write {_HELP}") from None


def _as_written(text: str) -> str:
    """The words inside a tolerance as ``str()`` shows it: ``"±38.15 µV (½ LSB of 16 bits on 5 V)"``
    reads as its parenthesis, ``"±0.1 % of each step"`` as ``"0.1 %"``, ``"±1 mV"`` as ``"1 mV"``."""
    if not text.startswith("±"):
        return text
    text = text[1:].strip()
    if text.endswith(")") and "(" in text:
        return text[text.index("(") + 1:-1].strip()
    return text.removesuffix("of each step").strip()


def _fraction(text: str) -> float:
    return {"½": 0.5, "¼": 0.25}.get(text) or parse_value(text, field="tolerance (LSB fraction)")


def tolerance_text(tolerance: Tolerance | None) -> str:
    """Text that :func:`parse_tolerance` reads back to `tolerance`.

    See Also
    --------
    parse_tolerance : the other way.

    Examples
    --------
    >>> tolerance_text(Tolerance.ppm(10, 5.0))
    '10 ppm of 5 V'
    """
    if tolerance is None:
        return ""
    return _phrase(tolerance, digits=6)

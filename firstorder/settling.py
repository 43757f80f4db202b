"""Settling: tolerances, and (later in this module) settling tables and plans.

A :class:`Tolerance` turns each segment's step into the absolute error limit the
engineer accepts at the sample instant.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from numbers import Integral
from typing import Any

import numpy as np

from .errors import InputError
from .units import format_value, parse_value

__all__ = ["Tolerance"]

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
            raise InputError(f"tolerance kind: {self.kind!r} is not one of {list(_KINDS)}")
        if self.unit not in ("V", "A"):
            raise InputError(f"tolerance.unit: {self.unit!r} must be 'V' or 'A'")

    # -- factories ------------------------------------------------------------------
    @classmethod
    def absolute(cls, value: Any, unit: str = "V") -> "Tolerance":
        """A fixed limit, in the unit of the watched quantity (V or A)."""
        limit = parse_value(value, field="tolerance.value", unit=("V", "A"), positive=True)
        return cls("absolute", limit, unit=unit)

    @classmethod
    def relative(cls, fraction: Any, unit: str = "V") -> "Tolerance":
        """A fraction of each segment's step ``|final - start value|`` (0 < fraction < 1)."""
        number = parse_value(fraction, field="tolerance.fraction", positive=True)
        if not number < 1.0:
            raise InputError(f"tolerance.fraction: {fraction!r} must be < 1 (0.01 is 1 %)")
        return cls("relative", number, unit=unit)

    @classmethod
    def ppm(cls, ppm: Any, span: Any, unit: str = "V") -> "Tolerance":
        """`ppm` parts per million of `span` (the full scale, V or A)."""
        parts = parse_value(ppm, field="tolerance.ppm", positive=True)
        full = parse_value(span, field="tolerance.span", unit=("V", "A"), positive=True)
        return cls("ppm", parts, span=full, unit=unit)

    @classmethod
    def lsb(cls, bits: Any, span: Any, fraction: Any = 0.5, unit: str = "V") -> "Tolerance":
        """`fraction` of one LSB of a `bits`-bit converter over `span` (V or A)."""
        if isinstance(bits, bool) or not isinstance(bits, Integral) or not 1 <= bits <= 32:
            raise InputError(f"tolerance.bits: {bits!r} must be a whole number from 1 to 32")
        full = parse_value(span, field="tolerance.span", unit=("V", "A"), positive=True)
        part = parse_value(fraction, field="tolerance.fraction", positive=True)
        if not part <= 1.0:
            raise InputError(f"tolerance.fraction: {fraction!r} must be in (0, 1]")
        return cls("lsb", part * full / 2.0 ** int(bits), span=full, bits=int(bits), fraction=part, unit=unit)

    # -- use -----------------------------------------------------------------------------
    def limit(self, step: np.ndarray) -> np.ndarray:
        """The absolute limit for segments whose steps are `step` (``|final - start|``)."""
        step = np.abs(np.asarray(step, dtype=float))
        if self.kind == "relative":
            return self.value * step
        if self.kind == "ppm":
            return np.full(step.shape, self.value * 1e-6 * self.span)
        return np.full(step.shape, self.value)

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
        kind = data.get("kind")
        arguments = {k: v for k, v in data.items() if k != "kind"}
        factory = {"absolute": cls.absolute, "relative": cls.relative, "ppm": cls.ppm, "lsb": cls.lsb}.get(kind)
        if factory is None:
            raise InputError(f"tolerance.kind: {kind!r} is not one of {list(_KINDS)}")
        try:
            return factory(**arguments)
        except TypeError as error:
            raise InputError(f"tolerance: {arguments!r} do not fit kind {kind!r} ({error})") from None

    def __repr__(self) -> str:
        arguments = ", ".join(f"{k}={v!r}" for k, v in self.to_dict().items() if k != "kind")
        return f"Tolerance.{self.kind}({arguments})"

    def __str__(self) -> str:
        unit = self.unit
        if self.kind == "absolute":
            return f"±{format_value(self.value, unit)}"
        if self.kind == "relative":
            return f"±{self.value * 100:g} % of each step"
        if self.kind == "ppm":
            return f"±{format_value(self.value * 1e-6 * self.span, unit)} ({self.value:g} ppm of {format_value(self.span, unit)})"
        share = _FRACTION_WORDS.get(self.fraction, f"{self.fraction:g}")
        return f"±{format_value(self.value, unit)} ({share} LSB of {self.bits} bits on {format_value(self.span, unit)})"

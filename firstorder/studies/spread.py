"""Spread: how the units of a lot differ from the nominal fixture, and drawing them.

A :class:`Spread` maps quantities to bands: a part's value (``"r_filter"``), a
switch's on or off resistance (``"k1.r_on"``, ``"k1.r_off"``), a source's gain and
offset (``"vdac.gain"``, ``"vdac.offset"``: its level becomes ``level * (1 + gain) +
offset``), and optionally a temperature range with a temperature coefficient per
quantity.  A band is

* ``"1%"`` (or ``"±1%"``, ``"100ppm"``): uniform within ±1 % of nominal.  A stated
  bound with nothing else known is taken as rectangular (JCGM 100, 4.3.7);
* ``"1m"`` (or a number): uniform within ±1 m of nominal, in the quantity's unit;
* :class:`Uniform` ``(low, high)``: relative deviations (``"-20%"``, ``"+80%"``) or
  absolute values (``"50m"``, ``"300m"``);
* :class:`Normal` ``(sd, within=None)``: normal with that standard deviation
  (relative or absolute), truncated at ±`within` if given.

Every unit draws each quantity independently, and its temperature once.  Unit ``k``'s
draws depend only on ``(seed, k)``: units come in fixed chunks of :data:`CHUNK`, chunk
``c`` from ``numpy.random.SeedSequence(seed).spawn(c + 1)[c]``, whatever the number of
threads, processes or machines that draw them.

Examples
--------
>>> spread = Spread({"r": "1%", "c": Normal("3%"), "vin.offset": "1m"}, temperature=(0, 50),
...                 tempco={"c": "-750ppm"})
>>> print(spread)
r ±1%; c normal 3%; vin.offset ±1m; temperature 0 .. 50; tempco c -750ppm
>>> Spread.from_text(str(spread)) == spread
True
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import InputError
from ..netlist import PART_UNITS, SOURCE_UNITS
from ..units import parse_value

if TYPE_CHECKING:
    from ..fixture import Fixture

__all__ = ["CHUNK", "Normal", "Quantity", "Spread", "Uniform", "draw_uniforms"]

#: Units per chunk of draws: fixed, so that unit k's draws never depend on how the work is split.
CHUNK = 4096
#: Temperature coefficients are taken from this temperature (°C).
REFERENCE_TEMPERATURE = 25.0
_RELATIVE = re.compile(r"^\s*(?P<number>[-+]?[^%a-zA-Z\s]+)\s*(?P<scale>%|ppm)\s*$")
_HELP = ("'1%', '100ppm', '±2m', fo.Uniform('-20%', '+80%'), fo.Uniform('50m', '300m'), fo.Normal('3%') or "
         "fo.Normal('2m', within='6m')")


@dataclass(frozen=True, slots=True)
class _Number:
    """A number as typed, read: a relative deviation (``"%"``, ``"ppm"``) or an absolute one."""

    text: str
    value: float
    relative: bool


def _number(value: Any, field: str) -> _Number:
    if isinstance(value, bool) or not isinstance(value, (str, int, float, np.number)):
        raise InputError(f"{field}: {value!r} is not a number; write {_HELP}")
    if isinstance(value, str):
        match = _RELATIVE.match(value)
        if match:
            number = parse_value(match["number"], field=field)
            return _Number(value.strip(), number / (100.0 if match["scale"] == "%" else 1e6), True)
        text = value.strip()
    else:
        text = repr(float(value))
    return _Number(text, parse_value(value, field=field), False)


@dataclass(frozen=True, slots=True)
class Uniform:
    """Uniform between `low` and `high`: relative deviations from nominal (``"-20%"``,
    ``"+80%"``) or absolute values of the quantity (``"50m"``, ``"300m"``).

    Examples
    --------
    >>> Uniform("-20%", "+80%")
    Uniform('-20%', '+80%')
    >>> Uniform("1%", "-1%")
    Traceback (most recent call last):
    ...
    firstorder.errors.InputError: Uniform: low '1%' must be below high '-1%'
    """

    low: Any
    high: Any

    def __post_init__(self) -> None:
        low, high = _number(self.low, "Uniform low"), _number(self.high, "Uniform high")
        if low.relative != high.relative:
            raise InputError(f"Uniform: {low.text!r} and {high.text!r} mix a relative and an absolute bound; "
                             f"give both in % (or ppm) or both in the quantity's unit")
        if not low.value < high.value:
            raise InputError(f"Uniform: low {low.text!r} must be below high {high.text!r}")
        object.__setattr__(self, "low", low.text)
        object.__setattr__(self, "high", high.text)

    @property
    def relative(self) -> bool:
        return _number(self.low, "Uniform low").relative

    def bounds(self) -> tuple[float, float]:
        return _number(self.low, "Uniform low").value, _number(self.high, "Uniform high").value

    def __repr__(self) -> str:
        return f"Uniform({self.low!r}, {self.high!r})"

    def __str__(self) -> str:
        return f"{self.low} .. {self.high}"


@dataclass(frozen=True, slots=True)
class Normal:
    """Normal about nominal with standard deviation `sd` (``"3%"`` of nominal, or ``"2m"`` in
    the quantity's unit), truncated at ±`within` (the same kind) if given.

    Examples
    --------
    >>> Normal("3%", within="9%")
    Normal('3%', within='9%')
    """

    sd: Any
    within: Any = None

    def __post_init__(self) -> None:
        sd = _number(self.sd, "Normal sd")
        if not sd.value > 0:
            raise InputError(f"Normal sd: {sd.text!r} must be > 0")
        object.__setattr__(self, "sd", sd.text)
        if self.within is not None:
            within = _number(self.within, "Normal within")
            if within.relative != sd.relative:
                raise InputError(f"Normal: sd {sd.text!r} and within {within.text!r} mix a relative and an "
                                 f"absolute size; give both in % (or ppm) or both in the quantity's unit")
            if not within.value > 0:
                raise InputError(f"Normal within: {within.text!r} must be > 0")
            object.__setattr__(self, "within", within.text)

    @property
    def relative(self) -> bool:
        return _number(self.sd, "Normal sd").relative

    def __repr__(self) -> str:
        return f"Normal({self.sd!r})" if self.within is None else f"Normal({self.sd!r}, within={self.within!r})"

    def __str__(self) -> str:
        return f"normal {self.sd}" + ("" if self.within is None else f" within {self.within}")


@dataclass(frozen=True, slots=True)
class _Symmetric:
    """``"1%"`` or ``"1m"``: uniform within ± that of nominal."""

    half_width: str

    @property
    def relative(self) -> bool:
        return _number(self.half_width, "band").relative

    def __str__(self) -> str:
        return "±" + self.half_width.lstrip("±")


def _band(value: Any, key: str) -> Uniform | Normal | _Symmetric:
    if isinstance(value, (Uniform, Normal, _Symmetric)):
        return value
    if isinstance(value, str):
        text = value.strip()
        if text.startswith("±"):
            text = text[1:].strip()
        if text.startswith(("-", "+")):
            raise InputError(f"spread {key}: {value!r} has a sign; a single band is ± around nominal (write "
                             f"{text.lstrip('+-')!r}), or give fo.Uniform(low, high)")
        number = _number(text, f"spread {key}")
    elif isinstance(value, (int, float, np.number)) and not isinstance(value, bool):
        number = _number(value, f"spread {key}")
    else:
        raise InputError(f"spread {key}: {value!r} is not a band; write {_HELP}")
    if not number.value > 0:
        raise InputError(f"spread {key}: {number.text!r} must be > 0 (the half-width of the band)")
    return _Symmetric(number.text)


@dataclass(frozen=True, slots=True)
class Quantity:
    """One varied quantity of a fixture, resolved: what it is, its nominal, how it spreads.

    Attributes
    ----------
    key : str
        As in the spread (``"r_filter"``, ``"k1.r_on"``, ``"vdac.gain"``).
    part, field : str
        The part, and ``"value"``, ``"r_on"``, ``"r_off"``, ``"gain"`` or ``"offset"``.
    nominal : float
        The fixture's value (a gain's and an offset's nominal is 0).
    unit : str
    """

    key: str
    part: str
    field: str
    nominal: float
    unit: str
    band: Any
    tempco: float

    def values(self, uniforms: np.ndarray, temperature: np.ndarray | None) -> np.ndarray:
        """The quantity for units whose draws in (0, 1) are `uniforms` (one per unit)."""
        band = self.band
        # A gain's nominal multiplier is 1: a relative band on a gain is the gain itself.
        scale = 1.0 if self.field == "gain" else self.nominal
        if isinstance(band, _Symmetric):
            half = _number(band.half_width, self.key)
            deviation = (2.0 * uniforms - 1.0) * (half.value * scale if half.relative else half.value)
            value = self.nominal + deviation
        elif isinstance(band, Uniform):
            low, high = band.bounds()
            if band.relative:
                value = self.nominal + scale * (low + (high - low) * uniforms)
            else:
                value = low + (high - low) * uniforms
        else:
            value = self.nominal + _normal_deviation(band, uniforms) * (scale if band.relative else 1.0)
        if self.tempco and temperature is not None:
            value = value * (1.0 + self.tempco * (temperature - REFERENCE_TEMPERATURE))
        return value

    def extremes(self, temperature: tuple[float, float] | None) -> tuple[float, float]:
        """The lowest and highest value the band allows (inf for an untruncated normal)."""
        band = self.band
        scale = 1.0 if self.field == "gain" else self.nominal
        if isinstance(band, _Symmetric):
            half = _number(band.half_width, self.key)
            width = half.value * scale if half.relative else half.value
            low, high = self.nominal - abs(width), self.nominal + abs(width)
        elif isinstance(band, Uniform):
            lower, upper = band.bounds()
            low, high = ((self.nominal + scale * lower, self.nominal + scale * upper) if band.relative
                         else (lower, upper))
            low, high = min(low, high), max(low, high)
        elif band.within is None:
            return -math.inf, math.inf
        else:
            within = _number(band.within, self.key)
            width = within.value * scale if within.relative else within.value
            low, high = self.nominal - abs(width), self.nominal + abs(width)
        if self.tempco and temperature is not None:
            factors = [1.0 + self.tempco * (t - REFERENCE_TEMPERATURE) for t in temperature]
            candidates = [v * f for v in (low, high) for f in factors]
            low, high = min(candidates), max(candidates)
        return low, high


def _normal_deviation(band: Normal, uniforms: np.ndarray) -> np.ndarray:
    """Standard deviations times the normal quantile of each draw (truncated at ±within):
    the inverse-CDF method, so a draw maps to one value and fractions are exact quantiles."""
    from scipy.special import ndtr, ndtri

    sd = _number(band.sd, "Normal sd").value
    if band.within is None:
        return sd * ndtri(uniforms)
    limit = _number(band.within, "Normal within").value / sd
    low, high = ndtr(-limit), ndtr(limit)
    return sd * ndtri(low + (high - low) * uniforms)


class Spread:
    """How the units of a lot differ from nominal; see the module docstring.

    Parameters
    ----------
    bands : dict
        Quantity key to band.
    temperature : (low, high), optional
        The range of ambient temperature (°C), one uniform draw per unit.
    tempco : dict, optional
        Quantity key to its temperature coefficient per kelvin from 25 °C (``"25ppm"``).

    See Also
    --------
    Uniform, Normal : bands.
    """

    def __init__(self, bands: dict[str, Any], temperature: Any = None, tempco: dict[str, Any] | None = None) -> None:
        if not isinstance(bands, dict) or not bands:
            raise InputError(f"spread: {bands!r} must be a dict of quantity to band, such as {{'r_filter': '1%'}}")
        parsed = {}
        for key, value in bands.items():
            if not isinstance(key, str) or not key.strip():
                raise InputError(f"spread: key {key!r} must name a part, 'switch.r_on', 'source.gain' or similar")
            parsed[key] = _band(value, key)
        self._bands = parsed
        self._temperature = None
        if temperature is not None:
            if isinstance(temperature, (str, bytes)) or not hasattr(temperature, "__len__") or len(temperature) != 2:
                raise InputError(f"spread temperature: {temperature!r} must be (low, high) in °C, such as (0, 50)")
            low = parse_value(temperature[0], field="spread temperature low", unit=("°C", "C"))
            high = parse_value(temperature[1], field="spread temperature high", unit=("°C", "C"))
            if not low < high:
                raise InputError(f"spread temperature: low {temperature[0]!r} must be below high {temperature[1]!r}")
            if low < -273.15:
                raise InputError(f"spread temperature low: {temperature[0]!r} is below absolute zero (-273.15 °C)")
            self._temperature = (low, high)
        self._tempco: dict[str, float] = {}
        self._tempco_text: dict[str, str] = {}
        for key, value in (tempco or {}).items():
            if self._temperature is None:
                raise InputError(f"spread tempco {key}: {value!r} needs a temperature range; give "
                                 f"temperature=(low, high) in °C")
            text = value.strip().removesuffix("/K").strip() if isinstance(value, str) else value
            number = _number(text, f"spread tempco {key}")
            if not number.relative:
                raise InputError(f"spread tempco {key}: {value!r} must be relative per kelvin, such as '25ppm' "
                                 f"or '0.1%'")
            self._tempco[key] = number.value
            self._tempco_text[key] = number.text

    # -- reading -------------------------------------------------------------------------
    @property
    def keys(self) -> tuple[str, ...]:
        """The varied quantities, in the order given (the order of their draws)."""
        return tuple(self._bands)

    @property
    def temperature(self) -> tuple[float, float] | None:
        return self._temperature

    @property
    def tempco_text(self) -> dict[str, str]:
        """Each tempco as written (``{"rs": "25ppm"}``), per kelvin from 25 °C."""
        return dict(self._tempco_text)

    def band(self, key: str) -> Uniform | Normal | Any:
        return self._bands[key]

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Spread) and str(self) == str(other)

    __hash__ = None  # type: ignore[assignment]

    def __repr__(self) -> str:
        return f"Spread({str(self)!r})"

    def __str__(self) -> str:
        entries = [f"{key} {band}" for key, band in self._bands.items()]
        if self._temperature is not None:
            entries.append(f"temperature {_exact(self._temperature[0])} .. {_exact(self._temperature[1])}")
        entries += [f"tempco {key} {text}" for key, text in self._tempco_text.items()]
        return "; ".join(entries)

    @classmethod
    def from_text(cls, text: str) -> "Spread":
        """The spread written as :meth:`__str__` writes it: entries separated by ``;`` or new
        lines, each ``key band`` (``r ±1%``, ``c_hold -20% .. +80%``, ``c normal 3% within 9%``),
        ``temperature low .. high`` or ``tempco key value``.  Read by the units layer only.

        Examples
        --------
        >>> Spread.from_text("k1.r_on 50m .. 300m\\ntemperature 0 .. 50; tempco k1.r_on 0.4%").band("k1.r_on")
        Uniform('50m', '300m')
        """
        if not isinstance(text, str):
            raise InputError(f"spread: {text!r} is not text")
        bands: dict[str, Any] = {}
        temperature = None
        tempco: dict[str, str] = {}
        for entry in (e.strip() for e in re.split(r"[;\n]", text)):
            if not entry:
                continue
            head, _, rest = entry.partition(" ")
            rest = rest.strip()
            if head == "temperature":
                low, separator, high = rest.partition("..")
                if not separator:
                    raise InputError(f"spread temperature: {rest!r} must read 'low .. high' (°C)")
                temperature = (low.strip().removesuffix("°C").strip(), high.strip().removesuffix("°C").strip())
            elif head == "tempco":
                key, _, value = rest.partition(" ")
                tempco[key] = value.strip()
            elif not rest:
                raise InputError(f"spread: {entry!r} has no band; write 'key band', such as 'r_filter 1%'")
            elif head in bands:
                raise InputError(f"spread: {head!r} is given twice; give each quantity once")
            else:
                bands[head] = band_from_text(rest, head)
        return cls(bands, temperature=temperature, tempco=tempco or None)

    # -- against a fixture -------------------------------------------------------------------
    def quantities(self, fixture: "Fixture") -> tuple[Quantity, ...]:
        """Every varied quantity of `fixture`, resolved and checked: unknown keys, bands that
        allow values <= 0 where a quantity must be positive, and tempcos of quantities that
        do not vary are refused, naming the key."""
        parts = fixture.part_map
        resolved = []
        for key, band in self._bands.items():
            part_name, _, field = key.partition(".")
            part = parts.get(part_name)
            if part is None:
                raise InputError(f"spread {key}: names no part; parts are {list(parts)}")
            if part.is_source:
                if field not in ("gain", "offset"):
                    raise InputError(f"spread {key}: a source varies by '{part_name}.gain' or '{part_name}.offset'")
                nominal, unit = 0.0, "" if field == "gain" else SOURCE_UNITS[part.kind]
                if field == "offset" and band.relative:
                    raise InputError(f"spread {key}: an offset has no nominal to take a fraction of; give it in "
                                     f"{unit}, such as '1m'")
            elif part.kind == "switch":
                if field not in ("r_on", "r_off"):
                    raise InputError(f"spread {key}: a switch varies by '{part_name}.r_on' or '{part_name}.r_off'")
                nominal, unit = getattr(part, field), "Ω"
                if not math.isfinite(nominal):
                    raise InputError(f"spread {key}: {part_name}'s {field} is infinite (no leakage); give it a "
                                     f"finite value to spread")
            else:
                if field:
                    raise InputError(f"spread {key}: a {part.kind} varies by its name alone ('{part_name}')")
                nominal, unit = part.value, PART_UNITS[part.kind]
            quantity = Quantity(key, part_name, field or "value", float(nominal), unit, band,
                                self._tempco.get(key, 0.0))
            low, _ = quantity.extremes(self._temperature)
            positive = field in ("", "r_off")
            # An untruncated normal reaches any value; its draws are checked one by one.
            if math.isfinite(low) and ((positive and not low > 0) or (field == "r_on" and low < 0)):
                what = "> 0" if positive else ">= 0"
                raise InputError(f"spread {key}: {band} allows values down to {low:.6g} {unit}; the value must "
                                 f"stay {what}")
            resolved.append(quantity)
        unknown = sorted(set(self._tempco) - set(self._bands))
        if unknown:
            raise InputError(f"spread tempco: {unknown} do not vary; give each a band too (a tempco applies to "
                             f"a varied quantity)")
        return tuple(resolved)


def _exact(number: float) -> str:
    """The shortest text that reads back as exactly `number` ("0", "47.25", "-12.3456789")."""
    text = repr(float(number))
    return text[:-2] if text.endswith(".0") else text


def band_from_text(text: str, key: str) -> Uniform | Normal | _Symmetric:
    """One band in the text form (``"1%"``, ``"50m .. 300m"``, ``"normal 3% within 9%"``);
    errors name ``spread <key>``.

    Examples
    --------
    >>> band_from_text("normal 3% within 9%", "c")
    Normal('3%', within='9%')
    """
    if text.startswith("normal "):
        sd, _, within = text[len("normal "):].partition(" within ")
        return Normal(sd.strip(), within=within.strip() or None)
    low, separator, high = text.partition("..")
    if separator:
        return Uniform(low.strip(), high.strip())
    return _band(text, key)


def draw_uniforms(seed: int, first: int, count: int, columns: int) -> np.ndarray:
    """Draws in (0, 1) for units ``first .. first + count - 1``: one row per unit, `columns` each.

    Unit k's row depends only on ``(seed, k)``: chunk ``c`` of :data:`CHUNK` units draws
    from ``SeedSequence(seed).spawn(c + 1)[c]`` (that is, spawn key ``(c,)``), always the
    whole chunk.

    Examples
    --------
    >>> whole = draw_uniforms(1, 0, 10, 3)
    >>> bool((draw_uniforms(1, 4, 3, 3) == whole[4:7]).all())
    True
    """
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise InputError(f"seed: {seed!r} must be a whole number >= 0")
    out = np.empty((count, columns))
    unit = first
    while unit < first + count:
        chunk = unit // CHUNK
        generator = np.random.Generator(np.random.PCG64(np.random.SeedSequence(int(seed), spawn_key=(chunk,))))
        block = generator.random((CHUNK, columns))
        # Multiples of 2**-53 in [0, 1), moved half a step up: none is 0, so no quantile is infinite.
        block += 2.0 ** -54
        start = unit - chunk * CHUNK
        stop = min(CHUNK, first + count - chunk * CHUNK)
        out[unit - first:unit - first + stop - start] = block[start:stop]
        unit += stop - start
    return out

"""Engineering notation for many numbers at once, and the same rules for BokehJS.

:func:`firstorder.units.format_value` formats one number; a drive table of a
hundred thousand rows needs the same text built with numpy.  The JavaScript
snippets below format axis ticks and hover text with the same prefixes, so a
time reads "250 µs" on the axis, in the hover text and in the table.
"""

from __future__ import annotations

import numpy as np

__all__ = ["format_many", "TICK_CODE", "HOVER_CODE"]

_PREFIXES = {-18: "a", -15: "f", -12: "p", -9: "n", -6: "µ", -3: "m", 0: "", 3: "k", 6: "M", 9: "G", 12: "T"}


def format_many(values: np.ndarray, unit: str = "", digits: int = 6) -> list[str]:
    """Format every value in engineering notation (text that ``parse_value`` reads back).

    Parameters
    ----------
    values : array_like
        Numbers in SI base units.
    unit : str, optional
        Appended after the prefix, as in ``"1.5 ms"``.
    digits : int, optional
        Significant digits; trailing zeros are dropped.

    Examples
    --------
    >>> format_many([0.0, 0.00025, 1500.0, -2.5], "s")
    ['0 s', '250 µs', '1.5 ks', '-2.5 s']
    >>> format_many([1e-3, 3.3, 0.99999999])
    ['1m', '3.3', '1']
    """
    array = np.asarray(values, dtype=np.float64).reshape(-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        exponent = np.floor(np.log10(np.abs(array)) / 3.0) * 3.0
    exponent = np.where(np.isfinite(exponent), exponent, 0.0)
    exponent = np.clip(exponent, -18, 12)
    mantissa = array / 10.0 ** exponent
    numbers = np.char.mod(f"%.{digits}g", mantissa)
    # Rounding can carry 999.9999 up to "1000": move those to the next prefix.
    carry = (np.abs(numbers.astype(np.float64)) >= 1000.0) & (exponent < 12)
    if carry.any():
        exponent = np.where(carry, exponent + 3, exponent)
        numbers = np.char.mod(f"%.{digits}g", array / 10.0 ** exponent)
    separator = " " if unit else ""
    table = np.array([_PREFIXES[p] + unit for p in range(-18, 13, 3)], dtype=object)
    suffix = table[((exponent.astype(int) + 18) // 3)]
    suffix = np.where(array == 0.0, unit, suffix).astype(str)
    text = np.char.add(numbers, np.where(np.char.str_len(suffix) > 0, separator, ""))
    text = np.char.add(text, suffix)
    finite = np.isfinite(array)
    if not finite.all():
        text = text.astype(object)
        for i in np.flatnonzero(~finite).tolist():
            text[i] = f"{array[i]!r}{separator}{unit}"
    return [str(item) for item in text.tolist()]


# Shared by the tick formatter and the hover formatter: one value to text.
_JS_FORMAT = """
function engineering(value, unit) {
    if (!isFinite(value)) { return String(value) + (unit ? " " + unit : ""); }
    if (value === 0) { return "0" + (unit ? " " + unit : ""); }
    const prefixes = {"-18": "a", "-15": "f", "-12": "p", "-9": "n", "-6": "µ", "-3": "m",
                      "0": "", "3": "k", "6": "M", "9": "G", "12": "T"};
    let power = Math.floor(Math.log10(Math.abs(value)) / 3) * 3;
    power = Math.max(-18, Math.min(12, power));
    let mantissa = value / Math.pow(10, power);
    let text = Number(mantissa.toPrecision(4));
    if (Math.abs(text) >= 1000 && power < 12) { power += 3; text = Number((mantissa / 1000).toPrecision(4)); }
    const suffix = prefixes[String(power)] + unit;
    return String(text) + (suffix ? " " + suffix : "");
}
"""

#: Body of a ``CustomJSTickFormatter``; ``unit`` comes in through ``args``.
TICK_CODE = _JS_FORMAT + "return engineering(tick, unit);"

#: Body of a ``CustomJSHover``; ``unit`` comes in through ``args``.
HOVER_CODE = _JS_FORMAT + "return engineering(value, unit);"

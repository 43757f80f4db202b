"""The Bench's lot: the Spread panel's texts read into a study's inputs, the study run
again for each edit, and what its plots show of it (numpy and the studies layer; no UI).

The panel has a field per quantity that can vary (each part value, a switch's on and off
resistance, each source's gain and offset) in the spread's text form (``±1%``,
``-20% .. +80%``, ``normal 3% within 9%``; empty: the quantity does not vary), the
temperature range, the tempcos and the number of units.  Each band is read by
:func:`firstorder.studies.spread.band_from_text` and the whole by
:class:`~firstorder.studies.spread.Spread`, checked against the fixture; no band at all
means no study.  Every number shown is the study's own: the envelope
(:meth:`Study.envelope <firstorder.studies.Study.envelope>`), a segment's values
(:meth:`Study.segment_values <firstorder.studies.Study.segment_values>`), binned and
turned into the yield against the sample delay by the report's own rules
(:mod:`firstorder.report.tables`: ``histogram``, ``yield_curve``, ``needed_delays``).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..analysis import read_study_settings
from ..drive import Drive
from ..errors import InputError
from ..fixture import Fixture
from ..netlist import SOURCE_UNITS
from ..studies.spread import Spread, band_from_text
from ..studies.study import CHUNK_ELEMENTS, Study
from ..units import parse_value, shown
from ._fields import part_fields

__all__ = ["BAND_PREFIX", "LOT_KEYS", "LotInputs", "MAX_UNITS", "TEMPCO", "TEMPERATURE", "UNITS", "is_lot_key", "lot_inputs", "lot_texts", "make_study", "quantity_keys", "quantity_units", "read_lot", "shown_segment"]

#: A band field's key in the session's texts and errors: ``"band r"``, ``"band k1.r_on"``.
BAND_PREFIX = "band "
#: The other fields of the Spread panel, by key.
TEMPERATURE, TEMPCO, UNITS = "lot temperature", "lot tempco", "lot units"
LOT_KEYS = (TEMPERATURE, TEMPCO, UNITS)
#: The most units a Bench studies: it runs the study again on every edit.
MAX_UNITS = 100_000


def is_lot_key(key: str) -> bool:
    """True for a key of the Spread panel's fields.

    Examples
    --------
    >>> is_lot_key("band k1.r_on"), is_lot_key("lot units"), is_lot_key("r")
    (True, True, False)
    """
    return key.startswith(BAND_PREFIX) or key in LOT_KEYS


@dataclass(frozen=True)
class LotInputs:
    """What the study is of: the spread (None: no band given, no study), the number of
    units, the seed and the fractions of units its table reports."""

    spread: Spread | None
    units: int
    seed: int
    fractions: tuple[float, ...]


def quantity_units(fixture: Fixture) -> dict[str, str]:
    """Every quantity of `fixture` that can vary, to the unit of an absolute band of it
    (``""`` for a gain): part values, switches' on and off resistances, then each source's
    gain and offset (a name's own dots are kept: the key is built, never split)."""
    units = {field.key: field.unit for field in part_fields(fixture)}
    for source in fixture.sources:
        units.update({f"{source.name}.gain": "", f"{source.name}.offset": SOURCE_UNITS[source.kind]})
    return units


def quantity_keys(fixture: Fixture) -> tuple[str, ...]:
    """The keys of :func:`quantity_units`, in order."""
    return tuple(quantity_units(fixture))


def lot_texts(fixture: Fixture, spread: Spread | None, units: int) -> dict[str, str]:
    """Each Spread field's text for `spread` (each band as the spread writes it)."""
    texts = {BAND_PREFIX + key: "" for key in quantity_keys(fixture)}
    temperature = tempco = ""
    if spread is not None:
        texts.update({BAND_PREFIX + key: str(spread.band(key)) for key in spread.keys})
        if spread.temperature is not None:
            # The spread's own writing of the range (it reads back exactly): its entry after the bands.
            temperature = str(spread).split("; ")[len(spread.keys)].removeprefix("temperature ")
        tempco = "; ".join(f"{key} {text}" for key, text in spread.tempco_text.items())
    texts.update({TEMPERATURE: temperature, TEMPCO: tempco, UNITS: str(units)})
    return texts


def read_units(text: str) -> int:
    """The number of units as typed (through the units layer): a whole number, 1 to :data:`MAX_UNITS`.

    Examples
    --------
    >>> read_units("2k"), read_units(" 500 ")
    (2000, 500)
    """
    value = parse_value(text, field="units")
    if not (value == int(value) and 1 <= value <= MAX_UNITS):
        raise InputError(f"units: {shown(text)} is not allowed; give a whole number of units from 1 to "
                         f"{MAX_UNITS:,} (study more with fx.study)")
    return int(value)


def _band(key: str, text: str):
    if ";" in text or "\n" in text:
        raise InputError(f"spread {key}: {shown(text)} holds ';' or a new line; give one band, such as '1%'")
    try:
        return band_from_text(text, key)
    except InputError as error:
        message = str(error)
        # Uniform's and Normal's own errors name their bound: say which field too.
        raise InputError(message if message.startswith(f"spread {key}") else f"spread {key}: {message}") from None


def read_lot(texts: dict[str, str], fixture: Fixture, seed: int, fractions: tuple[float, ...],
             order: tuple[str, ...] = ()) -> LotInputs:
    """The study's inputs from the Spread fields' `texts`, checked against `fixture`
    (an InputError naming the field otherwise).  The quantities in `order` (the last
    spread's keys) keep their places, then the others in the fields' order: the order of
    the draws, so a unit's values do not change when another field is typed."""
    keys = quantity_keys(fixture)
    bands = {}
    for key in [k for k in order if k in keys] + [k for k in keys if k not in order]:
        text = texts.get(BAND_PREFIX + key, "").strip()
        if text:
            bands[key] = _band(key, text)
    units = read_units(texts.get(UNITS, ""))
    if not bands:
        return LotInputs(None, units, seed, fractions)
    temperature = None
    text = texts.get(TEMPERATURE, "").strip()
    if text:
        low, separator, high = text.partition("..")
        if not separator:
            raise InputError(f"spread temperature: {shown(text)} must read 'low .. high' in °C, such as '0 .. 50'")
        temperature = (low.strip().removesuffix("°C").strip(), high.strip().removesuffix("°C").strip())
    tempco = {}
    for entry in filter(None, (e.strip() for e in re.split(r"[;\n]", texts.get(TEMPCO, "")))):
        key, _, value = entry.partition(" ")
        if not value.strip():
            raise InputError(f"spread tempco: {shown(entry)} must read 'quantity value', such as 'r 25ppm'")
        tempco[key] = value.strip()
    spread = Spread(bands, temperature=temperature, tempco=tempco or None)
    spread.quantities(fixture)
    return LotInputs(spread, units, seed, fractions)


def lot_inputs(fixture: Fixture, spread: Any, units: Any, seed: Any, fractions: Any) -> LotInputs:
    """The Bench's `spread`, `units`, `seed` and `fractions` keywords, each checked (the
    spread against the fixture); a study's defaults for those left out, as an analysis."""
    if spread is not None and not isinstance(spread, Spread):
        raise InputError(f"spread: expected a firstorder.Spread (or None), got {type(spread).__name__}")
    if spread is not None:
        spread.quantities(fixture)
    units, seed, fractions = read_study_settings(
        units, seed, fractions, most_units=MAX_UNITS,
        units_rule=f"the Bench studies 1 to {MAX_UNITS:,} units (it runs the study again on every edit; study more "
                   f"with fx.study)",
        most_fractions=None, fractions_rule="give fractions of units such as (0.5, 0.99)")
    return LotInputs(spread, units, seed, fractions)


def make_study(fixture: Fixture, drive: Drive, initial: Any, lot: LotInputs | None,
               chunk: int | None = None) -> Study | None:
    """The study of `lot` (None without a spread): every unit held for every question, in
    one chunk or in runs of `chunk` units (a study on the worker thread, told chunk by chunk)."""
    if lot is None or lot.spread is None:
        return None
    if lot.units * len(drive) > CHUNK_ELEMENTS:
        raise InputError(f"units: {lot.units:,} units of {len(drive):,} segments are more than the Bench studies on "
                         f"every edit ({CHUNK_ELEMENTS:,} unit-segments); give fewer units, or study this drive with "
                         f"fx.study")
    # Kept: one chunk either way (the cap above), and questions then size their memory by the
    # study's units, not by a whole chunk's worth of them.
    return fixture.study(drive, lot.spread, units=lot.units, seed=lot.seed, initial=initial, keep=True,
                         chunk=chunk, progress=False)


def shown_segment(table, segment: int | None) -> int:
    """The segment the histogram shows: the selected one, else the one with the least yield
    (of equals, the first)."""
    if segment is not None:
        return int(segment)
    return int(np.argmin(table["yield"].to_numpy()))

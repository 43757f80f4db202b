"""A lot: the varied quantities of a fixture drawn for a range of units, and each unit built.

:class:`Lot` ties a fixture and a :class:`~firstorder.studies.spread.Spread` together
(checked once), draws any range of units (:meth:`Lot.draw`: one row per unit, one
column per quantity and the temperature) and builds one unit as a plain fixture and
drive (:meth:`Lot.unit_fixture`, :meth:`Lot.unit_drive`), the reference every batched
result is held against.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..errors import InputError
from ..units import format_value
from .spread import Quantity, Spread, draw_uniforms

if TYPE_CHECKING:
    from ..drive import Drive
    from ..fixture import Fixture

__all__ = ["Draw", "Lot"]


@dataclass(frozen=True)
class Draw:
    """Units ``first .. first + count - 1`` of a lot.

    Attributes
    ----------
    first : int
    values : ndarray, shape (count, quantities)
        Each unit's value of every varied quantity (SI units; a gain is a fraction).
    temperature : ndarray, shape (count,) or None
        Each unit's temperature (°C), when the spread has a range.
    """

    first: int
    values: np.ndarray
    temperature: np.ndarray | None

    def __len__(self) -> int:
        return int(self.values.shape[0])


class Lot:
    """The units a fixture's spread allows, drawn from a seed.

    Examples
    --------
    >>> import firstorder as fo
    >>> lot = Lot(fo.Fixture.rc("1k", "1u"), fo.Spread({"r": "1%"}), seed=1)
    >>> draw = lot.draw(0, 3)
    >>> bool((abs(draw.values[:, 0] - 1e3) <= 10).all())
    True
    >>> lot.unit_fixture(draw, 2).part_map["r"].value == float(draw.values[2, 0])
    True
    """

    def __init__(self, fixture: "Fixture", spread: Spread, seed: int) -> None:
        if not isinstance(spread, Spread):
            raise InputError(f"spread: {spread!r} is not a firstorder Spread; build one with fo.Spread({{...}})")
        fixture.check()
        self.fixture = fixture
        self.spread = spread
        self.seed = seed
        self.quantities: tuple[Quantity, ...] = spread.quantities(fixture)
        draw_uniforms(seed, 0, 0, 1)  # checks the seed once, here
        self._columns = len(self.quantities) + (spread.temperature is not None)

    @property
    def keys(self) -> tuple[str, ...]:
        return tuple(q.key for q in self.quantities)

    def draw(self, first: int, count: int) -> Draw:
        """Units ``first .. first + count - 1``; a draw that makes a value <= 0 (or an on
        resistance < 0) is refused naming the quantity and the unit."""
        uniforms = draw_uniforms(self.seed, first, count, self._columns)
        temperature = None
        if self.spread.temperature is not None:
            low, high = self.spread.temperature
            temperature = low + (high - low) * uniforms[:, -1]
        values = np.empty((count, len(self.quantities)))
        for j, quantity in enumerate(self.quantities):
            column = quantity.values(uniforms[:, j], temperature)
            must = "> 0" if quantity.field in ("value", "r_off") else ">= 0" if quantity.field == "r_on" else None
            if must is not None:
                bad = ~(column > 0) if must == "> 0" else ~(column >= 0)
                if bad.any():
                    k = int(np.argmax(bad))
                    raise InputError(
                        f"spread {quantity.key}: unit {first + k} draws {format_value(float(column[k]), quantity.unit)}; "
                        f"a {quantity.field.replace('_', ' ')} must be {must} (narrow the band, or truncate the "
                        f"normal with within=)")
            values[:, j] = column
        return Draw(first, values, temperature)

    def unit_fixture(self, draw: Draw, row: int) -> "Fixture":
        """The fixture of one drawn unit, built part by part as by hand (``with_values``)."""
        changes: dict[str, object] = {}
        for j, quantity in enumerate(self.quantities):
            value = float(draw.values[row, j])
            if quantity.field == "value":
                changes[quantity.part] = value
            elif quantity.field in ("r_on", "r_off"):
                part = self.fixture.part_map[quantity.part]
                on, off = changes.get(quantity.part, (part.r_on, part.r_off))
                changes[quantity.part] = (value, off) if quantity.field == "r_on" else (on, value)
        return self.fixture.with_values(**changes)

    def unit_values(self, drive: "Drive", draw: Draw) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
        """Every drawn unit's values at once, for :meth:`Segments.of_lot
        <firstorder.segments.Segments.of_lot>`: part values by ``"part"`` or ``"switch.r_on"``
        / ``"switch.r_off"`` (units,), and the levels of sources with a gain or offset
        (units, n), formed as :meth:`unit_fixture` and :meth:`unit_drive` form them."""
        values: dict[str, np.ndarray] = {}
        adjust: dict[str, list] = {}
        for j, quantity in enumerate(self.quantities):
            column = draw.values[:, j]
            if quantity.field == "value":
                values[quantity.part] = column
            elif quantity.field in ("r_on", "r_off"):
                values[f"{quantity.part}.{quantity.field}"] = column
            else:
                pair = adjust.setdefault(quantity.part, [0.0, 0.0])
                pair[0 if quantity.field == "gain" else 1] = column[:, None]
        for part in self.fixture.switches:
            # with_values refuses such a unit; so does the batch, naming it.
            on = values.get(f"{part.name}.r_on", part.r_on)
            off = values.get(f"{part.name}.r_off", part.r_off)
            bad = ~(np.asarray(off) > np.asarray(on))
            if np.ndim(bad) and bad.any():
                k = int(np.argmax(bad))
                raise InputError(f"spread {part.name}.r_off: unit {draw.first + k} draws an off resistance not above "
                                 f"its on resistance ({format_value(float(np.broadcast_to(off, bad.shape)[k]), 'Ω')} "
                                 f"against {format_value(float(np.broadcast_to(on, bad.shape)[k]), 'Ω')}); narrow "
                                 f"the bands")
        levels = {name: drive.levels(name)[None, :] * (1.0 + gain) + offset for name, (gain, offset) in adjust.items()}
        if not values and not levels:  # nothing varies but the temperature: every unit nominal
            storage = self.fixture.storage
            values[storage.name] = np.full(len(draw), storage.value)
        return values, levels

    def unit_drive(self, drive: "Drive", draw: Draw, row: int) -> "Drive":
        """`drive` as one drawn unit's sources give it: each level ``level * (1 + gain) + offset``."""
        columns = {}
        for j, quantity in enumerate(self.quantities):
            if quantity.field in ("gain", "offset"):
                gain, offset = columns.get(quantity.part, (0.0, 0.0))
                value = float(draw.values[row, j])
                columns[quantity.part] = (value, offset) if quantity.field == "gain" else (gain, value)
        if not columns:
            return drive
        return drive.replace(**{name: drive.levels(name) * (1.0 + gain) + offset
                                for name, (gain, offset) in columns.items()})

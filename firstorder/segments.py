"""Segments: a drive (or a plan's steps) matched to a fixture, segment by segment.

For every segment: which switch configuration holds, its rate ``1/tau`` (zero
where the state is held), each source's gain to the final value, and, for
probes, each probe as an affine row over ``[x, u...]``.  The distinct
configurations are reduced once each (:meth:`Fixture.configuration
<firstorder.fixture.Fixture.configuration>`, cached) and spread over the segments
by index; this is the one place that loop lives.  Text that names a segment (for
errors) is made only when an error needs it.

The numbers may carry a leading unit axis, one entry per unit of a lot built
from toleranced parts: ``rate`` is ``(n,)`` or ``(units, n)``,
``gain_by_configuration`` ``(c, m)`` or ``(units, c, m)``; the structure (the
configurations and which segment has which) is shared by every unit.  See
:meth:`Segments.stack` and :meth:`Segments.unit`.

Examples
--------
>>> import firstorder as fo
>>> fx = fo.Fixture.rc(r="1k", c="1u")
>>> segments = Segments.of_drive(fx, fo.Drive([0, "1m"], end="3m", vin=[0.0, 2.5]))
>>> segments.rate, segments.final
(array([1000., 1000.]), array([0. , 2.5]))
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from ._arrays import lazy, repeated
from .configurations import lot_probe_rows, reduce_configurations
from .drive import level_columns
from .errors import InputError, TopologyError
from .netlist import Netlist
from .network import probe_row
from .units import format_value

if TYPE_CHECKING:
    from .drive import Drive
    from .fixture import Fixture
    from .network import Layout, Reduced

__all__ = ["Segments", "match_columns", "rates"]


def rates(tau: np.ndarray) -> np.ndarray:
    """``1 / tau``, and 0 where tau is infinite (the state is held): IEEE division gives
    exactly 0 there (every tau is > 0).

    Examples
    --------
    >>> rates(np.array([1e-3, np.inf]))
    array([1000.,    0.])
    """
    return np.divide(1.0, tau)


def match_columns(netlist: Netlist, columns: Mapping[str, np.ndarray], count: int,
                  field: str = "drive") -> tuple[np.ndarray, np.ndarray]:
    """Source levels ``(n, m)`` and switch states ``(n, s)`` from level columns (as
    :func:`firstorder.drive.level_columns` reads them); `field` names them in errors."""
    if not netlist.switch_names and len(columns) == 1 == len(netlist.source_names) and netlist.source_names[0] in columns:
        # One source, no switch, its column and nothing else: the checks below would pass.
        return columns[netlist.source_names[0]].reshape(count, 1), np.zeros((count, 0), dtype=bool)
    sources = list(netlist.source_names)
    switches = list(netlist.switch_names)
    known = set(sources) | set(switches)
    extra = [name for name in columns if name not in known]
    if extra:
        raise InputError(
            f"{field} columns {extra} name no source or switch of the fixture; "
            f"sources are {sources}, switches are {switches}"
        )
    missing = [name for name in sources + switches if name not in columns]
    if missing:
        raise InputError(f"{field}: no column for {missing}; the fixture needs one column per source and switch")
    if len(sources) == 1:
        levels = columns[sources[0]].reshape(count, 1)  # a view of the read-only column
    else:
        levels = np.column_stack([columns[s] for s in sources]) if sources else np.zeros((count, 0))
    if not switches:
        return levels, np.zeros((count, 0), dtype=bool)
    states = np.column_stack([columns[s] for s in switches])
    bad = (states != 0) & (states != 1)
    if bad.any():
        k, j = np.argwhere(bad)[0]
        raise InputError(
            f"{field}.{switches[j]}[{k}]: {float(states[k, j])!r} is not a switch state; use 1/True (closed) or "
            f"0/False (open)"
        )
    return levels, states.astype(bool)


def _distinct(states: np.ndarray) -> tuple[list[tuple[bool, ...]], np.ndarray, np.ndarray]:
    """The distinct switch configurations, which one holds in each segment, and the
    first segment of each."""
    n, count = states.shape
    if count == 0:
        # read-only: nothing to fill
        return [()], repeated(0, n, np.intp), np.zeros(1, dtype=np.intp)
    codes = states.astype(np.int64) @ (np.int64(1) << np.arange(count, dtype=np.int64))
    unique, first, inverse = np.unique(codes, return_index=True, return_inverse=True)
    configs = [tuple(bool((code >> j) & 1) for j in range(count)) for code in unique.tolist()]
    return configs, inverse.reshape(-1), first


def _one_value(array: np.ndarray) -> bool:
    """True for a read-only broadcast of one value (stride 0), as one rate for every segment is."""
    return array.ndim == 1 and array.size > 1 and array.strides == (0,)


class Segments:
    """Per segment: configuration, rate, gains; per probe: its rows.  Build with
    :meth:`of_drive`, :meth:`of_columns` or :meth:`of_model`.

    Attributes
    ----------
    levels : ndarray, shape (n, m)
        Source levels (read-only for one source).
    configurations : tuple of tuple of bool
        The distinct switch configurations, in order of their codes.
    configuration_of : ndarray of int, shape (n,)
        Index into `configurations` for every segment (read-only).
    rate : ndarray, shape (n,) or (units, n)
        ``1/tau`` of every segment, 0 where the state is held (a read-only
        broadcast when one configuration holds throughout).
    gain_by_configuration : ndarray, shape (c, m) or (units, c, m)
        Final value per unit of each source level, per configuration (0 where held).
    source_names : tuple of str
    state_unit : str
        V (a capacitor's voltage) or A (an inductor's current).
    storage_kind, storage_name : str
        The storage element, for text.
    """

    def __init__(self, *, levels: np.ndarray, configurations: Sequence[tuple[bool, ...]],
                 configuration_of: np.ndarray, rate: np.ndarray, gain_by_configuration: np.ndarray,
                 source_names: tuple[str, ...], state_unit: str, storage_kind: str, storage_name: str,
                 first_use: np.ndarray | None = None, fixture: "Fixture | None" = None,
                 times: np.ndarray | None = None, word: str = "segment") -> None:
        self.levels = levels
        self.configurations = tuple(configurations)
        self.configuration_of = configuration_of
        self.rate = rate
        self.gain_by_configuration = gain_by_configuration
        self.source_names = source_names
        self.state_unit = state_unit
        self.storage_kind = storage_kind
        self.storage_name = storage_name
        self._first_use = first_use
        self._fixture = fixture
        self._times = times
        self._word = word
        self._probe_rows: dict[str, np.ndarray] = {}
        #: The level columns as read (of_columns only: a plan builds its drive from them).
        self.columns: dict[str, np.ndarray] | None = None
        self._lot: tuple["Segments", ...] = ()
        #: Per configuration, (layout, batch, entry) of the batched reduction it came from.
        self._reduced: list | None = None
        #: A lot's per-unit source levels (units, n, m) and resistances (of_lot only).
        self._unit_levels: np.ndarray | None = None
        self._lot_resistance: dict | None = None

    # -- building ----------------------------------------------------------------------------
    @classmethod
    def of_drive(cls, fixture: "Fixture", drive: "Drive") -> "Segments":
        """The segments of `drive` on `fixture` (its columns checked against the fixture's
        sources and switches).

        See Also
        --------
        of_columns : steps without instants (plans).
        of_model : a measured model, without a fixture.
        """
        return cls._matched(fixture, drive.columns, len(drive), "drive", times=drive.times, word="segment")

    @classmethod
    def of_columns(cls, fixture: "Fixture", columns: Mapping[str, Any], field: str = "levels") -> "Segments":
        """The steps of a plan: level columns without instants (each read as
        :func:`~firstorder.drive.level_columns` reads them, named `field` in errors).

        See Also
        --------
        of_drive : a drive's segments.
        """
        parsed = level_columns(columns, None, field=field,
                               per="the longest column has {count}; give one level per step")
        count = len(next(iter(parsed.values())))
        segments = cls._matched(fixture, parsed, count, field, times=None, word="step")
        segments.columns = parsed
        return segments

    @classmethod
    def _matched(cls, fixture: "Fixture", columns: Mapping[str, np.ndarray], count: int, field: str,
                 times: np.ndarray | None, word: str) -> "Segments":
        netlist = fixture.netlist
        netlist.check()
        levels, states = match_columns(netlist, columns, count, field)
        if not netlist.switch_names:
            known = fixture.known_configuration(())
            if known is not None and not math.isinf(known[1].tau):
                # No switches, reduced before, and it settles (nothing can drift): what the
                # path below gives, without its work per configuration (a short drive's
                # fixed cost is mostly this).
                one = known[1]
                segments = cls(levels=levels, configurations=[()], configuration_of=repeated(0, count, np.intp),
                               rate=repeated(1.0 / one.tau, count),
                               gain_by_configuration=np.array([one.gain]).reshape(1, levels.shape[1]),
                               source_names=netlist.source_names, state_unit=netlist.state_unit,
                               storage_kind=netlist.storage.kind, storage_name=netlist.storage.name,
                               first_use=np.zeros(1, dtype=np.intp), fixture=fixture, times=times, word=word)
                segments._reduced = [(known[0], one, None, None)]
                return segments
        configs, inverse, first_use = _distinct(states)
        # Labels need every segment's configuration; a provisional object answers them for
        # errors raised while reducing (its configurations are already known).
        provisional = cls(levels=levels, configurations=configs, configuration_of=inverse, rate=np.zeros(0),
                          gain_by_configuration=np.zeros((0, 0)), source_names=netlist.source_names,
                          state_unit=netlist.state_unit, storage_kind=netlist.storage.kind,
                          storage_name=netlist.storage.name, first_use=first_use, fixture=fixture, times=times,
                          word=word)
        taus, gains, drifts, provisional._reduced = reduce_configurations(fixture, states, configs, first_use,
                                                                provisional.label)
        _refuse_ramps(provisional, taus, drifts, levels, inverse, netlist)
        rate_by_config = rates(taus)
        # One rate for every segment: a read-only broadcast, not an array to fill.
        rate = repeated(rate_by_config[0], count) if len(configs) == 1 else rate_by_config[inverse]
        provisional.rate = rate
        provisional.gain_by_configuration = gains
        return provisional

    @classmethod
    def of_lot(cls, fixture: "Fixture", drive: "Drive", values: Mapping[str, Any],
               levels: Mapping[str, Any] | None = None) -> "Segments":
        """Every unit of a lot at once: `fixture` with per-unit part values under `drive`.

        Each configuration is planned once and reduced for every unit in one batched solve
        (:mod:`firstorder.configurations`); unit u's numbers are bit for bit those of
        ``Segments.of_drive(fixture.with_values(...), drive)`` with its values.

        Parameters
        ----------
        values : mapping of str to array, each shape (units,)
            ``"part"`` (a resistor, the capacitor or inductor: ohms, farads, henries) or
            ``"switch.r_on"`` / ``"switch.r_off"`` (ohms); parts not named keep theirs.
        levels : mapping of str to array, each shape (units, n), optional
            Per-unit levels of some sources (a converter's gain and offset); the others as
            the drive gives them.

        Returns
        -------
        Segments
            With a unit axis: ``rate`` (units, n), ``gain_by_configuration`` (units, c, m),
            ``final`` (units, n) and :meth:`probe_rows` (units, n, 1 + m).

        Examples
        --------
        >>> import firstorder as fo
        >>> drive = fo.Drive([0, "1m"], end="2m", vin=[1.0, 0.0])
        >>> lot = Segments.of_lot(fo.Fixture.rc("1k", "1u"), drive, {"r": np.array([1e3, 2e3])})
        >>> lot.units, lot.rate.tolist()
        (2, [[1000.0, 1000.0], [500.0, 500.0]])
        """
        netlist = fixture.netlist
        netlist.check()
        base, states = match_columns(netlist, drive.columns, len(drive), "drive")
        units, resistance, storage = _lot_values(netlist, values, levels, len(drive))
        unit_levels = None
        if levels:
            unit_levels = np.empty((units,) + base.shape)
            unit_levels[:] = base
            for name, column in levels.items():
                unit_levels[:, :, netlist.source_names.index(name)] = column
        configs, inverse, first_use = _distinct(states)
        segments = cls(levels=base, configurations=configs, configuration_of=inverse, rate=np.zeros((units, 0)),
                       gain_by_configuration=np.zeros((units, 0, 0)), source_names=netlist.source_names,
                       state_unit=netlist.state_unit, storage_kind=netlist.storage.kind,
                       storage_name=netlist.storage.name, first_use=first_use, fixture=fixture, times=drive.times,
                       word="segment")
        taus, gains, drifts, segments._reduced = reduce_configurations(
            fixture, states, configs, first_use, segments.label, resistance=resistance, storage=storage, units=units)
        every = base if unit_levels is None else np.abs(unit_levels).max(axis=0)
        _refuse_ramps(segments, taus.max(axis=0), np.abs(drifts).max(axis=0), every, inverse, netlist)
        segments.rate = rates(taus)[:, inverse]
        segments.gain_by_configuration = gains
        segments._unit_levels = unit_levels
        segments._lot_resistance = resistance
        return segments

    @classmethod
    def of_model(cls, tau: Any, final: Any, *, unit: str = "", name: str = "fitted") -> "Segments":
        """Segments of a measured model: segment ``k`` relaxes with ``tau[k]`` towards
        ``final[k]`` (``tau = inf`` holds the state, and its final is ignored).

        The one pseudo-source, ``"fitted"``, carries every segment's final value.

        See Also
        --------
        of_drive : a fixture's segments.

        Examples
        --------
        >>> Segments.of_model([1e-3, np.inf], [1.0, 5.0], unit="V").final
        array([1., 0.])
        """
        taus = np.asarray(tau, dtype=np.float64).reshape(-1)
        finals = np.asarray(final, dtype=np.float64).reshape(-1)
        if taus.size != finals.size:
            raise InputError(f"final: has {finals.size} values but tau has {taus.size}; give one per segment")
        bad = np.isnan(taus) | ~(taus > 0)
        if bad.any():
            k = int(np.argmax(bad))
            raise InputError(f"tau[{k}]: {float(taus[k])!r} is not allowed; expected a time > 0 s or inf")
        holding = np.isinf(taus)
        bad = ~np.isfinite(finals) & ~holding
        if bad.any():
            k = int(np.argmax(bad))
            raise InputError(f"final[{k}]: {float(finals[k])!r} is not allowed; expected a finite number")
        n = taus.size
        return cls(levels=np.where(holding, 0.0, finals).reshape(n, 1), configurations=[()],
                   configuration_of=np.zeros(n, dtype=np.intp), rate=rates(taus), gain_by_configuration=np.ones((1, 1)),
                   source_names=("fitted",), state_unit=unit, storage_kind="fitted model", storage_name=name,
                   first_use=np.zeros(1, dtype=np.intp))

    # -- a unit axis ---------------------------------------------------------------------------
    @property
    def units(self) -> int | None:
        """How many units the numbers hold (None: one fixture, no unit axis)."""
        return None if self.rate.ndim == 1 else int(self.rate.shape[0])

    @classmethod
    def stack(cls, lot: Sequence["Segments"]) -> "Segments":
        """One Segments with a leading unit axis from segments of the same structure (the
        same drive on fixtures that differ only in part values).

        See Also
        --------
        unit : one unit back.

        Examples
        --------
        >>> import firstorder as fo
        >>> drive = fo.Drive([0, "1m"], end="2m", vin=[1.0, 0.0])
        >>> lot = Segments.stack([Segments.of_drive(fo.Fixture.rc(r, "1u"), drive) for r in ("1k", "2k")])
        >>> lot.units, lot.rate.shape, float(lot.unit(1).rate[0])
        (2, (2, 2), 500.0)
        """
        first = lot[0]
        for other in lot[1:]:
            if (other.configurations != first.configurations
                    or not np.array_equal(other.configuration_of, first.configuration_of)
                    or not np.array_equal(other.levels, first.levels)):
                raise InputError("stack: the segments differ in structure (configurations or levels); "
                                 "a lot shares one drive and one network")
        stacked = cls(levels=first.levels, configurations=first.configurations,
                      configuration_of=first.configuration_of,
                      rate=np.stack([np.asarray(s.rate) for s in lot]),
                      gain_by_configuration=np.stack([s.gain_by_configuration for s in lot]),
                      source_names=first.source_names, state_unit=first.state_unit,
                      storage_kind=first.storage_kind, storage_name=first.storage_name,
                      first_use=first._first_use, times=first._times, word=first._word)
        stacked._lot = tuple(lot)
        return stacked

    @property
    def unit_levels(self) -> np.ndarray:
        """(units, n, m): every unit's source levels (a broadcast of `levels` where they
        are shared)."""
        if self._unit_levels is not None:
            return self._unit_levels
        return np.broadcast_to(self.levels, (self.units or 1,) + self.levels.shape)

    def unit(self, k: int) -> "Segments":
        """Unit `k` of a lot (see :meth:`stack`), without the unit axis."""
        if self.units is None:
            raise InputError("unit: these segments have no unit axis")
        if not 0 <= k < self.units:
            raise InputError(f"unit: {k!r} is not a unit; units are 0 to {self.units - 1}")
        if not self._lot:
            raise InputError("unit: a lot built at once (of_lot) keeps no unit's own segments; build one with "
                             "Segments.of_drive on that unit's fixture")
        return self._lot[k]

    # -- per segment ---------------------------------------------------------------------------
    def __len__(self) -> int:
        return int(self.levels.shape[0])

    def label(self, k: int) -> str:
        """Text naming segment (or step) `k` in a message, with its start and configuration.

        Made only when a message needs it (engineering notation takes tens of microseconds).
        """
        states = self.configurations[int(self.configuration_of[k])]
        described = self._fixture.describe_states(states) if (states and self._fixture is not None) else ""
        if self._times is None:
            return f"{self._word} {k}" + (f" ({described})" if described else "")
        text = f"{self._word} {k} (from {format_value(float(self._times[k]), 's')}"
        return text + (f"; {described})" if described else ")")

    @property
    def first_use(self) -> np.ndarray:
        """The first segment of every configuration."""
        return self._first_use

    @lazy
    def holds(self) -> np.ndarray:
        """True for segments whose configuration holds the state (read-only)."""
        if _one_value(self.rate):  # one rate for all: a broadcast answer
            return repeated(bool(self.rate[0] == 0.0), self.rate.size, bool)
        holds = self.rate == 0.0
        holds.setflags(write=False)
        return holds

    @lazy
    def any_holds(self) -> bool:
        if _one_value(self.rate):
            return bool(self.rate[0] == 0.0)
        return bool(self.holds.any())

    @lazy
    def tau(self) -> np.ndarray:
        """Time constant of every segment (s); ``inf`` where the state is held (read-only)."""
        if _one_value(self.rate):  # one rate for all: a broadcast answer
            rate = float(self.rate[0])
            return repeated(1.0 / rate if rate > 0 else np.inf, self.rate.size)
        tau = np.where(self.rate > 0, 1.0 / np.where(self.rate > 0, self.rate, 1.0), np.inf)
        tau.setflags(write=False)
        return tau

    @lazy
    def source_finals(self) -> np.ndarray:
        """(n, m): each source's share of each segment's final value (0 where held)."""
        return self.gain_by_configuration[self.configuration_of] * self.levels

    @lazy
    def one_gain(self) -> float | None:
        """With one source and one configuration, the gain from its level to the final
        value (the final values are that gain times the level column); else None."""
        if self.levels.shape[1] == 1 and len(self.configurations) == 1:
            return float(self.gain_by_configuration[0, 0])
        return None

    @lazy
    def final(self) -> np.ndarray:
        """Every segment's final value from the sources alone (0 where the state is held)."""
        if self.units is not None:
            # Per unit, as one unit's final is formed (the same operations element by element).
            levels = self.levels[None] if self._unit_levels is None else self._unit_levels
            gains = self.gain_by_configuration
            if levels.shape[2] == 1:
                return gains[:, self.configuration_of, 0] * levels[:, :, 0]
            return (gains[:, self.configuration_of] * levels).sum(axis=2)
        if self.one_gain is not None:
            if self.one_gain == 1.0:  # 1.0 * level is level exactly: no need for a copy
                return self.levels[:, 0]
            return self.one_gain * self.levels[:, 0]
        if self.levels.shape[1] == 1:
            return self.gain_by_configuration[self.configuration_of, 0] * self.levels[:, 0]
        return self.source_finals.sum(axis=1)

    def source_final(self, source: str) -> np.ndarray:
        """One source's share of every segment's final value."""
        return self.source_finals[:, self.source_names.index(source)]

    # -- the network behind them ------------------------------------------------------------------
    def configuration(self, c: int) -> tuple["Layout", "Reduced"]:
        """The layout and reduced numbers of configuration `c` (no network: an InputError)."""
        if self._fixture is None:
            raise InputError(f"these segments come from a {self.storage_kind}, not a fixture; they have no network")
        reduced = self._reduced
        if reduced is not None and self.units is None:
            # From the batch this was built with: bit for bit what the fixture's own gives.
            layout, batch, i, _ = reduced[c]
            if i is None:  # from the fixture's cache
                return layout, batch
            from .network import plan

            return plan(self._fixture.netlist, self.configurations[c]), batch.item(i)
        return self._fixture.configuration(self.configurations[c])

    @property
    def probe_names(self) -> tuple[str, ...]:
        return () if self._fixture is None else tuple(p.name for p in self._fixture.probes)

    def probe(self, name: str):
        """The :class:`~firstorder.netlist.Probe` called `name` (an InputError naming the probes if none is)."""
        probes = {} if self._fixture is None else {p.name: p for p in self._fixture.probes}
        if name not in probes:
            raise InputError(f"probe: {name!r} is not a probe of the fixture; probes are {list(probes)}")
        return probes[name]

    def probe_rows(self, name: str) -> np.ndarray:
        """(n, 1 + m): probe `name` as an affine row over ``[x, u...]`` in every segment (cached);
        (units, n, 1 + m) for a lot built by :meth:`of_lot`."""
        rows = self._probe_rows.get(name)
        if rows is None and self._lot_resistance is not None:
            rows = lot_probe_rows(self._fixture, self._reduced, self.configurations, self._first_use, self.probe(name),
                                  self.units, self._lot_resistance, self.label)[:, self.configuration_of]
            self._probe_rows[name] = rows
        if rows is None:
            probe = self.probe(name)
            netlist = self._fixture.netlist
            by_config: list = [None] * len(self.configurations)
            # In order of first use, so that an undefined probe is named at its earliest segment.
            for c in np.argsort(self._first_use, kind="stable").tolist():
                layout, reduced = self.configuration(c)
                by_config[c] = probe_row(layout, netlist, reduced, probe,
                                         where=lambda c=c: self.label(int(self._first_use[c])))
            rows = np.array(by_config)[self.configuration_of]
            self._probe_rows[name] = rows
        return rows


def _lot_values(netlist: Netlist, values: Mapping[str, Any], levels: Mapping[str, Any] | None,
                n: int) -> tuple[int, dict[str, np.ndarray], np.ndarray | None]:
    """The count of units, the per-unit resistances by key and the storage values, checked."""
    parts = netlist.part_map
    arrays: dict[str, np.ndarray] = {}
    for key, column in values.items():
        name, _, field = str(key).partition(".")
        part = parts.get(name)
        fine = part is not None and ((not field and part.kind in ("resistor", "capacitor", "inductor"))
                                     or (field in ("r_on", "r_off") and part.kind == "switch"))
        if not fine:
            allowed = [p.name for p in netlist.parts if p.kind in ("resistor", "capacitor", "inductor")]
            allowed += [f"{p.name}.{f}" for p in netlist.switches for f in ("r_on", "r_off")]
            raise InputError(f"values: {key!r} names no part value of the fixture; give one of {allowed}")
        array = np.asarray(column, dtype=np.float64)
        if array.ndim != 1:
            raise InputError(f"values[{key!r}]: has shape {array.shape}; give one value per unit")
        arrays[str(key)] = array
    lengths = {a.size for a in arrays.values()}
    for name, column in (levels or {}).items():
        if name not in netlist.source_names:
            raise InputError(f"levels: {name!r} is not a source; sources are {list(netlist.source_names)}")
        array = np.asarray(column, dtype=np.float64)
        if array.ndim != 2 or array.shape[1] != n:
            raise InputError(f"levels[{name!r}]: has shape {array.shape}; give (units, {n}) levels")
        lengths.add(array.shape[0])
    if len(lengths) != 1:
        raise InputError(f"values: per-unit arrays of {sorted(lengths)} units; give every quantity the same "
                         f"number of units (at least one)")
    storage = arrays.pop(netlist.storage.name, None)
    return lengths.pop(), arrays, storage


def _refuse_ramps(segments: Segments, taus: np.ndarray, drifts: np.ndarray, levels: np.ndarray,
                  inverse: np.ndarray, netlist: Netlist) -> None:
    """A held state that sources drive would ramp without limit: refuse it, naming the
    earliest segment, the storage element and the sources."""
    holding = np.isinf(taus)
    if not (holding.any() and (drifts != 0).any()):
        return
    ramp = (drifts[inverse] * levels != 0).any(axis=1)
    if not ramp.any():
        return
    k = int(np.argmax(ramp))
    storage = netlist.storage
    feeding = [name for name, d in zip(netlist.source_names, drifts[inverse[k]]) if d != 0]
    # A capacitor fed by a current needs a path across it; a coil held at a voltage
    # needs resistance in its loop (a resistor across it would change nothing).
    remedy = (
        "across the capacitor, or in series with the source" if storage.kind == "capacitor"
        else "in series with the inductor (its winding resistance, say) or with the source"
    )
    raise TopologyError(
        f"{segments.label(k)}: {storage.kind} '{storage.name}' sees no resistance, yet {feeding} drive it, "
        f"so its state would ramp without limit. Add a resistance {remedy}."
    )

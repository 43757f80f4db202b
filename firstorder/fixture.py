"""Fixture: named parts on named nodes, with exactly one capacitor or inductor.

A fixture is built part by part (``resistor``, ``switch``, ``capacitor`` ...) on
nodes named by the user; the ground node is ``"gnd"``.  Seen from its single
storage element, every switch configuration of the fixture is a first-order
circuit, reduced by :mod:`firstorder._network` to a time constant, a final value
and an affine formula for every probe.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any

import numpy as np

from . import _network
from .errors import InputError, TopologyError
from .units import format_value, parse_value

if TYPE_CHECKING:
    from .drive import Drive
    from .response import Response

__all__ = ["Fixture", "Part", "Probe", "GROUND"]

GROUND = _network.GROUND

#: Unit of each part kind's value, and of its state where it stores one.
PART_UNITS = {"resistor": "Ω", "capacitor": "F", "inductor": "H", "switch": "Ω"}
SOURCE_UNITS = {"voltage_source": "V", "current_source": "A"}
STATE_UNITS = {"capacitor": "V", "inductor": "A"}
# "times" and "end" are Drive's own arguments, so no drive column could carry those names.
_RESERVED_NAMES = frozenset({"t", "initial", "time", "times", "end", GROUND})


@dataclass(frozen=True, slots=True)
class Part:
    """One part of a fixture.

    Attributes
    ----------
    kind : str
        ``"resistor"``, ``"capacitor"``, ``"inductor"``, ``"switch"``,
        ``"voltage_source"`` or ``"current_source"``.
    name, a, b : str
        The part's name and its two nodes.  Currents are counted from `a`
        through the part to `b`; a capacitor's state is ``v(a) - v(b)``.
    value : float
        Ohms, farads or henries (NaN for sources and switches).
    r_on, r_off : float
        A switch's resistance when closed and open (ohms).
    typed : tuple of (str, object)
        The values as the user gave them, for saving and display.
    """

    kind: str
    name: str
    a: str
    b: str
    value: float = math.nan
    r_on: float = 0.0
    r_off: float = math.inf
    typed: tuple[tuple[str, Any], ...] = ()

    @property
    def is_source(self) -> bool:
        return self.kind in SOURCE_UNITS

    @property
    def is_storage(self) -> bool:
        return self.kind in STATE_UNITS

    def describe_value(self) -> str:
        """The value in engineering notation, for tables."""
        if self.kind == "switch":
            on = "ideal (0 Ω)" if self.r_on == 0 else format_value(self.r_on, "Ω")
            off = "no leakage" if math.isinf(self.r_off) else format_value(self.r_off, "Ω")
            return f"on {on}, off {off}"
        if self.is_source:
            return f"level from drive column '{self.name}' ({SOURCE_UNITS[self.kind]})"
        return format_value(self.value, PART_UNITS[self.kind])


@dataclass(frozen=True, slots=True)
class Probe:
    """A named quantity to watch: a node voltage (against `reference`) or a part current."""

    name: str
    node: str | None = None
    reference: str = GROUND
    through: str | None = None

    @property
    def unit(self) -> str:
        return "V" if self.node is not None else "A"

    def describe(self) -> str:
        if self.node is not None:
            return f"v({self.node})" if self.reference == GROUND else f"v({self.node}) - v({self.reference})"
        return f"current through {self.through}"


def _check_name(name: Any, what: str) -> str:
    if not isinstance(name, str) or not name.strip():
        raise InputError(f"{what} name: {name!r} must be a non-empty string")
    if name in _RESERVED_NAMES:
        raise InputError(f"{what} name: {name!r} is reserved; choose another name")
    return name


def _check_node(node: Any, what: str) -> str:
    if not isinstance(node, str) or not node.strip():
        raise InputError(f"{what}: node {node!r} must be a non-empty string")
    return node


class Fixture:
    """A first-order test fixture: sources, resistors, switches and one capacitor or inductor.

    Examples
    --------
    >>> fx = Fixture()
    >>> _ = fx.voltage_source("vdac", "drv", "gnd")
    >>> _ = fx.resistor("rs", "drv", "a", "1k")
    >>> _ = fx.switch("k1", "a", "b", r_on="0.1")
    >>> _ = fx.capacitor("ch", "b", "gnd", "100n")
    >>> fx.time_constant(k1=True)
    0.00010001
    >>> Fixture.rc(r="10k", c="100n").tau
    0.001
    """

    def __init__(self) -> None:
        self._parts: list[Part] = []
        self._probes: list[Probe] = []
        self._configurations: dict[tuple[bool, ...], tuple[_network.Layout, _network.Reduced]] = {}

    # -- shortcuts ------------------------------------------------------------
    @classmethod
    def rc(cls, r: Any, c: Any) -> "Fixture":
        """Source ``vin`` (node ``in``) -> resistor ``r`` -> capacitor ``c`` (node ``out``) -> gnd."""
        fixture = cls()
        fixture.voltage_source("vin", "in", GROUND)
        fixture.resistor("r", "in", "out", r)
        fixture.capacitor("c", "out", GROUND, c)
        return fixture

    @classmethod
    def rl(cls, r: Any, l: Any) -> "Fixture":  # noqa: E741 - l is the trade's symbol
        """Source ``vin`` (node ``in``) -> resistor ``r`` -> inductor ``l`` (node ``out``) -> gnd."""
        fixture = cls()
        fixture.voltage_source("vin", "in", GROUND)
        fixture.resistor("r", "in", "out", r)
        fixture.inductor("l", "out", GROUND, l)
        return fixture

    # -- building ---------------------------------------------------------------
    def _add(self, part: Part) -> "Fixture":
        if part.name in self.part_map:
            raise InputError(f"part name: {part.name!r} is used twice; part names must be unique")
        if part.a == part.b:
            raise TopologyError(
                f"part '{part.name}': both ends are on node '{part.a}'; a part must join two different nodes"
            )
        if part.is_storage and self._parts and any(p.is_storage for p in self._parts):
            other = next(p for p in self._parts if p.is_storage)
            raise TopologyError(
                f"not first order: '{part.name}' would be a second storage element "
                f"beside {other.kind} '{other.name}'; a fixture holds exactly one capacitor or inductor"
            )
        self._parts.append(part)
        self._configurations.clear()
        return self

    def _two_terminal(self, kind: str, name: Any, a: Any, b: Any, value: Any) -> "Fixture":
        name = _check_name(name, kind)
        number = parse_value(value, field=f"{name} (value)", unit=PART_UNITS[kind], positive=True)
        return self._add(
            Part(kind, name, _check_node(a, f"{name} node a"), _check_node(b, f"{name} node b"),
                 value=number, typed=(("value", value),))
        )

    def resistor(self, name: str, a: str, b: str, value: Any) -> "Fixture":
        """Add a resistor of `value` ohms between nodes `a` and `b`."""
        return self._two_terminal("resistor", name, a, b, value)

    def capacitor(self, name: str, a: str, b: str, value: Any) -> "Fixture":
        """Add the capacitor (farads); its state is ``v(a) - v(b)``."""
        return self._two_terminal("capacitor", name, a, b, value)

    def inductor(self, name: str, a: str, b: str, value: Any) -> "Fixture":
        """Add the inductor (henries); its state is the current from `a` through it to `b`."""
        return self._two_terminal("inductor", name, a, b, value)

    def voltage_source(self, name: str, p: str, n: str) -> "Fixture":
        """Add a voltage source holding ``v(p) - v(n)`` at drive column `name` (volts)."""
        name = _check_name(name, "voltage_source")
        return self._add(Part("voltage_source", name, _check_node(p, f"{name} node p"), _check_node(n, f"{name} node n")))

    def current_source(self, name: str, a: str, b: str) -> "Fixture":
        """Add a current source driving drive column `name` (amps) from `a` through itself into `b`."""
        name = _check_name(name, "current_source")
        return self._add(Part("current_source", name, _check_node(a, f"{name} node a"), _check_node(b, f"{name} node b")))

    def switch(self, name: str, a: str, b: str, r_on: Any = 0.0, r_off: Any = math.inf) -> "Fixture":
        """Add a switch set by drive column `name` (1/True closed, 0/False open).

        `r_on` may be 0 (ideal); `r_off` may be ``inf`` (no leakage); ``r_on < r_off``.
        """
        name = _check_name(name, "switch")
        on = parse_value(r_on, field=f"{name}.r_on", unit="Ω")
        off = parse_value(r_off, field=f"{name}.r_off", unit="Ω", allow_infinite=True)
        if on < 0:
            raise InputError(f"{name}.r_on: {r_on!r} must be >= 0")
        if not off > on:
            raise InputError(f"{name}.r_off: {r_off!r} must be larger than r_on ({r_on!r})")
        return self._add(
            Part("switch", name, _check_node(a, f"{name} node a"), _check_node(b, f"{name} node b"),
                 r_on=on, r_off=off, typed=(("r_on", r_on), ("r_off", r_off)))
        )

    def probe(self, name: str, node: str | None = None, through: str | None = None,
              reference: str = GROUND) -> "Fixture":
        """Watch a node voltage (``node=``, against `reference`) or a part current (``through=``)."""
        name = _check_name(name, "probe")
        if any(p.name == name for p in self._probes):
            raise InputError(f"probe name: {name!r} is used twice; probe names must be unique")
        if (node is None) == (through is None):
            raise InputError(f"probe '{name}': give exactly one of node= or through=")
        if through is not None and through not in self.part_map:
            raise InputError(f"probe '{name}': through={through!r} names no part; parts are {list(self.part_map)}")
        if node is not None:
            # Node names are checked against the network in check(): nodes may still be added.
            node = _check_node(node, f"probe '{name}' node")
            reference = _check_node(reference, f"probe '{name}' reference")
            if node == reference:
                raise InputError(f"probe '{name}': node and reference are both {node!r}; the voltage would always be 0")
        if through is not None and reference != GROUND:
            # A current has no reference node; ignoring one would hide a mistyped voltage probe.
            raise InputError(
                f"probe '{name}': reference={reference!r} applies to a node voltage; a current "
                f"through '{through}' takes no reference"
            )
        self._probes.append(Probe(name, node=node, reference=reference, through=through))
        return self

    def with_values(self, **values: Any) -> "Fixture":
        """A copy with some part values replaced (``r="20k"``, ``k1=("0.2", "inf")``).

        The original is unchanged; an invalid value raises and nothing is replaced.
        """
        copy = Fixture()
        for part in self._parts:
            if part.name in values:
                new = values[part.name]
                if part.kind == "switch":
                    on, off = new if isinstance(new, tuple) else (new, dict(part.typed)["r_off"])
                    copy.switch(part.name, part.a, part.b, on, off)
                elif part.is_source:
                    raise InputError(f"{part.name}: a source's level comes from the drive, not from with_values")
                else:
                    copy._two_terminal(part.kind, part.name, part.a, part.b, new)
            else:
                copy._parts.append(part)
        unknown = sorted(set(values) - set(self.part_map))
        if unknown:
            raise InputError(f"with_values: {unknown} name no part; parts are {list(self.part_map)}")
        copy._probes = list(self._probes)
        return copy

    # -- reading -------------------------------------------------------------------
    @property
    def parts(self) -> tuple[Part, ...]:
        return tuple(self._parts)

    @property
    def part_map(self) -> dict[str, Part]:
        return {p.name: p for p in self._parts}

    @property
    def probes(self) -> tuple[Probe, ...]:
        return tuple(self._probes)

    @property
    def nodes(self) -> tuple[str, ...]:
        """Every node, in order of first use."""
        seen: dict[str, None] = {}
        for part in self._parts:
            seen.setdefault(part.a)
            seen.setdefault(part.b)
        return tuple(seen)

    @property
    def sources(self) -> tuple[Part, ...]:
        return tuple(p for p in self._parts if p.is_source)

    @property
    def switches(self) -> tuple[Part, ...]:
        return tuple(p for p in self._parts if p.kind == "switch")

    @property
    def storage(self) -> Part:
        """The capacitor or inductor."""
        for part in self._parts:
            if part.is_storage:
                return part
        raise TopologyError("not first order: the fixture has no capacitor or inductor; add exactly one")

    @property
    def state_unit(self) -> str:
        return STATE_UNITS[self.storage.kind]

    def check(self) -> None:
        """Check the whole fixture; raise naming the parts or nodes at fault."""
        self.storage  # noqa: B018 - raises when there is none
        counts: dict[str, list[str]] = {}
        for part in self._parts:
            counts.setdefault(part.a, []).append(part.name)
            counts.setdefault(part.b, []).append(part.name)
        if GROUND not in counts:
            raise TopologyError(f"no part touches the ground node '{GROUND}'; connect the fixture to '{GROUND}'")
        for node, names in counts.items():
            if len(names) == 1:
                raise TopologyError(
                    f"node '{node}' connects only to '{names[0]}'; every node needs at least two parts"
                )
        for probe in self._probes:
            for node in (probe.node, probe.reference if probe.node is not None else None):
                if node is not None and node not in counts:
                    raise TopologyError(
                        f"probe '{probe.name}': node '{node}' does not exist; nodes are {list(counts)}"
                    )

    # -- configurations -------------------------------------------------------------
    def switch_states(self, **states: Any) -> tuple[bool, ...]:
        """Switch states as a tuple in fixture order, from ``name=True/False`` keywords."""
        names = [p.name for p in self.switches]
        unknown = sorted(set(states) - set(names))
        if unknown:
            raise InputError(f"switch states: {unknown} name no switch; switches are {names}")
        missing = [n for n in names if n not in states]
        if missing:
            raise InputError(f"switch states: give a state for {missing} (True closed, False open)")
        result = []
        for name in names:
            value = states[name]
            if value not in (0, 1, True, False):
                raise InputError(f"switch state {name}: {value!r}; use True/1 (closed) or False/0 (open)")
            result.append(bool(value))
        return tuple(result)

    def describe_states(self, states: tuple[bool, ...]) -> str:
        return ", ".join(f"{p.name} {'closed' if s else 'open'}" for p, s in zip(self.switches, states))

    def configuration(self, states: tuple[bool, ...] = (), where: str = "") -> tuple[_network.Layout, _network.Reduced]:
        """The reduced network of one switch configuration (cached)."""
        cached = self._configurations.get(states)
        if cached is None:
            self.check()
            label = where or (f"configuration ({self.describe_states(states)})" if states else "the fixture")
            layout = _network.plan(self, states, label)
            cached = (layout, _network.reduce_numeric(layout, self))
            self._configurations[states] = cached
        return cached

    def time_constant(self, **switch_states: Any) -> float:
        """Time constant (s) in the given switch configuration; ``inf`` when it holds."""
        return self.configuration(self.switch_states(**switch_states))[1].tau

    @property
    def tau(self) -> float:
        """Time constant (s) of a fixture without switches."""
        if self.switches:
            names = [p.name for p in self.switches]
            raise InputError(
                f"tau: depends on switches {names}; use time_constant({names[0]}=True, ...)"
            )
        return self.time_constant()

    # -- the layers above -------------------------------------------------------------
    def respond(self, drive: "Drive", initial: Any = 0.0) -> "Response":
        """The response to `drive` from `initial` (a state, ``"settled"`` or ``"periodic"``)."""
        from .response import respond

        return respond(self, drive, initial)

    def derivation(self, **switch_states: Any):
        """The symbolic derivation (sympy) for one switch configuration."""
        from .symbolic import derive

        return derive(self, self.switch_states(**switch_states))

    # -- display ------------------------------------------------------------------------
    def __repr__(self) -> str:
        text = ", ".join(f"{p.name}" for p in self._parts)
        return f"Fixture({len(self._parts)} parts: {text})"

    def _repr_html_(self) -> str:
        from ._html import table

        rows = [[p.name, p.kind.replace("_", " "), f"{p.a} → {p.b}", p.describe_value()] for p in self._parts]
        rows += [[p.name, "probe", "", p.describe()] for p in self._probes]
        try:
            taus = (
                [("τ", format_value(self.tau, "s"))]
                if not self.switches
                else []
            )
        except ValueError as error:
            taus = [("problem", str(error))]
        caption = f"Fixture on nodes {', '.join(self.nodes)}" + "".join(f"; {k} = {v}" for k, v in taus)
        return table(["name", "kind", "nodes", "value"], rows, caption=caption)

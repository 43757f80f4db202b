"""Netlist: the frozen description of a fixture's parts and probes, and its checks.

A :class:`Netlist` is what a fixture *is*: named parts on named nodes (ground is
``"gnd"``) and named probes, as value objects.  The builder
(:class:`~firstorder.fixture.Fixture`) makes a new netlist with every part it adds;
the layers above read one.  :attr:`Netlist.structure` is what the network's
topology depends on (kinds, names, nodes, and which switches are ideal or free of
leakage), without the part values, so that the topology of every switch
configuration is planned once per structure and reused across part values.

Examples
--------
>>> netlist = Netlist().with_part(Part("voltage_source", "vin", "in", GROUND))
>>> netlist = netlist.with_part(Part("resistor", "r", "in", "out", value=1e3))
>>> netlist = netlist.with_part(Part("capacitor", "c", "out", GROUND, value=1e-6))
>>> netlist.storage.name, netlist.nodes, netlist.state_unit
('c', ('in', 'gnd', 'out'), 'V')
>>> netlist.check()
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from .errors import InputError, TopologyError
from .units import format_value, shown

__all__ = ["GROUND", "PART_UNITS", "SOURCE_UNITS", "STATE_UNITS", "Netlist", "Part", "Probe", "check_name",
           "check_node"]

#: The ground node every fixture is referred to.
GROUND = "gnd"

#: Unit of each part kind's value, and of its state where it stores one.
PART_UNITS = {"resistor": "Ω", "capacitor": "F", "inductor": "H", "switch": "Ω"}
SOURCE_UNITS = {"voltage_source": "V", "current_source": "A"}
STATE_UNITS = {"capacitor": "V", "inductor": "A"}
# "times" and "end" name a drive's own arguments (and "time" its CSV column); a Drive takes
# columns so named, but a fixture's parts and probes do not, so that no file is ambiguous.
RESERVED_NAMES = frozenset({"t", "initial", "time", "times", "end", GROUND})


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
        """What the probe watches, in plain words.

        Examples
        --------
        >>> Probe("v_out", node="out").describe(), Probe("v_ab", node="a", reference="b").describe()
        ('voltage at out (to gnd)', 'voltage at a (to b)')
        >>> Probe("i_r", through="r").describe()
        'current through r'
        """
        if self.node is not None:
            return f"voltage at {self.node} (to {self.reference})"
        return f"current through {self.through}"


def check_name(name: Any, what: str) -> str:
    """`name` if it can name a part or probe of kind `what`; else an InputError saying why.

    A name is any non-empty text other than the reserved words (``t``, ``initial``,
    ``time``, ``times``, ``end`` and ``gnd``): ``"c_5%"``, ``"c%s"`` or text with
    markup are names like any other.  Whatever shows or prints a name escapes it
    (derivation printers, HTML, Markdown); nothing formats text with it.

    Examples
    --------
    >>> check_name("r_filter", "resistor")
    'r_filter'
    >>> check_name("end", "resistor")
    Traceback (most recent call last):
    ...
    firstorder.errors.InputError: resistor name: 'end' is reserved; choose another name
    """
    if not isinstance(name, str) or not name.strip():
        raise InputError(f"{what} name: {name!r} must be a non-empty string")
    if name in RESERVED_NAMES:
        raise InputError(f"{what} name: {name!r} is reserved; choose another name")
    return name


def check_node(node: Any, what: str) -> str:
    """`node` if it can name a node (`what` names the field in the error)."""
    if not isinstance(node, str) or not node.strip():
        raise InputError(f"{what}: node {node!r} must be a non-empty string")
    return node


@dataclass(frozen=True)
class Netlist:
    """Parts and probes of a fixture, frozen; see the module docstring.

    Build one part at a time with :meth:`with_part` and :meth:`with_probe` (each
    checks what it can see of the new part) and check the whole with :meth:`check`.
    """

    parts: tuple[Part, ...] = ()
    probes: tuple[Probe, ...] = ()
    # Derived lookups are cached per instance (a netlist never changes).
    _cache: dict = field(default_factory=dict, init=False, repr=False, compare=False)

    # -- building ---------------------------------------------------------------------
    def with_part(self, part: Part) -> "Netlist":
        """A netlist with `part` added; refuses a duplicate name, a part on one node, a second storage element."""
        if part.name in self.part_map:
            raise InputError(f"part name: {part.name!r} is used twice; part names must be unique")
        if part.a == part.b:
            raise TopologyError(
                f"part '{part.name}': both ends are on node '{part.a}'; a part must join two different nodes"
            )
        if part.is_storage:
            other = next((p for p in self.parts if p.is_storage), None)
            if other is not None:
                raise TopologyError(
                    f"not first order: '{part.name}' would be a second storage element "
                    f"beside {other.kind} '{other.name}'; a fixture holds exactly one capacitor or inductor"
                )
        return Netlist(self.parts + (part,), self.probes)

    def with_probe(self, probe: Probe) -> "Netlist":
        """A netlist with `probe` added; refuses a duplicate name or an unknown part."""
        if any(p.name == probe.name for p in self.probes):
            raise InputError(f"probe name: {probe.name!r} is used twice; probe names must be unique")
        if probe.through is not None and probe.through not in self.part_map:
            raise InputError(
                f"probe '{probe.name}': through={probe.through!r} names no part; parts are {list(self.part_map)}")
        return Netlist(self.parts, self.probes + (probe,))

    def with_parts(self, parts: tuple[Part, ...]) -> "Netlist":
        """The same probes on `parts` (new values for the same parts, say)."""
        return Netlist(tuple(parts), self.probes)

    # -- reading ------------------------------------------------------------------------
    def _cached(self, key: str, make):
        value = self._cache.get(key)
        if value is None:
            value = self._cache[key] = make()
        return value

    @property
    def part_map(self) -> dict[str, Part]:
        """Part name to part (a shared mapping: do not change it)."""
        return self._cached("part_map", lambda: {p.name: p for p in self.parts})

    @property
    def nodes(self) -> tuple[str, ...]:
        """Every node, in order of first use."""
        return self._cached("nodes", lambda: tuple(dict.fromkeys(n for p in self.parts for n in (p.a, p.b))))

    @property
    def sources(self) -> tuple[Part, ...]:
        return self._cached("sources", lambda: tuple(p for p in self.parts if p.is_source))

    @property
    def switches(self) -> tuple[Part, ...]:
        return self._cached("switches", lambda: tuple(p for p in self.parts if p.kind == "switch"))

    @property
    def source_names(self) -> tuple[str, ...]:
        return self._cached("source_names", lambda: tuple(p.name for p in self.sources))

    @property
    def switch_names(self) -> tuple[str, ...]:
        return self._cached("switch_names", lambda: tuple(p.name for p in self.switches))

    @property
    def storage(self) -> Part:
        """The capacitor or inductor."""
        return self._cached("storage", self._find_storage)

    def _find_storage(self) -> Part:
        for part in self.parts:
            if part.is_storage:
                return part
        raise TopologyError("not first order: the fixture has no capacitor or inductor; add exactly one")

    @property
    def state_unit(self) -> str:
        """V for a capacitor's voltage, A for an inductor's current."""
        return STATE_UNITS[self.storage.kind]

    @property
    def structure(self) -> tuple:
        """What the topology depends on: kinds, names and nodes of the parts, which switches are
        ideal (``r_on == 0``) or free of leakage (``r_off == inf``), and the probes; no values."""
        return self._cached("structure", lambda: (
            tuple((p.kind, p.name, p.a, p.b, p.r_on == 0.0, math.isinf(p.r_off)) for p in self.parts),
            self.probes,
        ))

    def check(self) -> None:
        """Check the whole netlist; raise naming the parts or nodes at fault (checked once per netlist)."""
        if self._cache.get("checked"):
            return
        self.storage  # noqa: B018 - raises when there is none
        counts: dict[str, list[str]] = {}
        for part in self.parts:
            counts.setdefault(part.a, []).append(part.name)
            counts.setdefault(part.b, []).append(part.name)
        if GROUND not in counts:
            raise TopologyError(f"no part touches the ground node '{GROUND}'; connect the fixture to '{GROUND}'")
        for node, names in counts.items():
            if len(names) == 1:
                raise TopologyError(
                    f"node '{node}' connects only to '{names[0]}'; every node needs at least two parts"
                )
        for probe in self.probes:
            for node in (probe.node, probe.reference if probe.node is not None else None):
                if node is not None and node not in counts:
                    raise TopologyError(
                        f"probe '{probe.name}': node '{node}' does not exist; nodes are {list(counts)}"
                    )
        self._cache["checked"] = True

    # -- switch configurations --------------------------------------------------------------
    def switch_states(self, **states: Any) -> tuple[bool, ...]:
        """Switch states as a tuple in netlist order, from ``name=True/False`` keywords."""
        names = list(self.switch_names)
        unknown = sorted(set(states) - set(names))
        if unknown:
            raise InputError(f"switch states: {unknown} name no switch; switches are {names}")
        missing = [n for n in names if n not in states]
        if missing:
            raise InputError(f"switch states: give a state for {missing} (True closed, False open)")
        result = []
        for name in names:
            value = states[name]
            try:
                valid = not isinstance(value, (str, bytes)) and value in (0, 1)
            except (TypeError, ValueError):  # an array, say: its comparison has no single truth
                valid = False
            if not valid:
                raise InputError(f"switch state {name}: {shown(value)}; use True/1 (closed) or False/0 (open)")
            result.append(bool(value))
        return tuple(result)

    def describe_states(self, states: tuple[bool, ...]) -> str:
        """``"k1 closed, k2 open"`` (empty without switches)."""
        return ", ".join(f"{name} {'closed' if s else 'open'}" for name, s in zip(self.switch_names, states))

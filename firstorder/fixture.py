"""Fixture: build a netlist part by part, and read each switch configuration's numbers.

A fixture is built part by part (``resistor``, ``switch``, ``capacitor`` ...) on
nodes named by the user; the ground node is ``"gnd"``.  What it holds is a frozen
:class:`~firstorder.netlist.Netlist`; seen from its single storage element, every
switch configuration is a first-order circuit, reduced by :mod:`firstorder.network`
to a time constant, a final value and an affine formula for every probe (cached
per configuration; the topology is cached by structure, so copies with other part
values plan nothing again).

The one-line shortcuts (:meth:`Fixture.respond`, :meth:`Fixture.derivation`) import
the layers above when called and make one call.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

from . import network
from .errors import InputError
from .netlist import GROUND, PART_UNITS, Netlist, Part, Probe, check_name, check_node
from .units import format_value, parse_value

if TYPE_CHECKING:
    from .drive import Drive
    from .response import Response
    from .symbolic import Derivation
    from .studies import Study

__all__ = ["Fixture"]


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

    See Also
    --------
    firstorder.netlist.Netlist : what a fixture holds, frozen.
    """

    def __init__(self) -> None:
        self._netlist = Netlist()
        self._configurations: dict[tuple[bool, ...], tuple[network.Layout, network.Reduced]] = {}

    # -- shortcuts ------------------------------------------------------------
    @classmethod
    def rc(cls, r: Any, c: Any) -> "Fixture":
        """Source ``vin`` (node ``in``) -> resistor ``r`` -> capacitor ``c`` (node ``out``) -> gnd.

        See Also
        --------
        rl : the same with an inductor.
        """
        fixture = cls()
        fixture.voltage_source("vin", "in", GROUND)
        fixture.resistor("r", "in", "out", r)
        fixture.capacitor("c", "out", GROUND, c)
        return fixture

    @classmethod
    def rl(cls, r: Any, l: Any) -> "Fixture":  # noqa: E741 - l is the trade's symbol
        """Source ``vin`` (node ``in``) -> resistor ``r`` -> inductor ``l`` (node ``out``) -> gnd.

        See Also
        --------
        rc : the same with a capacitor.
        """
        fixture = cls()
        fixture.voltage_source("vin", "in", GROUND)
        fixture.resistor("r", "in", "out", r)
        fixture.inductor("l", "out", GROUND, l)
        return fixture

    # -- building ---------------------------------------------------------------
    def _add(self, part: Part) -> "Fixture":
        self._netlist = self._netlist.with_part(part)
        self._configurations.clear()
        return self

    def _two_terminal(self, kind: str, name: Any, a: Any, b: Any, value: Any) -> Part:
        name = check_name(name, kind)
        number = parse_value(value, field=f"{name} (value)", unit=PART_UNITS[kind], positive=True)
        return Part(kind, name, check_node(a, f"{name} node a"), check_node(b, f"{name} node b"),
                    value=number, typed=(("value", value),))

    def _switch(self, name: Any, a: Any, b: Any, r_on: Any, r_off: Any) -> Part:
        name = check_name(name, "switch")
        on = parse_value(r_on, field=f"{name}.r_on", unit="Ω")
        off = parse_value(r_off, field=f"{name}.r_off", unit="Ω", allow_infinite=True)
        if on < 0:
            raise InputError(f"{name}.r_on: {r_on!r} must be >= 0")
        if not off > on:
            raise InputError(f"{name}.r_off: {r_off!r} must be larger than r_on ({r_on!r})")
        return Part("switch", name, check_node(a, f"{name} node a"), check_node(b, f"{name} node b"),
                    r_on=on, r_off=off, typed=(("r_on", r_on), ("r_off", r_off)))

    def resistor(self, name: str, a: str, b: str, value: Any) -> "Fixture":
        """Add a resistor of `value` ohms between nodes `a` and `b`."""
        return self._add(self._two_terminal("resistor", name, a, b, value))

    def capacitor(self, name: str, a: str, b: str, value: Any) -> "Fixture":
        """Add the capacitor (farads); its state is ``v(a) - v(b)``.

        See Also
        --------
        inductor : the other storage element; a fixture holds exactly one.
        """
        return self._add(self._two_terminal("capacitor", name, a, b, value))

    def inductor(self, name: str, a: str, b: str, value: Any) -> "Fixture":
        """Add the inductor (henries); its state is the current from `a` through it to `b`.

        See Also
        --------
        capacitor : the other storage element; a fixture holds exactly one.
        """
        return self._add(self._two_terminal("inductor", name, a, b, value))

    def voltage_source(self, name: str, p: str, n: str) -> "Fixture":
        """Add a voltage source holding ``v(p) - v(n)`` at drive column `name` (volts).

        See Also
        --------
        current_source
        """
        name = check_name(name, "voltage_source")
        return self._add(Part("voltage_source", name, check_node(p, f"{name} node p"), check_node(n, f"{name} node n")))

    def current_source(self, name: str, a: str, b: str) -> "Fixture":
        """Add a current source driving drive column `name` (amps) from `a` through itself into `b`.

        See Also
        --------
        voltage_source
        """
        name = check_name(name, "current_source")
        return self._add(Part("current_source", name, check_node(a, f"{name} node a"), check_node(b, f"{name} node b")))

    def switch(self, name: str, a: str, b: str, r_on: Any = 0.0, r_off: Any = math.inf) -> "Fixture":
        """Add a switch set by drive column `name` (1/True closed, 0/False open).

        `r_on` may be 0 (ideal); `r_off` may be ``inf`` (no leakage); ``r_on < r_off``.
        """
        return self._add(self._switch(name, a, b, r_on, r_off))

    def probe(self, name: str, node: str | None = None, through: str | None = None,
              reference: str = GROUND) -> "Fixture":
        """Watch a node voltage (``node=``, against `reference`) or a part current (``through=``)."""
        name = check_name(name, "probe")
        if (node is None) == (through is None):
            raise InputError(f"probe '{name}': give exactly one of node= or through=")
        if node is not None:
            # Node names are checked against the network in check(): nodes may still be added.
            node = check_node(node, f"probe '{name}' node")
            reference = check_node(reference, f"probe '{name}' reference")
            if node == reference:
                raise InputError(f"probe '{name}': node and reference are both {node!r}; the voltage would always be 0")
        if through is not None and reference != GROUND:
            # A current has no reference node; ignoring one would hide a mistyped voltage probe.
            raise InputError(
                f"probe '{name}': reference={reference!r} applies to a node voltage; a current "
                f"through '{through}' takes no reference"
            )
        self._netlist = self._netlist.with_probe(Probe(name, node=node, reference=reference, through=through))
        return self

    def with_values(self, **values: Any) -> "Fixture":
        """A copy with some part values replaced (``r="20k"``, ``k1=("0.2", "inf")``).

        The original is unchanged; an invalid value raises and nothing is replaced.
        """
        unknown = sorted(set(values) - set(self.part_map))
        if unknown:
            raise InputError(f"with_values: {unknown} name no part; parts are {list(self.part_map)}")
        parts = []
        for part in self._netlist.parts:
            if part.name not in values:
                parts.append(part)
                continue
            new = values[part.name]
            if part.kind == "switch":
                on, off = new if isinstance(new, tuple) else (new, dict(part.typed)["r_off"])
                parts.append(self._switch(part.name, part.a, part.b, on, off))
            elif part.is_source:
                raise InputError(f"{part.name}: a source's level comes from the drive, not from with_values")
            else:
                parts.append(self._two_terminal(part.kind, part.name, part.a, part.b, new))
        copy = Fixture()
        copy._netlist = self._netlist.with_parts(tuple(parts))
        return copy

    # -- reading -------------------------------------------------------------------
    @property
    def netlist(self) -> Netlist:
        """The parts and probes as a frozen :class:`~firstorder.netlist.Netlist`."""
        return self._netlist

    @property
    def parts(self) -> tuple[Part, ...]:
        return self._netlist.parts

    @property
    def part_map(self) -> dict[str, Part]:
        return self._netlist.part_map

    @property
    def probes(self) -> tuple[Probe, ...]:
        return self._netlist.probes

    @property
    def nodes(self) -> tuple[str, ...]:
        """Every node, in order of first use."""
        return self._netlist.nodes

    @property
    def sources(self) -> tuple[Part, ...]:
        return self._netlist.sources

    @property
    def switches(self) -> tuple[Part, ...]:
        return self._netlist.switches

    @property
    def storage(self) -> Part:
        """The capacitor or inductor."""
        return self._netlist.storage

    @property
    def state_unit(self) -> str:
        return self._netlist.state_unit

    def check(self) -> None:
        """Check the whole fixture; raise naming the parts or nodes at fault."""
        self._netlist.check()

    # -- configurations -------------------------------------------------------------
    def switch_states(self, **states: Any) -> tuple[bool, ...]:
        """Switch states as a tuple in fixture order, from ``name=True/False`` keywords."""
        return self._netlist.switch_states(**states)

    def describe_states(self, states: tuple[bool, ...]) -> str:
        """``"k1 closed, k2 open"`` for a tuple of switch states (empty without switches)."""
        return self._netlist.describe_states(states)

    def configuration(self, states: tuple[bool, ...] = (), where: Any = "") -> tuple[network.Layout, network.Reduced]:
        """The layout and reduced numbers of one switch configuration (cached).

        `where` names the configuration in errors: text, or a function that makes
        it (called only if there is an error).
        """
        cached = self._configurations.get(states)
        if cached is None:
            netlist = self._netlist
            netlist.check()
            if not where:
                def where() -> str:
                    return f"configuration ({netlist.describe_states(states)})" if states else "the fixture"
            layout = network.plan(netlist, states, where)
            cached = (layout, network.reduce(layout, netlist))
            self._configurations[states] = cached
        return cached

    def known_configuration(self, states: tuple[bool, ...]) -> tuple[network.Layout, network.Reduced] | None:
        """The cached layout and numbers of a configuration, or None if not reduced yet."""
        return self._configurations.get(states)

    def keep_configuration(self, states: tuple[bool, ...], layout: network.Layout, reduced: network.Reduced) -> None:
        """Cache a configuration reduced elsewhere (in a batch: bit for bit what
        :meth:`configuration` would reduce)."""
        self._configurations[states] = (layout, reduced)

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
        """The response to `drive` from `initial` (a state, ``"settled"`` or ``"periodic"``).

        See Also
        --------
        firstorder.response.respond : what this calls.
        """
        from .response import respond

        return respond(self, drive, initial)

    def derivation(self, **switch_states: Any) -> "Derivation":
        """The symbolic derivation (sympy) for one switch configuration.

        See Also
        --------
        firstorder.symbolic.derive : what this calls.
        """
        from .symbolic import derive

        return derive(self, self.switch_states(**switch_states))

    def study(self, drive: "Drive", spread: Any, *, units: Any, seed: Any, initial: Any = 0.0,
              **options: Any) -> "Study":
        """A tolerance study: `units` units drawn from `spread` (seeded by `seed`) under `drive`;
        `options` (``keep``, ``chunk``, ``progress``, ``tolerance``, ``numerical_tolerance``,
        ...) as for :class:`~firstorder.studies.Study`.

        See Also
        --------
        firstorder.studies.Study : what this builds.
        """
        from .studies import Study

        return Study(self, drive, spread, units=units, seed=seed, initial=initial, **options)

    def worst_case(self, drive: "Drive", spread: Any, tol: Any, sample_delay: Any = None, probe: str | None = None,
                   initial: Any = 0.0):
        """Per segment, the worst settle time and error at the sample within `spread`'s bands,
        and the values of every quantity giving them (a pandas DataFrame).

        See Also
        --------
        firstorder.studies.worst.worst_case : what this calls, and how it searches.
        """
        from .studies.worst import worst_case

        return worst_case(self, drive, spread, tol, sample_delay=sample_delay, probe=probe, initial=initial)

    # -- display ------------------------------------------------------------------------
    def __repr__(self) -> str:
        text = ", ".join(f"{p.name}" for p in self.parts)
        return f"Fixture({len(self.parts)} parts: {text})"

    def _repr_html_(self) -> str:
        from ._html import table

        rows = [[p.name, p.kind.replace("_", " "), f"{p.a} → {p.b}", p.describe_value()] for p in self.parts]
        rows += [[p.name, "probe", "", p.describe()] for p in self.probes]
        try:
            taus = [("τ", format_value(self.tau, "s"))] if not self.switches else []
        except ValueError as error:
            taus = [("problem", str(error))]
        caption = f"Fixture on nodes {', '.join(self.nodes)}" + "".join(f"; {k} = {v}" for k, v in taus)
        return table(["name", "kind", "nodes", "value"], rows, caption=caption)

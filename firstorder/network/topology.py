"""The topology of one switch configuration: checks, and the layout of its stamps.

The storage element is replaced by a source of its own state (a voltage source of
value x for a capacitor, a current source of value x for an inductor).  The rest
of the network is resistive, so every voltage and current in it is an affine
function of the excitations ``e = [x, u_1, ..., u_m]`` (the state, then every
source level in netlist order).  A :class:`Layout` lists the stamps of modified
nodal analysis for one configuration, independent of part values; the same
layout serves the numeric reduction (:mod:`firstorder.network.reduce`) and the
symbolic one (:mod:`firstorder.symbolic`).

Before any matrix is built the topology is checked with union-find, so that an
ill-posed configuration (a loop of ideal voltage elements, a cut set of current
elements) is named by its parts instead of showing up as a singular matrix.
Layouts are cached by the netlist's structure (:attr:`Netlist.structure`), so a
change of part values plans nothing again.
"""

from __future__ import annotations

from collections import OrderedDict, defaultdict
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from ..errors import TopologyError, ZeroTimeError
from ..netlist import GROUND, Netlist

__all__ = ["Layout", "UnionFind", "and_list", "plan", "structural_switches"]

#: Layouts kept, by structure and configuration (a long session must not grow without limit).
_CACHE_SIZE = 65536
_cache: OrderedDict[tuple, "Layout"] = OrderedDict()

class UnionFind:
    """Disjoint sets of node names (path compression)."""

    def __init__(self) -> None:
        self._parent: dict[str, str] = {}

    def find(self, node: str) -> str:
        parent = self._parent.setdefault(node, node)
        if parent != node:
            parent = self._parent[node] = self.find(parent)
        return parent

    def union(self, a: str, b: str) -> bool:
        """Join the sets of `a` and `b`; False when they were joined already."""
        root_a, root_b = self.find(a), self.find(b)
        if root_a == root_b:
            return False
        self._parent[root_a] = root_b
        return True


def _path(edges: list[tuple[str, str, str]], start: str, goal: str) -> list[str]:
    """Names of the edges on a path from `start` to `goal` (breadth first)."""
    neighbours: dict[str, list[tuple[str, str]]] = defaultdict(list)
    for name, a, b in edges:
        neighbours[a].append((b, name))
        neighbours[b].append((a, name))
    came: dict[str, tuple[str, str] | None] = {start: None}
    queue = [start]
    while queue:
        node = queue.pop(0)
        if node == goal:
            break
        for other, name in neighbours[node]:
            if other not in came:
                came[other] = (node, name)
                queue.append(other)
    names: list[str] = []
    node = goal
    while came.get(node) is not None:
        node, name = came[node]  # type: ignore[misc]
        names.append(name)
    return names[::-1]


def and_list(names: list[str]) -> str:
    """``'a'``, ``'a' and 'b'``, ``'a', 'b' and 'c'``: names quoted for a message."""
    quoted = [f"'{n}'" for n in names]
    return quoted[0] if len(quoted) == 1 else ", ".join(quoted[:-1]) + " and " + quoted[-1]


@dataclass(frozen=True)
class Layout:
    """The stamps of one configuration, independent of part values.

    Attributes
    ----------
    nodes : tuple of str
        Non-ground nodes, in matrix order.
    conductances : tuple of (part name, value key, node a, node b)
        Resistive branches; the value key is ``"value"``, ``"r_on"`` or ``"r_off"``.
    voltage_branches : tuple of (label, node p, node n, excitation index or None)
        Ideal voltage elements: sources (index 1 + j), the capacitor (index 0),
        ideal closed switches and island pins (None: zero volts).
    current_injections : tuple of (label, node a, node b, excitation index)
        Current sources (1 + j) and the inductor (0), flowing from a into b.
    holds : bool
        The storage element sees no resistive path (tau is infinite).
    islands : dict of str to str
        Nodes that float in this configuration (nothing but open switches or current
        sources joins them to ground), each mapped to the node pinned at 0 V for its
        island: their voltages against anything outside the island are not defined.
    held_by : tuple of int
        When the state is held: per excitation ``[x, u...]``, the exact coefficient
        (0, ±1, ...) with which it drives the storage element's rate (the current into
        a cut-off capacitor, the voltage across a shorted coil), read off the graph;
        all zeros otherwise.
    undefined_currents : frozenset of str
        Zero-ohm switches that close loops of zero-ohm switches: the voltages are
        defined, the currents through them are not.
    """

    nodes: tuple[str, ...]
    conductances: tuple[tuple[str, str, str, str], ...]
    voltage_branches: tuple[tuple[str, str, str, int | None], ...]
    current_injections: tuple[tuple[str, str, str, int], ...]
    holds: bool
    storage_kind: str
    storage_name: str
    node_index: dict[str, int] = field(default_factory=dict, compare=False)
    islands: dict[str, str] = field(default_factory=dict, compare=False)
    held_by: tuple[int, ...] = ()
    undefined_currents: frozenset = frozenset()
    #: Value-independent results worked out once per layout (the generic solution, say).
    memo: dict = field(default_factory=dict, compare=False, repr=False)

    @property
    def size(self) -> int:
        return len(self.nodes) + len(self.voltage_branches)

    def branch_row(self, label: str) -> int:
        for k, (name, *_rest) in enumerate(self.voltage_branches):
            if name == label:
                return len(self.nodes) + k
        raise KeyError(label)


def plan(netlist: Netlist, states: tuple[bool, ...], where: str | Callable[[], str] = "") -> Layout:
    """Check the topology of one switch configuration and lay out its stamps (cached).

    Parameters
    ----------
    netlist : Netlist
    states : tuple of bool
        Closed (True) or open, for each switch in netlist order.
    where : str or callable
        Text naming the configuration in errors (``"segment 3 (k1 open)"``), or a
        function that makes it: built only when an error needs it.

    Raises
    ------
    TopologyError, ZeroTimeError
        Naming `where`, the parts and the nodes.

    See Also
    --------
    firstorder.network.reduce.reduce : the numbers of a planned configuration.
    firstorder.fixture.Fixture.configuration : both, cached per fixture.

    Examples
    --------
    >>> from firstorder.netlist import Part
    >>> netlist = Netlist((Part("voltage_source", "vin", "in", "gnd"), Part("switch", "k", "in", "out", r_on=1.0),
    ...                    Part("capacitor", "c", "out", "gnd", value=1e-6)))
    >>> plan(netlist, (True,)).holds, plan(netlist, (False,)).holds
    (False, True)
    """
    key = (netlist.structure, states)
    layout = _cache.get(key)
    if layout is not None:
        _cache.move_to_end(key)
        return layout
    # A switch with a finite, non-zero r_on and a finite r_off is a conductance either way:
    # its state picks a value, not a topology.  Configurations that differ only in such
    # switches share one plan, with the value keys swapped (many relays: one plan).
    structural = structural_switches(netlist)
    masked = tuple(state if fixed else None for state, fixed in zip(states, structural))
    base = _cache.get((netlist.structure, masked))
    if base is None:
        base = _plan(netlist, states, where)
        _cache[(netlist.structure, masked)] = base
    layout = base if masked == states else _with_keys(base, netlist, states)
    _cache[key] = layout
    while len(_cache) > _CACHE_SIZE:
        _cache.popitem(last=False)
    return layout


def structural_switches(netlist: Netlist) -> tuple[bool, ...]:
    """Per switch: does its state change the topology (an ideal r_on or a leak-free r_off)?"""
    return netlist._cached("structural_switches", lambda: tuple(
        p.r_on == 0.0 or not np.isfinite(p.r_off) for p in netlist.switches))


def _with_keys(base: Layout, netlist: Netlist, states: tuple[bool, ...]) -> Layout:
    """`base` with every switch conductance carrying the value key of its state in `states`."""
    closed = dict(zip(netlist.switch_names, states))
    conductances = tuple(
        (name, ("r_on" if closed[name] else "r_off") if name in closed else key, a, b)
        for name, key, a, b in base.conductances)
    return Layout(nodes=base.nodes, conductances=conductances, voltage_branches=base.voltage_branches,
                  current_injections=base.current_injections, holds=base.holds, storage_kind=base.storage_kind,
                  storage_name=base.storage_name, node_index=base.node_index, islands=base.islands,
                  held_by=base.held_by, undefined_currents=base.undefined_currents)


def _plan(netlist: Netlist, states: tuple[bool, ...], where: str | Callable[[], str]) -> Layout:
    if callable(where):
        describe = where
    else:
        def describe() -> str:
            return where or "this configuration"
    storage = netlist.storage
    switch_state = dict(zip((p.name for p in netlist.switches), states))
    conductances: list[tuple[str, str, str, str]] = []
    ideal_voltage: list[tuple[str, str, str, int | None]] = []
    injections: list[tuple[str, str, str, int]] = []
    source_index = {p.name: 1 + j for j, p in enumerate(netlist.sources)}

    for part in netlist.parts:
        if part.kind == "resistor":
            conductances.append((part.name, "value", part.a, part.b))
        elif part.kind == "switch":
            closed = switch_state[part.name]
            key = "r_on" if closed else "r_off"
            resistance = part.r_on if closed else part.r_off
            if resistance == 0.0:
                ideal_voltage.append((part.name, part.a, part.b, None))
            elif np.isfinite(resistance):
                conductances.append((part.name, key, part.a, part.b))
        elif part.kind == "voltage_source":
            ideal_voltage.append((part.name, part.a, part.b, source_index[part.name]))
        elif part.kind == "current_source":
            injections.append((part.name, part.a, part.b, source_index[part.name]))

    # 1. Loops of ideal voltage elements (sources and ideal switches).
    loops = UnionFind()
    placed: list[tuple[str, str, str]] = []
    kept: list[tuple[str, str, str, int | None]] = []
    undefined: set[str] = set()
    source_of = {name: source for name, _, _, source in ideal_voltage}
    for name, a, b, source in ideal_voltage:
        if not loops.union(a, b):
            loop = sorted({name, *_path(placed, a, b)})
            if all(source_of[n] is None for n in loop):
                # Zero-ohm switches only (in parallel, say): every voltage is defined and the
                # extra switch adds no equation; only the currents through the loop are not.
                undefined.update(loop)
                continue
            raise TopologyError(
                f"{describe()}: {and_list(loop)} form a loop of ideal voltage elements "
                f"(sources or zero-ohm switches); their voltages fight with no "
                f"resistance to take the difference. Give a switch a non-zero r_on "
                f"or add a series resistance."
            )
        placed.append((name, a, b))
        kept.append((name, a, b, source))
    ideal_voltage = kept

    holds = False
    held_by = [0] * (1 + len(netlist.sources))
    if storage.kind == "capacitor":
        if loops.find(storage.a) == loops.find(storage.b):
            loop = sorted({storage.name, *_path(placed, storage.a, storage.b)})
            raise ZeroTimeError(
                f"{describe()}: capacitor '{storage.name}' sits across a loop of ideal "
                f"voltage elements ({and_list(loop)}), which would change its "
                f"voltage in zero time with an infinite current. Add a realistic "
                f"resistance in that loop (a source's output resistance or a "
                f"switch's r_on, for example 1 Ω)."
            )
        # With every resistive and ideal path drawn, are the capacitor's nodes
        # joined at all?  If not, nothing can charge it through a resistance.
        conducting = UnionFind()
        for _, _, a, b in conductances:
            conducting.union(a, b)
        for _, a, b, _ in ideal_voltage:
            conducting.union(a, b)
        holds = conducting.find(storage.a) != conducting.find(storage.b)
        if holds:
            # Kirchhoff's current law on the side of a: what current sources bring into it
            # leaves through the capacitor, a to b (sources from a side to elsewhere are cut
            # sets, refused below).
            side = conducting.find(storage.a)
            for _, x, y, source in injections:
                into, out_of = conducting.find(y) == side, conducting.find(x) == side
                held_by[source] += int(into) - int(out_of)
        ideal_voltage.append((storage.name, storage.a, storage.b, 0))
    else:
        # An inductor shorted by ideal elements keeps its current: tau = L / 0.
        holds = loops.find(storage.a) == loops.find(storage.b)
        if holds:
            held_by = _path_voltage([(n, p, q, source_of[n]) for n, p, q in placed], storage.a, storage.b,
                                    len(held_by))
        injections.append((storage.name, storage.a, storage.b, 0))

    # 2. Cut sets of current elements: components of the non-current graph.
    solid = UnionFind()
    for _, _, a, b in conductances:
        solid.union(a, b)
    for _, a, b, _ in ideal_voltage:
        solid.union(a, b)
    for node in netlist.nodes:
        solid.find(node)
    for _, a, b, _ in injections:
        if solid.find(a) != solid.find(b):
            crossing = sorted(
                n for n, p, q, _ in injections if {solid.find(p), solid.find(q)} == {solid.find(a), solid.find(b)}
            )
            if storage.kind == "inductor" and storage.name in crossing:
                # The coil's current is cut (nothing else joins its ends) or forced by
                # current sources in series with it: either way it would jump in zero time.
                sources = [n for n in crossing if n != storage.name]
                if sources:
                    level = "source's level" if len(sources) == 1 else "sources' levels"
                    verb = "is" if len(sources) == 1 else "are"
                    cause = (
                        f"only {and_list(sources)} {verb} in series with it, so its current "
                        f"would be forced to the {level} in zero time"
                    )
                else:
                    ends = {solid.find(a), solid.find(b)}
                    cutting = sorted(
                        part.name for part in netlist.switches
                        if not switch_state[part.name] and not np.isfinite(part.r_off)
                        and solid.find(part.a) != solid.find(part.b)
                        and ends & {solid.find(part.a), solid.find(part.b)}
                    )
                    opened = f" (open: {and_list(cutting)})" if cutting else ""
                    cause = f"its path is cut{opened}, so the current would have to stop in zero time"
                raise ZeroTimeError(
                    f"{describe()}: the current of inductor '{storage.name}' has no path through a "
                    f"resistance or a voltage element between nodes '{a}' and '{b}': {cause}. "
                    f"In a real coil this is the voltage spike of an interrupted inductor, large enough to "
                    f"arc across the switch and destroy parts. Add a flyback path "
                    f"(a diode or a resistor across the coil, for example 1 kΩ) or a "
                    f"switch off-resistance. CAUTION: energy stored in a coil is "
                    f"released as a high voltage when its current is interrupted; follow "
                    f"local codes and licensed practice."
                )
            which = f"current source {and_list(crossing)} is" if len(crossing) == 1 else \
                f"current sources {and_list(crossing)} form"
            raise TopologyError(
                f"{describe()}: {which} a cut set (nothing but current sources joins the "
                f"nodes around '{a}' and '{b}'), so the current cannot flow. Add a resistance "
                f"across {'it' if len(crossing) == 1 else 'one of them'}."
            )

    # 3. Islands that do not reach ground float: pin one node of each at 0 V.
    #    No current can enter them (step 2), so the pin carries none.
    ground_root = solid.find(GROUND)
    pinned: dict[str, str] = {}
    islands: dict[str, str] = {}
    for node in netlist.nodes:
        root = solid.find(node)
        if node != GROUND and root != ground_root:
            if root not in pinned:
                pinned[root] = node
                ideal_voltage.append((f"pin:{node}", node, GROUND, None))
            islands[node] = pinned[root]

    nodes = tuple(n for n in netlist.nodes if n != GROUND)
    return Layout(
        nodes=nodes,
        conductances=tuple(conductances),
        voltage_branches=tuple(ideal_voltage),
        current_injections=tuple(injections),
        holds=holds,
        storage_kind=storage.kind,
        storage_name=storage.name,
        node_index={n: i for i, n in enumerate(nodes)},
        islands=islands,
        held_by=tuple(held_by),
        undefined_currents=frozenset(undefined),
    )


def _path_voltage(edges: list[tuple[str, str, str, int | None]], a: str, b: str, width: int) -> list[int]:
    """v(a) - v(b) along a tree of ideal voltage elements, as exact integer coefficients over
    ``[x, u...]`` (an element ``(name, p, n, source)`` holds v(p) - v(n) = u_source, or 0)."""
    neighbours: dict[str, list[tuple[str, int | None, int]]] = defaultdict(list)
    for _, p, n, source in edges:
        neighbours[p].append((n, source, -1))  # v(n) = v(p) - u
        neighbours[n].append((p, source, +1))  # v(p) = v(n) + u
    potential: dict[str, list[int]] = {a: [0] * width}
    queue = [a]
    while queue:
        node = queue.pop()
        for other, source, sign in neighbours[node]:
            if other not in potential:
                row = list(potential[node])
                if source is not None:
                    row[source] += sign
                potential[other] = row
                queue.append(other)
    # Potentials are taken from v(a) = 0: v(a) - v(b) = -potential[b].
    return [-c for c in potential[b]]



"""Reduce a fixture, per switch configuration, to what its storage element sees.

The storage element is replaced by a source of its own state (a voltage source of
value x for a capacitor, a current source of value x for an inductor).  The rest
of the network is resistive, so every voltage and current in it is an affine
function of the excitations ``e = [x, u_1, ..., u_m]`` (the state, then every
source level in fixture order).  Modified nodal analysis gives those functions
as rows of a matrix; the same stamps serve the numeric path here (numpy) and the
symbolic one (:mod:`firstorder.symbolic`, sympy).

Before any matrix is built the topology is checked with union-find, so that an
ill-posed configuration (a loop of ideal voltage elements, a cut set of current
elements) is named by its parts instead of showing up as a singular matrix.
"""

from __future__ import annotations

import math

from collections import defaultdict
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from .errors import TopologyError, ZeroTimeError

if TYPE_CHECKING:
    from .fixture import Fixture, Part

GROUND = "gnd"


class _UnionFind:
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


def _and_list(names: list[str]) -> str:
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

    @property
    def size(self) -> int:
        return len(self.nodes) + len(self.voltage_branches)

    def branch_row(self, label: str) -> int:
        for k, (name, *_rest) in enumerate(self.voltage_branches):
            if name == label:
                return len(self.nodes) + k
        raise KeyError(label)


def plan(fixture: "Fixture", states: tuple[bool, ...], where: str) -> Layout:
    """Check the topology of one switch configuration and lay out its stamps.

    Parameters
    ----------
    fixture : Fixture
    states : tuple of bool
        Closed (True) or open, for each switch in fixture order.
    where : str
        Text naming the configuration in errors (``"segment 3 (k1 open)"``).
    """
    storage = fixture.storage
    switch_state = dict(zip((p.name for p in fixture.switches), states))
    conductances: list[tuple[str, str, str, str]] = []
    ideal_voltage: list[tuple[str, str, str, int | None]] = []
    injections: list[tuple[str, str, str, int]] = []
    source_index = {p.name: 1 + j for j, p in enumerate(fixture.sources)}

    for part in fixture.parts:
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
    loops = _UnionFind()
    placed: list[tuple[str, str, str]] = []
    for name, a, b, _ in ideal_voltage:
        if not loops.union(a, b):
            loop = sorted({name, *_path(placed, a, b)})
            raise TopologyError(
                f"{where}: {_and_list(loop)} form a loop of ideal voltage elements "
                f"(sources or zero-ohm switches); their voltages fight with no "
                f"resistance to take the difference. Give a switch a non-zero r_on "
                f"or add a series resistance."
            )
        placed.append((name, a, b))

    holds = False
    if storage.kind == "capacitor":
        if loops.find(storage.a) == loops.find(storage.b):
            loop = sorted({storage.name, *_path(placed, storage.a, storage.b)})
            raise ZeroTimeError(
                f"{where}: capacitor '{storage.name}' sits across a loop of ideal "
                f"voltage elements ({_and_list(loop)}), which would change its "
                f"voltage in zero time with an infinite current. Add a realistic "
                f"resistance in that loop (a source's output resistance or a "
                f"switch's r_on, for example 1 Ω)."
            )
        # With every resistive and ideal path drawn, are the capacitor's nodes
        # joined at all?  If not, nothing can charge it through a resistance.
        conducting = _UnionFind()
        for _, _, a, b in conductances:
            conducting.union(a, b)
        for _, a, b, _ in ideal_voltage:
            conducting.union(a, b)
        holds = conducting.find(storage.a) != conducting.find(storage.b)
        ideal_voltage.append((storage.name, storage.a, storage.b, 0))
    else:
        # An inductor shorted by ideal elements keeps its current: tau = L / 0.
        holds = loops.find(storage.a) == loops.find(storage.b)
        injections.append((storage.name, storage.a, storage.b, 0))

    # 2. Cut sets of current elements: components of the non-current graph.
    solid = _UnionFind()
    for _, _, a, b in conductances:
        solid.union(a, b)
    for _, a, b, _ in ideal_voltage:
        solid.union(a, b)
    for node in fixture.nodes:
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
                        f"only {_and_list(sources)} {verb} in series with it, so its current "
                        f"would be forced to the {level} in zero time"
                    )
                else:
                    ends = {solid.find(a), solid.find(b)}
                    cutting = sorted(
                        part.name for part in fixture.switches
                        if not switch_state[part.name] and not np.isfinite(part.r_off)
                        and solid.find(part.a) != solid.find(part.b)
                        and ends & {solid.find(part.a), solid.find(part.b)}
                    )
                    opened = f" (open: {_and_list(cutting)})" if cutting else ""
                    cause = f"its path is cut{opened}, so the current would have to stop in zero time"
                raise ZeroTimeError(
                    f"{where}: the current of inductor '{storage.name}' has no path through a "
                    f"resistance or a voltage element between nodes '{a}' and '{b}': {cause}. "
                    f"In a real coil this is the voltage spike of an interrupted inductor, large enough to "
                    f"arc across the switch and destroy parts. Add a flyback path "
                    f"(a diode or a resistor across the coil, for example 1 kΩ) or a "
                    f"switch off-resistance. CAUTION: energy stored in a coil is "
                    f"released as a high voltage when its current is interrupted; follow "
                    f"local codes and licensed practice."
                )
            which = f"current source {_and_list(crossing)} is" if len(crossing) == 1 else \
                f"current sources {_and_list(crossing)} form"
            raise TopologyError(
                f"{where}: {which} a cut set (nothing but current sources joins the "
                f"nodes around '{a}' and '{b}'), so the current cannot flow. Add a resistance "
                f"across {'it' if len(crossing) == 1 else 'one of them'}."
            )

    # 3. Islands that do not reach ground float: pin one node of each at 0 V.
    #    No current can enter them (step 2), so the pin carries none.
    ground_root = solid.find(GROUND)
    pinned: dict[str, str] = {}
    islands: dict[str, str] = {}
    for node in fixture.nodes:
        root = solid.find(node)
        if node != GROUND and root != ground_root:
            if root not in pinned:
                pinned[root] = node
                ideal_voltage.append((f"pin:{node}", node, GROUND, None))
            islands[node] = pinned[root]

    nodes = tuple(n for n in fixture.nodes if n != GROUND)
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
    )


def stamp(layout: Layout, conductance_of, zero, one, excitations: int):
    """Fill the MNA system ``A z = B e`` with values made by the callers' number type.

    `conductance_of(part_name, key)` returns 1/R in the caller's number type;
    `zero` and `one` are that type's constants.  Returns A and B as nested lists.
    """
    size = layout.size
    A = [[zero] * size for _ in range(size)]
    B = [[zero] * excitations for _ in range(size)]
    index = layout.node_index

    def add(row: int, col: int, value) -> None:
        A[row][col] = A[row][col] + value

    for name, key, a, b in layout.conductances:
        g = conductance_of(name, key)
        ia, ib = index.get(a), index.get(b)
        if ia is not None:
            add(ia, ia, g)
        if ib is not None:
            add(ib, ib, g)
        if ia is not None and ib is not None:
            add(ia, ib, -g)
            add(ib, ia, -g)
    for k, (_, p, n, source) in enumerate(layout.voltage_branches):
        row = len(layout.nodes) + k
        ip, in_ = index.get(p), index.get(n)
        # The branch current leaves node p through the element into node n.
        if ip is not None:
            add(ip, row, one)
            add(row, ip, one)
        if in_ is not None:
            add(in_, row, -one)
            add(row, in_, -one)
        if source is not None:
            B[row][source] = one
    for _, a, b, source in layout.current_injections:
        # A current flowing from a through the element into b leaves a and enters b.
        ia, ib = index.get(a), index.get(b)
        if ia is not None:
            B[ia][source] = B[ia][source] - one
        if ib is not None:
            B[ib][source] = B[ib][source] + one
    return A, B


@dataclass(frozen=True)
class Reduced:
    """One configuration's numbers: ``dx/dt = (rate_state * x + rate_sources @ u) / storage``.

    Attributes
    ----------
    tau : float
        Time constant (s); ``inf`` when the configuration holds the state.
    gain : ndarray, shape (m,)
        Final value per unit of each source level (zeros when holding).
    drift : ndarray, shape (m,)
        Rate of change of a held state per unit level (only when holding);
        a non-zero drift times a non-zero level is a ramp without limit.
    solution : ndarray, shape (size, 1 + m)
        Every MNA unknown as an affine function of ``[x, u...]``.
    """

    tau: float
    gain: np.ndarray
    drift: np.ndarray
    solution: np.ndarray
    resistance: float  # Thevenin (capacitor) or Norton (inductor) resistance seen


#: Relative size below which a difference of two MNA coefficients is rounding, not a value.
_CANCELLED = 8 * np.finfo(float).eps


class _Terms:
    """A matrix entry kept as the floats that were added into it (a number type for
    :func:`stamp`), so that its sum and products with it can be formed exactly."""

    __slots__ = ("terms",)

    def __init__(self, terms: tuple[float, ...] = ()) -> None:
        self.terms = terms

    def __add__(self, other: "_Terms | float") -> "_Terms":
        return _Terms(self.terms + (other.terms if isinstance(other, _Terms) else (float(other),)))

    def __neg__(self) -> "_Terms":
        return _Terms(tuple(-t for t in self.terms))

    def __sub__(self, other: "_Terms | float") -> "_Terms":
        return self + (-other if isinstance(other, _Terms) else -float(other))


def _solve_exactly_summed(A_terms: list[list[_Terms]], B_terms: list[list[_Terms]], rounds: int = 6) -> np.ndarray:
    """Solve the MNA system whose entries are exact sums of floats, to full double precision.

    A node can join a 1 Ω path and a 1 TΩ leakage: rounding the diagonal sum
    10 + 1e-12 S, and elimination in double precision, leave the result a few
    parts per million off.  So the entries are summed exactly (``math.fsum``),
    and the plain solution is refined: each round forms the residual of the
    *exact* system from exact products (Dekker's two-product) summed exactly,
    and solves for the correction, until a correction no longer changes the
    solution.  Every round gains about ``-log10(cond * 1e-16)`` digits, so a
    round or two reach double precision for any system whose condition number
    is well below 1e16.
    """
    A = np.array([[math.fsum(entry.terms) for entry in row] for row in A_terms])
    B = np.array([[math.fsum(entry.terms) for entry in row] for row in B_terms])
    X = np.linalg.solve(A, B)
    # Every term of every entry, row by row, with the column of X it multiplies.
    values = np.array([t for row in A_terms for entry in row for t in entry.terms])
    columns = np.array([j for row in A_terms for j, entry in enumerate(row) for _ in entry.terms], dtype=np.intp)
    counts = np.array([sum(len(entry.terms) for entry in row) for row in A_terms])
    ends = np.cumsum(counts)
    starts = ends - counts
    for _ in range(rounds):
        products = values[:, None] * X[columns]
        errors = _product_errors(values[:, None], X[columns], products)
        residual = np.array([[math.fsum((*B_terms[i][j].terms, *(-products[first:last, j]), *(-errors[first:last, j])))
                              for j in range(B.shape[1])]
                             for i, (first, last) in enumerate(zip(starts.tolist(), ends.tolist()))])
        refined = X + np.linalg.solve(A, residual)
        if np.array_equal(refined, X):  # the correction no longer moves any entry
            break
        X = refined
    return X


def _product_errors(a: np.ndarray, b: np.ndarray, products: np.ndarray) -> np.ndarray:
    """``a * b - products`` exactly, by Veltkamp splitting (Dekker's two-product)."""
    a_high, a_low = _split(a)
    b_high, b_low = _split(b)
    return ((a_high * b_high - products) + a_high * b_low + a_low * b_high) + a_low * b_low


def _split(value: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    scaled = value * 134217729.0  # 2**27 + 1
    high = scaled - (scaled - value)
    return high, value - high


def reduce_numeric(layout: Layout, fixture: "Fixture") -> Reduced:
    """Solve one configuration's MNA system with numpy."""
    parts = fixture.part_map
    sources = len(fixture.sources)

    def conductance_of(name: str, key: str) -> float:
        return 1.0 / getattr(parts[name], key)

    A, B = stamp(layout, conductance_of, _Terms(), _Terms((1.0,)), 1 + sources)
    if layout.size:
        solution = _solve_exactly_summed(A, B)
    else:
        solution = np.zeros((0, 1 + sources))
    storage = fixture.storage
    if layout.storage_kind == "capacitor":
        # Current through the capacitor, a -> b, as a function of [x, u].
        flow = solution[layout.branch_row(storage.name)]
    else:
        # Voltage across the inductor, v(a) - v(b).
        high, low = _node_row(solution, layout, storage.a), _node_row(solution, layout, storage.b)
        flow = high - low
        # A coefficient that cancels to within rounding of its two terms is zero (a supply
        # that cannot drive the coil once its switch opens): left at 1e-16 it would give a
        # final current of attoamps where there is none.
        flow[np.abs(flow) <= _CANCELLED * np.maximum(np.abs(high), np.abs(low))] = 0.0
    rate_state, rate_sources = float(flow[0]), flow[1:]
    if layout.holds or rate_state == 0.0:
        return Reduced(
            tau=np.inf,
            gain=np.zeros(sources),
            drift=rate_sources / storage.value,
            solution=solution,
            resistance=np.inf if layout.storage_kind == "capacitor" else 0.0,
        )
    resistance = -1.0 / rate_state if layout.storage_kind == "capacitor" else -rate_state
    # C * R_th and L / R_N round the way a hand calculation does (10k * 100n is 1 ms exactly).
    tau = storage.value * resistance if layout.storage_kind == "capacitor" else storage.value / resistance
    return Reduced(
        tau=float(tau),
        gain=-rate_sources / rate_state,
        drift=np.zeros(sources),
        solution=solution,
        resistance=float(resistance),
    )


def _node_row(solution: np.ndarray, layout: Layout, node: str) -> np.ndarray:
    if node == GROUND:
        return np.zeros(solution.shape[1])
    return solution[layout.node_index[node]]


def probe_row(layout: Layout, fixture: "Fixture", reduced: Reduced, probe, where: str = "") -> np.ndarray:
    """A probe as an affine row over ``[x, u...]`` in one configuration.

    Raises TopologyError (naming `where`) for a node voltage across a floating island,
    whose value the pin would otherwise set to an arbitrary 0 V.
    """
    solution = reduced.solution
    if probe.node is not None:
        island, other = layout.islands.get(probe.node), layout.islands.get(probe.reference)
        if island != other:
            floating, against = (probe.node, probe.reference) if island is not None else (probe.reference, probe.node)
            raise TopologyError(
                f"{where or 'this configuration'}: probe '{probe.name}': node '{floating}' floats "
                f"(nothing but open switches or current sources joins it to '{against}'), so "
                f"its voltage against '{against}' is not defined. Give the open switch a "
                f"leakage (r_off) or add a resistance from '{floating}' to ground."
            )
        return _node_row(solution, layout, probe.node) - _node_row(solution, layout, probe.reference)
    part = fixture.part_map[probe.through]
    width = solution.shape[1]
    if part.kind == "inductor":
        row = np.zeros(width)
        row[0] = 1.0
        return row
    if part.kind == "current_source":
        row = np.zeros(width)
        row[1 + [p.name for p in fixture.sources].index(part.name)] = 1.0
        return row
    for name, *_ in layout.voltage_branches:
        if name == part.name:
            return solution[layout.branch_row(name)].copy()
    for name, key, a, b in layout.conductances:
        if name == part.name:
            across = _node_row(solution, layout, a) - _node_row(solution, layout, b)
            return across / getattr(part, key)
    # An open switch with no leakage carries nothing.
    return np.zeros(width)

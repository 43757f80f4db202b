"""The numbers of one switch configuration: tau, gains, drifts and probe rows.

:func:`reduce` solves a configuration's nodal system (:mod:`.mna`) for every
unknown as an affine function of the excitations ``[x, u...]`` and reads off
what the storage element sees: the time constant, each source's share of the
final value, and, where the state is held, how fast sources would move it.
:func:`probe_row` and :func:`node_row` give any probe or node voltage as such
a row.
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError, TopologyError
from ..netlist import GROUND, Netlist, Probe
from .mna import generic_solution, solve_planned, term_plan
from .topology import Layout

__all__ = ["Reduced", "across_row", "node_row", "probe_row", "reduce"]


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
    #: What rounding `solution` to floats dropped (``solution + low`` is the solution to
    #: about 32 digits): differences of unknowns are formed from both (:func:`across_row`).
    low: np.ndarray | None = field(default=None, compare=False, repr=False)
    #: The solution for generic conductances modulo two primes (:func:`~.mna.generic_solution`):
    #: which coefficients and differences are zero by structure.
    generic: np.ndarray | None = field(default=None, compare=False, repr=False)


#: Conductances whose exact products (Veltkamp splitting scales by 2**27 + 1) stay finite
#: and normal: 1/R outside this range cannot be carried exactly.
_G_MIN, _G_MAX = 2.0 ** -960, 2.0 ** 960


def reduce(layout: Layout, netlist: Netlist) -> Reduced:
    """Solve one configuration's nodal system with numpy; see the module docstring.

    Parameters
    ----------
    layout : Layout
        The configuration's stamps (:func:`firstorder.network.topology.plan`).
    netlist : Netlist
        Supplies the part values.

    Returns
    -------
    Reduced

    See Also
    --------
    probe_row, node_row : any probe or node from the same solution.

    Examples
    --------
    >>> from firstorder.netlist import Part
    >>> from firstorder.network.topology import plan
    >>> netlist = Netlist((Part("voltage_source", "vin", "in", "gnd"), Part("resistor", "r", "in", "out", value=1e3),
    ...                    Part("capacitor", "c", "out", "gnd", value=1e-6)))
    >>> reduced = reduce(plan(netlist, ()), netlist)
    >>> reduced.tau, reduced.gain
    (0.001, array([1.]))
    """
    parts = netlist.part_map
    sources = len(netlist.sources)

    def conductance_of(name: str, key: str) -> float:
        resistance = getattr(parts[name], key)
        g = 1.0 / resistance
        if not _G_MIN <= g <= _G_MAX:
            field_name = name if key == "value" else f"{name} {key}"
            raise InputError(
                f"{field_name}: {resistance!r} Ω cannot be computed with (its conductance {g!r} S "
                f"is outside {_G_MIN:.1e} to {_G_MAX:.1e} S); give a resistance within "
                f"{1 / _G_MAX:.1e} to {1 / _G_MIN:.1e} Ω")
        return g

    if layout.size:
        generic, terms = _by_shape(layout, 1 + sources)
        conductances = np.array([conductance_of(name, key) for name, key, _, _ in layout.conductances])
        # Coefficients zero whatever the values are zero, not the solve's 1e-50 noise.
        solution, low = solve_planned(terms, conductances,
                                      zeros=None if generic is None else (generic == 0).all(axis=0))
    else:
        solution = low = np.zeros((0, 1 + sources))
        generic = None
    storage = netlist.storage
    if layout.holds:
        # Which sources move a held state is structural (Layout.held_by): exact small integers,
        # never a rounding residue of the solve mistaken for a drive.
        drift = np.asarray(layout.held_by[1:], dtype=float) / storage.value
        return _checked(Reduced(tau=np.inf, gain=np.zeros(sources), drift=drift, solution=solution,
                                resistance=np.inf if layout.storage_kind == "capacitor" else 0.0, low=low, generic=generic), netlist)
    if layout.storage_kind == "capacitor":
        # Current through the capacitor, a -> b, as a function of [x, u].
        row = layout.branch_row(storage.name)
        flow = solution[row] + low[row]
    else:
        # Voltage across the inductor, v(a) - v(b), from the double-double solution (a
        # coefficient that cancels within the pair's error is zero: a supply that cannot
        # drive the coil once its switch opens would otherwise leave a final current).
        flow = _across(solution, low, generic, layout, storage.a, storage.b)
    rate_state, rate_sources = float(flow[0]), flow[1:]
    if rate_state == 0.0:
        return _checked(Reduced(tau=np.inf, gain=np.zeros(sources), drift=rate_sources / storage.value,
                                solution=solution,
                                resistance=np.inf if layout.storage_kind == "capacitor" else 0.0, low=low, generic=generic), netlist)
    resistance = -1.0 / rate_state if layout.storage_kind == "capacitor" else -rate_state
    # C * R_th and L / R_N round the way a hand calculation does (10k * 100n is 1 ms exactly).
    tau = storage.value * resistance if layout.storage_kind == "capacitor" else storage.value / resistance
    return _checked(Reduced(
        tau=float(tau),
        gain=-rate_sources / rate_state,
        drift=np.zeros(sources),
        solution=solution,
        resistance=float(resistance),
        low=low,
        generic=generic,
    ), netlist)


#: Generic solutions and term plans by stamp shape (which branches join which nodes, not
#: which value key): relays that switch between r_on and r_off share them.
_BY_SHAPE: "OrderedDict[tuple, tuple]" = OrderedDict()
_BY_SHAPE_SIZE = 4096


def _by_shape(layout: Layout, width: int) -> tuple:
    cached = layout.memo.get("by_shape")
    if cached is not None:
        return cached
    shape = (layout.nodes, tuple((name, a, b) for name, _, a, b in layout.conductances), layout.voltage_branches,
             layout.current_injections, width)
    cached = _BY_SHAPE.get(shape)
    if cached is None:
        cached = _BY_SHAPE[shape] = (generic_solution(layout, width), term_plan(layout, width))
        while len(_BY_SHAPE) > _BY_SHAPE_SIZE:
            _BY_SHAPE.popitem(last=False)
    layout.memo["by_shape"] = cached
    return cached


def _checked(reduced: Reduced, netlist: Netlist) -> Reduced:
    """`reduced` if every number in it is finite and tau is not zero; else an InputError
    naming the storage element and the parts whose values leave double precision."""
    tau = reduced.tau
    fine = (tau > 0.0 and not np.isnan(tau) and np.isfinite(reduced.solution).all()
            and np.isfinite(reduced.gain).all() and np.isfinite(reduced.drift).all()
            and (np.isinf(tau) or np.isfinite(reduced.resistance)))
    if fine:
        return reduced
    storage = netlist.storage
    valued = [p for p in netlist.parts if p.kind in ("resistor", "capacitor", "inductor")]
    extreme = sorted(valued, key=lambda p: -abs(np.log10(p.value)) if 0 < p.value < np.inf else 0.0)[:3]
    names = ", ".join(f"{p.name} = {p.value!r}" for p in extreme)
    raise InputError(
        f"{storage.name}: the time constant ({tau!r} s) or the gains of this configuration cannot be "
        f"represented in double precision with these values ({names}); give part values whose products "
        f"and ratios stay within 1e-300 to 1e300")


def _across(high: np.ndarray, low: np.ndarray, generic: np.ndarray | None, layout: Layout, a: str,
            b: str) -> np.ndarray:
    """v(a) - v(b) over ``[x, u...]`` from the pair ``high + low``: the high parts cancel
    exactly where they are close (Sterbenz), so the difference keeps its own digits; a
    difference that is zero by structure (`generic`) is 0."""
    difference = ((node_row(high, layout, a) - node_row(high, layout, b))
                  + (node_row(low, layout, a) - node_row(low, layout, b)))
    if generic is not None:
        same = np.ones(difference.shape, dtype=bool)
        for g in generic:
            same &= node_row(g, layout, a) == node_row(g, layout, b)
        difference[same] = 0.0
    return difference


def across_row(layout: Layout, reduced: Reduced, a: str, b: str) -> np.ndarray:
    """The voltage from node `a` to node `b` as a row over ``[x, u...]``, to the precision
    of its own size (not of the node voltages it is the difference of).

    Examples
    --------
    >>> from firstorder.netlist import Part
    >>> from firstorder.network.topology import plan
    >>> netlist = Netlist((Part("voltage_source", "vin", "in", "gnd"), Part("resistor", "r", "in", "out", value=1e-3),
    ...                    Part("resistor", "leak", "out", "gnd", value=1e12),
    ...                    Part("capacitor", "c", "out", "gnd", value=1e-6)))
    >>> layout = plan(netlist, ())
    >>> across_row(layout, reduce(layout, netlist), "in", "out")  # 1 mΩ of 1 TΩ: 1e-15 of the source
    array([-1.e+00,  1.e+00])
    """
    low = reduced.low if reduced.low is not None else np.zeros_like(reduced.solution)
    return _across(reduced.solution, low, reduced.generic, layout, a, b)


def node_row(solution: np.ndarray, layout: Layout, node: str) -> np.ndarray:
    """The voltage of `node` (against ground) as a row over ``[x, u...]``, from a solution."""
    if node == GROUND:
        return np.zeros(solution.shape[1])
    return solution[layout.node_index[node]]


def probe_row(layout: Layout, netlist: Netlist, reduced: Reduced, probe: Probe, where=None) -> np.ndarray:
    """A probe as an affine row over ``[x, u...]`` in one configuration (see :func:`node_row`).

    Raises TopologyError (naming `where`) for a node voltage across a floating island,
    whose value the pin would otherwise set to an arbitrary 0 V.
    """
    solution = reduced.solution
    if probe.node is not None:
        island, other = layout.islands.get(probe.node), layout.islands.get(probe.reference)
        if island != other:
            floating, against = (probe.node, probe.reference) if island is not None else (probe.reference, probe.node)
            raise TopologyError(
                f"{where() if callable(where) else where or 'this configuration'}: probe '{probe.name}': node '{floating}' floats "
                f"(nothing but open switches or current sources joins it to '{against}'), so "
                f"its voltage against '{against}' is not defined. Give the open switch a "
                f"leakage (r_off) or add a resistance from '{floating}' to ground."
            )
        return across_row(layout, reduced, probe.node, probe.reference)
    part = netlist.part_map[probe.through]
    width = solution.shape[1]
    if part.kind == "inductor":
        row = np.zeros(width)
        row[0] = 1.0
        return row
    if part.kind == "current_source":
        row = np.zeros(width)
        row[1 + netlist.source_names.index(part.name)] = 1.0
        return row
    if part.name in layout.undefined_currents:
        raise TopologyError(
            f"{where() if callable(where) else where or 'this configuration'}: probe '{probe.name}': the current "
            f"through '{part.name}' is not defined: it closes a loop of zero-ohm switches, which share a "
            f"current in no fixed way. Give the switches a non-zero r_on, or probe a part in series with them.")
    for name, *_ in layout.voltage_branches:
        if name == part.name:
            row = layout.branch_row(name)
            return solution[row] + (reduced.low[row] if reduced.low is not None else 0.0)
    for name, key, a, b in layout.conductances:
        if name == part.name:
            return across_row(layout, reduced, a, b) / getattr(part, key)
    # An open switch with no leakage carries nothing.
    return np.zeros(width)

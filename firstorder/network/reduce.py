"""The numbers of one switch configuration: tau, gains, drifts and probe rows.

:func:`reduce` solves a configuration's nodal system (:mod:`.mna`) for every
unknown as an affine function of the excitations ``[x, u...]`` and reads off
what the storage element sees: the time constant, each source's share of the
final value, and, where the state is held, how fast sources would move it.
:func:`probe_row` and :func:`node_row` give any probe or node voltage as such
a row.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import TopologyError
from ..netlist import GROUND, Netlist, Probe
from .mna import ExactSum, solve, stamp
from .topology import Layout

__all__ = ["Reduced", "node_row", "probe_row", "reduce"]


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
        return 1.0 / getattr(parts[name], key)

    A, B = stamp(layout, conductance_of, ExactSum(), ExactSum((1.0,)), 1 + sources)
    if layout.size:
        solution = solve(A, B)
    else:
        solution = np.zeros((0, 1 + sources))
    storage = netlist.storage
    if layout.storage_kind == "capacitor":
        # Current through the capacitor, a -> b, as a function of [x, u].
        flow = solution[layout.branch_row(storage.name)]
    else:
        # Voltage across the inductor, v(a) - v(b).
        high, low = node_row(solution, layout, storage.a), node_row(solution, layout, storage.b)
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
        return node_row(solution, layout, probe.node) - node_row(solution, layout, probe.reference)
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
    for name, *_ in layout.voltage_branches:
        if name == part.name:
            return solution[layout.branch_row(name)].copy()
    for name, key, a, b in layout.conductances:
        if name == part.name:
            across = node_row(solution, layout, a) - node_row(solution, layout, b)
            return across / getattr(part, key)
    # An open switch with no leakage carries nothing.
    return np.zeros(width)

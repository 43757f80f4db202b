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
from .mna import generic_solution, solve_planned_batch, term_plan
from .topology import Layout

__all__ = ["Reduced", "ReducedBatch", "across_row", "node_row", "probe_row", "reduce", "reduce_batch",
           "refuse_unrepresentable", "resistances"]


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

    :func:`reduce_batch` with a batch of one (the part values of `netlist`).

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
    batch = reduce_batch(layout, netlist)
    if not batch.fine[0]:
        refuse_unrepresentable(batch.tau[0], netlist)
    return batch.item(0)


@dataclass(frozen=True)
class ReducedBatch:
    """:class:`Reduced` for a batch of value sets of one layout, each entry with a leading
    batch axis (``tau`` (b,), ``gain`` (b, m), ``solution`` (b, size, 1 + m) ...); `fine`
    (b,) is False where a number could not be represented (:func:`reduce` refuses those)."""

    tau: np.ndarray
    gain: np.ndarray
    drift: np.ndarray
    solution: np.ndarray
    resistance: np.ndarray
    low: np.ndarray
    generic: np.ndarray | None
    fine: np.ndarray

    def __len__(self) -> int:
        return int(self.tau.shape[0])

    def item(self, k: int) -> Reduced:
        """Entry `k` as the :class:`Reduced` that :func:`reduce` gives for its values."""
        return Reduced(tau=float(self.tau[k]), gain=self.gain[k], drift=self.drift[k], solution=self.solution[k],
                       resistance=float(self.resistance[k]), low=self.low[k], generic=self.generic)


def resistances(layout: Layout, netlist: Netlist) -> np.ndarray:
    """(branches,): the resistance of each of the layout's conductances in `netlist`."""
    parts = netlist.part_map
    return np.array([getattr(parts[name], key) for name, key, _, _ in layout.conductances], dtype=float)


def reduce_batch(layout: Layout, netlist: Netlist, resistance: np.ndarray | None = None,
                 storage: np.ndarray | None = None) -> ReducedBatch:
    """One configuration reduced for a batch of part values at once: a batched nodal solve.

    Parameters
    ----------
    layout : Layout
    netlist : Netlist
        The structure, and the values where none are given.
    resistance : ndarray, shape (b, branches), optional
        Per entry, the resistance of each of ``layout.conductances`` in order
        (:func:`resistances` gives the netlist's); default: the netlist's (b = 1).
    storage : ndarray, shape (b,), optional
        Per entry, the capacitance or inductance; default: the netlist's.

    Returns
    -------
    ReducedBatch
        Entry k bit for bit what :func:`reduce` gives for a netlist with entry k's values
        (the same operations, element by element; each system refined on its own).

    Raises
    ------
    InputError
        A resistance whose conductance cannot be carried exactly (naming the part).

    Examples
    --------
    >>> from firstorder.netlist import Part
    >>> from firstorder.network.topology import plan
    >>> netlist = Netlist((Part("voltage_source", "vin", "in", "gnd"), Part("resistor", "r", "in", "out", value=1e3),
    ...                    Part("capacitor", "c", "out", "gnd", value=1e-6)))
    >>> batch = reduce_batch(plan(netlist, ()), netlist, np.array([[1e3], [2e3]]), np.array([1e-6, 1e-6]))
    >>> batch.tau.tolist(), bool(batch.fine.all())
    ([0.001, 0.002], True)
    """
    sources = len(netlist.sources)
    width = 1 + sources
    r = resistances(layout, netlist)[None, :] if resistance is None else np.asarray(resistance, dtype=float)
    count = r.shape[0]
    value = np.full(count, netlist.storage.value) if storage is None else np.asarray(storage, dtype=float)
    with np.errstate(divide="ignore", over="ignore"):
        g = 1.0 / r
    bad = ~((g >= _G_MIN) & (g <= _G_MAX))
    if bad.any():
        k, j = (int(i) for i in np.argwhere(bad)[0])
        name, key, _, _ = layout.conductances[j]
        field_name = name if key == "value" else f"{name} {key}"
        raise InputError(
            f"{field_name}: {float(r[k, j])!r} Ω cannot be computed with (its conductance {float(g[k, j])!r} S "
            f"is outside {_G_MIN:.1e} to {_G_MAX:.1e} S); give a resistance within "
            f"{1 / _G_MAX:.1e} to {1 / _G_MIN:.1e} Ω")
    if layout.size:
        generic, terms = _by_shape(layout, width)
        # Coefficients zero whatever the values are zero, not the solve's 1e-50 noise.
        solution, low = solve_planned_batch(terms, g, zeros=None if generic is None else (generic == 0).all(axis=0))
    else:
        solution = low = np.zeros((count, 0, width))
        generic = None
    capacitor = layout.storage_kind == "capacitor"
    open_resistance = np.inf if capacitor else 0.0
    if layout.holds:
        # Which sources move a held state is structural (Layout.held_by): exact small integers,
        # never a rounding residue of the solve mistaken for a drive.
        drift = np.asarray(layout.held_by[1:], dtype=float)[None, :] / value[:, None]
        return _checked_batch(ReducedBatch(
            tau=np.full(count, np.inf), gain=np.zeros((count, sources)), drift=drift, solution=solution,
            resistance=np.full(count, open_resistance), low=low, generic=generic, fine=np.ones(count, dtype=bool)))
    storage_part = netlist.storage
    if capacitor:
        # Current through the capacitor, a -> b, as a function of [x, u].
        row = layout.branch_row(storage_part.name)
        flow = solution[:, row] + low[:, row]
    else:
        # Voltage across the inductor, v(a) - v(b), from the double-double solution (a
        # coefficient that cancels within the pair's error is zero: a supply that cannot
        # drive the coil once its switch opens would otherwise leave a final current).
        flow = _across(solution, low, generic, layout, storage_part.a, storage_part.b)
    rate_state, rate_sources = flow[:, 0], flow[:, 1:]
    still = rate_state == 0.0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        resistance_seen = -1.0 / rate_state if capacitor else -rate_state
        # C * R_th and L / R_N round the way a hand calculation does (10k * 100n is 1 ms exactly).
        tau = value * resistance_seen if capacitor else value / resistance_seen
        gain = -rate_sources / rate_state[:, None]
        held_drift = rate_sources / value[:, None]
    return _checked_batch(ReducedBatch(
        tau=np.where(still, np.inf, tau),
        gain=np.where(still[:, None], 0.0, gain),
        drift=np.where(still[:, None], held_drift, 0.0),
        solution=solution,
        resistance=np.where(still, open_resistance, resistance_seen),
        low=low, generic=generic, fine=np.ones(count, dtype=bool)))


def _checked_batch(batch: ReducedBatch) -> ReducedBatch:
    """`batch` with `fine` False where a number is not finite or tau is not positive."""
    tau = batch.tau
    fine = ((tau > 0.0) & ~np.isnan(tau) & np.isfinite(batch.solution).all(axis=(1, 2))
            & np.isfinite(batch.gain).all(axis=1) & np.isfinite(batch.drift).all(axis=1)
            & (np.isinf(tau) | np.isfinite(batch.resistance)))
    batch.fine[:] = fine
    return batch


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


def refuse_unrepresentable(tau: float, netlist: Netlist) -> None:
    """An InputError naming the storage element and the parts whose values leave double
    precision (a number of a configuration that could not be represented)."""
    storage = netlist.storage
    valued = [p for p in netlist.parts if p.kind in ("resistor", "capacitor", "inductor")]
    extreme = sorted(valued, key=lambda p: -abs(np.log10(p.value)) if 0 < p.value < np.inf else 0.0)[:3]
    names = ", ".join(f"{p.name} = {p.value!r}" for p in extreme)
    raise InputError(
        f"{storage.name}: the time constant ({float(tau)!r} s) or the gains of this configuration cannot be "
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
        same = np.ones(difference.shape[-1], dtype=bool)
        for g in generic:
            same &= node_row(g, layout, a) == node_row(g, layout, b)
        difference[..., same] = 0.0
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
    """The voltage of `node` (against ground) as a row over ``[x, u...]``, from a solution
    (size, 1 + m), or rows (b, 1 + m) from a batch of them (b, size, 1 + m)."""
    if node == GROUND:
        return np.zeros(solution.shape[:-2] + solution.shape[-1:])
    return solution[..., layout.node_index[node], :]


def probe_row(layout: Layout, netlist: Netlist, reduced: Reduced, probe: Probe, where=None,
              resistance=None) -> np.ndarray:
    """A probe as an affine row over ``[x, u...]`` in one configuration (see :func:`node_row`).

    `reduced` may hold a batch of solutions (b, size, 1 + m), giving rows (b, 1 + m);
    `resistance(name, key)` then gives a part's resistance per entry, shape (b, 1).

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
    shape = solution.shape[:-2] + solution.shape[-1:]
    if part.kind == "inductor":
        row = np.zeros(shape)
        row[..., 0] = 1.0
        return row
    if part.kind == "current_source":
        row = np.zeros(shape)
        row[..., 1 + netlist.source_names.index(part.name)] = 1.0
        return row
    if part.name in layout.undefined_currents:
        raise TopologyError(
            f"{where() if callable(where) else where or 'this configuration'}: probe '{probe.name}': the current "
            f"through '{part.name}' is not defined: it closes a loop of zero-ohm switches, which share a "
            f"current in no fixed way. Give the switches a non-zero r_on, or probe a part in series with them.")
    for name, *_ in layout.voltage_branches:
        if name == part.name:
            row = layout.branch_row(name)
            return solution[..., row, :] + (reduced.low[..., row, :] if reduced.low is not None else 0.0)
    for name, key, a, b in layout.conductances:
        if name == part.name:
            return across_row(layout, reduced, a, b) / (getattr(part, key) if resistance is None
                                                         else resistance(name, key))
    # An open switch with no leakage carries nothing.
    return np.zeros(shape)

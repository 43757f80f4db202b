"""Every switch configuration of a drive reduced in batches, for one fixture or a lot of units.

Configurations that differ only in switches whose state picks a value, not a topology,
share a layout shape; all the configurations of a shape, and all the units of a lot, are
reduced in one batched nodal solve (:func:`firstorder.network.reduce_batch`), each entry
bit for bit what :meth:`Fixture.configuration <firstorder.fixture.Fixture.configuration>`
gives for it alone.  :mod:`firstorder.segments` builds on this.

Examples
--------
>>> import firstorder as fo
>>> fx = fo.Fixture.rc("1k", "1u")
>>> taus, gains, drifts, _ = reduce_configurations(fx, np.zeros((1, 0), dtype=bool), [()], np.zeros(1, dtype=np.intp),
...                                                str, resistance={"r": np.array([1e3, 2e3])},
...                                                storage=np.array([1e-6, 1e-6]), units=2)
>>> taus.tolist(), gains.tolist()
([[0.001], [0.002]], [[[1.0]], [[1.0]]])
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING

import numpy as np

from .network import plan, probe_row, reduce_batch
from .network.topology import structural_switches
from .network.reduce import Reduced, refuse_unrepresentable

if TYPE_CHECKING:
    from .fixture import Fixture
    from .netlist import Probe

__all__ = ["lot_probe_rows", "reduce_configurations"]

#: Up to this many configurations of a drive are also kept in the fixture's cache (a
#: notebook re-running a short drive reduces nothing again); more stay with their batch.
_KEEP = 64


def reduce_configurations(fixture: "Fixture", states: np.ndarray, configs: Sequence[tuple[bool, ...]], first_use: np.ndarray,
                label, resistance: Mapping[str, np.ndarray] | None = None, storage: np.ndarray | None = None,
                units: int | None = None) -> tuple:
    """Every configuration reduced: ``tau`` (c,), ``gain`` and ``drift`` (c, m) (with a
    leading unit axis for a lot), and where each configuration's batch is.

    Configurations that differ only in switches whose state picks a value, not a topology
    (a relay with a finite r_on and r_off), share a layout shape: each shape is planned once
    (for its earliest configuration: a topology error names the earliest segment) and all
    its configurations, or all units of a lot, are reduced in one batched solve
    (:func:`~firstorder.network.reduce_batch`), each bit for bit what it gives alone.
    `resistance` maps ``"part"`` or ``"part.r_on"`` / ``"part.r_off"`` to per-unit values and
    `storage` gives the storage element's per unit.
    """
    netlist = fixture.netlist
    m = len(netlist.source_names)
    c_count = len(configs)
    if resistance is None and storage is None and units is None:
        cached = [fixture.known_configuration(config) for config in configs]
        if all(entry is not None for entry in cached):  # all reduced before: nothing to batch
            return (np.array([one.tau for _, one in cached]), np.array([one.gain for _, one in cached]).reshape(c_count, m),
                    np.array([one.drift for _, one in cached]).reshape(c_count, m),
                    [(layout, one, None, None) for layout, one in cached])
    config_states = np.array(configs, dtype=bool).reshape(c_count, len(netlist.switch_names))
    structural = np.array(structural_switches(netlist), dtype=bool)
    shape_code = (config_states[:, structural].astype(np.int64)
                  @ (np.int64(1) << np.arange(int(structural.sum()), dtype=np.int64)))
    lead = () if units is None else (units,)
    taus = np.empty(lead + (c_count,))
    gains = np.empty(lead + (c_count, m))
    drifts = np.empty(lead + (c_count, m))
    where: list = [None] * c_count
    # Shapes in order of their earliest segment; configurations within one by first use.
    order = np.argsort(first_use, kind="stable")
    _, first_of_shape, shape_of = np.unique(shape_code[order], return_index=True, return_inverse=True)
    bad: list[tuple[int, int]] = []  # (first use, configuration) of unrepresentable numbers
    switch_index = {name: j for j, name in enumerate(netlist.switch_names)}
    parts = netlist.part_map
    known = np.zeros(c_count, dtype=bool)
    keep = False
    if resistance is None and storage is None:
        # The fixture's own values: what it has reduced already is taken from its cache.
        for c, config in enumerate(configs):
            cached = fixture.known_configuration(config)
            if cached is not None:
                known[c] = True
                layout, one = cached
                taus[c], gains[c], drifts[c] = one.tau, one.gain, one.drift
                where[c] = (layout, one, None, None)
        keep = c_count <= _KEEP
    for s_index in np.argsort(first_of_shape, kind="stable").tolist():
        members = order[shape_of.reshape(-1) == s_index]
        members = members[~known[members]]
        if not members.size:
            continue
        lead_c = int(members[0])
        layout = plan(netlist, configs[lead_c], lambda k=int(first_use[lead_c]): label(k))
        shape = lead + (members.size,)
        columns = []
        for name, _key, _, _ in layout.conductances:
            part = parts[name]
            if part.kind == "switch":
                closed = config_states[members, switch_index[name]]
                if resistance is None:
                    columns.append(np.where(closed, part.r_on, part.r_off))
                else:
                    on = np.reshape(resistance.get(f"{name}.r_on", part.r_on), (-1, 1))
                    off = np.reshape(resistance.get(f"{name}.r_off", part.r_off), (-1, 1))
                    columns.append(np.broadcast_to(np.where(closed[None, :], on, off), shape))
            else:
                value = part.value if resistance is None else resistance.get(name, part.value)
                columns.append(np.broadcast_to(np.reshape(value, (-1, 1)) if units else value, shape))
        # Entries: (units, members) flattened unit by unit, or the members alone.
        count = int(np.prod(shape))
        r = np.stack(columns, axis=-1).reshape(count, len(columns)) if columns else np.zeros((count, 0))
        value = netlist.storage.value if storage is None else storage
        values = np.broadcast_to(np.reshape(value, (-1, 1)) if units else value, shape).reshape(count)
        batch = reduce_batch(layout, netlist, r, values)
        taus[..., members] = batch.tau.reshape(shape)
        gains[..., members, :] = batch.gain.reshape(shape + (m,))
        drifts[..., members, :] = batch.drift.reshape(shape + (m,))
        fine = batch.fine.reshape(shape)
        if units is not None:
            fine = fine.all(axis=0)
        for i, c in enumerate(members.tolist()):
            where[c] = (layout, batch, i, members.size)
            if units is None and keep and fine[i] and resistance is None and storage is None:
                fixture.keep_configuration(configs[c], plan(netlist, configs[c]), batch.item(i))
            if not fine[i]:
                bad.append((int(first_use[c]), c))
    if bad:
        _, c = min(bad)
        refuse_unrepresentable(float(np.min(taus[..., c])), netlist)
    return taus, gains, drifts, where




def lot_probe_rows(fixture: "Fixture", where: list, configurations: Sequence[tuple[bool, ...]], first_use: np.ndarray,
                   probe: "Probe", units: int, resistance: Mapping[str, np.ndarray], label) -> np.ndarray:
    """(units, c, 1 + m): `probe` as a row over ``[x, u...]`` in every configuration for every
    unit of a lot (`where` as :func:`reduce_configurations` returns it), each unit's row what
    :func:`~firstorder.network.probe_row` gives for it alone; in order of first use, so that
    an undefined probe is named at its earliest segment."""
    netlist = fixture.netlist
    parts = netlist.part_map
    rows: list = [None] * len(configurations)

    def resistance_of(name: str, key: str) -> np.ndarray:
        field = name if key == "value" else f"{name}.{key}"
        default = getattr(parts[name], key)
        return np.broadcast_to(np.reshape(resistance.get(field, default), (-1, 1)), (units, 1))

    for c in np.argsort(first_use, kind="stable").tolist():
        _, batch, i, members = where[c]
        size, width = batch.solution.shape[1:]
        picked = Reduced(tau=np.nan, gain=np.zeros(0), drift=np.zeros(0), resistance=np.nan,
                         solution=batch.solution.reshape(units, members, size, width)[:, i],
                         low=batch.low.reshape(units, members, size, width)[:, i], generic=batch.generic)
        layout = plan(netlist, configurations[c])
        rows[c] = probe_row(layout, netlist, picked, probe, where=lambda c=c: label(int(first_use[c])),
                            resistance=resistance_of)
    return np.stack(rows, axis=1)

"""The network of a fixture, per switch configuration: topology, nodal analysis, reduction.

:mod:`.topology` checks a configuration and lays out its stamps (cached by the
netlist's structure); :mod:`.mna` solves the nodal system exactly summed and
refined; :mod:`.reduce` turns the solution into tau, gains, drifts and probe rows,
for one set of part values or a batch of them at once (:func:`.reduce_batch`).
"""

from __future__ import annotations

from .mna import solve, stamp
from .reduce import Reduced, ReducedBatch, node_row, probe_row, reduce, reduce_batch, resistances
from .topology import Layout, plan

__all__ = ["Layout", "Reduced", "ReducedBatch", "node_row", "plan", "probe_row", "reduce", "reduce_batch", "resistances",
           "solve", "stamp"]

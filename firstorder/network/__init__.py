"""The network of a fixture, per switch configuration: topology, nodal analysis, reduction.

:mod:`.topology` checks a configuration and lays out its stamps (cached by the
netlist's structure); :mod:`.mna` solves the nodal system exactly summed and
refined; :mod:`.reduce` turns the solution into tau, gains, drifts and probe rows.
"""

from __future__ import annotations

from .mna import solve, stamp
from .reduce import Reduced, node_row, probe_row, reduce
from .topology import Layout, plan

__all__ = ["Layout", "Reduced", "node_row", "plan", "probe_row", "reduce", "solve", "stamp"]

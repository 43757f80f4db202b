"""Supernode nodal equations of one switch configuration, solved by elimination.

Each configuration is taken from the same plan as the numeric path
(:func:`firstorder.network.plan`: the same parts, ideal elements and island
pins), written as nodal equations on supernodes and solved by Gaussian
elimination in the order a hand calculation would take (fewest neighbours first),
without expanding.  Small entries are put over one denominator as they appear
(:func:`_compact`) and small results are factored (:func:`_tidy`), so a divider
or a bridge reads as the handbook formula; large networks keep the nested form
of the elimination, which is exact and quick.
"""

from __future__ import annotations

from collections import defaultdict

import sympy as sp

from ..netlist import GROUND
from ..network import Layout

#: Expressions up to this many operations are put in factored form for display
#: (products of sums read like series/parallel combinations); larger ones stay
#: as one cancelled fraction, because multivariate factoring grows fast.
_FACTOR_LIMIT = 80


def _at_most(expression: sp.Expr, limit: int) -> bool:
    """Whether `expression` has at most `limit` nodes (stops counting past it)."""
    for size, _ in enumerate(sp.preorder_traversal(expression), start=1):
        if size > limit:
            return False
    return True


def _tidy(expression: sp.Expr) -> sp.Expr:
    """`expression` as one factored fraction when that is cheap, else as eliminated."""
    return sp.factor(expression) if _at_most(expression, _FACTOR_LIMIT) else expression


#: Below this size an entry is put over one denominator while eliminating, so
#: that a series pair reads 1/(r1 + r2) instead of 1/r1 - 1/(r1**2 (1/r1 + 1/r2)).
_COMPACT_LIMIT = 40


def _compact(expression: sp.Expr) -> sp.Expr:
    """`expression` over one denominator when it is small, else as it stands."""
    return sp.cancel(expression) if _at_most(expression, _COMPACT_LIMIT) else expression


class _Nodal:
    """One configuration as nodal equations on supernodes, solved by elimination.

    Ideal voltage elements (sources, the capacitor, zero-ohm switches, island pins)
    form a forest (the topology checks refuse loops).  Each tree is a supernode:
    its nodes differ from the tree's root by sums of excitations ``e = [x, u...]``,
    so only the roots that are not ground stay unknown.  KCL summed over each
    supernode gives ``Y V = J e``; Y is a grounded conductance matrix (every
    supernode reaches ground through conductances, or the topology checks would
    have named a cut set), so Gaussian elimination needs no pivot search.
    Eliminating the supernode with the fewest neighbours first keeps the work and
    the expressions small: on a ladder it is exactly the series/parallel reduction
    done by hand.  Nothing is expanded while eliminating; the results are tidied
    once, at the end (:func:`_tidy`).

    Every voltage and current is an affine row over ``e``: a list of expressions.
    """

    def __init__(self, layout: Layout, symbols: dict[str, sp.Symbol], excitations: int):
        zero = sp.Integer(0)
        self.zero = zero
        self.width = excitations
        self._branches = layout.voltage_branches
        self.g = {name: 1 / symbols[name] for name, *_ in layout.conductances}

        # Supernodes: root and offset (v(node) - v(root) as integer row over e) per node.
        branches: dict[str, list[tuple[str, str, int | None, int]]] = defaultdict(list)
        for label, p, n, source in layout.voltage_branches:
            branches[p].append((label, n, source, +1))  # v(p) - v(n) = e[source]
            branches[n].append((label, p, source, -1))
        all_nodes = [GROUND, *layout.nodes]
        self.root: dict[str, str] = {}
        self.offset: dict[str, list[int]] = {}
        self.parent: dict[str, tuple[str, str]] = {}  # node -> (branch label, parent node)
        order: list[str] = []
        for start in all_nodes:
            if start in self.root:
                continue
            self.root[start] = start
            self.offset[start] = [0] * excitations
            queue = [start]
            while queue:
                node = queue.pop()
                order.append(node)
                for label, other, source, sign in branches[node]:
                    if other in self.root:
                        continue
                    self.root[other] = start
                    offset = list(self.offset[node])
                    if source is not None:
                        offset[source] -= sign  # from p to n: v(n) = v(p) - e
                    self.offset[other] = offset
                    self.parent[other] = (label, node)
                    queue.append(other)
        self.order = order  # every parent before its children
        roots = [n for n in all_nodes if self.root[n] == n and n != GROUND]
        self.unknown = {r: k for k, r in enumerate(roots)}
        size = len(roots)

        # Outflow of every node through conductances and current elements, as
        # (sparse coefficients over V, coefficients over e).
        self.outflow: dict[str, tuple[dict[int, sp.Expr], list]] = {
            n: ({}, [zero] * excitations) for n in all_nodes}
        for name, _key, a, b in layout.conductances:
            across_v, across_e = self.difference(a, b)
            self._add(a, across_v, across_e, self.g[name])
            self._add(b, across_v, across_e, -self.g[name])
        for _label, a, b, source in layout.current_injections:
            self.outflow[a][1][source] += 1
            self.outflow[b][1][source] -= 1

        # KCL over each supernode: sum of outflows = 0, so Y V = J e with J = -(e part).
        rows: list[dict[int, sp.Expr]] = [{} for _ in range(size)]
        rhs: list[list] = [[zero] * excitations for _ in range(size)]
        for node in all_nodes:
            root = self.root[node]
            if root == GROUND:
                continue
            k = self.unknown[root]
            out_v, out_e = self.outflow[node]
            for j, c in out_v.items():
                rows[k][j] = rows[k].get(j, zero) + c
            for j, c in enumerate(out_e):
                if c != 0:
                    rhs[k][j] -= c
        self.solution = self._eliminate(rows, rhs)

    @staticmethod
    def _eliminate(rows: list[dict[int, sp.Expr]], rhs: list[list]) -> list[list]:
        remaining = set(range(len(rows)))
        pivots = []
        while remaining:
            p = min(remaining, key=lambda k: (sum(1 for j in rows[k] if j in remaining), k))
            remaining.discard(p)
            pivots.append(p)
            pivot = rows[p][p]
            for i in remaining:
                factor = rows[i].get(p)
                if factor is None or factor == 0:
                    continue
                ratio = factor / pivot
                for j, c in rows[p].items():
                    if j in remaining:
                        rows[i][j] = _compact(rows[i].get(j, sp.Integer(0)) - ratio * c)
                rhs[i] = [_compact(r - ratio * q) if q != 0 else r for r, q in zip(rhs[i], rhs[p])]
                del rows[i][p]
        solution: list[list] = [None] * len(rows)  # type: ignore[list-item]
        for p in reversed(pivots):
            row = list(rhs[p])
            for j, c in rows[p].items():
                if j != p:
                    row = [r - c * v for r, v in zip(row, solution[j])]
            solution[p] = [_compact(r / rows[p][p]) for r in row]
        return solution

    def _add(self, node, across_v, across_e, g) -> None:
        out_v, out_e = self.outflow[node]
        for j, c in across_v.items():
            out_v[j] = out_v.get(j, self.zero) + g * c
        for j, c in enumerate(across_e):
            if c:
                out_e[j] += g * c

    def difference(self, a: str, b: str) -> tuple[dict[int, int], list[int]]:
        """``v(a) - v(b)`` as (coefficients over V, over e), small integers."""
        across_v: dict[int, int] = {}
        across_e = [0] * self.width
        for node, sign in ((a, 1), (b, -1)):
            root = self.root[node]
            if root != GROUND:
                k = self.unknown[root]
                across_v[k] = across_v.get(k, 0) + sign
            for j, c in enumerate(self.offset[node]):
                across_e[j] += sign * c
        return {k: c for k, c in across_v.items() if c}, across_e

    def row(self, affine) -> list:
        """An affine quantity as a row over e (the unknowns substituted)."""
        coefficient_v, coefficient_e = affine
        row = [sp.sympify(c) for c in coefficient_e]
        for k, c in coefficient_v.items():
            if c != 0:
                row = [r + c * v for r, v in zip(row, self.solution[k])]
        return [_compact(r) for r in row]

    def voltage(self, a: str, b: str = GROUND) -> list:
        return self.row(self.difference(a, b))

    def conductance_current(self, name: str, a: str, b: str) -> list:
        g = self.g[name]
        return [g * c for c in self.voltage(a, b)]

    def branch_current(self, label: str) -> list:
        """Current through ideal voltage element `label`, from its first node to its second."""
        child = next(node for node, (name, _parent) in self.parent.items() if name == label)
        below = {child}
        for node in self.order:
            if node in self.parent and self.parent[node][1] in below:
                below.add(node)
        total_v: dict[int, sp.Expr] = {}
        total_e = [self.zero] * self.width
        for node in below:
            out_v, out_e = self.outflow[node]
            for j, c in out_v.items():
                total_v[j] = total_v.get(j, self.zero) + c
            total_e = [x + y for x, y in zip(total_e, out_e)]
        row = self.row((total_v, total_e))
        # The subtree's outflow arrives through the branch when the subtree hangs
        # on the element's second node; it leaves through it when on the first.
        first = next(p for name, p, _n, _s in self._branches if name == label)
        return [-x for x in row] if child == first else row

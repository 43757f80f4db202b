"""Modified nodal analysis of one configuration: stamps, exact sums, a refined solve.

:func:`stamp` fills ``A z = B e`` for a :class:`~firstorder.network.topology.Layout`
with the caller's number type (floats kept as exact sums here, sympy expressions in
:mod:`firstorder.symbolic`); :func:`solve` solves it to full double precision even
when conductances span many decades.
"""

from __future__ import annotations

import math

import numpy as np

from .topology import Layout

__all__ = ["ExactSum", "solve", "stamp"]


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


class ExactSum:
    """A matrix entry kept as the floats that were added into it (a number type for
    :func:`stamp`), so that its sum and products with it can be formed exactly."""

    __slots__ = ("terms",)

    def __init__(self, terms: tuple[float, ...] = ()) -> None:
        self.terms = terms

    def __add__(self, other: "ExactSum | float") -> "ExactSum":
        return ExactSum(self.terms + (other.terms if isinstance(other, ExactSum) else (float(other),)))

    def __neg__(self) -> "ExactSum":
        return ExactSum(tuple(-t for t in self.terms))

    def __sub__(self, other: "ExactSum | float") -> "ExactSum":
        return self + (-other if isinstance(other, ExactSum) else -float(other))


def solve(A_terms: list[list["ExactSum"]], B_terms: list[list["ExactSum"]], rounds: int = 6) -> np.ndarray:
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

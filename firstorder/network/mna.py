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

__all__ = ["ExactSum", "TermPlan", "generic_solution", "solve", "solve_pair", "solve_planned", "stamp", "term_plan"]


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


def solve(A_terms: list[list["ExactSum"]], B_terms: list[list["ExactSum"]], rounds: int = 40) -> np.ndarray:
    """Solve the MNA system whose entries are exact sums of floats, to full double precision.

    The solution as one float per unknown; :func:`solve_pair` gives it to about twice
    that precision, for quantities formed as differences of unknowns.

    Examples
    --------
    >>> one, half = ExactSum((1.0,)), ExactSum((0.5, 0.5))
    >>> solve([[one + one]], [[half]])
    array([[0.5]])
    """
    return solve_pair(A_terms, B_terms, rounds)[0]


def solve_pair(A_terms: list[list["ExactSum"]], B_terms: list[list["ExactSum"]],
               rounds: int = 40, zeros: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """The solution of the exact system as ``high + low`` (double-double), see :func:`solve`;
    `zeros` marks entries known to be zero (by structure, :func:`generic_solution`).

    A node can join a 1 mΩ path and a 1 TΩ leakage: rounding the diagonal sum
    1000 + 1e-12 S, and elimination in double precision, leave the result a few
    parts per million off.  So the entries are summed exactly (``math.fsum``),
    and the plain solution is refined: each round forms the residual of the
    *exact* system against ``high + low`` from exact products (Dekker's
    two-product) summed exactly, solves for the correction and adds it into
    the pair, until the correction is below 2**-100 of every entry.  Every round
    gains about ``-log10(cond * 1e-16)`` digits.  The low part matters for what
    is formed from differences of unknowns: the voltage across a coil shunted by
    1 mΩ is 1e-15 of its nodes' voltages, and a float per node would leave it
    wrong in its first digit.

    Examples
    --------
    >>> third = ExactSum((3.0,))
    >>> high, low = solve_pair([[third]], [[ExactSum((1.0,))]])
    >>> float(high[0, 0]), abs(float(low[0, 0])) < 1e-16
    (0.3333333333333333, True)
    """
    A = np.array([[math.fsum(entry.terms) for entry in row] for row in A_terms])
    B = np.array([[math.fsum(entry.terms) for entry in row] for row in B_terms])
    values = np.array([t for row in A_terms for entry in row for t in entry.terms])
    columns = np.array([j for row in A_terms for j, entry in enumerate(row) for _ in entry.terms], dtype=np.intp)
    counts = [sum(len(entry.terms) for entry in row) for row in A_terms]
    ends = np.cumsum(counts).tolist()
    starts = [e - c for e, c in zip(ends, counts)]
    rhs = [[B_terms[i][j].terms for j in range(B.shape[1])] for i in range(B.shape[0])]
    return _refine(A, B, values, columns, starts, ends, rhs, rounds, zeros)


def _refine(A: np.ndarray, B: np.ndarray, values: np.ndarray, columns: np.ndarray, starts: list[int],
            ends: list[int], rhs: list, rounds: int, zeros: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """Iterative refinement of ``A z = B`` into a pair (see :func:`solve_pair`): `values`
    are the terms of the exact A row by row (row i from starts[i] to ends[i]), `columns`
    the unknown each multiplies, `rhs` the terms of each entry of B."""
    factors = _factor(A)
    high = factors(B)
    if zeros is not None:
        high[zeros] = 0.0
    low = np.zeros_like(high)
    a = values[:, None]
    a_high, a_low = _split(a)
    previous = np.full_like(high, np.inf)
    for _ in range(rounds):
        parts = []
        # The low part is zero before the first correction: its products add nothing.
        for x in (high[columns], low[columns]) if low.any() else (high[columns],):
            products = a * x
            parts.append(products)
            parts.append(_product_errors(a, x, products, a_high, a_low))
        # Negated, row-major per row and column: every term of -A (high + low) for entry (i, j).
        per = len(parts)
        terms = -np.concatenate(parts, axis=0).reshape(per, -1, B.shape[1])
        # Per column, the terms in row order (`per` per stamp term): one list, sliced per row.
        flat = [terms[:, :, j].T.ravel().tolist() for j in range(B.shape[1])]
        residual = np.array([[math.fsum((*rhs[i][j], *flat[j][per * first:per * last]))
                              for j in range(B.shape[1])]
                             for i, (first, last) in enumerate(zip(starts, ends))])
        if not residual.any():
            break
        correction = factors(residual)
        if zeros is not None:
            correction[zeros] = 0.0
        total = low + correction
        new_high = high + total
        # Two-sum: what rounding new_high dropped, kept in the low part.
        virtual = new_high - high
        low = (high - (new_high - virtual)) + (total - virtual)
        high = new_high
        size = np.abs(correction)
        # Done when every entry is converged to the pair's precision or has stopped
        # gaining (a coefficient that is zero exactly keeps a correction of its own noise).
        if np.all((size <= _PAIR * np.abs(high)) | (size >= 0.5 * previous) | (size == 0.0)):
            break
        previous = size
    return high, low


class TermPlan:
    """Where every stamp term of a layout goes, worked out once per layout (values vary):
    the terms row by row, the column each multiplies, which conductance it is (or the
    constant 1) with its sign, and B, whose entries are small integers (exact in floats)."""

    __slots__ = ("rows", "columns", "conductance", "sign", "starts", "ends", "B", "size")

    def __init__(self, layout: Layout, excitations: int) -> None:
        # Stamp with codes for values: conductance k is 2 + k, the constant one is 1; the
        # sign of a code is the sign of the term.
        labels = [(name, key) for name, key, _, _ in layout.conductances]
        codes = {label: float(2 + k) for k, label in enumerate(labels)}
        A, B = stamp(layout, lambda name, key: ExactSum((codes[(name, key)],)), ExactSum(), ExactSum((1.0,)),
                     excitations)
        rows, columns, values = [], [], []
        for i, row in enumerate(A):
            for j, entry in enumerate(row):
                for code in entry.terms:
                    rows.append(i)
                    columns.append(j)
                    values.append(code)
        values_array = np.array(values, dtype=float)
        self.rows = np.array(rows, dtype=np.intp)
        self.columns = np.array(columns, dtype=np.intp)
        self.conductance = np.abs(values_array).astype(np.intp) - 2  # -1: the constant one
        self.sign = np.sign(values_array)
        counts = np.bincount(self.rows, minlength=len(A)) if rows else np.zeros(len(A), dtype=np.intp)
        self.ends = np.cumsum(counts).tolist()
        self.starts = [e - c for e, c in zip(self.ends, counts.tolist())]
        self.B = np.array([[math.fsum(entry.terms) for entry in row] for row in B]).reshape(len(A), excitations)
        self.size = len(A)


def term_plan(layout: Layout, excitations: int) -> TermPlan:
    """The layout's :class:`TermPlan` (cached on the layout)."""
    plan = layout.memo.get("terms")
    if plan is None or plan.B.shape[1] != excitations:
        plan = layout.memo["terms"] = TermPlan(layout, excitations)
    return plan


def solve_planned(plan: TermPlan, conductances: np.ndarray, rounds: int = 40,
                  zeros: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """:func:`solve_pair` for the system of `plan` with the given conductance of each branch.

    The float matrix only preconditions (it is factored); every residual is formed exactly
    from the terms, so the result is that of the exact system.

    Examples
    --------
    >>> from firstorder.netlist import Netlist, Part
    >>> from firstorder.network.topology import plan
    >>> netlist = Netlist((Part("voltage_source", "vin", "in", "gnd"), Part("resistor", "r", "in", "out", value=1e3),
    ...                    Part("resistor", "leak", "out", "gnd", value=1e12),
    ...                    Part("capacitor", "c", "out", "gnd", value=1e-6)))
    >>> layout = plan(netlist, ())
    >>> high, low = solve_planned(term_plan(layout, 2), np.array([1e-3, 1e-12]))
    >>> high[layout.node_index["in"]].tolist()
    [0.0, 1.0]
    """
    # Index -1 (the constant one) picks the 1.0 appended at the end.
    values = plan.sign * np.append(np.asarray(conductances, dtype=float), 1.0)[plan.conductance]
    A = np.zeros((plan.size, plan.size))
    np.add.at(A, (plan.rows, plan.columns), values)
    return _refine(A, plan.B, values, plan.columns, plan.starts, plan.ends,
                   [[(v,) for v in row] for row in plan.B.tolist()], rounds, zeros)


#: Relative rounding a converged pair keeps (2**-104), with a margin of 16.
_PAIR = 2.0 ** -100
#: Primes below 2**31 (products of two residues fit in int64) for the generic solves.
_PRIMES = (2147483647, 2147483629)


def _factor(A: np.ndarray):
    """A solver for ``A x = b`` (numpy's LU each call: the systems are small, and scipy's
    factor-once would cost its import on the first reduction)."""
    return lambda b: np.linalg.solve(A, b)


def _product_errors(a: np.ndarray, b: np.ndarray, products: np.ndarray,
                    a_high: np.ndarray, a_low: np.ndarray) -> np.ndarray:
    """``a * b - products`` exactly, by Veltkamp splitting (Dekker's two-product)."""
    b_high, b_low = _split(b)
    return ((a_high * b_high - products) + a_high * b_low + a_low * b_high) + a_low * b_low


def _split(value: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    scaled = value * 134217729.0  # 2**27 + 1
    high = scaled - (scaled - value)
    return high, value - high


def generic_solution(layout: Layout, excitations: int) -> np.ndarray | None:
    """The layout's solution for random generic conductances, exactly, modulo two primes:
    shape (2, size, excitations), or None if a generic system came out singular.

    Which coefficients are zero whatever the part values (a source that cannot reach a
    node, two nodes no current can part) is structure, not arithmetic: a coefficient that
    is zero for random conductances is zero as a polynomial in them (Schwartz-Zippel; a
    false zero has odds of about size / 2**31 per prime).  The refined float solve leaves
    such a coefficient as noise of 1e-50, which divided by another would become a gain
    where there is none, so reduce sets them to 0 from this.

    Examples
    --------
    >>> from firstorder.netlist import Netlist, Part
    >>> from firstorder.network.topology import plan
    >>> netlist = Netlist((Part("voltage_source", "vin", "in", "gnd"), Part("resistor", "r", "in", "out", value=1e3),
    ...                    Part("capacitor", "c", "out", "gnd", value=1e-6)))
    >>> (generic_solution(plan(netlist, ()), 2)[0] != 0).astype(int).tolist()  # v(in) has no x
    [[0, 1], [1, 0], [1, 1], [1, 1]]
    """
    draws: dict[str, int] = {}

    def conductance(name: str, key: str) -> int:  # one draw per branch, whichever value it carries
        return draws.setdefault(name, _scrambled(len(draws)))

    A, B = stamp(layout, conductance, 0, 1, excitations)
    solutions = []
    for prime in _PRIMES:
        solution = _solve_mod(np.array(A, dtype=np.int64) % prime, np.array(B, dtype=np.int64) % prime, prime)
        if solution is None:
            return None
        solutions.append(solution)
    return np.stack(solutions)


def _scrambled(k: int) -> int:
    """A fixed pseudo-random residue for branch `k` (splitmix64's finaliser; numpy.random is
    not imported for this: loading it evaluates text, which loading a file must not)."""
    z = (k + 1) * 0x9E3779B97F4A7C15 & 0xFFFFFFFFFFFFFFFF
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9 & 0xFFFFFFFFFFFFFFFF
    z = (z ^ (z >> 27)) * 0x94D049BB133111EB & 0xFFFFFFFFFFFFFFFF
    return 1 + (z ^ (z >> 31)) % (_PRIMES[1] - 1)


def _solve_mod(A: np.ndarray, B: np.ndarray, prime: int) -> np.ndarray | None:
    """Gauss-Jordan elimination modulo `prime` (residues below 2**31, in int64)."""
    n = A.shape[0]
    rows = np.concatenate([A, B], axis=1)
    for col in range(n):
        candidates = np.nonzero(rows[col:, col])[0]
        if candidates.size == 0:
            return None
        pivot = col + int(candidates[0])
        if pivot != col:
            rows[[col, pivot]] = rows[[pivot, col]]
        rows[col] = rows[col] * pow(int(rows[col, col]), -1, prime) % prime
        factors = rows[:, col].copy()
        factors[col] = 0
        rows = (rows - (factors[:, None] * rows[col][None, :]) % prime) % prime
    return rows[:, n:]

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

__all__ = ["ExactSum", "TermPlan", "generic_solution", "solve", "solve_batch", "solve_pair", "solve_planned",
           "solve_planned_batch", "stamp", "term_plan"]


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
    parts per million off.  So the matrix is kept as its stamp terms, and the plain
    solution is refined: each round forms the residual of the *exact* system
    against ``high + low`` from exact products (Dekker's two-product) summed in
    double-double (:func:`_residual`), solves for the correction and adds it into
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
    rows, columns, values = _flat_terms(A_terms)
    # B's entries as pairs: the rounded sum and what it dropped.
    B_high = np.array([[math.fsum(entry.terms) for entry in row] for row in B_terms], dtype=float)
    B_low = np.array([[math.fsum((*entry.terms, -h)) for entry, h in zip(row, hs)]
                      for row, hs in zip(B_terms, B_high.tolist())], dtype=float).reshape(B_high.shape)
    terms = _Terms(rows, columns, len(A_terms), B_high, B_low)
    high, low = solve_batch(terms, values[None, :], rounds, zeros)
    return high[0], low[0]


def _flat_terms(matrix: list[list["ExactSum"]]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every term of a matrix of exact sums, flat: its row, its column and its value."""
    rows, columns, values = [], [], []
    for i, row in enumerate(matrix):
        for j, entry in enumerate(row):
            for term in entry.terms:
                rows.append(i)
                columns.append(j)
                values.append(term)
    return np.array(rows, dtype=np.intp), np.array(columns, dtype=np.intp), np.array(values, dtype=float)


class _Terms:
    """The stamp terms of a system ``A z = B`` (row and column of each; B as a pair), and
    the slots of its residual sums, grouped by padded length (see :func:`_residual`)."""

    __slots__ = ("rows", "columns", "size", "B", "B_low", "groups", "flat")

    def __init__(self, rows: np.ndarray, columns: np.ndarray, size: int, B: np.ndarray,
                 B_low: np.ndarray | None = None) -> None:
        self.rows, self.columns, self.size = rows, columns, size
        self.B = B
        self.B_low = np.zeros_like(B) if B_low is None else B_low
        self.flat = rows * size + columns
        T = rows.size
        # Residual slots, per row: its B entry (index 1 + 2T + i), then the products of each
        # of its terms with the high (1 + t) and the low (1 + T + t) part; index 0 is zero.
        per_row: list[list[int]] = [[1 + 2 * T + i] for i in range(size)]
        for t, i in enumerate(rows.tolist()):
            per_row[i] += [1 + t, 1 + T + t]
        self.groups = _slot_groups(per_row)

    def residual(self, a: np.ndarray, conductances: np.ndarray | None, high: np.ndarray, low: np.ndarray) -> np.ndarray:
        """``B - A (high + low)`` for every system of a batch, from the stamp terms `a` (batch, T).

        Each product of a term with a part of the solution is exact as a pair (two-product);
        each row's pairs and its B entry are summed pairwise in double-double, so the error
        is at most about ``3u**2 log2(slots)`` of the sum of the magnitudes: the residual of
        a system whose every stamp term is off by that relative amount (2**-100 for 60
        slots), which perturbs a solution as a conductance of 1e-30 of its own size would.
        """
        n, width = high.shape[0], high.shape[2]
        a_high, a_low = _split(a)
        parts_high, parts_low = [np.zeros((n, 1, width))], [np.zeros((n, 1, width))]
        for x in (high[:, self.columns], low[:, self.columns]):
            products = a[:, :, None] * x
            parts_high.append(-products)
            parts_low.append(-_product_errors(a[:, :, None], x, products, a_high[:, :, None], a_low[:, :, None]))
        parts_high.append(_stacked(self.B, n))
        parts_low.append(_stacked(self.B_low, n))
        every_high, every_low = np.concatenate(parts_high, axis=1), np.concatenate(parts_low, axis=1)
        residual = np.empty((n, self.size, width))
        return _row_sums(self.groups, every_high, every_low, residual)


def _slot_groups(per_row: list[list[int]]) -> list[tuple[np.ndarray, np.ndarray]]:
    """Rows grouped by their count of slots rounded up to a power of two: per group, the
    rows and a table (rows, slots) of indices into the pairs summed (0: a zero pair)."""
    by_length: dict[int, list[int]] = {}
    longest = max((len(slots) for slots in per_row), default=1)
    for i, slots in enumerate(per_row):
        # Short rows share one table (fewer, larger operations); zero pairs padding a row
        # add nothing (a normalised pair plus zero is itself), so the grouping is free.
        by_length.setdefault(1 << (max(len(slots), 1 if longest > 8 else longest) - 1).bit_length(), []).append(i)
    groups = []
    for length, members in sorted(by_length.items()):
        table = np.zeros((len(members), length), dtype=np.intp)
        for k, i in enumerate(members):
            table[k, :len(per_row[i])] = per_row[i]
        groups.append((np.array(members, dtype=np.intp), table))
    return groups


def _row_sums(groups, every_high: np.ndarray, every_low: np.ndarray, out: np.ndarray) -> np.ndarray:
    """Each row's pairs (picked from `every_high` + `every_low`, (batch, pairs, width) by its
    slot table) summed pairwise in double-double, rounded to a float, into `out`."""
    for members, table in groups:
        sh, sl = every_high[:, table], every_low[:, table]  # (batch, rows, slots, width)
        while sh.shape[2] > 1:  # pairwise: neighbours, then pairs of pairs
            sh, sl = _pair_sum(sh[:, :, 0::2], sl[:, :, 0::2], sh[:, :, 1::2], sl[:, :, 1::2])
        out[:, members] = sh[:, :, 0]
    return out


def _pair_difference(ah, al, bh, bl):
    """Double-double ``a - b``."""
    return _pair_sum(ah, al, -bh, -bl)


def _stacked(array: np.ndarray, n: int) -> np.ndarray:
    """`array` repeated along a new leading axis of `n` (a view; for one, without the cost
    of a broadcast)."""
    return array[None] if n == 1 else np.broadcast_to(array, (n,) + array.shape)


def _two_sum(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``a + b`` as a rounded sum and its exact error (Knuth's two-sum)."""
    s = a + b
    v = s - a
    return s, (a - (s - v)) + (b - v)


def _fast_two_sum(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Two-sum for ``|a| >= |b|`` (Dekker)."""
    s = a + b
    return s, b - (s - a)


def _pair_sum(xh, xl, yh, yl):
    """Double-double ``x + y`` (AccurateDWPlusDW: relative error at most 3u**2 + 13u**3 of
    the exact sum, u = 2**-53; Joldes, Muller and Popescu, ACM TOMS 44, 2017, Thm. 3.3)."""
    sh, sl = _two_sum(xh, yh)
    th, tl = _two_sum(xl, yl)
    vh, vl = _fast_two_sum(sh, sl + th)
    return _fast_two_sum(vh, tl + vl)


def solve_batch(terms: "_Terms", values: np.ndarray, rounds: int = 40, zeros: np.ndarray | None = None,
                conductances: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """The refined pair ``high + low`` (batch, size, width) of a batch of systems sharing
    their stamp pattern `terms`, with stamp term values `values` (batch, T).

    Every system is refined on its own (the same operations, element by element, with
    its own count of rounds), so a system's result does not depend on the batch it is
    solved in: the one-system path is this with a batch of one.
    """
    n = values.shape[0]
    size = terms.size
    # The float matrix only preconditions; its entries are the terms added in term order.
    A = np.zeros((size * size, n))
    np.add.at(A, terms.flat, values.T)
    A = np.ascontiguousarray(A.T).reshape(n, size, size)
    high = _solve(A, _stacked(terms.B, n))
    if zeros is not None:
        high[:, zeros] = 0.0
    low = np.zeros_like(high)
    previous = np.full_like(high, np.inf)
    active = np.arange(n)
    for _ in range(rounds):
        if not active.size:
            break
        every = active.size == n
        pick = (lambda array: array) if every else (lambda array: array[active])
        h, lo = pick(high), pick(low)
        residual = terms.residual(pick(values), None if conductances is None else pick(conductances), h, lo)
        moving = residual.any(axis=(1, 2))
        correction = _solve(pick(A), residual)
        if zeros is not None:
            correction[:, zeros] = 0.0
        total = lo + correction
        new_high = h + total
        # Two-sum: what rounding new_high dropped, kept in the low part.
        virtual = new_high - h
        new_low = (h - (new_high - virtual)) + (total - virtual)
        size_ = np.abs(correction)
        # Done when every entry is converged to the pair's precision or has stopped
        # gaining (a coefficient that is zero exactly keeps a correction of its own noise).
        done = np.all((size_ <= _PAIR * np.abs(new_high)) | (size_ >= 0.5 * pick(previous)) | (size_ == 0.0),
                      axis=(1, 2))
        if every and moving.all():
            high, low, previous = new_high, new_low, size_
        else:
            update = active[moving]
            high[update], low[update] = new_high[moving], new_low[moving]
            previous[active] = size_
        active = active[moving & ~done]
    return high, low


def _solve(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """``A x = B`` for a stack of small systems (numpy's LU, one system at a time: scipy's
    factor-once would cost its import on the first reduction)."""
    return np.linalg.solve(A, B)


class TermPlan(_Terms):
    """Where every stamp term of a layout goes, worked out once per layout (values vary):
    the terms row by row, the column each multiplies, which conductance it is (or the
    constant 1) with its sign, and B, whose entries are small integers (exact in floats)."""

    __slots__ = ("conductance", "sign", "ends", "poles", "branch_groups", "plus", "minus")

    def __init__(self, layout: Layout, excitations: int) -> None:
        # Stamp with codes for values: conductance k is 2 + k, the constant one is 1; the
        # sign of a code is the sign of the term.
        labels = [(name, key) for name, key, _, _ in layout.conductances]
        codes = {label: float(2 + k) for k, label in enumerate(labels)}
        A, B = stamp(layout, lambda name, key: ExactSum((codes[(name, key)],)), ExactSum(), ExactSum((1.0,)),
                     excitations)
        rows, columns, values_array = _flat_terms(A)
        self.conductance = np.abs(values_array).astype(np.intp) - 2  # -1: the constant one
        self.sign = np.sign(values_array)
        B_array = np.array([[math.fsum(entry.terms) for entry in row] for row in B]).reshape(len(A), excitations)
        super().__init__(rows, columns, len(A), B_array)
        # The residual from branch currents (see residual): each conductance's ends and each
        # voltage branch's, as unknowns (ground: the extra unknown `size`, always 0).
        size, index = len(A), layout.node_index
        self.ends = np.array([[index.get(a, size), index.get(b, size)] for _, _, a, b in layout.conductances],
                             dtype=np.intp).reshape(-1, 2)
        self.poles = np.array([[index.get(p, size), index.get(n, size)] for _, p, n, _ in layout.voltage_branches],
                              dtype=np.intp).reshape(-1, 2)
        # Pairs summed: 0 zero, then +i_k and -i_k per conductance (K each), +j and -j per
        # voltage branch current, minus each branch's voltage, and B by row.
        K, V, nodes = len(self.ends), len(self.poles), len(layout.nodes)
        per_row: list[list[int]] = [[1 + 2 * K + 3 * V + i] for i in range(size)]
        for k, (a, b) in enumerate(self.ends.tolist()):
            if a < size:
                per_row[a].append(1 + K + k)  # row a holds +i_k: the residual takes it off
            if b < size:
                per_row[b].append(1 + k)
        for v, (p, n) in enumerate(self.poles.tolist()):
            if p < size:
                per_row[p].append(1 + 2 * K + V + v)
            if n < size:
                per_row[n].append(1 + 2 * K + v)
            per_row[nodes + v].append(1 + 2 * K + 2 * V + v)
        self.branch_groups = _slot_groups(per_row)
        self.plus = np.concatenate([self.ends[:, 0], self.poles[:, 0]])
        self.minus = np.concatenate([self.ends[:, 1], self.poles[:, 1]])

    def residual(self, a: np.ndarray, conductances: np.ndarray | None, high: np.ndarray,
                 low: np.ndarray) -> np.ndarray:
        """``B - A (high + low)`` formed from branch currents, for a batch (see the class).

        Each conductance's current ``g (v_a - v_b)`` is formed as a pair from the voltage
        difference taken in double-double (relative error about 2u**2, u = 2**-53) and an
        exact product, each branch voltage likewise; each row's pairs are then summed
        pairwise in double-double.  So the residual is that of the exact system with every
        branch current and every branch voltage off by a relative 2**-100 or so (a change of
        each conductance by that fraction): never of the size of the terms ``g v``, which a
        1 mΩ part beside a 1 TΩ one makes 1e15 times larger than the currents that matter.
        """
        n, width = high.shape[0], high.shape[2]
        pad = np.zeros((n, 1, width))
        h, lo = np.concatenate([high, pad], axis=1), np.concatenate([low, pad], axis=1)
        K = len(self.ends)
        # Every conductance's voltage, then every voltage branch's, in one difference.
        dh, dl = _pair_difference(h[:, self.plus], lo[:, self.plus], h[:, self.minus], lo[:, self.minus])
        g = conductances[:, :, None]
        g_high, g_low = _split(g)
        products = g * dh[:, :K]
        ih, il = _fast_two_sum(products, _product_errors(g, dh[:, :K], products, g_high, g_low) + g * dl[:, :K])
        vh, vl = dh[:, K:], dl[:, K:]
        nodes = self.size - len(self.poles)
        jh, jl = high[:, nodes:], low[:, nodes:]
        every_high = np.concatenate([pad, ih, -ih, jh, -jh, -vh, _stacked(self.B, n)], axis=1)
        every_low = np.concatenate([pad, il, -il, jl, -jl, -vl, np.zeros((n,) + self.B.shape)], axis=1)
        return _row_sums(self.branch_groups, every_high, every_low, np.empty((n, self.size, width)))


def term_plan(layout: Layout, excitations: int) -> TermPlan:
    """The layout's :class:`TermPlan` (cached on the layout)."""
    plan = layout.memo.get("terms")
    if plan is None or plan.B.shape[1] != excitations:
        plan = layout.memo["terms"] = TermPlan(layout, excitations)
    return plan


def solve_planned(plan: TermPlan, conductances: np.ndarray, rounds: int = 40,
                  zeros: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """:func:`solve_pair` for the system of `plan` with the given conductance of each branch:
    :func:`solve_planned_batch` with a batch of one.

    The float matrix only preconditions (it is factored); every residual is formed from
    the exact terms, so the result is that of the exact system.

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
    high, low = solve_planned_batch(plan, np.asarray(conductances, dtype=float)[None, :], rounds, zeros)
    return high[0], low[0]


def solve_planned_batch(plan: TermPlan, conductances: np.ndarray, rounds: int = 40,
                        zeros: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """The systems of `plan` for a batch of conductance vectors (batch, branches): the pairs
    ``high + low``, each (batch, size, width), each system's bit for bit what it gives alone.

    Examples
    --------
    >>> from firstorder.netlist import Netlist, Part
    >>> from firstorder.network.topology import plan
    >>> netlist = Netlist((Part("voltage_source", "vin", "in", "gnd"), Part("resistor", "r", "in", "out", value=1e3),
    ...                    Part("capacitor", "c", "out", "gnd", value=1e-6)))
    >>> layout = plan(netlist, ())
    >>> high, low = solve_planned_batch(term_plan(layout, 2), np.array([[1e-3], [2e-3]]))
    >>> high[:, layout.branch_row("c")].tolist()  # the capacitor's current per unit of [x, u]
    [[-0.001, 0.001], [-0.002, 0.002]]
    """
    g = np.asarray(conductances, dtype=float)
    # Index -1 (the constant one) picks the 1.0 appended at the end.
    values = plan.sign * np.concatenate([g, np.ones((g.shape[0], 1))], axis=1)[:, plan.conductance]
    if values.shape[0] <= _CHUNK:
        return solve_batch(plan, values, rounds, zeros, g)
    # In chunks whose working arrays stay in cache (each system's result is its own anyway).
    pieces = [solve_batch(plan, values[k:k + _CHUNK], rounds, zeros, g[k:k + _CHUNK])
              for k in range(0, values.shape[0], _CHUNK)]
    return np.concatenate([p[0] for p in pieces]), np.concatenate([p[1] for p in pieces])


#: Systems solved together at most (larger batches run in chunks of this many).
_CHUNK = 256


#: Relative rounding a converged pair keeps (2**-104), with a margin of 16.
_PAIR = 2.0 ** -100
#: Primes below 2**31 (products of two residues fit in int64) for the generic solves.
_PRIMES = (2147483647, 2147483629)


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

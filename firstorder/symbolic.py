"""Symbolic derivations with sympy: the equivalent seen by the storage element,
the ODE, tau, and the response split into zero-input/zero-state and natural/forced.

Each configuration is taken from the same plan as the numeric path
(:func:`firstorder.network.plan`: the same parts, ideal elements and island
pins), written as nodal equations on supernodes and solved by Gaussian
elimination in the order a hand calculation would take (fewest neighbours first),
without expanding.  Small entries are put over one denominator as they appear and
small results are factored, so a divider or a bridge reads as the handbook
formula; large networks keep the nested form of the elimination, which is exact
and quick (eight configurations of a 12-resistor fixture in well under a second;
see ``benchmarks/derive.py``).  Derivations are cached by network structure, so a
change of part values costs no sympy work.  This module is imported only when a
derivation is asked for.
"""

from __future__ import annotations

from collections import OrderedDict, defaultdict
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING

import sympy as sp
from sympy.polys.matrices import DomainMatrix
from sympy.polys.rings import PolyRing

from .netlist import GROUND
from .network import Layout

if TYPE_CHECKING:
    from .fixture import Fixture

__all__ = ["Derivation", "derive"]


def _symbol_for(part, states: dict[str, bool]) -> sp.Symbol:
    if part.kind == "switch":
        suffix = "on" if states[part.name] else "off"
        return sp.Symbol(f"{part.name}_{suffix}", positive=True)
    if part.is_source:
        return sp.Symbol(part.name, real=True)
    return sp.Symbol(part.name, positive=True)


@dataclass(frozen=True, repr=False)
class Derivation:
    """A first-order derivation for one switch configuration of a fixture.

    All responses are functions of ``t``, the time since the change that started
    the configuration, and of ``initial``, the state at that change.

    Attributes
    ----------
    ode : sympy.Eq
        ``d x/dt = (final - x) / tau`` for the state function ``x(t)``.
    tau, final : sympy.Expr
        Time constant and final value (``oo`` and ``initial`` when the state is held).
    zero_input, zero_state, natural, forced : sympy.Expr
        The solution split both ways.
    resistance : sympy.Expr
        Thevenin (capacitor) or Norton (inductor) resistance seen by the storage element.
    equivalent : sympy.Expr
        Thevenin voltage (capacitor) or Norton current (inductor).
    probes : dict
        Probe name to its expression in the state and the source levels.
    symbols : dict
        Part and source name, ``"t"`` and ``"initial"`` to their sympy symbols.
    """

    kind: str
    storage: str
    configuration: str
    state: sp.Function
    ode: sp.Eq
    tau: sp.Expr
    final: sp.Expr
    zero_input: sp.Expr
    zero_state: sp.Expr
    natural: sp.Expr
    forced: sp.Expr
    resistance: sp.Expr
    equivalent: sp.Expr
    probes: dict[str, sp.Expr]
    symbols: dict[str, sp.Symbol]
    values: dict[sp.Symbol, float] = field(default_factory=dict)

    @property
    def holds(self) -> bool:
        return self.tau == sp.oo

    def __repr__(self) -> str:
        # The dataclass default would print every expression twice over; this is the summary.
        return (f"Derivation({self.kind} {self.storage}, {self.configuration}: tau = {self.tau}, "
                f"final = {self.final})")

    def substitute(self, expression: sp.Expr) -> sp.Expr:
        """`expression` with the fixture's part values put in."""
        return expression.subs(self.values)

    def _tex(self, expression) -> str:
        """LaTeX with every name written as the user gave it (see :func:`_latex_name`)."""
        names = {symbol: _latex_name(symbol.name) for symbol in expression.free_symbols}
        text = sp.latex(expression, symbol_names=names)
        function = self.state.func.__name__
        return text.replace(sp.latex(sp.Symbol(function)) + r"{\left(", _latex_name(function) + r"{\left(")

    def _law(self) -> str:
        x = self._tex(self.state)
        storage = self._tex(self.symbols[self.storage])
        if self.kind == "capacitor":
            return (
                rf"{storage}\,\frac{{d{x}}}{{dt}} = \frac{{V_{{th}} - {x}}}{{R_{{th}}}}"
                r"\quad\text{(KCL at the capacitor, Thevenin equivalent)}"
            )
        return (
            rf"{storage}\,\frac{{d{x}}}{{dt}} = R_{{N}}\left(I_{{N}} - {x}\right)"
            r"\quad\text{(KVL around the inductor, Norton equivalent)}"
        )

    def _sum(self, first, second) -> str:
        """``first + (second)``, leaving out a zero term but not hiding which one it is."""
        if second == 0:
            return rf"{self._tex(first)} + 0"
        if first == 0:
            return rf"0 + {self._tex(second)}"
        return rf"{self._tex(first)} + \left({self._tex(second)}\right)"

    def steps(self) -> list[tuple[str, str]]:
        """The derivation as (caption, LaTeX) pairs."""
        x = self._tex(self.state)
        name = "th" if self.kind == "capacitor" else "N"
        equivalent = "V" if self.kind == "capacitor" else "I"
        if self.holds:
            rows = [(f"No resistive path for {self.kind} {self.storage} ({self.configuration})",
                     rf"\text{{the state holds: }}\; {x} = {self._tex(self.symbols['initial'])}")]
        else:
            rows = [
                (f"Equivalent seen by {self.kind} {self.storage} ({self.configuration})",
                 rf"R_{{{name}}} = {self._tex(self.resistance)},\quad {equivalent}_{{{name}}} = {self._tex(self.equivalent)}"),
                ("Circuit law at the storage element", self._law()),
            ]
        at_infinity = self._tex(self.state.subs(self.symbols["t"], sp.oo))
        if self.holds:
            rows += [
                ("The ODE", self._tex(self.ode)),
                ("Time constant", rf"\tau = {self._tex(self.tau)}"),
                ("Final value", rf"{at_infinity} = {self._tex(self.final)}"),
                ("Zero-input + zero-state", rf"{x} = {self._sum(self.zero_input, self.zero_state)}"),
                ("Natural + forced", rf"{x} = {self._sum(self.natural, self.forced)}"),
            ]
        else:
            # Written with R, the equivalent and tau as named in the first step, the way an
            # engineer writes them: the full expressions of a real fixture nest fractions
            # inside exponents.  (The attributes keep the full expressions.)
            storage = self._tex(self.symbols[self.storage])
            start = self._tex(self.symbols["initial"])
            resistance, target = rf"R_{{{name}}}", rf"{equivalent}_{{{name}}}"
            decay = r"e^{-t/\tau}"
            if self.kind == "capacitor":
                ode = rf"\frac{{d{x}}}{{dt}} = \frac{{{target} - {x}}}{{{storage}\,{resistance}}}"
                tau = rf"\tau = {storage}\,{resistance} = {self._tex(self.tau)}"
            else:
                ode = rf"\frac{{d{x}}}{{dt}} = \frac{{{resistance}\left({target} - {x}\right)}}{{{storage}}}"
                tau = rf"\tau = \frac{{{storage}}}{{{resistance}}} = {self._tex(self.tau)}"
            rows += [
                ("The ODE", ode),
                ("Time constant", tau),
                ("Final value", rf"{at_infinity} = {target}"),
                ("Zero-input + zero-state", rf"{x} = {start}\,{decay} + {target}\left(1 - {decay}\right)"),
                ("Natural + forced", rf"{x} = \left({start} - {target}\right){decay} + {target}"),
            ]
        for probe, expression in self.probes.items():
            rows.append((f"Probe {probe}", rf"{self._tex(sp.Symbol(probe))} = {self._tex(expression)}"))
        if self.values:
            numbers = ", ".join(
                rf"{self._tex(s)} = {sp.latex(sp.Float(v, 4))}" for s, v in self.values.items()
            )
            tau_number = r"\infty" if self.holds else sp.latex(sp.Float(float(self.substitute(self.tau)), 4))
            rows.append(("With the part values (SI units)", rf"{numbers},\quad \tau = {tau_number}"))
            if not self.holds:
                final_number = self._tex(self.substitute(self.final).evalf(4))
                rows.append(("Final value with the part values",
                             rf"{self._tex(self.state.subs(self.symbols['t'], sp.oo))} = {final_number}"))
        return rows

    def latex(self) -> str:
        """The derivation as one LaTeX ``aligned`` block of steps."""
        lines = [rf"&\text{{{_latex_text(caption)}:}}\\ &\quad {body}" for caption, body in self.steps()]
        return "\\begin{aligned}\n" + " \\\\\n".join(lines) + "\n\\end{aligned}"

    def markdown(self) -> str:
        """The derivation as Markdown with display math, one step per paragraph."""
        return "\n\n".join(f"**{caption}**\n\n$$ {body} $$" for caption, body in self.steps())

    def _repr_latex_(self) -> str:
        return f"$$\n{self.latex()}\n$$"

    def _repr_markdown_(self) -> str:
        return self.markdown()


# Characters LaTeX will not take inside \text{}: each is set in math mode between two
# \text{} pieces, which LaTeX and the notebooks' MathJax (without its textmacros
# package) both draw as the character itself.
_LATEX_TEXT_SPECIALS = {c: "\\" + c for c in "_{}%&#$"}
_LATEX_TEXT_SPECIALS.update({"\\": r"\backslash", "^": r"\hat{}", "~": r"\sim"})


_LATEX_NAME_SPECIALS = {c: "\\" + c for c in "_{}%&#$"}
_LATEX_NAME_SPECIALS.update({"\\": r"\backslash{}", "^": r"\hat{}", "~": r"\sim{}"})


def _latex_name(name: str) -> str:
    r"""A part name as LaTeX: ``r_bus_leak`` is r with subscript bus_leak, and a name
    is never read as sympy's name modifiers (``vcal`` would print as a calligraphic v).

    Examples
    --------
    >>> _latex_name("r_bus_leak")
    'r_{bus\\_leak}'
    >>> _latex_name("vcal")
    '\\mathrm{vcal}'
    >>> _latex_name("c")
    'c'
    """
    head, _, tail = name.partition("_")
    escape = lambda text: "".join(_LATEX_NAME_SPECIALS.get(c, c) for c in text)  # noqa: E731
    head = escape(head) if len(head) == 1 else rf"\mathrm{{{escape(head)}}}"
    return f"{head}_{{{escape(tail)}}}" if tail else head


def _latex_text(text: str) -> str:
    r"""`text` for use inside ``\text{...}``: part names such as ``c_hold`` carry underscores.

    Examples
    --------
    >>> _latex_text("capacitor c_hold (k1 closed)")
    'capacitor c}\\_\\text{hold (k1 closed)'
    """
    return "".join(
        "}" + _LATEX_TEXT_SPECIALS[c] + r"\text{" if c in _LATEX_TEXT_SPECIALS else c for c in text
    )


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


#: Derivations by network structure (parts, nodes, probes, configuration), not by
#: part values: a value sweep or a Bench edit reuses the symbolic work and only
#: swaps the numbers.  Bounded so that a long session does not grow without limit.
_CACHE: OrderedDict[tuple, Derivation] = OrderedDict()
_CACHE_SIZE = 256

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


def _structure_key(fixture: "Fixture", layout: Layout, states: tuple[bool, ...]) -> tuple:
    parts = tuple((p.kind, p.name, p.a, p.b) for p in fixture.parts)
    return (parts, tuple(fixture.probes), states, layout)


def derive(fixture: "Fixture", states: tuple[bool, ...]) -> Derivation:
    """Derive the first-order response of `fixture` in one switch configuration.

    Parameters
    ----------
    fixture : Fixture
    states : tuple of bool
        Closed (True) or open for each switch, in fixture order
        (:meth:`Fixture.switch_states` makes it from keywords).

    Returns
    -------
    Derivation
        Cached by network structure: deriving again, or deriving a copy made by
        :meth:`Fixture.with_values`, costs no sympy work.

    Examples
    --------
    >>> import firstorder as fo
    >>> d = fo.Fixture.rc(r="10k", c="100n").derivation()
    >>> d.tau
    c*r
    >>> d.final
    vin
    >>> d.zero_state
    vin*(1 - exp(-t/(c*r)))
    """
    layout, _ = fixture.configuration(states)
    switch_state = dict(zip((p.name for p in fixture.switches), states))
    key = _structure_key(fixture, layout, states)
    cached = _CACHE.get(key)
    if cached is None:
        cached = _derive(fixture, layout, states, switch_state)
        _CACHE[key] = cached
        while len(_CACHE) > _CACHE_SIZE:
            _CACHE.popitem(last=False)
    else:
        _CACHE.move_to_end(key)
    values = {}
    for part in fixture.parts:
        if part.kind == "switch":
            numeric = part.r_on if switch_state[part.name] else part.r_off
            if 0 < numeric < float("inf"):
                values[cached.symbols[part.name]] = numeric
        elif not part.is_source:
            values[cached.symbols[part.name]] = part.value
    return replace(cached, values=values)


def _derive(fixture: "Fixture", layout: Layout, states: tuple[bool, ...],
            switch_state: dict[str, bool]) -> Derivation:
    parts = fixture.parts
    symbols = {p.name: _symbol_for(p, switch_state) for p in parts}
    t = sp.Symbol("t", nonnegative=True)
    storage = fixture.storage
    letter = "v" if storage.kind == "capacitor" else "i"
    initial = sp.Symbol(f"{letter}_0", real=True)
    symbols["t"] = t
    symbols["initial"] = initial
    part_map = fixture.part_map
    sources = fixture.sources
    levels = [symbols[p.name] for p in sources]
    state_symbol = sp.Symbol(f"{letter}_{storage.name}", real=True)
    excitation = [state_symbol, *levels]
    nodal = _Nodal(layout, symbols, 1 + len(sources))

    if storage.kind == "capacitor":
        flow = nodal.branch_current(storage.name)  # capacitor current, a -> b
    else:
        flow = nodal.voltage(storage.a, storage.b)  # voltage across the inductor
    state_fn = sp.Function(f"{letter}_{storage.name}")(t)
    value = symbols[storage.name]
    # flow = flow[0] x + sum(flow[j] u_j).  The topology check decides holding: with
    # any resistive path, flow[0] is a sum of positive terms and cannot vanish.
    if layout.holds or flow[0] == 0:
        tau, final = sp.oo, initial
        resistance = sp.oo if storage.kind == "capacitor" else sp.Integer(0)
        equivalent = sp.nan
        drive_term = sum((flow[j] * levels[j - 1] for j in range(1, len(flow))), sp.Integer(0))
        ode = sp.Eq(sp.Derivative(state_fn, t), _tidy(drive_term / value), evaluate=False)
        zero_input, zero_state = initial, sp.Integer(0)
        natural, forced = sp.Integer(0), initial
    else:
        # Capacitor: i = (V_th - x) / R_th.  Inductor: v = R_N (I_N - x).
        # Either way flow[0] = -1/R_th or -R_N, and the equivalent is -sum(flow[j] u_j) / flow[0].
        if storage.kind == "capacitor":
            resistance = _tidy(1 / (-flow[0]))  # -(a + b) distributes; -1/(a + b) would not
            tau = _tidy(value * resistance)
        else:
            resistance = _tidy(-flow[0])
            tau = _tidy(value / resistance)
        equivalent = _tidy(sum((flow[j] / (-flow[0]) * levels[j - 1] for j in range(1, len(flow))),
                               sp.Integer(0)))
        final = equivalent
        decay = sp.exp(-t / tau)
        ode = sp.Eq(sp.Derivative(state_fn, t), (final - state_fn) / tau, evaluate=False)
        zero_input = initial * decay
        zero_state = final * (1 - decay)
        natural = (initial - final) * decay
        forced = final
    probes = {}
    for probe in fixture.probes:
        if probe.node is not None:
            row = nodal.voltage(probe.node, probe.reference)
        else:
            part = part_map[probe.through]
            row = [nodal.zero] * (1 + len(sources))
            if part.kind == "inductor":
                row[0] = sp.Integer(1)
            elif part.kind == "current_source":
                row[1 + [p.name for p in sources].index(part.name)] = sp.Integer(1)
            elif any(name == part.name for name, *_ in layout.voltage_branches):
                row = nodal.branch_current(part.name)
            elif part.name in nodal.g:
                row = nodal.conductance_current(part.name, part.a, part.b)
            # else: an open switch without leakage carries nothing.
        probes[probe.name] = _tidy(sum((_tidy(c) * e for c, e in zip(row, excitation)), sp.Integer(0)))
    return Derivation(
        kind=storage.kind,
        storage=storage.name,
        configuration=fixture.describe_states(states) or "no switches",
        state=state_fn,
        ode=ode,
        tau=tau,
        final=final,
        zero_input=zero_input,
        zero_state=zero_state,
        natural=natural,
        forced=forced,
        resistance=resistance,
        equivalent=equivalent,
        probes=probes,
        symbols=symbols,
    )

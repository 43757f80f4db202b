"""Symbolic derivations with sympy: the equivalent seen by the storage element,
the ODE, tau, and the response split into zero-input/zero-state and natural/forced.

The network is stamped exactly as the numeric path stamps it
(:func:`firstorder._network.stamp`), with sympy symbols for every resistance and
source level, and solved over the field of rational functions in those symbols
(sympy's ``DomainMatrix``), which is far quicker than generic symbolic
elimination and returns canceled expressions.  Results are cached per fixture
and configuration.  This module is imported only when a derivation is asked for.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import sympy as sp
from sympy.polys.matrices import DomainMatrix

from . import _network

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


def _name_tex(name: str) -> str:
    """A part or node name as typed: one letter italic, longer names upright, one subscript.

    sympy's own rule reads suffixes as accents and fonts ("vcal" becomes a
    calligraphic v, "vbar" a barred v) and splits digits off ("k1_on" becomes
    k with subscript "1 on"); a fixture's names are labels, not that notation.
    """
    def plain(text: str) -> str:
        return text if len(text) == 1 else rf"\mathrm{{{text}}}"

    head, _, tail = name.partition("_")
    return plain(head) + (f"_{{{plain(tail)}}}" if tail else "")


def _tex(expression) -> str:
    """LaTeX of `expression` with every symbol and function written by :func:`_name_tex`."""
    expression = sp.sympify(expression)
    names = {symbol: _name_tex(symbol.name) for symbol in expression.free_symbols if isinstance(symbol, sp.Symbol)}
    functions = {f.func: sp.Symbol(_name_tex(f.func.__name__)) for f in expression.atoms(sp.core.function.AppliedUndef)}
    text = sp.latex(expression, symbol_names=names)
    for function in functions:
        # an applied state function, such as v_ch(t), is written by name too
        text = text.replace(sp.latex(function(sp.Symbol("t"))).split(r"{\left(")[0], _name_tex(function.__name__))
    return text


@dataclass(frozen=True)
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

    def substitute(self, expression: sp.Expr) -> sp.Expr:
        """`expression` with the fixture's part values put in."""
        return expression.subs(self.values)

    def _law(self) -> str:
        x = _tex(self.state)
        storage = _tex(self.symbols[self.storage])
        if self.kind == "capacitor":
            return (
                rf"{storage}\,\frac{{d{x}}}{{dt}} = \frac{{V_{{th}} - {x}}}{{R_{{th}}}}"
                r"\quad\text{(KCL at the capacitor, Thevenin equivalent)}"
            )
        return (
            rf"{storage}\,\frac{{d{x}}}{{dt}} = R_{{N}}\left(I_{{N}} - {x}\right)"
            r"\quad\text{(KVL around the inductor, Norton equivalent)}"
        )

    def steps(self) -> list[tuple[str, str]]:
        """The derivation as (caption, LaTeX) pairs."""
        x = _tex(self.state)
        name = "th" if self.kind == "capacitor" else "N"
        equivalent = "V" if self.kind == "capacitor" else "I"
        rows = [
            (f"Equivalent seen by {self.kind} {self.storage} ({self.configuration})",
             rf"R_{{{name}}} = {_tex(self.resistance)},\quad {equivalent}_{{{name}}} = {_tex(self.equivalent)}"),
            ("Circuit law at the storage element", self._law()),
            ("The ODE", _tex(self.ode)),
            ("Time constant", rf"\tau = {_tex(self.tau)}"),
            ("Final value", rf"{_tex(self.state.subs(self.symbols['t'], sp.oo))} = {_tex(self.final)}"),
            ("Zero-input + zero-state",
             rf"{x} = {_tex(self.zero_input)} + \left({_tex(self.zero_state)}\right)"),
            ("Natural + forced",
             rf"{x} = {_tex(self.natural)} + \left({_tex(self.forced)}\right)"),
        ]
        for probe, expression in self.probes.items():
            rows.append((f"Probe {probe}", rf"{_tex(sp.Symbol(probe))} = {_tex(expression)}"))
        if self.values:
            numbers = ", ".join(
                rf"{_tex(s)} = {_tex(sp.Float(v, 4))}" for s, v in self.values.items()
            )
            tau_number = r"\infty" if self.holds else _tex(sp.Float(float(self.substitute(self.tau)), 4))
            rows.append(("With the part values", rf"{numbers},\quad \tau = {tau_number}"))
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


def _solve(layout: _network.Layout, fixture: "Fixture", conductance) -> sp.Matrix:
    sources = len(fixture.sources)
    A, B = _network.stamp(layout, conductance, sp.Integer(0), sp.Integer(1), 1 + sources)
    if not layout.size:
        return sp.zeros(0, 1 + sources)
    matrix = DomainMatrix.from_list_sympy(layout.size, layout.size, A)
    rhs = DomainMatrix.from_list_sympy(layout.size, 1 + sources, B)
    matrix, rhs = matrix.unify(rhs)
    matrix, rhs = matrix.to_field(), rhs.to_field()
    return matrix.lu_solve(rhs).to_Matrix()


_CACHE: dict[tuple, Derivation] = {}


def derive(fixture: "Fixture", states: tuple[bool, ...]) -> Derivation:
    """Derive the first-order response of `fixture` in one switch configuration.

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
    parts = fixture.parts
    key = (tuple(parts), tuple(fixture.probes), states)
    cached = _CACHE.get(key)
    if cached is not None:
        return cached
    switch_state = dict(zip((p.name for p in fixture.switches), states))
    symbols = {p.name: _symbol_for(p, switch_state) for p in parts}
    t = sp.Symbol("t", nonnegative=True)
    storage = fixture.storage
    initial = sp.Symbol(f"{'v' if storage.kind == 'capacitor' else 'i'}_0", real=True)
    symbols["t"] = t
    symbols["initial"] = initial
    part_map = fixture.part_map

    def conductance(name: str, key: str):
        return 1 / symbols[name]

    solution = _solve(layout, fixture, conductance)
    levels = [symbols[p.name] for p in fixture.sources]
    excitation = sp.Matrix([sp.Symbol("__x", real=True), *levels])

    def node(name: str) -> sp.Matrix:
        if name == _network.GROUND:
            return sp.zeros(1, solution.shape[1])
        return solution[layout.node_index[name], :]

    if storage.kind == "capacitor":
        flow = solution[layout.branch_row(storage.name), :]
    else:
        flow = node(storage.a) - node(storage.b)
    rate_state = sp.cancel(flow[0])
    drive_term = sp.cancel(sum((flow[1 + j] * u for j, u in enumerate(levels)), sp.Integer(0)))
    state_fn = sp.Function(f"{'v' if storage.kind == 'capacitor' else 'i'}_{storage.name}")(t)
    value = symbols[storage.name]
    if layout.holds or rate_state == 0:
        tau, final = sp.oo, initial
        resistance = sp.oo if storage.kind == "capacitor" else sp.Integer(0)
        equivalent = sp.nan
        ode = sp.Eq(sp.Derivative(state_fn, t), sp.cancel(drive_term / value))
        zero_input, zero_state = initial, sp.Integer(0)
        natural, forced = sp.Integer(0), initial
    else:
        resistance = sp.factor(-1 / rate_state if storage.kind == "capacitor" else -rate_state)
        equivalent = sp.factor(-drive_term / rate_state)
        tau = sp.factor(value * resistance if storage.kind == "capacitor" else value / resistance)
        final = equivalent
        decay = sp.exp(-t / tau)
        ode = sp.Eq(sp.Derivative(state_fn, t), (final - state_fn) / tau)
        zero_input = initial * decay
        zero_state = final * (1 - decay)
        natural = (initial - final) * decay
        forced = final
    probes = {}
    for probe in fixture.probes:
        if probe.node is not None:
            row = node(probe.node) - node(probe.reference)
        else:
            part = part_map[probe.through]
            if part.kind == "inductor":
                row = sp.Matrix([[1] + [0] * len(levels)])
            elif part.kind == "current_source":
                row = sp.Matrix([[0] * solution.shape[1]])
                row[1 + [p.name for p in fixture.sources].index(part.name)] = 1
            elif any(name == part.name for name, *_ in layout.voltage_branches):
                row = solution[layout.branch_row(part.name), :]
            elif any(name == part.name for name, *_ in layout.conductances):
                row = (node(part.a) - node(part.b)) * conductance(part.name, "")
            else:
                row = sp.zeros(1, solution.shape[1])
        state_symbol = sp.Symbol(f"{'v' if storage.kind == 'capacitor' else 'i'}_{storage.name}", real=True)
        probes[probe.name] = sp.factor(sp.cancel(sum(
            (row[i] * (state_symbol if i == 0 else excitation[i]) for i in range(row.shape[1])),
            sp.Integer(0))))
    values = {}
    for part in parts:
        if part.kind == "switch":
            numeric = part.r_on if switch_state[part.name] else part.r_off
            if 0 < numeric < float("inf"):
                values[symbols[part.name]] = numeric
        elif not part.is_source:
            values[symbols[part.name]] = part.value
    result = Derivation(
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
        values=values,
    )
    _CACHE[key] = result
    return result

"""Symbolic derivations with sympy: the equivalent seen by the storage element,
the ODE, tau, and the response split into zero-input/zero-state and natural/forced.

:func:`derive` takes one switch configuration from the same plan as the numeric
path, names every symbol once (:mod:`.names`), solves the supernode nodal
equations (:mod:`.nodal`) and builds a :class:`Derivation`; its text forms are
the steps of :mod:`.steps`.  Large networks keep the nested form of the
elimination, which is exact and quick (eight configurations of a 12-resistor
fixture in well under a second; see ``benchmarks/derive.py``).  Derivations are
cached by network structure, so a change of part values costs no sympy work.
This package is imported only when a derivation is asked for.
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING

import sympy as sp

from ..network import Layout
from .names import DerivationNames, derivation_names
from .nodal import _Nodal, _tidy
from .steps import aligned_latex, latex_steps, markdown_steps

if TYPE_CHECKING:
    from ..fixture import Fixture

__all__ = ["Derivation", "derive"]


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
    names : DerivationNames
        Every symbol of the derivation, and how each is written (:mod:`.names`).
    symbols : dict
        Part and source name, ``"t"``, ``"initial"`` and ``"state"`` to their
        sympy symbols (``names.symbols``); no two are the same symbol, whatever
        the parts are named (see :mod:`.names`).
    state : sympy.Expr
        The state as a function of ``t`` (``names.state_function``).
    values : dict
        Symbol to the fixture's part value (SI units), for :meth:`substitute`.
    """

    kind: str
    storage: str
    configuration: str
    names: DerivationNames
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
    values: dict[sp.Symbol, float] = field(default_factory=dict)

    @property
    def symbols(self) -> dict[str, sp.Symbol]:
        return self.names.symbols

    @property
    def state(self) -> sp.Expr:
        return self.names.state_function

    @property
    def holds(self) -> bool:
        return self.tau == sp.oo

    def __repr__(self) -> str:
        # The dataclass default would print every expression twice over; this is the summary.
        return (f"Derivation({self.kind} {self.storage}, {self.configuration}: tau = {self.tau}, "
                f"final = {self.final})")

    def substitute(self, expression: sp.Expr) -> sp.Expr:
        """`expression` with the fixture's part values put in.

        Each symbol is replaced where it stands (``xreplace``): ``subs`` would ask sympy's
        assumptions about every subexpression, seconds on a 12-switch fixture's tau.  The
        values go in as the exact rationals of their doubles, so terms that cancel cancel
        exactly, and the numbers come out as floats.

        Examples
        --------
        >>> import firstorder as fo
        >>> d = fo.Fixture.rc(r="10k", c="100n").derivation()
        >>> d.substitute(d.tau), d.substitute(d.zero_state)
        (0.00100000000000000, vin*(1 - exp(-1000.0*t)))
        """
        exact = expression.xreplace({symbol: sp.Rational(value) for symbol, value in self.values.items()})
        return exact.xreplace({number: sp.Float(number) for number in exact.atoms(sp.Rational) if not number.is_Integer})

    def sensitivity(self, part: str, of: str = "tau", levels: dict[str, float] | None = None):
        """The sensitivity coefficient of `of` (``"tau"`` or ``"final"``) to part `part`:
        the derivative with respect to its symbol, at the fixture's part values (JCGM 100, 5.1.3).

        Parameters
        ----------
        part : str
            A part's name; a switch's name is its resistance in this configuration (on or
            off), and ``"k1.r_on"`` / ``"k1.r_off"`` name one of them (0 where it is not the one in
            circuit).
        of : {"tau", "final"}
        levels : dict, optional
            Source name to level, to evaluate a final value's derivative to a number.

        Returns
        -------
        float, or a sympy expression in the source levels when `of` is ``"final"`` and
        `levels` is not given.

        Examples
        --------
        >>> import firstorder as fo
        >>> d = fo.Fixture.rc(r="10k", c="100n").derivation()
        >>> d.sensitivity("r")  # d(RC)/dR = C
        1e-07
        >>> d.sensitivity("c", of="final", levels={"vin": 5.0})
        0.0
        """
        from ..errors import InputError

        if of not in ("tau", "final"):
            raise InputError(f"sensitivity of: {of!r} is not allowed; give 'tau' or 'final'")
        names = [n for n in self.symbols if n not in ("t", "initial", "state")]
        name, _, field = part.partition(".") if isinstance(part, str) else ("", "", "")
        symbol = self.symbols.get(name) if name in names else None
        if symbol is None or field not in ("", "r_on", "r_off"):
            raise InputError(f"sensitivity part: {part!r} names no part of this derivation; parts are {names} "
                             f"(a switch also as 'name.r_on' or 'name.r_off')")
        if field and not symbol.name.rstrip("'").endswith(("_on", "_off")):
            raise InputError(f"sensitivity part: {part!r}: {name!r} is not a switch; give {name!r} alone")
        if field and not symbol.name.rstrip("'").endswith(field[1:]):
            return 0.0  # the switch's other resistance: not in circuit in this configuration
        expression = self.tau if of == "tau" else self.final
        if expression in (sp.oo, sp.zoo) or expression.has(sp.oo):
            return 0.0  # a held state: tau is infinite whatever the part
        derivative = self.substitute(sp.diff(expression, symbol))
        if levels:
            derivative = derivative.xreplace({self.symbols[n]: sp.Float(float(v)) for n, v in levels.items()
                                              if n in self.symbols})
        return float(derivative) if derivative.is_number else derivative

    def steps(self) -> list[tuple[str, str]]:
        """The derivation as (caption, LaTeX) pairs (see :func:`.steps.latex_steps`)."""
        return latex_steps(self)

    def latex(self) -> str:
        """The derivation as one LaTeX ``aligned`` block of steps."""
        return aligned_latex(self)

    def markdown(self) -> str:
        """The derivation as Markdown with display math, one step per paragraph."""
        return markdown_steps(self)

    def _repr_latex_(self) -> str:
        return f"$$\n{self.latex()}\n$$"

    def _repr_markdown_(self) -> str:
        return self.markdown()


#: Derivations by network structure (parts, nodes, probes, configuration), not by
#: part values: a value sweep or a Bench edit reuses the symbolic work and only
#: swaps the numbers.  Bounded so that a long session does not grow without limit.
_CACHE: OrderedDict[tuple, Derivation] = OrderedDict()
_CACHE_SIZE = 256


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
        cached = _derive(fixture, layout, states)
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


def _derive(fixture: "Fixture", layout: Layout, states: tuple[bool, ...]) -> Derivation:
    names = derivation_names(fixture.netlist, states)
    symbols = names.symbols
    t, initial = names.t, names.start
    storage = fixture.storage
    part_map = fixture.part_map
    sources = fixture.sources
    levels = [symbols[p.name] for p in sources]
    excitation = [names.state, *levels]
    nodal = _Nodal(layout, symbols, 1 + len(sources))

    if storage.kind == "capacitor":
        flow = nodal.branch_current(storage.name)  # capacitor current, a -> b
    else:
        flow = nodal.voltage(storage.a, storage.b)  # voltage across the inductor
    state_fn = names.state_function
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
        names=names,
    )

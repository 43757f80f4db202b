"""One symbol namespace per derivation, and how every name is written in LaTeX.

Every sympy symbol a derivation uses is made here, once, by
:func:`derivation_names`: a symbol per part and source, per switch (its
resistance in the configuration, ``k1_on`` or ``k1_off``), per probe, the state
(a value ``v_ch`` and a function ``v_ch(t)``), the start ``v_0``, the time ``t``,
and the quantities the steps name: ``tau`` and the Thevenin (``R_th``, ``V_th``)
or Norton (``R_N``, ``I_N``) equivalent.

Parts keep their names as typed.  Every other symbol is named apart from every
part, every probe and each other: a name already taken gets a prime (``v_0'``).
sympy symbols with the same name are the same symbol, so this is what keeps a
source named ``v_0`` from being the start, a source ``v_c`` from being the
state and a resistor ``k1_on`` from being switch k1's resistance, whatever the
names; and every printed form (text, LaTeX, MathML) tells them apart too.

:func:`latex_name` writes a name as the user typed it, never as sympy's name
conventions would read it (``vcal`` is not a calligraphic v); :func:`latex_text`
makes text safe inside ``\\text{}``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import sympy as sp

from ..errors import InputError

if TYPE_CHECKING:
    from ..netlist import Netlist

__all__ = ["DerivationNames", "derivation_names", "latex_name", "latex_text"]



@dataclass(frozen=True)
class DerivationNames:
    """Every symbol of one derivation (make it with :func:`derivation_names`).

    Attributes
    ----------
    symbols : dict of str to sympy.Symbol
        Part and source name to its symbol (a switch: its on or off resistance in
        this configuration), then ``"t"`` (the time), ``"initial"`` (the start)
        and ``"state"`` (the state as a value); this is
        :attr:`Derivation.symbols <firstorder.symbolic.Derivation.symbols>`.
        ``t`` and ``initial`` cannot name a part; a part named ``state`` keeps
        that key, and the state is then under ``"state'"``.
    probes : dict of str to sympy.Symbol
        Probe name to the symbol its step is written for.
    state : sympy.Symbol
        The state as a value (``v_ch``, ``i_l``): the probes are affine in it.
    state_function : sympy.Expr
        The state as a function of ``t`` (``v_ch(t)``), for the ODE and the response.
    time_constant, resistance, equivalent : sympy.Symbol
        ``tau`` and the equivalent the steps name first and use after:
        ``R_th`` and ``V_th`` for a capacitor, ``R_N`` and ``I_N`` for an inductor.
    """

    symbols: dict[str, sp.Symbol]
    probes: dict[str, sp.Symbol]
    state: sp.Symbol
    state_function: sp.Expr
    time_constant: sp.Symbol
    resistance: sp.Symbol
    equivalent: sp.Symbol

    @property
    def t(self) -> sp.Symbol:
        """The time since the change that started the configuration."""
        return self.symbols["t"]

    @property
    def start(self) -> sp.Symbol:
        """The state at that change (``v_0`` or ``i_0``)."""
        return self.symbols["initial"]

    def latex(self, symbol: sp.Symbol) -> str:
        r"""How `symbol` is written in LaTeX: ``\tau`` for the time constant, every
        other name as typed (:func:`latex_name`).

        Examples
        --------
        >>> import firstorder as fo
        >>> names = derivation_names(fo.Fixture.rc(r="10k", c="100n").netlist, ())
        >>> names.latex(names.time_constant), names.latex(names.start), names.latex(names.resistance)
        ('\\tau', 'v_{0}', 'R_{th}')
        """
        # Compared as symbols, not by name: a part typed "tau" is still written as typed.
        if symbol == self.time_constant:
            return r"\tau"
        return latex_name(symbol.name)


def derivation_names(netlist: "Netlist", states: tuple[bool, ...]) -> DerivationNames:
    """Make every symbol of the derivation of `netlist` in one switch configuration.

    Parameters
    ----------
    netlist : Netlist
        The fixture's parts and probes (``Fixture.netlist``); it must hold its
        capacitor or inductor.
    states : tuple of bool
        Closed (True) or open for each switch, in netlist order.

    Returns
    -------
    DerivationNames
        Parts and sources named as typed, then probes (a prime added where a
        part has the name); every symbol made here is named apart from all of
        those and from each other in the same way.

    Raises
    ------
    InputError
        When `states` does not give one state per switch.

    Examples
    --------
    >>> import firstorder as fo
    >>> fx = fo.Fixture()
    >>> _ = fx.voltage_source("vdac", "dac", "gnd")
    >>> _ = fx.switch("k1", "dac", "h", r_on="2")
    >>> _ = fx.capacitor("ch", "h", "gnd", "10n")
    >>> _ = fx.resistor("r_leak", "h", "gnd", "100M")
    >>> names = derivation_names(fx.netlist, (True,))
    >>> names.symbols
    {'vdac': vdac, 'k1': k1_on, 'ch': ch, 'r_leak': r_leak, 't': t, 'initial': v_0, 'state': v_ch}
    >>> names.state_function, names.resistance, names.equivalent
    (v_ch(t), R_th, V_th)

    A source named like the start is another symbol, and the start is named apart:

    >>> _ = fx.voltage_source("v_0", "ref", "gnd").resistor("r_ref", "ref", "h", "1M")
    >>> names = derivation_names(fx.netlist, (True,))
    >>> names.symbols["v_0"], names.start, names.symbols["v_0"] == names.start
    (v_0, v_0', False)

    See Also
    --------
    latex_name : how each of these names is written in LaTeX.
    """
    switches = netlist.switches
    if len(states) != len(switches):
        raise InputError(f"switch states: {len(states)} given for {len(switches)} switches "
                         f"{[p.name for p in switches]}; give one state per switch")
    closed = dict(zip((p.name for p in switches), states))
    # What the user typed is written as typed; every name made here yields to it.
    taken = {part.name for part in netlist.parts}

    def reserved(preferred: str, **assumptions: bool) -> sp.Symbol:
        name = preferred
        while name in taken:
            name += "'"
        taken.add(name)
        return sp.Symbol(name, **assumptions)

    probes = {probe.name: reserved(probe.name) for probe in netlist.probes}
    symbols: dict[str, sp.Symbol] = {}
    for part in netlist.parts:
        if part.kind == "switch":
            symbols[part.name] = reserved(f"{part.name}_{'on' if closed[part.name] else 'off'}", positive=True)
        elif part.is_source:
            symbols[part.name] = sp.Symbol(part.name, real=True)  # a level may be negative
        else:
            symbols[part.name] = sp.Symbol(part.name, positive=True)
    storage = netlist.storage
    letter = "v" if storage.kind == "capacitor" else "i"
    t = reserved("t", nonnegative=True)
    start = reserved(f"{letter}_0", real=True)
    state = reserved(f"{letter}_{storage.name}", real=True)
    # Keys beside the part names: "t" and "initial" cannot name a part (netlist.RESERVED_NAMES).
    for key, symbol in (("t", t), ("initial", start), ("state", state)):
        while key in symbols:
            key += "'"
        symbols[key] = symbol
    resistance, equivalent = ("R_th", "V_th") if storage.kind == "capacitor" else ("R_N", "I_N")
    return DerivationNames(
        symbols=symbols,
        probes=probes,
        state=state,
        state_function=sp.Function(state.name)(t),
        time_constant=reserved("tau", positive=True),
        resistance=reserved(resistance),
        equivalent=reserved(equivalent),
    )


# Characters LaTeX will not take as they stand, in a name (math mode) and in \text{}.
_LATEX_NAME_SPECIALS = {c: "\\" + c for c in "_{}%&#$"}
_LATEX_NAME_SPECIALS.update({"\\": r"\backslash{}", "^": r"\hat{}", "~": r"\sim{}"})
# Inside \text{} each is set in math mode between two \text{} pieces, which LaTeX and
# the notebooks' MathJax (without its textmacros package) both draw as the character.
_LATEX_TEXT_SPECIALS = {c: "\\" + c for c in "_{}%&#$"}
_LATEX_TEXT_SPECIALS.update({"\\": r"\backslash", "^": r"\hat{}", "~": r"\sim"})


def _escape_name(text: str) -> str:
    return "".join(_LATEX_NAME_SPECIALS.get(c, c) for c in text)


def latex_name(name: str) -> str:
    r"""A name as LaTeX, as the user typed it.

    The part before the first underscore is the base (upright when it is longer
    than one letter), the rest its subscript: ``r_bus_leak`` is r with subscript
    bus_leak.  A name is never read as sympy's name modifiers (sympy would print
    ``vcal`` as a calligraphic v and ``rbar`` as r with a bar).

    Parameters
    ----------
    name : str
        A part, source, probe or state name (``"k1_on"``, ``"v_ch"``).

    Returns
    -------
    str

    Examples
    --------
    >>> latex_name("r_bus_leak")
    'r_{bus\\_leak}'
    >>> latex_name("vcal")
    '\\mathrm{vcal}'
    >>> latex_name("c")
    'c'
    >>> latex_name("v_0'")
    "v_{0}'"

    See Also
    --------
    latex_text : text (a caption) for ``\text{}``.
    DerivationNames.latex : a derivation's symbol, with ``\tau`` for its time constant.
    """
    # Trailing primes (a derivation's own names yield to part names with one: v_0') are set
    # after the subscript, as primes are written by hand.
    body = name.rstrip("'") or name
    primes = "'" * (len(name) - len(body))
    head, underscore, tail = body.partition("_")
    head = _escape_name(head) if len(head) == 1 else rf"\mathrm{{{_escape_name(head)}}}"
    if tail:
        return f"{head}_{{{_escape_name(tail)}}}{primes}"
    # A name ending in its only underscore ("a_") is not the name without it ("a").
    return (head if not underscore else rf"\mathrm{{{_escape_name(body)}}}") + primes


def latex_text(text: str) -> str:
    r"""`text` for use inside ``\text{...}``: part names such as ``c_hold`` carry underscores.

    Parameters
    ----------
    text : str
        A caption, perhaps holding part names.

    Returns
    -------
    str
        To be set as ``\text{<result>}``: each character LaTeX refuses in text
        closes the ``\text{}``, is set in math mode and opens a new one.

    Examples
    --------
    >>> latex_text("capacitor c_hold (k1 closed)")
    'capacitor c}\\_\\text{hold (k1 closed)'

    See Also
    --------
    latex_name : a name in math mode.
    """
    return "".join(
        "}" + _LATEX_TEXT_SPECIALS[c] + r"\text{" if c in _LATEX_TEXT_SPECIALS else c for c in text
    )

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

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import sympy as sp

from ..errors import InputError

if TYPE_CHECKING:
    from ..netlist import Netlist

__all__ = ["DerivationNames", "derivation_names", "latex_name", "latex_text", "name_parts"]



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
    written : dict of sympy.Symbol to str
        Symbols written otherwise than their name: a switch's resistance ``k1_on`` is
        written ``R_k1,on`` (R with subscript "k1,on"), named apart from the parts
        like every other made name.
    units : dict of sympy.Symbol to str
        The unit of each part's symbol (Ω, F, H), for the part values.
    """

    symbols: dict[str, sp.Symbol]
    probes: dict[str, sp.Symbol]
    state: sp.Symbol
    state_function: sp.Expr
    time_constant: sp.Symbol
    resistance: sp.Symbol
    equivalent: sp.Symbol
    written: dict[sp.Symbol, str] = field(default_factory=dict)
    units: dict[sp.Symbol, str] = field(default_factory=dict)

    @property
    def t(self) -> sp.Symbol:
        """The time since the change that started the configuration."""
        return self.symbols["t"]

    @property
    def start(self) -> sp.Symbol:
        """The state at that change (``v_0`` or ``i_0``)."""
        return self.symbols["initial"]

    def name_of(self, symbol: sp.Symbol) -> str:
        """The name `symbol` is written with (``R_k1,on`` for switch k1's resistance),
        before :func:`name_parts` splits it; the time constant is ``tau``.

        Examples
        --------
        >>> import firstorder as fo
        >>> fx = fo.Fixture().voltage_source("v", "a", "gnd").switch("k_hold", "a", "b", r_on="1")
        >>> names = derivation_names(fx.capacitor("c", "b", "gnd", "1n").netlist, (True,))
        >>> names.symbols["k_hold"], names.name_of(names.symbols["k_hold"]), names.latex(names.symbols["k_hold"])
        (k_hold_on, 'R_k_hold,on', 'R_{\\\\mathrm{k\\\\_hold,on}}')
        """
        return self.written.get(symbol, symbol.name)

    def latex(self, symbol: sp.Symbol) -> str:
        r"""How `symbol` is written in LaTeX: ``\tau`` for the time constant, a switch's
        resistance as ``R_{k1,on}``, every other name as typed (:func:`latex_name`).

        Examples
        --------
        >>> import firstorder as fo
        >>> names = derivation_names(fo.Fixture.rc(r="10k", c="100n").netlist, ())
        >>> names.latex(names.time_constant), names.latex(names.start), names.latex(names.resistance)
        ('\\tau', 'v_{0}', 'R_{\\mathrm{th}}')
        """
        # Compared as symbols, not by name: a part typed "tau" is still written as typed.
        if symbol == self.time_constant:
            return r"\tau"
        return latex_name(self.name_of(symbol))


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
    written: dict[sp.Symbol, str] = {}
    units: dict[sp.Symbol, str] = {}
    for part in netlist.parts:
        if part.kind == "switch":
            state = "on" if closed[part.name] else "off"
            symbol = symbols[part.name] = reserved(f"{part.name}_{state}", positive=True)
            # Written R_{k1,on}: a resistance, named for its switch (apart from any part's name).
            written[symbol] = reserved(f"R_{part.name},{state}").name
            units[symbol] = "Ω"
        elif part.is_source:
            symbols[part.name] = sp.Symbol(part.name, real=True)  # a level may be negative
        else:
            symbols[part.name] = sp.Symbol(part.name, positive=True)
            units[symbols[part.name]] = _PART_UNITS.get(part.kind, "")
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
        written=written,
        units=units,
    )


_PART_UNITS = {"resistor": "Ω", "capacitor": "F", "inductor": "H"}


# Characters LaTeX will not take as they stand, in a name (math mode) and in \text{}.
_LATEX_NAME_SPECIALS = {c: "\\" + c for c in "_{}%&#$"}
_LATEX_NAME_SPECIALS.update({"\\": r"\backslash{}", "^": r"\hat{}", "~": r"\sim{}"})
# Inside \text{} each is set in math mode between two \text{} pieces, which LaTeX and
# the notebooks' MathJax (without its textmacros package) both draw as the character.
_LATEX_TEXT_SPECIALS = {c: "\\" + c for c in "_{}%&#$"}
_LATEX_TEXT_SPECIALS.update({"\\": r"\backslash", "^": r"\hat{}", "~": r"\sim"})


def _escape_name(text: str) -> str:
    return "".join(_LATEX_NAME_SPECIALS.get(c, c) for c in text)


def name_parts(name: str) -> tuple[str, str, str]:
    """`name` split the way it is written: (base, subscript, primes).

    The one split every printer uses (LaTeX here, MathML in the report): the part
    before the first underscore is the base, the rest (underscores kept) the
    subscript, and trailing primes are set after the subscript, as by hand.

    Examples
    --------
    >>> name_parts("r_bus_leak"), name_parts("v_0'"), name_parts("vdac"), name_parts("a_")
    (('r', 'bus_leak', ''), ('v', '0', "'"), ('vdac', '', ''), ('a_', '', ''))
    """
    body = name.rstrip("'") or name
    primes = "'" * (len(name) - len(body))
    head, _, tail = body.partition("_")
    if not tail:
        # A name ending in its only underscore ("a_") is not the name without it ("a").
        return body, "", primes
    return head, tail, primes


def latex_name(name: str) -> str:
    r"""A name as LaTeX, as the user typed it.

    The part before the first underscore is the base, the rest its subscript
    (:func:`name_parts`): ``r_bus_leak`` is r with subscript bus_leak.  A base or
    subscript longer than one letter is upright (it is a word, not a product of
    letters), as the report's MathML sets it.  A name is never read as sympy's
    name modifiers (sympy would print ``vcal`` as a calligraphic v and ``rbar``
    as r with a bar).

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
    'r_{\\mathrm{bus\\_leak}}'
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
    head, tail, primes = name_parts(name)
    text = _upright(head)
    if tail:
        text += f"_{{{_upright(tail)}}}"
    return text + primes


def _upright(text: str) -> str:
    return _escape_name(text) if len(text) == 1 else rf"\mathrm{{{_escape_name(text)}}}"


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

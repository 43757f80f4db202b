"""Sympy expressions as MathML presentation markup, names escaped (for the HTML report).

Browsers draw MathML without any script.  Everything the user typed (part and
probe names) is escaped before it reaches the page: sympy's printer writes
symbol names as they are, so every name is replaced by an escaped one first, and
the printer's output is checked to hold presentation markup only.
"""

from __future__ import annotations

import functools
from html import escape
from html.parser import HTMLParser
from typing import Any

__all__ = ["derivation_steps", "mathml"]

_MATHML_TAGS = frozenset({
    "math", "mrow", "mi", "mn", "mo", "ms", "mtext", "mspace", "msub", "msup", "msubsup",
    "mfrac", "msqrt", "mroot", "mfenced", "mstyle", "mtable", "mtr", "mtd", "mover",
    "munder", "munderover", "mpadded", "mphantom", "menclose",
})
_MATHML_ATTRIBUTES = frozenset({
    "mathvariant", "open", "close", "separators", "linethickness", "stretchy", "fence",
    "separator", "lspace", "rspace", "columnalign", "displaystyle", "scriptlevel", "accent",
    "accentunder", "notation", "width", "xmlns", "display",
})


class _MathMLCheck(HTMLParser):
    """Accepts only MathML presentation tags and harmless attributes."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.clean = True

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag not in _MATHML_TAGS or any(name not in _MATHML_ATTRIBUTES for name, _ in attrs):
            self.clean = False

    def handle_endtag(self, tag: str) -> None:
        if tag not in _MATHML_TAGS:
            self.clean = False

    def handle_comment(self, data: str) -> None:
        self.clean = False

    def handle_pi(self, data: str) -> None:
        self.clean = False

    def handle_decl(self, decl: str) -> None:
        self.clean = False


def _escaped_names(expression: Any) -> Any:
    """`expression` with every symbol and function name HTML-escaped.

    sympy's MathML printer writes names as raw text, and names come from the
    user (a part named ``<script>`` must stay text).
    """
    import sympy as sp
    from sympy.core.function import AppliedUndef

    mapping = {}
    for function in expression.atoms(AppliedUndef):
        name = function.func.__name__
        if escape(name, quote=False) != name:
            mapping[function] = sp.Function(escape(name, quote=False))(*function.args)
    for symbol in expression.atoms(sp.Symbol):
        if escape(symbol.name, quote=False) != symbol.name:
            mapping[symbol] = sp.Symbol(escape(symbol.name, quote=False), **symbol.assumptions0)
    return expression.xreplace(mapping) if mapping else expression


def _exponentials_as_powers(expression: Any) -> Any:
    """Every ``exp(a)`` of `expression` as a power of e that stays where it stands.

    sympy's MathML printer moves a factor ``exp(-t/tau)`` under a fraction bar
    as ``1 / e^(t/tau)``; engineers write ``e^(-t/tau)``.
    """
    import sympy as sp

    power = _power_of_e()
    return expression.replace(sp.exp, lambda argument: power(argument))


@functools.cache
def _power_of_e():
    """A sympy function printed as e to its argument (built on first use: sympy loads lazily)."""
    import sympy as sp

    class PowerOfE(sp.Function):
        def _mathml_presentation(self, printer):
            element = printer.dom.createElement("msup")
            base = printer.dom.createElement("mi")
            base.appendChild(printer.dom.createTextNode("e"))
            element.appendChild(base)
            element.appendChild(printer._print(self.args[0]))
            return element

    return PowerOfE


def mathml(expression: Any) -> str:
    """`expression` (sympy) as a block ``<math>`` element, names escaped.

    Falls back to escaped LaTeX in ``<code>`` if the printer's output holds
    anything but MathML presentation markup.

    Examples
    --------
    >>> import sympy as sp
    >>> mathml(sp.Symbol("r") * sp.Symbol("c"))
    '<math xmlns="http://www.w3.org/1998/Math/MathML" display="block"><mrow><mi>c</mi><mo>&#xB7;</mo><mi>r</mi></mrow></math>'
    >>> "<script" in mathml(sp.Symbol("<script>x"))
    False
    """
    import sympy as sp
    from sympy.printing.mathml import mathml as print_mathml

    # A visible dot between factors: names of several letters ("rm", "vdac") run together otherwise.
    # order="none": sums print in the order they were built (derivation steps write them
    # as an engineer would); evaluated sums are in sympy's canonical order either way.
    body = print_mathml(_exponentials_as_powers(_escaped_names(expression)), printer="presentation",
                        mul_symbol="dot", order="none")
    check = _MathMLCheck()
    check.feed(body)
    check.close()
    if not check.clean:
        return f"<code>{escape(sp.latex(expression))}</code>"
    return f'<math xmlns="http://www.w3.org/1998/Math/MathML" display="block">{body}</math>'


def derivation_steps(derivation: Any) -> list[tuple[str, list[Any]]]:
    """The derivation as (caption, [sympy equations]) steps, for MathML."""
    import sympy as sp

    d = derivation
    x = d.state
    t = d.symbols["t"]
    equal = lambda left, right: sp.Eq(left, right, evaluate=False)  # noqa: E731 - keep both sides as written
    steps: list[tuple[str, list[Any]]] = []
    storage = d.symbols[d.storage]
    if not d.holds:
        if d.kind == "capacitor":
            resistance, equivalent = sp.Symbol("R_th"), sp.Symbol("V_th")
            law = equal(storage * sp.Derivative(x, t), (equivalent - x) / resistance)
            law_caption = "Circuit law: KCL at the capacitor, with the Thevenin equivalent"
        else:
            resistance, equivalent = sp.Symbol("R_N"), sp.Symbol("I_N")
            law = equal(storage * sp.Derivative(x, t), resistance * (equivalent - x))
            law_caption = "Circuit law: KVL around the inductor, with the Norton equivalent"
        steps.append((f"Equivalent seen by the {d.kind} ({d.configuration})",
                      [equal(resistance, d.resistance), equal(equivalent, d.equivalent)]))
        steps.append((law_caption, [law]))
    else:
        steps.append((f"No resistive path for the {d.kind} ({d.configuration}): the state holds", []))
    tau = sp.Symbol("tau")
    if d.holds:
        steps.append(("The ODE", [d.ode]))
        steps.append(("Time constant", [equal(tau, d.tau)]))
        steps.append(("Final value", [equal(x.subs(t, sp.oo), d.final)]))
        steps.append(("Zero-input + zero-state", [equal(x, sp.Add(d.zero_input, d.zero_state, evaluate=False))]))
        steps.append(("Natural + forced", [equal(x, sp.Add(d.natural, d.forced, evaluate=False))]))
    else:
        # In the names of the first step, as Derivation.steps writes them (its attributes keep
        # the full expressions, which nest fractions inside exponents for a real fixture).
        # A power of e from the start (not exp, which the printing step would rebuild, and
        # with it the sums below, in sympy's own order): the terms stay as written.
        start, decay = d.symbols["initial"], _power_of_e()(-t / tau)
        if d.kind == "capacitor":
            ode = equal(sp.Derivative(x, t), (equivalent - x) / sp.Mul(storage, resistance, evaluate=False))
            tau_rule = sp.Mul(storage, resistance, evaluate=False)
        else:
            ode = equal(sp.Derivative(x, t), resistance * (equivalent - x) / storage)
            tau_rule = storage / resistance
        steps.append(("The ODE", [ode]))
        steps.append(("Time constant", [equal(tau, tau_rule), equal(tau, d.tau)]))
        steps.append(("Final value", [equal(x.subs(t, sp.oo), equivalent)]))
        steps.append(("Zero-input + zero-state",
                      [equal(x, sp.Add(start * decay, equivalent * (1 - decay), evaluate=False))]))
        steps.append(("Natural + forced",
                      [equal(x, sp.Add(sp.Mul(sp.Add(start, -equivalent, evaluate=False), decay, evaluate=False),
                                       equivalent, evaluate=False))]))
    for probe, expression in d.probes.items():
        steps.append((f"Probe {probe}", [equal(sp.Symbol(probe), expression)]))
    if d.values:
        numbers = [equal(symbol, sp.Float(value, 4)) for symbol, value in d.values.items()]
        tau_value = sp.oo if d.holds else sp.Float(float(d.substitute(d.tau)), 4)
        numbers.append(equal(sp.Symbol("tau"), tau_value))
        steps.append(("With the part values (SI units)", numbers))
    return steps

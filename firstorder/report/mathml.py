"""Sympy expressions as MathML presentation markup, names escaped (for the HTML report).

Browsers draw MathML without any script.  Everything the user typed (part and
probe names) is escaped before it reaches the page: sympy's printer writes
text raw, so the printer here writes every name itself, escaped, split as the
LaTeX of the steps splits it, and its output is checked to hold presentation
markup only.  The
derivation's steps themselves are written once, in
:func:`firstorder.symbolic.steps.derivation_steps`.
"""

from __future__ import annotations

from html import escape
from html.parser import HTMLParser
from typing import Any

__all__ = ["mathml"]

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


def _printer(names: Any = None):
    """A MathML printer that writes names as the steps' LaTeX does (one writing of each name)."""
    import sympy as sp
    from sympy.core.function import AppliedUndef
    from sympy.printing.mathml import MathMLPresentationPrinter

    from ..symbolic.names import name_parts
    from ..symbolic.steps import PartValue, PowerOfE

    class _StepMathMLPrinter(MathMLPresentationPrinter):
        """sympy's presentation printer with names as typed and escaped, the state as a
        function, d/dt as a fraction with an upright d, and a dot between factors."""

        def _node(self, tag: str, *children: Any, text: str | None = None, **attributes: str):
            node = self.dom.createElement(tag)
            if text is not None:
                node.appendChild(self.dom.createTextNode(text))
            for child in children:
                node.appendChild(child)
            for key, value in attributes.items():
                node.setAttribute(key, value)
            return node

        def _name(self, written: str):
            # sympy's own printer splits "k_hold_on" into k with subscripts "hold on" and
            # writes text raw; here the name is split once (name_parts) and escaped.
            head, tail, primes = name_parts(written)
            node = self._node("mi", text=escape(head, quote=False))
            if tail:
                node = self._node("msub", node, self._node("mi", text=escape(tail, quote=False)))
            if primes:
                node = self._node("mrow", node, self._node("mo", text="′" * len(primes)))
            return node

        def _print_Symbol(self, sym: Any, style: str = "plain"):
            if names is not None and sym == names.time_constant:
                return self._node("mi", text="τ")
            return self._name(names.name_of(sym) if names is not None else sym.name)

        def _print_AppliedUndef(self, expr: Any):
            return self._node("mrow", self._name(expr.func.__name__), self._paren_comma_separated(*expr.args))

        def _print_Derivative(self, expr: Any):
            # dv/dt with an upright d, as by hand (sympy writes a double-struck ⅆ).
            if isinstance(expr.expr, AppliedUndef) and len(expr.variable_count) == 1 and expr.variable_count[0][1] == 1:
                d = {"mathvariant": "normal"}
                top = self._node("mrow", self._node("mi", text="d", **d), self._name(expr.expr.func.__name__))
                bottom = self._node("mrow", self._node("mi", text="d", **d), self._print(expr.variable_count[0][0]))
                return self._node("mfrac", top, bottom)
            return super()._print_Derivative(expr)

        def parenthesize(self, item: Any, level: int, strict: bool = False):
            # A fraction dv/dt, a power of e and a part value need no brackets around them.
            if isinstance(item, (sp.Derivative, PowerOfE, PartValue)):
                return self._print(item)
            return super().parenthesize(item, level, strict)

    # A visible dot between factors: names of several letters ("rm", "vdac") run together otherwise.
    # order="none": sums print in the order they were built (derivation steps write them
    # as an engineer would); evaluated sums are in sympy's canonical order either way.
    return _StepMathMLPrinter({"mul_symbol": "dot", "order": "none"})


def _exponentials_as_powers(expression: Any) -> Any:
    """Every ``exp(a)`` of `expression` as a power of e that stays where it stands.

    sympy's MathML printer moves a factor ``exp(-t/tau)`` under a fraction bar
    as ``1 / e^(t/tau)``; engineers write ``e^(-t/tau)``.
    """
    import sympy as sp

    from ..symbolic.steps import PowerOfE

    return expression.replace(sp.exp, lambda argument: PowerOfE(argument))


def _body(expression: Any, names: Any = None) -> str:
    body = _printer(names).doprint(_exponentials_as_powers(expression))
    # A minus sign, not a hyphen: sympy writes "-", which reads as a dash between names.
    return body.replace("<mo>-</mo>", "<mo>&#x2212;</mo>")


def mathml(expression: Any, names: Any = None) -> str:
    """`expression` (sympy) as a block ``<math>`` element, names escaped.

    Names are written as the steps' LaTeX writes them (:func:`~firstorder.symbolic.names.name_parts`:
    ``r_bus_leak`` is r with subscript bus_leak; with a derivation's `names`, ``tau``
    is τ and a switch's resistance ``R_{k1,on}``).  Falls back to escaped LaTeX in
    ``<code>`` if the printer's output holds anything but MathML presentation markup.

    Examples
    --------
    >>> import sympy as sp
    >>> mathml(sp.Symbol("r") * sp.Symbol("c_hold"))
    '<math xmlns="http://www.w3.org/1998/Math/MathML" display="block"><mrow><msub><mi>c</mi><mi>hold</mi></msub><mo>&#xB7;</mo><mi>r</mi></mrow></math>'
    >>> "<script" in mathml(sp.Symbol("<script>x"))
    False
    """
    import sympy as sp

    body = _body(expression, names)
    check = _MathMLCheck()
    check.feed(body)
    check.close()
    if not check.clean:
        return f"<code>{escape(sp.latex(expression))}</code>"
    return f'<math xmlns="http://www.w3.org/1998/Math/MathML" display="block">{body}</math>'

"""Sympy expressions as MathML presentation markup, names escaped (for the HTML report).

Browsers draw MathML without any script.  Everything the user typed (part and
probe names) is escaped before it reaches the page: sympy's printer writes
symbol names as they are, so every name is replaced by an escaped one first, and
the printer's output is checked to hold presentation markup only.  The
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

    from ..symbolic.steps import PowerOfE

    return expression.replace(sp.exp, lambda argument: PowerOfE(argument))


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

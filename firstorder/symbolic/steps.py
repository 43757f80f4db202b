r"""A derivation's steps, written once as sympy equations, and printed as LaTeX.

:func:`derivation_steps` writes the steps of a derivation the way an engineer
writes them: the Thevenin (``R_th``, ``V_th``) or Norton (``R_N``, ``I_N``)
equivalent named in the first step and used after, ``tau`` named once, the
decay as a power of e (:class:`PowerOfE`), then the probes and the part values.
Every front end prints these same steps: :func:`latex_steps`,
:func:`aligned_latex` and :func:`markdown_steps` here (what
:meth:`Derivation.steps <firstorder.symbolic.Derivation.steps>`, ``.latex()``
and ``.markdown()`` return), and the HTML report as MathML
(:func:`firstorder.report.mathml.mathml`).

:func:`to_latex` is the printer: sympy's LaTeX printer with every name written
as typed (:func:`~firstorder.symbolic.names.latex_name`; a switch's resistance as
``R_{\mathrm{k1,on}}``), the state as ``v_{\mathrm{ch}}{\left(t \right)}``, a
first derivative as ``\frac{\mathrm{d} v_{\mathrm{ch}}}{\mathrm{d}t}`` (an upright d, as in the MathML), the decay as ``e^{-t/\tau}``,
sums in the order the steps build them, a centred dot between factors
(``\mathrm{rbar} \cdot \mathrm{vcal}``: names of several letters would run
together as one word), and part values in engineering notation with their unit
(:class:`PartValue`).

This module reads the attributes of the derivation it is given and imports no
module above it: :mod:`.derivation` imports it.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, NamedTuple

import sympy as sp
from sympy.core.function import AppliedUndef
from sympy.printing.latex import LatexPrinter
from sympy.printing.precedence import PRECEDENCE

from ..units import format_value
from .names import DerivationNames, latex_name, latex_text

if TYPE_CHECKING:
    from .derivation import Derivation

__all__ = ["PartValue", "PowerOfE", "Step", "aligned_latex", "derivation_steps", "latex_steps", "markdown_steps", "markdown_text",
           "step_latex", "to_latex"]


class PowerOfE(sp.Function):
    r"""e to the power of its argument, printed as a power that stays where it stands.

    sympy prints a factor ``exp(-t/tau)`` as ``e^{- \frac{t}{\tau}}`` in LaTeX
    and moves it under the fraction bar as ``1 / e^(t/tau)`` in MathML, and an
    evaluated ``exp`` reorders the sums around it; engineers write ``e^(-t/tau)``.

    Examples
    --------
    >>> t, time_constant = sp.symbols("t T", positive=True)
    >>> to_latex(PowerOfE(-t / time_constant))
    'e^{-t/T}'
    """

    def _latex(self, printer: LatexPrinter) -> str:
        exponent = self.args[0]
        numerator, denominator = sp.fraction(exponent)
        if denominator == 1:
            return f"e^{{{printer._print(exponent)}}}"
        sign = ""
        if numerator.could_extract_minus_sign():
            sign, numerator = "-", -numerator
        # A folded fraction: t/\tau reads better in an exponent than a stacked one.
        top = printer.parenthesize(numerator, PRECEDENCE["Mul"], strict=True)
        bottom = printer.parenthesize(denominator, PRECEDENCE["Mul"])
        return f"e^{{{sign}{top}/{bottom}}}"

    def _mathml_presentation(self, printer):
        # As in LaTeX: a folded t/tau, not a stacked fraction too small to read in an exponent.
        dom = printer.dom

        def node(tag, *children, text=None):
            element = dom.createElement(tag)
            if text is not None:
                element.appendChild(dom.createTextNode(text))
            for child in children:
                element.appendChild(child)
            return element

        exponent = self.args[0]
        numerator, denominator = sp.fraction(exponent)
        if denominator == 1:
            power = printer._print(exponent)
        else:
            parts = []
            if numerator.could_extract_minus_sign():
                parts.append(node("mo", text="-"))
                numerator = -numerator
            slash = node("mo", text="/")
            slash.setAttribute("lspace", "0")  # t/τ set close, as in the LaTeX
            slash.setAttribute("rspace", "0")
            parts += [printer.parenthesize(numerator, PRECEDENCE["Mul"], strict=True), slash,
                      printer.parenthesize(denominator, PRECEDENCE["Mul"])]
            power = node("mrow", *parts)
        return node("msup", node("mi", text="e"), power)


class PartValue(sp.Expr):
    r"""A part value as a reader writes it: engineering notation with its unit (``4.99 kΩ``).

    sympy writes the float 4990.0 as ``4990.0`` and 1e7 as ``1.0 \cdot 10^{7}``; a
    part value reads ``4.99\ \mathrm{k\Omega}``.  ``float()`` gives the value back.

    Examples
    --------
    >>> value = PartValue(4990.0, "Ω")
    >>> to_latex(value), str(value), float(value)
    ('4.99\\ \\mathrm{k\\Omega}', '4.99 kΩ', 4990.0)
    """

    is_number = True
    is_real = True

    def __new__(cls, value: float, unit: str = "") -> "PartValue":
        return sp.Expr.__new__(cls, sp.Float(value), sp.Symbol(unit or "1"))

    @property
    def value(self) -> float:
        return float(self.args[0])

    @property
    def unit(self) -> str:
        unit = self.args[1].name
        return "" if unit == "1" else unit

    @property
    def text(self) -> str:
        """The value as :func:`~firstorder.units.format_value` writes it."""
        return format_value(self.value, self.unit)

    def __float__(self) -> float:
        return self.value

    def _eval_evalf(self, prec):
        return self.args[0]._eval_evalf(prec)

    def _sympystr(self, printer) -> str:
        return self.text

    def _latex(self, printer) -> str:
        number, _, unit = self.text.partition(" ")
        number = r"\infty" if number == "inf" else number
        if not unit:
            return number
        return rf"{number}\ \mathrm{{{''.join(_LATEX_UNIT_SIGNS.get(c, c) for c in unit)}}}"

    def _mathml_presentation(self, printer):
        number, _, unit = self.text.partition(" ")
        row = printer.dom.createElement("mrow")
        mn = printer.dom.createElement("mn")
        mn.appendChild(printer.dom.createTextNode("∞" if number == "inf" else number))
        row.appendChild(mn)
        if unit:
            space = printer.dom.createElement("mspace")
            space.setAttribute("width", "0.25em")
            row.appendChild(space)
            mi = printer.dom.createElement("mi")
            mi.setAttribute("mathvariant", "normal")
            mi.appendChild(printer.dom.createTextNode(unit))
            row.appendChild(mi)
        return row


#: Signs of units and prefixes that LaTeX writes by name.
_LATEX_UNIT_SIGNS = {"Ω": r"\Omega", "µ": r"\mu{}"}



class _StepLatexPrinter(LatexPrinter):
    """sympy's LaTeX printer with names as typed, the state as a function and d/dt as a fraction."""

    def __init__(self, names: DerivationNames | None = None) -> None:
        super().__init__({"mul_symbol": "dot"})
        self._names = names

    def _print_Add(self, expr: sp.Add, order: str | None = None) -> str:
        # Sums print in the order they were built (evaluated sums are in sympy's canonical
        # order either way); factors keep sympy's order.  The report's MathML does the same.
        return super()._print_Add(expr, order="none")

    def _print_Symbol(self, expr: sp.Symbol, style: str = "plain") -> str:
        return self._names.latex(expr) if self._names is not None else latex_name(expr.name)

    def _print_AppliedUndef(self, expr: AppliedUndef, exp: str | None = None) -> str:
        arguments = ", ".join(self._print(argument) for argument in expr.args)
        text = rf"{latex_name(expr.func.__name__)}{{\left({arguments} \right)}}"
        return text if exp is None else rf"{text}^{{{exp}}}"

    def _print_Derivative(self, expr: sp.Derivative) -> str:
        # A first derivative of the state reads dv/dt; anything else is left to sympy.
        if isinstance(expr.expr, AppliedUndef) and len(expr.variable_count) == 1:
            ((variable, count),) = expr.variable_count
            if count == 1:
                return (rf"\frac{{\mathrm{{d}} {latex_name(expr.expr.func.__name__)}}}"
                        rf"{{\mathrm{{d}}{self._print(variable)}}}")
        return super()._print_Derivative(expr)


def to_latex(expression: sp.Basic, names: DerivationNames | None = None) -> str:
    r"""`expression` (or an equation) as LaTeX, every name as typed.

    Parameters
    ----------
    expression : sympy.Basic
        An expression or a ``sympy.Eq``.
    names : DerivationNames, optional
        The derivation's namespace, which writes its time constant as ``\tau``;
        without it every symbol is written by
        :func:`~firstorder.symbolic.names.latex_name`.

    Returns
    -------
    str

    Examples
    --------
    >>> t = sp.Symbol("t")
    >>> to_latex(sp.Symbol("vcal") * sp.Symbol("r_bus_leak"))
    'r_{\\mathrm{bus\\_leak}} \\cdot \\mathrm{vcal}'
    >>> v = sp.Function("v_ch")(t)
    >>> to_latex(sp.Eq(sp.Derivative(v, t), -v, evaluate=False))
    '\\frac{\\mathrm{d} v_{\\mathrm{ch}}}{\\mathrm{d}t} = - v_{\\mathrm{ch}}{\\left(t \\right)}'
    >>> to_latex(v.subs(t, sp.oo))
    'v_{\\mathrm{ch}}{\\left(\\infty \\right)}'

    See Also
    --------
    step_latex : one step's equations on one line.
    firstorder.report.mathml.mathml : the same expression as MathML.
    """
    return _StepLatexPrinter(names).doprint(expression)


class Step(NamedTuple):
    """One step of a derivation: a caption and its equations (``sympy.Eq``, sides as written)."""

    caption: str
    equations: tuple[sp.Eq, ...]


def _equal(left: sp.Expr, right: sp.Expr) -> sp.Eq:
    return sp.Eq(left, right, evaluate=False)  # keep both sides as written


def _sum(*terms: sp.Expr) -> sp.Expr:
    return sp.Add(*terms, evaluate=False)  # a zero term stays: it says which part vanishes


def _product(*factors: sp.Expr) -> sp.Expr:
    return sp.Mul(*factors, evaluate=False)


def derivation_steps(derivation: "Derivation") -> list[Step]:
    """The steps of `derivation` as sympy equations: the one source of every printed form.

    Parameters
    ----------
    derivation : Derivation

    Returns
    -------
    list of Step
        The equivalent (or that the state holds), the circuit law, the ODE, tau,
        the final value, the response split both ways, one step per probe, and the
        part values when the derivation has them.

    Examples
    --------
    >>> import firstorder as fo
    >>> steps = derivation_steps(fo.Fixture.rc(r="10k", c="100n").derivation())
    >>> [step.caption for step in steps][:2]
    ['Equivalent seen by capacitor c (no switches)', 'Circuit law: KCL at the capacitor, with the Thevenin equivalent']
    >>> steps[0].equations
    (Eq(R_th, r), Eq(V_th, vin))

    See Also
    --------
    latex_steps : the same steps as (caption, LaTeX) pairs.
    """
    d = derivation
    names = d.names
    x, t, tau, start = names.state_function, names.t, names.time_constant, names.start
    at_infinity = x.subs(t, sp.oo)
    storage = d.symbols[d.storage]
    where = f"{d.kind} {d.storage} ({d.configuration})"
    if d.holds:
        steps = [
            Step(f"No resistive path for {where}: the state holds", (_equal(x, start),)),
            Step("The ODE", (d.ode,)),
            Step("Time constant", (_equal(tau, d.tau),)),
            Step("Final value", (_equal(at_infinity, d.final),)),
            Step("Zero-input + zero-state", (_equal(x, _sum(d.zero_input, d.zero_state)),)),
            Step("Natural + forced", (_equal(x, _sum(d.natural, d.forced)),)),
        ]
    else:
        # Written with R, the equivalent and tau as named in the first step, the way an
        # engineer writes them: the full expressions of a real fixture nest fractions
        # inside exponents.  (The derivation's attributes keep the full expressions.)
        resistance, equivalent = names.resistance, names.equivalent
        rate = sp.Derivative(x, t)
        if d.kind == "capacitor":
            law_caption = "Circuit law: KCL at the capacitor, with the Thevenin equivalent"
            law = _equal(storage * rate, (equivalent - x) / resistance)
            tau_rule = storage * resistance  # in sympy's order, which the MathML printer keeps too
            ode = _equal(rate, (equivalent - x) / tau_rule)
        else:
            law_caption = "Circuit law: KVL around the inductor, with the Norton equivalent"
            law = _equal(storage * rate, resistance * (equivalent - x))
            tau_rule = storage / resistance
            ode = _equal(rate, resistance * (equivalent - x) / storage)
        # A power of e from the start, not exp: an evaluated exp would reorder the sums.
        decay = PowerOfE(-t / tau)
        steps = [
            Step(f"Equivalent seen by {where}",
                 (_equal(resistance, d.resistance), _equal(equivalent, d.equivalent))),
            Step(law_caption, (law,)),
            Step("The ODE", (ode,)),
            Step("Time constant", (_equal(tau, tau_rule), _equal(tau, d.tau))),
            Step("Final value", (_equal(at_infinity, equivalent),)),
            Step("Zero-input + zero-state",
                 (_equal(x, _sum(_product(start, decay), _product(equivalent, _sum(1, -decay)))),)),
            Step("Natural + forced",
                 (_equal(x, _sum(_product(_sum(start, -equivalent), decay), equivalent)),)),
        ]
    for probe, expression in d.probes.items():
        steps.append(Step(f"Probe {probe}", (_equal(names.probes[probe], expression),)))
    if d.values:
        numbers = [_equal(symbol, PartValue(value, names.units.get(symbol, ""))) for symbol, value in d.values.items()]
        tau_number = sp.oo if d.holds else PartValue(float(d.substitute(d.tau)), "s")
        steps.append(Step("With the part values", (*numbers, _equal(tau, tau_number))))
        if not d.holds:
            steps.append(Step("Final value with the part values",
                              (_equal(at_infinity, d.substitute(d.final).evalf(4)),)))
    return steps


def step_latex(step: Step, names: DerivationNames | None = None) -> str:
    r"""The equations of `step` as one line of LaTeX.

    Equations side by side are set apart by a comma and a quad; consecutive
    equations with the same left side are chained (``\tau = c \cdot R_{\mathrm{th}} = c \cdot r``).

    Parameters
    ----------
    step : Step
    names : DerivationNames, optional
        As for :func:`to_latex`.

    Returns
    -------
    str

    Examples
    --------
    >>> r, c, tau = sp.symbols("r c tau", positive=True)
    >>> step_latex(Step("Time constant", (sp.Eq(tau, r * c), sp.Eq(tau, 1e-3), sp.Eq(r, 1e4))))
    '\\mathrm{tau} = c \\cdot r = 0.001,\\quad r = 10000.0'

    See Also
    --------
    to_latex : one expression.
    latex_steps : every step of a derivation.
    """
    groups: list[list[str]] = []
    previous = None
    for equation in step.equations:
        if groups and equation.lhs == previous:
            groups[-1].append(to_latex(equation.rhs, names))
        else:
            groups.append([to_latex(equation.lhs, names), to_latex(equation.rhs, names)])
        previous = equation.lhs
    return r",\quad ".join(" = ".join(group) for group in groups)


def latex_steps(derivation: "Derivation") -> list[tuple[str, str]]:
    r"""The steps of `derivation` as (caption, LaTeX) pairs.

    Examples
    --------
    >>> import firstorder as fo
    >>> dict(latex_steps(fo.Fixture.rc(r="10k", c="100n").derivation()))["Time constant"]
    '\\tau = R_{\\mathrm{th}} \\cdot c = c \\cdot r'

    See Also
    --------
    derivation_steps : the steps as sympy equations.
    aligned_latex, markdown_steps : the steps as one block.
    """
    return [(step.caption, step_latex(step, derivation.names)) for step in derivation_steps(derivation)]


def aligned_latex(derivation: "Derivation") -> str:
    r"""The steps of `derivation` as one LaTeX ``aligned`` block, a caption above each.

    Examples
    --------
    >>> import firstorder as fo
    >>> print(aligned_latex(fo.Fixture.rc(r="10k", c="100n").derivation()).splitlines()[1])
    &\text{Equivalent seen by capacitor c (no switches):}\\ &\quad R_{\mathrm{th}} = r,\quad V_{\mathrm{th}} = \mathrm{vin} \\

    See Also
    --------
    markdown_steps : the same steps as Markdown.
    """
    lines = [rf"&\text{{{latex_text(caption)}:}}\\ &\quad {body}" for caption, body in latex_steps(derivation)]
    return "\\begin{aligned}\n" + " \\\\\n".join(lines) + "\n\\end{aligned}"


def markdown_steps(derivation: "Derivation") -> str:
    r"""The steps of `derivation` as Markdown: a bold caption, then display math, per step.

    Examples
    --------
    >>> import firstorder as fo
    >>> paragraphs = markdown_steps(fo.Fixture.rc(r="10k", c="100n").derivation()).split("\n\n")
    >>> print(paragraphs[4], paragraphs[5], sep="\n")
    **The ODE**
    $$ \frac{\mathrm{d} v_{c}}{\mathrm{d}t} = \frac{V_{\mathrm{th}} - v_{c}{\left(t \right)}}{R_{\mathrm{th}} \cdot c} $$

    See Also
    --------
    aligned_latex : the same steps as one LaTeX block.
    """
    return "\n\n".join(f"**{markdown_text(caption)}**\n\n$$ {_markdown_math(body)} $$"
                       for caption, body in latex_steps(derivation))


def _markdown_math(latex: str) -> str:
    r"""LaTeX for display math in Markdown, with no ``<`` or ``>`` for an HTML parser to take as
    a tag (a part named ``<img ...>``): MathJax and KaTeX, which draw Markdown's math, read
    ``\lt`` and ``\gt`` as the same signs.

    >>> _markdown_math(r"\mathrm{<b>} = 1")
    '\\mathrm{\\lt b\\gt } = 1'
    """
    return latex.replace("<", r"\lt ").replace(">", r"\gt ")


# A caption holds part names, which may hold markup ("<img ...>") or Markdown's own marks.
_MARKDOWN_SPECIALS = {c: "\\" + c for c in "\\`*_[]|~#"}
_MARKDOWN_SPECIALS.update({"<": "&lt;", ">": "&gt;", "&": "&amp;"})


def markdown_text(text: str) -> str:
    r"""`text` as Markdown that shows it as typed: no markup, no emphasis, no links.

    An underscore inside a word (``c_hold``) stays as it is: Markdown never reads one
    there as emphasis.

    Examples
    --------
    >>> markdown_text("Probe c_hold <b>*k1* _x")
    'Probe c_hold &lt;b&gt;\\*k1\\* \\_x'
    """
    return "".join(
        "_" if c == "_" and 0 < k < len(text) - 1 and text[k - 1].isalnum() and text[k + 1].isalnum()
        else _MARKDOWN_SPECIALS.get(c, c)
        for k, c in enumerate(text)
    )

"""Reports of an :class:`~firstorder.analysis.Analysis`: a standalone HTML page and Markdown.

The HTML page works offline and on its own: styles inline, BokehJS inline
(:mod:`firstorder.widgets.report_figure`, which holds every bokeh import), the
derivations as MathML (sympy's presentation printer; browsers draw MathML
without any script), and the analysis JSON in a ``<script
type="application/json">`` block that :meth:`Analysis.load` reads back.

Everything the user typed (title, notes, names, values) is escaped before it
reaches the page, including inside MathML, whose sympy printer writes symbol
names as they are.
"""

from __future__ import annotations

import datetime
import functools
import math
from html import escape
from html.parser import HTMLParser
from typing import TYPE_CHECKING, Any

import numpy as np

from .units import format_value

if TYPE_CHECKING:
    import pandas as pd

    from .analysis import Analysis
    from .drive import Drive
    from .fixture import Fixture

__all__ = ["html_report", "markdown_report", "mathml", "drive_rows", "settling_rows"]

#: A drive with at most this many changes is shown in full; longer ones are summarised.
FULL_DRIVE_ROWS = 40
_HEAD_ROWS, _TAIL_ROWS = 10, 5
#: A settling table with at most this many rows is shown in full.
FULL_SETTLING_ROWS = 200
#: Derivations shown, in order of first use (each switch configuration has one).
MAX_DERIVATIONS = 8

_CSS = """
<style>
  body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; color: #1d2733;
         max-width: 980px; margin: 0 auto; padding: 1.2em 1.5em 3em; line-height: 1.45;
         height: auto; display: block; }
  h1 { font-size: 1.7em; margin-bottom: 0.1em; color: #14324f; }
  h2 { font-size: 1.25em; border-bottom: 2px solid #d5dee8; padding-bottom: 0.15em; margin-top: 1.8em; color: #14324f; }
  h3 { font-size: 1.05em; margin-bottom: 0.3em; }
  .meta { color: #5a6877; font-size: 0.9em; }
  .notes { white-space: pre-wrap; background: #f5f8fb; border-left: 4px solid #8fa9c4; padding: 0.6em 0.9em; }
  table.fo { border-collapse: collapse; font-size: 0.88em; margin: 0.4em 0 0.8em; }
  table.fo th, table.fo td { padding: 2px 9px; text-align: left; border-bottom: 1px solid #dde3ea; }
  table.fo th { background: #eef2f6; }
  table.fo td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
  tr.bad td { background: #fbeaea; }
  .caution { border-left: 4px solid #b03a2e; background: #fdf2f1; padding: 0.5em 0.8em; margin: 0.4em 0; }
  .fine { color: #2e6b3f; }
  ol.steps li { margin-bottom: 0.6em; }
  /* Display-style maths, set flush left under its caption (block math is centred). */
  div.eq { margin: 0.35em 0 0.35em 1.5em; }
  div.eq math { display: inline math; math-style: normal; }
  footer { margin-top: 2.5em; font-size: 0.85em; color: #5a6877; border-top: 1px solid #d5dee8; padding-top: 0.6em; }
  code { background: #eef2f6; padding: 0 0.25em; }
</style>
"""


def _now() -> str:
    return datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")


def _version() -> str:
    from . import __version__

    return __version__


# -- shared content --------------------------------------------------------------------
def _states_text(fixture: "Fixture", states: tuple[bool, ...]) -> str:
    return fixture.describe_states(states) or "no switches"


def summary_rows(analysis: "Analysis") -> list[tuple[str, str]]:
    """(label, text) pairs summarising an analysis."""
    response = analysis.response
    fixture = analysis.fixture
    drive = analysis.drive
    unit = fixture.state_unit
    storage = fixture.storage
    rows = [
        ("storage element", f"{storage.kind} '{storage.name}', {storage.describe_value()}; "
                            f"state {'v' if unit == 'V' else 'i'}_{storage.name} in {unit}"),
        ("starting state", f"{analysis.initial!r} → {format_value(response.initial, unit)}"),
        ("drive", f"{len(drive)} segments from {format_value(drive.start, 's')} to "
                  f"{format_value(drive.end, 's')}; columns {', '.join(drive.names)}"),
    ]
    configurations = response.configurations
    order = dict.fromkeys(response.segment_configuration.tolist())
    for index in order:
        states = configurations[index]
        tau = response.tau[response.segment_configuration == index][0]
        text = "holds its state (no resistive path)" if math.isinf(tau) else format_value(float(tau), "s")
        rows.append((f"time constant ({_states_text(fixture, states)})", text))
    rows.append(("state at the end", format_value(float(response.boundary[-1]), unit)))
    rows.append(("tolerance", str(analysis.tolerance) if analysis.tolerance is not None else "none given"))
    delay = analysis.sample_delay
    if delay is None:
        delay_text = "none given"
    elif isinstance(delay, list):
        delay_text = (f"one per segment, {format_value(min(delay), 's')} to "
                      f"{format_value(max(delay), 's')} after the change")
    else:
        delay_text = f"{delay!r} after every change"
    rows.append(("sample delay", delay_text))
    return rows


def part_rows(fixture: "Fixture") -> list[list[str]]:
    """One row per part: name, kind, nodes, value as typed, value."""
    rows = []
    for part in fixture.parts:
        typed = ", ".join(f"{key} {value!r}" if len(part.typed) > 1 else repr(value) for key, value in part.typed)
        rows.append([part.name, part.kind.replace("_", " "), f"{part.a} → {part.b}",
                     typed or "from the drive", part.describe_value()])
    return rows


def probe_rows(fixture: "Fixture") -> list[list[str]]:
    return [[probe.name, probe.describe()] for probe in fixture.probes]


def drive_rows(drive: "Drive") -> tuple[list[str], list[list[str]], bool]:
    """Header and rows of the drive table, and whether rows were left out.

    A short drive is given in full; a long one as its first and last rows,
    with a row of ellipses between.
    """
    header = ["#", "change at", *drive.names]
    n = len(drive)
    shown = list(range(n)) if n <= FULL_DRIVE_ROWS else [*range(_HEAD_ROWS), *range(n - _TAIL_ROWS, n)]
    columns = list(drive.columns.values())
    rows = []
    previous = None
    for k in shown:
        if previous is not None and k != previous + 1:
            rows.append(["…"] * len(header))
        rows.append([str(k), format_value(float(drive.times[k]), "s", digits=7), *(f"{float(c[k]):.6g}" for c in columns)])
        previous = k
    return header, rows, n > FULL_DRIVE_ROWS


def drive_summary_rows(drive: "Drive") -> list[list[str]]:
    """Per column: lowest, highest and how many distinct levels."""
    rows = []
    for name, values in drive.columns.items():
        rows.append([name, f"{float(values.min()):.6g}", f"{float(values.max()):.6g}", str(np.unique(values).size)])
    return rows


_SETTLING_UNITS = {
    "start": "s", "end": "s", "settle_time": "s", "sample_time": "s",
    "start_value": None, "final": None, "tolerance": None, "residual_at_end": None,
    "value_at_sample": None, "error_at_sample": None,
}


def _settling_cell(column: str, value: Any, unit: str) -> str:
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "NO"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        number = float(value)
        if math.isnan(number):
            return "ends first" if column == "settle_time" else "—"
        known = _SETTLING_UNITS.get(column, "")
        return format_value(number, known if known is not None else unit, digits=5)
    return str(value)


def settling_rows(table: "pd.DataFrame", unit: str) -> tuple[list[str], list[tuple[int, list[str], bool]], int]:
    """Header, rows (segment, cells, bad) and how many rows were left out.

    A long table keeps its first rows and every segment that did not settle
    or failed at its sample, up to :data:`FULL_SETTLING_ROWS` in all.
    """
    header = ["segment", *[str(c).replace("_", " ") for c in table.columns]]
    bad = np.zeros(len(table), dtype=bool)
    if "settled" in table.columns:
        bad |= ~table["settled"].to_numpy(dtype=bool)
    if "ok" in table.columns:
        bad |= ~table["ok"].to_numpy(dtype=bool)
    if len(table) <= FULL_SETTLING_ROWS:
        keep = np.arange(len(table))
    else:
        first = np.arange(FULL_SETTLING_ROWS // 2)
        failing = np.flatnonzero(bad)
        keep = np.union1d(first, failing)[:FULL_SETTLING_ROWS]
    columns = list(table.columns)
    values = [table[c].to_numpy() for c in columns]
    rows = []
    for k in keep.tolist():
        cells = [_settling_cell(c, v[k], unit) for c, v in zip(columns, values)]
        rows.append((k, cells, bool(bad[k])))
    return header, rows, len(table) - len(keep)


# -- MathML --------------------------------------------------------------------------------
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


# -- HTML -----------------------------------------------------------------------------------
def _html_table(header: list[str] | None, rows: list[list[str]], numeric_from: int | None = None) -> str:
    head = "<thead><tr>" + "".join(f"<th>{escape(h)}</th>" for h in header) + "</tr></thead>" if header else ""
    body = []
    for row in rows:
        cells = "".join(
            f"<td{' class=num' if numeric_from is not None and i >= numeric_from else ''}>{escape(str(c))}</td>"
            for i, c in enumerate(row)
        )
        body.append(f"<tr>{cells}</tr>")
    return f"<table class=fo>{head}<tbody>{''.join(body)}</tbody></table>"


def _settling_html(analysis: "Analysis") -> str:
    if analysis.tolerance is None:
        return ("<p>No tolerance was given, so there is no settling table. Give one with "
                "<code>tolerance=fo.Tolerance.lsb(bits=16, span=5.0)</code> (for example).</p>")
    table = analysis.settling()
    unit = analysis.fixture.state_unit
    header, rows, left_out = settling_rows(table, unit)
    head = "".join(f"<th>{escape(h)}</th>" for h in header)
    body = "".join(
        f"<tr{' class=bad' if bad else ''}><td>{k}</td>"
        + "".join(f"<td class=num>{escape(c)}</td>" for c in cells) + "</tr>"
        for k, cells, bad in rows
    )
    not_settled = int((~table["settled"].to_numpy(dtype=bool)).sum()) if "settled" in table.columns else 0
    failed = int((~table["ok"].to_numpy(dtype=bool)).sum()) if "ok" in table.columns else 0
    verdict = (f"{not_settled} of {len(table)} segments do not settle within the tolerance before they end "
               "(settle time \"ends first\")"
               + (f"; {failed} fail at their sample instant" if "ok" in table.columns else "") + ".")
    note = f" {left_out} rows that settled are left out; the CLI's <code>settle</code> lists them all." if left_out else ""
    return (f"<p>Tolerance {escape(str(analysis.tolerance))}. {escape(verdict)}{note}</p>"
            f"<table class=fo><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>")


def _cautions_html(analysis: "Analysis") -> str:
    cautions = analysis.cautions
    if not cautions:
        return ("<p class=fine>No hazard was found by the checks firstorder makes (voltage and "
                "stored energy); that is not a safety assessment.</p>")
    items = []
    for caution in cautions:
        kind = getattr(caution, "kind", "")
        label = f"<strong>{escape(str(kind).replace('_', ' '))}:</strong> " if kind else ""
        items.append(f"<div class=caution>⚠ {label}{escape(str(caution))}</div>")
    return "".join(items)


def _derivations_html(analysis: "Analysis") -> str:
    shown = analysis.derivations(limit=MAX_DERIVATIONS)
    total = len(analysis.response.configurations)
    parts = [
        "<p>One derivation per switch configuration the drive uses. Within a segment, t is the "
        "time since its change and the 0 subscript marks the state at that change.</p>"
    ]
    for states, derivation in shown:
        parts.append(f"<h3>{escape(_states_text(analysis.fixture, states))}</h3><ol class=steps>")
        for caption, equations in derivation_steps(derivation):
            maths = "".join(f"<div class=eq>{mathml(equation)}</div>" for equation in equations)
            parts.append(f"<li>{escape(caption)}{maths}</li>")
        parts.append("</ol>")
    if total > len(shown):
        parts.append(f"<p>{total - len(shown)} further configurations are not shown; "
                     f"<code>firstorder derive</code> prints them all.</p>")
    return "".join(parts)


def _drive_html(drive: "Drive") -> str:
    header, rows, shortened = drive_rows(drive)
    text = []
    if shortened:
        text.append(
            f"<p>{len(drive)} changes: the first {_HEAD_ROWS} and the last {_TAIL_ROWS} are listed, "
            f"and each column is summarised. The whole drive is in the analysis embedded in this "
            f"page.</p>"
        )
        text.append(_html_table(["column", "lowest", "highest", "distinct levels"], drive_summary_rows(drive), 1))
    text.append(_html_table(header, rows, 2))
    text.append(f"<p class=meta>The last segment ends at {escape(format_value(drive.end, 's'))}. "
                f"Switch columns: 1 closed, 0 open.</p>")
    return "".join(text)


def html_report(analysis: "Analysis", now: str | None = None) -> str:
    """The standalone HTML page for `analysis` (see :meth:`Analysis.report`)."""
    try:
        from .widgets.report_figure import standalone_page
    except ImportError as error:
        from .errors import InputError

        raise InputError(
            f"report: needs bokeh for its plot ({error}); install it with "
            f"pip install 'firstorder[widgets]'"
        ) from None
    from .analysis import EMBED_ID

    stamp = now or _now()
    title = analysis.title or "firstorder analysis"
    fixture = analysis.fixture
    top = [
        f"<header><h1>{escape(title)}</h1>",
        f"<p class=meta>Written by firstorder {escape(_version())} on {escape(stamp)}. "
        f"This page needs no network; reload the analysis with "
        f"<code>firstorder.Analysis.load(&quot;this-file.html&quot;)</code>.</p></header>",
    ]
    if analysis.notes:
        top.append(f"<section id=notes><h2>Notes</h2><div class=notes>{escape(analysis.notes)}</div></section>")
    top.append("<section id=summary><h2>Summary</h2>"
               + _html_table(None, [list(r) for r in summary_rows(analysis)]) + "</section>")
    top.append("<section id=parts><h2>Fixture</h2>"
               + _html_table(["name", "kind", "nodes", "as typed", "value"], part_rows(fixture)))
    if fixture.probes:
        top.append("<h3>Probes</h3>" + _html_table(["name", "watches"], probe_rows(fixture)))
    top.append("</section>")
    top.append(f"<section id=drive><h2>Drive</h2>{_drive_html(analysis.drive)}</section>")
    bottom = [
        f"<section id=settling><h2>Settling</h2>{_settling_html(analysis)}</section>",
        f"<section id=cautions><h2>Cautions</h2>{_cautions_html(analysis)}</section>",
        f"<section id=derivations><h2>Derivations</h2>{_derivations_html(analysis)}</section>",
        f"<footer>firstorder {escape(_version())} · report written {escape(stamp)} · the analysis "
        f"below this line is the whole input, in the firstorder-analysis JSON format, version 1.</footer>",
        f'<script type="application/json" id="{EMBED_ID}">{analysis.embedded_json()}</script>',
    ]
    return standalone_page(
        analysis.response,
        title=title,
        head_html=_CSS,
        top_html="".join(top),
        bottom_html="".join(bottom),
        caption_html_for=lambda caption: f"<p class=meta>{escape(caption)}</p>",
        tolerance=analysis.tolerance,
    )


# -- Markdown --------------------------------------------------------------------------------------
def _md_cell(value: Any) -> str:
    return str(value).replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def _md_table(header: list[str], rows: list[list[str]]) -> str:
    lines = ["| " + " | ".join(_md_cell(h) for h in header) + " |",
             "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(_md_cell(c) for c in row) + " |" for row in rows]
    return "\n".join(lines)


def markdown_report(analysis: "Analysis", derivations: bool = True, now: str | None = None) -> str:
    """A Markdown summary of `analysis` for lab records (see :meth:`Analysis.markdown`)."""
    stamp = now or _now()
    fixture = analysis.fixture
    out = [f"# {_md_cell(analysis.title or 'firstorder analysis')}",
           f"_Written by firstorder {_version()} on {stamp}._"]
    if analysis.notes:
        out += ["## Notes", analysis.notes]
    out += ["## Summary", _md_table(["", ""], [list(r) for r in summary_rows(analysis)])]
    out += ["## Fixture", _md_table(["name", "kind", "nodes", "as typed", "value"], part_rows(fixture))]
    if fixture.probes:
        out += ["Probes:", _md_table(["name", "watches"], probe_rows(fixture))]
    header, rows, shortened = drive_rows(analysis.drive)
    out.append("## Drive")
    if shortened:
        out += [f"{len(analysis.drive)} changes; the first {_HEAD_ROWS} and the last {_TAIL_ROWS} are listed.",
                _md_table(["column", "lowest", "highest", "distinct levels"], drive_summary_rows(analysis.drive))]
    out += [_md_table(header, rows), f"The last segment ends at {format_value(analysis.drive.end, 's')}."]
    out.append("## Settling")
    if analysis.tolerance is None:
        out.append("No tolerance was given.")
    else:
        table = analysis.settling()
        header, rows, left_out = settling_rows(table, fixture.state_unit)
        out.append(f"Tolerance {analysis.tolerance}.")
        out.append(_md_table(header, [[str(k), *cells] for k, cells, _ in rows]))
        if left_out:
            out.append(f"{left_out} rows that settled are left out.")
    out.append("## Cautions")
    cautions = analysis.cautions
    out.append("\n".join(f"- ⚠ {c}" for c in cautions) if cautions else "None raised by firstorder's checks.")
    if derivations:
        out.append("## Derivations")
        for states, derivation in analysis.derivations(limit=MAX_DERIVATIONS):
            out += [f"### {_states_text(fixture, states)}", derivation.markdown()]
    return "\n\n".join(out) + "\n"

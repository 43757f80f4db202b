"""The ``firstorder`` command line: reports, settling tables and derivations from analysis files.

::

    firstorder report A.json -o R.html
    firstorder settle A.json [--format table|csv|json]
    firstorder derive A.json [--format markdown|latex]
    firstorder study A.json [--units N] [--seed S] [--scheduler ADDRESS] [--format table|csv|json] [--require F]
    firstorder demo [-o DIR]

Every command reads an analysis file (or a report, which carries its analysis).
Errors go to stderr as one line, with exit code 2; there is never a traceback.
``study`` exits with 1 when the passing fraction is below ``--require`` (a gate for CI).
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import NoReturn

import numpy as np

from . import _parallel

__all__ = ["main", "demo_analysis"]

_PROGRAM = "firstorder"
#: Exit code for any error: bad usage, an unreadable or invalid file, a failed write.
EXIT_ERROR = 2
#: Exit code of ``study`` when fewer units pass than ``--require`` asks.
EXIT_BELOW_REQUIRED = 1


class _UsageError(Exception):
    """Bad command-line usage, reported as one line."""


class _Parser(argparse.ArgumentParser):
    """argparse, but a usage error is one line on stderr instead of usage plus message."""

    def error(self, message: str) -> NoReturn:
        raise _UsageError(f"{self.prog}: {message} (see {self.prog} --help)")


def _build_parser() -> argparse.ArgumentParser:
    from ._version import __version__

    parser = _Parser(
        prog=_PROGRAM,
        description=(
            "Settling of first-order test fixtures: write reports, settling tables and "
            "derivations from a firstorder analysis file (JSON, or a report written by firstorder)."
        ),
        epilog="Exit status: 0 on success, 2 on any error (one line on stderr).",
    )
    parser.add_argument("--version", action="version", version=f"{_PROGRAM} {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    commands.required = True

    report = commands.add_parser(
        "report", help="write a self-contained HTML report of an analysis",
        description="Write one self-contained, offline HTML report: parts, drive, interactive plot, "
                    "derivations, settling table, with a spread the tolerance study, cautions, and the "
                    "analysis itself.",
    )
    report.add_argument("analysis", help="analysis file (.json, or a report .html)")
    report.add_argument("-o", "--output",
                        help="report to write (default: the analysis name with .html); - for standard output")

    settle = commands.add_parser(
        "settle", help="print the settling table of an analysis",
        description="Print the settling table: one row per segment, for the analysis's tolerance "
                    "and sample delay.",
    )
    settle.add_argument("analysis", help="analysis file (.json, or a report .html)")
    settle.add_argument("--format", choices=("table", "csv", "json"), default="table",
                        help="table (for reading, the default), csv or json (for other programs)")

    derive = commands.add_parser(
        "derive", help="print the derivation of every switch configuration the drive uses",
        description="Print the symbolic derivation (equivalent, ODE, tau, final value, the response "
                    "split both ways, probes) of every switch configuration the drive uses.",
    )
    derive.add_argument("analysis", help="analysis file (.json, or a report .html)")
    derive.add_argument("--format", choices=("markdown", "latex"), default="markdown",
                        help="markdown with display math (the default) or one LaTeX block per configuration")
    derive.add_argument("--segment", type=int, default=None, metavar="K",
                        help="derive only the configuration that segment K (from 0) of the drive uses")

    study = commands.add_parser(
        "study", help="print the tolerance study of an analysis's lot",
        description="Run the tolerance study the analysis file describes (its spread, units and seed) "
                    "and print, per segment, the nominal settle time, the time each fraction of units "
                    "meets, the error at the sample, the yield and the worst unit; then the fraction "
                    "of units whose every sample is inside, with its 95 %% interval.",
        epilog="Exit status: 0, 1 when the passing fraction is below --require, 2 on any error.",
    )
    study.add_argument("analysis", help="analysis file (.json, or a report .html) with a tolerance and a spread")
    study.add_argument("--units", type=_whole_number("--units", 1), default=None, metavar="N",
                       help="units to draw (default: the file's, else 1000)")
    study.add_argument("--seed", type=_whole_number("--seed", 0), default=None, metavar="S",
                       help="seed of the draws (default: the file's, else 1)")
    study.add_argument("--scheduler", default=None, metavar="ADDRESS",
                       help="run the chunks on the dask.distributed cluster whose scheduler is at ADDRESS "
                            "(tcp://host:8786); default: in this process")
    study.add_argument("--format", choices=("table", "csv", "json"), default="table",
                       help="table (for reading, the default), csv or json (for other programs)")
    study.add_argument("--require", type=_fraction_argument, default=None, metavar="F",
                       help="exit with status 1 when fewer than this fraction of units pass (e.g. 0.999)")

    demo = commands.add_parser(
        "demo", help="write a demo analysis and its report",
        description="Write a demo analysis (an invented sample-and-hold scenario) and its report, "
                    "to try the other commands on.",
    )
    demo.add_argument("-o", "--output", default="firstorder-demo",
                      help="folder to write into (made if missing; default: firstorder-demo)")
    return parser


def _whole_number(flag: str, least: int):
    def read(text: str) -> int:
        if not text.isascii() or not text.isdigit() or int(text) < least:
            raise argparse.ArgumentTypeError(f"{text!r} is not allowed; give a whole number >= {least}")
        return int(text)

    read.__name__ = flag  # argparse names the type in its message
    return read


def _fraction_argument(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not 0.0 < value <= 1.0:
        raise argparse.ArgumentTypeError(f"{text!r} is not allowed; give a fraction of units in (0, 1], e.g. 0.999")
    return value


# -- commands ---------------------------------------------------------------------------------
def _report(arguments: argparse.Namespace) -> None:
    from .analysis import Analysis

    analysis = Analysis.load(arguments.analysis)
    if arguments.output == "-":
        sys.stdout.write(analysis.to_html())
        return
    output = arguments.output or str(Path(arguments.analysis).with_suffix(".html"))
    if Path(output).resolve() == Path(arguments.analysis).resolve():
        raise _UsageError(
            f"{_PROGRAM} report: the report would overwrite its own input {arguments.analysis}; give -o"
        )
    path = analysis.report(output)
    print(path)


def _settle(arguments: argparse.Namespace) -> None:
    from .analysis import Analysis

    analysis = Analysis.load(arguments.analysis)
    if analysis.tolerance is None:
        raise _UsageError(
            f"{_PROGRAM} settle: {arguments.analysis} has no tolerance; add a \"tolerance\" field "
            f"(see the README's file format)"
        )
    table = analysis.settling()
    if arguments.format == "csv":
        # repr: the shortest text that reads back as exactly the same float.
        sys.stdout.write(table.to_csv(float_format=lambda number: repr(float(number))))
    elif arguments.format == "json":
        sys.stdout.write(json.dumps(_records(table), indent=1, allow_nan=False) + "\n")
    else:
        from .units import format_value

        unit = analysis.fixture.state_unit
        print(f"{analysis.title or arguments.analysis}: tolerance {analysis.tolerance}")
        print(_text_table(table, unit))
        for caution in analysis.cautions:
            print(f"caution: {caution}")
        settled = table["settled"].to_numpy(dtype=bool)
        line = f"{int((~settled).sum())} of {len(table)} segments do not settle before they end"
        if "ok" in table.columns:
            line += f"; {int((~table['ok'].to_numpy(dtype=bool)).sum())} fail at their sample"
        print(line + f"; the drive lasts {format_value(analysis.drive.end - analysis.drive.start, 's')}.")


def _records(table) -> list[dict[str, object]]:
    """Rows as plain JSON values, floats exact; NaN (a segment that ends before it settles) as null."""
    records = []
    for row in table.reset_index().to_dict(orient="records"):
        plain: dict[str, object] = {}
        for key, value in row.items():
            if isinstance(value, (bool, np.bool_)):
                plain[key] = bool(value)
            elif isinstance(value, (int, np.integer)):
                plain[key] = int(value)
            else:
                number = float(value)
                plain[key] = None if math.isnan(number) else number
        records.append(plain)
    return records


def _text_table(table, unit: str) -> str:
    from .report.tables import hold_cells, row_scales, settling_cell

    header = ["segment", *["judged_by" if c == "hold" else str(c) for c in table.columns]]
    columns = list(table.columns)
    values = [table[c].to_numpy() for c in columns]
    scales = row_scales(table)
    hold = table["hold"].to_numpy(dtype=bool) if "hold" in table.columns else [False] * len(table)
    rows = []
    for k in range(len(table)):
        cells = [settling_cell(c, v[k], unit, scales[k]) for c, v in zip(columns, values)]
        if hold[k]:
            hold_cells(cells, columns)  # a hold that droops past its limit "droops out"
        rows.append([str(k), *cells])
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(header)]
    lines = ["  ".join(h.rjust(w) for h, w in zip(header, widths))]
    lines += ["  ".join(c.rjust(w) for c, w in zip(row, widths)) for row in rows]
    return "\n".join(lines)


def _study(arguments: argparse.Namespace) -> int:
    from .analysis import Analysis

    analysis = Analysis.load(arguments.analysis)
    if analysis.tolerance is None:
        raise _UsageError(f"{_PROGRAM} study: {arguments.analysis} has no tolerance; add a \"tolerance\" field "
                          f"(see the README's file format)")
    if analysis.spread is None:
        raise _UsageError(f"{_PROGRAM} study: {arguments.analysis} has no spread; add a \"spread\" field "
                          f"(file version 2, see the README's file format)")
    changes = {key: value for key, value in (("units", arguments.units), ("seed", arguments.seed))
               if value is not None}
    if changes:
        analysis = analysis.replace(**changes)
    settings = analysis.study_settings
    client = _client(arguments.scheduler)
    try:
        # Progress on stderr, which is where tqdm writes (stdout keeps only the table).
        study = analysis.study(client=client, progress=sys.stderr.isatty())
        return _print_study(arguments, analysis, settings, study)
    finally:
        if client is not None:
            client.close()


def _client(address: str | None):
    """A client of the scheduler at `address`, or None to run in this process."""
    if address is None:
        return None
    try:
        from distributed import Client
    except ImportError:
        raise _UsageError(f"{_PROGRAM} study: --scheduler needs dask.distributed; "
                          f"pip install 'firstorder[cluster]'") from None
    try:
        return Client(address, timeout="10s")
    except (OSError, TimeoutError, ValueError) as error:
        raise _UsageError(f"{_PROGRAM} study: cannot reach a scheduler at {address!r} ({_one_line(str(error))})") \
            from None


def _print_study(arguments: argparse.Namespace, analysis, settings: dict, study) -> int:
    tolerance, delay = analysis.tolerance, analysis.sample_delay
    table = study.settling(tolerance, sample_delay=delay, fractions=settings["fractions"])
    passing = study.passing_of(table.attrs["passing"])  # counted by the table's run of the units
    if arguments.format == "csv":
        sys.stdout.write(table.to_csv(float_format=lambda number: repr(float(number))))
    elif arguments.format == "json":
        document = {"units": settings["units"], "seed": settings["seed"], "spread": str(settings["spread"]),
                    "tolerance": str(tolerance), "passing": passing.passing, "passing_fraction": passing.fraction,
                    "interval": [passing.low, passing.high], "confidence": passing.confidence,
                    "segments": _records(table)}
        sys.stdout.write(json.dumps(document, indent=1, allow_nan=False) + "\n")
    else:
        unit = analysis.fixture.state_unit
        print(f"{analysis.title or arguments.analysis}: tolerance {tolerance}; {settings['units']:,} units, "
              f"seed {settings['seed']}; spread {settings['spread']}")
        print(_text_table(table, unit))
        print(passing)
    if arguments.require is not None and passing.fraction < arguments.require:
        print(f"{_PROGRAM} study: {passing.fraction:.4%} of units pass, below the required "
              f"{arguments.require:.4%}", file=sys.stderr)
        return EXIT_BELOW_REQUIRED
    return 0


#: From this many configurations on, `derive` says on stderr which one it is deriving.
_DERIVE_PROGRESS_FROM = 4


def _derive(arguments: argparse.Namespace) -> None:
    from .analysis import Analysis
    from .symbolic.steps import markdown_text

    analysis = Analysis.load(arguments.analysis)
    response = analysis.response
    used = response.segment_configuration
    if arguments.segment is not None:
        if not 0 <= arguments.segment < used.size:
            raise _UsageError(
                f"{_PROGRAM} derive: --segment {arguments.segment} is not a segment of the drive; "
                f"segments are 0 to {used.size - 1}"
            )
        order = [int(used[arguments.segment])]
    else:
        order = list(dict.fromkeys(used.tolist()))  # only what the drive uses, in order of first use
    fixture = analysis.fixture
    names = [p.name for p in fixture.switches]
    blocks = []
    for count, index in enumerate(order, start=1):
        states = response.configurations[index]
        heading = fixture.describe_states(states) or "no switches"
        if len(order) >= _DERIVE_PROGRESS_FROM:
            print(f"{_PROGRAM} derive: configuration {count} of {len(order)} ({heading})", file=sys.stderr, flush=True)
        derivation = fixture.derivation(**dict(zip(names, states)))
        if arguments.format == "latex":
            comment = " ".join(heading.splitlines())  # a name with a line break must not end the comment
            blocks.append(f"% {comment}\n\\[\n{derivation.latex()}\n\\]")
        else:
            blocks.append(f"## {markdown_text(heading)}\n\n{derivation.markdown()}")
    print("\n\n".join(blocks))


def demo_analysis():
    """The demo analysis: an invented sample-and-hold front end (a scenario of our own).

    A 16-bit DAC (span 5 V) drives a 10 nF hold capacitor through a 2.2 kΩ
    series resistor and a relay with 0.15 Ω contacts; a 10 MΩ meter input
    loads the capacitor.  The DAC steps through four levels with the relay
    closed, then the relay opens and the capacitor holds, drooping into the
    meter.  The converter samples 150 µs after each change, and the tolerance
    is half an LSB.  The lot: a 10 % capacitor, 1 % resistors, relay contacts of
    0.1 to 0.3 Ω, the DAC's gain and offset, 0 to 50 °C (``firstorder study``).
    """
    from .analysis import Analysis
    from .drive import Drive
    from .fixture import Fixture
    from .settling.tolerance import Tolerance
    from .studies.spread import Spread, Uniform

    fixture = Fixture()
    fixture.voltage_source("vdac", "dac", "gnd")
    fixture.resistor("r_series", "dac", "sw", "2.2k")
    fixture.switch("k_hold", "sw", "hold", r_on="0.15", r_off="1G")
    fixture.capacitor("c_hold", "hold", "gnd", "10n")
    fixture.resistor("r_meter", "hold", "gnd", "10M")
    fixture.probe("v_hold", node="hold")
    fixture.probe("i_series", through="r_series")
    drive = Drive(
        ["0", "200u", "400u", "600u", "800u"],
        "1.4m",
        vdac=[0.0, 1.25, 4.5, -2.0, -2.0],
        k_hold=[1, 1, 1, 1, 0],
    )
    return Analysis(
        fixture,
        drive,
        initial="settled",
        tolerance=Tolerance.lsb(bits=16, span=5.0),
        sample_delay="150u",
        spread=Spread({"c_hold": "10%", "r_series": "1%", "r_meter": "1%", "k_hold.r_on": Uniform("0.1", "0.3"),
                       "vdac.gain": "0.02%", "vdac.offset": "100u"},
                      temperature=(0, 50), tempco={"c_hold": "-750ppm", "r_series": "25ppm"}),
        units=2000,
        seed=2026,
        title="Demo: sample-and-hold front end (an invented scenario)",
        notes=(
            "An invented scenario to try firstorder on: a 16-bit DAC steps a hold capacitor through "
            "a series resistor and a relay, then the relay opens and the capacitor droops into the "
            "meter's input resistance.\nIs 150 µs after each change long enough to sample within "
            "half an LSB?"
        ),
    )


def _demo(arguments: argparse.Namespace) -> None:
    folder = Path(arguments.output)
    if folder.exists() and not folder.is_dir():
        raise _UsageError(f"{_PROGRAM} demo: {folder} exists and is not a folder")
    folder.mkdir(parents=True, exist_ok=True)
    analysis = demo_analysis()
    saved = analysis.save(folder / "demo-analysis.json")
    report = analysis.report(folder / "demo-report.html")
    print(saved)
    print(report)


_COMMANDS = {"report": _report, "settle": _settle, "derive": _derive, "study": _study, "demo": _demo}


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit status (0, or 2 on any error)."""
    from .errors import InputError

    try:
        parser = _build_parser()
        arguments = parser.parse_args(argv)
        # A bad FIRSTORDER_THREADS would otherwise surface only once an array is long enough
        # to split: refuse it before any work, whatever the drive.
        _parallel.threads()
        status = _COMMANDS[arguments.command](arguments) or 0
    except _UsageError as error:
        print(_one_line(str(error)), file=sys.stderr)
        return EXIT_ERROR
    except InputError as error:
        print(f"{_PROGRAM}: error: {_one_line(str(error))}", file=sys.stderr)
        return EXIT_ERROR
    except BrokenPipeError:  # `firstorder settle a.json | head` closed the pipe early
        _silence_stdout()
        return 0
    except OSError as error:
        where = f"{error.filename}: " if getattr(error, "filename", None) else ""
        print(f"{_PROGRAM}: error: {where}{_one_line(error.strerror or str(error))}", file=sys.stderr)
        return EXIT_ERROR
    except KeyboardInterrupt:
        print(f"{_PROGRAM}: interrupted", file=sys.stderr)
        return EXIT_ERROR
    except SystemExit as exit_:  # --help and --version end here with status 0
        return int(exit_.code or 0) if isinstance(exit_.code, int) else 0
    except Exception as error:  # noqa: BLE001 - the promise is one line, never a traceback
        print(f"{_PROGRAM}: internal error ({type(error).__name__}): {_one_line(str(error))}; "
              f"please report it with the file that caused it", file=sys.stderr)
        return EXIT_ERROR
    try:
        sys.stdout.flush()
    except BrokenPipeError:
        _silence_stdout()
    return status


def _silence_stdout() -> None:
    # Python flushes stdout again at exit; point it at devnull so that flush is quiet.
    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, sys.stdout.fileno())


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

"""Analysis: a fixture, a drive, a starting state and a tolerance, kept together.

An analysis is what an engineer hands to a colleague or reloads months later:
it saves to a JSON file of our own format (``"format": "firstorder-analysis"``,
``"version": 1``; the format's mechanics are in :mod:`firstorder.io.analysis_format`),
writes a self-contained HTML report and a Markdown summary.

Part values are saved exactly as they were typed (``"4.7k"`` stays ``"4.7k"``);
drive times and levels are saved as exact floats.  Reading a file validates it
against a strict schema (:mod:`firstorder.io.schema`, pydantic, imported only
then) and rebuilds the fixture through its public builder methods, so every
check the builders make applies to files as well.  Nothing in a file is ever
executed or evaluated: numbers written as text go through
:func:`firstorder.units.parse_value` only.

Examples
--------
>>> import firstorder as fo
>>> fx = fo.Fixture.rc(r="10k", c="100n")
>>> drive = fo.Drive.steps([(0, 0.0), ("1m", 2.5)], end="8m")
>>> analysis = fo.Analysis(fx, drive, tolerance=fo.Tolerance.absolute("1m"), title="RC step")
>>> again = fo.Analysis.from_json(analysis.to_json())
>>> again.fixture.part_map["r"].typed
(('value', '10k'),)
>>> float(again.response.boundary[-1]) == float(analysis.response.boundary[-1])
True
"""

from __future__ import annotations

import os
from numbers import Real
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from .drive import Drive
from .errors import InputError
from .fixture import Fixture
from .io import analysis_format as file_format
from .io.analysis_format import EMBED_ID, FORMAT_NAME, FORMAT_VERSION, MAX_CHANGES, MAX_FILE_BYTES, as_typed, at
from ._version import __version__
from .io.atomic import write_atomic
from .settling.table import sample_delays
from .settling.tolerance import Tolerance
from .studies.spread import Spread, band_from_text
from .units import parse_value, shown

if TYPE_CHECKING:
    import pandas as pd

    from .studies.study import Study

    from .response import Response
    from .symbolic import Derivation

__all__ = ["Analysis", "EMBED_ID", "FORMAT_NAME", "FORMAT_VERSION", "MAX_CHANGES", "MAX_FILE_BYTES"]


#: A study's settings when a spread leaves them out.
DEFAULT_UNITS, DEFAULT_SEED, DEFAULT_FRACTIONS = 1_000, 1, (0.5, 0.99, 0.999)


def _study_settings(spread: Any, units: Any, seed: Any, fractions: Any, fixture: Fixture) -> dict[str, Any] | None:
    """The study's spread, units, seed and fractions, each checked (the spread against the
    fixture, so a band for a part that is not there is refused now, naming it)."""
    if spread is None:
        given = [name for name, value in (("units", units), ("seed", seed), ("fractions", fractions))
                 if value is not None]
        if given:
            raise InputError(f"{given[0]}: given without a spread; a study needs the spread of the parts")
        return None
    if not isinstance(spread, Spread):
        raise InputError(f"spread: expected a firstorder.Spread, got {type(spread).__name__}")
    spread.quantities(fixture)
    units, seed, fractions = read_study_settings(
        units, seed, fractions, most_units=file_format.MAX_UNITS,
        units_rule=f"give a whole number of units from 1 to {file_format.MAX_UNITS:,}",
        most_fractions=file_format.MAX_FRACTIONS,
        fractions_rule=f"give 1 to {file_format.MAX_FRACTIONS} fractions of units, such as (0.5, 0.99, 0.999)")
    return {"spread": spread, "units": units, "seed": seed, "fractions": fractions}


def read_study_settings(units: Any, seed: Any, fractions: Any, *, most_units: int, units_rule: str,
                        most_fractions: int | None, fractions_rule: str) -> tuple[int, int, tuple[float, ...]]:
    """A study's units, seed and fractions, each checked (the study's defaults for those
    left out): the one reading for analyses and the Bench, whose limits and advice
    (`units_rule`, `fractions_rule`, said after "is not allowed; ") differ.

    Examples
    --------
    >>> read_study_settings(None, 3, [0.5, 1], most_units=10**6, units_rule="", most_fractions=None, fractions_rule="")
    (1000, 3, (0.5, 1.0))
    """
    units = DEFAULT_UNITS if units is None else units
    if isinstance(units, bool) or not isinstance(units, (int, np.integer)) or not 1 <= units <= most_units:
        raise InputError(f"units: {shown(units)} is not allowed; {units_rule}")
    seed = DEFAULT_SEED if seed is None else seed
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or not 0 <= seed < 2**63:
        raise InputError(f"seed: {shown(seed)} is not allowed; give a whole number from 0 to 2**63 - 1")
    fractions = DEFAULT_FRACTIONS if fractions is None else fractions
    if isinstance(fractions, (str, bytes)) or not hasattr(fractions, "__len__") or not (
            1 <= len(fractions) <= (most_fractions or len(fractions))):
        raise InputError(f"fractions: {shown(fractions)} is not allowed; {fractions_rule}")
    for i, fraction in enumerate(fractions):
        if isinstance(fraction, bool) or not isinstance(fraction, (int, float, np.number)) or not 0 < fraction <= 1:
            raise InputError(f"fractions[{i}]: {shown(fraction)} is not allowed; give a fraction of units in (0, 1]")
    return int(units), int(seed), tuple(float(f) for f in fractions)


def _check_delay(value: Any, drive: Drive) -> Any:
    """Check a sample delay against the drive (:func:`~firstorder.settling.table.sample_delays`,
    the one rule); return it in a form JSON can hold, as close as possible to what was typed."""
    if value is None:
        return None
    delays = sample_delays(value, drive.durations, ends=drive.ends)
    if isinstance(value, (str, Real)) and not isinstance(value, bool):
        return as_typed(value, "sample_delay")
    return delays.tolist()


def _delay_seconds(value: Any) -> float | np.ndarray | None:
    if value is None:
        return None
    if isinstance(value, list):
        return np.asarray(value, dtype=np.float64)
    return parse_value(value, field="sample_delay", unit="s")


# -- the analysis ----------------------------------------------------------------------------------
class Analysis:
    """A fixture, a drive, a starting state and a tolerance, to save, reload and report.

    Parameters
    ----------
    fixture : Fixture
        The fixture; the analysis keeps its own copy, so later edits to
        `fixture` do not change it.
    drive : Drive
    initial : float, str, optional
        Starting state (V across the capacitor or A through the inductor),
        ``"settled"`` or ``"periodic"``; kept as given.
    tolerance : Tolerance, optional
        The limit for the settling table.
    sample_delay : float, str or sequence, optional
        Seconds after each change at which the converter samples: one value,
        or one per segment.
    title, notes : str, optional
        Shown at the top of the report.
    spread : Spread, optional
        How the units of the lot differ (file version 2); checked against the fixture.
    units, seed : int, optional
        The study's number of units (default 1,000) and seed (default 1), with a spread.
    fractions : sequence of float, optional
        The fractions of units the study reports (default 0.5, 0.99, 0.999).

    Attributes
    ----------
    response : Response
        The response, computed when the analysis is made (so a bad analysis
        is refused at once, not when it is reported).

    Examples
    --------
    >>> import firstorder as fo
    >>> a = fo.Analysis(fo.Fixture.rc(r="1k", c="1u"), fo.Drive.steps([(0, 1.0)], end="5m"))
    >>> a
    Analysis('', 1 segments, fixture r, c; start 0.0)
    """

    def __init__(
        self,
        fixture: Fixture,
        drive: Drive,
        initial: Any = 0.0,
        tolerance: Tolerance | None = None,
        sample_delay: Any = None,
        title: str = "",
        notes: str = "",
        spread: Spread | None = None,
        units: int | None = None,
        seed: int | None = None,
        fractions: Any = None,
    ) -> None:
        if not isinstance(fixture, Fixture):
            raise InputError(f"fixture: expected a firstorder.Fixture, got {type(fixture).__name__}")
        if not isinstance(drive, Drive):
            raise InputError(f"drive: expected a firstorder.Drive, got {type(drive).__name__}")
        if tolerance is not None and not isinstance(tolerance, Tolerance):
            raise InputError(
                f"tolerance: expected a firstorder.Tolerance or None, got {type(tolerance).__name__}"
            )
        for field, text in (("title", title), ("notes", notes)):
            if not isinstance(text, str):
                raise InputError(f"{field}: expected text, got {type(text).__name__}")
        self._fixture = fixture.with_values()  # a copy: parts are frozen, the list is not
        self._drive = drive
        self._initial = as_typed(initial, "initial")
        self._response = self._fixture.respond(drive, self._initial)
        if tolerance is not None and tolerance.unit != self._fixture.state_unit:
            storage = self._fixture.storage
            raise InputError(
                f"tolerance.unit: {tolerance.unit!r}, but the state of {storage.kind} "
                f"'{storage.name}' is in {self._fixture.state_unit!r}; give the tolerance with "
                f"unit={self._fixture.state_unit!r}"
            )
        self._tolerance = tolerance
        self._sample_delay = _check_delay(sample_delay, drive)
        self._title = title
        self._notes = notes
        self._study = _study_settings(spread, units, seed, fractions, self._fixture)

    # -- reading -------------------------------------------------------------------------------
    @property
    def fixture(self) -> Fixture:
        return self._fixture

    @property
    def drive(self) -> Drive:
        return self._drive

    @property
    def initial(self) -> Any:
        """The starting state as given (a number, engineering text, ``"settled"`` or ``"periodic"``)."""
        return self._initial

    @property
    def tolerance(self) -> Tolerance | None:
        return self._tolerance

    @property
    def sample_delay(self) -> Any:
        """The sample delay as given (None, one value, or a list of seconds per segment)."""
        return self._sample_delay

    @property
    def title(self) -> str:
        return self._title

    @property
    def notes(self) -> str:
        return self._notes

    @property
    def spread(self) -> Spread | None:
        """The lot's spread, or None (no study)."""
        return None if self._study is None else self._study["spread"]

    @property
    def study_settings(self) -> dict[str, Any] | None:
        """``{"spread", "units", "seed", "fractions"}`` of the study, or None."""
        return None if self._study is None else dict(self._study)

    def study(self, **options: Any) -> "Study":
        """The tolerance study the analysis describes (its spread, units and seed), about the
        analysis's tolerance, sample delay and fractions (so its display shows the yield);
        `options` (``client``, ``progress``, ``keep``, ...) as for :class:`~firstorder.studies.Study`,
        and may replace those.

        Examples
        --------
        >>> import firstorder as fo
        >>> a = fo.Analysis(fo.Fixture.rc("1k", "1u"), fo.Drive([0], end="5m", vin=[1.0]),
        ...                 tolerance=fo.Tolerance.relative(0.01), spread=fo.Spread({"c": "10%"}), units=100, seed=4)
        >>> a.study().units
        100
        >>> "passing yield" in a.study()._repr_html_()
        True
        """
        if self._study is None:
            raise InputError("spread: this analysis has no spread; give Analysis(..., spread=...) for a study")
        settings = self._study
        figures: dict[str, Any] = {"fractions": settings["fractions"]}
        if self._tolerance is not None:
            figures.update(tolerance=self._tolerance, sample_delay=self._sample_delay)
        return self._fixture.study(self._drive, settings["spread"], units=settings["units"], seed=settings["seed"],
                                   initial=self._initial, **{**figures, **options})

    @property
    def response(self) -> "Response":
        return self._response

    @property
    def cautions(self) -> list[Any]:
        """The response's safety cautions (empty when there is nothing to warn about)."""
        return list(self._response.cautions)

    def settling(self) -> "pd.DataFrame":
        """The settling table of the state for the analysis's tolerance and sample delay.

        Raises
        ------
        InputError
            When the analysis has no tolerance.
        """
        if self._tolerance is None:
            raise InputError("settling: this analysis has no tolerance; give tolerance=fo.Tolerance...(...)")
        return self._response.settling(self._tolerance, sample_delay=_delay_seconds(self._sample_delay))

    def derivations(self, limit: int | None = None) -> list[tuple[tuple[bool, ...], "Derivation"]]:
        """The derivation of every switch configuration the drive uses, in order of first use.

        Each is a sympy derivation (a second or so the first time); `limit`
        stops after that many configurations.
        """
        response = self._response
        order = list(dict.fromkeys(response.segment_configuration.tolist()))
        names = [p.name for p in self._fixture.switches]
        result = []
        for index in order[:limit]:
            states = response.configurations[index]
            result.append((states, self._fixture.derivation(**dict(zip(names, states)))))
        return result

    def replace(self, **changes: Any) -> "Analysis":
        """A new analysis with some of its arguments replaced."""
        arguments = {
            "fixture": self._fixture, "drive": self._drive, "initial": self._initial,
            "tolerance": self._tolerance, "sample_delay": self._sample_delay,
            "title": self._title, "notes": self._notes,
            "spread": None, "units": None, "seed": None, "fractions": None,
        }
        if self._study is not None and changes.get("spread", self._study["spread"]) is not None:
            arguments.update(self._study)  # without a spread, its settings go too
        unknown = sorted(set(changes) - set(arguments))
        if unknown:
            raise InputError(f"replace: {unknown} are not arguments of Analysis; they are {list(arguments)}")
        arguments.update(changes)
        return Analysis(**arguments)

    # -- plain data and JSON -----------------------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        """The analysis as plain data in the file format (see the README for its fields)."""
        parts = []
        for part in self._fixture.parts:
            record: dict[str, Any] = {"kind": part.kind, "name": part.name, "a": part.a, "b": part.b}
            for key, typed in part.typed:
                record[key] = as_typed(typed, f"{part.name}.{key}")
            parts.append(record)
        probes = []
        for probe in self._fixture.probes:
            if probe.node is not None:
                probes.append({"name": probe.name, "node": probe.node, "reference": probe.reference})
            else:
                probes.append({"name": probe.name, "through": probe.through})
        drive = self._drive
        return {
            "format": FORMAT_NAME,
            "version": FORMAT_VERSION,
            "saved_with": f"firstorder {__version__}",
            "title": self._title,
            "notes": self._notes,
            "fixture": {"parts": parts, "probes": probes},
            "drive": {
                "times": drive.times.tolist(),
                "end": float(drive.end),
                "columns": {name: column.tolist() for name, column in drive.columns.items()},
            },
            "initial": self._initial,
            "tolerance": None if self._tolerance is None else self._tolerance.to_dict(),
            "sample_delay": self._sample_delay,
            **self._study_dict(),
        }

    def _study_dict(self) -> dict[str, Any]:
        if self._study is None:
            return {}
        spread = self._study["spread"]
        temperature = spread.temperature
        return {
            "spread": {"bands": {key: str(spread.band(key)) for key in spread.keys},
                       "temperature": None if temperature is None else list(temperature),
                       "tempco": spread.tempco_text},
            "units": self._study["units"], "seed": self._study["seed"], "fractions": list(self._study["fractions"]),
        }

    def to_json(self) -> str:
        """The analysis as JSON text in the file format (what :meth:`save` writes).

        Raises
        ------
        InputError
            When the text would exceed the size a file may have, so that
            nothing is saved that could not be read back.
        """
        return file_format.file_text(self.to_dict())

    @classmethod
    def from_dict(cls, data: Any, source: str = "analysis") -> "Analysis":
        """Validate plain data in the file format and rebuild the analysis.

        Errors name `source` and the JSON path of the bad field, for example
        ``a.json: fixture.parts[2].value: '-5' must be > 0``.
        """
        from pydantic import ValidationError

        from .io import schema

        try:
            model = schema.AnalysisFile.model_validate(data)
        except ValidationError as error:
            raise InputError(f"{source}: {file_format.describe_validation(error, data, schema.KINDS)}") from None
        return cls._from_model(model, source)

    @classmethod
    def from_json(cls, text: str | bytes, source: str = "analysis JSON") -> "Analysis":
        """Read an analysis from JSON text, or from a report's HTML text (see :meth:`from_dict`).

        Bytes (from an upload widget, say) are read as UTF-8.
        """
        text, source = file_format.json_text_of(text, source)
        return cls.from_dict(file_format.parse_json(text, source), source)

    @classmethod
    def _from_model(cls, model: Any, source: str) -> "Analysis":
        fixture = Fixture()
        for i, part in enumerate(model.fixture.parts):
            with at(f"{source}: fixture.parts[{i}]"):
                if part.kind in ("resistor", "capacitor", "inductor"):
                    getattr(fixture, part.kind)(part.name, part.a, part.b, part.value)
                elif part.kind == "switch":
                    fixture.switch(part.name, part.a, part.b, r_on=part.r_on, r_off=part.r_off)
                else:
                    getattr(fixture, part.kind)(part.name, part.a, part.b)
        for j, probe in enumerate(model.fixture.probes):
            with at(f"{source}: fixture.probes[{j}]"):
                fixture.probe(probe.name, node=probe.node, through=probe.through, reference=probe.reference)
        with at(f"{source}: fixture"):
            fixture.check()
        drive_data = model.drive
        columns = list(drive_data.columns)
        with at(source, columns):
            drive = Drive(drive_data.times, drive_data.end, **drive_data.columns)
        tolerance = None
        if model.tolerance is not None:
            with at(source):
                tolerance = Tolerance.from_dict(model.tolerance.model_dump())
        with at(source, columns):
            return cls(
                fixture,
                drive,
                initial=model.initial,
                tolerance=tolerance,
                sample_delay=model.sample_delay,
                title=model.title,
                notes=model.notes,
                spread=cls._spread_of(model.spread, source),
                units=model.units,
                seed=model.seed,
                fractions=model.fractions,
            )

    @staticmethod
    def _spread_of(model: Any, source: str) -> Spread | None:
        if model is None:
            return None
        # Each band read on its own, never a line of text: a key may hold spaces ("r in 1").
        bands = {key: band_from_text(text, key) for key, text in model.bands.items()}
        temperature = None if model.temperature is None else tuple(model.temperature)
        return Spread(bands, temperature=temperature, tempco=dict(model.tempco) or None)

    # -- files -----------------------------------------------------------------------------------------
    def save(self, path: str | os.PathLike[str]) -> Path:
        """Write the analysis to `path` as JSON, atomically; return the path.

        The text goes to a temporary file in the same folder, which is then
        renamed over `path`: an interrupted save leaves the old file intact.

        See Also
        --------
        load : read it back.
        report : the same analysis as an HTML page that loads back too.
        """
        write_atomic(path, self.to_json())
        return Path(path)

    @classmethod
    def load(cls, path: str | os.PathLike[str]) -> "Analysis":
        """Read an analysis file, or the analysis embedded in a report written by :meth:`report`.

        Files over 50 MB are refused before they are parsed; everything else
        is validated (see :meth:`from_dict`).

        See Also
        --------
        save, report : what it reads.
        from_json : from text.
        """
        source = os.fspath(path)
        return cls.from_json(file_format.read_limited(source), source=source)

    def embedded_json(self) -> str:
        """The analysis JSON, escaped to sit inside an HTML ``<script>`` block."""
        return file_format.embed_safe(self.to_json())

    # -- reports ---------------------------------------------------------------------------------------
    def to_html(self) -> str:
        """The report as one self-contained HTML page (see :meth:`report`)."""
        from .report.html import html_report

        return html_report(self)

    def report(self, path: str | os.PathLike[str]) -> Path:
        """Write a self-contained, offline HTML report to `path`; return the path.

        The page holds the title and notes, the parts, the drive (in full when
        short, summarised when long), an interactive plot (bokeh, with its
        JavaScript inline), the derivations as MathML, the settling table, with a
        spread the tolerance study (the spread, the passing fraction, the per-segment
        study table, a histogram and the yield against the sample delay of the worst
        segment, its budget, the worst unit), the cautions, the package version and
        date, and the analysis itself, so
        that :meth:`load` can read the report back.  Needs bokeh
        (``pip install firstorder[widgets]``).

        See Also
        --------
        to_html : the page as text.
        markdown : for lab records.
        """
        write_atomic(path, self.to_html())
        return Path(path)

    def markdown(self, derivations: bool = True) -> str:
        """A Markdown summary for lab records (derivations as LaTeX display math)."""
        from .report.markdown import markdown_report

        return markdown_report(self, derivations=derivations)

    # -- display -----------------------------------------------------------------------------------------
    def _repr_html_(self) -> str:
        from ._html import table
        from .report.tables import summary_rows

        caption = f"Analysis: {self._title}" if self._title else "Analysis"
        return table(["", ""], summary_rows(self), caption=caption)

    def __repr__(self) -> str:
        parts = ", ".join(p.name for p in self._fixture.parts if not p.is_source)
        return (
            f"Analysis({self._title!r}, {len(self._drive)} segments, fixture {parts}; "
            f"start {self._initial!r})"
        )

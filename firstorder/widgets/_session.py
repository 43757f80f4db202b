"""BenchSession: the one observable state of a Bench (traitlets, no UI).

An edit (a part value, a setup field, the drive table, a generated drive, a
drag) goes one way: read the text, build the new fixture or drive (the layers
below validate it), compute the response once and the settling table once,
and only then replace the last good state, one assignment per trait inside
one held notification, so every observer fires once and sees the whole new
state.  A refused edit records its error by field and changes nothing else.
A large lot's study runs on a worker thread (:mod:`._lot_work`): the edit's other
results are replaced at once, ``studying`` tells how far the study is, and its answer
replaces ``study`` and ``study_table`` when it is done, unless a newer edit came first.

The results and the edited inputs are read-only traits: observe them, or
``traitlets.dlink`` from them.  The view span, the selected segment, the probe
watched and the curves shown are for anyone to set (or ``traitlets.link``): a
second view or a dashboard can drive them.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass, replace
from typing import Any, Callable

import numpy as np
import traitlets

from ..drive import Drive
from ..errors import InputError
from ..fixture import Fixture
from ..netlist import SOURCE_UNITS
from ..response import COMPONENTS, Response, read_initial
from ..settling.table import SettlingSummary, table_summary
from ..settling.tolerance import Tolerance, parse_tolerance, tolerance_text
from ..studies.study import Study
from ..units import format_value
from ._drive_table import DriveText
from ._fields import MeasuredTrace, PartField, Residual, checked_segment, checked_view, labelled, part_fields, read_delay
from ._generators import generated_drive
from ._lot import LotInputs, is_lot_key, lot_inputs, lot_texts, read_lot
from ._lot_work import LotAsk, LotWorker, Studying, locked, lot_errors, lot_figures

__all__ = ["BenchSession", "MeasuredTrace", "PartField", "Residual", "SETUP_KEYS", "TOLERANCE_UNIT", "UNDO_DEPTH",
           "part_fields"]

#: How many edits `undo` can take back.
UNDO_DEPTH = 50
#: The setup fields, by key.
SETUP_KEYS = ("initial", "tolerance", "sample_delay")
#: The error key of a tolerance whose unit is not that of the quantity shown (shown beside
#: the tolerance field; not a refused entry, so undo does not stop at it).
TOLERANCE_UNIT = "tolerance unit"
#: Errors that are no refused entry (undo does not stop at them): the settling table's, the
#: tolerance's unit, and the study's (a part edit the lot's spread cannot take, say).
RESULT_ERRORS = frozenset({"settling", TOLERANCE_UNIT, "study"})
#: Curves shown when a session opens; the rest are one click away.
DEFAULT_CURVES = ("total", "forced")
#: The key of a change that starts the worker on an ask (`_replace` takes it out).
_LOT_WORK = "lot work"


# eq=False: two snapshots are the same only if they are one object (comparing their
# tables cell by cell would cost more than the edit they record).
@dataclass(frozen=True, eq=False)
class _Snapshot:
    """Everything an edit can change, so undo can put it back."""

    fixture: Fixture
    table: DriveText
    texts: dict[str, str]
    initial: float | str
    tolerance: Tolerance | None
    sample_delay: float | None
    lot: LotInputs


class BenchSession(traitlets.HasTraits):
    """The state of one Bench: last good inputs and results, errors by field, undo.

    Parameters
    ----------
    fixture : Fixture
    drive : Drive
    initial : float or str, optional
        Starting state (V or A), ``"settled"`` or ``"periodic"``.
    tolerance : Tolerance, optional
    sample_delay : float or str, optional
        Time after each change at which the reading is taken.
    trace : object, optional
        A measured waveform with ``.times``, ``.values`` and ``.name``.
    spread : Spread, optional
        The lot's spread: a study of `units` units (default 1,000) drawn with `seed`
        (default 1) is run again on every edit; `fractions` (default 0.5, 0.99, 0.999)
        are those its table reports.

    Examples
    --------
    >>> import firstorder as fo
    >>> session = BenchSession(fo.Fixture.rc(r="10k", c="100n"), fo.Drive.steps([(0, 0.0), ("1m", 5.0)], end="6m"))
    >>> session.edit_part("r", "20k"), session.edit_part("r", "twenty")
    (True, False)
    >>> print(fo.format_value(session.response.tau[0], "s"), "|", session.texts["r"], "|", session.error)
    2 ms | 20k | r (value): 'twenty' is not a number (use a float or engineering notation such as '4.7k' or '100nF')
    >>> session.undo(), session.error, session.undo(), session.texts["r"]
    (True, '', True, '10 kΩ')
    """

    fixture = traitlets.Instance(Fixture, read_only=True, help="The last good fixture")
    table = traitlets.Instance(DriveText, read_only=True, help="The last good drive as table text")
    drive = traitlets.Instance(Drive, read_only=True, help="The last good drive")
    initial = traitlets.Union([traitlets.Float(), traitlets.Unicode()], read_only=True,
                              help="Starting state: V or A, 'settled' or 'periodic'")
    tolerance = traitlets.Instance(Tolerance, allow_none=True, read_only=True,
                                   help="The tolerance as given, in its own unit (None: none); it judges the "
                                        "quantity watched only when that is in the same unit")
    sample_delay = traitlets.Float(None, allow_none=True, read_only=True,
                                   help="Time after each change at which the reading is taken (s; None: none)")
    response = traitlets.Instance(Response, read_only=True, help="The response of the last good inputs")
    settling = traitlets.Any(None, allow_none=True, read_only=True,
                             help="The settling table (pandas DataFrame; None without a tolerance)")
    summary = traitlets.Instance(SettlingSummary, allow_none=True, read_only=True, help="The settling summary")
    residual = traitlets.Instance(Residual, allow_none=True, read_only=True,
                                  help="Measured minus model at the trace's instants (None without a trace)")
    errors = traitlets.Dict(read_only=True, help="Field key to the error its last entry raised")
    notice = traitlets.Unicode("", read_only=True,
                               help="Why the last drag was refused (nothing changed, so it is no error); '' for none")
    texts = traitlets.Dict(read_only=True, help="Field key to its last good text")
    history = traitlets.Tuple(read_only=True, help="Snapshots undo can go back to, oldest first")
    view = traitlets.Tuple(traitlets.Float(), traitlets.Float(), default_value=(0.0, 1.0),
                           help="The time span shown, (start, end) in s; kept within the drive")
    segment = traitlets.Int(None, allow_none=True, help="The selected segment (None: none)")
    probe = traitlets.Unicode(None, allow_none=True, help="The probe watched (None or '': the state)")
    curves = traitlets.Tuple(help="The curves shown, in curve order")
    lot = traitlets.Instance(LotInputs, read_only=True, help="The study's spread (None: none), units, seed, fractions")
    study = traitlets.Instance(Study, allow_none=True, read_only=True, help="The study of the lot (None: no spread)")
    study_table = traitlets.Any(None, allow_none=True, read_only=True,
                                help="The study's per-segment table (Study.settling; None without a tolerance)")
    studying = traitlets.Instance(Studying, allow_none=True, read_only=True, help="The study running on the worker "
                                  "thread, and how far (None: the study and its table are of the inputs shown)")

    def __init__(self, fixture: Fixture, drive: Drive, initial: Any = 0.0, tolerance: Tolerance | None = None,
                 sample_delay: Any = None, trace: Any = None, spread: Any = None, units: Any = None,
                 seed: Any = None, fractions: Any = None) -> None:
        super().__init__()
        self.lock = threading.RLock()  # held while the state changes (the worker's answers too)
        self._worker = LotWorker(self._deliver, self._progress)
        if not isinstance(fixture, Fixture):
            raise InputError(f"Bench fixture: {fixture!r} is not a firstorder Fixture")
        if not isinstance(drive, Drive):
            raise InputError(f"Bench drive: {drive!r} is not a firstorder Drive")
        if tolerance is not None and not isinstance(tolerance, Tolerance):
            raise InputError(f"Bench tolerance: {tolerance!r} is not a firstorder Tolerance (or None)")
        unit = fixture.state_unit
        start = read_initial(initial, unit)
        delay = read_delay(sample_delay)
        lot = lot_inputs(fixture, spread, units, seed, fractions)
        self.trace = None if trace is None else MeasuredTrace.read(trace)
        sources = tuple(p.name for p in fixture.sources)
        switches = tuple(p.name for p in fixture.switches)
        table = DriveText.from_drive(drive, sources + switches, frozenset(switches),
                                     {p.name: SOURCE_UNITS[p.kind] for p in fixture.sources})
        response = fixture.respond(drive, start)
        texts = {field.key: field.text for field in part_fields(fixture)}
        texts.update(initial=initial if isinstance(initial, str) else format_value(start, unit, digits=6),
                     tolerance=tolerance_text(tolerance),
                     # As typed: the saved analysis keeps the text the field shows.
                     sample_delay="" if delay is None else sample_delay.strip() if isinstance(sample_delay, str)
                     else format_value(delay, "s", digits=6))
        texts.update(lot_texts(fixture, lot.spread, lot.units))
        with self.hold_trait_notifications():
            for name, value in dict(fixture=fixture, table=table, drive=drive, initial=start, tolerance=tolerance,
                                    sample_delay=delay, response=response, texts=texts, lot=lot).items():
                self.set_trait(name, value)
            self.view = (float(drive.start), float(drive.end))
            self.curves = DEFAULT_CURVES
        # refuse "": a study that cannot be built refuses the Bench at once (a large one's error shows later).
        self._replace(self._results(response, tolerance, delay, None, residual=True, errors={}, build=True, refuse=""))
        if self.trace is not None and self.trace.name in {p.name for p in fixture.probes}:
            self.probe = self.trace.name  # a trace of a probe is compared with that probe

    # -- reading ---------------------------------------------------------------------------------
    @property
    def error(self) -> str:
        """Every current error, one per line (``""`` when all is well)."""
        return "\n".join(self.errors.values())

    @property
    def value_unit(self) -> str:
        """The unit of the quantity watched: the state's, or the probe's."""
        return self.unit_of(self.probe)

    def quantity(self, probe: str | None = None) -> str:
        """The quantity `probe` shows (the storage element's state for None), as Show names it."""
        if probe:
            unit = self.unit_of(probe)
            return f"probe {probe} (a {'current' if unit == 'A' else 'voltage'}, in {unit})"
        storage = self.fixture.storage
        return (f"the voltage across {storage.name} (in V)" if storage.kind == "capacitor"
                else f"the current through {storage.name} (in A)")

    def unit_of(self, probe: str | None) -> str:
        """The unit of what `probe` shows (the state's for None)."""
        if probe:
            return next(p.unit for p in self.fixture.probes if p.name == probe)
        return self.fixture.state_unit

    def judged(self, tolerance: Tolerance | None, probe: str | None) -> Tolerance:
        """`tolerance` as it judges what `probe` shows: a share of each step judges any
        quantity; a limit in V or A only a quantity in that unit (refused naming both)."""
        unit = self.unit_of(probe)
        if tolerance is None or tolerance.unit == unit or tolerance.kind == "relative":
            return tolerance and tolerance.in_unit(unit)
        kind = "current" if tolerance.unit == "A" else "voltage"
        raise InputError(
            f"tolerance: {tolerance_text(tolerance)} is a {kind} limit, but Show is on {self.quantity(probe)}; "
            f"type a tolerance in {unit}, or show a {kind}")

    @property
    def samples_at_end(self) -> bool:
        """True when some segments are shorter than the sample delay: those are judged at their end."""
        return self.short_segments.size > 0

    @property
    def short_segments(self) -> np.ndarray:
        """The segments shorter than the sample delay, each sampled at its end (none without a delay)."""
        if self.sample_delay is None:
            return np.zeros(0, dtype=np.intp)
        return np.flatnonzero(self.drive.durations < self.sample_delay)

    @property
    def curve_names(self) -> tuple[str, ...]:
        """Every curve that can be shown: the components, then each source's contribution."""
        return COMPONENTS + tuple(p.name for p in self.fixture.sources)

    # -- edits (each returns True when accepted) -------------------------------------------------------
    def edit_part(self, key: str, text: str) -> bool:
        """A part value typed into field `key` (a switch's ``"k1.r_on"`` or ``"k1.r_off"``)."""
        if key not in self.texts or key in SETUP_KEYS or is_lot_key(key):
            fields = [k for k in self.texts if k not in SETUP_KEYS and not is_lot_key(k)]
            raise InputError(f"edit_part: {key!r} is not a part field; fields are {fields}")
        name, _, which = key.partition(".")
        texts = {key: text}
        if which:
            texts = {f"{name}.r_on": self.texts[f"{name}.r_on"], f"{name}.r_off": self.texts[f"{name}.r_off"], **texts}
            value: Any = (texts[f"{name}.r_on"], texts[f"{name}.r_off"])
        else:
            value = text
        return self._edit(key, lambda: {"fixture": self.fixture.with_values(**{name: value})}, texts=texts)

    def edit_setup(self, key: str, text: str) -> bool:
        """A setup field typed: ``"initial"``, ``"tolerance"`` or ``"sample_delay"``."""
        readers: dict[str, Callable[[], dict]] = {
            "initial": lambda: {"initial": labelled("initial", read_initial, text, self.fixture.state_unit)},
            "tolerance": lambda: {"tolerance": parse_tolerance(text, unit=self.value_unit)},
            "sample_delay": lambda: {"sample_delay": read_delay(text)},
        }
        if key not in readers:
            raise InputError(f"edit_setup: {key!r} is not a setup field; fields are {list(SETUP_KEYS)}")
        return self._edit(key, readers[key], texts={key: text})

    def edit_spread(self, key: str, text: str) -> bool:
        """A Spread field typed: a band (``"band r"``, ``"band k1.r_on"``, ``"band vin.gain"``;
        empty: the quantity does not vary), ``"lot temperature"``, ``"lot tempco"`` or ``"lot units"``."""
        if key not in self.texts or not is_lot_key(key):
            raise InputError(f"edit_spread: {key!r} is not a Spread field; fields are "
                             f"{[k for k in self.texts if is_lot_key(k)]}")
        lot = self.lot
        order = () if lot.spread is None else lot.spread.keys  # the draws' order stays
        return self._edit(key, lambda: {"lot": read_lot({**self.texts, key: text}, self.fixture, lot.seed,
                                                        lot.fractions, order)}, texts={key: text})

    def edit_table(self, columns: dict[str, list], end: str | None = None) -> bool:
        """The drive table's text as typed (only the cells that changed are read again)."""
        return self._edit("drive", lambda: {"table": self.table.with_text(columns, end=end)})

    def add_row(self) -> bool:
        """Append a change at the end of the drive."""
        return self._edit("drive", lambda: {"table": self.table.add_row()}, reset_view=True)

    def insert_row(self, row: int) -> bool:
        """Insert a change before `row`, halfway from the one before."""
        return self._edit("drive", lambda: {"table": self.table.insert_row(row)}, reset_view=True)

    def duplicate_row(self, row: int) -> bool:
        """Repeat `row` halfway to the next change."""
        return self._edit("drive", lambda: {"table": self.table.duplicate_row(row)}, reset_view=True)

    def delete_row(self, row: int) -> bool:
        """Remove the change in `row`."""
        return self._edit("drive", lambda: {"table": self.table.delete_row(row)}, reset_view=True)

    def set_drive(self, drive: Drive) -> bool:
        """Replace the drive (undoable); it must have the same columns."""
        table = self.table
        if not isinstance(drive, Drive):
            raise InputError(f"set_drive: {drive!r} is not a firstorder Drive")
        if set(drive.names) != set(table.names):
            raise InputError(f"set_drive: columns {list(drive.names)} differ from the fixture's {list(table.names)}")
        return self._edit("drive", lambda: {"table": DriveText.from_drive(drive, table.names, table.switches,
                                                                          table.units)}, reset_view=True)

    def generate(self, kind: str, column: str, fields: dict[str, str], columns: dict[str, str]) -> bool:
        """Replace the drive by a generated one (:func:`._generators.generated_drive`):
        ``kind`` ``"pattern"`` (levels, dwells, repeats), ``"staircase"`` (levels, dwell) or
        ``"ramp"`` (from, to, steps, dwell, and back) on source `column`; every other column
        from its own text in `columns` (one value, or one per level), none inherited."""
        table = self.table
        try:
            made = generated_drive(kind, column, fields, columns, table.names, table.switches, table.units,
                                   float(self.drive.start))
            made_table = DriveText.from_drive(made, table.names, table.switches, table.units)
        except ValueError as error:
            self._set_error("generator", str(error))
            return False
        self._set_error("generator", None)
        return self._edit("drive", lambda: {"table": made_table}, reset_view=True)

    def drag(self, column: str, times: Any, levels: Any) -> bool:
        """Drag handles moved to (`times`, `levels`) on `column`; False (and the drive as it
        was) when they do not match the drive's rows or the move is refused."""
        times, levels = np.asarray(times, dtype=float), np.asarray(levels, dtype=float)
        if column not in self.table.names or times.size != len(self.drive) or levels.size != len(self.drive):
            return False
        if (times == self.drive.times).all() and (levels == self.drive.levels(column)).all():
            return False
        span = self.view[1] - self.view[0]
        try:
            table = self.table.dragged(column, times, levels, span)
        except ValueError as error:
            # The drive stays as it was and the handles go back: nothing is invalid, so this
            # is a notice beside the drive, not an error; the next accepted edit clears it.
            self.set_trait("notice", f"drag: {error}")
            return False
        return self._edit("drive", lambda: {"table": table}, reset_view=True)

    def set_view(self, start: Any, end: Any) -> None:
        """Show the time span [start, end] (s); it is kept within the drive."""
        self.view = checked_view(start, end, self.drive)

    def select_segment(self, segment: int | None) -> None:
        """Select `segment` (None: no selection)."""
        self.segment = checked_segment(segment, self.drive)

    def undo(self) -> bool:
        """Take back the last edit; False when there is nothing to take back.

        A refused entry (one showing an error) is the last edit: undo first
        puts back the last good text; the edit before it needs another undo.
        """
        if set(self.errors) - RESULT_ERRORS:
            self._restore(self._snapshot())
            return True
        if not self.history:
            return False
        snapshot = self.history[-1]
        self._restore(snapshot, history=self.history[:-1])
        return True

    def analysis(self, title: str = "", notes: str = ""):
        """The last good fixture, drive, start, tolerance and sample delay as an :class:`~firstorder.Analysis`.

        The sample delay is kept as typed (``"800u"``), one for every segment: a
        segment shorter than it is sampled at its end, in the analysis as here
        (:func:`~firstorder.settling.table.sample_delays`, the one rule).
        """
        from ..analysis import Analysis

        tolerance = self.judged(self.tolerance, None)  # an analysis judges the state
        typed = self.texts.get("sample_delay", "").strip()
        delay: Any = None if self.sample_delay is None else (typed or self.sample_delay)
        initial = self.texts.get("initial", "").strip() or self.initial  # as typed, too
        lot = self.lot
        study = {} if lot.spread is None else dict(spread=lot.spread, units=lot.units, seed=lot.seed,
                                                   fractions=lot.fractions)
        return Analysis(self.fixture, self.drive, initial=initial, tolerance=tolerance,
                        sample_delay=delay, title=title, notes=notes, **study)

    def load(self, fixture: Fixture, drive: Drive, initial: float | str, tolerance: Tolerance | None,
             sample_delay: float | None, texts: dict[str, str], lot: LotInputs | None = None) -> None:
        """Every input at once (an analysis file read back, :mod:`._files` checks it; `lot`, its
        study or none); undoable."""
        table = DriveText.from_drive(drive, self.table.names, self.table.switches, self.table.units)
        lot = lot or LotInputs(None, self.lot.units, self.lot.seed, self.lot.fractions)
        texts = {**self.texts, **texts, **lot_texts(fixture, lot.spread, lot.units)}
        snapshot = _Snapshot(fixture, table, texts, initial, tolerance, sample_delay, lot)
        self._restore(snapshot, history=(*self.history, self._snapshot())[-UNDO_DEPTH:])

    def wait_study(self, timeout: float | None = None) -> bool:
        """Wait for the study running on the worker thread (``studying``) and apply it here;
        False when `timeout` (s) passes first.  A newer edit meanwhile would have replaced it."""
        return self._worker.wait(timeout)

    # -- the one path of an edit ----------------------------------------------------------------------
    @locked
    def _edit(self, key: str, make: Callable[[], dict[str, Any]], texts: dict[str, str] | None = None,
              reset_view: bool = False) -> bool:
        """Build the new inputs with `make`, compute their results, and replace the state;
        on a ValueError from any layer (a Spread entry the study cannot take, too) record it
        under `key` and change nothing else."""
        try:
            if texts is not None and all(self.texts.get(k) == v for k, v in texts.items()):
                return self._unchanged(key)
            inputs = make()
            if set(inputs) == {"table"} and inputs["table"].same_text(self.table):
                return self._unchanged(key)
            if "table" in inputs:
                inputs["drive"] = inputs["table"].to_drive()
            fixture = inputs.get("fixture", self.fixture)
            drive, initial = inputs.get("drive", self.drive), inputs.get("initial", self.initial)
            changed_response = bool({"fixture", "drive", "initial"} & inputs.keys())
            response = fixture.respond(drive, initial) if changed_response else self.response
            changes = dict(inputs, response=response)
            changes.update(self._results(response, inputs.get("tolerance", self.tolerance),
                                         inputs.get("sample_delay", self.sample_delay), self.probe,
                                         residual=changed_response, errors={k: v for k, v in self.errors.items() if k != key},
                                         build=changed_response or "lot" in inputs,
                                         refuse=key if "lot" in inputs else None,
                                         inputs=(fixture, drive, initial, inputs.get("lot", self.lot))))
        except ValueError as error:
            self._set_error(key, str(error))
            return False
        changes["texts"] = {**self.texts, **(texts or {})}
        changes["notice"] = ""
        changes["history"] = (*self.history, self._snapshot())[-UNDO_DEPTH:]
        if "drive" in inputs:
            changes.update(self._placed(drive, reset_view))
        self._replace(changes)
        return True

    def _unchanged(self, key: str) -> bool:
        # The last good text again (or the table the browser was just sent, sent back):
        # no new state and nothing for undo, but a refused entry there is now fixed.
        if key in self.errors:
            self._set_error(key, None)
        return True

    def _results(self, response: Response, tolerance: Tolerance | None, sample_delay: float | None,
                 probe: str | None, residual: bool, errors: dict[str, str], build: bool = False,
                 refuse: str | None = None, inputs: tuple | None = None) -> dict[str, Any]:
        """The settling table and its summary, the lot's figures of `inputs` (fixture, drive, start, lot; default
        the current ones: :meth:`_lot_results`), with `residual` the trace's residual, and `errors` with the
        settling's and the study's own errors in place of the last ones."""
        table = summary = problem = mismatch = None
        try:
            tolerance = self.judged(tolerance, probe)
        except InputError as error:
            tolerance, mismatch = None, str(error)
        if tolerance is not None:
            try:
                # One delay for every segment: a shorter segment is sampled at its end (sample_delays).
                table = response.settling(tolerance, sample_delay=sample_delay, probe=probe)
                summary = table_summary(table)
            except ValueError as error:
                problem = str(error)
        errors = {k: v for k, v in errors.items() if k not in ("settling", TOLERANCE_UNIT)}
        if problem:
            errors["settling"] = problem
        if mismatch:
            errors[TOLERANCE_UNIT] = mismatch
        fixture, drive, initial, lot = inputs or (self.fixture, self.drive, self.initial, self.lot)
        ask = LotAsk(fixture, drive, initial, lot, build, None if build else self.study,
                     None if problem else tolerance, sample_delay, probe, refuse)
        results = {"settling": table, "summary": summary, **self._lot_results(ask, errors)}
        if residual:
            results["residual"] = self._residual(response, probe)
        return results

    def _lot_results(self, ask: LotAsk, errors: dict[str, str]) -> dict[str, Any]:
        """The lot's figures for `ask` at once, or the ask for the worker (the last figures
        stay, marked by ``studying``, until its answer is applied)."""
        pending = self._worker.pending
        if pending is not None and pending.build and not ask.build:
            ask = replace(ask, build=True, study=None)  # the study to ask again is still being built
        if ask.background:
            return {"errors": lot_errors(errors, ask, None), _LOT_WORK: ask}
        figures = lot_figures(ask)
        if figures.refused:
            raise InputError(figures.error)
        self._worker.supersede()  # this answer is newer than any the worker has yet to give
        return {"study": figures.study, "study_table": figures.table, "studying": None,
                "errors": lot_errors(errors, ask, figures)}

    @locked
    def _deliver(self, job, figures) -> None:
        """The worker's answer to `job`, applied unless a newer ask replaced it (on the kernel's thread)."""
        if not self._worker.is_current(job):
            return
        self._worker.finish(job)
        ask = job.ask
        if figures.refused and ask.refuse:
            # The Spread entry is refused, as in line: back to the state before it, its error beside it (and
            # the figures that edit had replaced asked for again, if they were not done either).
            last = self.history[-1]
            self._replace({"lot": last.lot, "texts": dict(last.texts), "history": self.history[:-1], "studying": None,
                           "errors": {**self.errors, ask.refuse: figures.error}, _LOT_WORK: job.previous})
        else:
            self._replace({"study": figures.study, "study_table": figures.table, "studying": None,
                           "errors": lot_errors(self.errors, ask, figures)})

    @locked
    def _progress(self, job, studying: Studying) -> None:
        if self._worker.is_current(job):
            self.set_trait("studying", studying)

    def _residual(self, response: Response, probe: str | None) -> Residual | None:
        trace = self.trace
        if trace is None:
            return None
        within = (trace.times >= response.drive.start) & (trace.times <= response.drive.end)
        times = trace.times[within]
        residual = trace.values[within] - response.evaluate(times, ("total",), probe)["total"]
        rms = float(np.sqrt(np.mean(residual ** 2))) if residual.size else math.nan
        return Residual(times, residual, rms)

    def _placed(self, drive: Drive, reset_view: bool) -> dict[str, Any]:
        """The view and selection for a new drive: the view kept within it (the whole drive
        after a structural edit), a selection past its end dropped."""
        view = (float(drive.start), float(drive.end)) if reset_view else checked_view(*self.view, drive)
        segment = self.segment if self.segment is not None and self.segment < len(drive) else None
        return {"view": view, "segment": segment}

    @locked
    def _replace(self, changes: dict[str, Any]) -> None:
        # Held: every trait takes its new value before any observer runs, so an observer of
        # the response already sees the settling table that goes with it.
        ask = changes.pop(_LOT_WORK, None)
        if ask is not None:
            changes["studying"] = self._worker.start(ask)
        with self.hold_trait_notifications():
            for name, value in changes.items():
                self.set_trait(name, value)

    @locked
    def _set_error(self, key: str, message: str | None) -> None:
        errors = {k: v for k, v in self.errors.items() if k != key or message}
        if message:
            errors[key] = message
        self.set_trait("errors", errors)

    def _snapshot(self) -> _Snapshot:
        return _Snapshot(self.fixture, self.table, dict(self.texts), self.initial, self.tolerance, self.sample_delay,
                         self.lot)

    @locked
    def _restore(self, snapshot: _Snapshot, history: tuple | None = None) -> None:
        tolerance = snapshot.tolerance
        drive = snapshot.table.to_drive()
        response = snapshot.fixture.respond(drive, snapshot.initial)
        lot = snapshot.lot
        changes = dict(fixture=snapshot.fixture, table=snapshot.table, drive=drive, initial=snapshot.initial,
                       tolerance=tolerance, sample_delay=snapshot.sample_delay, response=response,
                       texts=dict(snapshot.texts), notice="", lot=lot)
        # Undo clears every refused entry: the fields go back to their last good text.
        changes.update(self._results(response, tolerance, snapshot.sample_delay, self.probe, residual=True, errors={},
                                     build=True, inputs=(snapshot.fixture, drive, snapshot.initial, lot)))
        if history is not None:
            changes["history"] = history
        changes.update(self._placed(drive, reset_view=True))
        self._replace(changes)

    # -- what anyone may set ---------------------------------------------------------------------------
    @traitlets.validate("view")
    def _validate_view(self, proposal):
        try:
            return checked_view(*proposal.value, self.drive)
        except InputError as error:
            raise traitlets.TraitError(str(error)) from None

    @traitlets.validate("segment")
    def _validate_segment(self, proposal):
        try:
            return checked_segment(proposal.value, self.drive)
        except InputError as error:
            raise traitlets.TraitError(str(error)) from None

    @traitlets.validate("probe")
    def _validate_probe(self, proposal):
        name = proposal.value or None
        probes = [p.name for p in self.fixture.probes]
        if name is not None and name not in probes:
            raise traitlets.TraitError(f"probe: {name!r} is not a probe of the fixture; probes are {probes}")
        return name

    @traitlets.validate("curves")
    def _validate_curves(self, proposal):
        names = self.curve_names
        unknown = [name for name in proposal.value if name not in names]
        if unknown:
            raise traitlets.TraitError(f"curves: {unknown} are not curves; curves are {list(names)}")
        return tuple(name for name in names if name in proposal.value)

    @traitlets.observe("probe")
    @locked
    def _observe_probe(self, change) -> None:
        # The same limit, judging what is now watched if it is in the same unit (_results).
        self._replace(self._results(self.response, self.tolerance, self.sample_delay, change["new"], residual=True,
                                    errors=self.errors))

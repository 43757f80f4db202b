"""The Bench's lot work: a small study in line, a large one on one worker thread.

An edit asks for the lot's figures (:class:`LotAsk`): the study (built again, or the
last one asked again) and its per-segment table.  :func:`lot_figures` answers, the same
code whichever thread runs it.  A study of at most :data:`BACKGROUND_ELEMENTS`
unit-segments is answered at once, on the caller's thread, as the edit's other results
are; a larger one goes to :class:`LotWorker`, whose single thread runs one ask at a time
while the controls stay live.

Three rules hold the background path together:

* the newest ask wins: each ask starts a new generation; the worker's older job is told to
  stop between chunks (its :func:`~firstorder.studies.progress.each_chunk` listener
  raises) and a result of an older generation is never applied;
* progress is the study's own: after each chunk, the fraction of the ask's passes over
  the units done (building the study, then its table);
* a result, a progress step or an error goes back to the kernel's thread before any trait
  or widget changes (:func:`kernel_handback`, the one place for that rule): bokeh's
  documents and ipywidgets' comms are changed by one thread only.
"""

from __future__ import annotations

import asyncio
import functools
import math
import sys
import threading
from collections.abc import Callable
from concurrent.futures import CancelledError, Future, ThreadPoolExecutor
from concurrent.futures import TimeoutError as FutureTimeout
from dataclasses import dataclass
from typing import Any

from ..drive import Drive
from ..fixture import Fixture
from ..settling.tolerance import Tolerance
from ..studies.progress import each_chunk
from ..studies.study import CHUNK_ELEMENTS, Study
from ._lot import LotInputs, make_study

__all__ = ["BACKGROUND_ELEMENTS", "STEP_ELEMENTS", "LotAsk", "LotFigures", "LotWorker", "Studying", "kernel_handback",
           "locked", "lot_errors", "lot_figures"]

#: Unit-segments above which a study runs on the worker thread.  A study and its table
#: take about 80 ms per million unit-segments on the benchmark machine (2 cores; build
#: about 55 %, table 45 %, both warm), so 2**20 keeps an edit's lot work within about a
#: tenth of a second: a thousand units of a thousand changes (``benchmarks/bench_lot.py``)
#: still answer in line, with the edit, and anything larger shows its progress instead.
BACKGROUND_ELEMENTS = 2 ** 20
#: Unit-segments per chunk of a study on the worker: its progress steps and the points at
#: which a newer edit stops it (4 to 16 steps of some 20 to 40 ms for the Bench's sizes).
STEP_ELEMENTS = 2 ** 20
#: The share of a background ask's time its build takes, against its table (measured as above).
_BUILD_SHARE = 0.6


@dataclass(frozen=True)
class LotAsk:
    """What the lot's figures are asked for: the inputs, whether the study is built again
    (`build`; else `study` is asked again), the table's question (no table without a
    `tolerance`, already judged against what is watched) and, for a Spread field's edit,
    the field whose entry a study that cannot be built refuses (`refuse`)."""

    fixture: Fixture
    drive: Drive
    initial: Any
    lot: LotInputs
    build: bool
    study: Study | None
    tolerance: Tolerance | None
    sample_delay: float | None
    probe: str | None
    refuse: str | None = None

    @property
    def elements(self) -> int:
        """Unit-segments of the study (0 without a spread)."""
        return 0 if self.lot.spread is None else self.lot.units * len(self.drive)

    @property
    def background(self) -> bool:
        """True when the worker thread answers: more than :data:`BACKGROUND_ELEMENTS`
        unit-segments of work (a study past the Bench's size is refused at once, in line)."""
        work = self.elements if self.build else (self.elements if self.study is not None and self.tolerance else 0)
        return BACKGROUND_ELEMENTS < work <= CHUNK_ELEMENTS


@dataclass(frozen=True)
class LotFigures:
    """The answer to a :class:`LotAsk`: the study (None: none), its table (None: no
    tolerance, or an error), the study's error as text, and whether that error refuses
    the ask's Spread entry."""

    study: Study | None
    table: Any
    error: str | None = None
    refused: bool = False


@dataclass(frozen=True)
class Studying:
    """A study running on the worker: its size and the fraction done (0 to 1).

    Examples
    --------
    >>> print(Studying(20_000, 200, 0.357))
    Studying 20,000 units × 200 segments… 35 %
    """

    units: int
    segments: int
    done: float = 0.0

    def __str__(self) -> str:
        return f"Studying {self.units:,} units × {self.segments:,} segments… {math.floor(self.done * 100)} %"


def lot_figures(ask: LotAsk) -> LotFigures:
    """The study of `ask` (built when asked, on the worker in chunks of about
    :data:`STEP_ELEMENTS` unit-segments) and its table; a ValueError of either as text."""
    study = ask.study
    if ask.build:
        try:
            chunk = max(1, STEP_ELEMENTS // max(len(ask.drive), 1)) if ask.background else None
            study = make_study(ask.fixture, ask.drive, ask.initial, ask.lot, chunk=chunk)
        except ValueError as error:
            return LotFigures(None, None, str(error), ask.refuse is not None)
    if study is None or ask.tolerance is None:
        return LotFigures(study, None)
    try:
        # One delay for every segment, as the nominal table (sample_delays).
        table = study.settling(ask.tolerance, sample_delay=ask.sample_delay, probe=ask.probe,
                               fractions=ask.lot.fractions)
    except ValueError as error:
        return LotFigures(study, None, str(error))
    return LotFigures(study, table)


def lot_errors(errors: dict[str, str], ask: LotAsk, figures: LotFigures | None) -> dict[str, str]:
    """`errors` with the study's own: the last one dropped when the study was built again
    or is there to answer (without one, the error of building it stays until the next
    build), the answer's added; `figures` None while the worker answers."""
    done = figures is not None and figures.study is not None
    kept = {k: v for k, v in errors.items() if not (k == "study" and (ask.build or done))}
    if figures is not None and figures.error:
        kept["study"] = figures.error
    return kept


def kernel_handback() -> Callable[[Callable[[], None]], None] | None:
    """Where the worker's results are applied, chosen on the caller's (the kernel's) thread:
    the IPython kernel's IO loop (``io_loop.add_callback``, safe from any thread), else the
    asyncio loop running on this thread (``call_soon_threadsafe``), else None: no loop runs
    (plain Python, tests), and the worker applies them itself under the session's lock.

    The one rule for it: ipywidgets sends a trait change on a comm from the thread that
    made it, jupyter_bokeh sends a document change as several messages (its header,
    metadata, content and buffers), and bokeh's documents are not locked outside a bokeh
    server; so only the thread that runs the kernel's cells and comm messages changes them.
    """
    ipython = sys.modules.get("IPython")
    shell = ipython.get_ipython() if ipython is not None and hasattr(ipython, "get_ipython") else None
    loop = getattr(getattr(shell, "kernel", None), "io_loop", None)
    if loop is not None:
        return loop.add_callback
    try:
        return asyncio.get_running_loop().call_soon_threadsafe
    except RuntimeError:
        return None


def locked(method: Callable) -> Callable:
    """`method` under its object's ``lock``: an edit and an answer the worker applies never interleave.

    Examples
    --------
    >>> class Counter:
    ...     def __init__(self):
    ...         self.lock, self.count = threading.RLock(), 0
    ...     @locked
    ...     def add(self):
    ...         self.count += 1
    ...         return self.count
    >>> Counter().add()
    1
    """
    @functools.wraps(method)
    def run(self, *args, **kwargs):
        with self.lock:
            return method(self, *args, **kwargs)
    return run


class _Superseded(Exception):
    """Raised between chunks of a job a newer ask replaced: the job stops there."""


class _Job:
    """One background ask: its generation, its future, where its results go and how far it is."""

    def __init__(self, ask: LotAsk, generation: int, previous: LotAsk | None,
                 handback: Callable[[Callable[[], None]], None] | None) -> None:
        self.ask, self.generation, self.previous, self.handback = ask, generation, previous, handback
        self.stop = threading.Event()
        self.applied = False
        self.future: Future | None = None
        passes = [share for share, present in ((_BUILD_SHARE, ask.build), (1 - _BUILD_SHARE, ask.tolerance is not None))
                  if present]
        self._passes, self._pass, self._before = [share / sum(passes) for share in passes], 0, 0.0

    def done(self, done: int, total: int) -> float:
        """The fraction of the job done after `done` of `total` chunks of its current pass."""
        share = self._passes[min(self._pass, len(self._passes) - 1)]
        fraction = self._before + share * done / total
        if done >= total:
            self._pass, self._before = self._pass + 1, fraction
        return min(fraction, 1.0)


class LotWorker:
    """A session's one worker thread for large studies (started on the first one).

    Parameters
    ----------
    apply : callable
        ``apply(job, figures)`` on the kernel's thread (:func:`kernel_handback`) with a
        job's answer; it applies it only while ``is_current(job)``.
    report : callable
        ``report(job, studying)`` with a :class:`Studying` after each chunk, likewise.
    """

    def __init__(self, apply: Callable[[Any, LotFigures], None], report: Callable[[Any, Studying], None]) -> None:
        self._apply, self._report = apply, report
        self._executor: ThreadPoolExecutor | None = None
        self._lock = threading.Lock()
        self._generation = 0
        self._job: _Job | None = None

    @property
    def pending(self) -> LotAsk | None:
        """The ask the worker runs (or will), until its answer is applied; None when idle."""
        job = self._job
        return job.ask if job is not None and not job.applied else None

    def is_current(self, job: _Job) -> bool:
        """True while `job` is the newest ask and its answer is not yet applied."""
        return job is self._job and job.generation == self._generation and not job.applied

    def finish(self, job: _Job) -> None:
        """Mark `job`'s answer applied (the worker is idle again)."""
        job.applied = True

    def supersede(self) -> None:
        """A newer answer replaces the pending one: its job stops at its next chunk and is never applied."""
        with self._lock:
            self._generation += 1
            job, self._job = self._job, None
        if job is not None:
            job.stop.set()
            if job.future is not None:
                job.future.cancel()  # not yet started: it never runs

    def start(self, ask: LotAsk) -> Studying:
        """Run `ask` on the worker (after the pending job stops); the progress to show now."""
        handback = kernel_handback()
        previous = self.pending
        self.supersede()
        with self._lock:
            job = _Job(ask, self._generation, previous, handback)
            self._job = job
            if self._executor is None:
                self._executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="firstorder-lot")
            job.future = self._executor.submit(self._run, job)
        return Studying(ask.lot.units, len(ask.drive))

    def wait(self, timeout: float | None = None) -> bool:
        """Wait for the pending job and apply its answer on this thread; False on `timeout` (s)."""
        job = self._job
        if job is None or job.applied or job.future is None:
            return True
        try:
            figures = job.future.result(timeout)
        except FutureTimeout:
            return False
        except CancelledError:
            return True
        if figures is not None:
            self._apply(job, figures)
        return True

    def _run(self, job: _Job) -> LotFigures | None:
        """The job on the worker thread: its figures, or None once superseded."""
        ask = job.ask

        def step(done: int, total: int) -> None:
            if job.stop.is_set():
                raise _Superseded
            studying = Studying(ask.lot.units, len(ask.drive), job.done(done, total))
            self._hand(job, lambda: self._report(job, studying))

        try:
            with each_chunk(step):
                figures = lot_figures(ask)
        except _Superseded:
            return None
        except Exception as error:  # noqa: BLE001 - a defect's message still reaches the Spread tab
            figures = LotFigures(None, None, f"study: {type(error).__name__}: {error}")
        if job.stop.is_set():
            return None
        self._hand(job, lambda: self._apply(job, figures))
        return figures

    @staticmethod
    def _hand(job: _Job, call: Callable[[], None]) -> None:
        if job.handback is not None:
            job.handback(call)
            return
        with each_chunk(None):  # applied here: what it asks of a study is not this job's progress
            call()

    def close(self) -> None:
        """Stop the pending job and let the thread end."""
        self.supersede()
        if self._executor is not None:
            self._executor.shutdown(wait=False, cancel_futures=True)

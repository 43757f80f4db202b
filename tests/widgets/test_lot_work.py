"""Tests for firstorder.widgets._lot_work: a large lot's study on the worker thread while the
controls stay live.  The newest edit wins (an older result is never applied; the final
table equals a study of the final inputs run apart, ``fx.study(...).settling(...)``),
progress reaches 100 %, an error raised on the worker shows beside its field as a
synchronous one does (the studies layer's own error for the same inputs), undo, save and
the report behave meanwhile, the small path stays in line, and results go back through
the kernel's loop.

Waits are on events and futures with a bound (:data:`WAIT`), never on a sleep.  A test
that must see the state between an edit and the worker's answer runs inside an asyncio
loop: the answer is then handed back through the loop, as in a kernel, and is applied
only when the test awaits.
"""

from __future__ import annotations

import asyncio
import html
import json
import sys
import threading
import types

import numpy as np
import pandas as pd
import pytest

import firstorder as fo
from firstorder.widgets import Bench
from firstorder.widgets import _lot_work
from firstorder.widgets import _panels as panels
from firstorder.widgets._lot import LotInputs
from firstorder.widgets._lot_work import BACKGROUND_ELEMENTS, LotAsk, LotWorker, kernel_handback

from benches import rc_drive, rc_fixture

TOLERANCE = fo.Tolerance.absolute("1m")
SPREAD = fo.Spread({"r": "5%", "c": "3%"})
UNITS, SEED = 800, 4  # 800 units x 3 segments: past the small budget below, a few chunks on the worker
WAIT = 120.0  # s: how long a test waits for the worker before it fails (a bound, not a measurement)


@pytest.fixture
def small_budget(monkeypatch):
    """Studies past 2,000 unit-segments go to the worker, in chunks of 500 (166 units of
    the 3-segment drive: 5 chunks of 800 units), so a test's lot is small and quick."""
    monkeypatch.setattr(_lot_work, "BACKGROUND_ELEMENTS", 2_000)
    monkeypatch.setattr(_lot_work, "STEP_ELEMENTS", 500)


def lot_bench(**kwargs) -> Bench:
    options = dict(tolerance=TOLERANCE, spread=SPREAD, units=UNITS, seed=SEED)
    return Bench(rc_fixture(), rc_drive(), **{**options, **kwargs})


def fresh_table(r: str = "10k", drive=None, spread=SPREAD, units=UNITS, **options):
    """The lot's table from a study run apart: the outside check of every answer here."""
    study = rc_fixture().with_values(r=r).study(drive or rc_drive(), spread, units=units, seed=SEED)
    return study.settling(TOLERANCE, **options)


async def studied(session) -> None:
    """Let the loop run until the worker's answer is applied (``studying`` back to None)."""
    if session.studying is None:
        return
    done = asyncio.Event()
    session.observe(lambda change: change["new"] is None and done.set(), names="studying")
    await asyncio.wait_for(done.wait(), WAIT)


def handbook_rc(drive: fo.Drive, tau: float, t: np.ndarray) -> np.ndarray:
    """An RC driven by piecewise constant levels from 0 V: in segment k,
    v = L_k + (v_k - L_k) e^(-(t - t_k) / tau), v_k carried from change to change (common practice)."""
    starts, levels = np.asarray(drive.times, dtype=float), np.asarray(drive.levels("vin"), dtype=float)
    at_change, v = [0.0], 0.0
    for k in range(len(starts) - 1):
        v = levels[k] + (v - levels[k]) * np.exp(-(starts[k + 1] - starts[k]) / tau)
        at_change.append(v)
    segment = np.searchsorted(starts, t, side="right") - 1
    level = levels[segment]
    return level + (np.asarray(at_change)[segment] - level) * np.exp(-(t - starts[segment]) / tau)


class TestTheWorker:
    def test_a_large_study_runs_there_while_an_edit_redraws_the_nominal_curve(self):
        # The real budget: 20,000 units of a 200-segment drive, 4 million unit-segments.
        drive = fo.Drive.pulses(period="2m", duty=0.5, high=5.0, low=0.0, count=100, name="vin")
        assert 20_000 * len(drive) > BACKGROUND_ELEMENTS

        async def run():
            bench = Bench(rc_fixture(), drive, tolerance=TOLERANCE, spread=SPREAD, units=20_000, seed=SEED)
            session = bench.session
            assert session.studying is not None and session.study is None  # open at once; the lot follows
            bench.set_view(0.0, 6e-3)
            bench.fields["r"].value = "20k"  # an edit while the study runs
            assert bench.error == "" and session.studying is not None
            data = bench.sources["total"].data
            t = np.asarray(data["t"])
            np.testing.assert_allclose(data["y"], handbook_rc(drive, 20e3 * 100e-9, t), rtol=1e-9, atol=1e-9)
            await studied(session)
            pd.testing.assert_frame_equal(session.study_table, fresh_table("20k", drive, units=20_000))
            assert session.study.fixture.part_map["r"].value == 20e3 and bench.error == ""

        asyncio.run(run())

    def test_a_finished_but_superseded_answer_is_never_applied(self, small_budget):
        async def run():
            bench = lot_bench()
            session = bench.session
            await studied(session)
            applied = []
            session.observe(lambda change: applied.append(change["new"]), names="study")
            bench.fields["r"].value = "12k"
            older = session._worker._job
            assert older.future.result(WAIT) is not None  # computed; its answer waits for the loop
            bench.fields["r"].value = "15k"  # newer inputs before the loop ran
            await studied(session)
            assert len(applied) == 1 and applied[0].fixture.part_map["r"].value == 15e3
            pd.testing.assert_frame_equal(session.study_table, fresh_table("15k"))

        asyncio.run(run())

    def test_a_superseded_job_stops_at_its_next_chunk(self, small_budget):
        first_chunk, superseded = threading.Event(), threading.Event()
        reports, applied = [], []

        def ask(units):
            return LotAsk(rc_fixture(), rc_drive(), 0.0, LotInputs(SPREAD, units, SEED, (0.5, 0.99)), True, None,
                          TOLERANCE, None, None)

        first, second = ask(UNITS), ask(900)

        def report(job, studying):  # no loop runs here: on the worker thread
            reports.append((job.ask is first, studying.done))
            if job.ask is first:
                first_chunk.set()
                assert superseded.wait(WAIT)

        def apply(job, figures):
            if worker.is_current(job):
                worker.finish(job)
                applied.append((job.ask, figures))

        worker = LotWorker(apply, report)
        worker.start(first)
        assert first_chunk.wait(WAIT)
        worker.start(second)
        superseded.set()
        assert worker.wait(WAIT)
        worker.close()
        assert [a for a, _ in applied] == [second]
        assert [done for old, done in reports if old] == [pytest.approx(0.6 / 5)]  # one chunk of five, no more
        pd.testing.assert_frame_equal(applied[0][1].table, fresh_table(units=900, fractions=(0.5, 0.99)))

    def test_progress_reaches_100_percent(self, small_budget):
        bench = lot_bench()
        assert bench.wait_study(WAIT)  # the study of the Bench as opened
        seen = []
        bench.session.observe(lambda change: seen.append(change["new"]), names="studying")
        bench.fields["c"].value = "120n"
        assert bench.wait_study(WAIT)
        done = [s.done for s in seen if s is not None]
        assert seen[-1] is None and done[-1] == 1.0 and done == sorted(done)
        assert len(done) == 1 + 5 + 5  # the start, then each chunk built and each chunk of the table
        assert str(seen[-2]) == f"Studying {UNITS} units × 3 segments… 100 %"
        assert bench.lot_progress.box.layout.display == "none"  # hidden again

    def test_the_small_path_stays_in_line(self):
        bench = lot_bench(units=300)
        seen = []
        bench.session.observe(lambda change: seen.append(change["new"]), names="studying")
        bench.fields["r"].value = "12k"
        assert seen == [] and bench.session.studying is None and bench.session._worker._executor is None
        pd.testing.assert_frame_equal(bench.session.study_table, fresh_table("12k", units=300))


class TestErrorsFromTheWorker:
    def test_a_spread_entry_the_draws_refuse_shows_beside_its_field(self, small_budget):
        bench = lot_bench()
        assert bench.wait_study(WAIT)
        study = bench.session.study
        bench.spread_fields["band r"].value = "normal 40%"  # read fine; some units draw r <= 0
        assert bench.wait_study(WAIT)
        with pytest.raises(ValueError) as alone:  # the same inputs, studied in line by the studies layer
            rc_fixture().study(rc_drive(), fo.Spread({"r": fo.Normal("40%"), "c": "3%"}), units=UNITS, seed=SEED)
        message = str(alone.value)
        assert message.startswith("spread r: unit ") and "must be > 0" in message
        assert bench.session.errors == {"band r": message}
        assert html.escape(message) in bench._field_errors["band r"].value
        # Refused as in line: the last good spread, study and text stay; the entry is left to fix.
        assert bench.session.study is study and bench.session.lot.spread == SPREAD
        assert bench.session.texts["band r"] == "±5%" and bench.spread_fields["band r"].value == "normal 40%"
        assert bench.undo() and bench.error == "" and bench.spread_fields["band r"].value == "±5%"

    def test_a_part_value_the_spread_cannot_take_shows_the_studys_error(self, small_budget):
        bench = lot_bench(spread=fo.Spread({"r": "2k"}))
        assert bench.wait_study(WAIT)
        bench.fields["r"].value = "1.5k"
        assert bench.wait_study(WAIT)
        with pytest.raises(ValueError) as alone:
            rc_fixture().with_values(r="1.5k").study(rc_drive(), fo.Spread({"r": "2k"}), units=UNITS, seed=SEED)
        assert bench.session.errors == {"study": str(alone.value)} and bench.session.study is None
        assert html.escape(str(alone.value)) in bench.spread_panel.status.value
        assert bench.fixture.part_map["r"].value == 1.5e3  # the part edit is kept

    def test_a_defect_on_the_worker_is_not_lost(self, small_budget, monkeypatch):
        bench = lot_bench()
        assert bench.wait_study(WAIT)

        def broken(*args, **kwargs):
            raise RuntimeError("a defect")

        monkeypatch.setattr(_lot_work, "make_study", broken)
        bench.fields["r"].value = "12k"
        assert bench.wait_study(WAIT)
        assert bench.session.errors == {"study": "study: RuntimeError: a defect"}
        assert "a defect" in bench.spread_panel.status.value


class TestMeanwhile:
    def test_undo_during_a_study_studies_the_inputs_it_puts_back(self, small_budget):
        async def run():
            bench = lot_bench()
            await studied(bench.session)
            bench.fields["r"].value = "12k"
            assert bench.session.studying is not None and bench.undo()
            await studied(bench.session)
            assert bench.fixture.part_map["r"].value == 10e3
            pd.testing.assert_frame_equal(bench.session.study_table, fresh_table("10k"))

        asyncio.run(run())

    def test_save_and_report_hold_the_inputs_shown_not_the_running_study(self, small_budget, tmp_path):
        async def run():
            bench = lot_bench()
            await studied(bench.session)
            bench.fields["r"].value = "12k"
            assert bench.session.studying is not None  # the study of 12 kΩ still runs
            # The file holds inputs only: the new value and the lot's settings, no result of any study.
            saved = bench.save_analysis(tmp_path / "during.json")
            analysis = fo.Analysis.load(saved)
            assert analysis.fixture.part_map["r"].value == 12e3
            assert analysis.study_settings == {"spread": SPREAD, "units": UNITS, "seed": SEED,
                                               "fractions": (0.5, 0.99, 0.999)}
            assert "worst_unit" not in json.dumps(json.loads((tmp_path / "during.json").read_text()))
            # The report studies those inputs itself: complete, whatever the Bench's study has done.
            report = (tmp_path / "during.html")
            bench.report(report)
            expected = fresh_table("12k")
            assert f"{expected.attrs['passing']} of {UNITS} have every sample inside" in report.read_text()
            assert bench.session.studying is not None  # the report did not wait for it
            await studied(bench.session)
            pd.testing.assert_frame_equal(bench.session.study_table, expected)

        asyncio.run(run())

    def test_the_lots_views_say_they_are_updating(self, small_budget):
        async def run():
            bench = lot_bench(sample_delay="2m")
            await studied(bench.session)
            bench.select_segment(1)
            plots, figures = bench.plots, bench.study_figures
            bench.tabs.selected_index = panels.TAB_TITLES.index("Settling")  # its figures drawn from the study
            bench.fields["r"].value = "12k"
            studying = str(bench.session.studying)
            assert studying == f"Studying {UNITS} units × 3 segments… 0 %"
            assert bench.lot_progress.box.layout.display is None and studying in bench.lot_progress.label.value
            assert plots.mark_items["envelope"].label.value.endswith("(updating)")
            assert plots.band_renderers["envelope"].muted
            bench.tabs.selected_index = panels.TAB_TITLES.index("Settling")
            assert "Updating" in bench.study_panel.value and studying in bench.study_panel.value
            assert figures.counts.title.text.startswith("(updating")
            assert all(r.muted for r in figures.counts.renderers)
            bench.tabs.selected_index = panels.TAB_TITLES.index("Error view")
            assert not lot_dashes(bench) and "being recomputed" in bench.error_view.children[0].value
            await studied(bench.session)
            assert bench.lot_progress.box.layout.display == "none"
            assert not plots.mark_items["envelope"].label.value.endswith("(updating)")
            assert not plots.band_renderers["envelope"].muted and len(lot_dashes(bench)) == 4
            bench.tabs.selected_index = panels.TAB_TITLES.index("Settling")
            assert "Updating" not in bench.study_panel.value
            assert not figures.counts.title.text.startswith("(") and not any(r.muted for r in figures.counts.renderers)

        asyncio.run(run())


def lot_dashes(bench) -> list:
    """The Error view's lot marks (a dash per sample for each fraction of units and the worst unit)."""
    from bokeh.models import Scatter

    figure = bench.error_view.children[-1]._model
    return [r for r in figure.renderers if isinstance(r.glyph, Scatter) and r.glyph.marker == "dash"]


class TestHandback:
    def test_the_kernels_io_loop_first(self, monkeypatch):
        calls = []
        loop = types.SimpleNamespace(add_callback=calls.append)
        shell = types.SimpleNamespace(kernel=types.SimpleNamespace(io_loop=loop))
        monkeypatch.setitem(sys.modules, "IPython", types.SimpleNamespace(get_ipython=lambda: shell))
        assert kernel_handback() == loop.add_callback

    def test_else_a_running_asyncio_loop_else_none(self, monkeypatch):
        monkeypatch.setitem(sys.modules, "IPython", types.SimpleNamespace(get_ipython=lambda: None))

        async def inside():
            return kernel_handback(), asyncio.get_running_loop()

        handback, loop = asyncio.run(inside())
        assert handback == loop.call_soon_threadsafe
        assert kernel_handback() is None  # plain Python: the worker applies its answers itself

"""BenchSession: the Bench's state as traitlets; validation, undo, linking, and what one edit costs.

Numbers are checked against handbook formulas (common practice): tau = R C;
a first-order step is within `tol` of its final value after tau ln(step / tol).
"""

from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest
import traitlets

import firstorder as fo
import firstorder.response
import firstorder.segments
import firstorder.settling.table
from firstorder.widgets import BenchSession
from firstorder.widgets._session import UNDO_DEPTH

from benches import rc_drive, rc_fixture, switched_bench, switched_drive, switched_fixture


def rc_session(**kwargs) -> BenchSession:
    return BenchSession(rc_fixture(), rc_drive(), **kwargs)


class Dashboard(traitlets.HasTraits):
    """Another widget's state, to link to the session (a stand-in for a dashboard)."""

    span = traitlets.Tuple(traitlets.Float(), traitlets.Float(), default_value=(0.0, 1.0))
    watched = traitlets.Unicode(None, allow_none=True)
    result = traitlets.Any()


class TestImport:
    def test_the_session_loads_no_ui_library(self):
        # A dashboard may hold a session without the Bench: traitlets, not ipywidgets or bokeh.
        code = ("import sys\nfrom firstorder.widgets import BenchSession\n"
                "print(sorted(m for m in ('bokeh', 'ipywidgets', 'jupyter_bokeh') if m in sys.modules))")
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
        assert out.strip() == "[]"


class TestValidation:
    def test_a_refused_part_value_leaves_the_last_good_state(self):
        session = rc_session(tolerance=fo.Tolerance.absolute("10m"))
        before = {name: getattr(session, name) for name in ("fixture", "response", "settling", "summary", "history")}
        texts = dict(session.texts)
        assert not session.edit_part("r", "-4.7k")
        assert "must be > 0" in session.errors["r"]
        for name, value in before.items():
            assert getattr(session, name) is value, name
        assert session.texts == texts

    def test_a_refused_drive_leaves_the_drive(self):
        session = rc_session()
        table, drive = session.table, session.drive
        columns = table.as_columns()
        columns["time"][1] = "9m"
        assert not session.edit_table(columns)
        assert "time order" in session.errors["drive"]
        assert session.table is table and session.drive is drive

    def test_an_accepted_edit_clears_its_error_only(self):
        session = rc_session()
        session.edit_part("r", "x")
        session.edit_setup("initial", "warm")
        assert set(session.errors) == {"r", "initial"}
        assert session.edit_part("r", "20k")
        assert set(session.errors) == {"initial"}
        assert session.response.tau[0] == pytest.approx(2e-3)  # tau = R C (common practice)

    def test_edits_and_views_are_checked(self):
        session = rc_session()
        with pytest.raises(ValueError, match="not a part field"):
            session.edit_part("tolerance", "1m")
        with pytest.raises(ValueError, match="must be later than start"):
            session.set_view(2e-3, 1e-3)
        with pytest.raises(traitlets.TraitError, match="segments are 0 to 2"):
            session.segment = 3
        with pytest.raises(traitlets.TraitError, match="probes are"):
            session.probe = "v_out"
        with pytest.raises(traitlets.TraitError, match="read-only"):
            session.fixture = rc_fixture()
        session.view = (-1.0, 4e-3)  # kept within the drive
        assert session.view == (0.0, 4e-3)
        session.curves = ("natural", "total")  # kept in curve order
        assert session.curves == ("total", "natural")


class TestGenerators:
    """Counts are read as the field shows them, and sized before anything is built."""

    FIELDS = {"levels": "0, 1", "dwells": "1m"}

    @pytest.mark.parametrize("count", ["\u00b2", "\u0663", "0", "-3", "4.0", "1e3", ""])
    def test_a_count_that_is_no_whole_number_is_refused_beside_the_field(self, count):
        session = rc_session()
        drive = session.drive
        assert not session.generate("pattern", "vin", dict(self.FIELDS, repeats=count), {})
        assert "repeated pattern: repeats" in session.errors["generator"]
        assert "whole number" in session.errors["generator"]
        assert session.drive is drive

    @pytest.mark.parametrize("count", ["2000000", "100000000", "9" * 400])
    def test_a_count_past_the_benchs_size_is_refused_before_any_work(self, count, monkeypatch):
        session = rc_session()
        called = []
        monkeypatch.setattr("firstorder.widgets._generators.Drive", lambda *args, **kwargs: called.append(kwargs))
        assert not session.generate("pattern", "vin", dict(self.FIELDS, repeats=count), {})
        assert "at most 1,000,000" in session.errors["generator"] and not called

    def test_a_count_within_the_size_is_generated(self):
        session = rc_session()
        assert session.generate("pattern", "vin", dict(self.FIELDS, repeats="3"), {})
        assert len(session.drive) == 6 and "generator" not in session.errors


class TestUndo:
    def test_undo_restores_the_state_before_the_edit(self):
        session = rc_session(tolerance=fo.Tolerance.absolute("10m"))
        fixture, texts = session.fixture, dict(session.texts)
        settle = session.settling["settle_time"].to_numpy()
        session.edit_part("c", "220n")
        session.edit_setup("sample_delay", "2m")
        assert session.undo() and session.undo()
        assert session.fixture is fixture and session.texts == texts and session.sample_delay is None
        np.testing.assert_array_equal(session.settling["settle_time"].to_numpy(), settle)
        assert not session.undo()

    def test_a_refused_entry_is_undone_first(self):
        session = rc_session()
        session.edit_part("r", "20k")
        session.edit_part("r", "twenty")
        assert session.undo()
        assert session.error == "" and session.texts["r"] == "20k"
        assert session.undo()
        assert session.texts["r"] == "10 kΩ"

    def test_history_is_bounded(self):
        session = rc_session()
        for k in range(UNDO_DEPTH + 5):
            session.edit_part("r", f"{10 + k}k")
        assert len(session.history) == UNDO_DEPTH
        for _ in range(UNDO_DEPTH):
            assert session.undo()
        assert not session.undo()
        # The newest UNDO_DEPTH snapshots stay: the oldest is the state before edit 5, after edit 4 (14k).
        assert session.texts["r"] == "14k"


class TestObservers:
    def test_one_edit_notifies_each_trait_once_with_the_whole_new_state(self):
        session = rc_session(tolerance=fo.Tolerance.absolute("10m"), sample_delay="2m")
        seen: list[str] = []
        consistent: list[bool] = []

        def on_change(change):
            seen.append(change["name"])
            # Held notifications: the table already belongs to the new response.
            consistent.append(np.array_equal(session.settling["final"].to_numpy(), session.response.final))

        session.observe(on_change)
        session.edit_part("r", "20k")
        assert sorted(seen) == sorted(set(seen))
        assert {"fixture", "response", "settling", "summary", "texts", "history"} <= set(seen)
        assert all(consistent)

    def test_a_linked_dashboard_follows_and_leads(self):
        session = rc_session(tolerance=fo.Tolerance.absolute("1u"))
        dashboard = Dashboard()
        traitlets.link((session, "view"), (dashboard, "span"))
        traitlets.link((session, "probe"), (dashboard, "watched"))
        traitlets.dlink((session, "settling"), (dashboard, "result"))
        session.set_view(1e-3, 2e-3)
        assert dashboard.span == (1e-3, 2e-3)
        dashboard.span = (2e-3, 20.0)
        assert session.view == (2e-3, 8e-3)  # clipped to the drive
        session.edit_part("r", "1k")
        assert dashboard.result is session.settling
        # tau = 0.1 ms: the 5 V step at 1 ms is within 1 µV after tau ln(5 / 1e-6) (common practice)
        assert dashboard.result.loc[1, "settle_time"] == pytest.approx(1e-4 * math.log(5 / 1e-6), rel=1e-12)

    def test_a_linked_probe_brings_its_own_table(self):
        session = BenchSession(switched_fixture(), switched_drive(), tolerance=fo.Tolerance.relative("1m"))
        dashboard = Dashboard()
        traitlets.link((dashboard, "watched"), (session, "probe"))
        dashboard.watched = "i_rs"
        # A share of each step is one for any quantity: the table is the probe's, in amps.
        assert session.settling.attrs["watched"] == "probe 'i_rs'"
        assert session.summary.unit == "A"


class TestWhatOneEditCosts:
    def test_a_part_edit_builds_one_response_one_table_and_probe_rows_once(self, monkeypatch):
        bench = switched_bench(tolerance=fo.Tolerance.absolute("1u", unit="A"), sample_delay="0.8m")
        bench.probe_selector.value = "i_rs"
        counts = {"response": 0, "settling table": 0, "probe rows": 0, "evaluate": 0}

        def counted(what, function):
            def wrapper(*args, **kwargs):
                counts[what] += 1
                return function(*args, **kwargs)
            return wrapper

        monkeypatch.setattr(firstorder.response.Response, "__init__",
                            counted("response", firstorder.response.Response.__init__))
        monkeypatch.setattr(firstorder.response.Response, "evaluate",
                            counted("evaluate", firstorder.response.Response.evaluate))
        monkeypatch.setattr(firstorder.settling.table, "settling_table",
                            counted("settling table", firstorder.settling.table.settling_table))
        # Probe rows are built per switch configuration; Segments.probe_rows keeps them.
        monkeypatch.setattr(firstorder.segments, "probe_row", counted("probe rows", firstorder.segments.probe_row))
        bench.fields["rs"].value = "2.2k"
        assert bench.error == ""
        configurations = len(bench.response.configurations)
        assert configurations == 2
        assert counts["response"] == 1 and counts["settling table"] == 1
        assert counts["probe rows"] <= configurations
        # The curves are evaluated once; the bands, sample and settle marks come from the table.
        assert counts["evaluate"] == 1
        assert len(bench.sources["samples"].data["t"]) == 4 and len(bench.sources["settle"].data["t"]) >= 1

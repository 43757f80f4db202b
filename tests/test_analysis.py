"""Tests for firstorder.analysis: an analysis made, saved, loaded and replaced keeps every number."""

from __future__ import annotations

import os

import numpy as np
import pytest
from builders import (
    general_analysis,
    general_drive,
    general_fixture,
    valid_data,
    write_json,
)
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import firstorder as fo
from firstorder.analysis import Analysis
from firstorder.io import atomic


def assert_same_response(a: Analysis, b: Analysis) -> None:
    assert np.array_equal(a.response.boundary, b.response.boundary)
    assert np.array_equal(a.response.tau, b.response.tau)
    t = np.linspace(a.drive.start, a.drive.end, 997)
    for component in ("total", "zero_input", "zero_state", "forced", "natural"):
        assert np.array_equal(a.response.evaluate(t, (component,))[component],
                              b.response.evaluate(t, (component,))[component])
    for probe in a.fixture.probes:
        assert np.array_equal(a.response.probe(probe.name, t), b.response.probe(probe.name, t))


class TestAnalysis:
    def test_response_is_the_fixtures(self):
        a = general_analysis()
        direct = general_fixture().respond(general_drive(), "settled")
        assert np.array_equal(a.response.boundary, direct.boundary)

    def test_rc_step_matches_handbook_formula(self):
        # v(t) = V (1 - exp(-t / RC)) for a step into an RC from rest (handbook formula).
        a = Analysis(fo.Fixture.rc(r="10k", c="100n"), fo.Drive.steps([(0, 2.0)], end="5m"))
        t = np.linspace(0, 5e-3, 51)
        assert np.allclose(a.response.total(t), 2.0 * (1 - np.exp(-t / 1e-3)), rtol=1e-12, atol=1e-15)

    def test_one_delay_longer_than_a_dwell_samples_it_at_its_end_and_is_kept_as_typed(self, tmp_path):
        # One delay for every segment (sample_delays, the one rule): segment 2 lasts 500 µs,
        # shorter than the 800 µs typed, so it is sampled at its end; the file keeps "800u".
        a = general_analysis(sample_delay="800u")
        table = a.settling()
        ends, starts = table["end"].to_numpy(), table["start"].to_numpy()
        expected = np.minimum(starts + 800e-6, ends)  # the earlier of the delay and the segment's end
        np.testing.assert_allclose(table["sample_time"].to_numpy(), expected, rtol=0, atol=1e-15)
        assert table["sample_time"].to_numpy()[2] == ends[2]
        again = Analysis.load(a.save(tmp_path / "a.json"))
        assert again.sample_delay == "800u"
        np.testing.assert_array_equal(again.settling()["sample_time"].to_numpy(), table["sample_time"].to_numpy())

    def test_keeps_a_copy_of_the_fixture(self):
        fx = fo.Fixture.rc(r="10k", c="100n")
        a = Analysis(fx, fo.Drive.steps([(0, 1.0)], end="5m"))
        fx.resistor("r_extra", "out", "gnd", "1k")
        assert [p.name for p in a.fixture.parts] == ["vin", "r", "c"]

    @pytest.mark.parametrize(
        "changes, match",
        [
            ({"fixture": "rc"}, "fixture: expected a firstorder.Fixture"),
            ({"drive": [0, 1]}, "drive: expected a firstorder.Drive"),
            ({"tolerance": 1e-3}, "tolerance: expected a firstorder.Tolerance"),
            ({"title": 5}, "title: expected text"),
            ({"tolerance": fo.Tolerance.absolute("1m", unit="A")}, "tolerance.unit"),
            ({"sample_delay": "-1u"}, "sample_delay: '-1u' is not allowed for segment 0; a sample delay is a finite time >= 0"),
            ({"sample_delay": [0.0, 1e-3]}, "sample_delay: got 2 delays for 4 segments"),
            ({"sample_delay": [0.0, 1e-3, 0.6e-3, 0.0]}, r"sample_delay\[2\]: 0.0006 is past the end of segment 2, which lasts 500 µs"),
            ({"sample_delay": np.array([0.0, 1e-3, 0.6e-3, 0.0])}, r"sample_delay\[2\]: 0.0006 is past the end"),
            ({"sample_delay": np.array([0.0, -1e-3, 0.0, 0.0])}, r"sample_delay\[1\]: -0.001 is not allowed for segment 1"),
            ({"sample_delay": [0.0, 0.0, float("nan"), 0.0]}, r"sample_delay\[2\]: nan is not allowed"),
            ({"initial": "sometimes"}, "initial: 'sometimes' is not allowed"),
            ({"initial": object()}, "initial"),
        ],
    )
    def test_bad_arguments_name_the_field(self, changes, match):
        with pytest.raises(fo.InputError, match=match):
            general_analysis(**changes)

    def test_settling_needs_a_tolerance(self):
        with pytest.raises(fo.InputError, match="no tolerance"):
            general_analysis(tolerance=None).settling()

    def test_replace(self):
        a = general_analysis()
        b = a.replace(title="other", initial=0.5)
        assert (b.title, b.initial, a.title) == ("other", 0.5, "Hold capacitor behind a relay (invented)")
        with pytest.raises(fo.InputError, match="colour"):
            a.replace(colour="red")

    def test_notebook_display(self):
        html = general_analysis(title="<b>bold</b>")._repr_html_()
        assert "Analysis: &lt;b&gt;bold&lt;/b&gt;" in html and "time constant (k1 closed)" in html

    def test_derivations_follow_first_use(self):
        states = [s for s, _ in general_analysis().derivations()]
        assert states == [(True,), (False,)]
        assert [s for s, _ in general_analysis().derivations(limit=1)] == [(True,)]


class TestSaveLoad:
    def test_round_trip_gives_identical_response(self, tmp_path):
        a = general_analysis()
        path = a.save(tmp_path / "a.json")
        b = Analysis.load(path)
        assert_same_response(a, b)
        assert b.fixture.parts == a.fixture.parts
        assert b.fixture.probes == a.fixture.probes
        assert b.drive == a.drive
        assert (b.initial, b.tolerance, b.sample_delay, b.title, b.notes) == (
            a.initial, a.tolerance, a.sample_delay, a.title, a.notes)
        b.save(tmp_path / "b.json")
        assert (tmp_path / "a.json").read_bytes() == (tmp_path / "b.json").read_bytes()

    @pytest.mark.parametrize("tolerance", [
        fo.Tolerance.absolute("50u"), fo.Tolerance.relative(0.01), fo.Tolerance.ppm(10, "10 V"),
        fo.Tolerance.lsb(bits=12, span=2.5, fraction=0.25), None,
    ])
    @pytest.mark.parametrize("initial", [0.0, "1.5", -2, "settled", "periodic"])
    def test_round_trip_tolerances_and_starts(self, tmp_path, tolerance, initial):
        a = general_analysis(tolerance=tolerance, initial=initial, sample_delay=None)
        b = Analysis.load(a.save(tmp_path / "a.json"))
        assert b.tolerance == tolerance and b.initial == initial
        assert_same_response(a, b)

    def test_round_trip_inductor_and_delay_per_segment(self, tmp_path):
        fx = fo.Fixture.rl(r="47", l="10m")
        fx.probe("v_l", node="out")
        drive = fo.Drive.pulses(period="2m", duty=0.25, high="12", count=3)
        delays = [float(d) for d in drive.durations * 0.9]
        a = Analysis(fx, drive, initial="periodic", tolerance=fo.Tolerance.absolute("1m", unit="A"),
                     sample_delay=delays)
        b = Analysis.load(a.save(tmp_path / "coil.json"))
        assert b.sample_delay == delays and b.tolerance.unit == "A"
        assert_same_response(a, b)

    def test_loads_hand_written_text_values(self, tmp_path):
        data = valid_data()
        data["drive"] = {"times": ["0", "1m", "3 ms", 0.0035], "end": "6m",
                         "columns": {"vdac": [0, "2.5", -1.2, -1.2], "ibias": [0, 0, "1u", 0],
                                     "k1": [True, True, False, 1]}}
        b = Analysis.load(write_json(tmp_path / "hand.json", data))
        assert_same_response(general_analysis(), b)

    @pytest.mark.parametrize("name", ["end", "times"])
    def test_source_may_not_take_a_drive_argument_name(self, name):
        # A source named "end" could never get its drive column (Drive(times, end, **columns)),
        # so a file holding one could not be loaded; the fixture refuses the name up front.
        with pytest.raises(fo.InputError, match=f"voltage_source name: '{name}' is reserved"):
            fo.Fixture().voltage_source(name, "in", "gnd")

    @settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
    @given(
        r=st.floats(1.0, 1e7), c=st.floats(1e-12, 1e-3),
        as_text=st.booleans(),
        steps=st.lists(st.tuples(st.floats(1e-9, 1e-2), st.floats(-100, 100)), min_size=1, max_size=12),
    )
    def test_round_trip_property(self, tmp_path, r, c, as_text, steps):
        r_value = f"{r!r}" if as_text else r
        times = np.cumsum([0.0] + [d for d, _ in steps[:-1]])
        drive = fo.Drive(times, times[-1] + steps[-1][0], vin=[v for _, v in steps])
        a = Analysis(fo.Fixture.rc(r=r_value, c=c), drive, initial=steps[0][1])
        b = Analysis.from_json(a.save(tmp_path / "p.json").read_text(encoding="utf-8"))
        assert b.fixture.part_map["r"].typed == (("value", r_value),)
        assert_same_response(a, b)

    def test_from_json_takes_bytes_and_report_text(self):
        # What a notebook upload widget hands over: bytes, of a .json file or of a report.
        a = general_analysis()
        assert_same_response(a, Analysis.from_json(a.to_json().encode("utf-8")))
        assert_same_response(a, Analysis.from_json(a.to_html().encode("utf-8"), source="upload.html"))
        with pytest.raises(fo.InputError, match=r"^upload: byte 0 is not UTF-8"):
            Analysis.from_json(b"\xff{}", source="upload")

    def test_missing_file_is_an_os_error(self, tmp_path):
        with pytest.raises(FileNotFoundError):
            Analysis.load(tmp_path / "none.json")


class TestInterruptedSave:
    @pytest.mark.parametrize("failure", [OSError("disk full"), KeyboardInterrupt()])
    def test_previous_file_intact(self, tmp_path, monkeypatch, failure):
        path = tmp_path / "a.json"
        general_analysis().save(path)
        before = path.read_bytes()
        written = []

        def failing_fsync(descriptor):
            # The new text is already in the temporary file when the failure hits.
            written.append(os.fstat(descriptor).st_size)
            raise failure

        monkeypatch.setattr(atomic.os, "fsync", failing_fsync)
        with pytest.raises(type(failure)):
            general_analysis(title="a new title").save(path)
        assert written and written[0] > 0
        assert path.read_bytes() == before
        assert [p.name for p in tmp_path.iterdir()] == ["a.json"]  # no temporary left behind
        assert Analysis.load(path).title == "Hold capacitor behind a relay (invented)"


class TestSaveLimits:
    """What a save writes, a load reads: the file's limits apply when saving, with the same message."""

    @staticmethod
    def _long(kind: str) -> fo.Analysis:
        from firstorder.io import analysis_format as limits

        fx = fo.Fixture()
        name = "r" * (limits.MAX_NAME + 1) if kind == "name" else "r"
        fx.voltage_source("vin", "in", "gnd")
        value = "1" * limits.MAX_NUMBER_TEXT + "k" if kind == "value" else "1k"
        fx.resistor(name, "in", "out", value)
        fx.capacitor("c", "out", "gnd", "1u")
        drive = fo.Drive.steps([(0, 1.0)], end="5m")
        title = "t" * (limits.MAX_TITLE + 1) if kind == "title" else ""
        notes = "n" * (limits.MAX_NOTES + 1) if kind == "notes" else ""
        return fo.Analysis(fx, drive, title=title, notes=notes)

    @pytest.mark.parametrize("kind, where", [("notes", "notes"), ("title", "title"),
                                             ("name", "fixture.parts[1].name"), ("value", "fixture.parts[1].value")])
    def test_text_over_a_file_limit_is_refused_on_save_as_on_load(self, kind, where, tmp_path):
        import json

        analysis = self._long(kind)
        path = tmp_path / "a.json"
        with pytest.raises(fo.InputError) as on_save:
            analysis.save(path)
        assert not path.exists() and list(tmp_path.iterdir()) == []
        with pytest.raises(fo.InputError):
            analysis.report(tmp_path / "a.html")
        assert list(tmp_path.iterdir()) == []
        # The same text written by hand is refused on load with the same message.
        from firstorder.io.analysis_format import _dumps

        path.write_text(_dumps(analysis.to_dict()), encoding="utf-8")
        with pytest.raises(fo.InputError) as on_load:
            fo.Analysis.load(path)
        assert str(on_load.value) == f"{path}: {on_save.value}"
        assert str(on_save.value).startswith(f"{where}: is ")
        json.loads(path.read_text(encoding="utf-8"))  # the hand-written file is JSON

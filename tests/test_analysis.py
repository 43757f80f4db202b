"""Tests for firstorder.analysis: the analysis file format, save/load, and refusing bad files."""

from __future__ import annotations

import copy
import json
import math
import os

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import firstorder as fo
from firstorder.io import atomic
from firstorder.analysis import MAX_FILE_BYTES, Analysis
from firstorder.io.analysis_format import path_text


def general_fixture() -> fo.Fixture:
    """A fixture with two sources, a switch with leakage, a meter load and probes (invented)."""
    fx = fo.Fixture()
    fx.voltage_source("vdac", "drv", "gnd")
    fx.current_source("ibias", "gnd", "b")
    fx.resistor("rs", "drv", "a", "1k")
    fx.switch("k1", "a", "b", r_on="0.1", r_off="1G")
    fx.capacitor("ch", "b", "gnd", "100 nF")
    fx.resistor("rm", "b", "gnd", 10e6)
    fx.probe("v_b", node="b")
    fx.probe("v_ab", node="a", reference="b")
    fx.probe("i_rs", through="rs")
    return fx


def general_drive() -> fo.Drive:
    return fo.Drive(
        [0, "1m", "3m", "3.5m"], end="6m",
        vdac=[0, 2.5, -1.2, -1.2], ibias=[0, 0, 1e-6, 0], k1=[1, 1, 0, 1],
    )


def general_analysis(**changes) -> Analysis:
    arguments = dict(
        fixture=general_fixture(), drive=general_drive(), initial="settled",
        tolerance=fo.Tolerance.lsb(bits=16, span=5.0), sample_delay="0.4m",
        title="Hold capacitor behind a relay (invented)", notes="line one\nline two",
    )
    arguments.update(changes)
    return Analysis(**arguments)


def assert_same_response(a: Analysis, b: Analysis) -> None:
    assert np.array_equal(a.response.boundary, b.response.boundary)
    assert np.array_equal(a.response.tau, b.response.tau)
    t = np.linspace(a.drive.start, a.drive.end, 997)
    for component in ("total", "zero_input", "zero_state", "forced", "natural"):
        assert np.array_equal(a.response.evaluate(t, (component,))[component],
                              b.response.evaluate(t, (component,))[component])
    for probe in a.fixture.probes:
        assert np.array_equal(a.response.probe(probe.name, t), b.response.probe(probe.name, t))


def valid_data() -> dict:
    return json.loads(general_analysis().to_json())


def write_json(path, data) -> str:
    path.write_text(json.dumps(data), encoding="utf-8")
    return str(path)


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
            ({"sample_delay": "2m"}, "sample_delay: '2m' is past the end of segment 0, which lasts 1 ms"),
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


class TestToJson:
    def test_format_fields(self):
        data = valid_data()
        assert data["format"] == "firstorder-analysis"
        assert data["version"] == 1
        assert data["saved_with"] == f"firstorder {fo.__version__}"
        assert list(data) == ["format", "version", "saved_with", "title", "notes", "fixture", "drive",
                              "initial", "tolerance", "sample_delay"]

    def test_part_values_kept_as_typed(self):
        parts = {p["name"]: p for p in valid_data()["fixture"]["parts"]}
        assert parts["rs"]["value"] == "1k"
        assert parts["ch"]["value"] == "100 nF"
        assert parts["rm"]["value"] == 10e6
        assert (parts["k1"]["r_on"], parts["k1"]["r_off"]) == ("0.1", "1G")
        assert "value" not in parts["vdac"]

    def test_infinite_typed_value_written_as_text(self):
        fx = fo.Fixture()
        fx.voltage_source("v", "in", "gnd")
        fx.resistor("r", "in", "a", 1000)
        fx.switch("k", "a", "b")  # r_off defaults to math.inf, which JSON cannot hold
        fx.capacitor("c", "b", "gnd", 1e-9)
        a = Analysis(fx, fo.Drive([0, 1e-6], 1e-5, v=[1, 1], k=[1, 0]))
        switch = json.loads(a.to_json())["fixture"]["parts"][2]
        assert (switch["r_on"], switch["r_off"]) == (0.0, "inf")
        assert Analysis.from_json(a.to_json()).fixture.part_map["k"].r_off == math.inf

    def test_drive_floats_are_exact(self):
        times = np.cumsum(np.random.default_rng(7).uniform(1e-7, 1e-3, 50)) - 1e-7 / 3
        levels = np.random.default_rng(8).normal(size=50)
        a = Analysis(fo.Fixture.rc(r="1k", c="1n"), fo.Drive(times, times[-1] + 1e-4 / 7, vin=levels))
        drive = Analysis.from_json(a.to_json()).drive
        assert np.array_equal(drive.times, times) and np.array_equal(drive.levels("vin"), levels)
        assert drive.end == times[-1] + 1e-4 / 7

    def test_same_analysis_same_bytes(self):
        assert general_analysis().to_json() == general_analysis().to_json()

    def test_long_drive_stays_compact(self):
        n = 10_000
        a = Analysis(fo.Fixture.rc(r="1k", c="1n"), fo.Drive(np.arange(n) * 1e-6, n * 1e-6, vin=np.arange(n) % 3))
        assert a.to_json().count("\n") < 40

    def test_refuses_to_write_what_it_could_not_read(self, monkeypatch):
        monkeypatch.setattr("firstorder.io.analysis_format.MAX_FILE_BYTES", 1000)
        with pytest.raises(fo.InputError, match="more than the 0 MB|an analysis file may hold"):
            general_analysis().to_json()


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


def _set(data: dict, path: list, value) -> dict:
    data = copy.deepcopy(data)
    target = data
    for step in path[:-1]:
        target = target[step]
    target[path[-1]] = value
    return data


def _without(data: dict, path: list) -> dict:
    data = copy.deepcopy(data)
    target = data
    for step in path[:-1]:
        target = target[step]
    del target[path[-1]]
    return data


# Each case: (id, how to make the bad file from valid data, what the error must name).
MALFORMED = [
    ("truncated", lambda d: json.dumps(d)[: len(json.dumps(d)) // 2], r"line 1, column \d+: .*ends early"),
    ("empty", lambda d: "", "line 1, column 1"),
    ("top level is a list", lambda d: [d], "the top level: .* expected an object"),
    ("wrong format name", lambda d: _set(d, ["format"], "other-format"), r"format: 'other-format' is not allowed"),
    ("older version", lambda d: _set(d, ["version"], 0), "version: 0 is not a version this firstorder reads"),
    ("newer version", lambda d: _set(d, ["version"], 2), "version: 2 is newer than this firstorder reads"),
    ("version as text", lambda d: _set(d, ["version"], "1"), "version: '1' is the wrong type; expected a whole number"),
    ("version true", lambda d: _set(d, ["version"], True), "version: True is the wrong type"),
    ("unknown top-level field", lambda d: _set(d, ["colour"], "red"), "colour: is not a field of this format"),
    ("unknown part field", lambda d: _set(d, ["fixture", "parts", 2, "tolerance_pct"], 5),
     r"fixture\.parts\[2\]\.tolerance_pct: is not a field"),
    ("missing part value", lambda d: _without(d, ["fixture", "parts", 4, "value"]),
     r"fixture\.parts\[4\]\.value: is missing"),
    ("missing drive", lambda d: _without(d, ["drive"]), "drive: is missing"),
    ("value of wrong type", lambda d: _set(d, ["fixture", "parts", 2, "value"], [1000]),
     r"fixture\.parts\[2\]\.value: \[1000\] is the wrong type; expected a whole number, a number or text"),
    ("value true", lambda d: _set(d, ["fixture", "parts", 2, "value"], True), r"fixture\.parts\[2\]\.value"),
    ("negative resistance", lambda d: _set(d, ["fixture", "parts", 2, "value"], "-1k"),
     r"fixture\.parts\[2\]\.value: '-1k' must be > 0"),
    ("zero capacitance", lambda d: _set(d, ["fixture", "parts", 4, "value"], 0), r"fixture\.parts\[4\]\.value: 0 must be > 0"),
    ("capacitance in ohms", lambda d: _set(d, ["fixture", "parts", 4, "value"], "100 nΩ"),
     r"fixture\.parts\[4\]\.value: '100 nΩ' has unit 'nΩ'|fixture\.parts\[4\]\.value: .*unit"),
    ("negative r_on", lambda d: _set(d, ["fixture", "parts", 3, "r_on"], -0.1), r"fixture\.parts\[3\]\.r_on: -0.1 must be >= 0"),
    ("unknown kind", lambda d: _set(d, ["fixture", "parts", 2, "kind"], "diode"),
     r"fixture\.parts\[2\]\.kind: 'diode' is not one of"),
    ("part on one node", lambda d: _set(d, ["fixture", "parts", 2, "b"], "drv"), r"fixture\.parts\[2\]: part 'rs'"),
    ("second capacitor", lambda d: _set(d, ["fixture", "parts", 5, "kind"], "capacitor"),
     r"fixture\.parts\[5\]: not first order"),
    ("probe through nothing", lambda d: _set(d, ["fixture", "probes", 2, "through"], "r99"),
     r"fixture\.probes\[2\]: probe 'i_rs'"),
    ("no parts", lambda d: _set(d, ["fixture", "parts"], []), r"fixture\.parts: has 0 items; at least 1 are allowed"),
    ("times not a list", lambda d: _set(d, ["drive", "times"], "0, 1m"), "drive.times: '0, 1m' is the wrong type; expected a list"),
    ("times not increasing", lambda d: _set(d, ["drive", "times"], [0, 0.003, 0.001, 0.0035]),
     r"drive\.times\[2\]: 0\.001 does not come after"),
    ("end true", lambda d: _set(d, ["drive", "end"], True), "drive.end: True is the wrong type"),
    ("huge number", lambda d: json.dumps(d).replace('"end": 0.006', '"end": 1e999'), "drive.end: inf is not allowed; numbers must be finite"),
    ("NaN token", lambda d: json.dumps(d).replace('"end": 0.006', '"end": NaN'), "NaN is not allowed"),
    ("integer too long", lambda d: json.dumps(d).replace('"end": 0.006', '"end": ' + "9" * 5000), "not a readable analysis file"),
    ("column too short", lambda d: _set(d, ["drive", "columns", "vdac"], [0, 1]),
     r"drive\.columns\.vdac: has 2 values but drive\.times has 4"),
    ("column level text", lambda d: _set(d, ["drive", "columns", "vdac"], [0, "lots", 1, 1]), r"drive\.columns\.vdac\[1\]: 'lots' is not a number"),
    ("column for no part", lambda d: _set(d, ["drive", "columns", "vref"], [0, 0, 0, 0]), r"drive columns \['vref'\] name no source"),
    ("switch level 2", lambda d: _set(d, ["drive", "columns", "k1"], [1, 2, 0, 1]), r"drive\.columns\.k1\[1\]: 2\.0 is not a switch state"),
    ("too many changes", lambda d: _set(_set(d, ["drive", "times"], list(range(1_000_001))), ["drive", "columns"], {"vdac": [0]}),
     r"drive\.times: has 1000001 items; at most 1000000 are allowed"),
    ("tolerance bits 40", lambda d: _set(d, ["tolerance", "bits"], 40), "tolerance.bits: 40: Input should be less than or equal to 32"),
    ("tolerance unknown kind", lambda d: _set(d, ["tolerance"], {"kind": "percent", "value": 1}), "tolerance.kind: 'percent' is not one of"),
    ("ppm tolerance, bad span", lambda d: _set(d, ["tolerance"], {"kind": "ppm", "ppm": 10, "span": "-5 V"}),
     r"tolerance\.span: '-5 V' must be > 0"),
    ("ppm tolerance, bad ppm", lambda d: _set(d, ["tolerance"], {"kind": "ppm", "ppm": [10], "span": 5}),
     r"tolerance\.ppm: \[10\] is the wrong type"),
    ("tolerance fraction 2", lambda d: _set(d, ["tolerance", "fraction"], 2), r"tolerance\.fraction: 2 must be in \(0, 1\]"),
    ("initial unknown word", lambda d: _set(d, ["initial"], "steady"), "initial: 'steady' is not allowed"),
    ("sample delay negative", lambda d: _set(d, ["sample_delay"], "-4u"), "sample_delay: '-4u' must be >= 0"),
    ("sample delay list item", lambda d: _set(d, ["sample_delay"], [0, 0, "x", 0]), r"sample_delay\[2\]: 'x' is not a number"),
    ("duplicate field", lambda d: json.dumps(d).replace('"title":', '"notes": "a", "title":', 1), "field 'notes' appears twice"),
    ("deep nesting", lambda d: "[" * 100_000 + "]" * 100_000, "nested too deeply|the top level"),
    ("notes too long", lambda d: _set(d, ["notes"], "x" * 100_001), "notes: is 100001 characters long; at most 100000 are allowed"),
]


class TestMalformedFiles:
    @pytest.mark.parametrize("make, match", [(m, r) for _, m, r in MALFORMED], ids=[i for i, _, _ in MALFORMED])
    def test_refused_naming_the_path(self, tmp_path, make, match):
        bad = make(valid_data())
        path = tmp_path / "bad.json"
        path.write_text(bad if isinstance(bad, str) else json.dumps(bad), encoding="utf-8")
        with pytest.raises(fo.InputError, match=match) as caught:
            Analysis.load(path)
        message = str(caught.value)
        assert message.startswith(str(path)), message
        assert "\n" not in message

    def test_more_than_fifteen_cases(self):
        assert len(MALFORMED) >= 15

    def test_file_over_50_mb_refused_before_parsing(self, tmp_path, monkeypatch):
        path = tmp_path / "big.json"
        data = valid_data()
        data["notes"] = "x" * (60 * 1024 * 1024)
        path.write_text(json.dumps(data), encoding="utf-8")
        assert path.stat().st_size > 60_000_000 > MAX_FILE_BYTES
        parsed = []
        monkeypatch.setattr("firstorder.io.analysis_format.parse_json", lambda *a: parsed.append(a))
        with pytest.raises(fo.InputError, match=r"big\.json: is 62\.9 MB; an analysis file may hold at most 50 MB"):
            Analysis.load(path)
        assert parsed == []

    def test_growing_file_refused(self, tmp_path, monkeypatch):
        # A file (or device) that reports a small size but holds more is cut off at the limit.
        path = tmp_path / "a.json"
        path.write_bytes(b" " * 200)
        monkeypatch.setattr("firstorder.io.analysis_format.MAX_FILE_BYTES", 100)

        class Small:
            st_size = 10

        monkeypatch.setattr("firstorder.io.analysis_format.os.stat", lambda p: Small())
        with pytest.raises(fo.InputError, match="holds more than"):
            Analysis.load(path)

    def test_not_utf8(self, tmp_path):
        path = tmp_path / "latin.json"
        path.write_bytes(json.dumps(valid_data()).replace("line one", "l\u00e9").encode("latin-1"))
        with pytest.raises(fo.InputError, match=r"byte \d+ is not UTF-8"):
            Analysis.load(path)

    def test_html_without_analysis(self, tmp_path):
        path = tmp_path / "page.html"
        path.write_text("<!DOCTYPE html><html><body>hello</body></html>")
        with pytest.raises(fo.InputError, match="an HTML file without an embedded analysis"):
            Analysis.load(path)

    def test_from_dict_without_a_file(self):
        with pytest.raises(fo.InputError, match=r"^analysis: fixture\.parts\[2\]\.value"):
            Analysis.from_dict(_set(valid_data(), ["fixture", "parts", 2, "value"], None))


HOSTILE = "__import__('os').system('touch {marker}')"


def _string_paths(data, prefix=()):
    """Every path in `data` that holds a string."""
    if isinstance(data, dict):
        for key, value in data.items():
            yield from _string_paths(value, (*prefix, key))
    elif isinstance(data, list):
        for i, value in enumerate(data):
            yield from _string_paths(value, (*prefix, i))
    elif isinstance(data, str):
        yield prefix


def _text_data() -> dict:
    """Valid data with text in every field that may hold text, so every one gets tried."""
    data = valid_data()
    data["drive"]["times"] = ["0", "1m", "3m", "3.5m"]
    data["drive"]["end"] = "6m"
    data["drive"]["columns"]["vdac"] = ["0", "2.5", "-1.2", "-1.2"]
    data["tolerance"] = {"kind": "ppm", "ppm": "10", "span": "5 V", "unit": "V"}
    data["sample_delay"] = "0.4m"
    return data


TEXT_PATHS = list(_string_paths(_text_data()))


def _is_value_field(path) -> bool:
    """Fields whose text must be a number or a keyword, so hostile text there is refused."""
    return (path[-1] in ("format", "kind", "value", "r_on", "r_off", "end", "initial", "ppm", "span", "unit",
                         "sample_delay")
            or path[:2] in (("drive", "times"), ("drive", "columns")))


class TestNothingIsExecuted:
    def test_value_fields_are_refused(self, tmp_path):
        refused = []
        for path in filter(_is_value_field, TEXT_PATHS):
            file = write_json(tmp_path / "a.json", _set(_text_data(), list(path), HOSTILE.format(marker="x")))
            with pytest.raises(fo.InputError) as caught:
                Analysis.load(file)
            refused.append(str(caught.value).startswith(f"{file}: {path_text(list(path))}: "))
        assert len(refused) >= 25 and all(refused)

    def test_every_text_field_is_tried(self):
        assert len(TEXT_PATHS) >= 40
        for path in [("title",), ("fixture", "parts", 2, "value"), ("drive", "end"), ("tolerance", "kind"),
                     ("initial",), ("sample_delay",), ("fixture", "probes", 1, "reference")]:
            assert path in TEXT_PATHS

    @pytest.mark.parametrize("path", TEXT_PATHS, ids=[".".join(map(str, p)) for p in TEXT_PATHS])
    def test_hostile_text_is_refused_or_inert(self, tmp_path, path):
        marker = tmp_path / "pwned"
        data = _set(_text_data(), list(path), HOSTILE.format(marker=marker))
        file = write_json(tmp_path / "a.json", data)
        try:
            analysis = Analysis.load(file)
        except fo.InputError as error:
            if _is_value_field(path):
                # Refused, naming the field's own JSON path.
                assert str(error).startswith(f"{file}: {path_text(list(path))}: "), str(error)
            # A strange name or node is only text; what refuses it is the fixture no longer
            # fitting together (a node with one part, a drive column for no source).
        else:
            # Accepted as what it is: text (a title, a name).  Use it everywhere text goes.
            analysis.markdown(derivations=False)
            analysis.to_json()
        assert not marker.exists()

    def test_hostile_names_everywhere_stay_text(self, tmp_path):
        marker = tmp_path / "pwned"
        bad = HOSTILE.format(marker=marker) + "</script><script>document.title='pwned'</script>"
        fx = fo.Fixture()
        fx.voltage_source(bad + "v", bad + "n1", "gnd")
        fx.resistor(bad + "r", bad + "n1", bad + "n2", "1k")
        fx.switch(bad + "k", bad + "n2", bad + "n3", r_on="1")
        fx.capacitor(bad + "c", bad + "n3", "gnd", "1u")
        fx.probe(bad + "p", node=bad + "n2", reference=bad + "n3")
        drive = fo.Drive([0, 1e-3], 5e-3, **{bad + "v": [0, 1], bad + "k": [1, 0]})
        a = Analysis(fx, drive, title=bad, notes=bad)
        b = Analysis.load(a.save(tmp_path / "a.json"))
        assert [p.name for p in b.fixture.parts] == [p.name for p in a.fixture.parts]
        b.markdown()
        for _, derivation in b.derivations():
            derivation.latex()
        assert not marker.exists()


class TestNoEvaluation:
    def test_load_calls_no_eval_exec_pickle_or_sympy(self, tmp_path):
        # Loading is parsing and validating only: with eval and exec refusing text (imports still
        # run module code objects) and pickle refusing everything, a file with text values
        # everywhere still loads, and sympy (whose sympify evaluates text) stays unloaded.
        import subprocess
        import sys

        path = write_json(tmp_path / "a.json", _text_data())
        code = (
            "import builtins, pickle, sys\n"
            "import firstorder as fo, firstorder.io.schema\n"
            "def guard(original):\n"
            "    def run(source, *a, **k):\n"
            "        if isinstance(source, (str, bytes)):\n"
            "            raise AssertionError(f'text was evaluated: {source!r:.80}')\n"
            "        return original(source, *a, **k)\n"
            "    return run\n"
            "def refuse(*a, **k):\n"
            "    raise AssertionError('something was unpickled')\n"
            "builtins.eval, builtins.exec = guard(builtins.eval), guard(builtins.exec)\n"
            "pickle.loads = pickle.load = refuse\n"
            "a = fo.Analysis.load(sys.argv[1])\n"
            "print(len(a.drive), 'sympy' in sys.modules)\n"
        )
        result = subprocess.run([sys.executable, "-c", code, path], capture_output=True, text=True,
                                env=dict(os.environ, PYTHONPATH=os.path.dirname(os.path.dirname(fo.__file__))))
        assert result.returncode == 0, result.stderr
        assert result.stdout.split() == ["4", "False"]

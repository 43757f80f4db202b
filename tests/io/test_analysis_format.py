"""Tests for firstorder.io (analysis_format, schema) through Analysis: the file's text, every malformed
file refused by its JSON path, and nothing in a file ever run or evaluated."""

from __future__ import annotations

import copy
import json
import math
import os

import numpy as np
import pytest
from builders import (
    general_analysis,
    valid_data,
    with_value_at,
    write_json,
)

import firstorder as fo
from firstorder.analysis import MAX_FILE_BYTES, Analysis
from firstorder.io.analysis_format import path_text


_set = with_value_at


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
    ("older version", lambda d: _set(d, ["version"], 0), r"version: 0 is not a version this firstorder reads \(it reads versions 1, 2\)"),
    ("newer version", lambda d: _set(d, ["version"], 3), "version: 3 is newer than this firstorder reads"),
    ("version as text", lambda d: _set(d, ["version"], "1"), "version: '1' is the wrong type; expected a whole number"),
    ("version true", lambda d: _set(d, ["version"], True), "version: true is the wrong type"),
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
    ("end true", lambda d: _set(d, ["drive", "end"], True), "drive.end: true is the wrong type"),
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


class TestToJson:
    def test_format_fields(self):
        data = valid_data()
        assert data["format"] == "firstorder-analysis"
        assert data["version"] == 2
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

    def test_report_with_two_embedded_analyses_is_refused(self, tmp_path):
        first = Analysis.from_dict(valid_data())
        second = first.replace(title="the other one")
        page = (f'<!DOCTYPE html><html><body><script type="application/json" id="firstorder-analysis">'
                f'{first.embedded_json()}</script><script type="application/json" id="firstorder-analysis">'
                f'{second.embedded_json()}</script></body></html>')
        path = tmp_path / "two.html"
        path.write_text(page, encoding="utf-8")
        with pytest.raises(fo.InputError, match="holds 2 embedded analyses .* not clear which to read"):
            Analysis.load(path)
        # One block alone loads.
        path.write_text(page.replace(second.embedded_json(), "", 1).replace(
            '<script type="application/json" id="firstorder-analysis"></script>', ""), encoding="utf-8")
        assert Analysis.load(path).title == first.title

    def test_from_dict_without_a_file(self):
        with pytest.raises(fo.InputError, match=r"^analysis: fixture\.parts\[2\]\.value"):
            Analysis.from_dict(_set(valid_data(), ["fixture", "parts", 2, "value"], None))


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

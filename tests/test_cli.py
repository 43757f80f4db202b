"""Tests for firstorder.cli: each command as a user runs it, in a fresh interpreter."""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import firstorder as fo
from firstorder import cli
from firstorder.analysis import Analysis

ROOT = Path(__file__).resolve().parents[1]


def run(*arguments: str, cwd: Path | None = None, **variables: str) -> subprocess.CompletedProcess:
    """``python -m firstorder ...`` with this checkout on the path, as a user would run it."""
    environment = dict(os.environ, PYTHONPATH=str(ROOT), **variables)
    return subprocess.run(
        [sys.executable, "-m", "firstorder", *arguments],
        capture_output=True, text=True, env=environment, cwd=cwd, timeout=300,
    )


def assert_one_line_error(result: subprocess.CompletedProcess, *fragments: str) -> None:
    assert result.returncode == 2, result
    assert result.stderr.count("\n") == 1 and result.stderr.endswith("\n"), result.stderr
    assert "Traceback" not in result.stderr
    for fragment in fragments:
        assert fragment in result.stderr, result.stderr


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("demo") / "out"
    result = run("demo", "-o", str(folder))
    assert result.returncode == 0, result.stderr
    assert result.stdout.split() == [str(folder / "demo-analysis.json"), str(folder / "demo-report.html")]
    return folder


class TestDemo:
    def test_files_load(self, demo):
        a = Analysis.load(demo / "demo-analysis.json")
        b = Analysis.load(demo / "demo-report.html")
        assert np.array_equal(a.response.boundary, b.response.boundary)
        assert "invented" in a.title

    def test_demo_time_constant_from_the_handbook(self):
        # tau = R C with (2.2 kΩ + 0.15 Ω) ∥ 10 MΩ and 10 nF while the relay is closed (handbook).
        a = cli.demo_analysis()
        expected = (2200.15 * 10e6 / (2200.15 + 10e6)) * 10e-9
        assert a.response.tau[0] == pytest.approx(expected, rel=1e-12)

    def test_output_is_not_a_folder(self, tmp_path):
        (tmp_path / "file").write_text("x")
        assert_one_line_error(run("demo", "-o", str(tmp_path / "file")), "is not a folder")


class TestReport:
    def test_writes_report(self, demo, tmp_path):
        out = tmp_path / "r.html"
        result = run("report", str(demo / "demo-analysis.json"), "-o", str(out))
        assert result.returncode == 0, result.stderr
        assert result.stdout.strip() == str(out)
        assert Analysis.load(out).title == Analysis.load(demo / "demo-analysis.json").title

    def test_default_output_beside_input(self, demo, tmp_path):
        source = tmp_path / "bench.json"
        source.write_bytes((demo / "demo-analysis.json").read_bytes())
        assert cli.main(["report", str(source)]) == 0
        assert (tmp_path / "bench.html").exists()

    def test_refuses_to_overwrite_its_input(self, demo, tmp_path):
        report = tmp_path / "r.html"
        report.write_bytes((demo / "demo-report.html").read_bytes())
        before = report.read_bytes()
        assert cli.main(["report", str(report)]) == 2
        assert report.read_bytes() == before


class TestSettle:
    def test_table(self, demo):
        result = run("settle", str(demo / "demo-analysis.json"))
        assert result.returncode == 0, result.stderr
        lines = result.stdout.splitlines()
        assert "tolerance ±38.15 µV (½ LSB of 16 bits on 5 V)" in lines[0]
        assert lines[1].split()[:3] == ["segment", "start", "end"]
        rows = [line.split() for line in lines[2:] if line.split()[0].isdigit() and line.split()[1] != "of"]
        assert [int(row[0]) for row in rows] == [0, 1, 2, 3, 4]
        assert lines[-1].startswith("4 of 5 segments do not settle before they end; 4 fail at their sample")

    @pytest.mark.parametrize("form", ["csv", "json"])
    def test_machine_formats_match_the_library(self, demo, form):
        analysis = Analysis.load(demo / "demo-analysis.json")
        expected = analysis.settling().reset_index()
        result = run("settle", str(demo / "demo-analysis.json"), "--format", form)
        assert result.returncode == 0, result.stderr
        if form == "csv":
            table = pd.read_csv(io.StringIO(result.stdout))
        else:
            table = pd.DataFrame(json.loads(result.stdout))
        assert list(table.columns) == list(expected.columns)
        for column in expected.columns:
            if expected[column].dtype == bool:
                assert table[column].astype(bool).tolist() == expected[column].tolist()
            else:
                # Exact: CSV with 17 digits and JSON both carry every float bit for bit.
                assert np.array_equal(table[column].astype(float), expected[column].astype(float),
                                      equal_nan=True), column

    def test_needs_a_tolerance(self, tmp_path):
        path = Analysis(fo.Fixture.rc(r="1k", c="1u"), fo.Drive.steps([(0, 1.0)], end="5m")).save(tmp_path / "a.json")
        assert_one_line_error(run("settle", str(path)), "has no tolerance")


class TestDerive:
    def test_markdown(self, demo):
        result = run("derive", str(demo / "demo-analysis.json"))
        assert result.returncode == 0, result.stderr
        assert "## k_hold closed" in result.stdout and "## k_hold open" in result.stdout
        assert "**Time constant**" in result.stdout and "$$" in result.stdout

    def test_latex(self, demo):
        result = run("derive", str(demo / "demo-report.html"), "--format", "latex")
        assert result.returncode == 0, result.stderr
        assert result.stdout.count("\\begin{aligned}") == 2
        assert "c}\\_\\text{hold" in result.stdout  # underscores in captions, escaped for LaTeX


class TestDeriveOnlyWhatIsAsked:
    def test_one_segment(self, demo, capsys):
        # The demo's drive: four segments with k_hold closed, then one open.
        assert cli.main(["derive", str(demo / "demo-analysis.json"), "--segment", "4"]) == 0
        out = capsys.readouterr()
        assert "## k_hold open" in out.out and "## k_hold closed" not in out.out and out.err == ""

    def test_a_segment_that_is_not_there(self, demo, capsys):
        assert cli.main(["derive", str(demo / "demo-analysis.json"), "--segment", "5"]) == 2
        assert "--segment 5 is not a segment of the drive; segments are 0 to 4" in capsys.readouterr().err

    def test_progress_for_many_configurations(self, tmp_path, capsys):
        fx = fo.Fixture().voltage_source("vin", "in", "gnd")
        for k in range(3):
            fx.switch(f"k{k}", "in", f"n{k}", r_on="1").resistor(f"r{k}", f"n{k}", "out", f"{k + 1}k")
        fx.capacitor("c", "out", "gnd", "1n").resistor("r_leak", "out", "gnd", "1M")
        drive = fo.Drive([0, "1m", "2m", "3m", "4m"], end="5m", vin=[1.0] * 5,
                         k0=[1, 0, 0, 1, 0], k1=[0, 1, 0, 1, 1], k2=[0, 0, 1, 1, 1])
        path = Analysis(fx, drive).save(tmp_path / "many.json")
        assert cli.main(["derive", str(path)]) == 0
        out = capsys.readouterr()
        lines = out.err.splitlines()
        assert len(lines) == 5 and lines[0].startswith("firstorder derive: configuration 1 of 5 (k0 closed")
        assert out.out.count("\n## ") + out.out.startswith("## ") == 5

    def test_headings_are_text(self, tmp_path, capsys):
        fx = (fo.Fixture().voltage_source("vin", "in", "gnd").switch("<b>k*", "in", "out", r_on="1")
              .resistor("r", "in", "out", "1k").capacitor("c", "out", "gnd", "1n"))
        path = Analysis(fx, fo.Drive([0], end="1m", vin=[1.0], **{"<b>k*": [1]})).save(tmp_path / "h.json")
        assert cli.main(["derive", str(path)]) == 0
        assert capsys.readouterr().out.startswith("## &lt;b&gt;k\\* closed")


class TestErrors:
    def test_bad_file_gives_one_line(self, tmp_path):
        path = tmp_path / "bad.json"
        data = json.loads(cli.demo_analysis().to_json())
        data["fixture"]["parts"][1]["value"] = "-2.2k"
        path.write_text(json.dumps(data))
        assert_one_line_error(run("report", str(path)), "bad.json: fixture.parts[1].value: '-2.2k' must be > 0")
        assert not (tmp_path / "bad.html").exists()

    @pytest.mark.parametrize("command", ["report", "settle", "derive"])
    def test_truncated_file(self, tmp_path, command):
        path = tmp_path / "cut.json"
        path.write_text(cli.demo_analysis().to_json()[:300])
        assert_one_line_error(run(command, str(path)), "cut.json: not valid JSON at line")

    def test_missing_file(self, tmp_path):
        assert_one_line_error(run("derive", str(tmp_path / "none.json")), "none.json", "No such file")

    @pytest.mark.parametrize("arguments, fragment", [
        ([], "the following arguments are required: COMMAND"),
        (["bake"], "invalid choice: 'bake'"),
        (["settle", "a.json", "--format", "xml"], "invalid choice: 'xml'"),
        (["derive"], "the following arguments are required: analysis"),
    ])
    def test_usage_errors(self, arguments, fragment):
        assert_one_line_error(run(*arguments), fragment)

    def test_unexpected_error_is_one_line(self, monkeypatch, capsys):
        def broken(arguments):
            raise ZeroDivisionError("boom")

        monkeypatch.setitem(cli._COMMANDS, "derive", broken)
        assert cli.main(["derive", "x.json"]) == 2
        error = capsys.readouterr().err
        assert error.count("\n") == 1 and "internal error (ZeroDivisionError): boom" in error


class TestHelp:
    @pytest.mark.parametrize("command", [[], ["report"], ["settle"], ["derive"], ["demo"]])
    def test_help(self, command):
        result = run(*command, "--help")
        assert result.returncode == 0 and result.stderr == ""
        assert result.stdout.startswith("usage: firstorder")

    def test_version(self):
        result = run("--version")
        assert (result.returncode, result.stdout.strip()) == (0, f"firstorder {fo.__version__}")

    def test_console_script_entry_point(self):
        text = (ROOT / "pyproject.toml").read_text()
        assert 'firstorder = "firstorder.cli:main"' in text


class TestEnvironment:
    def test_a_bad_thread_count_is_one_line_before_any_work(self, demo):
        # It used to surface only on long drives, and then as "internal error".
        result = run("settle", str(demo / "demo-analysis.json"), FIRSTORDER_THREADS="abc")
        assert_one_line_error(result, "FIRSTORDER_THREADS: 'abc' is not allowed", "whole number >= 1")


class TestOutputs:
    def test_dash_writes_the_report_to_standard_output(self, demo, tmp_path):
        result = run("report", str(demo / "demo-analysis.json"), "-o", "-", cwd=tmp_path)
        assert result.returncode == 0, result.stderr
        assert result.stdout.lstrip().startswith("<!DOCTYPE html>") and "firstorder-analysis" in result.stdout
        assert list(tmp_path.iterdir()) == []  # no file named "-"
        assert Analysis.from_json(result.stdout).title == cli.demo_analysis().title

    def test_existing_folder_is_named_and_said_to_be_a_folder(self, demo, tmp_path):
        result = run("report", str(demo / "demo-analysis.json"), "-o", str(tmp_path))
        assert_one_line_error(result, f"firstorder: error: {tmp_path}: is a folder")
        assert ".firstorder-" not in result.stderr and "firstorder-tmp" not in result.stderr
        assert list(tmp_path.iterdir()) == []

    def test_full_disk_names_the_file_and_says_the_disk_is_full(self, demo, tmp_path, monkeypatch, capsys):
        import errno

        from firstorder.io import atomic

        def full(handle, data):
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

        monkeypatch.setattr(atomic.os, "write", full)
        target = tmp_path / "r.html"
        assert cli.main(["report", str(demo / "demo-analysis.json"), "-o", str(target)]) == 2
        error = capsys.readouterr().err
        assert error.startswith(f"firstorder: error: {target}: the disk is full"), error
        assert "::" not in error and error.count("\n") == 1
        assert list(tmp_path.iterdir()) == []


def _replaced(text: str, old: str, new: str) -> str:
    """`text` with the first `old` made `new`; `old` must be there (else the case would test
    the good file)."""
    assert old in text, f"{old!r} is not in the file any more: update the case"
    return text.replace(old, new, 1)


def _malformed_files() -> dict[str, str]:
    """Bad analysis files a user might meet, each as its text."""
    good = json.loads(cli.demo_analysis().to_json())

    def changed(change) -> str:
        data = json.loads(json.dumps(good))
        change(data)
        return json.dumps(data)

    huge = "9" * 400
    return {
        "empty": "",
        "a list": "[1, 2, 3]",
        "a string": '"firstorder"',
        "null": "null",
        "NUL bytes": "\x00" * 20,
        "huge integer time": _replaced(json.dumps(good), '"times": [0.0', f'"times": [{huge}'),
        "huge integer value": _replaced(changed(lambda d: d["fixture"]["parts"][1].update(value=0)),
                                        '"value": 0', f'"value": {huge}'),
        "huge integer version": _replaced(json.dumps(good), f'"version": {good["version"]}', f'"version": {huge}'),
        "huge integer bits": _replaced(json.dumps(good), '"bits": 16', f'"bits": {huge}'),
        "huge exponent": _replaced(json.dumps(good), '"end": 0.0014', '"end": 1e999'),
        "kind missing": changed(lambda d: d["fixture"]["parts"][0].pop("kind")),
        "kind null": changed(lambda d: d["fixture"]["parts"][0].update(kind=None)),
        "kind unknown": changed(lambda d: d["fixture"]["parts"][0].update(kind="transistor")),
        "tolerance kind null": changed(lambda d: d["tolerance"].update(kind=None)),
        "too many columns": changed(lambda d: d["drive"]["columns"].update(
            {f"c{k}": [0.0] * 5 for k in range(1001)})),
        "parts not a list": changed(lambda d: d["fixture"].update(parts={"r": 1})),
        "deeply nested": "[" * 100_000 + "]" * 100_000,
        "html without analysis": "<html><body>hello</body></html>",
        "not utf-8": "\udcff",
    }


class TestMalformedFiles:
    @pytest.mark.parametrize("name", list(_malformed_files()))
    def test_a_malformed_file_is_one_clear_line_never_an_internal_error(self, name, tmp_path, capsys):
        path = tmp_path / "bad.json"
        text = _malformed_files()[name]
        path.write_bytes(text.encode("utf-8", errors="surrogateescape"))
        for command in ("settle", "derive"):
            assert cli.main([command, str(path)]) == 2
            error = capsys.readouterr().err
            assert error.count("\n") == 1 and "internal error" not in error, error
            assert error.startswith(f"firstorder: error: {path}"), error
            assert " None " not in error and not error.rstrip().endswith("of"), error

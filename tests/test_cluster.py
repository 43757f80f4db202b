"""Tests for firstorder.cluster: studies on a local dask.distributed cluster (two worker
processes on 127.0.0.1, started and stopped here) give the in-process numbers bit for bit,
for one or two workers, after a worker is killed mid-study, with the client holding only
summaries."""

from __future__ import annotations

import json
import os
import signal
import time

import numpy as np
import pytest

import firstorder as fo
from firstorder.cluster import chunk_task, plain_question, plain_study
from firstorder.errors import InputError
from firstorder.studies import Normal, Spread, Uniform

from builders import general_drive, general_fixture

distributed = pytest.importorskip("distributed")

HALF_LSB_16 = fo.Tolerance.lsb(bits=16, span=5.0)


@pytest.fixture(scope="module")
def cluster():
    """Two worker processes, one thread each, on this machine only (the dashboard on a free local port)."""
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address="127.0.0.1:0", silence_logs=40) as local:
        yield local


@pytest.fixture(scope="module")
def client(cluster):
    with distributed.Client(cluster) as connected:
        yield connected


def _cases():
    rc = fo.Fixture.rc("10k", "100n")
    rc_drive = fo.Drive([0, "2m", "3m"], end="6m", vin=[5.0, 0.0, 2.5])
    relay = general_fixture()
    spread = Spread({"rs": "1%", "ch": Normal("3%", within="9%"), "k1.r_on": Uniform("50m", "300m"),
                     "vdac.gain": "0.05%", "vdac.offset": "1m"}, temperature=(0, 50), tempco={"rs": "25ppm"})
    coil = fo.Fixture()
    coil.current_source("isrc", "a", "gnd")
    coil.resistor("rp", "a", "gnd", "50")
    coil.inductor("l1", "a", "gnd", "10m")
    coil_drive = fo.Drive([0, "1m"], end="2m", isrc=[0.1, 0.0])
    return {
        "rc": (rc, rc_drive, Spread({"r": "1%", "c": "10%"}), fo.Tolerance.absolute("1m"), "0.5m"),
        "relay": (relay, general_drive(), spread, HALF_LSB_16, None),
        "coil": (coil, coil_drive, Spread({"rp": "5%", "l1": "20%"}), fo.Tolerance.absolute("10 uA"), "0.8m"),
    }


CASES = _cases()


def _chunk_tasks(stream) -> int:
    return sum("firstorder-chunk" in str(task["key"]) for task in stream.data)


def _figures(study, tolerance, delay):
    table = study.settling(tolerance, sample_delay=delay)
    passing = study.passing(tolerance, sample_delay=delay)
    return table, passing, study.delay_for(tolerance, 0.99)


class TestSameNumbersAsInProcess:
    @pytest.mark.parametrize("name", list(CASES))
    def test_bit_for_bit(self, client, name):
        fixture, drive, spread, tolerance, delay = CASES[name]
        here = fixture.study(drive, spread, units=900, seed=5, chunk=128, progress=False)
        there = fixture.study(drive, spread, units=900, seed=5, chunk=128, progress=False, client=client)
        table_here, passing_here, delay_here = _figures(here, tolerance, delay)
        with distributed.get_task_stream(client) as stream:
            table_there, passing_there, delay_there = _figures(there, tolerance, delay)
        assert _chunk_tasks(stream) == 3 * 8  # three questions, eight chunks each, on the workers
        assert table_there.equals(table_here)
        assert passing_there == passing_here
        np.testing.assert_array_equal(delay_there, delay_here)

    def test_one_worker_and_two_give_the_same(self, client, cluster):
        fixture, drive, spread, tolerance, delay = CASES["relay"]
        two = fixture.study(drive, spread, units=700, seed=8, chunk=100, progress=False, client=client)
        table_two = two.settling(tolerance)
        with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1",
                                      dashboard_address="127.0.0.1:0", silence_logs=40) as single:
            with distributed.Client(single) as alone:
                one = fixture.study(drive, spread, units=700, seed=8, chunk=100, progress=False, client=alone)
                assert one.settling(tolerance).equals(table_two)

    def test_an_adaptive_study_on_the_cluster(self, client):
        fixture, drive, spread, tolerance, _ = CASES["rc"]
        options = dict(units="adaptive", seed=2, tolerance=tolerance, numerical_tolerance="5%", batch=500,
                       chunk=250, progress=False)
        here = fixture.study(drive, spread, **options)
        there = fixture.study(drive, spread, client=client, **options)
        assert there.units == here.units
        assert there.settling(tolerance).equals(here.settling(tolerance))


class TestSweep:
    def test_a_sweep_on_the_cluster_is_the_sweep_in_process(self, client):
        fixture, drive, spread, tolerance, _ = CASES["rc"]
        options = dict(tol=tolerance, units=600, seed=3, fractions=(0.5, 0.99), chunk=100, progress=False)
        here = fo.sweep(fixture, drive, spread, {"c": ["100n", "150n"]}, **options)
        # Six chunks a point (one chunk would be held in process, whatever the client).
        with distributed.get_task_stream(client) as stream:
            there = fo.sweep(fixture, drive, spread, {"c": ["100n", "150n"]}, client=client, **options)
        assert there.equals(here)
        assert _chunk_tasks(stream) >= 12  # the chunks really ran on the workers


class TestWorkers:
    def test_a_killed_worker_changes_nothing(self, client):
        fixture, drive, spread, tolerance, _ = CASES["relay"]
        reference = fixture.study(drive, spread, units=3000, seed=13, chunk=50, progress=False).settling(tolerance)
        study = fixture.study(drive, spread, units=3000, seed=13, chunk=50, progress=False, client=client)
        pids = client.run(os.getpid)  # {worker address: process id}
        victim = sorted(pids.values())[0]

        # Kill one worker process once the study's tasks are running (dask starts a new one
        # and runs the lost tasks again elsewhere).
        import threading

        def kill_when_busy():
            deadline = time.monotonic() + 30
            while time.monotonic() < deadline:
                if any(key.startswith("firstorder-chunk") for keys in client.processing().values() for key in keys):
                    os.kill(victim, signal.SIGKILL)
                    return
                time.sleep(0.005)

        killer = threading.Thread(target=kill_when_busy)
        killer.start()
        table = study.settling(tolerance)
        killer.join()
        assert table.equals(reference)
        assert victim not in client.run(os.getpid).values()  # the process really died

    def test_a_chunk_travels_as_plain_data(self):
        fixture, drive, spread, tolerance, delay = CASES["relay"]
        study = fixture.study(drive, spread, units=60, seed=1, progress=False)
        text = plain_study(study)
        data = json.loads(text)  # JSON text in the analysis file's format, nothing pickled
        assert data["format"] == "firstorder-analysis" and data["seed"] == 1
        from firstorder.studies.run import Request

        request = Request(tolerance, None, None, None, True, (1, 3), (1, 3))
        question = plain_question(request)
        json.dumps(question, allow_nan=False)
        from firstorder.studies.run import chunk_summary

        assert chunk_task(text, 20, 40, question) == chunk_summary(fixture, drive, spread, 1, study.initial, 20, 40,
                                                                   request)


class TestProgress:
    def test_the_text_bar_goes_to_stderr_and_the_numbers_are_the_same(self, client, capsys):
        fixture, drive, spread, tolerance, _ = CASES["rc"]
        quiet = fixture.study(drive, spread, units=500, seed=7, chunk=100, progress=False, client=client)
        shown = fixture.study(drive, spread, units=500, seed=7, chunk=100, progress=True, client=client)
        table = quiet.settling(tolerance)
        capsys.readouterr()
        assert shown.settling(tolerance).equals(table)
        out, err = capsys.readouterr()
        assert out == "" and "100% Completed" in err


class TestClientMemory:
    def test_the_client_holds_summaries_not_units(self, client):
        # 40,000 units x 1,000 segments would be 320 MB per float column in process; the client
        # holds a few summaries (the kept ranks of each segment), far below one such column.
        import tracemalloc

        fixture = fo.Fixture.rc("10k", "100n")
        n = 1000
        drive = fo.Drive(np.arange(n) * 2e-3, n * 2e-3, vin=np.where(np.arange(n) % 2, 0.0, 5.0))
        study = fixture.study(drive, Spread({"r": "1%", "c": "10%"}), units=40_000, seed=3, progress=False,
                              client=client)
        tracemalloc.start()
        study.settling(HALF_LSB_16, fractions=(0.999,))
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        assert peak < 60e6, peak


class TestBadClient:
    @pytest.mark.parametrize("client", ["tcp://127.0.0.1:8786", 1, object()])
    def test_not_a_client(self, client):
        fixture, drive, spread, _, _ = CASES["rc"]
        with pytest.raises(InputError, match=r"^client: .* is not a dask\.distributed\.Client; give Client\(\)"):
            fixture.study(drive, spread, units=10, seed=1, client=client)


@pytest.fixture(scope="module")
def scheduler(tmp_path_factory):
    """A scheduler and a worker started with dask's own commands on 127.0.0.1, stopped at the end."""
    import subprocess
    import sys
    from pathlib import Path

    folder = tmp_path_factory.mktemp("dask")
    info = folder / "scheduler.json"
    root = str(Path(__file__).resolve().parents[1])
    environment = dict(os.environ, PYTHONPATH=root)
    dask = [sys.executable, "-m", "distributed.cli.dask_scheduler"]
    processes = [subprocess.Popen([*dask, "--host", "127.0.0.1", "--port", "0", "--no-dashboard",
                                   "--scheduler-file", str(info)], env=environment, cwd=folder,
                                  stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)]
    try:
        deadline = time.monotonic() + 60
        while not info.exists() and time.monotonic() < deadline:
            time.sleep(0.1)
        address = json.loads(info.read_text())["address"]
        processes.append(subprocess.Popen(
            [sys.executable, "-m", "distributed.cli.dask_worker", address, "--nworkers", "1", "--nthreads", "1",
             "--no-dashboard", "--host", "127.0.0.1"], env=environment, cwd=folder,
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        with distributed.Client(address, timeout="30s") as probe:
            probe.wait_for_workers(1, timeout=60)
        yield address
    finally:
        for process in reversed(processes):
            process.terminate()
        for process in processes:
            process.wait(timeout=30)


class TestCommandLine:
    """``firstorder study --scheduler`` against a scheduler and a worker started with dask's own
    commands (as the README shows), on 127.0.0.1, stopped at the end."""

    def test_the_same_json_as_in_process(self, scheduler, tmp_path, capsys):
        from firstorder import cli

        fixture, drive, spread, tolerance, delay = CASES["relay"]
        path = fo.Analysis(fixture, drive, initial=0.25, tolerance=tolerance, spread=spread, units=1500,
                           seed=4).save(tmp_path / "lot.json")
        assert cli.main(["study", str(path), "--format", "json"]) == 0
        here = capsys.readouterr().out
        assert cli.main(["study", str(path), "--format", "json", "--scheduler", scheduler]) == 0
        assert capsys.readouterr().out == here

    def test_an_unreachable_scheduler_is_one_line(self, tmp_path, capsys):
        from firstorder import cli

        path = fo.Analysis(*CASES["rc"][:2], tolerance=CASES["rc"][3], spread=CASES["rc"][2]).save(tmp_path / "a.json")
        assert cli.main(["study", str(path), "--scheduler", "tcp://127.0.0.1:9"]) == 2
        error = capsys.readouterr().err
        assert error.startswith("firstorder study: cannot reach a scheduler at 'tcp://127.0.0.1:9'") and \
            error.count("\n") == 1

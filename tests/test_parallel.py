"""Work split over threads: the pieces cover everything once, and results do not
depend on how many threads ran."""

import multiprocessing
import os
import sys
import threading
import time

import numpy as np
import pytest

import firstorder as fo
from firstorder import _parallel
from firstorder.errors import InputError


class TestPieces:
    @pytest.mark.parametrize("size, align", [(1_000_003, 1), (999_999, 8), (300_000, 64)])
    def test_cover_the_range_once(self, monkeypatch, size, align):
        monkeypatch.setenv("FIRSTORDER_THREADS", "3")
        spans = _parallel.pieces(size, align=align, min_piece=1000)
        assert len(spans) == 3
        assert spans[0][0] == 0 and spans[-1][1] == size
        assert all(stop == start for (_, stop), (start, _) in zip(spans, spans[1:]))
        assert all(start % align == 0 for start, _ in spans)

    def test_no_piece_shorter_than_the_minimum(self, monkeypatch):
        monkeypatch.setenv("FIRSTORDER_THREADS", "8")
        assert _parallel.pieces(_parallel.MIN_PIECE - 1) == [(0, _parallel.MIN_PIECE - 1)]
        assert len(_parallel.pieces(_parallel.MIN_PIECE * 2 - 1)) == 1
        assert len(_parallel.pieces(_parallel.MIN_PIECE * 3)) == 3

    def test_one_thread(self, monkeypatch):
        monkeypatch.setenv("FIRSTORDER_THREADS", "1")
        assert _parallel.pieces(10_000_000) == [(0, 10_000_000)]

    @pytest.mark.parametrize("text", ["0", "-2", "many", "1.5", "abc"])
    def test_bad_setting_names_the_variable(self, monkeypatch, text):
        monkeypatch.setenv("FIRSTORDER_THREADS", text)
        with pytest.raises(InputError, match=f"FIRSTORDER_THREADS: '{text}' is not allowed"):
            _parallel.threads()


class TestRun:
    def test_results_in_order(self):
        assert _parallel.run(lambda a, b, c: a + b + c, [(1, 2, 3), (10, 20, 30), (5, 5, 5)]) == [6, 60, 15]

    def test_error_raised_after_every_piece_finished(self):
        finished = []

        def piece(start, stop):
            if start == 0:
                raise RuntimeError("piece 0 failed")
            time.sleep(0.05)
            finished.append(threading.current_thread().name)

        with pytest.raises(RuntimeError, match="piece 0 failed"):
            _parallel.run(piece, [(0, 1), (1, 2), (2, 3)])
        assert len(finished) == 2


    def test_nested_call_runs_inline(self, monkeypatch):
        monkeypatch.setenv("FIRSTORDER_THREADS", "2")  # one pool thread, busy with the outer piece
        names = []

        def outer(start, stop):
            return _parallel.run(lambda a, b: threading.current_thread().name, [(0, 1), (1, 2)])

        # On a thread of its own, so that a deadlock fails the test instead of hanging it.
        caller = threading.Thread(target=lambda: names.extend(_parallel.run(outer, [(0, 1), (1, 2)])), daemon=True)
        caller.start()
        caller.join(timeout=30)
        assert names, "a run inside a piece never finished"
        assert names[1][0] == names[1][1]  # both inner pieces on the outer piece's thread

    @pytest.mark.skipif(not hasattr(os, "fork"), reason="needs fork")
    def test_forked_child_gets_its_own_pool(self):
        _parallel.run(lambda a, b: a, [(0, 1), (1, 2)])  # the parent's pool exists
        context = multiprocessing.get_context("fork")
        with context.Pool(1) as children:
            result = children.apply_async(_run_two_pieces).get(timeout=60)
        assert result == [0, 1]


class TestFirstCallsAtOnce:
    def test_threads_that_start_together_share_the_pool_safely(self, monkeypatch):
        # Threads whose first calls come at once each asked for a larger pool, and the pool
        # one thread was about to use was shut down by another ("cannot schedule new futures
        # after shutdown"). A tiny switch interval makes that interleaving likely every run.
        monkeypatch.setenv("FIRSTORDER_THREADS", "8")
        errors = []

        def worker(count, barrier):
            barrier.wait()
            try:
                for _ in range(20):
                    assert _parallel.run(lambda a, b: b - a, [(i, i + 1) for i in range(count)]) == [1] * count
            except Exception as error:  # noqa: BLE001 - every failure is counted
                errors.append(repr(error))

        interval = sys.getswitchinterval()
        sys.setswitchinterval(1e-6)
        try:
            for _ in range(20):
                monkeypatch.setattr(_parallel, "_pool", None)
                monkeypatch.setattr(_parallel, "_pool_size", 0)
                barrier = threading.Barrier(7)
                workers = [threading.Thread(target=worker, args=(count, barrier)) for count in range(2, 9)]
                for thread in workers:
                    thread.start()
                for thread in workers:
                    thread.join(timeout=60)
        finally:
            sys.setswitchinterval(interval)
        assert errors == []


def _run_two_pieces():
    return _parallel.run(lambda a, b: a, [(0, 1), (1, 2)])


pytest.importorskip("numba")  # below: the compiled pieces, with 1 and with 4 threads


@pytest.fixture
def small_pieces(monkeypatch):
    """Pieces of 5,000 elements, so arrays of test size split over four threads."""
    monkeypatch.setattr(_parallel, "MIN_PIECE", 5_000)

    def with_threads(count, function):
        monkeypatch.setenv("FIRSTORDER_THREADS", str(count))
        try:
            return function()
        finally:
            monkeypatch.delenv("FIRSTORDER_THREADS")

    return with_threads


class TestSameResultsAnyThreadCount:
    def setup_method(self):
        rng = np.random.default_rng(11)
        n = 80_000
        self.times = np.cumsum(1e-5 * 10 ** rng.uniform(-3, 1, n))
        self.end = float(self.times[-1]) + 1e-4
        self.columns = {"vin": rng.uniform(-5, 5, n), "k": (rng.random(n) < 0.5).astype(float)}
        self.fixture = (fo.Fixture()
                        .voltage_source("vin", "in", "gnd").resistor("r1", "in", "x", "10k")
                        .switch("k", "x", "out", r_on="20", r_off="1G")
                        .resistor("r2", "out", "gnd", "47k").capacitor("c1", "out", "gnd", "1n")
                        .probe("ir1", through="r1"))

    def everything(self):
        drive = fo.Drive(self.times, end=self.end, **self.columns)
        response = self.fixture.respond(drive, initial="periodic")
        grid = np.linspace(self.times[0], self.end, 250_001)
        results = {"boundary": response.boundary, "zero_state": response.zero_state(np.append(drive.times, drive.end)),
                   "total": response.total(grid), "probe": response.probe("ir1", grid)}
        results.update(response.evaluate(grid, ("zero_input", "natural", "vin")))
        for tolerance in (fo.Tolerance.absolute("1m"), fo.Tolerance.relative(0.001)):
            table = response.settling(tolerance)
            results.update({f"{tolerance} {column}": table[column].to_numpy() for column in table.columns})
        return results

    def test_identical(self, small_pieces):
        one = small_pieces(1, self.everything)
        four = small_pieces(4, self.everything)
        for name, values in one.items():
            np.testing.assert_array_equal(four[name], values, err_msg=name)

    def test_errors_identical(self, small_pieces):
        times = self.times.copy()
        times[40_000] = times[39_999]  # at the seam between the second and third piece of four

        def build():
            with pytest.raises(InputError) as error:
                fo.Drive(times, end=self.end, **self.columns)
            return str(error.value)

        assert small_pieces(4, build) == small_pieces(1, build)
        assert "drive.times[40000]" in small_pieces(4, build)

"""Engine benchmark: run by hand (`make bench`), figures go in the README as ratios.

Every figure is measured side by side in this one process, as a ratio to a bare numpy
exp over the same number of points, so the machine's speed cancels out.  Each is timed
in runs of back-to-back calls (so the bare exp works on data already in cache, the
hardest reference to beat), and the runs alternate five times; the best call counts.

(a) total(t) on 2,000,000 sorted points over a 100,000-change drive / bare exp   (target <= 3)
(b) scipy.signal.lsim on the same grid / total(t)                                (target >= 50)
(c) Drive + respond + boundary for 1,000,000 changes / bare exp of 1,000,000     (target <= 10)
(d) respond + settling table for a 1,000,000-segment drive / bare exp of 1,000,000
    (DESIGN.md's target, <= 10)
(e) (a) and (c) again with segments of 100 to 10,000 time constants (exponents below -709,
    where numpy's exp is slow), against the same figures with short segments (target <= 1.2);
    and total(t) on the same 2,000,000 points unsorted, against argsort + total(t) on the
    sorted points + the scatter back (target <= 1)
(c') (c) against a 12-line hand-written numba loop of the same recurrence, its input check
    included (target <= 1)

(a), (c) and (d) are printed three ways: as installed (compiled kernels, every core), on one
thread (FIRSTORDER_THREADS=1) and on numpy alone (FIRSTORDER_KERNELS=0).  Each figure is
measured in a fresh process, so no figure inherits another's memory-allocator state
(after a run with larger arrays, glibc hands back fresh pages that fault on first
touch, which can double the time of the next figure).
"""

from __future__ import annotations

import json
import os
import platform
import subprocess
import sys
import time

import numpy as np

import firstorder as fo
from firstorder import _parallel

SETTINGS = (
    (f"kernels, {_parallel.threads()} threads", {}),
    ("kernels, 1 thread", {"FIRSTORDER_THREADS": "1"}),
    ("numpy only", {"FIRSTORDER_KERNELS": "0"}),
)


def side_by_side(ours, reference, repeats=7, rounds=5):
    """Best times of `ours` and `reference`: `rounds` alternating runs of `repeats` calls."""
    ours()  # warm up (first use compiles or loads the kernels)
    best_ours = best_reference = float("inf")
    for _ in range(rounds):
        best_reference = min(best_reference, best_of(reference, repeats))
        best_ours = min(best_ours, best_of(ours, repeats))
    return best_ours, best_reference


def best_of(function, repeats):
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        best = min(best, time.perf_counter() - start)
    return best


def workload(name: str):
    """The function to time for figure `name` ("a", "c", "d", "a_long", "c_long", "a_unsorted",
    "c_numba"), its reference, and its data."""
    rng = np.random.default_rng(2026)
    fixture = fo.Fixture.rc("10k", "10n")  # tau = 100 µs
    spread = (2, 4) if name.endswith("_long") else (-1, 1)  # segment lengths, in decades of tau
    if name in ("a", "a_long", "a_unsorted"):
        changes = 100_000
        durations = fixture.tau * 10 ** rng.uniform(*spread, changes)
        times = np.concatenate([[0.0], np.cumsum(durations)[:-1]])
        end = float(durations.sum())
        drive = fo.Drive(times, end=end, vin=rng.uniform(-5, 5, changes))
        response = fixture.respond(drive, initial=0.0)
        grid = np.linspace(0.0, end, 2_000_000)
        if name == "a_unsorted":
            scattered = rng.permutation(grid)

            def sort_then_sorted():
                order = np.argsort(scattered)
                values = response.total(scattered[order])
                back = np.empty_like(values)
                back[order] = values
                return back

            return (lambda: response.total(scattered)), sort_then_sorted, None
        return (lambda: response.total(grid)), (lambda: np.exp(grid)), (fixture, drive, grid)
    million = 1_000_000
    long_times = np.cumsum(fixture.tau * 10 ** rng.uniform(*spread, million))
    long_levels = rng.uniform(-5, 5, million)
    long_end = float(long_times[-1] + fixture.tau)

    def build_and_respond():
        built = fo.Drive(long_times, end=long_end, vin=long_levels)
        return fixture.respond(built, initial=0.0).boundary

    if name in ("c", "c_long"):
        return build_and_respond, (lambda: np.exp(long_times)), None
    if name == "c_numba":
        return build_and_respond, _numba_loop(long_times, long_end, long_levels, fixture.tau), None
    drive = fo.Drive(long_times, end=long_end, vin=long_levels)
    tolerance = fo.Tolerance.lsb(bits=16, span=10.0)
    return (lambda: fixture.respond(drive, initial=0.0).settling(tolerance)), (lambda: np.exp(long_times)), None


def _numba_loop(times, end, levels, tau):
    """The same job as (c) written by hand in numba: check the instants, then the recurrence."""
    import numba

    @numba.njit(cache=True)
    def states(times, end, levels, tau):
        n = times.size
        out = np.empty(n + 1)
        out[0] = x = 0.0
        for k in range(n):
            following = times[k + 1] if k + 1 < n else end
            if not following > times[k] or not np.isfinite(levels[k]):
                raise ValueError("times must increase and levels be finite")
            decay = np.exp(-(following - times[k]) / tau)
            x = levels[k] + (x - levels[k]) * decay
            out[k + 1] = x
        return out

    return lambda: states(times, end, levels, tau)


def in_fresh_process(name: str, settings: dict[str, str]) -> tuple[float, float]:
    """Best times of figure `name` and its reference, measured by a new interpreter."""
    result = subprocess.run([sys.executable, __file__, "--one", name], env={**os.environ, **settings},
                            check=True, capture_output=True, text=True)
    ours, bare = json.loads(result.stdout.strip().splitlines()[-1])
    return ours, bare


def _ratio(name: str, settings: dict[str, str]) -> float:
    ours, bare = in_fresh_process(name, settings)
    return ours / bare


def main() -> None:
    if sys.argv[1:2] == ["--one"]:
        ours, reference, _ = workload(sys.argv[2])
        print(json.dumps(side_by_side(ours, reference)))
        return
    print(f"machine: {platform.machine()}, {os.cpu_count()} cores, numpy {np.__version__}")
    for label, settings in SETTINGS:
        ours, bare = in_fresh_process("a", settings)
        print(f"(a) [{label}] total(t), 2e6 sorted points, 1e5 changes: {ours * 1e3:.1f} ms; "
              f"bare exp {bare * 1e3:.2f} ms; ratio {ours / bare:.1f} (target <= 3)")
        ours, bare = in_fresh_process("c", settings)
        print(f"(c) [{label}] Drive + respond + boundary, 1e6 changes: {ours * 1e3:.1f} ms; "
              f"bare exp of 1e6 {bare * 1e3:.2f} ms; ratio {ours / bare:.1f} (target <= 10)")
        ours, bare = in_fresh_process("d", settings)
        print(f"(d) [{label}] respond + settling table, 1e6 segments: {ours * 1e3:.1f} ms; "
              f"bare exp of 1e6 {bare * 1e3:.2f} ms; ratio {ours / bare:.1f} (target <= 10)")
        for short, long in (("a", "a_long"), ("c", "c_long")):
            ratio_short = _ratio(short, settings)
            ratio_long = _ratio(long, settings)
            print(f"(e) [{label}] ({short}) with segments of 100-10,000 tau: ratio {ratio_long:.1f} against "
                  f"{ratio_short:.1f} with short ones: {ratio_long / ratio_short:.2f}x (target <= 1.2)")
        ours, reference = in_fresh_process("a_unsorted", settings)
        print(f"(e) [{label}] total(t) on the 2e6 points unsorted: {ours * 1e3:.1f} ms; argsort + sorted + "
              f"scatter {reference * 1e3:.1f} ms; ratio {ours / reference:.2f} (target <= 1)")
    ours, loop = in_fresh_process("c_numba", {})
    print(f"(c') Drive + respond + boundary, 1e6 changes: {ours * 1e3:.1f} ms; a hand-written numba loop "
          f"of the same recurrence (input check included) {loop * 1e3:.1f} ms; ratio {ours / loop:.2f} (target <= 1)")

    from scipy import signal

    total, _, (fixture, drive, grid) = workload("a")
    system = signal.StateSpace([[-1 / fixture.tau]], [[1 / fixture.tau]], [[1.0]], [[0.0]])
    levels = drive.levels("vin")[np.searchsorted(drive.times, grid, side="right") - 1]
    ours = best_of(total, 7)
    start = time.perf_counter()
    _, reference, _ = signal.lsim(system, levels, grid, X0=[0.0], interp=False)
    lsim_time = time.perf_counter() - start
    error = np.abs(reference - total()).max()
    print(f"(b) scipy.signal.lsim on the same grid: {lsim_time * 1e3:.0f} ms; ratio to total(t) "
          f"{lsim_time / ours:.0f} (target >= 50); lsim's error off the change grid {error:.2e} V"
          f" (it holds each level from the grid point before the change)")


if __name__ == "__main__":
    main()

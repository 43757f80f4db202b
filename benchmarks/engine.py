"""Engine benchmark: run by hand (`make bench`), figures go in the README as ratios.

Every figure is measured side by side in this one process, as a ratio to a bare numpy
exp over the same number of points, so the machine's speed cancels out.

(a) total(t) on 2,000,000 sorted points over a 100,000-change drive / bare exp   (target <= 3)
(b) scipy.signal.lsim on the same grid / total(t)                                (target >= 50)
(c) Drive + respond + boundary for 1,000,000 changes / bare exp of 1,000,000     (target <= 10)
"""

from __future__ import annotations

import platform
import time

import numpy as np

import firstorder as fo


def best_of(function, repeats=7):
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        best = min(best, time.perf_counter() - start)
    return best


def main() -> None:
    rng = np.random.default_rng(2026)
    fixture = fo.Fixture.rc("10k", "10n")  # tau = 100 µs
    changes = 100_000
    durations = fixture.tau * 10 ** rng.uniform(-1, 1, changes)
    times = np.concatenate([[0.0], np.cumsum(durations)[:-1]])
    end = float(durations.sum())
    drive = fo.Drive(times, end=end, vin=rng.uniform(-5, 5, changes))
    response = fixture.respond(drive, initial=0.0)
    points = 2_000_000
    grid = np.linspace(0.0, end, points)

    bare = best_of(lambda: np.exp(grid))
    ours = best_of(lambda: response.total(grid))
    print(f"machine: {platform.machine()}, {platform.processor() or 'cpu'}, numpy {np.__version__}")
    print(f"(a) total(t), 2e6 sorted points, 1e5 changes: {ours * 1e3:.1f} ms; bare exp {bare * 1e3:.1f} ms;"
          f" ratio {ours / bare:.1f} (target <= 3)")

    from scipy import signal

    system = signal.StateSpace([[-1 / fixture.tau]], [[1 / fixture.tau]], [[1.0]], [[0.0]])
    levels = drive.levels("vin")[np.searchsorted(times, grid, side="right") - 1]
    start = time.perf_counter()
    _, reference, _ = signal.lsim(system, levels, grid, X0=[0.0], interp=False)
    lsim_time = time.perf_counter() - start
    error = np.abs(reference - response.total(grid)).max()
    print(f"(b) scipy.signal.lsim on the same grid: {lsim_time * 1e3:.0f} ms; ratio to total(t) "
          f"{lsim_time / ours:.0f} (target >= 50); lsim's error off the change grid {error:.2e} V"
          f" (it holds each level from the grid point before the change)")

    million = 1_000_000
    long_times = np.cumsum(fixture.tau * 10 ** rng.uniform(-1, 1, million))
    long_levels = rng.uniform(-5, 5, million)
    long_end = float(long_times[-1] + fixture.tau)
    bare_million = best_of(lambda: np.exp(long_times))

    def build_and_respond():
        built = fo.Drive(long_times, end=long_end, vin=long_levels)
        return fixture.respond(built, initial=0.0).boundary

    pipeline = best_of(build_and_respond, repeats=5)
    print(f"(c) Drive + respond + boundary, 1e6 changes: {pipeline * 1e3:.1f} ms; bare exp of 1e6 "
          f"{bare_million * 1e3:.2f} ms; ratio {pipeline / bare_million:.1f} (target <= 10)")


if __name__ == "__main__":
    main()

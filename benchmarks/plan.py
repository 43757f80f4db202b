"""Plan speed (run by hand: ``.venv/bin/python benchmarks/plan.py``; figures go in the README).

(a) a 1,000,000-step greedy plan (``fo.plan_dwells``: an RC filter, random levels) against a
    bare ``np.exp`` over 1,000,000 points                                   (target <= 10);
(b) the exact plan (``method="exact"``) of a switched fixture whose tau changes by 10^3 between
    steps, at 100,000, 300,000 and 1,000,000 steps: the time per step stays flat (linear);
(c) the step-by-step walk (the path for a clock, and the reference) on 100,000 steps, per step;
(d) the exact plan where no step is free (creeps within the tolerance, min_dwell ruling), solved
    by dynamic programming (settling/stretch.py), at 5,000 and 20,000 steps: per step, and
    the time saved against greedy.

Each figure is the best of a few back-to-back runs after one warm-up (kernels loaded, caches
warm), so the machine's speed and load cancel out of the ratios as far as they can.  The ratio
of (a) is also taken pair by pair, the plan and the exp timed one right after the other, and
its median given: on a machine whose memory speed wanders between runs, that is the steadier
figure.
"""

from __future__ import annotations

import time

import numpy as np

import firstorder as fo
from firstorder.settling.chain import Chain, walk

REPEATS = 5


def best(function) -> float:
    function()
    times = []
    for _ in range(REPEATS):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    rng = np.random.default_rng(2026)
    n = 1_000_000
    points = -rng.uniform(0.0, 20.0, n)
    bare = best(lambda: np.exp(points))

    fx = fo.Fixture.rc("1k", "10n")
    levels = {"vin": rng.uniform(-5.0, 5.0, n)}
    tolerance = fo.Tolerance.lsb(bits=16, span=10.0)
    greedy = best(lambda: fo.plan_dwells(fx, levels, tolerance, min_dwell="1u"))
    pairs = []
    for _ in range(2 * REPEATS):
        start = time.perf_counter()
        fo.plan_dwells(fx, levels, tolerance, min_dwell="1u")
        middle = time.perf_counter()
        np.exp(points)
        pairs.append((middle - start) / (time.perf_counter() - middle))
    print(f"(a) greedy plan, 1e6 steps: {greedy * 1e3:.1f} ms; bare exp of 1e6 {bare * 1e3:.2f} ms; "
          f"ratio {greedy / bare:.1f}, median of {len(pairs)} pairs {np.median(pairs):.1f} (target <= 10)")

    switched = fo.Fixture()
    switched.voltage_source("vin", "in", "gnd")
    switched.resistor("r", "in", "out", "1M")
    switched.switch("k", "in", "out", r_on="1k")
    switched.capacitor("c", "out", "gnd", "1n")
    for size in (100_000, 300_000, 1_000_000):
        ramp = {"vin": np.cumsum(rng.uniform(0.005, 0.02, size)), "k": np.arange(size) % 2}
        exact = best(lambda: fo.plan_dwells(switched, ramp, fo.Tolerance.absolute("1m"), method="exact"))
        print(f"(b) exact plan, {size:,} steps: {exact * 1e3:.1f} ms, {exact / size * 1e9:.0f} ns a step")

    size = 100_000
    chain = Chain(np.full(size, 1e5), levels["vin"][:size].copy(), np.ones(size), tolerance.value, False, 0.0,
                  np.zeros(size), 1e-6)
    stepwise = best(lambda: walk(chain, 0.0))
    print(f"(c) step-by-step walk, {size:,} steps: {stepwise * 1e3:.0f} ms, {stepwise / size * 1e6:.2f} µs a step")

    for size in (5_000, 20_000):
        creep = {"vin": 1.0 + np.cumsum(rng.uniform(-2e-3, 2e-3, size)), "k": np.arange(size) % 2}
        tolerance = fo.Tolerance.absolute("1m")
        exact = best(lambda: fo.plan_table(switched, creep, tolerance, min_dwell="1u", method="exact"))
        tables = [fo.plan_table(switched, creep, tolerance, min_dwell="1u", method=method)
                  for method in ("greedy", "exact")]
        saved = 1.0 - tables[1].attrs["total_time"] / tables[0].attrs["total_time"]
        print(f"(d) exact plan, no step free, {size:,} steps: {exact * 1e3:.0f} ms, {exact / size * 1e6:.1f} µs a step; "
              f"{saved:.0%} shorter than greedy; proven: {tables[1].attrs['exact']}")


if __name__ == "__main__":
    main()

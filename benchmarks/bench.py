"""Bench latency: a part value typed -> every plot data source refreshed.

Run by hand (never as a timed test):

    PYTHONPATH=. python benchmarks/bench.py

Targets (DESIGN.md / README): median under 100 ms with a 10,000-change drive,
under 1 s with a 100,000-change drive.  The fixture and drives are our own
invented scenario: a DAC behind 1 kΩ, a relay and a 10 nF hold capacitor, a
10 MΩ meter, stepped by a pulse train with the relay toggling every period.
"""

from __future__ import annotations

import statistics
import time

import numpy as np

import firstorder as fo

REPEATS = {10_000: 15, 100_000: 5}
TARGETS = {10_000: 0.100, 100_000: 1.0}


def fixture() -> fo.Fixture:
    fx = fo.Fixture()
    fx.voltage_source("vdac", "drv", "gnd")
    fx.resistor("rs", "drv", "a", "1k")
    fx.switch("k1", "a", "b", r_on="0.2")
    fx.capacitor("ch", "b", "gnd", "10n")
    fx.resistor("rin", "b", "gnd", "10M")
    return fx


def drive(changes: int) -> fo.Drive:
    periods = changes // 2
    pulses = fo.Drive.pulses(period="40u", duty=0.5, high=2.5, low=-1.0, count=periods, name="vdac")
    relay = np.ones(changes)
    relay[3::4] = 0.0  # open the relay in every other low phase
    return fo.Drive(pulses.times, pulses.end, vdac=pulses.levels("vdac"), k1=relay)


def part_change_latency(changes: int, repeats: int) -> tuple[float, list[float]]:
    start = time.perf_counter()
    bench = fo.Bench(fixture(), drive(changes), tolerance=fo.Tolerance.lsb(16, 5.0), sample_delay="15u")
    opened = time.perf_counter() - start
    values = ["1.2k", "1k"]
    seconds = []
    for k in range(repeats):
        before = bench.sources["total"].data["high"]
        start = time.perf_counter()
        bench.fields["rs"].value = values[k % 2]
        seconds.append(time.perf_counter() - start)
        assert bench.error == "", bench.error
        assert not np.array_equal(before, bench.sources["total"].data["high"]), "plot data did not change"
    return opened, seconds


def main() -> None:
    fo.Bench  # import ipywidgets/bokeh before timing
    for changes, repeats in REPEATS.items():
        opened, seconds = part_change_latency(changes, repeats)
        median = statistics.median(seconds)
        verdict = "meets" if median < TARGETS[changes] else "MISSES"
        print(f"{changes:>7,} changes: part change -> data sources refreshed, median {median * 1e3:7.1f} ms "
              f"(min {min(seconds) * 1e3:.1f} ms, {repeats} runs); target {TARGETS[changes] * 1e3:.0f} ms: {verdict}"
              f"; opening the Bench took {opened:.2f} s")


if __name__ == "__main__":
    main()

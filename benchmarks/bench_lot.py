"""Bench latency with a study shown: a part value typed -> every plot data source refreshed.

Run by hand (never as a timed test):

    PYTHONPATH=. python benchmarks/bench_lot.py

Target (DESIGN.md / README): with a 1,000-unit study and a 1,000-change drive, a part
edit refreshes the plots' data sources (the curves, the marks, the lot's envelope; with
the Settling tab open also the study table, histogram and yield against delay) in under
250 ms, Python side.  The fixture is bench.py's invented scenario (a DAC behind 1 kΩ, a
relay, a 10 nF hold capacitor, a 10 MΩ meter) with an invented spread.
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

import firstorder as fo  # noqa: E402
from bench import drive, fixture  # noqa: E402

UNITS, CHANGES, REPEATS = 1_000, 1_000, 9
TARGET = 0.250


def spread() -> fo.Spread:
    return fo.Spread({"rs": "1%", "ch": fo.Normal("3%", within="9%"), "k1.r_on": fo.Uniform("0.1", "0.4"),
                      "vdac.offset": "1m"}, temperature=(0, 50), tempco={"ch": "-750ppm"})


def latency(tab: str | None) -> tuple[float, list[float]]:
    from firstorder.widgets import _panels

    start = time.perf_counter()
    bench = fo.Bench(fixture(), drive(CHANGES), tolerance=fo.Tolerance.lsb(16, 5.0), sample_delay="15u",
                     spread=spread(), units=UNITS, seed=1)
    opened = time.perf_counter() - start
    if tab is not None:
        bench.tabs.selected_index = _panels.TAB_TITLES.index(tab)
    values = ["1.2k", "1k"]
    seconds = []
    for k in range(REPEATS):
        before = (bench.sources["envelope"].data["high"], bench.study_sources["histogram"].data["count"])
        start = time.perf_counter()
        bench.fields["rs"].value = values[k % 2]
        seconds.append(time.perf_counter() - start)
        assert bench.error == "", bench.error
        assert not np.array_equal(before[0], bench.sources["envelope"].data["high"]), "envelope did not change"
        if tab == "Settling":
            assert not np.array_equal(before[1], bench.study_sources["histogram"].data["count"]), "histogram same"
    return opened, seconds


def main() -> None:
    fo.Bench  # import ipywidgets/bokeh before timing
    for tab in (None, "Settling"):
        opened, seconds = latency(tab)
        median = statistics.median(seconds)
        verdict = "meets" if median < TARGET else "MISSES"
        where = "Settling tab open" if tab else "plots only"
        print(f"{UNITS:,} units x {CHANGES:,} changes, {where}: part change -> data sources refreshed, median "
              f"{median * 1e3:6.1f} ms (min {min(seconds) * 1e3:.1f} ms, {REPEATS} runs); target "
              f"{TARGET * 1e3:.0f} ms: {verdict}; opening the Bench took {opened:.2f} s")


if __name__ == "__main__":
    main()

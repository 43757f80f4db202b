"""(g) A tolerance study, 10,000 units x 1,000 segments, against its references (run by hand).

The fixture: a DAC behind a 4.99 kΩ filter resistor, a relay (0.2 Ω on, 1 GΩ off) and a
330 nF capacitor loaded by 1 MΩ (a scenario of our own); the drive steps the DAC through
1,000 random levels, the relay open every fourth step (the capacitor then holds); three
varied parts (the resistor 1 %, the capacitor 10 %, the relay's on resistance 50-300 mΩ)
and the temperature (0-50 °C, the capacitor -750 ppm/K).

Figures, each the best of a few runs in this one process (the loop too: best of three):

* ``study.settling`` (the per-segment order statistics at 50 %, 99 % and 99.9 %, the
  largest, the yield and the worst unit) of a study that keeps its units (``keep=True``;
  built once beforehand: drawing, reducing every unit's network, the scan), against a bare
  ``np.exp`` over 10,000,000 points: target <= 20x;
* the same ``study.settling`` against a loop that builds each unit's fixture by hand and
  calls ``respond`` + ``settling`` (timed on 300 units and scaled to 10,000): target >= 100x;
* for scale: building the kept study, and a study that holds a chunk at a time (the default),
  whose ``settling`` runs every chunk's network and scan again.
"""

from __future__ import annotations

import time

import numpy as np

import firstorder as fo
from firstorder.studies.lot import Lot

UNITS, SEGMENTS, LOOP_UNITS = 10_000, 1_000, 300
HALF_LSB = fo.Tolerance.lsb(bits=16, span=5.0)


def fixture() -> fo.Fixture:
    return (fo.Fixture().voltage_source("vdac", "dac", "gnd").resistor("r_filter", "dac", "a", "4.99k")
            .switch("k1", "a", "b", r_on="0.2", r_off="1G").capacitor("c_filter", "b", "gnd", "330n")
            .resistor("r_in", "b", "gnd", "1M"))


def drive() -> fo.Drive:
    rng = np.random.default_rng(1)
    times = np.arange(SEGMENTS) * 20e-3
    return fo.Drive(times, SEGMENTS * 20e-3, vdac=rng.uniform(0.0, 5.0, SEGMENTS),
                    k1=(np.arange(SEGMENTS) % 4 != 3).astype(float))


SPREAD = fo.Spread({"r_filter": "1%", "c_filter": "10%", "k1.r_on": fo.Uniform("50m", "300m")},
                   temperature=(0, 50), tempco={"c_filter": "-750ppm"})


def best(function, repeat: int = 3) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    fx, schedule = fixture(), drive()
    fx.study(schedule, SPREAD, units=10, seed=1).settling(HALF_LSB, sample_delay="19m")  # imports, caches
    points = np.random.default_rng(0).uniform(-10.0, 0.0, UNITS * SEGMENTS)
    bare = best(lambda: np.exp(points))
    build = best(lambda: fx.study(schedule, SPREAD, units=UNITS, seed=1, keep=True, progress=False), repeat=2)
    study = fx.study(schedule, SPREAD, units=UNITS, seed=1, keep=True, progress=False)
    settling = best(lambda: study.settling(HALF_LSB, sample_delay="19m"))
    study = None  # frees the kept arrays before the chunked study
    chunked = fx.study(schedule, SPREAD, units=UNITS, seed=1, progress=False)
    by_chunk = best(lambda: chunked.settling(HALF_LSB, sample_delay="19m"), repeat=2)

    def by_hand() -> None:
        lot = Lot(fx, SPREAD, seed=1)
        draw = lot.draw(0, LOOP_UNITS)
        for k in range(LOOP_UNITS):
            unit = lot.unit_fixture(draw, k)
            unit.respond(schedule, 0.0).settling(HALF_LSB, sample_delay="19m")

    loop = best(by_hand) * UNITS / LOOP_UNITS
    print(f"(g) {UNITS:,} units x {SEGMENTS:,} segments; bare exp over {UNITS * SEGMENTS:,} points "
          f"{bare * 1e3:.1f} ms")
    print(f"(g) kept study: settling {settling * 1e3:.0f} ms = {settling / bare:.1f}x bare exp (target <= 20); "
          f"built in {build:.2f} s")
    print(f"(g) loop of hand-built units (respond + settling; {LOOP_UNITS} timed, scaled to {UNITS:,}): "
          f"{loop:.1f} s = {loop / settling:.0f}x the kept settling (target >= 100), "
          f"{loop / (build + settling):.1f}x build + settling")
    print(f"(g) a chunk at a time (the default): settling, every chunk run again, {by_chunk:.2f} s = "
          f"{by_chunk / bare:.0f}x bare exp, {loop / by_chunk:.1f}x faster than the loop")


if __name__ == "__main__":
    main()

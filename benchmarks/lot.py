"""A lot at once: building a Study of 10,000 units over 1,000 segments (run by hand).

A relay-switched RC (1 kΩ, a relay 0.5 Ω on / 1 GΩ off, 100 nF, 100 kΩ load) with three
varied parts (rs 1 %, c 10 %, the relay's r_on 20 %), a drive of 1,000 segments that
switches the relay and the level.  Every unit's network comes from one batched reduction
(Segments.of_lot); the figure is the whole Study construction, then one probe's rows.
"""

from __future__ import annotations

import time

import numpy as np

import firstorder as fo

UNITS = 10_000
SEGMENTS = 1_000


def relay_rc() -> fo.Fixture:
    fx = fo.Fixture()
    fx.voltage_source("vdac", "d", "gnd")
    fx.resistor("rs", "d", "a", "1k")
    fx.switch("k1", "a", "b", r_on="0.5", r_off="1G")
    fx.capacitor("c", "b", "gnd", "100n")
    fx.resistor("rl", "b", "gnd", "100k")
    fx.probe("vb", node="b")
    return fx


def main() -> None:
    rng = np.random.default_rng(1)
    drive = fo.Drive(np.arange(SEGMENTS) * 1e-3, end=SEGMENTS * 1e-3, vdac=rng.uniform(0, 5, SEGMENTS),
                     k1=rng.integers(0, 2, SEGMENTS))
    spread = fo.Spread({"rs": "1%", "c": "10%", "k1.r_on": "20%"})
    start = time.perf_counter()
    study = relay_rc().study(drive, spread, units=UNITS, seed=1)
    built = time.perf_counter() - start
    start = time.perf_counter()
    study.evaluate([0.5e-3], probe="vb")
    probed = time.perf_counter() - start
    print(f"Study of {UNITS:,} units x {SEGMENTS:,} segments, 3 varied parts: built in {built:.2f} s; "
          f"a probe's rows and one evaluation {probed:.2f} s")


if __name__ == "__main__":
    main()

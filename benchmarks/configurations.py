"""Many switch configurations: building Segments for a drive that visits 15,620 of them (run by hand).

A fixture with 14 relays (each 0.5 Ω on, 1 GΩ off, with its own load resistor) on one
capacitor, and a drive with one segment per configuration, 15,620 distinct ones drawn
without repetition from the 2**14 possible.  Target: Segments.of_drive under 2 s on a
fresh fixture (every configuration planned and reduced once).
"""

from __future__ import annotations

import time

import numpy as np

import firstorder as fo
from firstorder.segments import Segments

SWITCHES = 14
CONFIGURATIONS = 15_620


def relay_bank(switches: int = SWITCHES) -> fo.Fixture:
    """A source behind 1 kΩ on node a, a capacitor on a, and `switches` relays from a to their own loads."""
    fx = fo.Fixture()
    fx.voltage_source("vin", "in", "gnd")
    fx.resistor("rs", "in", "a", 1e3)
    fx.capacitor("c", "a", "gnd", 1e-7)
    for j in range(switches):
        fx.switch(f"k{j}", "a", f"n{j}", r_on=0.5, r_off=1e9)
        fx.resistor(f"r{j}", f"n{j}", "gnd", 1e3 * (j + 1))
    fx.probe("va", node="a")
    return fx


def many_configurations(switches: int = SWITCHES, count: int = CONFIGURATIONS, seed: int = 1) -> fo.Drive:
    """A drive with `count` segments, each in a configuration of its own."""
    rng = np.random.default_rng(seed)
    codes = rng.choice(2 ** switches, size=count, replace=False)
    states = (codes[:, None] >> np.arange(switches)) & 1
    columns = {f"k{j}": states[:, j] for j in range(switches)}
    return fo.Drive(np.arange(count) * 1e-3, end=count * 1e-3, vin=np.ones(count), **columns)


def main() -> None:
    drive = many_configurations()
    start = time.perf_counter()
    segments = Segments.of_drive(relay_bank(), drive)
    elapsed = time.perf_counter() - start
    print(f"Segments.of_drive, {len(segments.configurations)} configurations of {SWITCHES} switches: "
          f"{elapsed:.2f} s (target < 2 s)")


if __name__ == "__main__":
    main()

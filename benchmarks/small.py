"""Small drives, per call: the fixed costs a notebook pays on every edit (run by hand).

(f1) Drive + respond + total(t) for a 10-segment drive on an RC fixture, against a
     hand-written numpy closed form of the same (the state at every change by the
     recurrence, then final + (start - final) exp(-(t - s) / tau) at the 50 times): target <= 3
(f2) the settling table of that response, against the same columns written by hand plus one
     pandas DataFrame built from them: target <= 3
(f3) plan_dwells for 10 levels, against the greedy recurrence written by hand (for the record)

Each figure is the best of many calls, the two sides alternating, in this one process.
"""

from __future__ import annotations

import math
import timeit

import numpy as np
import pandas as pd

import firstorder as fo

R, C = 10e3, 100e-9
TAU = R * C
TIMES = np.arange(10) * 1e-3
END = 10e-3
LEVELS = np.array([0.0, 2.5, 5.0, 1.0, -1.0, 3.3, 0.0, 4.0, 2.0, 0.5])
GRID = np.linspace(0.0, END, 50)
LIMIT = 0.5 * 5.0 / 2 ** 16
FIXTURE = fo.Fixture.rc(R, C)
TOLERANCE = fo.Tolerance.lsb(bits=16, span=5.0)


def ours_response():
    drive = fo.Drive(TIMES, END, vin=LEVELS)
    return FIXTURE.respond(drive, initial=0.0).total(GRID)


def by_hand_response():
    ends = np.append(TIMES[1:], END)
    decay = np.exp(-(ends - TIMES) / TAU)
    states = np.empty(TIMES.size + 1)
    states[0] = 0.0
    for k in range(TIMES.size):
        states[k + 1] = LEVELS[k] + (states[k] - LEVELS[k]) * decay[k]
    segment = np.clip(np.searchsorted(TIMES, GRID, side="right") - 1, 0, TIMES.size - 1)
    return LEVELS[segment] + (states[segment] - LEVELS[segment]) * np.exp(-(GRID - TIMES[segment]) / TAU)


RESPONSE = FIXTURE.respond(fo.Drive(TIMES, END, vin=LEVELS), initial=0.0)


def ours_table():
    return RESPONSE.settling(TOLERANCE)


def by_hand_table():
    ends = np.append(TIMES[1:], END)
    start = RESPONSE.boundary[:-1]
    step = np.abs(LEVELS - start)
    with np.errstate(divide="ignore"):  # a step of 0 is settled at once
        settle = TAU * np.log(step / LIMIT)
    settle = np.where(settle > 0, settle, 0.0)
    settled = settle <= ends - TIMES
    settle = np.where(settled, settle, np.nan)
    residual = step * np.exp(-(ends - TIMES) / TAU)
    return pd.DataFrame({"start": TIMES, "end": ends, "start_value": start, "final": LEVELS,
                         "tolerance": np.full(TIMES.size, LIMIT), "settle_time": settle, "settled": settled,
                         "residual_at_end": residual})


def ours_plan():
    return fo.plan_dwells(FIXTURE, {"vin": LEVELS}, TOLERANCE, min_dwell="1u")


def by_hand_plan():
    state, time, dwells = 0.0, 0.0, []
    for level in LEVELS:
        step = abs(level - state)
        dwell = max(TAU * math.log(step / LIMIT) if step > LIMIT else 0.0, 1e-6)
        dwells.append(dwell)
        state = level + (state - level) * math.exp(-dwell / TAU)
        time += dwell
    return dwells


def best(function, number):
    return min(timeit.repeat(function, number=number, repeat=7)) / number


def side_by_side(ours, reference, number=300):
    ours(), reference()
    return best(ours, number), best(reference, number)


def main() -> None:
    assert np.allclose(ours_response(), by_hand_response(), rtol=1e-12, atol=1e-12)
    for label, ours, reference, target in (
        ("(f1) Drive + respond + total, 10 segments", ours_response, by_hand_response, "<= 3"),
        ("(f2) settling table, 10 segments", ours_table, by_hand_table, "<= 3"),
        ("(f3) plan_dwells, 10 levels", ours_plan, by_hand_plan, "for the record"),
    ):
        mine, theirs = side_by_side(ours, reference)
        print(f"{label}: {mine * 1e6:.0f} µs; by hand {theirs * 1e6:.0f} µs; ratio {mine / theirs:.1f} "
              f"(target {target})")


if __name__ == "__main__":
    main()

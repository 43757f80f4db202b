"""Tests for firstorder.settling.order: the least-time order against brute force over every
permutation (itertools), with the dwells from the handbook first-order step response."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

import firstorder as fo
from firstorder.errors import InputError

R_ON, R_FILTER, C_FILTER = 50.0, 500.0, 10e-9
TOLERANCE = 1e-3


def scanner(resistances) -> fo.Fixture:
    """Channels behind a multiplexer into an RC filter (our own scenario)."""
    fx = fo.Fixture()
    for j, rs in enumerate(resistances):
        fx.voltage_source(f"v{j}", f"s{j}", "gnd")
        fx.resistor(f"rs{j}", f"s{j}", f"m{j}", rs)
        fx.switch(f"k{j}", f"m{j}", "mux", r_on=R_ON)
    fx.resistor("rf", "mux", "adc", R_FILTER)
    fx.capacitor("cf", "adc", "gnd", C_FILTER)
    return fx


def scan(n, seed):
    """n channels, each read once: its source resistance and level (random, our own)."""
    rng = np.random.default_rng(seed)
    resistances = rng.choice([10.0, 100.0, 1e3, 22e3, 100e3], n)
    values = rng.uniform(-4.0, 4.0, n)
    levels = {f"v{j}": np.full(n, values[j]) for j in range(n)}
    levels.update({f"k{j}": (np.arange(n) == j).astype(int) for j in range(n)})
    return scanner(resistances), levels, resistances, values


def handbook_total(order, resistances, values, hold=0.0, x=0.0):
    """Greedy dwells of one order: tau = (rs + r_on + rf) C (series resistances, handbook) and
    tau ln(|step| / limit) to settle (first-order step response)."""
    time = 0.0
    for j in order:
        tau = (resistances[j] + R_ON + R_FILTER) * C_FILTER
        offset = x - values[j]
        time += tau * math.log(abs(offset) / TOLERANCE) + hold
        x = values[j] + math.copysign(TOLERANCE * math.exp(-hold / tau), offset)
    return time


class TestPlanOrder:
    @pytest.mark.parametrize("n, seed", [(3, 0), (5, 1), (6, 2), (7, 3), (8, 4)])
    def test_against_every_permutation(self, n, seed):
        fx, levels, resistances, values = scan(n, seed)
        best = fo.plan_order(fx, levels, fo.Tolerance.absolute(TOLERANCE))
        brute = min(handbook_total(p, resistances, values) for p in itertools.permutations(range(n)))
        assert best.method == "held-karp" and best.exact
        assert best.total_time == pytest.approx(brute, rel=1e-7)
        assert best.total_time == pytest.approx(handbook_total(best.order, resistances, values), rel=1e-7)
        assert best.given_time == pytest.approx(handbook_total(range(n), resistances, values), rel=1e-7)
        assert best.lower_bound <= best.total_time * (1 + 1e-12)
        # The order's columns, planned again, give the total reported.
        drive = fo.plan_dwells(fx, best.levels, fo.Tolerance.absolute(TOLERANCE))
        assert drive.end - drive.start == pytest.approx(best.total_time, rel=1e-12)

    def test_against_every_permutation_with_a_hold_after(self):
        fx, levels, resistances, values = scan(6, 9)
        best = fo.plan_order(fx, levels, fo.Tolerance.absolute(TOLERANCE), hold_after="2u")
        brute = min(handbook_total(p, resistances, values, hold=2e-6) for p in itertools.permutations(range(6)))
        assert best.total_time == pytest.approx(brute, rel=1e-7)

    def test_local_search_beyond_13_steps_states_its_gap(self):
        fx, levels, _, _ = scan(14, 7)
        tolerance = fo.Tolerance.absolute(TOLERANCE)
        searched = fo.plan_order(fx, levels, tolerance)
        exact = fo.plan_order(fx, levels, tolerance, exact_up_to=14)
        assert searched.method == "local search" and not searched.exact
        assert exact.method == "held-karp" and exact.exact
        assert exact.lower_bound <= exact.total_time <= searched.total_time * (1 + 1e-12)
        assert searched.total_time <= searched.given_time
        assert searched.total_time <= searched.lower_bound * (1 + searched.gap) * (1 + 1e-12)
        assert "within" in str(searched) and "lower bound" in str(searched)

    @pytest.mark.parametrize("arguments, message", [
        (dict(exact_up_to=17), "exact_up_to: 17 is not allowed"),
        (dict(initial="periodic"), "initial: 'periodic' is not allowed for plan_order"),
        (dict(margin=2.0), "margin: 2.0"),
    ])
    def test_bad_input(self, arguments, message):
        fx, levels, _, _ = scan(3, 0)
        with pytest.raises(InputError, match=message):
            fo.plan_order(fx, levels, fo.Tolerance.absolute(TOLERANCE), **arguments)

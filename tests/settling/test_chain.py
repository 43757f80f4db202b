"""Tests for firstorder.settling.chain: the exact plan against scipy.optimize and an exhaustive
grid, and the whole-array walk against the step-by-step one."""

from __future__ import annotations

import math

import numpy as np
import pytest

import firstorder as fo
from firstorder.settling.chain import Chain, exact_aims, walk, walk_fast

from builders import three_speeds

TOLERANCE = 1e-3  # V, absolute



def handbook_taus(k1, k2) -> np.ndarray:
    """Parallel resistances times C (handbook): the time constant of each step."""
    taus = []
    for a, b in zip(k1, k2):
        conductance = 1 / 1e9 + (1 / 1e6 if a else 0.0) + (1 / 1e3 if b else 0.0)
        taus.append(1e-9 / conductance)
    return np.array(taus)


SEQUENCES = {
    # fast -> slow, a small step on in the same direction: lingering helps (issue 17)
    "fast-slow": dict(vin=[1.0, 1.01], k1=[0, 1], k2=[1, 0]),
    # tau up by 10^3 at each step, rising: both steps before the last linger
    "three-speeds": dict(vin=[1.0, 1.01, 1.02], k1=[0, 1, 0], k2=[1, 0, 0]),
    # alternating 1 µs and 1 ms, rising and then falling: lingering only where it pays
    "alternating": dict(vin=[1.0, 1.02, 1.05, 1.03], k1=[0, 1, 0, 1], k2=[1, 0, 1, 0]),
}


class TestExactPlan:
    @pytest.mark.parametrize("name", list(SEQUENCES))
    def test_exact_plan_is_legal_and_beats_greedy(self, name):
        fx, levels = three_speeds(), SEQUENCES[name]
        tolerance = fo.Tolerance.absolute(TOLERANCE)
        greedy = fo.plan_table(fx, levels, tolerance)
        exact = fo.plan_table(fx, levels, tolerance, method="exact")
        drive = fo.plan_dwells(fx, levels, tolerance, method="exact")
        assert exact.attrs["exact"] is True
        assert drive.end - drive.start == pytest.approx(exact.attrs["total_time"], rel=1e-12)
        assert exact.attrs["total_time"] < greedy.attrs["total_time"] * (1 - 1e-3)
        # Judged by the engine, not the plan: every sample inside.
        assert fx.respond(drive).settling(tolerance, sample_delay=exact["sample_delay"].to_numpy())["ok"].all()

    @pytest.mark.parametrize("name", list(SEQUENCES))
    def test_against_scipy_optimize_from_several_starts(self, name):
        from scipy.optimize import minimize

        fx, levels = three_speeds(), SEQUENCES[name]
        tolerance = fo.Tolerance.absolute(TOLERANCE)
        exact = fo.plan_table(fx, levels, tolerance, method="exact")
        taus = handbook_taus(levels["k1"], levels["k2"])
        target = np.array(levels["vin"], dtype=float)

        def total(y):
            # Each step's residual at its end as the variable (within its tolerance, y <= 0 in
            # log of it): the dwell follows from the handbook step response.
            x, time = 0.0, 0.0
            for k, (f, tau) in enumerate(zip(target, taus)):
                offset = x - f
                end = math.copysign(TOLERANCE * math.exp(y[k]) if k < len(taus) - 1 else TOLERANCE, offset)
                if abs(end) >= abs(offset):
                    end = offset  # already inside: no wait
                time += tau * math.log(offset / end) if offset != 0 else 0.0
                x = f + end
            return time

        best = math.inf
        rng = np.random.default_rng(5)
        for trial in range(8):  # several starts: greedy (y = 0), and random residuals
            y0 = np.zeros(len(taus)) if trial == 0 else rng.uniform(-8.0, 0.0, len(taus))
            result = minimize(total, y0, method="L-BFGS-B", bounds=[(-20.0, 0.0)] * len(taus),
                              options={"ftol": 1e-15, "gtol": 1e-12})
            polished = minimize(total, result.x, method="Nelder-Mead",
                                options={"xatol": 1e-10, "fatol": 1e-15, "maxiter": 4000})
            best = min(best, float(result.fun), float(polished.fun) if (polished.x <= 0).all() else math.inf)
        assert best < math.inf
        # The exact plan is no longer than scipy's best, and scipy finds nothing shorter.
        assert exact.attrs["total_time"] <= best * (1 + 1e-7)
        assert exact.attrs["total_time"] >= best * (1 - 1e-7)

    def test_against_an_exhaustive_grid(self):
        # Three steps, tau 1 µs -> 1 ms -> 1 s: every choice of the first two dwells on a fine grid
        # (as extra time beyond the least that passes), the last as short as its sample allows.
        fx, levels = three_speeds(), SEQUENCES["three-speeds"]
        tolerance = fo.Tolerance.absolute(TOLERANCE)
        exact = fo.plan_table(fx, levels, tolerance, method="exact").attrs["total_time"]
        greedy = fo.plan_table(fx, levels, tolerance).attrs["total_time"]
        taus = handbook_taus(levels["k1"], levels["k2"])
        f = np.array(levels["vin"], dtype=float)
        extra0 = np.linspace(0.0, 12.0, 1201)[:, None] * taus[0]
        extra1 = np.linspace(0.0, 12.0, 1201)[None, :] * taus[1]
        # Vectorised handbook steps over the grid.
        d0 = taus[0] * np.log(abs(0.0 - f[0]) / TOLERANCE) + extra0
        x1 = f[0] + (0.0 - f[0]) * np.exp(-d0 / taus[0])
        d1 = taus[1] * np.log(np.abs(x1 - f[1]) / TOLERANCE) + extra1
        x2 = f[1] + (x1 - f[1]) * np.exp(-d1 / taus[1])
        d2 = taus[2] * np.log(np.maximum(np.abs(x2 - f[2]) / TOLERANCE, 1.0))
        total = d0 + d1 + d2
        assert exact <= total.min() * (1 + 1e-9)
        assert exact >= total.min() * (1 - 1e-4)  # the grid's resolution, not more
        assert greedy == pytest.approx(total[0, 0], rel=1e-7)  # the grid's corner is greedy
        assert greedy - exact > 0.05  # about 94 ms saved in the 1 s step

    @pytest.mark.parametrize("hold_after", [None, "3u"])
    def test_with_one_tau_exact_is_greedy(self, hold_after):
        rng = np.random.default_rng(2)
        fx = fo.Fixture.rc(r="1k", c="10n")
        levels = {"vin": rng.uniform(-5, 5, 12)}
        tolerance = fo.Tolerance.absolute("1m")
        greedy = fo.plan_table(fx, levels, tolerance, hold_after=hold_after)
        exact = fo.plan_table(fx, levels, tolerance, hold_after=hold_after, method="exact")
        np.testing.assert_array_equal(exact["dwell"], greedy["dwell"])

    def test_relative_tolerance_exact_is_greedy(self):
        fx = three_speeds()
        tolerance = fo.Tolerance.relative(0.001)
        levels = SEQUENCES["alternating"]
        greedy = fo.plan_table(fx, levels, tolerance)
        exact = fo.plan_table(fx, levels, tolerance, method="exact")
        np.testing.assert_array_equal(exact["dwell"], greedy["dwell"])


class TestWalkFast:
    @pytest.mark.parametrize("case", ["plain", "min_dwell", "hold", "holding", "relative", "margin", "aims"])
    def test_same_plan_as_step_by_step(self, case):
        rng = np.random.default_rng(len(case))
        n = 500
        rate = rng.choice([1e3, 1e6, 3e4], n)
        final = rng.uniform(-2, 2, n)
        final[rng.integers(0, n, 40)] = 0.5  # some repeats
        gain = rng.uniform(0.5, 1.5, n)
        hold = np.full(n, 2e-6 if case == "hold" else 0.0)
        if case == "holding":
            rate[rng.integers(1, n, 30)] = 0.0
        value, relative = (0.01, True) if case == "relative" else (1e-3, False)
        chain = Chain(rate, final, gain, value, relative, 0.2 if case == "margin" else 0.0, hold,
                      4e-5 if case in ("min_dwell", "holding") else 1e-9)
        aims = None
        if case == "aims":
            aims = np.where(rng.uniform(size=n) < 0.3, 1e-5, np.inf)
        slow = walk(chain, 0.3, aims)
        fast = walk_fast(chain, 0.3, aims)
        assert fast is not None
        # Both keep instants, not dwells: each dwell may come out a unit or two of the instant longer.
        rounding = 4 * np.spacing(slow.instants[-1])
        np.testing.assert_allclose(fast.dwell, slow.dwell, rtol=1e-10, atol=rounding)
        # A dwell a unit of the instant longer moves the state by about rate x limit x that.
        np.testing.assert_allclose(fast.state, slow.state, rtol=1e-10, atol=4 * rate.max() * 1e-3 * rounding)
        np.testing.assert_array_equal(fast.limited, slow.limited)
        assert (fast.error <= fast.limit).all()
        assert (np.diff(fast.instants) >= fast.dwell * (1 - 1e-15)).all()

    def test_exact_aims_only_where_tau_grows_in_one_direction(self):
        # tau 1 µs then 1 ms, rising twice: the first step lingers, v* = tau0 |D| / (tau1 - tau0).
        tau = np.array([1e-6, 1e-3])
        chain = Chain(1 / tau, np.array([1.0, 1.01]), np.ones(2), 1e-3, False, 0.0, np.zeros(2), 0.0)
        aims, proven = exact_aims(chain, 0.0)
        assert proven.all()
        assert aims[0] == pytest.approx(1e-6 * 0.01 / (1e-3 - 1e-6), rel=1e-12)
        assert aims[1] == np.inf
        # Falling after rising: the residual sits on the near side already, greedy is best.
        chain = Chain(1 / tau, np.array([1.0, 0.99]), np.ones(2), 1e-3, False, 0.0, np.zeros(2), 0.0)
        assert exact_aims(chain, 0.0)[0] is None


class TestWalkSettled:
    """The whole-array walk of a chain whose steps settle (settling/settled.py) against the
    step-by-step walk, and its compiled pieces against its numpy path."""

    @pytest.mark.parametrize("case", ["plain", "min_dwell", "hold", "margin", "aims", "probe", "close levels"])
    def test_same_plan_as_step_by_step(self, case):
        from firstorder.settling.settled import walk_settled

        rng = np.random.default_rng(len(case) + 7)
        n = 500
        rate = rng.choice([1e3, 1e6, 3e4], n)
        final = rng.uniform(-2, 2, n)
        final[rng.integers(0, n, 40)] = 0.5  # repeats: steps that do not move
        if case == "close levels":
            final[100:110] = 0.5 + 1.5e-3 * np.arange(10)  # jumps within two reaches: sides looked up a few back
        gain = rng.uniform(0.5, 1.5, n) if case == "probe" else np.ones(n)
        hold = np.full(n, 2e-6 if case == "hold" else 0.0)
        chain = Chain(rate, final, gain, 1e-3, False, 0.2 if case == "margin" else 0.0, hold,
                      3e-6 if case == "min_dwell" else 1e-9)  # min_dwell rules a few fast steps
        aims = np.where(rng.uniform(size=n) < 0.3, 1e-5, np.inf) if case == "aims" else None
        slow = walk(chain, 0.3, aims)
        settled = walk_settled(chain, 0.3, aims)
        assert settled is not None
        fast = settled.whole()
        rounding = 4 * np.spacing(slow.instants[-1])
        np.testing.assert_allclose(fast.dwell, slow.dwell, rtol=1e-10, atol=rounding)
        np.testing.assert_allclose(fast.state, slow.state, rtol=1e-10, atol=4 * rate.max() * 1e-3 * rounding)
        np.testing.assert_array_equal(fast.limited, slow.limited)
        # Every sample inside, judged again from the real dwells: the handbook form
        # |f - x_k| e^(-r (dwell - hold)) of each step (c_k times it for a probe).
        assert (fast.error <= 1e-3 * (0.8 if case == "margin" else 1.0)).all()
        assert (np.diff(fast.instants) >= fast.dwell * (1 - 1e-15)).all()
        assert settled.end_state == pytest.approx(slow.end_state, rel=1e-9, abs=1e-12)

    def test_declines_what_it_does_not_plan(self):
        from firstorder.settling.settled import walk_settled

        n = 100
        levels = np.where(np.arange(n) % 2 == 0, 1.0, -1.0)
        relative = Chain(np.full(n, 1e3), levels, np.ones(n), 0.01, True, 0.0, np.zeros(n), 0.0)
        held = Chain(np.where(np.arange(n) == 5, 0.0, 1e3), levels, np.ones(n), 1e-3, False, 0.0, np.zeros(n), 0.0)
        # min_dwell longer than every settling: no step lands where the passes assume
        ruled = Chain(np.full(n, 1e3), levels, np.ones(n), 1e-3, False, 0.0, np.zeros(n), 1.0)
        assert walk_settled(relative, 0.0) is None
        assert walk_settled(held, 0.0) is None
        assert walk_settled(ruled, 0.0) is None

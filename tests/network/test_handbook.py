"""Tests for firstorder.network: per-configuration reduction against handbook formulas and against
scipy.integrate.solve_ivp of nodal equations written by hand in this file.

Every network here is a scenario of our own invention."""

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import firstorder as fo


def parallel(*resistances):
    return 1.0 / sum(1.0 / r for r in resistances)


def loaded_divider(r1=10e3, r2=4.7e3, r_meter=1e6, r_filter=1e3, c=100e-9):
    fx = fo.Fixture()
    fx.voltage_source("vin", "in", "gnd")
    fx.resistor("r1", "in", "a", r1)
    fx.resistor("r2", "a", "gnd", r2)
    fx.resistor("r_meter", "a", "gnd", r_meter)
    fx.resistor("r_filter", "a", "out", r_filter)
    fx.capacitor("c", "out", "gnd", c)
    return fx


def bridge(r1=1e3, r2=2.2e3, r3=3.3e3, r4=4.7e3, c=1e-6):
    fx = fo.Fixture()
    fx.voltage_source("vx", "top", "gnd")
    fx.resistor("r1", "top", "a", r1)
    fx.resistor("r2", "a", "gnd", r2)
    fx.resistor("r3", "top", "b", r3)
    fx.resistor("r4", "b", "gnd", r4)
    fx.capacitor("c", "a", "b", c)
    return fx


# -- solve_ivp of hand-written nodal equations -------------------------------------------------
def integrate(rhs, drive, names, x0, t_eval):
    """Integrate dx/dt = rhs(x, levels) segment by segment with scipy's solve_ivp."""
    out = np.empty_like(t_eval)
    x = x0
    bounds = list(drive.times) + [drive.end]
    for k in range(len(drive)):
        levels = {n: drive.levels(n)[k] for n in names}
        start, stop = bounds[k], bounds[k + 1]
        inside = (t_eval >= start) & ((t_eval < stop) | ((k == len(drive) - 1) & (t_eval <= stop)))
        solution = solve_ivp(lambda t, y: [rhs(y[0], levels)], (start, stop), [x], method="DOP853",
                             rtol=1e-12, atol=1e-15, t_eval=t_eval[inside], dense_output=False)
        out[inside] = solution.y[0]
        x = solve_ivp(lambda t, y: [rhs(y[0], levels)], (start, stop), [x], method="DOP853",
                      rtol=1e-12, atol=1e-15).y[0, -1]
    return out


class TestTheveninReduction:
    def test_loaded_divider(self):
        r1, r2, rm, rf, c = 10e3, 4.7e3, 1e6, 1e3, 100e-9
        _, reduced = loaded_divider(r1, r2, rm, rf, c).configuration()
        # Handbook series/parallel: R_th = r_filter + r1 || r2 || r_meter,
        # V_th = vin * (r2 || r_meter) / (r1 + r2 || r_meter).
        lower = parallel(r2, rm)
        assert reduced.resistance == pytest.approx(rf + parallel(r1, r2, rm), rel=1e-13)
        assert reduced.tau == pytest.approx(c * (rf + parallel(r1, r2, rm)), rel=1e-13)
        assert reduced.gain[0] == pytest.approx(lower / (r1 + lower), rel=1e-13)

    def test_wheatstone_bridge(self):
        r1, r2, r3, r4, c = 1e3, 2.2e3, 3.3e3, 4.7e3, 1e-6
        _, reduced = bridge(r1, r2, r3, r4, c).configuration()
        # Handbook bridge formulas: R_th = r1 || r2 + r3 || r4 seen between the
        # midpoints, V_th = vx * (r2 / (r1 + r2) - r4 / (r3 + r4)).
        assert reduced.resistance == pytest.approx(parallel(r1, r2) + parallel(r3, r4), rel=1e-13)
        assert reduced.gain[0] == pytest.approx(r2 / (r1 + r2) - r4 / (r3 + r4), rel=1e-12)

    def test_balanced_bridge_has_no_thevenin_voltage(self):
        # Handbook: a bridge with r1/r2 = r3/r4 is balanced, zero volts across the midpoints.
        _, reduced = bridge(1e3, 2e3, 5e3, 10e3).configuration()
        assert abs(reduced.gain[0]) < 1e-15

    def test_norton_inductor(self):
        fx = fo.Fixture()
        fx.voltage_source("vin", "in", "gnd")
        fx.resistor("r1", "in", "a", 100.0)
        fx.resistor("r2", "a", "gnd", 300.0)
        fx.inductor("l", "a", "gnd", 10e-3)
        _, reduced = fx.configuration()
        # Handbook: the inductor sees R_N = r1 || r2 and, shorted, carries I_N = vin / r1.
        assert reduced.resistance == pytest.approx(75.0, rel=1e-14)
        assert reduced.tau == pytest.approx(10e-3 / 75.0, rel=1e-14)
        assert reduced.gain[0] == pytest.approx(1 / 100.0, rel=1e-14)


class TestTheveninNortonEquivalence:
    def test_current_source_with_parallel_resistor_equals_voltage_source_with_series_resistor(self):
        r, c, i_level = 2.2e3, 47e-9, [1e-3, -0.5e-3, 2e-3]
        norton = fo.Fixture()
        norton.current_source("i", "gnd", "a")
        norton.resistor("r", "a", "gnd", r)
        norton.capacitor("c", "a", "gnd", c)
        thevenin = fo.Fixture()
        thevenin.voltage_source("v", "s", "gnd")
        thevenin.resistor("r", "s", "a", r)
        thevenin.capacitor("c", "a", "gnd", c)
        times = [0, "50u", "120u"]
        # Source transformation (handbook): I in parallel with R is V = I R in series with R.
        a = norton.respond(fo.Drive(times, end="300u", i=i_level), initial=0.3)
        b = thevenin.respond(fo.Drive(times, end="300u", v=[x * r for x in i_level]), initial=0.3)
        t = np.linspace(0, 300e-6, 301)
        np.testing.assert_allclose(a.total(t), b.total(t), rtol=1e-13, atol=1e-15)
        assert norton.tau == pytest.approx(thevenin.tau, rel=1e-15)


class TestAgainstSolveIvp:
    def test_two_sources_into_a_switched_capacitor(self):
        r1, r2, r_on, r_off, r_leak, c = 1e3, 2.2e3, 10.0, 1e6, 470e3, 220e-9
        fx = fo.Fixture()
        fx.voltage_source("v1", "s1", "gnd")
        fx.voltage_source("v2", "s2", "gnd")
        fx.resistor("r1", "s1", "a", r1)
        fx.resistor("r2", "s2", "a", r2)
        fx.switch("k", "a", "b", r_on=r_on, r_off=r_off)
        fx.capacitor("c", "b", "gnd", c)
        fx.resistor("r_leak", "b", "gnd", r_leak)

        def rhs(v, u):
            rk = r_on if u["k"] else r_off
            # KCL at a, solved by hand: (v1 - va)/r1 + (v2 - va)/r2 + (v - va)/rk = 0.
            va = (u["v1"] / r1 + u["v2"] / r2 + v / rk) / (1 / r1 + 1 / r2 + 1 / rk)
            # KCL at b: C dv/dt = (va - v)/rk - v/r_leak.
            return ((va - v) / rk - v / r_leak) / c

        drive = fo.Drive([0, "0.5m", "1m", "1.5m"], end="3m", v1=[1, 5, 5, -2], v2=[0, 0, 3, 3], k=[1, 1, 0, 1])
        t = np.linspace(0, 3e-3, 400)
        got = fx.respond(drive, initial=0.25).total(t)
        np.testing.assert_allclose(got, integrate(rhs, drive, ["v1", "v2", "k"], 0.25, t), rtol=1e-8, atol=1e-10)

    def test_current_and_voltage_source_with_ideal_switch(self):
        r1, r2, r3, c = 3.3e3, 1e3, 100e3, 1e-6
        fx = fo.Fixture()
        fx.current_source("ib", "gnd", "a")
        fx.voltage_source("vs", "s", "gnd")
        fx.resistor("r1", "a", "gnd", r1)
        fx.resistor("r2", "s", "a", r2)
        fx.switch("k", "a", "b")  # ideal: 0 ohm closed, no leakage open
        fx.capacitor("c", "b", "gnd", c)
        fx.resistor("r3", "b", "gnd", r3)

        def rhs(v, u):
            if u["k"]:
                # b = a: C dv/dt = ib + (vs - v)/r2 - v/r1 - v/r3.
                return (u["ib"] + (u["vs"] - v) / r2 - v / r1 - v / r3) / c
            return -v / r3 / c  # open: only r3 discharges c

        drive = fo.Drive([0, "1m", "2m", "4m"], end="8m", ib=[1e-3, 1e-3, -2e-3, 0], vs=[0, 2, 2, -1], k=[1, 0, 1, 1])
        t = np.linspace(0, 8e-3, 400)
        got = fx.respond(drive, initial=-0.5).total(t)
        np.testing.assert_allclose(got, integrate(rhs, drive, ["ib", "vs", "k"], -0.5, t), rtol=1e-8, atol=1e-10)

    def test_switched_coil_with_two_sources_and_flyback(self):
        r_on, r_off, rf, rb, r2, l = 1.0, 1e5, 470.0, 50.0, 220.0, 20e-3
        fx = fo.Fixture()
        fx.voltage_source("v1", "s1", "gnd")
        fx.voltage_source("v2", "s2", "gnd")
        fx.switch("k", "s1", "a", r_on=r_on, r_off=r_off)
        fx.resistor("rf", "a", "gnd", rf)
        fx.inductor("l", "a", "b", l)
        fx.resistor("rb", "b", "gnd", rb)
        fx.resistor("r2", "s2", "b", r2)

        def rhs(i, u):
            rk = r_on if u["k"] else r_off
            # KCL at a: (v1 - va)/rk - va/rf - i = 0;  at b: i + (v2 - vb)/r2 - vb/rb = 0.
            va = (u["v1"] / rk - i) / (1 / rk + 1 / rf)
            vb = (i + u["v2"] / r2) / (1 / r2 + 1 / rb)
            return (va - vb) / l  # KVL: L di/dt = v(a) - v(b)

        drive = fo.Drive([0, "0.2m", "0.5m", "0.7m"], end="1.2m", v1=[12, 12, 12, 0], v2=[0, 1, 1, 1], k=[1, 1, 0, 1])
        t = np.linspace(0, 1.2e-3, 400)
        got = fx.respond(drive, initial=0.0).total(t)
        np.testing.assert_allclose(got, integrate(rhs, drive, ["v1", "v2", "k"], 0.0, t), rtol=1e-8, atol=1e-11)

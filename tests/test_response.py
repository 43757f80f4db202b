"""Tests for firstorder.response: exact responses against outside references."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import signal
from scipy.integrate import solve_ivp

import firstorder as fo
from firstorder.errors import InputError, TopologyError
from firstorder.response import Response


@st.composite
def rc_or_rl_drives(draw):
    """A fixture (RC or RL) and a drive whose segment lengths span six decades of tau."""
    kind = draw(st.sampled_from(["rc", "rl"]))
    resistance = draw(st.floats(10.0, 1e5))
    store = draw(st.floats(1e-9, 1e-3))
    fixture = fo.Fixture.rc(resistance, store) if kind == "rc" else fo.Fixture.rl(resistance, store)
    tau = fixture.tau
    n = draw(st.integers(1, 6))
    exponents = draw(st.lists(st.floats(-3, 3), min_size=n, max_size=n))
    levels = draw(st.lists(st.floats(-10.0, 10.0), min_size=n, max_size=n))
    durations = tau * 10.0 ** np.array(exponents)
    origin = tau * draw(st.floats(0, 100.0))  # a time origin the shortest segment can follow
    times = origin + np.concatenate([[0.0], np.cumsum(durations)[:-1]])
    drive = fo.Drive(times, end=origin + durations.sum(), vin=levels)
    initial = draw(st.floats(-10.0, 10.0))
    return fixture, drive, initial


def integrate(fixture, drive, initial):
    """Reference: scipy.integrate.solve_ivp of the series RC / RL ODE, segment by segment.

    RC: C dv/dt = (vin - v) / R.   RL: L di/dt = vin - R i.  (Written here from the
    circuit laws, not from firstorder's reduction.)
    """
    parts = fixture.part_map
    r = parts["r"].value
    if "c" in parts:
        c = parts["c"].value
        rhs = lambda t, x, u: [(u - x[0]) / (r * c)]  # noqa: E731
        scale = 1.0
    else:
        inductance = parts["l"].value
        rhs = lambda t, x, u: [(u - r * x[0]) / inductance]  # noqa: E731
        scale = 1.0 / r
    x = initial
    states = [x]
    for k in range(len(drive)):
        # The ODE is autonomous, so each segment is integrated over [0, duration]: solve_ivp
        # cannot resolve a 1e-9 s span that starts at t = 1 s.
        duration = drive.durations[k]
        u = drive.levels("vin")[k]
        solution = solve_ivp(rhs, (0.0, duration), [x], args=(u,), method="DOP853", rtol=1e-12,
                             atol=1e-14 * scale)
        x = float(solution.y[0, -1])
        states.append(x)
    return np.array(states), scale


class TestAgainstSolveIvp:
    @settings(max_examples=220)
    @given(rc_or_rl_drives())
    def test_boundary_states(self, case):
        fixture, drive, initial = case
        if fixture.storage.kind == "inductor":
            initial = initial / fixture.part_map["r"].value
        response = fixture.respond(drive, initial=initial)
        reference, scale = integrate(fixture, drive, initial)
        largest = max(np.abs(drive.levels("vin")).max(), abs(initial) / scale, 1e-3) * scale
        # Required: error below 1e-8 of the largest level (issue 2).
        np.testing.assert_allclose(response.boundary, reference, rtol=0, atol=1e-8 * largest)


class TestAgainstLsim:
    def test_step_aligned_grid(self):
        # Reference: scipy.signal.lsim with a zero-order hold on a grid that contains
        # every change instant (exact for piecewise-constant input on that grid).
        fixture = fo.Fixture.rc("3.3k", "47n")
        tau = fixture.tau
        rng = np.random.default_rng(7)
        steps_per_segment = 25
        n = 40
        dt = tau / 10
        times = np.arange(n) * steps_per_segment * dt
        levels = rng.uniform(-5, 5, n)
        drive = fo.Drive(times, end=n * steps_per_segment * dt, vin=levels)
        grid = np.arange(n * steps_per_segment + 1) * dt
        u = np.repeat(levels, steps_per_segment)
        u = np.append(u, levels[-1])
        system = signal.StateSpace([[-1 / tau]], [[1 / tau]], [[1.0]], [[0.0]])
        _, y, _ = signal.lsim(system, u, grid, X0=[0.25], interp=False)
        ours = fixture.respond(drive, initial=0.25).total(grid)
        np.testing.assert_allclose(ours, y, rtol=0, atol=1e-11)


class TestTradeFacts:
    @pytest.mark.parametrize(
        ("taus", "fraction"),
        # Common practice (every RC handbook): share of a step reached after n time constants.
        [(1, 0.632), (2, 0.865), (3, 0.950), (5, 0.993)],
    )
    def test_share_of_step_after_n_tau(self, taus, fraction):
        for fixture in (fo.Fixture.rc("10k", "100n"), fo.Fixture.rl("47", "10m")):
            tau = fixture.tau
            drive = fo.Drive.steps([(0, 0.0), (tau, 1.0)], end=10 * tau)
            response = fixture.respond(drive)
            final = response.final[1]
            assert response.total(tau + taus * tau) / final == pytest.approx(fraction, abs=5e-4)

    def test_square_wave_ripple(self):
        # Common practice (from memory): a 50 % square wave of amplitude V into an RC leaves a
        # peak-to-peak ripple of V * tanh(T / (4 tau)) in the periodic steady state.
        fixture = fo.Fixture.rc("1k", "1u")
        for period in (0.2e-3, 1e-3, 4e-3):
            drive = fo.Drive.pulses(period=period, duty=0.5, high=2.0, low=0.0, count=1)
            response = fixture.respond(drive, initial="periodic")
            ripple = response.boundary[1] - response.boundary[0]
            assert ripple == pytest.approx(2.0 * np.tanh(period / (4 * fixture.tau)), rel=1e-12)


def switched_network():
    fixture = fo.Fixture()
    fixture.voltage_source("vdac", "drv", "gnd")
    fixture.current_source("ibias", "gnd", "b")
    fixture.resistor("rs", "drv", "a", "1k")
    fixture.switch("k1", "a", "b", r_on="100")
    fixture.resistor("rload", "b", "gnd", "10k")
    fixture.capacitor("ch", "b", "gnd", "100n")
    fixture.probe("v_a", node="a")
    fixture.probe("i_rs", through="rs")
    drive = fo.Drive([0, "1m", "3m", "3.5m"], end="6m", vdac=[0, 2.5, -1.2, 1.0], k1=[1, 1, 0, 1],
                     ibias=[1e-4, 0, 2e-4, 0])
    return fixture, drive


class TestIdentities:
    @pytest.fixture
    def response(self):
        fixture, drive = switched_network()
        return fixture.respond(drive, initial=0.3)

    @pytest.fixture
    def grid(self):
        return np.linspace(0, 6e-3, 601)

    def test_total_is_zero_input_plus_zero_state(self, response, grid):
        np.testing.assert_allclose(response.zero_input(grid) + response.zero_state(grid), response.total(grid),
                                   atol=1e-14)

    def test_natural_is_total_minus_forced(self, response, grid):
        np.testing.assert_allclose(response.natural(grid), response.total(grid) - response.forced(grid), atol=1e-14)

    def test_contributions_add_up(self, response, grid):
        total = response.contribution("vdac", grid) + response.contribution("ibias", grid)
        np.testing.assert_allclose(total, response.zero_state(grid), atol=1e-14)

    def test_probe_components_add_up(self, response, grid):
        for probe in ("v_a", "i_rs"):
            zi = response.probe(probe, grid, "zero_input")
            zs = response.probe(probe, grid, "zero_state")
            np.testing.assert_allclose(zi + zs, response.probe(probe, grid), atol=1e-14)
            parts = response.probe(probe, grid, "vdac") + response.probe(probe, grid, "ibias")
            np.testing.assert_allclose(parts, zs, atol=1e-14)

    def test_state_continuous_at_every_change(self, response):
        for k, change in enumerate(response.drive.times[1:], start=1):
            before = response.total(np.nextafter(change, -np.inf))
            assert before == pytest.approx(response.boundary[k], abs=1e-12)
            assert response.total(change) == pytest.approx(response.boundary[k], rel=1e-15, abs=1e-15)

    def test_held_segment_keeps_state_exactly(self, response):
        # k1 open from 3 ms to 3.5 ms: the capacitor sees only rload and ibias, so it moves;
        # opening the switch in a fixture with nothing else on the node holds it exactly.
        fixture = fo.Fixture()
        fixture.voltage_source("vin", "in", "gnd")
        fixture.resistor("r", "in", "a", "1k")
        fixture.switch("k", "a", "b")
        fixture.capacitor("c", "b", "gnd", "1u")
        drive = fo.Drive([0, "2m"], end="10m", vin=[3.0, -7.0], k=[1, 0])
        res = fixture.respond(drive)
        assert res.tau[1] == np.inf
        assert res.boundary[2] == res.boundary[1]
        assert res.natural(np.array([5e-3]))[0] == 0.0

    def test_periodic_start_equals_end(self):
        fixture, drive = switched_network()
        response = fixture.respond(drive, initial="periodic")
        assert response.boundary[0] == pytest.approx(response.boundary[-1], rel=1e-13)

    def test_settled_start_is_first_final(self):
        fixture, drive = switched_network()
        response = fixture.respond(drive, initial="settled")
        assert response.boundary[0] == response.final[0]
        assert response.natural(np.array([0.0, 0.5e-3]))[1] == pytest.approx(0.0, abs=1e-15)

    def test_unsorted_times(self, response, grid):
        order = np.random.default_rng(3).permutation(grid.size)
        np.testing.assert_array_equal(response.total(grid[order]), response.total(grid)[order])

    def test_scalar_time_gives_float(self, response):
        assert isinstance(response.total(1e-3), float)
        assert isinstance(response.total("1m"), float)


class TestNumericRange:
    @settings(max_examples=200)
    @given(
        tau_exponent=st.floats(-12, 12),
        lengths=st.lists(st.floats(-15, 9), min_size=1, max_size=8),
        levels=st.lists(st.floats(-1e6, 1e6), min_size=8, max_size=8),
        origin=st.floats(0, 1e6),
    )
    def test_no_nan_or_inf(self, tau_exponent, lengths, levels, origin):
        # tau from 1e-12 s to 1e12 s, segments from 1e-15 s to 1e9 s, levels up to 1e6,
        # time origins up to 1e6 s (issue 2).
        fixture = fo.Fixture.rc(1.0, 10.0**tau_exponent)
        durations = 10.0 ** np.array(lengths)
        times = origin + np.concatenate([[0.0], np.cumsum(durations)[:-1]])
        if not (np.diff(times) > 0).all() or not origin + durations.sum() > times[-1]:
            return  # durations below the float spacing at this origin cannot be represented
        drive = fo.Drive(times, end=origin + durations.sum(), vin=levels[: len(lengths)])
        response = fixture.respond(drive, initial=levels[-1])
        assert np.isfinite(response.boundary).all()
        grid = np.linspace(times[0], drive.end, 50)
        for component in ("total", "zero_input", "zero_state", "forced", "natural"):
            assert np.isfinite(response.evaluate(grid, (component,))[component]).all()
        assert np.abs(response.boundary).max() <= 1e6 * (1 + 1e-12)


BAD_RESPONSES = [
    (lambda fx, d: fx.respond(fo.Drive([0, 1], end=2, vin=[0, 1], vx=[0, 0])), "vx"),
    (lambda fx, d: fx.respond(fo.Drive([0, 1], end=2, other=[0, 1])), "other"),
    (lambda fx, d: fx.respond(d, initial="warm"), "initial"),
    (lambda fx, d: fx.respond(d, initial="3 A"), "initial"),
    (lambda fx, d: fx.respond(d, initial=float("nan")), "initial"),
    (lambda fx, d: fx.respond(d).total(-1.0), "t"),
    (lambda fx, d: fx.respond(d).total([0.0, 99.0]), "t"),
    (lambda fx, d: fx.respond(d).total([0.0, float("nan")]), "t"),
    (lambda fx, d: fx.respond(d).contribution("vnone", 0.0), "contribution"),
    (lambda fx, d: fx.respond(d).probe("nothing", 0.0), "probe"),
    (lambda fx, d: fx.respond(d).evaluate(0.0, ("bogus",)), "component"),
    (lambda fx, d: fo.Fixture.rc(r=0, c="1u"), "r"),
    (lambda fx, d: fo.Fixture.rc(r="-1k", c="1u"), "r"),
    (lambda fx, d: fo.Fixture.rc(r="1k", c="inf"), "c"),
    (lambda fx, d: fo.Fixture.rc(r="1k", c="1uH"), "c"),
    (lambda fx, d: fo.Fixture.rl(r="1k", l=float("nan")), "l"),
]


@pytest.mark.parametrize(("action", "field"), BAD_RESPONSES)
def test_bad_input_names_field(action, field):
    fixture = fo.Fixture.rc("1k", "1u")
    drive = fo.Drive([0, 1e-3], end=2e-3, vin=[0, 1])
    with pytest.raises(ValueError, match=field):
        action(fixture, drive)


def test_switch_column_must_be_zero_or_one():
    fixture, drive = switched_network()
    with pytest.raises(InputError, match=r"drive.k1\[1\]"):
        fixture.respond(drive.replace(k1=[1, 0.5, 0, 1]))


def test_missing_switch_column():
    fixture, _ = switched_network()
    drive = fo.Drive([0], end=1, vdac=[1], ibias=[0])
    with pytest.raises(InputError, match="k1"):
        fixture.respond(drive)


def test_periodic_when_every_segment_holds_asks_for_a_number():
    # Every segment holds and nothing drifts: the end equals the start for any start, so
    # "periodic" names no one start; it used to pick 0 V silently.
    fixture = fo.Fixture()
    fixture.voltage_source("vin", "in", "gnd")
    fixture.switch("k", "in", "out")
    fixture.capacitor("c", "out", "gnd", "1n")
    drive = fo.Drive([0, "1m"], end="2m", vin=[1.0, 2.0], k=[0, 0])
    with pytest.raises(InputError, match=r"initial: 'periodic' .* any start repeats.* give the starting state "
                                         r"as a number \(in V\)"):
        fixture.respond(drive, initial="periodic")
    assert fixture.respond(drive, initial="0.5").boundary.tolist() == [0.5, 0.5, 0.5]


def test_ramp_without_resistance_refused():
    fixture = fo.Fixture()
    fixture.current_source("ichg", "gnd", "a")
    fixture.switch("k", "a", "b")
    fixture.resistor("r", "b", "gnd", "1k")
    fixture.capacitor("c", "a", "gnd", "1u")
    drive = fo.Drive([0, 1e-3], end=2e-3, ichg=[1e-3, 1e-3], k=[1, 0])
    with pytest.raises(TopologyError, match=r"segment 1.*'c'.*ichg"):
        fixture.respond(drive)


# Response.from_segments: a response of a measured model (see firstorder.traces), without a fixture.
class TestResponseFromSegments:
    def test_matches_a_fixture_response_in_every_component(self):
        # Reference: the engine's response of an RC fixture with the same tau and finals.
        drive = fo.Drive.steps([(0, 0.5), ("1m", 2.0), ("2.5m", -1.0)], end="5m")
        fixture = fo.Fixture.rc(r="2k", c="500n")
        expected = fixture.respond(drive, initial=0.3)
        built = Response.from_segments(drive, [1e-3] * 3, [0.5, 2.0, -1.0], initial=0.3, unit="V")
        t = np.linspace(0.0, 5e-3, 301)
        for component in ("total", "zero_input", "zero_state", "forced", "natural"):
            np.testing.assert_allclose(getattr(built, component)(t), getattr(expected, component)(t), atol=1e-12)
        np.testing.assert_allclose(built.contribution("fitted", t), expected.zero_state(t), atol=1e-12)

    def test_closed_form_and_hold(self):
        # Handbook closed form x(t) = f + (x0 - f) exp(-t / tau); inf tau holds the state.
        drive = fo.Drive([0, "2m"], end="4m", vin=[0, 0])
        built = Response.from_segments(drive, [0.5e-3, math.inf], [1.0, 123.0], initial=0.0)
        assert built.total(1e-3) == pytest.approx(1.0 - math.exp(-2.0))
        assert built.total(4e-3) == pytest.approx(1.0 - math.exp(-4.0))
        assert built.forced(3e-3) == pytest.approx(1.0 - math.exp(-4.0))

    def test_settled_and_periodic(self):
        drive = fo.Drive.steps([(0, 1.0), ("1m", 0.0)], end="2m")
        settled = Response.from_segments(drive, [0.2e-3, 0.2e-3], [1.0, 0.0], initial="settled")
        assert settled.initial == 1.0
        periodic = Response.from_segments(drive, [0.5e-3, 0.5e-3], [1.0, 0.0], initial="periodic")
        assert periodic.boundary[-1] == pytest.approx(periodic.initial)

    @pytest.mark.parametrize(
        "tau, final, match",
        [
            ([1e-3], [0.0, 1.0], r"from_segments\.tau: has 1 values but the drive has 2"),
            ([1e-3, 1e-3], [0.0], r"from_segments\.final: has 1 values"),
            ([1e-3, 0.0], [0.0, 1.0], r"from_segments\.tau\[1\]: 0\.0 is not allowed"),
            ([1e-3, float("nan")], [0.0, 1.0], r"from_segments\.tau\[1\]: nan"),
            ([1e-3, 1e-3], [0.0, float("nan")], r"from_segments\.final\[1\]: nan"),
        ],
    )
    def test_bad_input_names_the_field(self, tau, final, match):
        drive = fo.Drive.steps([(0, 0.0), ("1m", 1.0)], end="2m")
        with pytest.raises(fo.InputError, match=match):
            Response.from_segments(drive, tau, final)

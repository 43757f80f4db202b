"""Tests for firstorder.studies._fused: the compiled settling summary of a slice of units is
the numpy path's (UnitsRun.columns, then summarize) bit for bit, for every kind of target
segment, tolerance, sample and probe, on any number of threads."""

from __future__ import annotations

import numpy as np
import pytest

import firstorder as fo
from firstorder import _kernels
from firstorder.studies import Spread, Uniform
from firstorder.studies.run import Request, summarize
from firstorder.studies.summary import rank, sides

pytest.importorskip("numba")

SEGMENTS, UNITS = 48, 500  # 24,000 values: past the kernels' threshold


def relay_fixture() -> fo.Fixture:
    """A DAC through relay k1 onto a hold capacitor with a leak, and a meter behind relay k2
    (an invented scenario); probes of a node, a difference and two currents."""
    return (fo.Fixture().voltage_source("vdac", "dac", "gnd").resistor("rs", "dac", "a", "1k")
            .switch("k1", "a", "h", r_on="2", r_off="1G").capacitor("ch", "h", "gnd", "10n")
            .resistor("r_leak", "h", "gnd", "100M").switch("k2", "h", "m").resistor("r_meter", "m", "gnd", "10M")
            .probe("v_a", node="a").probe("v_m", node="m", reference="a").probe("i_rs", through="rs")
            .probe("i_ch", through="ch"))


def relay_drive() -> fo.Drive:
    """Steps of the DAC; k1 open every fourth step (the capacitor droops into its leak and,
    every third step, the meter), invented."""
    rng = np.random.default_rng(5)
    k = np.arange(SEGMENTS)
    return fo.Drive(k * 0.2e-3, SEGMENTS * 0.2e-3, vdac=np.round(rng.uniform(-2.0, 2.0, SEGMENTS), 3),
                    k1=(k % 4 != 3).astype(float), k2=(k % 3 == 0).astype(float))


@pytest.fixture(scope="module")
def run():
    spread = Spread({"rs": "1%", "ch": "10%", "k1.r_on": Uniform("1", "4"), "r_leak": "20%", "vdac.offset": "1m"},
                    temperature=(0, 50), tempco={"ch": "-750ppm"})
    study = relay_fixture().study(relay_drive(), spread, units=UNITS, seed=4, initial=0.3, keep=True, progress=False)
    (the_run,) = list(study._each_run(0, UNITS))
    assert the_run.rate.size >= _kernels.THRESHOLD
    assert the_run.holds_judged_as_droop().any() and not the_run.holds_judged_as_droop().all()
    return the_run


def request(tolerance, delays, probe, within, fractions=(0.5, 0.99, 0.999)):
    ranks = [rank(f, UNITS) for f in fractions] + [UNITS - 1]
    keep = sides(ranks, UNITS)
    return Request(tolerance, delays, probe, None, within, keep, keep)


def numpy_path(run, ask):
    lot = run.columns(ask.tolerance, ask.delays, ask.probe, ask.aim, ask.within_segment)
    return summarize(lot, ask, run.draw.first)


TOLERANCES = {"absolute": fo.Tolerance.absolute("1m"), "lsb": fo.Tolerance.lsb(bits=16, span=5.0),
              "relative": fo.Tolerance.relative(1e-3), "loose": fo.Tolerance.absolute("0.5")}


@pytest.mark.parametrize("tolerance", TOLERANCES)
@pytest.mark.parametrize("sample", ["end", "short", "per segment"])
@pytest.mark.parametrize("within", [True, False])
def test_the_state(run, tolerance, sample, within):
    durations = run.drive.durations
    delays = {"end": None, "short": np.full(SEGMENTS, 0.05e-3),
              "per segment": np.linspace(0.0, 1.0, SEGMENTS) * durations}[sample]
    ask = request(TOLERANCES[tolerance], delays, None, within)
    fused = run._fused_summary(ask)
    assert fused is not None
    assert fused == numpy_path(run, ask)


@pytest.mark.parametrize("probe, tolerance", [("v_a", "absolute"), ("i_rs", "relative"), ("v_m", "loose"),
                                              ("i_ch", "relative")])
def test_probes(run, probe, tolerance):
    unit = "A" if probe.startswith("i_") else "V"
    value = {"absolute": fo.Tolerance.absolute("1m", unit=unit), "loose": fo.Tolerance.absolute("0.5", unit=unit),
             "relative": fo.Tolerance.relative(1e-3, unit=unit)}[tolerance]
    ask = request(value, np.full(SEGMENTS, 0.1e-3), probe, True)
    fused = run._fused_summary(ask)
    assert fused is not None and fused == numpy_path(run, ask)


def test_the_summary_is_used_and_counts_are_real(run):
    # A tolerance that some units meet at some samples and others do not: the counts and
    # the worst units are not trivial.
    ask = request(fo.Tolerance.absolute("2m"), np.full(SEGMENTS, 0.15e-3), None, True)
    fused = run.summary(ask)
    reference = numpy_path(run, ask)
    assert fused == reference
    assert ((fused.inside > 0) & (fused.inside < UNITS)).any()
    assert len(set(fused.worst.unit.tolist())) > 1


def test_threads_do_not_change_a_bit(run, monkeypatch):
    ask = request(fo.Tolerance.lsb(bits=16, span=5.0), None, None, True, fractions=(0.5, 0.9))
    several = run._fused_summary(ask)
    monkeypatch.setenv("FIRSTORDER_THREADS", "1")
    assert run._fused_summary(ask) == several


def test_without_the_kernels_the_numpy_path_answers(run, monkeypatch):
    ask = request(fo.Tolerance.absolute("1m"), None, None, True)
    monkeypatch.setenv("FIRSTORDER_KERNELS", "0")
    assert run._fused_summary(ask) is None
    assert run.summary(ask) == numpy_path(run, ask)


@pytest.mark.parametrize("tolerance", ["absolute", "relative"])
@pytest.mark.parametrize("probe", [None, "i_rs"])
@pytest.mark.parametrize("target", ["final", "aim"])
def test_one_segments_columns_are_that_column_of_all(run, tolerance, probe, target):
    """UnitsRun.columns(segment=k), which a histogram of one segment asks for, is column k of
    the whole columns, bit for bit (settling, holds, ends and the sample, both targets)."""
    unit = "A" if probe else "V"
    value = fo.Tolerance.absolute("1m", unit=unit) if tolerance == "absolute" else fo.Tolerance.relative(1e-3, unit=unit)
    aim = None if target == "final" else np.linspace(-1.0, 1.0, SEGMENTS) * (1e-3 if probe else 1.0)
    hold = run.holds_judged_as_droop()
    picked = [0, 1, int(np.flatnonzero(hold)[0]), SEGMENTS - 1, -2]
    for delays in (None, np.full(SEGMENTS, 0.1e-3)):
        for within in (True, False):
            whole = run.columns(value, delays, probe, aim, within)
            for k in picked:
                one = run.columns(value, delays, probe, aim, within, segment=k)
                for name in ("settle_time", "error_at_sample", "limit", "ok"):
                    got = getattr(one, name)
                    assert got.shape == (UNITS, 1), name
                    assert np.array_equal(got[:, 0], getattr(whole, name)[:, k], equal_nan=True), (name, k)
                assert np.array_equal(one.sample_time, whole.sample_time[[k]]), k
    with pytest.raises(IndexError):
        run.columns(value, None, probe, aim, True, segment=SEGMENTS)

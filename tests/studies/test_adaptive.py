"""Tests for firstorder.studies.adaptive: units="adaptive" (JCGM 101, 7.9) stops, repeats with
its seed, and its figures lie within the numerical tolerance of a far larger fixed study."""

from __future__ import annotations

import numpy as np
import pytest

import firstorder as fo
from firstorder.errors import InputError
from firstorder.studies import Normal, Spread
from firstorder.studies.adaptive import _margin, batch_figures

HALF_LSB_16 = fo.Tolerance.lsb(bits=16, span=5.0)
FX = fo.Fixture.rc("10k", "100n")
DRIVE = fo.Drive([0, "20m"], end="40m", vin=[5.0, 0.0])
SPREAD = Spread({"r": "1%", "c": Normal("3%")})
FIGURES = dict(tolerance=HALF_LSB_16, sample_delay="11.5m", fractions=(0.5, 0.9))


def adaptive(seed=1, **options):
    return FX.study(DRIVE, SPREAD, units="adaptive", seed=seed, numerical_tolerance=options.pop("tol", 0.005),
                    batch=options.pop("batch", 2000), progress=False, **FIGURES, **options)


@pytest.fixture(scope="module")
def study():
    return adaptive()


def test_it_stops_after_whole_batches_with_every_figure_within_tolerance(study):
    record = study.adaptive
    assert record.batches >= 2 and study.units == record.batches * 2000 == record.units
    assert record.margin <= 1.0 and record.figures == 2 * (2 + 2 + 1) + 1
    # JCGM 101 7.9.4: one batch fewer would not have stopped
    tables = [study.settling(HALF_LSB_16, "11.5m", fractions=(0.5, 0.9), units=2000, first=2000 * b)
              for b in range(record.batches - 1)]
    results = np.stack([batch_figures(t)[0] for t in tables])
    if record.batches > 2:
        assert _margin(results, batch_figures(tables[0])[1], 0.005) > 1.0


def test_the_same_seed_repeats_it_and_another_differs(study):
    again = adaptive()
    assert again.units == study.units
    assert again.settling(HALF_LSB_16, "11.5m").equals(study.settling(HALF_LSB_16, "11.5m"))
    other = adaptive(seed=2)
    assert not other.settling(HALF_LSB_16, "11.5m").equals(study.settling(HALF_LSB_16, "11.5m"))


def test_its_figures_are_within_the_tolerance_of_a_large_fixed_study(study):
    big = FX.study(DRIVE, SPREAD, units=400_000, seed=99, progress=False)
    mine = study.settling(HALF_LSB_16, "11.5m", fractions=(0.5, 0.9))
    reference = big.settling(HALF_LSB_16, "11.5m", fractions=(0.5, 0.9))
    for column in ("settle_time_50%", "settle_time_90%", "error_50%", "error_90%"):
        a, b = mine[column].to_numpy(), reference[column].to_numpy()
        # twice the tolerance: the stop holds 2 s within it, s being about the whole study's own error
        assert np.all(np.abs(a - b) <= 2 * 0.005 * np.abs(b)), column
    assert np.all(np.abs(mine["yield"] - reference["yield"]) <= 2 * 0.005)
    assert abs(study.passing(HALF_LSB_16, "11.5m").fraction - big.passing(HALF_LSB_16, "11.5m").fraction) <= 0.01


def test_the_display_says_how_it_stopped(study):
    assert "batches of 2,000 units" in study._repr_html_()


@pytest.mark.parametrize("options, match", [
    (dict(tol=0.0), "numerical_tolerance: 0.0"), (dict(tol=1.5), "numerical_tolerance: 1.5"),
    (dict(tol="1 percent"), "numerical_tolerance: '1 percent'"), (dict(tol=True), "numerical_tolerance: True"),
    (dict(batch=1), "batch: 1"), (dict(batch=2.5), "batch: 2.5"),
])
def test_bad_adaptive_arguments(options, match):
    with pytest.raises(InputError, match=match):
        adaptive(**options)


def test_adaptive_needs_a_tolerance_and_a_tolerance_needs_adaptive():
    with pytest.raises(InputError, match="tolerance: units='adaptive' needs"):
        FX.study(DRIVE, SPREAD, units="adaptive", seed=1, numerical_tolerance=0.01)
    with pytest.raises(InputError, match="numerical_tolerance: 0.01 is given, but units is 100"):
        FX.study(DRIVE, SPREAD, units=100, seed=1, numerical_tolerance=0.01)


def test_a_tolerance_it_cannot_reach_is_refused():
    with pytest.raises(InputError, match="numerical_tolerance: 1e-09 is not reached after 100 batches"):
        adaptive(tol=1e-9, batch=2)

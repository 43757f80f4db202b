"""Tests for firstorder.studies.sweep: every design point is the study of that point alone,
the grid is every combination, the yield at a point against a closed form (scipy.stats),
and bad arguments."""

from __future__ import annotations

import math

import numpy as np
import pytest

import firstorder as fo
from firstorder.errors import InputError
from firstorder.studies import Spread
from firstorder.studies.sweep import MAX_POINTS, point_seed

TOL = fo.Tolerance.absolute("1 mV")
FIXTURE = fo.Fixture.rc("1k", "100n")
DRIVE = fo.Drive([0, "1m"], end="2m", vin=[1.0, 0.0])
SPREAD = Spread({"c": "10%"})


@pytest.fixture(scope="module")
def table():
    return fo.sweep(FIXTURE, DRIVE, SPREAD, {"c": ["100n", "130n", "150n"], "r": ["1k", "1.1k"]},
                    tol=TOL, units=400, seed=5, fractions=(0.5, 0.999))


class TestEveryPointIsItsOwnStudy:
    def test_the_grid_is_every_combination_last_key_fastest(self, table):
        points = table.drop_duplicates("point")[["c", "r"]].to_records(index=False).tolist()
        assert points == [("100n", "1k"), ("100n", "1.1k"), ("130n", "1k"), ("130n", "1.1k"),
                          ("150n", "1k"), ("150n", "1.1k")]
        assert len(table) == 6 * len(DRIVE)
        assert table.groupby("point").segment.apply(list).tolist() == [[0, 1]] * 6

    @pytest.mark.parametrize("point", [0, 3, 5])
    def test_a_point_studied_alone_gives_its_numbers_exactly(self, table, point):
        rows = table[table.point == point]
        c, r, seed = rows.c.iloc[0], rows.r.iloc[0], int(rows.seed.iloc[0])
        alone = FIXTURE.with_values(c=c, r=r).study(DRIVE, SPREAD, units=400, seed=seed)
        assert rows["yield"].tolist() == alone.settling(TOL)["yield"].tolist()
        passing = alone.passing(TOL)
        assert (rows.passing.iloc[0], rows.passing_low.iloc[0], rows.passing_high.iloc[0]) == (
            passing.fraction, passing.low, passing.high)
        np.testing.assert_array_equal(rows["delay_for_0.999"], alone.delay_for(TOL, 0.999))
        np.testing.assert_array_equal(rows["delay_for_0.5"], alone.delay_for(TOL, 0.5))

    def test_points_draw_different_units(self, table):
        assert table.seed.nunique() == 6
        assert len(set(table.drop_duplicates("point")["delay_for_0.5"].round(12))) == 6

    def test_the_same_seed_gives_the_same_table_another_differs(self, table):
        again = fo.sweep(FIXTURE, DRIVE, SPREAD, {"c": ["100n", "130n", "150n"], "r": ["1k", "1.1k"]},
                         tol=TOL, units=400, seed=5, fractions=(0.5, 0.999))
        assert again.equals(table)
        other = fo.sweep(FIXTURE, DRIVE, SPREAD, {"c": ["100n"]}, tol=TOL, units=400, seed=6, fractions=(0.5,))
        assert other.seed.iloc[0] != table.seed.iloc[0]

    def test_point_seeds_depend_only_on_seed_and_index(self):
        assert point_seed(5, 2) == point_seed(5, 2) != point_seed(5, 3) != point_seed(6, 3)
        assert 0 <= point_seed(2**63, 10**6) < 2**63


class TestYieldAgainstClosedForm:
    def test_the_yield_is_the_uniform_cdf_of_the_capacitor(self):
        # A 1 V step into 1 kΩ and C uniform in 150n ± 10 %: the residual at the segment's end
        # is exp(-T / (R C)) V, inside 1 mV exactly when C <= T / (R ln 1000). The fraction of
        # units inside is the uniform CDF there (scipy.stats.uniform), within the binomial
        # Monte Carlo error (4 standard deviations).
        from scipy import stats

        units = 4000
        table = fo.sweep(FIXTURE, DRIVE, SPREAD, {"c": ["150n"]}, tol=TOL, units=units, seed=9)
        threshold = 1e-3 / (1e3 * math.log(1000.0))
        expected = stats.uniform(loc=0.9 * 150e-9, scale=0.2 * 150e-9).cdf(threshold)
        assert 0.1 < expected < 0.9  # the band straddles the threshold, so the check can fail
        sigma = math.sqrt(expected * (1 - expected) / units)
        assert table.segment.iloc[0] == 0  # from rest: a step of exactly 1 V
        assert abs(table["yield"].iloc[0] - expected) < 4 * sigma


class TestBadArguments:
    @pytest.mark.parametrize("over, field, words", [
        ({}, "over", "mapping of part name"),
        (["c"], "over", "mapping of part name"),
        ({"x": ["1n"]}, "over", "'x' names no part"),
        ({"vin": [1.0]}, "over", "is a source"),
        ({"c": []}, "over.c", "non-empty list"),
        ({"c": "100n"}, "over.c", "non-empty list"),
        ({"c": 1e-7}, "over.c", "non-empty list"),
    ])
    def test_bad_over_names_the_key(self, over, field, words):
        with pytest.raises(InputError, match=rf"^{field}: .*{words}"):
            fo.sweep(FIXTURE, DRIVE, SPREAD, over, tol=TOL, units=10, seed=1)

    def test_too_many_points(self):
        side = math.isqrt(MAX_POINTS) + 1
        with pytest.raises(InputError, match=r"^over: spans [\d,]+ design points; at most 10,000"):
            fo.sweep(FIXTURE, DRIVE, SPREAD, {"c": ["1n"] * side, "r": ["1k"] * side}, tol=TOL, units=10, seed=1)

    @pytest.mark.parametrize("kwargs, field", [
        ({"seed": -1}, "seed"), ({"seed": 1.5}, "seed"), ({"seed": True}, "seed"),
        ({"fractions": (0.0,)}, "fractions"), ({"fractions": (1.5,)}, "fractions"),
    ])
    def test_bad_seed_or_fraction(self, kwargs, field):
        arguments = {"tol": TOL, "units": 10, "seed": 1} | kwargs
        with pytest.raises(InputError, match=rf"^{field}: "):
            fo.sweep(FIXTURE, DRIVE, SPREAD, {"c": ["100n"]}, **arguments)

    def test_a_bad_value_names_the_part(self):
        with pytest.raises(InputError, match=r"c"):
            fo.sweep(FIXTURE, DRIVE, SPREAD, {"c": ["-1n"]}, tol=TOL, units=10, seed=1)

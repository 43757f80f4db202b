"""Tests for firstorder.studies.spread: bands, their text, their checks against a fixture, the draws."""

from __future__ import annotations

import numpy as np
import pytest

import firstorder as fo
from firstorder.errors import InputError
from firstorder.studies.spread import CHUNK, Normal, Spread, Uniform, draw_uniforms


def relay_filter() -> fo.Fixture:
    """A DAC behind a 4.99 kΩ filter resistor, a relay, 330 nF (a scenario of our own)."""
    fx = fo.Fixture()
    fx.voltage_source("vdac", "dac", "gnd")
    fx.resistor("r_filter", "dac", "a", "4.99k")
    fx.switch("k1", "a", "b", r_on="0.2", r_off="1G")
    fx.capacitor("c_filter", "b", "gnd", "330n")
    return fx


DESIGN_SPREAD = dict(bands={"r_filter": "1%", "c_filter": Normal("3%"), "k1.r_on": Uniform("50m", "300m"),
                            "vdac.gain": "0.05%", "vdac.offset": "1m"},
                     temperature=("0", "50"), tempco={"r_filter": "25ppm", "c_filter": "-750ppm"})


class TestText:
    def test_round_trip(self):
        spread = Spread(**DESIGN_SPREAD)
        assert str(spread) == ("r_filter ±1%; c_filter normal 3%; k1.r_on 50m .. 300m; vdac.gain ±0.05%; "
                               "vdac.offset ±1m; temperature 0 .. 50; tempco r_filter 25ppm; tempco c_filter -750ppm")
        assert Spread.from_text(str(spread)) == spread

    @pytest.mark.parametrize("low, high", [(-12.3456789, 47.25), (1e-9, 0.1 + 0.2), (-273.15, 1e5 / 3)])
    def test_a_temperature_range_reads_back_exactly(self, low, high):
        spread = Spread({"r_filter": "1%"}, temperature=(low, high))
        assert Spread.from_text(str(spread)).temperature == (low, high)

    def test_lines_and_truncated_normals(self):
        spread = Spread.from_text("c_hold -20% .. +80%\nr normal 2m within 6m\n\ntemperature -10 .. 60 °C")
        assert spread.band("c_hold") == Uniform("-20%", "+80%")
        assert spread.band("r") == Normal("2m", within="6m")
        assert spread.temperature == (-10.0, 60.0)


class TestValues:
    def test_bands_map_draws_as_stated(self):
        quantities = {q.key: q for q in Spread(**DESIGN_SPREAD).quantities(relay_filter())}
        u = np.array([0.0 + 2 ** -54, 0.5, 1.0 - 2 ** -54])
        np.testing.assert_allclose(quantities["r_filter"].values(u, None), [4940.1, 4990.0, 5039.9], rtol=1e-12)
        np.testing.assert_allclose(quantities["k1.r_on"].values(u, None), [0.05, 0.175, 0.3], rtol=1e-12)
        np.testing.assert_allclose(quantities["vdac.gain"].values(u, None), [-5e-4, 0.0, 5e-4], atol=1e-15)
        np.testing.assert_allclose(quantities["vdac.offset"].values(u, None), [-1e-3, 0.0, 1e-3], atol=1e-15)

    def test_normal_is_the_inverse_cdf(self):
        from scipy import stats

        quantity = {q.key: q for q in Spread(**DESIGN_SPREAD).quantities(relay_filter())}["c_filter"]
        u = np.array([0.001, 0.5, 0.975])
        # scipy.stats.norm: the quantiles of a normal with sd 3 % of 330 nF.
        np.testing.assert_allclose(quantity.values(u, None), stats.norm.ppf(u, loc=330e-9, scale=0.03 * 330e-9),
                                   rtol=1e-12)

    def test_truncated_normal_is_the_truncated_quantile(self):
        from scipy import stats

        spread = Spread({"r_filter": Normal("1%", within="2%")})
        quantity = spread.quantities(relay_filter())[0]
        u = np.array([2 ** -54, 0.1, 0.5, 0.9, 1 - 2 ** -54])
        # scipy.stats.truncnorm between -2 and +2 standard deviations.
        expected = stats.truncnorm.ppf(u, -2, 2, loc=4990.0, scale=49.9)
        np.testing.assert_allclose(quantity.values(u, None), expected, rtol=1e-12)

    def test_tempco_from_25_degrees(self):
        quantity = {q.key: q for q in Spread(**DESIGN_SPREAD).quantities(relay_filter())}["r_filter"]
        # 25 ppm/K over 25 K above the reference: a factor 1 + 625e-6.
        np.testing.assert_allclose(quantity.values(np.array([0.5]), np.array([50.0])), [4990.0 * (1 + 625e-6)],
                                   rtol=1e-14)


class TestDraws:
    def test_a_unit_depends_only_on_seed_and_its_index(self):
        whole = draw_uniforms(7, 0, 3 * CHUNK, 4)
        for first, count in ((0, 1), (CHUNK - 2, 5), (CHUNK + 17, 2 * CHUNK - 40), (2 * CHUNK, CHUNK)):
            np.testing.assert_array_equal(draw_uniforms(7, first, count, 4), whole[first:first + count])
        assert not np.array_equal(draw_uniforms(8, 0, 10, 4), whole[:10])

    def test_draws_are_inside_the_open_interval_and_uniform(self):
        draws = draw_uniforms(3, 0, 200_000, 1)[:, 0]
        assert 0.0 < draws.min() and draws.max() < 1.0
        # Kolmogorov-Smirnov against the uniform distribution (scipy.stats).
        from scipy import stats

        assert stats.kstest(draws, "uniform").pvalue > 1e-3


BAD = [
    ({"bands": {}}, "spread"),
    ({"bands": "r 1%"}, "spread"),
    ({"bands": {"": "1%"}}, "key"),
    ({"bands": {3: "1%"}}, "key"),
    ({"bands": {"r_filter": "abc"}}, "spread r_filter"),
    ({"bands": {"r_filter": "0%"}}, "spread r_filter.*> 0"),
    ({"bands": {"r_filter": "-1%"}}, "spread r_filter.*sign"),
    ({"bands": {"r_filter": True}}, "spread r_filter"),
    ({"bands": {"r_filter": None}}, "spread r_filter"),
    ({"bands": {"r_filter": [1, 2]}}, "spread r_filter"),
    ({"bands": {"r_filter": -3.0}}, "spread r_filter.*> 0"),
    ({"bands": {"r_filter": "1%"}, "temperature": 25}, "temperature"),
    ({"bands": {"r_filter": "1%"}, "temperature": (50, 0)}, "temperature"),
    ({"bands": {"r_filter": "1%"}, "temperature": (-300, 0)}, "absolute zero"),
    ({"bands": {"r_filter": "1%"}, "temperature": ("cold", 0)}, "temperature low"),
    ({"bands": {"r_filter": "1%"}, "temperature": (0, 1, 2)}, "temperature"),
    ({"bands": {"r_filter": "1%"}, "tempco": {"r_filter": "25ppm"}}, "tempco r_filter.*temperature range"),
    ({"bands": {"r_filter": "1%"}, "temperature": (0, 50), "tempco": {"r_filter": "25"}}, "tempco r_filter.*relative"),
    ({"bands": {"r_filter": "1%"}, "temperature": (0, 50), "tempco": {"r_filter": "x%"}}, "tempco r_filter"),
]


@pytest.mark.parametrize("arguments, match", BAD)
def test_bad_spreads_name_the_key(arguments, match):
    with pytest.raises(InputError, match=match):
        Spread(**arguments)


BAD_BANDS = [
    (lambda: Uniform("1%", "-1%"), "low '1%' must be below high '-1%'"),
    (lambda: Uniform("1%", "1%"), "below"),
    (lambda: Uniform("-1%", "5m"), "mix a relative and an absolute"),
    (lambda: Uniform("a", "1"), "Uniform low"),
    (lambda: Uniform(None, "1"), "Uniform low"),
    (lambda: Normal("0%"), "sd.*> 0"),
    (lambda: Normal("-1%"), "sd.*> 0"),
    (lambda: Normal("1%", within="3m"), "mix a relative and an absolute"),
    (lambda: Normal("1%", within="-2%"), "within.*> 0"),
    (lambda: Normal(True), "Normal sd"),
]


@pytest.mark.parametrize("make, match", BAD_BANDS)
def test_bad_bands_say_why(make, match):
    with pytest.raises(InputError, match=match):
        make()


AGAINST_THE_FIXTURE = [
    ({"r_x": "1%"}, "spread r_x: names no part"),
    ({"r_filter.gain": "1%"}, "varies by its name alone"),
    ({"k1": "1%"}, "switch varies by 'k1.r_on'"),
    ({"k1.r_off": "1%", "k1.r_on": "1%"}, None),
    ({"vdac": "1%"}, "source varies by 'vdac.gain'"),
    ({"vdac.offset": "1%"}, "an offset has no nominal"),
    ({"r_filter": Uniform("-100%", "+10%")}, "stay > 0"),
    ({"r_filter": "5k"}, "stay > 0"),
    ({"k1.r_on": "1"}, "stay >= 0"),
    ({"c_filter": Normal("50%", within="120%")}, "stay > 0"),
]


@pytest.mark.parametrize("bands, match", AGAINST_THE_FIXTURE)
def test_checked_against_the_fixture(bands, match):
    spread = Spread(bands)
    if match is None:
        assert len(spread.quantities(relay_filter())) == len(bands)
    else:
        with pytest.raises(InputError, match=match):
            spread.quantities(relay_filter())


def test_an_infinite_off_resistance_cannot_spread():
    fx = relay_filter().with_values(k1=("0.2", "inf"))
    with pytest.raises(InputError, match="infinite"):
        Spread({"k1.r_off": "10%"}).quantities(fx)


def test_a_tempco_of_a_quantity_that_does_not_vary():
    with pytest.raises(InputError, match=r"tempco: \['c_filter'\] do not vary"):
        Spread({"r_filter": "1%"}, temperature=(0, 50), tempco={"c_filter": "1%"}).quantities(relay_filter())


class TestLot:
    def test_a_unit_is_the_fixture_built_by_hand_with_its_values(self):
        from firstorder.studies.lot import Lot

        lot = Lot(relay_filter(), Spread(**DESIGN_SPREAD), seed=4)
        draw = lot.draw(10, 5)
        again = lot.draw(12, 1)
        np.testing.assert_array_equal(again.values[0], draw.values[2])
        fixture = lot.unit_fixture(draw, 2)
        values = dict(zip(lot.keys, draw.values[2]))
        assert fixture.part_map["r_filter"].value == values["r_filter"]
        assert fixture.part_map["c_filter"].value == values["c_filter"]
        assert fixture.part_map["k1"].r_on == values["k1.r_on"] and fixture.part_map["k1"].r_off == 1e9
        drive = fo.Drive([0, "1m"], end="2m", vdac=[1.0, -2.0], k1=[1, 1])
        levels = lot.unit_drive(drive, draw, 2).levels("vdac")
        np.testing.assert_allclose(levels, np.array([1.0, -2.0]) * (1 + values["vdac.gain"]) + values["vdac.offset"],
                                   rtol=0, atol=0)
        assert 0.0 <= draw.temperature.min() and draw.temperature.max() <= 50.0

    def test_a_draw_at_or_below_zero_names_the_quantity_and_the_unit(self):
        from firstorder.studies.lot import Lot

        lot = Lot(relay_filter(), Spread({"c_filter": Normal("40%")}), seed=2)
        with pytest.raises(InputError, match=r"spread c_filter: unit \d+ draws -.*must be > 0.*within="):
            lot.draw(0, 20_000)

    def test_a_bad_seed(self):
        from firstorder.studies.lot import Lot

        for seed in (-1, 1.5, True, "7"):
            with pytest.raises(InputError, match="seed"):
                Lot(relay_filter(), Spread({"r_filter": "1%"}), seed=seed)

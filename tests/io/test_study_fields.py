"""Tests for the analysis file's study fields (version 2): spread, units, seed and fractions
round trip, version 1 files still load, and malformed study fields are refused by JSON path."""

from __future__ import annotations

import json

import pytest
from builders import general_analysis, with_value_at, write_json

import firstorder as fo
from firstorder.analysis import Analysis
from firstorder.errors import InputError
from firstorder.studies import Normal, Spread, Uniform

SPREAD = Spread({"rs": "1%", "ch": Normal("3%", within="9%"), "k1.r_on": Uniform("50m", "300m"),
                 "vdac.gain": "0.05%", "vdac.offset": "1m"}, temperature=(0, 50), tempco={"rs": "25ppm"})


def study_data() -> dict:
    return json.loads(general_analysis(spread=SPREAD, units=200, seed=9, fractions=(0.5, 0.999)).to_json())


_set = with_value_at


class TestRoundTrip:
    def test_fields_of_their_own(self):
        data = study_data()
        assert data["version"] == 2
        assert data["spread"] == {
            "bands": {"rs": "±1%", "ch": "normal 3% within 9%", "k1.r_on": "50m .. 300m", "vdac.gain": "±0.05%",
                      "vdac.offset": "±1m"},
            "temperature": [0.0, 50.0], "tempco": {"rs": "25ppm"}}
        assert (data["units"], data["seed"], data["fractions"]) == (200, 9, [0.5, 0.999])

    def test_saved_and_loaded_gives_the_same_study(self, tmp_path):
        analysis = general_analysis(spread=SPREAD, units=200, seed=9, fractions=(0.5, 0.999))
        loaded = Analysis.load(analysis.save(tmp_path / "a.json"))
        assert loaded.spread == SPREAD
        assert loaded.study_settings == analysis.study_settings
        tol = fo.Tolerance.lsb(bits=16, span=5.0)
        assert loaded.study().settling(tol).equals(analysis.study().settling(tol))
        assert loaded.to_json() == analysis.to_json()

    def test_the_study_is_about_the_analysiss_tolerance_delay_and_fractions(self):
        analysis = general_analysis(spread=SPREAD, units=200, seed=9, fractions=(0.5, 0.999))
        study = analysis.study(progress=False)
        passing = study.passing(analysis.tolerance, analysis.sample_delay)
        shown = study._repr_html_()
        assert f"{passing.passing:,} of 200 units" in shown and "0.4m" in shown
        assert analysis.study(progress=False, fractions=(0.9,)).units == 200  # options replace them

    def test_keys_with_spaces_round_trip(self, tmp_path):
        fx = fo.Fixture()
        fx.voltage_source("v in", "a", "gnd")
        fx.resistor("r in 1", "a", "b", "1k")
        fx.capacitor("c hold", "b", "gnd", "1u")
        spread = Spread({"r in 1": "1%", "c hold": Uniform("-5%", "+10%"), "v in.offset": "1m"}, temperature=(0, 40),
                        tempco={"c hold": "100ppm"})
        analysis = Analysis(fx, fo.Drive([0], end="5m", **{"v in": [1.0]}), spread=spread, units=10)
        loaded = Analysis.load(analysis.save(tmp_path / "a.json"))
        assert loaded.spread == spread and loaded.spread.keys == spread.keys

    def test_no_spread_writes_no_study_fields(self):
        data = json.loads(general_analysis().to_json())
        assert not {"spread", "units", "seed", "fractions"} & set(data)

    def test_defaults_with_a_spread(self):
        settings = general_analysis(spread=SPREAD).study_settings
        assert (settings["units"], settings["seed"], settings["fractions"]) == (1000, 1, (0.5, 0.99, 0.999))

    def test_replace_keeps_the_study_and_drops_it_with_the_spread(self):
        analysis = general_analysis(spread=SPREAD, units=200, seed=9)
        assert analysis.replace(title="x").study_settings == analysis.study_settings
        assert analysis.replace(spread=None).study_settings is None


class TestVersionOne:
    def test_a_version_1_file_loads(self, tmp_path):
        data = json.loads(general_analysis().to_json())
        data["version"] = 1
        loaded = Analysis.load(write_json(tmp_path / "v1.json", data))
        assert loaded.spread is None and loaded.drive.times.tolist() == general_analysis().drive.times.tolist()

    def test_a_version_1_file_with_a_spread_is_refused(self, tmp_path):
        data = _set(study_data(), ["version"], 1)
        with pytest.raises(InputError, match=r"spread: is a field of version 2 files; this file says version 1"):
            Analysis.load(write_json(tmp_path / "a.json", data))


MALFORMED = [
    (["spread"], "1%", r"spread: '1%' is the wrong type"),
    (["spread", "bands"], {}, r"spread\.bands: "),
    (["spread", "bands"], ["rs"], r"spread\.bands: .*wrong type"),
    (["spread", "bands", "rs"], 0.01, r"spread\.bands\.rs: 0\.01 is the wrong type"),
    (["spread", "bands", "rs"], "", r"spread\.bands\.rs: "),
    (["spread", "bands", "rs"], "1,5%", r"spread\.bands\.rs: .*comma"),
    (["spread", "bands", "rs"], "-1%", r"spread\.bands\.rs: .*sign"),
    (["spread", "bands", "rs"], "abc", r"spread\.bands\.rs: "),
    (["spread", "bands", "rs"], "normal", r"spread\.bands\.rs: "),
    (["spread", "bands", "rs"], "1% .. 2% .. 3%", r"spread\.bands\.rs: "),
    (["spread", "bands", "rs"], "x" * 101, r"spread\.bands\.rs: "),
    (["spread", "bands", "nothere"], "1%", r"spread nothere: names no part"),
    (["spread", "bands", "rs"], "200%", r"spread rs: .*must stay > 0"),
    (["spread", "temperature"], [0], r"spread\.temperature: "),
    (["spread", "temperature"], [0, 50, 60], r"spread\.temperature: "),
    (["spread", "temperature"], "0 .. 50", r"spread\.temperature: .*wrong type"),
    (["spread", "temperature"], [50, 0], r"spread temperature: low .* must be below high"),
    (["spread", "temperature"], [-300, 0], r"below absolute zero"),
    (["spread", "tempco", "rs"], "25", r"spread\.tempco\.rs: .*relative per kelvin"),
    (["spread", "tempco", "rm"], "25ppm", r"spread tempco: \['rm'\] do not vary"),
    (["spread", "colour"], "red", r"spread\.colour: is not a field"),
    (["units"], 0, r"units: 0: .*greater than or equal to 1"),
    (["units"], 1.5, r"units: 1\.5 is the wrong type"),
    (["units"], "1000", r"units: '1000' is the wrong type"),
    (["units"], 10**10, r"units: "),
    (["seed"], -1, r"seed: -1: .*greater than or equal to 0"),
    (["seed"], True, r"seed: true is the wrong type"),
    (["fractions"], [], r"fractions: "),
    (["fractions"], [0.0], r"fractions\[0\]: "),
    (["fractions"], [0.5, 1.5], r"fractions\[1\]: "),
    (["fractions"], 0.5, r"fractions: 0\.5 is the wrong type"),
]


class TestMalformed:
    @pytest.mark.parametrize("path, value, match", MALFORMED, ids=[".".join(map(str, p)) + f"={v!r:.20}"
                                                                     for p, v, _ in MALFORMED])
    def test_refused_naming_the_field(self, tmp_path, path, value, match):
        with pytest.raises(InputError, match=rf"a\.json: .*{match}"):
            Analysis.load(write_json(tmp_path / "a.json", _set(study_data(), path, value)))

    def test_at_least_twenty_cases(self):
        assert len(MALFORMED) >= 20

    def test_study_fields_without_a_spread(self, tmp_path):
        data = json.loads(general_analysis().to_json())
        data["units"] = 10
        with pytest.raises(InputError, match=r"units: given without a spread"):
            Analysis.load(write_json(tmp_path / "a.json", data))


class TestArguments:
    @pytest.mark.parametrize("kwargs, match", [
        ({"units": 0}, r"^units: 0 is not allowed"), ({"units": True}, r"^units: True is not allowed"),
        ({"seed": -2}, r"^seed: -2 is not allowed"), ({"fractions": "0.5"}, r"^fractions: '0.5' is not allowed"),
        ({"fractions": (0.5, float("nan"))}, r"^fractions\[1\]: nan is not allowed"),
    ])
    def test_bad_settings_name_the_argument(self, kwargs, match):
        with pytest.raises(InputError, match=match):
            general_analysis(spread=SPREAD, **kwargs)

    def test_settings_without_a_spread(self):
        with pytest.raises(InputError, match=r"^seed: given without a spread"):
            general_analysis(seed=3)

    def test_a_spread_that_is_not_one(self):
        with pytest.raises(InputError, match=r"^spread: expected a firstorder\.Spread, got dict"):
            general_analysis(spread={"rs": "1%"})

    def test_a_band_for_a_missing_part(self):
        with pytest.raises(InputError, match=r"spread zz: names no part"):
            general_analysis(spread=Spread({"zz": "1%"}))

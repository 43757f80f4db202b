"""The Bench with a study: the Spread tab's fields, the envelope behind the curves, the
lot's table, histogram and yield against the sample delay, the worst unit, and the
analysis file (widgets/_lot.py, widgets/_study_panels.py and their wiring in _bench.py)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

import firstorder as fo
from firstorder.plotting.sampling import plan_samples
from firstorder.widgets import Bench
from firstorder.widgets import _panels as panels
from firstorder.widgets._plot import PIXELS

from benches import rc_drive, rc_fixture, switched_drive, switched_fixture

UNITS, SEED = 300, 5
TOLERANCE = fo.Tolerance.absolute("1m")


def spread() -> fo.Spread:
    return fo.Spread({"r": "5%", "c": fo.Normal("3%", within="9%")})


def lot_bench(**kwargs) -> Bench:
    options = dict(tolerance=TOLERANCE, spread=spread(), units=UNITS, seed=SEED)
    return Bench(rc_fixture(), rc_drive(), **{**options, **kwargs})


def handbook_units(study, times: np.ndarray) -> np.ndarray:
    """(units, times): every unit's capacitor voltage by the handbook RC recurrence, from
    its drawn r and c: v = L + (v0 - L) e^(-(t - t_k) / (r c)) in segment k (common practice)."""
    values = study.values
    tau = (values["r"].to_numpy() * values["c"].to_numpy())[:, None]
    drive = study.drive
    starts, levels = np.asarray(drive.times, dtype=float), np.asarray(drive.levels("vin"), dtype=float)
    segment = np.searchsorted(starts, times, side="right") - 1
    v = np.zeros((len(values), 1))
    at_change = [v]
    for k in range(len(starts) - 1):
        v = levels[k] + (v - levels[k]) * np.exp(-(starts[k + 1] - starts[k]) / tau)
        at_change.append(v)
    v0 = np.concatenate(at_change, axis=1)[:, segment]
    level = levels[segment]
    return level + (v0 - level) * np.exp(-(times - starts[segment]) / tau)


def handbook_settle(study, segment: int, limit: float) -> np.ndarray:
    """Each unit's settle time in `segment` to an absolute `limit`: tau ln(|step| / limit),
    0 when the step is within it (handbook RC step, common practice)."""
    values = study.values
    tau = values["r"].to_numpy() * values["c"].to_numpy()
    start = float(study.drive.times[segment])
    v0 = handbook_units(study, np.array([start]))[:, 0]
    step = np.abs(v0 - float(study.drive.levels("vin")[segment]))
    return np.where(step > limit, tau * np.log(step / np.maximum(limit, 1e-300)), 0.0)


class TestSpreadFields:
    def test_a_field_per_quantity_in_the_spreads_text(self):
        bench = lot_bench()
        fields = bench.spread_fields
        assert set(fields) == {"band r", "band c", "band vin.gain", "band vin.offset", "lot temperature",
                               "lot tempco", "lot units"}
        assert fields["band r"].value == str(spread().band("r")) == "±5%"
        assert fields["band c"].value == "normal 3% within 9%"
        assert fields["band vin.gain"].value == "" and fields["lot units"].value == str(UNITS)
        assert bench.session.study.spread == spread()

    def test_temperature_and_tempco_read_back(self):
        lot = fo.Spread({"r": "1%"}, temperature=(-12.5, 60), tempco={"r": "25ppm"})
        bench = lot_bench(spread=lot)
        assert bench.spread_fields["lot temperature"].value == "-12.5 .. 60"
        assert bench.spread_fields["lot tempco"].value == "r 25ppm"
        bench.spread_fields["lot units"].value = "200"  # read again from every field's text
        assert bench.error == "" and bench.session.study.spread == lot and bench.session.study.units == 200

    def test_typing_keeps_the_order_of_the_draws(self):
        lot = fo.Spread({"c": "3%", "r": "5%"})  # c drawn first
        bench = lot_bench(spread=lot)
        values = bench.session.study.values
        bench.spread_fields["band r"].value = "10%"
        again = bench.session.study
        assert list(again.spread.keys) == ["c", "r"]
        # The same draws: c as it was, r twice as far from nominal (a uniform band scales).
        np.testing.assert_array_equal(again.values["c"], values["c"])
        np.testing.assert_allclose(again.values["r"] - 10e3, 2 * (values["r"] - 10e3), rtol=1e-9, atol=1e-9)

    def test_a_band_typed_runs_the_study_again(self):
        bench = lot_bench()
        study = bench.session.study
        bench.spread_fields["band vin.offset"].value = "2m"
        assert bench.error == ""
        assert bench.session.study is not study
        assert bench.session.study.spread == fo.Spread({"r": "5%", "c": fo.Normal("3%", within="9%"),
                                                        "vin.offset": "2m"})

    def test_a_bench_without_a_spread_gets_one_from_its_fields(self):
        bench = Bench(rc_fixture(), rc_drive(), tolerance=TOLERANCE)
        assert bench.session.study is None and len(bench.sources["envelope"].data["t"]) == 0
        bench.spread_fields["band c"].value = "10%"
        assert bench.error == "" and bench.session.study.units == 1000  # an analysis's default
        assert len(bench.sources["envelope"].data["t"]) > 0
        bench.spread_fields["band c"].value = ""
        assert bench.session.study is None and len(bench.sources["envelope"].data["t"]) == 0

    @pytest.mark.parametrize("key, text, named", [
        ("band r", "five", "spread r"),
        ("band r", "5% .. 1%", "spread r"),
        ("band r", "1%; temperature 0 .. 9", "spread r"),
        ("band c", "normal -3%", "spread c"),
        ("band r", "-150% .. +10%", "spread r"),   # allows values <= 0
        ("band vin.offset", "1%", "spread vin.offset"),  # an offset has no nominal
        ("lot temperature", "hot", "spread temperature"),
        ("lot temperature", "50 .. 0", "spread temperature"),
        ("lot tempco", "vin.gain 5ppm", "spread tempco"),  # a tempco of a quantity that does not vary
        ("lot units", "0", "units"),
        ("lot units", "12.5", "units"),
        ("lot units", "1M", "units"),
    ])
    def test_a_bad_entry_is_refused_beside_its_field(self, key, text, named):
        bench = lot_bench(spread=fo.Spread({"r": "5%", "c": "3%"}, temperature=(0, 50)))
        study, envelope = bench.session.study, bench.sources["envelope"].data["high"]
        bench.spread_fields[key].value = text
        beside = bench._field_errors[key].value
        assert named in beside, beside
        assert bench.error.startswith(named)
        assert bench.session.study is study  # the last good study stays
        assert bench.sources["envelope"].data["high"] is envelope
        assert bench.session.texts[key] != text and bench.spread_fields[key].value == text  # left to be fixed

    def test_undo_takes_a_band_back(self):
        bench = lot_bench()
        bench.spread_fields["band r"].value = "10%"
        assert bench.session.study.spread.band("r") == fo.Spread({"r": "10%"}).band("r")
        assert bench.undo()
        assert bench.spread_fields["band r"].value == "±5%" and bench.session.study.spread == spread()

    def test_a_part_value_the_spread_cannot_take_shows_the_studys_error(self):
        bench = lot_bench(spread=fo.Spread({"r": "2k"}))  # ±2 kΩ about 10 kΩ
        bench.fields["r"].value = "1.5k"  # the part edit is taken; the band would reach below 0
        assert bench.fixture.part_map["r"].value == 1.5e3
        assert bench.session.study is None and "spread r" in bench.session.errors["study"]
        assert len(bench.sources["envelope"].data["t"]) == 0
        bench.setup_fields["tolerance"].value = "2m"  # an edit that builds no study keeps its error
        assert bench.session.study is None and "spread r" in bench.session.errors["study"]
        bench.fields["r"].value = "10k"
        assert "study" not in bench.session.errors and bench.session.study is not None

    def test_the_bench_refuses_more_units_than_it_runs_live(self):
        with pytest.raises(ValueError, match="units"):
            lot_bench(units=2_000_000)


class TestEnvelope:
    @pytest.mark.parametrize("fraction", [0.99, 1.0])
    def test_the_envelope_holds_the_central_fraction_of_hand_built_units(self, fraction):
        bench = lot_bench()
        bench.spread_panel.fraction.value = fraction
        data = bench.sources["envelope"].data
        study = bench.session.study
        response = bench.response
        plan = plan_samples(response.starts, response.drive.end, response.tau, *bench.session.view, PIXELS)
        assert plan.mode == "line"
        np.testing.assert_array_equal(data["t"], plan.times)
        low, high = study.envelope(plan.times, fraction)
        np.testing.assert_array_equal(data["low"], low)
        np.testing.assert_array_equal(data["high"], high)
        # Against every unit by the handbook recurrence, sorted by numpy: the exact order statistics.
        units = np.sort(handbook_units(study, plan.times), axis=0)
        tail = math.floor((1 - fraction) / 2 * UNITS + 1e-9 * UNITS)
        np.testing.assert_allclose(data["low"], units[tail], rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(data["high"], units[UNITS - 1 - tail], rtol=1e-12, atol=1e-12)
        assert bench.plots.mark_items["envelope"].visible

    def test_a_part_edit_moves_the_envelope(self):
        bench = lot_bench()
        bench.fields["c"].value = "200n"
        study = bench.session.study
        assert study.fixture.part_map["c"].value == 200e-9
        # keep=True: an unkept study sizes envelope memory by a whole chunk of units, not its own 300.
        fresh = rc_fixture().with_values(c="200n").study(rc_drive(), spread(), units=UNITS, seed=SEED, keep=True)
        t = np.asarray(bench.sources["envelope"].data["t"])
        np.testing.assert_array_equal(bench.sources["envelope"].data["high"], fresh.envelope(t, 0.999)[1])

    def test_crowded_the_envelope_is_per_pixel_column(self):
        drive = fo.Drive.pulses(period="2m", duty=0.5, high=5.0, low=0.0, count=400, name="vin")
        bench = Bench(rc_fixture(), drive, spread=spread(), units=50, seed=1)
        data = bench.sources["envelope"].data
        assert len(data["t"]) == PIXELS
        assert (np.asarray(data["low"]) <= np.asarray(data["high"])).all()


class TestStudyTable:
    def test_the_table_is_the_studys(self):
        bench = lot_bench(sample_delay="2m")
        fresh = rc_fixture().study(rc_drive(), spread(), units=UNITS, seed=SEED)
        pd.testing.assert_frame_equal(bench.session.study_table, fresh.settling(TOLERANCE, sample_delay="2m"))
        bench.tabs.selected_index = panels.TAB_TITLES.index("Settling")
        text = bench.study_panel.value
        for column in ("settle time 99.9%", "yield", "worst unit", "nominal settle time"):
            assert column in text
        assert f"{bench.session.study_table['yield'].iloc[1]:.2%}" in text

    def test_without_a_tolerance_there_is_no_table(self):
        bench = lot_bench(tolerance=None)
        bench.tabs.selected_index = panels.TAB_TITLES.index("Settling")
        assert bench.session.study_table is None and "Give a tolerance" in bench.study_panel.value


class TestErrorViewOfTheLot:
    def test_each_samples_error_for_each_fraction_of_units(self):
        from bokeh.models import Scatter

        bench = lot_bench(sample_delay="2m")
        bench.tabs.selected_index = panels.TAB_TITLES.index("Error view")
        figure = bench.error_view.children[-1]._model
        dashes = [r for r in figure.renderers if isinstance(r.glyph, Scatter) and r.glyph.marker == "dash"]
        # One set per fraction and the worst unit: the study's own error columns at its sample instants,
        # checked against a study built apart.
        fresh = rc_fixture().study(rc_drive(), spread(), units=UNITS, seed=SEED).settling(TOLERANCE, sample_delay="2m")
        columns = [c for c in fresh.columns if c.startswith("error_")]
        assert len(dashes) == len(columns) == 4
        for dash, column in zip(dashes, columns):
            drawn = np.asarray(dash.data_source.data["y"])
            expected = fresh[column].to_numpy()
            nonzero = expected > 1e-6  # below the view's floor (a thousandth of the limit) an error sits on it
            np.testing.assert_array_equal(drawn[nonzero], expected[nonzero])
            assert np.all(drawn[~nonzero] == 1e-6)
        assert any("worst unit" in item.label["value"] for item in figure.legend[0].items)

    def test_without_a_spread_no_lot_marks(self):
        from bokeh.models import Scatter

        bench = Bench(rc_fixture(), rc_drive(), tolerance=TOLERANCE, sample_delay="2m")
        bench.tabs.selected_index = panels.TAB_TITLES.index("Error view")
        figure = bench.error_view.children[-1]._model
        assert not [r for r in figure.renderers if isinstance(r.glyph, Scatter) and r.glyph.marker == "dash"]


class TestHistogramAndYield:
    def bench(self, **kwargs) -> Bench:
        bench = lot_bench(**kwargs)
        bench.tabs.selected_index = panels.TAB_TITLES.index("Settling")
        return bench

    def test_the_histogram_is_of_the_selected_segments_settle_times(self):
        bench = self.bench()
        bench.select_segment(1)
        study = bench.session.study
        values, unit = study.segment_values(1, "settle_time", TOLERANCE)
        np.testing.assert_allclose(values, handbook_settle(study, 1, 1e-3), rtol=1e-9)
        counts, edges = np.histogram(values, bins=40, range=(values.min(), values.max()))
        data = bench.study_sources["histogram"].data
        np.testing.assert_array_equal(data["count"], counts)
        np.testing.assert_array_equal(data["left"], edges[:-1])
        assert int(np.sum(data["count"])) == UNITS

    def test_errors_at_the_sample(self):
        bench = self.bench(sample_delay="1m")
        bench.select_segment(2)
        bench.histogram_of.value = "error_at_sample"
        values, unit = bench.session.study.segment_values(2, "error_at_sample", TOLERANCE, "1m")
        assert unit == "V"
        counts, edges = np.histogram(values, bins=40, range=(values.min(), values.max()))
        np.testing.assert_array_equal(bench.study_sources["histogram"].data["count"], counts)

    def test_without_a_selection_the_segment_of_least_yield(self):
        bench = self.bench(sample_delay="1m")
        table = bench.session.study_table
        worst = int(np.argmin(table["yield"].to_numpy()))
        values, _ = bench.session.study.segment_values(worst, "settle_time", TOLERANCE)
        delays = np.unique(values)
        np.testing.assert_array_equal(bench.study_sources["yield"].data["delay"][-delays.size:], delays)

    def test_yield_against_delay_counts_the_units_inside(self):
        # 0.25 V of a 5 V step: about 3 time constants (ln 20), some 3 ms, spread by the lot.
        tolerance = fo.Tolerance.absolute("0.25")
        bench = self.bench(sample_delay="2.9m", tolerance=tolerance)
        bench.select_segment(1)
        study, table = bench.session.study, bench.session.study_table
        curve = bench.study_sources["yield"].data
        delay, fraction = np.asarray(curve["delay"]), np.asarray(curve["fraction"])
        settle = handbook_settle(study, 1, 0.25)
        assert 0.05 < np.mean(settle <= 2.9e-3) < 0.95  # the delay cuts through the lot
        for d in (2.5e-3, 2.9e-3, 3.1e-3, 3.5e-3, 5e-3):
            # The step curve at d: the last step at or before it.
            at = fraction[np.searchsorted(delay, d, side="right") - 1]
            assert at == pytest.approx(np.mean(settle <= d), abs=1.5 / UNITS)
        # At the sample delay: the table's yield, the units inside at the sample.
        at = fraction[np.searchsorted(delay, 2.9e-3, side="right") - 1]
        assert at == table["yield"].iloc[1]
        # The marks: the delay each of the study's fractions needs (Study.delay_for).
        marks = bench.study_sources["yield marks"].data
        needed = study.delay_for(tolerance, 0.999)[1]
        assert marks["delay"][-1] == needed and "99.9 %" in marks["label"][-1]

    def test_a_unit_that_never_settles_never_counts(self):
        # A hold that droops out of a tight limit: its units never settle in the hold segment.
        drive = fo.Drive([0, "2m", "4m"], end="6m", vdac=[2.5, 2.5, 2.5], k1=[1, 0, 1])
        bench = Bench(switched_fixture(), drive, tolerance=fo.Tolerance.absolute("1u"),
                      spread=fo.Spread({"rin": "20%"}), units=50, seed=2)
        bench.tabs.selected_index = panels.TAB_TITLES.index("Settling")
        bench.select_segment(1)
        settle, _ = bench.session.study.segment_values(1, "settle_time", fo.Tolerance.absolute("1u"))
        fraction = np.asarray(bench.study_sources["yield"].data["fraction"])
        assert fraction.max() == pytest.approx(np.mean(np.isfinite(settle))) and np.isnan(settle).any()
        assert "never settle" in bench.study_figures.counts.title.text


class TestWorstUnit:
    def test_on_demand_the_worst_units_own_curve(self):
        bench = lot_bench(sample_delay="1m")
        assert len(bench.sources["worst"].data["t"]) == 0
        bench.select_segment(1)
        bench.spread_panel.worst.value = True
        study, table = bench.session.study, bench.session.study_table
        unit = int(table["worst_unit"].iloc[1])
        data = bench.sources["worst"].data
        expected = study.unit(unit).evaluate(np.asarray(data["t"]), ("total",))["total"]
        np.testing.assert_array_equal(data["y"], expected)
        np.testing.assert_allclose(data["y"], handbook_units(study, np.asarray(data["t"]))[unit], rtol=1e-12,
                                   atol=1e-12)
        assert f"({unit}, segment 1)" in bench.plots.mark_items["worst"].label.value
        bench.spread_panel.worst.value = False
        assert len(bench.sources["worst"].data["t"]) == 0


class TestAnalysisFile:
    def test_a_saved_bench_loads_back_with_its_spread(self, tmp_path):
        lot = fo.Spread({"rs": "1%", "k1.r_on": fo.Uniform("0.1", "0.4")}, temperature=(0, 40),
                        tempco={"rs": "25ppm"})
        bench = Bench(switched_fixture(), switched_drive(), tolerance=fo.Tolerance.lsb(12, 5.0), spread=lot,
                      units=120, seed=9, fractions=(0.9, 0.99))
        path = bench.save_analysis(tmp_path / "lot.json")
        analysis = fo.Analysis.load(path)
        assert analysis.study_settings == {"spread": lot, "units": 120, "seed": 9, "fractions": (0.9, 0.99)}
        again = Bench.from_analysis(analysis)
        assert again.session.lot == bench.session.lot
        assert again.spread_fields["lot tempco"].value == "rs 25ppm"
        pd.testing.assert_frame_equal(again.session.study_table, bench.session.study_table)

    def test_loading_into_a_bench_brings_the_spread_and_undo_takes_it_back(self, tmp_path):
        source = lot_bench()
        source.spread_fields["band vin.gain"].value = "0.1%"
        path = source.save_analysis(tmp_path / "a.json")
        bench = Bench(rc_fixture(), rc_drive(), tolerance=TOLERANCE)
        bench.load_analysis(path)
        assert bench.session.study.spread == source.session.study.spread
        assert bench.spread_fields["band vin.gain"].value == "±0.1%"
        bench.undo()
        assert bench.session.study is None and bench.spread_fields["band vin.gain"].value == ""

    def test_a_bench_without_a_spread_saves_no_study(self, tmp_path):
        bench = Bench(rc_fixture(), rc_drive())
        assert fo.Analysis.load(bench.save_analysis(tmp_path / "plain.json")).spread is None

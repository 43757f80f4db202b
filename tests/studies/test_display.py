"""Tests for firstorder.studies.display (a study's notebook display) and the progress bars of
long studies."""

from __future__ import annotations

from html import escape


import firstorder as fo
from firstorder.studies import Spread
from firstorder.studies import study as study_module

HALF_LSB_16 = fo.Tolerance.lsb(bits=16, span=5.0)
FX = fo.Fixture.rc("10k", "100n")
DRIVE = fo.Drive([0, "20m", "25m"], end="45m", vin=[5.0, 0.0, 5.0])


def test_the_display_shows_units_seed_spread_yield_and_worst_segment():
    study = FX.study(DRIVE, Spread({"r": "1%", "c": "10%"}), units=500, seed=3, tolerance=HALF_LSB_16,
                     sample_delay="4.5m")
    html, markdown = study._repr_html_(), study._repr_markdown_()
    passing = study.passing(HALF_LSB_16, sample_delay="4.5m")
    table = study.settling(HALF_LSB_16, sample_delay="4.5m")
    # The least yield; of equal yields the largest error at the sample, then the first.
    worst = min(range(len(table)), key=lambda k: (table["yield"][k], -table["error_max"][k], k))
    for text in (html, markdown):
        assert "500" in text and "seed" in text and "3" in text
        assert f"{passing.passing:,} of 500 units" in text
        assert f"segment {worst} " in text and f"worst unit {int(table['worst_unit'][worst])}" in text
    assert escape(str(study.spread)) in html and str(study.spread).replace("|", "\\|") in markdown
    assert "<script" not in html and "<table" in html


def test_without_a_tolerance_the_display_says_how_to_give_one():
    study = FX.study(DRIVE, Spread({"c": "10%"}), units=20, seed=3)
    assert "give tolerance=" in study._repr_html_() and "give tolerance=" in study._repr_markdown_()


def test_markup_in_texts_is_escaped(monkeypatch):
    study = FX.study(DRIVE, Spread({"c": "10%"}), units=20, seed=3)
    monkeypatch.setattr(study, "seed", "<b>|x")
    assert "<b>" not in study._repr_html_() and "&lt;b&gt;" in study._repr_html_()
    assert "\\|x" in study._repr_markdown_()


def test_a_long_study_shows_a_progress_bar_and_progress_false_silences_it(monkeypatch, capsys):
    monkeypatch.setattr(study_module, "PROGRESS_ELEMENTS", 100)
    spread = Spread({"c": "10%"})
    FX.study(DRIVE, spread, units=200, seed=1, chunk=50).settling(HALF_LSB_16)
    assert "study chunks" in capsys.readouterr().err
    FX.study(DRIVE, spread, units=200, seed=1, chunk=50, progress=False).settling(HALF_LSB_16)
    assert "study chunks" not in capsys.readouterr().err


def test_long_adaptive_batches_show_a_progress_bar(monkeypatch, capsys):
    from firstorder.studies import adaptive

    monkeypatch.setattr(adaptive, "PROGRESS_BATCH_ELEMENTS", 100)
    FX.study(DRIVE, Spread({"c": "10%"}), units="adaptive", seed=1, numerical_tolerance="5%", batch=200,
             tolerance=HALF_LSB_16)
    assert "adaptive study" in capsys.readouterr().err
    FX.study(DRIVE, Spread({"c": "10%"}), units="adaptive", seed=1, numerical_tolerance="5%", batch=200,
             tolerance=HALF_LSB_16, progress=False)
    assert "adaptive study" not in capsys.readouterr().err

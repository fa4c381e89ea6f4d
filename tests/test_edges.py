"""Honest edges: band shares that ties move, styles the global cuts starve, unassigned lots
that make or unmake a driver, and cuts described as splits rather than bounds."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest

from vinstrata.config import Bands, packaged_config
from vinstrata.profile import cut_words, driver_summary, profile_table
from vinstrata.profile.bands import nominal_shares, quantile_share_notes
from vinstrata.read.cells import OK
from vinstrata.read.lots import AnalyteSpec
from vinstrata.segment.styles import quantile_hints

QUANTILE_BANDS = Bands(cuts=(14.0, 16.0), labels=("bottom", "middle", "top"),
                       mode="style_quantile", quantiles=(0.2, 0.8))


def test_quantile_bands_with_tied_grades_report_the_shares_they_reached():
    # grades in whole points: a fifth of the lots cannot be split off a tied grade
    grades_bands = np.array([0] * 10 + [1] * 70 + [2] * 20)  # reached 10 / 70 / 20 %
    fine = np.array([0] * 20 + [1] * 61 + [2] * 19)
    notes = quantile_share_notes(["S1", "S2"], [grades_bands, fine], QUANTILE_BANDS)
    assert len(notes) == 1 and notes[0].startswith("S1:")
    assert "10 % bottom, 70 % middle, 20 % top" in notes[0]
    assert "nominal 20 %, 60 %, 20 %" in notes[0]
    assert nominal_shares((0.2, 0.8)) == pytest.approx([0.2, 0.6, 0.2])
    glob = dataclasses.replace(QUANTILE_BANDS, mode="global")
    assert quantile_share_notes(["S1"], [grades_bands], glob) == []


def test_profile_warns_of_tied_quantile_bands_and_writes_the_shares(demo_model):
    from vinstrata.profile import profile_styles
    from vinstrata.progress import Reporter

    config = dataclasses.replace(demo_model.config, bands=dataclasses.replace(
        demo_model.config.bands, mode="style_quantile", quantiles=(0.2, 0.8)),
        profile=dataclasses.replace(demo_model.config.profile, bootstrap=200))
    rep = Reporter(forward=False)
    profiles = profile_styles(demo_model, config, rep, pooled=False, cut_intervals=False)
    counts = profiles.band_counts.set_index("style")
    assert list(profiles.band_counts.columns[-3:]) == ["share_bottom", "share_middle",
                                                      "share_top"]
    reached = counts["bottom"] / counts["n_graded"]
    assert np.allclose(counts["share_bottom"], reached)
    # the demo's 40-lot style is graded in steps too coarse for its fifths
    assert any("per-style quantile bands reached" in w for w in rep.warnings)


def test_starved_style_is_told_what_per_style_quantiles_would_give():
    notes = ["0 lots in the top band (fewer than 10)", "", "12 lots (fewer than 30)"]
    n_lots = np.array([200, 500, 12])
    band_n = np.array([[40, 160, 0], [100, 300, 100], [2, 8, 2]])
    quantile_n = np.array([[38, 122, 40], [100, 300, 100], [2, 8, 2]])
    out = quantile_hints(notes, n_lots, band_n, quantile_n, 30, 10,
                         ("bottom", "middle", "top"))
    assert "per-style quantile bands would give it 38 lots in the bottom band and 40 in the " \
           "top band, enough to profile it" in out[0]
    assert '[bands] mode = "style_quantile"' in out[0]
    assert out[1] == "" and out[2] == notes[2]  # trusted, or too small for any bands
    still = quantile_hints(notes[:1], n_lots[:1], band_n[:1], np.array([[6, 190, 4]]), 30, 10,
                           ("bottom", "middle", "top"))
    assert "still too few" in still[0]


def test_demo_untrusted_style_warning_names_the_switch(demo_model):
    styles = demo_model.styles.set_index("style")
    untrusted = styles[~styles["trusted"]]
    starved = untrusted[untrusted["n_lots"] >= demo_model.config.segment.min_style_lots]
    assert len(starved)
    for note in starved["trust_note"]:
        assert "per-style quantile bands would give it" in note
        assert '[bands] mode = "style_quantile"' in note


def _spec(name: str) -> AnalyteSpec:
    return AnalyteSpec(name=name, column=name, kind="", label=name, unit="g/L", unit_in="g/L",
                       factor=1.0, bounds=None, concentration=False)


def test_driver_made_by_the_unassigned_lots_is_noted():
    # inside S1 x says nothing of the grade; among the lots HDBSCAN left unassigned near S1
    # it does: given to S1, they make x a driver there, and the note says so
    rng = np.random.default_rng(12)
    n_style, n_loose = 300, 300
    grade = np.r_[rng.normal(15, 1.5, n_style), rng.normal(15, 1.5, n_loose)]
    x = np.r_[rng.normal(0, 1, n_style), (grade[n_style:] - 15) + rng.normal(0, 0.5, n_loose)]
    y = rng.normal(0, 1, n_style + n_loose)
    values = pd.DataFrame({"x": x, "y": y})
    flags = pd.DataFrame({"x": [OK] * len(x), "y": [OK] * len(x)})
    lots = pd.DataFrame({"grade": grade, "style": ["S1"] * n_style + ["unassigned"] * n_loose,
                         "nearest_style": "S1"})
    styles = pd.DataFrame({"style": ["S1"], "trusted": [True]})
    config = packaged_config("demo")
    config = dataclasses.replace(config, profile=dataclasses.replace(
        config.profile, bootstrap=300, include_unassigned=False))
    profiles = profile_table(values, flags, lots, styles, (_spec("x"), _spec("y")), config)
    rows = profiles.drivers.set_index(["style", "analyte"])
    assert not rows.loc[("S1", "x"), "is_driver"]
    assert "driver only when the 300 unassigned lots join their nearest styles" in \
        rows.loc[("S1", "x"), "note"]
    assert "unassigned" not in rows.loc[("S1", "y"), "note"]
    # the other way round: with them included x is a driver, and would not be without them
    included = dataclasses.replace(config, profile=dataclasses.replace(
        config.profile, include_unassigned=True))
    rows = profile_table(values, flags, lots, styles, (_spec("x"), _spec("y")),
                         included).drivers.set_index(["style", "analyte"])
    assert rows.loc[("S1", "x"), "is_driver"]
    assert "not a driver when the 300 unassigned lots it takes in are left out" in \
        rows.loc[("S1", "x"), "note"]


def test_youden_cut_is_described_as_a_split_not_a_bound(demo_model, demo_profiles):
    thresholds = demo_profiles.thresholds
    assert list(thresholds.columns[-2:]) == ["top_beyond_cut", "bottom_beyond_cut"]
    cuts = thresholds[thresholds["cut"].notna()]
    # Youden's J is the top band's share past the cut minus the bottom band's
    assert np.allclose(cuts["youden_j"], cuts["top_beyond_cut"] - cuts["bottom_beyond_cut"])
    t = pd.Series({"cut": 7.4, "direction": "higher_better", "top_beyond_cut": 0.78,
                   "bottom_beyond_cut": 0.31})
    assert cut_words(t, "g/L") == "cut 7.4 g/L: 78 % of top and 31 % of bottom lots at or above"
    summary = " ".join(driver_summary(demo_profiles, demo_model))
    assert "at least" not in summary and "at most" not in summary
    assert "% of top and" in summary

"""Style names: short, descriptive, unique."""

from __future__ import annotations

import pandas as pd

from vinstrata.segment import name_styles

LABELS = {"alcohol": ("alcohol", "alcohol"), "colour_intensity": ("colour_intensity", "colour"),
          "ph": ("ph", "pH"), "proline": ("", "proline")}


def test_names_come_from_the_strongest_medians_with_catalogue_words():
    z = pd.DataFrame({"alcohol": [1.2, -0.1], "colour_intensity": [2.0, -1.5],
                      "ph": [0.6, 0.1], "proline": [0.0, 0.9]}, index=["S1", "S2"])
    names = name_styles(z, LABELS)
    assert names["S1"] == "deep colour · high alcohol · high pH"
    assert names["S2"] == "pale colour · high proline"


def test_weak_differences_are_named_moderately_and_flat_styles_typical():
    z = pd.DataFrame({"alcohol": [0.4, 0.1], "colour_intensity": [-0.3, 0.0],
                      "ph": [0.1, 0.2], "proline": [0.0, 0.0]}, index=["S1", "S2"])
    names = name_styles(z, LABELS)
    assert names["S1"] == "moderately high alcohol · moderately pale colour"
    assert names["S2"] == "typical of the range"


def test_names_are_unique_within_a_run():
    z = pd.DataFrame({"alcohol": [1.0, 1.0, 1.0], "colour_intensity": [1.0, 1.0, 1.0],
                      "ph": [1.0, 1.0, 1.0], "proline": [1.0, 1.0, -1.0]},
                     index=["S1", "S2", "S3"])
    names = name_styles(z, LABELS)
    assert len(set(names.values())) == 3

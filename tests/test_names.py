"""Style names: short, descriptive, unique; the dominant colour first; the names users give."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from conftest import ROOT
from vinstrata.demo import RECIPES, generate_demo, write_demo
from vinstrata.errors import InputError
from vinstrata.segment import apply_user_names, check_user_name, colour_mix, name_styles
from vinstrata.segment.model import load_model

CONFIG = ROOT / "configs" / "demo.toml"

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


# --------------------------------------------------------------------------- colours and user names


def test_colour_mix_and_the_dominant_colour():
    assert colour_mix(np.array(["white"] * 97 + ["rose"] * 3)) == ("white 0.97; rose 0.03",
                                                                   "white")
    # 80 % makes a colour dominant; blanks (unknown colour) are left out of the shares
    assert colour_mix(np.array(["red"] * 8 + ["rose"] * 2 + [""] * 5))[1] == "red"
    assert colour_mix(np.array(["red"] * 7 + ["rose"] * 3)) == ("red 0.70; rose 0.30", "")
    assert colour_mix(np.array(["", ""])) == ("", "")


def test_names_start_with_the_dominant_colour():
    z = pd.DataFrame({"alcohol": [1.2, -0.1], "colour_intensity": [2.0, -1.5],
                      "ph": [0.6, 0.1], "proline": [0.0, 0.9]}, index=["S1", "S2"])
    names = name_styles(z, LABELS, {"S1": "red", "S2": ""})
    assert names["S1"] == "red · deep colour · high alcohol · high pH"
    assert names["S2"] == "pale colour · high proline"


def test_user_names_are_checked():
    styles = pd.DataFrame({"style": ["S1", "S2"], "style_name": ["a", "b"],
                           "generated_name": ["a", "b"]})
    shown = apply_user_names(styles, {"S2": "Estate red"})
    assert shown["style_name"].tolist() == ["a", "Estate red"]
    assert shown["generated_name"].tolist() == ["a", "b"]
    assert check_user_name("  Estate   crisp white ") == "Estate crisp white"
    with pytest.raises(InputError, match="control characters"):
        check_user_name("two\nlines")
    with pytest.raises(InputError, match="at most 60 characters"):
        check_user_name("x" * 61)


@pytest.fixture(scope="module")
def segmented(tmp_path_factory):
    """600 demo lots segmented by the command line, and their new lots."""
    from vinstrata import cli

    root = tmp_path_factory.mktemp("named")
    paths = write_demo(root / "data", generate_demo(n_lots=600, seed=3, n_new=20))
    code = cli.main(["-q", "segment", str(paths["lots"]), "--config", str(CONFIG), "--out",
                     str(root / "out")])
    assert code == 0
    return {**paths, "out": root / "out"}


def test_styles_csv_gives_the_colour_mix_and_the_generated_name_at_the_end(segmented):
    styles = pd.read_csv(segmented["out"] / "styles.csv", keep_default_na=False)
    assert list(styles.columns[-4:]) == ["n_bottom", "n_top", "generated_name", "colour_mix"]
    assert (styles["style_name"] == styles["generated_name"]).all()
    truth = pd.read_csv(segmented["truth_lots"])
    lots = pd.read_csv(segmented["out"] / "lot_styles.csv", keep_default_na=False)
    colour = dict(zip(truth["lot"], truth["style"].map(
        {r.key: r.colour for r in RECIPES}).fillna("")))
    for row in styles.itertuples():
        colours = pd.Series([colour.get(lot, "") for lot in lots.loc[lots["style"] == row.style,
                                                                       "lot_id"]])
        top = colours.value_counts(normalize=True)
        if top.iloc[0] >= 0.8:
            assert row.style_name.startswith(f"{top.index[0]} · "), row
            assert row.colour_mix.startswith(f"{top.index[0]} ")


def test_a_user_name_is_kept_in_the_model_and_shown_everywhere(segmented, run_cli):
    out = segmented["out"]
    model_dir = out / "model"
    before = load_model(model_dir)
    generated = before.style_names()["S1"]
    result = run_cli("name", "--model", model_dir, "S1", "Estate crisp white", "-q")
    assert result.code == 0, result
    assert "S1" in result.out and "Estate crisp white" in result.out
    model = load_model(model_dir)  # the folder checks out against its own file list
    assert model.user_names == {"S1": "Estate crisp white"}
    assert model.fingerprint != before.fingerprint
    styles = pd.read_csv(out / "styles.csv", keep_default_na=False)
    s1 = styles.set_index("style").loc["S1"]
    assert s1["style_name"] == "Estate crisp white" and s1["generated_name"] == generated
    lots = pd.read_csv(out / "lot_styles.csv", keep_default_na=False)
    assert set(lots.loc[lots["style"] == "S1", "style_name"]) == {"Estate crisp white"}
    # the folder's manifest follows the renamed model, so later commands keep its files
    manifest = json.loads((out / "segment_manifest.json").read_text())
    for key in ("styles.csv", "lot_styles.csv", "sweep.csv", "model/"):
        assert manifest["files"][key]["identity"]["model"] == model.fingerprint, key
    assert run_cli("-q", "profile", "--model", model_dir, "--out", out).code == 0
    assert (out / "styles.csv").exists() and (out / "sweep.csv").exists()
    placed = run_cli("-q", "place", segmented["new_lots"], "--model", model_dir, "--out",
                     out / "new")
    assert placed.code == 0
    placements = pd.read_csv(out / "new" / "placements.csv", keep_default_na=False)
    assert set(placements.loc[placements["style"] == "S1", "style_name"]) <= {
        "Estate crisp white"}
    # refusals: another style's name, an unknown style; "" gives the generated name back
    taken = run_cli("name", "--model", model_dir, "S2", "Estate crisp white")
    assert taken.code == 2 and "already called" in taken.err
    unknown = run_cli("name", "--model", model_dir, "S99", "x")
    assert unknown.code == 2 and "no style 'S99'" in unknown.err
    assert run_cli("-q", "name", "--model", model_dir, "S1", "").code == 0
    assert load_model(model_dir).style_names()["S1"] == generated

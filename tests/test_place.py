"""Placing new lots: own styles back, atypical lots caught, mismatched files refused."""

from __future__ import annotations

import pandas as pd
import pytest

from conftest import DEMO, ROOT
from vinstrata import pipeline
from vinstrata.place import PLACEMENT_COLUMNS, describe, place_lots
from vinstrata.place.limits import CAUTION

CONFIG = ROOT / "configs" / "demo.toml"


def _place(model, profiles, path):
    table = pipeline.load_new(path, model, model.config)
    return place_lots(table, model, profiles)


def test_training_lots_come_back_in_their_own_style(demo_model, demo_profiles):
    placed = _place(demo_model, demo_profiles, DEMO / "lots.csv")
    assert len(placed.lots) == len(pd.read_csv(DEMO / "lots.csv"))
    own = demo_model.lots.set_index("lot_id")["style"]
    used = placed.lots[placed.lots["status"] == "used"].drop_duplicates("lot_id")
    styled = used[used["lot_id"].map(own) != "unassigned"]
    agree = (styled["style"].to_numpy() == styled["lot_id"].map(own).to_numpy()).mean()
    assert agree >= 0.95


def _typical_copy(model, frame: pd.DataFrame, style: str) -> pd.Series:
    """A lot of ``style`` whose chemistry sits near the style's medians."""
    lots = model.lots[(model.lots["style"] == style)]
    best = lots.sort_values("outlier_score").iloc[0]["lot_id"]
    return frame[frame["lot"] == best].iloc[0].copy()


def test_one_analyte_far_outside_makes_a_lot_atypical_and_names_it(demo_model, demo_profiles,
                                                                   tmp_path):
    frame = pd.read_csv(DEMO / "lots.csv", dtype=str, keep_default_na=False)
    base = _typical_copy(demo_model, frame, "S1")
    far, near = base.copy(), base.copy()
    far["lot"], near["lot"] = "TEST-FAR", "TEST-NEAR"
    far["potassium"] = "3500"  # far outside the whole range, still physically possible
    thresholds = demo_profiles.thresholds.set_index(["style", "analyte"])
    window = thresholds.loc[("S1", "potassium")]
    near["potassium"] = f"{(window['target_low'] + window['target_high']) / 2:.0f}"
    path = tmp_path / "new.csv"
    pd.DataFrame([far, near]).drop(columns=["grade"]).to_csv(path, index=False)
    placed = _place(demo_model, demo_profiles, path).lots.set_index("lot_id")
    assert placed.loc["TEST-FAR", "atypical"]
    assert "off_style:potassium" in placed.loc["TEST-FAR", "flags"]
    assert not placed.loc["TEST-NEAR", "atypical"]
    assert "potassium" not in placed.loc["TEST-NEAR", "flags"]


def test_planted_unusual_new_lots_are_atypical_and_screened(demo_model, demo_profiles):
    placed = _place(demo_model, demo_profiles, DEMO / "new_lots.csv")
    truth = pd.read_csv(DEMO / "truth_new_lots.csv", keep_default_na=False)
    lots = placed.lots.set_index("lot_id")
    planted = truth[truth["planted"] != ""]
    atypical = lots.loc[planted["lot"], "atypical"].astype(bool)
    assert atypical.mean() >= 5 / 6
    va = planted[planted["planted"].str.startswith("volatile acidity")]["lot"].iloc[0]
    assert "va_above_limit" in lots.loc[va, "flags"]
    so2 = planted[planted["planted"].str.startswith("total SO2")]["lot"].iloc[0]
    assert "total_so2_above_limit" in lots.loc[so2, "flags"]
    low = planted[planted["planted"].str.contains("molecular")]["lot"].iloc[0]
    assert "molecular_so2_low" in lots.loc[low, "flags"]
    typical = truth[truth["planted"] == ""]["lot"]
    assert lots.loc[typical, "atypical"].astype(bool).mean() <= 0.2


def test_place_cli_contract_and_terminal_table(demo_model_dir, tmp_path, run_cli):
    result = run_cli("-q", "place", DEMO / "new_lots.csv", "--model", demo_model_dir,
                     "--out", tmp_path / "out")
    assert result.code == 0, result
    placements = pd.read_csv(tmp_path / "out" / "placements.csv", keep_default_na=False)
    assert list(placements.columns[:11]) == list(PLACEMENT_COLUMNS)
    assert list(placements.columns[11:13]) == ["vintage", "colour"]
    assert len(placements) == len(pd.read_csv(DEMO / "new_lots.csv"))
    assert placements["indicative_band"].isin(["bottom", "middle", "top"]).all()
    assert placements["nearest_lots"].str.count(";").eq(4).all()
    neighbours = pd.read_csv(tmp_path / "out" / "placement_neighbours.csv")
    assert set(neighbours["rank"]) == {1, 2, 3, 4, 5}
    analytes = pd.read_csv(tmp_path / "out" / "placement_analytes.csv")
    assert analytes["percentile"].between(0, 100).all()
    assert set(analytes["flag"].fillna("")) <= {"", "off_style", "losing_side"}
    details = pd.read_csv(tmp_path / "out" / "placement_details.csv", keep_default_na=False)
    assert list(details.columns[-4:]) == ["flags_text", "flags_short", "driver_score",
                                          "driver_cut"]
    assert not details["flags_short"].isin(["-", "'-"]).any()
    assert not placements["flags"].str.contains("outside_target", regex=False).any()
    assert max(len(line) for line in result.out.splitlines()) <= 100
    assert CAUTION in result.out
    assert "not a forecast" in result.out


def test_rejected_new_rows_keep_their_place(demo_model, demo_profiles, tmp_path):
    frame = pd.read_csv(DEMO / "new_lots.csv", dtype=str, keep_default_na=False)
    frame.loc[3, "ph"] = "7.9"
    frame.loc[5, "lot"] = ""
    path = tmp_path / "new.csv"
    frame.to_csv(path, index=False)
    placed = _place(demo_model, demo_profiles, path).lots
    assert len(placed) == len(frame)
    assert placed.loc[3, "status"] == "out_of_range:ph"
    assert placed.loc[5, "status"] == "missing_lot_id"
    assert pd.isna(placed.loc[3, "style"]) or placed.loc[3, "style"] in ("", None)


def test_missing_analyte_is_refused_in_one_line(demo_model_dir, tmp_path, run_cli):
    frame = pd.read_csv(DEMO / "new_lots.csv", dtype=str)
    frame = frame.drop(columns=["ph"]).rename(columns={"potassium": "k_ppm_extra"})
    path = tmp_path / "new.csv"
    frame.to_csv(path, index=False)
    result = run_cli("-q", "place", path, "--model", demo_model_dir, "--out", tmp_path / "out")
    assert result.code == 2
    lines = result.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error:")
    assert "missing" in lines[0] and "ph" in lines[0] and "potassium" in lines[0]
    assert "unexpected" in lines[0] and "k_ppm_extra" in lines[0]


def test_analyte_in_other_units_is_refused(demo_model_dir, tmp_path, run_cli):
    # total SO2 written in g/L while the config says mg/L: a factor of 1000 off
    frame = pd.read_csv(DEMO / "new_lots.csv", dtype=str)
    frame["total_so2"] = (frame["total_so2"].astype(float) / 1000).map(lambda v: f"{v:.3f}")
    frame["free_so2"] = "0.001"
    path = tmp_path / "new.csv"
    frame.to_csv(path, index=False)
    result = run_cli("-q", "place", path, "--model", demo_model_dir, "--out", tmp_path / "out")
    assert result.code == 2
    assert result.err.count("\n") == 1 and "another unit" in result.err
    assert "Traceback" not in result.err


def test_declared_unit_is_converted_not_refused(demo_model, demo_profiles, tmp_path):
    # the same lots with total SO2 written in g/L and the config saying so: placed alike
    import dataclasses

    frame = pd.read_csv(DEMO / "new_lots.csv", dtype=str)
    frame["total_so2"] = (frame["total_so2"].astype(float) / 1000).map(lambda v: f"{v:.4f}")
    path = tmp_path / "new.csv"
    frame.to_csv(path, index=False)
    config = dataclasses.replace(demo_model.config,
                                 units={**demo_model.config.units, "total_so2": "g/L"})
    table = pipeline.load_new(path, demo_model, config)
    converted = place_lots(table, demo_model, demo_profiles, config).lots
    original = _place(demo_model, demo_profiles, DEMO / "new_lots.csv").lots
    assert (converted["style"] == original["style"]).mean() >= 0.95


def test_terminal_table_fits_100_columns(demo_model, demo_profiles):
    text = describe(_place(demo_model, demo_profiles, DEMO / "new_lots.csv"))
    assert max(len(line) for line in text.splitlines()) <= 100


@pytest.mark.parametrize("column", ["grade"])
def test_grade_column_is_optional_for_new_lots(demo_model, demo_profiles, tmp_path, column):
    frame = pd.read_csv(DEMO / "new_lots.csv", dtype=str)
    frame[column] = "15.5"
    path = tmp_path / "new.csv"
    frame.to_csv(path, index=False)
    placed = _place(demo_model, demo_profiles, path).lots
    assert (placed["status"] == "used").all()


def test_config_for_other_analytes_is_refused_naming_the_difference(demo_model_dir, tmp_path,
                                                                    run_cli):
    text = CONFIG.read_text().replace('"ph",', "")
    other = tmp_path / "other.toml"
    other.write_text(text)
    result = run_cli("-q", "place", DEMO / "new_lots.csv", "--model", demo_model_dir,
                     "--config", other, "--out", tmp_path / "out")
    assert result.code == 2
    assert result.err.count("\n") == 1
    assert "differ from the model" in result.err and "ph" in result.err


def test_atypical_line_follows_the_placing_config(demo_model, demo_profiles):
    import dataclasses

    table = pipeline.load_new(DEMO / "new_lots.csv", demo_model, demo_model.config)
    strict = dataclasses.replace(demo_model.config, place=dataclasses.replace(
        demo_model.config.place, atypical_percentile=60.0))
    default = place_lots(table, demo_model, demo_profiles).lots["atypical"].astype(bool)
    more = place_lots(table, demo_model, demo_profiles, strict).lots["atypical"].astype(bool)
    assert more.sum() > default.sum() and (more | ~default).all()


def test_placements_carry_their_settings_through_their_folder(demo_model, demo_profiles,
                                                              tmp_path):
    import dataclasses

    from vinstrata.errors import InputError

    table = pipeline.load_new(DEMO / "new_lots.csv", demo_model, demo_model.config)
    config = dataclasses.replace(demo_model.config, place=dataclasses.replace(
        demo_model.config.place, atypical_percentile=90.0))
    placements = place_lots(table, demo_model, demo_profiles, config)
    settings = placements.settings
    assert settings.atypical_percentile == 90.0 and settings.market == "eu"
    assert settings.model_sha256 == demo_model.source.sha256
    pipeline.write_place(placements, tmp_path / "out")
    assert pipeline.read_place(tmp_path / "out").settings == settings
    (tmp_path / "out" / "place_settings.json").unlink()
    with pytest.raises(InputError, match=r"no place_settings\.json .*'vinstrata place' again"):
        pipeline.read_place(tmp_path / "out")


def test_place_with_a_profile_folder_gives_the_placements_of_profiling_here(
        demo_model_dir, demo_config, tmp_path, run_cli):
    config = ROOT / "configs" / "demo.toml"
    prof = tmp_path / "prof"
    assert run_cli("-q", "profile", "--model", demo_model_dir, "--config", config,
                   "--out", prof).code == 0
    here, given = tmp_path / "here", tmp_path / "given"
    assert run_cli("-q", "place", DEMO / "new_lots.csv", "--model", demo_model_dir,
                   "--config", config, "--out", here).code == 0
    result = run_cli("-q", "place", DEMO / "new_lots.csv", "--model", demo_model_dir,
                     "--config", config, "--out", given, "--profiles", prof)
    assert result.code == 0, result
    for name in ("placements.csv", "placement_analytes.csv"):
        assert (here / name).read_bytes() == (given / name).read_bytes(), name
    # the driver scores and the medians quoted in the words rest on the values the profile
    # files keep (6 significant digits): the flags agree, the scores to 1e-5
    a, b = pd.read_csv(here / "placement_details.csv"), pd.read_csv(given / "placement_details.csv")
    assert a["flags_short"].equals(b["flags_short"])
    assert ((a["driver_score"] - b["driver_score"]).abs().max() < 1e-5)


def test_profiles_of_another_model_are_refused(demo_model_dir, tmp_path, run_cli):
    other = tmp_path / "other"
    assert run_cli("-q", "segment", DEMO / "lots.csv", "--config", ROOT / "configs" / "demo.toml",
                   "--seed", "3", "--out", other).code == 0
    assert run_cli("-q", "profile", "--model", other / "model", "--out", other).code == 0
    result = run_cli("place", DEMO / "new_lots.csv", "--model", demo_model_dir,
                     "--out", tmp_path / "out", "--profiles", other)
    assert result.code == 2
    assert "belong to another model" in result.err and result.err.count("\n") == 1

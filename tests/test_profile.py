"""Within-style drivers on planted truth: found, signed, contrasted, honest about small bands."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest

from conftest import DEMO
from vinstrata.config import packaged_config
from vinstrata.demo import generate_demo, planted_profiles
from vinstrata.profile import DRIVER_COLUMNS, POOLED, THRESHOLD_COLUMNS


def _planted_to_found(model) -> dict[str, str]:
    """Each planted style's found style: where most of its lots went."""
    truth = pd.read_csv(DEMO / "truth_lots.csv").set_index("lot")["style"]
    lots = model.lots.assign(truth=truth.reindex(model.lots["lot_id"]).to_numpy())
    lots = lots[lots["style"] != "unassigned"]
    return lots.groupby("truth")["style"].agg(lambda s: s.value_counts().index[0]).to_dict()


def test_every_planted_driver_is_found_with_its_sign(demo_model, demo_profiles):
    truth = pd.read_csv(DEMO / "truth_drivers.csv")
    found = _planted_to_found(demo_model)
    trusted = set(demo_model.styles.loc[demo_model.styles["trusted"], "style"])
    drivers = demo_profiles.drivers.set_index(["style", "analyte"])
    checked = direct = 0
    passengers = truth[truth["role"] == "indirect"]
    for row in truth[truth["role"] == "direct"].itertuples():
        style = found[row.style]
        if style not in trusted:
            continue  # an untrusted style promises nothing
        result = drivers.loc[(style, row.analyte)]
        assert result["is_driver"], (row.style, row.analyte)
        assert np.sign(result["cliffs_delta"]) == row.sign, (row.style, row.analyte)
        # direct, or unclear beside a near-twin that rides on it (sugar and density in a
        # sweet wine), never a passenger
        twins = set(passengers.loc[(passengers["style"] == row.style)
                                   & (passengers["rides_on"] == row.analyte), "analyte"])
        assert (result["role"] == "direct"
                or (result["role"] == "unclear" and result["moves_with"] in twins)), (
            row.style, row.analyte, result["role"])
        direct += result["role"] == "direct"
        checked += 1
    assert checked >= 15 and direct / checked >= 0.9


def test_planted_reversal_is_flagged(demo_model, demo_profiles):
    found = _planted_to_found(demo_model)
    contrasts = demo_profiles.contrasts
    malic = contrasts[(contrasts["analyte"] == "malic_acid") & (contrasts["kind"] == "reversal")]
    assert len(malic) == 1
    styles = malic["styles"].iloc[0].split(";")
    assert found["crisp_white"] in styles and found["structured_red"] in styles
    sentence = malic["sentence"].iloc[0]
    assert "the opposite" in sentence and "pooled" in sentence


def test_between_style_difference_is_not_sold_as_a_driver(demo_profiles):
    # phenolics differ between styles whose grades differ, with no effect inside any style
    drivers = demo_profiles.drivers.set_index(["style", "analyte"])
    assert drivers.loc[(POOLED, "total_phenolics"), "is_driver"]
    contrasts = demo_profiles.contrasts
    kinds = set(contrasts.loc[contrasts["analyte"] == "total_phenolics", "kind"])
    assert "pooled_misleading" in kinds


def test_no_effect_analytes_stay_within_the_false_discovery_rate():
    # planted truth over several seeds: the share of false drivers among the drivers found
    # stays near the FDR level (0.05); a bound of 0.09 over ten seeds leaves room for chance
    config = packaged_config("demo")
    config = dataclasses.replace(config, profile=dataclasses.replace(config.profile,
                                                                     bootstrap=300))
    shares = []
    for seed in range(1, 11):
        rows = planted_profiles(generate_demo(3000, seed=seed, bad_rows=0, n_new=0), config,
                                trust_all=True)
        # passengers are true marginal associations (what the BH tests are about), so they
        # count among the discoveries; no-effect analytes are the false ones
        flagged = rows[rows["is_driver"]]
        shares.append((flagged["planted"] == "no_effect").sum() / max(len(flagged), 1))
    assert np.mean(shares) <= 0.09


def test_small_bands_get_insufficient_never_a_number(demo_model, demo_profiles):
    drivers = demo_profiles.drivers
    untrusted = demo_model.styles.loc[~demo_model.styles["trusted"], "style"]
    rows = drivers[drivers["style"].isin(untrusted)]
    thin = rows[(rows["n_top"] < 10) | (rows["n_bottom"] < 10)]
    assert len(thin)
    assert thin["cliffs_delta"].isna().all() and thin["ci_low"].isna().all()
    assert thin["hedges_g"].isna().all() and thin["p_value"].isna().all()
    assert thin["note"].str.startswith("insufficient").all()
    assert not thin["is_driver"].any()
    assert (~rows["trusted"]).all()


def test_every_effect_size_has_its_interval(demo_profiles):
    drivers = demo_profiles.drivers
    measured = drivers[drivers["cliffs_delta"].notna()]
    assert (measured["ci_low"] <= measured["cliffs_delta"] + 1e-12).all()
    assert (measured["cliffs_delta"] <= measured["ci_high"] + 1e-12).all()
    assert measured[["hedges_g_ci_low", "hedges_g_ci_high"]].notna().all().all()
    assert measured["q_value"].between(0, 1).all()


def test_drivers_are_ranked_by_absolute_delta(demo_profiles):
    drivers = demo_profiles.drivers
    for _, part in drivers[drivers["is_driver"]].groupby("style"):
        ordered = part.sort_values("rank")
        assert list(ordered["rank"]) == list(range(1, len(part) + 1))
        assert ordered["cliffs_delta"].abs().is_monotonic_decreasing


def test_thresholds_give_a_cut_for_each_driver_and_a_window_for_each_analyte(demo_profiles):
    thresholds = demo_profiles.thresholds
    drivers = demo_profiles.drivers
    assert list(thresholds.columns[:10]) == list(THRESHOLD_COLUMNS)
    merged = thresholds.merge(drivers[["style", "analyte", "is_driver", "cliffs_delta", "n_top"]],
                              on=["style", "analyte"])
    cut = merged[merged["is_driver"]]
    assert cut["cut"].notna().all() and cut["youden_j"].between(0, 1).all()
    assert ((cut["cut_ci_low"] <= cut["cut"]) & (cut["cut"] <= cut["cut_ci_high"])).all()
    higher = cut["cliffs_delta"] > 0
    assert (cut.loc[higher, "direction"] == "higher_better").all()
    assert (cut.loc[~higher, "direction"] == "lower_better").all()
    assert (cut["auc"] >= 0.5).all()
    windowed = merged[merged["n_top"] >= 10]
    assert (windowed["target_low"] <= windowed["target_high"]).all()
    assert merged.loc[~merged["is_driver"], "cut"].isna().all()


def test_profile_cli_writes_the_contract_files(demo_model_dir, tmp_path, run_cli):
    result = run_cli("-q", "profile", "--model", demo_model_dir, "--out", tmp_path / "prof")
    assert result.code == 0, result
    drivers = pd.read_csv(tmp_path / "prof" / "drivers.csv")
    assert list(drivers.columns[:17]) == list(DRIVER_COLUMNS)
    assert set(drivers["style"]) >= {"S1", POOLED}
    contrasts = pd.read_csv(tmp_path / "prof" / "contrasts.csv")
    assert list(contrasts.columns) == ["analyte", "kind", "styles", "sentence", "delta_gap",
                                       "gap_ci_low", "gap_ci_high"]
    assert set(contrasts["kind"]) <= {"reversal", "style_specific", "pooled_misleading"}
    again = run_cli("-q", "profile", "--model", demo_model_dir, "--out", tmp_path / "again")
    assert again.code == 0
    for name in ("drivers.csv", "thresholds.csv", "contrasts.csv"):
        assert (tmp_path / "prof" / name).read_bytes() == (tmp_path / "again" / name).read_bytes()


@pytest.mark.parametrize("mode", ["style_quantile"])
def test_per_style_quantile_bands(demo_model, mode):
    from vinstrata.profile import profile_styles

    config = dataclasses.replace(demo_model.config, bands=dataclasses.replace(
        demo_model.config.bands, mode=mode, quantiles=(0.2, 0.8)))
    profiles = profile_styles(demo_model, config)
    counts = profiles.band_counts.set_index("style")
    checked = []
    for sid in demo_model.style_ids:
        row = counts.loc[sid]
        if row["n_graded"] < 100:
            continue  # grades are written to 0.1: ties move small styles' shares a lot
        # bottom 20 % and top 20 % of each style's own grades (ties may round the shares)
        assert row["bottom"] == pytest.approx(0.2 * row["n_graded"], abs=0.05 * row["n_graded"])
        assert row["top"] == pytest.approx(0.2 * row["n_graded"], abs=0.05 * row["n_graded"])
        checked.append(sid)
    # the check really ran: on several styles holding most of the range's graded lots
    graded = counts.loc[list(demo_model.style_ids), "n_graded"]
    assert len(checked) >= 3, checked
    assert graded[checked].sum() >= 0.8 * graded.sum()


def test_profile_for_placing_keeps_every_style_row(demo_model, demo_profiles):
    # placing skips the pooled rows and the cut intervals; drivers and cuts must not move
    from vinstrata.profile import profile_styles

    lean = profile_styles(demo_model, pooled=False, cut_intervals=False)
    full = demo_profiles.drivers[demo_profiles.drivers["style"] != POOLED].reset_index(drop=True)
    pd.testing.assert_frame_equal(lean.drivers.reset_index(drop=True), full)
    pd.testing.assert_series_equal(lean.thresholds["cut"], demo_profiles.thresholds["cut"])


def test_profiles_carry_their_settings_through_their_folder(demo_model, demo_profiles, tmp_path):
    from vinstrata import pipeline
    from vinstrata.errors import InputError
    from vinstrata.settings import ProfileSettings

    settings = demo_profiles.settings
    assert settings == ProfileSettings.from_config(demo_model.config, demo_model.source.sha256)
    assert settings.bootstrap == demo_model.config.profile.bootstrap
    pipeline.write_profile(demo_profiles, tmp_path / "a")
    pipeline.write_profile(demo_profiles, tmp_path / "b")
    written = tmp_path / "a" / "profile_settings.json"
    assert written.read_bytes() == (tmp_path / "b" / "profile_settings.json").read_bytes()
    assert pipeline.read_profile(tmp_path / "a").settings == settings
    written.unlink()  # a folder written before the settings were kept
    with pytest.raises(InputError, match=r"no profile_settings\.json .*'vinstrata profile' again"):
        pipeline.read_profile(tmp_path / "a")


def test_settings_with_a_missing_or_wrong_value_are_refused_in_one_line(demo_profiles):
    from vinstrata.errors import InputError
    from vinstrata.settings import ProfileSettings

    data = demo_profiles.settings.to_dict()
    assert ProfileSettings.from_dict(data) == demo_profiles.settings
    with pytest.raises(InputError, match="'bootstrap': expected int"):
        ProfileSettings.from_dict({**data, "bootstrap": "many"}, "P/profile_settings.json")
    with pytest.raises(InputError, match="no 'fdr'"):
        ProfileSettings.from_dict({k: v for k, v in data.items() if k != "fdr"})

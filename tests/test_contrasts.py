"""Contrasts between styles claim a difference only with a gap whose interval excludes 0."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from vinstrata.profile.contrasts import (
    CONTRAST_COLUMNS,
    NEGLIGIBLE,
    BootDeltas,
    contrasts,
    is_negligible,
)
from vinstrata.profile.groups import POOLED, Group, draw_resamples


def _row(style: str, delta: float, half: float, driver: bool, n: int = 1000,
         trusted: bool = True) -> dict:
    return {"style": style, "analyte": "x", "cliffs_delta": delta, "ci_low": delta - half,
            "ci_high": delta + half, "is_driver": driver, "trusted": trusted, "n_lots": n}


def _boot(spreads: dict[str, tuple[float, float]], b: int = 4000):
    """Normal bootstrap draws per style (centre, sd), independent per style, seeded."""
    draws = {s: np.random.default_rng(k).normal(c, sd, b)
             for k, (s, (c, sd)) in enumerate(sorted(spreads.items()))}
    return lambda style, analyte: draws.get(style)


def test_columns_keep_the_contract_and_add_the_gap_at_the_end():
    assert CONTRAST_COLUMNS[:4] == ("analyte", "kind", "styles", "sentence")
    assert CONTRAST_COLUMNS[4:] == ("delta_gap", "gap_ci_low", "gap_ci_high")


def test_underpowered_style_without_a_gap_gives_no_style_specific_row():
    # a weak effect in a small style: no driver there, but no evidence it differs either
    drivers = pd.DataFrame([_row("S1", 0.30, 0.08, True), _row("S2", 0.20, 0.30, False, n=60)])
    out = contrasts(drivers, {"x": "x"}, _boot({"S1": (0.30, 0.04), "S2": (0.20, 0.15)}))
    assert out.empty


def test_style_specific_row_names_negligible_and_too_few_and_carries_its_gap():
    drivers = pd.DataFrame([_row("S1", 0.60, 0.08, True), _row("S2", 0.02, 0.06, False),
                            _row("S3", 0.10, 0.30, False, n=80)])
    boot = _boot({"S1": (0.60, 0.04), "S2": (0.02, 0.03), "S3": (0.10, 0.15)})
    out = contrasts(drivers, {"x": "acidity"}, boot)
    assert list(out["kind"]) == ["style_specific"]
    row = out.iloc[0]
    # the driver style against the negligible one, not the noisier small style
    assert row["delta_gap"] == pytest.approx(0.58)
    assert row["gap_ci_low"] == pytest.approx(0.58 - 1.96 * np.hypot(0.04, 0.03), abs=0.01)
    assert row["gap_ci_high"] == pytest.approx(0.58 + 1.96 * np.hypot(0.04, 0.03), abs=0.01)
    assert "in S2 the effect is negligible" in row["sentence"]
    assert "in S3 there are too few lots to tell" in row["sentence"]
    assert "no clear effect" not in row["sentence"]


def test_reversal_gap_is_between_the_strongest_styles_of_each_direction():
    drivers = pd.DataFrame([_row("S1", 0.40, 0.1, True), _row("S2", 0.65, 0.1, True),
                            _row("S3", -0.55, 0.1, True)])
    boot = _boot({"S1": (0.40, 0.05), "S2": (0.65, 0.05), "S3": (-0.55, 0.05)})
    out = contrasts(drivers, {"x": "x"}, boot)
    row = out[out["kind"] == "reversal"].iloc[0]
    assert row["styles"] == "S1;S2;S3"  # report order
    assert row["delta_gap"] == pytest.approx(1.20)
    assert row["gap_ci_low"] > 0


def test_pooled_gap_is_pooled_minus_the_size_weighted_within_style_delta():
    # the styles show nothing (negligible), the pooled range a driver: between-style difference
    drivers = pd.DataFrame([_row("S1", 0.00, 0.05, False, n=3000),
                            _row("S2", 0.06, 0.06, False, n=1000),
                            {**_row(POOLED, 0.30, 0.04, True, n=4000)}])
    boot = _boot({"S1": (0.0, 0.025), "S2": (0.06, 0.03), POOLED: (0.30, 0.02)})
    out = contrasts(drivers, {"x": "phenolics"}, boot)
    row = out[out["kind"] == "pooled_misleading"].iloc[0]
    assert row["delta_gap"] == pytest.approx(0.30 - (0.0 * 3000 + 0.06 * 1000) / 4000)
    assert row["gap_ci_low"] > 0
    assert "differences between styles" in row["sentence"]
    assert "the effect is negligible" in row["sentence"]
    # a pooled delta that matches the stratified one claims nothing
    same = drivers.copy()
    same.loc[same["style"] == POOLED, "cliffs_delta"] = 0.015
    boot_same = _boot({"S1": (0.0, 0.025), "S2": (0.06, 0.03), POOLED: (0.015, 0.02)})
    assert contrasts(same, {"x": "phenolics"}, boot_same).empty


def test_without_bootstrap_draws_nothing_is_claimed():
    drivers = pd.DataFrame([_row("S1", 0.60, 0.08, True), _row("S2", -0.60, 0.08, True)])
    assert contrasts(drivers, {"x": "x"}).empty


def test_negligible_band_is_romano_s_bound():
    # Romano et al. (2006): |delta| < 0.147 negligible
    assert NEGLIGIBLE == 0.147
    assert is_negligible(-0.14, 0.14) and not is_negligible(-0.10, 0.16)


def test_boot_deltas_are_cliffs_delta_of_the_resampled_bands():
    rng = np.random.default_rng(11)
    values = np.concatenate([rng.normal(1, 1, 60), rng.normal(0, 1, 50)])
    bands = np.concatenate([np.full(60, 2), np.full(50, 0)])
    group = Group("S1", True, np.arange(110), bands)
    kept = draw_resamples(group, 3, 500, np.random.default_rng(5))
    draws = BootDeltas([group], [kept], {"x": values}, 500)("S1", "x")
    # resample 0 by hand: each lot repeated as often as it was drawn
    top = np.repeat(values[kept.top_rows], kept.weights("top")[:, 0].astype(int))
    bottom = np.repeat(values[kept.bottom_rows], kept.weights("bottom")[:, 0].astype(int))
    by_hand = np.sign(top[:, None] - bottom[None, :]).mean()
    assert draws[0] == pytest.approx(by_hand)
    assert BootDeltas([group], [kept], {"x": values}, 500)("S9", "x") is None


def test_demo_contrasts_rest_on_gaps_that_exclude_zero(demo_profiles):
    found = demo_profiles.contrasts
    assert len(found)
    assert ((found["gap_ci_low"] > 0) | (found["gap_ci_high"] < 0)).all()
    assert (found["gap_ci_low"] <= found["delta_gap"]).all()
    assert (found["delta_gap"] <= found["gap_ci_high"]).all()
    drivers = demo_profiles.drivers.set_index(["style", "analyte"])["cliffs_delta"]
    for row in found[found["kind"] == "reversal"].itertuples():
        deltas = [drivers[(s, row.analyte)] for s in row.styles.split(";")]
        assert row.delta_gap == pytest.approx(max(deltas) - min(deltas), abs=1e-6)
    # volatile acidity lowers the grade inside every style, the pooled range hides it
    va = found[(found["analyte"] == "volatile_acidity") & (found["kind"] == "pooled_misleading")]
    assert len(va) == 1 and va["delta_gap"].iloc[0] > 0.3

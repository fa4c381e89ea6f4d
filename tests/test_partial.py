"""Conditional effects and driver roles: reference checks and the planted truth."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from vinstrata.config import packaged_config
from vinstrata.demo import ANALYTES, generate_demo, planted_profiles
from vinstrata.profile import POOLED
from vinstrata.profile.partial import (
    PARTIAL_COLUMNS,
    assign_roles,
    determination,
    normal_scores,
    partial_effects,
    partial_from_corr,
)


def _residual_partial(y: np.ndarray, x: np.ndarray, j: int) -> float:
    """Partial correlation of y with column j of x given the other columns: the residual
    method, both regressed on the rest by statsmodels OLS."""
    rest = sm.add_constant(np.delete(x, j, axis=1))
    ry = sm.OLS(y, rest).fit().resid
    rx = sm.OLS(x[:, j], rest).fit().resid
    return float(np.corrcoef(ry, rx)[0, 1])


def test_precision_formula_equals_the_residual_method_of_statsmodels():
    rng = np.random.default_rng(3)
    x = rng.standard_normal((400, 5))
    x[:, 1] += 0.8 * x[:, 0]
    x[:, 4] = x[:, 2] - 0.5 * x[:, 3] + 0.3 * rng.standard_normal(400)
    y = 0.6 * x[:, 0] - 0.4 * x[:, 2] + rng.standard_normal(400)
    corr = np.corrcoef(np.column_stack([y, x]), rowvar=False)
    got = partial_from_corr(corr, ridge=0.0)
    want = [_residual_partial(y, x, j) for j in range(5)]
    np.testing.assert_allclose(got, want, atol=1e-10)


def test_worked_example_of_the_partial_correlation():
    # the worked example of the "Partial correlation" article of the English Wikipedia
    # (section "Using linear regression"; quoted from memory): X = 2, 4, 15, 20;
    # Y = 1, 2, 3, 4; Z = 0, 0, 1, 1 give a partial correlation of X and Y given Z of 0.919145
    x, y, z = [2, 4, 15, 20], [1, 2, 3, 4], [0, 0, 1, 1]
    corr = np.corrcoef(np.array([x, y, z], dtype=float))
    assert partial_from_corr(corr, ridge=0.0)[0] == pytest.approx(0.919145, abs=5e-7)
    # and the three-variable formula (r_xy - r_xz r_yz) / sqrt((1 - r_xz^2)(1 - r_yz^2))
    rxy, rxz, ryz = corr[0, 1], corr[0, 2], corr[1, 2]
    assert partial_from_corr(corr, ridge=0.0)[0] == pytest.approx(
        (rxy - rxz * ryz) / np.sqrt((1 - rxz ** 2) * (1 - ryz ** 2)))


def test_normal_scores_are_van_der_waerden_with_missing_at_the_median():
    x = np.array([3.0, np.nan, 1.0, 2.0])
    np.testing.assert_allclose(normal_scores(x), [0.6744897501960817, 0.0,
                                                  -0.6744897501960817, 0.0])


def test_a_passenger_loses_its_effect_and_a_near_identity_stays_finite():
    rng = np.random.default_rng(11)
    n = 1500
    alcohol, sugar, other = rng.standard_normal((3, n))
    grade = 0.6 * alcohol + rng.standard_normal(n)
    # density follows alcohol and sugar, with a part of its own (the extract)
    density = -0.8 * alcohol + 0.5 * sugar + 0.5 * rng.standard_normal(n)
    x = np.column_stack([alcohol, sugar, density, other])
    eff = partial_effects(x, grade, 400, 0.95, np.random.default_rng(1))
    assert eff.loc[0, "partial_ci_low"] > 0.2  # alcohol carries the grade
    for j in (1, 2, 3):  # sugar, density and the unrelated analyte do not
        assert eff.loc[j, "partial_ci_low"] < 0 < eff.loc[j, "partial_ci_high"]
    # a near-identity: the ridge keeps every estimate finite and inside [-1, 1]
    x[:, 2] = -0.8 * alcohol + 0.5 * sugar + 1e-6 * rng.standard_normal(n)
    eff = partial_effects(x, grade, 200, 0.95, np.random.default_rng(1))
    assert np.isfinite(eff.to_numpy()).all() and (eff.abs() <= 1).all().all()
    corr = np.corrcoef(x, rowvar=False)
    part = pd.DataFrame({"analyte": ["alcohol", "sugar", "density", "other"],
                         "is_driver": [True, False, True, False],
                         "cliffs_delta": [0.3, 0.0, -0.25, 0.0], **eff})
    roles = assign_roles(part, corr, list(part["analyte"]))
    assert roles["role"].tolist() == ["unclear", "", "unclear", ""]
    assert roles["moves_with"].tolist() == ["density", "", "alcohol", ""]


def test_determination_is_the_r_squared_of_ols():
    rng = np.random.default_rng(5)
    x = rng.standard_normal((300, 3))
    x[:, 2] += x[:, 0] - 0.5 * x[:, 1]
    r2 = determination(np.corrcoef(x, rowvar=False))
    want = sm.OLS(x[:, 2], sm.add_constant(x[:, :2])).fit().rsquared
    assert r2[2] == pytest.approx(want)


def test_roles_name_the_driver_a_passenger_rides_on():
    part = pd.DataFrame({
        "analyte": ["alcohol", "density", "ph", "potassium"],
        "is_driver": [True, True, False, True],
        "cliffs_delta": [0.5, -0.4, 0.0, 0.2],
        "partial_rho": [0.3, -0.01, 0.0, 0.0],
        "partial_ci_low": [0.25, -0.05, -0.05, -0.04],
        "partial_ci_high": [0.35, 0.03, 0.05, 0.05],
    })
    corr = np.array([[1.0, -0.7, 0.0, 0.1], [-0.7, 1.0, 0.0, 0.0],
                     [0.0, 0.0, 1.0, 0.5], [0.1, 0.0, 0.5, 1.0]])
    roles = assign_roles(part, corr, list(part["analyte"]))
    assert roles["role"].tolist() == ["direct", "indirect", "", "unclear"]
    assert roles["moves_with"].tolist() == ["", "alcohol", "", ""]


def _truth_profile(seed: int, n_lots: int, bootstrap: int) -> pd.DataFrame:
    config = packaged_config("demo")
    config = dataclasses.replace(config, profile=dataclasses.replace(config.profile,
                                                                     bootstrap=bootstrap))
    rows = planted_profiles(generate_demo(n_lots, seed=seed, bad_rows=0, n_new=0), config)
    return rows[rows["cliffs_delta"].notna()]


def test_roles_meet_their_targets_on_fresh_correlated_ranges():
    # python benchmarks/bench_roles.py measures the same on five seeds of 6,000 lots
    direct = passengers = direct_ok = passenger_ok = found = false = 0
    for seed in (201, 202, 203):
        rows = _truth_profile(seed, 6000, 300)
        is_driver = rows["is_driver"].astype(bool)
        planted = rows[rows["planted"] == "direct"]
        direct += len(planted)
        direct_ok += int((planted["is_driver"].astype(bool)
                          & (np.sign(planted["cliffs_delta"]) == planted["sign"])
                          & (planted["role"] == "direct")).sum())
        rides = rows[(rows["planted"] == "indirect") & is_driver]
        passengers += len(rides)
        passenger_ok += int(((rides["role"] == "indirect")
                             & (rides["moves_with"] == rides["rides_on"])).sum())
        found += int(is_driver.sum())
        false += int((is_driver & (rows["planted"] == "no_effect")).sum())
    print(f"\ndirect {direct_ok}/{direct}, passengers {passenger_ok}/{passengers}, "
          f"no-effect drivers {false}/{found}")
    assert direct_ok / direct >= 0.90
    assert passengers >= 10 and passenger_ok / passengers >= 0.80
    assert false / found <= 0.09  # the FDR (0.05) with room for chance over three seeds


def test_drivers_table_ends_with_the_conditional_columns(demo_profiles):
    drivers = demo_profiles.drivers
    assert tuple(drivers.columns[-len(PARTIAL_COLUMNS):]) == PARTIAL_COLUMNS
    roles = drivers["role"].fillna("")
    assert set(roles) <= {"", "direct", "indirect", "unclear"}
    assert (roles[~drivers["is_driver"].astype(bool)] == "").all()
    trusted = drivers[drivers["trusted"].astype(bool) & (drivers["style"] != POOLED)
                      & drivers["cliffs_delta"].notna()]
    assert trusted["partial_rho"].notna().all()
    assert (trusted["partial_ci_low"] <= trusted["partial_ci_high"]).all()
    assert set(drivers["analyte"]) <= set(ANALYTES)


def test_contrasts_say_when_a_passenger_carries_them(demo_profiles):
    drivers = demo_profiles.drivers.set_index(["style", "analyte"])
    contrasts = demo_profiles.contrasts
    checked = 0
    for row in contrasts[contrasts["kind"].isin(["reversal", "style_specific"])].itertuples():
        styles = [s for s in row.styles.split(";") if (s, row.analyte) in drivers.index]
        roles = [str(drivers.loc[(s, row.analyte), "role"]) for s in styles
                 if drivers.loc[(s, row.analyte), "is_driver"]]
        if "indirect" in roles:
            assert "no effect of its own once" in row.sentence, row.sentence
            checked += 1
        if roles and set(roles) == {"indirect"}:
            assert "carried only by passengers" in row.sentence, row.sentence
        elif roles and "direct" not in roles:
            assert "no style shows it as a direct driver" in row.sentence, row.sentence
    assert checked >= 1


def test_summary_leads_with_direct_drivers_and_names_passengers(demo_model, demo_profiles):
    from vinstrata.profile import driver_summary

    lines = driver_summary(demo_profiles, demo_model)
    drivers = demo_profiles.drivers
    riders = drivers[drivers["role"] == "indirect"]
    assert len(riders)
    text = " ".join(lines)
    assert "Passengers: " in text and "no effect of its own once" in text
    for line in lines:  # the passengers come after every direct driver of the style
        if "Passengers: " in line:
            head, tail = line.split("Passengers: ", 1)
            assert "moves with" not in head and "moves with" in tail


def test_partial_bootstrap_in_blocks_equals_the_whole_weighted_correlations():
    # The bootstrap draws its multinomial weights a bounded block at a time and reads the
    # weighted correlations from one matrix product; against numpy's weighted covariance
    # (np.cov with aweights) of every resample drawn whole from the same seed.
    from vinstrata.profile import partial, stats

    rng = np.random.default_rng(8)
    n, b = 120, 37
    x = rng.standard_normal((n, 3))
    grade = x[:, 0] + rng.standard_normal(n)
    old = stats.CHUNK_CELLS
    stats.CHUNK_CELLS = 5 * n  # blocks of five resamples
    try:
        eff = partial_effects(x, grade, b, 0.9, np.random.default_rng(4))
    finally:
        stats.CHUNK_CELLS = old
    z = np.column_stack([normal_scores(grade)] + [normal_scores(x[:, j]) for j in range(3)])
    weights = np.random.default_rng(4).multinomial(n, np.full(n, 1.0 / n), size=b)
    corr = np.stack([_cov_to_corr(np.cov(z, rowvar=False, aweights=w, bias=True))
                     for w in weights])
    np.testing.assert_allclose(partial._weighted_corr(z, weights.astype(float)), corr,
                               rtol=0, atol=1e-12)
    boots = partial_from_corr(corr)
    low, high = np.nanquantile(boots, [0.05, 0.95], axis=0)
    np.testing.assert_allclose(eff["partial_ci_low"], low, rtol=0, atol=1e-12)
    np.testing.assert_allclose(eff["partial_ci_high"], high, rtol=0, atol=1e-12)


def _cov_to_corr(cov: np.ndarray) -> np.ndarray:
    sd = np.sqrt(np.diag(cov))
    return cov / np.outer(sd, sd)

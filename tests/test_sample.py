"""The bounded fit: styles fitted on a stratified sample, every other lot placed against it.

Planted truth: the demo range (invented chemistry with known styles) and planted
point clouds; the agreement measure is scikit-learn's adjusted Rand index.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from sklearn.metrics import adjusted_rand_score

from vinstrata.place.placing import place_lots
from vinstrata.segment.fit import fit_styles
from vinstrata.segment.model import load_model, save_model
from vinstrata.segment.sample import allocate, stratified_sample


def test_allocation_keeps_small_cells_whole_and_shares_the_rest_by_size():
    take = allocate(np.array([10_000, 12, 5_000, 0, 300]), 2_000)
    assert take.sum() == 2_000
    assert take[1] == 12  # a cell below the floor gives all its lots
    assert take[3] == 0
    assert take[0] > take[2] > take[4] > 12  # the rest follows the cells' sizes
    assert (take <= [10_000, 12, 5_000, 0, 300]).all()


def test_a_rare_planted_group_keeps_its_lots_in_the_sample():
    rng = np.random.default_rng(3)
    common = rng.normal(0.0, 1.0, size=(100_000, 5))
    rare = rng.normal(9.0, 0.3, size=(60, 5))  # 0.06 % of the lots
    rows = stratified_sample(np.vstack([common, rare]), 10_000, seed=11)
    assert len(rows) == 10_000 and np.all(np.diff(rows) > 0)
    kept_rare = int((rows >= 100_000).sum())
    # a plain random sample would keep about 6 of them; the stratified one keeps most
    assert kept_rare >= 40
    again = stratified_sample(np.vstack([common, rare]), 10_000, seed=11)
    assert np.array_equal(rows, again)  # seeded: the same sample every time


def test_a_range_within_fit_sample_is_fitted_whole(demo_model):
    assert demo_model.in_fit.all()
    assert (demo_model.lots["cluster"] >= -1).all()


@pytest.fixture(scope="module")
def sampled(demo_table, demo_config, tmp_path_factory):
    config = dataclasses.replace(
        demo_config, segment=dataclasses.replace(demo_config.segment, fit_sample=3000))
    model = fit_styles(demo_table, config)
    folder = tmp_path_factory.mktemp("sampled") / "model"
    save_model(model, folder)
    return load_model(folder)


def test_sampled_fit_finds_the_styles_of_the_full_fit(sampled, demo_model):
    assert int(sampled.in_fit.sum()) == 3000
    a = sampled.lots["nearest_style"].to_numpy()
    b = demo_model.lots["nearest_style"].to_numpy()
    assert adjusted_rand_score(a, b) >= 0.95
    assert len(sampled.style_ids) == len(demo_model.style_ids)


def test_lots_outside_the_sample_are_assigned_exactly_as_placing_them_would(sampled,
                                                                            demo_table):
    placed = place_lots(demo_table, sampled)
    lots = placed.lots[placed.lots["status"] == "used"].reset_index(drop=True)
    others = ~sampled.in_fit
    assert others.sum() == len(sampled.lots) - 3000
    stored = sampled.lots.loc[others]
    assert (lots.loc[others, "style"].to_numpy() == stored["style"].to_numpy()).all()
    for column in ("membership", "outlier_score"):
        assert np.allclose(lots.loc[others, column].to_numpy(dtype=float),
                           np.round(stored[column].to_numpy(dtype=float), 6), atol=0, rtol=0)
    # and the fitted lots are clustered by HDBSCAN itself, the others are not
    assert (sampled.lots.loc[others, "cluster"] == -2).all()
    assert (sampled.lots.loc[~others, "cluster"] >= -1).all()

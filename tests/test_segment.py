"""Style segmentation against the outside world and against planted truth."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import adjusted_rand_score

from conftest import DEMO
from vinstrata.config import packaged_config
from vinstrata.demo import generate_demo, write_demo
from vinstrata.read.validate import load_lots
from vinstrata.segment import (
    fill_noise,
    fit_hdbscan,
    fit_styles,
    join_split_clusters,
    relative_validity,
    valley_ratio,
)
from vinstrata.segment.model import UNASSIGNED, load_model


@pytest.fixture(scope="module")
def wine_range(tmp_path_factory):
    """scikit-learn's wine recognition data (UCI, Forina et al.): 178 lots, 3 cultivars."""
    from sklearn.datasets import load_wine

    data = load_wine(as_frame=True)
    folder = tmp_path_factory.mktemp("wine")
    frame = data.frame.drop(columns="target")
    frame.insert(0, "lot", [f"W{i:03d}" for i in range(len(frame))])
    frame.to_csv(folder / "wine.csv", index=False)
    names = ", ".join(f'"{n}"' for n in data.feature_names)
    (folder / "wine.toml").write_text(
        f'[columns]\nlot_id = "lot"\ngrade = ""\nanalytes = [{names}]\n', encoding="utf-8")
    return folder, data.target.to_numpy()


def test_wine_recognition_cultivars_are_found_through_the_cli(wine_range, run_cli):
    # the outside check: default settings, no number of styles given
    folder, cultivar = wine_range
    result = run_cli("-q", "segment", folder / "wine.csv", "--config", folder / "wine.toml",
                     "--out", folder / "out")
    assert result.code == 0, result
    styles = pd.read_csv(folder / "out" / "lot_styles.csv")
    assert len(styles) == 178
    assert adjusted_rand_score(cultivar, styles["style"]) >= 0.75
    assert (styles["style"] == UNASSIGNED).mean() <= 0.10


def test_hdbscan_labels_agree_with_scikit_learn_hdbscan(demo_model):
    # cross-check of the hdbscan package use: scikit-learn's own HDBSCAN, same space and settings
    from sklearn.cluster import HDBSCAN

    params = demo_model.params
    reference = HDBSCAN(min_cluster_size=params.min_cluster_size, copy=True,
                        min_samples=params.min_samples).fit(demo_model.space)
    assert adjusted_rand_score(reference.labels_, demo_model.clusters) >= 0.99


def test_relative_validity_matches_hdbscan_property(demo_model):
    clusterer = fit_hdbscan(demo_model.space, demo_model.params.min_cluster_size,
                            demo_model.params.min_samples)
    mst = clusterer.minimum_spanning_tree_.to_numpy()
    assert relative_validity(mst, clusterer.labels_) == pytest.approx(
        clusterer.relative_validity_, rel=1e-9)


def _truth(lot_ids: pd.Series) -> np.ndarray:
    truth = pd.read_csv(DEMO / "truth_lots.csv").set_index("lot")["style"]
    return truth.reindex(lot_ids).to_numpy()


def test_demo_styles_match_the_planted_styles(demo_model):
    truth = _truth(demo_model.lots["lot_id"])
    assert adjusted_rand_score(truth, demo_model.lots["style"]) >= 0.9
    trusted = demo_model.styles[demo_model.styles["trusted"]]
    assert len(trusted) >= 5


def test_style_ids_run_largest_first_and_names_are_unique(demo_model):
    styles = demo_model.styles
    assert list(styles["style"]) == [f"S{i + 1}" for i in range(len(styles))]
    assert list(styles["n_lots"]) == sorted(styles["n_lots"], reverse=True)
    assert styles["style_name"].is_unique
    assert styles["style_name"].str.len().gt(0).all()


def test_small_style_is_untrusted_with_a_warning(demo_table, demo_config):
    from vinstrata.progress import Reporter

    rep = Reporter(quiet=True)
    model = fit_styles(demo_table, demo_config, rep)
    untrusted = model.styles[~model.styles["trusted"]]
    assert len(untrusted)  # the planted 40-lot sparkling base has almost no top-band lots
    for row in untrusted.itertuples():
        assert any(row.style in w and "untrusted" in w for w in rep.warnings)
        assert row.trust_note


def _segment_generated(tmp_path, **kwargs):
    demo = generate_demo(**kwargs)
    paths = write_demo(tmp_path, demo)
    config = packaged_config("demo")
    table = load_lots(str(paths["lots"]), config)
    return demo, fit_styles(table, config)


def test_one_planted_style_gives_one_style(tmp_path):
    # a range drawn from one planted style is reported as one style holding nearly every
    # lot: not split by force, and not one large style beside small untrusted ones
    _, model = _segment_generated(tmp_path, n_lots=2500, seed=5, styles=("structured_red",),
                                  bad_rows=0, n_new=0)
    assert list(model.styles["style"]) == ["S1"]
    assert bool(model.styles["trusted"].iloc[0])
    assert (model.lots["style"] == "S1").mean() >= 0.95
    assert (model.lots["style"] == UNASSIGNED).mean() < 0.05


def test_lots_of_random_chemistry_are_caught(tmp_path):
    demo, model = _segment_generated(tmp_path, n_lots=4000, seed=3, noise_share=0.05,
                                     bad_rows=0, n_new=0)
    truth = _truth_of(demo, model)
    planted = truth == "none"
    scores = model.lots["outlier_score"].to_numpy()
    top5 = scores >= np.quantile(scores, 0.95)
    caught = (model.lots["style"].to_numpy() == UNASSIGNED) | top5
    assert caught[planted].mean() >= 0.8
    assert adjusted_rand_score(truth[~planted], model.lots["style"][~planted]) >= 0.9


def _truth_of(demo, model) -> np.ndarray:
    truth = demo.truth_lots.set_index("lot")["style"]
    return truth.reindex(model.lots["lot_id"]).to_numpy()


def test_valley_ratio_separates_groups_and_not_a_split_cloud():
    rng = np.random.default_rng(1)
    cloud = rng.standard_normal((1500, 8))
    side = cloud[:, 0] > 0.3
    assert valley_ratio(cloud[side], cloud[~side]) > 0.7
    a = rng.standard_normal((400, 8))
    b = rng.standard_normal((300, 8)) + np.array([4.0] + [0.0] * 7)
    assert valley_ratio(a, b) < 0.5  # 4 SD apart: the mixture density dips to about 0.3


def test_join_split_clusters_keeps_real_groups_apart():
    rng = np.random.default_rng(2)
    points = np.concatenate([rng.standard_normal((300, 5)),
                             rng.standard_normal((300, 5)) + 5.0])
    labels = np.repeat([0, 1, 2, 3], 150)  # each real group split in two
    groups, ratios = join_split_clusters(points, labels, 0.5)
    assert groups[0] == groups[1] and groups[2] == groups[3] and groups[0] != groups[2]
    assert len(ratios) == 6


def test_fill_noise_gives_each_noise_lot_its_nearest_cluster():
    space = np.array([[0.0], [0.1], [5.0], [5.1], [0.2], [4.9]])
    labels = np.array([0, 0, 1, 1, -1, -1])
    assert list(fill_noise(space, labels)) == [0, 0, 1, 1, 0, 1]


def test_lot_styles_account_for_every_input_row(demo_model_dir, tmp_path, run_cli):
    result = run_cli("-q", "segment", DEMO / "lots.csv", "--config", DEMO.parent / "configs" /
                     "demo.toml", "--out", tmp_path / "seg")
    assert result.code == 0, result
    lot_styles = pd.read_csv(tmp_path / "seg" / "lot_styles.csv", keep_default_na=False)
    raw = pd.read_csv(DEMO / "lots.csv", keep_default_na=False)
    assert len(lot_styles) == len(raw)
    assert list(lot_styles.columns[:9]) == ["lot_id", "status", "style", "style_name",
                                            "membership", "outlier_score", "nearest_style",
                                            "map_x", "map_y"]
    rejected = lot_styles[lot_styles["status"] != "used"]
    assert len(rejected) == 12 and (rejected["style"] == "").all()
    assert set(lot_styles.loc[lot_styles["status"] == "used", "style"]) <= {
        *[f"S{i}" for i in range(1, 20)], UNASSIGNED}
    styles = pd.read_csv(tmp_path / "seg" / "styles.csv")
    assert list(styles.columns[:5]) == ["style", "style_name", "n_lots", "share", "trusted"]
    assert "alcohol" in styles.columns


def test_segment_is_deterministic(tmp_path, run_cli):
    # same input, config and seed give byte-identical outputs
    outs = []
    for name in ("a", "b"):
        result = run_cli("-q", "segment", DEMO / "lots.csv", "--config",
                         DEMO.parent / "configs" / "demo.toml", "--out", tmp_path / name)
        assert result.code == 0, result
        outs.append(tmp_path / name)
    for name in ("lot_styles.csv", "styles.csv", "sweep.csv", "model/model.json",
                 "model/space.npy", "model/map2d.npy", "model/lots.parquet"):
        assert (outs[0] / name).read_bytes() == (outs[1] / name).read_bytes(), name


def test_model_loads_as_plain_data_and_refuses_other_formats(demo_model_dir, tmp_path):
    import json
    import shutil

    model = load_model(demo_model_dir)
    assert model.scaled.shape[0] == len(model.lots)
    assert not list(demo_model_dir.glob("*.pkl")) and not list(demo_model_dir.glob("*.joblib"))
    copy = tmp_path / "model"
    shutil.copytree(demo_model_dir, copy)
    meta = json.loads((copy / "model.json").read_text())
    meta["format_version"] = 999
    (copy / "model.json").write_text(json.dumps(meta))
    from vinstrata.errors import InputError

    with pytest.raises(InputError, match="format version"):
        load_model(copy)


def test_model_params_are_typed_and_keep_their_json_keys(demo_model_dir):
    import json

    from vinstrata.segment import SegmentParams

    model = load_model(demo_model_dir)
    stored = json.loads((demo_model_dir / "model.json").read_text())["params"]
    assert isinstance(model.params, SegmentParams)
    assert sorted(stored) == ["cluster_styles", "components", "epochs", "map_min_dist",
                              "merge_valley", "min_cluster_size", "min_samples", "n_clusters",
                              "neighbours", "one_style", "seed", "size_choice", "space"]
    assert model.params.to_dict() == stored
    assert SegmentParams.from_dict(stored) == model.params


def test_assign_lots_unassigns_lots_that_fit_no_style():
    # one rule for training and new lots: above the cutoff a lot is unassigned, keeps its
    # nearest style and takes its soft membership to it
    from vinstrata.segment import Prediction, assign_lots
    from vinstrata.segment.typicality import StyleShape

    shapes = [StyleShape(np.zeros(2), np.eye(2), 500), StyleShape(np.full(2, 10.0), np.eye(2),
                                                                  500)]
    scaled = np.array([[0.1, 0.0], [10.0, 9.9], [0.0, 30.0], [9.5, 10.2]])
    soft = np.array([[0.9, 0.1], [0.2, 0.8], [0.7, 0.3], [0.4, 0.6]])
    prediction = Prediction(style_index=np.array([0, 1, 0, -1]),
                            strength=np.array([0.95, 0.85, 0.9, 0.0]),
                            soft=lambda rows: soft[rows])
    a = assign_lots(prediction, shapes, scaled, cutoff=3.5)
    assert list(a.style_index) == [0, 1, -1, -1]
    assert list(a.nearest_index) == [0, 1, 0, 1]
    assert list(a.fits_none) == [False, False, True, False]
    assert list(a.membership) == [0.95, 0.85, 0.7, 0.6]
    assert a.outlier_score[2] > 3.5 > a.outlier_score[0]

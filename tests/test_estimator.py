"""The scikit-learn style estimator over DataFrames: fit, predict, clone, save, and the same
answers as the command line on the same data."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.base import clone
from sklearn.exceptions import NotFittedError
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import FunctionTransformer
from sklearn.utils import estimator_checks as checks

from conftest import ROOT
from vinstrata import StyleSegmenter, lots_from_frame
from vinstrata.config import load_config
from vinstrata.demo import generate_demo, write_demo
from vinstrata.errors import InputError
from vinstrata.read.validate import load_lots

CONFIG = ROOT / "configs" / "demo.toml"

# the parts of sklearn.utils.estimator_checks that hold for an estimator over lot frames:
# parameters, cloning, tags and the unfitted state; the others fit generated numeric arrays
SKLEARN_CHECKS = (
    "check_estimator_cloneable", "check_estimator_repr", "check_no_attributes_set_in_init",
    "check_parameters_default_constructible", "check_get_params_invariance",
    "check_set_params", "check_do_not_raise_errors_in_init_or_set_params",
    "check_mixin_order", "check_estimator_tags_renamed", "check_valid_tag_types",
    "check_estimators_unfitted", "check_transformers_unfitted",
)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """600 demo lots and 40 new ones, on disk and as frames read the way a notebook reads them."""
    folder = tmp_path_factory.mktemp("est")
    paths = write_demo(folder / "data", generate_demo(n_lots=600, seed=3, n_new=40))
    return {**paths, "root": folder, "lots_frame": pd.read_csv(paths["lots"]),
            "new_frame": pd.read_csv(paths["new_lots"])}


@pytest.fixture(scope="module")
def fitted(demo):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return StyleSegmenter(config=CONFIG).fit(demo["lots_frame"])


@pytest.mark.parametrize("name", SKLEARN_CHECKS)
def test_sklearn_estimator_checks(name):
    getattr(checks, name)("StyleSegmenter", StyleSegmenter(config=str(CONFIG), seed=11))


def test_clone_get_and_set_params(fitted):
    params = fitted.get_params()
    assert params["config"] == CONFIG and params["min_cluster_size"] is None
    copy = clone(fitted)
    assert copy.get_params() == params and not hasattr(copy, "model_")
    copy.set_params(min_cluster_size=40, seed=5)
    config = copy.resolved_config()
    assert config.segment.min_cluster_size == 40 and config.seed == 5
    assert fitted.resolved_config().segment.min_cluster_size == "auto"
    with pytest.raises(InputError, match=r"segment\.min_cluster_size"):
        StyleSegmenter(config=CONFIG, min_cluster_size=-3).resolved_config()
    with pytest.raises(NotFittedError):
        copy.predict(pd.DataFrame())


def test_fit_on_a_frame_is_the_fit_on_its_file(demo, fitted, run_cli):
    out = demo["root"] / "cli"
    assert run_cli("-q", "segment", demo["lots"], "--config", CONFIG, "--out", out).code == 0
    lot_styles = pd.read_csv(out / "lot_styles.csv", keep_default_na=False)
    assert fitted.labels_.fillna("").tolist() == lot_styles["style"].tolist()
    assert fitted.status_.tolist() == lot_styles["status"].tolist()
    styles = pd.read_csv(out / "styles.csv")
    assert fitted.styles_["style_name"].tolist() == styles["style_name"].tolist()
    assert fitted.labels_.index.equals(demo["lots_frame"].index)


def test_predictions_are_those_of_the_place_command(demo, fitted, run_cli):
    model = fitted.save(demo["root"] / "saved" / "model")
    out = demo["root"] / "placed"
    assert run_cli("-q", "place", demo["new_lots"], "--model", model, "--out", out).code == 0
    placements = pd.read_csv(out / "placements.csv", keep_default_na=False, na_values=[""])
    new = demo["new_frame"]
    styles = fitted.predict(new)
    assert styles.index.equals(new.index)
    assert styles.fillna("").tolist() == placements["style"].fillna("").tolist()
    assert "unassigned" in set(styles)
    scores = fitted.score_samples(new)
    assert np.allclose(scores, placements["outlier_score"], atol=1e-6, equal_nan=True)
    # the whole placement, flags included, as the command writes it
    lots = fitted.place(new).lots
    assert lots["flags"].fillna("").tolist() == placements["flags"].fillna("").tolist()
    assert np.allclose(lots["membership"].astype(float), placements["membership"], atol=1e-6)


def test_soft_membership_and_clustering_space(demo, fitted):
    new = demo["new_frame"]
    proba = fitted.predict_proba(new)
    assert list(proba.columns) == fitted.model_.style_ids and proba.index.equals(new.index)
    assert np.allclose(proba.sum(axis=1), 1.0)
    placed = fitted.place(new, profiles=False)
    # an unassigned lot's membership is its soft membership to its nearest style
    loose = (placed.lots["style"] == "unassigned").to_numpy()
    nearest = placed.details.set_index("lot_id")["nearest_style"]
    ids = placed.lots.loc[loose, "lot_id"]
    soft = [proba.loc[i, nearest[lot]] for i, lot in zip(np.flatnonzero(loose), ids)]
    assert loose.any()
    assert np.allclose(soft, placed.lots.loc[loose, "membership"].astype(float), atol=1e-6)
    space = fitted.transform(new)
    assert space.shape == (len(new), fitted.model_.params.components)
    assert np.isfinite(space.to_numpy()).all()
    trained = clone(fitted).fit_transform(demo["lots_frame"])
    assert trained.shape[0] == len(demo["lots_frame"])
    assert np.allclose(trained.dropna().to_numpy(), fitted.model_.space, atol=1e-5)


def test_save_and_load_through_the_plain_data_model(demo, fitted, tmp_path):
    path = fitted.save(tmp_path / "model")
    assert (path / "model.json").exists() and not list(path.glob("*.pkl"))
    loaded = StyleSegmenter.load(path)
    new = demo["new_frame"]
    assert loaded.predict(new).fillna("").tolist() == fitted.predict(new).fillna("").tolist()
    assert loaded.styles_["style"].tolist() == fitted.styles_["style"].tolist()


def test_grades_from_y_and_a_pipeline(demo, fitted):
    lots = demo["lots_frame"]
    grades = lots["grade"]
    seg = StyleSegmenter(config=CONFIG, grade="")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        seg.fit(lots.drop(columns=["grade"]), grades)
    assert seg.model_.has_grade
    assert seg.labels_.fillna("").tolist() == fitted.labels_.fillna("").tolist()
    pipe = Pipeline([("keep", FunctionTransformer(lambda frame: frame.copy())),
                     ("styles", clone(fitted))])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe.fit(lots)
    assert pipe.predict(demo["new_frame"]).tolist() == fitted.predict(demo["new_frame"]).tolist()


def test_the_checks_that_fit_arrays_hold_on_lot_frames(demo, fitted):
    # what check_fit_idempotent, check_dont_overwrite_parameters, check_dict_unchanged and
    # check_methods_sample_order_invariance / _subset_invariance check, on lot frames
    before = dict(fitted.get_params())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        again = clone(fitted).fit(demo["lots_frame"])
    assert again.get_params() == before
    assert again.labels_.equals(fitted.labels_) and again.styles_.equals(fitted.styles_)
    state = {k: v for k, v in vars(fitted).items()}
    new = demo["new_frame"]
    styles = fitted.predict(new)
    assert set(vars(fitted)) == set(state)
    order = np.random.default_rng(0).permutation(len(new))
    shuffled = fitted.predict(new.iloc[order])
    assert shuffled.tolist() == styles.iloc[order].tolist()
    part = fitted.predict(new.iloc[:10])
    assert part.tolist() == styles.iloc[:10].tolist()


def test_lots_from_frame_is_the_front_door_of_a_file(demo):
    config = load_config(CONFIG)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from_file = load_lots(str(demo["lots"]), config)
        from_frame = lots_from_frame(demo["lots_frame"], config)
        text = lots_from_frame(pd.read_csv(demo["lots"], dtype=str, keep_default_na=False),
                               config)
    assert from_frame.ids["status"].tolist() == from_file.ids["status"].tolist()
    assert from_frame.ids["row"].tolist() == from_file.ids["row"].tolist()
    assert np.array_equal(from_frame.values.to_numpy(), from_file.values.to_numpy(),
                          equal_nan=True)
    assert from_frame.flags.equals(from_file.flags)
    assert from_frame.source.format == "dataframe" and len(from_frame.source.sha256) == 64
    again = lots_from_frame(demo["lots_frame"].copy(), config)
    assert again.source.sha256 == from_frame.source.sha256  # the same frame, the same hash
    assert np.array_equal(text.values.to_numpy(), from_file.values.to_numpy(), equal_nan=True)


def test_bad_frames_are_refused_in_one_line(fitted):
    with pytest.raises(InputError, match="expected a pandas DataFrame"):
        StyleSegmenter(config=CONFIG).fit(np.zeros((20, 3)))
    with pytest.raises(InputError, match="analytes do not match the model: missing"):
        fitted.predict(pd.DataFrame({"lot": ["A"], "alcohol": [12.0]}))
    with pytest.raises(InputError, match="y: 3 grades for"):
        StyleSegmenter(config=CONFIG).fit(pd.DataFrame({"lot": ["A", "B"]}), [1, 2, 3])

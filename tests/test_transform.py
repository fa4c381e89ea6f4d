"""The per-analyte transform, robust scaling, imputation and derived analytes."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from vinstrata.config import Derived, parse_config
from vinstrata.read.derive import molecular_so2
from vinstrata.read.ingest import RawTable, Source
from vinstrata.read.validate import validate
from vinstrata.segment.transform import fit_scaler, impute


def test_right_skewed_positive_analytes_are_logged_symmetric_ones_not():
    rng = np.random.default_rng(0)
    values = pd.DataFrame({"sugar": rng.lognormal(1.0, 0.9, 2000),
                           "ph": rng.normal(3.4, 0.1, 2000)})
    scaler, notes = fit_scaler(values, skew_threshold=1.0)
    methods = {t.name: t.method for t in scaler.transforms}
    assert methods == {"sugar": "log", "ph": "none"} and not notes
    sugar = next(t for t in scaler.transforms if t.name == "sugar")
    assert sugar.skew_raw == pytest.approx(stats.skew(values["sugar"], bias=False))
    assert abs(sugar.skew_log) < 0.2


def test_zeros_get_an_offset_and_overrides_win():
    positive = np.random.default_rng(1).lognormal(3, 1, 950)
    values = pd.DataFrame({"so2": np.r_[np.zeros(50), positive]})
    scaler, _ = fit_scaler(values)
    t = scaler.transforms[0]
    assert t.method == "log" and t.offset == pytest.approx(positive.min() / 2)
    forced, _ = fit_scaler(values, overrides={"so2": "none"})
    assert forced.transforms[0].method == "none"


def test_robust_scale_is_median_and_iqr_with_guards():
    values = pd.DataFrame({"a": np.arange(1.0, 101.0), "b": [5.0] * 90 + list(range(10)),
                           "c": [7.0] * 100})
    scaler, notes = fit_scaler(values, skew_threshold=100.0)
    by = {t.name: t for t in scaler.transforms}
    assert by["a"].center == 50.5 and by["a"].scale == pytest.approx(49.5) and \
        by["a"].scale_rule == "iqr"
    assert by["b"].scale_rule in ("mad", "sd") and by["b"].scale > 0  # IQR of zero guarded
    assert "c" in scaler.dropped and any("constant" in n for n in notes)
    scaled = scaler.transform(values)
    assert np.median(scaled[:, 0]) == pytest.approx(0.0)


def test_the_fitted_transform_is_reused_unchanged_and_round_trips():
    rng = np.random.default_rng(2)
    train = pd.DataFrame({"x": rng.lognormal(0, 1, 500), "y": rng.normal(0, 1, 500)})
    scaler, _ = fit_scaler(train)
    again = type(scaler).from_dict(scaler.to_dict())
    new = pd.DataFrame({"x": [0.5, 2.0], "y": [0.1, -0.3]})
    assert np.array_equal(scaler.transform(new), again.transform(new))


def test_imputation_borrows_from_similar_lots():
    reference = np.array([[0.0, 0.0], [0.1, 0.1], [5.0, 5.0], [5.1, 5.1], [4.9, 4.9]])
    filled = impute(np.array([[5.0, np.nan], [np.nan, 0.05]]), reference, k=2)
    assert filled[0, 1] == pytest.approx(5.0, abs=0.15)
    assert filled[1, 0] == pytest.approx(0.05, abs=0.1)


def _raw(rows: list[dict]) -> RawTable:
    frame = pd.DataFrame(rows).astype(str)
    return RawTable(cells=frame, rows=list(range(2, len(frame) + 2)),
                    source=Source("t.csv", "t.csv", "", "text"))


def test_derived_analytes_are_added_when_asked():
    config = parse_config({
        "columns": {"lot_id": "lot", "grade": "", "analytes": [
            "free_so2", "total_so2", "ph", "fixed_acidity", "volatile_acidity"]},
        "derived": {"add": ["bound_so2", "molecular_so2"]},
    })
    table = validate(_raw([{"lot": "A", "free_so2": "30", "total_so2": "100", "ph": "3.4",
                            "fixed_acidity": "6.0", "volatile_acidity": "0.6"}]), config)
    values = table.values.iloc[0]
    assert values["bound_so2"] == pytest.approx(70.0)
    # Henderson-Hasselbalch with pKa 1.81 (computed from the formula)
    assert values["molecular_so2"] == pytest.approx(30 / (1 + 10 ** (3.4 - 1.81)))
    assert values["molecular_so2"] == pytest.approx(molecular_so2(30.0, 3.4, 1.81))
    assert {"bound_so2", "molecular_so2"} <= set(table.analytes)
    assert Derived().add == ()


def test_a_derived_analyte_without_its_parts_is_refused():
    from vinstrata.errors import InputError

    config = parse_config({"columns": {"lot_id": "lot", "grade": "", "analytes": ["ph"]},
                           "derived": {"add": ["molecular_so2"]}})
    with pytest.raises(InputError, match="free SO2"):
        validate(_raw([{"lot": "A", "ph": "3.4"}]), config)


def test_analytes_left_out_are_found_as_the_numeric_columns():
    config = parse_config({"columns": {"lot_id": "lot", "grade": "score",
                                       "passthrough": ["vintage"]}})
    table = validate(_raw([{"lot": "A", "score": "15", "vintage": "2021", "note": "nice",
                            "alcohol": "12.5", "ph": "3.3"},
                           {"lot": "B", "score": "16", "vintage": "2022", "note": "fine",
                            "alcohol": "13.0", "ph": "3.5"}]), config)
    assert table.analytes == ("alcohol", "ph")


def test_a_table_without_lot_ids_can_name_lots_by_row():
    config = parse_config({"columns": {"lot_id": "@row", "grade": "", "analytes": ["ph"]}})
    table = validate(_raw([{"ph": "3.3"}, {"ph": "3.4"}]), config)
    assert list(table.ids["lot_id"]) == ["row2", "row3"]
    assert (table.ids["status"] == "used").all()


def test_analytes_are_found_in_a_decimal_comma_table():
    config = parse_config({"columns": {"lot_id": "lot", "grade": ""}})
    table = validate(_raw([{"lot": "A", "alcohol": "12,5", "ph": "3,31"},
                           {"lot": "B", "alcohol": "13,0", "ph": "3,45"}]), config)
    assert table.analytes == ("alcohol", "ph")
    assert table.values["ph"].tolist() == [3.31, 3.45]


def test_imputing_against_complete_reference_lots_equals_scikit_learns_knn_imputer():
    # reference: scikit-learn's KNNImputer (nan_euclidean distances, uniform weights)
    from sklearn.impute import KNNImputer

    rng = np.random.default_rng(12)
    reference = rng.normal(size=(3_000, 9))
    lots = rng.normal(size=(2_000, 9))
    lots[rng.random(lots.shape) < 0.03] = np.nan
    lots[7] = np.nan  # a lot with nothing measured gets the reference's means
    expected = KNNImputer(n_neighbors=5, keep_empty_features=True).fit(reference).transform(lots)
    assert np.allclose(impute(lots, reference, 5), expected, rtol=0, atol=1e-12)

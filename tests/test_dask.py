"""Placing on a Dask cluster: the same placements as one process, the extra optional."""

from __future__ import annotations

import json
import sys

import pandas as pd
import pytest

from conftest import DEMO
from vinstrata import pipeline
from vinstrata.folders import held_back


def _faulty_lots(tmp_path):
    frame = pd.read_csv(DEMO / "new_lots.csv", dtype=str, keep_default_na=False)
    frame.loc[12, "lot"] = frame.loc[2, "lot"]  # a duplicate across batches of 7
    frame.loc[30, "ph"] = "7.9"
    path = tmp_path / "new.csv"
    frame.to_csv(path, index=False)
    return path


def _dataset(path, model, profiles, out, runner=None):
    config = model.config
    batches = pipeline.new_lot_batches(path, model, config, 7)
    scan = pipeline.scan_new(batches, model, config)
    with held_back():
        written, _ = pipeline.place_stream(batches, scan, model, profiles, config, out,
                                           runner=runner, dataset=True)
    return written


def test_two_workers_place_as_one_process(demo_model_dir, demo_profiles, tmp_path):
    pytest.importorskip("distributed")
    from vinstrata.place.cluster import dask_runner
    from vinstrata.segment.model import load_model

    model = load_model(demo_model_dir)  # a saved model: its fingerprint keys the workers
    path = _faulty_lots(tmp_path)
    _dataset(path, model, demo_profiles, tmp_path / "local")
    with dask_runner(model, demo_profiles, model.config, workers=2) as runner:
        _dataset(path, model, demo_profiles, tmp_path / "dask", runner)
    for name in pipeline.PLACE_DATASETS:
        local = sorted((tmp_path / "local" / name).iterdir())
        remote = sorted((tmp_path / "dask" / name).iterdir())
        assert [p.name for p in local] == [p.name for p in remote]
        assert [p.read_bytes() for p in local] == [p.read_bytes() for p in remote]
    # one part per batch of 7 rows: 50 rows make 8 parts, every input row in them
    lots = pipeline.read_place(tmp_path / "dask").lots
    assert len(list((tmp_path / "dask" / "placements").iterdir())) == 8
    assert len(lots) == 50
    assert lots.loc[12, "status"] == "duplicate_lot_id"
    assert lots.loc[30, "status"] == "out_of_range:ph"
    # row for row what the single-process CSV says
    with held_back():
        table = pipeline.load_new(path, model, model.config)
        pipeline.write_place(pipeline.place(table, model, demo_profiles), tmp_path / "csv")
    csv = pipeline.read_place(tmp_path / "csv").lots
    for column in ("lot_id", "status", "style", "flags", "nearest_lots", "atypical"):
        assert lots[column].tolist() == csv[column].tolist(), column
    assert lots["outlier_score"].round(6).fillna(-1).tolist() == \
        csv["outlier_score"].round(6).fillna(-1).tolist()


def test_dask_cli_writes_a_dataset_a_later_run_replaces(demo_model_dir, tmp_path, run_cli):
    pytest.importorskip("distributed")
    out = tmp_path / "out"
    result = run_cli("-q", "place", DEMO / "new_lots.csv", "--model", demo_model_dir,
                     "--out", out, "--engine", "dask")
    assert result.code == 0, result
    manifest = json.loads((out / "place_manifest.json").read_text(encoding="utf-8"))
    entry = manifest["files"]["placements/"]
    assert sorted(entry["files"]) == ["part-00000.parquet"]  # 50 lots, one batch
    assert (out / "placement_summary.csv").exists()
    summary = pd.read_csv(out / "placement_summary.csv")
    assert summary["lots"].sum() == 50  # every demo new lot, rejected rows counted apart
    # a later single-process run in the same folder removes the dataset it lists
    again = run_cli("-q", "place", DEMO / "new_lots.csv", "--model", demo_model_dir,
                    "--out", out)
    assert again.code == 0, again
    assert not (out / "placements").exists()
    assert (out / "placements.csv").exists()


def test_dask_engine_without_the_extra_says_what_to_install(demo_model_dir, tmp_path, run_cli,
                                                            monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed fails
    result = run_cli("place", DEMO / "new_lots.csv", "--model", demo_model_dir,
                     "--out", tmp_path / "out", "--engine", "dask")
    assert result.code == 2
    lines = result.err.strip().splitlines()
    assert len(lines) == 1 and "vinstrata[dask]" in lines[0], result
    assert not (tmp_path / "out").exists()

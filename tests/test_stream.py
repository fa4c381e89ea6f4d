"""Placing a new-lot file in batches gives the whole file's results, byte for byte."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pandas as pd
import pytest

from conftest import DEMO
from vinstrata import pipeline
from vinstrata.errors import InputError
from vinstrata.folders import held_back
from vinstrata.place.match import check_units
from vinstrata.place.placing import place_lots
from vinstrata.place.stream import file_warnings, scan_file
from vinstrata.progress import Reporter


def _with(config, batch_lots=None, duplicate_ids=None):
    if batch_lots is not None:
        config = dataclasses.replace(
            config, place=dataclasses.replace(config.place, batch_lots=batch_lots))
    if duplicate_ids is not None:
        config = dataclasses.replace(
            config, ingest=dataclasses.replace(config.ingest, duplicate_ids=duplicate_ids))
    return config


def _whole(path, model, profiles, config, out: Path, formats="csv") -> dict[str, bytes]:
    """Today's path: the file read whole, placed whole, written whole."""
    table = pipeline.load_new(path, model, config)
    with held_back():
        written = pipeline.write_place(place_lots(table, model, profiles, config), out, config,
                                       formats)
    return {p.name: p.read_bytes() for p in written}


def _streamed(path, model, profiles, config, out: Path, batch, formats="csv"):
    batches = pipeline.new_lot_batches(path, model, config, batch)
    scan = pipeline.scan_new(batches, model, config)
    with held_back():
        written, tally = pipeline.place_stream(batches, scan, model, profiles, config, out,
                                               formats)
    return {p.name: p.read_bytes() for p in written}, tally


@pytest.mark.parametrize("batch", [7, 1000])
def test_batches_give_the_whole_files_bytes(demo_model, demo_profiles, tmp_path, batch):
    config = demo_model.config
    whole = _whole(DEMO / "new_lots.csv", demo_model, demo_profiles, config, tmp_path / "w",
                   "both")
    streamed, tally = _streamed(DEMO / "new_lots.csv", demo_model, demo_profiles, config,
                                tmp_path / "s", batch, "both")
    assert sorted(streamed) == sorted(whole)
    for name, data in whole.items():
        assert streamed[name] == data, name
    assert tally.used == 50 and tally.rejected == 0  # demo_data/new_lots.csv: 50 lots


def _lots_with_faults(tmp_path: Path) -> Path:
    frame = pd.read_csv(DEMO / "new_lots.csv", dtype=str, keep_default_na=False)
    frame.loc[12, "lot"] = frame.loc[2, "lot"]  # a duplicate across batches of 7
    frame.loc[13, "lot"] = frame.loc[2, "lot"]  # and a third time, in the same batch
    frame.loc[20, "lot"] = frame.loc[19, "lot"]  # a duplicate inside one batch
    frame.loc[30, "ph"] = "7.9"  # out of range
    frame.loc[31, "lot"] = ""
    path = tmp_path / "faults.csv"
    frame.to_csv(path, index=False)
    return path


@pytest.mark.parametrize("policy", ["keep_first", "reject_all"])
def test_duplicate_ids_across_batches_read_as_in_one_file(demo_model, demo_profiles, tmp_path,
                                                          policy):
    path = _lots_with_faults(tmp_path)
    config = _with(demo_model.config, duplicate_ids=policy)
    whole = _whole(path, demo_model, demo_profiles, config, tmp_path / "w")
    streamed, _ = _streamed(path, demo_model, demo_profiles, config, tmp_path / "s", 7)
    assert streamed == whole
    lots = pd.read_csv(tmp_path / "s" / "placements.csv", keep_default_na=False)
    dup = lots.index[lots["status"] == "duplicate_lot_id"].tolist()
    assert dup == ([2, 12, 13, 19, 20] if policy == "reject_all" else [12, 13, 20])


def test_rejection_warnings_are_the_whole_files(demo_model, tmp_path):
    path = _lots_with_faults(tmp_path)
    config = demo_model.config
    table = pipeline.load_new(path, demo_model, config)
    rep = Reporter.command_line(quiet=True)
    pipeline.warn_rejections(table, rep, where="placements.csv")
    batches = pipeline.new_lot_batches(path, demo_model, config, 7)
    scan = scan_file(batches(), demo_model, config.ingest.duplicate_ids)
    assert file_warnings(scan, batches, "placements.csv") == list(rep.warnings)
    assert "3 duplicate_lot_id" in rep.warnings[-1]  # rows 12, 13 and 20 of the file


def test_unit_hint_and_refusal_are_the_whole_files(demo_model, tmp_path):
    # total SO2 written in g/L, the config saying mg/L: every value 1000 times too small
    frame = pd.read_csv(DEMO / "new_lots.csv", dtype=str)
    frame["total_so2"] = (frame["total_so2"].astype(float) / 1000).map(lambda v: f"{v:.3f}")
    frame["free_so2"] = "0.001"
    path = tmp_path / "units.csv"
    frame.to_csv(path, index=False)
    config = demo_model.config
    table = pipeline.load_new(path, demo_model, config)
    with pytest.raises(InputError) as whole:
        check_units(table, demo_model)
    batches = pipeline.new_lot_batches(path, demo_model, config, 7)
    scan = pipeline.scan_new(batches, demo_model, config)
    with pytest.raises(InputError) as streamed, held_back():
        pipeline.place_stream(batches, scan, demo_model, None, config, tmp_path / "out")
    assert str(streamed.value) == str(whole.value)
    assert "another unit" in str(whole.value)
    assert not (tmp_path / "out" / "placements.csv").exists()  # nothing left behind
    rep = Reporter.command_line(quiet=True)
    pipeline.warn_rejections(table, rep)
    assert file_warnings(scan, batches, "row_status.csv") == list(rep.warnings)


def test_place_cli_reads_batch_lots_from_the_config(demo_model_dir, tmp_path, run_cli):
    text = Path(DEMO.parent / "configs" / "demo.toml").read_text(encoding="utf-8")
    config = tmp_path / "batch.toml"
    config.write_text(text.replace("[place]\n", "[place]\nbatch_lots = 9\n")
                      if "[place]" in text else text + "\n[place]\nbatch_lots = 9\n",
                      encoding="utf-8")
    small = run_cli("-q", "place", DEMO / "new_lots.csv", "--model", demo_model_dir,
                    "--config", config, "--out", tmp_path / "a")
    whole = run_cli("-q", "place", DEMO / "new_lots.csv", "--model", demo_model_dir,
                    "--out", tmp_path / "b")
    assert small.code == whole.code == 0, (small, whole)
    assert small.out.replace(str(tmp_path / "a"), "") == whole.out.replace(str(tmp_path / "b"),
                                                                           "")
    for name in pipeline.PLACE_FILES:
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()

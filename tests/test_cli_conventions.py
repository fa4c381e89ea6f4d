"""The command line's conventions: flags after the command, click paths, environment
variables, shell completion and Parquet per-lot tables."""

from __future__ import annotations

import json
import os
import subprocess
import sys

import pandas as pd
import pytest

from conftest import ROOT
from vinstrata import pipeline
from vinstrata.demo import generate_demo, write_demo

CONFIG = ROOT / "configs" / "demo.toml"
ENV = {**os.environ, "PYTHONPATH": os.pathsep.join([str(ROOT / "src"),
                                                     os.environ.get("PYTHONPATH", "")])}


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    """A small demo range: 400 lots, 12 new lots."""
    return write_demo(tmp_path_factory.mktemp("small"), generate_demo(n_lots=400, seed=5,
                                                                       n_new=12))


@pytest.fixture(scope="module")
def segmented(small, tmp_path_factory):
    """The small range segmented twice with ``--format both``, ``-q`` after the command."""
    from vinstrata import cli

    root = tmp_path_factory.mktemp("seg")
    for name in ("a", "b"):
        code = cli.main(["segment", str(small["lots"]), "--config", str(CONFIG), "--out",
                         str(root / name), "--format", "both", "-q"])
        assert code == 0
    return root


def test_quiet_and_debug_after_the_command(small, tmp_path, run_cli):
    loud = run_cli("check", small["lots"], "--config", CONFIG, "--out", tmp_path / "a")
    assert loud.code == 0 and "check: read and validate ... done" in loud.err
    for flags in (["-q"], ["--quiet"], ["--debug", "-q"]):
        quiet = run_cli("check", small["lots"], "--config", CONFIG, "--out", tmp_path / "b",
                        *flags)
        assert quiet.code == 0, quiet
        assert quiet.err == "", quiet
    before = run_cli("-q", "check", small["lots"], "--config", CONFIG, "--out", tmp_path / "c")
    assert before.code == 0 and before.err == ""


def test_debug_after_the_command_shows_the_traceback(small, tmp_path, run_cli, monkeypatch):
    def broken(*args, **kwargs):
        raise RuntimeError("planted fault")

    monkeypatch.setattr(pipeline, "load", broken)
    short = run_cli("check", small["lots"], "--config", CONFIG, "--out", tmp_path / "a")
    assert short.code == 1 and "internal error: RuntimeError: planted fault" in short.err
    assert "Traceback" not in short.err
    for args in (["check", small["lots"], "--debug"], ["--debug", "check", small["lots"]]):
        shown = run_cli(*args, "--config", CONFIG, "--out", tmp_path / "b")
        assert shown.code == 1 and "Traceback" in shown.err, shown


def test_paths_are_checked_by_click(small, tmp_path, run_cli):
    missing = run_cli("segment", tmp_path / "none.csv", "--out", tmp_path / "o")
    assert missing.code == 2
    assert "Invalid value for 'LOTS'" in missing.err and "does not exist" in missing.err
    # a folder is a dataset of lot files: one holding none is refused in one line
    (tmp_path / "empty").mkdir()
    folder = run_cli("check", tmp_path / "empty", "--out", tmp_path / "o")
    assert folder.code == 2 and folder.err.startswith("error: ") and \
        "is a folder without lot files" in folder.err
    # an unknown option stays click's usage error
    unknown = run_cli("segment", small["lots"], "--out", tmp_path / "o", "--nope")
    assert unknown.code == 2 and "No such option '--nope'" in unknown.err


def test_options_from_the_environment(small, tmp_path, run_cli, monkeypatch):
    # VINSTRATA_CONFIG for every command; VINSTRATA_<COMMAND>_<OPTION> for any option
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("VINSTRATA_CONFIG", str(CONFIG))
    monkeypatch.setenv("VINSTRATA_CHECK_OUT", str(tmp_path / "from_env"))
    result = run_cli("check", small["lots"])
    assert result.code == 0, result
    assert (tmp_path / "from_env" / "row_status.csv").exists()
    # the demo config names the analytes, so none were looked for
    assert "analytes found" not in result.err
    monkeypatch.setenv("VINSTRATA_CHECK_CONFIG", str(tmp_path / "none.toml"))
    own = run_cli("check", small["lots"])
    assert own.code == 2 and "none.toml" in own.err  # the command's own variable wins
    monkeypatch.delenv("VINSTRATA_CHECK_CONFIG")
    monkeypatch.setenv("VINSTRATA_QUIET", "1")
    assert run_cli("check", small["lots"]).err == ""
    monkeypatch.delenv("VINSTRATA_QUIET")
    monkeypatch.setenv("VINSTRATA_CHECK_QUIET", "1")
    assert run_cli("check", small["lots"]).err == ""


def test_shell_completion(small):
    script = subprocess.run([sys.executable, "-m", "vinstrata"], capture_output=True, text=True,
                            env={**ENV, "_VINSTRATA_COMPLETE": "bash_source"}, timeout=120)
    assert script.returncode == 0 and "_vinstrata_completion" in script.stdout
    words = subprocess.run([sys.executable, "-m", "vinstrata"], capture_output=True, text=True,
                           env={**ENV, "_VINSTRATA_COMPLETE": "bash_complete",
                                "COMP_WORDS": "vinstrata se", "COMP_CWORD": "1"}, timeout=120)
    assert "plain,segment" in words.stdout.split()
    # a lot file is completed as a file name by the shell
    files = subprocess.run([sys.executable, "-m", "vinstrata"], capture_output=True, text=True,
                           env={**ENV, "_VINSTRATA_COMPLETE": "bash_complete",
                                "COMP_WORDS": "vinstrata segment lo", "COMP_CWORD": "2"},
                           timeout=120)
    assert files.stdout.split() == ["file,lo"]


def test_parquet_per_lot_tables(small, segmented, tmp_path, run_cli):
    out = segmented / "a"
    csv = pd.read_csv(out / "lot_styles.csv", keep_default_na=False, na_values=[""])
    parquet = pd.read_parquet(out / "lot_styles.parquet")
    assert list(parquet.columns) == list(csv.columns) and len(parquet) == len(csv)
    assert parquet["style"].fillna("").tolist() == csv["style"].fillna("").tolist()
    assert parquet["membership"].round(6).equals(csv["membership"].round(6))
    manifest = json.loads((out / "segment_manifest.json").read_text())
    assert {"lot_styles.csv", "lot_styles.parquet"} <= set(manifest["files"])
    # the same input gives the same Parquet bytes
    again = segmented / "b" / "lot_styles.parquet"
    assert again.read_bytes() == (out / "lot_styles.parquet").read_bytes()
    placed = tmp_path / "placed"
    result = run_cli("-q", "place", small["new_lots"], "--model", out / "model", "--out",
                     placed, "--format", "parquet")
    assert result.code == 0, result
    names = {p.name for p in placed.iterdir()}
    assert {"placements.parquet", "placement_details.parquet", "placement_analytes.parquet",
            "placement_neighbours.parquet"} <= names
    assert not any(name.startswith("placement") and name.endswith(".csv") for name in names)
    listed = set(json.loads((placed / "place_manifest.json").read_text())["files"])
    assert {"placements.parquet", "placement_details.parquet"} <= listed
    # the briefing reads Parquet placements back
    back = pipeline.read_place(placed)
    assert len(back.lots) == len(pd.read_csv(small["new_lots"]))
    assert back.lots["style"].tolist()[:3] == pd.read_parquet(
        placed / "placements.parquet")["style"].fillna("").tolist()[:3]

"""The one-command run on the shipped demo range."""

from __future__ import annotations

import re

import pandas as pd
from pypdf import PdfReader

from conftest import DEMO
from vinstrata.report import page_count

CONTRACT_FILES = (
    "lot_styles.csv", "styles.csv", "drivers.csv", "thresholds.csv", "contrasts.csv",
    "placements.csv", "quality_summary.csv", "row_status.csv", "briefing.pdf",
    "model/model.json",
)


def test_run_without_arguments_in_an_empty_folder(tmp_path, monkeypatch, run_cli):
    monkeypatch.chdir(tmp_path)
    result = run_cli("run")
    assert result.code == 0, result
    out = tmp_path / "vinstrata-run-1"
    assert str(out) in result.out.strip().splitlines()[-1]
    for name in CONTRACT_FILES:
        assert (out / name).exists(), name
    # progress on stderr, one line per stage, and the warnings repeated at the end
    assert "segment: transform, UMAP, HDBSCAN ..." in result.err
    assert re.search(r"^took .*check [\d.]+ s, segment [\d.]+ s", result.err, re.M)
    assert "warning(s):" in result.err and "untrusted" in result.err
    # the run used the shipped demo range, byte for byte
    assert (out / "input" / "lots.csv").read_bytes() == (DEMO / "lots.csv").read_bytes()
    lots = pd.read_csv(DEMO / "lots.csv")
    assert len(pd.read_csv(out / "lot_styles.csv")) == len(lots)
    assert len(pd.read_csv(out / "row_status.csv")) == len(lots)
    assert len(pd.read_csv(out / "placements.csv")) == len(pd.read_csv(DEMO / "new_lots.csv"))
    styles = pd.read_csv(out / "styles.csv")
    assert len(PdfReader(str(out / "briefing.pdf")).pages) == page_count(len(styles), True)
    # a second run goes to a fresh folder
    quiet = run_cli("-q", "run")
    assert quiet.code == 0 and (tmp_path / "vinstrata-run-2").exists()
    assert "..." not in quiet.err and "took" not in quiet.err


def test_run_refuses_new_lots_without_lots(tmp_path, run_cli):
    result = run_cli("run", "--new", DEMO / "new_lots.csv", "--out", tmp_path / "x")
    assert result.code == 2 and result.err.startswith("error:")

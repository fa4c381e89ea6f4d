"""The demo range: reproducible, invented, and planted as documented."""

from __future__ import annotations

import pandas as pd

from conftest import DEMO
from vinstrata.config import packaged_config
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
    signs = drivers[drivers["role"] == "direct"].groupby("analyte")["sign"].agg(set)
    assert any(s == {-1, 1} for s in signs)  # a driver that reverses between styles
    assert (drivers.groupby("analyte")["role"].agg(set) == {"no_effect"}).any()
    new = pd.read_csv(DEMO / "new_lots.csv")
    assert 40 <= len(new) <= 60 and "grade" not in new.columns
    assert len(RECIPES) >= 5


def test_demo_producer_is_named_as_invented_where_a_reader_sees_it():
    # the demo's briefing and config name the producer, and say it is invented
    assert PRODUCER == "Quillory Vale Wine Co."
    producer = packaged_config("demo").report.producer
    assert PRODUCER in producer and "invented" in producer


def test_typical_ranges_of_the_trade(demo_table):
    # finished-wine ranges: alcohol 8.5-15 % vol, residual sugar 0.8-180 g/L (Oxford Companion
    # to Wine, "composition" entry) and pH 3.1-3.6 typical (Jackson, Wine Science), both
    # quoted without edition or page, so treated as from memory: the demo only has to stay
    # inside a generous margin around them
    values = demo_table.values[demo_table.used]
    assert values["alcohol"].between(8.5, 16.5).mean() > 0.99
    assert values["residual_sugar"].between(0.5, 250).mean() > 0.99
    assert values["ph"].between(2.8, 4.0).mean() > 0.99


def test_chemistry_moves_together_inside_a_style_and_passengers_are_named():
    # the links of demo.LINKS, measured back on the shipped range (Spearman within a style);
    # target ranges around the published panel correlations (Cortez et al. 2009: fixed
    # acidity vs pH about -0.68, free vs total SO2 about +0.67) with room for the rounding
    lots = pd.read_csv(DEMO / "lots.csv", keep_default_na=False)
    truth = pd.read_csv(DEMO / "truth_lots.csv").set_index("lot")["style"]
    lots = lots[lots["lot"].isin(truth.index)].drop_duplicates("lot")
    lots["style"] = lots["lot"].map(truth)
    chem = lots[list(ANALYTES)].apply(pd.to_numeric, errors="coerce")
    chem["style"] = lots["style"]

    def rho(style: str, a: str, b: str) -> float:
        part = chem[chem["style"] == style]
        return part[a].corr(part[b], method="spearman")

    assert -0.8 < rho("crisp_white", "titratable_acidity", "ph") < -0.5
    assert 0.3 < rho("crisp_white", "potassium", "ph") < 0.6
    assert 0.55 < rho("rose", "free_so2", "total_so2") < 0.85
    assert 0.55 < rho("structured_red", "total_phenolics", "colour_intensity") < 0.85
    assert abs(rho("crisp_white", "total_phenolics", "colour_intensity")) < 0.15
    assert -0.85 < rho("light_red", "malic_acid", "lactic_acid") < -0.55
    assert rho("structured_red", "alcohol", "density") < -0.3
    drivers = pd.read_csv(DEMO / "truth_drivers.csv", keep_default_na=False)
    assert list(drivers.columns[-1:]) == ["rides_on"]
    assert set(drivers["role"]) == {"direct", "indirect", "no_effect"}
    rides = drivers[drivers["role"] == "indirect"]
    planted = set(zip(drivers.loc[drivers["role"] == "direct", "style"],
                      drivers.loc[drivers["role"] == "direct", "analyte"]))
    assert all((s, r) in planted for s, r in zip(rides["style"], rides["rides_on"]))
    assert (drivers.loc[drivers["role"] != "indirect", "rides_on"] == "").all()

"""Styles that keep their ids and names from one vintage to the next (``--previous``), and the
briefing page "since the previous model"; planted truth from two demo seeds."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from pypdf import PdfReader

from conftest import ROOT
from vinstrata.config import load_config
from vinstrata.demo import RECIPES, generate_demo, write_demo
from vinstrata.read.validate import load_lots
from vinstrata.report import page_count
from vinstrata.segment.fit import fit_styles
from vinstrata.segment.model import load_model
from vinstrata.segment.previous import (
    MATCH_LIMIT,
    match_cost,
    match_previous,
    median_shift,
    previous_table,
)

CONFIG = ROOT / "configs" / "demo.toml"


@pytest.fixture(scope="module")
def vintages(tmp_path_factory):
    """Two draws of the demo range (seeds 7 and 8): this vintage's lots and next one's."""
    root = tmp_path_factory.mktemp("vintages")
    return {seed: write_demo(root / f"seed{seed}", generate_demo(n_lots=1500, seed=seed,
                                                                   n_new=10))
            for seed in (7, 8)} | {"root": root}


def _planted(lot_styles_csv, truth_csv) -> dict[str, str]:
    """Each style id -> the planted style most of its lots were drawn from."""
    lots = pd.read_csv(lot_styles_csv, keep_default_na=False)
    truth = dict(pd.read_csv(truth_csv)[["lot", "style"]].itertuples(index=False))
    lots = lots[lots["style"].str.startswith("S")]
    planted = lots["lot_id"].map(truth)
    return {sid: planted[lots["style"] == sid].value_counts().index[0]
            for sid in sorted(set(lots["style"]))}


def test_a_refit_keeps_the_users_name_on_the_same_style(vintages, run_cli):
    root = vintages["root"]
    a, b = root / "a", root / "b"
    assert run_cli("-q", "segment", vintages[7]["lots"], "--config", CONFIG, "--out", a).code == 0
    truth_a = _planted(a / "lot_styles.csv", vintages[7]["truth_lots"])
    crisp = next(sid for sid, key in truth_a.items() if key == "crisp_white")
    red = next(sid for sid, key in truth_a.items() if key == "structured_red")
    for sid, name in ((crisp, "Estate crisp white"), (red, "Reserve red")):
        assert run_cli("-q", "name", "--model", a / "model", sid, name).code == 0
    result = run_cli("segment", vintages[8]["lots"], "--config", CONFIG, "--out", b,
                     "--previous", a / "model")
    assert result.code == 0, result
    assert f"{crisp} kept from the previous model" in result.err
    truth_b = _planted(b / "lot_styles.csv", vintages[8]["truth_lots"])
    styles = pd.read_csv(b / "styles.csv", keep_default_na=False).set_index("style")
    # the same planted recipe carries the same id and the user's name
    for sid, name in ((crisp, "Estate crisp white"), (red, "Reserve red")):
        assert truth_b[sid] == truth_a[sid]
        assert styles.loc[sid, "style_name"] == name
        assert styles.loc[sid, "generated_name"] != name
    assert truth_b == truth_a  # every style kept its id across the vintages
    matched = pd.read_csv(b / "previous.csv", keep_default_na=False)
    assert list(matched.columns) == ["previous_style", "previous_name", "style", "style_name",
                                     "status", "distance", "n_previous", "n_lots"]
    assert set(matched["status"]) == {"kept"} and (matched["distance"] <= MATCH_LIMIT).all()
    model = load_model(b / "model")
    assert model.user_names == {crisp: "Estate crisp white", red: "Reserve red"}
    assert model.previous["fingerprint"] == load_model(a / "model").fingerprint
    # the briefing compares the two; a model not matched to the one given is refused
    brief = run_cli("-q", "brief", "--model", b / "model", "--previous", a / "model", "--out",
                    b / "briefing.pdf")
    assert brief.code == 0, brief
    reader = PdfReader(str(b / "briefing.pdf"))
    assert len(reader.pages) == page_count(len(styles), False, with_previous=True)
    page = next(p.extract_text() for p in reader.pages
                if "Since the previous model" in p.extract_text())
    assert "Estate crisp white" in page and "Median shifts" in page and "kept" in page
    refused = run_cli("brief", "--model", a / "model", "--previous", b / "model", "--out",
                      a / "briefing.pdf")
    assert refused.code == 2 and "not segmented with --previous" in refused.err


@pytest.fixture(scope="module")
def without_rose(vintages):
    """Fits of seed 7 and of a vintage with no rosé (seed 9), in this process."""
    config = load_config(CONFIG)
    keys = tuple(r.key for r in RECIPES if r.key != "rose")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        full = fit_styles(load_lots(str(vintages[7]["lots"]), config), config)
        demo = generate_demo(n_lots=1500, seed=9, n_new=0, styles=keys)
        paths = write_demo(vintages["root"] / "seed9", demo)
        partial = fit_styles(load_lots(str(paths["lots"]), config), config)
    truth = {7: dict(pd.read_csv(vintages[7]["truth_lots"]).itertuples(index=False)),
             9: dict(pd.read_csv(paths["truth_lots"]).itertuples(index=False))}
    return full, partial, truth


def _rose_style(model, truth) -> str:
    lots = model.lots[model.lots["style"] != "unassigned"]
    planted = lots["lot_id"].map(truth)
    return planted[planted == "rose"].index.map(lots["style"]).value_counts().index[0]


def test_a_vanished_style_is_reported_and_a_new_one_gets_a_new_id(without_rose):
    full, partial, truth = without_rose
    rose = _rose_style(full, truth[7])
    # next vintage has no rosé: its style vanished
    matched = match_previous(partial, full)
    table = previous_table(matched)
    gone = table[table["status"] == "vanished"]
    assert gone["previous_style"].tolist() == [rose]
    assert rose not in matched.style_ids
    # the other way round the rosé is new, numbered after the largest id known
    back = match_previous(full, matched)
    fresh = previous_table(back)
    fresh = fresh[fresh["status"] == "new"]
    largest = max(int(s[1:]) for s in matched.style_ids)
    assert len(fresh) == 1 and int(fresh["style"].iloc[0][1:]) > largest
    assert _rose_style(back, truth[7]) == fresh["style"].iloc[0]


def test_match_cost_is_in_units_of_the_styles_spread():
    old = np.array([[0.0, 0.0], [4.0, 0.0]])
    new = np.array([[0.5, 0.0], [4.0, 3.0]])
    cost = match_cost(old, np.array([1.0, 2.0]), new, np.array([1.0, 4.0]))
    assert cost[0, 0] == pytest.approx(0.5) and cost[1, 1] == pytest.approx(1.0)
    assert cost[0, 1] == pytest.approx(5.0 / 2.5)


def test_median_shift_interval_covers_the_planted_shift():
    rng = np.random.default_rng(4)
    before, after = rng.normal(3.0, 0.5, 400), rng.normal(3.2, 0.5, 400)
    shift, low, high = median_shift(before, after, np.random.default_rng(1))
    assert low < 0.2 < high and low > 0 and shift == pytest.approx(0.2, abs=0.08)
    assert np.isnan(median_shift(before, np.array([]), rng)[0])

"""Unit hints: a column whose values sit one of its analyte's unit factors away is named, with
the unit and the [units] line to add, before any "too few usable lots"."""

from __future__ import annotations

import dataclasses
import re

import pandas as pd
import pytest

from conftest import ROOT
from vinstrata.config import load_config
from vinstrata.demo import generate_demo, write_demo
from vinstrata.errors import InputError, VinstrataWarning
from vinstrata.read.analytes import KINDS_BY_KEY
from vinstrata.read.hints import display_unit, rejection_hints, unit_hints
from vinstrata.read.units import FACTORS, factor_to_canonical, normalise_unit
from vinstrata.read.validate import load_lots, lots_from_frame
from vinstrata.segment.fit import fit_styles

CONFIG = ROOT / "configs" / "demo.toml"
HINT = re.compile(r"column 'total_phenolics': most values lie outside the possible range of "
                  r"phenolics in g/L GAE \(0-20\); the median (?P<median>[\d.]+) fits 'mg/L' "
                  r"— add to the config: \[units\] total_phenolics = \"mg/L\"")


def _times_1000(cell: str) -> str:
    try:
        return f"{float(cell) * 1000:.0f}"
    except ValueError:
        return cell  # blanks and the faulty rows' text stay as they are


@pytest.fixture(scope="module")
def mg_per_litre(tmp_path_factory):
    """The demo range with total phenolics written in mg/L, the header naming no unit."""
    folder = tmp_path_factory.mktemp("mgl")
    paths = write_demo(folder, generate_demo(n_lots=600, seed=3, n_new=10))
    lots = pd.read_csv(paths["lots"], dtype=str, keep_default_na=False)
    grams = pd.to_numeric(lots["total_phenolics"], errors="coerce")
    lots["total_phenolics"] = lots["total_phenolics"].map(_times_1000)
    path = folder / "lots_mg.csv"
    lots.to_csv(path, index=False, lineterminator="\n")
    return {"path": path, "median_g": float(grams.median()), **paths}


def test_phenolics_in_mg_per_litre_is_a_known_unit():
    # 1 mg = 1e-3 g (SI prefix), of the same gallic acid equivalents
    kind = KINDS_BY_KEY["total_phenolics"]
    for unit in ("mg/L", "mg/L GAE", "mg/l gallic"):
        assert factor_to_canonical(kind, unit) == pytest.approx(1e-3)


def test_every_unit_key_is_written_back_as_labs_write_it():
    for table in FACTORS.values():
        for key in table:
            assert normalise_unit(display_unit(key)) == key, key
    assert display_unit("mg/l") == "mg/L" and display_unit("%vol") == "% vol"
    assert display_unit("g/l h2so4") == "g/L H2SO4" and display_unit("g/100ml") == "g/100mL"


def test_the_hint_names_column_unit_median_and_units_line(mg_per_litre):
    config = load_config(CONFIG)
    with pytest.warns(VinstrataWarning) as caught:
        table = load_lots(str(mg_per_litre["path"]), config)
    hints = unit_hints(table)
    assert [h.analyte for h in hints] == ["total_phenolics"]
    assert hints[0].units[0] == "mg/L"
    # the median as written: 1000 times the median in g/L
    assert hints[0].median == pytest.approx(1000 * mg_per_litre["median_g"], rel=0.02)
    lines = rejection_hints(table)
    assert len(lines) == 1 and HINT.fullmatch(lines[0]), lines
    # the library warns it before the rejected rows
    messages = [str(w.message) for w in caught]
    assert HINT.fullmatch(messages[0]) and "rows rejected" in messages[1]


def test_the_fit_names_the_column_first_when_too_few_lots_are_left(mg_per_litre):
    config = load_config(CONFIG)
    with pytest.warns(VinstrataWarning):
        table = load_lots(str(mg_per_litre["path"]), config)
    with pytest.raises(InputError) as caught:
        fit_styles(table, config)
    message = str(caught.value)
    assert message.startswith("lots_mg.csv: column 'total_phenolics':")
    assert message.index("[units] total_phenolics") < message.index("usable lots")


def test_check_and_segment_print_the_hint(mg_per_litre, tmp_path, run_cli):
    check = run_cli("check", mg_per_litre["path"], "--config", CONFIG, "--out", tmp_path / "c")
    assert check.code == 0, check
    warned = [line for line in check.err.splitlines() if line.startswith("warning: column")]
    assert len(warned) == 1 and HINT.fullmatch(warned[0].removeprefix("warning: "))
    segment = run_cli("segment", mg_per_litre["path"], "--config", CONFIG, "--out",
                      tmp_path / "s")
    assert segment.code == 2, segment
    error = segment.err.strip().splitlines()[-1]
    assert error.startswith("error: lots_mg.csv: column 'total_phenolics': most values lie")
    assert error.index('[units] total_phenolics = "mg/L"') < error.index("only ")
    # the hint, as a warning, comes before the warning about the rejected rows
    lines = segment.err.splitlines()
    first = next(i for i, line in enumerate(lines) if "most values lie" in line)
    rejected = next(i for i, line in enumerate(lines) if "rows rejected" in line)
    assert first < rejected


def test_the_units_line_of_the_hint_is_the_fix(mg_per_litre, tmp_path):
    fixed = tmp_path / "fixed.toml"
    fixed.write_text(CONFIG.read_text().replace(
        'density = "g/mL"', 'density = "g/mL"\ntotal_phenolics = "mg/L"'))
    table = load_lots(str(mg_per_litre["path"]), load_config(fixed))
    original = load_lots(str(mg_per_litre["lots"]), load_config(CONFIG))
    assert unit_hints(table) == [] and table.used.sum() == original.used.sum()
    assert rejection_hints(original) == []


def test_a_column_that_alone_rejects_nearly_every_row_is_named(tmp_path):
    lots = pd.DataFrame({"lot": [f"T-{i:03d}" for i in range(40)],
                         "ph": ["9.5"] * 38 + ["3.4", "3.3"],
                         "alcohol": ["12.5"] * 40})
    config = load_config(CONFIG)
    config = dataclasses.replace(config, units={}, columns=dataclasses.replace(
        config.columns, grade="", analytes=("ph", "alcohol"), passthrough=()),
        limits=dataclasses.replace(config.limits, colour_column=""))
    with pytest.warns(VinstrataWarning):
        table = lots_from_frame(lots, config)
    lines = rejection_hints(table)
    # pH has no other unit, so there is no unit to suggest: the column is named all the same
    assert lines == ["column 'ph' alone rejects 38 of 40 rows (out_of_range: values outside its "
                     "possible 2.5-4.5 pH); see the status of each row"]
    with pytest.raises(InputError, match=r"^DataFrame: column 'ph' alone rejects 38 of 40 rows"):
        fit_styles(table, config)

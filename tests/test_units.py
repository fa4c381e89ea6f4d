"""Unit conversion: factors against molar masses and published figures, unit spelling.

Molar masses are computed here from the IUPAC standard atomic weights (H 1.00794,
C 12.0107, O 15.9994, S 32.065; IUPAC Commission on Isotopic Abundances and Atomic
Weights, 2007 table), independently of the constants in vinstrata.read.units.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from vinstrata.config import load_config, parse_config
from vinstrata.errors import InputError
from vinstrata.read.analytes import KINDS_BY_KEY
from vinstrata.read.units import factor_to_canonical, normalise_unit
from vinstrata.read.validate import load_lots

# IUPAC standard atomic weights (2007 table) of H, C, O and S
A_H, A_C, A_O, A_S = 1.00794, 12.0107, 15.9994, 32.065
M_TARTARIC = 4 * A_C + 6 * A_H + 6 * A_O  # C4H6O6, diprotic: 150.087 g/mol
M_SULFURIC = 2 * A_H + A_S + 4 * A_O  # H2SO4, diprotic: 98.079 g/mol
M_ACETIC = 2 * A_C + 4 * A_H + 2 * A_O  # C2H4O2, monoprotic: 60.052 g/mol

TA = KINDS_BY_KEY["titratable_acidity"]
VA = KINDS_BY_KEY["volatile_acidity"]
REL = 1e-5  # the test's molar masses and the code's agree to 5 significant digits


def factor(key: str, unit: str) -> float:
    return factor_to_canonical(KINDS_BY_KEY[key], unit)


def test_molar_masses_match_the_documented_values():
    # IUPAC standard atomic weights; values quoted in vinstrata.read.units
    assert abs(M_TARTARIC - 150.087) < 1e-3
    assert abs(M_SULFURIC - 98.079) < 1e-3
    assert abs(M_ACETIC - 60.052) < 1e-3


def test_sulfuric_to_tartaric_acidity():
    got = factor("titratable_acidity", "g/L H2SO4")
    # ratio of equivalent masses (150.087/2) / (98.079/2); IUPAC standard atomic weights
    assert got == pytest.approx((M_TARTARIC / 2) / (M_SULFURIC / 2), rel=REL)
    # Handbook of Enology (Ribereau-Gayon et al., vol. 1) gives the factor as 1.53 (edition
    # and page not recorded: from memory, hence only two decimals are checked)
    assert round(got, 2) == 1.53
    # 3.92 g/L as H2SO4 is 6.00 g/L as tartaric acid (same sources)
    assert 3.92 * got == pytest.approx(6.00, abs=0.005)


def test_sulfuric_to_acetic_volatile_acidity():
    got = factor("volatile_acidity", "g/L H2SO4")
    # 2 x 60.052 / 98.079: acetic acid is monoprotic, sulfuric diprotic; IUPAC weights
    assert got == pytest.approx(2 * M_ACETIC / M_SULFURIC, rel=REL)
    # Handbook of Enology (Ribereau-Gayon et al., vol. 1) gives the factor as 1.22 (edition
    # and page not recorded: from memory, hence only two decimals are checked)
    assert round(got, 2) == 1.22


def test_milliequivalents_per_litre():
    # one milliequivalent weighs M/1000 g (acetic, monoprotic) or M/2000 g (tartaric,
    # diprotic); IUPAC standard atomic weights
    assert factor("volatile_acidity", "meq/L") == pytest.approx(M_ACETIC / 1000, rel=REL)
    assert factor("volatile_acidity", "meq/L") == pytest.approx(0.060052, rel=REL)
    assert factor("titratable_acidity", "meq/L") == pytest.approx(M_TARTARIC / 2000, rel=REL)
    assert factor("titratable_acidity", "meq/L") == pytest.approx(0.075044, rel=REL)


def test_volatile_acidity_limits_expressed_three_ways():
    meq = factor("volatile_acidity", "meq/L")
    sulfuric = factor("volatile_acidity", "g/L H2SO4")
    # OIV-MA-C1-01 (OIV Compendium, maximum acceptable limits): VA at most 20 meq/L,
    # i.e. 1.20 g/L as acetic acid, or 0.98 g/L as sulfuric acid
    assert 20 * meq == pytest.approx(1.20, abs=0.005)
    assert 0.98 * sulfuric == pytest.approx(20 * meq, abs=0.005)
    # Regulation (EU) 2019/934, Annex I: 18 meq/L for white and rosé wines = 1.08 g/L acetic
    assert 18 * meq == pytest.approx(1.08, abs=0.005)


def test_alcohol_in_grams_per_litre():
    got = factor("alcohol", "g/L")
    # ethanol density 0.789 g/mL at 20 degC (common reference value), so 1 % vol holds
    # 7.89 g/L; the code uses 0.78924 from OIML R 22 (international alcoholometric tables),
    # a figure quoted from memory, hence the 0.1 % tolerance
    assert 1 / got == pytest.approx(7.89, rel=1e-3)
    assert 100.0 * got == pytest.approx(100 / 7.89, rel=1e-3)  # 100 g/L is about 12.7 % vol
    assert factor("alcohol", "% vol") == 1.0
    assert factor("alcohol", "mL/L") == pytest.approx(0.1)  # 10 mL per litre = 1 % vol (SI)


@pytest.mark.parametrize("key", ["free_so2", "total_so2"])
def test_sulfur_dioxide_to_milligrams_per_litre(key):
    # SI prefixes: 1 g/L = 1000 mg/L; ppm (mass per volume in dilute solution) = mg/L,
    # common practice in wine labs
    assert factor(key, "g/L") == pytest.approx(1000.0)
    assert factor(key, "ppm") == 1.0
    assert factor(key, "mg/L") == 1.0
    assert factor(key, "mg/dm3") == 1.0


def test_density_units():
    # SI: 1 kg/m3 = 1 g/L = 0.001 g/mL; 1 g/cm3 = 1 g/mL
    assert factor("density", "kg/m3") == pytest.approx(1e-3)
    assert factor("density", "kg/m³") == pytest.approx(1e-3)
    assert factor("density", "g/cm3") == 1.0
    assert factor("density", "g/mL") == 1.0


def test_mass_concentrations_per_100_millilitres():
    # SI: 1 g/100 mL = 10 g/L; written with or without the space labs put before mL
    assert factor("residual_sugar", "g/100mL") == pytest.approx(10.0)
    assert factor("residual_sugar", "g/100 mL") == pytest.approx(10.0)


@pytest.mark.parametrize("written", [
    "g/L as H2SO4", "g/l (sulphuric acid)", "g/L H2SO4", "g/l sulfuric", "G/L H₂SO₄",
    "g/L expressed as sulfuric acid", "g per litre H2SO4",
])
def test_sulfuric_unit_spellings_normalise_alike(written):
    assert normalise_unit(written) == "g/l h2so4"
    assert factor_to_canonical(TA, written) == factor_to_canonical(TA, "g/L H2SO4")


@pytest.mark.parametrize(("written", "key"), [
    ("% vol", "%vol"), ("% vol.", "%vol"), ("%vol", "%vol"), ("% v/v", "%vol"),
    ("ABV", "%vol"), ("vol%", "%vol"), ("mg/dm3", "mg/l"), ("mg/dm³", "mg/l"),
    ("mg per liter", "mg/l"), ("g/L as tartaric acid", "g/l tartaric"),
    ("g/l (tartaric)", "g/l tartaric"), ("g/L as acetic acid", "g/l acetic"),
    ("mEq/l", "meq/l"), ("g/cc", "g/ml"), ("g/cm3", "g/ml"), ("µg/mL", "ug/ml"),
])
def test_unit_strings_normalise(written, key):
    assert normalise_unit(written) == key


def test_canonical_unit_spellings_give_factor_one():
    for kind in KINDS_BY_KEY.values():
        assert factor_to_canonical(kind, kind.unit) == 1.0
        assert factor_to_canonical(kind, None) == 1.0
    assert factor_to_canonical(TA, "g/L as tartaric acid") == 1.0
    assert factor_to_canonical(VA, "g/L as acetic acid") == 1.0


def test_unknown_unit_raises_a_key_error_listing_known_units():
    with pytest.raises(KeyError) as err:
        factor_to_canonical(VA, "degrees Oechsle")
    message = err.value.args[0]
    assert "'degrees Oechsle'" in message and "volatile acidity" in message
    assert "meq/l" in message and "g/l h2so4" in message


# --------------------------------------------------------------------------- through a file


HEADER = "lot,grade,titratable_acidity,volatile_acidity,alcohol,total_so2,density"
ROW = "T-001,15,80,0.98,100,0.15,994\n"


def _load(tmp_path: Path, units: dict[str, str], header: str = HEADER, row: str = ROW):
    path = tmp_path / "lots.csv"
    path.write_text(header + "\n" + row, encoding="utf-8")
    analytes = ["titratable_acidity", "volatile_acidity", "alcohol", "total_so2", "density"]
    cfg = parse_config({"columns": {"lot_id": "lot", "grade": "grade", "analytes": analytes},
                        "units": units}, "units_test.toml")
    return load_lots(str(path), cfg)


def test_config_units_convert_every_value_to_canonical(tmp_path):
    table = _load(tmp_path, {"titratable_acidity": "meq/L", "volatile_acidity": "g/L H2SO4",
                             "alcohol": "g/L", "total_so2": "g/L", "density": "kg/m3"})
    values = table.values.loc[0]
    assert table.ids["status"].tolist() == ["used"]
    assert values["titratable_acidity"] == pytest.approx(80 * M_TARTARIC / 2000, rel=REL)
    assert values["volatile_acidity"] == pytest.approx(1.20, abs=0.005)  # OIV-MA-C1-01
    assert values["alcohol"] == pytest.approx(100 / 7.89, rel=1e-3)  # ethanol 0.789 g/mL
    assert values["total_so2"] == pytest.approx(150.0)
    assert values["density"] == pytest.approx(0.994)
    spec = {s.name: s for s in table.specs}
    assert spec["volatile_acidity"].unit_in == "g/L H2SO4"
    assert spec["volatile_acidity"].unit == "g/L acetic"


def test_config_unit_wins_over_bracketed_header_unit(tmp_path):
    header = "lot,grade,Titratable acidity (g/L H2SO4),volatile_acidity,alcohol,total_so2,density"
    row = "T-001,15,6.0,0.4,12.5,80,0.994\n"
    from_header = _load(tmp_path, {}, header, row)
    assert from_header.values.loc[0, "titratable_acidity"] == pytest.approx(
        6.0 * M_TARTARIC / M_SULFURIC, rel=REL)  # IUPAC weights, as above
    from_config = _load(tmp_path, {"titratable_acidity": "g/L tartaric"}, header, row)
    assert from_config.values.loc[0, "titratable_acidity"] == pytest.approx(6.0)


def test_unknown_unit_in_config_is_refused_naming_the_key(tmp_path):
    with pytest.raises(InputError) as err:
        _load(tmp_path, {"alcohol": "degrees Proof"})
    message = str(err.value)
    assert "units_test.toml" in message
    assert "units.alcohol" in message
    assert "'degrees Proof'" in message


def test_unknown_unit_in_header_is_refused_naming_the_column(tmp_path):
    header = "lot,grade,titratable_acidity,volatile_acidity,Alcohol (proof),total_so2,density"
    with pytest.raises(InputError) as err:
        _load(tmp_path, {}, header)
    assert "Alcohol (proof)" in str(err.value) and "'proof'" in str(err.value)


def test_unknown_unit_through_the_cli_exits_2(tmp_path, run_cli):
    (tmp_path / "lots.csv").write_text(HEADER + "\n" + ROW, encoding="utf-8")
    cfg = tmp_path / "c.toml"
    cfg.write_text('[columns]\nlot_id = "lot"\ngrade = "grade"\n'
                   'analytes = ["titratable_acidity", "volatile_acidity"]\n'
                   '[units]\nvolatile_acidity = "g/L citric"\n', encoding="utf-8")
    result = run_cli("check", tmp_path / "lots.csv", "--config", cfg, "--out", tmp_path / "o")
    assert result.code == 2, result
    assert result.err.startswith("error:") and "units.volatile_acidity" in result.err
    assert len(result.err.strip().splitlines()) == 1


def test_units_key_for_an_analyte_not_in_the_table_is_refused(tmp_path):
    with pytest.raises(InputError, match=r"units\.malic_acid"):
        _load(tmp_path, {"malic_acid": "g/L"})


def test_quality_report_shows_the_conversion(tmp_path):
    from vinstrata.read.quality import analyte_summary

    table = _load(tmp_path, {"volatile_acidity": "g/L H2SO4"})
    rows = analyte_summary(table).set_index("analyte")
    assert rows.loc["volatile_acidity", "unit_in"] == "g/L H2SO4"
    assert rows.loc["volatile_acidity", "factor"] == pytest.approx(
        2 * M_ACETIC / M_SULFURIC, rel=REL)
    assert rows.loc["volatile_acidity", "converted"] == 1
    assert rows.loc["titratable_acidity", "converted"] == 0
    assert np.isclose(rows.loc["titratable_acidity", "factor"], 1.0)


# --------------------------------------------------------------------------- total acidity


def test_total_acidity_is_a_name_of_titratable_acidity():
    # the trade's "total acidity" is the titratable acidity labs report (as tartaric acid);
    # a column of that name is read as titratable acidity
    assert "total_acidity" in TA.aliases


def test_a_config_asking_to_derive_total_acidity_is_refused_in_one_line(tmp_path, run_cli):
    config = tmp_path / "c.toml"
    config.write_text('[columns]\nlot_id = "lot"\n[derived]\nadd = ["total_acidity"]\n',
                      encoding="utf-8")
    with pytest.raises(InputError) as refused:
        load_config(config)
    message = str(refused.value)
    assert message == (
        f"{config}: key 'derived.add': \"total_acidity\" is no longer derived: labs report "
        "titratable acidity directly, and \"total acidity\" is the trade's name for titratable "
        "acidity (name the column titratable_acidity)")
    (tmp_path / "lots.csv").write_text(HEADER + "\n" + ROW, encoding="utf-8")
    result = run_cli("check", tmp_path / "lots.csv", "--config", config, "--out", tmp_path / "o")
    assert result.code == 2, result
    assert len(result.err.strip().splitlines()) == 1 and "no longer derived" in result.err

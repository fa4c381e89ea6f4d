"""Screening of lots against legal limits (vinstrata.place.limits) and molecular SO2 (derive).

Primary sources named beside each check:

* OIV Compendium of methods, OIV-MA-C1-01 "Maximum acceptable limits" (VA 20 meq/L
  = 1.20 g/L acetic for every wine; total SO2 150 / 200 mg/L for red / white-rosé with
  at most 4 g/L reducing substances, 300 mg/L above 4 g/L).
* Regulation (EU) 2019/934, Annex I (VA 20 meq/L = 1.20 g/L red, 18 meq/L = 1.08 g/L
  white and rosé; part B total SO2: sugar below 5 g/L 150 red / 200 white-rosé, 5 g/L or
  more 200 red / 250 white-rosé).
* 27 CFR 4.21(a) (VA 0.14 g/100 mL = 1.40 g/L red, 0.12 g/100 mL = 1.20 g/L other),
  27 CFR 4.22(b)(1) (total SO2 350 ppm for every wine), 27 CFR 4.32(e) (sulfite statement
  at 10 ppm or more).
* Regulation (EU) No 1169/2011, Annex II (sulfite statement above 10 mg/L).
* OIV-MA-AS323-04C (thermodynamic pKa of SO2 1.798 at 20 degC in water).
"""

from __future__ import annotations

import dataclasses
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from vinstrata.config import Limits, LimitSet, parse_config
from vinstrata.place import limits as lim
from vinstrata.read.derive import free_so2_for_molecular, molecular_so2
from vinstrata.read.lots import AnalyteSpec

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10 only
    import tomli as tomllib

ROOT = Path(__file__).resolve().parents[1]

_UNITS = {"volatile_acidity": "g/L", "total_so2": "mg/L", "residual_sugar": "g/L",
          "free_so2": "mg/L", "ph": ""}
SPECS = tuple(
    AnalyteSpec(name=kind, column=kind, kind=kind, label=kind.replace("_", " "),
                unit=unit, unit_in=unit, factor=1.0, bounds=None, concentration=kind != "ph")
    for kind, unit in _UNITS.items()
)


def _screen(rows: list[dict[str, float]], colours: list[str], market: str = "eu",
            settings: Limits | None = None, pka: float = 1.81) -> list[list[lim.Flag]]:
    """Screen lots given as dicts of analyte values (missing keys are NaN)."""
    values = pd.DataFrame([{k: r.get(k, np.nan) for k in _UNITS} for r in rows], dtype=float)
    settings = settings if settings is not None else Limits(market=market)
    return lim.screen(values, SPECS, np.array(colours, dtype=object), settings, pka)


def _tokens(flags: list[lim.Flag]) -> list[str]:
    return [f.token for f in flags]


def _one(kind: str, value: float, colour: str, market: str, sugar: float = math.nan,
         settings: Limits | None = None) -> list[lim.Flag]:
    row = {kind: value}
    if not math.isnan(sugar):
        row["residual_sugar"] = sugar
    return _screen([row], [colour], market, settings)[0]


def _va_flagged(va: float, colour: str, market: str, settings: Limits | None = None) -> bool:
    return "va_above_limit" in _tokens(_one("volatile_acidity", va, colour, market,
                                            settings=settings))


def _so2_flagged(total: float, colour: str, market: str, sugar: float = math.nan) -> bool:
    return "total_so2_above_limit" in _tokens(_one("total_so2", total, colour, market, sugar))


# --------------------------------------------------------------------------- volatile acidity

VA_LIMITS = [
    # market, colour, maximum g/L acetic, source
    ("oiv", "red", 1.20, "OIV-MA-C1-01: 20 meq/L for all wines"),
    ("oiv", "white", 1.20, "OIV-MA-C1-01: 20 meq/L for all wines"),
    ("oiv", "rose", 1.20, "OIV-MA-C1-01: 20 meq/L for all wines"),
    ("eu", "red", 1.20, "Reg. (EU) 2019/934 Annex I: 20 meq/L red"),
    ("eu", "white", 1.08, "Reg. (EU) 2019/934 Annex I: 18 meq/L white and rosé"),
    ("eu", "rose", 1.08, "Reg. (EU) 2019/934 Annex I: 18 meq/L white and rosé"),
    ("us", "red", 1.40, "27 CFR 4.21(a): 0.14 g/100 mL red"),
    ("us", "white", 1.20, "27 CFR 4.21(a): 0.12 g/100 mL white and other"),
    ("us", "rose", 1.20, "27 CFR 4.21(a): 0.12 g/100 mL white and other"),
]


@pytest.mark.parametrize(("market", "colour", "limit", "source"), VA_LIMITS,
                         ids=[f"{m}-{c}" for m, c, _, _ in VA_LIMITS])
def test_va_maximum_per_regulation_and_colour(market, colour, limit, source):
    """OIV-MA-C1-01 / Reg. (EU) 2019/934 Annex I / 27 CFR 4.21(a): VA just above the
    maximum is flagged; at and just below it is not."""
    assert _va_flagged(limit + 0.01, colour, market), source
    assert not _va_flagged(limit, colour, market), source
    assert not _va_flagged(limit - 0.01, colour, market), source


def test_eu_va_flag_words_name_market_colour_and_maximum():
    """Reg. (EU) 2019/934 Annex I: a white at 1.10 g/L breaks the 1.08 g/L maximum and
    the sentence says which maximum was applied."""
    (flag,) = _one("volatile_acidity", 1.10, "white", "eu")
    assert flag.token == "va_above_limit"
    assert "EU" in flag.words and "white/rosé" in flag.words and "1.08" in flag.words


@pytest.mark.parametrize(("market", "strictest"), [("eu", 1.08), ("us", 1.20), ("oiv", 1.20)])
def test_va_unknown_colour_applies_strictest_and_says_so(market, strictest):
    """Unknown colour: the lower of the red and white VA maxima (EU 1.08 from Reg. (EU)
    2019/934 Annex I; US 1.20 from 27 CFR 4.21(a); OIV 1.20 from OIV-MA-C1-01)."""
    flags = _one("volatile_acidity", strictest + 0.01, "", market)
    assert _tokens(flags) == ["va_above_limit"]
    assert "colour unknown" in flags[0].words
    assert f"{strictest:.2f}" in flags[0].words
    assert not _va_flagged(strictest, "", market)


# --------------------------------------------------------------------------- total SO2

SO2_LIMITS = [
    # market, colour, sugar g/L, maximum mg/L, source
    ("eu", "red", 2.0, 150.0, "Reg. (EU) 2019/934 Annex I B: red, sugar below 5 g/L"),
    ("eu", "white", 2.0, 200.0, "Reg. (EU) 2019/934 Annex I B: white, sugar below 5 g/L"),
    ("eu", "rose", 2.0, 200.0, "Reg. (EU) 2019/934 Annex I B: rosé, sugar below 5 g/L"),
    ("eu", "red", 5.0, 200.0, "Reg. (EU) 2019/934 Annex I B: red, sugar 5 g/L or more"),
    ("eu", "white", 5.0, 250.0, "Reg. (EU) 2019/934 Annex I B: white, sugar 5 g/L or more"),
    ("eu", "rose", 12.0, 250.0, "Reg. (EU) 2019/934 Annex I B: rosé, sugar 5 g/L or more"),
    ("eu", "red", 4.5, 150.0, "Reg. (EU) 2019/934 Annex I B: 4.5 g/L is below 5, dry"),
    ("eu", "white", 4.99, 200.0, "Reg. (EU) 2019/934 Annex I B: 4.99 g/L is below 5, dry"),
    ("oiv", "red", 2.0, 150.0, "OIV-MA-C1-01: red, at most 4 g/L"),
    ("oiv", "white", 2.0, 200.0, "OIV-MA-C1-01: white, at most 4 g/L"),
    ("oiv", "rose", 2.0, 200.0, "OIV-MA-C1-01: rosé, at most 4 g/L"),
    ("oiv", "red", 4.0, 150.0, "OIV-MA-C1-01: exactly 4 g/L is 'at most 4', dry"),
    ("oiv", "white", 4.0, 200.0, "OIV-MA-C1-01: exactly 4 g/L is 'at most 4', dry"),
    ("oiv", "red", 4.5, 300.0, "OIV-MA-C1-01: red, above 4 g/L"),
    ("oiv", "white", 4.5, 300.0, "OIV-MA-C1-01: white, above 4 g/L"),
    ("oiv", "rose", 20.0, 300.0, "OIV-MA-C1-01: rosé, above 4 g/L"),
    ("us", "red", 2.0, 350.0, "27 CFR 4.22(b)(1): 350 ppm for all wines"),
    ("us", "white", 2.0, 350.0, "27 CFR 4.22(b)(1): 350 ppm for all wines"),
    ("us", "white", 40.0, 350.0, "27 CFR 4.22(b)(1): 350 ppm, no sugar condition"),
    ("us", "rose", 8.0, 350.0, "27 CFR 4.22(b)(1): 350 ppm for all wines"),
]


@pytest.mark.parametrize(("market", "colour", "sugar", "limit", "source"), SO2_LIMITS,
                         ids=[f"{m}-{c}-{s:g}gL" for m, c, s, _, _ in SO2_LIMITS])
def test_total_so2_maximum_per_regulation_colour_and_sugar(market, colour, sugar, limit, source):
    """Reg. (EU) 2019/934 Annex I B / OIV-MA-C1-01 / 27 CFR 4.22(b)(1): total SO2 just above
    the maximum is flagged; at and just below it is not."""
    assert _so2_flagged(limit + 1.0, colour, market, sugar), source
    assert not _so2_flagged(limit, colour, market, sugar), source
    assert not _so2_flagged(limit - 1.0, colour, market, sugar), source


def test_sugar_boundary_differs_between_oiv_and_eu():
    """OIV-MA-C1-01 ("above 4 g/L") vs Reg. (EU) 2019/934 Annex I B ("5 g/L or more"):
    a red with 4.5 g/L sugar and 180 mg/L total SO2 is sweet (max 300) for the OIV, dry
    (max 150) for the EU."""
    assert not _so2_flagged(180.0, "red", "oiv", sugar=4.5)
    assert _so2_flagged(180.0, "red", "eu", sugar=4.5)
    eu = [f for f in _one("total_so2", 180.0, "red", "eu", 4.5) if f.token.startswith("total")]
    assert "dry" in eu[0].words and "150" in eu[0].words


@pytest.mark.parametrize(("market", "sugar", "strictest", "source"), [
    ("eu", 2.0, 150.0, "Reg. (EU) 2019/934 Annex I B: red dry 150 < white dry 200"),
    ("eu", 8.0, 200.0, "Reg. (EU) 2019/934 Annex I B: red sweet 200 < white sweet 250"),
    ("oiv", 2.0, 150.0, "OIV-MA-C1-01: red dry 150 < white dry 200"),
    ("us", 2.0, 350.0, "27 CFR 4.22(b)(1): 350 for all wines"),
])
def test_total_so2_unknown_colour_applies_strictest_and_says_so(market, sugar, strictest, source):
    """Unknown colour: the lower of the red and white/rosé SO2 maxima at the lot's sugar."""
    flags = [f for f in _one("total_so2", strictest + 1.0, "", market, sugar)
             if f.token == "total_so2_above_limit"]
    assert len(flags) == 1, source
    assert "colour unknown" in flags[0].words, source
    assert f"{strictest:.0f}" in flags[0].words, source
    assert not _so2_flagged(strictest, "", market, sugar), source


@pytest.mark.parametrize(("market", "colour", "dry", "source"), [
    ("eu", "white", 200.0, "Reg. (EU) 2019/934 Annex I B: white below 5 g/L"),
    ("eu", "red", 150.0, "Reg. (EU) 2019/934 Annex I B: red below 5 g/L"),
    ("oiv", "white", 200.0, "OIV-MA-C1-01: white at most 4 g/L"),
    ("oiv", "red", 150.0, "OIV-MA-C1-01: red at most 4 g/L"),
])
def test_total_so2_unknown_sugar_applies_dry_maximum(market, colour, dry, source):
    """Sugar not measured: the dry (lower) maximum applies, and the words say sugar unknown."""
    flags = [f for f in _one("total_so2", dry + 1.0, colour, market)
             if f.token == "total_so2_above_limit"]
    assert len(flags) == 1, source
    assert "sugar unknown" in flags[0].words, source
    assert not _so2_flagged(dry, colour, market), source


def test_missing_values_give_no_limit_flags():
    """A lot with VA and total SO2 not measured is not reported as breaking a limit."""
    flags = _screen([{"residual_sugar": 2.0}], ["red"], "eu")[0]
    assert flags == []


# --------------------------------------------------------------------------- sulfite statement

def test_us_sulfite_statement_at_exactly_10_ppm():
    """27 CFR 4.32(e): a statement is needed at 10 ppm or more (10 included)."""
    assert "sulfite_statement" in _tokens(_one("total_so2", 10.0, "white", "us"))
    assert "sulfite_statement" not in _tokens(_one("total_so2", 9.9, "white", "us"))


def test_eu_sulfite_statement_only_above_10_mg_per_l():
    """Reg. (EU) No 1169/2011 Annex II: "more than 10 mg/litre" (10 itself excluded)."""
    assert "sulfite_statement" not in _tokens(_one("total_so2", 10.0, "white", "eu"))
    assert "sulfite_statement" in _tokens(_one("total_so2", 10.5, "white", "eu"))


def _sulfite_words(market: str, settings: Limits | None = None) -> str:
    (flag,) = [f for f in _one("total_so2", 40.0, "white", market, settings=settings)
               if f.token == "sulfite_statement"]
    return flag.words


@pytest.mark.parametrize(("market", "source"), [
    ("eu", "Regulation (EU) No 1169/2011 Annex II"), ("us", "27 CFR 4.32(e)")])
def test_sulfite_flag_says_flagged_and_names_the_line(market, source):
    """A screening flag, not a verdict: "flagged for" a statement, with the rule's number."""
    words = _sulfite_words(market)
    assert "flagged for a sulfite statement" in words and source in words
    assert "need" not in words


def test_oiv_sulfite_flag_says_the_eu_line_is_used():
    """OIV-MA-C1-01 sets no sulfite labelling line; the EU's (Reg. (EU) No 1169/2011,
    "more than 10 mg/litre") is screened instead, and the flag says whose line it is."""
    words = _sulfite_words("oiv")
    assert "EU line" in words and "1169/2011" in words and "OIV sets none" in words
    assert "sulfite_statement" not in _tokens(_one("total_so2", 10.0, "white", "oiv"))


def test_overridden_sulfite_line_is_named_as_the_configured_one():
    config = parse_config({"columns": {"lot_id": "lot"},
                           "limits": {"market": "oiv", "oiv": {"sulfite_label_from": 20.0}}})
    words = _sulfite_words("oiv", settings=config.limits)
    assert "[limits.oiv]" in words and "1169/2011" not in words


# --------------------------------------------------------------------------- config overrides

def test_parsed_eu_override_changes_red_va_flagging():
    """[limits.eu] va_max_red = 1.0 replaces the 1.20 g/L of Reg. (EU) 2019/934 Annex I."""
    config = parse_config({"columns": {"lot_id": "lot"},
                           "limits": {"market": "eu", "eu": {"va_max_red": 1.0}}})
    assert lim.limit_set(config.limits).va_max_red == 1.0
    assert _va_flagged(1.10, "red", "eu", settings=config.limits)
    assert not _va_flagged(1.00, "red", "eu", settings=config.limits)
    assert not _va_flagged(1.10, "red", "eu")  # default 1.20 g/L: not flagged
    (flag,) = _one("volatile_acidity", 1.10, "red", "eu", settings=config.limits)
    assert "1.00" in flag.words


def test_override_of_another_market_leaves_the_active_one_alone():
    """An [limits.us] override does not change EU screening (Reg. (EU) 2019/934 Annex I)."""
    config = parse_config({"columns": {"lot_id": "lot"},
                           "limits": {"market": "eu", "us": {"va_max_red": 0.5}}})
    assert lim.limit_set(config.limits) == lim.MARKETS["eu"]
    assert not _va_flagged(1.10, "red", "eu", settings=config.limits)


def test_limit_set_is_none_for_market_none_and_defaults_otherwise():
    assert lim.limit_set(Limits(market="none")) is None
    for market in ("eu", "oiv", "us"):
        assert lim.limit_set(Limits(market=market)) == lim.MARKETS[market]


def test_market_none_gives_no_legal_flags_but_keeps_molecular_warning():
    """market "none": nothing against regulations, even far above every maximum; the low
    molecular SO2 warning (trade target, market-independent) still fires."""
    rows = [{"volatile_acidity": 3.0, "total_so2": 500.0, "residual_sugar": 1.0},
            {"free_so2": 10.0, "ph": 3.8}]
    flags = _screen(rows, ["red", "white"], "none")
    assert flags[0] == []
    assert _tokens(flags[1]) == ["molecular_so2_low"]


# --------------------------------------------------------------------------- molecular SO2

# Free SO2 (mg/L) needed for 0.5 / 0.8 mg/L molecular SO2, worked by hand from the
# Henderson-Hasselbalch formula free = molecular (1 + 10 ** (pH - pKa)) with pKa 1.81 and
# rounded to 0.1 mg/L. This is the formula, not an independent published table: trade
# calculators print similar tables (within 1-3 mg/L, depending on their pKa), but none is
# named here, so none is the check.
FREE_NEEDED = [(3.0, 8.2, 13.2), (3.2, 12.8, 20.4), (3.4, 20.0, 31.9), (3.6, 31.3, 50.1),
               (3.8, 49.4, 79.0)]


@pytest.mark.parametrize(("ph", "for_05", "for_08"), FREE_NEEDED)
def test_free_so2_for_molecular_matches_henderson_hasselbalch_by_hand(ph, for_05, for_08):
    # rounding to 0.1 mg/L: within 0.05 mg/L of the hand-worked values
    assert free_so2_for_molecular(0.5, ph, 1.81) == pytest.approx(for_05, abs=0.05)
    assert free_so2_for_molecular(0.8, ph, 1.81) == pytest.approx(for_08, abs=0.05)


def test_molecular_so2_is_half_the_free_so2_at_ph_equal_to_pka():
    """Henderson-Hasselbalch: at pH = pKa the two forms are equal (half molecular); one pH
    unit above, one part in 11."""
    assert molecular_so2(np.array([30.0]), np.array([1.81]), 1.81)[0] == pytest.approx(15.0)
    assert molecular_so2(np.array([33.0]), np.array([2.81]), 1.81)[0] == pytest.approx(3.0)


@pytest.mark.parametrize(("ph", "for_05", "for_08"), FREE_NEEDED)
def test_molecular_so2_of_table_free_so2_gives_the_target(ph, for_05, for_08):
    """The same hand-worked values read the other way (rounding to 0.1 mg/L allows 0.7 %)."""
    got = molecular_so2(np.array([for_05, for_08]), np.array([ph, ph]), 1.81)
    np.testing.assert_allclose(got, [0.5, 0.8], rtol=0.007)


def test_so2_pka_changes_molecular_so2_in_the_right_direction():
    """OIV-MA-AS323-04C: pKa 1.798 at 20 degC in water. A lower pKa leaves less of the free
    SO2 molecular, so more free SO2 is needed for the same target."""
    free, ph = np.array([30.0]), np.array([3.4])
    assert molecular_so2(free, ph, 1.798)[0] < molecular_so2(free, ph, 1.81)[0]
    assert molecular_so2(free, ph, 1.90)[0] > molecular_so2(free, ph, 1.81)[0]
    assert free_so2_for_molecular(0.8, 3.4, 1.798) > free_so2_for_molecular(0.8, 3.4, 1.81)


def test_screen_uses_the_given_pka():
    """A white at exactly the free SO2 for 0.8 mg/L molecular (pKa 1.81) passes with pKa 1.81
    and is warned with the OIV-MA-AS323-04C value 1.798 (less molecular SO2)."""
    free = float(free_so2_for_molecular(0.8, 3.4, 1.81)) * 1.001
    row = [{"free_so2": free, "ph": 3.4}]
    assert _screen(row, ["white"], "eu", pka=1.81)[0] == []
    assert _tokens(_screen(row, ["white"], "eu", pka=1.798)[0]) == ["molecular_so2_low"]


@pytest.mark.parametrize(("colour", "target"), [("red", 0.5), ("white", 0.8), ("rose", 0.8)])
def test_low_molecular_so2_warning_per_colour(colour, target):
    """Trade targets (secondary sources): 0.5 mg/L molecular for reds, 0.8 for whites and
    rosés. Just below the target warns, just above does not."""
    ph = 3.5
    low = float(free_so2_for_molecular(target * 0.97, ph))
    high = float(free_so2_for_molecular(target * 1.03, ph))
    flags = _screen([{"free_so2": low, "ph": ph}, {"free_so2": high, "ph": ph}],
                    [colour, colour], "eu")
    assert _tokens(flags[0]) == ["molecular_so2_low"]
    assert f"{target:g} mg/L" in flags[0][0].words
    assert flags[1] == []


def test_low_molecular_so2_unknown_colour_uses_white_target_and_says_so():
    """Unknown colour: the stricter 0.8 mg/L target (trade practice, secondary sources)."""
    free = float(free_so2_for_molecular(0.65, 3.5))  # above the red 0.5, below the white 0.8
    (flag,) = _screen([{"free_so2": free, "ph": 3.5}], [""], "eu")[0]
    assert flag.token == "molecular_so2_low"
    assert "colour unknown" in flag.words and "0.8" in flag.words


def test_molecular_so2_targets_come_from_the_settings():
    settings = Limits(market="eu", molecular_so2_min_red=0.3)
    free = float(free_so2_for_molecular(0.4, 3.6))  # below default 0.5, above 0.3
    assert _screen([{"free_so2": free, "ph": 3.6}], ["red"], settings=settings)[0] == []
    assert _tokens(_screen([{"free_so2": free, "ph": 3.6}], ["red"], "eu")[0]) == [
        "molecular_so2_low"]


# --------------------------------------------------------------------------- colours, words

@pytest.mark.parametrize(("raw", "colour"), [
    ("Red", "red"), (" rouge ", "red"), ("TINTO", "red"), ("white", "white"),
    ("Blanc", "white"), ("Rosé", "rose"), ("rose", "rose"), ("ROSADO", "rose"),
    ("orange", ""), ("", ""), (float("nan"), ""), (None, ""),
])
def test_normalise_colour(raw, colour):
    """Common spellings map to red / white / rose; anything else is unknown ("")."""
    assert lim.normalise_colour(raw) == colour


def test_every_flag_has_words_and_short_text():
    rows = [{"volatile_acidity": 2.0, "total_so2": 400.0, "residual_sugar": 30.0,
             "free_so2": 5.0, "ph": 3.9}] * 4
    for market in ("eu", "oiv", "us"):
        all_flags = _screen(rows, ["red", "white", "rose", ""], market)
        for flags in all_flags:
            assert {"va_above_limit", "total_so2_above_limit", "sulfite_statement",
                    "molecular_so2_low"} == set(_tokens(flags))
            for flag in flags:
                assert flag.words.strip() and flag.short.strip()


def test_caution_says_screening_only_and_who_decides():
    text = lim.CAUTION.lower()
    assert "screening flags only" in text
    assert "certified laboratory analyses" in text
    assert "regulation in force" in text and "decide" in text


def test_cautions_name_the_exceptions_to_the_va_maxima():
    """27 CFR 4.21(a): VA "exclusive of sulfur dioxide", with higher maxima for wine from
    unameliorated juice of 28 Brix or more; Reg. (EU) 2019/934 Annex I Part A: derogations
    for some wines. The cautions say so, with the rule numbers."""
    text = lim.VA_EXCEPTIONS
    assert "27 CFR 4.21" in text and "excluding sulfur dioxide" in text
    assert "high-sugar" in text
    assert "Regulation (EU) 2019/934, Annex I Part A" in text and "derogations" in text


# --------------------------------------------------------------------------- documented defaults

@pytest.mark.parametrize("market", ["eu", "oiv", "us"])
def test_default_toml_limits_match_markets(market):
    """configs/default.toml documents the same values as vinstrata.place.limits.MARKETS."""
    with (ROOT / "configs" / "default.toml").open("rb") as fh:
        doc = tomllib.load(fh)
    table = doc["limits"][market]
    assert set(table) == {f.name for f in dataclasses.fields(LimitSet)}
    assert table == dataclasses.asdict(lim.MARKETS[market])
    config = parse_config(doc, "default.toml")
    assert lim.limit_set(dataclasses.replace(config.limits, market=market)) == lim.MARKETS[market]


def test_colour_column_must_be_a_passthrough_column():
    from vinstrata.config import parse_config
    from vinstrata.errors import InputError

    with pytest.raises(InputError, match=r"limits\.colour_column"):
        parse_config({"columns": {"lot_id": "lot"}, "limits": {"colour_column": "colour"}})
    parse_config({"columns": {"lot_id": "lot", "passthrough": ["colour"]},
                  "limits": {"colour_column": "colour"}})

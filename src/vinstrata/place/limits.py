"""Screening of lots against legal limits and a molecular SO2 target.

Screening only: certified laboratory analyses and the regulation in force
decide. The default values per market (``[limits.<market>]`` overrides any):

=====================  ===========  ================  ==========================================
value                  EU           OIV               US
=====================  ===========  ================  ==========================================
VA max, red            1.20 g/L     1.20 g/L          1.40 g/L (27 CFR 4.21(a))
VA max, white / rosé   1.08 g/L     1.20 g/L          1.20 g/L (27 CFR 4.21(a))
total SO2 max, red     150 / 200    150 / 300         350 mg/L for every wine (27 CFR 4.22(b)(1))
total SO2, white/rosé  200 / 250    200 / 300         350 mg/L
"sweet" from sugar     5 g/L        above 4 g/L       (no sugar condition)
sulfite statement      > 10 mg/L    > 10 mg/L         >= 10 ppm (27 CFR 4.32(e))
=====================  ===========  ================  ==========================================

EU values: Regulation (EU) 2019/934, Annex I (Part A: VA 20 / 18 meq/L; Part B:
SO2, dry below 5 g/L of glucose + fructose, some sweet categories allow 300-400
mg/L) and Regulation (EU) No 1169/2011, Annex II (sulfite statement). OIV values:
OIV Compendium of methods, OIV-MA-C1-01 "Maximum acceptable limits" (dry at
most 4 g/L of reducing substances). The OIV sets no sulfite labelling line, so
under market "oiv" the EU line is used and the flag says so. VA is expressed as
acetic acid.

The VA maxima have exceptions the screening does not model
(:data:`VA_EXCEPTIONS`): 27 CFR 4.21 measures VA excluding sulfur dioxide and
allows higher maxima for wines from unameliorated juice of 28 Brix or more;
Regulation (EU) 2019/934, Annex I Part A, lets higher values stand for some
wines. A flag is a reason to look, never a verdict: the regulation in force
decides.

Where a lot's colour is unknown the strictest value of the market applies and
the flag says so; where its sugar is unknown the dry (lower) SO2 maximum applies.
The low molecular SO2 warning uses free SO2 and pH (Henderson-Hasselbalch,
:func:`vinstrata.read.derive.molecular_so2`) against 0.5 mg/L for reds and 0.8 mg/L
for whites and rosés, common trade targets (secondary sources).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import pandas as pd

from vinstrata.config import Limits, LimitSet
from vinstrata.read.analytes import normalise_name
from vinstrata.read.derive import molecular_so2
from vinstrata.read.lots import AnalyteSpec

CAUTION = ("Screening flags only: certified laboratory analyses and the regulation in force "
           "decide.")
VA_EXCEPTIONS = ("The volatile acidity maxima have exceptions: the US rule (27 CFR 4.21) "
                 "measures volatile acidity excluding sulfur dioxide and allows higher maxima "
                 "for some wines from high-sugar juice; the EU grants derogations for some "
                 "wines (Regulation (EU) 2019/934, Annex I Part A).")
# whose sulfite labelling line a market's default is; the OIV sets none, so "oiv" uses the EU's
SULFITE_LINES = {"eu": "the EU line, Regulation (EU) No 1169/2011 Annex II",
                 "oiv": "the EU line of Regulation (EU) No 1169/2011 Annex II: the OIV sets none",
                 "us": "the US line, 27 CFR 4.32(e)"}

MARKETS: dict[str, LimitSet] = {
    "eu": LimitSet(va_max_red=1.20, va_max_white_rose=1.08, so2_max_red_dry=150.0,
                   so2_max_red_sweet=200.0, so2_max_white_rose_dry=200.0,
                   so2_max_white_rose_sweet=250.0, sweet_from_sugar=5.0, sweet_inclusive=True,
                   sulfite_label_from=10.0, sulfite_label_inclusive=False),
    "oiv": LimitSet(va_max_red=1.20, va_max_white_rose=1.20, so2_max_red_dry=150.0,
                    so2_max_red_sweet=300.0, so2_max_white_rose_dry=200.0,
                    so2_max_white_rose_sweet=300.0, sweet_from_sugar=4.0, sweet_inclusive=False,
                    sulfite_label_from=10.0, sulfite_label_inclusive=False),
    "us": LimitSet(va_max_red=1.40, va_max_white_rose=1.20, so2_max_red_dry=350.0,
                   so2_max_red_sweet=350.0, so2_max_white_rose_dry=350.0,
                   so2_max_white_rose_sweet=350.0, sweet_from_sugar=5.0, sweet_inclusive=True,
                   sulfite_label_from=10.0, sulfite_label_inclusive=True),
}
MARKET_NAMES = {"eu": "EU", "oiv": "OIV", "us": "US federal"}
_COLOURS = {"red": "red", "rouge": "red", "tinto": "red", "rosso": "red", "rot": "red",
            "white": "white", "blanc": "white", "blanco": "white", "bianco": "white",
            "weiss": "white", "rose": "rose", "rosado": "rose", "rosato": "rose",
            "pink": "rose", "blush": "rose"}


def limit_set(settings: Limits) -> LimitSet | None:
    """The market's limits with the config's overrides; None for market "none"."""
    if settings.market == "none":
        return None
    base = MARKETS[settings.market]
    return dataclasses.replace(base, **dict(settings.overrides.get(settings.market, {})))


def normalise_colour(value: object) -> str:
    """"red", "white", "rose" or "" from what a colour column holds (case and accents ignored)."""
    return _COLOURS.get(normalise_name(str(value)), "")


@dataclass(frozen=True)
class Flag:
    """One flag: a token for files, a sentence for people, a few words for tables."""

    token: str
    words: str
    short: str = ""


def _by_kind(specs: tuple[AnalyteSpec, ...], values: pd.DataFrame, kind: str) -> np.ndarray | None:
    for spec in specs:
        if spec.kind == kind and spec.name in values.columns:
            return values[spec.name].to_numpy(dtype=float)
    return None


def screen(values: pd.DataFrame, specs: tuple[AnalyteSpec, ...], colours: np.ndarray,
           settings: Limits, pka: float = 1.81) -> list[list[Flag]]:
    """Screening flags of each lot.

    Parameters
    ----------
    values : DataFrame
        Canonical values, one column per analyte.
    specs : tuple of AnalyteSpec
        Tells which column is volatile acidity, total SO2, sugar, free SO2, pH.
    colours : ndarray of str
        "red", "white", "rose" or "" (unknown) per lot.
    settings : Limits
    pka : float
        pKa for molecular SO2.

    Returns
    -------
    list of list of Flag, one list per lot.
    """
    n = len(values)
    out: list[list[Flag]] = [[] for _ in range(n)]
    limits = limit_set(settings)
    va = _by_kind(specs, values, "volatile_acidity")
    total = _by_kind(specs, values, "total_so2")
    sugar = _by_kind(specs, values, "residual_sugar")
    free = _by_kind(specs, values, "free_so2")
    ph = _by_kind(specs, values, "ph")
    if limits is not None:
        market = MARKET_NAMES[settings.market]
        line = _sulfite_line(settings.market, limits)
        for i in range(n):
            colour = colours[i]
            if va is not None and np.isfinite(va[i]):
                _check_va(out[i], va[i], colour, limits, market)
            if total is not None and np.isfinite(total[i]):
                s = sugar[i] if sugar is not None else np.nan
                _check_so2(out[i], total[i], s, colour, limits, market, line)
    if free is not None and ph is not None:
        mol = molecular_so2(free, ph, pka)
        for i in range(n):
            if not np.isfinite(mol[i]):
                continue
            red = colours[i] == "red"
            floor = settings.molecular_so2_min_red if red else settings.molecular_so2_min_white_rose
            if mol[i] < floor:
                kind = ("red" if red else "white/rosé" if colours[i]
                        else "white/rosé (colour unknown)")
                out[i].append(Flag("molecular_so2_low",
                                   f"molecular SO2 {mol[i]:.2f} mg/L below the {floor:g} mg/L "
                                   f"target for {kind} wine (pH {ph[i]:.2f}, free SO2 "
                                   f"{free[i]:.0f} mg/L)",
                                   f"mol. SO2 {mol[i]:.2f} < {floor:g}"))
    return out


def _sulfite_line(market: str, limits: LimitSet) -> str:
    """Whose sulfite labelling line ``limits`` holds, in words."""
    base = MARKETS[market]
    if (limits.sulfite_label_from, limits.sulfite_label_inclusive) == (
            base.sulfite_label_from, base.sulfite_label_inclusive):
        return SULFITE_LINES[market]
    return f"the line set in [limits.{market}]"


def _check_va(flags: list[Flag], va: float, colour: str, limits: LimitSet, market: str) -> None:
    if colour == "red":
        limit, what = limits.va_max_red, "red-wine"
    elif colour in ("white", "rose"):
        limit, what = limits.va_max_white_rose, "white/rosé"
    else:
        limit = min(limits.va_max_red, limits.va_max_white_rose)
        what = "strictest (colour unknown)"
    if va > limit:
        flags.append(Flag("va_above_limit", f"volatile acidity {va:.2f} g/L above the {market} "
                                            f"{what} maximum {limit:.2f} g/L",
                          f"VA {va:.2f} > {limit:.2f} ({market} {what.split(' ')[0]})"))


def _check_so2(flags: list[Flag], total: float, sugar: float, colour: str, limits: LimitSet,
               market: str, sulfite_line: str) -> None:
    if np.isfinite(sugar):
        sweet = sugar >= limits.sweet_from_sugar if limits.sweet_inclusive else (
            sugar > limits.sweet_from_sugar)
        level = "sweet" if sweet else "dry"
    else:
        sweet, level = False, "dry (sugar unknown)"
    red = limits.so2_max_red_sweet if sweet else limits.so2_max_red_dry
    white = limits.so2_max_white_rose_sweet if sweet else limits.so2_max_white_rose_dry
    if colour == "red":
        limit, what = red, f"red {level}"
    elif colour in ("white", "rose"):
        limit, what = white, f"white/rosé {level}"
    else:
        limit, what = min(red, white), f"strictest {level} (colour unknown)"
    if total > limit:
        flags.append(Flag("total_so2_above_limit", f"total SO2 {total:.0f} mg/L above the {market} "
                                                   f"{what} maximum {limit:.0f} mg/L",
                          f"SO2 {total:.0f} > {limit:.0f} ({market} {what.split(' (')[0]})"))
    line = limits.sulfite_label_from
    over = total >= line if limits.sulfite_label_inclusive else total > line
    if over:
        sign = "at or above" if limits.sulfite_label_inclusive else "above"
        flags.append(Flag("sulfite_statement", f"total SO2 {total:.4g} mg/L {sign} {line:g} "
                                               f"mg/L: flagged for a sulfite statement "
                                               f"({sulfite_line})",
                          "sulfite statement"))

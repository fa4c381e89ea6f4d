"""The catalogue of analytes the engine knows by name.

A lot table may carry any chemistry column; the catalogue only adds what is
known about the usual ones: the canonical unit, the other units labs report
(see :mod:`vinstrata.read.units`), the physically possible range used to reject
impossible values, and words for style names. A column is matched to a
catalogue entry by its normalised name (see :func:`normalise_name`) or by an
explicit ``[kinds]`` entry in the config; any other column is a *generic*
analyte: used as written, with no unit conversion and no bounds unless the
config gives some under ``[bounds]``.

To add an analyte to the catalogue, add a :class:`Kind` to ``KINDS`` (and its
units to :mod:`vinstrata.read.units`); DEVELOPERS.md walks through it.
"""

from __future__ import annotations

import re
import unicodedata
from dataclasses import dataclass


@dataclass(frozen=True)
class Kind:
    """What the engine knows about one analyte of the trade.

    Attributes
    ----------
    key : str
        Identifier used in config ``[kinds]`` and in code.
    label : str
        Short words for names and axis titles ("volatile acidity").
    unit : str
        Canonical unit, the one every stored value is in.
    aliases : tuple of str
        Normalised column names recognised as this analyte.
    bounds : tuple of float or None
        Closed range of physically possible values in the canonical unit;
        values outside are rejected as ``out_of_range``.
    bounds_source : str
        Where the bounds come from.
    concentration : bool
        A concentration cannot be negative; negative values are rejected
        as ``negative``.
    high_word, low_word : str
        Words used in style names for a high or a low median.
    """

    key: str
    label: str
    unit: str
    aliases: tuple[str, ...]
    bounds: tuple[float, float] | None
    bounds_source: str
    concentration: bool = True
    high_word: str = "high"
    low_word: str = "low"


_COMMON = "common practice: far outside any wine, so only an error or a unit mix-up gives it"

KINDS: tuple[Kind, ...] = (
    Kind("alcohol", "alcohol", "% vol",
         ("alcohol", "alc", "abv", "ethanol", "alcool", "tav", "alcohol_vol", "alcohol_by_volume"),
         (0.0, 25.0), "common practice: no wine, fortified ones included, exceeds 25 % vol"),
    Kind("residual_sugar", "residual sugar", "g/L",
         ("residual_sugar", "rs", "sugar", "sugars", "glucose_fructose", "reducing_sugars",
          "residual_sugars", "sucres", "sucres_residuels"),
         (0.0, 900.0), "common practice: near the solubility of glucose and fructose; the sweetest "
         "wine essences reach several hundred g/L (memory)"),
    Kind("titratable_acidity", "acidity", "g/L tartaric",
         ("titratable_acidity", "ta", "total_acidity", "acidity", "acidite_totale",
          "titratable_acid"),
         (0.0, 30.0), _COMMON, high_word="high", low_word="low"),
    Kind("fixed_acidity", "fixed acidity", "g/L tartaric",
         ("fixed_acidity", "fixed_acid"), (0.0, 30.0), _COMMON),
    Kind("volatile_acidity", "volatile acidity", "g/L acetic",
         ("volatile_acidity", "va", "acidite_volatile", "volatile_acid"),
         (0.0, 10.0), "common practice: beyond this the liquid is vinegar, not wine"),
    Kind("ph", "pH", "pH", ("ph",), (2.5, 4.5),
         "common practice; wines lie near 2.9-4.0 (Jackson, Wine Science)",
         concentration=False),
    Kind("free_so2", "free SO2", "mg/L",
         ("free_so2", "free_sulfur_dioxide", "free_sulphur_dioxide", "so2_free", "fso2",
          "so2_libre", "free_so_2"),
         (0.0, 500.0), _COMMON),
    Kind("total_so2", "total SO2", "mg/L",
         ("total_so2", "total_sulfur_dioxide", "total_sulphur_dioxide", "so2_total", "tso2",
          "so2", "total_so_2"),
         (0.0, 1000.0), _COMMON),
    Kind("bound_so2", "bound SO2", "mg/L", ("bound_so2", "so2_bound", "combined_so2"),
         (0.0, 1000.0), _COMMON),
    Kind("molecular_so2", "molecular SO2", "mg/L", ("molecular_so2", "so2_molecular"),
         (0.0, 100.0), _COMMON),
    Kind("malic_acid", "malic acid", "g/L", ("malic_acid", "malic", "malate", "acide_malique"),
         (0.0, 20.0), _COMMON),
    Kind("lactic_acid", "lactic acid", "g/L",
         ("lactic_acid", "lactic", "lactate", "acide_lactique"),
         (0.0, 20.0), _COMMON),
    Kind("tartaric_acid", "tartaric acid", "g/L", ("tartaric_acid", "tartaric"), (0.0, 20.0),
         _COMMON),
    Kind("citric_acid", "citric acid", "g/L", ("citric_acid", "citric"), (0.0, 20.0), _COMMON),
    Kind("potassium", "potassium", "mg/L", ("potassium", "k"), (0.0, 5000.0),
         "common practice: wines hold about 200-2000 mg/L"),
    Kind("total_phenolics", "phenolics", "g/L GAE",
         ("total_phenolics", "total_phenols", "phenolics", "polyphenols", "total_polyphenols"),
         (0.0, 20.0), _COMMON),
    Kind("colour_intensity", "colour", "AU",
         ("colour_intensity", "color_intensity", "ci", "colour", "color", "intensity",
          "intensite_colorante"),
         (0.0, 100.0), "common practice: A420+A520+A620 at 1 cm (OIV-MA-AS2-07B) stays far "
         "below",
         high_word="deep", low_word="pale"),
    Kind("hue", "hue", "ratio", ("hue", "tint", "teinte", "tonality"), (0.0, 20.0), _COMMON,
         concentration=False),
    Kind("density", "density", "g/mL", ("density", "masse_volumique", "relative_density"),
         (0.95, 1.20), "common practice: dry wine near 0.990-0.996 g/mL, sweet wines above 1.0"),
    Kind("chlorides", "chlorides", "g/L", ("chlorides", "chloride"), (0.0, 10.0), _COMMON),
    Kind("sulphates", "sulphates", "g/L", ("sulphates", "sulfates", "sulphate", "sulfate"),
         (0.0, 10.0), _COMMON),
    Kind("glycerol", "glycerol", "g/L", ("glycerol", "glycerin"), (0.0, 60.0), _COMMON),
)

KINDS_BY_KEY: dict[str, Kind] = {k.key: k for k in KINDS}


def normalise_name(text: str) -> str:
    """Normalise a column or analyte name for tolerant matching.

    Case, accents, surrounding spaces and punctuation do not matter:
    ``" Acidité Totale "`` and ``"acidite_totale"`` both become
    ``"acidite_totale"``.
    """
    decomposed = unicodedata.normalize("NFKD", str(text))
    ascii_text = "".join(c for c in decomposed if not unicodedata.combining(c))
    ascii_text = ascii_text.replace("₂", "2").replace("²", "2").replace("³", "3")
    return re.sub(r"[^0-9a-z]+", "_", ascii_text.lower()).strip("_")


_UNIT_IN_NAME = re.compile(r"^(?P<name>.*?)\s*[\(\[](?P<unit>[^\)\]]*)[\)\]]\s*$")


def split_unit(header: str) -> tuple[str, str | None]:
    """Split ``"Total SO2 (mg/L)"`` into ``("Total SO2", "mg/L")``.

    A header without a bracketed unit comes back with ``None``.
    """
    match = _UNIT_IN_NAME.match(str(header))
    if match and match.group("name").strip():
        return match.group("name").strip(), match.group("unit").strip()
    return str(header).strip(), None


_ALIAS_INDEX: dict[str, str] = {}
for _kind in KINDS:
    for _alias in (_kind.key, *_kind.aliases):
        _ALIAS_INDEX.setdefault(normalise_name(_alias), _kind.key)


def kind_for(name: str) -> Kind | None:
    """The catalogue entry a column name stands for, or ``None`` (generic)."""
    key = _ALIAS_INDEX.get(normalise_name(split_unit(name)[0]))
    return KINDS_BY_KEY[key] if key else None


def label_for(name: str, kind: Kind | None) -> str:
    """Readable words for an analyte: the catalogue label or the column name."""
    if kind is not None:
        return kind.label
    return split_unit(name)[0].replace("_", " ").strip()

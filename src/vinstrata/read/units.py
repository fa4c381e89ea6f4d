"""Unit conversion to the canonical unit of each catalogue analyte.

Every factor is derived here from molar masses or densities so that a test
can check it against its published source:

* molar masses from the IUPAC standard atomic weights: tartaric acid
  C4H6O6 150.087 g/mol (diprotic), sulfuric acid H2SO4 98.079 g/mol
  (diprotic), acetic acid C2H4O2 60.052 g/mol (monoprotic);
* the density of ethanol at 20 degC, 0.78924 g/mL (OIML R 22, International
  alcoholometric tables), for alcohol written in g/L.

Acids titrate by their equivalents, so converting an acidity written "as
sulfuric acid" to "as tartaric acid" multiplies by the ratio of equivalent
masses (150.087 / 2) / (98.079 / 2) = 1.5303, as the Handbook of Enology
(Ribereau-Gayon et al., vol. 1) gives it (1.53).
"""

from __future__ import annotations

import re

from vinstrata.read.analytes import Kind

M_TARTARIC = 150.087  # g/mol, diprotic
M_SULFURIC = 98.079  # g/mol, diprotic
M_ACETIC = 60.052  # g/mol, monoprotic
ETHANOL_DENSITY_20C = 0.78924  # g/mL at 20 degC, OIML R 22

EQ_TARTARIC = M_TARTARIC / 2  # g per equivalent
EQ_SULFURIC = M_SULFURIC / 2
EQ_ACETIC = M_ACETIC

SULFURIC_TO_TARTARIC = EQ_TARTARIC / EQ_SULFURIC  # 1.5303
SULFURIC_TO_ACETIC = EQ_ACETIC / EQ_SULFURIC  # 1.2246
MEQ_TO_TARTARIC = EQ_TARTARIC / 1000  # g/L per meq/L, 0.075044
MEQ_TO_ACETIC = EQ_ACETIC / 1000  # 0.060052
ALCOHOL_GL_PER_VOL = 10 * ETHANOL_DENSITY_20C  # g/L of ethanol per % vol, 7.8924


def normalise_unit(text: str) -> str:
    """Reduce a unit as labs write it to a compact key.

    ``"g/L as H2SO4"``, ``"g/l (sulphuric acid)"`` and ``"g/L H2SO4"`` all give
    ``"g/l h2so4"``; ``"mg/dm3"`` gives ``"mg/l"``; ``"% vol."`` gives ``"%vol"``.
    """
    unit = str(text).strip().lower()
    for sub, plain in (("³", "3"), ("²", "2"), ("₂", "2"), ("₄", "4"), ("µ", "u"), ("μ", "u")):
        unit = unit.replace(sub, plain)
    unit = re.sub(r"[()\[\],]", " ", unit)
    unit = re.sub(r"\b(sulphuric|sulfuric)\b", "h2so4", unit)
    unit = re.sub(r"\b(as|acid|of|expressed)\b", " ", unit)
    unit = re.sub(r"\bper\b", "/", unit)
    unit = re.sub(r"\b(litre|liter|dm3)\b", "l", unit)
    unit = re.sub(r"\bcm3\b", "ml", unit)
    unit = unit.replace(".", "")
    unit = re.sub(r"\s*/\s*", "/", unit)
    unit = re.sub(r"(\d)\s+([a-z])", r"\1\2", unit)  # "g/100 mL" -> "g/100ml"
    unit = re.sub(r"\bvol\s*%", "vol%", unit)
    unit = re.sub(r"%\s*", "%", unit)
    unit = " ".join(unit.split())
    return _UNIT_ALIASES.get(unit, unit)


_UNIT_ALIASES = {"%": "%vol", "%v/v": "%vol", "vol%": "%vol", "abv": "%vol", "%abv": "%vol",
                 "g/cc": "g/ml"}


_MASS = {"g/l": 1.0, "mg/l": 1e-3, "g/100ml": 10.0, "mg/ml": 1.0, "kg/m3": 1.0, "ug/ml": 1e-3}
_SO2 = {"mg/l": 1.0, "ppm": 1.0, "g/l": 1000.0, "ug/ml": 1.0, "mg/100ml": 10.0}
_NONE = {"": 1.0}

#: canonical-unit factors per catalogue key: value_in_canonical = value * factor
FACTORS: dict[str, dict[str, float]] = {
    "alcohol": {"%vol": 1.0, "g/l": 1 / ALCOHOL_GL_PER_VOL, "ml/l": 0.1},
    "residual_sugar": dict(_MASS),
    "titratable_acidity": {
        "g/l": 1.0, "g/l tartaric": 1.0,
        "g/l h2so4": SULFURIC_TO_TARTARIC,
        "meq/l": MEQ_TO_TARTARIC,
    },
    "volatile_acidity": {
        "g/l": 1.0, "g/l acetic": 1.0, "mg/l": 1e-3, "mg/l acetic": 1e-3,
        "g/l h2so4": SULFURIC_TO_ACETIC,
        "meq/l": MEQ_TO_ACETIC,
    },
    "ph": {"ph": 1.0, "": 1.0},
    "free_so2": dict(_SO2),
    "total_so2": dict(_SO2),
    "bound_so2": dict(_SO2),
    "molecular_so2": dict(_SO2),
    "malic_acid": dict(_MASS),
    "lactic_acid": dict(_MASS),
    "tartaric_acid": dict(_MASS),
    "citric_acid": dict(_MASS),
    "potassium": {"mg/l": 1.0, "ppm": 1.0, "g/l": 1000.0},
    "total_phenolics": {
        "g/l": 1.0, "g/l gae": 1.0, "mg/l": 1e-3, "mg/l gae": 1e-3, "g/l gallic": 1.0,
        "mg/l gallic": 1e-3,
    },
    "colour_intensity": {"au": 1.0, "": 1.0, "abs": 1.0},
    "hue": {"ratio": 1.0, "": 1.0},
    "density": {"g/ml": 1.0, "kg/l": 1.0, "kg/m3": 1e-3, "g/l": 1e-3},
    "chlorides": dict(_MASS),
    "sulphates": dict(_MASS),
    "glycerol": dict(_MASS),
}
FACTORS["fixed_acidity"] = dict(FACTORS["titratable_acidity"])


def factor_to_canonical(kind: Kind, unit: str | None) -> float:
    """Multiplier taking a value written in ``unit`` to the canonical unit.

    Parameters
    ----------
    kind : Kind
        The catalogue entry of the analyte.
    unit : str or None
        The unit as written; ``None`` or the canonical unit gives 1.

    Returns
    -------
    float

    Raises
    ------
    KeyError
        When the unit is not known for this analyte; the message lists the
        known units.
    """
    if unit is None:
        return 1.0
    key = normalise_unit(unit)
    table = FACTORS.get(kind.key, {})
    if key == normalise_unit(kind.unit):
        return 1.0
    if key in table:
        return table[key]
    canonical = normalise_unit(kind.unit)
    known = ", ".join([kind.unit, *sorted(k for k in table if k and k != canonical)])
    raise KeyError(f"unit '{unit}' is not known for {kind.label}; known units: {known}")

"""Derived analytes, computed from measured ones (opt-in, ``[derived] add``).

* ``bound_so2`` = total SO2 - free SO2 (mg/L).
* ``molecular_so2`` = free SO2 / (1 + 10 ** (pH - pKa)), the Henderson-Hasselbalch
  share of free SO2 present as SO2·H2O. The default pKa 1.81 is the value trade
  calculators commonly use; the OIV method OIV-MA-AS323-04C gives 1.798 at
  20 degC in water, rising with alcohol (``derived.so2_pka`` changes it).

Total acidity is not derived: labs report titratable acidity directly, and
"total acidity" is the trade's own name for it (an alias of
``titratable_acidity`` in the catalogue), so a sum of fixed and volatile
acidity under that name would contradict the column most tables carry.

A derived value is missing where one of its parts is missing; its flag says
``derived``. Derived analytes join the analyte list like measured ones.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from vinstrata.config import Derived
from vinstrata.errors import InputError
from vinstrata.read.analytes import KINDS_BY_KEY
from vinstrata.read.cells import MISSING
from vinstrata.read.lots import AnalyteSpec, LotTable

DERIVED_STATE = "derived"


def molecular_so2(free_so2: np.ndarray, ph: np.ndarray, pka: float = 1.81) -> np.ndarray:
    """Molecular SO2 (mg/L) from free SO2 (mg/L) and pH (Henderson-Hasselbalch)."""
    free_so2 = np.asarray(free_so2, dtype=float)
    return free_so2 / (1.0 + np.power(10.0, np.asarray(ph, dtype=float) - pka))


def free_so2_for_molecular(target: float, ph: np.ndarray | float, pka: float = 1.81) -> np.ndarray:
    """Free SO2 (mg/L) needed for a molecular SO2 target at a given pH."""
    return target * (1.0 + np.power(10.0, np.asarray(ph, dtype=float) - pka))


_NEEDS = {
    "bound_so2": ("total_so2", "free_so2"),
    "molecular_so2": ("free_so2", "ph"),
}


def add_derived(table: LotTable, settings: Derived) -> LotTable:
    """Return ``table`` with the derived analytes of ``settings.add`` appended.

    Raises
    ------
    InputError
        When a derived analyte is asked for but one of its parts is not among
        the analytes (named by catalogue kind).
    """
    if not settings.add:
        return table
    by_kind = {s.kind: s.name for s in table.specs if s.kind}
    values = table.values.copy()
    flags = table.flags.copy()
    specs = list(table.specs)
    for name in settings.add:
        if name in values.columns:
            continue
        parts = _NEEDS[name]
        absent = [p for p in parts if p not in by_kind]
        if absent:
            raise InputError(
                f"{table.source.name}: derived analyte '{name}' needs "
                + " and ".join(KINDS_BY_KEY[p].label for p in absent)
                + " among the analytes"
            )
        a, b = (values[by_kind[p]].to_numpy(dtype=float) for p in parts)
        if name == "bound_so2":
            derived = np.clip(a - b, 0.0, None)
        else:
            derived = molecular_so2(a, b, settings.so2_pka)
        values[name] = derived
        flags[name] = np.where(np.isfinite(derived), DERIVED_STATE, MISSING)
        specs.append(_derived_spec(name))
    return dataclasses.replace(table, values=values, flags=flags, specs=tuple(specs))


def _derived_spec(name: str) -> AnalyteSpec:
    kind = KINDS_BY_KEY[name]
    return AnalyteSpec(name=name, column="", kind=kind.key, label=kind.label, unit=kind.unit,
                       unit_in=kind.unit, factor=1.0, bounds=kind.bounds, concentration=True,
                       derived=True)

"""Why most rows of a lot table were rejected, in words: the unit a column is likely in.

A lab that reports total phenolics in mg/L where the engine expects g/L, with
no ``[units]`` line and no unit in the header, gets every row rejected as
``out_of_range`` and then "too few usable lots". The numbers show the cause
plainly (every value about 1000 times the possible range), so this module says
it: for each catalogue analyte whose filled cells lie mostly outside its
possible range (:data:`MOSTLY`, 80 %), it tries the analyte's known units
(:data:`vinstrata.read.units.FACTORS`) and names those that bring most of them
(:data:`FITS`, 80 %) inside, with the median seen and the ``[units]`` line to
add. A column that alone rejects nearly every row (:data:`NEARLY_ALL`, 90 %)
and has no such unit is named too.

Every command that reads lots warns these lines, and a fit refused for too few
usable lots puts them first in its one error line.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from vinstrata.read import cells
from vinstrata.read.analytes import KINDS_BY_KEY
from vinstrata.read.lots import USED, AnalyteSpec, LotTable
from vinstrata.read.units import FACTORS

MOSTLY = 0.8  # share of an analyte's filled cells outside its range that calls for a hint
FITS = 0.8  # share of them inside the range, after a unit's factor, for that unit to fit
NEARLY_ALL = 0.9  # share of all rows one column rejects that is named before anything else
MAX_UNITS = 2  # units named in one hint, best first

_FILLED = (cells.OK, cells.CENSORED_BELOW, cells.CENSORED_ABOVE)


@dataclass(frozen=True)
class UnitHint:
    """One column whose values fit another of its analyte's units.

    Attributes
    ----------
    analyte : str
        The analyte as the config names it (the key of the ``[units]`` line).
    column : str
        The header it was read from.
    label, unit : str
        The analyte's words and its canonical unit.
    bounds : tuple of float
        Its possible range in the canonical unit.
    median : float
        The median of the column's filled cells, as written in the file.
    units : tuple of str
        The units that bring most values inside the range, best first.
    """

    analyte: str
    column: str
    label: str
    unit: str
    bounds: tuple[float, float]
    median: float
    units: tuple[str, ...]

    def text(self) -> str:
        """The hint as one line."""
        lo, hi = self.bounds
        fits = " or ".join(f"'{u}'" for u in self.units)
        return (f"column '{self.column}': most values lie outside the possible range of "
                f"{self.label} in {self.unit} ({lo:g}-{hi:g}); the median {self.median:.4g} "
                f"fits {fits} — add to the config: [units] {self.analyte} = "
                f"\"{self.units[0]}\"")


def display_unit(key: str) -> str:
    """A normalised unit key as labs write it: ``"mg/l"`` -> ``"mg/L"``, ``"%vol"`` -> ``"% vol"``.

    :func:`vinstrata.read.units.normalise_unit` of the result gives ``key`` back.
    """
    text = re.sub(r"(?<![a-z])ml\b", "mL", key)
    text = re.sub(r"/l\b", "/L", text)
    text = text.replace("gae", "GAE").replace("h2so4", "H2SO4")
    return "% vol" if text == "%vol" else text


def _outside(values: np.ndarray, spec: AnalyteSpec) -> np.ndarray:
    lo, hi = spec.bounds  # type: ignore[misc]
    return (values < lo) | (values > hi) | (spec.concentration & (values < 0))


def _fitting_units(written: np.ndarray, spec: AnalyteSpec) -> list[str]:
    """Units of the analyte, other than the one read, that bring most values inside its range."""
    table = FACTORS.get(spec.kind, {})
    scored: dict[float, tuple[float, int, str]] = {}
    for position, (key, factor) in enumerate(table.items()):
        if not key or math.isclose(factor, spec.factor, rel_tol=1e-9):
            continue
        inside = float((~_outside(written * factor, spec)).mean())
        if inside >= FITS and factor not in scored:
            # units sharing a factor say the same: the first of the table stands for them
            scored[factor] = (-inside, position, key)
    return [display_unit(key) for _, _, key in sorted(scored.values())[:MAX_UNITS]]


def unit_hints(table: LotTable) -> list[UnitHint]:
    """The columns of ``table`` whose values fit another of their analyte's units.

    Parameters
    ----------
    table : LotTable
        A validated lot table (every row, rejected ones too).

    Returns
    -------
    list of UnitHint
        In the table's analyte order.
    """
    hints = []
    for spec in table.specs:
        if spec.derived or not spec.kind or spec.kind not in KINDS_BY_KEY or not spec.bounds:
            continue
        filled = table.flags[spec.name].isin(_FILLED).to_numpy()
        values = table.values[spec.name].to_numpy(dtype=float)
        values = values[filled & np.isfinite(values)]
        if not values.size or float(_outside(values, spec).mean()) < MOSTLY:
            continue
        written = values / spec.factor
        units = _fitting_units(written, spec)
        if units:
            hints.append(UnitHint(analyte=spec.name, column=spec.column, label=spec.label,
                                  unit=spec.unit, bounds=spec.bounds,
                                  median=float(np.median(written)), units=tuple(units)))
    return hints


def _dominant_rejection(table: LotTable, named: set[str]) -> str | None:
    """The column that alone rejects nearly every row, in words; None when none does."""
    status = table.ids["status"]
    rejected = status[status != USED]
    if not len(rejected):
        return None
    counts = rejected.value_counts()
    reason, count = str(counts.index[0]), int(counts.iloc[0])
    if count < NEARLY_ALL * table.n_rows or ":" not in reason:
        return None
    code, analyte = reason.split(":", 1)
    if analyte in named:
        return None
    spec = next((s for s in table.specs if s.name == analyte), None)
    column = spec.column if spec is not None and spec.column else analyte
    why = {"out_of_range": "values outside its possible range", "negative": "negative values",
           "non_numeric": "cells that are not numbers"}.get(code, code)
    if code == "out_of_range" and spec is not None and spec.bounds:
        lo, hi = spec.bounds
        why = f"values outside its possible {lo:g}-{hi:g} {spec.unit}"
    return (f"column '{column}' alone rejects {count} of {table.n_rows} rows ({code}: {why}); "
            "see the status of each row")


def rejection_hints(table: LotTable) -> list[str]:
    """The lines saying why most rows were rejected: unit hints, then a column that
    alone rejects nearly every row (when no unit hint names it already).

    Parameters
    ----------
    table : LotTable

    Returns
    -------
    list of str
        Empty when no column stands out.
    """
    hints = unit_hints(table)
    lines = [h.text() for h in hints]
    dominant = _dominant_rejection(table, {h.analyte for h in hints})
    if dominant:
        lines.append(dominant)
    return lines

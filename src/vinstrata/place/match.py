"""Refusing new-lot files that do not fit the model: other columns, other units."""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np

from vinstrata.config import Config
from vinstrata.errors import InputError
from vinstrata.read.analytes import normalise_name, split_unit
from vinstrata.read.ingest import RawTable
from vinstrata.read.lots import AnalyteSpec, LotTable
from vinstrata.read.units import normalise_unit
from vinstrata.read.validate import header_index, numeric_columns
from vinstrata.segment.model import StyleModel

UNIT_FACTOR = 20.0  # a median this many times off the model's suggests another unit


def check_columns(raw: RawTable, model: StyleModel, config: Config) -> None:
    """Refuse a file whose analyte columns differ from the model's, in one line."""
    headers = list(raw.cells.columns)
    keys = set(header_index(headers))
    wanted = [s for s in model.specs if not s.derived]
    missing = [s.name for s in wanted if normalise_name(s.name) not in keys
               and normalise_name(split_unit(s.column)[0]) not in keys]
    if not missing:
        return
    known = {normalise_name(s.name) for s in model.specs} | {
        normalise_name(split_unit(s.column)[0]) for s in model.specs}
    cols = config.columns
    others = {normalise_name(n) for n in (cols.lot_id, cols.grade, *cols.passthrough,
                                          config.limits.colour_column) if n}
    taken = {h for h in headers if normalise_name(split_unit(h)[0]) in known | others
             or normalise_name(h) in known}
    unexpected = numeric_columns(raw, taken, config.ingest.decimal)
    extra = f"; unexpected: {', '.join(unexpected)}" if unexpected else ""
    raise InputError(f"{raw.source.name}: analytes do not match the model: missing "
                     f"{', '.join(missing)}{extra}")


def unit_range(model: StyleModel, name: str) -> tuple[int, float, float, float]:
    """The model's positive values of an analyte: their count, median and 0.1-99.9 % range."""
    ref = model.values[name].to_numpy(dtype=float)
    ref = ref[np.isfinite(ref) & (ref > 0)]
    if ref.size < 5:
        return int(ref.size), np.nan, np.nan, np.nan
    lo, hi = np.quantile(ref, [0.001, 0.999])
    return int(ref.size), float(np.median(ref)), float(lo), float(hi)


def unit_tally(x: np.ndarray, lo: float, hi: float) -> tuple[np.ndarray, np.ndarray]:
    """Per value: positive (counted by the unit check) and, of those, outside ``[lo, hi]``."""
    positive = np.isfinite(x) & (x > 0)
    return positive, positive & ((x < lo) | (x > hi))


def check_units(table: LotTable, model: StyleModel) -> None:
    """Refuse analytes in another canonical unit, or values a factor of 20 off the model's."""
    used = table.used
    values = {s.name: table.values.loc[used, s.name].to_numpy(dtype=float)
              for s in table.specs}

    def tally(name: str) -> tuple[int, int]:
        lo, hi = unit_range(model, name)[2:]
        positive, outside = unit_tally(values[name], lo, hi)
        return int(positive.sum()), int(outside.sum())

    def median(name: str) -> float:
        x = values[name]
        return float(np.median(x[np.isfinite(x) & (x > 0)]))

    judge_units(table.specs, table.source.name, model, tally, median)


def judge_units(specs: Sequence[AnalyteSpec], source: str, model: StyleModel,
                tally: Callable[[str], tuple[int, int]], median: Callable[[str], float]
                ) -> None:
    """The unit check of :func:`check_units` from counts, for a table read whole or in batches.

    Parameters
    ----------
    specs : sequence of AnalyteSpec
        The file's analytes.
    source : str
        The file's name, for the message.
    model : StyleModel
    tally : callable
        Analyte -> (used lots with a positive value, those outside the model's
        0.1-99.9 % range; :func:`unit_tally`).
    median : callable
        Analyte -> the median of the used lots' positive values; called only
        where the decision needs it (most values outside the model's range).

    Raises
    ------
    InputError
        The first analyte of the model, in its order, that is missing, in another
        canonical unit, or a factor of 20 off.
    """
    theirs = {s.name: s for s in specs}
    for spec in model.specs:
        new = theirs.get(spec.name)
        if new is None:
            raise InputError(f"{source}: analyte '{spec.name}' of the model is missing")
        if normalise_unit(new.unit) != normalise_unit(spec.unit):
            raise InputError(
                f"{source}: analyte '{spec.name}' is in '{new.unit}' here but in "
                f"'{spec.unit}' in the model, and no conversion is known; give its unit "
                f"in [units]")
        n_ref, ref_median = unit_range(model, spec.name)[:2]
        n, n_outside = tally(spec.name)
        if n < 5 or n_ref < 5:
            continue
        # the counts decide first: the median is needed only where most values lie outside
        if n_outside / n < 0.8:
            continue
        x_median = median(spec.name)
        ratio = float(x_median / ref_median)
        if ratio > UNIT_FACTOR or ratio < 1 / UNIT_FACTOR:
            raise InputError(
                f"{source}: analyte '{spec.name}' looks like another unit: its median "
                f"{x_median:.4g} is {ratio:.3g} times the model's {ref_median:.4g} "
                f"{spec.unit}; give its unit in [units]")

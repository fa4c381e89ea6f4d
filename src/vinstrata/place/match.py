"""Refusing new-lot files that do not fit the model: other columns, other units."""

from __future__ import annotations

import numpy as np

from vinstrata.config import Config
from vinstrata.errors import InputError
from vinstrata.read.analytes import normalise_name, split_unit
from vinstrata.read.ingest import RawTable
from vinstrata.read.lots import LotTable
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


def check_units(table: LotTable, model: StyleModel) -> None:
    """Refuse analytes in another canonical unit, or values a factor of 20 off the model's."""
    theirs = {s.name: s for s in table.specs}
    used = table.used
    for spec in model.specs:
        new = theirs.get(spec.name)
        if new is None:
            raise InputError(f"{table.source.name}: analyte '{spec.name}' of the model is missing")
        if normalise_unit(new.unit) != normalise_unit(spec.unit):
            raise InputError(
                f"{table.source.name}: analyte '{spec.name}' is in '{new.unit}' here but in "
                f"'{spec.unit}' in the model, and no conversion is known; give its unit "
                f"in [units]")
        x = table.values.loc[used, spec.name].to_numpy(dtype=float)
        x = x[np.isfinite(x) & (x > 0)]
        ref = model.values[spec.name].to_numpy(dtype=float)
        ref = ref[np.isfinite(ref) & (ref > 0)]
        if x.size < 5 or ref.size < 5:
            continue
        ratio = float(np.median(x) / np.median(ref))
        lo, hi = np.quantile(ref, [0.001, 0.999])
        outside = float(((x < lo) | (x > hi)).mean())
        if (ratio > UNIT_FACTOR or ratio < 1 / UNIT_FACTOR) and outside >= 0.8:
            raise InputError(
                f"{table.source.name}: analyte '{spec.name}' looks like another unit: its median "
                f"{np.median(x):.4g} is {ratio:.3g} times the model's {np.median(ref):.4g} "
                f"{spec.unit}; give its unit in [units]")

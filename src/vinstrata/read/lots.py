"""The data every stage passes on: a validated lot table and its analyte specs.

These are plain frozen dataclasses over pandas DataFrames; :mod:`vinstrata.read.validate`
builds them, every later stage reads them.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from vinstrata.read.cells import MISSING
from vinstrata.read.ingest import Source

if TYPE_CHECKING:
    from vinstrata.config import Config

USED = "used"  # the status of a row that goes on
UNASSIGNED = "unassigned"  # the style of a lot that fits no style


@dataclass(frozen=True)
class AnalyteSpec:
    """One analyte column as the engine uses it.

    Attributes
    ----------
    name : str
        The analyte's name in every output (as written in the config).
    column : str
        The header it was read from ("" for a derived analyte).
    kind : str
        Catalogue key, or "" for a generic analyte.
    label : str
        Readable words for names and axes.
    unit : str
        Canonical unit of the stored values.
    unit_in : str
        Unit as written in the file.
    factor : float
        Multiplier from ``unit_in`` to ``unit``.
    bounds : tuple of float or None
        Physically possible range in ``unit``.
    concentration : bool
        Negative values are impossible.
    """

    name: str
    column: str
    kind: str
    label: str
    unit: str
    unit_in: str
    factor: float
    bounds: tuple[float, float] | None
    concentration: bool
    derived: bool = False

    def to_dict(self) -> dict[str, object]:
        return {
            "name": self.name, "column": self.column, "kind": self.kind, "label": self.label,
            "unit": self.unit, "unit_in": self.unit_in, "factor": self.factor,
            "bounds": list(self.bounds) if self.bounds else None,
            "concentration": self.concentration, "derived": self.derived,
        }

    @classmethod
    def from_dict(cls, data: dict[str, object]) -> AnalyteSpec:
        bounds = data.get("bounds")
        return cls(
            name=str(data["name"]), column=str(data["column"]), kind=str(data["kind"]),
            label=str(data["label"]), unit=str(data["unit"]), unit_in=str(data["unit_in"]),
            factor=float(data["factor"]),  # type: ignore[arg-type]
            bounds=(float(bounds[0]), float(bounds[1])) if bounds else None,  # type: ignore[index]
            concentration=bool(data["concentration"]), derived=bool(data.get("derived", False)),
        )


@dataclass(frozen=True)
class LotTable:
    """A validated lot table: every input row, its status, values in canonical units.

    All frames share one RangeIndex, one row per input data row, in file order.

    Attributes
    ----------
    ids : DataFrame
        ``row`` (file row number), ``lot_id``, ``status``, ``detail``, ``grade``.
    values : DataFrame
        One float column per analyte, canonical units; NaN where missing.
    flags : DataFrame
        One column per analyte: cell state (``ok``, ``missing``,
        ``censored_below``, ``censored_above``, ``non_numeric``).
    extra : DataFrame
        Passthrough columns, text as written.
    specs : tuple of AnalyteSpec
    source : Source
    blank_rows : int
        Entirely blank file rows skipped (they hold no lot).
    decimal : str
        The decimal mark the numbers were read with.
    """

    ids: pd.DataFrame
    values: pd.DataFrame
    flags: pd.DataFrame
    extra: pd.DataFrame
    specs: tuple[AnalyteSpec, ...]
    source: Source
    blank_rows: int = 0
    decimal: str = "."
    has_grade: bool = False

    @property
    def analytes(self) -> tuple[str, ...]:
        return tuple(s.name for s in self.specs)

    @property
    def used(self) -> np.ndarray:
        """Boolean mask of the rows with status ``used``."""
        return (self.ids["status"] == USED).to_numpy()

    @property
    def n_rows(self) -> int:
        return len(self.ids)


def observed(values: pd.DataFrame, flags: pd.DataFrame, analyte: str) -> np.ndarray:
    """An analyte's measured (or censored) values, NaN where the cell was missing.

    Missing cells are imputed for the styles only; every statistic reads them
    through this function, so that imputed values never count as measured.
    """
    out = values[analyte].to_numpy(dtype=float).copy()
    out[(flags[analyte] == MISSING).to_numpy()] = np.nan
    return out


def load_lot_batches(path: str, config: Config, batch_rows: int,
                     require_grade: bool = False) -> Iterator[LotTable]:
    """Read and validate a lot file (or dataset) in batches of at most ``batch_rows`` rows.

    The batches, one after the other, hold what
    ``load_lots(path, config, require_grade=require_grade)`` holds: the same rows
    in the same order with the same row numbers, values, cell states, statuses
    and details. To that end the table-wide choices are made over the whole
    file before the first batch is handed out (:func:`vinstrata.read.validate.settle`:
    one extra reading pass, and a second one only when a column holds censored
    tokens such as ``ND``): the decimal mark, and what such a token stands for.
    Analytes that the config does not name are found in the first batch.

    Duplicate lot ids are found within a batch only: a lot id on rows of two
    batches is ``used`` in both. Finding those is the consumer's job (the
    ``lot_id`` column of each batch's ``ids``), as is reporting rejected rows
    (no warning is given here).

    Parameters
    ----------
    path : str
        A lot file (csv, tsv, xlsx, parquet), a folder of them (hive-partitioned
        or not) or a glob pattern (see :mod:`vinstrata.read.ingest`).
    config : Config
        The run configuration (``[columns]``, ``[ingest]``, units, bounds).
    batch_rows : int
        At most this many rows per batch; memory stays bounded by it (a workbook
        is read whole first).
    require_grade : bool
        Reject rows without a grade (``missing_grade``).

    Yields
    ------
    LotTable
        One batch of rows, each with its status; every batch carries the same
        ``source`` (its SHA-256 covers the whole file or dataset).

    Raises
    ------
    InputError
        As :func:`vinstrata.read.validate.load_lots`, when the batch holding the
        fault is reached (a fault in the file before the first batch is handed out).
    """
    from vinstrata.read.ingest import ReadLimits, read_batches
    from vinstrata.read.validate import settle, validate_batches

    limits = ReadLimits.from_config(config.ingest)

    def batches() -> Iterator:
        return read_batches(path, batch_rows, sheet=config.ingest.sheet,
                            delimiter=config.ingest.delimiter, limits=limits)

    settled = settle(batches, config, require_grade)
    yield from validate_batches(batches(), settled, config, require_grade)

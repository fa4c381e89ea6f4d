"""Reading: lot files in, validated lot tables out (the front door of every command).

Modules, in the order the stage runs::

    ingest      Reading lot tables from disk: CSV / TSV, Excel (.xlsx) and Parquet.
    cells       Turning lab cells written as text into numbers, with a state per cell.
    analytes    The catalogue of analytes the engine knows by name.
    units       Unit conversion to the canonical unit of each catalogue analyte.
    validate    From text cells to a validated lot table in canonical units.
    derive      Derived analytes, computed from measured ones (opt-in, ``[derived] add``).
    lots        The data every stage passes on: a validated lot table and its analyte specs.
    quality     The data-quality account of a lot table: what was read, used, rejected, repaired.
    hints       Why most rows of a lot table were rejected: the unit a column is likely in.
"""

from vinstrata.lazy import attach

_NAMES = {
    "Source": "vinstrata.read.ingest",
    "RawTable": "vinstrata.read.ingest",
    "read_table": "vinstrata.read.ingest",
    "read_batches": "vinstrata.read.ingest",
    "lot_files": "vinstrata.read.ingest",
    "raw_from_frame": "vinstrata.read.ingest",
    "detect_delimiter": "vinstrata.read.ingest",
    "detect_decimal": "vinstrata.read.cells",
    "parse_cells": "vinstrata.read.cells",
    "Kind": "vinstrata.read.analytes",
    "normalise_name": "vinstrata.read.analytes",
    "split_unit": "vinstrata.read.analytes",
    "kind_for": "vinstrata.read.analytes",
    "label_for": "vinstrata.read.analytes",
    "normalise_unit": "vinstrata.read.units",
    "factor_to_canonical": "vinstrata.read.units",
    "header_index": "vinstrata.read.validate",
    "numeric_columns": "vinstrata.read.validate",
    "resolve_specs": "vinstrata.read.validate",
    "validate": "vinstrata.read.validate",
    "load_lots": "vinstrata.read.validate",
    "lots_from_frame": "vinstrata.read.validate",
    "Settled": "vinstrata.read.validate",
    "settle": "vinstrata.read.validate",
    "validate_batches": "vinstrata.read.validate",
    "molecular_so2": "vinstrata.read.derive",
    "free_so2_for_molecular": "vinstrata.read.derive",
    "add_derived": "vinstrata.read.derive",
    "USED": "vinstrata.read.lots",
    "UNASSIGNED": "vinstrata.read.lots",
    "AnalyteSpec": "vinstrata.read.lots",
    "LotTable": "vinstrata.read.lots",
    "observed": "vinstrata.read.lots",
    "load_lot_batches": "vinstrata.read.lots",
    "row_status": "vinstrata.read.quality",
    "reason_counts": "vinstrata.read.quality",
    "summary": "vinstrata.read.quality",
    "analyte_summary": "vinstrata.read.quality",
    "describe": "vinstrata.read.quality",
    "UnitHint": "vinstrata.read.hints",
    "unit_hints": "vinstrata.read.hints",
    "rejection_hints": "vinstrata.read.hints",
    "display_unit": "vinstrata.read.hints",
}

__getattr__, __all__ = attach(__name__, _NAMES)

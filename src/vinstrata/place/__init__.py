"""Placing: new lots against the styles of a fitted model, with screening flags.

Modules, in the order the stage runs::

    match       Refusing new-lot files that do not fit the model: other columns, other units.
    context     What placing needs of a model, built once and reused for every batch.
    placing     Placing new lots against the styles of a fitted model.
    stream      Placing a new-lot file in batches, in bounded memory, with the whole file's results.
    cluster     Placing new lots on a Dask cluster (the ``dask`` extra).
    neighbours  The nearest historical lots of new lots, and the grade bands among them.
    flags       New lots' analytes against their style: robust z, percentiles, and the driver flags.
    limits      Screening of lots against legal limits and a molecular SO2 target.
    text        The placements as a terminal table.
"""

from vinstrata.lazy import attach

_NAMES = {
    "check_columns": "vinstrata.place.match",
    "check_units": "vinstrata.place.match",
    "PlacingContext": "vinstrata.place.context",
    "placing_context": "vinstrata.place.context",
    "place_batch": "vinstrata.place.placing",
    "FileScan": "vinstrata.place.stream",
    "scan_file": "vinstrata.place.stream",
    "file_warnings": "vinstrata.place.stream",
    "check_file_units": "vinstrata.place.stream",
    "PlaceTally": "vinstrata.place.stream",
    "PLACEMENT_COLUMNS": "vinstrata.place.placing",
    "INDICATION": "vinstrata.place.placing",
    "Placements": "vinstrata.place.placing",
    "place_lots": "vinstrata.place.placing",
    "Placed": "vinstrata.place.placing",
    "locate_lots": "vinstrata.place.placing",
    "join_near": "vinstrata.place.neighbours",
    "nearest_lots": "vinstrata.place.neighbours",
    "band_shares": "vinstrata.place.neighbours",
    "analyte_view": "vinstrata.place.flags",
    "DriverScale": "vinstrata.place.flags",
    "DriverView": "vinstrata.place.flags",
    "driver_scales": "vinstrata.place.flags",
    "driver_view": "vinstrata.place.flags",
    "balanced_cut": "vinstrata.place.flags",
    "mid_percentile": "vinstrata.place.flags",
    "pulls": "vinstrata.place.flags",
    "lot_colours": "vinstrata.place.flags",
    "short_flags": "vinstrata.place.flags",
    "CAUTION": "vinstrata.place.limits",
    "VA_EXCEPTIONS": "vinstrata.place.limits",
    "SULFITE_LINES": "vinstrata.place.limits",
    "limit_set": "vinstrata.place.limits",
    "normalise_colour": "vinstrata.place.limits",
    "Flag": "vinstrata.place.limits",
    "screen": "vinstrata.place.limits",
    "describe": "vinstrata.place.text",
}

__getattr__, __all__ = attach(__name__, _NAMES)

"""The data-quality account of a lot table: what was read, used, rejected, repaired.

Pure functions over a :class:`~vinstrata.read.lots.LotTable`; ``vinstrata check`` prints
and writes them, the briefing draws them. Every input row is counted exactly
once: rows read = used + rejected.
"""

from __future__ import annotations

import pandas as pd

from vinstrata.read import cells
from vinstrata.read.derive import DERIVED_STATE
from vinstrata.read.lots import USED, LotTable


def row_status(table: LotTable) -> pd.DataFrame:
    """One row per input row: ``row, lot_id, status, detail`` (file row numbers)."""
    return table.ids[["row", "lot_id", "status", "detail"]].copy()


def reason_counts(statuses: pd.Series) -> pd.Series:
    """Rejected rows per reason code (the part of the status before ':')."""
    rejected = statuses[statuses != USED]
    return rejected.str.split(":", n=1).str[0].value_counts().sort_index()


def rejection_note(table: LotTable, where: str) -> str | None:
    """The one warning line for a table's rejected rows, by reason; None when none was.

    Parameters
    ----------
    table : LotTable
        A validated lot table.
    where : str
        Where the reader finds the rejected rows one by one (``row_status.csv``).

    Returns
    -------
    str or None
    """
    counts = reason_counts(table.ids["status"])
    if not len(counts):
        return None
    parts = ", ".join(f"{count} {reason}" for reason, count in counts.items())
    return (f"{table.source.name}: {int(counts.sum())} of {table.n_rows} rows rejected "
            f"({parts}); see {where}")


def summary(table: LotTable) -> pd.DataFrame:
    """Whole-table figures as ``metric, value`` rows."""
    status = table.ids["status"]
    used = int((status == USED).sum())
    rows = [
        ("file", table.source.name), ("sha256", table.source.sha256),
        ("format", table.source.format), ("delimiter", table.source.delimiter or ""),
        ("encoding", table.source.encoding or ""), ("decimal_mark", table.decimal),
        ("rows_read", table.n_rows), ("blank_rows_skipped", table.blank_rows),
        ("rows_used", used), ("rows_rejected", table.n_rows - used),
    ]
    rows += [(f"rejected:{reason}", int(count)) for reason, count in reason_counts(status).items()]
    return pd.DataFrame(rows, columns=["metric", "value"]).astype({"value": str})


def analyte_summary(table: LotTable) -> pd.DataFrame:
    """Per analyte: unit conversion and cell counts.

    Columns: ``analyte, column, unit_in, unit, factor, converted, missing_used``
    (missing cells of used rows, imputed later), ``censored``, ``derived``
    (cells computed from other analytes), ``non_numeric``, ``negative``,
    ``out_of_range`` (rows rejected for this analyte).
    """
    used = table.used
    reasons = table.ids["status"]
    out = []
    for spec in table.specs:
        flags = table.flags[spec.name]
        censored = flags.isin([cells.CENSORED_BELOW, cells.CENSORED_ABOVE])
        out.append({
            "analyte": spec.name, "column": spec.column or "(derived)",
            "unit_in": spec.unit_in, "unit": spec.unit, "factor": spec.factor,
            "converted": int(spec.factor != 1.0) * int(flags.isin(
                [cells.OK, cells.CENSORED_BELOW, cells.CENSORED_ABOVE]).sum()),
            "missing_used": int(((flags == cells.MISSING) & used).sum()),
            "censored": int(censored.sum()),
            "derived": int((flags == DERIVED_STATE).sum()),
            "non_numeric": int((reasons == f"non_numeric:{spec.name}").sum()),
            "negative": int((reasons == f"negative:{spec.name}").sum()),
            "out_of_range": int((reasons == f"out_of_range:{spec.name}").sum()),
        })
    return pd.DataFrame(out)


def describe(table: LotTable) -> str:
    """The summary as terminal text (about 80 columns)."""
    status = table.ids["status"]
    used = int((status == USED).sum())
    lines = [
        f"{table.source.name}: {table.n_rows} rows read, {used} used, "
        f"{table.n_rows - used} rejected"
        + (f" ({table.blank_rows} blank rows skipped)" if table.blank_rows else ""),
    ]
    counts = reason_counts(status)
    if len(counts):
        lines.append("  rejected by reason:")
        lines += [f"    {reason:<24} {count:>6}" for reason, count in counts.items()]
    lines.append("  analytes (unit in file -> canonical unit; missing cells of used rows are "
                 "imputed):")
    lines.append(f"    {'analyte':<22} {'unit':<24} {'missing':>7} {'censored':>8} "
                 f"{'rejected':>8}")
    for row in analyte_summary(table).itertuples():
        unit = row.unit if row.unit_in == row.unit else f"{row.unit_in} -> {row.unit}"
        rejected = row.non_numeric + row.negative + row.out_of_range
        lines.append(f"    {row.analyte[:22]:<22} {unit[:24]:<24} {row.missing_used:>7} "
                     f"{row.censored:>8} {rejected:>8}")
    return "\n".join(lines)

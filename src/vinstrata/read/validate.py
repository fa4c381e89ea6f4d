"""From text cells to a validated lot table in canonical units.

:func:`validate` is the front door every command goes through, for training
lots and new lots alike: it matches the configured columns, parses cells
(:mod:`vinstrata.read.cells`), converts units (:mod:`vinstrata.read.units`), gives every
row a status and adds the derived analytes (:mod:`vinstrata.read.derive`). No row is
dropped: a row that cannot be used keeps its place with a rejection reason.

Statuses (the first that applies wins; ``detail`` says more):

=========================  =====================================================
``used``                   the row goes on to segmentation, profiles or placing
``missing_lot_id``         the lot id cell is empty
``duplicate_lot_id``       the lot id appeared on an earlier row (or on any other
                           row with ``ingest.duplicate_ids = "reject_all"``)
``non_numeric:<column>``   a cell is neither a number, missing nor censored
``missing_grade``          no grade where the command needs one
``negative:<column>``      a negative concentration
``out_of_range:<column>``  outside the physically possible range of the analyte
                           (see :mod:`vinstrata.read.analytes` for each range's source)
``free_so2_above_total``   free SO2 greater than total SO2
``too_many_missing``       more than ``ingest.max_missing_share`` of the
                           analytes missing
=========================  =====================================================

Missing cells in used rows are imputed later, inside the fitted transform
(:mod:`vinstrata.segment.transform`), and flagged per cell.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from vinstrata.config import Config
from vinstrata.errors import InputError
from vinstrata.progress import Reporter
from vinstrata.read import cells as cellmod
from vinstrata.read.analytes import (
    KINDS_BY_KEY,
    Kind,
    kind_for,
    label_for,
    normalise_name,
    split_unit,
)
from vinstrata.read.derive import add_derived
from vinstrata.read.hints import rejection_hints
from vinstrata.read.ingest import RawTable, ReadLimits, raw_from_frame, read_table
from vinstrata.read.lots import USED, AnalyteSpec, LotTable
from vinstrata.read.quality import rejection_note
from vinstrata.read.units import factor_to_canonical

ROW_IDS = "@row"  # [columns] lot_id for a table without lot ids: "row<N>" from the file row

# --------------------------------------------------------------------------- column matching


def header_index(headers: list[str]) -> dict[str, list[str]]:
    """Normalised name (with and without a bracketed unit) -> the headers it matches."""
    index: dict[str, list[str]] = {}
    for header in headers:
        keys = {normalise_name(header), normalise_name(split_unit(header)[0])}
        for key in keys:
            index.setdefault(key, []).append(header)
    return index


def _find_column(name: str, index: dict[str, list[str]], headers: list[str], where: str) -> str:
    if name in headers:
        return name
    found = sorted(set(index.get(normalise_name(name), [])))
    if len(found) == 1:
        return found[0]
    if len(found) > 1:
        raise InputError(f"{where}: column '{name}' matches several headers: {', '.join(found)}")
    shown = ", ".join(headers[:25]) + (" ..." if len(headers) > 25 else "")
    raise InputError(f"{where}: column '{name}' not found (columns: {shown})")


_NOT_CHEMISTRY = {"vintage", "year", "millesime", "jahrgang", "annata", "anada", "date", "id",
                  "row", "index", "tank", "batch", "block"}


def numeric_columns(raw: RawTable, taken: set[str], decimal: str = "auto") -> list[str]:
    """Columns that can be chemistry: at least 90 % numbers, and not a year or an id.

    Used to find the analytes when the config names none, and to name the
    unexpected columns of a new-lot file. ``decimal`` "auto" detects it from the
    candidate columns, as :func:`validate` does.
    """
    candidates = [h for h in raw.cells.columns
                  if h not in taken and normalise_name(split_unit(h)[0]) not in _NOT_CHEMISTRY]
    if decimal == "auto":
        decimal = cellmod.detect_decimal([raw.cells[h] for h in candidates])
    chosen = []
    for header in candidates:
        values, states = cellmod.parse_cells(raw.cells[header], decimal)
        filled = states != cellmod.MISSING
        if not filled.sum() or (states[filled] == cellmod.NON_NUMERIC).mean() > 0.1:
            continue
        known = values[np.isfinite(values)]
        if known.size and np.all(known == np.round(known)) and np.all(
                (known >= 1900) & (known <= 2100)):
            continue  # whole numbers between 1900 and 2100: a year, not an analyte
        chosen.append(header)
    return chosen


def _config_key(table: dict[str, object], name: str) -> object | None:
    if name in table:
        return table[name]
    for key, value in table.items():
        if normalise_name(key) == normalise_name(name):
            return value
    return None


def _check_table_keys(config: Config, names: list[str]) -> None:
    known = {normalise_name(n) for n in names}
    for section in ("units", "kinds", "bounds"):
        for key in getattr(config, section):
            if normalise_name(key) not in known:
                raise InputError(
                    f"{config.source}: key '{section}.{key}': '{key}' is not one of the analytes "
                    f"({', '.join(names)})"
                )


def resolve_specs(config: Config, headers: dict[str, str]) -> list[AnalyteSpec]:
    """Build the analyte specs from config and matched headers (name -> header)."""
    specs = []
    for name, header in headers.items():
        kind_key = _config_key(dict(config.kinds), name)
        if kind_key is not None:
            if kind_key not in KINDS_BY_KEY:
                known = ", ".join(sorted(KINDS_BY_KEY))
                raise InputError(
                    f"{config.source}: key 'kinds.{name}': expected a catalogue analyte "
                    f"(one of {known}), got '{kind_key}'"
                )
            kind: Kind | None = KINDS_BY_KEY[str(kind_key)]
        else:
            kind = kind_for(name) or kind_for(header)
        written_unit = _config_key(dict(config.units), name)
        unit_in = str(written_unit) if written_unit is not None else split_unit(header)[1]
        if kind is not None:
            try:
                factor = factor_to_canonical(kind, unit_in)
            except KeyError as exc:
                key = f"units.{name}" if written_unit is not None else f"column '{header}'"
                raise InputError(f"{config.source}: {key}: {exc.args[0]}") from None
            unit = kind.unit
            bounds: tuple[float, float] | None = kind.bounds
            concentration = kind.concentration
        else:
            factor, unit = 1.0, (unit_in or "")
            bounds, concentration = None, False
        override = _config_key(dict(config.bounds), name)
        if override is not None:
            bounds = override  # type: ignore[assignment]
        specs.append(AnalyteSpec(
            name=name, column=header, kind=kind.key if kind else "", label=label_for(name, kind),
            unit=unit, unit_in=unit_in or unit, factor=factor, bounds=bounds,
            concentration=concentration,
        ))
    return specs


# --------------------------------------------------------------------------- row checks


def _fmt(value: float) -> str:
    return f"{value:.6g}"


class _Statuses:
    """Collects the first rejection reason of each row."""

    def __init__(self, n: int, rows: list[int]) -> None:
        self.status = np.full(n, USED, dtype=object)
        self.detail = np.full(n, "", dtype=object)
        self.rows = rows

    def reject(self, mask: np.ndarray, reason: str, detail: Callable[[int], str]) -> None:
        """Give ``reason`` to the rows in ``mask`` not rejected yet; ``detail(i)`` words it."""
        fresh = np.asarray(mask, dtype=bool) & (self.status == USED)
        for i in np.flatnonzero(fresh):
            self.status[i] = reason
            self.detail[i] = detail(int(i))


def _check_ids(stat: _Statuses, lot_ids: pd.Series, lot_col: str, policy: str) -> None:
    rows = stat.rows
    stat.reject((lot_ids == "").to_numpy(), "missing_lot_id",
                lambda i: f"row {rows[i]}: no lot id in column '{lot_col}'")
    present = lot_ids != ""
    keep = False if policy == "reject_all" else "first"
    dup = (lot_ids.duplicated(keep=keep) & present).to_numpy()
    if not dup.any():
        return
    first_row: dict[str, int] = {}
    for i, lot in enumerate(lot_ids):
        first_row.setdefault(lot, rows[i])

    def detail(i: int) -> str:
        lot, first = lot_ids.iloc[i], first_row[lot_ids.iloc[i]]
        if first != rows[i]:
            return f"row {rows[i]}: lot id '{lot}' also on row {first}"
        return f"row {rows[i]}: lot id '{lot}' appears more than once"

    stat.reject(dup, "duplicate_lot_id", detail)


def _check_numeric(stat: _Statuses, states: np.ndarray, text: np.ndarray, name: str,
                   column: str) -> None:
    rows = stat.rows
    stat.reject(states == cellmod.NON_NUMERIC, f"non_numeric:{name}",
                lambda i: f"row {rows[i]}, column '{column}': '{_short(text[i])}' is not a number")


def _check_range(stat: _Statuses, v: np.ndarray, spec: AnalyteSpec) -> None:
    rows, unit = stat.rows, spec.unit
    finite = np.isfinite(v)
    if spec.concentration:
        stat.reject(finite & (v < 0), f"negative:{spec.name}",
                    lambda i: f"row {rows[i]}, column '{spec.column}': {_fmt(v[i])} {unit} "
                    "is negative")
    if spec.bounds is not None:
        lo, hi = spec.bounds
        stat.reject(finite & ((v < lo) | (v > hi)), f"out_of_range:{spec.name}",
                    lambda i: f"row {rows[i]}, column '{spec.column}': {_fmt(v[i])} {unit} is "
                    f"outside the possible {_fmt(lo)}-{_fmt(hi)} {unit}")


def _check_so2(stat: _Statuses, values: dict[str, np.ndarray], specs: list[AnalyteSpec]) -> None:
    by_kind = {s.kind: s.name for s in specs if s.kind}
    if "free_so2" not in by_kind or "total_so2" not in by_kind:
        return
    rows = stat.rows
    free, total = values[by_kind["free_so2"]], values[by_kind["total_so2"]]
    over = np.isfinite(free) & np.isfinite(total) & (free > total + 1e-9)
    stat.reject(over, "free_so2_above_total",
                lambda i: f"row {rows[i]}: free SO2 {_fmt(free[i])} mg/L is above total SO2 "
                f"{_fmt(total[i])} mg/L")


def _check_missing(stat: _Statuses, flags: dict[str, np.ndarray], n_analytes: int,
                   share: float) -> None:
    rows = stat.rows
    n_missing = sum((f == cellmod.MISSING).astype(int) for f in flags.values())
    allowed = math.floor(share * n_analytes + 1e-9)
    too_many = (n_missing > allowed) | (n_missing == n_analytes)
    stat.reject(too_many, "too_many_missing",
                lambda i: f"row {rows[i]}: {n_missing[i]} of {n_analytes} analytes missing "
                f"(at most {allowed} allowed)")


def validate(raw: RawTable, config: Config, require_grade: bool = True) -> LotTable:
    """Validate a raw table against the config.

    Parameters
    ----------
    raw : RawTable
        Text cells from :func:`vinstrata.read.ingest.read_table`.
    config : Config
    require_grade : bool
        Rows without a grade are rejected (``missing_grade``) when True and the
        config names a grade column; placing new lots passes False.

    Returns
    -------
    LotTable

    Raises
    ------
    InputError
        A configured column is missing, a unit is unknown for its analyte.
    """
    columns = _match_columns(raw, config, require_grade)
    cells = _parse_cells(raw, columns, config.ingest.decimal, config.ingest.censored)
    statuses = _check_rows(raw, columns, cells, config.ingest.duplicate_ids,
                           config.ingest.max_missing_share, require_grade)
    return add_derived(_build_table(raw, columns, cells, statuses), config.derived)


@dataclass(frozen=True)
class _Columns:
    """The file columns the config names: lot id ("" for none), grade ("" for none), the rest."""

    lot: str
    grade: str
    grade_name: str  # the grade column as the config names it
    passthrough: dict[str, str]  # config name -> header
    specs: list[AnalyteSpec]


def _match_columns(raw: RawTable, config: Config, require_grade: bool) -> _Columns:
    """Find the configured columns among the headers, and the analytes' specs."""
    name = raw.source.name
    headers = list(raw.cells.columns)
    index = header_index(headers)
    cols = config.columns
    lot_col = "" if cols.lot_id == ROW_IDS else _find_column(cols.lot_id, index, headers, name)
    grade_col = ""
    if cols.grade:
        try:
            grade_col = _find_column(cols.grade, index, headers, name)
        except InputError:
            if require_grade:
                raise
    passthrough = {p: _find_column(p, index, headers, name) for p in cols.passthrough}
    taken = {lot_col, grade_col, *passthrough.values()} - {""}
    analyte_names = list(cols.analytes) or numeric_columns(raw, taken, config.ingest.decimal)
    if not analyte_names:
        raise InputError(f"{name}: no analyte columns (name them in [columns] analytes)")
    _check_table_keys(config, analyte_names)
    matched = {a: _find_column(a, index, headers, name) for a in analyte_names}
    clash = [a for a, h in matched.items() if h in taken]
    if clash:
        raise InputError(f"{name}: column '{matched[clash[0]]}' is named twice in [columns]")
    return _Columns(lot=lot_col, grade=grade_col, grade_name=cols.grade, passthrough=passthrough,
                    specs=resolve_specs(config, matched))


@dataclass(frozen=True)
class _Cells:
    """The parsed cells: lot ids, canonical values and cell states, grades."""

    lot_ids: pd.Series
    values: dict[str, np.ndarray]
    flags: dict[str, np.ndarray]
    grade: np.ndarray
    grade_states: np.ndarray | None  # None without a grade column
    decimal: str


def _parse_cells(raw: RawTable, columns: _Columns, decimal: str, censored: str) -> _Cells:
    """Numbers from the text cells, in canonical units, with the decimal mark detected."""
    if decimal == "auto":
        numeric = [raw.cells[s.column] for s in columns.specs]
        if columns.grade:
            numeric.append(raw.cells[columns.grade])
        decimal = cellmod.detect_decimal(numeric)
    if columns.lot:
        lot_ids = raw.cells[columns.lot].astype(str).str.strip()
    else:  # a table without lot ids: each lot is known by its file row
        lot_ids = pd.Series([f"row{r}" for r in raw.rows], dtype=object)
    values, flags = {}, {}
    for spec in columns.specs:
        parsed, states = cellmod.parse_cells(raw.cells[spec.column], decimal, censored)
        values[spec.name] = parsed * spec.factor
        flags[spec.name] = states
    grade, grade_states = np.full(len(raw.cells), np.nan), None
    if columns.grade:
        grade, grade_states = cellmod.parse_cells(raw.cells[columns.grade], decimal)
        bad = (grade_states != cellmod.OK) & (grade_states != cellmod.MISSING)
        grade[bad] = np.nan
        grade_states = np.where(bad, cellmod.NON_NUMERIC, grade_states)
    return _Cells(lot_ids=lot_ids, values=values, flags=flags, grade=grade,
                  grade_states=grade_states, decimal=decimal)


def _check_rows(raw: RawTable, columns: _Columns, cells: _Cells, duplicate_ids: str,
                max_missing_share: float, require_grade: bool) -> _Statuses:
    """Every row's status: the first rejection reason that applies, in the documented order."""
    stat = _Statuses(len(raw.cells), raw.rows)
    _check_ids(stat, cells.lot_ids, columns.lot, duplicate_ids)
    for spec in columns.specs:
        _check_numeric(stat, cells.flags[spec.name], raw.cells[spec.column].to_numpy(),
                       spec.name, spec.column)
    if cells.grade_states is not None:
        grade_col, rows = columns.grade, raw.rows
        _check_numeric(stat, cells.grade_states, raw.cells[grade_col].to_numpy(),
                       columns.grade_name, grade_col)
        if require_grade:
            stat.reject(cells.grade_states == cellmod.MISSING, "missing_grade",
                        lambda i: f"row {rows[i]}: no grade in column '{grade_col}'")
    for spec in columns.specs:
        _check_range(stat, cells.values[spec.name], spec)
    _check_so2(stat, cells.values, columns.specs)
    _check_missing(stat, cells.flags, len(columns.specs), max_missing_share)
    return stat


def _build_table(raw: RawTable, columns: _Columns, cells: _Cells, stat: _Statuses
                 ) -> LotTable:
    """The lot table: ids and statuses, values, cell states and passthrough columns."""
    ids = pd.DataFrame({
        "row": np.asarray(raw.rows, dtype=int), "lot_id": cells.lot_ids.to_numpy(dtype=object),
        "status": stat.status, "detail": stat.detail, "grade": cells.grade,
    })
    extra = pd.DataFrame({p: raw.cells[h].to_numpy(dtype=object)
                          for p, h in columns.passthrough.items()}, index=ids.index)
    return LotTable(
        ids=ids, values=pd.DataFrame(cells.values, index=ids.index),
        flags=pd.DataFrame(cells.flags, index=ids.index), extra=extra,
        specs=tuple(columns.specs), source=raw.source, blank_rows=raw.blank_rows,
        decimal=cells.decimal, has_grade=bool(columns.grade),
    )


def _short(text: object) -> str:
    text = " ".join(str(text).split())
    return text if len(text) <= 30 else text[:27] + "..."


def load_lots(path: str, config: Config, require_grade: bool = True,
              reporter: Reporter | None = None) -> LotTable:
    """Read and validate a lot file: :func:`read_table` then :func:`validate`.

    Parameters
    ----------
    path : str
        The lot file (csv, tsv, xlsx or parquet).
    config : Config
        The run configuration (``[columns]``, ``[ingest]``, units, bounds).
    require_grade : bool
        Reject rows without a grade (``missing_grade``).
    reporter : Reporter, optional
        Receives one warning when rows were rejected; without one it reaches
        Python's :mod:`warnings` as a :class:`~vinstrata.errors.VinstrataWarning`.

    Returns
    -------
    LotTable
        Every row of the file, each with its status.
    """
    raw = read_table(path, sheet=config.ingest.sheet, delimiter=config.ingest.delimiter,
                     limits=ReadLimits.from_config(config.ingest))
    table = validate(raw, config, require_grade=require_grade)
    _warn_rejections(table, reporter)
    return table


def lots_from_frame(frame: pd.DataFrame, config: Config, require_grade: bool = True,
                    reporter: Reporter | None = None, name: str = "DataFrame") -> LotTable:
    """Validate a pandas DataFrame of lots, as :func:`load_lots` validates a file.

    The frame's cells are turned into text (:func:`vinstrata.read.ingest.raw_from_frame`)
    and go through the same front door as a file: columns named as the config
    names them, units, censored values written as text (``"<0.1"``), a status
    for every row. The index is not read; row numbers count from 2 as in the
    frame written as CSV (header = row 1).

    Parameters
    ----------
    frame : DataFrame
        One row per lot.
    config : Config
    require_grade : bool
        Reject rows without a grade (``missing_grade``).
    reporter : Reporter, optional
        Receives the rejection warnings (see :func:`load_lots`).
    name : str
        What messages call the table.

    Returns
    -------
    LotTable
        Its ``source.sha256`` hashes the frame's cells as CSV text: the same
        frame gives the same hash.
    """
    table = validate(raw_from_frame(frame, name), config, require_grade=require_grade)
    _warn_rejections(table, reporter)
    return table


def _warn_rejections(table: LotTable, reporter: Reporter | None) -> None:
    """Why most rows were rejected (unit hints first), then the rejected rows by reason."""
    rep = reporter or Reporter()
    for line in rejection_hints(table):
        rep.warn(line)
    note = rejection_note(table, "the status and detail columns of the table's ids")
    if note:
        rep.warn(note)

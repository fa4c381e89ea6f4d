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
from collections.abc import Callable, Iterable, Iterator
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
from vinstrata.read.ingest import (
    RawTable,
    ReadLimits,
    _cell_text,
    number_texts,
    raw_from_frame,
    read_table,
)
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

    def __init__(self, n: int, rows: list[int], where: Callable[[int], str] | None = None
                 ) -> None:
        self.open = np.ones(n, dtype=bool)  # not rejected yet
        self.reasons: dict[int, str] = {}
        self.details: dict[int, str] = {}
        self.rows = rows
        self.where = where or (lambda row: f"row {row}")

    def at(self, i: int) -> str:
        """Row ``i`` as a detail names it: "row 17" (with its file in a dataset)."""
        return self.where(self.rows[i])

    def reject(self, mask: np.ndarray, reason: str, detail: Callable[[int], str]) -> None:
        """Give ``reason`` to the rows in ``mask`` not rejected yet; ``detail(i)`` words it."""
        fresh = np.flatnonzero(np.asarray(mask, dtype=bool) & self.open)
        self.open[fresh] = False
        for i in fresh.tolist():
            self.reasons[i] = reason
            self.details[i] = detail(i)

    def columns(self) -> tuple[pd.Series, pd.Series]:
        """The status and detail columns, as text (most rows share the one status)."""
        n = len(self.open)
        names = [USED, *dict.fromkeys(self.reasons.values())]
        code = {name: k for k, name in enumerate(names)}
        status = np.zeros(n, dtype=np.int32)
        detail = np.zeros(n, dtype=np.int32)
        rejected = np.fromiter(self.reasons, dtype=np.int64, count=len(self.reasons))
        status[rejected] = [code[r] for r in self.reasons.values()]
        detail[rejected] = np.arange(1, rejected.size + 1)
        return (_text_codes(status, names),
                _text_codes(detail, ["", *self.details.values()]))


def _text_codes(codes: np.ndarray, names: list[str]) -> pd.Series:
    import pyarrow as pa

    arr = pa.DictionaryArray.from_arrays(pa.array(codes, type=pa.int32()),
                                         pa.array(names, type=pa.string()))
    return pd.Series(pd.array(arr.cast(pa.string()), dtype=str))


def _check_ids(stat: _Statuses, lot_ids: pd.Series, lot_col: str, policy: str) -> None:
    rows, at = stat.rows, stat.at
    stat.reject((lot_ids == "").to_numpy(dtype=bool), "missing_lot_id",
                lambda i: f"{at(i)}: no lot id in column '{lot_col}'")
    present = lot_ids != ""
    keep = False if policy == "reject_all" else "first"
    dup = (lot_ids.duplicated(keep=keep) & present).to_numpy(dtype=bool)
    if not dup.any():
        return
    first_row: dict[str, int] = {}
    for i, lot in enumerate(lot_ids):
        first_row.setdefault(lot, rows[i])

    def detail(i: int) -> str:
        lot, first = lot_ids.iloc[i], first_row[lot_ids.iloc[i]]
        if first != rows[i]:
            return f"{at(i)}: lot id '{lot}' also on row {first}"
        return f"{at(i)}: lot id '{lot}' appears more than once"

    stat.reject(dup, "duplicate_lot_id", detail)


def _check_numeric(stat: _Statuses, codes: np.ndarray, cells: pd.Series, name: str,
                   column: str) -> None:
    at = stat.at
    stat.reject(codes == cellmod.C_NON_NUMERIC, f"non_numeric:{name}",
                lambda i: f"{at(i)}, column '{column}': '{_short(_cell_text(cells.iloc[i]))}' "
                "is not a number")


def _check_range(stat: _Statuses, v: np.ndarray, spec: AnalyteSpec) -> None:
    at, unit = stat.at, spec.unit
    finite = np.isfinite(v)
    if spec.concentration:
        stat.reject(finite & (v < 0), f"negative:{spec.name}",
                    lambda i: f"{at(i)}, column '{spec.column}': {_fmt(v[i])} {unit} "
                    "is negative")
    if spec.bounds is not None:
        lo, hi = spec.bounds
        stat.reject(finite & ((v < lo) | (v > hi)), f"out_of_range:{spec.name}",
                    lambda i: f"{at(i)}, column '{spec.column}': {_fmt(v[i])} {unit} is "
                    f"outside the possible {_fmt(lo)}-{_fmt(hi)} {unit}")


def _check_so2(stat: _Statuses, values: dict[str, np.ndarray], specs: list[AnalyteSpec]) -> None:
    by_kind = {s.kind: s.name for s in specs if s.kind}
    if "free_so2" not in by_kind or "total_so2" not in by_kind:
        return
    at = stat.at
    free, total = values[by_kind["free_so2"]], values[by_kind["total_so2"]]
    over = np.isfinite(free) & np.isfinite(total) & (free > total + 1e-9)
    stat.reject(over, "free_so2_above_total",
                lambda i: f"{at(i)}: free SO2 {_fmt(free[i])} mg/L is above total SO2 "
                f"{_fmt(total[i])} mg/L")


def _check_missing(stat: _Statuses, flags: dict[str, np.ndarray], n_analytes: int,
                   share: float) -> None:
    at = stat.at
    n_missing = sum((f == cellmod.C_MISSING).astype(int) for f in flags.values())
    allowed = math.floor(share * n_analytes + 1e-9)
    too_many = (n_missing > allowed) | (n_missing == n_analytes)
    stat.reject(too_many, "too_many_missing",
                lambda i: f"{at(i)}: {n_missing[i]} of {n_analytes} analytes missing "
                f"(at most {allowed} allowed)")


def validate(raw: RawTable, config: Config, require_grade: bool = True) -> LotTable:
    """Validate a raw table against the config.

    Parameters
    ----------
    raw : RawTable
        Text cells from :func:`vinstrata.read.ingest.read_table` (typed numbers too).
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
    return _validate(raw, config, require_grade, None)


@dataclass(frozen=True)
class Settled:
    """What :func:`validate` otherwise takes from the whole table, settled for its batches.

    Attributes
    ----------
    analytes : tuple of str
        The analyte names (the config's, or those found in the first batch).
    decimal : str
        The decimal mark, detected over the whole table when ``ingest.decimal`` is "auto".
    bases : dict
        Header -> what a censored token without a number (``ND``) stands for,
        from the whole column (:func:`vinstrata.read.cells.token_base`).
    """

    analytes: tuple[str, ...]
    decimal: str
    bases: dict[str, float]


def settle(batches: Callable[[], Iterable[RawTable]], config: Config,
           require_grade: bool = False) -> Settled:
    """The table-wide choices of :func:`validate`, taken over every batch of a table.

    The analytes the config does not name are found in the first batch; the
    decimal mark and the value of censored tokens come from every batch, so that
    validating batch after batch gives the values of the table validated whole.

    Parameters
    ----------
    batches : callable
        Returns a fresh iterable of the table's batches (called once, or twice
        when a column holds censored tokens without a number).
    config : Config
    require_grade : bool
        As for :func:`validate`.

    Returns
    -------
    Settled
    """
    decimal = config.ingest.decimal
    commas = dots = 0
    analytes: tuple[str, ...] | None = None
    headers: list[str] = []
    numeric: list[str] = []
    tokened: dict[str, None] = {}
    for raw in batches():
        if analytes is None:
            columns = _match_columns(raw, config, require_grade)
            analytes = tuple(s.name for s in columns.specs)
            headers = [s.column for s in columns.specs]
            numeric = headers + ([columns.grade] if columns.grade else [])
        if decimal == "auto":
            found = cellmod.decimal_counts([raw.cells[h] for h in numeric])
            commas, dots = commas + found[0], dots + found[1]
        tokened.update((h, None) for h in headers
                       if h not in tokened and cellmod.has_tokens(raw.cells[h]))
    if decimal == "auto":
        decimal = "," if commas > dots else "."
    stats = {h: (np.inf, np.inf) for h in tokened}
    if stats:  # a second pass: the lowest limit and smallest value of the whole column
        for raw in batches():
            for header, (limit, measured) in stats.items():
                _, low, small = cellmod.censor_stats(raw.cells[header], decimal)
                stats[header] = (min(limit, low), min(measured, small))
    bases = {h: cellmod.token_base(limit, measured) for h, (limit, measured) in stats.items()}
    return Settled(analytes=analytes or (), decimal=decimal, bases=bases)


def validate_batches(batches: Iterable[RawTable], settled: Settled, config: Config,
                     require_grade: bool = False) -> Iterator[LotTable]:
    """Validate batch after batch with the table-wide choices of :func:`settle`.

    Parameters
    ----------
    batches : iterable of RawTable
    settled : Settled
    config : Config
    require_grade : bool

    Yields
    ------
    LotTable
        One per batch; duplicate lot ids are found within a batch only.
    """
    for raw in batches:
        yield _validate(raw, config, require_grade, settled)


def _validate(raw: RawTable, config: Config, require_grade: bool, settled: Settled | None
              ) -> LotTable:
    columns = _match_columns(raw, config, require_grade,
                             settled.analytes if settled is not None else None)
    decimal = settled.decimal if settled is not None else config.ingest.decimal
    cells = _parse_cells(raw, columns, decimal, config.ingest.censored,
                         settled.bases if settled is not None else None)
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


def _match_columns(raw: RawTable, config: Config, require_grade: bool,
                   analytes: tuple[str, ...] | None = None) -> _Columns:
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
    for key in raw.partition_keys:  # a dataset's partition folders pass through as columns
        if key not in taken and key not in passthrough:
            passthrough[key] = key
            taken.add(key)
    analyte_names = list(analytes or cols.analytes) or numeric_columns(raw, taken,
                                                                       config.ingest.decimal)
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
    flags: dict[str, np.ndarray]  # state codes (cells.STATES)
    grade: np.ndarray
    grade_states: np.ndarray | None  # state codes; None without a grade column
    decimal: str


def _texts(cells: pd.Series) -> pd.Series:
    """A column as text: typed numbers as their cells read (:func:`number_texts`)."""
    if cellmod.is_typed(cells):
        return pd.Series(number_texts(cells.to_numpy()), dtype=str)
    return cells.astype(str)


def _parse_cells(raw: RawTable, columns: _Columns, decimal: str, censored: str,
                 bases: dict[str, float] | None = None) -> _Cells:
    """Numbers from the text cells, in canonical units, with the decimal mark detected."""
    if decimal == "auto":
        numeric = [raw.cells[s.column] for s in columns.specs]
        if columns.grade:
            numeric.append(raw.cells[columns.grade])
        decimal = cellmod.detect_decimal(numeric)
    if columns.lot:
        lot_ids = _texts(raw.cells[columns.lot]).str.strip()
    else:  # a table without lot ids: each lot is known by its file row
        lot_ids = pd.Series([f"row{r}" for r in raw.rows], dtype=object)
    values, flags = {}, {}
    for spec in columns.specs:
        base = (bases or {}).get(spec.column)
        parsed, states = cellmod.parse_codes(raw.cells[spec.column], decimal, censored, base)
        values[spec.name] = parsed * spec.factor
        flags[spec.name] = states
    grade, grade_states = np.full(len(raw.cells), np.nan), None
    if columns.grade:
        grade, grade_states = cellmod.parse_codes(raw.cells[columns.grade], decimal)
        bad = (grade_states != cellmod.C_OK) & (grade_states != cellmod.C_MISSING)
        grade[bad] = np.nan
        grade_states = np.where(bad, cellmod.C_NON_NUMERIC, grade_states)
    return _Cells(lot_ids=lot_ids, values=values, flags=flags, grade=grade,
                  grade_states=grade_states, decimal=decimal)


def _check_rows(raw: RawTable, columns: _Columns, cells: _Cells, duplicate_ids: str,
                max_missing_share: float, require_grade: bool) -> _Statuses:
    """Every row's status: the first rejection reason that applies, in the documented order."""
    stat = _Statuses(len(raw.cells), raw.rows, raw.where)
    _check_ids(stat, cells.lot_ids, columns.lot, duplicate_ids)
    for spec in columns.specs:
        _check_numeric(stat, cells.flags[spec.name], raw.cells[spec.column], spec.name,
                       spec.column)
    if cells.grade_states is not None:
        grade_col, at = columns.grade, stat.at
        _check_numeric(stat, cells.grade_states, raw.cells[grade_col], columns.grade_name,
                       grade_col)
        if require_grade:
            stat.reject(cells.grade_states == cellmod.C_MISSING, "missing_grade",
                        lambda i: f"{at(i)}: no grade in column '{grade_col}'")
    for spec in columns.specs:
        _check_range(stat, cells.values[spec.name], spec)
    _check_so2(stat, cells.values, columns.specs)
    _check_missing(stat, cells.flags, len(columns.specs), max_missing_share)
    return stat


def _build_table(raw: RawTable, columns: _Columns, cells: _Cells, stat: _Statuses
                 ) -> LotTable:
    """The lot table: ids and statuses, values, cell states and passthrough columns."""
    status, detail = stat.columns()
    ids = pd.DataFrame({
        "row": np.asarray(raw.rows, dtype=int), "lot_id": _text(cells.lot_ids),
        "status": status, "detail": detail, "grade": cells.grade,
    })
    extra = pd.DataFrame({p: _text(_texts(raw.cells[h])) for p, h in columns.passthrough.items()},
                         index=ids.index)
    flags = pd.DataFrame({name: cellmod.state_text(codes) for name, codes in cells.flags.items()},
                         index=ids.index)
    return LotTable(
        ids=ids, values=pd.DataFrame(cells.values, index=ids.index),
        flags=flags, extra=extra,
        specs=tuple(columns.specs), source=raw.source, blank_rows=raw.blank_rows,
        decimal=cells.decimal, has_grade=bool(columns.grade),
    )


def _text(column: pd.Series) -> pd.Series:
    """A text column on a fresh RangeIndex (what an object column of str becomes in a frame)."""
    return pd.Series(pd.array(column.to_numpy(dtype=object) if column.dtype == object
                              else column.array, dtype=str))


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

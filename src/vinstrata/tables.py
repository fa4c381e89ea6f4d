"""Writing output tables: one CSV convention for every contract file.

UTF-8, comma-delimited, "\\n" line ends, no index; floats with up to 6
significant digits; booleans as ``true`` / ``false``; missing values empty.
The same frame always gives the same bytes.

Spreadsheet-safe text: lot ids, passthrough values and column names come from
outside files, and a spreadsheet opening a CSV runs a cell that begins with
``=``, ``+``, ``-`` or ``@`` (and, in some, a tab or carriage return) as a
formula. Following the OWASP guidance on CSV injection, such a text cell is
written with a leading apostrophe (:func:`spreadsheet_text`); numbers such as
``-0.5`` are left as they are. :func:`plain_text` and :func:`plain_frame` undo
it for the engine's own readers.

Line breaks inside text cells are written as ``\n`` (a ``\r`` would not be
quoted with ``\n`` line ends, and would split the row for every reader).
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from vinstrata.folders import atomic_path

# OWASP's list, and the line feed a carriage return is written as (see _text_cells)
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r", "\n")
# Any run of apostrophes before a formula character: escaping "'=x" too (to "''=x") is
# what lets plain_text tell the engine's apostrophe from one that was in the data.
_ESCAPED = re.compile(r"'*[=+\-@\t\r\n]")
_UNESCAPE = re.compile(r"'+[=+\-@\t\r\n]")
_CARRIAGE_RETURN = re.compile(r"\r\n?")
# A plain decimal number (either decimal mark, optional exponent): a spreadsheet reads it
# as a number, and it cannot carry a formula.
_NUMBER = re.compile(r"[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?")
_FIRST = frozenset("'=+-@\t\r\n")


def spreadsheet_text(value: str) -> str:
    """``value`` as a spreadsheet will show it as text, never run it as a formula.

    A text that begins with ``=``, ``+``, ``-``, ``@``, a tab, a carriage
    return or a line feed (after any apostrophes) and is not a number gets one
    leading apostrophe, as the OWASP guidance on CSV injection recommends; any
    other text is returned unchanged.

    Parameters
    ----------
    value : str

    Returns
    -------
    str

    Examples
    --------
    >>> spreadsheet_text("=1+1"), spreadsheet_text("-0.5"), spreadsheet_text("'abc")
    ("'=1+1", '-0.5', "'abc")
    """
    if value[:1] not in _FIRST or not _ESCAPED.match(value) or _NUMBER.fullmatch(value):
        return value
    return "'" + value


def plain_text(value: str) -> str:
    """Undo :func:`spreadsheet_text`: the text as it was before it was written.

    One leading apostrophe is taken off only where :func:`spreadsheet_text`
    would have put it (apostrophes, then a formula character), so that a value
    which merely begins with an apostrophe, such as ``'abc``, is kept; a file
    written raw (``[output] spreadsheet_safe = false``) reads back the same.

    Parameters
    ----------
    value : str

    Returns
    -------
    str
    """
    if value[:1] == "'" and _UNESCAPE.match(value):
        return value[1:]
    return value


def plain_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A CSV read back from disk with :func:`plain_text` applied to its text cells and names.

    Parameters
    ----------
    frame : DataFrame
        As :func:`pandas.read_csv` returned it; changed in place and returned.

    Returns
    -------
    DataFrame
    """
    frame.columns = [plain_text(c) if isinstance(c, str) else c for c in frame.columns]
    for position in range(frame.shape[1]):
        values = frame.iloc[:, position]
        if values.dtype == object or pd.api.types.is_string_dtype(values.dtype):
            frame.iloc[:, position] = [plain_text(v) if isinstance(v, str) else v
                                       for v in values.to_numpy()]
    return frame


def _float_text(values: np.ndarray) -> list[str]:
    # "%.6g" per value in a comprehension: several times faster than to_csv's float_format
    return ["" if v != v else f"{v:.6g}" for v in values.tolist()]


def _text_cell(value: str, spreadsheet_safe: bool) -> str:
    if spreadsheet_safe:
        value = spreadsheet_text(value)
    if "\r" in value:  # csv quotes a cell holding "\n" but not one holding only "\r"
        value = _CARRIAGE_RETURN.sub("\n", value)
    return value


def _text_cells(values: np.ndarray, spreadsheet_safe: bool) -> list[object]:
    return [_text_cell(v, spreadsheet_safe) if isinstance(v, str) else v
            for v in values.tolist()]


def _cell_frame(frame: pd.DataFrame, spreadsheet_safe: bool = True) -> pd.DataFrame:
    out = frame.copy()
    for name in out.columns:
        column = out[name]
        if pd.api.types.is_float_dtype(column.dtype):
            out[name] = _float_text(column.to_numpy(dtype=float))
        elif column.dtype == bool:
            out[name] = np.where(column.to_numpy(), "true", "false")
        elif column.dtype == object and pd.api.types.infer_dtype(column, skipna=True) in (
                "boolean", "mixed"):
            out[name] = ["true" if v is True or v is np.True_ else
                         "false" if v is False or v is np.False_ else v
                         for v in column.to_numpy()]
        if column.dtype == object or pd.api.types.is_string_dtype(column.dtype):
            # only cells that were text: numbers and the float column text above stay raw
            out[name] = _text_cells(out[name].to_numpy(dtype=object), spreadsheet_safe)
    out.columns = [_text_cell(c, spreadsheet_safe) if isinstance(c, str) else c
                   for c in out.columns]
    return out


def write_csv(frame: pd.DataFrame, path: str | Path, spreadsheet_safe: bool = True) -> Path:
    """Write ``frame`` to ``path`` in the engine's CSV convention.

    ``spreadsheet_safe`` (``[output] spreadsheet_safe``) writes text cells
    through :func:`spreadsheet_text`; False writes them raw. The file appears
    only once complete (:func:`vinstrata.folders.atomic_path`).
    """
    path = Path(path)
    cells = _cell_frame(frame, spreadsheet_safe)
    with atomic_path(path) as temp:
        cells.to_csv(temp, index=False, lineterminator="\n", encoding="utf-8")
    return path


# --------------------------------------------------------------------------- Parquet

FORMATS = ("csv", "parquet", "both")  # ``--format`` of the per-lot tables


def _arrow_column(values: pd.Series) -> object:
    """One column for Arrow: text columns mixing types are written as text."""
    import pyarrow as pa

    try:
        return pa.array(values, from_pandas=True)
    except (pa.ArrowInvalid, pa.ArrowTypeError):
        return pa.array([None if v is None or v != v else str(v) for v in values.tolist()],
                        type=pa.string())


def write_parquet(frame: pd.DataFrame, path: str | Path) -> Path:
    """Write ``frame`` to ``path`` as Parquet (pyarrow, no index), values as they are.

    No spreadsheet escaping: a Parquet file is read by programs, not opened as
    cells. The same frame gives the same bytes (pyarrow writes no time stamp;
    its version is in the file's footer). The file appears only once complete.
    """
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = Path(path)
    names = [str(c) for c in frame.columns]
    table = pa.Table.from_arrays([_arrow_column(frame.iloc[:, i]) for i in range(len(names))],
                                 names=names)
    with atomic_path(path) as temp:
        pq.write_table(table, temp)
    return path


def write_lot_table(frame: pd.DataFrame, path: str | Path, formats: str = "csv",
                    spreadsheet_safe: bool = True) -> list[Path]:
    """Write a per-lot table as CSV (``path``), Parquet (``path`` with ``.parquet``) or both.

    Parameters
    ----------
    frame : DataFrame
    path : str or Path
        The CSV name (``lot_styles.csv``); the Parquet file takes its stem.
    formats : {"csv", "parquet", "both"}
        ``--format``.
    spreadsheet_safe : bool
        For the CSV, see :func:`write_csv`.

    Returns
    -------
    list of Path
        The files written.
    """
    if formats not in FORMATS:
        raise ValueError(f"format {formats!r} is not one of {', '.join(FORMATS)}")
    path = Path(path)
    written = []
    if formats in ("csv", "both"):
        written.append(write_csv(frame, path, spreadsheet_safe=spreadsheet_safe))
    if formats in ("parquet", "both"):
        written.append(write_parquet(frame, path.with_suffix(".parquet")))
    return written

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

import contextlib
import re
import shutil
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


# --------------------------------------------------------------------------- in batches

# pyarrow's own row-group size for pq.write_table: a file written in batches keeps the row
# groups (and so the bytes) of the same table written whole
ROW_GROUP_ROWS = 1024 * 1024


class CsvAppender:
    """A CSV file written a frame at a time, the same bytes as :func:`write_csv` of them all.

    Each frame goes through the same cell conversion as :func:`write_csv` (a
    cell's text depends on itself only), the header comes with the first frame
    that has columns, and the file keeps its temporary name until
    :meth:`close` (:func:`vinstrata.folders.atomic_path`, held back like any
    other file inside :func:`vinstrata.folders.held_back`).

    Parameters
    ----------
    path : str or Path
    spreadsheet_safe : bool
        See :func:`write_csv`.
    """

    def __init__(self, path: str | Path, spreadsheet_safe: bool = True) -> None:
        self.path = Path(path)
        self.safe = spreadsheet_safe
        self._stack = contextlib.ExitStack()
        temp = self._stack.enter_context(atomic_path(self.path))
        # held open across write() calls; the stack closes it before the rename
        self._handle = self._stack.enter_context(
            open(temp, "w", encoding="utf-8", newline=""))  # noqa: SIM115
        self._header = False

    def write(self, frame: pd.DataFrame) -> None:
        """Append the rows of ``frame`` (a frame without columns adds nothing)."""
        if not len(frame.columns):
            return
        _cell_frame(frame, self.safe).to_csv(self._handle, index=False, header=not self._header,
                                             lineterminator="\n")
        self._header = True

    def close(self) -> Path:
        """Finish the file (an empty frame's text when no frame had columns); returns its path."""
        if not self._header:
            pd.DataFrame().to_csv(self._handle, index=False, lineterminator="\n")
        self._handle.close()
        self._stack.close()
        return self.path

    def abort(self) -> None:
        """Drop the temporary file."""
        self._stack.__exit__(RuntimeError, RuntimeError("aborted"), None)


def _unified_type(types: list[object]) -> object:
    """The one Arrow type of a column typed per batch: what a whole column would infer."""
    import pyarrow as pa

    found = [t for t in dict.fromkeys(types) if not pa.types.is_null(t)]
    if not found:
        return pa.null()
    if len(found) == 1:
        return found[0]
    if all(pa.types.is_integer(t) or pa.types.is_floating(t) for t in found):
        return pa.float64()  # ints and floats mixed in one column are read as floats
    return pa.string()


class ParquetAppender:
    """A Parquet file written a frame at a time, the same bytes as :func:`write_parquet`
    of them all.

    A column's type is known only once every frame is seen (a batch of
    rejected rows has no values), so each frame is spooled as a Parquet file
    of its own beside the target; :meth:`close` gives every column the type
    the whole column would have, and copies the spooled rows into the target
    in row groups of :data:`ROW_GROUP_ROWS`, as :func:`pyarrow.parquet.write_table`
    cuts them. Memory holds one row group at most.

    Parameters
    ----------
    path : str or Path
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self._stack = contextlib.ExitStack()
        self._temp = self._stack.enter_context(atomic_path(self.path))
        self._spool = self._temp.with_name(self._temp.name + ".parts")
        self._spool.mkdir()
        self._parts: list[Path] = []
        self._names: list[str] | None = None

    def write(self, frame: pd.DataFrame) -> None:
        """Spool the rows of ``frame`` (a frame without columns adds nothing)."""
        import pyarrow as pa
        import pyarrow.parquet as pq

        if not len(frame.columns):
            return
        names = [str(c) for c in frame.columns]
        self._names = self._names or names
        table = pa.Table.from_arrays([_arrow_column(frame.iloc[:, i])
                                      for i in range(len(names))], names=names)
        part = self._spool / f"{len(self._parts):08d}.parquet"
        pq.write_table(table, part)
        self._parts.append(part)

    def close(self) -> Path:
        """Write the target from the spooled frames; returns its path."""
        import pyarrow as pa
        import pyarrow.parquet as pq

        try:
            if not self._parts:
                pq.write_table(pa.Table.from_arrays([], names=[]), self._temp)
            else:
                schemas = [pq.read_schema(p) for p in self._parts]
                schema = pa.schema([(name, _unified_type([s.field(i).type for s in schemas]))
                                    for i, name in enumerate(self._names or [])])
                with pq.ParquetWriter(self._temp, schema) as writer:
                    buffered: list[object] = []
                    rows = 0
                    for part in self._parts:
                        buffered.append(pq.read_table(part).cast(schema))
                        rows += buffered[-1].num_rows
                        while rows >= ROW_GROUP_ROWS:
                            whole = pa.concat_tables(buffered)
                            writer.write_table(whole.slice(0, ROW_GROUP_ROWS).combine_chunks())
                            buffered, rows = [whole.slice(ROW_GROUP_ROWS)], rows - ROW_GROUP_ROWS
                    if rows or not buffered:
                        writer.write_table(pa.concat_tables(buffered).combine_chunks())
        finally:
            shutil.rmtree(self._spool, ignore_errors=True)
        self._stack.close()
        return self.path

    def abort(self) -> None:
        """Drop the spooled and temporary files."""
        shutil.rmtree(self._spool, ignore_errors=True)
        self._stack.__exit__(RuntimeError, RuntimeError("aborted"), None)


class LotTableAppender:
    """A per-lot table written a frame at a time as CSV, Parquet or both
    (:func:`write_lot_table`'s ``formats``)."""

    def __init__(self, path: str | Path, formats: str = "csv",
                 spreadsheet_safe: bool = True) -> None:
        if formats not in FORMATS:
            raise ValueError(f"format {formats!r} is not one of {', '.join(FORMATS)}")
        path = Path(path)
        self._writers: list[CsvAppender | ParquetAppender] = []
        if formats in ("csv", "both"):
            self._writers.append(CsvAppender(path, spreadsheet_safe))
        if formats in ("parquet", "both"):
            self._writers.append(ParquetAppender(path.with_suffix(".parquet")))

    def write(self, frame: pd.DataFrame) -> None:
        for writer in self._writers:
            writer.write(frame)

    def close(self) -> list[Path]:
        return [writer.close() for writer in self._writers]

    def abort(self) -> None:
        for writer in self._writers:
            writer.abort()

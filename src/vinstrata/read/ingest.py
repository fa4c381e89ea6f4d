"""Reading lot tables from disk: CSV / TSV, Excel (.xlsx) and Parquet.

This is the only module that opens a lot file. It returns every cell as text
(:class:`RawTable`), so that parsing numbers, censored values and units is done
once, the same way for every format, in :mod:`vinstrata.read.validate`.

* CSV and TSV: the delimiter is detected among comma, semicolon and tab from
  the header line (the candidate that splits the header into the most
  fields, consistently over the first lines); UTF-8 with or without a byte
  order mark, falling back to Windows-1252 / Latin-1.
* Excel: the first sheet, or the one named by ``sheet``.
* Parquet: read with pyarrow; integer and floating columns stay numbers (a
  float column of the :class:`RawTable`), every other column is read as text.
* Datasets: a folder of lot files (a hive-partitioned one too, whose
  ``key=value`` folder names become extra text columns) or a glob pattern
  (``lots/*.parquet``), read file after file in natural sorted order
  (``part-2`` before ``part-10``), as one table whose row numbers count on
  from one file to the next; messages name the file that holds a row.

Text tables are parsed by pyarrow's CSV reader when the file is plain enough for
it to read every cell as :mod:`csv` would (a scan of the bytes checks the quoting
first); anything else, and every error, goes to the :mod:`csv` reader below,
so that what is read and every message stay those of the csv reader.
:func:`read_batches` reads any of these in batches of bounded size.

Row numbers are the file's own line (or sheet row) numbers, the header being row 1
when nothing stands above it, as a spreadsheet shows them. A trailing delimiter
at the end of the lines is tolerated; a row with more filled fields than the
header is refused, naming the row.

Every lot file is untrusted: it comes from outside labs, buyers and merchants.
What a file may hold is bounded by :class:`ReadLimits` (``[ingest]``
``max_unpacked_mb``, ``max_cells``, ``max_columns``, ``max_cell_kb``), checked
before or while the file is read, so that a damaged or hostile file is refused
in one line instead of exhausting memory:

* text files are never held whole in memory: lines are read in pieces of
  bounded size, and a cell or a row that passes a limit is refused as soon as
  the piece holding it is read;
* a workbook's decompressed size is summed from its zip directory before it is
  opened, its cells are counted while its sheet streams, and its XML is parsed
  by openpyxl through defusedxml, which refuses the entity declarations of an
  entity-expansion ("billion laughs") attack;
* a Parquet file's columns, cells and decompressed size are taken from its
  footer before any data is read.
"""

from __future__ import annotations

import bisect
import codecs
import csv
import dataclasses
import glob
import hashlib
import io
import math
import os
import re
import urllib.parse
import zipfile
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import IO, TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from vinstrata.errors import InputError

if TYPE_CHECKING:
    from vinstrata.config import Ingest

DELIMITERS = {",": "comma", ";": "semicolon", "\t": "tab"}
MB = 1 << 20
KB = 1 << 10
PIECE = 1 << 20  # characters read at a time from a text file's line
SNIFF = 200_000  # characters the delimiter is detected from
SHEET_ROWS = 1_048_576  # rows of an .xlsx sheet (the format's limit)
SCAN = 16 * MB  # bytes of a text file scanned at a time before pyarrow reads it
BLOCK = 4 * MB  # bytes pyarrow parses at a time; a longer record goes to the csv reader
LOT_SUFFIXES = (".csv", ".tsv", ".txt", ".xlsx", ".xlsm", ".parquet", ".pq")


@dataclass(frozen=True)
class ReadLimits:
    """What a lot file may hold, checked before or while it is read (``[ingest]``).

    Attributes
    ----------
    max_unpacked_mb : int
        Largest decompressed size of a workbook (or of a Parquet file's data), MB.
    max_cells : int
        Most cells (data rows x columns) of a table.
    max_columns : int
        Most columns of a table.
    max_cell_kb : int
        Longest single cell, in KB of characters (1 KB = 1024 characters).
    """

    max_unpacked_mb: int = 512
    max_cells: int = 50_000_000
    max_columns: int = 5000
    max_cell_kb: int = 64

    @classmethod
    def from_config(cls, ingest: Ingest) -> ReadLimits:
        """The limits of a config's ``[ingest]`` section."""
        return cls(max_unpacked_mb=ingest.max_unpacked_mb, max_cells=ingest.max_cells,
                   max_columns=ingest.max_columns, max_cell_kb=ingest.max_cell_kb)

    @property
    def max_cell_chars(self) -> int:
        return self.max_cell_kb * KB

    def too_long(self, where: str) -> InputError:
        return InputError(f"{where}: a cell longer than {self.max_cell_kb} KB; refused "
                          f"(limit ingest.max_cell_kb = {self.max_cell_kb})")

    def too_wide(self, where: str) -> InputError:
        return InputError(f"{where}: more than {self.max_columns} columns; refused "
                          f"(limit ingest.max_columns = {self.max_columns})")

    def too_many(self, where: str) -> InputError:
        return InputError(f"{where}: more than {self.max_cells} cells (rows x columns); "
                          f"refused (limit ingest.max_cells = {self.max_cells})")

    def too_big(self, path: Path, unpacked: int, what: str) -> InputError:
        return InputError(f"{path}: {what} unpacks to {unpacked / MB:.0f} MB, more than "
                          f"{self.max_unpacked_mb} MB; refused "
                          f"(limit ingest.max_unpacked_mb = {self.max_unpacked_mb})")


@dataclass(frozen=True)
class Source:
    """Where a table came from, for provenance and error messages."""

    path: str
    name: str
    sha256: str
    format: str
    delimiter: str = ""
    encoding: str = ""
    sheet: str = ""


@dataclass(frozen=True)
class RawTable:
    """A lot table as text, before any parsing.

    Attributes
    ----------
    cells : DataFrame
        One column per header, in file order, one row per data row that is not
        entirely blank. A column is text (every value a ``str``, "" where empty),
        or float (NaN where empty) where the file stores numbers (Parquet
        integer and floating columns): those are never written as text and read back.
    rows : list of int
        The file row number of each data row (header = row 1); in a dataset
        they count on from the previous file's last row.
    source : Source
    blank_rows : int
        Entirely blank rows that were skipped (they hold no lot).
    parts : tuple of (int, str)
        For a dataset: the first row number of each file and the file as messages
        name it; empty for a single file.
    partition_keys : tuple of str
        Columns made from a hive-partitioned dataset's ``key=value`` folder names.
    """

    cells: pd.DataFrame
    rows: list[int]
    source: Source
    blank_rows: int = 0
    parts: tuple[tuple[int, str], ...] = ()
    partition_keys: tuple[str, ...] = ()

    def where(self, row: int) -> str:
        """``"row 17"``, or ``"lots/part-2.parquet: row 17"`` in a dataset."""
        if not self.parts:
            return f"row {row}"
        starts = [first for first, _ in self.parts]
        return f"{self.parts[max(bisect.bisect_right(starts, row) - 1, 0)][1]}: row {row}"


def read_table(path: str | Path, sheet: str = "", delimiter: str = "auto",
               limits: ReadLimits | None = None) -> RawTable:
    """Read a lot file (or a dataset of them) into text cells.

    Parameters
    ----------
    path : str or Path
        A .csv, .tsv, .txt, .xlsx or .parquet file. The format is taken from
        the file's first bytes where they are telling, else from its suffix.
        Or a dataset: a folder of lot files (hive-partitioned or not), or a
        glob pattern such as ``lots/*.parquet`` (see the module docstring).
    sheet : str
        Excel sheet name; "" reads the first sheet.
    delimiter : str
        "auto", ",", ";" or "\\t" (also "tab").
    limits : ReadLimits, optional
        What the file may hold; the ``[ingest]`` defaults when None. In a
        dataset each file is held to them, and the whole table to ``max_cells``.

    Returns
    -------
    RawTable

    Raises
    ------
    InputError
        Missing, empty or unreadable file, a file that is not a table, an
        unknown sheet, duplicate or blank header names, a file past one of
        the ``limits``; a pattern or folder without lot files, dataset files
        whose columns differ.
    """
    limits = limits or ReadLimits()
    parts = lot_files(path)
    tables = list(_tables(path, parts, None, sheet, delimiter, limits))
    if len(tables) == 1:
        return tables[0]
    return _concat(tables, limits)


def read_batches(path: str | Path, batch_rows: int, sheet: str = "", delimiter: str = "auto",
                 limits: ReadLimits | None = None) -> Iterator[RawTable]:
    """Read a lot file (or a dataset of them) in batches of rows.

    Every batch is checked as :func:`read_table` checks the whole table (the
    same header, the same columns in the same order, the same limits, the same
    messages), its row numbers go on from the batch before, and they all carry
    the same :class:`Source` (whose SHA-256 covers every file). Parquet is read
    by row groups (``ParquetFile.iter_batches``), text tables in pieces, so
    memory stays bounded by the batch size; a workbook is read whole (a sheet
    holds at most 1,048,576 rows) and handed out in batches.

    Parameters
    ----------
    path : str or Path
        A lot file or a dataset, as for :func:`read_table`.
    batch_rows : int
        At most this many rows per batch (blank rows are dropped from a batch,
        and a batch never spans two files of a dataset).
    sheet, delimiter, limits
        As for :func:`read_table`.

    Yields
    ------
    RawTable
        One batch; the columns of a batch may be typed in one and text in
        another (a Parquet column's type is per file).

    Raises
    ------
    InputError
        As :func:`read_table`, when the batch holding the fault is reached.
    """
    if isinstance(batch_rows, bool) or not isinstance(batch_rows, int) or batch_rows < 1:
        raise InputError(f"batch_rows: expected a whole number of at least 1, got {batch_rows!r}")
    yield from _tables(path, lot_files(path), batch_rows, sheet, delimiter, limits or ReadLimits())


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    _digest(path, digest)
    return digest.hexdigest()


def _digest(path: Path, digest: Any) -> None:
    try:
        with path.open("rb") as handle:
            for block in iter(lambda: handle.read(MB), b""):
                digest.update(block)
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror})") from None


# --------------------------------------------------------------------------- datasets


@dataclass(frozen=True)
class _Part:
    """One file of what was given: its path (as messages name it) and partition values."""

    path: Path
    keys: tuple[tuple[str, str], ...] = ()
    dataset: bool = False


def is_pattern(path: str | Path) -> bool:
    """Whether ``path`` is a glob pattern (``*``, ``?`` or ``[``) rather than a file name."""
    return glob.has_magic(str(path))


def _natural(path: Path) -> list[Any]:
    """Sort key: digit runs compare as numbers, so part-2 comes before part-10."""
    return [(0, int(t), t) if t.isdigit() else (1, 0, t)
            for t in re.split(r"(\d+)", path.as_posix())]


def _hidden(name: str) -> bool:
    # what writers leave beside the data: _SUCCESS, _common_metadata, .crc and dot files
    return name.startswith((".", "_"))


def lot_files(path: str | Path) -> list[_Part]:
    """The files a lot path names, in reading order.

    A file is itself. A folder gives every lot file under it (by suffix:
    .csv, .tsv, .txt, .xlsx, .xlsm, .parquet, .pq; names starting with "." or "_"
    are skipped), a ``key=value`` folder on the way adding that column; a glob
    pattern gives the files it matches. Both in natural sorted order.

    Raises
    ------
    InputError
        A missing file, or a pattern or folder without lot files.
    """
    text = str(path)
    if is_pattern(text) and not Path(text).exists():
        found = [Path(p) for p in glob.glob(text, recursive=True) if Path(p).is_file()]
        if not found:
            raise InputError(f"{text}: the pattern matches no file")
        return [_Part(p, dataset=True) for p in sorted(found, key=_natural)]
    root = Path(path)
    if not root.exists():
        raise InputError(f"{root}: file not found")
    if not root.is_dir():
        return [_Part(root)]
    found = []
    for folder, subfolders, names in os.walk(root):
        subfolders[:] = [d for d in subfolders if not _hidden(d)]
        found += [Path(folder) / n for n in names
                  if not _hidden(n) and n.lower().endswith(LOT_SUFFIXES)]
    if not found:
        raise InputError(f"{root}: is a folder without lot files ({', '.join(LOT_SUFFIXES)})")
    return [_Part(p, _partition(p, root), dataset=True) for p in sorted(found, key=_natural)]


def _partition(path: Path, root: Path) -> tuple[tuple[str, str], ...]:
    """The ``key=value`` folders between ``root`` and ``path`` (values as hive writes them)."""
    keys = []
    for folder in path.relative_to(root).parts[:-1]:
        if "=" in folder:
            key, value = folder.split("=", 1)
            value = urllib.parse.unquote(value)
            keys.append((urllib.parse.unquote(key), "" if value == "__HIVE_DEFAULT_PARTITION__"
                         else value))
    return tuple(keys)


def _dataset_source(path: str | Path, parts: list[_Part], infos: list[dict[str, str]]
                    ) -> Source:
    """One source for a dataset: its SHA-256 over each file's name and bytes, in order."""
    digest = hashlib.sha256()
    for part in parts:
        digest.update(part.path.as_posix().encode("utf-8", "surrogateescape") + b"\0")
        _digest(part.path, digest)
    formats = {i["format"] for i in infos}
    first = infos[0]
    name = Path(path).name if not is_pattern(path) else str(path)
    return Source(path=str(path), name=name or str(path), sha256=digest.hexdigest(),
                  format=first["format"] if len(formats) == 1 else "mixed",
                  delimiter=first.get("delimiter", ""), encoding=first.get("encoding", ""),
                  sheet=first.get("sheet", ""))


def _tables(path: str | Path, parts: list[_Part], chunk_rows: int | None, sheet: str,
            delimiter: str, limits: ReadLimits) -> Iterator[RawTable]:
    """The tables (or batches) of every part, with row numbers counting on."""
    first = parts[0]
    info, pieces = _open(first, sheet, delimiter, limits, chunk_rows, 0)
    if not first.dataset:
        source = Source(path=str(first.path), name=first.path.name,
                        sha256=_sha256(first.path), **info)
        yield from _finished(pieces, source, raise_empty=True)
        return
    source = _dataset_source(path, parts, [info] + [{"format": _kind(p.path)}
                                                    for p in parts[1:]])
    keys = tuple(dict.fromkeys(k for part in parts for k, _ in part.keys))
    offset, cells, made = 0, 0, False
    columns: list[str] | None = None
    starts: list[tuple[int, str]] = []
    for i, part in enumerate(parts):
        if i:
            info, pieces = _open(part, sheet, delimiter, limits, chunk_rows, offset)
        label = str(part.path)
        starts.append((offset + 2, label))
        reached = [offset + 1]
        for table in _finished(_keyed(_tracked(pieces, reached), part, keys), source,
                               raise_empty=False):
            if columns is None:
                columns = list(table.cells.columns)
            table = _aligned(table, columns, label, str(first.path))
            cells += table.cells.size
            if cells > limits.max_cells:
                raise limits.too_many(f"{label}, row {table.rows[-1]}")
            made = True
            yield dataclasses.replace(table, parts=tuple(starts), partition_keys=keys)
        offset = reached[0] - 1
    if not made:
        raise InputError(f"{source.name}: has a header but no data rows")


def _tracked(pieces: Iterator[_Piece], reached: list[int]) -> Iterator[_Piece]:
    """The pieces, noting in ``reached[0]`` the last file row they came to (blank rows too)."""
    for frame, lines in pieces:
        if lines:
            reached[0] = lines[-1]
        yield frame, lines


def _keyed(pieces: Iterator[_Piece], part: _Part, keys: tuple[str, ...]) -> Iterator[_Piece]:
    """Pieces with the partition values added as text columns (after the file's own)."""
    values = dict(part.keys)
    for frame, lines in pieces:
        if keys:
            clash = [k for k in keys if k in frame.columns]
            if clash:
                raise InputError(f"{part.path}, row 1: column '{clash[0]}' is also a partition "
                                 "folder name")
            frame = frame.assign(**{k: pd.Series([values.get(k, "")] * len(frame), dtype=str,
                                                 index=frame.index) for k in keys})
        yield frame, lines


def _aligned(table: RawTable, columns: list[str], label: str, first: str) -> RawTable:
    """A later file's table with the first file's columns, in its order."""
    have = list(table.cells.columns)
    if have == columns:
        return table
    if set(have) != set(columns):
        missing = [c for c in columns if c not in have]
        extra = [c for c in have if c not in columns]
        what = f"no column '{missing[0]}'" if missing else f"a column '{extra[0]}'"
        raise InputError(f"{label}, row 1: {what}, unlike {first}; the files of a dataset "
                         "need the same columns")
    return dataclasses.replace(table, cells=table.cells[columns])


def _concat(tables: list[RawTable], limits: ReadLimits) -> RawTable:
    """One table from a dataset's tables (a column typed in one file and text in another
    becomes text)."""
    frames = [t.cells for t in tables]
    for column in frames[0].columns:
        typed = [pd.api.types.is_float_dtype(f[column].dtype) for f in frames]
        if any(typed) and not all(typed):
            frames = [f.assign(**{column: pd.Series(number_texts(f[column].to_numpy()),
                                                    dtype=str, index=f.index)}) if t else f
                      for f, t in zip(frames, typed)]
    cells = pd.concat(frames, ignore_index=True)
    last = tables[-1]
    return RawTable(cells=cells, rows=[r for t in tables for r in t.rows], source=last.source,
                    blank_rows=sum(t.blank_rows for t in tables), parts=last.parts,
                    partition_keys=last.partition_keys)


_Piece = tuple[pd.DataFrame, list[int]]


def _kind(path: Path, head: bytes | None = None) -> str:
    """"parquet", "xlsx" or "text": from the first bytes where they are telling, else the
    suffix."""
    if head is None:
        try:
            with path.open("rb") as handle:
                head = handle.read(8)
        except OSError:
            head = b""
    suffix = path.suffix.lower()
    if head.startswith(b"PAR1") or suffix in (".parquet", ".pq"):
        return "parquet"
    if head.startswith(b"PK\x03\x04") or suffix in (".xlsx", ".xlsm"):
        return "xlsx"
    return "text"


def _open(part: _Part, sheet: str, delimiter: str, limits: ReadLimits,
          chunk_rows: int | None, offset: int) -> tuple[dict[str, str], Iterator[_Piece]]:
    """A file's reading: what the source says of it, and its pieces of ``chunk_rows`` rows
    (one piece when None; always at least one, so that the header is checked)."""
    path = part.path
    if not path.exists():
        raise InputError(f"{path}: file not found")
    if path.is_dir():
        raise InputError(f"{path}: is a folder, not a lot file")
    try:
        with path.open("rb") as handle:
            head = handle.read(65536)
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror})") from None
    if not head:
        raise InputError(f"{path}: the file is empty")
    kind = _kind(path, head)
    if kind == "parquet":
        return _parquet_pieces(path, limits, chunk_rows, offset)
    if kind == "xlsx":
        frame, lines, info = _read_excel(path, sheet, limits, offset)
        return info, _sliced(frame, lines, chunk_rows)
    return _text_pieces(path, head, delimiter, limits, chunk_rows, offset)


def _sliced(frame: pd.DataFrame, lines: list[int], chunk_rows: int | None
            ) -> Iterator[_Piece]:
    """A whole table handed out in pieces of ``chunk_rows`` rows (one piece when None)."""
    step = chunk_rows or max(len(frame), 1)
    for start in range(0, max(len(frame), 1), step):
        yield frame.iloc[start:start + step].reset_index(drop=True), lines[start:start + step]


def _finished(pieces: Iterator[_Piece], source: Source, raise_empty: bool
              ) -> Iterator[RawTable]:
    """Each piece checked and trimmed (:func:`_finish`). A piece left without rows gives its
    blank-row count to the next table (the last one takes what follows it)."""
    pending: RawTable | None = None
    blank = 0
    for frame, lines in pieces:
        table = _finish(frame, lines, source, allow_empty=True)
        if not table.rows:
            blank += table.blank_rows
            continue
        if pending is not None:
            yield pending
        pending, blank = dataclasses.replace(table, blank_rows=table.blank_rows + blank), 0
    if pending is None:
        if raise_empty:
            raise InputError(f"{source.name}: has a header but no data rows")
        return
    yield dataclasses.replace(pending, blank_rows=pending.blank_rows + blank)


# --------------------------------------------------------------------------- text files


def _split(line: str, delimiter: str) -> list[str]:
    try:
        return next(csv.reader([line], delimiter=delimiter))
    except (csv.Error, StopIteration):
        return [line]


def detect_delimiter(text: str) -> str:
    """Pick comma, semicolon or tab for a text table.

    The header line decides: each candidate splits it, and the one giving the
    most fields wins, provided the next lines split into the same number of
    fields. Decimal commas in the data therefore cannot fool the choice: they
    split data lines, not the header.
    """
    lines = [ln for ln in text[:SNIFF].splitlines()[:50] if ln.strip()]
    if not lines:
        return ","
    best, best_fields = ",", 1
    for delim in ("\t", ";", ","):
        header = _split(lines[0], delim)
        if len(header) < 2:
            continue
        counts = [len(_split(ln, delim)) for ln in lines[1:20]]
        consistent = sum(c == len(header) for c in counts) >= 0.8 * len(counts) if counts else True
        if consistent and len(header) > best_fields:
            best, best_fields = delim, len(header)
    return best


# states of the scan of a record, as csv reads it
_START, _FIELD, _QUOTED, _CLOSING = range(4)  # field start, unquoted, quoted, quote in quoted


class _Lines:
    """The physical lines of a text table for :mod:`csv`, each read in bounded pieces.

    :mod:`csv` takes whole lines, and a line can be any length: a single field
    of hundreds of megabytes, or hundreds of thousands of fields. So lines are
    read ``PIECE`` characters at a time. A line longer than a cell may be, and
    every line of a record that runs over a line end (a quoted field holding
    one), is scanned as csv would read it: a cell longer than ``max_cell_kb``
    or a record of more than ``max_columns`` fields is refused on the piece
    where it shows, before the rest is read. Other lines hold whole records no
    longer than a cell may be, and :mod:`csv` (with its field size limit)
    checks them alone. :func:`_records` says when csv has ended a record
    (``between_records``), so that quote marks never have to be counted.
    """

    def __init__(self, handle: IO[str], path: Path, delimiter: str,
                 limits: ReadLimits) -> None:
        self.handle, self.path, self.delimiter, self.limits = handle, path, delimiter, limits
        self.offset = 0  # added to the row numbers of messages (a later file of a dataset)
        self.number = 0  # physical line number of the last line handed out
        self.pending = ""  # a piece read ahead
        self.previous = ""  # the last line handed out
        self.between_records = True  # csv ended a record with the last line
        self.tracked = False  # the scan state follows the current record from its start
        self.seen_text = False  # any non-blank character: an empty file is told apart
        self._restart()

    def _restart(self) -> None:
        self.state, self.fields, self.cell = _START, 1, 0

    def __iter__(self) -> Iterator[str]:
        return self

    def _piece(self) -> str:
        piece, self.pending = self.pending or self.handle.readline(PIECE), ""
        return piece

    def __next__(self) -> str:
        if self.between_records:
            self._restart()
            self.tracked = False
        elif not self.tracked:
            # the last line opened a record that goes on: follow it from that line
            self._restart()
            self._scan_line(self.previous, self.number)
            self.tracked = True
        self.between_records = False
        piece = self._piece()
        if not piece:
            raise StopIteration
        self.number += 1
        pieces, scanned = [piece], 0
        while len(piece) == PIECE and piece[-1] != "\n":
            if piece[-1] == "\r":  # a "\r\n" line end may straddle two pieces
                after = self._piece()
                if after == "\n":
                    pieces.append(after)
                else:
                    self.pending = after
                break
            self._scan(piece, self.number)  # a monster is refused before the rest is read
            scanned += 1
            piece = self._piece()
            if not piece:
                break
            pieces.append(piece)
        line = pieces[0] if len(pieces) == 1 else "".join(pieces)
        if not self.seen_text and not line.isspace():
            self.seen_text = True
        if scanned or self.tracked or len(line) > self.limits.max_cell_chars:
            self._scan_line(line if not scanned else "".join(pieces[scanned:]), self.number)
            self.tracked = True
        self.previous = line
        return line

    def _scan_line(self, rest: str, number: int) -> None:
        """Scan the (rest of a) line, then its line end."""
        body = rest.rstrip("\r\n")
        self._scan(body, number)
        if self.state == _QUOTED:
            self.cell += len(rest) - len(body)  # a line end inside quotes is in the cell
            self._check_cell(number)
        elif self.state == _CLOSING:
            self.state = _FIELD

    def _where(self, number: int, column: int | None = None) -> str:
        where = f"{self.path}, row {number + self.offset}"
        return where if column is None else f"{where}, column {column}"

    def _check_cell(self, number: int) -> None:
        if self.cell > self.limits.max_cell_chars:
            raise self.limits.too_long(self._where(number, self.fields))

    def _scan(self, text: str, number: int) -> None:
        """Follow ``text`` (part of a line, no line end) as csv reads it.

        A quote mark opens a quoted field only at the start of a field; inside
        one, a doubled quote mark is a quote and a single one closes it. Runs
        without quote marks are split at C speed, so the Python loop turns
        once per quote mark.
        """
        limit, delimiter = self.limits.max_cell_chars, self.delimiter
        pos, end = 0, len(text)
        while pos < end:
            if self.state == _QUOTED:
                quote = text.find('"', pos)
                if quote < 0:
                    self.cell += end - pos
                    pos = end
                else:
                    self.cell += quote - pos
                    self.state, pos = _CLOSING, quote + 1
            elif self.state == _CLOSING:
                if text[pos] == '"':  # a doubled quote mark: one quote in the cell
                    self.cell += 1
                    self.state, pos = _QUOTED, pos + 1
                else:
                    self.state = _FIELD  # closed; strict csv then wants a delimiter
            else:
                quote = text.find('"', pos)
                stop = end if quote < 0 else quote
                cells = text[pos:stop].split(delimiter)
                if len(cells) > 1:
                    lengths = [self.cell + len(cells[0]), *map(len, cells[1:-1])]
                    if max(lengths) > limit:
                        column = self.fields + next(i for i, n in enumerate(lengths) if n > limit)
                        raise self.limits.too_long(self._where(number, column))
                    self.fields += len(cells) - 1
                    if self.fields > self.limits.max_columns:
                        raise self.limits.too_wide(self._where(number))
                    self.cell = len(cells[-1])
                    self.state = _FIELD if cells[-1] else _START
                elif cells[0]:
                    self.cell += len(cells[0])
                    self.state = _FIELD
                pos = stop
                if quote >= 0:
                    if self.state == _START:
                        self.state = _QUOTED
                    else:
                        self.cell += 1  # a quote mark inside an unquoted field is a character
                    pos = quote + 1
            self._check_cell(number)


def _read_text(path: Path, head: bytes, delimiter: str, limits: ReadLimits, offset: int = 0
               ) -> tuple[pd.DataFrame, list[int], dict[str, str]]:
    """The whole table by the csv reader, in the first encoding that decodes the file."""
    if b"\x00" in head:
        raise InputError(f"{path}: holds binary data, not a text table (csv, tsv, xlsx, parquet)")
    for encoding in ("utf-8-sig", "cp1252", "latin-1"):
        try:
            return _parse_text(path, encoding, delimiter, limits, offset)
        except UnicodeDecodeError:  # met while reading: read again in the next encoding
            continue
    raise InputError(f"{path}: cannot be decoded as text")  # pragma: no cover - latin-1 decodes all


def _delimiter(path: Path, encoding: str, delimiter: str) -> str:
    delim = {"tab": "\t"}.get(delimiter, delimiter)
    if delim == "auto":
        with path.open(encoding=encoding, newline="") as handle:
            delim = detect_delimiter(handle.read(SNIFF))
    return delim


def _text_info(delim: str, encoding: str) -> dict[str, str]:
    return {"format": "text", "delimiter": DELIMITERS.get(delim, repr(delim)),
            "encoding": encoding}


def _parse_text(path: Path, encoding: str, delimiter: str, limits: ReadLimits, offset: int = 0
                ) -> tuple[pd.DataFrame, list[int], dict[str, str]]:
    delim = _delimiter(path, encoding, delimiter)
    records: list[list[str]] = []
    numbers: list[int] = []
    header: list[str] = []
    for names, chunk, lines in _record_chunks(path, encoding, delim, limits, None, offset):
        header = names
        records += chunk
        numbers += lines
    frame = pd.DataFrame(records, columns=header, dtype=str) if records else pd.DataFrame(
        columns=header, dtype=str)
    return frame, numbers, _text_info(delim, encoding)


def _record_chunks(path: Path, encoding: str, delim: str, limits: ReadLimits,
                   chunk_rows: int | None, offset: int
                   ) -> Iterator[tuple[list[str], list[list[str]], list[int]]]:
    """The csv reader's records, ``chunk_rows`` at a time (all at once when None), each
    with the header; at least one chunk (perhaps of no records)."""
    previous_limit = csv.field_size_limit(limits.max_cell_chars)
    try:
        with path.open(encoding=encoding, newline="") as handle:
            lines = _Lines(handle, path, delim, limits)
            lines.offset = offset
            records = _records(path, lines, delim, limits, offset)
            header = next(records)
            if header is None:
                raise InputError(f"{path}: holds no table (no header line)" if lines.seen_text
                                 else f"{path}: the file is empty")
            chunk: list[list[str]] = []
            numbers: list[int] = []
            made = False
            for fields, number in records:
                chunk.append(fields)
                numbers.append(number)
                if chunk_rows is not None and len(chunk) >= chunk_rows:
                    yield header, chunk, numbers
                    chunk, numbers, made = [], [], True
            if chunk or not made:
                yield header, chunk, numbers
    finally:
        csv.field_size_limit(previous_limit)


def _records(path: Path, lines: _Lines, delim: str, limits: ReadLimits, offset: int = 0
             ) -> Iterator[Any]:
    """The header (None when the file holds none), then each data record (as wide as the
    header) with its row number."""
    # strict: an unclosed quote must not swallow the rest of the file into one cell
    reader = csv.reader(lines, delimiter=delim, quotechar='"', strict=True)
    header: list[str] | None = None
    width = cells = 0
    try:
        for fields in reader:
            lines.between_records = True
            if header is None:
                if any(f.strip() for f in fields):  # blank lines before the header are skipped
                    header = [f.strip() for f in fields]
                    while len(header) > 1 and header[-1] == "":  # a trailing delimiter
                        header.pop()
                    if len(header) > limits.max_columns:
                        raise limits.too_wide(f"{path}, row {reader.line_num + offset}")
                    duplicates = _repeated(header)
                    if duplicates:
                        raise InputError(f"{path}, row 1: column '{duplicates[0]}' appears "
                                         f"twice in the header")
                    width = len(header)
                    yield header
                continue
            if len(fields) > width:
                if any(f.strip() for f in fields[width:]):
                    raise InputError(f"{path}, row {reader.line_num + offset}: {len(fields)} "
                                     f"fields where the header has {width}")
                del fields[width:]  # empty fields after a trailing delimiter
            elif len(fields) < width:
                fields.extend([""] * (width - len(fields)))
            cells += width
            if cells > limits.max_cells:
                raise limits.too_many(f"{path}, row {reader.line_num + offset}")
            yield fields, reader.line_num + offset
    except csv.Error as exc:
        if "field larger than field limit" in str(exc):
            raise limits.too_long(f"{path}, row {reader.line_num + offset}") from None
        raise InputError(f"{path}, row {reader.line_num + offset}: cannot be parsed as a table "
                         f"({exc})") from None
    if header is None:
        yield None


# --------------------------------------------------------------------------- text files: fast


class _Fallback(Exception):
    """The fast reader met what only the csv reader reads (or words) as it always has."""


def _text_pieces(path: Path, head: bytes, delimiter: str, limits: ReadLimits,
                 chunk_rows: int | None, offset: int
                 ) -> tuple[dict[str, str], Iterator[_Piece]]:
    """A text table's pieces: by pyarrow where the file is plain enough, else by csv."""
    if b"\x00" in head:
        raise InputError(f"{path}: holds binary data, not a text table (csv, tsv, xlsx, parquet)")
    encoding, quoted, nul = _scan_bytes(path)
    delim = _delimiter(path, encoding, delimiter)
    fields = None if nul else _plain_header(path, encoding, delim, limits)
    if fields is not None and quoted and not _plain_quotes(path, delim, encoding):
        fields = None

    def pieces() -> Iterator[_Piece]:
        done = 0  # data records handed out by the fast reader
        if fields is not None:
            try:
                for frame, lines in _fast_pieces(path, encoding, delim, fields, quoted, limits,
                                                 chunk_rows, offset):
                    done += len(frame)
                    yield frame, lines
                return
            except _Fallback:
                pass
        if chunk_rows is None:
            frame, lines, _ = _read_text(path, head, delimiter, limits, offset)
            yield frame, lines
            return
        for header, chunk, lines in _record_chunks(path, encoding, delim, limits, chunk_rows,
                                                   offset):
            skip = min(done, len(chunk))  # the records the fast reader handed out already
            done -= skip
            if skip and skip == len(chunk):
                continue
            frame = pd.DataFrame(chunk[skip:], columns=header, dtype=str) if chunk else (
                pd.DataFrame(columns=header, dtype=str))
            yield frame, lines[skip:]

    return _text_info(delim, encoding), pieces()


def _scan_bytes(path: Path) -> tuple[str, bool, bool]:
    """The encoding the csv reader would end with, whether any quote mark and any NUL byte."""
    quoted = nul = False
    decoders = [("utf-8-sig", codecs.getincrementaldecoder("utf-8-sig")())]
    for attempt in range(2):
        name, decoder = decoders[-1]
        good = True
        try:
            with path.open("rb") as handle:
                for block in iter(lambda: handle.read(SCAN), b""):
                    if not attempt:
                        quoted = quoted or b'"' in block
                        nul = nul or b"\x00" in block
                    if good:
                        try:
                            decoder.decode(block)
                        except UnicodeDecodeError:
                            good = False
                            if attempt:
                                break
            if good:
                decoder.decode(b"", final=True)
                return name, quoted, nul
        except UnicodeDecodeError:
            pass
        except OSError as exc:
            raise InputError(f"{path}: cannot be read ({exc.strerror})") from None
        decoders.append(("cp1252", codecs.getincrementaldecoder("cp1252")()))
    return "latin-1", quoted, nul


def _plain_header(path: Path, encoding: str, delim: str, limits: ReadLimits
                  ) -> list[str] | None:
    """The header's fields, when the first line holds a header pyarrow can take as the csv
    reader takes it (a whole record, within the limits, no repeated name); else None."""
    with path.open(encoding=encoding, newline="") as handle:
        sniff = handle.read(SNIFF)
    first = re.split(r"\r\n|\r|\n", sniff, maxsplit=1)
    if len(first) == 1 and len(sniff) >= SNIFF:
        return None
    try:
        fields = next(csv.reader([first[0]], delimiter=delim, quotechar='"', strict=True))
    except (csv.Error, StopIteration):
        return None
    if not any(f.strip() for f in fields) or len(fields) > limits.max_columns:
        return None
    if max(map(len, fields)) > limits.max_cell_chars or _repeated(_header(fields)):
        return None
    return fields


def _header(fields: list[str]) -> list[str]:
    header = [f.strip() for f in fields]
    while len(header) > 1 and header[-1] == "":  # a trailing delimiter
        header.pop()
    return header


def _plain_quotes(path: Path, delim: str, encoding: str) -> bool:
    """Whether every quote mark opens or closes a quoted field as strict csv wants.

    Counting quote marks from the start tells whether one stands inside a
    quoted field: outside, a quote mark must open a field (after a delimiter, a
    line end or the start) or be the second of a doubled pair; inside, one not
    doubled closes the field and must be followed by a delimiter, a line end or
    the end. A quote mark inside an unquoted field, text after a closing quote
    or an unclosed field fails, and the csv reader takes the file (pyarrow
    would read those, where csv refuses or reads them otherwise).
    """
    edges = np.array([ord(delim), 10, 13, -1])
    count, before = 0, -1  # quote marks so far; the byte before the buffer (-1: the start)
    carry = b""
    with path.open("rb") as handle:
        first = True
        for block in iter(lambda: handle.read(SCAN), b""):
            if first and encoding == "utf-8-sig" and block.startswith(codecs.BOM_UTF8):
                block = block[len(codecs.BOM_UTF8):]
            first = False
            buf = carry + block
            if len(buf) < 2:
                carry = buf
                continue
            arr = np.frombuffer(buf, dtype=np.uint8).astype(np.int16)
            ok, count = _quotes_ok(arr, len(buf) - 1, count, before, edges)
            if not ok:
                return False
            before, carry = int(arr[-2]), buf[-1:]
    if carry:
        arr = np.append(np.frombuffer(carry, dtype=np.uint8).astype(np.int16), -1)
        ok, count = _quotes_ok(arr, 1, count, before, edges)
        if not ok:
            return False
    return count % 2 == 0  # an odd count leaves a field open at the end


def _quotes_ok(arr: np.ndarray, body: int, count: int, before: int, edges: np.ndarray
               ) -> tuple[bool, int]:
    """Check the quote marks among the first ``body`` bytes of ``arr`` (see _plain_quotes)."""
    marks = np.flatnonzero(arr[:body] == 34)
    if not marks.size:
        return True, count
    inside = (count + np.arange(marks.size)) % 2 == 1
    prev = np.where(marks > 0, arr[np.maximum(marks - 1, 0)], before)
    after = arr[marks + 1]
    opening = ~inside & (prev != 34)
    closing = inside & (after != 34)
    ok = np.isin(prev[opening], edges).all() and np.isin(after[closing], edges).all()
    return bool(ok), count + int(marks.size)


def _fast_pieces(path: Path, encoding: str, delim: str, fields: list[str], quoted: bool,
                 limits: ReadLimits, chunk_rows: int | None, offset: int
                 ) -> Iterator[_Piece]:
    """The table by pyarrow's CSV reader, every cell as text, checked as the csv reader
    checks it; anything the csv reader would word raises :class:`_Fallback`."""
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.csv as pcsv

    header = _header(fields)
    width, raw_width = len(header), len(fields)
    names = [f"f{i}" for i in range(raw_width)]
    try:
        reader = pcsv.open_csv(
            path,
            read_options=pcsv.ReadOptions(
                encoding="utf8" if encoding == "utf-8-sig" else encoding, block_size=BLOCK,
                autogenerate_column_names=True),
            parse_options=pcsv.ParseOptions(
                delimiter=delim, quote_char='"', double_quote=True, escape_char=False,
                newlines_in_values=quoted, ignore_empty_lines=False),
            convert_options=pcsv.ConvertOptions(
                column_types=dict.fromkeys(names, pa.string()), strings_can_be_null=False,
                quoted_strings_can_be_null=False))
    except Exception:  # pyarrow refuses in many ways; the csv reader words it
        raise _Fallback() from None
    limit = limits.max_cell_chars
    line, records, first = 1, 0, True  # the header is line 1, alone on it
    frames: list[pd.DataFrame] = []
    numbers: list[int] = []
    held = 0
    while True:
        try:
            batch = reader.read_next_batch()
        except StopIteration:
            break
        except Exception:
            raise _Fallback() from None
        if first:
            if batch.num_columns != raw_width or [c[0].as_py() for c in batch.columns] != fields:
                raise _Fallback()
            batch, first = batch.slice(1), False
        n = batch.num_rows
        if not n:
            continue
        columns = batch.columns
        for column in columns:
            if (pc.max(pc.utf8_length(column)).as_py() or 0) > limit:
                raise _Fallback()
        for column in columns[width:]:  # past a trailing delimiter: empty, or the csv error
            if pc.any(pc.not_equal(column, "")).as_py():
                raise _Fallback()
        records += n
        if records * width > limits.max_cells:
            raise _Fallback()
        if quoted:  # a record runs over as many more lines as its quoted line ends
            breaks = np.zeros(n, dtype=np.int64)
            for column in columns:
                for mark, sign in (("\n", 1), ("\r", 1), ("\r\n", -1)):
                    breaks += sign * pc.count_substring(column, mark).to_numpy(
                        zero_copy_only=False)
            ends = line + np.cumsum(1 + breaks)
        else:
            ends = line + np.arange(1, n + 1)
        line = int(ends[-1])
        frame = pd.DataFrame({i: pd.array(columns[i], dtype=str) for i in range(width)})
        frame.columns = header
        frames.append(frame)
        numbers += (ends + offset).tolist()
        held += n
        while chunk_rows is not None and held >= chunk_rows:
            yield _take(frames, numbers, chunk_rows, header)
            held -= chunk_rows
    if held or chunk_rows is None or not records:
        yield _take(frames, numbers, held, header)


def _take(frames: list[pd.DataFrame], numbers: list[int], n: int, header: list[str]
          ) -> _Piece:
    """The first ``n`` rows held, taken out of ``frames`` and ``numbers``."""
    taken: list[pd.DataFrame] = []
    need = n
    while need and frames:
        head = frames[0]
        if len(head) <= need:
            taken.append(frames.pop(0))
            need -= len(head)
        else:
            taken.append(head.iloc[:need])
            frames[0] = head.iloc[need:].reset_index(drop=True)
            need = 0
    if not taken:
        frame = pd.DataFrame({i: pd.Series([], dtype=str) for i in range(len(header))})
        frame.columns = header
    else:
        frame = taken[0] if len(taken) == 1 else pd.concat(taken, ignore_index=True)
        frame = frame.reset_index(drop=True)
    lines = numbers[:n]
    del numbers[:n]
    return frame, lines


# --------------------------------------------------------------------------- excel and parquet


def _cell_text(value: object) -> str:
    """Text of a cell read by openpyxl or pyarrow, integers without '.0'."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        if value.is_integer() and abs(value) < 1e15:
            return str(int(value))
        return repr(value)
    if isinstance(value, int):
        return str(value)
    if hasattr(value, "isoformat"):
        return value.isoformat()  # type: ignore[no-any-return]
    return str(value)


def _check_archive(path: Path, handle: IO[bytes], limits: ReadLimits) -> None:
    """Refuse a workbook that unpacks past ``max_unpacked_mb``, before anything is unpacked.

    The sizes come from the zip directory; :mod:`zipfile` never hands out more
    than the size an entry declares, so a directory that lies cannot get more
    past openpyxl than it declares.
    """
    try:
        with zipfile.ZipFile(handle) as archive:
            unpacked = sum(info.file_size for info in archive.infolist())
    except (zipfile.BadZipFile, zipfile.LargeZipFile, OSError, ValueError, EOFError) as exc:
        raise InputError(f"{path}: not a readable .xlsx workbook ({exc.__class__.__name__})"
                         ) from None
    if unpacked > limits.max_unpacked_mb * MB:
        raise limits.too_big(path, unpacked, "the workbook")


def _forbidden_xml(exc: BaseException) -> bool:
    """Whether defusedxml refused the XML behind ``exc`` (openpyxl wraps what it meets)."""
    from defusedxml import DefusedXmlException

    seen: BaseException | None = exc
    for _ in range(10):  # a short chain; never loop on a cycle
        if seen is None:
            return False
        if isinstance(seen, DefusedXmlException):
            return True
        seen = seen.__cause__ or seen.__context__
    return False


def _entities(path: Path) -> InputError:
    return InputError(f"{path}: refused: the workbook's XML declares entities, which no .xlsx "
                      f"writer does (the form of an entity-expansion attack)")


def _sheet_rows(path: Path, ws: Any, limits: ReadLimits, offset: int = 0) -> list[list[str]]:
    """The sheet's rows as text, each without its trailing empty cells, within the limits."""
    limit, width_limit = limits.max_cell_chars, limits.max_columns
    rows: list[list[str]] = []
    made = width = 0
    for number, row in enumerate(ws.iter_rows(values_only=True), start=1):
        if number > SHEET_ROWS:  # openpyxl would make every missing row up to a row's number
            raise InputError(f"{path}, row {number + offset}: past the {SHEET_ROWS} rows a sheet "
                             f"can hold; not a valid workbook")
        made += len(row)  # every cell openpyxl made costs time, empty or not
        if made > limits.max_cells:
            raise limits.too_many(f"{path}, row {number + offset}")
        if len(row) > width_limit and row[width_limit:].count(None) < len(row) - width_limit:
            raise limits.too_wide(f"{path}, row {number + offset}")
        texts = [_cell_text(v) for v in row]
        while texts and texts[-1] == "":
            texts.pop()
        if texts and max(map(len, texts)) > limit:
            column = next(i for i, t in enumerate(texts) if len(t) > limit) + 1
            raise limits.too_long(f"{path}, row {number + offset}, column {column}")
        width = max(width, len(texts))
        if number * width > limits.max_cells:  # the table it makes: rows x columns
            raise limits.too_many(f"{path}, row {number + offset}")
        rows.append(texts)
    return rows


def _read_excel(path: Path, sheet: str, limits: ReadLimits, offset: int = 0
                ) -> tuple[pd.DataFrame, list[int], dict[str, str]]:
    import openpyxl
    import openpyxl.xml

    if not openpyxl.xml.DEFUSEDXML:  # switched off by OPENPYXL_DEFUSEDXML=False
        raise InputError(f"{path}: .xlsx workbooks are read only with defusedxml guarding "
                         f"openpyxl's XML parser; unset OPENPYXL_DEFUSEDXML")
    try:
        handle = path.open("rb")
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror})") from None
    with handle:
        _check_archive(path, handle, limits)
        handle.seek(0)
        try:
            # from the open file, so that a workbook under another suffix is read all the same
            book = openpyxl.load_workbook(handle, read_only=True, data_only=True)
        except Exception as exc:  # a damaged workbook can fail in zipfile, zlib or the XML parser
            if _forbidden_xml(exc):
                raise _entities(path) from None
            raise InputError(f"{path}: not a readable .xlsx workbook "
                             f"({exc.__class__.__name__})") from None
        try:
            if sheet and sheet not in book.sheetnames:
                names = ", ".join(book.sheetnames)
                raise InputError(f"{path}: no sheet named '{sheet}' (sheets: {names})")
            ws = book[sheet] if sheet else book.worksheets[0]
            used_sheet = ws.title
            # the declared dimension is the writer's word: openpyxl would pad every row
            # to it, and a hostile one spans the whole 16384 x 1048576 grid
            ws.reset_dimensions()
            rows = _sheet_rows(path, ws, limits, offset)
        except InputError:
            raise
        except Exception as exc:
            if _forbidden_xml(exc):
                raise _entities(path) from None
            raise InputError(f"{path}: sheet cannot be read ({exc.__class__.__name__})"
                             ) from None
        finally:
            book.close()
    numbered = [(i + 1, r) for i, r in enumerate(rows)]
    while numbered and not any(c.strip() for c in numbered[0][1]):  # blank rows above the header
        numbered.pop(0)
    if not numbered:
        raise InputError(f"{path}: sheet '{used_sheet}' is empty")
    width = max(len(r) for _, r in numbered)
    header = [c.strip() for c in numbered[0][1]] + [""] * (width - len(numbered[0][1]))
    data = [r + [""] * (width - len(r)) for _, r in numbered[1:]]
    frame = pd.DataFrame(data, columns=header, dtype=str) if header else pd.DataFrame()
    return frame, [n + offset for n, _ in numbered[1:]], {"format": "xlsx", "sheet": used_sheet}


def _parquet_pieces(path: Path, limits: ReadLimits, chunk_rows: int | None, offset: int
                    ) -> tuple[dict[str, str], Iterator[_Piece]]:
    """A Parquet file's pieces, its limits checked from the footer before any data is read."""
    import pyarrow.parquet as pq

    try:
        parquet = pq.ParquetFile(path)
        meta = parquet.metadata
        n_columns, n_rows = meta.num_columns, meta.num_rows
        unpacked = sum(meta.row_group(i).total_byte_size for i in range(meta.num_row_groups))
    except Exception as exc:  # damaged files fail deep inside pyarrow, in many ways
        raise InputError(f"{path}: not a readable Parquet file ({exc.__class__.__name__})"
                         ) from None
    # from the footer, before any data is read
    if n_columns > limits.max_columns:
        raise limits.too_wide(f"{path}, row 1")
    if n_columns * n_rows > limits.max_cells:
        raise limits.too_many(str(path))
    if unpacked > limits.max_unpacked_mb * MB:
        raise limits.too_big(path, unpacked, "the data")

    def pieces() -> Iterator[_Piece]:
        first = 2 + offset
        try:
            tables = ([parquet.read()] if chunk_rows is None else
                      (_batch_table(b) for b in parquet.iter_batches(batch_size=chunk_rows)))
            made = False
            for table in tables:
                frame = _parquet_frame(table, path, limits, first)
                yield frame, list(range(first, first + len(frame)))
                first += len(frame)
                made = True
            if not made:
                yield _parquet_frame(parquet.schema_arrow.empty_table(), path, limits, first), []
        except InputError:
            raise
        except Exception as exc:
            raise InputError(f"{path}: not a readable Parquet file ({exc.__class__.__name__})"
                             ) from None

    return {"format": "parquet"}, pieces()


def _batch_table(batch: Any) -> Any:
    import pyarrow as pa

    return pa.Table.from_batches([batch])


def _numeric(column: Any) -> bool:
    """Whether a Parquet column stays numbers: floats, and integers that a float holds and
    writes as the file would (whole numbers below 1e15)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    kind = column.type
    if pa.types.is_floating(kind):
        return True
    if not pa.types.is_integer(kind):
        return False
    low, high = pc.min_max(column).values()
    return low.as_py() is None or max(abs(low.as_py()), abs(high.as_py())) < 10**15


def _parquet_frame(table: Any, path: Path, limits: ReadLimits, first: int) -> pd.DataFrame:
    """Numbers as floats, every other column as text (as :func:`_cell_text` writes a cell)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    limit = limits.max_cell_chars
    columns: dict[str, pd.Series] = {}
    for position, (name, column) in enumerate(zip(table.column_names, table.columns), start=1):
        if _numeric(column):
            columns[str(name)] = pd.Series(
                column.cast(pa.float64()).to_numpy(zero_copy_only=False), dtype=float)
            continue
        kind = column.type
        if pa.types.is_dictionary(kind) and pa.types.is_string(kind.value_type):
            column = column.cast(pa.string())
        if pa.types.is_string(column.type) or pa.types.is_large_string(column.type):
            texts = pd.array(pc.fill_null(column.cast(pa.string()), ""), dtype=str)
            lengths = pc.utf8_length(column).to_numpy(zero_copy_only=False)
        else:  # dates, decimals, booleans: as the cells were always written
            texts = pd.array([_cell_text(v) for v in column.to_pylist()], dtype=str)
            lengths = np.array([len(t) for t in texts])
        too_long = np.flatnonzero(np.nan_to_num(lengths.astype(float)) > limit)
        if too_long.size:
            raise limits.too_long(f"{path}, row {first + int(too_long[0])}, column {position}")
        columns[str(name)] = pd.Series(texts)
    return pd.DataFrame(columns)


def number_texts(values: np.ndarray) -> np.ndarray:
    """Floats as the text a cell of them reads as (:func:`_cell_text`): whole numbers below
    1e15 without ".0", others in Python's shortest form, NaN empty."""
    values = np.asarray(values, dtype=float)
    out = np.full(values.shape, "", dtype=object)
    finite = np.isfinite(values)
    whole = finite & (values == np.round(values)) & (np.abs(np.where(finite, values, 0)) < 1e15)
    out[whole] = values[whole].astype(np.int64).astype(str).astype(object)
    other = ~whole & ~np.isnan(values)
    out[other] = [repr(float(v)) for v in values[other]]
    return out


# --------------------------------------------------------------------------- common


def _repeated(names: list[str]) -> list[str]:
    """Header names given more than once, sorted (in linear time: headers can be wide)."""
    return sorted(name for name, n in Counter(names).items() if name and n > 1)


def _finish(frame: pd.DataFrame, lines: list[int], source: Source,
            allow_empty: bool = False) -> RawTable:
    name = source.name
    if frame.shape[1] == 0:
        raise InputError(f"{name}: holds no table (no header line)")
    headers = [str(c).strip() for c in frame.columns]
    for i, header in enumerate(headers):
        if not header or header.startswith("Unnamed: "):
            raise InputError(f"{name}, row 1: column {i + 1} has no name in the header")
    duplicates = _repeated(headers)
    if duplicates:
        raise InputError(f"{name}, row 1: column '{duplicates[0]}' appears twice in the header")
    columns: dict[str, pd.Series] = {}
    blank = np.ones(len(frame), dtype=bool)
    for header, (_, column) in zip(headers, frame.items()):
        if pd.api.types.is_float_dtype(column.dtype):  # numbers as the file stores them
            blank &= column.isna().to_numpy()
        else:
            column = column.astype(str).str.strip()
            blank &= (column == "").to_numpy(dtype=bool)
        columns[header] = column.reset_index(drop=True)
    frame = pd.DataFrame(columns)
    if blank.any():
        keep = ~blank
        rows = [lines[i] for i in np.flatnonzero(keep)]
        frame = frame.loc[keep].reset_index(drop=True)
    else:
        rows = list(lines)
    if frame.empty and not allow_empty:
        raise InputError(f"{name}: has a header but no data rows")
    return RawTable(cells=frame, rows=rows, source=source, blank_rows=int(blank.sum()))


# --------------------------------------------------------------------------- in memory


def _frame_cell(value: object) -> str:
    """Text of one DataFrame cell: numbers as Python writes them, missing values empty."""
    if value is None or value is pd.NA or value is pd.NaT:
        return ""
    if isinstance(value, float) and math.isnan(value):
        return ""
    return _cell_text(value)


def raw_from_frame(frame: pd.DataFrame, name: str = "DataFrame") -> RawTable:
    """A pandas DataFrame of lots as text cells, ready for :func:`vinstrata.read.validate.validate`.

    Every cell becomes text the way a lot file's cells are read (numbers
    without a trailing ``.0`` for whole values, the shortest text that gives
    the float back otherwise, missing values empty); the index is not read.
    The ``Source`` has no path; its SHA-256 is that of the cells written as
    CSV (UTF-8, comma, ``\\n``, header first), so the same frame always gives
    the same hash.

    Parameters
    ----------
    frame : DataFrame
        One row per lot; column names are taken as text.
    name : str
        What messages call the table.

    Returns
    -------
    RawTable

    Raises
    ------
    InputError
        Not a DataFrame, blank or repeated column names, no data rows.
    """

    if not isinstance(frame, pd.DataFrame):
        raise InputError(f"{name}: expected a pandas DataFrame of lots, got "
                         f"{type(frame).__name__}")
    headers = [str(c) for c in frame.columns]
    columns = {header: [_frame_cell(v) for v in frame.iloc[:, i].tolist()]
               for i, header in enumerate(headers)}
    if len(columns) != len(headers):
        raise InputError(f"{name}, row 1: column '{_repeated(headers)[0]}' appears twice in "
                         "the header")
    text = pd.DataFrame(columns, columns=headers, dtype=object)
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(headers)
    writer.writerows(text.itertuples(index=False, name=None))
    digest = hashlib.sha256(buffer.getvalue().encode("utf-8")).hexdigest()
    source = Source(path="", name=name, sha256=digest, format="dataframe")
    return _finish(text, list(range(2, len(text) + 2)), source)

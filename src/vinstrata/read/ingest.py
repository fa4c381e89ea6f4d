"""Reading lot tables from disk: CSV / TSV, Excel (.xlsx) and Parquet.

This is the only module that opens a lot file. It returns every cell as text
(:class:`RawTable`), so that parsing numbers, censored values and units is done
once, the same way for every format, in :mod:`vinstrata.read.validate`.

* CSV and TSV: the delimiter is detected among comma, semicolon and tab from
  the header line (the candidate that splits the header into the most
  fields, consistently over the first lines); UTF-8 with or without a byte
  order mark, falling back to Windows-1252 / Latin-1.
* Excel: the first sheet, or the one named by ``sheet``.
* Parquet: read with pyarrow.

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

import csv
import hashlib
import math
import zipfile
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import IO, TYPE_CHECKING, Any

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
        One column per header, every value a ``str`` ("" where empty), one
        row per data row that is not entirely blank, in file order.
    rows : list of int
        The file row number of each data row (header = row 1).
    source : Source
    blank_rows : int
        Entirely blank rows that were skipped (they hold no lot).
    """

    cells: pd.DataFrame
    rows: list[int]
    source: Source
    blank_rows: int = 0


def read_table(path: str | Path, sheet: str = "", delimiter: str = "auto",
               limits: ReadLimits | None = None) -> RawTable:
    """Read a lot file into text cells.

    Parameters
    ----------
    path : str or Path
        A .csv, .tsv, .txt, .xlsx or .parquet file. The format is taken from
        the file's first bytes where they are telling, else from its suffix.
    sheet : str
        Excel sheet name; "" reads the first sheet.
    delimiter : str
        "auto", ",", ";" or "\\t" (also "tab").
    limits : ReadLimits, optional
        What the file may hold; the ``[ingest]`` defaults when None.

    Returns
    -------
    RawTable

    Raises
    ------
    InputError
        Missing, empty or unreadable file, a file that is not a table, an
        unknown sheet, duplicate or blank header names, a file past one of
        the ``limits``.
    """
    path = Path(path)
    limits = limits or ReadLimits()
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
    suffix = path.suffix.lower()
    if head.startswith(b"PAR1") or suffix == ".parquet":
        frame, lines, info = _read_parquet(path, limits)
    elif head.startswith(b"PK\x03\x04") or suffix in (".xlsx", ".xlsm"):
        frame, lines, info = _read_excel(path, sheet, limits)
    else:
        frame, lines, info = _read_text(path, head, delimiter, limits)
    source = Source(path=str(path), name=path.name, sha256=_sha256(path), **info)
    return _finish(frame, lines, source)


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    try:
        with path.open("rb") as handle:
            for block in iter(lambda: handle.read(MB), b""):
                digest.update(block)
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror})") from None
    return digest.hexdigest()


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
        where = f"{self.path}, row {number}"
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


def _read_text(path: Path, head: bytes, delimiter: str, limits: ReadLimits
               ) -> tuple[pd.DataFrame, list[int], dict[str, str]]:
    if b"\x00" in head:
        raise InputError(f"{path}: holds binary data, not a text table (csv, tsv, xlsx, parquet)")
    for encoding in ("utf-8-sig", "cp1252", "latin-1"):
        try:
            return _parse_text(path, encoding, delimiter, limits)
        except UnicodeDecodeError:  # met while reading: read again in the next encoding
            continue
    raise InputError(f"{path}: cannot be decoded as text")  # pragma: no cover - latin-1 decodes all


def _parse_text(path: Path, encoding: str, delimiter: str, limits: ReadLimits
                ) -> tuple[pd.DataFrame, list[int], dict[str, str]]:
    delim = {"tab": "\t"}.get(delimiter, delimiter)
    if delim == "auto":
        with path.open(encoding=encoding, newline="") as handle:
            delim = detect_delimiter(handle.read(SNIFF))
    previous_limit = csv.field_size_limit(limits.max_cell_chars)
    try:
        with path.open(encoding=encoding, newline="") as handle:
            lines = _Lines(handle, path, delim, limits)
            header, records, numbers = _records(path, lines, delim, limits)
    finally:
        csv.field_size_limit(previous_limit)
    if header is None:
        raise InputError(f"{path}: holds no table (no header line)" if lines.seen_text else
                         f"{path}: the file is empty")
    frame = pd.DataFrame(records, columns=header, dtype=str) if records else pd.DataFrame(
        columns=header, dtype=str)
    return frame, numbers, {"format": "text", "delimiter": DELIMITERS.get(delim, repr(delim)),
                            "encoding": encoding}


def _records(path: Path, lines: _Lines, delim: str, limits: ReadLimits
             ) -> tuple[list[str] | None, list[list[str]], list[int]]:
    """Header, data records (each as wide as the header) and their row numbers."""
    # strict: an unclosed quote must not swallow the rest of the file into one cell
    reader = csv.reader(lines, delimiter=delim, quotechar='"', strict=True)
    header: list[str] | None = None
    records: list[list[str]] = []
    numbers: list[int] = []
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
                        raise limits.too_wide(f"{path}, row {reader.line_num}")
                    duplicates = _repeated(header)
                    if duplicates:
                        raise InputError(f"{path}, row 1: column '{duplicates[0]}' appears "
                                         f"twice in the header")
                    width = len(header)
                continue
            if len(fields) > width:
                if any(f.strip() for f in fields[width:]):
                    raise InputError(f"{path}, row {reader.line_num}: {len(fields)} fields "
                                     f"where the header has {width}")
                del fields[width:]  # empty fields after a trailing delimiter
            elif len(fields) < width:
                fields.extend([""] * (width - len(fields)))
            cells += width
            if cells > limits.max_cells:
                raise limits.too_many(f"{path}, row {reader.line_num}")
            records.append(fields)
            numbers.append(reader.line_num)
    except csv.Error as exc:
        if "field larger than field limit" in str(exc):
            raise limits.too_long(f"{path}, row {reader.line_num}") from None
        raise InputError(f"{path}, row {reader.line_num}: cannot be parsed as a table "
                         f"({exc})") from None
    return header, records, numbers


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


def _sheet_rows(path: Path, ws: Any, limits: ReadLimits) -> list[list[str]]:
    """The sheet's rows as text, each without its trailing empty cells, within the limits."""
    limit, width_limit = limits.max_cell_chars, limits.max_columns
    rows: list[list[str]] = []
    made = width = 0
    for number, row in enumerate(ws.iter_rows(values_only=True), start=1):
        if number > SHEET_ROWS:  # openpyxl would make every missing row up to a row's number
            raise InputError(f"{path}, row {number}: past the {SHEET_ROWS} rows a sheet can "
                             f"hold; not a valid workbook")
        made += len(row)  # every cell openpyxl made costs time, empty or not
        if made > limits.max_cells:
            raise limits.too_many(f"{path}, row {number}")
        if len(row) > width_limit and row[width_limit:].count(None) < len(row) - width_limit:
            raise limits.too_wide(f"{path}, row {number}")
        texts = [_cell_text(v) for v in row]
        while texts and texts[-1] == "":
            texts.pop()
        if texts and max(map(len, texts)) > limit:
            column = next(i for i, t in enumerate(texts) if len(t) > limit) + 1
            raise limits.too_long(f"{path}, row {number}, column {column}")
        width = max(width, len(texts))
        if number * width > limits.max_cells:  # the table it makes: rows x columns
            raise limits.too_many(f"{path}, row {number}")
        rows.append(texts)
    return rows


def _read_excel(path: Path, sheet: str, limits: ReadLimits
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
            rows = _sheet_rows(path, ws, limits)
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
    return frame, [n for n, _ in numbered[1:]], {"format": "xlsx", "sheet": used_sheet}


def _read_parquet(path: Path, limits: ReadLimits
                  ) -> tuple[pd.DataFrame, list[int], dict[str, str]]:
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
    try:
        table = parquet.read()
        columns = {str(name): [_cell_text(v) for v in table.column(i).to_pylist()]
                   for i, name in enumerate(table.column_names)}
    except Exception as exc:
        raise InputError(f"{path}: not a readable Parquet file ({exc.__class__.__name__})"
                         ) from None
    limit = limits.max_cell_chars
    for position, texts in enumerate(columns.values(), start=1):
        if texts and max(map(len, texts)) > limit:
            row = next(i for i, t in enumerate(texts) if len(t) > limit) + 2
            raise limits.too_long(f"{path}, row {row}, column {position}")
    frame = pd.DataFrame(columns, dtype=str)
    return frame, list(range(2, len(frame) + 2)), {"format": "parquet"}


# --------------------------------------------------------------------------- common


def _repeated(names: list[str]) -> list[str]:
    """Header names given more than once, sorted (in linear time: headers can be wide)."""
    return sorted(name for name, n in Counter(names).items() if name and n > 1)


def _finish(frame: pd.DataFrame, lines: list[int], source: Source) -> RawTable:
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
    frame = frame.copy()
    frame.columns = headers
    frame = frame.astype(str).apply(lambda col: col.str.strip())
    blank = (frame == "").all(axis=1).to_numpy()
    rows = [lines[i] for i in range(len(frame)) if not blank[i]]
    frame = frame.loc[~blank].reset_index(drop=True)
    if frame.empty:
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
    import io

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

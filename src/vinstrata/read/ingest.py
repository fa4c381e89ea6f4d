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
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from vinstrata.errors import InputError

DELIMITERS = {",": "comma", ";": "semicolon", "\t": "tab"}


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


def read_table(path: str | Path, sheet: str = "", delimiter: str = "auto") -> RawTable:
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

    Returns
    -------
    RawTable

    Raises
    ------
    InputError
        Missing, empty or unreadable file, a file that is not a table, an
        unknown sheet, duplicate or blank header names.
    """
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: file not found")
    if path.is_dir():
        raise InputError(f"{path}: is a folder, not a lot file")
    try:
        data = path.read_bytes()  # once: hashed, sniffed and parsed from memory
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror})") from None
    if not data:
        raise InputError(f"{path}: the file is empty")
    suffix = path.suffix.lower()
    if data.startswith(b"PAR1") or suffix == ".parquet":
        frame, lines, info = _read_parquet(path, data)
    elif data.startswith(b"PK\x03\x04") or suffix in (".xlsx", ".xlsm"):
        frame, lines, info = _read_excel(path, data, sheet)
    else:
        frame, lines, info = _read_text(path, data, delimiter)
    source = Source(path=str(path), name=path.name, sha256=hashlib.sha256(data).hexdigest(),
                    **info)
    return _finish(frame, lines, source)


# --------------------------------------------------------------------------- text files


def _decode(path: Path, data: bytes) -> tuple[str, str]:
    if b"\x00" in data[:65536]:
        raise InputError(f"{path}: holds binary data, not a text table (csv, tsv, xlsx, parquet)")
    for encoding in ("utf-8-sig", "cp1252", "latin-1"):
        try:
            return data.decode(encoding), encoding
        except UnicodeDecodeError:
            continue
    raise InputError(f"{path}: cannot be decoded as text")  # pragma: no cover - latin-1 decodes all


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
    lines = [ln for ln in text[:200_000].splitlines()[:50] if ln.strip()]
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


def _read_text(path: Path, data: bytes, delimiter: str
               ) -> tuple[pd.DataFrame, list[int], dict[str, str]]:
    text, encoding = _decode(path, data)
    if not text.strip():
        raise InputError(f"{path}: the file is empty")
    delim = {"tab": "\t"}.get(delimiter, delimiter)
    if delim == "auto":
        delim = detect_delimiter(text)
    # strict: an unclosed quote must not swallow the rest of the file into one cell
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delim, quotechar='"',
                        strict=True)
    header: list[str] | None = None
    records: list[list[str]] = []
    lines: list[int] = []
    try:
        for fields in reader:
            if header is None:
                if any(f.strip() for f in fields):  # blank lines before the header are skipped
                    header = [f.strip() for f in fields]
                    while len(header) > 1 and header[-1] == "":  # a trailing delimiter
                        header.pop()
                continue
            records.append(fields)
            lines.append(reader.line_num)
    except csv.Error as exc:
        raise InputError(f"{path}, row {reader.line_num}: cannot be parsed as a table "
                         f"({exc})") from None
    if header is None:
        raise InputError(f"{path}: holds no table (no header line)")
    duplicates = sorted({h for h in header if h and header.count(h) > 1})
    if duplicates:
        raise InputError(f"{path}, row 1: column '{duplicates[0]}' appears twice in the header")
    width = len(header)
    for k, fields in enumerate(records):
        if len(fields) > width:
            if any(f.strip() for f in fields[width:]):
                raise InputError(f"{path}, row {lines[k]}: {len(fields)} fields where the "
                                 f"header has {width}")
            del fields[width:]  # empty fields after a trailing delimiter
        elif len(fields) < width:
            fields.extend([""] * (width - len(fields)))
    frame = pd.DataFrame(records, columns=header, dtype=str) if records else pd.DataFrame(
        columns=header, dtype=str)
    return frame, lines, {"format": "text", "delimiter": DELIMITERS.get(delim, repr(delim)),
                          "encoding": encoding}


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


def _read_excel(path: Path, data: bytes, sheet: str
                ) -> tuple[pd.DataFrame, list[int], dict[str, str]]:
    import openpyxl

    try:
        # from bytes, so that a workbook under another suffix is read all the same
        book = openpyxl.load_workbook(io.BytesIO(data), read_only=True,
                                      data_only=True)
    except Exception as exc:  # a damaged workbook can fail in zipfile, zlib or the XML parser
        raise InputError(f"{path}: not a readable .xlsx workbook ({exc.__class__.__name__})"
                         ) from None
    try:
        if sheet and sheet not in book.sheetnames:
            names = ", ".join(book.sheetnames)
            raise InputError(f"{path}: no sheet named '{sheet}' (sheets: {names})")
        ws = book[sheet] if sheet else book.worksheets[0]
        used_sheet = ws.title
        rows = [[_cell_text(v) for v in row] for row in ws.iter_rows(values_only=True)]
    except InputError:
        raise
    except Exception as exc:
        raise InputError(f"{path}: sheet cannot be read ({exc.__class__.__name__})") from None
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
    while header and header[-1] == "" and all(r[len(header) - 1] == "" for r in data):
        header = header[:-1]
        data = [r[: len(header)] for r in data]
    frame = pd.DataFrame(data, columns=header, dtype=str) if header else pd.DataFrame()
    return frame, [n for n, _ in numbered[1:]], {"format": "xlsx", "sheet": used_sheet}


def _read_parquet(path: Path, data: bytes) -> tuple[pd.DataFrame, list[int], dict[str, str]]:
    import pyarrow.parquet as pq

    try:
        table = pq.read_table(io.BytesIO(data))
        columns = {str(name): [_cell_text(v) for v in table.column(i).to_pylist()]
                   for i, name in enumerate(table.column_names)}
    except Exception as exc:  # damaged files fail deep inside pyarrow, in many ways
        raise InputError(f"{path}: not a readable Parquet file ({exc.__class__.__name__})"
                         ) from None
    frame = pd.DataFrame(columns, dtype=str)
    return frame, list(range(2, len(frame) + 2)), {"format": "parquet"}


# --------------------------------------------------------------------------- common


def _finish(frame: pd.DataFrame, lines: list[int], source: Source) -> RawTable:
    name = source.name
    if frame.shape[1] == 0:
        raise InputError(f"{name}: holds no table (no header line)")
    headers = [str(c).strip() for c in frame.columns]
    for i, header in enumerate(headers):
        if not header or header.startswith("Unnamed: "):
            raise InputError(f"{name}, row 1: column {i + 1} has no name in the header")
    duplicates = sorted({h for h in headers if headers.count(h) > 1})
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

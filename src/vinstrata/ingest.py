"""Reading lot tables from disk: CSV / TSV, Excel (.xlsx) and Parquet.

This is the only module that opens a lot file. It returns every cell as text
(:class:`RawTable`), so that parsing numbers, censored values and units is done
once, the same way for every format, in :mod:`vinstrata.validate`.

* CSV and TSV: the delimiter is detected among comma, semicolon and tab from
  the header line (the candidate that splits the header into the most
  fields, consistently over the first lines); UTF-8 with or without a byte
  order mark, falling back to Windows-1252 / Latin-1.
* Excel: the first sheet, or the one named by ``sheet``.
* Parquet: read with pyarrow.

Row numbers count the header as row 1, as a spreadsheet shows them.
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
import re
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


def sha256_of(path: Path) -> str:
    """Hex SHA-256 of a file, for provenance."""
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


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
        head = path.open("rb").read(8)
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror})") from None
    if not head:
        raise InputError(f"{path}: the file is empty")
    digest = sha256_of(path)
    suffix = path.suffix.lower()
    if head.startswith(b"PAR1") or suffix == ".parquet":
        frame, info = _read_parquet(path), {"format": "parquet"}
    elif head.startswith(b"PK\x03\x04") or suffix in (".xlsx", ".xlsm"):
        frame, info = _read_excel(path, sheet)
    else:
        frame, info = _read_text(path, delimiter)
    source = Source(path=str(path), name=path.name, sha256=digest, **info)
    return _finish(frame, source)


# --------------------------------------------------------------------------- text files


def _decode(path: Path) -> tuple[str, str]:
    data = path.read_bytes()
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
    lines = [ln for ln in text.splitlines()[:50] if ln.strip()]
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


def _read_text(path: Path, delimiter: str) -> tuple[pd.DataFrame, dict[str, str]]:
    text, encoding = _decode(path)
    if not text.strip():
        raise InputError(f"{path}: the file is empty")
    delim = {"tab": "\t"}.get(delimiter, delimiter)
    if delim == "auto":
        delim = detect_delimiter(text)
    first = next((ln for ln in text.splitlines() if ln.strip()), "")
    header = [h.strip() for h in _split(first, delim)]
    duplicates = sorted({h for h in header if h and header.count(h) > 1})
    if duplicates:
        raise InputError(f"{path}, row 1: column '{duplicates[0]}' appears twice in the header")
    try:
        frame = pd.read_csv(
            io.StringIO(text), sep=delim, dtype=str, keep_default_na=False,
            skip_blank_lines=False, engine="c", quotechar='"',
        )
    except pd.errors.ParserError as exc:
        raise InputError(f"{path}: {_parser_message(str(exc))}") from None
    except (pd.errors.EmptyDataError, UnicodeError):
        raise InputError(f"{path}: holds no table (no header line)") from None
    frame = frame.fillna("")
    return frame, {"format": "text", "delimiter": DELIMITERS.get(delim, repr(delim)),
                   "encoding": encoding}


def _parser_message(text: str) -> str:
    match = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", text)
    if match:
        want, line, got = match.groups()
        return f"row {line}: {got} fields where the header has {want}"
    return "cannot be parsed as a table (" + " ".join(text.split())[:120] + ")"


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


def _read_excel(path: Path, sheet: str) -> tuple[pd.DataFrame, dict[str, str]]:
    import zipfile

    import openpyxl

    try:
        book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except (zipfile.BadZipFile, KeyError, OSError, ValueError) as exc:
        raise InputError(f"{path}: not a readable .xlsx workbook ({exc.__class__.__name__})") from None
    try:
        if sheet:
            if sheet not in book.sheetnames:
                names = ", ".join(book.sheetnames)
                raise InputError(f"{path}: no sheet named '{sheet}' (sheets: {names})")
            ws = book[sheet]
        else:
            ws = book.worksheets[0]
        rows = [[_cell_text(v) for v in row] for row in ws.iter_rows(values_only=True)]
        used_sheet = ws.title
    finally:
        book.close()
    if not rows:
        raise InputError(f"{path}: sheet '{used_sheet}' is empty")
    width = max(len(r) for r in rows)
    rows = [r + [""] * (width - len(r)) for r in rows]
    header = rows[0]
    while header and header[-1] == "" and all(r[len(header) - 1] == "" for r in rows):
        header = header[:-1]
        rows = [r[: len(header)] for r in rows]
    frame = pd.DataFrame(rows[1:], columns=header, dtype=str) if header else pd.DataFrame()
    return frame, {"format": "xlsx", "sheet": used_sheet}


def _read_parquet(path: Path) -> pd.DataFrame:
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        table = pq.read_table(path)
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise InputError(f"{path}: not a readable Parquet file ({exc.__class__.__name__})") from None
    columns = {}
    for name in table.column_names:
        columns[str(name)] = [_cell_text(v) for v in table.column(name).to_pylist()]
    return pd.DataFrame(columns, dtype=str)


# --------------------------------------------------------------------------- common


def _finish(frame: pd.DataFrame, source: Source) -> RawTable:
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
    rows = [i + 2 for i in range(len(frame)) if not blank[i]]
    frame = frame.loc[~blank].reset_index(drop=True)
    if frame.empty:
        raise InputError(f"{name}: has a header but no data rows")
    return RawTable(cells=frame, rows=rows, source=source, blank_rows=int(blank.sum()))

"""Fuzzing `vinstrata check` with malformed lot tables: it never crashes.

Whatever the file holds, the command either refuses it (exit code 2, exactly one stderr
line starting "error:") or reports every row (exit code 0, row_status.csv holds one row
per non-blank data row, in order, with the lot id as written). Exit code 1 is an internal
fault and never acceptable for bad input. All tables are random or invented (ids ``T-``).
"""

from __future__ import annotations

import csv
import io
import itertools
import math
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from vinstrata.config import load_config
from vinstrata.read.validate import load_lots

ANALYTES = ["alcohol", "ph", "free_so2", "total_so2", "malic_acid"]
COLUMNS = ["lot", "grade", *ANALYTES]
CONFIG = ('[columns]\nlot_id = "lot"\ngrade = "grade"\n'
          f"analytes = [{', '.join(repr(a) for a in ANALYTES)}]\n").replace("'", '"')
REASONS = {"used", "missing_lot_id", "duplicate_lot_id", "non_numeric", "missing_grade",
           "negative", "out_of_range", "free_so2_above_total", "too_many_missing"}

FUZZ = settings(max_examples=50, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.function_scoped_fixture,
                                       HealthCheck.too_slow])

_counter = itertools.count()


@pytest.fixture(scope="module")
def config_path(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("fuzz_config") / "fuzz.toml"
    path.write_text(CONFIG, encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def workdir(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("fuzz")


def fresh(workdir: Path) -> Path:
    folder = workdir / f"case{next(_counter)}"
    if folder.exists():
        shutil.rmtree(folder)
    folder.mkdir()
    return folder


def run_check(run_cli, path: Path, config_path: Path):
    out = path.parent / "out"
    return run_cli("check", path, "--config", config_path, "--out", out), out


def lots_of(records: list[list[str]]) -> list[str]:
    """The lot ids (first cell, as the engine strips it) of the non-blank records."""
    return [rec[0].strip() for rec in records if any(c.strip() for c in rec)]


def assert_clean(result, out: Path, lots: list[str] | None = None) -> list[list[str]]:
    """The contract; returns the row_status rows when the command succeeded."""
    assert "Traceback" not in result.err, result
    assert result.code in (0, 2), result
    if result.code == 2:
        lines = result.err.strip().splitlines()
        assert len(lines) == 1, result
        assert lines[0].startswith("error:"), result
        return []
    with open(out / "row_status.csv", newline="", encoding="utf-8") as handle:
        status = list(csv.reader(handle))
    assert status[0] == ["row", "lot_id", "status", "detail"]
    status = status[1:]
    summary = dict(pd.read_csv(out / "quality_summary.csv", dtype=str,
                               keep_default_na=False).values)
    assert int(summary["rows_read"]) == len(status)
    assert int(summary["rows_used"]) + int(summary["rows_rejected"]) == len(status)
    rows = [int(r[0]) for r in status]
    assert rows == sorted(set(rows)) and (not rows or rows[0] >= 2)
    for r in status:
        assert r[2].split(":", 1)[0] in REASONS, r
    if lots is not None:
        assert len(status) == len(lots), (len(status), len(lots), result)
        assert [r[1] for r in status] == lots
    return status


def write_records(path: Path, header: list[str], records: list[list[str]], delimiter: str = ",",
                  encoding: str = "utf-8") -> None:
    buffer = io.StringIO()
    writer = csv.writer(buffer, delimiter=delimiter)  # "\r\n" ends, as Excel writes
    writer.writerow(header)
    writer.writerows(records)
    path.write_bytes(buffer.getvalue().encode(encoding))


# --------------------------------------------------------------------------- cell strategies

TOKENS = ["", " ", "NA", "n/a", "-", "?", "ND", "n.d.", "nd", "<LOD", "trace", "<0.1", "< 0.1",
          "<=0,2", "≤0.5", ">400", "<", ">", "<>", "<ND", "<-1", "inf", "-inf", "Infinity",
          "nan", "NaN", "1e308", "-1e308", "1e309", "1e-320", "0", "-0", "∞", "1,5", "1.250,5",
          "1.5.5", "0x1A", "1_000", "١٢", "12 .5", "+3.4", "3.4.", "—", "#N/A", "see note",
          "\ufeff3.4", "3.4\u00a0", "'3.4", "=1+2", "TRUE", "3,4,5"]

TEXT = st.text(st.characters(blacklist_categories=("Cs",), blacklist_characters="\x00"),
               max_size=10)
NUMBERS = st.floats(allow_nan=True, allow_infinity=True).map(repr)
CELL = st.one_of(st.sampled_from(TOKENS), TEXT, NUMBERS,
                 st.integers(min_value=-10**30, max_value=10**30).map(str))
LOT_IDS = st.sampled_from(["T-001", "T-002", "T-003", "", " ", "T-001 "])
LOT = st.one_of(LOT_IDS, TEXT)
# text without control characters or line separators: a table laid out on one line per lot
PLAIN = st.text(st.characters(blacklist_categories=("Cs", "Cc", "Zl", "Zp")), max_size=10)


@st.composite
def records(draw, cell=CELL, lot=LOT, min_rows: int = 1, max_rows: int = 8
            ) -> list[list[str]]:
    n = draw(st.integers(min_rows, max_rows))
    return [[draw(lot)] + [draw(cell) for _ in COLUMNS[1:]] for _ in range(n)]


# --------------------------------------------------------------------------- properties


@FUZZ
@given(recs=records(), delimiter=st.sampled_from([",", ";", "\t"]),
       encoding=st.sampled_from(["utf-8", "utf-8-sig"]))
@example(recs=[["T-001", "15", "inf", "nan", "1e308", "1e308", "ND"]], delimiter=",",
         encoding="utf-8")
@example(recs=[["", "", "", "", "", "", ""], ["T-001", "", "", "", "", "", ""]],
         delimiter=";", encoding="utf-8-sig")
def test_junk_cells_never_crash_and_every_row_is_reported(run_cli, config_path, workdir, recs,
                                                          delimiter, encoding):
    folder = fresh(workdir)
    path = folder / "lots.csv"
    write_records(path, COLUMNS, recs, delimiter, encoding)
    result, out = run_check(run_cli, path, config_path)
    assert_clean(result, out, lots_of(recs))


@FUZZ
@given(recs=records(cell=st.one_of(st.sampled_from(TOKENS), NUMBERS),
                    lot=st.one_of(LOT_IDS, PLAIN), max_rows=6),
       comma=st.booleans())
@example(recs=[["T-001", "1e308", "1e308", "1e308", "1e308", "1e308", "1e308"]], comma=False)
@example(recs=[["T-001", "15", "-0.0", "4.5", "0", "0", "5e-324"]], comma=True)
def test_used_rows_hold_only_possible_values(run_cli, config_path, workdir, recs, comma):
    folder = fresh(workdir)
    path = folder / "lots.csv"
    if comma:  # a decimal-comma lab file: ';' between cells
        recs = [[c.replace(".", ",") for c in rec] for rec in recs]
    write_records(path, COLUMNS, recs, ";" if comma else ",")
    result, out = run_check(run_cli, path, config_path)
    assert result.code == 0, result  # the table is well formed: never refused
    assert_clean(result, out, lots_of(recs))
    table = load_lots(str(path), load_config(config_path))
    used = table.used
    values = table.values[used]
    assert np.isfinite(table.ids["grade"][used]).all()
    for spec in table.specs:
        column = values[spec.name].to_numpy(dtype=float)
        finite = column[~np.isnan(column)]
        assert np.isfinite(finite).all(), spec.name
        lo, hi = spec.bounds
        assert ((finite >= lo) & (finite <= hi)).all(), spec.name
    if used.any():
        free, total = values["free_so2"].to_numpy(), values["total_so2"].to_numpy()
        both = ~np.isnan(free) & ~np.isnan(total)
        assert (free[both] <= total[both] + 1e-9).all()
        missing = (table.flags[used] == "missing").sum(axis=1)
        assert (missing <= math.floor(0.25 * len(ANALYTES))).all()


@FUZZ
@given(recs=st.lists(st.lists(st.sampled_from(["T-001", "T-002", "15", "3.4", "", "x", "20"]),
                              min_size=1, max_size=len(COLUMNS) + 3), min_size=1, max_size=5))
@example(recs=[["T-001", "15", "12.5", "3.4", "20", "80", "1.5", ""],
               ["T-002", "14", "13.0", "3.5", "25", "90", "1.2", ""]])
@example(recs=[["T-001", "15", "12.5", "3.4", "20", "80", "1.5", "7", "7"], ["T-002", "14"]])
def test_ragged_rows_are_refused_or_read_in_place(run_cli, config_path, workdir, recs):
    folder = fresh(workdir)
    path = folder / "lots.csv"
    write_records(path, COLUMNS, recs)
    result, out = run_check(run_cli, path, config_path)
    assert_clean(result, out, lots_of(recs))


@FUZZ
@given(present=st.lists(st.sampled_from(COLUMNS), unique=True, max_size=len(COLUMNS)),
       n_rows=st.integers(0, 3), blank_column=st.sampled_from(["", *ANALYTES]))
@example(present=list(COLUMNS), n_rows=1, blank_column="")
@example(present=list(COLUMNS), n_rows=0, blank_column="")
@example(present=list(COLUMNS), n_rows=3, blank_column="ph")
def test_missing_columns_empty_and_one_row_tables(run_cli, config_path, workdir, present,
                                                  n_rows, blank_column):
    folder = fresh(workdir)
    path = folder / "lots.csv"
    base = {"grade": "15", "alcohol": "12.5", "ph": "3.4", "free_so2": "20",
            "total_so2": "80", "malic_acid": "1.5"}
    recs = []
    for i in range(n_rows):
        cells = {"lot": f"T-{i:03d}", **base}
        if blank_column:
            cells[blank_column] = ""
        recs.append([cells[c] for c in present])
    if present:
        write_records(path, present, recs)
    else:
        path.write_bytes(b"")
    result, out = run_check(run_cli, path, config_path)
    if set(present) != set(COLUMNS) or n_rows == 0:
        assert result.code == 2, result
        assert_clean(result, out)
        if n_rows and set(present) - {blank_column}:  # some cell written: a data row
            missing = sorted(set(COLUMNS) - set(present))
            assert any(f"'{m}' not found" in result.err for m in missing), result
        return
    assert result.code == 0, result
    status = assert_clean(result, out, [f"T-{i:03d}" for i in range(n_rows)])
    assert [r[2] for r in status] == ["used"] * n_rows  # one missing analyte of 5 is allowed


PREFIXES = [b"", b"PK\x03\x04", b"PAR1", b"\xef\xbb\xbf", b"lot,grade,alcohol\n",
            (",".join(COLUMNS) + "\n").encode(), b"\x00", b"\xff\xfe"]
SUFFIXES = [".csv", ".tsv", ".txt", ".xlsx", ".parquet", ".dat"]


@FUZZ
@given(prefix=st.sampled_from(PREFIXES), body=st.binary(max_size=400),
       suffix=st.sampled_from(SUFFIXES))
@example(prefix=b"PK\x03\x04", body=b"garbage", suffix=".csv")
@example(prefix=b"", body=b"", suffix=".csv")
@example(prefix=b"PAR1", body=b"garbage", suffix=".txt")
def test_binary_garbage_is_refused_cleanly(run_cli, config_path, workdir, prefix, body,
                                           suffix):
    folder = fresh(workdir)
    path = folder / f"junk{suffix}"
    path.write_bytes(prefix + body)
    result, out = run_check(run_cli, path, config_path)
    assert_clean(result, out)
    if result.code == 2:
        assert path.name in result.err


def _good_files(folder: Path) -> Path:
    data = pd.DataFrame({
        "lot": ["T-001", "T-002", "T-003"], "grade": [15.0, 14.0, 16.5],
        "alcohol": [12.5, 13.0, 13.5], "ph": [3.4, 3.5, 3.3], "free_so2": [20.0, 25.0, 30.0],
        "total_so2": [80.0, 90.0, 100.0], "malic_acid": [1.5, 0.2, 2.1]})
    data.to_excel(folder / "good.xlsx", index=False)
    data.to_parquet(folder / "good.parquet", index=False)
    return folder


@pytest.fixture(scope="module")
def good_files(tmp_path_factory) -> Path:
    """A folder with a readable good.xlsx and good.parquet."""
    return _good_files(tmp_path_factory.mktemp("good"))


@FUZZ
@given(suffix=st.sampled_from([".xlsx", ".parquet"]), cut=st.floats(0.0, 1.0),
       flips=st.lists(st.tuples(st.floats(0.0, 1.0), st.integers(0, 255)), max_size=12))
@example(suffix=".xlsx", cut=1.0, flips=[(0.5, 0)])  # one zeroed byte inside a sheet stream
@example(suffix=".parquet", cut=0.3, flips=[])  # a truncated download
def test_damaged_workbooks_and_parquet_files_are_refused_cleanly(run_cli, config_path,
                                                                 workdir, good_files, suffix,
                                                                 cut, flips):
    data = bytearray((good_files / f"good{suffix}").read_bytes())
    if cut < 0.5:  # truncated download in half of the cases
        data = data[: max(8, int(len(data) * cut * 2))]
    for where, value in flips:
        data[min(len(data) - 1, int(where * len(data)))] = value
    folder = fresh(workdir)
    path = folder / f"damaged{suffix}"
    path.write_bytes(bytes(data))
    result, out = run_check(run_cli, path, config_path)
    assert_clean(result, out)

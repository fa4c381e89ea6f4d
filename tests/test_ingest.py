"""Ingest and validation: every input format, column matching, censored cells, rejections.

All lot tables here are invented for the test (lot ids ``T-...``); the only shipped data
used is the invented demo range in demo_data/lots.csv.
"""

from __future__ import annotations

import csv
import re
import shutil
import struct
import zipfile
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

from vinstrata import pipeline
from vinstrata.config import Config, parse_config
from vinstrata.errors import InputError
from vinstrata.read.ingest import read_table
from vinstrata.read.validate import load_lots

DEMO = Path(__file__).resolve().parents[1] / "demo_data"

# Molar masses from the IUPAC standard atomic weights (H 1.00794, C 12.0107, O 15.9994,
# S 32.065): tartaric acid C4H6O6 and sulfuric acid H2SO4 are diprotic, acetic acid
# C2H4O2 monoprotic, so one equivalent of each weighs M/2, M/2 and M.
M_TARTARIC = 4 * 12.0107 + 6 * 1.00794 + 6 * 15.9994
M_SULFURIC = 2 * 1.00794 + 32.065 + 4 * 15.9994
M_ACETIC = 2 * 12.0107 + 4 * 1.00794 + 2 * 15.9994
H2SO4_TO_TARTARIC = (M_TARTARIC / 2) / (M_SULFURIC / 2)
H2SO4_TO_ACETIC = M_ACETIC / (M_SULFURIC / 2)

FOUR = ["alcohol", "ph", "free_so2", "total_so2"]
HEADER = "lot,grade,alcohol,ph,free_so2,total_so2"


def config(analytes=FOUR, grade="grade", source="test.toml", **sections) -> Config:
    raw = {"columns": {"lot_id": "lot", "grade": grade, "analytes": list(analytes)}}
    raw.update(sections)
    return parse_config(raw, source)


def write(path: Path, text: str, encoding: str = "utf-8") -> Path:
    path.write_bytes(text.encode(encoding))
    return path


def frame() -> pd.DataFrame:
    return pd.DataFrame({
        "lot": ["T-001", "T-002", "T-003"],
        "grade": [15.0, 14.5, 16.0],
        "alcohol": [12.5, 13.0, 13.5],
        "ph": [3.40, 3.55, 3.25],
        "free_so2": [20.0, 31.0, 28.0],
        "total_so2": [80.0, 95.0, 120.0],
    })


def check_frame_values(table) -> None:
    expected = frame()
    assert table.ids["lot_id"].tolist() == expected["lot"].tolist()
    assert table.ids["status"].tolist() == ["used"] * 3
    np.testing.assert_allclose(table.ids["grade"], expected["grade"])
    for name in FOUR:
        np.testing.assert_allclose(table.values[name], expected[name], rtol=1e-12)


# --------------------------------------------------------------------------- formats


def test_comma_csv_values_and_provenance(tmp_path):
    path = tmp_path / "lots.csv"
    frame().to_csv(path, index=False)
    table = load_lots(str(path), config())
    check_frame_values(table)
    assert table.source.format == "text"
    assert table.source.delimiter == "comma"
    assert table.ids["row"].tolist() == [2, 3, 4]
    assert table.decimal == "."


def test_tsv_file_is_read_by_its_tab_delimiter(tmp_path):
    path = tmp_path / "lots.tsv"
    frame().to_csv(path, index=False, sep="\t")
    table = load_lots(str(path), config())
    check_frame_values(table)
    assert table.source.delimiter == "tab"


@pytest.mark.parametrize("written", ["tab", "\t"])
def test_tab_delimiter_forced_by_config(tmp_path, written):
    path = tmp_path / "lots.txt"
    frame().to_csv(path, index=False, sep="\t")
    table = load_lots(str(path), config(ingest={"delimiter": written}))
    check_frame_values(table)
    assert table.source.delimiter == "tab"


def test_semicolon_file_with_decimal_comma(tmp_path):
    path = write(tmp_path / "lots.csv",
                 "lot;grade;alcohol;ph;free_so2;total_so2;volatile_acidity;potassium\n"
                 "T-001;15,5;12,5;3,40;20;80;0,45;1.250,5\n"
                 "T-002;14;13,0;3,55;31;95;0,38;980\n")
    table = load_lots(str(path), config([*FOUR, "volatile_acidity", "potassium"]))
    assert table.source.delimiter == "semicolon"
    assert table.decimal == ","
    assert table.ids["status"].tolist() == ["used", "used"]
    np.testing.assert_allclose(table.ids["grade"], [15.5, 14.0])
    np.testing.assert_allclose(table.values["alcohol"], [12.5, 13.0])
    np.testing.assert_allclose(table.values["volatile_acidity"], [0.45, 0.38])
    # with a decimal comma, a dot between groups of three digits separates thousands
    np.testing.assert_allclose(table.values["potassium"], [1250.5, 980.0])


def test_utf8_byte_order_mark_does_not_spoil_the_first_header(tmp_path):
    path = tmp_path / "lots.csv"
    path.write_bytes(b"\xef\xbb\xbf" + frame().to_csv(index=False).encode("utf-8"))
    table = load_lots(str(path), config())
    check_frame_values(table)
    assert table.source.encoding == "utf-8-sig"


@pytest.mark.parametrize("encoding", ["cp1252", "latin-1"])
def test_single_byte_encoded_file_with_accented_headers(tmp_path, encoding):
    text = ("Lot;Note;Acidité totale;Acidité volatile;SO2 libre;SO2 total;pH\n"
            "Cuvée-T1;15;5,9;0,41;25;90;3,35\n"
            "Cuvée-T2;14;6,4;0,36;30;110;3,28\n")
    path = write(tmp_path / "lots.csv", text, encoding)
    assert "é".encode(encoding) == b"\xe9"  # one byte, invalid as UTF-8
    cfg = parse_config({"columns": {
        "lot_id": "lot", "grade": "note",
        "analytes": ["acidite_totale", "Acidité volatile", "so2_libre", "so2 total", "ph"]}})
    table = load_lots(str(path), cfg)
    assert table.ids["lot_id"].tolist() == ["Cuvée-T1", "Cuvée-T2"]
    assert table.ids["status"].tolist() == ["used", "used"]
    kinds = {s.name: s.kind for s in table.specs}
    assert kinds == {"acidite_totale": "titratable_acidity",
                     "Acidité volatile": "volatile_acidity", "so2_libre": "free_so2",
                     "so2 total": "total_so2", "ph": "ph"}
    np.testing.assert_allclose(table.values["acidite_totale"], [5.9, 6.4])
    np.testing.assert_allclose(table.values["so2_libre"], [25, 30])


def test_latin1_byte_undefined_in_cp1252_still_reads(tmp_path):
    # 0x81 is unassigned in Windows-1252, so only the Latin-1 fallback decodes it
    path = tmp_path / "lots.csv"
    path.write_bytes((HEADER + "\nT-\x81,15,12.5,3.4,20,80\n").encode("latin-1"))
    table = load_lots(str(path), config())
    assert table.source.encoding == "latin-1"
    assert table.ids["lot_id"].tolist() == ["T-\x81"]
    assert table.ids["status"].tolist() == ["used"]


def _workbook(path: Path) -> Path:
    with pd.ExcelWriter(path, engine="openpyxl") as writer:
        frame().to_excel(writer, sheet_name="Summary", index=False)
        other = frame().assign(lot=["T-101", "T-102", "T-103"], alcohol=[11.0, 11.5, 12.0])
        other.to_excel(writer, sheet_name="Lab 2024", index=False)
    return path


def test_xlsx_first_sheet_by_default(tmp_path):
    table = load_lots(str(_workbook(tmp_path / "lots.xlsx")), config())
    check_frame_values(table)
    assert table.source.format == "xlsx"
    assert table.source.sheet == "Summary"


def test_xlsx_named_sheet_from_config(tmp_path):
    path = _workbook(tmp_path / "lots.xlsx")
    table = load_lots(str(path), config(ingest={"sheet": "Lab 2024"}))
    assert table.source.sheet == "Lab 2024"
    assert table.ids["lot_id"].tolist() == ["T-101", "T-102", "T-103"]
    np.testing.assert_allclose(table.values["alcohol"], [11.0, 11.5, 12.0])


def test_xlsx_named_sheet_through_pipeline_load_overrides_config(tmp_path):
    path = _workbook(tmp_path / "lots.xlsx")
    table = pipeline.load(path, config(ingest={"sheet": "Summary"}), sheet="Lab 2024")
    assert table.ids["lot_id"].tolist() == ["T-101", "T-102", "T-103"]


def test_xlsx_named_sheet_through_cli(tmp_path, run_cli):
    path = _workbook(tmp_path / "lots.xlsx")
    cfg = write(tmp_path / "c.toml", '[columns]\nlot_id = "lot"\ngrade = "grade"\n'
                'analytes = ["alcohol", "ph", "free_so2", "total_so2"]\n')
    result = run_cli("check", path, "--config", cfg, "--sheet", "Lab 2024",
                     "--out", tmp_path / "out")
    assert result.code == 0, result
    rows = pd.read_csv(tmp_path / "out" / "row_status.csv")
    assert rows["lot_id"].tolist() == ["T-101", "T-102", "T-103"]


def test_xlsx_unknown_sheet_is_refused_with_the_sheet_names(tmp_path):
    path = _workbook(tmp_path / "lots.xlsx")
    with pytest.raises(InputError) as err:
        load_lots(str(path), config(ingest={"sheet": "Lab 2023"}))
    message = str(err.value)
    assert "lots.xlsx" in message and "'Lab 2023'" in message
    assert "Summary" in message and "Lab 2024" in message


def test_xlsx_row_numbers_count_blank_rows_and_header(tmp_path):
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(HEADER.split(","))
    sheet.append(["T-001", 15, 12.5, 3.4, 20, 80])
    sheet.append([])
    sheet.append(["T-002", 14.5, 13, 3.5, 30, 90])
    book.save(tmp_path / "gap.xlsx")
    table = load_lots(str(tmp_path / "gap.xlsx"), config())
    assert table.ids["row"].tolist() == [2, 4]
    assert table.blank_rows == 1
    # integers stored by Excel read as the same numbers
    np.testing.assert_allclose(table.ids["grade"], [15.0, 14.5])


def test_parquet_file(tmp_path):
    path = tmp_path / "lots.parquet"
    frame().to_parquet(path, engine="pyarrow", index=False)
    table = load_lots(str(path), config())
    check_frame_values(table)
    assert table.source.format == "parquet"


def test_parquet_demo_lots_give_the_table_of_the_same_csv(tmp_path, demo_config):
    # the demo range as Parquet, numeric columns as float64: numbers are read as numbers
    # (no text in between), and the lot table is the one of the CSV, cell for cell
    import pyarrow as pa
    import pyarrow.csv as pcsv
    import pyarrow.parquet as pq

    table = pcsv.read_csv(DEMO / "lots.csv")
    table = pa.table([c.cast(pa.float64()) if pa.types.is_integer(c.type) else c
                      for c in table.columns], names=table.column_names)
    assert pa.types.is_float64(table.schema.field("alcohol").type)
    assert pa.types.is_string(table.schema.field("malic_acid").type)  # holds "<0.1"
    pq.write_table(table, tmp_path / "lots.parquet")
    raw = read_table(tmp_path / "lots.parquet")
    assert raw.cells["alcohol"].dtype == np.float64 and raw.cells["lot"].dtype != np.float64
    with pytest.warns(UserWarning):
        from_csv = load_lots(str(DEMO / "lots.csv"), demo_config)
        from_parquet = load_lots(str(tmp_path / "lots.parquet"), demo_config)
    for part in ("ids", "values", "flags", "extra"):
        pd.testing.assert_frame_equal(getattr(from_parquet, part), getattr(from_csv, part),
                                      check_exact=True, obj=part)
    assert from_parquet.specs == from_csv.specs and from_parquet.decimal == from_csv.decimal
    assert from_parquet.blank_rows == from_csv.blank_rows
    rejected = from_parquet.ids[from_parquet.ids["status"] != "used"]
    assert rejected["status"].str.startswith("non_numeric:").any()
    assert rejected["detail"].str.match(r"row \d+(, column '[^']+')?: ").all()


def test_parquet_typed_numbers_vote_for_the_decimal_mark_as_their_text():
    # a stored number has no decimal mark, yet it counts as its text would (cells.typed_dots)
    from vinstrata.read.cells import decimal_counts
    from vinstrata.read.ingest import number_texts

    rng = np.random.default_rng(3)
    values = np.concatenate([rng.normal(0, 1, 500) * 10.0 ** rng.integers(-7, 18, 500),
                             [0.0, -0.0, 1e15, 1e16, 1e-4, 9.9e-5, 12.0, np.nan, np.inf]])
    typed = pd.Series(values, dtype=float)
    text = pd.Series(number_texts(values), dtype=str)
    assert decimal_counts([typed]) == decimal_counts([text])


def test_parquet_nulls_are_missing_cells(tmp_path):
    data = frame()
    data.loc[1, "ph"] = np.nan
    path = tmp_path / "lots.parquet"
    data.to_parquet(path, engine="pyarrow", index=False)
    table = load_lots(str(path), config())
    assert table.flags["ph"].tolist() == ["ok", "missing", "ok"]
    assert np.isnan(table.values["ph"][1])
    assert table.ids["status"].tolist() == ["used"] * 3  # 1 of 4 missing is allowed


def test_parquet_content_under_another_suffix_is_read_as_parquet(tmp_path):
    # the format is taken from the file's first bytes where they are telling (ingest docstring)
    frame().to_parquet(tmp_path / "lots.parquet", engine="pyarrow", index=False)
    shutil.copy(tmp_path / "lots.parquet", tmp_path / "lots.csv")
    table = load_lots(str(tmp_path / "lots.csv"), config())
    assert table.source.format == "parquet"
    check_frame_values(table)


def test_xlsx_content_under_a_csv_suffix_is_read_as_xlsx(tmp_path):
    # a workbook saved under a .csv name; its first bytes (PK) say what it is
    shutil.copy(_workbook(tmp_path / "lots.xlsx"), tmp_path / "lots.csv")
    table = load_lots(str(tmp_path / "lots.csv"), config())
    assert table.source.format == "xlsx"
    check_frame_values(table)


# --------------------------------------------------------------------------- column matching


def test_columns_match_ignoring_case_spaces_and_accents(tmp_path):
    path = write(tmp_path / "lots.csv",
                 " LOT , Grade ,ALCOHOL, Ph ,Free SO2,Total_SO2,Acidité Totale\n"
                 "T-001,15,12.5,3.4,20,80,6.1\n")
    cfg = config([*FOUR, "acidite_totale"])
    table = load_lots(str(path), cfg)
    assert table.ids["lot_id"].tolist() == ["T-001"]
    assert {s.name: s.column for s in table.specs} == {
        "alcohol": "ALCOHOL", "ph": "Ph", "free_so2": "Free SO2", "total_so2": "Total_SO2",
        "acidite_totale": "Acidité Totale"}
    assert table.values.loc[0, "acidite_totale"] == pytest.approx(6.1)


def test_header_with_bracketed_unit_matches_the_analyte(tmp_path):
    path = write(tmp_path / "lots.csv",
                 "lot,grade,Alcohol (% vol),pH,Free SO2 (mg/L),Total SO2 (mg/L)\n"
                 "T-001,15,12.5,3.4,20,80\n")
    table = load_lots(str(path), config())
    spec = {s.name: s for s in table.specs}["total_so2"]
    assert spec.column == "Total SO2 (mg/L)"
    assert spec.kind == "total_so2"
    assert spec.unit_in == "mg/L" and spec.factor == 1.0
    assert table.values.loc[0, "total_so2"] == 80.0


def test_bracketed_unit_in_header_is_converted(tmp_path):
    path = write(tmp_path / "lots.csv",
                 "lot,grade,alcohol,ph,free_so2,Total SO2 (g/L)\nT-001,15,12.5,3.4,20,0.085\n")
    table = load_lots(str(path), config())
    # 1 g/L = 1000 mg/L (SI prefixes)
    assert table.values.loc[0, "total_so2"] == pytest.approx(85.0)


def test_header_matching_two_analyte_names_is_refused(tmp_path):
    path = write(tmp_path / "lots.csv",
                 "lot,grade,alcohol,ph,free_so2,Total SO2,Total SO2 (mg/L)\n"
                 "T-001,15,12.5,3.4,20,80,80\n")
    with pytest.raises(InputError, match="matches several headers"):
        load_lots(str(path), config())
    # a header written exactly as the configured name is no ambiguity
    path = write(tmp_path / "exact.csv",
                 "lot,grade,alcohol,ph,free_so2,total_so2,Total SO2 (mg/L)\n"
                 "T-001,15,12.5,3.4,20,80,81\n")
    table = load_lots(str(path), config())
    assert table.values.loc[0, "total_so2"] == 80.0


def test_missing_configured_column_is_refused_naming_it_and_the_file(tmp_path):
    path = write(tmp_path / "lots.csv", "lot,grade,alcohol,ph,free_so2\nT-001,15,12.5,3.4,20\n")
    with pytest.raises(InputError) as err:
        load_lots(str(path), config())
    assert "lots.csv" in str(err.value) and "'total_so2' not found" in str(err.value)


# --------------------------------------------------------------------------- censored cells


def _censored_table(tmp_path, cells: list[str], censored: str = "half_limit", text=None):
    body = text or "".join(f"T-{i:03d},15,12.5,3.4,{c},80\n" for i, c in enumerate(cells))
    path = write(tmp_path / "lots.csv", HEADER + "\n" + body)
    return load_lots(str(path), config(ingest={"censored": censored}))


def test_below_limit_takes_half_the_limit_and_is_flagged(tmp_path):
    table = _censored_table(tmp_path, ["<0.1", "< 0.1", "<=0.1", "≤0.1", "25"])
    np.testing.assert_allclose(table.values["free_so2"], [0.05, 0.05, 0.05, 0.05, 25.0])
    assert table.flags["free_so2"].tolist() == ["censored_below"] * 4 + ["ok"]
    assert (table.ids["status"] == "used").all()


def test_not_detected_takes_half_the_lowest_written_limit(tmp_path):
    table = _censored_table(tmp_path, ["<0.2", "<0.1", "ND", "n.d.", "25"])
    np.testing.assert_allclose(table.values["free_so2"], [0.1, 0.05, 0.05, 0.05, 25.0])
    assert table.flags["free_so2"].tolist() == ["censored_below"] * 4 + ["ok"]
    assert (table.ids["status"] == "used").all()


def test_limit_policy_stores_the_limit_itself(tmp_path):
    table = _censored_table(tmp_path, ["<2", "<1", "ND", "25"], censored="limit")
    np.testing.assert_allclose(table.values["free_so2"], [2.0, 1.0, 1.0, 25.0])
    assert table.flags["free_so2"].tolist() == ["censored_below"] * 3 + ["ok"]


def test_not_detected_without_a_written_limit_uses_smallest_measured_value(tmp_path):
    # documented fallback (vinstrata.read.cells): half the column's smallest positive value
    table = _censored_table(tmp_path, ["ND", "12", "25"])
    np.testing.assert_allclose(table.values["free_so2"], [6.0, 12.0, 25.0])
    assert table.flags["free_so2"].tolist() == ["censored_below", "ok", "ok"]


def test_censored_value_with_decimal_comma(tmp_path):
    text = ("lot;grade;alcohol;ph;free_so2;total_so2;malic_acid\n"
            "T-001;15;12,5;3,4;20;80;<0,1\n"
            "T-002;15;12,5;3,4;20;80;1,85\n")
    path = write(tmp_path / "lots.csv", text)
    table = load_lots(str(path), config([*FOUR, "malic_acid"]))
    np.testing.assert_allclose(table.values["malic_acid"], [0.05, 1.85])
    assert table.flags["malic_acid"].tolist() == ["censored_below", "ok"]


def test_censored_above_takes_the_limit(tmp_path):
    table = _censored_table(tmp_path, [">400", "25"])
    np.testing.assert_allclose(table.values["free_so2"], [400.0, 25.0])
    assert table.flags["free_so2"].tolist() == ["censored_above", "ok"]


# --------------------------------------------------------------------------- rejections


def _statuses(tmp_path, body: str, cfg: Config | None = None, require_grade: bool = True):
    path = write(tmp_path / "lots.csv", HEADER + "\n" + body)
    table = load_lots(str(path), cfg or config(), require_grade=require_grade)
    return table, dict(zip(table.ids["row"], table.ids["status"]))


def test_every_rejection_reason_with_its_status(tmp_path):
    table, status = _statuses(tmp_path, (
        "T-001,15,12.5,3.4,20,80\n"      # row 2: used
        ",15,12.5,3.4,20,80\n"           # row 3: no lot id
        "T-001,16,13.0,3.5,25,90\n"      # row 4: repeats row 2
        "T-004,15,12.5,high,20,80\n"     # row 5: text in pH
        "T-005,,12.5,3.4,20,80\n"        # row 6: no grade
        "T-006,15,12.5,3.4,20,-5\n"      # row 7: negative total SO2
        "T-007,15,12.5,5.1,20,80\n"      # row 8: pH outside 2.5-4.5
        "T-008,15,12.5,3.4,95,60\n"      # row 9: free SO2 above total
        "T-009,15,,,20,80\n"             # row 10: 2 of 4 missing, 1 allowed
        "T-010,good,12.5,3.4,20,80\n"    # row 11: text in grade
    ))
    assert status == {
        2: "used", 3: "missing_lot_id", 4: "duplicate_lot_id", 5: "non_numeric:ph",
        6: "missing_grade", 7: "negative:total_so2", 8: "out_of_range:ph",
        9: "free_so2_above_total", 10: "too_many_missing", 11: "non_numeric:grade",
    }
    detail = dict(zip(table.ids["row"], table.ids["detail"]))
    assert "also on row 2" in detail[4]
    assert "'high'" in detail[5] and "row 5" in detail[5]
    assert "row 8" in detail[8] and "2.5-4.5" in detail[8]
    # a rejected row keeps its place and its lot id
    assert table.ids["lot_id"].tolist()[2] == "T-001"


def test_duplicate_lot_id_keeps_the_first_copy(tmp_path):
    table, status = _statuses(tmp_path, (
        "T-001,15,12.5,3.4,20,80\nT-002,15,12.5,3.4,20,80\nT-001,16,13.5,3.5,22,90\n"
        "T-001,14,11.5,3.3,21,70\n"))
    assert status == {2: "used", 3: "used", 4: "duplicate_lot_id", 5: "duplicate_lot_id"}
    kept = table.values[table.used]
    assert kept["alcohol"].tolist() == [12.5, 12.5]  # the first T-001 row's values


def test_duplicate_lot_id_reject_all_policy(tmp_path):
    _, status = _statuses(tmp_path, (
        "T-001,15,12.5,3.4,20,80\nT-002,15,12.5,3.4,20,80\nT-001,16,13.5,3.5,22,90\n"),
        config(ingest={"duplicate_ids": "reject_all"}))
    assert status == {2: "duplicate_lot_id", 3: "used", 4: "duplicate_lot_id"}


def test_missing_grade_is_not_a_rejection_when_no_grade_is_needed(tmp_path):
    _, status = _statuses(tmp_path, "T-001,,12.5,3.4,20,80\n", require_grade=False)
    assert status == {2: "used"}


def test_first_applicable_reason_wins(tmp_path):
    _, status = _statuses(tmp_path, (
        ",15,12.5,3.4,20,-5\n"           # no lot id and negative: missing_lot_id
        "T-002,15,abc,9.9,20,80\n"       # text and out of range: non_numeric first
        "T-003,,12.5,3.4,-1,80\n"))      # no grade and negative: missing_grade first
    assert status == {2: "missing_lot_id", 3: "non_numeric:alcohol", 4: "missing_grade"}


# Physically possible ranges are the issue contract (documented in vinstrata.read.analytes):
# pH 2.5-4.5, alcohol 0-25 % vol, density 0.95-1.20 g/mL, closed ranges.
@pytest.mark.parametrize(("analyte", "value", "expected"), [
    ("ph", "2.5", "used"), ("ph", "4.5", "used"),
    ("ph", "2.49", "out_of_range:ph"), ("ph", "4.51", "out_of_range:ph"),
    ("ph", "-1", "out_of_range:ph"),  # pH is not a concentration: no 'negative'
    ("alcohol", "0", "used"), ("alcohol", "25", "used"),
    ("alcohol", "25.1", "out_of_range:alcohol"), ("alcohol", "-0.5", "negative:alcohol"),
    ("density", "0.95", "used"), ("density", "1.20", "used"),
    ("density", "0.949", "out_of_range:density"), ("density", "1.201", "out_of_range:density"),
])
def test_physical_ranges(tmp_path, analyte, value, expected):
    cells = {"alcohol": "12.5", "ph": "3.4", "density": "0.994"}
    cells[analyte] = value
    path = write(tmp_path / "lots.csv", "lot,grade,alcohol,ph,density\n"
                 f"T-001,15,{cells['alcohol']},{cells['ph']},{cells['density']}\n")
    table = load_lots(str(path), config(["alcohol", "ph", "density"]))
    assert table.ids["status"].tolist() == [expected]


def test_range_is_checked_after_unit_conversion(tmp_path):
    # density written in kg/m3: 994 kg/m3 = 0.994 g/mL is inside 0.95-1.20 g/mL
    path = write(tmp_path / "lots.csv", "lot,grade,alcohol,ph,Density (kg/m3)\n"
                 "T-001,15,12.5,3.4,994\nT-002,15,12.5,3.4,1250\n")
    table = load_lots(str(path), config(["alcohol", "ph", "density"]))
    assert table.ids["status"].tolist() == ["used", "out_of_range:density"]
    assert table.values.loc[0, "density"] == pytest.approx(0.994)


@pytest.mark.parametrize(("share", "missing", "expected"), [
    (0.25, 1, "used"), (0.25, 2, "too_many_missing"),
    (0.5, 2, "used"), (0.5, 3, "too_many_missing"),
    (1.0, 3, "used"), (1.0, 4, "too_many_missing"),  # a row with no analyte at all is no lot
])
def test_too_many_missing_threshold(tmp_path, share, missing, expected):
    cells = ["12.5", "3.4", "20", "80"]
    cells[:missing] = [""] * missing
    path = write(tmp_path / "lots.csv", HEADER + "\nT-001,15," + ",".join(cells) + "\n")
    table = load_lots(str(path), config(ingest={"max_missing_share": share}))
    assert table.ids["status"].tolist() == [expected]


@pytest.mark.parametrize("token", ["", "NA", "n/a", "-", "nan"])
def test_missing_tokens_are_missing_not_non_numeric(tmp_path, token):
    _, status = _statuses(tmp_path, f"T-001,15,12.5,{token},20,80\n")
    assert status == {2: "used"}


# --------------------------------------------------------------------------- row accounting


def test_row_numbers_count_the_header_and_blank_rows(tmp_path, run_cli):
    path = write(tmp_path / "lots.csv", HEADER + "\n"
                 "T-001,15,12.5,3.4,20,80\n"
                 "\n"
                 ",,,,,\n"
                 "T-002,15,12.5,oops,20,80\n"
                 "T-003,14,13.0,3.5,25,90\n")
    table = load_lots(str(path), config())
    assert table.ids["row"].tolist() == [2, 5, 6]
    assert table.blank_rows == 2
    result = run_cli("check", path, "--config", _toml(tmp_path), "--out", tmp_path / "out")
    assert result.code == 0, result
    rows = pd.read_csv(tmp_path / "out" / "row_status.csv")
    assert rows["row"].tolist() == [2, 5, 6]
    assert rows["status"].tolist() == ["used", "non_numeric:ph", "used"]
    assert "row 5" in rows["detail"][1]
    summary = dict(pd.read_csv(tmp_path / "out" / "quality_summary.csv").values)
    assert int(summary["rows_read"]) == 3
    assert int(summary["rows_used"]) + int(summary["rows_rejected"]) == 3
    assert int(summary["rows_rejected"]) == 1
    assert int(summary["blank_rows_skipped"]) == 2


def test_demo_range_accounting(demo_table):
    # rows read = used + rejected, every data row of the file counted once
    with open(DEMO / "lots.csv", newline="", encoding="utf-8") as handle:
        data_rows = [r for r in csv.reader(handle)][1:]
    assert demo_table.n_rows == len([r for r in data_rows if any(c.strip() for c in r)])
    counts = demo_table.ids["status"].value_counts()
    assert counts["used"] + counts.drop("used").sum() == demo_table.n_rows
    assert demo_table.ids["row"].tolist() == list(range(2, demo_table.n_rows + 2))


def test_rows_with_a_trailing_delimiter_keep_their_columns(tmp_path, run_cli):
    # some spreadsheet exports end every data row with an extra empty field; the cells
    # must not slide one column to the left (lot ids read from the grade column)
    path = write(tmp_path / "lots.csv", HEADER + "\n"
                 "T-001,15,12.5,3.4,20,80,\nT-002,14,13.0,3.5,25,90,\n")
    result = run_cli("check", path, "--config", _toml(tmp_path), "--out", tmp_path / "out")
    assert result.code in (0, 2), result
    if result.code == 0:
        rows = pd.read_csv(tmp_path / "out" / "row_status.csv", dtype=str)
        assert rows["lot_id"].tolist() == ["T-001", "T-002"]
    else:
        assert result.err.startswith("error:") and "lots.csv" in result.err


def test_first_data_row_longer_than_the_header_is_not_misread(tmp_path):
    path = write(tmp_path / "lots.csv", HEADER + "\n"
                 "T-001,15,12.5,3.4,20,80,7,7\nT-002,14\n")
    try:
        table = load_lots(str(path), config())
    except InputError as exc:
        assert "row 2" in str(exc)
    else:
        assert table.ids["lot_id"].tolist() == ["T-001", "T-002"]


# --------------------------------------------------------------------------- done-when check


def _sulfuric_copy(src: Path, dst: Path) -> None:
    """The demo lots as a French-style lab writes them: ';', decimal comma, acids as H2SO4."""
    with open(src, newline="", encoding="utf-8") as handle:
        rows = list(csv.reader(handle))
    header = rows[0]
    ta, va = header.index("titratable_acidity"), header.index("volatile_acidity")
    out = [header]
    for row in rows[1:]:
        cells = []
        for j, cell in enumerate(row):
            if j in (ta, va) and cell.strip():
                try:
                    value = float(cell)
                except ValueError:
                    cells.append(cell.replace(".", ","))
                    continue
                factor = H2SO4_TO_TARTARIC if j == ta else H2SO4_TO_ACETIC
                cell = f"{value / factor:.7f}"
            cells.append(cell.replace(".", ","))
        out.append(cells)
    with open(dst, "w", newline="", encoding="utf-8") as handle:
        csv.writer(handle, delimiter=";").writerows(out)


DEMO_TOML = """
seed = 20261201
[columns]
lot_id = "lot"
grade = "grade"
analytes = ["alcohol", "residual_sugar", "titratable_acidity", "volatile_acidity", "ph",
            "free_so2", "total_so2", "malic_acid", "lactic_acid", "potassium",
            "total_phenolics", "colour_intensity", "density"]
passthrough = ["vintage", "colour"]
[units]
titratable_acidity = "{ta}"
volatile_acidity = "{va}"
"""


def test_check_semicolon_sulfuric_file_gives_the_canonical_values(tmp_path, run_cli):
    comma = DEMO / "lots.csv"
    semi = tmp_path / "lots_h2so4.csv"
    _sulfuric_copy(comma, semi)
    assert ";" in semi.read_text("utf-8").splitlines()[1]
    canon = write(tmp_path / "canon.toml", DEMO_TOML.format(ta="g/L tartaric", va="g/L acetic"))
    sulf = write(tmp_path / "sulf.toml", DEMO_TOML.format(ta="g/L H2SO4", va="g/L H2SO4"))

    a = run_cli("check", comma, "--config", canon, "--out", tmp_path / "a")
    b = run_cli("check", semi, "--config", sulf, "--out", tmp_path / "b")
    assert a.code == 0 and b.code == 0, (a, b)
    status_a = pd.read_csv(tmp_path / "a" / "row_status.csv", dtype=str)
    status_b = pd.read_csv(tmp_path / "b" / "row_status.csv", dtype=str)
    pd.testing.assert_frame_equal(status_a[["row", "lot_id", "status"]],
                                  status_b[["row", "lot_id", "status"]])
    summary_b = dict(pd.read_csv(tmp_path / "b" / "quality_summary.csv").values)
    assert summary_b["delimiter"] == "semicolon" and summary_b["decimal_mark"] == ","

    from vinstrata.config import load_config

    ta = load_lots(str(comma), load_config(canon))
    tb = load_lots(str(semi), load_config(sulf))
    assert list(ta.values.columns) == list(tb.values.columns)
    for name in ta.values.columns:
        # rtol 1e-5: the test's molar masses and the code's agree to 5 significant digits
        np.testing.assert_allclose(tb.values[name], ta.values[name], rtol=1e-5, atol=1e-9,
                                   equal_nan=True, err_msg=name)
    np.testing.assert_allclose(tb.ids["grade"], ta.ids["grade"], equal_nan=True)
    pd.testing.assert_frame_equal(ta.flags, tb.flags)
    spec = {s.name: s for s in tb.specs}
    assert spec["titratable_acidity"].unit == "g/L tartaric"
    assert spec["volatile_acidity"].unit == "g/L acetic"


def test_lab_rounded_sulfuric_values_agree_within_rounding(tmp_path):
    # a lab writes two decimals as H2SO4; canonical values then agree within half a
    # unit of the last digit times the factor
    text = ("lot;grade;alcohol;ph;titratable_acidity;volatile_acidity\n"
            "T-001;15;12,5;3,40;3,92;0,29\nT-002;14;13,0;3,55;4,25;0,49\n")
    path = write(tmp_path / "lots.csv", text)
    cfg = config(["alcohol", "ph", "titratable_acidity", "volatile_acidity"],
                 units={"titratable_acidity": "g/L H2SO4", "volatile_acidity": "g/L H2SO4"})
    table = load_lots(str(path), cfg)
    np.testing.assert_allclose(table.values["titratable_acidity"], [6.0, 6.5], atol=0.005)
    np.testing.assert_allclose(table.values["volatile_acidity"], [0.355, 0.60], atol=0.005)


# --------------------------------------------------------------------------- junk files


def _toml(tmp_path: Path) -> Path:
    return write(tmp_path / "cfg.toml", '[columns]\nlot_id = "lot"\ngrade = "grade"\n'
                 'analytes = ["alcohol", "ph", "free_so2", "total_so2"]\n')


def _zip_without_workbook(path: Path) -> None:
    with zipfile.ZipFile(path, "w") as archive:
        archive.writestr("readme.txt", "not a workbook")


def _damaged_workbook(path: Path) -> None:
    """A workbook whose sheet's compressed stream is damaged (as by a broken download)."""
    _workbook(path)
    data = bytearray(path.read_bytes())
    name = b"xl/worksheets/sheet1.xml"
    pos = 0
    while True:  # the sheet's local file header
        pos = data.index(b"PK\x03\x04", pos)
        n_name, n_extra = struct.unpack("<HH", data[pos + 26:pos + 30])
        if data[pos + 30:pos + 30 + n_name] == name:
            break
        pos += 4
    start = pos + 30 + n_name + n_extra
    data[start:start + 4] = b"\xff\xff\xff\xff"
    path.write_bytes(bytes(data))


def _parquet_with_undecodable_name(path: Path) -> None:
    """A Parquet file whose schema holds a column name that is not UTF-8."""
    frame().assign(zzzz=1.0).to_parquet(path, engine="pyarrow", index=False)
    path.write_bytes(path.read_bytes().replace(b"zzzz", b"zz\xd3z"))


@pytest.mark.parametrize(("name", "content"), [
    ("junk.csv", b"\x00\x8f\xff\x13binary\x00junk"),
    ("junk.xlsx", b"this is not a workbook"),
    ("zipped.xlsx", _zip_without_workbook),
    ("damaged.xlsx", _damaged_workbook),
    ("zip_named.csv", b"PK\x03\x04 but no archive"),
    ("badname.parquet", _parquet_with_undecodable_name),
    ("junk.parquet", b"this is not parquet"),
    ("empty.csv", b""),
    ("blank.csv", b"  \n\n \n"),
    ("header_only.csv", HEADER.encode() + b"\n"),
    ("prose.txt", b"Dear customer, please find our analyses attached.\n"),
    ("unclosed.csv", (HEADER + '\n"T-001,15,12.5,3.4,20,80\n').encode()),
    ("ragged.csv", (HEADER + "\nT-001,15,12.5,3.4,20,80\nT-002,1,2,3,4,5,6,7,8\n").encode()),
])
def test_junk_file_gives_one_error_line_and_exit_code_2(tmp_path, run_cli, name, content):
    path = tmp_path / name
    if callable(content):
        content(path)
    else:
        path.write_bytes(content)
    result = run_cli("check", path, "--config", _toml(tmp_path), "--out", tmp_path / "out")
    assert result.code == 2, result
    lines = result.err.strip().splitlines()
    assert len(lines) == 1, result
    assert lines[0].startswith("error:") and name in lines[0]
    assert "Traceback" not in result.err


def test_missing_file_and_folder_are_refused(tmp_path, run_cli):
    # a missing path is click's: it refuses it with its own usage error
    target = tmp_path / "nowhere.csv"
    result = run_cli("check", target, "--config", _toml(tmp_path), "--out", tmp_path / "o")
    assert result.code == 2, result
    assert f"Invalid value for 'LOTS': Path '{target}' does not exist" in result.err
    assert "Traceback" not in result.err
    # a folder is a dataset; one without lot files is refused in one line
    result = run_cli("check", tmp_path, "--config", _toml(tmp_path), "--out", tmp_path / "o")
    assert result.code == 2, result
    assert result.err.strip() == f"error: {tmp_path}: is a folder without lot files (.csv, " \
        ".tsv, .txt, .xlsx, .xlsm, .parquet, .pq)"
    for target in (tmp_path / "nowhere.csv", tmp_path):  # the library's own one-line refusal
        with pytest.raises(InputError, match=re.escape(str(target))):
            read_table(target)


def test_a_refused_file_leaves_one_line_even_with_progress_on(tmp_path, run_cli):
    # progress lines are on, yet the refused file's stderr is its one error line
    path = tmp_path / "bad.csv"
    path.write_text("lot,grade,ph\nA,15,3.2,9\n")
    for command in (["check", path, "--out", tmp_path / "c"],
                    ["segment", path, "--out", tmp_path / "s"]):
        result = run_cli(*command)
        assert result.code == 2
        assert result.err.count("\n") == 1 and result.err.startswith("error:"), result

"""Datasets (folders, hive partitions, glob patterns), batches, and the fast CSV reader.

Every table here is the invented demo range in demo_data/lots.csv, cut into files, or a
table invented for the test (lot ids ``T-...``); expected values are planted truth: the
same cells read as one file.
"""

from __future__ import annotations

import hashlib
import itertools
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pcsv
import pyarrow.parquet as pq
import pytest

from vinstrata.config import packaged_config, parse_config
from vinstrata.errors import InputError
from vinstrata.read import ingest
from vinstrata.read.ingest import ReadLimits, lot_files, read_batches, read_table
from vinstrata.read.lots import LotTable, load_lot_batches
from vinstrata.read.validate import load_lots

DEMO = Path(__file__).resolve().parents[1] / "demo_data"
PARTS = ("ids", "values", "flags", "extra")


@pytest.fixture(scope="module")
def config():
    return packaged_config("demo")


def quiet_load(path, config, **kw) -> LotTable:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return load_lots(str(path), config, **kw)


def demo_arrow() -> pa.Table:
    """The demo range as pyarrow reads the CSV, whole numbers as float64."""
    table = pcsv.read_csv(DEMO / "lots.csv")
    return pa.table([c.cast(pa.float64()) if pa.types.is_integer(c.type) else c
                     for c in table.columns], names=table.column_names)


def concat(tables: list[LotTable]) -> dict[str, pd.DataFrame]:
    return {p: pd.concat([getattr(t, p) for t in tables], ignore_index=True) for p in PARTS}


def unfiled(ids: pd.DataFrame) -> pd.DataFrame:
    """The ids with the file a dataset's details name ("lots/part-2.parquet: row 7") left out."""
    return ids.assign(detail=ids["detail"].str.replace(r"^.*?: (?=row )", "", regex=True))


def assert_same(got: dict[str, pd.DataFrame] | LotTable, want: LotTable) -> None:
    for part in PARTS:
        mine = got[part] if isinstance(got, dict) else getattr(got, part)
        if part == "ids":
            mine = unfiled(mine)
        pd.testing.assert_frame_equal(mine, getattr(want, part), check_exact=True, obj=part)


def split_rows(n: int, k: int) -> list[slice]:
    edges = np.linspace(0, n, k + 1).astype(int)
    return [slice(a, b) for a, b in itertools.pairwise(edges)]


# --------------------------------------------------------------------------- datasets


def test_folder_of_parquet_files_reads_as_the_whole_file(tmp_path, config):
    table = demo_arrow()
    folder = tmp_path / "lots"
    folder.mkdir()
    # natural order: part-2 comes before part-10, whatever the names sort to as text
    for number, rows in zip((1, 2, 10), split_rows(table.num_rows, 3)):
        pq.write_table(table.slice(rows.start, rows.stop - rows.start),
                       folder / f"part-{number}.parquet")
    (folder / "_SUCCESS").write_text("")  # what writers leave beside the data
    assert [p.path.name for p in lot_files(folder)] == ["part-1.parquet", "part-2.parquet",
                                                        "part-10.parquet"]
    whole = quiet_load(DEMO / "lots.csv", config)
    dataset = quiet_load(folder, config)
    assert_same(dataset, whole)  # row numbers count on from file to file
    assert dataset.ids["row"].tolist() == list(range(2, table.num_rows + 2))
    digest = hashlib.sha256()
    for name in ("part-1.parquet", "part-2.parquet", "part-10.parquet"):
        digest.update((folder / name).as_posix().encode() + b"\0")
        digest.update((folder / name).read_bytes())
    assert dataset.source.sha256 == digest.hexdigest()
    assert dataset.source.format == "parquet" and dataset.source.name == "lots"


def test_hive_partition_folders_become_passthrough_columns(tmp_path, config):
    table = demo_arrow()
    vintages = table.column("vintage").to_numpy()
    for vintage in np.unique(vintages):
        folder = tmp_path / "lots" / f"vintage_group={int(vintage)}"
        folder.mkdir(parents=True)
        pq.write_table(table.filter(pa.array(vintages == vintage)), folder / "part-0.parquet")
    dataset = quiet_load(tmp_path / "lots", config)
    assert list(dataset.extra.columns) == ["vintage", "colour", "vintage_group"]
    # the folder name's value as written, on every row of that folder's file
    assert (dataset.extra["vintage_group"] == dataset.extra["vintage"]).all()
    assert dataset.n_rows == table.num_rows


def test_glob_pattern_of_csv_files_and_the_file_named_in_messages(tmp_path, config):
    lines = (DEMO / "lots.csv").read_text(encoding="utf-8").splitlines(keepends=True)
    header, body = lines[0], lines[1:]
    cut = len(body) // 2
    (tmp_path / "lots_1.csv").write_text(header + "".join(body[:cut]), encoding="utf-8")
    (tmp_path / "lots_2.csv").write_text(header + "".join(body[cut:]), encoding="utf-8")
    whole = quiet_load(DEMO / "lots.csv", config)
    dataset = quiet_load(tmp_path / "lots_*.csv", config)
    details = dataset.ids["detail"]
    rejected = dataset.ids["status"] != "used"
    late = rejected & (dataset.ids["row"] > cut + 1)
    assert late.any() and (~rejected | (dataset.ids["row"] <= cut + 1)).any()
    # the second file's rows are named with that file and their continued row number
    second = str(tmp_path / "lots_2.csv")
    assert details[late].str.startswith(f"{second}: row ").all()
    assert details[rejected & ~late].str.startswith(f"{tmp_path / 'lots_1.csv'}: row ").all()
    assert_same(dataset, whole)


def test_bad_cell_in_a_later_file_names_that_file_and_row(tmp_path):
    cfg = parse_config({"columns": {"lot_id": "lot", "grade": "grade", "analytes": ["ph"]}})
    pd.DataFrame({"lot": ["T-1", "T-2"], "grade": [15.0, 14.0], "ph": [3.2, 3.3]}).to_parquet(
        tmp_path / "part-1.parquet")
    pd.DataFrame({"lot": ["T-3", "T-4"], "grade": [15.0, 14.0], "ph": ["3.4", "acid"]}
                 ).to_parquet(tmp_path / "part-2.parquet")
    table = quiet_load(tmp_path / "*.parquet", cfg)
    assert table.ids["row"].tolist() == [2, 3, 4, 5]
    assert table.ids["detail"].tolist()[3] == (f"{tmp_path / 'part-2.parquet'}: row 5, column "
                                               "'ph': 'acid' is not a number")


def test_dataset_files_with_other_columns_are_refused(tmp_path):
    pd.DataFrame({"lot": ["T-1"], "ph": [3.2]}).to_parquet(tmp_path / "a.parquet")
    pd.DataFrame({"lot": ["T-2"], "pH_value": [3.2]}).to_parquet(tmp_path / "b.parquet")
    with pytest.raises(InputError, match=r"b\.parquet, row 1: no column 'ph', unlike .*a\."):
        read_table(tmp_path)


def test_cli_takes_a_folder_and_a_pattern_and_refuses_a_pattern_matching_nothing(
        tmp_path, run_cli):
    table = demo_arrow()
    for i, rows in enumerate(split_rows(table.num_rows, 2)):
        pq.write_table(table.slice(rows.start, rows.stop - rows.start),
                       tmp_path / f"lots_{i}.parquet")
    for target in (tmp_path, tmp_path / "lots_*.parquet"):
        result = run_cli("-q", "check", target, "--out", tmp_path / "out")
        assert result.code == 0, result
        rows = pd.read_csv(tmp_path / "out" / "row_status.csv")
        assert len(rows) == table.num_rows
    result = run_cli("check", tmp_path / "nothing_*.csv", "--out", tmp_path / "none")
    assert result.code == 2
    assert result.err.strip().splitlines() == [
        f"error: {tmp_path / 'nothing_*.csv'}: the pattern matches no file"]


# --------------------------------------------------------------------------- batches


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_batches_concatenate_to_the_whole_table(tmp_path, config, suffix):
    path = DEMO / "lots.csv"
    if suffix == ".parquet":
        path = tmp_path / "lots.parquet"
        pq.write_table(demo_arrow(), path)
    whole = quiet_load(path, config, require_grade=False)
    batches = list(load_lot_batches(str(path), config, 700))
    assert [b.n_rows for b in batches[:-1]] == [700] * (len(batches) - 1)
    got = concat(batches)
    # a lot id repeated in another batch is the consumer's to find (load_lot_batches): the
    # demo range repeats two lot ids across batches of 700 rows, and only those rows differ
    differ = np.flatnonzero((got["ids"]["status"] != whole.ids["status"]).to_numpy())
    assert whole.ids["detail"].iloc[differ].tolist() == [
        "row 6003: lot id 'QV20-01033' also on row 1034",
        "row 6011: lot id 'QV23-05528' also on row 5529"]
    assert got["ids"]["status"].iloc[differ].tolist() == ["used", "used"]
    keep = np.ones(whole.n_rows, dtype=bool)
    keep[differ] = False
    got = {k: v[keep].reset_index(drop=True) for k, v in got.items()}
    want = {k: getattr(whole, k)[keep].reset_index(drop=True) for k in PARTS}
    for part in PARTS:
        pd.testing.assert_frame_equal(got[part], want[part], check_exact=True, obj=part)
    assert {b.source for b in batches} == {whole.source}
    raws = list(read_batches(path, 700))
    assert all(list(r.cells.columns) == list(raws[0].cells.columns) for r in raws)
    assert [r.rows[0] for r in raws] == list(range(2, whole.n_rows + 2, 700))


def test_batches_take_the_decimal_mark_and_censored_tokens_from_the_whole_file(tmp_path):
    # planted: the first batch has no decimal comma and no written limit; later batches
    # hold the decimal commas and the limit "<0,2" that the ND cells of batch 1 stand for
    rows = [f"T-{i:03d};15;ND;3,{i % 9}" for i in range(4)]
    rows += [f"T-{i:03d};14;<0,2;3,{i % 9}" for i in range(4, 8)]
    rows += [f"T-{i:03d};16;1,5;3,{i % 9}" for i in range(8, 12)]
    path = tmp_path / "lots.csv"
    path.write_text("lot;grade;malic_acid;ph\n" + "\n".join(rows) + "\n", encoding="utf-8")
    cfg = parse_config({"columns": {"lot_id": "lot", "grade": "grade",
                                    "analytes": ["malic_acid", "ph"]}})
    whole = quiet_load(path, cfg, require_grade=False)
    assert whole.decimal == ","
    np.testing.assert_allclose(whole.values["malic_acid"][:4], 0.1)  # half of "<0,2"
    assert_same(concat(list(load_lot_batches(str(path), cfg, 3))), whole)


def test_read_batches_keeps_the_limits_and_their_messages(tmp_path):
    path = tmp_path / "long.csv"
    path.write_text("lot,grade,ph\n" + "".join(f"T-{i},15,3.2\n" for i in range(400)))
    limits = ReadLimits(max_cells=1000)
    with pytest.raises(InputError) as whole:
        read_table(path, limits=limits)
    with pytest.raises(InputError) as batched:
        list(read_batches(path, 50, limits=limits))
    assert str(batched.value) == str(whole.value) == (
        f"{path}, row 335: more than 1000 cells (rows x columns); refused "
        "(limit ingest.max_cells = 1000)")
    with pytest.raises(InputError, match="batch_rows"):
        next(read_batches(path, 0))


# --------------------------------------------------------------------------- fast CSV reader

VALID = [
    "lot,note,x\r\nT-1,\"a\r\nb\",1\r\nT-2,\"say \"\"hi\"\"\",2\r\n\r\nT-3,,3\r\n",
    "lot;note\rT-1;\"x;y\"\rT-2;z\r",
    "lot,grade,ph,\nT-1,15,3.2,\nT-2,14,3.3,\n\n",
    "lot\tgrade\n T-1 \t 15 \n\"T-2\"\t\"\"\n",
    "lot,note\nT-1,\"\"\nT-2,\"\"\"q\"\"\"\n",
]


@pytest.mark.parametrize("text", VALID, ids=["crlf-quoted", "cr", "trailing", "tab", "quotes"])
@pytest.mark.parametrize("chunk", [None, 1, 2])
def test_fast_reader_reads_what_the_csv_reader_reads(tmp_path, monkeypatch, text, chunk):
    path = tmp_path / "t.csv"
    path.write_bytes(text.encode("utf-8"))
    fast_runs = []
    original = ingest._fast_pieces

    def spy(*args, **kwargs):
        yield from original(*args, **kwargs)
        fast_runs.append(True)

    monkeypatch.setattr(ingest, "_fast_pieces", spy)
    fast = list(read_batches(path, chunk)) if chunk else [read_table(path)]
    assert fast_runs, "the file should be plain enough for pyarrow"
    monkeypatch.setattr(ingest, "_plain_header", lambda *a: None)  # the csv reader only
    slow = read_table(path)
    cells = pd.concat([t.cells for t in fast], ignore_index=True)
    pd.testing.assert_frame_equal(cells, slow.cells)
    assert [r for t in fast for r in t.rows] == slow.rows
    assert sum(t.blank_rows for t in fast) == slow.blank_rows
    assert fast[0].source == slow.source


FILLER = "T-0,a\n" * 12_000  # past the first 64 KB, where binary files are told apart


@pytest.mark.parametrize("text", ['lot,note\nT-1,"d"x\n', 'lot,note\nT-1,"open\n',
                                  "lot,note\nT-1,a,b\n"], ids=["after-quote", "unclosed", "ragged"])
def test_what_pyarrow_would_read_otherwise_is_worded_by_the_csv_reader(tmp_path, text):
    path = tmp_path / "bad.csv"
    path.write_bytes(text.encode("utf-8"))
    with pytest.raises(InputError, match=r"bad\.csv, row 2: "):
        read_table(path)


def test_nul_byte_past_the_first_block_is_read_as_the_csv_reader_reads_it(tmp_path):
    path = tmp_path / "nul.csv"
    path.write_bytes(("lot,note\n" + FILLER + "T-1,\x00\n").encode("utf-8"))
    table = read_table(path)
    assert table.cells["note"].iloc[-1] == "\x00" and table.rows[-1] == 12_002

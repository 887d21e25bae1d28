"""Reading real files in tmp_path: csv dialects, encodings, header rows, workbooks, parquet.

Facts used: RFC 4180 (CSV), ECMA-376 (xlsx), OASIS OpenDocument 1.2 (ods); file hashes checked
against hashlib (reference library). Demo values are invented.
"""

from __future__ import annotations

import datetime as dt
import hashlib

import numpy as np
import openpyxl
import pandas as pd
import pytest

from tests import hostile_files as bad_inputs
from wallstress.prepare.mapping import map_columns
from wallstress.read.delimited import detect_delimiter
from wallstress.read.studies import read_studies

HEADER = ["study_id", "sex", "height_cm", "weight_kg", "ivsd_cm", "lvidd_cm", "pwd_cm"]
ROWS = [
    ["E01", "F", 162.0, 61.5, 0.9, 4.7, 0.85],
    ["E02", "M", 178.0, 84.0, 1.15, 5.2, 1.0],
    ["E03", "F", 155.5, 70.2, 1.0, 4.45, 0.95],
]
NUMERIC = ["height_cm", "weight_kg", "ivsd_cm", "lvidd_cm", "pwd_cm"]


def _plain_csv(path, sep=",", decimal=".", encoding="utf-8", header=HEADER, rows=ROWS, pre=""):
    lines = [sep.join(header)]
    for r in rows:
        lines.append(
            sep.join(str(v).replace(".", decimal) if isinstance(v, float) else str(v) for v in r)
        )
    path.write_bytes((pre + "\n".join(lines) + "\n").encode(encoding))
    return path


def _canon(path, **kw):
    return map_columns(read_studies(path, **kw).table).canonical


def test_semicolon_decimal_comma_equals_plain(tmp_path):
    """A ';'-separated decimal-comma CSV gives the same numbers as the plain one (RFC 4180 dialects;
    decimal comma is common practice, no source)."""
    a = _canon(_plain_csv(tmp_path / "a.csv"))
    st = read_studies(_plain_csv(tmp_path / "b.csv", sep=";", decimal=","))
    assert (st.delimiter, st.decimal) == (";", ",")
    assert "decimal_comma" in set(st.findings["code"])
    pd.testing.assert_frame_equal(a, map_columns(st.table).canonical)


@pytest.mark.parametrize("sep", ["\t", "|", ","])
def test_other_delimiters(tmp_path, sep):
    """Tab, pipe and comma delimiters are detected (RFC 4180 and its common dialects)."""
    st = read_studies(_plain_csv(tmp_path / "d.csv", sep=sep))
    assert st.delimiter == sep
    assert st.table["lvidd_cm"].tolist() == ["4.7", "5.2", "4.45"]  # as written
    assert st.numbers["lvidd_cm"].tolist() == [4.7, 5.2, 4.45]


def test_detect_delimiter_prefers_semicolon_over_decimal_comma():
    """In '1;4,8;0,9' the comma is a decimal mark, not the delimiter. Common practice, no source."""
    assert detect_delimiter(["id;lvidd;pwd", "1;4,8;0,9", "2;5,1;1,0"]) == ";"
    assert detect_delimiter(["id,notes", '1,"a; b"', '2,"c; d"']) == ","


def test_cp1252_fallback(tmp_path):
    """Windows-1252 text (not UTF-8) is read with a note; 'é' survives (cp1252 0xE9)."""
    header = [*HEADER, "comment"]
    rows = [[*r, "échographie"] for r in ROWS]
    p = _plain_csv(tmp_path / "w.csv", header=header, rows=rows, encoding="cp1252")
    st = read_studies(p)
    assert st.encoding == "cp1252"
    assert st.table.loc[0, "comment"] == "échographie"
    assert "encoding_cp1252" in set(st.findings["code"])


def test_utf8_bom_and_utf16(tmp_path):
    """A UTF-8 BOM (EF BB BF) is not part of the first header; UTF-16 with BOM is read (Unicode 15,
    sec. 23.8)."""
    st = read_studies(_plain_csv(tmp_path / "bom.csv", encoding="utf-8-sig"))
    assert st.encoding == "utf-8-sig" and st.table.columns[0] == "study_id"
    st = read_studies(_plain_csv(tmp_path / "u16.csv", sep="\t", encoding="utf-16"))
    assert st.encoding == "utf-16" and st.numbers["height_cm"].tolist()[0] == 162.0
    st = read_studies(_plain_csv(tmp_path / "u8.csv"))
    assert st.encoding == "utf-8" and not len(st.findings)


def test_title_rows_units_row_trailing_empties(tmp_path):
    """Title rows above the header, a units row below it, trailing empty rows/columns: header row
    found, units folded into the headers, empties dropped. Common practice, no source."""
    text = (
        "Echo lab study list,,,,,\n"
        "exported for the demo,,,,,\n"
        "study_id,sex,LVIDd,IVSd,PWd,,\n"
        ",,(mm),(mm),(mm),,\n"
        "E01,F,47,9,9,,\n"
        "E02,M,52,11.5,10,,\n"
        ",,,,,,\n"
        ",,,,,,\n"
    )
    p = tmp_path / "t.csv"
    p.write_text(text)
    st = read_studies(p)
    assert st.header_row == 2 and st.first_data_row == 4
    assert list(st.table.columns) == ["study_id", "sex", "LVIDd (mm)", "IVSd (mm)", "PWd (mm)"]
    assert len(st.table) == 2
    assert "units_row_folded" in set(st.findings["code"])
    c = map_columns(st.table).canonical
    assert c["ivsd_cm"].tolist() == pytest.approx([0.9, 1.15])


def test_empty_row_inside_is_kept(tmp_path):
    """Every input row comes out once, in order (design invariant): an empty row inside stays."""
    p = _plain_csv(tmp_path / "gap.csv")
    lines = p.read_text().splitlines()
    p.write_text("\n".join([lines[0], lines[1], ",,,,,,", lines[2]]) + "\n")
    st = read_studies(p)
    assert len(st.table) == 3 and st.table.iloc[1].isna().all()
    assert st.table.loc[2, "study_id"] == "E02"


def test_sha256_and_input_unchanged(tmp_path):
    """sha256 is the digest of the file bytes (hashlib); reading never changes the file."""
    p = _plain_csv(tmp_path / "h.csv")
    before = p.read_bytes()
    st = read_studies(p)
    assert st.sha256 == hashlib.sha256(before).hexdigest()
    assert p.read_bytes() == before


def test_max_rows(tmp_path):
    """max_rows limits the data rows read."""
    st = read_studies(_plain_csv(tmp_path / "m.csv"), max_rows=2)
    assert st.table["study_id"].tolist() == ["E01", "E02"]


def _xlsx(path, sheets):
    wb = openpyxl.Workbook()
    wb.remove(wb.active)
    for name, rows in sheets.items():
        ws = wb.create_sheet(name)
        for r in rows:
            ws.append(r)
    wb.save(path)
    return path


def test_xlsx_mm_equals_csv_cm(tmp_path):
    """An xlsx with mm headers gives the same canonical numbers as a cm CSV (1 mm = 0.1 cm)."""
    header = [
        "study_id",
        "sex",
        "Height (cm)",
        "Weight (kg)",
        "IVSd (mm)",
        "LVIDd (mm)",
        "PWd (mm)",
    ]
    rows = [[r[0], r[1], r[2], r[3], r[4] * 10, r[5] * 10, r[6] * 10] for r in ROWS]
    p = _xlsx(
        tmp_path / "s.xlsx", {"Notes": [["free text only"]], "Data": [["title"], header, *rows]}
    )
    st = read_studies(p)
    assert (st.format, st.sheet, st.header_row) == ("xlsx", "Data", 1)
    assert st.sheets == ["Notes", "Data"]
    assert "sheet_chosen" in set(st.findings["code"])
    a = _canon(_plain_csv(tmp_path / "cm.csv"))
    b = map_columns(st.table).canonical
    pd.testing.assert_frame_equal(a[NUMERIC], b[NUMERIC], rtol=1e-12)
    assert b["study_id"].tolist() == ["E01", "E02", "E03"]


def test_xlsx_types_kept(tmp_path):
    """Numbers stay numbers, text stays text, dates are dates (ECMA-376 cell types)."""
    rows = [
        HEADER + ["study_date", "code"],
        [*ROWS[0], dt.datetime(2021, 5, 6), "0012"],
        [*ROWS[1], dt.datetime(2022, 1, 2), "7"],
    ]
    st = read_studies(_xlsx(tmp_path / "t.xlsx", {"S": rows}))
    t = st.table
    assert t["lvidd_cm"].dtype == np.float64
    assert t.loc[0, "code"] == "0012" and t.loc[1, "code"] == "7"
    c = map_columns(t).canonical
    assert c.loc[0, "study_date"] == pd.Timestamp("2021-05-06")


def test_xlsx_sheet_argument(tmp_path):
    """--sheet chooses the sheet; its header must still be found."""
    p = _xlsx(tmp_path / "two.xlsx", {"A": [HEADER, ROWS[0]], "B": [HEADER, *ROWS]})
    assert len(read_studies(p).table) == 1
    st = read_studies(p, sheet="B")
    assert st.sheet == "B" and len(st.table) == 3


def test_xlsx_two_row_header_merged(tmp_path):
    """A group row ('Diastole' / 'Systole', merged cells) over IVS/LVID/PW is combined with the header
    row below it. Common practice, no source."""
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["", "", "Diastole", "", "", "Systole", "", ""])
    ws.append(["study_id", "height", "IVS", "LVID", "PW", "IVS", "LVID", "PW"])
    ws.append(["E01", 170, 0.9, 4.8, 0.9, 1.3, 3.1, 1.4])
    ws.merge_cells("C1:E1")
    ws.merge_cells("F1:H1")
    p = tmp_path / "g.xlsx"
    wb.save(p)
    st = read_studies(p)
    c = map_columns(st.table).canonical
    assert c.loc[0, "ivsd_cm"] == 0.9 and c.loc[0, "ivss_cm"] == 1.3
    assert c.loc[0, "lvidd_cm"] == 4.8 and c.loc[0, "lvids_cm"] == 3.1
    assert c.loc[0, "pwd_cm"] == 0.9 and c.loc[0, "pws_cm"] == 1.4
    assert "header_two_rows" in set(st.findings["code"])


def test_xlsx_openpyxl_fallback(tmp_path, monkeypatch):
    """If the fast reader fails, openpyxl (read-only) reads the same values."""
    import python_calamine

    p = _xlsx(tmp_path / "f.xlsx", {"S": [HEADER, *ROWS]})
    fast = read_studies(p).table

    def broken(*a, **k):
        raise python_calamine.CalamineError("simulated failure")

    monkeypatch.setattr(python_calamine.CalamineWorkbook, "from_path", broken)
    st = read_studies(p)
    assert "read_with_openpyxl" in set(st.findings["code"])
    pd.testing.assert_frame_equal(st.table, fast)


def test_ods_round_trip(tmp_path):
    """An OpenDocument spreadsheet written by pandas (odf engine) reads back the same numbers."""
    df = pd.DataFrame(ROWS, columns=HEADER)
    p = tmp_path / "s.ods"
    df.to_excel(p, engine="odf", index=False, sheet_name="Studies")
    st = read_studies(p)
    assert st.format == "ods"
    pd.testing.assert_frame_equal(st.table[NUMERIC], df[NUMERIC])


def test_parquet_round_trip(tmp_path):
    """A parquet file written by pandas/pyarrow reads back unchanged."""
    df = pd.DataFrame(ROWS, columns=HEADER)
    p = tmp_path / "s.parquet"
    df.to_parquet(p, index=False)
    st = read_studies(p)
    assert st.format == "parquet" and st.header_row == 0
    pd.testing.assert_frame_equal(st.table[NUMERIC], df[NUMERIC])
    assert len(read_studies(p, max_rows=1).table) == 1


def test_columns_option_counts_for_header(tmp_path):
    """A lab's own headers, mapped with columns=, are recognised as the header row."""
    p = tmp_path / "own.csv"
    p.write_text("Pt,Septum,Cavity,Back wall\nE01,0.9,4.8,0.9\n")
    with pytest.raises(Exception, match="no recognisable header"):
        read_studies(p)
    cols = {"Septum": "ivsd_cm", "Cavity": "lvidd_cm", "Back wall": "pwd_cm"}
    st = read_studies(p, columns=cols)
    assert st.header_row == 0 and st.numbers["Cavity"][0] == 4.8


def test_header_only_returns_zero_rows(tmp_path):
    """A header with no data rows is not an error: 0 rows and a 'no_rows' finding (documented)."""
    st = read_studies(bad_inputs.header_only(tmp_path))
    assert len(st.table) == 0 and list(st.table.columns) == bad_inputs.GOOD_HEADER


def test_numbers_padded_or_not_read_alike(tmp_path):
    """' 4.8 ' and '4.8' are the same number (common practice, no source), with or without any
    padded cell in the file; whole-file parsing by Arrow matches Python's float()."""
    plain = "IVSd,LVIDd,PWd\n1.0,4.8,0.9\n1.1,5.2,1e-3\n"
    padded = "IVSd,LVIDd,PWd\n1.0, 4.8 ,0.9\n1.1,5.2,1e-3\n"
    got = []
    for i, text in enumerate((plain, padded)):
        p = tmp_path / f"s{i}.csv"
        p.write_text(text, encoding="utf-8")
        got.append(read_studies(p).numbers)
    for t in got:
        assert t["LVIDd"].tolist() == [float("4.8"), float("5.2")]
        assert t["PWd"].tolist() == [float("0.9"), float("1e-3")]


def test_number_parsing_fallback_keeps_gaps(monkeypatch):
    """If Arrow refuses a column, Python's float() reads it instead (reference: float() itself),
    empty cells staying NaN."""
    import pyarrow as pa

    from wallstress.read import delimited as csv_in

    cells = pa.chunked_array([pa.array(["1.5", None, "2e-3"], pa.large_string())])
    fast = csv_in._parse_floats(cells)

    def refuse(*args, **kwargs):
        raise pa.ArrowInvalid("refused")

    monkeypatch.setattr(csv_in.pc, "cast", refuse)
    slow = csv_in._parse_floats(cells)
    for got in (fast, slow):
        assert got[0] == float("1.5") and np.isnan(got[1]) and got[2] == float("2e-3")


def test_arrow_memory_from_the_system_only_while_a_job_runs(tmp_path):
    """The file-level jobs take Arrow's buffers from malloc while they run and leave Arrow's
    default pool as they found it, after a finished run and after a refused one (a program that
    imports wallstress keeps its own choice; common practice, no source)."""
    import pyarrow as pa

    from wallstress.errors import InputError
    from wallstress.jobs import analyse_file
    from wallstress.read.studies import system_arrow_memory

    before = pa.default_memory_pool().backend_name
    with system_arrow_memory():
        assert pa.default_memory_pool().backend_name == "system"
        with system_arrow_memory():  # a second job beside it (the web page runs them in threads)
            pass
        assert pa.default_memory_pool().backend_name == "system"  # the first still runs
    assert pa.default_memory_pool().backend_name == before
    src = tmp_path / "s.csv"
    pd.DataFrame(ROWS, columns=HEADER).to_csv(src, index=False)
    analyse_file(src, tmp_path / "out.csv")
    assert pa.default_memory_pool().backend_name == before
    with pytest.raises(InputError):
        analyse_file(tmp_path / "missing.csv", tmp_path / "out2.csv")
    assert pa.default_memory_pool().backend_name == before


def test_handing_over_the_parsed_numbers_leaves_the_table_as_read(tmp_path):
    """A job that writes no workbook hands the reader's parsed numbers to the analysis: the table
    it keeps has none, the cells are the same objects, and the table it came from is unchanged
    (common practice, no source)."""
    src = tmp_path / "s.csv"
    pd.DataFrame(ROWS, columns=HEADER).to_csv(src, index=False)
    study = read_studies(src)
    assert set(study.numbers) == set(NUMERIC)
    kept, numbers = study.handed_over()
    assert kept.numbers == {} and kept.table is study.table
    assert numbers == [study.numbers] and numbers[0] is study.numbers

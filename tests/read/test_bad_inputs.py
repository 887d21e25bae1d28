"""Every broken or hostile file in the corpus ends in a clear InputError or in a finding.

The expectations are facts of the file formats (RFC 4180 CSV; ECMA-376 Office Open XML: a zip
package, ``t="e"`` error cells, ``<f>`` formulas with cached ``<v>`` values; [MS-OFFCRYPTO]: an
encrypted workbook is an OLE compound file with an ``EncryptedPackage`` stream; W3C XML 1.0: entity
declarations live in the DOCTYPE). Zip-bomb limits are common practice, no source.
"""

from __future__ import annotations

import re
import zipfile

import pandas as pd
import pytest

from tests import hostile_files as bad_inputs
from wallstress.errors import InputError
from wallstress.read.guards import ZipLimits, check_zip
from wallstress.read.studies import read_studies


@pytest.mark.parametrize(
    "name,maker,expect,detail", bad_inputs.CORPUS, ids=[c[0] for c in bad_inputs.CORPUS]
)
def test_corpus(tmp_path, name, maker, expect, detail):
    """Each corpus file: InputError with the expected one-line message, or the expected finding.

    Source: the file-format facts named in the module docstring; common practice, no source.
    """
    path = maker(tmp_path)
    if expect == "error":
        with pytest.raises(InputError, match=detail) as info:
            read_studies(path)
        msg = str(info.value)
        assert "\n" not in msg
        assert path.name in msg
    else:
        st = read_studies(path)
        assert detail in set(st.findings["code"]), st.findings
        assert len(st.table) == (0 if name == "header_only" else len(st.table))


def test_missing_sheet_lists_sheets(tmp_path):
    """A sheet that does not exist: the message lists the sheets. Common practice, no source."""
    p = bad_inputs.missing_sheet(tmp_path)
    with pytest.raises(InputError, match=r"no sheet 'Results'; the sheets are 'Studies'"):
        read_studies(p, sheet="Results")


def test_error_cells_become_nan(tmp_path):
    """ECMA-376: an error cell (t="e") and a formula without cached value are read as NaN."""
    st = read_studies(bad_inputs.error_cells_xlsx(tmp_path))
    t = st.table
    assert pd.isna(t.loc[0, "IVSd (mm)"])
    assert pd.isna(t.loc[1, "LVIDd (mm)"])
    f = st.findings
    err = f[f["code"] == "spreadsheet_error"]
    assert list(err["row"]) == [0] and list(err["value"]) == ["#DIV/0!"]
    unc = f[f["code"] == "formula_not_calculated"]
    assert list(unc["row"]) == [1] and list(unc["column"]) == ["LVIDd (mm)"]
    assert t.loc[1, "IVSd (mm)"] == 11


def test_error_text_in_csv_becomes_nan(tmp_path):
    """'#N/A' written as text in a CSV is a spreadsheet error value: NaN plus a row finding."""
    st = read_studies(bad_inputs.error_text_csv(tmp_path))
    assert pd.isna(st.table.loc[0, "IVSd (mm)"])
    assert st.table.loc[1, "IVSd (mm)"] == "11"  # the cell as written
    assert st.numbers["IVSd (mm)"][1] == 11  # the computation's parsed copy
    f = st.findings[st.findings["code"] == "spreadsheet_error"]
    assert list(f["row"]) == [0]


def test_long_cell_kept(tmp_path):
    """ECMA-376 / spreadsheet limit: 32,767 characters per cell; longer is kept with a finding."""
    st = read_studies(bad_inputs.long_cell_csv(tmp_path))
    assert len(st.table.loc[0, "comment"]) == 40_000
    f = st.findings[st.findings["code"] == "cell_too_long"]
    assert list(f["row"]) == [0]


def test_duplicate_headers_made_unique(tmp_path):
    """Duplicate header names are made unique with a finding. Common practice, no source."""
    st = read_studies(bad_inputs.duplicate_headers_csv(tmp_path))
    cols = list(st.table.columns)
    assert len(set(cols)) == len(cols)
    assert "LVIDd (mm) (2)" in cols


def test_ragged_rows_kept(tmp_path):
    """RFC 4180 says rows have equal fields; a longer row is kept, with extra unnamed columns."""
    st = read_studies(bad_inputs.ragged_csv(tmp_path))
    assert len(st.table) == 3
    assert st.table.shape[1] == len(bad_inputs.GOOD_HEADER) + 2
    assert st.table.iloc[2, 0] == "D003"


def test_zip_limits_configurable(tmp_path):
    """check_zip refuses on the zip directory alone, before any parser. Common practice, no source."""
    p = bad_inputs.good_xlsx(tmp_path / "ok.xlsx")
    with zipfile.ZipFile(p) as zf:
        check_zip(p, zf)  # within default limits
        with pytest.raises(InputError, match="parts .*limit 2"):
            check_zip(p, zf, ZipLimits(max_entries=2))
        with pytest.raises(InputError, match="expands to"):
            check_zip(p, zf, ZipLimits(max_total_bytes=10))


def test_openpyxl_uses_defusedxml():
    """openpyxl parses through defusedxml when installed (openpyxl docs, 'Security')."""
    import openpyxl.xml

    assert openpyxl.xml.DEFUSEDXML is True


def test_entity_file_refused_before_calamine(tmp_path, monkeypatch):
    """The DOCTYPE guard runs before the fast reader ever opens the file. W3C XML 1.0, sec. 2.8."""
    import python_calamine

    def boom(*a, **k):
        raise AssertionError("calamine must not be called")

    monkeypatch.setattr(python_calamine.CalamineWorkbook, "from_path", boom)
    with pytest.raises(InputError, match=re.escape("DOCTYPE/ENTITY")):
        read_studies(bad_inputs.entity_expansion(tmp_path))


def test_bad_max_rows():
    """A wrong call names the argument and the fix. Common practice, no source."""
    with pytest.raises(InputError, match=r"max_rows=-1 .*whole number"):
        read_studies("x.csv", max_rows=-1)


from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

_PIECES = st.sampled_from(
    [
        "study_id",
        "LVIDd (mm)",
        "IVSd",
        "PWd",
        "height",
        "weight",
        "sex",
        ",",
        ";",
        "\t",
        "\n",
        '"',
        "4,8",
        "48",
        "#N/A",
        "F",
        "\r\n",
        "",
        " ",
        "=1+1",
        "\ufeff",
        "é",
        "03/04/2020",
    ]
)


@settings(
    max_examples=120, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(
    st.one_of(st.lists(_PIECES, max_size=60).map("".join), st.text(max_size=200)),
    st.sampled_from(["utf-8", "cp1252", "utf-16"]),
)
def test_fuzz_csv_text(tmp_path, text, encoding):
    """Fuzzing: any text file ends in a table or an InputError, never another exception; every
    finding row points into the table."""
    p = tmp_path / "fuzz.csv"
    p.write_bytes(text.encode(encoding, errors="replace"))
    try:
        st_ = read_studies(p)
    except InputError as exc:
        assert "\n" not in str(exc)
        return
    assert st_.findings["row"].between(-1, max(len(st_.table) - 1, -1)).all()
    assert len(set(st_.table.columns)) == st_.table.shape[1]


# ---- round 2 (issue 8) ---------------------------------------------------------------------

import csv  # noqa: E402

import numpy as np  # noqa: E402

from wallstress.errors import OutputError  # noqa: E402
from wallstress.read import sheet_bounds  # noqa: E402
from wallstress.read.guards import read_file_bytes  # noqa: E402
from wallstress.write.xlsx.workbook import check_fits_xlsx  # noqa: E402


def test_stray_cells_extent_and_message(tmp_path):
    """ECMA-376 sheet limits (1,048,576 rows x 16,384 columns, last column XFD): the scan finds
    the far corner without expanding it; only the table under the header is read."""
    p = bad_inputs.stray_cells_xlsx(tmp_path)
    with zipfile.ZipFile(p) as zf:
        ext = sheet_bounds.xlsx_extent(zf, "xl/worksheets/sheet1.xml")
    assert (ext.n_rows, ext.n_cols) == (1_048_576, 16_384)
    st = read_studies(p)
    assert st.table.shape == (200, 7)
    assert st.table["study_id"].iloc[-1] == "D199"
    msg = st.findings.loc[st.findings["code"] == "stray_cells_ignored", "message"].iloc[0]
    assert "XFD1, A1048576" in msg and "1048576 x 16384" in msg and "A1:G201" in msg


def test_col_letters():
    """Column letters: A=1 ... Z=26, AA=27, XFD=16,384 (ECMA-376 cell references)."""
    assert [sheet_bounds.col_letters(i) for i in (0, 25, 26, 701, 702, 16383)] == [
        "A",
        "Z",
        "AA",
        "ZZ",
        "AAA",
        "XFD",
    ]


@pytest.mark.parametrize("kind", ["xlsx", "ods"])
def test_bounded_read_equals_fast_read(tmp_path, monkeypatch, kind):
    """The bounded reader (a stray cell 300 columns away, budget lowered) gives the same table as
    python-calamine (reference library) on the same sheet without the stray cell: text, numbers,
    dates and empty cells. (calamine gives date-only cells as dates, openpyxl as datetimes.)"""
    import datetime as dt

    df = pd.DataFrame(
        {
            "study_id": ["A1", "A2", "A3"],
            "study_date": [dt.datetime(2020, 1, 2), dt.datetime(2021, 3, 4), None],
            "IVSd (mm)": [9.0, np.nan, 11.5],
            "LVIDd (mm)": [47.0, 52.0, 50.0],
            "PWd (mm)": [9.0, 10.0, 9.5],
            "note": ["x y", None, "é"],
        }
    )
    engine = "odf" if kind == "ods" else "openpyxl"
    plain, stray = tmp_path / f"plain.{kind}", tmp_path / f"stray.{kind}"
    df.to_excel(plain, index=False, sheet_name="Studies", engine=engine)
    with pd.ExcelWriter(stray, engine=engine) as xw:
        df.to_excel(xw, index=False, sheet_name="Studies")
        pd.DataFrame({"far": ["x"]}).to_excel(xw, index=False, sheet_name="Studies", startcol=300)
    fast = read_studies(plain)
    monkeypatch.setattr(sheet_bounds, "SHEET_CELL_BUDGET", 100)  # 2 x 301 > 100 >= 4 x 6
    if kind == "ods":
        monkeypatch.setattr(sheet_bounds, "ods_may_exceed", lambda zf: True)
    bounded = read_studies(stray)
    assert "stray_cells_ignored" in set(bounded.findings["code"])
    left, right = fast.table.copy(), bounded.table.copy()
    for t in (left, right):
        t["study_date"] = pd.to_datetime(t["study_date"]).astype("datetime64[us]")
    pd.testing.assert_frame_equal(left, right)


def test_huge_csv_cell_kept(tmp_path):
    """Python csv module: default field_size_limit is 131,072 (Python docs, csv module); a 50 MB
    cell is read whole, flagged as over the 32,767-character cell limit (ECMA-376), and the
    process-wide csv limit is restored."""
    before = csv.field_size_limit()
    st = read_studies(bad_inputs.huge_cell_csv(tmp_path))
    assert csv.field_size_limit() == before
    assert len(st.table.loc[1, "comment"]) == 50 * 1024**2
    f = st.findings[st.findings["code"] == "cell_too_long"]
    assert list(f["row"]) == [1]


def test_wide_csv_reads_every_column(tmp_path):
    """50 rows x 20,004 columns: every column named, cells kept as written and numeric columns
    parsed as float64 (RFC 4180; the header row longer than any fixed sample). Speed is measured
    in benchmarks, not here."""
    st = read_studies(bad_inputs.wide_csv(tmp_path))
    assert st.table.shape == (50, 20_004)
    assert st.table.columns[0] == "study_id" and st.table.columns[-1] == "extra_19999"
    assert st.table["extra_19999"].iloc[0] == str(19_999 % 97)
    assert st.numbers["extra_19999"].dtype == np.float64
    assert st.numbers["extra_19999"][0] == 19_999 % 97


def test_check_fits_xlsx():
    """Excel sheet limits: 1,048,576 rows (one for the header) and 16,384 columns (Microsoft,
    'Excel specifications and limits'; common practice)."""
    check_fits_xlsx(1000, 100)
    with pytest.raises(OutputError, match=r"out\.xlsx: .*20004 of the study list.*\.csv"):
        check_fits_xlsx(50, 20_004, "out.xlsx")
    with pytest.raises(OutputError, match="rows"):
        check_fits_xlsx(1_048_576, 10)


def test_read_file_bytes_limit(tmp_path):
    """A file over the stated size limit is refused before it is read. Common practice, no source."""
    p = tmp_path / "s.csv"
    p.write_bytes(b"x" * 2000)
    assert read_file_bytes(p, limit=2000) == b"x" * 2000
    with pytest.raises(InputError, match=r"s\.csv: the file is 2\.0 KiB, more than the 1000 bytes"):
        read_file_bytes(p, limit=1000)


def test_odd_numbers_stay_text(tmp_path):
    """Number-like text that is not a plain decimal number ('∞', '1.2.3', Arabic-Indic digits)
    keeps its column as text, cell for cell, for the mapping step to judge. Common practice, no
    source."""
    st = read_studies(bad_inputs.odd_numbers_csv(tmp_path))
    assert list(st.table["LVIDd (mm)"]) == bad_inputs.ODD_NUMBERS[:3] + [
        "NaN",
        *bad_inputs.ODD_NUMBERS[4:],
    ]


def test_unicode_sheet_name(tmp_path):
    """A 31-character sheet name (the xlsx maximum) with quotes and accents reads by name."""
    p = bad_inputs.unicode_sheet_xlsx(tmp_path)
    st = read_studies(p, sheet=bad_inputs.UNICODE_SHEET)
    assert st.sheet == bad_inputs.UNICODE_SHEET and len(st.table) == 2


def test_shared_strings_many(tmp_path):
    """10^6 unused shared strings do not stop a two-row sheet from being read (ECMA-376 sst)."""
    st = read_studies(bad_inputs.shared_strings_xlsx(tmp_path))
    assert list(st.table["study_id"]) == ["D001", "D002"]


def test_odd_dates_kept(tmp_path):
    """'0000-00-00' stays text and serial 2958466 (after 9999-12-31, the last Excel date) stays a
    number: the reader does not invent dates (ECMA-376 date serials)."""
    st = read_studies(bad_inputs.odd_dates_xlsx(tmp_path))
    col = st.table["study_date"]
    assert col.iloc[0] == "0000-00-00"
    assert float(col.iloc[1]) == 2958466

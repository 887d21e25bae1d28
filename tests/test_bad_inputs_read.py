"""Every broken or hostile file in the corpus ends in a clear InputError or in a finding.

The expectations are facts of the file formats (RFC 4180 CSV; ECMA-376 Office Open XML: a zip
package, ``t="e"`` error cells, ``<f>`` formulas with cached ``<v>`` values; [MS-OFFCRYPTO]: an
encrypted workbook is an OLE compound file with an ``EncryptedPackage`` stream; W3C XML 1.0: entity
declarations live in the DOCTYPE). Zip-bomb limits are common practice, no source.
"""

from __future__ import annotations

import re
import zipfile

import bad_inputs
import pandas as pd
import pytest

from wallstress.errors import InputError
from wallstress.readers import ZipLimits, check_zip, read_studies


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
    assert st.table.loc[1, "IVSd (mm)"] == 11
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

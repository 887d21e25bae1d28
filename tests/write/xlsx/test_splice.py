"""xlsx_splice on real files: the user's package survives byte for byte, our sheets read back exactly.

External references: ECMA-376 Office Open XML, 5th ed. (2016), Part 1 (SpreadsheetML: inline
strings, styles, 18.8.30 built-in number formats; ST_Xstring ``_xHHHH_`` escapes, 22.9.2.19) and
Part 2 (packaging); general-purpose readers openpyxl and python-calamine; LibreOffice Calc (a real
spreadsheet program) where installed. Excel's limits (1,048,576 rows, 16,384 columns, 31-character
sheet names, 32,767 characters per cell): common practice, no source read.
"""

from __future__ import annotations

import io
import re
import shutil
import subprocess
import zipfile
from xml.etree import ElementTree as ET

import numpy as np
import pandas as pd
import pytest
from openpyxl import Workbook, load_workbook

from wallstress.errors import OutputError
from wallstress.write.xlsx.registries import SpliceError
from wallstress.write.xlsx.sheet_xml import EXCEL_MAX_TEXT, SheetSpec
from wallstress.write.xlsx.splice import new_workbook, splice_sheets, valid_sheet_name

REGISTRIES = {
    "[Content_Types].xml",
    "xl/workbook.xml",
    "xl/_rels/workbook.xml.rels",
    "xl/styles.xml",
}
FORMULA_TEXT = [
    "=1+1",
    "+A1",
    "@SUM(A1)",
    '=HYPERLINK("http://example.invalid","x")',
    "-2",
    "plain",
]


def _rich_workbook(path, with_image=True):
    """Two sheets, formulas, a comment, bold/fill/number format, a defined name, a column width, a
    merged range, a data validation, a chart and (with Pillow) an image. Invented values."""
    from openpyxl.chart import BarChart, Reference
    from openpyxl.comments import Comment
    from openpyxl.styles import Font, PatternFill
    from openpyxl.workbook.defined_name import DefinedName
    from openpyxl.worksheet.datavalidation import DataValidation

    wb = Workbook()
    ws = wb.active
    ws.title = "Studies"
    ws.append(["study_id", "lvidd_mm", "ivsd_mm", "sum"])
    for i in range(1, 6):
        ws.append([f"S{i}", 48 + i, 9 + i / 10, f"=B{i + 1}+C{i + 1}"])
    ws["A1"].font = Font(bold=True)
    ws["B1"].fill = PatternFill("solid", fgColor="FFFF00")
    ws["C2"].number_format = "0.000"
    ws["A2"].comment = Comment("invented demo row", "lab")
    ws.column_dimensions["A"].width = 21
    ws.merge_cells("F1:G2")
    ws["F1"] = "merged"
    dv = DataValidation(type="whole", operator="between", formula1="0", formula2="100")
    ws.add_data_validation(dv)
    dv.add("B2:B6")
    wb.defined_names["lvidd_all"] = DefinedName("lvidd_all", attr_text="Studies!$B$2:$B$6")
    chart = BarChart()
    chart.add_data(Reference(ws, min_col=2, min_row=1, max_row=6), titles_from_data=True)
    ws.add_chart(chart, "I2")
    if with_image:
        try:
            from openpyxl.drawing.image import Image
            from PIL import Image as PILImage
        except ImportError:
            pass
        else:
            buf = io.BytesIO()
            PILImage.new("RGB", (8, 8), (200, 30, 30)).save(buf, "PNG")
            buf.seek(0)
            ws.add_image(Image(buf), "I20")
    ws2 = wb.create_sheet("Notes")
    ws2["A1"] = "free text"
    ws2["B1"] = "=Studies!B2*2"
    wb.save(path)
    return path


def _our_table(n=40, seed=3):
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(n) * 10.0 ** rng.integers(-300, 300, n)
    x[:4] = [5e-324, 1.7976931348623157e308, 1 / 3, np.nan]
    text = (FORMULA_TEXT * (n // len(FORMULA_TEXT) + 1))[:n]
    text[-1] = 'quote " & <tag> _x0041_ \u00e9\u4e2d\U0001f600  '
    return pd.DataFrame(
        {
            "lv_mass_g": x,
            "note": text,
            "flag": [bool(i % 2) for i in range(n)],
            "n": np.arange(n, dtype="int64"),
        }
    )


@pytest.fixture
def rich(tmp_path):
    return _rich_workbook(tmp_path / "studies.xlsx")


def _members(path):
    with zipfile.ZipFile(path) as z:
        return {i.filename: z.read(i) for i in z.infolist()}


def test_every_original_member_is_byte_identical(rich, tmp_path):
    """Every zip member of the user's package is copied unchanged (ECMA-376 Part 2 parts), except the
    four registries, which parse and keep every original element and attribute, in order."""
    out = tmp_path / "out.xlsx"
    splice_sheets(rich, out, {"wallstress results": _our_table()})
    before, after = _members(rich), _members(out)
    assert set(before) <= set(after)
    for name, data in before.items():
        if name in REGISTRIES:
            old = [(e.tag, dict(e.attrib), (e.text or "")) for e in ET.fromstring(data).iter()]
            new = [
                (e.tag, dict(e.attrib), (e.text or "")) for e in ET.fromstring(after[name]).iter()
            ]
            remaining = iter(new)
            for tag, attrib, text in old:  # originals appear in order (counts may grow)
                for t2, a2, x2 in remaining:
                    a2 = {k: v for k, v in a2.items() if k != "count"}
                    if t2 == tag and a2 == {k: v for k, v in attrib.items() if k != "count"}:
                        assert x2 == text
                        break
                else:
                    pytest.fail(f"{name}: original element {tag} {attrib} lost")
        else:
            assert after[name] == data, name
    # the styles part: original cellXfs/fonts come first, unchanged, so their indices keep meaning
    main = "{http://schemas.openxmlformats.org/spreadsheetml/2006/main}"
    for coll in ("cellXfs", "fonts"):
        old = [ET.tostring(e) for e in ET.fromstring(before["xl/styles.xml"]).find(main + coll)]
        new = [ET.tostring(e) for e in ET.fromstring(after["xl/styles.xml"]).find(main + coll)]
        assert new[: len(old)] == old and len(new) > len(old)


def test_openpyxl_sees_original_and_ours(rich, tmp_path):
    """openpyxl reads the user's sheets, values, formulas, comment, styles, defined name, width,
    merged range, validation, chart/image parts, and our sheet's values and frozen header."""
    out = tmp_path / "out.xlsx"
    table = _our_table()
    names = splice_sheets(rich, out, {"wallstress results": table, "Studies": table.head(3)})
    assert list(names) == ["wallstress results", "Studies 2"]
    wb = load_workbook(out)
    assert wb.sheetnames == ["Studies", "Notes", "wallstress results", "Studies 2"]
    ws = wb["Studies"]
    assert ws["D2"].value == "=B2+C2"
    assert wb["Notes"]["B1"].value == "=Studies!B2*2"
    assert ws["A2"].comment.text == "invented demo row"
    assert ws["A1"].font.b
    assert ws["B1"].fill.fgColor.rgb == "00FFFF00"
    assert ws["C2"].number_format == "0.000"
    assert "lvidd_all" in wb.defined_names
    assert ws.column_dimensions["A"].width == 21
    assert "F1:G2" in {str(r) for r in ws.merged_cells.ranges}
    assert len(ws.data_validations.dataValidation) == 1
    ours = wb["wallstress results"]
    assert ours.freeze_panes == "A2"
    assert ours.auto_filter.ref == f"A1:D{len(table) + 1}"
    assert ours["A1"].font.b and ours["A1"].value == "lv_mass_g"
    got = [r for r in ours.iter_rows(min_row=2, values_only=True)]
    assert [g[0] for g in got][:3] == [5e-324, 1.7976931348623157e308, 1 / 3]
    assert got[3][0] is None  # NaN -> empty cell
    assert [g[2] for g in got] == table["flag"].tolist()
    assert [g[3] for g in got] == table["n"].tolist()
    assert [g[1] for g in got][: len(FORMULA_TEXT)] == FORMULA_TEXT
    members = _members(out)
    assert any(n.startswith("xl/charts/") for n in members)


def test_calamine_reads_full_precision_and_text(rich, tmp_path):
    """python-calamine reads our numbers bit for bit (float64 round trip) and our text unchanged,
    including a literal _x0041_ (escaped as _x005F_x0041_, ECMA-376 Part 1, 22.9.2.19)."""
    from python_calamine import CalamineWorkbook

    out = tmp_path / "out.xlsx"
    table = _our_table(200)
    splice_sheets(rich, out, {"res": table})
    rows = CalamineWorkbook.from_path(str(out)).get_sheet_by_name("res").to_python()
    assert rows[0] == ["lv_mass_g", "note", "flag", "n"]
    x = np.array([np.nan if r[0] == "" else r[0] for r in rows[1:]], dtype=float)
    assert np.array_equal(x, table["lv_mass_g"].to_numpy(), equal_nan=True)
    assert [r[1] for r in rows[1:]] == table["note"].tolist()
    assert [r[2] for r in rows[1:]] == table["flag"].tolist()


def test_formula_like_text_stays_text(rich, tmp_path):
    """Text that looks like a formula is an inline string (t="inlineStr"), never an <f> element."""
    out = tmp_path / "out.xlsx"
    splice_sheets(rich, out, {"res": pd.DataFrame({"t": FORMULA_TEXT})})
    with zipfile.ZipFile(out) as z:
        new = [n for n in z.namelist() if n not in _members(rich) and "worksheets/" in n]
        xml = z.read(new[0]).decode()
    assert "<f>" not in xml and "<f " not in xml
    assert xml.count('t="inlineStr"') == len(FORMULA_TEXT) + 1  # + header
    wb = load_workbook(out)
    cells = [c for (c,) in wb["res"].iter_rows(min_row=2)]
    assert [c.value for c in cells] == FORMULA_TEXT
    assert all(c.data_type == "s" for c in cells)
    assert cells[0].quotePrefix and not cells[-1].quotePrefix


def test_dates_as_serials_with_date_format(tmp_path):
    """Naive dates are serial numbers with a date format (1900 and 1904 date systems, ECMA-376 Part 1,
    18.17.4.1); a date-only column shows yyyy-mm-dd; tz-aware values are ISO text."""
    dates = pd.to_datetime(["2020-01-02", None, "1999-12-31"])
    stamps = pd.to_datetime(["2020-01-02 03:04:05", "2021-06-30 23:59:59", None])
    table = pd.DataFrame({"d": dates, "ts": stamps, "tz": stamps.tz_localize("UTC")})
    for epoch in ("1900", "1904"):
        src = tmp_path / f"src{epoch}.xlsx"
        wb = Workbook()
        if epoch == "1904":
            from openpyxl.utils.datetime import CALENDAR_MAC_1904

            wb.epoch = CALENDAR_MAC_1904
        wb.save(src)
        out = tmp_path / f"out{epoch}.xlsx"
        splice_sheets(src, out, {"res": table})
        ws = load_workbook(out)["res"]
        assert ws["A2"].value == dates[0].to_pydatetime() and ws["A2"].number_format == "yyyy-mm-dd"
        assert ws["A3"].value is None
        assert ws["B3"].value == stamps[1].to_pydatetime()
        assert ws["B3"].number_format == "yyyy-mm-dd hh:mm:ss"
        assert ws["C2"].value == "2020-01-02T03:04:05+00:00"


def test_number_formats_and_units_in_header(tmp_path):
    """number_formats sets display formats (values stay full precision); header_units gives
    "name [unit]"; built-in "0" uses id 1 (ECMA-376 Part 1, 18.8.30)."""
    out = tmp_path / "new.xlsx"
    t = pd.DataFrame({"lv_mass_g": [181.976, 1 / 3], "rwt": [0.4, 0.41]})
    res = new_workbook(
        out,
        {"r": t},
        header_units={"lv_mass_g": "g"},
        number_formats={"lv_mass_g": "0", "rwt": "0.00"},
    )
    ws = load_workbook(out)["r"]
    assert ws["A1"].value == "lv_mass_g [g]" and ws["B1"].value == "rwt"
    assert ws["A2"].number_format == "0" and ws["A2"].value == 181.976
    assert ws["B3"].number_format == "0.00" and ws["A3"].value == 1 / 3
    assert set(res.style_ids) >= {"header", "0", "0.00"}


def test_sheet_spec_widths(tmp_path):
    """A SheetSpec's widths set the column widths (the methods sheet's 28 and 110)."""
    out = tmp_path / "new.xlsx"
    new_workbook(
        out, {"m": SheetSpec(pd.DataFrame({"item": ["a"], "value": ["b"]}), widths=(28, 110))}
    )
    ws = load_workbook(out)["m"]
    assert ws.column_dimensions["A"].width == 28 and ws.column_dimensions["B"].width == 110


def test_sheet_names_follow_excel_rules():
    """31 characters, no []:*?/\\, not History, unique case-insensitively (common practice, no source)."""
    assert valid_sheet_name("a/b:c*d?[e]\\", []) == "a_b_c_d__e__"
    assert valid_sheet_name("x" * 40, []) == "x" * 31
    assert valid_sheet_name("RESULTS", ["results"]) == "RESULTS 2"
    assert valid_sheet_name("r" * 31, ["r" * 31]) == "r" * 29 + " 2"
    assert valid_sheet_name("History", []) == "History 2"
    assert valid_sheet_name("", []) == "sheet"


def test_long_text_cut_with_note_and_control_characters(tmp_path):
    """Text beyond 32,767 characters is cut to the limit with a note; control characters XML 1.0
    cannot hold become U+FFFD with a note (XML 1.0, Char production; common practice)."""
    out = tmp_path / "new.xlsx"
    res = new_workbook(out, {"r": pd.DataFrame({"t": ["y" * 40_000, "a\x01b", "ok"]})})
    assert any("cut" in n for n in res.notes) and any("U+FFFD" in n for n in res.notes)
    ws = load_workbook(out)["r"]
    assert len(ws["A2"].value) == EXCEL_MAX_TEXT
    assert ws["A3"].value == "a\ufffdb"


def test_too_big_for_a_sheet_raises(tmp_path):
    """More rows or columns than a sheet holds raises OutputError naming the fix (csv/parquet)."""
    with pytest.raises(OutputError, match="csv or .parquet"):
        new_workbook(tmp_path / "x.xlsx", {"r": pd.DataFrame({"a": np.zeros(1_048_576)})})
    with pytest.raises(OutputError, match="16384 columns"):
        new_workbook(tmp_path / "x.xlsx", {"r": pd.DataFrame(np.zeros((1, 16_385)))})


def test_odd_packages_raise_splice_error(tmp_path, rich):
    """Not a zip (an encrypted workbook is an OLE file) and strict OOXML raise SpliceError."""
    ole = tmp_path / "enc.xlsx"
    ole.write_bytes(b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\0" * 512)
    with pytest.raises(SpliceError, match="encrypted"):
        splice_sheets(ole, tmp_path / "o.xlsx", {"r": _our_table(6)})
    strict = tmp_path / "strict.xlsx"
    with zipfile.ZipFile(rich) as zin, zipfile.ZipFile(strict, "w") as zout:
        for i in zin.infolist():
            data = zin.read(i).replace(
                b"http://schemas.openxmlformats.org/spreadsheetml/2006/main",
                b"http://purl.oclc.org/ooxml/spreadsheetml/main",
            )
            zout.writestr(i, data)
    with pytest.raises(SpliceError, match="strict"):
        splice_sheets(strict, tmp_path / "o2.xlsx", {"r": _our_table(6)})


def test_new_workbook_reads_back(tmp_path):
    """A workbook from scratch: openpyxl and calamine read the same values."""
    from python_calamine import CalamineWorkbook

    out = tmp_path / "new.xlsx"
    t = _our_table(30)
    new_workbook(out, {"results": t, "findings": pd.DataFrame({"row": [0], "code": ["x"]})})
    wb = load_workbook(out)
    assert wb.sheetnames == ["results", "findings"]
    rows = CalamineWorkbook.from_path(str(out)).get_sheet_by_name("results").to_python()
    assert [r[1] for r in rows[1:]] == t["note"].tolist()


_SOFFICE = shutil.which("soffice") or shutil.which("libreoffice")


def _soffice(args, cwd):
    profile = f"-env:UserInstallation=file://{cwd}/lo-profile"
    subprocess.run([_SOFFICE, profile, "--headless", *args], cwd=cwd, check=True,
                   capture_output=True, timeout=180)  # fmt: skip


@pytest.mark.skipif(_SOFFICE is None, reason="LibreOffice not installed")
def test_libreoffice_written_source_and_reading_our_output(tmp_path):
    """A LibreOffice-written workbook is spliced, and LibreOffice Calc opens the result and reads our
    sheet (CSV export of every sheet; LibreOffice prints 15 significant digits, common practice)."""
    src = _rich_workbook(tmp_path / "src.xlsx")
    (tmp_path / "lo").mkdir()
    _soffice(["--convert-to", "xlsx", "--outdir", str(tmp_path / "lo"), str(src)], tmp_path)
    lo_src = tmp_path / "lo" / "src.xlsx"
    out = tmp_path / "spliced.xlsx"
    table = pd.DataFrame({"x": [0.1, 1 / 3, 12345.678901234567], "t": FORMULA_TEXT[:3]})
    splice_sheets(lo_src, out, {"ours": table})
    wb = load_workbook(out)
    assert wb.sheetnames[-1] == "ours" and wb["Studies"]["D2"].value == "=B2+C2"
    filt = "csv:Text - txt - csv (StarCalc):44,34,76,1,,0,false,true,false,false,false,-1"
    (tmp_path / "csv").mkdir()
    _soffice(["--convert-to", filt, "--outdir", str(tmp_path / "csv"), str(out)], tmp_path)
    back = pd.read_csv(tmp_path / "csv" / "spliced-ours.csv")
    assert back["t"].tolist() == FORMULA_TEXT[:3]
    np.testing.assert_allclose(back["x"].to_numpy(), table["x"].to_numpy(), rtol=1e-14)
    studies = pd.read_csv(tmp_path / "csv" / "spliced-Studies.csv")
    assert studies["sum"].tolist()[0] == pytest.approx(
        49 + 9.1
    )  # the user's formula still computes


def test_empty_tables_and_odd_dtypes(tmp_path):
    """A table with no rows keeps its header; one with no columns gives an empty sheet; categorical,
    nullable integer and mixed object columns keep their values (openpyxl as reader)."""
    import datetime as dt

    out = tmp_path / "new.xlsx"
    mixed = pd.DataFrame(
        {
            "sex": pd.Categorical(["F", None, "M"]),
            "n": pd.array([1, None, 3], dtype="Int64"),
            "m": [1, "two", dt.date(2020, 1, 3)],
            "big": [2**60, 1, 2],
        }
    )
    res = new_workbook(
        out, {"none": pd.DataFrame({"a": []}), "nocols": pd.DataFrame(), "mixed": mixed}
    )
    wb = load_workbook(out)
    assert [c.value for c in wb["none"][1]] == ["a"] and wb["none"].max_row == 1
    assert wb["nocols"]["A1"].value is None
    rows = list(wb["mixed"].iter_rows(min_row=2, values_only=True))
    assert [r[0] for r in rows] == ["F", None, "M"]
    assert [r[1] for r in rows] == [1, None, 3]
    assert rows[1][2] == "two" and rows[2][2] == dt.datetime(2020, 1, 3)
    assert rows[0][3] == str(2**60) and any("2**53" in n for n in res.notes)


def test_package_without_styles_part_and_with_prefixed_xml(tmp_path, rich):
    """A package with no styles part gets one (registered in rels and content types); a workbook
    part written with a namespace prefix (x:sheets) is edited in that prefix (ECMA-376 Part 2)."""
    main = b"http://schemas.openxmlformats.org/spreadsheetml/2006/main"
    src = tmp_path / "odd.xlsx"
    with zipfile.ZipFile(rich) as zin, zipfile.ZipFile(src, "w") as zout:
        for i in zin.infolist():
            data = zin.read(i)
            if i.filename == "xl/styles.xml":
                continue
            if i.filename == "xl/_rels/workbook.xml.rels":
                data = re.sub(rb"<Relationship [^>]*/styles\"[^>]*/>", b"", data)
            if i.filename == "xl/workbook.xml":
                data = data.replace(b'xmlns="' + main + b'"', b'xmlns:x="' + main + b'"')
                data = data.replace(b"<", b"<x:").replace(b"<x:/", b"</x:").replace(b"<x:?", b"<?")
            zout.writestr(i, data)
    with zipfile.ZipFile(src) as z:
        ET.fromstring(z.read("xl/_rels/workbook.xml.rels"))  # the edited fixture is valid XML
        assert b"styles" not in z.read("xl/_rels/workbook.xml.rels")
    out = tmp_path / "out.xlsx"
    splice_sheets(src, out, {"ours": _our_table(6)})
    members = _members(out)
    assert b"<x:sheet " in members["xl/workbook.xml"]
    assert any(n.startswith("xl/styles") for n in members)
    from python_calamine import CalamineWorkbook

    # (openpyxl would refuse the user's sheets here: their cells name styles the fixture removed)
    cal = CalamineWorkbook.from_path(str(out))
    assert cal.sheet_names[-1] == "ours"
    assert cal.get_sheet_by_name("ours").to_python()[0] == ["lv_mass_g", "note", "flag", "n"]
    styles = [n for n in members if n.startswith("xl/styles")][0]
    assert b"<b/>" in members[styles]
    ctypes = members["[Content_Types].xml"].decode()
    assert f'PartName="/{styles}"' in ctypes


def test_callable_sheet_sees_notes_and_macro_workbook_refused(tmp_path, rich):
    """A SheetSpec built from the notes (the methods sheet) lists notes of earlier sheets; a
    macro-enabled package raises SpliceError (macros cannot travel in an .xlsx; ECMA-376 Part 1)."""
    out = tmp_path / "out.xlsx"
    seen = []

    def methods(notes):
        seen.extend(notes)
        return pd.DataFrame({"item": ["note"] * len(notes), "value": notes})

    splice_sheets(
        rich,
        out,
        {"r": pd.DataFrame({"x": [np.inf, 1.0]}), "m": SheetSpec(methods, widths=(28, 110))},
    )
    assert any("infinite" in n for n in seen)
    assert "infinite" in load_workbook(out)["m"]["B2"].value
    macro = tmp_path / "macro.xlsx"
    with zipfile.ZipFile(rich) as zin, zipfile.ZipFile(macro, "w") as zout:
        for i in zin.infolist():
            zout.writestr(i, zin.read(i))
        zout.writestr("xl/vbaProject.bin", b"\0" * 16)
    with pytest.raises(SpliceError, match="macro"):
        splice_sheets(macro, tmp_path / "o.xlsx", {"r": _our_table(6)})

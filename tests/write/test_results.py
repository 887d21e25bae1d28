"""Writing results next to the user's data: formats, the user's workbook kept, never-harm invariants.

Every invariant is checked on real files in ``tmp_path``; the Analysis is built by hand (no pipeline).
"""

from __future__ import annotations

import json
import re
import shutil
import zipfile
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from openpyxl.comments import Comment
from openpyxl.styles import Font, PatternFill
from openpyxl.workbook.defined_name import DefinedName

from wallstress import __version__
from wallstress import findings as F
from wallstress.analysis.result import Analysis
from wallstress.errors import OutputError
from wallstress.schema.display import canonical_header, header_with_unit
from wallstress.schema.outputs import OUTPUT_COLUMNS
from wallstress.write import safety
from wallstress.write.methods_sheet import from_memory_items
from wallstress.write.results import write_results, write_sheets
from wallstress.write.xlsx import sheet_xml
from wallstress.write.xlsx import splice as xlsx_splice

FORMULA_TEXT = ['=HYPERLINK("http://x")', "+A1", "@SUM(A1)", "http://example.org", "#N/A"]


@dataclass
class FakeStudyTable:
    """Stands in for readers.StudyTable (only the attributes the writers may use)."""

    table: pd.DataFrame
    path: Path
    format: str
    sheet: str | None = None
    header_row: int = 0
    sha256: str = ""
    encoding: str = "utf-8"
    delimiter: str = ","
    decimal: str = "."
    findings: pd.DataFrame | None = None


def make_analysis(n_extra: int = 0) -> Analysis:
    """Five invented studies; a user column with formula-looking and link-looking text."""
    user = pd.DataFrame(
        {
            "Exam": ["E1", "E2", "E3", "E4", "E5"],
            "comment": FORMULA_TEXT,
            "LVIDd (cm)": [5.0, 4.8, np.nan, 5.2, 4.4],
        }
    )
    outputs = pd.DataFrame(
        {
            "lv_mass_g": [181.97612799999998, 150.123456789, np.nan, 210.5, -0.0],
            "lvmi_bsa_g_m2": [95.123456789, 80.0, np.nan, 101.25, 70.0],
            "rwt": [0.3456789, 0.41, np.nan, 0.5, 0.38],
            "geometry": ["normal", "normal", "", "concentric_hypertrophy", "normal"],
            "flags": ["", "", "lvidd_missing", "", ""],
        }
    )
    findings = F.concat(
        [
            F.make([2], code="lvidd_missing", severity="error", message="LVIDd is missing.",
                   column="LVIDd (cm)", field="lvidd_cm"),
            F.make([1], code="odd_note", severity="note", message="echo of the user text",
                   column="comment", values=["+A1"]),
        ]
    )  # fmt: skip
    methods = {
        "software": {"name": "wallstress", "version": __version__},
        "options": {"reference": "ase_eacvi_2015", "bsa_method": "dubois"},
        "formulas": [
            {"output": "lv_mass_g", "method": "ase_corrected", "verified": "published"},
            {"output": "cess_kdyn_cm2", "method": "published", "verified": "from_memory"},
        ],
        "unverified": ["cess_kdyn_cm2: constant 1.35 (from memory)"],
        "cautions": ["Adult reference values do not apply to children."],
    }
    table = pd.concat([user, outputs], axis=1)
    return Analysis(
        table=table, canonical=user, outputs=outputs, findings=findings, methods=methods
    )


def user_workbook(path: Path) -> Path:
    """A study list with two sheets, a formula, a comment, styles, a defined name and a width."""
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Studies"
    ws.append(["Exam", "comment", "LVIDd (cm)", "double"])
    for i, (e, c, d) in enumerate(zip(["E1", "E2", "E3", "E4", "E5"], FORMULA_TEXT,
                                      [5.0, 4.8, None, 5.2, 4.4], strict=True), start=2):  # fmt: skip
        ws.cell(row=i, column=1, value=e)
        cell = ws.cell(row=i, column=2, value=c)
        cell.data_type = "s"  # the user's text, stored as text
        ws.cell(row=i, column=3, value=d)
        ws.cell(row=i, column=4, value=f"=C{i}*2")
    ws["A1"].font = Font(bold=True)
    ws["B1"].fill = PatternFill("solid", fgColor="FFFF00")
    ws["C2"].number_format = "0.000"
    ws["A1"].comment = Comment("Exam number from the lab system", "lab")
    ws.column_dimensions["B"].width = 33.5
    notes = wb.create_sheet("Notes")
    notes["A1"] = "Invented demo list"
    notes["B2"] = "=SUM(Studies!C2:C6)"
    wb.defined_names["lvidd_cells"] = DefinedName("lvidd_cells", attr_text="Studies!$C$2:$C$6")
    wb.save(path)
    return path


def xlsx_source(path: Path) -> FakeStudyTable:
    return FakeStudyTable(
        table=pd.DataFrame(), path=path, format="xlsx", sheet="Studies", header_row=0,
        sha256=safety.sha256_file(path),
    )  # fmt: skip


def with_part(src: Path, dest: Path, name: str, data: bytes) -> Path:
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dest, "w") as zout:
        for item in zin.infolist():
            zout.writestr(item, zin.read(item.filename))
        zout.writestr(name, data)
    return dest


def sheet_xml_has_formula(path: Path, sheet_title: str) -> bool:
    """True when the sheet's XML holds any <f> (formula) element (ECMA-376 Part 1, 18.3.1.40)."""
    wb = openpyxl.load_workbook(path)
    index = wb.sheetnames.index(sheet_title) + 1
    with zipfile.ZipFile(path) as zf:
        name = f"xl/worksheets/sheet{index}.xml"
        data = zf.read(name).decode("utf-8")
    return re.search(r"<(\w+:)?f[\s>/]", data) is not None


def leftovers(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if "wallstress-tmp" in p.name)


# ----------------------------------------------------------------------------------------- csv


def test_csv_results_findings_methods(tmp_path):
    a = make_analysis()
    out = tmp_path / "results.csv"
    paths = write_results(a, out)
    assert isinstance(paths, list)
    assert [p.name for p in paths] == [
        "results.csv",
        "results.findings.csv",
        "results.methods.json",
    ]
    back = pd.read_csv(out, keep_default_na=False, na_values=[""])
    assert list(back.columns) == list(a.table.columns)  # the user's columns first, ours after
    # full precision: Python's float repr round-trips exactly (IEEE 754 shortest repr)
    assert back["lv_mass_g"].tolist()[:2] == [181.97612799999998, 150.123456789]
    assert back["comment"].tolist() == FORMULA_TEXT  # not escaped by default
    f = pd.read_csv(tmp_path / "results.findings.csv", keep_default_na=False)
    assert "lvidd_missing" in set(f["code"]) and "formula_like_text" in set(f["code"])
    rec = json.loads((tmp_path / "results.methods.json").read_text(encoding="utf-8"))
    assert rec["options"]["reference"] == "ase_eacvi_2015"
    assert rec["written"]["software_version"] == __version__


def test_csv_formula_like_reported(tmp_path):
    """= + @ starts are reported with their row and column; a link and #N/A are not formulas."""
    report = write_results(make_analysis(), tmp_path / "r.csv")
    fl = report.formula_like
    assert list(fl.columns) == list(F.FINDING_COLUMNS)
    assert fl["row"].tolist() == [0, 1, 2] and set(fl["column"]) == {"comment"}
    assert set(fl["code"]) == {"formula_like_text"}
    assert any("formula" in n for n in report.notes)


def test_csv_escape_formulas_prefixes_single_quote(tmp_path):
    write_results(make_analysis(), tmp_path / "r.csv", escape_formulas=True)
    back = pd.read_csv(tmp_path / "r.csv", keep_default_na=False)
    assert back["comment"].tolist() == [
        '\'=HYPERLINK("http://x")', "'+A1", "'@SUM(A1)", "http://example.org", "#N/A",
    ]  # fmt: skip
    assert back["lv_mass_g"].iloc[4] == "-0.0"  # a negative number is not text: not quoted


def test_csv_keeps_source_delimiter_and_decimal(tmp_path):
    """A semicolon / decimal-comma list comes back in the same convention (common practice, no source)."""
    src = tmp_path / "in.csv"
    src.write_text("Exam;x\nE1;1,5\n", encoding="utf-8")
    source = FakeStudyTable(pd.DataFrame(), src, "csv", delimiter=";", decimal=",")
    write_results(make_analysis(), tmp_path / "out.csv", source)
    text = (tmp_path / "out.csv").read_text(encoding="utf-8")
    assert text.splitlines()[0].startswith("Exam;comment;")
    assert ";150,123456789;" in text  # full precision (shortest round-trip repr), decimal comma
    back = pd.read_csv(tmp_path / "out.csv", sep=";", decimal=",")
    assert back["rwt"].iloc[0] == 0.3456789


def test_csv_failure_midway_keeps_previous_outputs(tmp_path, monkeypatch):
    """A serializer failing midway (also Ctrl-C) leaves the previous three files intact."""
    out = tmp_path / "r.csv"
    write_results(make_analysis(), out)
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    from wallstress.write import flat as flat_out

    real = flat_out.write_csv
    calls = {"n": 0}

    def flaky(frame, path, *args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 2:  # after the results file, in the findings file
            Path(path).write_text("row,col\n0,")
            raise KeyboardInterrupt
        return real(frame, path, *args, **kwargs)

    monkeypatch.setattr(flat_out, "write_csv", flaky)
    with pytest.raises(KeyboardInterrupt):
        write_results(make_analysis(), out)
    after = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    assert after == before
    assert leftovers(tmp_path) == []


def test_csv_output_equal_to_input_refused(tmp_path):
    src = tmp_path / "studies.csv"
    src.write_text("Exam\nE1\n")
    digest = safety.sha256_file(src)
    source = FakeStudyTable(pd.DataFrame(), src, "csv")
    with pytest.raises(
        OutputError, match="would overwrite your input; choose another -o or pass --in-place"
    ):
        write_results(make_analysis(), tmp_path / "." / "studies.csv", source)
    # a sidecar landing on the input is refused too
    side = tmp_path / "r.findings.csv"
    side.write_text("x\n")
    with pytest.raises(OutputError, match="would overwrite your input"):
        write_results(
            make_analysis(), tmp_path / "r.csv", FakeStudyTable(pd.DataFrame(), side, "csv")
        )
    assert safety.sha256_file(src) == digest


# ----------------------------------------------------------------------------------------- parquet


def test_parquet_round_trip(tmp_path):
    a = make_analysis()
    paths = write_results(a, tmp_path / "r.parquet")
    assert [p.name for p in paths] == ["r.parquet", "r.findings.parquet", "r.methods.json"]
    back = pd.read_parquet(tmp_path / "r.parquet")
    assert list(back.columns) == list(a.table.columns)
    np.testing.assert_array_equal(back["lv_mass_g"].to_numpy(), a.table["lv_mass_g"].to_numpy())
    assert back["comment"].tolist() == FORMULA_TEXT
    f = pd.read_parquet(tmp_path / "r.findings.parquet")
    assert f["code"].tolist() == a.findings["code"].tolist()


def test_parquet_mixed_object_column_written_as_text(tmp_path):
    a = make_analysis()
    a.table["mixed"] = pd.Series(["a", 1, 2.5, None, "b"], dtype=object)
    report = write_results(a, tmp_path / "r.parquet")
    back = pd.read_parquet(tmp_path / "r.parquet")
    assert back["mixed"].tolist()[:3] == ["a", "1", "2.5"]
    assert any("mixed" in n for n in report.notes)


# ----------------------------------------------------------------------------------------- xlsx, new


def test_xlsx_new_workbook_layout(tmp_path):
    a = make_analysis()
    out = tmp_path / "r.xlsx"
    write_results(a, out)
    wb = openpyxl.load_workbook(out)
    assert wb.sheetnames == [
        "wallstress results",
        "wallstress key measures",
        "wallstress findings",
        "wallstress methods",
    ]
    ws = wb["wallstress results"]
    headers = [c.value for c in ws[1]]
    # the user's headers unchanged, ours with units and findable by canonical name
    assert headers[:3] == ["Exam", "comment", "LVIDd (cm)"]
    assert headers[3:] == [
        "lv_mass_g [g]", "lvmi_bsa_g_m2 [g/m2]", "rwt [ratio]", "geometry [class]", "flags [codes]",
    ]  # fmt: skip
    assert [canonical_header(h) for h in headers] == list(a.table.columns)
    assert ws.freeze_panes == "A2"
    assert ws.auto_filter.ref == "A1:H6"
    assert ws["D2"].value == 181.97612799999998  # full precision stored
    assert ws["E2"].number_format == "0.0" and ws["F2"].number_format == "0.00"
    assert ws["E4"].value is None  # NaN -> empty cell
    assert ws.column_dimensions["B"].width >= len('=HYPERLINK("http://x")')


def test_xlsx_text_stays_text_in_new_workbook(tmp_path):
    """Formula-, error- and link-looking text is stored as text (data type "s"), no <f>, no links."""
    out = tmp_path / "r.xlsx"
    write_results(make_analysis(), out)
    wb = openpyxl.load_workbook(out)
    ws = wb["wallstress results"]
    col = [ws.cell(row=r, column=2) for r in range(2, 7)]
    assert [c.value for c in col] == FORMULA_TEXT
    assert [c.data_type for c in col] == ["s"] * 5
    assert all(c.hyperlink is None for c in col)
    for title in wb.sheetnames:
        assert not sheet_xml_has_formula(out, title), title
        assert wb[title]._hyperlinks == []
    # an independent reader (calamine) sees the text too; a formula cell would have no cached value
    back = pd.read_excel(
        out, sheet_name="wallstress results", engine="calamine", keep_default_na=False
    )
    assert back["comment"].tolist() == FORMULA_TEXT
    findings_ws = wb["wallstress findings"]
    values = [c.value for c in findings_ws["D"]]
    assert "+A1" in values


def test_xlsx_methods_sheet(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("Exam\nE1\n")
    source = FakeStudyTable(pd.DataFrame(), src, "csv", sha256=safety.sha256_file(src))
    out = tmp_path / "r.xlsx"
    write_results(make_analysis(), out, source)
    ws = openpyxl.load_workbook(out)["wallstress methods"]
    rows = [(r[0], r[1]) for r in ws.iter_rows(min_row=2, values_only=True)]
    d = {}
    for k, v in rows:
        d.setdefault(k, []).append(v)
    assert d["input file"] == ["in.csv"]
    assert d["input SHA-256"] == [safety.sha256_file(src)]
    assert d["software"] == [f"wallstress {__version__}"]
    run = datetime.fromisoformat(d["run time (UTC)"][0])
    assert run.utcoffset().total_seconds() == 0
    assert any("never replaces" in c and "clinician" in c for c in d["caution"])
    assert "Adult reference values do not apply to children." in d["caution"]
    assert d["value from memory"] == ["cess_kdyn_cm2: constant 1.35 (from memory)"]
    assert d["options.reference"] == ["ase_eacvi_2015"]
    assert any("cess_kdyn_cm2" in v for v in d["formulas 2"])
    assert d["output file"] == ["r.xlsx"]


def test_xlsx_refused_suffixes(tmp_path):
    for name in ("r.xlsm", "r.xls"):
        with pytest.raises(
            OutputError, match=r"choose an output ending in \.xlsx, \.csv, \.parquet"
        ):
            write_results(make_analysis(), tmp_path / name)
    with pytest.raises(OutputError, match="unknown output type '.txt'"):
        write_results(make_analysis(), tmp_path / "r.txt")
    assert list(tmp_path.iterdir()) == []


def test_xlsx_too_many_rows_refused(tmp_path, monkeypatch):
    monkeypatch.setattr(sheet_xml, "EXCEL_MAX_ROWS", 4)
    with pytest.raises(OutputError, match=r"write to a \.csv or \.parquet output instead"):
        write_results(make_analysis(), tmp_path / "r.xlsx")
    assert list(tmp_path.iterdir()) == []


def test_xlsx_serializer_failure_keeps_previous_output(tmp_path, monkeypatch):
    out = tmp_path / "r.xlsx"
    write_results(make_analysis(), out)
    before = out.read_bytes()

    def broken_write(target, *args, **kwargs):
        Path(target).write_bytes(b"PK\x03\x04 half a zip")
        raise OSError("disk full")

    monkeypatch.setattr(xlsx_splice, "new_workbook", broken_write)
    with pytest.raises(OSError, match="disk full"):
        write_results(make_analysis(), out)
    assert out.read_bytes() == before
    assert leftovers(tmp_path) == []


# ----------------------------------------------------------------------------------------- xlsx, copy


def test_xlsx_copy_keeps_user_workbook(tmp_path):
    """Two sheets, formulas, comment, bold font, fill, number format, defined name, width survive."""
    src = user_workbook(tmp_path / "lab.xlsx")
    digest = safety.sha256_file(src)
    out = tmp_path / "lab results.xlsx"
    report = write_results(make_analysis(), out, xlsx_source(src))
    assert report == [out] and report.notes == []
    assert safety.sha256_file(src) == digest  # the input is never changed
    wb = openpyxl.load_workbook(out)
    assert wb.sheetnames == [
        "Studies", "Notes", "wallstress results", "wallstress key measures", "wallstress findings", "wallstress methods",
    ]  # fmt: skip
    ws = wb["Studies"]
    assert ws["D2"].value == "=C2*2" and ws["D2"].data_type == "f"
    assert wb["Notes"]["B2"].value == "=SUM(Studies!C2:C6)"
    assert ws["A1"].comment.text == "Exam number from the lab system"
    assert ws["A1"].font.bold is True
    assert ws["B1"].fill.fgColor.rgb.endswith("FFFF00")
    assert ws["C2"].number_format == "0.000"
    assert ws.column_dimensions["B"].width == 33.5
    assert wb.defined_names["lvidd_cells"].attr_text == "Studies!$C$2:$C$6"
    # the user's own text stays text in their sheet
    assert ws["B2"].value == FORMULA_TEXT[0] and ws["B2"].data_type == "s"
    # our sheets never hold formulas from data
    for title in ("wallstress results", "wallstress findings", "wallstress methods"):
        assert not sheet_xml_has_formula(out, title)
    assert sheet_xml_has_formula(out, "Studies")  # the check itself can see formulas


def test_xlsx_copy_sheet_name_taken_gets_number(tmp_path):
    src = user_workbook(tmp_path / "lab.xlsx")
    wb = openpyxl.load_workbook(src)
    wb.create_sheet("wallstress results")
    wb.save(src)
    out = tmp_path / "o.xlsx"
    write_results(make_analysis(), out, xlsx_source(src), sheet_names={"methods": "how: computed?"})
    names = openpyxl.load_workbook(out).sheetnames
    assert "wallstress results 2" in names and "how_ computed_" in names
    with pytest.raises(OutputError, match="unknown role"):
        write_results(make_analysis(), out, xlsx_source(src), sheet_names={"result": "x"})


@pytest.mark.parametrize(
    "part, data",
    [
        ("xl/drawings/drawing1.xml", b"<xdr:wsDr/>"),
        ("xl/pivotCache/pivotCacheDefinition1.xml", b"<x/>"),
        ("xl/media/image1.png", b"x"),
    ],
)
def test_xlsx_copy_keeps_parts_a_spreadsheet_library_would_drop(tmp_path, part, data):
    """Drawings, pivot caches and images are copied byte for byte (the package is spliced, not
    re-saved), so the user's workbook comes back whole with our sheets added."""
    import zipfile

    src = with_part(user_workbook(tmp_path / "a.xlsx"), tmp_path / "lab.xlsx", part, data)
    digest = safety.sha256_file(src)
    out = tmp_path / "o.xlsx"
    report = write_results(make_analysis(), out, xlsx_source(src))
    assert report == [out] and report.notes == []
    with zipfile.ZipFile(out) as z:
        assert z.read(part) == data
    wb = openpyxl.load_workbook(out)
    assert wb.sheetnames[-4:] == [
        "wallstress results",
        "wallstress key measures",
        "wallstress findings",
        "wallstress methods",
    ]
    assert safety.sha256_file(src) == digest


@pytest.mark.parametrize("part, data, label", [("xl/vbaProject.bin", b"\x00", "macro")])
def test_xlsx_lossy_workbook_gets_separate_file(tmp_path, part, data, label):
    src = with_part(user_workbook(tmp_path / "a.xlsx"), tmp_path / "lab.xlsx", part, data)
    digest = safety.sha256_file(src)
    out = tmp_path / "o.xlsx"
    report = write_results(make_analysis(), out, xlsx_source(src))
    assert report == [out]
    assert any(label in n and "not copied" in n for n in report.notes)
    wb = openpyxl.load_workbook(out)
    assert wb.sheetnames == [
        "wallstress results",
        "wallstress key measures",
        "wallstress findings",
        "wallstress methods",
    ]
    warnings = [
        r[1] for r in wb["wallstress methods"].iter_rows(values_only=True) if r[0] == "warning"
    ]
    assert any(label in w for w in warnings)
    assert safety.sha256_file(src) == digest


def test_xlsx_copy_refused_when_input_changed_since_read(tmp_path):
    src = user_workbook(tmp_path / "lab.xlsx")
    source = xlsx_source(src)
    source.sha256 = "0" * 64
    with pytest.raises(OutputError, match="changed after it was read"):
        write_results(make_analysis(), tmp_path / "o.xlsx", source)
    assert not (tmp_path / "o.xlsx").exists()


def test_xlsx_output_equal_to_input_refused(tmp_path):
    src = user_workbook(tmp_path / "lab.xlsx")
    digest = safety.sha256_file(src)
    with pytest.raises(
        OutputError, match="would overwrite your input; choose another -o or pass --in-place"
    ):
        write_results(make_analysis(), src, xlsx_source(src))
    assert safety.sha256_file(src) == digest


# ----------------------------------------------------------------------------------------- in place


def test_in_place_after_verified_backup(tmp_path):
    src = user_workbook(tmp_path / "lab.xlsx")
    original = src.read_bytes()
    report = write_results(make_analysis(), src, xlsx_source(src), in_place=True)
    backup = report.backup
    assert re.fullmatch(r"lab\.wallstress-backup-\d{8}-\d{6}\.xlsx", backup.name)
    assert backup.read_bytes() == original  # byte-identical to the original
    assert report == [src, backup]
    wb = openpyxl.load_workbook(src)
    assert wb.sheetnames[:2] == ["Studies", "Notes"] and "wallstress results" in wb.sheetnames
    assert wb["Studies"]["D3"].value == "=C3*2"
    methods = {r[0]: r[1] for r in wb["wallstress methods"].iter_rows(values_only=True)}
    assert backup.name in methods["warning"]
    # out_path None is accepted too; another -o with --in-place is refused
    write_results(make_analysis(), None, xlsx_source(src), in_place=True)
    with pytest.raises(OutputError, match="do not also pass -o"):
        write_results(make_analysis(), tmp_path / "x.xlsx", xlsx_source(src), in_place=True)
    assert leftovers(tmp_path) == []


def test_in_place_failure_leaves_user_file_and_no_backup(tmp_path, monkeypatch):
    src = user_workbook(tmp_path / "lab.xlsx")
    original = src.read_bytes()

    def broken_splice(source, target, *args, **kwargs):
        Path(target).write_bytes(b"PK half")
        raise KeyboardInterrupt

    monkeypatch.setattr(xlsx_splice, "splice_sheets", broken_splice)
    with pytest.raises(KeyboardInterrupt):
        write_results(make_analysis(), src, xlsx_source(src), in_place=True)
    assert src.read_bytes() == original
    assert sorted(p.name for p in tmp_path.iterdir()) == ["lab.xlsx"]


def test_in_place_keeps_images_and_backs_up(tmp_path):
    import zipfile

    src = with_part(
        user_workbook(tmp_path / "a.xlsx"), tmp_path / "lab.xlsx", "xl/media/image1.png", b"x"
    )
    original = src.read_bytes()
    report = write_results(make_analysis(), src, xlsx_source(src), in_place=True)
    assert report[0] == src and report.backup is not None
    assert report.backup.read_bytes() == original
    with zipfile.ZipFile(src) as z:
        assert z.read("xl/media/image1.png") == b"x"


def test_in_place_unspliceable_writes_separate_file(tmp_path):
    """An encrypted or otherwise unspliceable package: a separate results workbook, no backup."""
    src = tmp_path / "lab.xlsx"
    user_workbook(tmp_path / "a.xlsx")
    src.write_bytes(b"\xd0\xcf\x11\xe0" + b"\x00" * 600)  # an OLE (encrypted) container
    source = xlsx_source(tmp_path / "a.xlsx")
    source.path = src
    source.sha256 = safety.sha256_file(src)
    digest = source.sha256
    report = write_results(make_analysis(), src, source, in_place=True)
    assert report == [tmp_path / "lab.wallstress-results.xlsx"] and report.backup is None
    assert any("not copied" in n for n in report.notes)
    assert safety.sha256_file(src) == digest
    assert not list(tmp_path.glob("*backup*"))


def test_in_place_refused_while_open_or_changed_or_csv(tmp_path):
    src = user_workbook(tmp_path / "lab.xlsx")
    digest = safety.sha256_file(src)
    lock = tmp_path / "~$lab.xlsx"
    lock.write_bytes(b"owner")
    with pytest.raises(OutputError, match="looks open in a spreadsheet program"):
        write_results(make_analysis(), src, xlsx_source(src), in_place=True)
    lock.unlink()
    stale = xlsx_source(src)
    stale.sha256 = "f" * 64
    with pytest.raises(OutputError, match="changed after it was read"):
        write_results(make_analysis(), src, stale, in_place=True)
    csv = tmp_path / "s.csv"
    csv.write_text("Exam\nE1\n")
    with pytest.raises(OutputError, match="--in-place works only with an .xlsx"):
        write_results(
            make_analysis(), csv, FakeStudyTable(pd.DataFrame(), csv, "csv"), in_place=True
        )
    assert safety.sha256_file(src) == digest
    assert not list(tmp_path.glob("*backup*"))


# ----------------------------------------------------------------------------------------- write_sheets


def tracking_like_sheets():
    patients = pd.DataFrame(
        {"patient_id": ["P1", "P2"], "lv_mass_change_g": [-35.5, 12.0],
         "lvmi_bsa_slope_g_m2_per_year": [-4.25, 1.0], "note": ["=1+1", "ok"]}
    )  # fmt: skip
    visits = pd.DataFrame(
        {"patient_id": ["P1", "P1"], "study_date": pd.to_datetime(["2020-01-01", "2021-06-30"])}
    )
    return {
        "patients": patients,
        "visits": visits,
        "transitions": pd.DataFrame({"from": [], "to": []}),
    }


def test_write_sheets_xlsx(tmp_path):
    out = tmp_path / "follow-up.xlsx"
    write_sheets(out, tracking_like_sheets(), {"tracking": {"min_visits": 2}})
    wb = openpyxl.load_workbook(out)
    assert wb.sheetnames == ["patients", "visits", "transitions", "methods"]
    p = wb["patients"]
    assert [c.value for c in p[1]] == [
        "patient_id", "lv_mass_change_g [g]", "lvmi_bsa_slope_g_m2_per_year [g/m2/year]", "note",
    ]  # fmt: skip
    assert p["D2"].data_type == "s" and p["D2"].value == "=1+1"
    v = wb["visits"]
    assert v["B3"].value == datetime(2021, 6, 30) and v["B3"].number_format == "yyyy-mm-dd"
    assert wb["transitions"].auto_filter.ref == "A1:B1"


def test_write_sheets_csv(tmp_path):
    out = tmp_path / "fu.csv"
    report = write_sheets(out, tracking_like_sheets(), {"tracking": {"min_visits": 2}})
    assert [p.name for p in report] == [
        "fu.csv",
        "fu.visits.csv",
        "fu.transitions.csv",
        "fu.methods.json",
    ]
    assert report.formula_like["value"].tolist() == ["=1+1"]
    with pytest.raises(OutputError, match="no tables"):
        write_sheets(out, {}, {})


# ----------------------------------------------------------------------------------------- helpers


def test_every_output_column_has_a_unit_in_its_header():
    """Units in every header of ours (design.md output list)."""
    for name in OUTPUT_COLUMNS:
        h = header_with_unit(name)
        assert re.fullmatch(re.escape(name) + r" \[[^\]]+\]", h), h
        assert canonical_header(h) == name


def test_from_memory_items_without_unverified_list():
    methods = {"reference_set": {"rows": [
        {"measure": "lvmi_h27", "sex": "F", "upper": 47, "source": "ESC/ESH 2018", "verified": "from_memory"},
        {"measure": "rwt", "upper": 0.42, "source": "Lang 2015", "verified": "published"},
    ]}}  # fmt: skip
    assert from_memory_items(methods) == ["lvmi_h27 F (ESC/ESH 2018)"]


@settings(
    max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(
    st.lists(
        st.text(alphabet=st.characters(blacklist_categories=("Cs", "Cc")), min_size=1),
        min_size=1,
        max_size=4,
    )
)
def test_any_text_round_trips_as_text_xlsx(tmp_path, texts):
    """Whatever the text, the xlsx cell is text with the same value (never a formula or error)."""
    a = make_analysis()
    n = len(a.table)
    a.table["free"] = (texts * n)[:n]
    out = tmp_path / "h.xlsx"
    write_results(a, out)
    ws = openpyxl.load_workbook(out)["wallstress results"]
    col = ws.max_column
    cells = [ws.cell(row=r, column=col) for r in range(2, n + 2)]
    assert [c.value for c in cells] == a.table["free"].tolist()
    assert {c.data_type for c in cells} == {"s"}


def test_csv_source_to_xlsx_is_new_workbook(tmp_path):
    src = tmp_path / "in.csv"
    shutil.copyfile(Path(__file__), src)  # any bytes: only the hash and name are used
    digest = safety.sha256_file(src)
    write_results(make_analysis(), tmp_path / "o.xlsx", FakeStudyTable(pd.DataFrame(), src, "csv"))
    assert openpyxl.load_workbook(tmp_path / "o.xlsx").sheetnames[0] == "wallstress results"
    assert safety.sha256_file(src) == digest


def test_xlsx_findings_point_at_results_sheet_rows(tmp_path):
    """Finding row 2 (0-based) is spreadsheet row 4 under a one-line header (common practice, no source)."""
    out = tmp_path / "r.xlsx"
    write_results(make_analysis(), out)
    ws = openpyxl.load_workbook(out)["wallstress findings"]
    rows = list(ws.iter_rows(values_only=True))
    head = list(rows[0])
    hit = next(r for r in rows[1:] if r[head.index("code")] == "lvidd_missing")
    assert hit[head.index("results_sheet_row")] == 4
    results = openpyxl.load_workbook(out)["wallstress results"]
    assert results.cell(row=4, column=1).value == "E3"


def test_xlsx_control_characters_and_timezones(tmp_path):
    a = make_analysis()
    a.table["odd"] = ["a\x01b", "ok", "x", "y", "z"]
    a.table["when"] = pd.to_datetime(["2024-01-01 10:00"] * 5).tz_localize("UTC")
    report = write_results(a, tmp_path / "r.xlsx")
    ws = openpyxl.load_workbook(tmp_path / "r.xlsx")["wallstress results"]
    head = [c.value for c in ws[1]]
    assert ws.cell(row=2, column=head.index("odd") + 1).value == "a\ufffdb"
    assert ws.cell(row=2, column=head.index("when") + 1).value == "2024-01-01T10:00:00+00:00"
    assert any("control characters" in n for n in report.notes)

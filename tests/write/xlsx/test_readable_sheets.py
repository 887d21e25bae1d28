"""Our sheets read and print as a clinician needs: the key-measures sheet under readable labels
with the output registry's decimals, every sheet of ours landscape, one page wide, its header row
repeated; the user's own sheets untouched; the bundled sample workbook shows its dates.

Labels and decimals are checked against the output registry (the one place they are defined) and
against the trade's abbreviations (common practice, no source).
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import openpyxl
import pytest

from wallstress.jobs import analyse_file, sample_dir
from wallstress.schema.display import KEY_COLUMNS, label
from wallstress.schema.outputs import BY_OUTPUT

SAMPLE = sample_dir() / "fernhill_echo_lab.xlsx"
OURS = (
    "wallstress results",
    "wallstress key measures",
    "wallstress findings",
    "wallstress methods",
)


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    out = tmp_path_factory.mktemp("readable") / "lab.xlsx"
    analyse_file(SAMPLE, out)
    return out


def test_key_measures_sheet_labels_formats_and_words(written):
    ws = openpyxl.load_workbook(written)["wallstress key measures"]
    head = [c.value for c in ws[1]]
    # the trade's abbreviations with units in brackets (common practice, no source)
    for expected in (
        "Study ID",
        "Study date",
        "Sex",
        "LV mass (g)",
        "LVMI/BSA (g/m2)",
        "RWT",
        "Geometry",
        "mESS (kdyn/cm2)",
        "cESS (kdyn/cm2)",
        "Midwall FS (%)",
        "Flags",
    ):
        assert expected in head, expected
    assert not any("_" in h for h in head)  # no machine names
    by_label = {label(c): c for c in (*KEY_COLUMNS, "check", "marks")}
    for j, h in enumerate(head, start=1):
        name = by_label[h]
        cell = ws.cell(2, j)
        if name in BY_OUTPUT and BY_OUTPUT[name].decimals is not None and cell.value is not None:
            places = BY_OUTPUT[name].decimals
            assert cell.number_format == ("0" if places == 0 else "0." + "0" * places), h
    geometry = [ws.cell(r, head.index("Geometry") + 1).value for r in range(2, ws.max_row + 1)]
    assert "concentric hypertrophy" in geometry and not any(
        isinstance(g, str) and "_" in g for g in geometry
    )
    assert ws.cell(2, head.index("Study date") + 1).is_date
    assert ws.max_row == 301  # every study, in order
    # the machine names one step away: the methods sheet pairs each label with its name
    methods = openpyxl.load_workbook(written)["wallstress methods"]
    pairs = {str(r[0].value): r[1].value for r in methods.iter_rows() if r[0].value}
    assert pairs["key_measures_sheet_columns.LVMI/BSA (g/m2)"] == "lvmi_bsa_g_m2"


def test_our_sheets_print_landscape_one_page_wide_with_headers(written):
    wb = openpyxl.load_workbook(written)
    for name in OURS:
        ws = wb[name]
        assert ws.page_setup.orientation == "landscape", name
        assert ws.sheet_properties.pageSetUpPr.fitToPage, name
        assert (ws.page_setup.fitToWidth, ws.page_setup.fitToHeight) == (1, 0), name
        assert ws.print_title_rows == "$1:$1", name
    user = openpyxl.load_workbook(SAMPLE)
    for name in user.sheetnames:  # the user's sheets as they were
        assert wb[name].page_setup.orientation == user[name].page_setup.orientation
        assert wb[name].print_title_rows == user[name].print_title_rows


def test_sample_workbooks_show_their_dates():
    for name in ("fernhill_echo_lab.xlsx", "fernhill_followup.xlsx"):
        ws = openpyxl.load_workbook(sample_dir() / name).worksheets[0]
        for cell in ws[2]:
            if cell.is_date:
                assert cell.number_format == "yyyy-mm-dd", name
                width = ws.column_dimensions[cell.column_letter].width
                assert width and width >= 11, (name, cell.column_letter, width)  # 10 characters


SOFFICE = shutil.which("soffice") or shutil.which("libreoffice")


def _pdf_pages(xlsx: Path, folder: Path) -> int:
    """Pages of ``xlsx`` printed to PDF by LibreOffice (its own profile in ``folder``)."""
    subprocess.run(
        [
            SOFFICE,
            f"-env:UserInstallation=file://{folder / 'profile'}",
            "--headless",
            "--convert-to",
            "pdf",
            "--outdir",
            str(folder),
            str(xlsx),
        ],
        check=True,
        capture_output=True,
        timeout=300,
    )
    pdf = (folder / (xlsx.stem + ".pdf")).read_bytes()
    return len(re.findall(rb"/Type\s*/Page[^s]", pdf))


@pytest.mark.skipif(SOFFICE is None, reason="LibreOffice is not installed (no page count)")
def test_printed_pages_are_few(written, tmp_path):
    """Printed by LibreOffice: the 300-study key-measures sheet on a handful of pages, the whole
    workbook (the lab's own sheets included) on a few dozen. Measured on 2026-12-03: 3 and 36
    pages; before our sheets were set to print one page wide, the workbook took 186."""
    wb = openpyxl.load_workbook(written)
    for name in wb.sheetnames:
        if name != "wallstress key measures":
            del wb[name]
    one = tmp_path / "key.xlsx"
    wb.save(one)
    assert 1 <= _pdf_pages(one, tmp_path) <= 6
    assert _pdf_pages(written, tmp_path) <= 60


def test_marks_beyond_limits_and_error_rows_with_a_legend(written):
    """Conditional marks on the key-measures sheet only: LVMI/BSA above 95 g/m2 (women) and
    115 g/m2 (men), RWT above 0.42 (Lang RM et al., J Am Soc Echocardiogr 2015;28:1, the default
    set), rows with an error; two fills a colour-blind reader tells apart, and a legend."""
    wb = openpyxl.load_workbook(written)
    ws = wb["wallstress key measures"]
    head = [c.value for c in ws[1]]
    col = {h: openpyxl.utils.get_column_letter(j) for j, h in enumerate(head, start=1)}
    rules = {str(cf.sqref): [r.formula[0] for r in cf.rules] for cf in ws.conditional_formatting}
    lvmi, rwt, check, sex = col["LVMI/BSA (g/m2)"], col["RWT"], col["Check"], col["Sex"]
    assert f'${sex}2="F",{lvmi}2>95' in rules[f"{lvmi}2:{lvmi}301"][0]
    assert f'${sex}2="M",{lvmi}2>115' in rules[f"{lvmi}2:{lvmi}301"][0]
    assert rules[f"{rwt}2:{rwt}301"] == [f"AND(ISNUMBER({rwt}2),{rwt}2>0.42)"]
    assert rules[f"A2:{check}301"] == [f'${check}2="error"']
    checks = [ws[f"{check}{r}"].value for r in range(2, 302)]
    assert checks.count("error") == 3  # the sample list's rows with an error (the CLI says 3)
    legend = [ws[f"{col['Marks (legend)']}{r}"].value for r in (2, 3)]
    assert legend[0].startswith("Blue") and legend[1].startswith("Orange")
    fills = {s.fill.bgColor.rgb for s in wb._differential_styles.styles}
    assert (
        len(fills) == 2
    )  # two tints of the Okabe-Ito palette (Okabe M, Ito K, Color Universal Design, 2002)
    for name in ("Studies", "Lab notes", "wallstress results", "wallstress findings"):
        assert not list(wb[name].conditional_formatting), name  # marks on the key sheet only

"""The empty study-list template: headers with units, instructions, data validation, atomic writing."""

from __future__ import annotations

import re

import numpy as np
import openpyxl
import pandas as pd
import pytest

from wallstress.errors import OutputError
from wallstress.schema.fields import ALIASES, BY_NAME, FIELDS, normalise_header
from wallstress.write import template


@pytest.fixture()
def book(tmp_path):
    path = template.write_template(tmp_path / "list.xlsx")
    assert path == tmp_path / "list.xlsx"
    return openpyxl.load_workbook(path)


def test_headers_cover_every_field_with_units(book):
    ws = book[template.TEMPLATE_SHEET]
    headers = [c.value for c in ws[1]]
    assert len(headers) == len(FIELDS)
    for f, h in zip(FIELDS, headers, strict=True):
        if f.unit:
            assert h.endswith(f"[{f.unit}]"), h
    assert "LVIDd [cm]" in headers and "IVSd [cm]" in headers and "Sex [F/M]" in headers
    assert ws.freeze_panes == "A2"
    assert all(c.font.bold for c in ws[1])


def test_headers_map_back_to_their_fields(book):
    """A filled-in template needs no --columns map: every header is an alias of its own field."""
    headers = [c.value for c in book[template.TEMPLATE_SHEET][1]]
    assert [ALIASES.get(normalise_header(h)) for h in headers] == [f.name for f in FIELDS]


def test_numeric_validation_uses_hard_ranges(book):
    ws = book[template.TEMPLATE_SHEET]
    col_of = {c.value: c.column_letter for c in ws[1]}
    by_col = {}
    for dv in ws.data_validations.dataValidation:
        for rng in dv.sqref.ranges:
            by_col[rng.coord.split(":")[0].rstrip("0123456789")] = dv
    for f in FIELDS:
        letter = col_of[template.header_for(f)]
        if f.kind == "number":
            dv = by_col[letter]
            assert dv.type == "decimal" and dv.operator == "between"
            assert (float(dv.formula1), float(dv.formula2)) == tuple(map(float, f.hard))
            assert dv.allow_blank and dv.showErrorMessage
        elif f.kind == "id":
            assert letter not in by_col
    lvidd = by_col[col_of["LVIDd [cm]"]]
    assert (float(lvidd.formula1), float(lvidd.formula2)) == BY_NAME["lvidd_cm"].hard
    assert str(lvidd.sqref) == f"{col_of['LVIDd [cm]']}2:{col_of['LVIDd [cm]']}1048576"


def test_sex_list_and_date_validation(book):
    ws = book[template.TEMPLATE_SHEET]
    col_of = {c.value: c.column_letter for c in ws[1]}
    dvs = {str(dv.sqref).split(":")[0]: dv for dv in ws.data_validations.dataValidation}
    sex = dvs[col_of["Sex [F/M]"] + "2"]
    assert sex.type == "list" and sex.formula1 == '"F,M"'
    date = dvs[col_of["Study date"] + "2"]
    assert date.type == "date"


def test_date_validation_serials_vs_1900_date_system(book):
    """Excel's 1900 date system counts days from 1899-12-30 for dates after 1900-03-01
    (ECMA-376 Part 1, 18.17.4.1; from memory); numpy datetime arithmetic gives the reference."""
    ws = book[template.TEMPLATE_SHEET]
    date = next(dv for dv in ws.data_validations.dataValidation if dv.type == "date")
    epoch = np.datetime64("1899-12-30")
    assert int(date.formula1) == int((np.datetime64("1960-01-01") - epoch).astype(int))
    assert int(date.formula2) == int((np.datetime64("2100-12-31") - epoch).astype(int))


def test_column_formats_keep_ids_text_and_dates_dates(book):
    ws = book[template.TEMPLATE_SHEET]
    assert ws.column_dimensions["A"].number_format == "@"  # study_id: 00123 stays 00123
    assert ws.column_dimensions["C"].number_format == "yyyy-mm-dd"


def test_instructions_sheet(book):
    ins = book[template.INSTRUCTIONS_SHEET]
    text = [r for r in ins.iter_rows(values_only=True)]
    flat = " ".join(str(v) for r in text for v in r if v is not None)
    assert "never replaces" in flat and "clinician" in flat
    top = next(i for i, r in enumerate(text) if r[0] == "Column header")
    rows = text[top + 1 :]
    assert [r[1] for r in rows] == [f.name for f in FIELDS]
    for f, r in zip(FIELDS, rows, strict=True):
        assert r[3] == f.meaning
        if f.hard:
            assert r[4] == f"{f.hard[0]:g} to {f.hard[1]:g}"
    needed = {r[1]: r[6] for r in rows}
    assert needed["lvidd_cm"] != "optional" and needed["lvedv_ml"] == "optional"


def test_template_reads_back_as_empty_table(tmp_path):
    path = template.write_template(tmp_path / "t.xlsx")
    df = pd.read_excel(path, sheet_name=template.TEMPLATE_SHEET, engine="calamine")
    assert len(df) == 0 and len(df.columns) == len(FIELDS)


def test_template_refuses_other_suffix(tmp_path):
    with pytest.raises(OutputError, match=r"choose an output ending in \.xlsx"):
        template.write_template(tmp_path / "t.csv")
    assert list(tmp_path.iterdir()) == []


def test_template_atomic_replace_and_failure(tmp_path, monkeypatch):
    path = tmp_path / "t.xlsx"
    path.write_bytes(b"previous")
    template.write_template(path)
    assert openpyxl.load_workbook(path).sheetnames == ["studies", "instructions"]
    before = path.read_bytes()

    def broken(self, filename):
        with open(filename, "wb") as fh:
            fh.write(b"PK half")
        raise KeyboardInterrupt

    monkeypatch.setattr(openpyxl.Workbook, "save", broken)
    with pytest.raises(KeyboardInterrupt):
        template.write_template(path)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["t.xlsx"]


def test_header_for_examples():
    assert template.header_for(BY_NAME["lvidd_cm"]) == "LVIDd [cm]"
    assert template.header_for(BY_NAME["study_id"]) == "Study ID"
    assert re.fullmatch(r"SBP \[mmHg\]", template.header_for(BY_NAME["sbp_mmhg"]))

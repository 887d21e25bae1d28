"""An empty study list to fill in: the canonical input fields with their units, instructions, validation.

``write_template(out_path)`` writes an ``.xlsx`` workbook with

- a ``studies`` sheet: one header per canonical input field (``schema.FIELDS``) in readable form with
  its unit in brackets (``LVIDd [cm]``), frozen header row, and data validation where it helps:
  sex from a list (F, M), numbers as decimals within the field's possible range (``Field.hard``),
  the study date as a date;
- an ``instructions`` sheet: what each column means, its unit, its ranges, and whether it is needed.

Every header maps back to its field through ``schema.normalise_header`` and ``schema.ALIASES``, so a
filled-in template reads without a ``--columns`` map.
"""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

from wallstress.errors import OutputError
from wallstress.schema.display import FIELD_LABELS
from wallstress.schema.fields import FIELDS, Field
from wallstress.schema.vocabulary import CLINICAL_CAUTION
from wallstress.write import safety

# What each field is needed for (fields not listed are optional extras).
NEEDED_FOR: dict[str, str] = {
    "study_id": "recommended: names the row in findings",
    "patient_id": "follow-up (track): links a patient's studies",
    "study_date": "follow-up (track): orders a patient's studies",
    "sex": "sex-specific cut-offs (mass index, dimensions, geometry)",
    "height_cm": "BSA and mass indexes",
    "weight_kg": "BSA and mass indexes",
    "sbp_mmhg": "end-systolic pressure and wall stress",
    "ivsd_cm": "LV mass, RWT (septal form)",
    "lvidd_cm": "LV mass, RWT, FS, Teichholz volumes",
    "pwd_cm": "LV mass, RWT",
    "lvids_cm": "FS, wall stress, midwall shortening",
    "pws_cm": "wall stress",
}

TEMPLATE_SHEET = "studies"
INSTRUCTIONS_SHEET = "instructions"

NOTES: tuple[str, ...] = (
    "One row per echocardiogram. Keep the header row of the 'studies' sheet as it is; columns of "
    "your own may be added and are passed through unchanged.",
    "Enter values in the unit shown in brackets in each header. Numbers outside the possible range "
    "for that unit are refused by the sheet (the commonest sign of a unit or typing error).",
    "Sex: F or M. Study date: a date (shown as yyyy-mm-dd). Optional columns may stay empty.",
    "Use pseudonymous patient IDs: no names or other direct identifiers in this file.",
    CLINICAL_CAUTION,
)

_FIRST_DATE = datetime(1960, 1, 1)
_LAST_DATE = datetime(2100, 12, 31)
_LAST_ROW = 1_048_576


def header_for(f: Field) -> str:
    """The template header of a field: readable name and unit in brackets (``"LVIDd [cm]"``)."""
    label = FIELD_LABELS.get(f.name, f.name)
    unit = f.unit or ("F/M" if f.kind == "sex" else "")
    return f"{label} [{unit}]" if unit else label


def write_template(out_path) -> Path:
    """Write an empty study list workbook to fill in.

    Parameters
    ----------
    out_path : path-like
        The ``.xlsx`` file to write (written atomically; an existing file is replaced).

    Returns
    -------
    Path
        ``out_path``.

    Raises
    ------
    OutputError
        When ``out_path`` does not end in ``.xlsx`` or its folder cannot be written.
    """
    from openpyxl import Workbook
    from openpyxl.styles import Alignment, Font
    from openpyxl.utils import get_column_letter
    from openpyxl.utils.datetime import to_excel
    from openpyxl.worksheet.datavalidation import DataValidation

    out = Path(out_path)
    if out.suffix.lower() != ".xlsx":
        raise OutputError(
            f"the template is an Excel workbook: got {out.name!r}; choose an output ending in .xlsx"
        )

    wb = Workbook()
    ws = wb.active
    ws.title = TEMPLATE_SHEET
    bold = Font(bold=True)
    for j, f in enumerate(FIELDS, 1):
        cell = ws.cell(row=1, column=j, value=header_for(f))
        cell.data_type = "s"
        cell.font = bold
        letter = get_column_letter(j)
        ws.column_dimensions[letter].width = max(10, len(header_for(f)) + 2)
        rng = f"{letter}2:{letter}{_LAST_ROW}"
        dv = None
        if f.kind == "id":
            ws.column_dimensions[letter].number_format = "@"
        elif f.kind == "sex":
            dv = DataValidation(type="list", formula1='"F,M"', allow_blank=True)
            dv.error = "Enter F or M."
            dv.prompt = "F or M"
        elif f.kind == "date":
            ws.column_dimensions[letter].number_format = "yyyy-mm-dd"
            dv = DataValidation(
                type="date",
                operator="between",
                formula1=str(int(to_excel(_FIRST_DATE))),
                formula2=str(int(to_excel(_LAST_DATE))),
                allow_blank=True,
            )
            dv.error = "Enter a date between 1960-01-01 and 2100-12-31."
            dv.prompt = "Date of the study"
        elif f.kind == "number" and f.hard is not None:
            lo, hi = f.hard
            dv = DataValidation(
                type="decimal",
                operator="between",
                formula1=f"{lo:g}",
                formula2=f"{hi:g}",
                allow_blank=True,
            )
            dv.error = f"{f.meaning} Enter a number from {lo:g} to {hi:g} {f.unit}."
            dv.prompt = f"{f.unit}, {lo:g} to {hi:g}"
        if dv is not None:
            dv.errorTitle = header_for(f)
            dv.promptTitle = header_for(f)
            dv.showErrorMessage = True
            dv.showInputMessage = True
            dv.add(rng)
            ws.add_data_validation(dv)
    ws.freeze_panes = "A2"

    ins = wb.create_sheet(INSTRUCTIONS_SHEET)
    ins.cell(row=1, column=1, value="How to fill in the study list").font = Font(bold=True, size=13)
    for i, note in enumerate(NOTES, 2):
        ins.cell(row=i, column=1, value=note).data_type = "s"
    top = len(NOTES) + 3
    heads = (
        "Column header",
        "Field",
        "Unit",
        "Meaning",
        "Possible range (refused outside)",
        "Usual adult range (flagged outside)",
        "Needed for",
    )
    for j, h in enumerate(heads, 1):
        c = ins.cell(row=top, column=j, value=h)
        c.font = bold
    for i, f in enumerate(FIELDS, top + 1):
        row = (
            header_for(f),
            f.name,
            f.unit or ("F or M" if f.kind == "sex" else ("date" if f.kind == "date" else "text")),
            f.meaning,
            _range_text(f.hard),
            _range_text(f.typical),
            NEEDED_FOR.get(f.name, "optional"),
        )
        for j, v in enumerate(row, 1):
            c = ins.cell(row=i, column=j, value=v)
            c.data_type = "s"
            c.alignment = Alignment(wrap_text=j == 4, vertical="top")
    for letter, width in zip("ABCDEFG", (30, 28, 8, 60, 18, 18, 40), strict=True):
        ins.column_dimensions[letter].width = width
    ins.freeze_panes = ins.cell(row=top + 1, column=1).coordinate

    with safety.atomic_path(out) as tmp:
        wb.save(tmp)
    return out


def _range_text(bounds) -> str:
    if bounds is None:
        return ""
    lo, hi = bounds
    return f"{lo:g} to {hi:g}"

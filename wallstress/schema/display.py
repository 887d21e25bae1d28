"""Units of output columns: ``"name [unit]"`` headers and the xlsx display formats by unit.

The unit of a column comes from our output list, then the schema's fields, then the ending of its
name (``_g_m2``, ``_kdyn_cm2``...), so that tables of other modules (tracking) get units too. Values are
always stored at full precision; the formats only say how a spreadsheet shows them.
"""

from __future__ import annotations

import re

from wallstress.schema.fields import BY_NAME
from wallstress.schema.outputs import BY_OUTPUT, OUTPUT_UNITS
from wallstress.schema.vocabulary import OUT

# Name endings -> unit, longest first (for columns of other tables, e.g. tracking).
_SUFFIX_UNITS: tuple[tuple[str, str], ...] = (
    ("_g_m2_7_per_year", "g/m^2.7/year"),
    ("_g_m2_per_year", "g/m2/year"),
    ("_g_per_year", "g/year"),
    ("_pct_per_year", "%/year"),
    ("_g_m2_7", "g/m^2.7"),
    ("_kdyn_cm2", "kdyn/cm2"),
    ("_g_ml23", "g/mL^(2/3)"),
    ("_ml_m2", "mL/m2"),
    ("_circ_s", "circ/s"),
    ("_g_m2", "g/m2"),
    ("_mmhg", "mmHg"),
    ("_years", "years"),
    ("_days", "days"),
    ("_g_m", "g/m"),
    ("_cm2", "cm2"),
    ("_bpm", "bpm"),
    ("_pct", "%"),
    ("_m2", "m2"),
    ("_cm", "cm"),
    ("_kg", "kg"),
    ("_ml", "mL"),
    ("_ms", "ms"),
    ("_g", "g"),
)


# Display formats by unit (values are stored at full precision).
_NUMBER_FORMATS: dict[str, str] = {
    "g": "0",
    "g/m2": "0.0",
    "g/m^2.7": "0.0",
    "g/m": "0.0",
    "ratio": "0.00",
    "%": "0.0",
    "m2": "0.00",
    "cm": "0.00",
    "cm2": "0.0",
    "kg": "0.0",
    "mmHg": "0",
    "mL": "0",
    "mL/m2": "0.0",
    "kdyn/cm2": "0.0",
    "g/mL^(2/3)": "0.00",
    "circ/s": "0.00",
    "g*m": "0.0",
    "years": "0.0",
    "days": "0",
    "ms": "0",
    "bpm": "0",
    "g/year": "0.0",
    "g/m2/year": "0.0",
    "g/m^2.7/year": "0.00",
    "%/year": "0.0",
}


def header_with_unit(name, unit: str | None = None) -> str:
    """``"name [unit]"`` for a column whose unit is known (given, output, schema field or name ending).

    >>> header_with_unit("lvmi_bsa_g_m2")
    'lvmi_bsa_g_m2 [g/m2]'
    >>> header_with_unit("patient_id")
    'patient_id'
    """
    text = str(name)
    if "[" in text:
        return text
    unit = unit or column_unit(text)
    return f"{text} [{unit}]" if unit else text


def column_unit(name: str) -> str:
    """Unit of a column from its name ("" when unknown): outputs, schema fields, then name endings."""
    if name in OUTPUT_UNITS:
        return OUTPUT_UNITS[name]
    if name in BY_NAME:
        f = BY_NAME[name]
        return f.unit or ("F/M" if f.kind == "sex" else "")
    if name == OUT.rwt or name.endswith("_rwt"):
        return "ratio"
    for suffix, unit in _SUFFIX_UNITS:
        if name.endswith(suffix):
            return unit
    return ""


def canonical_header(text) -> str:
    """Undo :func:`header_with_unit`: ``"lv_mass_g [g]"`` -> ``"lv_mass_g"`` (for reading outputs back)."""
    return re.sub(r"\s*\[[^\]]*\]\s*$", "", str(text))


# What a clinician reads for each input field (the trade's abbreviations; the outputs' labels live in
# the output registry): the template's headers and the key-measures sheet. Each normalises
# (schema.fields.normalise_header) to an alias of its field, so a template reads back.
FIELD_LABELS: dict[str, str] = {
    "study_id": "Study ID",
    "patient_id": "Patient ID",
    "study_date": "Study date",
    "sex": "Sex",
    "age_years": "Age",
    "height_cm": "Height",
    "weight_kg": "Weight",
    "sbp_mmhg": "SBP",
    "dbp_mmhg": "DBP",
    "sbp_2_mmhg": "SBP 2",
    "dbp_2_mmhg": "DBP 2",
    "sbp_3_mmhg": "SBP 3",
    "dbp_3_mmhg": "DBP 3",
    "es_pressure_measured_mmhg": "ES pressure",
    "hr_bpm": "Heart rate",
    "ivsd_cm": "IVSd",
    "lvidd_cm": "LVIDd",
    "pwd_cm": "PWd",
    "ivss_cm": "IVSs",
    "lvids_cm": "LVIDs",
    "pws_cm": "PWs",
    "lvedv_ml": "LVEDV",
    "lvesv_ml": "LVESV",
    "epi_area_cm2": "Epicardial area",
    "endo_area_cm2": "Endocardial area",
    "lv_length_cm": "LV length",
    "lv_semimajor_cm": "Semi-major axis",
    "lv_truncated_semimajor_cm": "Truncated semi-major axis",
    "ejection_time_ms": "Ejection time",
}

# The compact set of columns a clinician scans first (web page, key-measures sheet).
KEY_COLUMNS: tuple[str, ...] = (
    "study_id",
    "patient_id",
    "study_date",
    "sex",
    OUT.bsa_m2,
    OUT.lv_mass_g,
    OUT.lvmi_bsa_g_m2,
    OUT.lvmi_h27_g_m2_7,
    OUT.rwt,
    OUT.geometry,
    OUT.mess_kdyn_cm2,
    OUT.cess_kdyn_cm2,
    OUT.fs_pct,
    OUT.ef_teichholz_pct,
    OUT.midwall_fs_pct,
    OUT.flags,
)


# columns of our own sheets that are neither fields nor outputs
_SHEET_LABELS: dict[str, str] = {"check": "Check", "marks": "Marks (legend)"}


def label(name: str) -> str:
    """What a clinician reads for a column: ``"LVMI/BSA (g/m2)"`` for ``lvmi_bsa_g_m2``; the name
    itself when neither the output registry nor the field list labels it."""
    name = str(name)
    if name in BY_OUTPUT:
        out = BY_OUTPUT[name]
        text, unit = out.label, out.unit if out.is_number else ""
    elif name in FIELD_LABELS:
        text, unit = FIELD_LABELS[name], BY_NAME[name].unit if name in BY_NAME else ""
    elif name in _SHEET_LABELS:
        return _SHEET_LABELS[name]
    else:
        return name
    unit = "" if unit == "ratio" else unit
    return f"{text} ({unit})" if unit else text


def decimals(name: str) -> int | None:
    """How many decimals a reader needs for a column (None: text or not known): the output
    registry's, else those of the display format of the column's unit."""
    out = BY_OUTPUT.get(str(name))
    if out is not None:
        return out.decimals
    fmt = _NUMBER_FORMATS.get(column_unit(str(name)))
    if fmt is None:
        return None
    return len(fmt.split(".", 1)[1]) if "." in fmt else 0

"""Write results, findings and the methods record next to (never over) the user's data.

Formats, chosen by the suffix of the output path:

- ``.xlsx``: from an ``.xlsx`` study list, a copy of the user's workbook (every sheet, formula,
  comment, style, defined name and column width of theirs kept) with three sheets of ours added
  ("wallstress results", "wallstress findings", "wallstress methods"). When the workbook holds parts
  the spreadsheet library cannot carry over (macros, drawings, pivot tables, extensions...), no
  degraded copy is written: a separate workbook holds our sheets, and the notes and methods say so.
  From any other source, a new workbook with those three sheets.
- ``.csv``: the results table (the user's columns, then ours), ``name.findings.csv`` and
  ``name.methods.json`` beside it.
- ``.parquet``: likewise (``name.findings.parquet``, ``name.methods.json``).

Never-harm rules (see :mod:`wallstress.safety`): every file goes through a temporary file in the
target folder and ``os.replace``; the input file is never changed except with ``in_place``, and then
only after a verified backup; text is written as text (no cell of ours becomes a formula, error value
or link); formula-like text in CSV outputs is reported and optionally escaped.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import re
from dataclasses import dataclass
from datetime import date, datetime, timezone
from decimal import Decimal
from pathlib import Path

import numpy as np
import pandas as pd

from . import __version__, safety
from . import findings as _findings
from .errors import OutputError
from .schema import BY_NAME, OUTPUT_COLUMNS

OUTPUT_SUFFIXES: tuple[str, ...] = (".xlsx", ".csv", ".parquet")
_REFUSED_SUFFIXES = {
    ".xlsm": "macro-enabled workbooks are not written (macros cannot be carried over safely)",
    ".xls": "the old binary Excel format is not written",
    ".xlsb": "binary Excel workbooks are not written",
    ".ods": "OpenDocument spreadsheets are not written yet",
}

SHEET_RESULTS = "wallstress results"
SHEET_FINDINGS = "wallstress findings"
SHEET_METHODS = "wallstress methods"
DEFAULT_SHEET_NAMES: dict[str, str] = {
    "results": SHEET_RESULTS,
    "findings": SHEET_FINDINGS,
    "methods": SHEET_METHODS,
}

CAUTIONS: tuple[str, ...] = (
    "wallstress supports, and never replaces, a qualified clinician's judgement and the local "
    "laboratory's protocols and reference values.",
    "Values marked as from memory were recalled, not checked against the published text; results "
    "that depend on them are provisional (listed as 'value from memory').",
)

EXCEL_MAX_ROWS = 1_048_576
EXCEL_MAX_COLUMNS = 16_384
EXCEL_MAX_TEXT = 32_767

# Units of our output columns (schema.OUTPUT_COLUMNS); text columns say what they hold.
OUTPUT_UNITS: dict[str, str] = {
    "bsa_m2": "m2",
    "lv_mass_g": "g",
    "lv_mass_method": "text",
    "lvmi_bsa_g_m2": "g/m2",
    "lvmi_h27_g_m2_7": "g/m^2.7",
    "lvmi_h_g_m": "g/m",
    "rwt": "ratio",
    "geometry": "class",
    "edv_ml": "mL",
    "edv_source": "text",
    "edv_index_ml_m2": "mL/m2",
    "concentricity_g_ml23": "g/mL^(2/3)",
    "geometry_8": "class",
    "lvmi_grade": "grade",
    "rwt_grade": "grade",
    "lvidd_grade": "grade",
    "ivsd_grade": "grade",
    "pwd_grade": "grade",
    "fs_pct": "%",
    "edv_teichholz_ml": "mL",
    "esv_teichholz_ml": "mL",
    "sv_teichholz_ml": "mL",
    "ef_teichholz_pct": "%",
    "es_pressure_mmhg": "mmHg",
    "mess_kdyn_cm2": "kdyn/cm2",
    "cess_kdyn_cm2": "kdyn/cm2",
    "midwall_fs_pct": "%",
    "midwall_fs_predicted_pct": "%",
    "midwall_fs_stress_corrected_pct": "%",
    "vcf_circ_s": "circ/s",
    "vcfc_circ_s": "circ/s",
    "stroke_work_g_m": "g*m",
    "lv_mass_predicted_g": "g",
    "lv_mass_appropriateness_pct": "%",
    "flags": "codes",
}

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

_INVALID_SHEET_CHARS = re.compile(r"[\[\]\*\?/\\:]")


class WriteReport(list):
    """The files written (the object is a ``list[Path]``) plus what the caller should know.

    Attributes
    ----------
    notes : list of str
        Plain sentences for the user (e.g. a separate workbook was written instead of a copy).
    formula_like : DataFrame
        Findings (code ``formula_like_text``) for text cells of the results that a spreadsheet program
        could run as formulas when it opens a CSV output; empty for xlsx and parquet outputs.
    backup : Path or None
        The verified backup of the user's workbook (``in_place`` only).
    """

    def __init__(self, paths=()) -> None:
        super().__init__(Path(p) for p in paths)
        self.notes: list[str] = []
        self.formula_like: pd.DataFrame = _findings.empty()
        self.backup: Path | None = None

    @property
    def paths(self) -> list[Path]:
        return list(self)

    def __repr__(self) -> str:
        return f"WriteReport(paths={list(self)!r}, notes={self.notes!r}, backup={self.backup!r})"


@dataclass
class _Part:
    """One table to write: sheet name, sidecar key (CSV/parquet) and which columns get units."""

    sheet: str
    key: str  # "" for the main file
    frame: pd.DataFrame
    unit_columns: str = "all"  # "all" or "outputs"


# --------------------------------------------------------------------------------------------------
# public API


def write_results(
    analysis,
    out_path,
    source=None,
    *,
    in_place: bool = False,
    escape_formulas: bool = False,
    sheet_names: dict | None = None,
) -> WriteReport:
    """Write an analysis (results, findings, methods) next to the user's data.

    Parameters
    ----------
    analysis : wallstress.result.Analysis
        What the run produced; ``analysis.table`` is written as the results.
    out_path : path-like or None
        Output file; its suffix chooses the format (``.xlsx``, ``.csv``, ``.parquet``). May be None,
        or the input workbook itself, only with ``in_place``.
    source : StudyTable, optional
        The study list as read (``path``, ``format``, ``sheet``, ``header_row``, ``sha256``,
        ``encoding``, ``delimiter``, ``decimal``); None for DataFrame input.
    in_place : bool
        Add our sheets to the user's own ``.xlsx`` after a verified backup beside it.
    escape_formulas : bool
        CSV only: prefix formula-like text cells with a single quote.
    sheet_names : dict, optional
        Our sheet names by role (``results``, ``findings``, ``methods``); defaults
        :data:`DEFAULT_SHEET_NAMES`. A name already used in the workbook gets a number.

    Returns
    -------
    WriteReport
        A list of the written paths, with ``notes``, ``formula_like`` findings and ``backup``.

    Raises
    ------
    OutputError
        Unsupported suffix, an output that would overwrite the input, an input changed since it was
        read, a workbook open in a spreadsheet program (``in_place``), a table too big for xlsx, or a
        folder that cannot be written.
    """
    names = dict(DEFAULT_SHEET_NAMES)
    if sheet_names:
        unknown = set(sheet_names) - set(names)
        if unknown:
            raise OutputError(
                f"sheet_names has unknown role(s) {sorted(unknown)}; use {sorted(names)}"
            )
        names.update(sheet_names)
    parts = [
        _Part(names["results"], "", analysis.table, unit_columns="outputs"),
        _Part(names["findings"], "findings", _findings_for_writing(analysis.findings)),
    ]
    return _write_bundle(
        out_path,
        parts,
        analysis.methods or {},
        source=source,
        in_place=in_place,
        escape_formulas=escape_formulas,
        methods_sheet=names["methods"],
    )


def write_sheets(
    out_path,
    sheets: dict,
    methods: dict,
    *,
    source=None,
    in_place: bool = False,
    escape_formulas: bool = False,
    methods_sheet: str = "methods",
) -> WriteReport:
    """Write several tables (e.g. tracking: patients, visits, transitions, prevalence) and a methods record.

    Parameters
    ----------
    out_path : path-like
        ``.xlsx`` (one sheet per table, plus the methods sheet), ``.csv`` or ``.parquet`` (the first
        table in ``out_path``, each other one in ``name.<sheet>.csv|parquet``, methods in
        ``name.methods.json``).
    sheets : dict of str -> DataFrame
        Tables in order; names are sheet names (made valid and unique where needed).
    methods : dict
        The methods record (nested dicts and lists are flattened into readable rows).
    source, in_place, escape_formulas
        As in :func:`write_results`.
    methods_sheet : str
        Name of the methods sheet.

    Returns
    -------
    WriteReport
    """
    if not sheets:
        raise OutputError("write_sheets got no tables; pass sheets={'name': DataFrame, ...}")
    parts = []
    for i, (name, frame) in enumerate(sheets.items()):
        if not isinstance(frame, pd.DataFrame):
            raise OutputError(
                f"sheets[{name!r}] is a {type(frame).__name__}, not a DataFrame; pass DataFrames"
            )
        parts.append(_Part(str(name), "" if i == 0 else _slug(str(name)), frame))
    return _write_bundle(
        out_path,
        parts,
        methods or {},
        source=source,
        in_place=in_place,
        escape_formulas=escape_formulas,
        methods_sheet=methods_sheet,
    )


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
    if name == "rwt" or name.endswith("_rwt"):
        return "ratio"
    for suffix, unit in _SUFFIX_UNITS:
        if name.endswith(suffix):
            return unit
    return ""


def canonical_header(text) -> str:
    """Undo :func:`header_with_unit`: ``"lv_mass_g [g]"`` -> ``"lv_mass_g"`` (for reading outputs back)."""
    return re.sub(r"\s*\[[^\]]*\]\s*$", "", str(text))


def methods_rows(
    methods: dict,
    source=None,
    *,
    notes=(),
    outputs=(),
    run_utc: str | None = None,
) -> pd.DataFrame:
    """The methods record as two columns, ``item`` and ``value``, for the methods sheet.

    First the run (software, time, input file and its SHA-256, sheet, outputs), then the cautions,
    the values from memory, the writer's notes, then every entry of ``methods`` flattened
    (``options.reference``, ``formulas 3``: ``output: ...; method: ...``).
    """
    record = methods_record(methods, source, notes=notes, outputs=outputs, run_utc=run_utc)
    rows: list[tuple[str, object]] = [
        ("software", f"wallstress {record['written']['software_version']}"),
        ("run time (UTC)", record["written"]["run_utc"]),
    ]
    for k, label in (
        ("file", "input file"),
        ("sha256", "input SHA-256"),
        ("format", "input format"),
        ("sheet", "input sheet"),
        ("header_row", "input header row"),
    ):
        v = record["input"].get(k)
        if v not in (None, ""):
            rows.append((label, v))
    for out in record["written"]["outputs"]:
        rows.append(("output file", out))
    for c in record["cautions"]:
        rows.append(("caution", c))
    for v in record["values_from_memory"]:
        rows.append(("value from memory", v))
    for n in record["written"]["notes"]:
        rows.append(("warning", n))
    skip = {"cautions", "unverified", "input", "written", "values_from_memory"}
    for k, v in methods.items():
        if k in skip:
            continue
        rows.extend(_flatten(v, str(k)))
    return pd.DataFrame(rows, columns=["item", "value"])


def methods_record(methods: dict, source=None, *, notes=(), outputs=(), run_utc=None) -> dict:
    """The methods record as written to ``.methods.json``: ``methods`` plus input, run and cautions."""
    record = dict(methods)
    inp = dict(record.get("input") or {}) if isinstance(record.get("input"), dict) else {}
    if source is not None:
        path = getattr(source, "path", None)
        inp.update(
            {
                "file": Path(path).name if path else "",
                "sha256": getattr(source, "sha256", "") or "",
                "format": getattr(source, "format", "") or "",
                "sheet": getattr(source, "sheet", None),
                "header_row": getattr(source, "header_row", None),
            }
        )
    record["input"] = inp
    cautions = [str(c) for c in (methods.get("cautions") or [])]
    for c in CAUTIONS:
        if c not in cautions:
            cautions.append(c)
    record["cautions"] = cautions
    record["values_from_memory"] = from_memory_items(methods)
    record["written"] = {
        "software_version": __version__,
        "run_utc": run_utc or datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "outputs": [Path(o).name for o in outputs],
        "notes": list(notes),
    }
    return record


def from_memory_items(methods: dict) -> list[str]:
    """Everything the methods record marks as recalled rather than checked.

    Uses ``methods["unverified"]`` when present; otherwise every entry whose ``verified`` is
    ``from_memory`` (named by its path and identifying fields).
    """
    if methods.get("unverified"):
        return [str(x) for x in methods["unverified"]]
    out: list[str] = []

    def walk(obj, path):
        if isinstance(obj, dict):
            if str(obj.get("verified", "")).lower() in ("from_memory", "from memory"):
                ident = [
                    str(obj[k])
                    for k in ("output", "measure", "name", "set", "sex", "index", "grade", "method")
                    if obj.get(k) not in (None, "")
                ]
                label = " ".join(ident) if ident else path
                src = obj.get("source")
                out.append(f"{label} ({src})" if src else label)
            for k, v in obj.items():
                walk(v, f"{path}.{k}" if path else str(k))
        elif isinstance(obj, (list, tuple)):
            for i, v in enumerate(obj, 1):
                walk(v, f"{path} {i}")

    walk(methods, "")
    return list(dict.fromkeys(out))


# --------------------------------------------------------------------------------------------------
# planning and dispatch


def _write_bundle(out_path, parts, methods, *, source, in_place, escape_formulas, methods_sheet):
    src_path = Path(source.path) if source is not None and getattr(source, "path", None) else None
    src_hash_before = safety.sha256_file(src_path) if src_path and src_path.is_file() else None

    if in_place:
        report = _write_in_place(out_path, parts, methods, source, src_path, methods_sheet)
    else:
        if out_path is None:
            raise OutputError(
                "no output path given; pass -o OUT.xlsx|.csv|.parquet (or --in-place)"
            )
        out = Path(out_path)
        suffix = _check_suffix(out)
        planned = [out] + [_sidecar(out, p.key) for p in parts if p.key]
        if suffix in (".csv", ".parquet"):
            planned.append(_sidecar(out, "methods", ".json"))
        for p in planned:
            if safety.same_file(p, src_path):
                raise OutputError(
                    f"writing {str(p)!r} would overwrite your input; choose another -o or pass --in-place"
                )
        if suffix == ".xlsx":
            report = _write_xlsx(out, parts, methods, source, src_path, methods_sheet)
        else:
            report = _write_flat(out, suffix, parts, methods, source, escape_formulas)

    if src_hash_before is not None and not in_place:
        if safety.sha256_file(src_path) != src_hash_before:  # pragma: no cover - defensive
            raise OutputError(f"the input {str(src_path)!r} changed while writing; check it")
    return report


def _check_suffix(out: Path) -> str:
    suffix = out.suffix.lower()
    if suffix in _REFUSED_SUFFIXES:
        raise OutputError(
            f"cannot write {out.name!r}: {_REFUSED_SUFFIXES[suffix]}; "
            f"choose an output ending in {', '.join(OUTPUT_SUFFIXES)}"
        )
    if suffix not in OUTPUT_SUFFIXES:
        raise OutputError(
            f"unknown output type {suffix or '(no suffix)'!r} for {out.name!r}; "
            f"choose an output ending in {', '.join(OUTPUT_SUFFIXES)}"
        )
    return suffix


def _sidecar(out: Path, key: str, suffix: str | None = None) -> Path:
    return out.with_name(f"{out.stem}.{key}{suffix or out.suffix}")


def _is_workbook_source(source, src_path) -> bool:
    if source is None or src_path is None:
        return False
    fmt = str(getattr(source, "format", "") or "").lower().lstrip(".")
    return fmt in ("xlsx", "xlsm") or src_path.suffix.lower() in (".xlsx", ".xlsm")


def _check_unchanged_since_read(source, src_path: Path) -> None:
    expected = getattr(source, "sha256", None)
    if expected and safety.sha256_file(src_path) != expected:
        raise OutputError(
            f"{src_path.name!r} changed after it was read (SHA-256 differs); nothing was written. "
            "Run the analysis again on the current file"
        )


def _lossy_note(lossy: list[str], src_name: str, written: str) -> str:
    return (
        f"{src_name!r} contains {', '.join(lossy)}, which the spreadsheet library cannot carry over; "
        f"to avoid a degraded copy, {written!r} holds wallstress's sheets only and your workbook was "
        "not copied or changed"
    )


def _with_sheet_rows(parts) -> list:
    """Findings tables get ``results_sheet_row``: the 1-based row of the results sheet (header = 1)."""
    out = []
    for p in parts:
        if p.key == "findings" and "row" in p.frame.columns and "results_sheet_row" not in p.frame:
            frame = p.frame.copy()
            rows = pd.to_numeric(frame["row"], errors="coerce")
            frame["results_sheet_row"] = (rows + 2).where(rows >= 0).astype("Int64")
            p = _Part(p.sheet, p.key, frame, p.unit_columns)
        out.append(p)
    return out


def _write_xlsx(out, parts, methods, source, src_path, methods_sheet) -> WriteReport:
    report = WriteReport()
    parts = _with_sheet_rows(parts)
    if _is_workbook_source(source, src_path):
        lossy = safety.lossy_workbook_parts(src_path)
        if lossy:
            report.notes.append(_lossy_note(lossy, src_path.name, out.name))
        else:
            _check_unchanged_since_read(source, src_path)
            _save_workbook_copy(src_path, out, parts, methods, source, methods_sheet, report)
            report.append(out)
            return report
    _save_new_workbook(out, parts, methods, source, methods_sheet, report)
    report.append(out)
    return report


def _write_in_place(out_path, parts, methods, source, src_path, methods_sheet) -> WriteReport:
    if not _is_workbook_source(source, src_path):
        raise OutputError(
            "--in-place works only with an .xlsx study list; write to another file with -o instead"
        )
    if out_path is not None and not safety.same_file(out_path, src_path):
        raise OutputError(
            f"--in-place writes into {src_path.name!r} itself; do not also pass -o {str(out_path)!r} "
            "(drop one of them)"
        )
    if not src_path.is_file():
        raise OutputError(f"--in-place: the workbook {str(src_path)!r} does not exist any more")
    report = WriteReport()
    parts = _with_sheet_rows(parts)
    lossy = safety.lossy_workbook_parts(src_path)
    if lossy or src_path.suffix.lower() != ".xlsx":
        separate = src_path.with_name(f"{src_path.stem}.wallstress-results.xlsx")
        report.notes.append(_lossy_note(lossy or ["macros"], src_path.name, separate.name))
        _save_new_workbook(separate, parts, methods, source, methods_sheet, report)
        report.append(separate)
        return report
    lock = safety.excel_lock_file(src_path)
    if lock is not None:
        raise OutputError(
            f"{src_path.name!r} looks open in a spreadsheet program (lock file {lock.name!r}); "
            "close it and run again, or write to another file with -o"
        )
    _check_unchanged_since_read(source, src_path)
    original = safety.sha256_file(src_path)
    backup = safety.backup_copy(src_path)
    report.backup = backup
    report.notes.append(f"wrote into {src_path.name!r}; its previous content is in {backup.name!r}")

    def before_commit():
        if safety.sha256_file(src_path) != original or safety.sha256_file(backup) != original:
            raise OutputError(
                f"{src_path.name!r} changed while writing; nothing was changed. Run again"
            )

    try:
        _save_workbook_copy(
            src_path,
            src_path,
            parts,
            methods,
            source,
            methods_sheet,
            report,
            before_commit=before_commit,
        )
    except BaseException:
        # the user's file is untouched: the backup is not needed
        if safety.sha256_file(src_path) == original:
            backup.unlink(missing_ok=True)
        raise
    report.append(src_path)
    report.append(backup)
    return report


# --------------------------------------------------------------------------------------------------
# xlsx


def _save_new_workbook(out, parts, methods, source, methods_sheet, report) -> None:
    from openpyxl import Workbook

    _check_excel_size(parts)
    wb = Workbook(write_only=True)
    try:
        used: list[str] = []
        for part in parts:
            ws = wb.create_sheet(_unique_sheet_name(part.sheet, used))
            _fill_sheet(ws, part.frame, part.unit_columns, report)
        mrows = methods_rows(methods, source, notes=report.notes, outputs=[out])
        ws = wb.create_sheet(_unique_sheet_name(methods_sheet, used))
        _fill_sheet(ws, mrows, "none", report, widths=(28, 110), number_formats=False)
        with safety.atomic_path(out) as tmp:
            wb.save(tmp)
    except BaseException:
        _discard_write_only(wb)
        raise


def _discard_write_only(wb) -> None:
    """Close a failed write-only workbook's sheet streams and remove their scratch files."""
    for ws in list(getattr(wb, "_sheets", [])):
        rows = getattr(ws, "_rows", None)
        writer = getattr(ws, "_writer", None)
        with contextlib.suppress(Exception):
            if rows is not None:
                rows.close()
        with contextlib.suppress(Exception):
            if writer is not None:
                writer.xf.close()
        with contextlib.suppress(Exception):
            if writer is not None and isinstance(writer.out, str):
                os.remove(writer.out)


def _save_workbook_copy(
    src, out, parts, methods, source, methods_sheet, report, before_commit=None
):
    from openpyxl import load_workbook

    _check_excel_size(parts)
    try:
        wb = load_workbook(src, keep_vba=False, rich_text=True)
    except Exception as exc:
        raise OutputError(
            f"cannot open {src.name!r} as a workbook ({exc}); write to a .csv or .parquet output instead"
        ) from exc
    used = list(wb.sheetnames)
    for part in parts:
        ws = wb.create_sheet(_unique_sheet_name(part.sheet, used))
        _fill_sheet(ws, part.frame, part.unit_columns, report)
    mrows = methods_rows(methods, source, notes=report.notes, outputs=[out])
    ws = wb.create_sheet(_unique_sheet_name(methods_sheet, used))
    _fill_sheet(ws, mrows, "none", report, widths=(28, 110), number_formats=False)
    with safety.atomic_path(out) as tmp:
        wb.save(tmp)
        if before_commit is not None:
            before_commit()


def _check_excel_size(parts) -> None:
    for part in parts:
        n_rows, n_cols = part.frame.shape
        if n_rows + 1 > EXCEL_MAX_ROWS or n_cols > EXCEL_MAX_COLUMNS:
            raise OutputError(
                f"the table for sheet {part.sheet!r} has {n_rows} rows and {n_cols} columns, more than "
                f"an xlsx sheet holds ({EXCEL_MAX_ROWS - 1} rows, {EXCEL_MAX_COLUMNS} columns); "
                "write to a .csv or .parquet output instead"
            )


def _unique_sheet_name(wanted: str, used: list[str]) -> str:
    base = _INVALID_SHEET_CHARS.sub("_", str(wanted)).strip("'").strip() or "sheet"
    base = base[:31]
    name, n = base, 2
    taken = {u.lower() for u in used}
    while name.lower() in taken:
        tail = f" {n}"
        name = base[: 31 - len(tail)] + tail
        n += 1
    used.append(name)
    return name


def _fill_sheet(ws, frame, unit_columns, report, *, widths=None, number_formats=True) -> None:
    """Header (bold, units), values (text forced to text), formats, frozen header, filter, widths."""
    from openpyxl.cell import WriteOnlyCell
    from openpyxl.styles import Font
    from openpyxl.utils import get_column_letter

    columns = [str(c) for c in frame.columns]
    if unit_columns == "all":
        headers = [header_with_unit(c) for c in columns]
    elif unit_columns == "outputs":
        out_set = set(OUTPUT_COLUMNS)
        headers = [header_with_unit(c) if c in out_set else c for c in columns]
    else:
        headers = columns
    col_values = []
    col_fmt = []
    col_text_len = []
    for i, name in enumerate(frame.columns):
        col = frame.iloc[:, i]
        values, is_float, text_len = _column_for_excel(col, str(name), report)
        col_values.append(values)
        unit = column_unit(str(name)) if unit_columns != "none" else ""
        fmt = _NUMBER_FORMATS.get(unit) if (number_formats and is_float) else None
        if _is_date_only(col):
            fmt = "yyyy-mm-dd"
        col_fmt.append(fmt)
        col_text_len.append(text_len)

    # sheet view, column widths and filter first: a write-only sheet writes them before the rows
    n_cols = len(columns)
    if n_cols:
        ws.freeze_panes = "A2"
        ws.auto_filter.ref = f"A1:{get_column_letter(n_cols)}{len(frame) + 1}"
    for j in range(n_cols):
        if widths is not None and j < len(widths):
            width = widths[j]
        else:
            width = min(60, max(8, len(headers[j]) + 2, col_text_len[j] + 2))
        ws.column_dimensions[get_column_letter(j + 1)].width = width

    bold = Font(bold=True)
    header_cells = []
    for h in headers:
        cell = WriteOnlyCell(ws, value=_clean_text(h)[0])
        cell.data_type = "s"
        cell.font = bold
        header_cells.append(cell)
    ws.append(header_cells)

    for row in zip(*col_values, strict=True) if col_values else ():
        out = []
        for j, v in enumerate(row):
            if isinstance(v, str):
                cell = WriteOnlyCell(ws, value=None)
                cell._value = v  # bypass openpyxl's "=..." -> formula and "#N/A" -> error guessing
                cell.data_type = "s"
                if v[:1] in safety.FORMULA_PREFIXES:
                    cell.quotePrefix = True  # stays text when a user edits the cell
                out.append(cell)
            elif col_fmt[j] is not None and v is not None:
                cell = WriteOnlyCell(ws, value=v)
                cell.number_format = col_fmt[j]
                out.append(cell)
            else:
                out.append(v)
        ws.append(out)


def _is_date_only(col: pd.Series) -> bool:
    """True for a naive datetime column whose values all fall at midnight (shown as dates)."""
    if not pd.api.types.is_datetime64_any_dtype(col.dtype) or isinstance(
        col.dtype, pd.DatetimeTZDtype
    ):
        return False
    present = col.dropna()
    return bool(len(present)) and bool((present == present.dt.normalize()).all())


def _clean_text(text: str) -> tuple[str, bool]:
    """Text safe for xlsx XML: illegal control characters become U+FFFD (flag says whether any did)."""
    from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE

    cleaned = ILLEGAL_CHARACTERS_RE.sub("\ufffd", text)
    return cleaned, cleaned != text


def _column_for_excel(col: pd.Series, name: str, report) -> tuple[list, bool, int]:
    """One column as Python values openpyxl accepts (None for missing), whether it is float, text width."""
    dtype = col.dtype
    n = len(col)
    if pd.api.types.is_bool_dtype(dtype) and not col.isna().any():
        return col.astype(bool).tolist(), False, 5
    if pd.api.types.is_float_dtype(dtype) or pd.api.types.is_integer_dtype(dtype):
        arr = col.to_numpy(dtype="float64", na_value=np.nan)
        finite = np.isfinite(arr)
        n_inf = int(np.isinf(arr).sum())
        if n_inf:
            report.notes.append(
                f"column {name!r}: {n_inf} infinite value(s) written as empty cells"
            )
        is_float = pd.api.types.is_float_dtype(dtype)
        if pd.api.types.is_integer_dtype(dtype):
            values = col.astype(object).where(col.notna(), None).tolist()
        else:
            values = np.where(finite, arr, np.nan).astype(object)
            values[~finite] = None
            values = values.tolist()
        width = 12 if n else 8
        return values, is_float, width
    if isinstance(dtype, pd.DatetimeTZDtype):
        text = col.map(lambda v: v.isoformat(), na_action="ignore")
        return text.astype(object).where(col.notna(), None).tolist(), False, 25
    if pd.api.types.is_datetime64_any_dtype(dtype):
        values = [None if pd.isna(v) else v.to_pydatetime() for v in col]
        return values, False, 19
    # text or mixed objects
    values = [_excel_scalar(v) for v in col.astype(object).tolist()]
    text_cells = [(i, v) for i, v in enumerate(values) if isinstance(v, str)]
    n_clean = 0
    longest = 0
    for i, v in text_cells:
        if len(v) > EXCEL_MAX_TEXT:
            raise OutputError(
                f"column {name!r}, row {i + 1}: text of {len(v)} characters is longer than an xlsx "
                f"cell holds ({EXCEL_MAX_TEXT}); write to a .csv or .parquet output instead"
            )
        cleaned, changed = _clean_text(v)
        if changed:
            values[i] = cleaned
            n_clean += 1
        longest = max(longest, len(v))
    if n_clean:
        report.notes.append(
            f"column {name!r}: control characters in {n_clean} cell(s) replaced by U+FFFD in "
            "wallstress's sheets (xlsx cannot store them)"
        )
    return values, False, min(longest, 60)


def _excel_scalar(v):
    if v is None or v is pd.NA or v is pd.NaT:
        return None
    if isinstance(v, float):
        return v if math.isfinite(v) else None
    if isinstance(v, (np.floating,)):
        return float(v) if np.isfinite(v) else None
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (np.bool_,)):
        return bool(v)
    if isinstance(v, pd.Timestamp):
        if v.tzinfo is not None:
            return v.isoformat()
        return v.to_pydatetime()
    if isinstance(v, datetime):
        return v.isoformat() if v.tzinfo is not None else v
    if isinstance(v, (str, int, bool, date, Decimal)):
        return v
    return str(v)


# --------------------------------------------------------------------------------------------------
# csv / parquet


def _write_flat(out, suffix, parts, methods, source, escape_formulas) -> WriteReport:
    report = WriteReport()
    main = parts[0].frame
    if suffix == ".csv":
        report.formula_like = safety.formula_like_findings(main, escaped=escape_formulas)
        if len(report.formula_like):
            report.notes.append(
                f"{len(report.formula_like)} text cell(s) start like a spreadsheet formula"
                + (" and were prefixed with a single quote" if escape_formulas else "")
                + " (finding formula_like_text)"
            )
    outputs = [out] + [_sidecar(out, p.key) for p in parts if p.key]
    methods_json = _sidecar(out, "methods", ".json")
    with safety.atomic_files() as batch:
        for part, target in zip(parts, outputs, strict=True):
            frame = part.frame
            if part.key == "findings" and len(report.formula_like):
                frame = _add_missing_findings(frame, report.formula_like)
            tmp = batch.path(target)
            if suffix == ".csv":
                _to_csv(frame, tmp, source, escape_formulas)
            else:
                _to_parquet(frame, tmp, part.sheet, report)
        record = methods_record(
            methods, source, notes=report.notes, outputs=[*outputs, methods_json]
        )
        batch.path(methods_json).write_text(
            json.dumps(record, indent=2, ensure_ascii=False, default=_json_default) + "\n",
            encoding="utf-8",
        )
    report.extend([*outputs, methods_json])
    return report


def _to_csv(frame, tmp, source, escape_formulas) -> None:
    delimiter, decimal, encoding = ",", ".", "utf-8"
    if source is not None and str(getattr(source, "format", "")).lower().lstrip(".") in (
        "csv",
        "tsv",
        "txt",
    ):
        delimiter = getattr(source, "delimiter", None) or ","
        decimal = getattr(source, "decimal", None) or "."
        if str(getattr(source, "encoding", "") or "").lower().replace("_", "-") == "utf-8-sig":
            encoding = "utf-8-sig"
    if decimal == delimiter:
        delimiter = ";"
    if escape_formulas:
        frame = safety.escape_formula_text(frame)
    if decimal != ".":
        frame = _floats_as_text(frame, decimal)
    frame.to_csv(tmp, index=False, sep=delimiter, decimal=decimal, encoding=encoding)


def _floats_as_text(frame: pd.DataFrame, decimal: str) -> pd.DataFrame:
    """Float columns as shortest round-trip text with ``decimal`` (pandas rounds them otherwise)."""
    out = frame.copy()
    for i in range(out.shape[1]):
        col = out.iloc[:, i]
        if pd.api.types.is_float_dtype(col.dtype):
            text = (
                col.map(repr, na_action="ignore")
                .astype(object)
                .str.replace(".", decimal, regex=False)
            )
            out.isetitem(i, text.where(col.notna(), None))
    return out


def _to_parquet(frame, tmp, sheet, report) -> None:
    frame = frame.copy()
    cols = [str(c) for c in frame.columns]
    if len(set(cols)) != len(cols):
        seen: dict[str, int] = {}
        unique = []
        for c in cols:
            seen[c] = seen.get(c, 0) + 1
            unique.append(c if seen[c] == 1 else f"{c} ({seen[c]})")
        report.notes.append(f"{sheet!r}: repeated column names numbered for parquet")
        cols = unique
    frame.columns = cols
    for c in cols:
        if frame[c].dtype == object:
            kind = pd.api.types.infer_dtype(frame[c], skipna=True)
            if kind not in (
                "string",
                "empty",
                "floating",
                "integer",
                "boolean",
                "mixed-integer-float",
                "date",
                "datetime",
                "decimal",
                "bytes",
            ):
                frame[c] = frame[c].map(lambda v: None if _is_missing(v) else str(v))
                report.notes.append(
                    f"{sheet!r}: column {c!r} holds mixed values; written as text in parquet"
                )
    try:
        frame.to_parquet(tmp, index=False)
    except ImportError as exc:
        raise OutputError(
            "writing .parquet needs pyarrow (pip install 'wallstress[parquet]'); or write .csv/.xlsx"
        ) from exc


def _is_missing(v) -> bool:
    try:
        return bool(pd.isna(v))
    except (TypeError, ValueError):
        return False


def _add_missing_findings(findings: pd.DataFrame, extra: pd.DataFrame) -> pd.DataFrame:
    if "code" in findings.columns and (findings["code"] == safety.FORMULA_LIKE_CODE).any():
        return findings
    return _findings.concat([findings, extra])


def _findings_for_writing(findings) -> pd.DataFrame:
    if findings is None:
        return _findings.empty()
    return findings


def _json_default(v):
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (np.floating,)):
        return float(v) if np.isfinite(v) else None
    if isinstance(v, (np.bool_,)):
        return bool(v)
    if isinstance(v, (datetime, date, pd.Timestamp)):
        return v.isoformat()
    if isinstance(v, (set, frozenset, tuple)):
        return list(v)
    if isinstance(v, pd.DataFrame):
        return v.to_dict("records")
    if isinstance(v, pd.Series):
        return v.tolist()
    return str(v)


# --------------------------------------------------------------------------------------------------
# methods flattening


def _scalar_text(v):
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (np.floating, float)):
        return float(v) if np.isfinite(v) else ""
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, str)):
        return v
    if v is None:
        return ""
    return str(v)


def _is_scalar(v) -> bool:
    return not isinstance(v, (dict, list, tuple, set, pd.DataFrame, pd.Series, np.ndarray))


def _flatten(obj, prefix: str) -> list[tuple[str, object]]:
    if isinstance(obj, pd.DataFrame):
        obj = obj.to_dict("records")
    if isinstance(obj, (pd.Series, np.ndarray, set)):
        obj = list(obj)
    if isinstance(obj, dict):
        if not obj:
            return [(prefix, "")]
        rows = []
        for k, v in obj.items():
            rows.extend(_flatten(v, f"{prefix}.{k}" if prefix else str(k)))
        return rows
    if isinstance(obj, (list, tuple)):
        if all(_is_scalar(x) for x in obj):
            return [(prefix, "; ".join(str(_scalar_text(x)) for x in obj))]
        rows = []
        for i, x in enumerate(obj, 1):
            if isinstance(x, dict) and all(_is_scalar(v) for v in x.values()):
                rows.append(
                    (f"{prefix} {i}", "; ".join(f"{k}: {_scalar_text(v)}" for k, v in x.items()))
                )
            else:
                rows.extend(_flatten(x, f"{prefix} {i}"))
        return rows
    return [(prefix, _scalar_text(obj))]


def _slug(name: str) -> str:
    s = re.sub(r"[^0-9A-Za-z]+", "-", name.strip().lower()).strip("-")
    return s or "sheet"


__all__ = [
    "OUTPUT_SUFFIXES",
    "OUTPUT_UNITS",
    "DEFAULT_SHEET_NAMES",
    "CAUTIONS",
    "WriteReport",
    "write_results",
    "write_sheets",
    "header_with_unit",
    "column_unit",
    "canonical_header",
    "methods_rows",
    "methods_record",
    "from_memory_items",
]

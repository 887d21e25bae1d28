"""xlsx outputs: a copy of the user's workbook with our sheets added, a new workbook, or in place.

A copy is spliced, not re-saved (:mod:`~wallstress.write.xlsx.splice`): every part of the user's package (sheets,
formulas, comments, styles, defined names, drawings, charts, pivot tables, extensions) is copied
byte for byte and only the sheet registries and the style list gain entries for our sheets. A
package that cannot be spliced safely (macro-enabled, strict OOXML, encrypted) gets a separate
workbook holding our sheets instead. ``in_place`` writes into the user's workbook only after a
verified backup. Cells of ours hold text as inline text (never a formula, error value or link), with
units in the headers and display formats by unit.

The size limits (``EXCEL_MAX_ROWS``, ``EXCEL_MAX_COLUMNS``, ``EXCEL_MAX_TEXT``) are public constants of
:mod:`wallstress.write.xlsx.sheet_xml`, read from there when a sheet is written.
"""

from __future__ import annotations

import re
from pathlib import Path

import pandas as pd

from wallstress.errors import OutputError
from wallstress.schema.display import (
    _NUMBER_FORMATS,
    column_unit,
    decimals,
    header_with_unit,
    label,
)
from wallstress.schema.outputs import OUTPUT_COLUMNS
from wallstress.write import safety
from wallstress.write.methods_sheet import methods_rows
from wallstress.write.parts import WriteReport, _Part
from wallstress.write.xlsx import registries, sheet_xml, splice

_INVALID_SHEET_CHARS = re.compile(r"[\[\]\*\?/\\:]")


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
        _check_unchanged_since_read(source, src_path)
        try:
            _save_workbook_copy(src_path, out, parts, methods, source, methods_sheet, report)
            report.append(out)
            return report
        except registries.SpliceError as exc:
            report.notes.append(_separate_note(exc, src_path.name, out.name))
    _save_new_workbook(out, parts, methods, source, methods_sheet, report)
    report.append(out)
    return report


def _separate_note(reason, src_name: str, written: str) -> str:
    return (
        f"{src_name!r} cannot be copied with sheets added ({reason}); {written!r} holds "
        "wallstress's sheets only and your workbook was not copied or changed"
    )


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

    def separately(reason) -> WriteReport:
        separate = src_path.with_name(f"{src_path.stem}.wallstress-results.xlsx")
        report.notes.append(_separate_note(reason, src_path.name, separate.name))
        _save_new_workbook(separate, parts, methods, source, methods_sheet, report)
        report.append(separate)
        return report

    if src_path.suffix.lower() != ".xlsx":
        return separately("it is a macro-enabled workbook")
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
    except registries.SpliceError as exc:
        backup.unlink(missing_ok=True)
        report.backup = None
        report.notes.clear()
        return separately(exc)
    except BaseException:
        # the user's file is untouched: the backup is not needed
        if safety.sha256_file(src_path) == original:
            backup.unlink(missing_ok=True)
        raise
    report.append(src_path)
    report.append(backup)
    return report


def _sheet_specs(parts, methods, source, out, report) -> dict:
    """Our tables as sheet specs for the streaming writer: units in headers, display formats."""

    specs: dict = {}
    for part in parts:
        frame = part.frame
        columns = [str(c) for c in frame.columns]
        if part.unit_columns == "all":
            headers = [header_with_unit(c) for c in columns]
        elif part.unit_columns == "outputs":
            out_set = set(OUTPUT_COLUMNS)
            headers = [header_with_unit(c) if c in out_set else c for c in columns]
        elif part.unit_columns == "labels":  # a sheet to read: labels, the registry's decimals
            headers = [label(c) for c in columns]
        else:
            headers = columns
        formats = {}
        if part.unit_columns == "labels":
            for c, h, dtype in zip(columns, headers, frame.dtypes, strict=True):
                places = decimals(c)
                if places is not None and pd.api.types.is_float_dtype(dtype):
                    formats[h] = "0" if places == 0 else "0." + "0" * places
        elif part.unit_columns != "none":
            for c, h, dtype in zip(columns, headers, frame.dtypes, strict=True):
                fmt = _NUMBER_FORMATS.get(column_unit(c))
                if fmt and pd.api.types.is_float_dtype(dtype):
                    formats[h] = fmt
        renamed = frame.set_axis(headers, axis=1) if headers != columns else frame
        specs[part.sheet] = sheet_xml.SheetSpec(
            renamed, number_formats=formats, marks=tuple(part.marks)
        )

    def methods_frame(notes):
        return methods_rows(methods, source, notes=[*report.notes, *notes], outputs=[out])

    specs["\0methods"] = sheet_xml.SheetSpec(methods_frame, widths=(28, 110))
    return specs


def _named(specs: dict, methods_sheet: str) -> dict:
    """Put the methods sheet under its wanted name (kept last)."""
    return {(methods_sheet if k == "\0methods" else k): v for k, v in specs.items()}


def _save_new_workbook(out, parts, methods, source, methods_sheet, report) -> None:

    _check_excel_size(parts)
    specs = _named(_sheet_specs(parts, methods, source, out, report), methods_sheet)
    with safety.atomic_path(out) as tmp:
        result = splice.new_workbook(tmp, specs)
    report.notes.extend(result.notes)


def _save_workbook_copy(
    src, out, parts, methods, source, methods_sheet, report, before_commit=None
):
    """A copy of the user's workbook with our sheets added. Every part of the user's package is
    copied byte for byte (sheets, formulas, comments, styles, names, drawings, charts, pivots...);
    only the sheet registries and the style list gain entries for our sheets."""

    _check_excel_size(parts)
    specs = _named(_sheet_specs(parts, methods, source, out, report), methods_sheet)
    with safety.atomic_path(out) as tmp:
        result = splice.splice_sheets(src, tmp, specs)
        if before_commit is not None:
            before_commit()
    report.notes.extend(result.notes)


def _check_excel_size(parts) -> None:
    for part in parts:
        n_rows, n_cols = part.frame.shape
        if n_rows + 1 > sheet_xml.EXCEL_MAX_ROWS or n_cols > sheet_xml.EXCEL_MAX_COLUMNS:
            raise OutputError(
                f"the table for sheet {part.sheet!r} has {n_rows} rows and {n_cols} columns, more than "
                f"an xlsx sheet holds ({sheet_xml.EXCEL_MAX_ROWS - 1} rows, {sheet_xml.EXCEL_MAX_COLUMNS} columns); "
                "write to a .csv or .parquet output instead"
            )


def check_fits_xlsx(n_rows: int, n_cols: int, out=None) -> None:
    """Refuse, before any computing, a study list whose results cannot fit one xlsx sheet.

    The results sheet holds the user's ``n_cols`` columns plus ``len(schema.OUTPUT_COLUMNS)``
    columns of results, under one header row.

    Parameters
    ----------
    n_rows, n_cols : int
        Size of the study list as read (``StudyTable.table.shape``).
    out : str or Path, optional
        The output file, named in the message.

    Raises
    ------
    OutputError
        More than ``writers.EXCEL_MAX_ROWS - 1`` rows or ``writers.EXCEL_MAX_COLUMNS`` columns;
        the message says to write .csv or .parquet instead.
    """
    total = int(n_cols) + len(OUTPUT_COLUMNS)
    if int(n_rows) + 1 > sheet_xml.EXCEL_MAX_ROWS or total > sheet_xml.EXCEL_MAX_COLUMNS:
        where = f"{out}: " if out is not None else ""
        raise OutputError(
            f"{where}the results would be {n_rows} rows x {total} columns ({n_cols} of the study "
            f"list, {len(OUTPUT_COLUMNS)} of results), more than an xlsx sheet holds "
            f"({sheet_xml.EXCEL_MAX_ROWS - 1} rows, {sheet_xml.EXCEL_MAX_COLUMNS} columns); write to a .csv or "
            ".parquet output instead (-o results.csv)"
        )

"""xlsx outputs: a copy of the user's workbook with our sheets added, a new workbook, or in place.

A copy keeps every sheet, formula, comment, style, defined name and column width of the user's; when
the workbook holds parts the spreadsheet library cannot carry over (macros, drawings, pivot tables,
extensions...), a separate workbook holds our sheets instead. ``in_place`` writes into the user's
workbook only after a verified backup. Cells of ours are written as text where they hold text (never
a formula, error value or link), with units in the headers and display formats by unit.

The size limits (``EXCEL_MAX_ROWS``, ``EXCEL_MAX_COLUMNS``, ``EXCEL_MAX_TEXT``) are public constants of
:mod:`wallstress.writers` and are read from there when a sheet is written.
"""

from __future__ import annotations

import contextlib
import math
import os
import re
from datetime import date, datetime
from decimal import Decimal
from pathlib import Path

import numpy as np
import pandas as pd

from . import safety
from .errors import OutputError
from .methods_sheet import methods_rows
from .output_parts import WriteReport, _Part
from .output_units import _NUMBER_FORMATS, column_unit, header_with_unit
from .schema import OUTPUT_COLUMNS

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
    from .writers import EXCEL_MAX_COLUMNS, EXCEL_MAX_ROWS  # read at call time (adjustable there)

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
    from .writers import EXCEL_MAX_TEXT  # read at call time (adjustable there)

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

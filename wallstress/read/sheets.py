"""Reading workbooks (xlsx, ods): sheet choice, the fast reader with an openpyxl fallback, cell scan.

The container is checked first (:mod:`wallstress.read.guards`). A sheet is read with python-calamine;
when it fails, openpyxl (through defusedxml) reads it instead, with a note. Without ``sheet``, the first
sheet whose header row is recognised is read. For xlsx, the sheet's XML is scanned for error cells and
formulas never calculated, which the fast reader returns as empty cells.

References
----------
ECMA-376, Office Open XML File Formats, 5th ed., 2016 (SpreadsheetML cells: ``t="e"`` error values,
``<f>`` formulas with cached ``<v>`` values).
OASIS, Open Document Format for Office Applications (OpenDocument) v1.2, 2011.
"""

from __future__ import annotations

import re
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress.errors import InputError
from wallstress.read import sheet_bounds as sb
from wallstress.read.grid import (
    HEADER_SEARCH_ROWS,
    _blank_to_nan,
    _cell_findings,
    _file_note,
    _frame_from_grid,
)
from wallstress.read.guards import check_xml_parts, check_zip
from wallstress.read.study_table import StudyTable


def _read_workbook(p: Path, kind: str, sheet, max_rows, columns) -> StudyTable:
    with zipfile.ZipFile(p) as zf:
        check_zip(p, zf)
        check_xml_parts(p, zf)
    import python_calamine as pc

    parts = []
    try:
        if kind == "ods" and _ods_repeats_large(p):
            # calamine expands every sheet's repeated cells when it opens an ods
            wb, names = None, _ods_names(p)
        else:
            wb = pc.CalamineWorkbook.from_path(str(p))
            names = list(wb.sheet_names)
    except InputError:
        raise
    except Exception as exc:  # calamine raises its own error types
        if kind == "ods":
            raise InputError(
                f"{p}: the spreadsheet cannot be read ({exc}); save it again as .ods or .xlsx"
            ) from exc
        wb = None
        names = _openpyxl_sheet_names(p)
        parts.append(
            _file_note(
                "read_with_openpyxl",
                f"The fast reader failed ({type(exc).__name__}); the workbook was read with openpyxl instead.",
            )
        )
    if sheet is not None and sheet not in names:
        raise InputError(
            f"{p}: there is no sheet {sheet!r}; the sheets are {', '.join(repr(n) for n in names)}; "
            "pass one of them with --sheet"
        )
    hidden = _hidden_sheets(wb)
    # visible sheets first: a hidden sheet (often an old copy or a lookup table) is read only when
    # no visible sheet has a study list, and then with a warning
    candidates = (
        [sheet] if sheet is not None else [n for n in names if n not in hidden] + list(hidden)
    )
    last_error = None
    for name in candidates:
        try:
            grid, merged, bound_note = _sheet_grid(p, wb, name, max_rows, kind)
        except InputError:
            raise
        except Exception as exc:
            if wb is None:
                raise InputError(
                    f"{p}: sheet {name!r} cannot be read ({type(exc).__name__}: {exc}); open the "
                    "workbook in a spreadsheet program and save it again"
                ) from exc
            grid, merged, bound_note = _openpyxl_grid(p, name, max_rows), [], None
            parts.append(
                _file_note(
                    "read_with_openpyxl",
                    f"Sheet {name!r} was read with openpyxl (the fast reader failed: {type(exc).__name__}).",
                )
            )
        if bound_note:
            parts.append(_file_note("stray_cells_ignored", bound_note, "warning"))
        errors, uncached, scan_notes = (
            _xlsx_marked_cells(p, name) if kind == "xlsx" else ([], [], [])
        )
        grid = _show_marked_cells(grid, errors, uncached)
        if grid.empty or not grid.notna().to_numpy().any():
            last_error = InputError(
                f"{p}: sheet {name!r} is empty; pass the sheet with the study list with --sheet"
            )
            continue
        try:
            table, header_row, first, fparts = _frame_from_grid(p, grid, columns, name, merged)
        except InputError as exc:
            last_error = exc
            if sheet is not None:
                raise
            continue
        fparts += scan_notes + _marked_cell_findings(table, first, grid, errors, uncached)
        table = _tidy_spreadsheet_columns(table)
        if max_rows is not None:
            table = table.iloc[:max_rows].reset_index(drop=True)
        if sheet is None and len(names) > 1:
            skipped = f" (hidden sheets are tried last: {', '.join(hidden)})" if hidden else ""
            fparts.append(
                _file_note(
                    "sheet_chosen",
                    f"Read sheet {name!r}, the first visible sheet whose headers are recognised "
                    f"(sheets: {', '.join(names)}){skipped}; pass --sheet to choose another.",
                )
            )
        if name in hidden:
            fparts.append(
                _file_note(
                    "sheet_hidden",
                    f"Sheet {name!r} is hidden in the workbook"
                    + ("" if sheet is not None else " and no visible sheet holds a study list")
                    + "; check that it is the study list you meant.",
                    "warning",
                )
            )
        return StudyTable(
            table=table,
            path=p,
            format=kind,
            sheet=name,
            header_row=header_row,
            sha256="",
            findings=fnd.concat([*parts, *fparts, *_cell_findings(table)]),
            sheets=names,
            first_data_row=first,
        )
    if len(candidates) > 1:
        raise InputError(
            f"{p}: no sheet has a recognisable header row (sheets: {', '.join(names)}); rename the "
            "headers (e.g. IVSd, LVIDd, PWd, height, weight), map them with --columns, or pass --sheet"
        )
    raise last_error or InputError(f"{p}: the workbook has no sheets; export the study list again")


def _hidden_sheets(wb) -> list[str]:
    """Sheets the workbook hides (hidden or very hidden) or that are not worksheets, in order."""
    try:
        meta = wb.sheets_metadata if wb is not None else []
    except Exception:  # an older reader without metadata: every sheet counts as visible
        return []
    return [
        m.name
        for m in meta
        if "visible" not in str(m.visible).lower().rsplit(".", 1)[-1]
        or "worksheet" not in str(m.typ).lower()
    ]


def _sheet_grid(p: Path, wb, name: str, max_rows, kind: str = "xlsx"):
    """(grid, merged ranges, note): the sheet's cells from A1, dense.

    The sheet's extent is measured first (:mod:`wallstress.read.sheet_bounds`); a sheet that reaches
    beyond ``SHEET_CELL_BUDGET`` cells is read bounded to its table, and the note names the far-off
    cells left out. Otherwise calamine (or openpyxl, when ``wb`` is None) reads it whole.
    """
    if wb is None and kind == "ods":
        return _guarded(p, name, lambda zf: sb.read_ods_sheet(p, zf, name, max_rows))
    bounded = _bounded_grid(p, kind, name, max_rows)
    if bounded is not None:
        return bounded
    if wb is None:
        return _openpyxl_grid(p, name, max_rows), [], None
    sh = wb.get_sheet_by_name(name)
    nrows = None if max_rows is None else max_rows + HEADER_SEARCH_ROWS + 2
    rows = (
        sh.to_python(skip_empty_area=False, nrows=nrows)
        if nrows
        else sh.to_python(skip_empty_area=False)
    )
    merged = list(getattr(sh, "merged_cell_ranges", None) or [])
    if not rows:
        return pd.DataFrame(), merged, None
    grid = pd.DataFrame(rows, dtype=object)
    return _blank_to_nan(grid, strip=False), merged, None


def _bounded_grid(p: Path, kind: str, name: str, max_rows):
    """The bounded read of an over-large xlsx sheet, or None when it is within the budget."""

    def read(zf):
        part = _sheet_part(zf, name)
        if part is None or part not in zf.namelist():
            return None
        extent = sb.xlsx_extent(zf, part)
        if extent.cells <= sb.SHEET_CELL_BUDGET:
            return None
        return sb.bounded_xlsx_grid(p, zf, part, name, extent, max_rows)

    return _guarded(p, name, read) if kind == "xlsx" else None


def _guarded(p: Path, name: str, read):
    """Run ``read(zipfile)``; damaged XML becomes one InputError line; (grid, note) -> (grid,
    merged, note) with blank cells as NaN."""
    from defusedxml.ElementTree import ParseError

    try:
        with zipfile.ZipFile(p) as zf:
            got = read(zf)
    except (ParseError, KeyError, ValueError, zipfile.BadZipFile) as exc:
        raise InputError(
            f"{p}: sheet {name!r} is damaged ({type(exc).__name__}: {exc}); open the workbook in a "
            "spreadsheet program and save it again"
        ) from exc
    if got is None:
        return None
    grid, note = got
    return (grid if grid.empty else _blank_to_nan(grid, strip=False)), [], note


def _ods_repeats_large(p: Path) -> bool:
    with zipfile.ZipFile(p) as zf:
        return "content.xml" in zf.namelist() and sb.ods_may_exceed(zf)


def _ods_names(p: Path) -> list[str]:
    from defusedxml.ElementTree import ParseError

    try:
        with zipfile.ZipFile(p) as zf:
            return sb.ods_sheet_names(zf)
    except (ParseError, KeyError, ValueError) as exc:
        raise InputError(
            f"{p}: the spreadsheet is damaged ({type(exc).__name__}: {exc}); save it again as .ods"
        ) from exc


def _openpyxl_sheet_names(p: Path) -> list[str]:
    import openpyxl

    try:
        wb = openpyxl.load_workbook(p, read_only=True, data_only=True)
    except Exception as exc:
        raise InputError(
            f"{p}: the workbook cannot be read ({type(exc).__name__}: {exc}); save it again as .xlsx"
        ) from exc
    try:
        return list(wb.sheetnames)
    finally:
        wb.close()


def _openpyxl_grid(p: Path, name: str, max_rows) -> pd.DataFrame:
    try:
        return _openpyxl_rows(p, name, max_rows)
    except InputError:
        raise
    except Exception as exc:  # openpyxl and XML parser errors of many types
        raise InputError(
            f"{p}: sheet {name!r} cannot be read ({type(exc).__name__}: {exc}); open the workbook "
            "in a spreadsheet program and save it again"
        ) from exc


def _openpyxl_rows(p: Path, name: str, max_rows) -> pd.DataFrame:
    import openpyxl

    wb = openpyxl.load_workbook(p, read_only=True, data_only=True)
    try:
        ws = wb[name]
        limit = None if max_rows is None else max_rows + HEADER_SEARCH_ROWS + 2
        rows = []
        for i, r in enumerate(ws.iter_rows(values_only=True)):
            if limit is not None and i >= limit:
                break
            rows.append(r)
    finally:
        wb.close()
    if not rows:
        return pd.DataFrame()
    return _blank_to_nan(pd.DataFrame(rows, dtype=object))


def _tidy_spreadsheet_columns(table: pd.DataFrame) -> pd.DataFrame:
    """Object columns holding only numbers become float64 (numbers stay numbers, text stays text)."""
    out = {}
    for j in range(table.shape[1]):
        s = table.iloc[:, j]
        if s.dtype == object:
            inferred = s.infer_objects()
            if pd.api.types.is_numeric_dtype(inferred.dtype) and not pd.api.types.is_bool_dtype(
                inferred.dtype
            ):
                s = inferred.astype("float64")
            elif pd.api.types.is_datetime64_any_dtype(inferred.dtype):
                s = inferred
        out[j] = s
    res = pd.DataFrame(out, index=table.index)
    res.columns = table.columns
    return res


_CELL_REF = re.compile(r"^([A-Z]+)(\d+)$")


def _col_index(letters: str) -> int:
    n = 0
    for ch in letters:
        n = n * 26 + (ord(ch) - 64)
    return n - 1


def _sheet_part(zf: zipfile.ZipFile, name: str) -> str | None:
    from defusedxml import ElementTree as DET

    ns_main = "{http://schemas.openxmlformats.org/spreadsheetml/2006/main}"
    ns_rel = "{http://schemas.openxmlformats.org/officeDocument/2006/relationships}"
    wbx = DET.fromstring(zf.read("xl/workbook.xml"))
    rid = None
    for s in wbx.iter(f"{ns_main}sheet"):
        if s.get("name") == name:
            rid = s.get(f"{ns_rel}id")
    if rid is None:
        return None
    rels = DET.fromstring(zf.read("xl/_rels/workbook.xml.rels"))
    for r in rels:
        if r.get("Id") == rid:
            target = r.get("Target", "")
            return target.lstrip("/") if target.startswith("/") else "xl/" + target
    return None


def _xlsx_marked_cells(p: Path, name: str) -> tuple[list, list, list]:
    """Error cells (``t="e"``) and formulas with no cached value in the sheet's XML:
    ``(errors, uncached, notes)``, each cell as (reference, text as written).

    The calamine reader returns both as empty cells; this scan says which they were. It streams the
    part and parses (with defusedxml) only when the raw text contains an error cell or a formula.
    """
    try:
        with zipfile.ZipFile(p) as zf:
            part = _sheet_part(zf, name)
            if part is None or part not in zf.namelist():
                return [], [], []
            with zf.open(part) as fh:
                found = False
                tail = b""
                while True:
                    chunk = fh.read(1 << 20)
                    if not chunk:
                        break
                    buf = tail + chunk
                    if b't="e"' in buf or b"<f>" in buf or b"<f " in buf or b"<f/>" in buf:
                        found = True
                        break
                    tail = buf[-8:]
            if not found:
                return [], [], []
            from defusedxml.ElementTree import iterparse

            ns = "{http://schemas.openxmlformats.org/spreadsheetml/2006/main}"
            errors, uncached = [], []
            with zf.open(part) as fh:
                for _, el in iterparse(fh, events=("end",)):
                    if el.tag != f"{ns}c":
                        continue
                    ref = el.get("r", "")
                    v = el.find(f"{ns}v")
                    f = el.find(f"{ns}f")
                    vtext = v.text if v is not None else None
                    if el.get("t") == "e":
                        errors.append((ref, vtext or ""))
                    elif f is not None and not vtext:
                        uncached.append((ref, "=" + (f.text or "")))
                    el.clear()
    except (zipfile.BadZipFile, KeyError, OSError, ValueError) as exc:
        note = _file_note(
            "cell_scan_failed",
            f"Error values and uncalculated formulas could not be checked ({type(exc).__name__}).",
            "warning",
        )
        return [], [], [note]
    except Exception as exc:  # defusedxml refusals and parse errors
        raise InputError(
            f"{p}: sheet {name!r} has unsafe or damaged XML ({type(exc).__name__}); save a fresh copy of the workbook"
        ) from exc
    return errors, uncached, []


def _show_marked_cells(grid: pd.DataFrame, errors: list, uncached: list) -> pd.DataFrame:
    """The grid with each marked cell's text where the reader gave it empty, so that a row of
    uncalculated formulas is a row (kept, with a finding on each cell), never a blank line."""
    marked = [(m, text) for ref, text in (*errors, *uncached) if (m := _CELL_REF.match(ref))]
    if not marked:
        return grid
    cells = [(int(m.group(2)) - 1, _col_index(m.group(1)), text) for m, text in marked]
    # the reader stops at the last row or column with a value: reach the marked cells too (they
    # lie within the sheet's measured extent, so this is bounded like the read itself)
    n_rows = max(grid.shape[0], 1 + max(r for r, _, _ in cells))
    n_cols = max(grid.shape[1], 1 + max(c for _, c, _ in cells))
    grid = grid.reindex(index=range(n_rows), columns=range(n_cols)).astype(object)
    for r, c, text in cells:
        if pd.isna(grid.iat[r, c]):
            grid.iat[r, c] = text or "#ERROR"
    return grid


def _marked_cell_findings(table, first: int, grid, errors: list, uncached: list) -> list:
    """A finding on each marked cell of the table, whose value is then empty (NaN)."""
    if not errors and not uncached:
        return []
    col_offset = int(np.flatnonzero(grid.notna().any(axis=0).to_numpy())[0])
    parts = []
    for cells, code, sev, msg in (
        (
            errors,
            "spreadsheet_error",
            "error",
            "the cell holds a spreadsheet error value; it was read as empty. Fix the formula in the file.",
        ),
        (
            uncached,
            "formula_not_calculated",
            "error",
            "the cell holds a formula that was never calculated (the file was written by a program, not saved by a spreadsheet program); it was read as empty. Open and save the file in a spreadsheet program, or write values.",
        ),
    ):
        by_col: dict[int, tuple[list, list]] = {}
        for ref, val in cells:
            m = _CELL_REF.match(ref)
            if not m:
                continue
            r = int(m.group(2)) - 1 - first
            c = _col_index(m.group(1)) - col_offset
            if 0 <= r < len(table) and 0 <= c < table.shape[1]:
                by_col.setdefault(c, ([], []))
                by_col[c][0].append(r)
                by_col[c][1].append(val)
        for c, (rows, vals) in sorted(by_col.items()):
            col = str(table.columns[c])
            table.iloc[rows, c] = np.nan
            parts.append(
                fnd.make(
                    rows,
                    code=code,
                    severity=sev,
                    column=col,
                    values=vals,
                    message=f"{col!r}: {msg}",
                )
            )
    return parts

"""Our sheets as streaming SpreadsheetML, built with pyarrow string kernels (no Python loop over cells).

A column becomes, chunk by chunk, a kind per cell and the cell's value as text; text is always an inline
string, XML-escaped, with ``_xHHHH_`` escaped and formula-like text given a quote-prefix format, so nothing
from the data can become a formula, an error value or a link. Also the limits of an xlsx sheet and the
:class:`SheetSpec` of a sheet to write.

References
----------
ECMA-376 Office Open XML File Formats, 5th edition (2016), Part 1 (SpreadsheetML: sheet, cell, inline
string, styles; ST_Xstring ``_xHHHH_`` escapes, 22.9.2.19). Excel's sheet and cell limits: Microsoft,
"Excel specifications and limits" (common practice, no source read for this module).
"""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from datetime import date, datetime
from xml.sax.saxutils import escape as _xml_escape

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from wallstress.read.sheet_bounds import col_letters
from wallstress.write.fast_csv import _missing, categorical_as_text

EXCEL_MAX_ROWS = 1_048_576
EXCEL_MAX_COLUMNS = 16_384
EXCEL_MAX_TEXT = 32_767
EXCEL_MAX_SHEET_NAME = 31
EXACT_INT_LIMIT = 2**53  # larger integers are not exactly representable as a spreadsheet number

DATE_FORMAT = "yyyy-mm-dd"
DATETIME_FORMAT = "yyyy-mm-dd hh:mm:ss"

MAIN_NS = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
REL_NS = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"

_INVALID_SHEET_CHARS = re.compile(r"[\[\]\*\?/\\:]")
_RESERVED_SHEET_NAMES = ("history",)  # Excel keeps "History" for change tracking
_ILLEGAL_XML_RE2 = r"[\x00-\x08\x0B\x0C\x0E-\x1F\x{FFFE}\x{FFFF}]"
_ILLEGAL_XML_PY = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff\ud800-\udfff]")
_XSTRING_ESCAPE = r"_(x[0-9A-Fa-f]{4}_)"
_FORMULA_START = r"^[=+\-@\t\r]"  # as wallstress.write.formula_text.FORMULA_PREFIXES
_CHUNK_ROWS = 16_384
_COMPRESSLEVEL = 1  # our sheets: fast deflate (about 1.3x the size of level 6, 4x faster)
_EPOCHS = {False: np.datetime64("1899-12-30", "us"), True: np.datetime64("1904-01-01", "us")}
_FIRST_DAY = {False: np.datetime64("1900-03-01", "us"), True: np.datetime64("1904-01-01", "us")}


@dataclass(frozen=True)
class SheetSpec:
    """One table with options of its own (else the call's ``header_units``/``number_formats``).

    Parameters
    ----------
    frame : DataFrame or callable
        The table; column names become the header row. A callable ``f(notes) -> DataFrame`` is
        called once the sheets before it are planned, with the notes so far (for a methods sheet
        that must list them: every note is known before any cell is written).
    header_units : dict of str -> str, optional
        Column name -> unit; the header becomes ``"name [unit]"`` (names holding ``[`` are kept).
    number_formats : dict of str -> str, optional
        Column name -> display format code (e.g. ``"0.0"``), applied to numeric columns only.
    widths : sequence of float or None, optional
        Column widths [characters] by position; None (or a short sequence) sizes the rest by content.
    marks : sequence of (range, formula, kind), optional
        Conditional formats: where ``formula`` (for the range's first cell) holds, the fill of ``kind``.
    """

    frame: pd.DataFrame | Callable[[list[str]], pd.DataFrame]
    header_units: Mapping[str, str] | None = None
    number_formats: Mapping[str, str] | None = None
    widths: Sequence[float | None] | None = None
    marks: Sequence[tuple[str, str, str]] = ()  # (range, formula, "limit" | "error")


# ------------------------------------------------------------------------------------------------
# the streaming sheet writer
#
# Every column becomes, chunk by chunk, two arrays: a kind per cell (below) and the cell's value as
# text (pyarrow strings). A cell is then '<c r="' + column letters + row number + PREFIX[kind] +
# value + SUFFIX[kind], and a row the join of its cells: pyarrow kernels, no Python loop over cells.

_EMPTY, _NUMBER, _BOOL, _TEXT, _DATE, _DATETIME, _TEXT_QUOTED = range(7)
_T_OPEN = '<is><t xml:space="preserve">'
_T_CLOSE = "</t></is></c>"


@dataclass
class _Column:
    header: str
    kind: str  # "float", "int", "bool", "date", "text", "mixed", "empty"
    values: object  # numpy array (float/int/bool/date serials) or pyarrow array (text, mixed)
    kinds: np.ndarray | None  # per-cell kind when fixed at planning (int, date, mixed)
    number_format: str | None
    date_format: str | None
    width: float


@dataclass
class _Plan:
    n_rows: int
    columns: list[_Column]
    marks: Sequence[tuple[str, str, str]] = ()

    @property
    def formats(self) -> set[str]:
        out = {f for c in self.columns for f in (c.number_format, c.date_format) if f}
        if any(c.kind == "mixed" and c.date_format for c in self.columns):
            out.add(DATE_FORMAT)  # a mixed column may hold dates and datetimes
        return out


def _plan_sheet(spec: SheetSpec, sheet: str, date1904: bool, notes: list[str]) -> _Plan:
    frame = spec.frame
    units = dict(spec.header_units or {})
    formats = dict(spec.number_formats or {})
    widths = list(spec.widths or [])
    columns = []
    for j in range(frame.shape[1]):
        name = str(frame.columns[j])
        header = name if "[" in name or not units.get(name) else f"{name} [{units[name]}]"
        header = _clean_texts([header], notes, sheet, "header")[0]
        col = _prepare(frame.iloc[:, j], header, sheet, date1904, notes)
        if col.kind in ("float", "int", "mixed") and formats.get(name):
            col.number_format = formats[name]
        wanted = widths[j] if j < len(widths) else None
        col.width = float(wanted) if wanted else min(60.0, max(8.0, len(header) + 2, col.width + 2))
        columns.append(col)
    return _Plan(len(frame), columns, tuple(spec.marks))


def _prepare(col: pd.Series, header: str, sheet: str, date1904: bool, notes) -> _Column:
    """One column as arrays ready for chunked encoding (type decisions made once per column)."""
    dtype = col.dtype
    where = f"sheet {sheet!r}, column {header!r}"
    if isinstance(dtype, pd.CategoricalDtype):
        text = categorical_as_text(col)
        if text is not None:
            return _text_column(text, header, where, notes)
        col = col.astype(object)
        dtype = col.dtype
    if pd.api.types.is_bool_dtype(dtype):
        mask = col.isna().to_numpy()
        return _Column(
            header, "bool", col.to_numpy(dtype=bool, na_value=False), mask, None, None, 5
        )
    if pd.api.types.is_float_dtype(dtype):
        arr = col.to_numpy(dtype="float64", na_value=np.nan)
        _note_infinite(arr, where, notes)
        return _Column(header, "float", arr, None, None, None, 12)
    if pd.api.types.is_integer_dtype(dtype):
        mask = col.isna().to_numpy()
        if dtype.kind == "u" or str(dtype).lower().startswith("uint"):
            values = col.to_numpy(dtype=object, na_value=None)
            return _mixed(values, header, where, date1904, notes)
        arr = col.to_numpy(dtype="int64", na_value=0)
        kinds = np.where(mask, _EMPTY, _NUMBER).astype("int8")
        big = (
            np.abs(arr) > EXACT_INT_LIMIT
        ) & ~mask  # np.abs(min int64) < 0 -> not caught; see below
        big |= (arr == np.iinfo("int64").min) & ~mask
        if big.any():
            kinds[big] = _TEXT
            notes.append(
                f"{where}: {int(big.sum())} integer(s) beyond 2**53 written as text (a spreadsheet "
                "number would round them)"
            )
        return _Column(header, "int", arr, kinds, None, None, 12)
    if isinstance(dtype, pd.DatetimeTZDtype):
        text = col.map(lambda v: v.isoformat(), na_action="ignore").astype(object)
        return _text_column(text.where(col.notna(), None).tolist(), header, where, notes)
    if pd.api.types.is_datetime64_any_dtype(dtype):
        stamps = col.to_numpy(dtype="datetime64[us]")
        return _dates(stamps, col.isna().to_numpy(), header, where, date1904, notes)
    if isinstance(dtype, pd.StringDtype):
        return _text_column(col, header, where, notes)
    values = col.to_numpy(dtype=object)
    inferred = pd.api.types.infer_dtype(values, skipna=True)
    if inferred == "string":
        return _text_column(values, header, where, notes)
    if inferred == "floating":
        arr = pd.to_numeric(pd.Series(values), errors="coerce").to_numpy(dtype="float64")
        _note_infinite(arr, where, notes)
        return _Column(header, "float", arr, None, None, None, 12)
    if inferred == "empty":
        return _Column(header, "empty", None, None, None, None, 0)
    return _mixed(values, header, where, date1904, notes)


def _note_infinite(arr: np.ndarray, where: str, notes) -> None:
    n_inf = int(np.isinf(arr).sum())
    if n_inf:
        notes.append(f"{where}: {n_inf} infinite value(s) written as empty cells")


def _dates(stamps, missing, header, where, date1904, notes) -> _Column:
    epoch, first = _EPOCHS[date1904], _FIRST_DAY[date1904]
    early = (stamps < first) & ~missing
    serial = (stamps - epoch).astype("int64") / 86_400_000_000.0
    kinds = np.where(missing, _EMPTY, _DATE).astype("int8")
    present = stamps[~missing]
    date_only = bool(len(present)) and bool(
        (present == present.astype("datetime64[D]").astype("datetime64[us]")).all()
    )
    if not date_only:
        kinds[kinds == _DATE] = _DATETIME
    values = pc.cast(pa.array(serial), pa.string())
    if early.any():
        iso = pd.Series(stamps[early]).map(lambda v: v.isoformat()).tolist()
        if date_only:
            iso = [t[:10] for t in iso]
        values = _put(values, np.flatnonzero(early), iso)
        kinds[early] = _TEXT
        notes.append(
            f"{where}: {int(early.sum())} date(s) before {str(first)[:10]} written as ISO text "
            "(the workbook's date system starts later)"
        )
    fmt = DATE_FORMAT if date_only else DATETIME_FORMAT
    return _Column(header, "date", values, kinds, None, fmt, 10 if date_only else 19)


def _put(values: pa.Array, positions: np.ndarray, texts: list[str]) -> pa.Array:
    py = values.to_pylist()
    for i, t in zip(positions.tolist(), texts, strict=True):
        py[i] = t
    return pa.array(py, type=pa.large_string())


def _text_column(values, header, where, notes) -> _Column:
    try:
        if isinstance(values, pa.Array):
            arr = values.cast(pa.large_string())
        else:
            arr = pa.array(values, type=pa.large_string(), from_pandas=True)
    except (pa.ArrowInvalid, pa.ArrowTypeError, UnicodeError):
        text = [None if _missing(v) else str(v) for v in values]
        arr = pa.array(_clean_texts(text, notes, where, "text"), type=pa.large_string())
    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks()
    arr = _limit_texts(arr, where, notes)
    longest = pc.max(pc.utf8_length(arr)).as_py() if len(arr) else 0
    return _Column(header, "text", arr, None, None, None, float(longest or 0))


def _limit_texts(arr: pa.Array, where: str, notes) -> pa.Array:
    """Control characters -> U+FFFD; text longer than a cell holds (UTF-16 units) cut, with notes."""
    if len(arr) and pc.any(pc.match_substring_regex(arr, _ILLEGAL_XML_RE2)).as_py():
        n = pc.sum(pc.match_substring_regex(arr, _ILLEGAL_XML_RE2)).as_py()
        arr = pc.replace_substring_regex(arr, _ILLEGAL_XML_RE2, "\ufffd")
        notes.append(
            f"{where}: control characters in {n} cell(s) replaced by U+FFFD (xlsx cannot store them)"
        )
    # a character is at most 2 UTF-16 units, so only text of more than half the limit can exceed it
    long = pc.greater(pc.utf8_length(arr), EXCEL_MAX_TEXT // 2).to_numpy(zero_copy_only=False)
    long = np.flatnonzero(np.nan_to_num(long.astype(float), nan=0.0) > 0)
    cut = []
    for i in long.tolist():
        text = arr[i].as_py()
        units = text.encode("utf-16-le")
        if len(units) // 2 > EXCEL_MAX_TEXT:
            cut.append((i, units[: 2 * EXCEL_MAX_TEXT].decode("utf-16-le", errors="ignore")))
    if cut:
        arr = _put(arr, np.array([i for i, _ in cut]), [t for _, t in cut])
        notes.append(
            f"{where}: {len(cut)} text cell(s) longer than {EXCEL_MAX_TEXT} characters (the xlsx "
            "cell limit) were cut to it; the full text is in the CSV/parquet outputs"
        )
    return arr


def _clean_texts(texts: list, notes, where: str, what: str) -> list:
    out, n = [], 0
    for t in texts:
        if isinstance(t, str) and _ILLEGAL_XML_PY.search(t):
            t = _ILLEGAL_XML_PY.sub("\ufffd", t)
            n += 1
        out.append(t)
    if n:
        notes.append(f"{where}: control characters in {n} {what} value(s) replaced by U+FFFD")
    return out


def _mixed(values, header, where, date1904, notes) -> _Column:
    """An object column of mixed values: each value by its own type (a Python pass, off the hot path)."""
    n = len(values)
    kinds = np.zeros(n, dtype="int8")
    texts: list = [None] * n
    epoch, first = _EPOCHS[date1904].astype(datetime), _FIRST_DAY[date1904].astype(datetime)
    n_inf = n_early = 0
    for i, v in enumerate(values):
        if _missing(v):
            continue
        if isinstance(v, (bool, np.bool_)):
            kinds[i], texts[i] = _BOOL, "1" if v else "0"
        elif isinstance(v, (int, np.integer)):
            if abs(int(v)) > EXACT_INT_LIMIT:
                kinds[i], texts[i] = _TEXT, str(int(v))
            else:
                kinds[i], texts[i] = _NUMBER, str(int(v))
        elif isinstance(v, (float, np.floating)):
            if np.isfinite(v):
                kinds[i], texts[i] = _NUMBER, repr(float(v))
            else:
                n_inf += 1
        elif isinstance(v, datetime) and v.tzinfo is None:
            dt = v.replace(tzinfo=None)
            if dt < first:
                kinds[i], texts[i], n_early = _TEXT, dt.isoformat(), n_early + 1
            else:
                kinds[i] = _DATETIME
                texts[i] = repr((dt - epoch).total_seconds() / 86400.0)
        elif isinstance(v, date) and not isinstance(v, datetime):
            if v < first.date():
                kinds[i], texts[i], n_early = _TEXT, v.isoformat(), n_early + 1
            else:
                kinds[i], texts[i] = _DATE, str((v - epoch.date()).days)
        elif isinstance(v, datetime):
            kinds[i], texts[i] = _TEXT, v.isoformat()
        else:
            kinds[i], texts[i] = _TEXT, str(v)
    if n_inf:
        notes.append(f"{where}: {n_inf} infinite value(s) written as empty cells")
    if n_early:
        notes.append(f"{where}: {n_early} date(s) before {str(first)[:10]} written as ISO text")
    arr = pa.array(_clean_texts(texts, notes, where, "text"), type=pa.large_string())
    arr = _limit_texts(arr, where, notes)
    has_date = bool((kinds == _DATE).any() or (kinds == _DATETIME).any())
    longest = pc.max(pc.utf8_length(arr)).as_py() if n else 0
    col = _Column(header, "mixed", arr, kinds, None, None, float(min(longest or 0, 60)))
    if has_date:
        col.date_format = DATETIME_FORMAT if (kinds == _DATETIME).any() else DATE_FORMAT
    return col


def _affixes(col: _Column, style_ids: dict[str, int]) -> tuple[pa.Array, pa.Array]:
    def s(code):
        return f' s="{style_ids[code]}"' if code else ""

    date_fmt = col.date_format
    prefix = [
        None,
        f'"{s(col.number_format)}><v>',
        '" t="b"><v>',
        f'" t="inlineStr">{_T_OPEN}',
        f'"{s(DATE_FORMAT if DATE_FORMAT in style_ids else date_fmt)}><v>',
        f'"{s(date_fmt)}><v>',
        f'" s="{style_ids["text_quoted"]}" t="inlineStr">{_T_OPEN}',
    ]
    if date_fmt == DATE_FORMAT:
        prefix[_DATETIME] = prefix[_DATE]
    suffix = [None, "</v></c>", "</v></c>", _T_CLOSE, "</v></c>", "</v></c>", _T_CLOSE]
    return pa.array(prefix, type=pa.large_string()), pa.array(suffix, type=pa.large_string())


def _chunk(col: _Column, a: int, b: int) -> tuple[np.ndarray, pa.Array | None]:
    """Kinds and value texts of rows ``a:b`` of one column."""
    n = b - a
    if col.kind == "empty":
        return np.zeros(n, dtype="int8"), None
    if col.kind == "float":
        arr = col.values[a:b]
        finite = np.isfinite(arr)
        kinds = np.where(finite, _NUMBER, _EMPTY).astype("int8")
        return kinds, pc.cast(pa.array(arr, mask=~finite), pa.large_string())
    if col.kind == "int":
        return col.kinds[a:b], pc.cast(pa.array(col.values[a:b]), pa.large_string())
    if col.kind == "bool":
        kinds = np.where(col.kinds[a:b], _EMPTY, _BOOL).astype("int8")
        return kinds, pa.array(np.where(col.values[a:b], "1", "0"), type=pa.large_string())
    if col.kind == "text":
        values = col.values.slice(a, n)
        present = pc.is_valid(values).to_numpy(zero_copy_only=False)
        kinds = np.where(present, _TEXT, _EMPTY).astype("int8")
        if n:
            quoted = pc.fill_null(pc.match_substring_regex(values, _FORMULA_START), False)
            kinds[quoted.to_numpy(zero_copy_only=False)] = _TEXT_QUOTED
        return kinds, values
    # date and mixed: kinds fixed at planning
    kinds = col.kinds[a:b].copy()
    values = col.values.slice(a, n)
    if n and col.kind == "mixed":
        quoted = pc.fill_null(pc.match_substring_regex(values, _FORMULA_START), False)
        kinds[quoted.to_numpy(zero_copy_only=False) & (kinds == _TEXT)] = _TEXT_QUOTED
    return kinds, values


def _escape(values: pa.Array) -> pa.Array:
    values = pc.replace_substring(values, "&", "&amp;")
    values = pc.replace_substring(values, "<", "&lt;")
    values = pc.replace_substring(values, ">", "&gt;")
    return pc.replace_substring_regex(values, _XSTRING_ESCAPE, r"_x005F_\1")


def _write_buffer(fh, arr: pa.Array) -> None:
    """Write the concatenation of a null-free string array's values (its data buffer, no copy)."""
    arr = arr.combine_chunks() if isinstance(arr, pa.ChunkedArray) else arr
    if not len(arr):
        return
    width = np.int64 if pa.types.is_large_string(arr.type) else np.int32
    offsets = np.frombuffer(arr.buffers()[1], dtype=width)[arr.offset : arr.offset + len(arr) + 1]
    fh.write(memoryview(arr.buffers()[2])[int(offsets[0]) : int(offsets[-1])])


def _write_sheet(fh, plan: _Plan, style_ids: dict[str, int]) -> None:
    cols = plan.columns
    n_cols, n_rows = len(cols), plan.n_rows
    last = f"{col_letters(n_cols - 1)}{n_rows + 1}" if n_cols else "A1"
    head = [
        '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n',
        f'<worksheet xmlns="{MAIN_NS}" xmlns:r="{REL_NS}">',
        '<sheetPr><pageSetUpPr fitToPage="1"/></sheetPr>',  # printed: fit to the page width
        f'<dimension ref="A1:{last}"/>' if n_cols else '<dimension ref="A1"/>',
        '<sheetViews><sheetView workbookViewId="0">',
    ]
    if n_cols:
        head.append(
            '<pane ySplit="1" topLeftCell="A2" activePane="bottomLeft" state="frozen"/>'
            '<selection pane="bottomLeft" activeCell="A2" sqref="A2"/>'
        )
    head.append('</sheetView></sheetViews><sheetFormatPr defaultRowHeight="15"/>')
    if n_cols:
        head.append("<cols>")
        head.extend(
            f'<col min="{j + 1}" max="{j + 1}" width="{c.width:.6g}" customWidth="1"/>'
            for j, c in enumerate(cols)
        )
        head.append("</cols>")
    head.append("<sheetData>")
    if n_cols:
        head.append('<row r="1">')
        head.extend(
            f'<c r="{col_letters(j)}1" s="{style_ids["header"]}" t="inlineStr">{_T_OPEN}'
            f"{_escape_py(c.header)}{_T_CLOSE}"
            for j, c in enumerate(cols)
        )
        head.append("</row>")
    fh.write("".join(head).encode("utf-8"))

    if n_cols:
        letters = [f'<c r="{col_letters(j)}' for j in range(n_cols)]
        affixes = [_affixes(c, style_ids) for c in cols]
        for a in range(0, n_rows, _CHUNK_ROWS):
            b = min(a + _CHUNK_ROWS, n_rows)
            rownum = pc.cast(pa.array(np.arange(a + 2, b + 2, dtype="int64")), pa.large_string())
            cells = []
            for j, col in enumerate(cols):
                kinds, values = _chunk(col, a, b)
                if values is None or not (kinds != _EMPTY).any():
                    continue
                if values.type != pa.large_string():
                    values = values.cast(pa.large_string())
                if col.kind in ("text", "mixed", "date"):
                    values = _escape(values)
                prefix, suffix = affixes[j]
                k = pa.array(kinds)
                cells.append(_join(letters[j], rownum, prefix.take(k), values, suffix.take(k), ""))
            opts = {"null_handling": "replace", "null_replacement": ""}
            _write_buffer(fh, _join('<row r="', rownum, '">', *cells, "</row>", "", **opts))

    tail = ["</sheetData>"]
    if n_cols:
        tail.append(f'<autoFilter ref="A1:{last}"/>')
    for k, (ref, formula, kind) in enumerate(plan.marks, start=1):
        tail.append(
            f'<conditionalFormatting sqref="{ref}"><cfRule type="expression" '
            f'dxfId="{style_ids["dxf:" + kind]}" priority="{k}"><formula>'
            f"{_escape_py(formula)}</formula></cfRule></conditionalFormatting>"
        )
    tail.append(
        '<pageMargins left="0.4" right="0.4" top="0.6" bottom="0.6" header="0.3" footer="0.3"/>'
        # landscape, one page wide and as many pages long as needed
        '<pageSetup orientation="landscape" fitToWidth="1" fitToHeight="0"/>'
    )
    tail.append("</worksheet>")
    fh.write("".join(tail).encode("utf-8"))


def _join(*parts, null_handling: str = "emit_null", null_replacement: str = ""):
    """``pc.binary_join_element_wise`` with plain strings as large-string scalars (last: separator)."""
    args = [pa.scalar(p, pa.large_string()) if isinstance(p, str) else p for p in parts]
    return pc.binary_join_element_wise(
        *args, null_handling=null_handling, null_replacement=null_replacement
    )


def _escape_py(text: str) -> str:
    return re.sub(_XSTRING_ESCAPE, r"_x005F_\1", _xml_escape(text))

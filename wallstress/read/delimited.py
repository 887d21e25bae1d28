"""Reading CSV text: encoding (UTF-8, BOM, UTF-16, Windows-1252), delimiter and decimal comma.

References
----------
RFC 4180, Common Format and MIME Type for Comma-Separated Values (CSV) Files, 2005.
"""

from __future__ import annotations

import contextlib
import csv
import io
import itertools
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from wallstress import findings as fnd
from wallstress.errors import InputError
from wallstress.read.grid import (
    HEADER_SEARCH_ROWS,
    _blank_to_nan,
    _cell_findings,
    _file_note,
    _frame_from_grid,
    cell_mask,
    column_groups,
    text_cells,
    trimmed,
)
from wallstress.read.guards import READ_LIMIT_BYTES, check_text_lines
from wallstress.read.study_table import StudyTable
from wallstress.schema.headers import header_score

DELIMITERS: tuple[str, ...] = ("\t", ";", "|", ",")  # order of preference when several fit


def _decode(p: Path, data: bytes) -> tuple[str, str]:
    if data.startswith(b"\xef\xbb\xbf"):
        enc = "utf-8-sig"
    elif data.startswith((b"\xff\xfe", b"\xfe\xff")):
        enc = "utf-16"
    else:
        enc = "utf-8"
    try:
        text = data.decode(enc)
    except UnicodeDecodeError:
        if enc != "utf-8":
            raise InputError(
                f"{p}: the text is not valid {enc}; save it again as CSV UTF-8"
            ) from None
        try:
            text = data.decode("cp1252")
            enc = "cp1252"
        except UnicodeDecodeError:
            raise InputError(
                f"{p}: not readable as UTF-8 or Windows-1252 text (binary content?); "
                "save the study list as CSV UTF-8 or .xlsx"
            ) from None
    if "\x00" in text[:65536]:
        raise InputError(
            f"{p}: binary content (NUL bytes), not a text table; pass a CSV, .xlsx, .ods or .parquet file"
        )
    return text, enc


def detect_delimiter(text: str | list[str], columns: dict | None = None) -> str:
    """The field delimiter of CSV text: tab, ';', '|' or ',', decided by the header row.

    Each candidate splits the first lines as a CSV reader would (quoted fields, with any ';' or
    line break in them, stay whole). The header row is the row naming the most known fields
    (:func:`~wallstress.schema.headers.header_score`, the lab's ``columns`` map included); the
    candidate whose header row names most fields wins, then the one whose data rows have the
    header's number of fields, then the order of ``DELIMITERS`` (',' last: it is also a decimal
    mark).
    """
    if not isinstance(text, str):
        text = "\n".join(text)
    best, best_key = ",", None
    for order, d in enumerate(DELIMITERS):
        try:
            rows = [
                r
                for r in itertools.islice(csv.reader(io.StringIO(text), delimiter=d), 200)
                if any(c.strip() for c in r)
            ]
        except csv.Error:
            continue
        if not rows:
            continue
        scores = [header_score(r, columns) for r in rows[:HEADER_SEARCH_ROWS]]
        h = int(np.argmax(scores))
        width = len(rows[h])
        data = rows[h + 1 :]
        fit = float(np.mean([len(r) == width for r in data])) if data else 1.0
        key = (scores[h], width > 1, fit >= 0.8, fit, -order)
        if best_key is None or key > best_key:
            best, best_key = d, key
    return best


@contextlib.contextmanager
def _field_limit(limit: int = READ_LIMIT_BYTES):
    """Python's csv module refuses fields over 131,072 characters by default; while a study list is
    read, allow fields as long as the largest file read at all (``READ_LIMIT_BYTES``), then put the
    process-wide setting back."""
    old = csv.field_size_limit()
    csv.field_size_limit(max(old, limit))
    try:
        yield
    finally:
        csv.field_size_limit(old)


def _head(text: str, lines: int = 200) -> str:
    """The first ``lines`` lines of ``text`` (whole, however long), without copying the rest."""
    end = 0
    for _ in range(lines):
        nxt = text.find("\n", end)
        if nxt < 0:
            return text
        end = nxt + 1
    return text[:end]


def _read_csv(p: Path, data: bytes, max_rows, columns) -> StudyTable:
    with _field_limit():
        return _read_csv_text(p, data, max_rows, columns)


def _read_csv_text(p: Path, data: bytes, max_rows, columns) -> StudyTable:
    text, enc = _decode(p, data)
    notes = []
    if enc == "cp1252":
        notes.append(
            _file_note(
                "encoding_cp1252",
                "The file is not UTF-8; it was read as Windows-1252 (cp1252). Check accented names, or save it as CSV UTF-8.",
            )
        )
    # whole lines (however long): a cut first line would give too few column names, and pandas
    # then takes the surplus leading fields of the header as an index
    check_text_lines(p, data, enc)
    head = _head(text)
    del text  # decoded to check the encoding; the parser reads the bytes
    sample = [ln.rstrip("\r\n") for ln in itertools.islice(io.StringIO(head, newline=None), 200)]
    delim = detect_delimiter(head, columns)
    nrows = None if max_rows is None else max_rows + HEADER_SEARCH_ROWS + 2
    try:
        width = max((len(r) for r in csv.reader(sample, delimiter=delim)), default=1)
    except csv.Error:
        width = max((ln.count(delim) + 1 for ln in sample), default=1)
    kw = dict(
        sep=delim,
        header=None,
        # pandas' text dtype keeps the cells in Arrow buffers, not as one Python string per cell
        # (at 10^6 rows x 14 columns the object grid alone took ~1 GB)
        dtype=str,
        keep_default_na=False,
        na_filter=False,
        skip_blank_lines=False,
        quotechar='"',
        nrows=nrows,
    )
    try:
        # from the bytes: a StringIO of the whole text holds 4 bytes per character
        grid = pd.read_csv(io.BytesIO(data), names=range(width), engine="c", encoding=enc, **kw)
    except (pd.errors.ParserError, ValueError):
        text = data.decode(enc)
        width = max((len(r) for r in csv.reader(io.StringIO(text), delimiter=delim)), default=1)
        try:
            grid = pd.read_csv(io.StringIO(text), names=range(width), engine="python", **kw)
        except (pd.errors.ParserError, ValueError, csv.Error) as exc:
            raise InputError(
                f"{p}: the CSV cannot be parsed ({exc}); check quotes and delimiters"
            ) from exc
    grid = _blank_to_nan(grid)
    table, header_row, first, parts = _frame_from_grid(p, grid, columns, None, None)
    if max_rows is not None:
        table = table.iloc[:max_rows].reset_index(drop=True)
    cell_parts = _cell_findings(table)  # before numbers: "#N/A" in a number column -> NaN
    numbers, dec = number_columns(table, allow_comma=delim != ",")
    parts = [*notes, *parts, *cell_parts]
    if dec == ",":
        parts.append(
            _file_note(
                "decimal_comma", "Numbers use a decimal comma; they were read as decimal numbers."
            )
        )
    return StudyTable(
        table=table,
        path=p,
        format="csv",
        sheet=None,
        header_row=header_row,
        sha256="",
        encoding=enc,
        delimiter=delim,
        decimal=dec,
        findings=fnd.concat(parts),
        first_data_row=first,
        numbers=numbers,
    )


# a number written plainly (what a CSV reader and a spreadsheet read as a number)
PLAIN_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"


_COMMA_NUM = r"[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?"


def number_columns(table: pd.DataFrame, allow_comma: bool) -> tuple[dict, str]:
    """The text columns whose every non-empty cell is a number, parsed: ({header: float64}, mark).

    The table itself is not changed (its cells are written back as the user wrote them). With
    ``allow_comma`` (delimiter not ','), a column of numbers written with a decimal comma is read
    too, unless every cell looks like a thousands separator ("1,234"). Columns are checked a group
    at a time, all cells of a group at once (:func:`wallstress.read.grid.text_cells`): a
    50 x 20,000 table is one group, a 10^6-row table about one column per group.
    """
    n, k = table.shape
    if k == 0 or n == 0:
        return {}, "."
    converted: dict = {}
    comma = False
    for start, sub in column_groups(table):
        got, group_comma = _numbers_in(sub, allow_comma)
        converted.update({table.columns[start + j]: v for j, v in got.items()})
        comma |= group_comma
    return converted, ("," if comma else ".")


def _numbers_in(sub: pd.DataFrame, allow_comma: bool) -> tuple[dict[int, np.ndarray], bool]:
    """The columns of ``sub`` that are numbers, parsed: ({position: float64 values}, any comma)."""
    n, k = sub.shape
    flat, is_text = text_cells(sub)
    shape = (n, k)
    t = trimmed(flat)
    nonempty = sub.notna().to_numpy()
    # columns that are not text at all (already numbers) are left alone
    any_text = is_text.any(axis=0)
    plain = cell_mask(pc.match_substring_regex(t, f"^(?:{PLAIN_NUMBER})$"), shape)
    is_plain = any_text & nonempty.any(axis=0) & (plain | ~nonempty).all(axis=0)
    is_comma = np.zeros(k, dtype=bool)
    if allow_comma:
        cand = any_text & nonempty.any(axis=0) & ~is_plain
        if cand.any():
            comma = cell_mask(pc.match_substring_regex(t, f"^(?:{_COMMA_NUM})$"), shape)
            thousands = cell_mask(pc.match_substring_regex(t, r"\d,\d{3}(?:[.,]|$)"), shape)
            is_comma = cand & (comma | ~nonempty).all(axis=0) & ~(thousands | ~nonempty).all(axis=0)
    out = {}
    for j in np.flatnonzero(is_plain | is_comma):
        # every non-empty cell of the column matched a number pattern; empty cells are null -> NaN
        col = t.slice(int(j) * n, n)
        if is_comma[j]:
            col = pc.replace_substring(col, ",", ".")
        out[int(j)] = _parse_floats(col)
    return out, bool(is_comma.any())


def _parse_floats(text) -> np.ndarray:
    """Number texts (already matched as numbers) -> float64, parsed by Arrow in C.

    Python's float() per cell gives the same correctly rounded values but makes one Python string
    per cell first (~0.8 GB at 10^6 rows x 14 columns); it is kept for anything Arrow refuses.
    """
    try:
        parsed = pc.cast(text, pa.float64())
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        cells = np.asarray(text.to_numpy(zero_copy_only=False), dtype=object)
        out = np.full(cells.size, np.nan)
        present = np.array([c is not None for c in cells], dtype=bool)
        out[present] = cells[present].astype(np.float64)
        return out
    if isinstance(parsed, pa.ChunkedArray):
        parsed = parsed.combine_chunks() if parsed.num_chunks else pa.array([], pa.float64())
    return parsed.to_numpy(zero_copy_only=False)

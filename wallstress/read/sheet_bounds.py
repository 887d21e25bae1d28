"""A sheet's extent, measured before any reader expands it, and a bounded read when it is too large.

A workbook's cells are stored sparsely, but the fast reader (python-calamine) turns a sheet into a
dense rectangle from A1 to the farthest cell: one stray cell at XFD1 and one at A1048576 ask for
16384 x 1048576 = 1.7 x 10^10 cells and the process aborts without a message. So the sheet's XML is
scanned first (streamed, never expanded) for the farthest cell:

- xlsx: the ``r="B7"`` references of ``<c>`` cells and ``<row r="7">`` rows (regular expressions
  on chunks of the streamed part; the ``<dimension>`` element is not trusted);
- ods: ``table:number-rows-repeated`` and ``table:number-columns-repeated`` counted, not expanded,
  over cells that hold a value (trailing empty repeats, common in files saved by spreadsheet
  programs, do not count).

When rows x columns exceeds ``SHEET_CELL_BUDGET``, the table is found among the populated cells
(the block that starts at the first populated cell and ends at a gap of more than ``ROW_GAP`` empty
rows or ``COL_GAP`` empty columns), only that block is read (openpyxl in read-only mode with
``max_row``/``max_col`` for xlsx; a streamed parse for ods), and a file-level finding names the
far-off cells that were left out. A block that is itself over the budget is refused with one line.

References
----------
ECMA-376, Office Open XML File Formats, 5th ed., 2016, Part 1, 18.3.1.4 (``c``: ``r`` cell
reference), 18.3.1.73 (``row``: ``r`` row index); sheet limits 1,048,576 rows x 16,384 columns.
OASIS, Open Document Format for Office Applications (OpenDocument) v1.2, 2011, Part 1, 9.1.3
(``table:number-rows-repeated``), 9.1.4 (``table:number-columns-repeated``).
"""

from __future__ import annotations

import re
import zipfile
from dataclasses import dataclass
from pathlib import Path
from xml.parsers import expat

import numpy as np
import pandas as pd

from wallstress.errors import InputError
from wallstress.read.grid import HEADER_SEARCH_ROWS

SHEET_CELL_BUDGET = 20_000_000  # rows x columns a sheet may span before the bounded read is used
ROW_GAP = 10_000  # empty rows that end the table in a bounded read
COL_GAP = 256  # empty columns that end the table in a bounded read
_CHUNK = 1 << 22

# The ``r`` attribute of <row> and <c> in any legal XML form: spaces around "=", either quote
# (XML 1.0, 3.1). A form these do not read (a character reference such as r="&#65;1") is noticed by
# counting every "r=" and read by a real XML parser instead (:func:`_extent_by_parser`).
_R_ANY = re.compile(rb"\sr\s*=")
_REF = re.compile(rb'\sr\s*=\s*(["\'])([A-Z]{0,3})([0-9]{1,8})\1')
_ROW_TAG = re.compile(rb"<(?:[\w.-]+:)?row[\s/>]")
_CELL_TAG = re.compile(rb'<(?:[\w.-]+:)?c\s[^>]*?\br\s*=\s*(["\'])([A-Z]{1,3})([0-9]{1,8})\1[^>]*>')


@dataclass(frozen=True)
class Extent:
    """How far a sheet reaches: ``n_rows`` x ``n_cols`` from A1 (1-based last row and column)."""

    n_rows: int
    n_cols: int

    @property
    def cells(self) -> int:
        return self.n_rows * self.n_cols


def col_letters(c: int) -> str:
    """0-based column index -> spreadsheet letters (0 -> 'A', 16383 -> 'XFD')."""
    out = ""
    c += 1
    while c:
        c, r = divmod(c - 1, 26)
        out = chr(65 + r) + out
    return out


def _col_number(letters: bytes) -> int:
    n = 0
    for ch in letters:
        n = n * 26 + (ch - 64)
    return n


def _chunks(fh):
    """Yield chunks of an XML stream that end just before a '<' (no tag is split)."""
    tail = b""
    while True:
        chunk = fh.read(_CHUNK)
        if not chunk:
            if tail:
                yield tail
            return
        buf = tail + chunk
        cut = buf.rfind(b"<")
        if cut <= 0:
            tail = buf
            continue
        yield buf[:cut]
        tail = buf[cut:]


def xlsx_extent(zf: zipfile.ZipFile, part: str) -> Extent:
    """The farthest row and column any cell or row of an xlsx sheet part names (streamed).

    Read by pattern (fast); when some ``r`` attribute is written in a form the pattern does not
    read, the part is read again by an XML parser, so no legal form can hide a far cell.
    """
    max_row = max_col = n_row_tags = 0
    unread = False
    with zf.open(part) as fh:
        for buf in _chunks(fh):
            refs = _REF.findall(buf)
            unread |= len(refs) != len(_R_ANY.findall(buf))
            letters = {c for _, c, _ in refs if c}
            if letters:
                max_col = max(max_col, max(map(_col_number, letters)))
            if refs:
                max_row = max(max_row, max(int(r) for _, _, r in refs))
            n_row_tags += len(_ROW_TAG.findall(buf))
    if unread:
        return _extent_by_parser(zf, part)
    return Extent(max(max_row, n_row_tags), max_col)


_REF_TEXT = re.compile(r"^([A-Z]{0,3})([0-9]{1,8})$")


def _extent_by_parser(zf: zipfile.ZipFile, part: str) -> Extent:
    """:func:`xlsx_extent` by expat (streamed; character references resolved). A reference that
    is not a cell or row address counts as the farthest cell, so the bounded read is used."""
    far = {"row": 0, "col": 0, "rows": 0}

    def start(name, attrs):
        local = name.rsplit("}", 1)[-1]
        if local not in ("row", "c"):
            return
        far["rows"] += local == "row"
        ref = attrs.get("r")
        if ref is None:
            return
        m = _REF_TEXT.match(ref.strip())
        if m is None:
            far["row"], far["col"] = 1_048_576, 16_384
            return
        if m.group(1):
            far["col"] = max(far["col"], _col_number(m.group(1).encode()))
        far["row"] = max(far["row"], int(m.group(2)))

    parser = expat.ParserCreate(namespace_separator="}")
    parser.StartElementHandler = start
    try:
        with zf.open(part) as fh:
            parser.ParseFile(fh)
    except expat.ExpatError as exc:  # the caller names the file and the sheet
        raise ValueError(f"the sheet's XML is not well-formed ({exc})") from None
    return Extent(max(far["row"], far["rows"]), far["col"])


def _xlsx_cells(zf: zipfile.ZipFile, part: str) -> tuple[np.ndarray, np.ndarray]:
    """0-based (rows, cols) of the xlsx cells that are not empty self-closing tags."""
    rows, cols = [], []
    with zf.open(part) as fh:
        for buf in _chunks(fh):
            for m in _CELL_TAG.finditer(buf):
                if m.group(0).endswith(b"/>"):
                    continue
                cols.append(_col_number(m.group(2)) - 1)
                rows.append(int(m.group(3)) - 1)
    return np.asarray(rows, dtype=np.int64), np.asarray(cols, dtype=np.int64)


def _block(starts: np.ndarray, lengths: np.ndarray, gap: int) -> tuple[int, int]:
    """[lo, hi) of the run of intervals starting at the first one, broken by a gap > ``gap``."""
    order = np.argsort(starts, kind="stable")
    s, e = starts[order], starts[order] + lengths[order]
    reach = np.maximum.accumulate(e)
    breaks = np.flatnonzero(s[1:] > reach[:-1] + gap)
    last = breaks[0] if breaks.size else len(s) - 1
    return int(s[0]), int(reach[last])


def find_block(r0, nr, c0, nc) -> tuple[int, int, int, int]:
    """The table among populated runs of cells (0-based starts, lengths): row_lo, row_hi, col_lo,
    col_hi (half-open). Columns first (over all runs), then rows (over runs inside the columns)."""
    r0, nr, c0, nc = (np.asarray(a, dtype=np.int64) for a in (r0, nr, c0, nc))
    col_lo, col_hi = _block(c0, nc, COL_GAP)
    inside = (c0 < col_hi) & (c0 + nc > col_lo)
    row_lo, row_hi = _block(r0[inside], nr[inside], ROW_GAP)
    return row_lo, row_hi, col_lo, col_hi


def _outside_refs(r0, nr, c0, nc, block, limit: int = 5) -> tuple[list[str], int]:
    row_lo, row_hi, col_lo, col_hi = block
    r0, nr, c0, nc = (np.asarray(a, dtype=np.int64) for a in (r0, nr, c0, nc))
    out = (r0 >= row_hi) | (r0 + nr <= row_lo) | (c0 >= col_hi) | (c0 + nc <= col_lo)
    idx = np.flatnonzero(out)
    refs = [f"{col_letters(int(c0[i]))}{int(r0[i]) + 1}" for i in idx[:limit]]
    return refs, int(idx.size)


def stray_message(name: str, extent: Extent, refs: list[str], n_out: int, block) -> str:
    """The file-level finding's text: which far-off cells, how large they make the sheet, and what
    was read."""
    row_lo, row_hi, col_lo, col_hi = block
    more = f" and {n_out - len(refs)} more" if n_out > len(refs) else ""
    cells, verb = ("cell", "makes") if n_out == 1 else ("cells", "make")
    return (
        f"Stray {cells} at {', '.join(refs)}{more} {verb} the range of sheet {name!r} "
        f"{extent.n_rows} x {extent.n_cols} cells; only the table under the header "
        f"({col_letters(col_lo)}{row_lo + 1}:{col_letters(col_hi - 1)}{row_hi}) was read. Delete "
        "the stray cells, or check that nothing outside that range belongs to the study list."
    )


def _too_large(p: Path, name: str, rows: int, cols: int) -> InputError:
    return InputError(
        f"{p}: sheet {name!r} holds a table of {rows} rows x {cols} columns, more than the "
        f"{SHEET_CELL_BUDGET:,} cells read at once; export it as CSV and use --chunk-rows, or split it"
    )


def bounded_xlsx_grid(p: Path, zf: zipfile.ZipFile, part: str, name: str, extent: Extent, max_rows):
    """Read only the table block of an over-large xlsx sheet; returns (grid, finding message).

    The grid starts at A1 (so that row and column positions match the file) and ends at the
    block's last row and column; openpyxl's read-only reader stops at ``max_row`` and fills no
    column past ``max_col``.
    """
    rows, cols = _xlsx_cells(zf, part)
    if rows.size == 0:
        return pd.DataFrame(), None
    ones = np.ones_like(rows)
    block = find_block(rows, ones, cols, ones)
    row_hi, col_hi = block[1], block[3]
    if row_hi * col_hi > SHEET_CELL_BUDGET:
        raise _too_large(p, name, block[1] - block[0], block[3] - block[2])
    refs, n_out = _outside_refs(rows, ones, cols, ones, block)
    if max_rows is not None:
        row_hi = min(row_hi, block[0] + max_rows + HEADER_SEARCH_ROWS + 2)
    import openpyxl

    wb = openpyxl.load_workbook(p, read_only=True, data_only=True)
    try:
        ws = wb[name]
        grid_rows = list(ws.iter_rows(max_row=row_hi, max_col=col_hi, values_only=True))
    finally:
        wb.close()
    grid = pd.DataFrame(grid_rows, dtype=object) if grid_rows else pd.DataFrame()
    msg = stray_message(name, extent, refs, n_out, block) if n_out else None
    return grid, msg


_TABLE = "{urn:oasis:names:tc:opendocument:xmlns:table:1.0}"
_OFFICE = "{urn:oasis:names:tc:opendocument:xmlns:office:1.0}"
_TEXT = "{urn:oasis:names:tc:opendocument:xmlns:text:1.0}"
_ODS_CELLS = (f"{_TABLE}table-cell", f"{_TABLE}covered-table-cell")


def _ods_value(el):
    kind = el.get(f"{_OFFICE}value-type")
    if kind in ("float", "percentage", "currency"):
        try:
            return float(el.get(f"{_OFFICE}value", "nan"))
        except ValueError:
            return np.nan
    if kind == "boolean":
        return el.get(f"{_OFFICE}boolean-value", "").lower() == "true"
    if kind == "date":
        try:
            return pd.Timestamp(el.get(f"{_OFFICE}date-value")).to_pydatetime()
        except (ValueError, TypeError):
            return el.get(f"{_OFFICE}date-value")
    paras = ["".join(p.itertext()) for p in el.iter(f"{_TEXT}p")]
    return "\n".join(paras) if paras else None


def _ods_walk(zf: zipfile.ZipFile, name: str, bounds=None):
    """Stream content.xml for sheet ``name``: populated runs (row, n_rows, col, n_cols) or, with
    ``bounds`` = (n_rows, n_cols), the cells inside that rectangle as a list of rows."""
    from defusedxml.ElementTree import iterparse

    runs: list[tuple[int, int, int, int]] = []
    grid: list[list] = []
    in_table = False
    row = col = 0
    row_rep = 1
    run_start = None
    with zf.open("content.xml") as fh:
        for event, el in iterparse(fh, events=("start", "end")):
            tag = el.tag
            if tag == f"{_TABLE}table":
                if event == "start":
                    in_table = el.get(f"{_TABLE}name") == name
                    row = 0
                elif in_table:
                    break
                continue
            if not in_table:
                continue
            if tag == f"{_TABLE}table-row":
                if event == "start":
                    row_rep = int(el.get(f"{_TABLE}number-rows-repeated", "1") or 1)
                    col, run_start = 0, None
                    if bounds is not None:
                        cur = [None] * bounds[1] if row < bounds[0] else None
                else:
                    if run_start is not None:
                        runs.append((row, row_rep, run_start, col - run_start))
                    if bounds is not None and row < bounds[0]:
                        n = min(row_rep, bounds[0] - row)
                        grid.extend(list(cur) for _ in range(n))
                    row += row_rep
                    el.clear()
                continue
            if tag in _ODS_CELLS and event == "end":
                rep = int(el.get(f"{_TABLE}number-columns-repeated", "1") or 1)
                filled = el.get(f"{_OFFICE}value-type") is not None or len(el) > 0
                if filled:
                    if run_start is None:
                        run_start = col
                    if bounds is not None and row < bounds[0] and col < bounds[1]:
                        v = _ods_value(el)
                        for c in range(col, min(col + rep, bounds[1])):
                            cur[c] = v
                elif run_start is not None:
                    runs.append((row, row_rep, run_start, col - run_start))
                    run_start = None
                col += rep
                el.clear()
    return grid if bounds is not None else runs


def ods_extent(zf: zipfile.ZipFile, name: str) -> tuple[Extent, np.ndarray]:
    """How far sheet ``name`` of an ods reaches over cells that hold a value (repeats counted, not
    expanded), and its populated runs as an (n, 4) array: row, n_rows, col, n_cols (0-based)."""
    runs = np.asarray(_ods_walk(zf, name), dtype=np.int64).reshape(-1, 4)
    if not len(runs):
        return Extent(0, 0), runs
    return Extent(int((runs[:, 0] + runs[:, 1]).max()), int((runs[:, 2] + runs[:, 3]).max())), runs


def bounded_ods_grid(p: Path, zf: zipfile.ZipFile, name: str, extent: Extent, runs, max_rows):
    """Read only the table block of an over-large ods sheet; returns (grid, finding message)."""
    block = find_block(runs[:, 0], runs[:, 1], runs[:, 2], runs[:, 3])
    row_hi, col_hi = block[1], block[3]
    if row_hi * col_hi > SHEET_CELL_BUDGET:
        raise _too_large(p, name, block[1] - block[0], block[3] - block[2])
    refs, n_out = _outside_refs(runs[:, 0], runs[:, 1], runs[:, 2], runs[:, 3], block)
    if max_rows is not None:
        row_hi = min(row_hi, block[0] + max_rows + HEADER_SEARCH_ROWS + 2)
    rows = _ods_walk(zf, name, bounds=(row_hi, col_hi))
    grid = pd.DataFrame(rows, dtype=object) if rows else pd.DataFrame()
    msg = stray_message(name, extent, refs, n_out, block) if n_out else None
    return grid, msg


_REPEAT = re.compile(rb'number-(?:rows|columns)-repeated="([0-9]{1,10})"')


def ods_may_exceed(zf: zipfile.ZipFile) -> bool:
    """Cheap pre-check (regex on the streamed content.xml): False when no sheet can reach
    ``SHEET_CELL_BUDGET`` cells even if every repeat were expanded, so the full walk is skipped.

    Upper bound: (cell and row elements) x (largest repeat)^2.
    """
    elements = 0
    largest = 1
    with zf.open("content.xml") as fh:
        for buf in _chunks(fh):
            elements += buf.count(b"<table:table-cell") + buf.count(b"<table:table-row")
            reps = _REPEAT.findall(buf)
            if reps:
                largest = max(largest, max(map(int, reps)))
    return elements * largest * largest > SHEET_CELL_BUDGET


def ods_sheet_names(zf: zipfile.ZipFile) -> list[str]:
    """Names of the sheets of an ods, in order (streamed; no cell is expanded)."""
    from defusedxml.ElementTree import iterparse

    names = []
    with zf.open("content.xml") as fh:
        for event, el in iterparse(fh, events=("start", "end")):
            if event == "start" and el.tag == f"{_TABLE}table":
                names.append(el.get(f"{_TABLE}name", f"Sheet{len(names) + 1}"))
            elif event == "end" and el.tag == f"{_TABLE}table-row":
                el.clear()
    return names


def read_ods_sheet(p: Path, zf: zipfile.ZipFile, name: str, max_rows):
    """An ods sheet read by the streamed parser (used when the fast reader would expand repeats
    past its limits): the whole sheet when within ``SHEET_CELL_BUDGET``, else its table block.
    Returns (grid, finding message or None)."""
    extent, runs = ods_extent(zf, name)
    if extent.cells == 0:
        return pd.DataFrame(), None
    if extent.cells > SHEET_CELL_BUDGET:
        return bounded_ods_grid(p, zf, name, extent, runs, max_rows)
    n_rows = extent.n_rows
    if max_rows is not None:
        n_rows = min(n_rows, max_rows + HEADER_SEARCH_ROWS + 2 + int(runs[:, 0].min()))
    rows = _ods_walk(zf, name, bounds=(n_rows, extent.n_cols))
    return pd.DataFrame(rows, dtype=object), None

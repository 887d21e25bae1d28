"""From a grid of cells to a table under the user's own headers (shared by csv and workbook reading).

Finds the header row among the first ``HEADER_SEARCH_ROWS`` rows, combines a group row above it
("Diastole" over IVS/LVID/PW, merged or not), folds a row of units below it into the headers, makes
repeated headers unique, and turns spreadsheet error values (``#N/A``, ``#DIV/0!``...) into empty cells
with a finding. Cells over ``MAX_CELL_CHARS`` are kept, with a finding.

References
----------
ECMA-376, Office Open XML File Formats, 5th ed., 2016 (error values; 32,767 characters per cell).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
from pandas.api.types import is_object_dtype

from wallstress import findings as fnd
from wallstress.errors import InputError
from wallstress.schema import units
from wallstress.schema.headers import check_columns_option, header_score, match_header

HEADER_SEARCH_ROWS = 20


MAX_CELL_CHARS = 32_767


SPREADSHEET_ERRORS = frozenset(
    {
        "#DIV/0!",
        "#N/A",
        "#NAME?",
        "#NULL!",
        "#NUM!",
        "#REF!",
        "#VALUE!",
        "#SPILL!",
        "#CALC!",
        "#GETTING_DATA",
        "#FIELD!",
        "#BLOCKED!",
        "#CONNECT!",
        "#BUSY!",
        "#UNKNOWN!",
        "#N/A!",
    }
)


_ERRORS_ARROW = pa.array(sorted(SPREADSHEET_ERRORS), type=pa.large_string())


def _file_note(code: str, message: str, severity: str = "note") -> pd.DataFrame:
    return fnd.make([-1], code=code, severity=severity, message=message)


def _str_mask(values: np.ndarray) -> np.ndarray:
    """Which cells of an object array are text (str, including numpy's str)."""
    return np.fromiter(map(str.__instancecheck__, values), dtype=bool, count=values.size)


def text_cells(frame: pd.DataFrame) -> tuple[pa.ChunkedArray, np.ndarray]:
    """Every cell of ``frame`` that holds text, column after column, as one Arrow string array
    (null where the cell is not text), and the (rows, columns) mask of text cells.

    One array for the whole table lets each check (strip, blank, regular expression, length) run
    once over all cells in Arrow's C++ kernels: the cost grows with the number of cells, not with
    the number of columns times a per-column overhead (a 50 x 20,000 CSV took minutes when every
    column was checked on its own).
    """
    n, k = frame.shape
    if k and all(is_object_dtype(dt) for dt in frame.dtypes):
        flat = frame.to_numpy(dtype=object).ravel(order="F")
        is_str = _str_mask(flat)
        arr = pa.array(np.where(is_str, flat, None), type=pa.large_string())
        return pa.chunked_array([arr], type=pa.large_string()), is_str.reshape((n, k), order="F")
    chunks = []
    for j in range(k):
        s = frame.iloc[:, j]
        if s.dtype == object:
            vals = s.to_numpy(dtype=object)
            is_str = _str_mask(vals)
            chunks.append(pa.array(np.where(is_str, vals, None), type=pa.large_string()))
        elif pd.api.types.is_string_dtype(s.dtype):
            arr = pa.array(s.array).cast(pa.large_string())
            # the column's own chunks (a ChunkedArray passed as one chunk is read value by value)
            chunks.extend(arr.chunks if isinstance(arr, pa.ChunkedArray) else [arr])
        else:
            chunks.append(pa.nulls(n, pa.large_string()))
    flat = pa.chunked_array(chunks, type=pa.large_string())
    mask = flat.is_valid().to_numpy(zero_copy_only=False).reshape((n, k), order="F")
    return flat, mask


# cells checked together: few Arrow calls for a wide sheet, bounded memory for a long one
GROUP_CELLS = 1 << 21


def column_groups(frame: pd.DataFrame):
    """``(first column position, sub-frame)`` for runs of columns of about ``GROUP_CELLS`` cells:
    a 50 x 20,000 table is one group, a 10^6-row table one column per group."""
    n, k = frame.shape
    width = max(1, GROUP_CELLS // max(n, 1))
    for start in range(0, k, width):
        yield start, frame.iloc[:, start : start + width]


def trimmed(flat):
    """``utf8_trim_whitespace(flat)``, or ``flat`` itself when no cell was padded (the trimmed copy
    is then dropped at once)."""
    t = pc.utf8_trim_whitespace(flat)
    if pc.any(pc.not_equal(pc.binary_length(t), pc.binary_length(flat))).as_py():
        return t
    return flat


def cell_mask(values, shape) -> np.ndarray:
    """An Arrow boolean result over :func:`text_cells` -> (rows, columns) numpy mask (null = False)."""
    b = pc.fill_null(values, False)
    if isinstance(b, pa.ChunkedArray):
        b = b.combine_chunks() if b.num_chunks else pa.array([], pa.bool_())
    return b.to_numpy(zero_copy_only=False).reshape(shape, order="F")


def _blank_to_nan(grid: pd.DataFrame, strip: bool = True) -> pd.DataFrame:
    """Empty (or, with ``strip``, whitespace-only) text cells -> NaN (text columns keep their dtype)."""
    if grid.shape[1] == 0 or grid.shape[0] == 0:
        return grid.astype(object) if grid.shape[1] else grid
    masks = []
    for _, sub in column_groups(grid):  # a group at a time: no copy of the whole table's text
        flat, _ = text_cells(sub)
        masks.append(cell_mask(pc.equal(trimmed(flat) if strip else flat, ""), sub.shape))
    blank = np.hstack(masks) | grid.isna().to_numpy()
    if all(is_object_dtype(dt) for dt in grid.dtypes):
        arr = grid.to_numpy(dtype=object)
        if blank.any():
            arr = arr.copy()
            arr[blank] = np.nan
        return pd.DataFrame(arr, index=grid.index, columns=grid.columns, dtype=object)
    out = {}
    hit = blank.any(axis=0)
    for j, c in enumerate(grid.columns):
        s = grid.iloc[:, j]
        keep_dtype = pd.api.types.is_string_dtype(s.dtype) and s.dtype != object
        if not keep_dtype:
            s = s.astype(object)
        if hit[j]:
            s = s.where(~blank[:, j]) if keep_dtype else s.where(~blank[:, j], np.nan)
        out[c] = s
    return pd.DataFrame(out, index=grid.index)


def _cell_text(v) -> str:
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return ""
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v).strip()


def _frame_from_grid(p: Path, grid: pd.DataFrame, columns, sheet: str | None, merged) -> tuple:
    """Find the header row, fold a units row / group row, name columns, return the data table."""
    where = f" of sheet {sheet!r}" if sheet else ""
    grid = grid.reset_index(drop=True)
    grid.columns = range(grid.shape[1])
    # drop leading/trailing columns that are empty everywhere
    filled = grid.notna().any(axis=0).to_numpy()
    if not filled.any():
        raise InputError(f"{p}: no data{where}: every cell is empty; export the study list again")
    first_col, last_col = np.flatnonzero(filled)[[0, -1]]
    grid = grid.iloc[:, first_col : last_col + 1]
    grid.columns = range(grid.shape[1])
    merged = [((r0, c0 - first_col), (r1, c1 - first_col)) for (r0, c0), (r1, c1) in (merged or [])]
    # drop trailing empty rows
    rows_filled = grid.notna().any(axis=1).to_numpy()
    last_row = int(np.flatnonzero(rows_filled)[-1])
    grid = grid.iloc[: last_row + 1]

    head = grid.iloc[:HEADER_SEARCH_ROWS]
    texts = [[_cell_text(v) for v in row] for row in head.itertuples(index=False, name=None)]
    width = max(sum(1 for t in r if t) for r in texts)
    need = min(3, width)
    header_row = None
    for i, row in enumerate(texts):
        if sum(1 for t in row if t) >= need and header_score(row, columns) >= need:
            header_row = i
            break
    if header_row is None:
        best = max(range(len(texts)), key=lambda i: header_score(texts[i], columns))
        raise InputError(
            f"{p}: no recognisable header in the first {HEADER_SEARCH_ROWS} rows{where} (best row "
            f"{best + 1} names {header_score(texts[best], columns)} known columns, at least {need} "
            "needed, e.g. IVSd, LVIDd, PWd, height, weight); rename the headers (see `wallstress "
            "template`) or map them with --columns"
        )
    parts = []
    headers = list(texts[header_row])
    data_start = header_row + 1

    # a group row above ("Diastole" over IVS/LVID/PW)
    if header_row > 0:
        group = list(texts[header_row - 1])
        for (r0, c0), (r1, c1) in merged:
            if r0 <= header_row - 1 <= r1 and 0 <= c0 < len(group):
                for c in range(c0 + 1, min(c1 + 1, len(group))):
                    group[c] = group[c0]
        if not merged:
            last = ""
            for c in range(len(group)):
                last = group[c] or last
                group[c] = last
        combined, changed = _combine_group(headers, group, columns)
        if changed:
            headers = combined
            parts.append(
                _file_note(
                    "header_two_rows",
                    f"The header spans two rows (rows {header_row} and {header_row + 1}); {changed} column names were combined from both, e.g. {next(h for h in combined if h)!r}.",
                )
            )

    # a units row below ("mm", "(cm)", "kg")
    if data_start < len(grid):
        below = [_cell_text(v) for v in grid.iloc[data_start]]
        cells = [b for b in below if b]
        if cells and all(units.normalise_unit(b.strip("()[]{} ")) for b in cells):
            for c, b in enumerate(below):
                if b and headers[c]:
                    headers[c] = f"{headers[c]} ({b.strip('()[]{} ')})"
            data_start += 1
            parts.append(
                _file_note(
                    "units_row_folded",
                    f"Row {header_row + 2} holds only units; they were added to the headers (e.g. {next(h for h, b in zip(headers, below, strict=False) if b and h)!r}).",
                )
            )

    headers, dup = _unique_headers(headers)
    for h in dup:
        parts.append(
            fnd.make(
                [-1],
                code="duplicate_header",
                severity="warning",
                column=h,
                message=f"The header {h.rsplit(' (', 1)[0]!r} appears more than once; this copy was renamed {h!r}. Rename it if it is a different measurement.",
            )
        )
    table = grid.iloc[data_start:].reset_index(drop=True)
    table.columns = headers
    parts += _repeated_header_rows(table, texts[header_row])
    if len(table) == 0:
        parts.append(
            _file_note(
                "no_rows", f"The study list{where} has a header but no data rows.", "warning"
            )
        )
    return table, header_row, data_start, parts


def _repeated_header_rows(table: pd.DataFrame, header_texts: list[str]) -> list:
    """Data rows that repeat the header row (study lists joined end to end): a row finding each.

    The rows are kept (every input row comes out once); their cells are text where numbers are
    expected, so they are not computed. A row counts as a repeat when at least 3 cells, and at
    least 80 % of the named header cells, equal the header text in the same column.
    """
    named = np.array([bool(h) for h in header_texts])
    if len(table) == 0 or named.sum() < 3:
        return []
    n_named = int(named.sum())
    needed = max(3.0, 0.8 * n_named)
    hits = np.zeros(len(table), dtype=np.int64)
    checked = 0
    # column by column, stopping as soon as no row can still reach the threshold (at 10^6 rows of
    # data that is after a few columns, with no copy of the whole table's text)
    for j in np.flatnonzero(named):
        flat, _ = text_cells(table.iloc[:, [j]])
        hits += cell_mask(pc.equal(trimmed(flat), header_texts[j]), (len(table), 1))[:, 0]
        checked += 1
        if hits.max() + (n_named - checked) < needed:
            return []
    rows = np.flatnonzero((hits >= 3) & (hits >= 0.8 * n_named))
    if not rows.size:
        return []
    return [
        fnd.make(
            rows,
            code="header_repeated",
            severity="warning",
            message="This row repeats the header row (study lists joined end to end?); it was kept "
            "but holds no measurements. Delete the repeated header rows.",
        )
    ]


def _combine_group(headers, group, columns):

    cols = check_columns_option(columns) if columns else None
    out = list(headers)
    changed = 0
    for c, (h, g) in enumerate(zip(headers, group, strict=False)):
        if not h or not g or g == h:
            continue
        plain, _ = match_header(h, cols)
        for cand in (f"{h} {g}", f"{g} {h}"):
            f, _ = match_header(cand, cols)
            if f and f != plain:
                out[c] = cand
                changed += 1
                break
    return out, changed


def _unique_headers(headers):
    seen: dict[str, int] = {}
    out, dup = [], []
    for c, h in enumerate(headers):
        name = h or f"column_{c + 1}"
        key = name.lower()
        if key in seen:
            seen[key] += 1
            new = f"{name} ({seen[key]})"
            while new.lower() in seen:
                seen[key] += 1
                new = f"{name} ({seen[key]})"
            seen[new.lower()] = 1
            out.append(new)
            dup.append(new)
        else:
            seen[key] = 1
            out.append(name)
    return out, dup


def _cell_findings(table: pd.DataFrame, error_cells=None) -> list:
    """Spreadsheet error values -> NaN with a finding; over-long cells -> finding (kept)."""
    text_cols = [
        j
        for j, dt in enumerate(table.dtypes)
        if is_object_dtype(dt) or pd.api.types.is_string_dtype(dt)
    ]
    if not text_cols or len(table) == 0:
        return []
    errs, longs = [], []
    for _, sub in column_groups(table.iloc[:, text_cols]):
        flat, is_text = text_cells(sub)
        shape = sub.shape
        t = trimmed(flat)
        err = np.zeros(shape, dtype=bool)
        if cell_mask(pc.starts_with(t, "#"), shape).any():
            err = cell_mask(pc.is_in(pc.utf8_upper(t), value_set=_ERRORS_ARROW), shape) & is_text
        errs.append(err)
        longs.append(cell_mask(pc.greater(pc.utf8_length(t), MAX_CELL_CHARS), shape) & is_text)
    err, long = np.hstack(errs), np.hstack(longs)
    parts = []
    for k in np.flatnonzero(err.any(axis=0) | long.any(axis=0)):
        j = text_cols[k]
        col = table.columns[j]
        if err[:, k].any():
            rows = np.flatnonzero(err[:, k])
            parts.append(
                fnd.make(
                    rows,
                    code="spreadsheet_error",
                    severity="error",
                    column=str(col),
                    values=table.iloc[:, j].to_numpy(dtype=object)[rows],
                    message=f"{col!r}: the cell holds a spreadsheet error value; it was read as empty. Fix the formula in the file.",
                )
            )
            table.iloc[rows, j] = np.nan
        if long[:, k].any():
            parts.append(
                fnd.make(
                    np.flatnonzero(long[:, k]),
                    code="cell_too_long",
                    severity="warning",
                    column=str(col),
                    message=f"{col!r}: the cell holds more than {MAX_CELL_CHARS} characters, more than a spreadsheet cell can hold; it was kept but will be cut by spreadsheet programs.",
                )
            )
    return parts

"""Findings: what was noticed about a row, a column or a file, as one tidy table.

Columns of a findings table (in this order):

- ``row``: 0-based position of the input row; -1 for a finding about a whole column or the file.
- ``column``: the user's header (or the canonical field when there is no user header).
- ``field``: canonical field name ("" when none).
- ``value``: the offending value as text ("" when none).
- ``severity``: ``error`` (the value or row cannot be used for some measure), ``warning`` (used, but
  check it) or ``note`` (information, e.g. a unit that was inferred).
- ``code``: a short snake_case code, also listed in the row's ``flags``.
- ``message``: one plain sentence saying what is wrong and what to do.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

FINDING_COLUMNS: tuple[str, ...] = (
    "row",
    "column",
    "field",
    "value",
    "severity",
    "code",
    "message",
)
SEVERITIES: tuple[str, ...] = ("error", "warning", "note")


def empty() -> pd.DataFrame:
    """An empty findings table with the right columns and dtypes."""
    return pd.DataFrame(
        {
            "row": pd.Series([], dtype="int64"),
            **{c: pd.Series([], dtype="object") for c in FINDING_COLUMNS[1:]},
        }
    )


def make(
    rows,
    *,
    code: str,
    severity: str,
    message: str,
    column: str = "",
    field: str = "",
    values=None,
) -> pd.DataFrame:
    """Findings for many rows at once (vectorised: one call per rule, not per row).

    Parameters
    ----------
    rows : array-like of int
        0-based row positions (or [-1] for a column- or file-level finding).
    code, severity, message, column, field : str
        The same for every row of this rule.
    values : array-like, optional
        The offending value per row (written as text).
    """
    if severity not in SEVERITIES:
        raise ValueError(f"severity must be one of {SEVERITIES}, got {severity!r}")
    rows = np.asarray(rows, dtype="int64").ravel()
    n = rows.size
    if values is None:
        value_text = np.full(n, "", dtype=object)
    else:
        value_text = pd.Series(np.asarray(values, dtype=object).ravel()).map(_as_text).to_numpy()
    return pd.DataFrame(
        {
            "row": rows,
            "column": _constant_text(column, n),
            "field": _constant_text(field, n),
            "value": value_text,
            "severity": _constant_text(severity, n),
            "code": _constant_text(code, n),
            "message": _constant_text(message, n),
        }
    )


# pandas >= 3 stores text columns as pyarrow strings: converting a long object array costs one
# Python-level pass per cell, while a repeated pyarrow scalar is built in C. Same dtype, same values.
_FAST_CONSTANT_MIN_ROWS = 1024


def _text_dtype():
    dtype = pd.DataFrame({"x": np.array(["a"], dtype=object)})["x"].dtype
    if getattr(dtype, "storage", None) != "pyarrow":
        return None
    try:
        import pyarrow as pa
    except ImportError:  # pragma: no cover - pandas' pyarrow strings imply pyarrow
        return None
    return dtype, pa


_TEXT = _text_dtype()


def _constant_text(text: str, n: int):
    """``n`` copies of ``text`` as a text column (the dtype pandas would infer for the object array)."""
    if _TEXT is None or n < _FAST_CONSTANT_MIN_ROWS:
        return np.full(n, text, dtype=object)
    dtype, pa = _TEXT
    return pd.array(pa.repeat(pa.scalar(str(text), type=pa.large_string()), n), dtype=dtype)


def _as_text(v) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        if np.isnan(v):
            return ""
        return f"{v:.6g}"
    return str(v)


def concat(parts) -> pd.DataFrame:
    """Concatenate findings tables, sorted by row (file-level first), stable within a row."""
    parts = [p for p in parts if p is not None and len(p)]
    if not parts:
        return empty()
    out = pd.concat(parts, ignore_index=True)
    return out.sort_values("row", kind="stable").reset_index(drop=True)


def flags_per_row(findings: pd.DataFrame, n_rows: int) -> pd.Series:
    """The ``flags`` column: each row's finding codes, unique, in order of appearance, ';'-separated.

    Vectorised: the (row, code) pairs are de-duplicated and ranked within their row with numpy; each
    distinct sequence of codes (there are few) is joined once and broadcast to its rows.
    """
    flags = np.full(n_rows, "", dtype=object)
    rowpos = findings["row"].to_numpy(dtype="int64")
    keep = rowpos >= 0
    if keep.any():
        rows = rowpos[keep]
        code_id, code_names = pd.factorize(findings["code"].to_numpy(dtype=object)[keep])
        n_codes = len(code_names)
        # first occurrence of each (row, code), in order of appearance (hash-based, no sort)
        first = ~pd.Index(rows * n_codes + code_id).duplicated()
        rows, code_id = rows[first], code_id[first]
        if rows.size > 1 and (rows[1:] < rows[:-1]).any():
            order = np.argsort(rows, kind="stable")
            rows, code_id = rows[order], code_id[order]
        starts = np.flatnonzero(np.r_[True, rows[1:] != rows[:-1]])
        lengths = np.diff(np.r_[starts, rows.size])
        rank = np.arange(rows.size) - np.repeat(starts, lengths)
        width = int(lengths.max())
        grid = np.full((starts.size, width), -1, dtype="int64")
        grid[np.repeat(np.arange(starts.size), lengths), rank] = code_id
        base = n_codes + 1
        if width * np.log2(base) < 62:  # each row's code sequence as one integer
            key = (grid + 1) @ (base ** np.arange(width, dtype="int64"))
            inverse, uniques = pd.factorize(key)
            combos = grid[np.unique(inverse, return_index=True)[1]]
        else:
            combos, inverse = np.unique(grid, axis=0, return_inverse=True)
        names = np.asarray(code_names, dtype=object)
        texts = np.array([";".join(names[c[c >= 0]]) for c in combos] + [""], dtype=object)[:-1]
        flags[rows[starts]] = texts[np.asarray(inverse).ravel()]
    return pd.Series(flags, dtype=object)

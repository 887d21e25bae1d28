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

FINDING_COLUMNS: tuple[str, ...] = ("row", "column", "field", "value", "severity", "code", "message")
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
            "column": np.full(n, column, dtype=object),
            "field": np.full(n, field, dtype=object),
            "value": value_text,
            "severity": np.full(n, severity, dtype=object),
            "code": np.full(n, code, dtype=object),
            "message": np.full(n, message, dtype=object),
        }
    )


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
    """The ``flags`` column: each row's finding codes, unique, in order of appearance, ';'-separated."""
    flags = pd.Series([""] * n_rows, dtype=object)
    rowwise = findings[findings["row"] >= 0]
    if len(rowwise):
        joined = (
            rowwise.drop_duplicates(["row", "code"])
            .groupby("row", sort=False)["code"]
            .agg(";".join)
        )
        flags.iloc[joined.index.to_numpy()] = joined.to_numpy()
    return flags
